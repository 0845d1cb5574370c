"""Loans measured one by one: collateral-dependent loans and the lender's own assessment.

Most loans are measured by the model (PD × LGD × EAD over scenarios, or the cash-flow
shortfall). Two kinds of loan are not:

* a **collateral-dependent** loan (the borrower is in financial difficulty and repayment is
  expected substantially from the operation or sale of the collateral; or foreclosure is
  probable) is measured on the collateral at the reporting date: amortised cost less the
  collateral's fair value less costs to sell, floored at zero (ASC 326-20-35-4, 35-5; under
  IFRS 9 the cash flows from realising the collateral less the costs of obtaining and selling
  it, B5.5.55);
* a loan with an **individual assessment** on the tape (``individual_ecl``, an amount from the
  lender's own review) takes that amount instead of the model.

Implements
----------
MEASUREMENTS              measurement codes (the ``measurement`` column of loans.csv)
collateral_dependent_ecl  max(0, amortised cost - collateral × (1 - costs to sell))
measurement_method        which measurement each loan takes, and why
"""

from __future__ import annotations

import numpy as np

#: code -> what it means. ``measurement`` in loans.csv holds the code.
MEASUREMENTS: dict[str, str] = {
    "model": "the model: probability-weighted PD x LGD x EAD (or the cash-flow shortfall)",
    "collateral_dependent": "collateral dependent, flagged on the tape (collateral_dependent)",
    "collateral_dependent_defaulted": (
        "collateral dependent: a defaulted loan with a collateral value in a segment whose "
        "collateral_dependent.defaulted_secured option is on"
    ),
    "individual": "the lender's individual assessment (tape column individual_ecl)",
}

#: Position of each code in :data:`MEASUREMENTS`, as :func:`measurement_method` returns it.
MODEL, COLLATERAL_DEPENDENT, COLLATERAL_DEPENDENT_DEFAULTED, INDIVIDUAL = range(4)


def collateral_dependent_ecl(amortised_cost, collateral, costs_to_sell):
    r"""Expected credit loss of a collateral-dependent loan.

    Parameters
    ----------
    amortised_cost : float or ndarray
        The loan's amortised cost basis at the reporting date (>= 0).
    collateral : float or ndarray
        Fair value of the collateral at the reporting date (>= 0).
    costs_to_sell : float or ndarray
        Costs to sell, as a share of the fair value (0 where repayment is expected from the
        operation of the collateral rather than its sale).

    Notes
    -----
    .. math:: ECL = \max\bigl(0,\ AC - C\,(1 - \text{costs to sell})\bigr)

    No PD, no scenarios and no discounting: the collateral's fair value at the reporting date
    already prices the recovery. The allowance is floored at zero (a surplus of collateral
    is not a negative allowance here).

    References
    ----------
    .. [1] FASB ASC 326-20-35-4 (foreclosure probable: measure on the fair value of the
       collateral, less costs to sell where repayment depends on its sale) and 326-20-35-5
       (the practical expedient for collateral-dependent assets).
    .. [2] IFRS 9 *Financial Instruments*, B5.5.55 (cash flows from the realisation of
       collateral less the costs of obtaining and selling it).

    Examples
    --------
    A 300,000 loan on collateral worth 250,000, 8 % costs to sell: 300,000 - 230,000 = 70,000;
    on collateral worth 400,000 nothing is lost.

    >>> collateral_dependent_ecl(np.array([300_000.0, 300_000.0]), np.array([250_000.0, 400_000.0]), 0.08).tolist()
    [70000.0, 0.0]
    """
    return np.maximum(0.0, amortised_cost - collateral * (1.0 - costs_to_sell))


def measurement_method(individual_ecl, collateral_dependent, defaulted_secured, in_default, has_collateral):
    """Which measurement each loan takes (a position in :data:`MEASUREMENTS`).

    Parameters
    ----------
    individual_ecl : ndarray of float
        The tape's ``individual_ecl``; NaN where blank.
    collateral_dependent : ndarray of bool
        The tape's ``collateral_dependent`` flag.
    defaulted_secured : ndarray of bool
        Per loan, whether its segment treats every defaulted loan with a collateral value as
        collateral dependent.
    in_default : ndarray of bool
        The default test (days past due at the threshold, or the defaulted / bankrupt flags).
    has_collateral : ndarray of bool
        The tape gives a collateral value.

    Returns
    -------
    ndarray of int8

    Notes
    -----
    In order of precedence: an individual assessment on the tape; the tape's collateral-dependent
    flag; a defaulted loan with a collateral value in a segment that treats those as collateral
    dependent; otherwise the model.

    Examples
    --------
    >>> measurement_method(np.array([np.nan, 5.0, np.nan, np.nan, np.nan]),
    ...                    np.array([False, True, True, False, False]),
    ...                    np.array([True, True, False, True, True]),
    ...                    np.array([False, True, False, True, True]),
    ...                    np.array([True, True, True, True, False])).tolist()
    [0, 3, 1, 2, 0]
    """
    individual = ~np.isnan(np.asarray(individual_ecl, float))
    flagged = np.asarray(collateral_dependent, bool)
    defaulted = np.asarray(defaulted_secured, bool) & np.asarray(in_default, bool) & np.asarray(has_collateral, bool)
    return np.select(
        [individual, flagged, defaulted], [INDIVIDUAL, COLLATERAL_DEPENDENT, COLLATERAL_DEPENDENT_DEFAULTED], MODEL
    ).astype(np.int8)
