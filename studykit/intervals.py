"""The tolerance interval of an analysed characteristic: a hook for the study views.

:func:`interval_for_result` takes a :class:`~studykit.analysis.CharacteristicResult` (the values
used after missing values and phase-I removals, the specification and the chosen model) and
returns the :class:`~studykit.stats.tolerance.ToleranceInterval` on the scale of that model.
It computes nothing of its own beyond the choice of interval; it exists so that a workbook view,
a PDF section or ``verify`` can show the same "at least P % within specification with C %
confidence" figure from the one result object, without the renderers computing statistics.

It is not called by :mod:`studykit.analysis` (so ``analyze`` and the batch keep their speed and
their JSON): a caller asks for it.
"""

from __future__ import annotations

from studykit.errors import AnalysisError
from studykit.stats.tolerance import ToleranceInterval, tolerance_interval

__all__ = ["INTERVAL_MODEL", "interval_model_for", "interval_for_result"]

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


def interval_for_result(result, *, coverage: float = 0.95, confidence: float = 0.95,
                        power: float = 0.9, model: str | None = None) -> ToleranceInterval:
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
        raise AnalysisError(f"'{result.characteristic}' is counted (attribute) data; a "
                            "tolerance interval needs measured values.")
    chosen = model or interval_model_for(None if result.model is None else result.model.name)
    lsl = result.spec.get("lsl")
    usl = result.spec.get("usl")
    sides = 1 if (lsl is None) != (usl is None) else 2
    return tolerance_interval(result.values, coverage=coverage, confidence=confidence,
                              sides=sides, model=chosen, lsl=lsl, usl=usl, power=power)
