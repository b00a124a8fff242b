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

* Arrays up to 32 MB from the heap, and freed memory kept for the next array
  (:func:`heap_for_large_arrays`, used by ``studykit analyze`` of one characteristic): glibc
  maps each large block anew from the kernel and gives it back when freed, so every temporary
  array of 10^6 values (8 MB) is faulted in page by page again (about 95,000 page faults per
  run at 10^6 readings). With the limit of its own mapping at glibc's largest (32 MB) and up
  to 256 MB of free memory kept at the heap's top, 61,000; system time 0.26-0.30 s against
  0.16-0.25 s, peak RSS 261 MB against 271 MB (3 interleaved pairs); at 4.4 * 10^6 readings
  (arrays of 35 MB, still mapped) 1.10 against 1.28 million faults, peak RSS 1.34 against
  1.32 GB; on the bootstrap route (10^6 skewed readings) 7.9 against 10.3 s CPU, peak RSS 484
  against 397 MB (the kept free memory). Only where memory lies changes: the numbers are the
  same bits.

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
    "heap_for_large_arrays",
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


#: glibc's ``mallopt`` parameters (``<malloc.h>``).
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
#: Blocks up to this size come from the heap (glibc's largest mmap threshold on 64-bit).
HEAP_BLOCKS_UP_TO = 32 * 1024 * 1024
#: Free memory at the heap's top kept for the next blocks instead of given back at once.
KEEP_FREE = 256 * 1024 * 1024


def heap_for_large_arrays() -> bool:
    """Ask glibc's allocator (``mallopt``) to serve blocks up to :data:`HEAP_BLOCKS_UP_TO`
    from its heap and to keep up to :data:`KEEP_FREE` of freed memory there (see the module
    notes); True when both settings were taken, False without glibc (nothing changes;
    tests/test_runtime.py checks which on the running platform).
    """
    import ctypes

    try:
        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):  # not glibc (no mallopt): the allocator is left alone
        return False
    mallopt.argtypes = (ctypes.c_int, ctypes.c_int)
    mallopt.restype = ctypes.c_int
    return bool(mallopt(_M_MMAP_THRESHOLD, HEAP_BLOCKS_UP_TO)) and bool(
        mallopt(_M_TRIM_THRESHOLD, KEEP_FREE)
    )


def available_cores() -> int:
    """Cores this process may use (its CPU affinity where the system has one), at least 1."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)
