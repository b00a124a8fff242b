"""Process settings every studykit process applies before numpy is imported.

* One BLAS / OpenMP thread unless the user set these variables: studykit's linear algebra is
  small (quadrature rules, a few dozen parameters), where a thread pool only adds start and
  spin costs. On 2 busy cores the 400-point Gauss-Legendre rule behind the constant d3 (an
  eigenvalue problem, computed once per process) took 0.4-3.4 s with OpenBLAS's threads against
  0.03 s with one; the numbers are the same bits (``tests/test_batch.py`` checks the rule's
  nodes and weights both ways).

* numpy's large arrays on ordinary pages (``NUMPY_MADVISE_HUGEPAGE=0``) unless the user set the
  variable: numpy asks the kernel for transparent huge pages on every array of 4 MB or more,
  and on a machine whose memory is fragmented (a shared server that has run for a while) each
  such fault waits for the kernel to compact memory. The default study of 4.4 * 10^6 readings
  spent 6.5 s in the kernel with huge pages against 2.7 s without; CPU time 10.6-11.6 s
  against 13.5-14.3 s (3 interleaved pairs, ``studykit analyze FILE -c diameter --lsl 9.94
  --usl 10.06 --json``, load average 2.7-3.9); at 10^6 readings 1.89-2.32 s against
  2.03-2.88 s (7 pairs). Only where memory lies changes: the numbers are the same bits.

* Python's cyclic garbage collector kept off the walk of what one command builds
  (:func:`one_command_collector`, used by ``studykit analyze`` of one characteristic): the
  objects alive when it starts are frozen (they are not walked again), a collection of the
  young objects waits for :data:`COLLECT_AFTER` new container objects instead of 700, and
  what is alive at the end (modules, the result) is frozen too, so the full collection Python
  makes when the process ends walks nothing. The default study of 10^6 readings makes about
  10^5 small objects (signals, their points, the modules' objects) that hold no reference
  cycles: the collector walked them 0.1-0.2 s per run. Reference counting frees everything as
  before; a collection still comes after every :data:`COLLECT_AFTER` surviving new objects, so
  memory stays bounded (peak RSS unchanged at 10^6 and 4.4 * 10^6 readings and on the
  bootstrap route).

>>> import os
>>> one_blas_thread(env={}) == {name: "1" for name in BLAS_THREAD_VARS}
True
>>> one_blas_thread(env={"OMP_NUM_THREADS": "4"})["OMP_NUM_THREADS"]
'4'
>>> numpy_small_pages(env={}), numpy_small_pages(env={HUGEPAGE_VAR: "1"})
({'NUMPY_MADVISE_HUGEPAGE': '0'}, {'NUMPY_MADVISE_HUGEPAGE': '1'})
"""

from __future__ import annotations

import gc
import os
from collections.abc import Iterator, MutableMapping
from contextlib import contextmanager

__all__ = [
    "BLAS_THREAD_VARS",
    "COLLECT_AFTER",
    "HUGEPAGE_VAR",
    "available_cores",
    "numpy_small_pages",
    "one_blas_thread",
    "one_command_collector",
]

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


#: numpy's switch for transparent huge pages on large arrays (read when numpy is imported).
HUGEPAGE_VAR = "NUMPY_MADVISE_HUGEPAGE"


def numpy_small_pages(env: MutableMapping[str, str] | None = None) -> MutableMapping[str, str]:
    """Set :data:`HUGEPAGE_VAR` to 0 in ``env`` (default: this process's environment,
    inherited by its children) unless already set; returns ``env``. Takes effect when numpy is
    imported after the call."""
    target = os.environ if env is None else env
    target.setdefault(HUGEPAGE_VAR, "0")
    return target


#: New container objects (net of those freed) after which the young generation is collected
#: inside :func:`one_command_collector` (Python's default is 700).
COLLECT_AFTER = 1_000_000


@contextmanager
def one_command_collector(collect_after: int = COLLECT_AFTER) -> Iterator[None]:
    """The collector set for one command whose process ends after it (see the module notes):
    the objects alive at the start and at the end frozen (:func:`gc.freeze`: never walked by a
    later collection; still freed by reference counting), the young generation collected after
    ``collect_after`` new container objects; the thresholds restored at the end.

    >>> import gc
    >>> before = gc.get_threshold()
    >>> with one_command_collector(collect_after=50_000):
    ...     gc.get_threshold()[0]
    50000
    >>> gc.get_threshold() == before
    True
    """
    old = gc.get_threshold()
    gc.freeze()
    gc.set_threshold(max(int(collect_after), old[0]), *old[1:])
    try:
        yield
    finally:
        gc.set_threshold(*old)
        gc.freeze()


def available_cores() -> int:
    """Cores this process may use (its CPU affinity where the system has one), at least 1."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)
