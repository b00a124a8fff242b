"""The figure rows benchmarks print for ``run_all.py`` (and so for the README's table).

A benchmark prints one line per figure::

    row: {"figure": ..., "command": ..., "value": ..., "unit": ..., "baseline_name": ...,
          "baseline": ..., "goal": ..., "lower_is_better": true}

with :func:`row`. ``command`` is the exact command a user runs (the figure is measured on it,
with default options); ``baseline_name`` says what the floor or baseline is, and ``baseline`` is
its figure measured in the same run; ``ratio`` is value / baseline. ``goal`` is the target in the
figure's unit (or a text such as "<= 1.5x floor"). ``run_all.py`` collects every row line of
every script and prints them as one Markdown table (:func:`table`).
"""

from __future__ import annotations

import json
import math

PREFIX = "row: "


def row(
    figure: str,
    command: str,
    value: float,
    unit: str,
    *,
    baseline_name: str,
    baseline: float | None,
    goal: str = "",
    ratio: float | None = None,
    met: bool | None = None,
) -> dict:
    """Print one figure row (and return it). ``ratio`` defaults to value / baseline."""
    if ratio is None and baseline:
        ratio = value / baseline
    r = {
        "figure": figure,
        "command": command,
        "value": value,
        "unit": unit,
        "baseline_name": baseline_name,
        "baseline": baseline,
        "ratio": ratio,
        "goal": goal,
        "met": met,
    }
    print(PREFIX + json.dumps(r), flush=True)
    return r


def parse(output: str) -> list[dict]:
    """The rows printed in a script's output, in order."""
    rows = []
    for line in output.splitlines():
        line = line.strip()
        if line.startswith(PREFIX):
            try:
                rows.append(json.loads(line[len(PREFIX) :]))
            except json.JSONDecodeError:
                continue
    return rows


def _num(v, unit: str = "") -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "—"
    text = f"{v:.3g}" if abs(v) < 100 else f"{v:,.0f}"
    return f"{text} {unit}".strip()


def table(rows: list[dict]) -> str:
    """The rows as the README's Markdown table.

    Examples
    --------
    >>> print(table([{"figure": "x", "command": "studykit x", "value": 2.0, "unit": "s",
    ...               "baseline_name": "floor", "baseline": 1.0, "ratio": 2.0, "goal": "<= 3 s",
    ...               "met": True}]))
    | figure | command | measured | floor / baseline (same run) | ratio | goal |
    |---|---|---|---|---|---|
    | x | `studykit x` | 2 s | floor: 1 s | 2.00x | <= 3 s (met) |
    """
    lines = [
        "| figure | command | measured | floor / baseline (same run) | ratio | goal |",
        "|---|---|---|---|---|---|",
    ]
    for r in rows:
        ratio = r.get("ratio")
        ratio_text = "—" if ratio is None else f"{ratio:.2f}x"
        met = r.get("met")
        goal = r.get("goal") or "—"
        if met is not None and r.get("goal"):
            goal += " (met)" if met else " (NOT met)"
        base = r.get("baseline_name") or "—"
        if r.get("baseline") is not None:
            base += f": {_num(r['baseline'], r.get('unit', ''))}"
        lines.append(
            f"| {r['figure']} | `{r['command']}` | {_num(r['value'], r.get('unit', ''))}"
            f" | {base} | {ratio_text} | {goal} |"
        )
    return "\n".join(lines)
