"""The COMPUTED check values in tests/reference/check_values_gauge_error.md, recomputed from scipy
and numpy (never studykit), and the same values from studykit."""

from __future__ import annotations

import math
import subprocess
import sys
from pathlib import Path

from numpy.testing import assert_allclose

from studykit.stats.measurement_error import mls_difference_interval

SCRIPT = Path(__file__).parent / "reference" / "compute_check_values_gauge_error.py"


def test_written_check_values_agree_with_reference_libraries():
    run = subprocess.run([sys.executable, str(SCRIPT)], capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stdout + run.stderr
    assert "all agree" in run.stdout
    assert "BAD" not in run.stdout


def test_studykit_gives_the_written_values():
    # tests/reference/check_values_gauge_error.md, "Gauge variance taken out" (COMPUTED)
    _, lo, hi = mls_difference_interval(4.0, 99, 1.0, math.inf)
    assert_allclose([lo, hi], [2.083584, 4.397958], atol=5e-7)
    _, lo, hi = mls_difference_interval(4.0, 99, 1.0, 30)
    assert_allclose([lo, hi], [1.815429, 4.448935], atol=5e-7)
