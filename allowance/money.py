"""Money: rounded to cents once per loan, and totals that foot exactly.

Implements
----------
CENT_DECIMALS  decimals money is rounded to (2: cents)
money_total    the sum of figures already rounded to cents, exactly (through whole cents)
money_totals   money_total of each group of a column at once (groups given as integer codes)
cents_by_group exact int64 sums of whole cents per group code

Every total a run reports is the sum of its rounded loan figures, added in whole cents
(int64) so that no floating-point residue makes a report miss its footing by a cent.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
import pandas as pd

__all__ = ["CENT_DECIMALS", "cents_by_group", "money_total", "money_totals"]

#: money is rounded to cents once, per loan, at the end
CENT_DECIMALS = 2


def money_total(values: Iterable[float] | pd.Series | np.ndarray) -> float:
    """Sum money already rounded to cents, exactly: through whole cents, back to units.

    Examples
    --------
    >>> money_total([0.1, 0.2, 0.3]), sum([0.1, 0.2, 0.3])
    (0.6, 0.6000000000000001)
    >>> money_total([1e13] * 1_000_000)  # 1e21 cents: beyond int64, still exact
    1e+19
    """
    if isinstance(values, (np.ndarray, pd.Series)) and values.dtype.kind == "f":
        array = np.asarray(values, dtype=np.float64)  # a float column as it is: no conversion pass
    else:
        array = np.asarray(pd.to_numeric(pd.Series(values), errors="raise"), dtype=np.float64)
    if array.size == 0:
        return 0.0
    cents = _whole_cents(array)
    # high and low 32 bits summed apart: no int64 overflow for any realistic number of loans
    high, low = int((cents >> 32).sum()), int((cents & 0xFFFFFFFF).sum())
    return (high * 2**32 + low) / 100.0


def _whole_cents(array: np.ndarray) -> np.ndarray:
    """Amounts already rounded to cents as int64 cents; refuses NaN, infinities and amounts
    beyond whole cents in float64."""
    cents = array * 100.0
    # one test covers NaN, infinities and amounts beyond whole cents in float64 (NaN fails it)
    if cents.size and not (np.abs(cents).max() <= 2.0**53):
        raise ValueError("money_total: an amount is not finite or beyond whole cents in float64 (2**53 cents)")
    return np.rint(cents, out=cents).astype(np.int64)


def cents_by_group(cents: np.ndarray, groups: np.ndarray, size: int) -> list[int]:
    """Exact sums of whole ``cents`` per group code ``0 .. size - 1`` (``groups`` of the same
    length), as Python integers (no int64 overflow, as :func:`money_total`).

    Added in int64 where no sum can overflow (the largest amount times the count below
    2**63), else as high and low 32 bits apart, joined exactly.

    Examples
    --------
    >>> cents_by_group(np.array([2**50 + 1, -3, 5]), np.array([0, 1, 0]), 3)
    [1125899906842630, -3, 0]
    >>> cents_by_group(np.array([2**62, 2**62, -1]), np.array([1, 1, 1]), 2)
    [0, 9223372036854775807]
    """
    cents = np.asarray(cents, dtype=np.int64)
    groups = np.asarray(groups, dtype=np.int64)
    if not cents.size:
        return [0] * size
    if int(np.abs(cents).max()) * cents.size < 2**63:
        out = np.zeros(size, dtype=np.int64)
        np.add.at(out, groups, cents)
        return [int(v) for v in out]
    high, low = np.zeros(size, dtype=np.int64), np.zeros(size, dtype=np.int64)
    np.add.at(high, groups, cents >> 32)
    np.add.at(low, groups, cents & 0xFFFFFFFF)
    return [int(h) * 2**32 + int(v) for h, v in zip(high, low)]


def money_totals(values: pd.Series | np.ndarray, groups: np.ndarray, size: int) -> np.ndarray:
    """:func:`money_total` of each group's values at once: ``groups`` holds each value's group
    code (``0 .. size - 1``; -1: in none, left out). The same figures as a ``money_total`` per group.

    Examples
    --------
    >>> money_totals(np.array([0.1, 0.2, 0.3, np.nan]), np.array([0, 1, 0, -1]), 2).tolist()
    [0.4, 0.2]
    """
    groups = np.asarray(groups, dtype=np.int64)
    kept = groups >= 0
    array = np.asarray(pd.to_numeric(pd.Series(values), errors="raise"), dtype=np.float64) if not (
        isinstance(values, (np.ndarray, pd.Series)) and values.dtype.kind == "f") else np.asarray(values, np.float64)
    return np.array([total / 100.0 for total in cents_by_group(_whole_cents(array[kept]), groups[kept], size)],
                    dtype=np.float64)
