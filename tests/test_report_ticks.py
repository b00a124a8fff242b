"""The report's shape figure keeps its x tick labels apart: at least 0.03 inch (about a third
of a character) between neighbouring labels, measured on the rendered labels (a readability
rule of our own figures: common practice, no source)."""

from __future__ import annotations

import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg

from studykit import theme
from studykit.analysis import analyze_characteristic
from studykit.data import CharacteristicData
from studykit.report.figures import shape_figure
from studykit.study import Characteristic


def _label_boxes(ax, renderer):
    lo, hi = sorted(ax.get_xlim())
    boxes = [
        lab.get_window_extent(renderer)
        for tick, lab in zip(ax.get_xticks(), ax.xaxis.get_ticklabels(), strict=False)
        if lo <= tick <= hi and lab.get_text()
    ]
    return sorted(boxes, key=lambda b: b.x0)


@pytest.mark.parametrize(
    ("mean", "sd", "seed"),
    [
        (14.0, 0.01, 7),  # drawn as 13.975, 14.000, ... 14.125 they ran into each other
        (15.0, 0.02, 3),
        (12.0, 0.005, 5),
    ],
)
def test_shape_figure_x_labels_do_not_touch(mean, sd, seed):
    rng = np.random.default_rng(seed)
    x = mean - 3 * sd + rng.lognormal(np.log(2 * sd), 0.5, 125)
    usl = mean + 12 * sd
    res = analyze_characteristic(
        CharacteristicData("dim", "mm", x), Characteristic("dim", unit="mm", usl=usl)
    )
    fig = shape_figure(res)
    with theme.matplotlib_context():  # as the report draws it (figures.figure_image)
        fig.set_dpi(150)
        renderer = FigureCanvasAgg(fig).get_renderer()
        fig.draw(renderer)
        boxes_of = [_label_boxes(ax, renderer) for ax in fig.axes[:2]]
    for boxes in boxes_of:
        assert len(boxes) >= 3  # still a scale to read
        for left, right in zip(boxes, boxes[1:], strict=False):
            assert (right.x0 - left.x1) / 150 >= 0.03, [(b.x0, b.x1) for b in boxes]
