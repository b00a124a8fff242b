"""Matplotlib figures of one characteristic, for the PDF report and the hand-off forms.

Every builder takes a :class:`~studykit.analysis.CharacteristicResult` (which carries its own
values, chart limits, fitted model and bounds; nothing is estimated here) and returns a
:class:`matplotlib.figure.Figure`. Colours, line styles and markers come from
:mod:`studykit.theme`, so the PDF matches the workbook; meaning never rests on colour alone.

:func:`figure_png` turns a figure into PNG bytes without a timestamp or software tag, so the same
study always gives the same image bytes (and the same PDF).

Examples
--------
>>> from studykit.analysis import analyze_characteristic
>>> from studykit.data import CharacteristicData
>>> from studykit.study import Characteristic
>>> x = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1, 50.3, 49.2]
>>> res = analyze_characteristic(CharacteristicData("x", None, x),
...                              Characteristic("x", lsl=40, usl=60))
>>> len(control_chart_figure(res).axes), len(shape_figure(res).axes) >= 2
(2, True)
>>> png = figure_png(control_chart_figure(res), dpi=50)
>>> png[1:4] == b"PNG", png == figure_png(control_chart_figure(res), dpi=50)
(True, True)
"""

from __future__ import annotations

import io
import math

import numpy as np
from matplotlib.figure import Figure

from studykit import names, theme

__all__ = [
    "control_chart_figure",
    "shape_figure",
    "interval_figure",
    "blank_form_figure",
    "figure_png",
    "figure_image",
]

_DISPERSION_NAMES = {"xbar_r": "Range", "xbar_s": "Std. deviation", "imr": "Moving range"}
_LOCATION_NAMES = {
    "xbar_r": "Subgroup mean",
    "xbar_s": "Subgroup mean",
    "imr": "Individual value",
    "p": "Proportion defective",
    "np": "Number defective",
    "c": "Defects",
    "u": "Defects per unit",
}


def _paper_legend(ax) -> None:
    """A small legend at the top left on a paper-coloured box (the shape figure's panels)."""
    ax.legend(
        loc="upper left",
        fontsize=7.5,
        frameon=True,
        facecolor=theme.PAPER,
        edgecolor=theme.PAPER,
        framealpha=0.9,
    )


def figure_png(fig: Figure, *, dpi: int = 200) -> bytes:
    """PNG bytes of ``fig`` at print resolution, with no time or software metadata."""
    buf = io.BytesIO()
    with theme.matplotlib_context():
        fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    return buf.getvalue()


