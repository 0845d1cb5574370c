"""Money: rounded to cents once per loan, and totals that foot exactly.

Implements
----------
CENT_DECIMALS  decimals money is rounded to (2: cents)
money_total    the sum of figures already rounded to cents, exactly (through whole cents)

Every total a run reports is the sum of its rounded loan figures, added in whole cents
(int64) so that no floating-point residue makes a report miss its footing by a cent.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
import pandas as pd

__all__ = ["CENT_DECIMALS", "money_total"]

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
    cents = array * 100.0
    # one test covers NaN, infinities and amounts beyond whole cents in float64 (NaN fails it)
    if not (np.abs(cents).max() <= 2.0**53):
        raise ValueError("money_total: an amount is not finite or beyond whole cents in float64 (2**53 cents)")
    cents = np.rint(cents, out=cents).astype(np.int64)
    # high and low 32 bits summed apart: no int64 overflow for any realistic number of loans
    high, low = int((cents >> 32).sum()), int((cents & 0xFFFFFFFF).sum())
    return (high * 2**32 + low) / 100.0
