"""A movement line's whole cents over the joined loans, kept block by block in what each block needs.

Implements
----------
BLOCK       loans per block (the places of a block's nonzero amounts fit 16 bits)
Blocks      one line's cents over the loans: a block of zeros as nothing, a block of few
            nonzero amounts as their places and amounts, any other as int32 where every
            amount fits (int64 otherwise); read back whole or a slice at a time, as int64
            or in the width of the whole line (:meth:`Blocks.compact`)
blocks_of   a whole array of cents as :class:`Blocks`

Most movement lines are zero for most loans (new loans, write-offs, modifications, the
PCD gross-up), and the others fit 32 bits: a million loans' lines for two frameworks held
as int64 were some 200 MB after the movement was made, the same cents kept this way a
fraction of it. Every amount reads back exactly (integers, no rounding).
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

__all__ = ["BLOCK", "Blocks", "blocks_of"]

#: loans per block: a block's places are uint16
BLOCK = 1 << 16

#: the largest magnitude kept in 32 bits (the loan table's rule: ``|x| < 2**31 - 1``)
_FITS_32 = 2**31 - 1


def _stored(values: np.ndarray) -> tuple[object, int]:
    """A block's amounts (int64) as kept, and their largest magnitude."""
    nonzero = np.flatnonzero(values)
    if not len(nonzero):
        return None, 0
    top = int(np.abs(values).max())
    kind = np.int32 if top < _FITS_32 else np.int64
    width = np.dtype(kind).itemsize
    if len(nonzero) * (2 + width) < len(values) * width:  # the places (uint16) and amounts take less
        return (nonzero.astype(np.uint16), values[nonzero].astype(kind)), top
    return values.astype(kind), top


class Blocks:
    """One line's whole cents over ``size`` loans, block by block of :data:`BLOCK` loans.

    ``wide``: whether the whole line needs int64 (``|x| >= 2**31 - 1`` somewhere, or no
    loans): the width :meth:`compact` gives every slice, as a whole-line ``astype(int32)``
    where every amount fits would.

    Examples
    --------
    >>> b = blocks_of(np.array([0, 5, 0, -7], dtype=np.int64))
    >>> b.dense().tolist(), b.dense(1, 3).tolist(), b.compact().dtype.name
    ([0, 5, 0, -7], [5, 0], 'int32')
    """

    __slots__ = ("size", "wide", "_parts")

    def __init__(self, size: int, parts: list, top: int) -> None:
        self.size = size
        self._parts = parts
        self.wide = size == 0 or top >= _FITS_32

    @classmethod
    def gather(cls, pieces: Iterable[np.ndarray]) -> Blocks:
        """The line from its blocks' amounts (int64, :data:`BLOCK` loans each but the last), in order."""
        made = cls.building()
        for piece in pieces:
            made.add(piece)
        return made.done()

    @staticmethod
    def building() -> _Building:
        """A line made block by block: ``add`` each block's amounts as it is made, then ``done``."""
        return _Building()

    def __len__(self) -> int:
        return self.size

    @property
    def nbytes(self) -> int:
        """The bytes the amounts take (what a block keeps)."""
        total = 0
        for kept in self._parts:
            if isinstance(kept, tuple):
                total += kept[0].nbytes + kept[1].nbytes
            elif kept is not None:
                total += kept.nbytes
        return total

    def dense(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """Loans ``start:stop`` (a whole slice as Python slices it) as int64, zeros where nothing is kept."""
        start, stop, _ = slice(start, stop).indices(self.size)
        out = np.zeros(max(stop - start, 0), dtype=np.int64)
        for k in range(start // BLOCK, -(-stop // BLOCK) if stop > start else 0):
            kept = self._parts[k]
            if kept is None:
                continue
            lo, hi = k * BLOCK, min((k + 1) * BLOCK, self.size)
            a, b = max(lo, start), min(hi, stop)  # the part of this block in the slice
            if isinstance(kept, tuple):
                places, amounts = kept
                pick = (places >= a - lo) & (places < b - lo)
                out[places[pick].astype(np.int64) + (lo - start)] = amounts[pick]
            else:
                out[a - start: b - start] = kept[a - lo: b - lo]
        return out

    def compact(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """:meth:`dense` in the whole line's width: int32 unless :attr:`wide`."""
        values = self.dense(start, stop)
        return values if self.wide else values.astype(np.int32)


class _Building:
    """:meth:`Blocks.building`: each block kept as it comes (its int64 amounts let go)."""

    __slots__ = ("parts", "size", "top")

    def __init__(self) -> None:
        self.parts: list = []
        self.size = self.top = 0

    def add(self, piece: np.ndarray) -> None:
        kept, most = _stored(piece)
        self.parts.append(kept)
        self.size += len(piece)
        self.top = max(self.top, most)

    def done(self) -> Blocks:
        return Blocks(self.size, self.parts, self.top)


def blocks_of(values: np.ndarray) -> Blocks:
    """A whole line's cents (any integer type) as :class:`Blocks`."""
    values = np.asarray(values, dtype=np.int64)
    return Blocks.gather(values[lo: lo + BLOCK] for lo in range(0, len(values), BLOCK))