def figure_image(fig: Figure, *, dpi: int = 150):
    """The figure rendered to an RGB :class:`PIL.Image.Image` (no PNG round trip: the PDF
    compresses the pixels itself, which halves the time per figure)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from PIL import Image

    with theme.matplotlib_context():
        fig.set_dpi(dpi)
        canvas = FigureCanvasAgg(fig)
        canvas.draw()
        rgba = canvas.buffer_rgba()
        img = Image.frombuffer(
            "RGBA", (int(rgba.shape[1]), int(rgba.shape[0])), rgba, "raw", "RGBA", 0, 1
        )
        return img.convert("RGB")


_WARM = False


def warm_up() -> None:
    """Draw one tiny figure with text, once per process: matplotlib's font list, the typeface
    and the renderer's caches are loaded then (forked processes inherit them) rather than with
    the first figure of the report. Draws nothing anyone sees."""
    global _WARM
    if _WARM:
        return
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    with theme.matplotlib_context():
        fig = Figure(figsize=(1.0, 1.0))
        ax = fig.subplots()
        ax.set_title("0", loc="left")
        ax.set_xlabel("0")
        FigureCanvasAgg(fig).draw()
    _WARM = True


def settle_titles(fig: Figure) -> None:
    """Skip matplotlib's automatic title placement on each axes where it cannot move the
    title: with the tick labels at the bottom, no twin or inset axes and no offset or exponent
    text on the y axis, it leaves the title at the top of the axes anyway, after measuring every
    y tick label once more (a seventh of the drawing time). Call it when the figure is complete;
    the pixels stay the same."""
    for ax in fig.axes:
        if not hasattr(ax, "_autotitlepos") or ax.child_axes:
            continue
        if ax.xaxis.get_ticks_position() in ("top", "unknown"):
            continue
        if (
            ax.xaxis.get_label_position() == "top"
            or len(ax.get_shared_x_axes().get_siblings(ax)) > 1
        ):
            continue
        if len(ax.get_shared_y_axes().get_siblings(ax)) > 1:
            continue
        y = ax.yaxis
        fmt = y.get_major_formatter()
        fmt.format_ticks(y.get_majorticklocs())
        if fmt.get_offset():
            continue
        ax._autotitlepos = False  # the position matplotlib would have settled on: y = 1


def set_margins(
    fig: Figure, *, left=0.8, right=0.85, top=0.35, bottom=0.5, hspace=0.75, wspace=0.8
) -> None:
    """Fixed margins in inches (constrained layout costs half the drawing time)."""
    w, h = fig.get_size_inches()
    fig.subplots_adjust(
        left=left / w,
        right=1 - right / w,
        top=1 - top / h,
        bottom=bottom / h,
        hspace=hspace / (h / max(1, len(fig.axes))),
        wspace=wspace,
    )


def tidy_axes(ax, title: str, ylabel: str = "", xlabel: str = "") -> None:
    ax.set_title(title, loc="left", fontweight="bold", fontsize=10)
    ax.set_ylabel(ylabel)
    if xlabel:
        ax.set_xlabel(xlabel)
    ax.grid(True, color=theme.RULE, linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    try:
        ax.ticklabel_format(axis="both", useOffset=False)
    except AttributeError:  # categorical or log axes
        pass


_MEASURE = None  # the renderer that measures tick labels (readable_x_ticks)


def readable_x_ticks(ax, fig, *, gap_in: float = 0.04) -> None:
    """Fewer x ticks where their labels would run into each other (e.g. 13.975, 14.000, ...
    on a narrow panel): the ticks as drawn when neighbouring labels, measured in the tick
    font, leave ``gap_in`` between them, else the most ticks at 1, 2, 2.5 or 5 x 10^k steps
    that do."""
    from matplotlib.backends.backend_agg import RendererAgg
    from matplotlib.ticker import MaxNLocator

    lo, hi = sorted(ax.get_xlim())
    shown = ax.xaxis.get_ticklabels()
    if not hi > lo or not shown:
        return
    inch_per_unit = ax.get_position().width * fig.get_figwidth() / (hi - lo)
    font = shown[0].get_fontproperties()
    global _MEASURE
    if _MEASURE is None:
        _MEASURE = RendererAgg(10, 10, 72)  # 72 dpi: widths in points; one per process
    renderer = _MEASURE

    def fits(ticks) -> bool:
        ticks = [t for t in ticks if lo <= t <= hi]
        if len(ticks) < 2:
            return True
        labels = ax.xaxis.get_major_formatter().format_ticks(ticks)
        widest = max(renderer.get_text_width_height_descent(t, font, False)[0] for t in labels)
        step_in = min(np.diff(ticks)) * inch_per_unit
        return widest / 72 + gap_in <= step_in

    if fits(ax.get_xticks()):
        return
    for nbins in range(8, 1, -1):
        locator = MaxNLocator(nbins=nbins, steps=[1, 2, 2.5, 5, 10])
        if fits(locator.tick_values(lo, hi)) or nbins == 2:
            ax.xaxis.set_major_locator(locator)
            return


def hline(ax, y, role, text, x_end):
    if y is None or not math.isfinite(float(y)):
        return
    kw = theme.mpl_line_kwargs(role)
    kw["linewidth"] = kw["linewidth"] * 0.8
    kw.pop("label")
    ax.axhline(float(y), **kw)
    ax.annotate(
        f"{text} {float(y):.5g}",
        xy=(1.0, float(y)),
        xycoords=("axes fraction", "data"),
        xytext=(3, 0),
        textcoords="offset points",
        va="center",
        ha="left",
        fontsize=7.5,
        color=kw["color"],
    )


def _step(ax, x, y, role):
    """Per-subgroup limits (variable sizes) as a step line; constant ones as one line."""
    y = np.asarray(y, dtype=float)
    kw = theme.mpl_line_kwargs(role)
    kw["linewidth"] = kw["linewidth"] * 0.8
    kw.pop("label")
    ax.step(x, y, where="mid", **kw)


def _series_panel(ax, series, x, removed_x, removed_y, title, ylabel, labels):
    pts = np.asarray(series.points, dtype=float)
    data_kw = theme.mpl_line_kwargs("data")
    ax.plot(x, pts, color=data_kw["color"], linewidth=1.0, zorder=2)
    mk = theme.mpl_marker_kwargs("data")
    mk["s"] = mk["s"] * 0.5
    mk["label"] = "Subgroup used"
    ax.scatter(x, pts, **mk)
    constant = np.allclose(series.ucl, series.ucl[0], equal_nan=True)
    x_end = x[-1] if len(x) else 0
    if constant:
        hline(ax, series.ucl[0], "control_limit", "UCL", x_end)
        hline(ax, series.center[0], "centre_line", "CL", x_end)
        hline(ax, series.lcl[0], "control_limit", "LCL", x_end)
    else:
        _step(ax, x, series.ucl, "control_limit")
        _step(ax, x, series.lcl, "control_limit")
        _step(ax, x, series.center, "centre_line")
    flagged = sorted({int(p) for s in series.signals for p in s.points})
    if flagged:
        sk = theme.mpl_marker_kwargs("signal")
        sk["label"] = "Signal (rule number beside it)"
        sk["facecolors"] = "none"
        sk.pop("color", None)
        sk["edgecolors"] = theme.ROLES["signal"].color
        sk["linewidths"] = 1.4
        sk["s"] = sk["s"] * 1.4
        ax.scatter(np.asarray(x)[flagged], pts[flagged], **sk)
        numbers: dict[int, list[int]] = {}
        for s in series.signals:
            for p in s.points:
                numbers.setdefault(int(p), [])
                if s.number not in numbers[int(p)]:
                    numbers[int(p)].append(s.number)
        for p, nums in numbers.items():
            ax.annotate(
                ",".join(str(n) for n in sorted(nums)),
                xy=(x[p], pts[p]),
                xytext=(0, 7),
                textcoords="offset points",
                ha="center",
                fontsize=7,
                color=theme.OKABE_ITO["vermillion"],
            )
    if len(removed_x):
        ek = theme.mpl_marker_kwargs("excluded")
        ek["label"] = "Removed subgroup (see log)"
        ry = np.asarray(removed_y, dtype=float)
        finite = np.isfinite(ry)
        for rx in removed_x:
            ax.axvspan(rx - 0.4, rx + 0.4, color=theme.PANEL, zorder=0)
        if finite.any():
            ax.scatter(np.asarray(removed_x)[finite], ry[finite], **ek)
    tidy_axes(ax, title, ylabel)


def _order(labels_all, labels_used):
    pos = {lab: i + 1 for i, lab in enumerate(labels_all)}
    return np.asarray([pos[lab] for lab in labels_used], dtype=float)


def _removed_points(result, with_excluded):
    """Location/dispersion points of removed subgroups, as the result holds them (the trial
    chart's points; with ``with_excluded``, ``result.excluded_points`` of the recorded
    exclusions)."""
    removed = [str(r.label) for r in result.phase1.removals]
    trial = result.phase1.trial_chart
    tl = [str(v) for v in trial.labels]
    excluded = (getattr(result, "excluded_points", None) or {}) if with_excluded else {}
    loc, disp = {}, {}
    for lab in removed:
        if lab in tl:
            i = tl.index(lab)
            loc[lab] = float(trial.location.points[i])
            if trial.dispersion is not None and i < len(trial.dispersion.points):
                disp[lab] = float(trial.dispersion.points[i])
        elif lab in excluded:
            loc[lab], d = excluded[lab]
            if d is not None:
                disp[lab] = d
    return removed, loc, disp


def _kept_rings(ax, series, x, labels, result) -> None:
    """A green ring around each signalled point that a person kept with a reason."""
    kept = {str(k["subgroup"]) for k in getattr(result, "kept_signals", ()) or ()}
    if not kept:
        return
    at = {int(p) for sig in series.signals for p in sig.points}
    pts = np.asarray(series.points, dtype=float)
    idx = [i for i, lab in enumerate(labels) if lab in kept and i in at and i < len(pts)]
    if idx:
        ax.scatter(
            [x[i] for i in idx],
            pts[idx],
            s=150,
            facecolors="none",
            edgecolors=theme.OKABE_ITO["bluish_green"],
            linewidths=1.6,
            zorder=6,
            label="Signal kept (reason on file)",
        )


def _subgroup_order(result, raw, kind, used, removed) -> list:
    """Every charted or removed subgroup label in production order (the readings' order when
    ``raw`` is given, else the trial chart's)."""
    all_labels = list(used)
    if raw is not None and kind != "imr":
        seen = []
        for lab in np.asarray(raw.subgroups).astype(str).tolist():
            if lab not in seen:
                seen.append(lab)
        all_labels = [lab for lab in seen if lab in set(used) | set(removed)]
    else:
        trial = [str(v) for v in result.phase1.trial_chart.labels]
        all_labels = trial + [lab for lab in removed if lab not in trial]
        if set(used) - set(all_labels):
            all_labels = used + [lab for lab in removed if lab not in used]
    return all_labels


def control_chart_figure(result, *, raw=None, width: float = 7.0) -> Figure:
    """Location (and dispersion) chart of the final phase-I limits.

    Removed subgroups keep their place on the axis on a grey band with a grey cross; run-rule
    signals are ringed and numbered with the rule. ``raw`` (the characteristic's
    :class:`~studykit.data.CharacteristicData`) gives the order of every subgroup, so the
    recorded exclusions are drawn in their place too (their points come from the result).
    """
    chart = result.phase1.chart
    kind = chart.kind
    used = [str(v) for v in chart.labels]
    removed, loc_r, disp_r = _removed_points(result, raw is not None)
    all_labels = _subgroup_order(result, raw, kind, used, removed)
    x = _order(all_labels, used)
    panels = 2 if chart.dispersion is not None else 1
    with theme.matplotlib_context():
        fig = Figure(figsize=(width, 2.3 * panels + 0.45))
        axes = fig.subplots(panels, 1, squeeze=False)[:, 0]
        set_margins(fig, right=1.0, top=0.3, bottom=0.75, hspace=0.55)
        unit = f" [{result.unit}]" if result.unit else ""
        if getattr(result, "chart_scale_text", None):  # phase I on the model's scale
            unit = f"\n({result.chart_scale_axis.split(',')[0]})"  # model: text below
        rx = [all_labels.index(lab) + 1 for lab in removed if lab in loc_r and lab in all_labels]
        ry = [loc_r[lab] for lab in removed if lab in loc_r and lab in all_labels]
        _series_panel(
            axes[0],
            chart.location,
            x,
            rx,
            ry,
            f"{_LOCATION_NAMES.get(kind, 'Value')} chart ({names.chart_kind_label(kind)})",
            _LOCATION_NAMES.get(kind, "Value") + unit,
            used,
        )
        _kept_rings(axes[0], chart.location, x, used, result)
        _class_band(axes[0], result, all_labels)
        if panels == 2:
            dx = x[-len(chart.dispersion.points) :]
            drx = [
                all_labels.index(lab) + 1 for lab in removed if lab in disp_r and lab in all_labels
            ]
            dry = [disp_r[lab] for lab in removed if lab in disp_r and lab in all_labels]
            _series_panel(
                axes[1],
                chart.dispersion,
                dx,
                drx,
                dry,
                f"{_DISPERSION_NAMES.get(kind, 'Dispersion')} chart",
                _DISPERSION_NAMES.get(kind, "Dispersion") + unit,
                used,
            )
            _kept_rings(
                axes[1], chart.dispersion, dx, used[-len(chart.dispersion.points) :], result
            )
        n = len(all_labels)
        longest = max((len(lab) for lab in all_labels), default=1)
        step = max(1, int(math.ceil(n / 25)), int(math.ceil(n * (longest + 1.5) / 110)))
        ticks = list(range(1, n + 1, step))
        for ax in axes:
            ax.set_xticks(ticks)
            ax.set_xticklabels([all_labels[t - 1] for t in ticks], fontsize=7)
            ax.set_xlim(0.3, n + 0.7)
        axes[-1].set_xlabel("Subgroup (production order)")
        handles: dict = {}
        for ax in axes:
            for h, lab in zip(*ax.get_legend_handles_labels(), strict=True):
                handles.setdefault(lab, h)
        fig.legend(
            list(handles.values()),
            list(handles),
            loc="lower center",
            ncol=3,
            fontsize=7.5,
            bbox_to_anchor=(0.5, 0.0),
            columnspacing=1.5,
        )
        settle_titles(fig)
    return fig


def _class_band(ax, result, all_labels) -> None:
    """The time-dependent class model's limits of each subgroup mean (C1, C3, C4; from
    ``result.time_model.location_limits``), shaded on the location chart in measured units."""
    tm = getattr(result, "time_model", None)
    lim = getattr(tm, "location_limits", None) if tm is not None else None
    if not lim or getattr(result, "chart_scale_text", None):
        return
    where = {lab: i for i, lab in enumerate(all_labels)}
    rows = [(where[lab] + 1, j) for j, lab in enumerate(lim["labels"]) if lab in where]
    if not rows:
        return
    xs = np.asarray([r[0] for r in rows], dtype=float)
    centre = np.asarray([lim["centre"][r[1]] for r in rows])
    half = np.asarray([lim["half"][r[1]] for r in rows])
    ax.fill_between(
        xs,
        centre - half,
        centre + half,
        step="mid",
        color=theme.OKABE_ITO["bluish_green"],
        alpha=0.15,
        linewidth=0,
        zorder=0,
        label=f"Limits of the time-dependent model {tm.cls}",
    )


def _spec_lines(ax, spec, vertical=True):
    for key, role, text in (
        ("lsl", "spec_limit", "LSL"),
        ("usl", "spec_limit", "USL"),
        ("target", "target", "Target"),
    ):
        v = spec.get(key)
        if v is None:
            continue
        kw = theme.mpl_line_kwargs(role)
        kw.pop("label")
        kw["linewidth"] *= 0.8
        if vertical:
            ax.axvline(v, **kw)
            ax.annotate(
                text,
                xy=(v, 1.0),
                xycoords=("data", "axes fraction"),
                xytext=(2, -2),
                textcoords="offset points",
                ha="left",
                va="top",
                fontsize=7.5,
                color=kw["color"],
                rotation=90,
            )
        else:
            ax.axhline(v, **kw)


#: sqrt(2 pi), as scipy.stats' normal density divides by it.
_NORM_PDF_C = np.sqrt(2 * np.pi)


def _norm_pdf(x, loc, scale):
    """``scipy.stats.norm.pdf(x, loc, scale)`` for an array ``x``, bit for bit, without importing
    ``scipy.stats`` (about 0.5 s and 60 MB in each figure worker): scipy's own formula
    ``exp(-z**2 / 2) / sqrt(2 pi) / scale`` with ``z = (x - loc) / scale``, 0 at z = +-inf and NaN
    where scipy gives its bad value (z NaN, or scale not > 0).

    >>> from studykit.stats.lazy import scipy_stats
    >>> x = np.array([-np.inf, -3.0, 0.1, 2.5, np.nan, np.inf])
    >>> bool(np.array_equal(_norm_pdf(x, 0.2, 1.3), scipy_stats.norm.pdf(x, 0.2, 1.3),
    ...                     equal_nan=True))
    True
    """
    z = np.asarray((np.asarray(x, dtype=float) - loc) / scale, dtype=float)
    if not scale > 0:
        return np.full(z.shape, np.nan)
    out = np.zeros(z.shape)
    out[np.isnan(z)] = np.nan
    inside = np.isfinite(z)
    out[inside] = np.exp(-(z[inside] ** 2) / 2.0) / _NORM_PDF_C / scale
    return out


def _model_pdf(result, grid):
    """Density of the chosen model on ``grid`` (original scale), or None."""
    model = result.model
    if model is None:
        return None, ""
    if model.fitted is not None:  # scipy's numbers, without importing scipy.stats here
        from studykit.stats.families.density import fitted_pdf

        return np.asarray(fitted_pdf(model.fitted, grid), dtype=float), model.label
    if model.name == "normal" or model.transform is not None:
        if model.transform is None:
            return _norm_pdf(grid, result.mean, result.overall_sigma), "Normal"
        t = model.transform
        eps = (grid[1] - grid[0]) * 1e-3
        y0 = np.asarray(t.transform(grid - eps), dtype=float)
        y1 = np.asarray(t.transform(grid + eps), dtype=float)
        y = np.asarray(t.transform(grid), dtype=float)
        ty = np.asarray(t.transform(result.values), dtype=float)
        mu, sd = float(np.mean(ty)), float(np.std(ty, ddof=1))
        with np.errstate(invalid="ignore", divide="ignore"):
            dens = _norm_pdf(y, mu, sd) * np.abs((y1 - y0) / (2 * eps))
        dens[~np.isfinite(dens)] = np.nan
        return dens, model.label
    return None, ""


def shape_figure(result, *, width: float = 7.0) -> Figure:
    """Histogram with the chosen model's density and the specification, beside a normal
    probability plot with its confidence band."""
    x = np.asarray(result.values, dtype=float)
    with theme.matplotlib_context():
        fig = Figure(figsize=(width, 2.9))
        ax1, ax2 = fig.subplots(1, 2, gridspec_kw={"width_ratios": [1.25, 1]})
        set_margins(fig, left=0.6, right=0.15, top=0.3, bottom=0.5, wspace=0.42)
        lo, hi = float(x.min()), float(x.max())
        for v in (result.spec.get("lsl"), result.spec.get("usl")):
            if v is not None:
                lo, hi = min(lo, v), max(hi, v)
        pad = 0.05 * (hi - lo or 1.0)
        bins = int(np.clip(np.ceil(np.sqrt(x.size)), 6, 30))
        ax1.hist(
            x,
            bins=bins,
            density=True,
            color=theme.OKABE_ITO["blue"],
            alpha=0.35,
            edgecolor=theme.OKABE_ITO["blue"],
            linewidth=0.6,
            label="Values used",
        )
        grid = np.linspace(lo - pad, hi + pad, 400)
        dens, label = _model_pdf(result, grid)
        if dens is not None:
            kw = theme.mpl_line_kwargs("fit")
            kw["label"] = f"Model: {label}"
            ax1.plot(grid, dens, **kw)
        _spec_lines(ax1, result.spec)
        ax1.set_xlim(lo - pad, hi + pad)
        unit = f" [{result.unit}]" if result.unit else ""
        tidy_axes(ax1, "Distribution of the values", "Density", result.characteristic + unit)
        _paper_legend(ax1)
        _probability_panel(ax2, result, unit)
        for ax in (ax1, ax2):
            readable_x_ticks(ax, fig)
        settle_titles(fig)
    return fig


def _probability_panel(ax2, result, unit) -> None:
    """The normal probability plot of the result (its points, line and band as computed)."""
    pp = result.probability_plot
    if pp is not None:
        z = np.asarray(pp.normal_scores, dtype=float)
        v = np.asarray(pp.values, dtype=float)
        mk = theme.mpl_marker_kwargs("data")
        mk["s"] = mk["s"] * 0.35
        mk["label"] = "Ordered values"
        ax2.scatter(v, z, **mk)
        line = pp.line_mean + pp.line_sigma * z
        kw = theme.mpl_line_kwargs("fit")
        kw["label"] = "Normal line"
        ax2.plot(line, z, **kw)
        if pp.band_lower is not None and pp.band_upper is not None:
            ax2.fill_betweenx(
                z,
                np.asarray(pp.band_lower, dtype=float),
                np.asarray(pp.band_upper, dtype=float),
                color=theme.SKY_BLUE_LINE,
                alpha=0.15,
                linewidth=0,
                label=f"{pp.level * 100:g}% band",
            )
        probs = [0.001, 0.01, 0.1, 0.5, 0.9, 0.99, 0.999]
        from studykit.stats.lazy import norm_ppf_values

        zt = [norm_ppf_values(p) for p in probs]
        keep = [
            (t, p) for t, p in zip(zt, probs, strict=True) if z.min() - 0.5 <= t <= z.max() + 0.5
        ]
        ax2.set_yticks([t for t, _ in keep])
        ax2.set_yticklabels([f"{p * 100:g}%" for _, p in keep])
        tidy_axes(ax2, "Normal probability plot", "Cumulative %", result.characteristic + unit)
        _paper_legend(ax2)
    else:
        ax2.set_axis_off()


def interval_figure(result, *, width: float = 7.0) -> Figure:
    """Each index's estimate and two-sided interval, with the one-sided lower bound marked,
    against the required threshold."""
    cap = result.capability
    crit = result.criteria
    rows = []
    for key in ("cp", "cpk", "pp", "ppk", "cpm"):
        est = getattr(cap, key, None)
        b = (cap.bounds or {}).get(key) if isinstance(cap.bounds, dict) else None
        if est is None or not math.isfinite(est):
            continue
        rows.append((key, est, b))
    with theme.matplotlib_context():
        fig = Figure(figsize=(width, 0.42 * max(len(rows), 1) + 0.9))
        ax = fig.subplots()
        set_margins(fig, left=1.15, right=0.25, top=0.32, bottom=0.35)
        threshold = float(crit.get("threshold", 1.33))
        for i, (key, est, b) in enumerate(rows):
            y = len(rows) - i
            judged = key == result.criteria.get("index")
            col = theme.OKABE_ITO["blue"] if not judged else theme.OKABE_ITO["black"]
            if b and b.get("lower") is not None and b.get("upper") is not None:
                ax.plot(
                    [b["lower"], b["upper"]],
                    [y, y],
                    color=col,
                    linewidth=2.2,
                    solid_capstyle="butt",
                )
            if b and b.get("lower_bound") is not None:
                ax.plot(
                    [b["lower_bound"]],
                    [y],
                    marker="|",
                    markersize=14,
                    color=col,
                    markeredgewidth=2.2,
                )
            ax.plot([est], [y], marker="o", markersize=6, color=col)
        kw = theme.mpl_line_kwargs("spec_limit")
        kw.pop("label")
        ax.axvline(threshold, **kw)
        ax.annotate(
            f"required {threshold:g}",
            xy=(threshold, 1.0),
            xycoords=("data", "axes fraction"),
            xytext=(3, -2),
            textcoords="offset points",
            va="top",
            fontsize=7.5,
            color=kw["color"],
        )
        ax.set_yticks([len(rows) - i for i in range(len(rows))])
        ax.set_yticklabels(
            [(k.capitalize() + (" (judged)" if k == crit.get("index") else "")) for k, _, _ in rows]
        )
        ax.set_ylim(0.4, len(rows) + 0.6)
        level = getattr(cap, "level", 0.95) or 0.95
        tidy_axes(
            ax,
            f"Estimate (dot), two-sided {level * 100:g}% interval (bar), "
            f"lower {level * 100:g}% bound (tick)",
            "",
        )
        ax.title.set_fontsize(9)
    return fig


def blank_form_figure(
    plan, *, n_columns: int = 25, width: float = 10.4, height: float = 6.6
) -> Figure:
    """A printable phase-II control-chart form: frozen limits drawn, empty plotting space.

    ``plan`` is a :class:`~studykit.stats.phase2.Phase2Plan`. Each column is one subgroup to be
    plotted by hand; a table under the charts has rows for date, time, operator and values.
    """
    panels = [("location", plan.location_center, plan.location_lcl, plan.location_ucl)]
    if plan.dispersion_center is not None:
        panels.append(
            ("dispersion", plan.dispersion_center, plan.dispersion_lcl, plan.dispersion_ucl)
        )
    kind = plan.kind
    with theme.matplotlib_context():
        fig = Figure(figsize=(width, height), layout="constrained")
        axes = fig.subplots(len(panels), 1, squeeze=False)[:, 0]
        for ax, (part, cl, lcl, ucl) in zip(axes, panels, strict=True):
            if cl is None:
                ax.text(
                    0.5,
                    0.5,
                    "Limits depend on each subgroup's size: compute them from the "
                    "frozen centre with the plan file",
                    ha="center",
                    va="center",
                    transform=ax.transAxes,
                    fontsize=9,
                )
                ax.set_axis_off()
                continue
            lo = lcl if lcl is not None else cl - (ucl - cl)
            span = (ucl - lo) if ucl is not None else abs(cl) or 1.0
            bottom = lo - 0.35 * span
            if part == "dispersion" and lo >= 0:
                bottom = max(0.0, bottom) - 0.02 * span  # ranges and deviations are >= 0
            ax.set_ylim(bottom, (ucl if ucl is not None else cl) + 0.35 * span)
            ax.set_xlim(0.5, n_columns + 0.5)
            for val, role, text in (
                (ucl, "control_limit", "UCL"),
                (cl, "centre_line", "CL"),
                (lcl, "control_limit", "LCL"),
            ):
                hline(ax, val, role, text, n_columns)
            ax.set_xticks(range(1, n_columns + 1))
            ax.tick_params(axis="x", labelsize=7)
            ax.grid(True, which="both", color=theme.RULE, linewidth=0.5)
            ax.minorticks_on()
            ax.grid(True, which="minor", axis="y", color=theme.RULE, linewidth=0.3)
            name = (
                _LOCATION_NAMES.get(kind, "Value")
                if part == "location"
                else _DISPERSION_NAMES.get(kind, "Dispersion")
            )
            tidy_axes(ax, name, name + (f" [{plan.unit}]" if plan.unit else ""))
        axes[-1].set_xlabel("Subgroup number (write date and time in the table below)")
    return fig
