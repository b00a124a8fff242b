"""The complexity gate: no function over McCabe complexity 15 (ruff C901) beyond today's list.

``pyproject.toml`` turns C901 on with ``max-complexity = 15`` and exempts, per file, the files
that held a longer function when the gate was turned on. A per-file exemption would let a new
complex function into such a file unseen; this test runs ruff on the whole tree without the
exemptions and checks that every function over the limit is one of ``KNOWN`` (today's offenders,
each to be split into named steps), that a fixed one is deleted from ``KNOWN``, and that the
exempted files in pyproject.toml are exactly the files of ``KNOWN``. The list only shrinks.
The limit 15 is common practice, no source (McCabe 1976 suggested 10: from memory).
"""

from __future__ import annotations

import json
import subprocess
import sys
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
LIMIT = 15

#: (file, function) over the limit when the gate was turned on; only deletions from here.
#: Empty now: every function that was over the limit has been split into named steps.
KNOWN: set[tuple[str, str]] = set()


def _over_limit() -> set[tuple[str, str]]:
    out = subprocess.run(
        [
            sys.executable,
            "-m",
            "ruff",
            "check",
            "studykit",
            "tests",
            "demo_data",
            "--isolated",
            "--select",
            "C901",
            "--config",
            f"lint.mccabe.max-complexity={LIMIT}",
            "--output-format",
            "json",
            "--exit-zero",
        ],
        cwd=ROOT,
        capture_output=True,
        text=True,
        check=True,
    ).stdout
    found = set()
    for item in json.loads(out):
        name = item["message"].split("`")[1]
        found.add((Path(item["filename"]).resolve().relative_to(ROOT).as_posix(), name))
    return found


def test_no_new_function_over_the_limit():
    found = _over_limit()
    new = sorted(found - KNOWN)
    assert not new, f"functions over McCabe {LIMIT}: split them into named steps: {new}"
    fixed = sorted(KNOWN - found)
    assert not fixed, f"now under the limit: delete from KNOWN and from pyproject.toml: {fixed}"


def test_pyproject_exempts_exactly_the_known_files():
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    lint = config["tool"]["ruff"]["lint"]
    assert "C901" in lint["select"]
    assert lint["mccabe"]["max-complexity"] == LIMIT
    exempt = {f for f, rules in lint["per-file-ignores"].items() if "C901" in rules}
    assert exempt == {f for f, _ in KNOWN}
