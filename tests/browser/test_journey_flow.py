"""Journeys of issue 13, items 4 and 5, in chromium with two browser contexts:

* keep-with-reason: person A keeps the signal at one subgroup and rejects the automatic proposal
  for the other, each with a reason; the chart rings the kept point, the verdict stands; person B,
  in a second browser, opens the study and sees both decisions with their reasons and the verdict.
* a new study from uploads: person A uploads a bad file (clear message), then two measurement
  files, fills the specification table, creates the study and works on it; person B, in a
  second browser, opens the same address and finds the new study.

Screenshots go to test-artifacts/flow-*.png. Data: the demo data (invented).
"""

from __future__ import annotations

import shutil

import pytest

try:
    from browser_support import ARTIFACTS, ROOT, TIMEOUT_MS, run_with_retry
except ImportError:  # pragma: no cover
    from conftest import ARTIFACTS, ROOT, TIMEOUT_MS, run_with_retry

from studykit.store import StudyFile

NAME = "flange_thickness"
DEMO = ROOT / "demo_data"


def open_step(page, key: str) -> None:
    page.locator(f".sk-step-{key}").click()
    page.wait_for_selector(f".sk-step-{key}.sk-current")


def shot(page, name: str) -> None:
    """Screenshot of the whole workbook (the viewport grown to its height, then restored)."""
    size = page.viewport_size
    height = page.evaluate("() => document.querySelector('.sk-root').scrollHeight")
    page.set_viewport_size(
        {"width": size["width"], "height": max(size["height"], int(height) + 80)}
    )
    page.wait_for_timeout(700)
    page.screenshot(path=str(ARTIFACTS / f"flow-{name}.png"))
    page.set_viewport_size(size)
    page.wait_for_timeout(200)


def no_error_page(page) -> None:
    body = page.locator("body").inner_text()
    assert "Traceback" not in body and "Something went wrong" not in body


def second_browser(browser, viewport):
    context = browser.new_context(viewport=viewport)
    context.set_default_timeout(TIMEOUT_MS)
    return context, context.new_page()


def pick(page, name: str) -> None:
    page.locator(".sk-picker select").first.select_option(name)
    page.wait_for_function(
        "(n) => [...document.querySelectorAll('.sk-picker select')].some(s => s.value === n)",
        arg=name,
    )


# --- keep, with reason ----------------------------------------------------------------------------


@pytest.fixture(scope="module")
def keep_server(tmp_path_factory):
    from studykit.app.server import running_server
    from studykit.app.session import demo_study_path

    path = tmp_path_factory.mktemp("keep") / "pilot.study"
    shutil.copy(demo_study_path(), path)
    sf = StudyFile(path)
    for label in ("17", "18"):  # both points beyond the limits again, nothing decided on them
        sf.restore(NAME, label, reason="journey: decide again", who="Setup")
    ARTIFACTS.mkdir(exist_ok=True)
    log = open(ARTIFACTS / "voila-flow-keep.log", "w")  # noqa: SIM115
    try:
        with running_server(
            ROOT / "notebooks" / "workbook.ipynb", env={"STUDYKIT_STUDY": str(path)}, log=log
        ) as url:
            yield url, path
    finally:
        log.close()


