"""Every result class of studykit.stats: frozen, JSON-safe, a short repr, a notebook table.

One parametrised test over every subclass of :class:`studykit.stats.result.Result`. Instances are
made by running the public functions on small invented or generated samples (the numbers are not
checked here; the reference tests of each module do that) and collecting every result object in
what they return. A result class that none of the producers below makes fails the test: add a
producer for it.
"""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest

import studykit.stats as st
from studykit.stats.result import Result, json_float

#: a repr must fit on one line of a notebook (common practice, no source)
MAX_REPR = 250


def _all_classes(cls=Result):
    for sub in cls.__subclasses__():
        yield sub
        yield from _all_classes(sub)


def _produce():
    rng = np.random.default_rng(20261202)
    x = rng.normal(10.0, 0.1, 125)
    skewed = rng.lognormal(0.0, 0.4, 100)
    sub = np.repeat(np.arange(25), 5)
    out = [
        st.capability(x, lsl=9.6, usl=10.4),
        st.model_band({"normal": 1.41, "lognormal": 1.72}, 1.67),
        st.attribute_capability([2, 1, 3, 0, 2] * 5, [200] * 25),
        st.defects_per_unit([3, 1, 2, 4, 0] * 5, [10] * 25),
        st.chart_constants(5),
        st.xbar_r_chart(x, sub),
        st.p_chart([2, 1, 3, 0, 2] * 5, [200] * 25),
        st.phase1(x, sub),
        st.fit_all(skewed),
        st.box_cox(skewed),
        st.johnson(skewed),
        st.anderson_darling(x),
        st.shapiro_wilk(x),
        st.probability_plot(x),
        st.check_order(x),
        st.parts_needed(1.67, 1.33),
        st.planning_table(),
        st.position_study(rng.normal(0, 0.02, 60), rng.normal(0, 0.02, 60), tolerance=0.2),
        st.tolerance_interval(x, lsl=9.6, usl=10.4),
        st.short_gauge_study(rng.normal(10.0, 0.002, 50), reference=10.0, lsl=9.6, usl=10.4),
        st.remove_gauge_variance(
            gauge_sigma=0.02,
            gauge_df=40,
            mean=10.0,
            lsl=9.6,
            usl=10.4,
            within_sigma=0.1,
            within_df=100,
            overall_sigma=0.1,
            n=125,
        ),
        *st.parse_rules("nelson"),
    ]
    parts, appr, _ = np.meshgrid(range(10), ["A", "B", "C"], range(2), indexing="ij")
    cube = 10 + 0.1 * parts + rng.normal(0, 0.01, parts.shape)
    out.append(st.gauge_rr(cube.ravel(), parts.ravel(), appr.ravel(), lsl=9.0, usl=12.0))
    chart = st.xbar_r_chart(x, sub)
    plan = st.freeze(chart, characteristic="x", unit="mm")
    out += [plan, st.monitor(plan, x[:50], sub[:50])]
    cap = out[0]
    out.append(st.judge(cap))
    out += st.diagnose(st.capability(x[:30], lsl=9.6, usl=10.4), n_subgroups=6, threshold=1.67)
    upset = x.copy()
    upset[50:55] += 1.0  # one subgroup far off: phase I removes it
    out.append(st.phase1(upset, sub))
    # the scale phase I charts on; a caller attaches its own model object (here a text)
    out.append(
        st.ChartScale(
            name="normal_score",
            label="normal scores",
            values=np.zeros(3),
            mu=0.0,
            sigma=1.0,
            model="lognormal",
        )
    )
    return out


def _walk(obj, found, seen):
    if id(obj) in seen:
        return
    seen.add(id(obj))
    if isinstance(obj, Result):
        found.setdefault(type(obj), obj)
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        for f in dataclasses.fields(obj):
            _walk(getattr(obj, f.name), found, seen)
    elif isinstance(obj, list | tuple):
        for v in obj:
            _walk(v, found, seen)
    elif isinstance(obj, dict):
        for v in obj.values():
            _walk(v, found, seen)


@pytest.fixture(scope="module")
def instances():
    found: dict[type, Result] = {}
    _walk(_produce(), found, set())
    return found


CLASSES = sorted(_all_classes(), key=lambda c: (c.__module__, c.__name__))


def test_every_result_class_derives_from_result():
    # the stats result classes are the frozen dataclasses of studykit.stats
    import inspect

    for name in st.__all__:
        obj = getattr(st, name)
        if inspect.isclass(obj) and dataclasses.is_dataclass(obj):
            assert issubclass(obj, Result), name
    assert len(CLASSES) >= 40


def test_package_all_is_what_the_package_imports():
    # studykit/stats/__init__.py re-exports whole modules with `import *`: its __all__ literal
    # (read by type checkers) must name exactly the public names that arrive, and no module
    import types

    arrived = {
        name
        for name, value in vars(st).items()
        if not name.startswith("_")
        and not isinstance(value, types.ModuleType)
        and name != "annotations"  # from __future__
    }
    assert sorted(st.__all__) == sorted(arrived)
    assert len(st.__all__) == len(set(st.__all__))


@pytest.mark.parametrize("cls", CLASSES, ids=lambda c: c.__name__)
def test_result_class(cls, instances):
    assert cls in instances, f"no producer in this test makes a {cls.__name__}: add one"
    res = instances[cls]
    assert dataclasses.is_dataclass(res)
    field = dataclasses.fields(res)[0].name
    with pytest.raises(dataclasses.FrozenInstanceError):
        setattr(res, field, None)
    text = json.dumps(res.to_dict(), allow_nan=False)  # raises on NaN/inf
    assert json.loads(text) == res.to_dict()
    r = repr(res)
    assert r.startswith(cls.__name__ + "(") and "\n" not in r and len(r) <= MAX_REPR, r
    html = res._repr_html_()
    assert html.lstrip().startswith("<") and "</table>" in html
    frame = res.to_frame()
    assert len(frame) >= 1


def test_json_float_is_the_one_helper():
    assert json_float(float("nan")) is None and json_float(float("inf")) is None
    assert json_float(None) is None and json_float(np.float32(0.5)) == 0.5
