"""A movement line's cents kept block by block (allowance.reconcile.blocks) read back as numpy holds them.

The reference is numpy itself: the whole int64 array, sliced as Python slices it, and cast
to int32 where every amount of the whole line fits (the width the loan table gave its
columns before the lines were kept in blocks).
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from allowance.reconcile.blocks import BLOCK, Blocks, blocks_of


def _line(size: int, share: float, big: bool, seed: int) -> np.ndarray:
    """Cents with ``share`` of them nonzero; ``big``: some beyond 32 bits."""
    rng = np.random.default_rng(seed)
    values = rng.integers(-10**7, 10**7, size=size, dtype=np.int64)
    values[rng.random(size) >= share] = 0
    if big and size:
        values[rng.integers(0, size, size=3)] = np.array([2**31 - 1, -(2**40), 2**33])
    return values


lines = st.builds(_line, size=st.sampled_from([0, 1, 5, BLOCK - 1, BLOCK, BLOCK + 1, 2 * BLOCK + 17]),
                  share=st.sampled_from([0.0, 0.001, 0.3, 0.7, 1.0]), big=st.booleans(), seed=st.integers(0, 10**6))


@settings(max_examples=60)
@given(values=lines, data=st.data())
def test_blocks_read_back_as_numpy_holds_the_line(values, data):
    kept = blocks_of(values)
    assert len(kept) == len(values)
    np.testing.assert_array_equal(kept.dense(), values)  # numpy's own array: the reference
    start = data.draw(st.integers(-3, len(values) + 3))
    stop = data.draw(st.one_of(st.none(), st.integers(-3, len(values) + 3)))
    np.testing.assert_array_equal(kept.dense(start, stop), values[start:stop])  # numpy's slicing
    # the width of the whole line: int32 where every amount fits (|x| < 2**31 - 1), else int64
    fits = len(values) > 0 and np.abs(values).max() < 2**31 - 1
    whole = values.astype(np.int32) if fits else values
    part = kept.compact(start, stop)
    assert part.dtype == whole.dtype
    np.testing.assert_array_equal(part, whole[start:stop])


def test_blocks_from_pieces_are_the_blocks_of_the_whole():
    values = _line(3 * BLOCK + 5, 0.2, False, 7)
    pieces = [values[lo: lo + BLOCK] for lo in range(0, len(values), BLOCK)]
    np.testing.assert_array_equal(Blocks.gather(pieces).dense(), blocks_of(values).dense())


def test_a_line_mostly_zero_keeps_only_its_amounts():
    # a million loans, one in a thousand with an amount: the places (2 bytes) and amounts (4),
    # not 8 bytes a loan (common practice, no source: what a sparse column costs)
    values = _line(1_000_000, 0.001, False, 3)
    kept = blocks_of(values)
    assert kept.nbytes <= 6 * np.count_nonzero(values) + 1
    assert blocks_of(np.zeros(1_000_000, dtype=np.int64)).nbytes == 0
    assert blocks_of(_line(1_000_000, 1.0, False, 3)).nbytes == 4 * 1_000_000  # dense int32