def test_keep_with_reason_two_browsers(browser, keep_server, artifacts):
    url, path = keep_server
    fresh = path.with_name("fresh.study")
    shutil.copy(path, fresh)
    viewport = {"width": 1280, "height": 800}

    def journey(page, console):
        shutil.copy(fresh, path)  # a retry starts from the same file
        page.goto(url, wait_until="domcontentloaded")
        page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        open_step(page, "stability")
        page.wait_for_selector(".sk-stability-chart canvas", state="attached")
        pick(page, NAME)
        page.wait_for_selector(".sk-stability-summary :text('28 of 28')")
        page.locator(".sk-who input").first.fill("A. Keeper")

        # person A keeps the signal at subgroup 17 with a reason
        page.locator(".sk-subgroup-pick select").select_option("17")
        page.locator(".sk-removal-reason textarea").fill(
            "first part after the planned warm-up; common cause per process FMEA"
        )
        page.wait_for_function("() => !document.querySelector('.sk-keep').disabled")
        page.get_by_role("button", name="Keep, with reason").click()
        page.wait_for_selector(":text('kept with your reason')")
        page.wait_for_selector(".sk-kept-table :text('common cause per process FMEA')")
        assert "kept with a reason" in page.locator(".sk-stability-summary").inner_text()

        # the automatic search proposes 18 only (17 is decided); A rejects it with a reason
        page.get_by_role("button", name="Find rule-breaking subgroups").click()
        proposal = page.locator(".sk-proposal")
        proposal.first.wait_for()
        assert proposal.count() == 1 and "Subgroup 18" in proposal.first.inner_text()
        proposal.first.locator("button:has-text('Reject')").click()
        proposal.first.locator("input[type=text]").fill(
            "same warm-up, second part; not a special cause"
        )
        page.wait_for_function("() => !document.querySelector('.sk-record-proposals').disabled")
        page.get_by_role("button", name="Record decisions on proposals").click()
        page.wait_for_selector(":text('Rejected and kept with the reason: 18')")
        page.wait_for_selector(".sk-kept-table :text('rejected proposal')")
        page.wait_for_timeout(1200)
        shot(page, "stability-kept-1280")

        # the verdict stands (no longer withheld), the kept signals listed as reviewed
        open_step(page, "capability")
        verdict = page.locator(".sk-verdict")
        verdict.wait_for()
        text = verdict.inner_text()
        assert "Not judged" not in text and "reviewed and kept with a reason" in text, text
        shot(page, "capability-kept-1280")
        no_error_page(page)

        # person B, in a second browser, opens the study and sees both decisions
        other, page_b = second_browser(browser, viewport)
        try:
            page_b.goto(url, wait_until="domcontentloaded")
            page_b.wait_for_selector(".sk-stepbar .sk-step", state="visible")
            open_step(page_b, "stability")
            page_b.wait_for_selector(".sk-stability-chart canvas", state="attached")
            pick(page_b, NAME)
            kept = page_b.locator(".sk-kept-table")
            kept.wait_for()
            rows = kept.inner_text()
            assert "common cause per process FMEA" in rows and "A. Keeper" in rows
            assert "not a special cause" in rows and "rejected proposal" in rows
            open_step(page_b, "capability")
            page_b.locator(".sk-verdict").wait_for()
            assert "Not judged" not in page_b.locator(".sk-verdict").inner_text()
            shot(page_b, "stability-kept-second-browser")
            no_error_page(page_b)
        finally:
            other.close()
        return True

    assert run_with_retry(browser, journey, viewport=viewport)
    kept = StudyFile(path).load().kept_signals(NAME)
    # A's keep covers every open signal at 17 (beyond the limits, and zone A with 18)
    assert {k: d.payload["origin"] for k, d in kept.items()} == {
        ("17", "beyond_limits"): "person",
        ("17", "zone_a"): "person",
        ("18", "beyond_limits"): "rejected_proposal",
    }


# --- a new study from uploads ---------------------------------------------------------------------


@pytest.fixture(scope="module")
def new_server(tmp_path_factory):
    """The server of `studykit serve --new NEW.study`: the study file does not exist yet."""
    from studykit.app.server import running_server

    folder = tmp_path_factory.mktemp("new")
    path = folder / "pilot-from-browser.study"
    ARTIFACTS.mkdir(exist_ok=True)
    log = open(ARTIFACTS / "voila-flow-new.log", "w")  # noqa: SIM115
    try:
        with running_server(
            ROOT / "notebooks" / "workbook.ipynb",
            env={"STUDYKIT_STUDY": str(path), "STUDYKIT_NEW_DIR": str(folder)},
            log=log,
        ) as url:
            yield url, path
    finally:
        log.close()


def upload(page, name: str, data: bytes):
    with page.expect_file_chooser() as chooser:
        page.locator(".sk-upload").click()
    chooser.value.set_files(files=[{"name": name, "mimeType": "text/csv", "buffer": data}])


