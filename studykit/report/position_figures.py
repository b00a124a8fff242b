"""Matplotlib figure of a position study, for the PDF and ``studykit position --figure``.

The builder takes a :class:`~studykit.stats.position.PositionResult` (which carries its points,
the fitted ellipse and the zone; nothing statistical is computed here) and draws the X/Y
deviations, the circular tolerance zone of diameter T around nominal and the fitted ellipse.
Parts outside the zone are marked with the signal role (colour and marker), so the figure reads
in grey scale too.
"""

from __future__ import annotations

import math

import numpy as np
from matplotlib.figure import Figure

from studykit import theme
from studykit.stats.position import PositionResult

__all__ = ["position_figure"]


def position_figure(
    result: PositionResult, *, ax=None, unit: str | None = None, size: float = 4.8
) -> Figure:
    """Scatter of (dx, dy) with the true-position zone and the fitted ellipse.

    Parameters
    ----------
    result : PositionResult
        From :func:`studykit.stats.position.position_study`.
    ax : matplotlib Axes, optional
        Draw into it; otherwise a new square figure of ``size`` inches.
    unit : str, optional
        Unit for the axis labels.
    size : float
        Figure side in inches (new figure only).

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> import numpy as np
    >>> from studykit.stats.position import position_study
    >>> rng = np.random.default_rng(0)
    >>> res = position_study(rng.normal(0, 0.02, 40), rng.normal(0, 0.03, 40), tolerance=0.2)
    >>> fig = position_figure(res)
    >>> len(fig.axes)
    1
    """
    with theme.matplotlib_context():
        if ax is None:
            fig = Figure(figsize=(size, size * 1.12), layout="constrained")
            ax = fig.add_subplot()
        else:
            fig = ax.figure
        r = result.tolerance / 2.0
        theta = np.linspace(0.0, 2.0 * math.pi, 361)
        ax.plot(
            r * np.cos(theta),
            r * np.sin(theta),
            **{
                **theme.mpl_line_kwargs("spec_limit"),
                "label": f"Position zone, diameter {result.tolerance:g}",
            },
        )
        a, b = result.ellipse_axes
        phi = math.radians(result.ellipse_angle)
        ex = a * np.cos(theta) * math.cos(phi) - b * np.sin(theta) * math.sin(phi)
        ey = a * np.cos(theta) * math.sin(phi) + b * np.sin(theta) * math.cos(phi)
        ax.plot(
            result.mean_x + ex,
            result.mean_y + ey,
            **{
                **theme.mpl_line_kwargs("fit"),
                "label": f"Fitted ellipse ({100 * result.ellipse_level:g} %)",
            },
        )
        inside = np.ones(result.n, dtype=bool)
        inside[list(result.outside)] = False
        ax.scatter(
            result.dx[inside],
            result.dy[inside],
            **{**theme.mpl_marker_kwargs("data"), "label": "Parts"},
        )
        if result.outside:
            ax.scatter(
                result.dx[~inside],
                result.dy[~inside],
                **{**theme.mpl_marker_kwargs("signal"), "label": "Outside the zone"},
            )
        ax.plot(
            [result.mean_x],
            [result.mean_y],
            linestyle="none",
            marker="+",
            markersize=12,
            color=theme.color("centre_line"),
            label="Mean position",
        )
        ax.axhline(0.0, color=theme.RULE, linewidth=0.8, zorder=0)
        ax.axvline(0.0, color=theme.RULE, linewidth=0.8, zorder=0)
        ax.set_aspect("equal", adjustable="datalim")
        from matplotlib.ticker import MaxNLocator

        ax.xaxis.set_major_locator(MaxNLocator(5))  # readable tick labels at small sizes
        ax.yaxis.set_major_locator(MaxNLocator(5))
        u = f" [{unit}]" if unit else ""
        ax.set_xlabel(f"X deviation from nominal{u}")
        ax.set_ylabel(f"Y deviation from nominal{u}")
        ax.set_title("Position against the zone", loc="left", fontweight="bold", fontsize=11)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
        ax.legend(
            loc="upper center", bbox_to_anchor=(0.5, -0.14), ncol=2, fontsize=7, frameon=False
        )
    return fig
