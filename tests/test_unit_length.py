"""Small units: no function over 80 lines (docstring included) in the files split into named
steps, unless a ``# long: <reason>`` comment right above its ``def`` records why (issue 16).

The limit 80 is common practice, no source. Every module of ``studykit/stats`` and
``studykit/analysis.py`` is checked (issue 16's "done when"), plus the files listed after them;
the list only grows.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
LIMIT = 80
FILES = (
    tuple(
        sorted(
            str(p.relative_to(ROOT))
            for p in (
                *(ROOT / "studykit" / "stats").rglob("*.py"),
                ROOT / "studykit" / "analysis.py",
            )
        )
    )
    + ("studykit/report/figures.py",)
    + tuple(sorted(str(p.relative_to(ROOT)) for p in (ROOT / "studykit" / "io").glob("*.py")))
)


def _long_units(path: Path) -> list[str]:
    text = path.read_text(encoding="utf-8")
    lines = text.splitlines()
    out = []
    for node in ast.walk(ast.parse(text)):
        if not isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
            continue
        first = node.decorator_list[0].lineno if node.decorator_list else node.lineno
        length = node.end_lineno - first + 1
        above = lines[first - 2].strip() if first >= 2 else ""
        if length > LIMIT and not (above.startswith("# long:") and above[7:].strip()):
            out.append(f"{node.name} (line {node.lineno}, {length} lines)")
    return out


@pytest.mark.parametrize("name", FILES)
def test_no_long_function_without_a_reason(name):
    assert _long_units(ROOT / name) == []


def test_the_check_finds_a_long_function(tmp_path):
    body = "\n".join(f"    x{i} = {i}" for i in range(LIMIT))
    src = tmp_path / "m.py"
    src.write_text(f"def f():\n{body}\n\n\n# long: a table\ndef g():\n{body}\n")
    assert _long_units(src) == [f"f (line 1, {LIMIT + 1} lines)"]
