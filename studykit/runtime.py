"""Process settings every studykit process applies before numpy is imported.

* One BLAS / OpenMP thread unless the user set these variables: studykit's linear algebra is
  small (quadrature rules, a few dozen parameters), where a thread pool only adds start and
  spin costs. On 2 busy cores the 400-point Gauss-Legendre rule behind the constant d3 (an
  eigenvalue problem, computed once per process) took 0.4-3.4 s with OpenBLAS's threads against
  0.03 s with one; the numbers are the same bits (``tests/test_batch.py`` checks the rule's
  nodes and weights both ways).

>>> import os
>>> one_blas_thread(env={}) == {name: "1" for name in BLAS_THREAD_VARS}
True
>>> one_blas_thread(env={"OMP_NUM_THREADS": "4"})["OMP_NUM_THREADS"]
'4'
"""

from __future__ import annotations

import os
from collections.abc import MutableMapping

__all__ = ["BLAS_THREAD_VARS", "available_cores", "one_blas_thread"]

#: The thread-count variables of OpenBLAS, OpenMP and MKL.
BLAS_THREAD_VARS = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")


def one_blas_thread(env: MutableMapping[str, str] | None = None) -> MutableMapping[str, str]:
    """Set each of :data:`BLAS_THREAD_VARS` to 1 in ``env`` (default: this process's
    environment, inherited by its children) unless already set; returns ``env``. Takes effect
    for libraries loaded after the call."""
    target = os.environ if env is None else env
    for name in BLAS_THREAD_VARS:
        target.setdefault(name, "1")
    return target


def available_cores() -> int:
    """Cores this process may use (its CPU affinity where the system has one), at least 1."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)
