"""The shared palette: published colours, contrast (WCAG 2.1), shapes that do not rely on colour."""

from __future__ import annotations

import io

import pytest

from studykit import theme
from studykit.errors import StudyInputError

# Okabe & Ito, "Color Universal Design", J*FLY 2008; RGB triplets as reprinted in
# B. Wong, Nature Methods 8:441 (2011), Fig. 2 (from memory).
PUBLISHED_OKABE_ITO = {
    "black": (0, 0, 0),
    "orange": (230, 159, 0),
    "sky_blue": (86, 180, 233),
    "bluish_green": (0, 158, 115),
    "yellow": (240, 228, 66),
    "blue": (0, 114, 178),
    "vermillion": (213, 94, 0),
    "reddish_purple": (204, 121, 167),
}


def rgb(hex_color):
    h = hex_color.lstrip("#")
    return tuple(int(h[i : i + 2], 16) for i in (0, 2, 4))


def test_palette_matches_published_values():
    assert {k: rgb(v) for k, v in theme.OKABE_ITO.items()} == PUBLISHED_OKABE_ITO


def test_contrast_ratio_follows_wcag_definition():
    # WCAG 2.1, definition of contrast ratio: black on white is 21:1, a colour on itself 1:1
    assert theme.contrast_ratio("#000000", "#FFFFFF") == pytest.approx(21.0)
    assert theme.contrast_ratio("#0072B2", "#0072B2") == pytest.approx(1.0)
    # #767676 is the lightest grey that reaches 4.5:1 on white (widely quoted; from memory)
    assert theme.contrast_ratio("#767676", "#FFFFFF") == pytest.approx(4.54, abs=0.01)
    assert theme.contrast_ratio("#777777", "#FFFFFF") < 4.5


@pytest.mark.parametrize("role", sorted(theme.ROLES))
def test_every_chart_role_reaches_3_to_1_on_white(role):
    # WCAG 2.1 SC 1.4.11 (non-text contrast): graphics needed to read a chart >= 3:1
    assert theme.contrast_ratio(theme.ROLES[role].color, theme.PAPER) >= 3.0


@pytest.mark.parametrize("name", sorted(theme.VERDICTS))
def test_verdict_text_reaches_4_5_to_1_on_its_background(name):
    # WCAG 2.1 SC 1.4.3 (contrast minimum) for normal-size text
    v = theme.VERDICTS[name]
    assert theme.contrast_ratio(v.text_color, v.background) >= 4.5
    assert v.symbol and v.label  # never colour alone


def test_text_colours_reach_4_5_to_1():
    for fg in (theme.INK, theme.INK_SOFT):
        for bg in (theme.PAPER, theme.PANEL):
            assert theme.contrast_ratio(fg, bg) >= 4.5


def test_meaning_never_rests_on_colour_alone():
    points = [r for r in theme.ROLES.values() if r.marker]
    assert len({r.marker for r in points}) == len(points)
    limit_lines = ["centre_line", "control_limit", "warning_limit", "spec_limit", "target"]
    assert len({theme.ROLES[k].line_dash for k in limit_lines}) == len(limit_lines)
    assert len({theme.ROLES[k].color for k in limit_lines}) == len(limit_lines)


def test_unknown_role_names_the_known_ones():
    with pytest.raises(
        StudyInputError, match=r"`role` \('nope'\) is not a chart role.*control_limit"
    ):
        theme.bokeh_line_kwargs("nope")
    with pytest.raises(StudyInputError, match="not a known role"):
        theme.color("nope")


def test_matplotlib_style_draws_every_role():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    with theme.matplotlib_context():
        assert matplotlib.rcParams["pdf.fonttype"] == 42
        fig, ax = plt.subplots(figsize=(4, 2))
        for i, name in enumerate(
            ["centre_line", "control_limit", "warning_limit", "spec_limit", "target", "fit"]
        ):
            ax.axhline(i, **theme.mpl_line_kwargs(name))
        for name in ("data", "signal", "excluded", "secondary"):
            ax.scatter([1, 2], [1, 2], **theme.mpl_marker_kwargs(name))
        buf = io.BytesIO()
        fig.savefig(buf, format="png")
        plt.close(fig)
    assert buf.getvalue()[:4] == b"\x89PNG"


