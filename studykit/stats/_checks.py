"""Input checks shared by the numerical core: one place for the wording of sample errors."""

from __future__ import annotations

import numpy as np

from studykit.errors import AnalysisError, StudyInputError


def check_sample(x, *, name: str = "x", minimum: int = 3, before: str, needed_for: str,
                 zero_spread: str | None = None) -> np.ndarray:
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
