"""Run rules (studykit.stats.rules).

Rule definitions checked here are Nelson's eight tests (Nelson, L. S. 1984, "The Shewhart control
chart -- tests for special causes", J. Quality Technology 16(4):237-239) and the Western Electric
set (Western Electric Statistical Quality Control Handbook, 1956), with the wording and parameters
reproduced in tests/reference/check_values.md ("Run rules"). Zones: C within 1 sigma, B 1-2 sigma,
A 2-3 sigma. Conventions that the literature leaves open (points on the centre line or on a zone
boundary, ties, missing points, merging) are the module's documented choices, "common practice,
no source".

The vectorised implementation is checked against ``reference_evaluate`` below: a plain-Python,
point-by-point restatement of the same definitions (one loop per rule, windows checked
literally), on hypothesis-generated data for every rule and parameter.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from studykit.errors import StudyInputError
from studykit.stats.rules import (
    NELSON,
    RULE_IDS,
    WESTERN_ELECTRIC,
    Rule,
    Signal,
    evaluate,
    parse_rules,
)

# ---------------------------------------------------------------------------------------------
# plain-Python reference: literal definitions, no cleverness


def _level(value, i):
    if value is None:
        return None
    if isinstance(value, list | tuple | np.ndarray):
        return float(value[i])
    return float(value)


def _reference_rule(rule, xs, cs, ss, lows, highs):
    """Occurrences (kind, trigger, set of points) of one rule on the kept points, in order."""
    check = _REFERENCE_CHECKS[rule.id]
    occ = []
    for i in range(len(xs)):
        occ += check(i, rule.params, xs, cs, ss, lows, highs)
    return occ


def _window(i, length):
    """The ``length`` points ending at point i, or None before there are that many."""
    return range(i - length + 1, i + 1) if i >= length - 1 else None


def _ref_beyond_limits(i, p, xs, cs, ss, lows, highs):
    upper = cs[i] + p["sigmas"] * ss[i] if highs[i] is None else highs[i]
    lower = cs[i] - p["sigmas"] * ss[i] if lows[i] is None else lows[i]
    return [
        (kind, i, {i}) for kind, out in (("above", xs[i] > upper), ("below", xs[i] < lower)) if out
    ]


def _ref_run(i, p, xs, cs, ss, lows, highs):
    window = _window(i, p["length"])
    if window is None:
        return []
    out = []
    if all(xs[j] > cs[j] for j in window):
        out.append(("above", i, set(window)))
    if all(xs[j] < cs[j] for j in window):
        out.append(("below", i, set(window)))
    return out


def _ref_trend(i, p, xs, cs, ss, lows, highs):
    window = _window(i, p["length"])
    if window is None:
        return []
    steps = [xs[j + 1] - xs[j] for j in window[:-1]]
    out = []
    if all(d > 0 for d in steps):
        out.append(("up", i, set(window)))
    if all(d < 0 for d in steps):
        out.append(("down", i, set(window)))
    return out


def _ref_alternation(i, p, xs, cs, ss, lows, highs):
    window = _window(i, p["length"])
    if window is None:
        return []
    steps = [xs[j + 1] - xs[j] for j in window[:-1]]
    ok = all(d != 0 for d in steps) and all(
        (steps[k] > 0) != (steps[k + 1] > 0) for k in range(len(steps) - 1)
    )
    return [("alternating", i, set(window))] if ok else []


def _ref_zone(i, p, xs, cs, ss, lows, highs):
    k, m, sig = p["count"], p["window"], p["sigmas"]
    window = range(max(0, i - m + 1), i + 1)
    out = []
    for kind, inside in (
        ("above", lambda j: xs[j] > cs[j] + sig * ss[j]),
        ("below", lambda j: xs[j] < cs[j] - sig * ss[j]),
    ):
        members = {j for j in window if inside(j)}
        if inside(i) and len(members) >= k:
            out.append((kind, i, members, set(window)))
    return out


def _ref_hugging(i, p, xs, cs, ss, lows, highs):
    window, sig = _window(i, p["length"]), p["sigmas"]
    if window is None:
        return []
    if all(cs[j] - sig * ss[j] <= xs[j] <= cs[j] + sig * ss[j] for j in window):
        return [("inside", i, set(window))]
    return []


def _ref_mixture(i, p, xs, cs, ss, lows, highs):
    window, sig = _window(i, p["length"]), p["sigmas"]
    if window is None:
        return []
    up = [xs[j] > cs[j] + sig * ss[j] for j in window]
    down = [xs[j] < cs[j] - sig * ss[j] for j in window]
    if not all(a or b for a, b in zip(up, down, strict=True)):
        return []
    if not p["both_sides"]:
        return [("outside", i, set(window))]
    return [("both", i, set(window))] if any(up) and any(down) else []


#: the plain-Python check of each rule at one point
_REFERENCE_CHECKS = {
    "beyond_limits": _ref_beyond_limits,
    "run": _ref_run,
    "trend": _ref_trend,
    "alternation": _ref_alternation,
    "zone_a": _ref_zone,
    "zone_b": _ref_zone,
    "hugging": _ref_hugging,
    "mixture": _ref_mixture,
}


def _reference_groups(rule, occ):
    """Merge occurrences as documented: 'in a row' rules merge triggers on consecutive points;
    zone rules merge occurrences whose windows share a point; beyond_limits never merges."""
    groups = []  # each: [kind, points set, triggers list, window set]
    for item in occ:
        kind, t, pts = item[0], item[1], item[2]
        window = item[3] if len(item) > 3 else pts
        merged = False
        for g in reversed(groups):
            if g[0] != kind:
                continue
            if rule.id in ("zone_a", "zone_b"):
                merged = bool(g[3] & window)
            elif rule.id != "beyond_limits":
                merged = g[2][-1] == t - 1
            if merged:
                g[1] |= pts
                g[2].append(t)
                g[3] |= window
            break
        if not merged:
            groups.append([kind, set(pts), [t], set(window)])
    return groups


def reference_evaluate(points, *, center, sigma, lcl=None, ucl=None, rules="nelson"):
    """(rule id, points, triggers) per signal, sorted as evaluate() sorts them."""
    keep = [i for i, v in enumerate(points) if not math.isnan(v)]
    xs = [float(points[i]) for i in keep]
    cs = [_level(center, i) for i in keep]
    ss = [_level(sigma, i) for i in keep]
    lows = [_level(lcl, i) for i in keep]
    highs = [_level(ucl, i) for i in keep]
    out = []
    for order, rule in enumerate(parse_rules(rules)):
        if not rule.enabled:
            continue
        for _, pts, trig, _ in _reference_groups(
            rule, _reference_rule(rule, xs, cs, ss, lows, highs)
        ):
            out.append(
                (
                    keep[trig[0]],
                    order,
                    rule.id,
                    tuple(keep[j] for j in sorted(pts)),
                    tuple(keep[t] for t in trig),
                )
            )
    out.sort(key=lambda item: (item[0], item[1]))
    return [item[2:] for item in out]


def _summary(signals):
    return [(s.rule, s.points, s.triggers) for s in signals]


def _fired(points, rule, **kw):
    kw.setdefault("center", 0.0)
    kw.setdefault("sigma", 1.0)
    return evaluate(np.asarray(points, dtype=float), rules=(rule,), **kw)


# ---------------------------------------------------------------------------------------------
# published rule sets


def test_nelson_set_has_the_published_parameters():
    # Nelson (1984) tests 1-8 as listed in tests/reference/check_values.md "Run rules"
    got = {r.id: (r.number, r.params) for r in NELSON}
    assert got == {
        "beyond_limits": (1, {"sigmas": 3.0}),
        "run": (2, {"length": 9}),
        "trend": (3, {"length": 6}),
        "alternation": (4, {"length": 14}),
        "zone_a": (5, {"count": 2, "window": 3, "sigmas": 2.0}),
        "zone_b": (6, {"count": 4, "window": 5, "sigmas": 1.0}),
        "hugging": (7, {"length": 15, "sigmas": 1.0}),
        "mixture": (8, {"length": 8, "sigmas": 1.0, "both_sides": True}),
    }
    assert tuple(r.id for r in NELSON) == RULE_IDS


def test_western_electric_set_has_the_published_parameters():
    # Western Electric handbook (1956) as listed in tests/reference/check_values.md: one beyond 3 sigma; two of three
    # beyond 2 sigma; four of five beyond 1 sigma (same side); eight in a row on one side
    got = {r.id: r.params for r in WESTERN_ELECTRIC}
    assert got == {
        "beyond_limits": {"sigmas": 3.0},
        "zone_a": {"count": 2, "window": 3, "sigmas": 2.0},
        "zone_b": {"count": 4, "window": 5, "sigmas": 1.0},
        "run": {"length": 8},
    }


# ---------------------------------------------------------------------------------------------
# each rule at its exact boundary


def test_beyond_limits_boundary():
    # Nelson test 1: one point beyond 3 sigma; a point exactly on the limit is not beyond it
    # (module convention: boundaries belong to the inner zone)
    assert _fired([0.0, 3.0, -3.0], Rule.beyond_limits()) == ()
    sig = _fired([0.0, 3.0001, -3.0001], Rule.beyond_limits())
    assert [(s.points, s.trigger) for s in sig] == [((1,), 1), ((2,), 2)]
    assert sig[0].text == "Point 2 above the upper control limit (centre + 3 sigma)"
    assert sig[1].text == "Point 3 below the lower control limit (centre - 3 sigma)"


def test_beyond_limits_uses_given_limits():
    # an LCL floored at 0 (e.g. a range chart) replaces centre - 3 sigma for rule 1 only
    sig = _fired([1.0, -0.5, 2.0], Rule.beyond_limits(), center=1.0, sigma=1.0, lcl=0.0)
    assert [s.points for s in sig] == [(1,)]
    assert sig[0].text == "Point 2 below the lower control limit"
    # no upper limit at all
    assert _fired([10.0], Rule.beyond_limits(), ucl=np.inf) == ()
    # per-point limits
    sig = _fired([2.0, 2.0], Rule.beyond_limits(), ucl=[1.5, 2.5])
    assert [s.points for s in sig] == [(0,)]


def test_run_boundary_nine():
    # Nelson test 2: nine points in a row on one side. 8 do not fire, 9 do.
    assert _fired([0.5] * 8, Rule.run()) == ()
    sig = _fired([0.5] * 9, Rule.run())
    assert _summary(sig) == [("run", tuple(range(9)), (8,))]
    assert sig[0].text == "9 points in a row above the centre line (points 1-9)"
    assert _summary(_fired([-0.5] * 9, Rule.run())) == [("run", tuple(range(9)), (8,))]


def test_run_western_electric_eight():
    # Western Electric: eight in a row on one side
    assert _fired([0.5] * 7, Rule.run(8)) == ()
    assert len(_fired([0.5] * 8, Rule.run(8))) == 1
    assert [s.rule for s in evaluate([0.5] * 8, center=0, sigma=1, rules="western_electric")] == [
        "run"
    ]
    assert evaluate([0.5] * 8, center=0, sigma=1, rules="nelson") == ()


def test_point_on_centre_line_breaks_a_run():
    # module convention (common practice, no source): a point on the centre line is on neither side
    x = [0.5] * 5 + [0.0] + [0.5] * 5
    assert _fired(x, Rule.run()) == ()
    assert len(_fired(x[:5] + [0.1] + x[6:], Rule.run())) == 1


def test_trend_boundary_six_points_five_increases():
    # Nelson test 3: six points in a row steadily increasing or decreasing = 6 points, 5 steps
    assert _fired([1, 2, 3, 4, 5], Rule.trend()) == ()
    sig = _fired([1, 2, 3, 4, 5, 6], Rule.trend())
    assert _summary(sig) == [("trend", (0, 1, 2, 3, 4, 5), (5,))]
    assert sig[0].text == "6 points in a row steadily increasing (points 1-6)"
    sig = _fired([6, 5, 4, 3, 2, 1], Rule.trend())
    assert sig[0].text == "6 points in a row steadily decreasing (points 1-6)"
    # configurable to 7 points
    assert _fired([1, 2, 3, 4, 5, 6], Rule.trend(7)) == ()
    assert len(_fired([1, 2, 3, 4, 5, 6, 7], Rule.trend(7))) == 1


def test_tie_breaks_a_trend():
    # module convention: equal neighbours are neither up nor down
    assert _fired([1, 2, 3, 3, 4, 5, 6], Rule.trend()) == ()


def test_alternation_boundary_fourteen():
    # Nelson test 4: fourteen points in a row alternating up and down (13 steps)
    zigzag = [(-1) ** i * 0.5 for i in range(14)]
    assert _fired(zigzag[:13], Rule.alternation()) == ()
    sig = _fired(zigzag, Rule.alternation())
    assert _summary(sig) == [("alternation", tuple(range(14)), (13,))]
    assert sig[0].text == "14 points in a row alternating up and down (points 1-14)"
    tied = zigzag[:7] + [zigzag[6]] + zigzag[7:]
    assert _fired(tied, Rule.alternation()) == ()


def test_zone_a_two_of_three():
    # Nelson test 5: two out of three points in a row in zone A or beyond, same side
    assert _summary(_fired([2.5, 0.0, 2.5], Rule.zone_a())) == [("zone_a", (0, 2), (2,))]
    assert _fired([2.5, 0.0, 0.0, 2.5], Rule.zone_a()) == ()  # four points apart
    assert _fired([2.5, 0.0, -2.5], Rule.zone_a()) == ()  # opposite sides
    assert _fired([2.0, 2.5, 2.0], Rule.zone_a()) == ()  # exactly 2 sigma is zone B
    sig = _fired([-2.1, -2.2], Rule.zone_a())
    assert (
        sig[0].text
        == "2 of 3 points in a row more than 2 sigma below the centre line (points 1, 2)"
    )


def test_zone_b_four_of_five():
    # Nelson test 6: four out of five points in a row in zone B or beyond, same side
    assert _summary(_fired([1.5, 1.5, 0.0, 1.5, 1.5], Rule.zone_b())) == [
        ("zone_b", (0, 1, 3, 4), (4,))
    ]
    assert _fired([1.5, 1.5, 0.0, 0.0, 1.5, 1.5], Rule.zone_b()) == ()
    assert _fired([1.5, 1.5, 1.0, 1.5], Rule.zone_b()) == ()  # exactly 1 sigma is zone C


def test_k_of_m_long_window():
    # a configured zone rule, 3 of 17 beyond 1 sigma (long windows are counted another way)
    rule = Rule.zone_b(3, 17)
    x = np.zeros(18)
    x[[0, 8, 16]] = 1.5
    assert _summary(_fired(x, rule)) == [("zone_b", (0, 8, 16), (16,))]
    x = np.zeros(18)
    x[[0, 8, 17]] = 1.5
    assert _fired(x, rule) == ()


def test_hugging_fifteen():
    # Nelson test 7: fifteen points in a row in zone C, above and below the centre line
    x = [0.5, -0.5, 0.0, 1.0, -1.0] * 3
    sig = _fired(x, Rule.hugging())
    assert _summary(sig) == [("hugging", tuple(range(15)), (14,))]
    assert sig[0].text == "15 points in a row within 1 sigma of the centre line (points 1-15)"
    assert _fired(x[:14], Rule.hugging()) == ()
    assert _fired(x[:7] + [1.0001] + x[8:], Rule.hugging()) == ()


def test_mixture_eight():
    # Nelson test 8: eight points in a row on both sides of the centre line, none in zone C
    x = [1.5, -1.5] * 4
    sig = _fired(x, Rule.mixture())
    assert _summary(sig) == [("mixture", tuple(range(8)), (7,))]
    assert sig[0].text == (
        "8 points in a row more than 1 sigma from the centre line, on both sides (points 1-8)"
    )
    assert _fired(x[:7], Rule.mixture()) == ()
    assert _fired(x[:3] + [1.0] + x[4:], Rule.mixture()) == ()  # 1 sigma exactly is zone C
    assert _fired([1.5] * 8, Rule.mixture()) == ()  # one side only
    assert len(_fired([1.5] * 8, Rule.mixture(both_sides=False))) == 1


# ---------------------------------------------------------------------------------------------
# signals: merging, missing points, labels, ordering


def test_long_run_is_one_signal_with_every_trigger():
    sig = _fired([0.5] * 12, Rule.run())
    assert len(sig) == 1
    assert sig[0].points == tuple(range(12))
    assert sig[0].trigger == 8
    assert sig[0].triggers == (8, 9, 10, 11)
    assert sig[0].text == "12 points in a row above the centre line (points 1-12)"


def test_runs_on_both_sides_are_separate_signals():
    sig = _fired([0.5] * 9 + [-0.5] * 9, Rule.run())
    assert _summary(sig) == [("run", tuple(range(9)), (8,)), ("run", tuple(range(9, 18)), (17,))]


def test_zone_cluster_is_one_signal():
    sig = _fired([2.5, 0, 2.5, 0, 2.5, 0, 0, 0, 2.5, 2.5], Rule.zone_a())
    assert _summary(sig) == [("zone_a", (0, 2, 4), (2, 4)), ("zone_a", (8, 9), (9,))]
    assert (
        sig[0].text
        == "2 of 3 points in a row more than 2 sigma above the centre line (points 1, 3, 5)"
    )


def test_missing_points_are_skipped():
    # module convention: NaN points are left out; the rest keep their positions
    x = [0.5] * 4 + [np.nan] + [0.5] * 5
    sig = _fired(x, Rule.run())
    assert _summary(sig) == [("run", (0, 1, 2, 3, 5, 6, 7, 8, 9), (9,))]
    assert sig[0].text == "9 points in a row above the centre line (points 1-4, 6-10)"
    assert _fired([np.nan] * 5, Rule.run()) == ()
    assert evaluate([], center=0, sigma=1) == ()


def test_labels_in_text():
    sig = _fired([0.5] * 9, Rule.run(), labels=[f"S{i}" for i in range(9)])
    assert sig[0].text == "9 points in a row above the centre line (points S0 to S8)"
    sig = _fired([5.0], Rule.beyond_limits(), labels=["lot 7"])
    assert sig[0].text == "Point lot 7 above the upper control limit (centre + 3 sigma)"


def test_labels_with_missing_points():
    x = [2.5, np.nan, 2.5, 0.0]
    sig = _fired(x, Rule.zone_a(), labels=["a", "b", "c", "d"])
    assert _summary(sig) == [("zone_a", (0, 2), (2,))]
    assert (
        sig[0].text
        == "2 of 3 points in a row more than 2 sigma above the centre line (points a, c)"
    )


def test_signals_sorted_by_trigger_then_rule_order():
    x = [0.5, 0.2, 0.4, 0.9, 0.1, 0.3, 0.6, 0.7, 0.8, 3.4]
    sig = evaluate(x, center=0.0, sigma=1.0)
    assert [(s.rule, s.trigger) for s in sig] == [("run", 8), ("beyond_limits", 9), ("trend", 9)]
    assert [s.number for s in sig] == [2, 1, 3]


def test_disabled_rule_is_skipped():
    x = [0.5] * 9
    assert evaluate(x, center=0, sigma=1, rules=(Rule.run(enabled=False),)) == ()
    assert evaluate(x, center=0, sigma=1, rules="nelson:-run") == ()


def test_signal_to_dict_is_json_safe():
    sig = _fired([0.5] * 10, Rule.run())[0]
    d = sig.to_dict()
    assert json.loads(json.dumps(d)) == {
        "rule": "run",
        "number": 2,
        "points": list(range(10)),
        "trigger": 8,
        "triggers": [8, 9],
        "text": "10 points in a row above the centre line (points 1-10)",
    }
    assert type(d["points"][0]) is int
    assert Signal("run", 2, (1, 2), 2, "x").triggers == (2,)
    rd = Rule.zone_b(3, 4).to_dict()
    assert json.loads(json.dumps(rd))["parameters"] == {"count": 3, "window": 4, "sigmas": 1.0}


# ---------------------------------------------------------------------------------------------
# rule text and Rule objects


def test_parse_rule_sets_and_lists():
    assert parse_rules("nelson") == NELSON
    assert parse_rules("Western_Electric") == tuple(
        sorted(WESTERN_ELECTRIC, key=lambda r: RULE_IDS.index(r.id))
    )
    assert [r.id for r in parse_rules("limits_only")] == ["beyond_limits"]
    assert [r.id for r in parse_rules("1, 2,5")] == ["beyond_limits", "run", "zone_a"]
    assert [r.id for r in parse_rules("beyond_limits,run")] == ["beyond_limits", "run"]
    assert parse_rules(Rule.run(7)) == (Rule.run(7),)
    rules = (Rule.run(7), Rule.run(9))
    assert parse_rules(rules) == rules


def test_parse_rule_parameters():
    rules = {r.id: r for r in parse_rules("nelson:run=8,trend=7,-4")}
    assert rules["run"].param("length") == 8
    assert rules["trend"].param("length") == 7
    assert rules["alternation"].enabled is False
    assert rules["zone_a"] == Rule.zone_a()
    (zb,) = parse_rules("zone_b=3/4")
    assert zb.params == {"count": 3, "window": 4, "sigmas": 1.0}
    (za,) = parse_rules("zone_a.sigmas=2.5")
    assert za.param("sigmas") == 2.5
    (mx,) = parse_rules("mixture.both_sides=no")
    assert mx.param("both_sides") is False
    (bl,) = parse_rules("1=2.5")
    assert bl.param("sigmas") == 2.5
    we = {r.id: r for r in parse_rules("western_electric;run")}
    assert we["run"].param("length") == 8  # naming a rule keeps the set's parameters


@pytest.mark.parametrize(
    ("spec", "message"),
    [
        ("", r"`rules` \(''\) is empty"),
        ("nelsen", r"'nelsen' is not a rule; use a set \(nelson"),
        ("9", r"'9' is not a rule"),
        ("run=eight", r"rule `run` parameter `length` \('eight'\) must be a number"),
        ("run=8.5", r"rule `run` parameter `length` \(8.5\) must be a whole number"),
        ("run=1", r"rule `run` parameter `length` \(1\) must be at least 2"),
        ("trend=2", r"rule `trend` parameter `length` \(2\) must be at least 3"),
        ("zone_a=4/3", r"`count` \(4\) must not exceed `window` \(3\)"),
        ("zone_a.sigma=2", r"rule `zone_a` has no parameter 'sigma'; its parameters are count"),
        ("run.length", r"'run.length' needs '=value'"),
        ("run=", r"'run=' needs a value"),
        ("1=-3", r"`sigmas` \(-3.0\) must be a positive finite number"),
        ("mixture.both_sides=maybe", r"`both_sides` \('maybe'\) must be true or false"),
    ],
)
def test_parse_rules_errors(spec, message):
    with pytest.raises(StudyInputError, match=message):
        parse_rules(spec)


def test_rule_objects_validate():
    with pytest.raises(
        StudyInputError, match=r"rule id 'runs' is unknown; use one of beyond_limits"
    ):
        Rule("runs")
    with pytest.raises(StudyInputError, match=r"rule `run` is Nelson test 2, not 3"):
        Rule("run", 3)
    with pytest.raises(StudyInputError, match=r"rule `run` has no parameter 'len'"):
        Rule("run", parameters={"len": 3})
    with pytest.raises(StudyInputError, match=r"`length` \(True\) must be a whole number"):
        Rule.run(True)
    with pytest.raises(StudyInputError, match=r"must be a rule text such as 'nelson'"):
        parse_rules(42)
    with pytest.raises(StudyInputError, match=r"Rule objects or rule texts; got 3"):
        parse_rules([Rule.run(), 3])
    assert parse_rules([Rule.run(7), "1,2"]) == (Rule.run(7), Rule.beyond_limits(), Rule.run())
    assert parse_rules(()) == ()
    assert evaluate([9.0] * 10, center=0, sigma=1, rules=()) == ()
    r = Rule.run(8)
    assert r.with_parameters(length=10).param("length") == 10
    assert r.with_enabled(False).enabled is False
    assert r.description == "8 points in a row on the same side of the centre line"
    assert Rule("run", parameters={"length": 8}) == r
    assert hash(r) == hash(Rule.run(8))


def test_evaluate_input_errors():
    with pytest.raises(StudyInputError, match=r"`sigma` \(0.0\) must be greater than 0"):
        evaluate([1.0, 2.0], center=0, sigma=0.0)
    with pytest.raises(StudyInputError, match=r"`sigma` \(-1.0\) must be greater than 0"):
        evaluate([1.0, 2.0], center=0, sigma=[1.0, -1.0])
    with pytest.raises(
        StudyInputError, match=r"`center` must be a number or one number per point \(2\)"
    ):
        evaluate([1.0, 2.0], center=[0, 0, 0], sigma=1)
    with pytest.raises(StudyInputError, match=r"`center` \(nan\) at position 1 must be finite"):
        evaluate([1.0, 2.0], center=[0, np.nan], sigma=1)
    # a missing point may have a missing centre or sigma
    assert evaluate([1.0, np.nan], center=[0, np.nan], sigma=[1, np.nan]) == ()
    with pytest.raises(
        StudyInputError, match=r"`points` has an infinite value \(inf\) at position 1"
    ):
        evaluate([1.0, np.inf], center=0, sigma=1)
    with pytest.raises(StudyInputError, match=r"`points` must be one-dimensional"):
        evaluate([[1.0, 2.0]], center=0, sigma=1)
    with pytest.raises(StudyInputError, match=r"`points` must be numbers"):
        evaluate(["a", "b"], center=0, sigma=1)
    with pytest.raises(StudyInputError, match=r"`lcl` \(2.0\) must be less than `ucl` \(1.0\)"):
        evaluate([1.0], center=0, sigma=1, lcl=2.0, ucl=1.0)
    with pytest.raises(StudyInputError, match=r"`ucl` \(nan\) must be a number \(use -inf/inf"):
        evaluate([1.0], center=0, sigma=1, ucl=np.nan)
    with pytest.raises(StudyInputError, match=r"`labels` has 1 entries but `points` has 2"):
        evaluate([1.0, 2.0], center=0, sigma=1, labels=["a"])


# ---------------------------------------------------------------------------------------------
# vectorised == plain-Python reference, on generated data

SIGMAS = st.sampled_from([0.5, 1.0, 1.5, 2.0, 3.0])


@st.composite
def rules_strategy(draw):
    """A tuple of 1-3 rules with generated parameters (every id and parameter is reachable)."""
    made = []
    for _ in range(draw(st.integers(1, 3))):
        rid = draw(st.sampled_from(RULE_IDS))
        enabled = draw(st.sampled_from([True, True, True, False]))
        if rid == "beyond_limits":
            made.append(Rule.beyond_limits(draw(SIGMAS), enabled=enabled))
        elif rid == "run":
            made.append(Rule.run(draw(st.integers(2, 10)), enabled=enabled))
        elif rid == "trend":
            made.append(Rule.trend(draw(st.integers(3, 7)), enabled=enabled))
        elif rid == "alternation":
            made.append(Rule.alternation(draw(st.integers(3, 10)), enabled=enabled))
        elif rid in ("zone_a", "zone_b"):
            window = draw(st.integers(1, 6) | st.integers(15, 20))  # short and long windows
            count = draw(st.integers(1, window))
            made.append(
                Rule(
                    rid,
                    parameters={"count": count, "window": window, "sigmas": draw(SIGMAS)},
                    enabled=enabled,
                )
            )
        elif rid == "hugging":
            made.append(Rule.hugging(draw(st.integers(2, 10)), draw(SIGMAS), enabled=enabled))
        else:
            made.append(
                Rule.mixture(
                    draw(st.integers(2, 8)), draw(SIGMAS), draw(st.booleans()), enabled=enabled
                )
            )
    return tuple(made)


@st.composite
def series(draw, max_len=80):
    """Integer-valued points built from segments (noise, steady trends, zigzags, constant stretches,
    far-out stretches) so that every pattern and every exact boundary actually occurs; some NaN."""
    values: list[float] = []
    target = draw(st.integers(0, max_len))
    while len(values) < target:
        kind = draw(st.sampled_from(["noise", "up", "down", "zigzag", "flat", "wide"]))
        n = draw(st.integers(1, 16))
        start = draw(st.integers(-6, 6))
        if kind == "noise":
            seg = draw(st.lists(st.integers(-7, 7), min_size=n, max_size=n))
        elif kind == "up":
            seg = [start + i for i in range(n)]
        elif kind == "down":
            seg = [start - i for i in range(n)]
        elif kind == "zigzag":
            amp = draw(st.integers(1, 4))
            seg = [start + (amp if i % 2 else -amp) for i in range(n)]
        elif kind == "flat":
            seg = [start] * n
        else:
            seg = [draw(st.sampled_from([-6, -4, -3, 3, 4, 6])) for _ in range(n)]
        values.extend(float(v) for v in seg)
    if values and draw(st.booleans()):
        for i in draw(st.lists(st.integers(0, len(values) - 1), max_size=5)):
            values[i] = math.nan
    return values


@settings(max_examples=150, deadline=None)
@given(
    x=series(), rules=rules_strategy(), center=st.integers(-2, 2), sigma=st.sampled_from([1.0, 2.0])
)
def test_matches_reference_scalar_levels(x, rules, center, sigma):
    got = _summary(evaluate(x, center=center, sigma=sigma, rules=rules))
    assert got == reference_evaluate(x, center=center, sigma=sigma, rules=rules)


@settings(max_examples=80, deadline=None)
@given(data=st.data(), x=series(max_len=50), rules=rules_strategy())
def test_matches_reference_per_point_levels(data, x, rules):
    n = len(x)
    center = data.draw(st.lists(st.integers(-2, 2).map(float), min_size=n, max_size=n))
    sigma = data.draw(st.lists(st.sampled_from([1.0, 2.0, 3.0]), min_size=n, max_size=n))
    lcl = data.draw(st.none() | st.lists(st.integers(-9, -1).map(float), min_size=n, max_size=n))
    ucl = data.draw(st.none() | st.just(4.0) | st.just(np.inf))
    got = _summary(evaluate(x, center=center, sigma=sigma, lcl=lcl, ucl=ucl, rules=rules))
    assert got == reference_evaluate(x, center=center, sigma=sigma, lcl=lcl, ucl=ucl, rules=rules)


@settings(max_examples=40, deadline=None)
@given(x=series(), center=st.integers(-2, 2))
def test_matches_reference_named_sets(x, center):
    for spec in ("nelson", "western_electric", "limits_only"):
        got = _summary(evaluate(x, center=center, sigma=1.0, rules=spec))
        assert got == reference_evaluate(x, center=center, sigma=1.0, rules=spec)


@pytest.mark.parametrize("few", [0, 10**9])
def test_both_grouping_routes_match_reference(few):
    """Triggers are grouped in Python up to ``_FEW_TRIGGERS`` and with numpy above it, and k of
    m is searched on charts up to ``_SHORT_CHART`` points and summed on longer ones: forced
    down each route, every rule set still matches the plain-Python reference (long runs,
    clusters near a limit and missing points included, so groups of many triggers occur)."""
    from unittest import mock

    from studykit.stats import rules as rules_module

    rng = np.random.default_rng(7)  # invented data: the routes are compared on it
    walk = np.concatenate([rng.normal(0, 1, 60), rng.normal(1.5, 0.5, 40), rng.normal(0, 1, 60)])
    zigzag = np.tile([-1.2, 1.3], 40)
    for x in (walk, zigzag, np.where(rng.random(160) < 0.05, np.nan, walk)):
        pts = [float(v) for v in x]
        merged = 0
        with (
            mock.patch.object(rules_module, "_FEW_TRIGGERS", few),
            mock.patch.object(rules_module, "_SHORT_CHART", few),
        ):
            for spec in ("nelson", "western_electric", "run=2,zone_b=1/2,trend=3,hugging=2"):
                got = _summary(evaluate(pts, center=0.0, sigma=1.0, rules=spec))
                assert got == reference_evaluate(pts, center=0.0, sigma=1.0, rules=spec)
                merged += sum(len(sig[2]) > 1 for sig in got)
        assert merged > 0  # each series makes groups of several triggers


# ---------------------------------------------------------------------------------------------
# invariances


@settings(max_examples=60, deadline=None)
@given(
    x=series(),
    rules=rules_strategy(),
    center=st.integers(-2, 2),
    shift=st.integers(-1000, 1000),
    power=st.integers(-6, 6),
)
def test_invariant_to_shift_and_positive_scale(x, rules, center, shift, power):
    # (x, centre, sigma) -> (a x + b, a centre + b, a sigma), a > 0: same signals. a = 2**power and
    # integer b keep the arithmetic exact, so boundary cases stay on their boundary.
    a = 2.0**power
    before = evaluate(x, center=center, sigma=2.0, rules=rules)
    after = evaluate(
        [a * v + shift for v in x], center=a * center + shift, sigma=a * 2.0, rules=rules
    )
    assert _summary(after) == _summary(before)


_FLIP = {
    "above": "below",
    "below": "above",
    "increasing": "decreasing",
    "decreasing": "increasing",
    "upper": "lower",
    "lower": "upper",
    "+": "-",
    "-": "+",
}


def _flip_words(text):
    return " ".join(_FLIP.get(w, w) for w in text.split(" "))


@settings(max_examples=60, deadline=None)
@given(x=series(), rules=rules_strategy(), center=st.integers(-2, 2))
def test_mirror_flips_the_side(x, rules, center):
    # reflecting the points about the centre line turns above into below, up into down
    before = evaluate(x, center=center, sigma=1.0, rules=rules)
    after = evaluate([2 * center - v for v in x], center=center, sigma=1.0, rules=rules)
    key = lambda s: (s.trigger, s.rule, s.points)  # noqa: E731
    before, after = sorted(before, key=key), sorted(after, key=key)
    assert _summary(after) == _summary(before)
    assert [s.text for s in after] == [_flip_words(s.text) for s in before]


# ---------------------------------------------------------------------------------------------
# false-alarm rates of an in-control process (Monte Carlo, fixed seed)


def _zigzag_numbers(n):
    """Euler zigzag numbers E_0..E_n (alternating permutations; Andre 1881, OEIS A000111) from
    the recurrence 2 E_{m+1} = sum_k C(m, k) E_k E_{m-k} (m >= 1), E_0 = E_1 = 1."""
    e = [1, 1]
    for m in range(1, n):
        e.append(sum(math.comb(m, k) * e[k] * e[m - k] for k in range(m + 1)) // 2)
    return e


def test_zigzag_numbers_known_values():
    # OEIS A000111, first terms (from memory): 1, 1, 1, 2, 5, 16, 61, 272, 1385, 7936, 50521
    assert _zigzag_numbers(10) == [1, 1, 1, 2, 5, 16, 61, 272, 1385, 7936, 50521]


def _probabilities():
    """Probability that a given point completes each rule's pattern, for i.i.d. N(0, 1) points
    (centre 0, sigma 1), derived from the rule definitions and the normal tail
    (scipy.stats.norm.sf)."""
    sf1, sf2, sf3 = stats.norm.sf(1.0), stats.norm.sf(2.0), stats.norm.sf(3.0)
    e14 = _zigzag_numbers(14)[14]
    return {
        # 2 * P(Z > 3) = 0.0027, the classic 3-sigma false-alarm rate (Montgomery, from memory)
        Rule.beyond_limits(): 2 * sf3,
        Rule.run(): 2 * 0.5**9,  # all nine on the same side
        Rule.run(8): 2 * 0.5**8,
        Rule.trend(): 2 / math.factorial(6),  # 1 rising + 1 falling order of 6 exchangeable values
        Rule.alternation(): 2 * e14 / math.factorial(14),  # alternating permutations of 14
        # trigger in zone A and at least one of the 2 before it in zone A, same side
        Rule.zone_a(): 2 * sf2 * (1 - (1 - sf2) ** 2),
        # trigger beyond 1 sigma and at least 3 of the 4 before it, same side
        Rule.zone_b(): 2 * sf1 * (4 * sf1**3 * (1 - sf1) + sf1**4),
        Rule.hugging(): (1 - 2 * sf1) ** 15,
        # all outside zone C, not all on one side (length 4 instead of 8 for a usable rate)
        Rule.mixture(4): (2 * sf1) ** 4 - 2 * sf1**4,
    }


def test_false_alarm_rates_match_theory():
    # Points whose windows do not overlap (positions L-1, 2L-1, ...) are independent Bernoulli
    # trials, so the binomial standard error applies; tolerance 4.5 standard errors.
    rng = np.random.default_rng(20240607)
    x = rng.standard_normal(700_000)
    probabilities = _probabilities()
    for rule, p in probabilities.items():
        width = max(rule.params.get("length", 1), rule.params.get("window", 1))
        triggers = np.zeros(x.size, dtype=bool)
        for s in evaluate(x, center=0.0, sigma=1.0, rules=(rule,)):
            triggers[list(s.triggers)] = True
        sample = triggers[width - 1 :: width]
        p_hat = sample.mean()
        se = math.sqrt(p * (1 - p) / sample.size)
        assert abs(p_hat - p) < 4.5 * se, (rule.id, p_hat, p, se)