def test_bokeh_helpers_build_a_valid_figure():
    from bokeh.embed import json_item
    from bokeh.plotting import figure

    fig = figure()
    for name in ("centre_line", "control_limit", "target"):
        fig.line([1, 2], [1, 1], **theme.bokeh_line_kwargs(name))
    for name in ("data", "signal", "excluded"):
        fig.scatter([1, 2], [1, 2], **theme.bokeh_marker_kwargs(name))
    theme.style_bokeh_figure(fig)
    json_item(fig)  # serialises: every property value is valid
    assert theme.bokeh_theme() is not None


# --- the workbook frame (issue 15 item 4): our own palette, checked for contrast ----------------
# WCAG 2.1 SC 1.4.3: text at least 4.5:1 on its background; SC 1.4.11 and WCAG 2.2 SC 2.4.13:
# a focus indicator at least 3:1 against what surrounds it.
FRAME_BACKGROUNDS = ("PAPER", "PANEL", "PAGE", "TINT")


@pytest.mark.parametrize("text", ["INK", "INK_SOFT", "ACCENT_DEEP"])
@pytest.mark.parametrize("background", FRAME_BACKGROUNDS)
def test_frame_text_reaches_4_5_to_1(text, background):
    assert theme.contrast_ratio(getattr(theme, text), getattr(theme, background)) >= 4.5


def test_text_on_the_accent_and_done_steps_reaches_4_5_to_1():
    # the current step and primary buttons: white on the accent blue
    assert theme.contrast_ratio(theme.PAPER, theme.ACCENT) >= 4.5
    # a done step: the pass verdict's text colour on white
    assert theme.contrast_ratio(theme.VERDICTS["pass"].text_color, theme.PAPER) >= 4.5


@pytest.mark.parametrize("background", [*FRAME_BACKGROUNDS, "ACCENT"])
def test_focus_ring_reaches_3_to_1_on_every_frame_colour(background):
    bg = getattr(theme, background)
    # the ring is two colours: at least one of them stands out 3:1 on every background
    assert (
        max(theme.contrast_ratio(theme.FOCUS, bg), theme.contrast_ratio(theme.FOCUS_HALO, bg))
        >= 3.0
    )


def test_frame_colours_are_tinted_from_the_chart_palette():
    # every neutral of the frame leans to the palette's blue: blue channel above red
    for name in ("INK", "INK_SOFT", "RULE", "RULE_SOFT", "PANEL", "PAGE", "TINT", "EXCLUDED_GREY"):
        r, _g, b = rgb(getattr(theme, name))
        assert b > r, name
    assert theme.ACCENT == theme.OKABE_ITO["blue"]


def test_the_style_sheet_uses_only_theme_colours_and_has_a_focus_ring():
    import re

    from studykit.app.widgets import CSS

    known = {
        v.upper()
        for k, v in vars(theme).items()
        if k.isupper() and isinstance(v, str) and v.startswith("#")
    }
    known |= {v.upper() for v in theme.OKABE_ITO.values()}
    for v in theme.VERDICTS.values():
        known |= {v.color.upper(), v.background.upper(), v.text_color.upper()}
    used = {h.upper() for h in re.findall(r"#[0-9A-Fa-f]{6}\b", CSS)}
    assert used and used <= known, used - known
    header = re.search(r"\.sk-header \{\{?([^}]*)\}", CSS).group(1)
    assert f"background: {theme.PAPER}" in header  # a light header, no dark bar
    assert ":focus-visible" in CSS and f"outline: 3px solid {theme.FOCUS}" in CSS
    assert "border-bottom: 3px" not in CSS  # no underlined tabs
