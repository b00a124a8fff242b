"""The streams of a characteristic in the PDF: the group chart and the per-stream table.

Draws what :mod:`studykit.stream_analysis` computed; computes nothing itself.
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from studykit import theme

__all__ = ["group_chart_figure", "streams_block", "stream_rows", "run_rule_text"]

#: one marker per stream (cycled), so the chart reads without colour too
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")


def run_rule_text(g) -> str:
    """The group chart's run rule and its signals in words (PDF and screen)."""
    if not getattr(g, "run_length", 0):
        return ""
    d = g.to_dict()["run_rule"]
    head = (
        f"Run rule: one stream the highest or the lowest in {d['length']} successive subgroups "
        f"(for {d['streams']} streams; in-control average run length {d['arl']:.0f} subgroups "
        "per side; r ours, from that run length)"
    )
    if not d["signals"]:
        return head + ": no signal."
    parts = [
        f"stream {r['stream']} the {'highest' if r['side'] == 'high' else 'lowest'} in "
        f"subgroups {r['first']} to {r['last']} ({r['length']})"
        for r in d["signals"]
    ]
    return head + ": signals: " + "; ".join(parts) + "."


def group_chart_figure(result, *, width: float = 7.0) -> Figure:
    """Largest and smallest stream mean per subgroup, each point marked by its stream, with
    the limits of a stream mean."""
    from studykit.report.figures import hline, set_margins, tidy_axes

    g = result.streams.group
    names = list(result.streams.names)
    colours = [theme.OKABE_ITO[k] for k in theme.SERIES_ORDER]
    with theme.matplotlib_context():
        fig = Figure(figsize=(width, 3.2))
        ax = fig.subplots()
        set_margins(fig, left=0.8, right=1.1, top=0.35, bottom=0.85)
        x = np.arange(1, g.labels.size + 1)
        ax.plot(x, g.high, color=theme.INK, linewidth=0.9, zorder=2)
        ax.plot(x, g.low, color=theme.INK, linewidth=0.9, linestyle="dotted", zorder=2)
        for i, name in enumerate(names):
            kw = dict(
                marker=_MARKERS[i % len(_MARKERS)],
                color=colours[i % len(colours)],
                linestyle="none",
                markersize=5.5,
                zorder=3,
            )
            hi = g.high_stream == name
            lo = g.low_stream == name
            if hi.any() or lo.any():
                ax.plot(
                    np.concatenate([x[hi], x[lo]]),
                    np.concatenate([g.high[hi], g.low[lo]]),
                    label=f"stream {name}",
                    **kw,
                )
        hline(ax, g.ucl, "control_limit", "UCL", x[-1])
        hline(ax, g.center, "centre_line", "centre", x[-1])
        hline(ax, g.lcl, "control_limit", "LCL", x[-1])
        step = max(1, int(np.ceil(x.size / 25)))
        ax.set_xticks(x[::step])
        ax.set_xticklabels([str(v) for v in g.labels[::step]], fontsize=7)
        tidy_axes(
            ax,
            "Group chart: largest (solid) and smallest (dotted) stream mean per subgroup",
            "Stream mean",
            "Subgroup",
        )
        ax.title.set_fontsize(9)
        ax.legend(
            loc="upper center",
            bbox_to_anchor=(0.5, -0.2),
            fontsize=7,
            ncol=min(len(names), 8),
            frameon=False,
        )
    return fig


def _n(v, digits=4) -> str:
    if v is None or not np.isfinite(v):
        return "–"
    return f"{v:.{digits}g}"


def stream_rows(result) -> list[list[str]]:
    """Header and one row per stream: n, mean, sigmas, judged index, bound, verdict."""
    st = result.streams
    index = result.criteria.get("index", "ppk")
    rows = [
        [
            "Stream",
            "n",
            "Mean",
            "Within sigma",
            "Overall sigma",
            f"{index.capitalize()}",
            "Lower bound",
            "Verdict",
        ]
    ]
    for name in st.names:
        r = st.results.get(name)
        if r is None:
            rows.append(
                [name, "–", "–", "–", "–", "–", "–", "not analysed: " + st.errors.get(name, "")]
            )
            continue
        v = r.verdict
        word = {True: "meets", False: "does not meet", None: "not judged"}[
            None if v is None else v.meets
        ]
        rows.append(
            [
                name + (" (worst)" if name == st.worst else ""),
                str(r.n),
                _n(r.mean, 6),
                _n(r.within_sigma),
                _n(r.overall_sigma),
                _n(None if v is None else v.estimate, 3),
                _n(None if v is None else v.lower_bound, 3),
                word,
            ]
        )
    return rows


def streams_block(story, result, st, width, *, table, image, esc) -> None:
    """The "Streams" part of a characteristic's section (nothing without streams)."""
    streams = getattr(result, "streams", None)
    if streams is None:
        return
    from reportlab.platypus import CondPageBreak, KeepTogether, Paragraph, Spacer

    story.append(CondPageBreak(260))
    story.append(Paragraph(f"Streams ({len(streams.names)})", st["h2"]))
    story.append(
        Paragraph(
            esc(
                "Each stream is analysed on its own (chart, model, capability, verdict); the section "
                "above is the process as a whole. Location: one-way ANOVA of the stream means (Fisher "
                "1925; NIST/SEMATECH e-Handbook 7.4.3). Spread: Brown-Forsythe test, Levene's test "
                "about the stream medians (Brown & Forsythe 1974)."
            ),
            st["small"],
        )
    )
    rows = [[esc(c) for c in row] for row in stream_rows(result)]
    story.append(
        table(
            rows, [w * width for w in (0.13, 0.07, 0.13, 0.12, 0.12, 0.09, 0.11, 0.23)], styles=st
        )
    )
    story.append(Spacer(1, 4))
    for t in (streams.location, streams.spread):
        if t is not None:
            story.append(Paragraph(esc(t.text[0].upper() + t.text[1:] + "."), st["body"]))
    if streams.worst is not None:
        story.append(
            Paragraph(esc(f"Worst stream: {streams.worst} (lowest judged index)."), st["body"])
        )
    if streams.group is not None:
        g = streams.group
        story.append(
            KeepTogether(
                [
                    image(group_chart_figure(result), width),
                    Paragraph(
                        esc(
                            f"Limits of a stream mean: centre {_n(g.center, 6)} +- 3 x {_n(g.sigma_within)}"
                            f" / sqrt({g.n}) (sigma within: mean R/d2 of each stream's subgroups; group "
                            f"chart of Boyd 1950). {len(g.beyond)} stream mean(s) beyond the limits. "
                            f"Longest run as the highest mean: stream {g.longest_run['high']['stream']} "
                            f"({g.longest_run['high']['length']} subgroups); as the lowest: stream "
                            f"{g.longest_run['low']['stream']} ({g.longest_run['low']['length']}). "
                            + run_rule_text(g)
                        ),
                        st["small"],
                    ),
                ]
            )
        )
