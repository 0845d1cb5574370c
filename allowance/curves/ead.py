"""Exposure at default beyond the drawn balance: accrued interest and arrears, the credit
conversion factor of undrawn amounts.

Implements
----------
ACCRUED_INTEREST     policy -> which loans carry their accrued interest in the EAD
accrued_exposure     the accrued interest each loan adds to its EAD under a policy
ccf_buckets          a segment's ``ccf_by_dpd`` table as sorted arrays
ccf_by_days_past_due each line's CCF from its days-past-due bucket
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from allowance.schemas import AccruedInterest

__all__ = ["ACCRUED_INTEREST", "accrued_exposure", "ccf_buckets", "ccf_by_days_past_due"]

#: policy -> (accrued interest, days past due) -> the amount in the EAD. ``exclude`` is the
#: ASC 326-20-30-5A election (no allowance on accrued interest written off in time);
#: ``delinquent`` adds the interest a loan past due owes (its arrears of interest); ``all``
#: measures the gross carrying amount with its accrued interest, as IFRS 9 defines it
#: (Appendix A, *gross carrying amount*).
ACCRUED_INTEREST: dict[AccruedInterest, Callable[[np.ndarray, np.ndarray], np.ndarray]] = {
    "exclude": lambda accrued, dpd: np.zeros_like(accrued),
    "delinquent": lambda accrued, dpd: np.where(dpd > 0, accrued, 0.0),
    "all": lambda accrued, dpd: accrued,
}


def accrued_exposure(accrued_interest, days_past_due, policy: AccruedInterest) -> np.ndarray:
    """The accrued interest (arrears included) each loan adds to its exposure at default.

    Parameters
    ----------
    accrued_interest : array_like
        The tape's ``accrued_interest``; NaN where blank (nothing accrued).
    days_past_due : array_like
        Days past due at the as-of date.
    policy : {"exclude", "delinquent", "all"}
        The framework's ``accrued_interest`` option (:data:`ACCRUED_INTEREST`).

    Notes
    -----
    The amount is added to the EAD of every month of the loan's path: the claim that defaults
    includes the interest already owed.

    References
    ----------
    .. [1] FASB ASC 326-20-30-5A (the election not to measure an allowance on accrued
       interest receivable that is written off in time).
    .. [2] IFRS 9 *Financial Instruments*, Appendix A (*gross carrying amount*, *amortised
       cost*) and 5.5.3.

    Examples
    --------
    >>> accrued, dpd = np.array([120.0, 310.5, np.nan]), np.array([0, 65, 40])
    >>> [accrued_exposure(accrued, dpd, p).tolist() for p in ("exclude", "delinquent", "all")]
    [[0.0, 0.0, 0.0], [0.0, 310.5, 0.0], [120.0, 310.5, 0.0]]
    """
    accrued = np.nan_to_num(np.asarray(accrued_interest, float), nan=0.0)
    return ACCRUED_INTEREST[policy](accrued, np.asarray(days_past_due))


def ccf_buckets(table: dict[str, float]) -> tuple[np.ndarray, np.ndarray]:
    """A ``ccf_by_dpd`` table (lowest days past due of each bucket -> CCF) as two arrays sorted
    by days past due.

    Examples
    --------
    >>> [a.tolist() for a in ccf_buckets({"30": 0.5, "0": 0.3})]
    [[0, 30], [0.3, 0.5]]
    """
    pairs = sorted((int(k), float(v)) for k, v in table.items())
    return np.array([k for k, _ in pairs], dtype=np.int64), np.array([v for _, v in pairs], dtype=float)


def ccf_by_days_past_due(days_past_due, lows: np.ndarray, ccf: np.ndarray) -> np.ndarray:
    """Each line's credit conversion factor from the bucket its days past due fall in: the CCF
    of the highest bucket floor at or below them.

    Notes
    -----
    A borrower falling behind tends to draw more of the line before default, so a CCF may be
    stated by delinquency bucket (common practice, no source). The buckets start at 0 days.

    Examples
    --------
    >>> lows, ccf = ccf_buckets({"0": 0.3, "30": 0.5, "90": 0.7})
    >>> ccf_by_days_past_due(np.array([0, 29, 30, 89, 400]), lows, ccf).tolist()
    [0.3, 0.3, 0.5, 0.5, 0.7]
    """
    position = np.searchsorted(lows, np.asarray(days_past_due), side="right") - 1
    return ccf[np.clip(position, 0, len(ccf) - 1)]
