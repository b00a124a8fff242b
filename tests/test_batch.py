"""Batch analysis of many characteristics: the same numbers as one-by-one, error rows, outputs,
the command line, the optional Dask backend, and the fast bootstrap path of capability.

The reference for every batch number is the one-characteristic route
(``studykit.analysis.analyze_characteristic(...).headline()``); the reference for the fast
bootstrap and quantile code is the generic route through scipy.stats frozen distributions
(``scipy.stats.<family>(...).ppf`` / ``.rvs``), which it must reproduce.
"""

from __future__ import annotations

import csv
import importlib
import io
import json

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from studykit.analysis import AnalysisOptions, analyze_characteristic
from studykit.batch import BATCH_COLUMNS, NO_SPEC_NOTE, run_many, start_workers
from studykit.cli import main
from studykit.data import read_measurements
from studykit.errors import StudyInputError
from studykit.stats import bootstrap
from studykit.stats.capability import _bootstrap_draws_generic, capability
from studykit.stats.fit import FAMILIES
from studykit.study import Criteria, read_specs

# the module (studykit.stats.capability as a package attribute is the function)
cap = importlib.import_module("studykit.stats.capability")

OPTIONS = AnalysisOptions(n_boot=100)
N = 40


def _write_data(folder):
    """Invented data (test fixture): normal, skewed, one with a single value, a formula name."""
    rng = np.random.default_rng(11)
    cols = {
        "bore [mm]": rng.normal(12.0, 0.005, N),
        "gap [mm]": rng.normal(0.50, 0.02, N),
        "runout [mm]": 0.01 + rng.lognormal(-4.0, 0.5, N),
        "flat": rng.normal(3.0, 0.1, N),
        "lonely": [1.0] + [None] * (N - 1),
        "=cmd": rng.normal(1.0, 0.1, N),
    }
    lines = [",".join(cols)]
    for i in range(N):
        cells = []
        for v in cols.values():
            cells.append("" if v[i] is None else f"{float(v[i]):.6f}")
        lines.append(",".join(cells))
    data = folder / "wide.csv"
    data.write_text("\n".join(lines) + "\n", encoding="utf-8")
    specs = folder / "specs.csv"
    specs.write_text(
        "characteristic,lsl,usl,criterion,threshold,model\n"
        "bore,11.97,12.03,cpk,1.33,\n"
        "gap,0.40,0.60,,,\n"
        "runout,,0.2,,,lognormal3\n"
        "lonely,0,2,,,\n"
        "=cmd,0,2,,,\n"
        "ghost,0,1,,,\n",
        encoding="utf-8",
    )
    return data, specs


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    return _write_data(tmp_path_factory.mktemp("batch"))


@pytest.fixture(scope="module")
def inputs(files):
    data, specs = files
    m = read_measurements(data)
    chars, crit = read_specs(specs)
    return m, chars, crit


@pytest.fixture(scope="module")
def local(inputs):
    m, chars, crit = inputs
    return run_many(m, chars, crit, options=OPTIONS, jobs=1)


def _one_by_one(m, chars, crit, name):
    spec = {c.name: c for c in chars}.get(name)
    return analyze_characteristic(m.get(name), spec, criteria=crit.get(name), options=OPTIONS)


def test_rows_equal_one_by_one_analysis(inputs, local):
    m, chars, crit = inputs
    assert [r["characteristic"] for r in local.rows] == [
        "bore",
        "gap",
        "runout",
        "flat",
        "lonely",
        "=cmd",
        "ghost",
    ]
    for name in ("bore", "gap", "runout", "flat", "=cmd"):
        res = _one_by_one(m, chars, crit, name)
        row = local.row(name)
        # reference: the one-characteristic route, analyze_characteristic(...).headline()
        for key, value in res.headline().items():
            assert row[key] == value, (name, key)
        assert row["n"] == res.n
        assert row["error"] is None
    assert local.row("bore")["index"] == "cpk"  # the specs table's criterion is used
    assert local.row("runout")["model"] == "lognormal3"  # and its model
    assert local.row("gap")["meets"] in (True, False)


def test_processes_give_identical_rows(inputs, local):
    m, chars, crit = inputs
    calls = []
    par = run_many(
        m,
        chars,
        crit,
        options=OPTIONS,
        jobs=2,
        chunk_size=2,
        progress=lambda d, t, n: calls.append((d, t, n)),
    )
    assert par.backend == "processes" and par.jobs == 2
    assert par.rows == local.rows
    done = [c[0] for c in calls]
    assert done == sorted(done) and done[-1] == len(local.rows)
    assert {c[1] for c in calls} == {len(local.rows)}


