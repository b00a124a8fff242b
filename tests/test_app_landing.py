"""The landing view of the workbook on a study: what is built and sent to the page at start.

The page fetches and builds every widget model the kernel made, so the landing view makes only
the step it opens on (with its chart), and HTML boxes share one style model.
"""

from __future__ import annotations

import shutil
import sys

import ipywidgets as widgets
import pytest
from jupyter_bokeh.widgets import BokehModel

from studykit.app.session import demo_study_path
from studykit.app.shell import build_workbook, release_free_memory
from studykit.app.widgets import html_box, shared_html_style


@pytest.fixture
def study_path(tmp_path):
    path = tmp_path / "pilot.study"
    shutil.copy(demo_study_path(), path)
    return path


def _models() -> list:
    from ipywidgets.widgets.widget import _instances

    return [w for w in _instances.values() if w.comm is not None]


def test_landing_builds_only_the_opening_step_with_its_chart(study_path):
    widgets.Widget.close_all()
    wb = build_workbook(study_path)
    assert not [m for m in wb.context.messages.messages if m[0] == "error"]
    assert wb.current == "limits"
    assert set(wb._built) == {"limits"}  # not the upload step the page does not show
    # the limits step shows the overview itself: the shell made no second one below it
    assert wb._overview_panel is None
    assert wb._overview_card.layout.display == "none"
    charts = [m for m in _models() if isinstance(m, BokehModel)]
    assert len(charts) == 1  # the overview chart, drawn once
    overview = wb.step("limits").overview
    assert overview.chart.box.children[0] is charts[0]
    assert len(overview.chart.source.data["name"]) >= 5  # one row per analysed characteristic
    # a later step is built when first opened, and the shell's overview card then appears
    wb.select("stability")
    assert set(wb._built) == {"limits", "stability"}
    assert wb._overview_panel is not None
    assert wb._overview_card.layout.display == ""


def test_a_study_that_cannot_be_opened_starts_on_the_upload_step(tmp_path):
    wb = build_workbook(tmp_path / "gone.study")
    assert wb.current == "intake"
    assert set(wb._built) == {"intake"}
    errors = [m for m in wb.context.messages.messages if m[0] == "error"]
    assert errors and "gone.study" in errors[0][1]


def test_html_boxes_share_one_style_model_and_a_closed_one_is_replaced():
    a, b = html_box("a"), html_box("b", "sk-x")
    assert a.style is b.style is shared_html_style()
    assert "sk-x" in b._dom_classes
    a.style.close()
    c = html_box("c")
    assert c.style is not a.style and c.style.comm is not None
    assert widgets.HTML("plain").style is not c.style  # other HTML widgets keep their own


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc malloc_trim")
def test_release_free_memory_trims_the_heap_on_linux():
    assert release_free_memory() is True
