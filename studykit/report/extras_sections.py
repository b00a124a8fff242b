"""PDF sections "Tolerance intervals" and "Positional tolerances".

The tolerance-interval section prints, for every characteristic whose criterion asks for "at
least P % of parts within specification with C % confidence", the ``tolerance_interval`` block
of its analysis result (ISO 16269-6). The position section prints each position study kept in
the study file (:mod:`studykit.positions`), recomputed from its stored deviations: the scatter
with the zone and the fitted ellipse, the two-dimensional numbers and, beside them, the
one-dimensional shortcut. Nothing statistical is computed here beyond asking
:func:`studykit.positions.position_result` for the study of the stored deviations.
"""

from __future__ import annotations

from collections.abc import Mapping

__all__ = ["has_intervals", "interval_section", "position_section"]


def has_intervals(results: Mapping) -> bool:
    """Whether any result carries the tolerance-interval criterion."""
    return any(getattr(r, "tolerance_interval", None) for r in results.values())


def _range(lo, hi, num) -> str:
    return f"{'-inf' if lo is None else num(lo, 6)} .. {'+inf' if hi is None else num(hi, 6)}"


def interval_rows(ti: Mapping, num) -> list[list[str]]:
    """The rows of the interval table (shared by the PDF; ``num`` formats a number)."""
    plan = ti.get("plan") or {}
    if ti.get("factor") is not None:
        how = (
            f"x-bar {'-/+' if ti.get('sides') == 2 else '-' if ti.get('bound') == 'lower' else '+'}"
            f" k s on the {ti.get('scale')} scale, k = {num(ti.get('factor'), 5)} "
            f"({ti.get('factor_method')} factor)"
        )
    else:
        ranks = ti.get("order_statistics") or []
        how = (
            "order statistics "
            + ", ".join("-" if r is None else str(r) for r in ranks)
            + f" (achieved confidence {num(ti.get('achieved_confidence'), 4)})"
        )
    meets = ti.get("meets")
    return [
        ["Criterion", str(ti.get("criterion"))],
        [
            "Interval model",
            f"{str(ti.get('model')).replace('_', '-')}, "
            f"{'two-sided' if ti.get('sides') == 2 else 'one-sided'}, "
            f"{ti.get('n')} values",
        ],
        ["How", how],
        ["Tolerance interval", _range(ti.get("lower"), ti.get("upper"), num)],
        ["Specification", _range(ti.get("lsl"), ti.get("usl"), num)],
        [
            "Criterion met",
            {
                True: "yes: the interval lies within the specification",
                False: "no: the interval reaches beyond the specification",
                None: "not judged",
            }[meets],
        ],
        [
            "Parts the criterion needs",
            (
                f"{plan['distribution_free']} with every part inside (distribution-free); "
                if plan.get("distribution_free") is not None
                else "more than 100000 without a model (distribution-free); "
            )
            + (
                f"{plan['normal']} for a process like this one to pass with probability "
                f"{num(plan.get('power'), 3)} (normal theory)"
                if plan.get("normal") is not None
                else "no normal-theory size (such a process cannot pass)"
            ),
        ],
    ]


#: What the tolerance-interval section shows (its first paragraph).
_INTERVAL_INTRO = (
    "Where the criterion asks that at least P % of parts lie within specification with "
    "C % confidence, the statistical tolerance interval of ISO 16269-6 is computed from "
    "the values the capability uses: normal theory with exact factors for a normal model, "
    "on the log or Box-Cox scale for those models, from order statistics for any other "
    "model. The criterion holds when the interval lies within the specification; the "
    "verdict needs it and the index criterion both."
)

#: What the positional-tolerance section shows (its first paragraph).
_POSITION_INTRO = (
    "A true-position zone of diameter T is judged from the X and Y deviations of each part. "
    "The two-dimensional model fits a bivariate normal (offset, unequal spreads, "
    "correlation) and integrates it over the outside of the circular zone; the equivalent "
    "index is the one-sided index with the same expected PPM. Beside it, the common "
    "one-dimensional shortcut treats the position value 2 sqrt(dx^2 + dy^2) as normal "
    "against T; it ignores that the value is bounded at zero and skewed, which is why the "
    "two disagree. Both are point estimates, without confidence bounds."
)


def _section_head(story, heading: str, intro: str, st) -> None:
    """A section's heading and its first paragraph."""
    from reportlab.platypus import Paragraph

    story.append(Paragraph(heading, st["h1"]))
    story.append(Paragraph(intro, st["body"]))


def interval_section(story, number, results: Mapping, st, width) -> None:
    """Append the tolerance-interval section to a reportlab ``story``."""
    from reportlab.platypus import CondPageBreak, Paragraph, Spacer

    from studykit import theme
    from studykit.report.pdf import escape_text, framed_box, grid_table, number_text

    _section_head(story, f"{number}. Tolerance intervals", _INTERVAL_INTRO, st)
    for name, res in results.items():
        ti = getattr(res, "tolerance_interval", None)
        if not ti:
            continue
        story.append(CondPageBreak(160))
        story.append(Paragraph(escape_text(name), st["h2"]))
        rows = [["Tolerance interval", "Value"]] + [
            [a, escape_text(b)] for a, b in interval_rows(ti, number_text)
        ]
        story.append(grid_table(rows, [0.3 * width, 0.7 * width], styles=st))
        story.append(Paragraph(escape_text(ti.get("statement", "")), st["body"]))
        for note in ti.get("notes") or []:
            story.append(Paragraph(escape_text(note), st["small"]))
        if res.cautions:
            v = theme.VERDICTS["caution"]
            story.append(Spacer(1, 3))
            story.append(
                framed_box(
                    [Paragraph(escape_text(t), st["body"]) for t in res.cautions],
                    background=v.background,
                    border=v.color,
                    width=width,
                )
            )
        story.append(Spacer(1, 6))


