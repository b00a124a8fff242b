"""The ISO 22514-2 time-dependent model of a characteristic in the PDF (computes nothing)."""

from __future__ import annotations

__all__ = ["time_model_block", "time_model_rows"]

_NAMES = {
    "pp": "Pp",
    "ppk": "Ppk",
    "ppu": "PPU",
    "ppl": "PPL",
    "sigma": "sigma_total",
    "mu_low": "travel from",
    "mu_high": "travel to",
    "sigma_r": "sigma about the trend",
    "x0135": "0.135 % point",
    "x50": "50 % point",
    "x99865": "99.865 % point",
}


def _n(v, digits=4) -> str:
    return "–" if v is None else f"{v:.{digits}g}"


def time_model_rows(tm) -> list[list[str]]:
    """Rows of the evidence table: variance components, the tests, the class's indices."""
    vc = tm.components
    rows = [["Evidence", "Value"]]
    if vc is not None:
        rows.append(
            [
                "Between subgroups (random-effects ANOVA)",
                f"F = {_n(vc.f)}, p = {_n(vc.p_value, 3)}; sigma between {_n(vc.sigma_between)}"
                f", within {_n(vc.sigma_within)}, total {_n(vc.sigma_total)} "
                f"(between share {vc.between_share * 100:.0f} %)",
            ]
        )
    if tm.trend is not None:
        t = tm.trend
        rows.append(
            [
                "Trend of the subgroup means (Mann-Kendall)",
                f"tau = {_n(t['tau'], 3)}, p = {_n(t['p_value'], 3)}; slope "
                f"{_n(t['slope'])} per subgroup; random part about it p = "
                f"{_n(t['residual_p'], 3)}",
            ]
        )
    if tm.spread is not None:
        rows.append(
            [
                "Spread of the subgroups (Brown-Forsythe)",
                f"W = {_n(tm.spread.statistic, 3)}, p = {_n(tm.spread.p_value, 3)}",
            ]
        )
    if tm.shape is not None:
        rows.append(
            [
                "Shape (Anderson-Darling)",
                f"all readings p = {_n(tm.shape['p_value'], 3)}; each subgroup centred "
                f"p = {_n(tm.shape['within_p_value'], 3)}",
            ]
        )
    for k, v in tm.indices.items():
        rows.append([f"{_NAMES.get(k, k)} (class {tm.cls} method)", _n(v, 5)])
    jb = getattr(tm, "judged", None)
    if jb is not None:
        if jb.get("basis") == "usual":
            rows.append(["Verdict judged on", f"the usual index ({jb['text']})"])
        else:
            rows.append(
                [
                    "Verdict judged on",
                    f"{jb['text']}: {_n(jb['estimate'])}, lower {jb['level']:.0%} bound "
                    f"{_n(jb['lower_bound'])} ({jb['bound_method']})"
                    + (f"; caution: {jb['caution']}" if jb.get("caution") else ""),
                ]
            )
    return rows


def time_model_block(story, result, st, width, *, table, esc) -> None:
    """The part "Time-dependent model" of a characteristic's section (nothing without one)."""
    tm = getattr(result, "time_model", None)
    if tm is None:
        return
    from reportlab.platypus import KeepTogether, Paragraph

    head = Paragraph("Time-dependent model (ISO 22514-2)", st["h2"])
    if tm.cls is None:
        story.append(
            KeepTogether([head, Paragraph(esc(f"Not classified: {tm.reason}."), st["body"])])
        )
        return
    text = (
        f"<b>Class {esc(tm.cls)}</b>: location {esc(tm.to_dict()['location'])}, spread "
        f"{esc(tm.to_dict()['spread'])}. The capability of this class uses "
        f"{esc(tm.method)}. Classes and methods as recalled from ISO 22514-2 (from memory, "
        "not from the standard's text); each test at 0.05."
    )
    rows = [[esc(c) for c in r] for r in time_model_rows(tm)]
    story.append(
        KeepTogether(
            [
                head,
                Paragraph(text, st["body"]),
                table(rows, [0.38 * width, 0.62 * width], styles=st),
            ]
        )
    )
