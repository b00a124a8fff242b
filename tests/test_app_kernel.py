"""The workbook's kernel (studykit.app.kernel): no debugger back end, the landing view's
modules imported early, and ipywidgets still registering its comm targets (its page asks
through ``jupyter.widget.control`` for every widget's state).

The kernel is started the way the server starts it (``jupyter_client`` with
:class:`studykit.app.kernel.WorkbookKernelSpecs`); checks run inside it.
"""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path

import pytest

jupyter_client = pytest.importorskip("jupyter_client")

from studykit.app.kernel import PRELOAD, WorkbookKernelSpecs  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


def _run(kc, code: str) -> str:
    out: list[str] = []

    def hook(msg):
        if msg["msg_type"] == "stream":
            out.append(msg["content"]["text"])

    reply = kc.execute_interactive(code, timeout=120, output_hook=hook)
    assert reply["content"]["status"] == "ok", reply["content"]
    return "".join(out)


@pytest.fixture
def kernel(tmp_path):
    from jupyter_client.manager import KernelManager

    env = {
        **os.environ,
        "PYTHONPATH": os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]),
        "STUDYKIT_STUDY": str(tmp_path / "any.study"),  # preload needs a study named
    }
    km = KernelManager(kernel_name="python3", kernel_spec_manager=WorkbookKernelSpecs())
    km.start_kernel(env=env, cwd=str(tmp_path))
    kc = km.client()
    kc.start_channels()
    try:
        kc.wait_for_ready(timeout=120)
        yield km, kc
    finally:
        kc.stop_channels()
        km.shutdown_kernel(now=True)


def test_kernel_command_and_no_debugger(kernel):
    km, kc = kernel
    assert "studykit.app.kernel" in km.format_kernel_cmd()
    assert "ipykernel_launcher" not in km.format_kernel_cmd()
    msg_id = kc.kernel_info()
    reply = kc.get_shell_msg(timeout=60)
    while reply["parent_header"].get("msg_id") != msg_id:
        reply = kc.get_shell_msg(timeout=60)
    info = reply["content"]
    assert info["status"] == "ok"
    assert "debugger" not in info.get("supported_features", [])
    assert info.get("debugger", False) is False
    state = json.loads(_run(kc, "import sys, json; print(json.dumps(sys.modules['debugpy']))"))
    assert state is None  # blocked: `import debugpy` raises ImportError


def test_preload_and_widget_comm_targets(kernel):
    _, kc = kernel
    code = (
        "import sys, json, threading\n"
        "t = [t for t in threading.enumerate() if t.name == 'studykit-preload']\n"
        "[x.join(120) for x in t]\n"
        "import ipywidgets\n"
        "cm = get_ipython().kernel.comm_manager\n"
        f"loaded = [m for m in {PRELOAD!r} if m in sys.modules]\n"
        "print(json.dumps({'loaded': loaded, 'targets': sorted(cm.targets)}))\n"
    )
    seen = json.loads(_run(kc, code))
    assert seen["loaded"] == list(PRELOAD)
    assert "jupyter.widget.control" in seen["targets"]
    assert "jupyter.widget" in seen["targets"]


def test_other_kernel_specs_unchanged():
    from studykit.app.kernel import workbook_argv

    argv = [sys.executable, "-m", "some_other_kernel", "-f", "{connection_file}"]
    assert workbook_argv(argv) == argv


_LANDING = """
import os, shutil, sys, tempfile
from studykit.app.session import demo_study_path
path = os.path.join(tempfile.mkdtemp(), "pilot.study")
shutil.copy(demo_study_path(), path)
os.environ["STUDYKIT_STUDY"] = path
from studykit.app import workbook_from_environment
workbook_from_environment()
print("pandas" in sys.modules, "debugpy" in sys.modules)
"""


def test_landing_view_reads_the_demo_study_without_pandas():
    """pandas held about 28 MB of every workbook kernel, imported only to read the stored
    files (README, Performance); the landing view of the demo study must not bring it back."""
    import subprocess

    env = {**os.environ, "STUDYKIT_LIVE_POLL_MS": "0"}
    out = subprocess.check_output([sys.executable, "-c", _LANDING], cwd=ROOT, text=True, env=env)
    assert out.split()[-2:] == ["False", "False"]
