"""The workbook server's start: what it leaves out and what its kernels inherit.

Both checks run in a fresh interpreter (a subprocess), since they are about imports and the
process environment.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

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
