"""The parametric bootstrap of a fitted family's capability indices, fast and bounded in memory.

:func:`percentile_draws` gives the bootstrap draws of Pp, Ppk, PPU and PPL (percentile method,
ISO 22514-2 quantiles at 0.135 %, 50 %, 99.865 %) for a model of any
:class:`~studykit.stats.families.base.Family`, through the family's own methods only
(``sample``, ``refit_rows``, ``_estimate``, ``quantile``): nothing here names a family.
:func:`studykit.stats.capability.capability` turns the draws into percentile bounds
(B. Efron and R. J. Tibshirani, *An Introduction to the Bootstrap*, 1993, ch. 6 and 13).

Memory: a block holds at most :data:`studykit.stats.solvers.ROW_CELLS` cells (samples x n,
counting the 8 grid thresholds of a threshold family as 8 rows each), so it is
O(ROW_CELLS + n) whatever the number of samples. Within a block the row-wise solvers work
on groups of :data:`studykit.stats.solvers.CACHE_CELLS` cells (about a hundred samples of 125
readings), whose work arrays stay in a core's cache: the same numbers as one call for the
whole block (each row stops at its own convergence), about 2x faster for a threshold family.
"""

from __future__ import annotations

import numpy as np

from studykit.errors import StudyInputError
from studykit.stats.families.base import Family
from studykit.stats.solvers import rows_per_group

__all__ = ["PROBS", "TAIL_PROBABILITY", "is_family_model", "percentile_draws"]

#: Lower tail of the percentile method: exactly 0.135 % (ISO 22514-2).
TAIL_PROBABILITY = 0.00135
#: The quantiles the percentile method needs: lower tail, median, upper tail.
PROBS = np.array([TAIL_PROBABILITY, 0.5, 1 - TAIL_PROBABILITY])


def is_family_model(model) -> bool:
    """True when ``model`` is a fitted model of a :class:`Family` (the fast path applies)."""
    return isinstance(getattr(model, "family", None), Family)


def percentile_draws(model, n, lsl, usl, n_boot, rng, values):
    """Bootstrap draws of Pp, Ppk, PPU, PPL by the percentile method for a model of a
    :class:`~studykit.stats.families.base.Family` (:func:`is_family_model`): the draws of
    ``capability._bootstrap_draws_generic`` (one scipy sample, refit and frozen quantile at a
    time), by the family's methods: the same random samples (``family.sample`` in blocks of
    whole samples, which takes the generator's stream in the same order as one draw per
    sample), ``family.refit_rows`` for all samples of a block at once (closed forms, row-wise
    solvers, the threshold search), the family's own estimator for the rows it leaves, and
    ``family.quantile`` without frozen scipy objects. Returns (draws dict, failed refits).

    Memory: a block holds at most :data:`studykit.stats.fit.ROW_CELLS` cells (samples x n,
    counting the 8 grid thresholds of a threshold family as 8 rows each), so it is
    O(ROW_CELLS + n) whatever ``n_boot``; a study whose whole bootstrap fits in one block
    (n_boot x n x grid <= ROW_CELLS, e.g. 500 x 125 x 8) is computed in one block as before.
    """
    family = model.family
    q = np.full((n_boot, 3), np.nan)
    ok = np.zeros(n_boot, dtype=bool)
    grid = family.refit_row_factor
    per_block = min(n_boot, rows_per_group(n * grid))
    shared = {}  # the Weibull shapes of the first sample's grid start every block
    for i in range(0, n_boot, per_block):
        m = min(per_block, n_boot - i)
        # straight from the numpy generator (the same numbers as scipy's frozen ``rvs``)
        block = family.sample(model.parameters, (m, n), rng)
        if n < getattr(family, "minimum_n", 3):
            continue
        q[i : i + m], ok[i : i + m] = _block_quantiles(model, block, shared)
        del block
    q_lo, q_mid, q_hi = q[:, 0], q[:, 1], q[:, 2]
    with np.errstate(invalid="ignore"):
        ok &= (q_lo < q_mid) & (q_mid < q_hi)
    q_lo, q_mid, q_hi = q_lo[ok], q_mid[ok], q_hi[ok]
    ppu = None if usl is None else (usl - q_mid) / (q_hi - q_mid)
    ppl = None if lsl is None else (q_mid - lsl) / (q_mid - q_lo)
    pp = None if lsl is None or usl is None else (usl - lsl) / (q_hi - q_lo)
    ppk = ppu if ppl is None else (ppl if ppu is None else np.minimum(ppu, ppl))
    idx = {"pp": pp, "ppk": ppk, "ppu": ppu, "ppl": ppl}
    draws = {
        k: (idx[k] if values[k] is not None and idx[k] is not None else np.empty(0)) for k in idx
    }
    return draws, int(n_boot - np.count_nonzero(ok))


def _block_quantiles(model, block, shared):
    """Model quantiles (0.135 %, 50 %, 99.865 %) refitted to every row of ``block``, and the
    rows whose refit worked."""
    family = model.family
    m = block.shape[0]
    params, ok, rest = family.refit_rows(block, shared)
    q = np.full((m, 3), np.nan)
    if params is not None:
        with np.errstate(all="ignore"):
            q[:] = family.quantile(PROBS, {k: v[:, None] for k, v in params.items()})
    if len(rest):
        # the checks of ``clean_sample`` for the whole block at once (a finite sample with
        # spread; its length is checked before the block is drawn): the rows it would refuse
        # are not refitted, the others go to the estimator as they are
        with np.errstate(invalid="ignore"):
            usable = np.isfinite(block).all(axis=1) & (block.max(axis=1) > block.min(axis=1))
    for i in rest:  # one sample at a time, by the family's own estimator
        if not usable[i]:
            ok[i] = False
            continue
        try:
            x = block[i]
            family.check(x)
            p, _, _ = family._estimate(x)
            q[i] = family.quantile(PROBS, {k: float(v) for k, v in p.items()})
            ok[i] = True
        except (StudyInputError, ValueError, FloatingPointError, RuntimeError):
            ok[i] = False
    return q, ok