def test_workers_started_before_reading_give_identical_rows(inputs, local):
    # the command line starts the workers before it reads the files (start_workers); the
    # reference is the one-process run of the same batch
    m, chars, crit = inputs
    with start_workers(2) as pool:
        par = run_many(m, chars, crit, options=OPTIONS, jobs=2, chunk_size=2, pool=pool)
    assert par.backend == "processes" and par.jobs == 2
    assert par.rows == local.rows
    assert start_workers(1) is None  # one job: no worker processes


def test_profiled_chunks_give_identical_rows_and_their_profiles(inputs, local, tmp_path):
    # PROFILE_ENV (a measurement aid of tests/bench/bench_batch.py --profile) runs each chunk
    # under cProfile: the rows must be those of the plain run (reference: the module's
    # one-process run), and each chunk leaves a readable profile and one line of wall times
    import pstats

    from studykit.batch import PROFILE_ENV

    m, chars, crit = inputs
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv(PROFILE_ENV, str(tmp_path))
        par = run_many(m, chars, crit, options=OPTIONS, jobs=2, chunk_size=3)
    assert par.rows == local.rows
    chunks = -(-len(local.rows) // 3)
    profiles = sorted(tmp_path.glob("chunk-*.prof"))
    assert len(profiles) == chunks
    stats = pstats.Stats(*map(str, profiles))
    assert any(name == "analyze_characteristic" for _, _, name in stats.stats)
    lines = [ln.split() for f in tmp_path.glob("chunks-*.txt") for ln in f.read_text().splitlines()]
    assert sorted(int(n) for _, _, n in lines) == sorted(
        [3] * (len(local.rows) // 3) + ([len(local.rows) % 3] if len(local.rows) % 3 else [])
    )
    assert all(float(a) <= float(b) for a, b, _ in lines)


def test_specs_match_by_label_and_case(inputs, local):
    # a specs table may spell a name as the data's label ("name [unit]") or in another case;
    # the reference is the row under the data's own spelling
    m, chars, crit = inputs
    from dataclasses import replace

    bore = next(c for c in chars if c.name == "bore")
    gap = next(c for c in chars if c.name == "gap")
    respelled = [replace(bore, name="bore [mm]"), replace(gap, name="GAP")]
    crit2 = {"bore [mm]": crit["bore"]} if "bore" in crit else {}
    res = run_many(m, respelled, crit2, options=OPTIONS, jobs=1, names=["bore", "gap"])
    assert res.rows == (local.row("bore"), local.row("gap"))


def test_error_rows_do_not_stop_the_batch(local):
    lonely = local.row("lonely")
    assert lonely["meets"] is None and lonely["estimate"] is None
    assert "1 usable value" in lonely["error"]
    ghost = local.row("ghost")
    assert "'ghost'" in ghost["error"] and "not in the data" in ghost["error"]
    assert local.n_failed == 2
    assert local.n_meeting + local.n_not_meeting == 4  # bore, gap, runout, =cmd


def test_no_spec_is_stability_only(inputs, local):
    flat = local.row("flat")
    assert flat["note"] == NO_SPEC_NOTE
    assert flat["verdict"] is None and flat["estimate"] is None and flat["error"] is None
    assert flat["n"] == N


def test_progress_callback_local(inputs):
    m, chars, crit = inputs
    calls = []
    res = run_many(
        m,
        chars,
        crit,
        options=OPTIONS,
        jobs=1,
        chunk_size=3,
        names=["bore", "gap", "flat", "lonely"],
        progress=lambda d, t, n: calls.append((d, t, n)),
    )
    assert [r["characteristic"] for r in res.rows] == ["bore", "gap", "flat", "lonely"]
    assert calls == [(3, 4, "flat"), (4, 4, "lonely")]


def test_exclusions_and_criteria_reach_the_analysis(inputs):
    m, chars, crit = inputs
    strict = {"gap": Criteria(index="pp", threshold=50.0)}
    res = run_many(
        m,
        chars,
        strict,
        options=OPTIONS,
        jobs=1,
        names=["gap"],
        exclusions={"gap": {"1": ("tool change", "tester")}},
    )
    row = res.rows[0]
    assert row["index"] == "pp" and row["meets"] is False
    assert row["n"] == N - 1


def test_jobs_must_be_positive(inputs):
    m, chars, crit = inputs
    with pytest.raises(StudyInputError, match="`jobs` \\(0\\) must be a whole number"):
        run_many(m, chars, crit, jobs=0)


# ----------------------------------------------------------------------------- outputs


def test_jsonl_csv_xlsx(local, tmp_path):
    lines = local.to_jsonl().splitlines()
    assert len(lines) == local.n
    assert [json.loads(ln) for ln in lines] == [dict(r) for r in local.rows]

    local.write(tmp_path / "o.csv")
    rows = list(csv.DictReader(io.StringIO((tmp_path / "o.csv").read_text(encoding="utf-8-sig"))))
    assert tuple(rows[0]) == BATCH_COLUMNS
    assert rows[0]["characteristic"] == "bore"
    assert float(rows[0]["estimate"]) == pytest.approx(local.rows[0]["estimate"], rel=1e-12)
    cmd = [r for r in rows if r["characteristic"].endswith("=cmd")][0]
    assert cmd["characteristic"] == "'=cmd"  # neutralised for spreadsheets

    from openpyxl import load_workbook

    local.write(tmp_path / "o.xlsx")
    ws = load_workbook(tmp_path / "o.xlsx").active
    table = list(ws.iter_rows(values_only=True))
    assert table[0] == BATCH_COLUMNS
    est = BATCH_COLUMNS.index("estimate")
    assert table[1][0] == "bore" and table[1][est] == pytest.approx(local.rows[0]["estimate"])
    assert "'=cmd" in [r[0] for r in table]
    assert all(not (isinstance(c, str) and c.startswith("=")) for r in table for c in r)

    with pytest.raises(StudyInputError, match="suffix '.txt'"):
        local.write(tmp_path / "o.txt")
    d = local.to_dict()
    assert d["n"] == local.n and d["columns"] == list(BATCH_COLUMNS)
    json.dumps(d, allow_nan=False)


@given(st.text(max_size=12))
def test_csv_never_starts_a_cell_with_a_formula_character(name):
    from studykit.batch import BatchResult

    row = dict.fromkeys(BATCH_COLUMNS) | {"characteristic": name, "note": name}
    text = BatchResult(rows=(row,)).to_csv()
    cells = next(iter(csv.reader(io.StringIO(text.split("\r\n", 1)[1]))), [""])
    # OWASP "CSV Injection": cells must not start with = + - @ tab or carriage return
    assert not any(c.startswith(("=", "+", "-", "@", "\t", "\r")) for c in cells)


# ----------------------------------------------------------------------------- command line


def test_cli_all_to_csv(files, tmp_path, capsys):
    data, specs = files
    out = tmp_path / "summary.csv"
    status = main(
        ["analyze", str(data), "--all", "--specs", str(specs), "--out", str(out), "--jobs", "1"]
    )
    assert status == 0
    rows = list(csv.DictReader(io.StringIO(out.read_text(encoding="utf-8-sig"))))
    assert [r["characteristic"] for r in rows] == [
        "bore",
        "gap",
        "runout",
        "flat",
        "lonely",
        "'=cmd",
        "ghost",
    ]
    err = capsys.readouterr().err
    assert "7 characteristic(s)" in err and "summary.csv" in err


def test_cli_all_json_and_table(files, capsys):
    data, specs = files
    assert (
        main(["analyze", str(data), "--all", "--specs", str(specs), "--json", "--jobs", "1"]) == 0
    )
    rows = [json.loads(ln) for ln in capsys.readouterr().out.splitlines()]
    assert rows[0]["characteristic"] == "bore" and rows[0]["index"] == "cpk"
    assert main(["analyze", str(data), "--all", "--specs", str(specs), "--jobs", "1"]) == 0
    text = capsys.readouterr().out
    assert "ERROR" in text and "note: flat:" in text and "could not be analysed" in text


def test_cli_all_limits_from_arguments(files, capsys):
    data, _ = files
    assert (
        main(
            [
                "analyze",
                str(data),
                "--all",
                "--lsl",
                "0",
                "--usl",
                "100",
                "--json",
                "--jobs",
                "1",
                "--index",
                "pp",
                "--threshold",
                "1.0",
            ]
        )
        == 0
    )
    rows = {
        r["characteristic"]: r for r in map(json.loads, capsys.readouterr().out.split("\n")[:-1])
    }
    assert rows["flat"]["index"] == "pp" and rows["flat"]["meets"] is True


def test_cli_rejects_characteristic_with_all(files, capsys):
    data, _ = files
    assert main(["analyze", str(data), "--all", "-c", "bore"]) == 2
    assert "either --characteristic" in capsys.readouterr().err


# ----------------------------------------------------------------------------- Dask backend


def test_dask_backend_identical_rows(inputs, local):
    import distributed  # a declared dev dependency: missing means fail, not skip

    m, chars, crit = inputs
    with distributed.LocalCluster(
        n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None
    ) as cluster:
        calls = []
        res = run_many(
            m,
            chars,
            crit,
            options=OPTIONS,
            scheduler=cluster.scheduler_address,
            chunk_size=3,
            progress=lambda d, t, n: calls.append(d),
        )
    assert res.backend == "dask"
    assert res.rows == local.rows
    assert calls[-1] == local.n


def test_dask_unreachable_scheduler(inputs, monkeypatch):
    import distributed  # noqa: F401 - a declared dev dependency: missing means fail, not skip

    import studykit.batch

    monkeypatch.setattr(studykit.batch, "DASK_CONNECT_TIMEOUT", 1)
    m, chars, crit = inputs
    with pytest.raises(StudyInputError, match="no Dask scheduler answers"):
        run_many(m, chars, crit, scheduler="tcp://127.0.0.1:9", names=["gap"])


# ----------------------------------------------------------------------------- fast bootstrap

SKEWED = np.exp(np.random.default_rng(7).normal(1.0, 0.3, 60)) + 2.0
# refitted by the profile search over the threshold, and by a row-wise Newton iteration
THRESHOLD_FAMILIES = ("lognormal3", "weibull3", "gamma3", "loglogistic3")
ROW_FAMILIES = ("weibull", "gamma", "loglogistic")


@pytest.mark.parametrize("fid", list(FAMILIES))
def test_family_quantiles_equal_scipy_frozen_ppf(fid):
    model = FAMILIES[fid].fit(SKEWED)
    # reference: the frozen scipy.stats distribution, model.dist.ppf([0.00135, 0.5, 0.99865])
    expected = model.dist.ppf(bootstrap.PROBS)
    np.testing.assert_array_equal(
        FAMILIES[fid].quantile(bootstrap.PROBS, dict(model.parameters)), expected
    )


@pytest.mark.parametrize("fid", list(FAMILIES))
def test_family_sample_equals_scipy_frozen_rvs(fid):
    model = FAMILIES[fid].fit(SKEWED)
    # reference: scipy.stats' rvs of the frozen distribution on the same numpy Generator
    expected = model.dist.rvs(size=(3, 40), random_state=np.random.default_rng(11))
    got = FAMILIES[fid].sample(dict(model.parameters), (3, 40), np.random.default_rng(11))
    np.testing.assert_array_equal(got, expected)


@pytest.mark.parametrize("fid", list(FAMILIES))
def test_fast_bootstrap_equals_generic(fid):
    model = FAMILIES[fid].fit(SKEWED)
    present = dict.fromkeys(("pp", "ppk", "ppu", "ppl"), 1.0)
    # reference: one scipy rvs call, FittedModel refit and frozen ppf per bootstrap sample
    ref, ref_failed = _bootstrap_draws_generic(
        model, SKEWED.size, 1.0, 12.0, "percentile", 60, np.random.default_rng(3), present
    )
    fast, failed = bootstrap.percentile_draws(
        model, SKEWED.size, 1.0, 12.0, 60, np.random.default_rng(3), present
    )
    assert failed == ref_failed
    # rtol: closed-form and row-wise refits differ by rounding only (7e-14 seen); threshold
    # families: the generic search ends on a 33-point grid pass and a linear interpolation of
    # the profile slope (about 1e-5 in the threshold), ours at the slope's root to 1e-9
    # two-parameter families refitted row-wise: the row-wise Newton stops one step apart from
    # the per-sample one (4e-8 seen for loglogistic; 1.2e-7 since each row stops at its own
    # convergence)
    rtol = 1e-4 if fid in THRESHOLD_FAMILIES else 1e-6 if fid in ROW_FAMILIES else 1e-9
    for k in present:
        np.testing.assert_allclose(fast[k], ref[k], rtol=rtol)


@pytest.mark.parametrize(
    "fid, shape, seed",
    [
        ("weibull3", 1.2, 2),
        ("weibull3", 1.2, 3),
        ("gamma3", 1.2, 3),
        ("lognormal3", 0.8, 0),
        ("lognormal3", 0.8, 1),
        ("loglogistic3", 0.8, 1),
        ("loglogistic3", 0.8, 2),
    ],
)
def test_threshold_bootstrap_same_failures_and_bounds(fid, shape, seed):
    # 30 Weibull readings with a small shape: many bootstrap samples put the threshold fit at
    # an edge of its search (likelihood rising towards min(x)), where refits fail
    x = 5.0 + np.random.default_rng(seed).weibull(shape, 30)
    model = FAMILIES[fid].fit(x)
    present = dict.fromkeys(("pp", "ppk", "ppu", "ppl"), 1.0)
    ref, ref_failed = _bootstrap_draws_generic(
        model, x.size, 4.0, 20.0, "percentile", 50, np.random.default_rng(seed), present
    )
    fast, failed = bootstrap.percentile_draws(
        model, x.size, 4.0, 20.0, 50, np.random.default_rng(seed), present
    )
    assert ref_failed > 0  # the edge cases are exercised
    assert failed == ref_failed
    for k in present:
        np.testing.assert_allclose(fast[k], ref[k], rtol=1e-4)  # as above


def test_fast_bootstrap_one_sided_and_failures():
    model = FAMILIES["lognormal"].fit(SKEWED)
    present = {"pp": None, "ppk": 1.0, "ppu": 1.0, "ppl": None}
    ref, _ = _bootstrap_draws_generic(
        model, 4, None, 12.0, "percentile", 50, np.random.default_rng(1), present
    )
    fast, failed = bootstrap.percentile_draws(
        model, 4, None, 12.0, 50, np.random.default_rng(1), present
    )
    assert failed == 0 and len(fast["pp"]) == 0 and len(fast["ppl"]) == 0
    np.testing.assert_allclose(fast["ppk"], ref["ppk"], rtol=1e-12)
    # a sample with a non-positive value cannot be refitted by a positive family
    _, ok, _ = FAMILIES["lognormal"].refit_rows(np.array([[1.0, 2.0, 3.0], [-1.0, 2.0, 3.0]]))
    assert ok.tolist() == [True, False]


def test_capability_bounds_unchanged_by_fast_path():
    model = FAMILIES["weibull"].fit(SKEWED)
    fast = capability(SKEWED, lsl=1.0, usl=12.0, model=model, n_boot=80, random_state=2)
    generic = _bootstrap_draws_generic(
        model,
        SKEWED.size,
        1.0,
        12.0,
        "percentile",
        80,
        np.random.default_rng(2),
        dict.fromkeys(("pp", "ppk", "ppu", "ppl"), 1.0),
    )[0]
    # reference: the 5 % quantile of the generic draws (numpy.quantile, default method)
    assert fast.bounds["ppk"]["lower_bound"] == pytest.approx(
        float(np.quantile(generic["ppk"], 0.05)), rel=1e-12
    )


# ----------------------------------------------------------------------------- saved study


def test_cli_all_on_a_saved_study_equals_analyze_all(repo_root, capsys):
    from studykit.analysis import analyze_all
    from studykit.store import StudyFile

    path = repo_root / "demo_data" / "pump_housing_pilot.study"
    assert path.exists(), "committed demo file missing"
    assert main(["analyze", "--study", str(path), "--all", "--json", "--jobs", "1"]) == 0
    rows = [json.loads(ln) for ln in capsys.readouterr().out.splitlines()]
    # reference: the study route, analyze_all(study) with its settings and exclusions
    expected = analyze_all(StudyFile(path).load())
    assert [r["characteristic"] for r in rows] == list(expected.results) + list(expected.errors)
    for r in rows:
        if r["characteristic"] in expected.results:
            head = expected.results[r["characteristic"]].headline()
            assert {k: r[k] for k in head} == head


def test_progress_bar_on_a_terminal_stream():
    from studykit.cli.batch import ProgressBar

    buf = io.StringIO()
    bar = ProgressBar(buf, width=10, force=True)
    bar(5, 10, "bore")
    bar(10, 10, "gap")
    bar.close()
    text = buf.getvalue()
    assert "\r[#####-----] 5/10 bore" in text and "[##########] 10/10 gap" in text
    assert text.endswith("\n")
    silent = io.StringIO()
    ProgressBar(silent)(1, 2, "x")  # not a terminal: no output
    assert silent.getvalue() == ""


def test_cli_all_attribute_size_column_is_not_a_characteristic(repo_root, capsys):
    path = repo_root / "demo_data" / "leak_test_lots.csv"
    assert path.exists(), "committed demo file missing"
    assert (
        main(
            [
                "analyze",
                str(path),
                "--all",
                "--chart",
                "p",
                "--size-column",
                "lot_size",
                "--json",
                "--jobs",
                "1",
            ]
        )
        == 0
    )
    rows = [json.loads(ln) for ln in capsys.readouterr().out.splitlines()]
    assert [r["characteristic"] for r in rows] == ["leak_test_defectives"]
    assert rows[0]["error"] is None and rows[0]["n"] > 0
