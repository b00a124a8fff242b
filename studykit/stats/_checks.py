"""Input checks shared by the numerical core: one place for the wording of sample errors."""

from __future__ import annotations

import math

import numpy as np

from studykit.errors import AnalysisError, StudyInputError


def check_number(
    value, name: str, *, error: type[StudyInputError] = StudyInputError, tail: str = "."
) -> float:
    """``value`` as a finite float, or ``error`` saying "`name` (value) must be a (finite)
    number" followed by ``tail`` (e.g. ``" or None."``, ``", e.g. 1.33."``).

    Examples
    --------
    >>> check_number("1.5", "threshold")
    1.5
    """
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise error(f"`{name}` ({value!r}) must be a number{tail}") from None
    if not math.isfinite(v):
        raise error(f"`{name}` ({value!r}) must be a finite number{tail}")
    return v


def check_sample(
    x,
    *,
    name: str = "x",
    minimum: int = 3,
    before: str,
    needed_for: str,
    zero_spread: str | None = None,
) -> np.ndarray:
    """A finite 1-D float array of at least ``minimum`` values, or a clear error.

    Parameters
    ----------
    x : array_like
        The sample.
    name : str
        Argument name used in the messages.
    minimum : int
        Fewest values accepted.
    before : str
        What the caller is about to do, for "remove it or exclude it before ...".
    needed_for : str
        For "at least N are needed for ...".
    zero_spread : str, optional
        When given, a sample whose values are all equal is refused with
        "... has zero spread (every value is v); <zero_spread>".

    Examples
    --------
    >>> check_sample([1, 2, 3], before="testing", needed_for="this test").tolist()
    [1.0, 2.0, 3.0]
    """
    try:
        arr = np.asarray(x, dtype=float).ravel()
    except (TypeError, ValueError) as exc:
        raise StudyInputError(
            f"`{name}` must contain numbers only; could not read it as numbers ({exc})."
        ) from None
    bad = ~np.isfinite(arr)
    if bad.any():
        where = int(np.flatnonzero(bad)[0])
        raise AnalysisError(
            f"`{name}` contains a missing or non-finite value ({float(arr[where])!r}) at "
            f"position {where}; remove it or exclude it before {before}."
        )
    if arr.size < minimum:
        raise AnalysisError(
            f"`{name}` has {arr.size} value(s); at least {minimum} are needed for {needed_for}."
        )
    if zero_spread is not None and np.ptp(arr) == 0:
        raise AnalysisError(
            f"`{name}` has zero spread (every value is {float(arr[0]):g}); {zero_spread}"
        )
    return arr


#: Readings larger than this in magnitude are refused: their squares and sums overflow double
#: precision (about 1.8e308) in variances and likelihoods. Our limit (any measurement in a
#: sensible unit is far inside it).
MAX_MAGNITUDE = 1e100
#: A standard deviation within this many units in the last place of the readings' magnitude is
#: rounding noise (e.g. 0.3 and 0.1 + 0.2 = 0.30000000000000004): treated as zero spread.
NOISE_ULPS = 16
#: A spread below this fraction of the mean is refused: double precision keeps about 16
#: significant digits, so such a spread has at most 4 left ("precision collapse").
MIN_RELATIVE_SPREAD = 1e-12


def check_resolution(x, *, name: str = "the values") -> None:
    """Refuse readings that double precision cannot analyse, with a message in user words.

    * magnitude above :data:`MAX_MAGNITUDE` (or every reading non-zero and below its inverse):
      sums and squares overflow or underflow;
    * a standard deviation at the resolution of the readings (at most :data:`NOISE_ULPS`
      units in the last place of their largest magnitude): the spread is rounding noise and is
      treated as zero, so no limits or indices exist (instead of a Cp of 1e13);
    * a standard deviation below :data:`MIN_RELATIVE_SPREAD` times the mean: too few digits
      of the spread survive ("precision collapse").

    ``x`` holds finite readings (missing values already left out).

    Examples
    --------
    >>> check_resolution([10.01, 10.02, 9.98])
    >>> try:
    ...     check_resolution([0.3, 0.1 + 0.2, 0.3], name="'gap'")
    ... except AnalysisError as exc:
    ...     print(str(exc)[:45])
    the readings of 'gap' differ only by rounding
    """
    arr = np.asarray(x, dtype=float).ravel()
    if arr.size < 2:
        return
    big = float(np.max(np.abs(arr)))
    if big > MAX_MAGNITUDE:
        raise AnalysisError(
            f"the readings of {name} reach {big:.3g} in size; numbers beyond {MAX_MAGNITUDE:g} "
            "overflow in the analysis (their squares and sums exceed double precision). "
            "Record them in a larger unit, or check the import (a column of codes or "
            "serial numbers read as measurements?)."
        )
    if 0.0 < big < 1.0 / MAX_MAGNITUDE:
        raise AnalysisError(
            f"the readings of {name} are all below {big:.3g} in size; their squares underflow "
            "double precision. Record them in a smaller unit (e.g. micrometres instead of "
            "metres)."
        )
    if float(np.ptp(arr)) == 0.0:
        return  # exactly equal readings: the callers' own zero-spread messages apply
    mean = float(np.mean(arr))
    sd = float(np.std(arr))
    resolution = float(np.spacing(big))
    if sd <= NOISE_ULPS * resolution:
        raise AnalysisError(
            f"the readings of {name} differ only by rounding: their standard deviation "
            f"({sd:.3g}) is within {NOISE_ULPS} units of the last digit double precision "
            f"keeps at their size ({resolution:.3g}). The spread is treated as zero, so no "
            "control limits or capability indices can be computed (they would be "
            "astronomically large). Check the gauge resolution (it may be too coarse for this "
            "tolerance) or the data import."
        )
    if sd < MIN_RELATIVE_SPREAD * abs(mean):
        raise AnalysisError(
            f"the spread of the readings of {name} (standard deviation {sd:.3g}) is less than "
            f"{MIN_RELATIVE_SPREAD:g} of their mean ({mean:.12g}): double precision keeps about "
            "16 significant digits, so too few digits of the spread are left to analyse "
            "(precision collapse). Record the deviations from the nominal value instead "
            "(e.g. reading - nominal), or check the import."
        )
