"""Position labels of individual readings ('1'..'n', studykit.io.assemble): the digit-by-digit
route for 0..n-1 gives the same array, dtype and bytes as numpy's own conversion
``(codes + 1).astype('<U{width}')`` (reference: numpy), at every change of the number of
digits, and other codes keep numpy's conversion."""

from __future__ import annotations

import numpy as np
import pytest

from studykit.io.assemble import _position_labels


def _numpy(codes: np.ndarray) -> np.ndarray:
    return (codes + 1).astype(f"<U{len(str(int(codes.max()) + 1))}")


@pytest.mark.parametrize("n", [1, 2, 9, 10, 11, 99, 100, 1000, 1001, 9999, 10000, 10001, 123457])
def test_positions_match_numpy(n):
    codes = np.arange(n)
    got, ref = _position_labels(codes), _numpy(codes)
    assert got.dtype == ref.dtype
    assert got.tobytes() == ref.tobytes()


def test_other_codes_match_numpy():
    rng = np.random.default_rng(5)
    for codes in (rng.integers(0, 50_000, 20_000), np.repeat(np.arange(3000), 5)):
        got, ref = _position_labels(codes), _numpy(codes)
        assert got.dtype == ref.dtype and got.tobytes() == ref.tobytes()


@pytest.mark.parametrize(
    "n", [1, 9, 12, 999, 1000, 1001, 1999, 2000, 10999, 99999, 100000, 100999, 1000000, 1001001]
)
def test_counting_labels_match_numpy_at_block_edges(n):
    """The table route (last three digits repeating, leading parts per 1000 numbers) at the
    ends of the 1000-number blocks and of each number length."""
    from studykit.io.assemble import _counting_labels

    got, ref = _counting_labels(n), _numpy(np.arange(n))
    assert got.dtype == ref.dtype
    assert got.tobytes() == ref.tobytes()
