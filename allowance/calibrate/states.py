r"""The delinquency state of every loan-month, and the month each loan leaves the history.

A loan-month is in one of the delinquency buckets ``current, dpd_1_29, ..., dpd_150_179``
(30-day steps of its days past due at the month end), or it has left the book: written off
(``charge_off``) or repaid (``paid_off``). A loan is charged off in the month it is written off
(a charge-off or bankruptcy loss in the history) or in the month its days past due reach the
segment's charge-off point, whichever comes first: 120 days past due for closed-end loans, 180
for open-end revolving lines (common practice for US retail credit, no source). A loan that
rolls one bucket a month from current therefore charges off in its fifth month past due at 120
days and in its seventh at 180. Rows of a loan after it has left (recoveries on a charged-off
loan) are ``after_exit``: they carry cash, not a state.

Implements
----------
STATES              the state names in matrix order (the seven buckets, charge_off, paid_off)
CHARGE_OFF, PAID_OFF, AFTER_EXIT   their codes
segment_states      the codes a segment's matrix uses for its charge-off point
month_states        state of every row of a partition sorted by loan and month
first_exit          each loan's first row in charge_off or paid_off

Examples
--------
A closed-end loan rolling one bucket a month (days past due at each month end):

>>> dpd = np.array([0, 15, 45, 75, 105, 135, 165, 195])
>>> loan = np.zeros(8, np.int32)
>>> [STATES[s] if s < len(STATES) else "after_exit" for s in month_states(loan, dpd, np.zeros(8, np.uint8), 120)]
['current', 'dpd_1_29', 'dpd_30_59', 'dpd_60_89', 'dpd_90_119', 'charge_off', 'after_exit', 'after_exit']
>>> [STATES[s] if s < len(STATES) else "after_exit" for s in month_states(loan, dpd, np.zeros(8, np.uint8), 180)][5:]
['dpd_120_149', 'dpd_150_179', 'charge_off']
"""

from __future__ import annotations

import numpy as np

from allowance.curves.roll_rates import CHARGE_OFF as CHARGE_OFF_NAME
from allowance.curves.roll_rates import DELINQUENCY_BUCKETS
from allowance.curves.roll_rates import PAID_OFF as PAID_OFF_NAME
from allowance.intake.panel import PAID_OFF as PAID_OFF_FLAG
from allowance.intake.panel import WRITTEN_OFF

BUCKETS: tuple[str, ...] = DELINQUENCY_BUCKETS[180]
STATES: tuple[str, ...] = BUCKETS + (CHARGE_OFF_NAME, PAID_OFF_NAME)
CHARGE_OFF = len(BUCKETS)  # 7
PAID_OFF = CHARGE_OFF + 1  # 8
AFTER_EXIT = PAID_OFF + 1  # 9
N_STATES = len(STATES)


def segment_states(charge_off_dpd: int) -> np.ndarray:
    """The state codes of a segment's roll-rate matrix, in order.

    Examples
    --------
    >>> segment_states(120).tolist(), segment_states(180).tolist()
    ([0, 1, 2, 3, 4, 7, 8], [0, 1, 2, 3, 4, 5, 6, 7, 8])
    """
    buckets = len(DELINQUENCY_BUCKETS[charge_off_dpd])
    return np.array([*range(buckets), CHARGE_OFF, PAID_OFF], dtype=np.int64)


def first_exit(loan: np.ndarray, state: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For every row, the position of its loan's first exit row (``-1``: none) and that exit state.

    Parameters
    ----------
    loan : array of int
        Loan codes, rows sorted by loan then month.
    state : array of int
        Row states before ``after_exit`` is marked.

    Examples
    --------
    >>> pos, kind = first_exit(np.array([0, 0, 0, 1, 1]), np.array([0, 7, 8, 0, 0]))
    >>> pos.tolist(), kind.tolist()
    ([1, 1, 1, -1, -1], [7, 7, 7, -1, -1])
    """
    n = len(loan)
    if n == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    starts = np.flatnonzero(np.r_[True, loan[1:] != loan[:-1]])
    group = np.cumsum(np.r_[True, loan[1:] != loan[:-1]]) - 1
    exit_row = (state == CHARGE_OFF) | (state == PAID_OFF)
    big = np.iinfo(np.int64).max
    first = np.minimum.reduceat(np.where(exit_row, np.arange(n), big), starts)
    position = first[group]
    has = position != big
    position = np.where(has, position, -1)
    kind = np.where(has, state[np.where(has, position, 0)], -1)
    return position, kind


def month_states(loan: np.ndarray, dpd: np.ndarray, flags: np.ndarray, charge_off_dpd: int | np.ndarray) -> np.ndarray:
    """The state of every row (rows sorted by loan, then month).

    Parameters
    ----------
    loan, dpd, flags : arrays
        Loan codes, days past due and the panel's flags of each row.
    charge_off_dpd : int or array of int
        The charge-off point (120 or 180), one for all rows or one per row (its segment's).

    Returns
    -------
    ndarray of int8
        Bucket codes 0-6, :data:`CHARGE_OFF`, :data:`PAID_OFF`, or :data:`AFTER_EXIT`.

    Notes
    -----
    Bucket = 0 when current, else 1 + floor(dpd / 30). A written-off row is ``charge_off``
    and a repaid row ``paid_off`` whatever their days past due; a row at or beyond the
    charge-off point is ``charge_off`` whether or not the history writes an amount off
    that month (the contractual charge-off month).
    """
    dpd = np.asarray(dpd, dtype=np.int64)
    point = np.broadcast_to(np.asarray(charge_off_dpd, dtype=np.int64), dpd.shape)
    state = np.where(dpd <= 0, 0, 1 + dpd // 30)
    state = np.where(dpd >= point, CHARGE_OFF, np.minimum(state, len(BUCKETS) - 1))
    state = np.where((flags & PAID_OFF_FLAG) != 0, PAID_OFF, state)
    state = np.where((flags & WRITTEN_OFF) != 0, CHARGE_OFF, state)
    position, _ = first_exit(np.asarray(loan), state)
    after = (position >= 0) & (np.arange(len(state)) > position)
    return np.where(after, AFTER_EXIT, state).astype(np.int8)
