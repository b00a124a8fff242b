"""The workbook server's start: what it leaves out and what its kernels inherit.

Both checks run in a fresh interpreter (a subprocess), since they are about imports and the
process environment.
"""

from __future__ import annotations

import asyncio
import json
import os
import subprocess
import sys
from pathlib import Path

from studykit.app.server import refill_after_render

NOTEBOOK = Path(__file__).resolve().parents[1] / "notebooks" / "workbook.ipynb"

_PROBE = """
import json, os, sys
from studykit.app.server import KERNEL_THREAD_VARS, StudykitVoila
app = StudykitVoila()
app.initialize([sys.argv[1], "--no-browser", "--port=0"])
import jsonschema  # still usable without the optional IRI checker
jsonschema.validate({"a": 1}, {"type": "object", "properties": {"a": {"type": "integer"}}})
print(json.dumps({
    "rfc3987_syntax": sys.modules.get("rfc3987_syntax", "absent") is None,
    "threads": {name: os.environ.get(name) for name in KERNEL_THREAD_VARS},
}))
"""


def _probe(env_changes: dict) -> dict:
    env = {k: v for k, v in os.environ.items() if not k.endswith("_NUM_THREADS")}
    env.update(env_changes)
    out = subprocess.run(
        [sys.executable, "-c", _PROBE, str(NOTEBOOK)],
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
        check=True,
    ).stdout
    return json.loads(out.strip().splitlines()[-1])


def test_server_skips_the_iri_grammar_and_kernels_get_one_blas_thread():
    got = _probe({})
    # blocked in sys.modules (None), so jsonschema's optional import fails quietly
    assert got["rfc3987_syntax"] is True
    assert got["threads"] == {
        "OPENBLAS_NUM_THREADS": "1",
        "OMP_NUM_THREADS": "1",
        "MKL_NUM_THREADS": "1",
    }


def test_a_thread_count_set_by_the_user_is_kept():
    got = _probe({"OPENBLAS_NUM_THREADS": "2"})
    assert got["threads"]["OPENBLAS_NUM_THREADS"] == "2"
    assert got["threads"]["OMP_NUM_THREADS"] == "1"


class _PoolingManager:
    """Stands in for Voila's pooling kernel manager: what ``refill_after_render`` relies on
    (``get_rendered_notebook`` calls ``self.fill_if_needed(delay=None)`` right after taking a
    kernel from the pool, before the kernel ran the notebook)."""

    fill_delay = 0.0

    def __init__(self):
        self.fills: list = []
        self.render = None

    def fill_if_needed(self, delay=None, **kwargs):
        self.fills.append(delay)

    async def get_rendered_notebook(self, notebook_name, **kwargs):
        self.render = asyncio.get_running_loop().create_future()  # the notebook still runs
        self.fill_if_needed(delay=None, notebook_name=notebook_name)
        return self.render, [], "kernel-1"


def test_pool_refill_waits_until_the_handed_out_kernel_has_run_the_notebook():
    async def scenario():
        km = _PoolingManager()
        refill_after_render(km, wait_s=30, pause_s=0.1)
        km.fill_if_needed(delay=0, notebook_name="nb")  # the first fill: at once, as before
        assert km.fills == [0]
        render, _cache, kernel_id = await km.get_rendered_notebook("nb")
        assert kernel_id == "kernel-1" and render is km.render
        await asyncio.sleep(0.05)
        assert km.fills == [0]  # no refill while that kernel runs the notebook
        render.set_result(([], None))
        await asyncio.sleep(0.03)
        assert km.fills == [0]  # the page loads meanwhile (pause_s)
        await asyncio.sleep(0.2)
        assert km.fills == [0, km.fill_delay]  # then Voila's usual refill

    _run(scenario())


def test_pool_refill_waits_at_most_wait_s():
    async def scenario():
        km = _PoolingManager()
        refill_after_render(km, wait_s=0.1, pause_s=0)
        await km.get_rendered_notebook("nb")  # its notebook never finishes
        await asyncio.sleep(0.02)
        assert km.fills == []
        await asyncio.sleep(0.3)
        assert km.fills == [km.fill_delay]

    _run(scenario())


def _run(coro):
    """Run ``coro`` on a fresh event loop in its own thread: an earlier test of the suite may
    leave a loop running in this thread, where ``asyncio.run`` refuses to start."""
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(1) as pool:
        return pool.submit(asyncio.run, coro).result()
