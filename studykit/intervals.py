"""The tolerance interval of an analysed characteristic: a hook for the study views.

:func:`interval_for_result` takes a :class:`~studykit.analysis.CharacteristicResult` (the values
used after missing values and phase-I removals, the specification and the chosen model) and
returns the :class:`~studykit.stats.tolerance.ToleranceInterval` on the scale of that model.
It computes nothing of its own beyond the choice of interval; it exists so that a workbook view,
a PDF section or ``verify`` can show the same "at least P % within specification with C %
confidence" figure from the one result object, without the renderers computing statistics.

:mod:`studykit.analysis` calls :func:`criterion_interval` and :func:`judge_with_interval` only
where the study's criterion asks for the interval ("at least P within specification with
confidence C", :class:`~studykit.study.Criteria` ``interval_coverage``/``interval_confidence``),
so ``analyze`` and the batch keep their speed and their JSON elsewhere.
"""

from __future__ import annotations

from studykit.errors import AnalysisError
from studykit.stats.tolerance import ToleranceInterval, tolerance_interval

__all__ = [
    "INTERVAL_MODEL",
    "criterion_interval",
    "criterion_text",
    "interval_block",
    "interval_for_result",
    "interval_model_for",
    "judge_with_interval",
]

#: The interval computed for each model of the analysis: normal theory for a normal model, the
#: back-transformed interval for lognormal and Box-Cox, distribution-free for every other model
#: (no exact tolerance factors are offered for them here).
INTERVAL_MODEL = {"normal": "normal", "lognormal": "lognormal", "boxcox": "boxcox"}


def interval_model_for(model_name: str | None) -> str:
    """The :func:`~studykit.stats.tolerance.tolerance_interval` model for an analysis model.

    Examples
    --------
    >>> interval_model_for("lognormal"), interval_model_for("weibull"), interval_model_for(None)
    ('lognormal', 'distribution_free', 'normal')
    """
    if model_name is None:
        return "normal"
    return INTERVAL_MODEL.get(model_name, "distribution_free")


def interval_for_result(
    result,
    *,
    coverage: float = 0.95,
    confidence: float = 0.95,
    power: float = 0.9,
    model: str | None = None,
) -> ToleranceInterval:
    """Tolerance interval of the values a capability result used, against its specification.

    Parameters
    ----------
    result : CharacteristicResult
        From :func:`studykit.analysis.analyze_characteristic` or ``analyze_study`` (variables
        data).
    coverage, confidence : float
        P and C (default 0.95 / 0.95).
    power : float
        For the normal sample size (see :func:`~studykit.stats.tolerance.tolerance_interval`).
    model : str, optional
        Override the interval model (``normal``, ``lognormal``, ``boxcox``,
        ``distribution_free``); default :func:`interval_model_for` of the result's model.

    Returns
    -------
    ToleranceInterval
        Two-sided with two limits, one-sided on the side of a single limit, two-sided without
        limits (then ``meets`` is None).

    References
    ----------
    ISO 16269-6:2014; see :mod:`studykit.stats.tolerance`.

    Examples
    --------
    >>> import numpy as np
    >>> from studykit.analysis import analyze_characteristic
    >>> from studykit.data import CharacteristicData
    >>> from studykit.study import Characteristic
    >>> x = np.random.default_rng(2).normal(10.0, 0.1, 60)
    >>> res = analyze_characteristic(CharacteristicData("d", "mm", x),
    ...                              Characteristic("d", lsl=9.4, usl=10.6))
    >>> ti = interval_for_result(res)
    >>> ti.model, ti.n == res.n, ti.meets
    ('normal', True, True)
    """
    if result.attribute:
        raise AnalysisError(
            f"'{result.characteristic}' is counted (attribute) data; a "
            "tolerance interval needs measured values."
        )
    chosen = model or interval_model_for(None if result.model is None else result.model.name)
    lsl = result.spec.get("lsl")
    usl = result.spec.get("usl")
    sides = 1 if (lsl is None) != (usl is None) else 2
    return tolerance_interval(
        result.values,
        coverage=coverage,
        confidence=confidence,
        sides=sides,
        model=chosen,
        lsl=lsl,
        usl=usl,
        power=power,
    )


def criterion_interval(
    values,
    *,
    lsl,
    usl,
    model_name: str | None,
    coverage: float,
    confidence: float,
    power: float = 0.9,
) -> ToleranceInterval:
    """The interval an acceptance criterion "at least P within specification with C" judges.

    Two-sided against two limits, one-sided on the side of a single limit, on the scale of the
    analysis model (:func:`interval_model_for`). Used by :mod:`studykit.analysis` when the
    criterion is set; :func:`interval_for_result` gives the same interval from a result.
    """
    sides = 1 if (lsl is None) != (usl is None) else 2
    return tolerance_interval(
        values,
        coverage=coverage,
        confidence=confidence,
        sides=sides,
        model=interval_model_for(model_name),
        lsl=lsl,
        usl=usl,
        power=power,
    )


def criterion_text(coverage: float, confidence: float) -> str:
    """``at least 99% of parts within specification with 95% confidence``."""
    return (
        f"at least {coverage * 100:g}% of parts within specification with "
        f"{confidence * 100:g}% confidence"
    )


def judge_with_interval(verdict, interval: ToleranceInterval):
    """The index verdict combined with the tolerance-interval criterion (both must hold).

    ``meets``: True when the index and the interval criterion both hold; False when either
    fails; None when the index verdict is withheld or the interval cannot be formed (too few
    values for a distribution-free interval). Where the interval criterion decides (it fails
    or cannot be judged) the text adds a sentence saying so; where it holds, the text stays
    the index sentence and the ``tolerance_interval`` block states the interval. The numbers
    of the index verdict are unchanged.

    Examples
    --------
    >>> import numpy as np
    >>> from studykit.stats.capability import capability, judge
    >>> x = np.random.default_rng(4).normal(10.0, 0.1, 80)
    >>> v = judge(capability(x, lsl=9.4, usl=10.6), index="ppk", threshold=1.33)
    >>> ti = criterion_interval(x, lsl=9.4, usl=10.6, model_name="normal", coverage=0.999,
    ...                         confidence=0.95)
    >>> v.meets, ti.meets, judge_with_interval(v, ti).meets
    (True, True, True)
    >>> tight = criterion_interval(x, lsl=9.8, usl=10.6, model_name="normal", coverage=0.999,
    ...                            confidence=0.95)
    >>> judge_with_interval(v, tight).meets
    False
    """
    from dataclasses import replace

    if interval.meets:
        return verdict
    crit = criterion_text(interval.coverage, interval.confidence)
    if interval.meets is None:
        part = f"The tolerance-interval criterion ({crit}) cannot be judged: {interval.statement}"
        meets = None if verdict.meets is not False else False
    else:
        part = (
            f"The tolerance-interval criterion ({crit}) is not met: {interval.statement} "
            "That reaches beyond the specification."
        )
        meets = False if verdict.meets is not None else None
    return replace(verdict, meets=meets, text=f"{verdict.text} {part}")


def interval_block(interval: ToleranceInterval) -> dict:
    """The ``tolerance_interval`` block of the analysis JSON: the interval's fields and the
    criterion in words."""
    return dict(
        interval.to_dict(), criterion=criterion_text(interval.coverage, interval.confidence)
    )
