"""Process settings of studykit/runtime.py: the collector and the allocator set for one command.

Sources: Python's documentation of the ``gc`` module (``gc.freeze``, ``gc.get_freeze_count``,
``gc.set_threshold``, ``gc.callbacks``: the collector collects the young generation when the
allocations less the deallocations exceed the first threshold).
"""

from __future__ import annotations

import gc

import pytest

from studykit.runtime import COLLECT_AFTER, one_command_collector


@pytest.fixture
def restored_collector():
    before = gc.get_threshold()
    yield
    gc.unfreeze()  # this test process goes on: its objects back under the collector
    gc.set_threshold(*before)


class _Node:
    def __init__(self):
        self.me = self  # a reference cycle: only the collector frees it


def test_thresholds_raised_inside_and_restored(restored_collector):
    before = gc.get_threshold()
    with one_command_collector():
        assert gc.get_threshold() == (max(COLLECT_AFTER, before[0]), *before[1:])
    assert gc.get_threshold() == before


def test_objects_alive_at_start_and_end_are_frozen(restored_collector):
    gc.unfreeze()
    before = [0]  # a container alive at the start
    assert any(o is before for o in gc.get_objects())  # walked by the collector
    with one_command_collector():
        assert not any(o is before for o in gc.get_objects())  # frozen: not walked
        made = [[i] for i in range(1000)]  # new containers, alive at the end
        assert any(o is made for o in gc.get_objects())
    assert gc.get_freeze_count() > 0
    assert not any(o is made or o is before for o in gc.get_objects())


def test_cyclic_garbage_is_still_collected_within_the_bound(restored_collector):
    """Memory stays bounded: cycles made inside are collected after ``collect_after`` new
    containers (here 20,000), not left to the end of the process."""
    collections = []

    def count(phase, info):
        if phase == "stop":
            collections.append(info["collected"])

    gc.callbacks.append(count)
    try:
        with one_command_collector(collect_after=20_000):
            for _ in range(100_000):
                _Node()  # garbage at once: a cycle (the node and its __dict__)
    finally:
        gc.callbacks.remove(count)
    assert collections, "no collection ran inside the block"
    assert sum(collections) >= 50_000  # most of the 2 x 10^5 cyclic objects were freed


def test_the_collector_is_left_enabled(restored_collector):
    assert gc.isenabled()
    with one_command_collector():
        assert gc.isenabled()
    assert gc.isenabled()


def test_heap_setting_taken_where_glibc_is():
    """glibc's mallopt (malloc(3), mallopt(3): M_MMAP_THRESHOLD up to 32 MB on 64-bit) takes
    both settings; without glibc nothing is changed and False comes back."""
    import platform

    from studykit.runtime import HEAP_BLOCKS_UP_TO, heap_for_large_arrays

    assert HEAP_BLOCKS_UP_TO == 32 * 1024 * 1024  # the largest value glibc accepts on 64-bit
    assert heap_for_large_arrays() is (platform.libc_ver()[0] == "glibc")