def position_rows(d: Mapping, num, unit: str = "") -> list[list[str]]:
    """Two-dimensional model against the one-dimensional shortcut (rows of a table)."""
    sc = d.get("shortcut") or {}
    u = f" {unit}" if unit else ""
    return [
        ["", "Two-dimensional model", "One-dimensional shortcut"],
        [
            "Model",
            "bivariate normal: offset, unequal spreads, correlation",
            "2 sqrt(dx^2 + dy^2) as normal, one-sided against T",
        ],
        [
            "Location",
            f"mean ({num(d.get('mean_x'), 4)}, {num(d.get('mean_y'), 4)}){u}, "
            f"offset {num(d.get('offset'), 4)}{u}",
            f"mean {num(sc.get('mean'), 4)}{u}",
        ],
        [
            "Spread",
            f"sd x {num(d.get('sd_x'), 4)}, sd y {num(d.get('sd_y'), 4)}{u}, "
            f"correlation {num(d.get('correlation'), 3)}",
            f"sd {num(sc.get('sd'), 4)}{u}",
        ],
        ["Expected PPM outside the zone", num(d.get("ppm_expected"), 4), num(sc.get("ppm"), 4)],
        ["Equivalent index", num(d.get("index"), 3), num(sc.get("index"), 3)],
    ]


def comparison_sentence(d: Mapping) -> str:
    """How far the shortcut's PPM is from the two-dimensional model's, in words."""
    two, one = d.get("ppm_expected"), (d.get("shortcut") or {}).get("ppm")
    if two is None or one is None:
        return ""
    if two <= 0 or one <= 0:
        return f"The shortcut expects {one:.4g} PPM and the two-dimensional model {two:.4g} PPM."
    ratio = two / one
    if 0.5 <= ratio <= 2:
        return (
            f"The shortcut expects {one:.4g} PPM, close to the two-dimensional model's "
            f"{two:.4g} PPM."
        )
    word = "fewer" if ratio > 1 else "more"
    factor = ratio if ratio > 1 else 1 / ratio
    times = f"{factor:,.0f}" if factor >= 10 else f"{factor:.2g}"
    return (
        f"The shortcut expects {one:.4g} PPM outside the zone, {times} times {word} "
        f"than the two-dimensional model's {two:.4g} PPM: judge the position by the "
        "two-dimensional model."
    )


def position_section(story, number, positions: Mapping, st, width) -> None:
    """Append the positional-tolerance section (one sub-section per stored study)."""
    from reportlab.platypus import CondPageBreak, Paragraph, Spacer

    from studykit.positions import position_result
    from studykit.report.pdf import escape_text, grid_table, number_text, pdf_image
    from studykit.report.position_figures import position_figure

    _section_head(story, f"{number}. Positional tolerances", _POSITION_INTRO, st)
    for name, payload in positions.items():
        res = position_result(payload)
        d = res.to_dict()
        unit = payload.get("unit") or ""
        story.append(CondPageBreak(300))
        story.append(Paragraph(escape_text(name), st["h2"]))
        src = payload.get("source_file")
        cols = payload.get("columns") or {}
        story.append(
            Paragraph(
                escape_text(
                    f"{res.n} parts, zone diameter T = {res.tolerance:g} {unit}".strip()
                    + (f"; deviations from {src}" if src else "")
                    + (f" (columns {cols.get('x')}, {cols.get('y')})" if cols else "")
                    + (f". {payload['description']}" if payload.get("description") else "")
                ),
                st["small"],
            )
        )
        story.append(pdf_image(position_figure(res, unit=unit or None, size=4.2), 0.62 * width))
        story.append(
            grid_table(
                position_rows(d, number_text, unit),
                [0.3 * width, 0.4 * width, 0.3 * width],
                styles=st,
            )
        )
        story.append(
            Paragraph(
                escape_text(
                    f"Observed: {d['observed_outside']} of {res.n} parts outside the zone "
                    f"({number_text(d['ppm_observed'], 4)} PPM)."
                    + (
                        " Parts outside: " + ", ".join(str(i) for i in d["outside_parts"]) + "."
                        if d["outside_parts"]
                        else ""
                    )
                    + " "
                    + comparison_sentence(d)
                ),
                st["body"],
            )
        )
        for note in d.get("notes") or []:
            story.append(Paragraph(escape_text(note), st["small"]))
        if payload.get("safety_critical"):
            from studykit import theme
            from studykit.analysis import SAFETY_SENTENCE
            from studykit.report.pdf import framed_box

            v = theme.VERDICTS["caution"]
            story.append(
                framed_box(
                    [Paragraph(escape_text(SAFETY_SENTENCE), st["body"])],
                    background=v.background,
                    border=v.color,
                    width=width,
                )
            )
        story.append(Spacer(1, 6))
