"""Several streams in the workbook: the "Streams" panel of the Capability step and the stream
rows under their characteristic in "Characteristics at a glance".

Shows what :mod:`studykit.stream_analysis` computed (``CharacteristicResult.streams``); the group
chart is the PDF's figure (:func:`studykit.report.streams.group_chart_figure`), so screen and
report cannot differ. Computes nothing.
"""

from __future__ import annotations

import ipywidgets as widgets

from studykit import names
from studykit.app.overview import fmt, grid_cells, verdict_chip, verdict_kind
from studykit.app.widgets import esc, html_box

__all__ = ["streams_panel", "stream_overview_rows", "stream_cells", "time_model_html"]


def time_model_html(result) -> str:
    """The ISO 22514-2 class of the characteristic, its reason and the class's indices."""
    tm = getattr(result, "time_model", None)
    if tm is None:
        return ""
    if tm.cls is None:
        return (
            "<div class='sk-panel-title'>Time-dependent model (ISO 22514-2)</div>"
            f"<div class='sk-muted'>Not classified: {esc(tm.reason)}.</div>"
        )
    d = tm.to_dict()
    shown = ("pp", "ppk", "ppu", "ppl")
    idx = ", ".join(
        f"{names.index_label(k)} {names.format_index(v)}"
        for k, v in d["indices"].items()
        if k in shown
    )
    if d["indices"].get("sigma") is not None:
        sigma = names.format_spread(
            d["indices"]["sigma"], digits=names.spec_digits(getattr(result, "spec", None))
        )
        idx += f" (total sigma {sigma})"
    return (
        "<div class='sk-panel-title'>Time-dependent model (ISO 22514-2)</div>"
        f"<div class='sk-time-model'><b>Class {esc(tm.cls)}</b>: location "
        f"{esc(d['location'])}, spread {esc(d['spread'])}. Capability by "
        f"{esc(tm.method)}" + (f": {idx}" if idx else "") + ".</div>"
        f"<div class='sk-small'>Why: {esc(tm.reason)}. Classes and methods as recalled from "
        "the standard (from memory).</div>"
    )


def _judged(res) -> tuple:
    v = res.verdict
    return (None, None) if v is None else (v.estimate, v.lower_bound)


def streams_html(result) -> str:
    """Table of the streams, the two tests and the worst stream (empty without streams)."""
    st = getattr(result, "streams", None)
    if st is None:
        return ""
    index = names.index_label(result.criteria.get("index") or "ppk")
    digits = names.spec_digits(getattr(result, "spec", None))
    body = []
    for name in st.names:
        r = st.results.get(name)
        if r is None:
            body.append(
                f"<tr><td>{esc(name)}</td><td colspan='6' class='sk-muted'>not analysed: "
                f"{esc(st.errors.get(name, ''))}</td></tr>"
            )
            continue
        est, lower = _judged(r)
        kind, word = verdict_kind(r.verdict)
        worst = " <b>(worst)</b>" if name == st.worst else ""
        body.append(
            f"<tr class='sk-stream-row'><td>{esc(name)}{worst}</td><td class='num'>{r.n}</td>"
            f"<td class='num'>{names.format_value(r.mean, digits=digits)}</td>"
            f"<td class='num'>{names.format_spread(r.overall_sigma, digits=digits)}</td>"
            f"<td class='num'>{fmt(est, 2)}</td><td class='num'>{fmt(lower, 2)}</td>"
            f'<td title="{esc(r.verdict.text if r.verdict is not None else "")}">'
            f"{verdict_chip(None if r.verdict is None else r.verdict.meets, text=word, kind=kind)}"
            "</td></tr>"
        )
    tests = "".join(
        f"<div class='sk-msg sk-msg-{'warning' if t.differ else 'info'}'>{esc(t.text)}</div>"
        for t in (st.location, st.spread)
        if t is not None
    )
    return (
        "<div class='sk-panel-title'>Streams</div>"
        "<div class='sk-muted'>Each stream on its own (chart, model, capability, verdict); "
        "the verdict above is the process as a whole.</div>"
        "<table class='sk-table sk-stream-table'><thead><tr><th>Stream</th><th>n</th>"
        f"<th>Mean</th><th>Overall sigma</th><th>{esc(index)}</th><th>Lower bound</th>"
        "<th>Verdict</th></tr></thead><tbody>"
        + "".join(body)
        + "</tbody></table>"
        + tests
        + (
            f"<div><b>Worst stream: {esc(st.worst)}</b> (lowest judged index).</div>"
            if st.worst
            else ""
        )
    )


def streams_panel(result) -> list:
    """Widgets of the "Streams" panel: the table and the group chart (none without streams)."""
    st = getattr(result, "streams", None)
    tm = time_model_html(result)
    head = [html_box(tm, "sk-time-model-box")] if tm else []
    if st is None:
        return head
    out = [*head, html_box(streams_html(result), "sk-streams-box")]
    if st.group is not None:
        from studykit.report.figures import figure_png
        from studykit.report.streams import group_chart_figure

        img = widgets.Image(
            value=figure_png(group_chart_figure(result), dpi=110),
            format="png",
            layout=widgets.Layout(max_width="820px", width="100%"),
        )
        img.add_class("sk-group-chart")
        out.append(img)
    return out


def stream_overview_rows(result) -> list[dict]:
    """One dict per stream for the overview: stream, meets, kind, word, index, estimate,
    lower_bound, worst."""
    st = getattr(result, "streams", None)
    if st is None:
        return []
    rows = []
    for name in st.names:
        r = st.results.get(name)
        if r is None:
            continue
        est, lower = _judged(r)
        kind, word = verdict_kind(r.verdict)
        rows.append(
            {
                "stream": name,
                "meets": None if r.verdict is None else r.verdict.meets,
                "kind": kind,
                "word": word,
                "index": r.criteria.get("index"),
                "estimate": est,
                "lower_bound": lower,
                "worst": name == st.worst,
            }
        )
    return rows


def stream_cells(rows: list[dict]) -> str:
    """Six overview cells per stream row (the grid of "Characteristics at a glance"), as the
    HTML of :func:`studykit.app.overview.grid_cells` (they go into their characteristic's
    row widget)."""
    cells = []
    for r in rows:
        name = f"↳ stream {esc(r['stream'])}" + (" (worst)" if r["worst"] else "")
        values = [
            (name, ("sk-ovcell", "sk-ovstream")),
            (verdict_chip(r["meets"], text=r["word"], kind=r["kind"]), ("sk-ovcell",)),
            (
                f"{esc(names.index_label(r['index'] or ''))} {fmt(r['estimate'], 2)}"
                if r["estimate"] is not None
                else "—",
                ("sk-ovcell", "num"),
            ),
            (fmt(r["lower_bound"], 2), ("sk-ovcell", "num")),
            ("", ("sk-ovcell", "num")),
            ("", ("sk-ovcell",)),
        ]
        cells += values
    return grid_cells(cells)
