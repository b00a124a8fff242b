"""Memory of the default study under a resource limit (not a timing test).

``studykit analyze FILE -c NAME --lsl L --usl U --json`` on 200,000 individual normal readings
(seeded, invented data) must finish under an address-space limit (RLIMIT_AS) of 640 MB: a study's
memory is O(n) with a small constant (issue 12). Before the long-series phase I, this run
trimmed the tails, fitted every family and bootstrapped a Weibull model (500 x n draws,
0.8 GB for these draws alone) and could not finish under the limit. The benchmark
tests/bench/bench_memory.py measures 4.4 M readings.
"""

from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

LIMIT = 640 * 1024**2
STUDYKIT = str(Path(sys.executable).with_name("studykit"))

pytestmark = pytest.mark.skipif(not hasattr(resource, "RLIMIT_AS"), reason="needs RLIMIT_AS")


def _run(path: Path) -> subprocess.CompletedProcess:
    def cap():
        resource.setrlimit(resource.RLIMIT_AS, (LIMIT, LIMIT))

    env = dict(
        os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1"
    )  # thread stacks and buffers count as address space
    return subprocess.run(
        [
            STUDYKIT,
            "analyze",
            str(path),
            "-c",
            "diameter",
            "--lsl",
            "9.94",
            "--usl",
            "10.06",
            "--json",
        ],
        capture_output=True,
        text=True,
        preexec_fn=cap,
        env=env,
        timeout=600,
    )


def _write(path: Path, n: int) -> None:
    x = np.random.default_rng(2026).normal(10.0, 0.01, n)
    path.write_text("diameter [mm]\n" + "\n".join(f"{v:.6f}" for v in x) + "\n", encoding="utf-8")


def test_default_study_of_200k_readings_runs_under_640_mb(tmp_path):
    small = tmp_path / "small.csv"
    _write(small, 500)
    control = _run(small)
    # control: the interpreter and its libraries fit under the limit on this machine
    assert control.returncode == 0, control.stderr[-500:]
    path = tmp_path / "readings.csv"
    _write(path, 200_000)
    p = _run(path)
    assert p.returncode == 0, p.stderr[-1000:]
    out = json.loads(p.stdout)
    assert out["n"] == 200_000
    assert out["phase1"]["removed_auto"] == 0
    assert out["model"]["name"] == "normal"
