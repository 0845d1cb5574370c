r"""Refinance risk at maturity: balloon and interest-only loans that cannot repay when due.

A balloon or interest-only loan owes a large balance on its maturity date, which the borrower
usually pays by refinancing or selling the property. Some cannot: the loan defaults at
maturity although it never missed a payment (a maturity default, as against a term default;
common practice in commercial real-estate credit, no source). The chance of it rises with the
loan-to-value at maturity and falls with the debt-service coverage.

The segment states a table (``[segments.<name>.refinance_risk]``): the probability that a loan
still outstanding at maturity fails to repay, by loan-to-value band and optionally by
debt-service-coverage band. The loss is measured on the balance due at maturity, with the
loan's LGD in that month:

.. math::

    ECL_{maturity} = S_T \; q \; LGD_T \; EAD_T \; DF_T,

where :math:`S_T` is the share of loans neither defaulted nor prepaid by the end of the
maturity month T, :math:`q` the refinance-failure probability and :math:`EAD_T` the balance
at the start of month T (the balloon and the last instalment).

References
----------
.. [1] IFRS 9 *Financial Instruments*, 5.5.17 and B5.5.38 (all cash shortfalls over the
   contractual life, on reasonable and supportable information).
.. [2] FASB ASC 326-20-30-6 (expected credit losses over the contractual term).

Implements
----------
maturity_ltv        balance due at maturity over today's collateral value
refinance_pd        the refinance-failure probability of each loan, from the segment's table
refinance_default   the share of loans that fail at maturity: S_T × q
"""

from __future__ import annotations

import numpy as np

from allowance.jitable import jitable


def maturity_ltv(balance_due, collateral):
    r"""Loan-to-value at maturity: the balance due over the collateral value today.

    Notes
    -----
    .. math:: LTV_T = \frac{B_T}{C}

    A loan without a collateral value (NaN) or with a zero one gets ``inf``: it falls in the
    highest loan-to-value band (the conservative reading; the engine reports each such loan).

    Examples
    --------
    >>> maturity_ltv(np.array([600_000.0, 600_000.0, 1.0]), np.array([1_000_000.0, np.nan, 0.0])).tolist()
    [0.6, inf, inf]
    """
    due = np.asarray(balance_due, float)
    value = np.asarray(collateral, float)
    known = np.isfinite(value) & (value > 0.0)
    out = np.full(np.broadcast(due, value).shape, np.inf)
    np.divide(due, value, out=out, where=known)
    return out


def refinance_pd(ltv, ltv_bands, table, dscr=None, dscr_bands=None):
    """Refinance-failure probability of each loan, looked up in the segment's table.

    Parameters
    ----------
    ltv : ndarray
        Loan-to-value at maturity (:func:`maturity_ltv`).
    ltv_bands : sequence of float
        Upper edges of the loan-to-value bands, increasing; a loan at an edge is in the band it
        closes; above the last edge is the last band.
    table : sequence
        One probability per LTV band (``len(ltv_bands) + 1``) or, with ``dscr_bands``, one such
        row per debt-service-coverage band.
    dscr : ndarray, optional
        Debt-service coverage per loan; NaN where the tape gives none (the lowest band: the
        conservative reading; the engine reports each such loan).
    dscr_bands : sequence of float, optional
        Upper edges of the coverage bands, increasing; a loan at an edge is in the band above
        it (coverage of exactly 1.0 is in the band that starts at 1.0).

    Returns
    -------
    ndarray
        q per loan.

    Examples
    --------
    Bands LTV <= 60 %, <= 80 %, <= 100 %, above; coverage below 1.2 and from 1.2:

    >>> refinance_pd(np.array([0.5, 0.6, 0.75, 1.3]), [0.6, 0.8, 1.0], [0.02, 0.05, 0.15, 0.4]).tolist()
    [0.02, 0.02, 0.05, 0.4]
    >>> refinance_pd(np.array([0.5, 0.5, 0.9]), [0.6, 0.8, 1.0],
    ...              [[0.05, 0.1, 0.3, 0.6], [0.01, 0.03, 0.1, 0.3]],
    ...              dscr=np.array([1.1, 1.2, np.nan]), dscr_bands=[1.2]).tolist()
    [0.05, 0.01, 0.3]
    """
    ltv = np.asarray(ltv, float)
    probabilities = np.asarray(table, float)
    column = np.searchsorted(np.asarray(ltv_bands, float), ltv, side="left")
    if dscr_bands is None:
        return probabilities[column]
    coverage = np.nan_to_num(np.asarray(dscr, float), nan=-np.inf)
    row = np.searchsorted(np.asarray(dscr_bands, float), coverage, side="right")
    return probabilities[row, column]


@jitable
def refinance_default(survival_at_maturity, q):
    r"""Share of loans that fail to repay at maturity: :math:`S_T \cdot q`.

    ``survival_at_maturity`` is the share neither defaulted nor prepaid by the end of the
    maturity month (a loan that prepays has repaid; one that defaulted in the month is already
    counted as a term default).

    Examples
    --------
    >>> refinance_default(0.9, 0.1)
    0.09000000000000001
    """
    return survival_at_maturity * q
