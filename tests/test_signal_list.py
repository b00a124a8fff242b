"""Signal texts built on first read, and the analysis JSON's cut signal list of a long chart.

The rule used is Nelson's test 1, a point beyond 3 sigma (Nelson, L. S. 1984, "The Shewhart
control chart -- tests for special causes", J. Quality Technology 16(4):237-239): in a series
whose every other point lies beyond the limit, each of those points is its own signal, so the
exact count is known without running the rules. The cut itself (first ``LISTED_SIGNALS`` per
chart part, exact counts beside it) is our convention (README, JSON table).
"""

from __future__ import annotations

import pickle

import numpy as np

from studykit.analysis import AnalysisOptions, analyze_characteristic
from studykit.io.values import CharacteristicData
from studykit.stats import charts
from studykit.stats.rules import Signal, evaluate


def _every_other_beyond(n: int) -> np.ndarray:
    x = np.zeros(n)
    x[::2] = 5.0  # 5 sigma above a centre of 0 with sigma 1: beyond the 3-sigma limit
    return x


def _spiky(n: int) -> np.ndarray:
    """Readings near 10 with a spike at every 10th (beyond the limits of its I-MR chart)."""
    x = 10.0 + 0.001 * np.sin(np.arange(n))
    x[5::10] += 0.05
    return x


def test_lazy_text_equals_the_words_and_survives_pickle():
    (sig,) = evaluate([0.0, 0.0, 4.0], center=0.0, sigma=1.0, rules="1")
    # Nelson test 1 in our wording (module docstring of studykit.stats.rules)
    assert sig.text == "Point 3 above the upper control limit (centre + 3 sigma)"
    back = pickle.loads(pickle.dumps(evaluate([4.0, 0.0, 4.0], center=0.0, sigma=1.0, rules="1")))
    assert [s.text for s in back] == [
        "Point 1 above the upper control limit (centre + 3 sigma)",
        "Point 3 above the upper control limit (centre + 3 sigma)",
    ]
    assert back[0] == Signal(
        "beyond_limits", 1, (0,), 0, "Point 1 above the upper control limit (centre + 3 sigma)"
    )


def test_labels_read_only_for_the_text_asked_for():
    class Counting(list):
        reads = 0

        def __getitem__(self, i):
            Counting.reads += 1
            return super().__getitem__(i)

    labels = Counting(f"s{i}" for i in range(6))
    found = evaluate(_every_other_beyond(6), center=0.0, sigma=1.0, rules="1", labels=labels)
    assert len(found) == 3 and Counting.reads == 0
    assert found[1].text == "Point s2 above the upper control limit (centre + 3 sigma)"
    assert Counting.reads == 1


def test_counts_of_a_cut_list_are_exact(monkeypatch):
    monkeypatch.setattr(charts, "LISTED_SIGNALS", 7)
    n = 200
    data = CharacteristicData("x", "mm", _spiky(n))
    res = analyze_characteristic(
        data, None, options=AnalysisOptions(phase1="off", rules="1", model="normal")
    )
    chart = res.phase1.chart
    d = res.to_dict()["chart"]
    total = sum(len(s.signals) for s in chart.series)
    assert d["signals_total"] == total
    by_part = {p: sum(s["chart"] == p for s in d["signals"]) for p in ("location", "dispersion")}
    assert by_part["location"] == 7
    assert d["signals_listed"] == len(d["signals"])
    assert sum(d["signals_by_rule"].values()) == total
    # the listed ones are the first of their part, in time order
    assert [s["text"] for s in d["signals"] if s["chart"] == "location"] == [
        s.text for s in chart.location.signals[:7]
    ]


def test_short_list_has_no_counts():
    data = CharacteristicData("x", "mm", _spiky(40))
    res = analyze_characteristic(
        data, None, options=AnalysisOptions(phase1="off", rules="1", model="normal")
    )
    d = res.to_dict()["chart"]
    assert "signals_total" not in d and "signals_by_rule" not in d
    assert len(d["signals"]) == sum(len(s.signals) for s in res.phase1.chart.series) > 0


def test_collector_paused_restores_the_collector():
    import gc

    import pytest

    from studykit.stats.rules import collector_paused

    assert gc.isenabled()
    with pytest.raises(ZeroDivisionError):
        with collector_paused():
            assert not gc.isenabled()
            1 / 0  # noqa: B018
    assert gc.isenabled()
    gc.disable()
    try:
        with collector_paused():
            pass
        assert not gc.isenabled()  # a collector the caller had stopped stays stopped
    finally:
        gc.enable()
    evaluate(_every_other_beyond(10), center=0.0, sigma=1.0, rules="1")
    assert gc.isenabled()