SPECS = [  # demo_data/specs.csv and specs_pull_off.csv
    ("bore_diameter", "11.970", "12.030", "12.000", True),
    ("face_runout", "", "0.050", "", False),
    ("flange_thickness", "7.900", "8.100", "8.000", False),
    ("pull_off_force", "180", "", "", True),
]


def test_new_study_from_uploads_two_browsers(browser, new_server, artifacts):
    url, path = new_server
    viewport = {"width": 1280, "height": 800}

    def journey(page, console):
        path.unlink(missing_ok=True)  # a retry starts again
        page.goto(url, wait_until="domcontentloaded")
        page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        page.wait_for_selector(".sk-new-head :text('does not exist yet')")

        # a bad file: the command line's message, naming file, row and column
        upload(page, "bad.csv", b"subgroup,bore [mm]\n1,12.001\n1,twelve\n2,12.003\n")
        error = page.locator(".sk-msg-error", has_text="'bad.csv', row 3")
        error.wait_for()
        assert "file 'bad.csv', row 3, column 'bore [mm]'" in error.inner_text()

        # two measurement files, each confirmed
        for name in ("pump_housing_pilot.csv", "pull_off_force.csv"):
            upload(page, name, (DEMO / name).read_bytes())
            page.wait_for_selector(f".sk-intake-result :text('{name}')")
            page.get_by_role("button", name="Use this data").click()
            page.wait_for_selector(f".sk-new-file-list :text('{name}')")
        page.wait_for_selector(".sk-new-spec-table :text('pull_off_force')")
        shot(page, "new-uploaded-1280")

        # the specification table in the page
        table = page.locator(".sk-new-spec-table")
        for i, (_name, lsl, usl, target, safety) in enumerate(SPECS):
            table.locator(".sk-new-lsl input").nth(i).fill(lsl)
            table.locator(".sk-new-usl input").nth(i).fill(usl)
            table.locator(".sk-new-target input").nth(i).fill(target)
            if safety:
                table.locator(".sk-new-safety input").nth(i).check()
        page.locator(".sk-new-title input").fill("Pilot made in the browser")
        page.locator(".sk-new-who input").fill("R. Okonkwo")
        page.wait_for_function("() => !document.querySelector('.sk-create-study').disabled")
        shot(page, "new-spec-table-1280")
        page.get_by_role("button", name="Create study").click()

        # the workbook works on the new study
        page.wait_for_selector(".sk-step-limits.sk-current")
        page.wait_for_selector(":text(\"Created the study file 'pilot-from-browser.study'\")")
        assert "Pilot made in the browser" in page.locator(".sk-header").inner_text()
        assert "pilot-from-browser.study" in page.locator(".sk-header").inner_text()
        shot(page, "new-created-1280")
        open_step(page, "stability")
        page.wait_for_selector(".sk-stability-chart canvas", state="attached")
        pick(page, "bore_diameter")
        page.wait_for_selector(".sk-stability-summary :text('Subgroups used')")
        page.wait_for_timeout(1000)
        shot(page, "new-stability-1280")
        open_step(page, "capability")
        page.locator(".sk-verdict").wait_for()
        no_error_page(page)

        # person B, in a second browser, finds the study that A created
        other, page_b = second_browser(browser, viewport)
        try:
            page_b.goto(url, wait_until="domcontentloaded")
            page_b.wait_for_selector(".sk-stepbar .sk-step", state="visible")
            page_b.wait_for_selector(".sk-header :text('Pilot made in the browser')")
            assert page_b.locator(".sk-new-study").is_hidden()
            open_step(page_b, "limits")
            page_b.wait_for_selector(".sk-overview-panel :text('pull_off_force')")
            no_error_page(page_b)
        finally:
            other.close()
        return True

    assert run_with_retry(browser, journey, viewport=viewport)
    study = StudyFile(path).load()
    assert list(study.characteristics) == [s[0] for s in SPECS]
    assert [n for n, _ in study.files] == ["pump_housing_pilot.csv", "pull_off_force.csv"]
    assert study.characteristic("pull_off_force").lsl == 180.0
    assert study.characteristic("bore_diameter").safety_critical
    entries = StudyFile(path).audit_log()
    assert entries[0].who == "R. Okonkwo"
