"""The notebooks: run by nbval, and rendered through Voila (HTML checked, no browser)."""

from __future__ import annotations

import subprocess
import sys
import urllib.error
import urllib.request
from pathlib import Path

import pytest

from studykit.app.server import BOKEHJS_ROUTE, running_server

ROOT = Path(__file__).resolve().parent.parent
NOTEBOOKS = ROOT / "notebooks"
ERROR_SIGNS = [
    "Traceback",
    "There was an error when executing",
    '"output_type": "error"',
    '"ename"',
    "Something went wrong",
]


def test_notebooks_run_under_nbval():
    # nbval runs in its own pytest process so the plain `pytest tests` run includes it
    # without collecting notebooks/ (DEVELOPERS.md, "Stack notes": --nbval-lax --nbval-current-env)
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "pytest",
            "--nbval-lax",
            "--nbval-current-env",
            "-p",
            "no:cacheprovider",
            "-q",
            "notebooks",
        ],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-2000:]
    assert " passed" in proc.stdout


def test_notebooks_are_stored_without_outputs():
    import nbformat

    for path in NOTEBOOKS.rglob("*.ipynb"):
        if ".ipynb_checkpoints" in path.parts:
            continue
        nb = nbformat.read(path, as_version=4)
        for cell in nb.cells:
            if cell.cell_type == "code":
                assert cell.outputs == [] and cell.execution_count is None, path.name


@pytest.fixture(scope="module")
def voila_root():
    with running_server(NOTEBOOKS, env={"STUDYKIT_STUDY": ""}) as url:
        yield url


def fetch(url: str) -> str:
    with urllib.request.urlopen(url, timeout=120) as response:
        assert response.status == 200
        return response.read().decode("utf-8")


@pytest.mark.parametrize(
    "notebook, must_show",
    [
        ("workbook.ipynb", ["application/vnd.jupyter.widget-view+json"]),
        ("fixtures/chart.ipynb", ["application/vnd.jupyter.widget-view+json"]),
        ("fixtures/messages.ipynb", ["Study file not found"]),
    ],
)
def test_voila_renders_without_errors_or_source(voila_root, notebook, must_show):
    page = fetch(f"{voila_root}voila/render/{notebook}")
    for sign in ERROR_SIGNS:
        assert sign not in page, f"{notebook}: page shows {sign!r}"
    for source_line in (
        "workbook_from_environment()",
        "load_bokehjs()",
        "build_workbook(",
        "import ",
    ):
        assert source_line not in page, f"{notebook}: page shows source {source_line!r}"
    for text in must_show:
        assert text in page


def test_bokehjs_is_one_static_file_not_inlined(voila_root):
    page = fetch(f"{voila_root}voila/render/fixtures/chart.ipynb")
    assert f"{BOKEHJS_ROUTE}bokeh.min.js" in page
    assert len(page.encode()) < 300_000  # inline BokehJS would add about 1.3 MB
    request = urllib.request.Request(
        f"{voila_root}{BOKEHJS_ROUTE.lstrip('/')}bokeh.min.js", headers={"Accept-Encoding": "gzip"}
    )
    with urllib.request.urlopen(request, timeout=30) as response:
        assert response.headers["Content-Encoding"] == "gzip"
        assert "max-age" in response.headers.get("Cache-Control", "")
        assert len(response.read()) < 600_000
    for name in ("bokeh-mathjax.min.js", "bokeh.js", "..%2Fjs%2Fbokeh.js", "%2E%2E/css/x"):
        with pytest.raises(urllib.error.HTTPError):
            urllib.request.urlopen(f"{voila_root}{BOKEHJS_ROUTE.lstrip('/')}{name}", timeout=30)


def test_no_files_are_served_from_the_notebook_folder(voila_root):
    with pytest.raises(urllib.error.HTTPError) as info:
        urllib.request.urlopen(f"{voila_root}voila/files/workbook.ipynb", timeout=30)
    assert info.value.code in (403, 404)
