"""Loss given default and exposure at default of a loan.

The kernels (:func:`collateral_lgd`, :func:`recovery_discount_factor`, :func:`effective_lgd`,
:func:`undrawn_exposure`, :func:`revolving_ead`) use only arithmetic and ``np.minimum`` /
``np.maximum``: they work elementwise on numpy arrays and compile unchanged with
``numba.njit`` on float scalars (registered with numba when :mod:`allowance.jit` loads it,
:mod:`allowance.jitable`). The fused ECL loop (:mod:`allowance.ecl`) compiles
:func:`loss_given_default`, which composes them, and calls it per loan-month; the engine
takes the exposure add-on of revolving lines from :func:`undrawn_exposure`.

Implements
----------
collateral_recovery        present value of what the collateral recovers, as a share of EAD
final_lgd                  LGD after cures and a scenario multiplier, then the floor, capped at 1
collateral_lgd             LGD of a secured loan: the two above composed
recovery_discount_factor   present value factor of a recovery months after default, at the EIR
effective_lgd              LGD after cures
loss_given_default         a loan's LGD in one month and scenario: flat or collateral, cures,
                           the scenario's LGD multiplier (what the ECL loop calls)
loss_given_default_array   the same for arrays of loans and scenarios (the loop's numpy form)
undrawn_exposure           the CCF share of the undrawn limit (the EAD add-on of a line)
revolving_ead              drawn balance plus the CCF share of the undrawn limit
"""

from __future__ import annotations

import numpy as np

from allowance.discounting import discount_factor, monthly_rate
from allowance.jitable import jitable

#: Exposures below this (currency units, far below a cent) are treated as this small, so a
#: zero exposure takes the limiting LGD of a tiny one instead of dividing by zero.
TINY_EAD = 1e-12


@jitable
def collateral_recovery(ead, collateral, haircut, recovery_cost, recovery_discount):
    r"""Present value at default of what the collateral recovers, as a share of the EAD.

    Parameters
    ----------
    ead : float or ndarray
        Exposure at default (>= 0), the claim on the day of default.
    collateral : float or ndarray
        Collateral value at default (>= 0; scale by a collateral index first).
    haircut : float or ndarray
        Forced-sale discount on the collateral value.
    recovery_cost : float or ndarray
        Costs to recover and sell, as a share of the sale proceeds.
    recovery_discount : float or ndarray
        :math:`DF_m`, the present value factor of the recovery ``m`` months after default at
        the EIR (:func:`recovery_discount_factor`); 1 where the framework does not discount.

    Returns
    -------
    float or ndarray
        The recovered share of EAD in [0, 1].

    Notes
    -----
    The sale proceeds net of costs are :math:`NP = C (1 - h)(1 - c)`. Through the workout the
    claim keeps accruing contractual interest at the EIR, so at recovery it stands at
    :math:`EAD / DF_m = EAD (1 + EIR/12)^m`; the lender recovers at most that claim (a surplus
    goes back to the borrower):

    .. math::

        \text{recovery} = \min\bigl(EAD / DF_m,\ NP\bigr), \qquad
        \frac{PV(\text{recovery})}{EAD} = \min\Bigl(1,\ \frac{NP \cdot DF_m}{EAD}\Bigr).

    Undiscounted (:math:`DF_m = 1`: CECL without the discounted cash-flow method) the claim is
    the amortised cost at default, no interest accrues on it and nothing is discounted: the
    share is :math:`\min(1, NP / EAD)`. It is computed as ``min(1, NP DF / max(EAD, 1e-12))``:
    for a zero exposure this is the limit as the exposure tends to 0 (all of it recovered when
    there is collateral, none without).

    References
    ----------
    .. [1] IFRS 9 *Financial Instruments*, B5.5.55 (cash flows from the sale of collateral
       less the costs of obtaining and selling it) and B5.5.44 (discounting at the EIR).
    .. [2] FASB ASC 326-20-30-4 (the discounted cash-flow method at the effective interest
       rate; other methods need not discount).

    Examples
    --------
    A 100,000 claim on a property worth 120,000, 25 % haircut and 10 % costs: net proceeds
    81,000. Undiscounted, 81 % is recovered; recovered 12 months later at a 6 % EIR (the claim
    is then 106,167.78, more than the proceeds) the present value is 81,000 × 1.005^-12:

    >>> round(float(collateral_recovery(100_000.0, 120_000.0, 0.25, 0.10, 1.0)), 6)
    0.81
    >>> round(float(collateral_recovery(100_000.0, 120_000.0, 0.25, 0.10, 1.005 ** -12)), 6)
    0.762943
    """
    proceeds = collateral * (1.0 - haircut) * (1.0 - recovery_cost)
    return np.minimum(1.0, proceeds * recovery_discount / np.maximum(ead, TINY_EAD))


@jitable
def final_lgd(raw_lgd, cure_rate, floor, multiplier):
    r"""The LGD a secured loan is measured with: cures, then the scenario multiplier, then the floor.

    Parameters
    ----------
    raw_lgd : float or ndarray
        LGD of a default that goes to the loss event (no cure), in [0, 1].
    cure_rate : float or ndarray
        Share of defaults that cure with no loss.
    floor : float or ndarray
        The lowest final LGD (0 for none).
    multiplier : float or ndarray
        The scenario's LGD multiplier for the month (1 = none).

    Notes
    -----
    .. math:: LGD = \min\bigl(1,\ \max(\text{floor},\ m \cdot (1 - \text{cure}) \cdot LGD_{raw})\bigr)

    The floor is the lowest LGD that is booked, so it comes last: neither a cure rate nor an
    upside multiplier takes the LGD below it (common practice, no source).

    Examples
    --------
    >>> float(final_lgd(0.30, 0.5, 0.10, 1.0)), float(final_lgd(0.30, 0.5, 0.20, 1.0))
    (0.15, 0.2)
    >>> float(final_lgd(0.9, 0.0, 0.1, 1.2))
    1.0
    """
    return np.minimum(1.0, np.maximum(floor, multiplier * ((1.0 - cure_rate) * raw_lgd)))


@jitable
def collateral_lgd(ead, collateral, haircut, recovery_cost, floor, recovery_discount, cure_rate=0.0, multiplier=1.0):
    r"""LGD of a secured exposure: the share of EAD not recovered, after cures, then the floor.

    Parameters
    ----------
    ead, collateral, haircut, recovery_cost, recovery_discount
        As in :func:`collateral_recovery`.
    floor : float or ndarray
        The lowest final LGD.
    cure_rate : float or ndarray
        Share of defaults that cure with no loss (applied before the floor).
    multiplier : float or ndarray
        The scenario's LGD multiplier (applied before the floor).

    Returns
    -------
    float or ndarray
        LGD in [floor, 1].

    Notes
    -----
    .. math::

        LGD_{raw} = 1 - \min\Bigl(1,\ \frac{C (1 - h)(1 - c)\, DF_m}{EAD}\Bigr), \qquad
        LGD = \min\bigl(1,\ \max(\text{floor},\ m (1 - \text{cure})\, LGD_{raw})\bigr)

    (:func:`collateral_recovery`, then :func:`final_lgd`). Only arithmetic and
    ``np.minimum`` / ``np.maximum``, so ``numba.njit`` compiles it.

    Examples
    --------
    A 100,000 loan on a 120,000 property, 25 % haircut, 10 % costs (net proceeds 81,000), no
    discounting: LGD 19 %.

    >>> round(float(collateral_lgd(100_000.0, 120_000.0, 0.25, 0.10, 0.05, 1.0)), 6)
    0.19

    Fully covered (the floor binds), and a zero exposure (the limit of a tiny one):

    >>> collateral_lgd(np.array([50_000.0, 0.0]), 120_000.0, 0.25, 0.10, 0.15, 1.0).round(6).tolist()
    [0.15, 0.15]

    A 50 % cure rate halves the 19 %, but the 12 % floor is the lowest LGD booked:

    >>> round(float(collateral_lgd(100_000.0, 120_000.0, 0.25, 0.10, 0.12, 1.0, 0.5)), 6)
    0.12
    """
    raw = 1.0 - collateral_recovery(ead, collateral, haircut, recovery_cost, recovery_discount)
    return final_lgd(raw, cure_rate, floor, multiplier)


@jitable
def recovery_discount_factor(eir_annual, months_to_recovery):
    r"""Present value at default of 1 recovered ``months_to_recovery`` months later.

    Notes
    -----
    .. math:: DF = (1 + EIR / 12)^{-m}

    the monthly compounding convention of the whole package (IFRS 9 B5.5.44: discount
    recoveries at the effective interest rate): the discount factor
    :func:`allowance.discounting.discount_factor` of the monthly EIR.

    Examples
    --------
    >>> round(float(recovery_discount_factor(0.06, 12)), 6)
    0.941905
    """
    return discount_factor(monthly_rate(eir_annual), months_to_recovery)


@jitable
def effective_lgd(lgd, cure_rate):
    r"""LGD after cures: a cured default loses nothing.

    Notes
    -----
    .. math:: LGD_{eff} = (1 - \text{cure rate})\, LGD

    Examples
    --------
    >>> round(float(effective_lgd(0.45, 0.20)), 6)
    0.36
    """
    return (1.0 - cure_rate) * lgd


def loss_given_default(ead, flat_lgd, collateral, collateral_index, haircut, recovery_cost, floor, recovery_discount,
                       cure_rate, multiplier):
    r"""A loan's LGD in one month under one scenario (float scalars; the ECL loop's form).

    Parameters
    ----------
    ead : float
        Exposure at default in the month.
    flat_lgd : float
        The segment's flat LGD after cures (:func:`effective_lgd`), used when there is no
        collateral.
    collateral : float
        Today's collateral value; 0 when the loan has none or its segment has no
        ``collateral_lgd`` (then the flat LGD applies).
    collateral_index : float
        The scenario's collateral value in the month relative to today.
    haircut, recovery_cost, floor, recovery_discount : float
        As in :func:`collateral_lgd`.
    cure_rate : float
        Share of defaults that cure with no loss.
    multiplier : float
        The scenario's LGD multiplier for the month.

    Returns
    -------
    float
        The collateral LGD of ``collateral × collateral_index`` with cures and the multiplier
        before the floor (:func:`collateral_lgd`) when ``collateral > 0``, else
        :math:`\min(1, m \cdot LGD_{flat})`.

    Examples
    --------
    A 100,000 loan on a 120,000 property, 25 % haircut, 10 % costs, a 5 % floor, recovered at
    once, 10 % cures: (1 - 0.1) × 0.19 = 0.171; without collateral the flat 0.40 after
    cures, 0.36 (by hand, common practice, no source):

    >>> round(float(loss_given_default(100_000.0, 0.36, 120_000.0, 1.0, 0.25, 0.1, 0.05, 1.0, 0.1, 1.0)), 6)
    0.171
    >>> round(float(loss_given_default(100_000.0, 0.36, 0.0, 1.0, 0.25, 0.1, 0.05, 1.0, 0.1, 1.0)), 6)
    0.36
    """
    if collateral > 0.0:  # cures and the multiplier before the floor: the floor is the lowest LGD
        value = collateral * collateral_index
        return collateral_lgd(ead, value, haircut, recovery_cost, floor, recovery_discount, cure_rate, multiplier)
    return min(1.0, flat_lgd * multiplier)


def loss_given_default_array(ead, flat_lgd, collateral, collateral_index, haircut, recovery_cost, floor,
                             recovery_discount, cure_rate, multiplier):
    r""":func:`loss_given_default` of many loans (and scenarios) at once: numpy arrays that broadcast.

    The same two branches, chosen per element: :func:`collateral_lgd` where ``collateral > 0``,
    else :math:`\min(1, m \cdot LGD_{flat})`.

    Examples
    --------
    The two loans of :func:`loss_given_default`'s examples side by side:

    >>> loss_given_default_array(np.array([100_000.0, 100_000.0]), 0.36, np.array([120_000.0, 0.0]), 1.0, 0.25,
    ...                          0.1, 0.05, 1.0, 0.1, 1.0).round(6).tolist()
    [0.171, 0.36]
    """
    secured = collateral_lgd(ead, collateral * collateral_index, haircut, recovery_cost, floor, recovery_discount,
                             cure_rate, multiplier)
    return np.where(collateral > 0.0, secured, np.minimum(1.0, flat_lgd * multiplier))


@jitable
def undrawn_exposure(drawn, credit_limit, ccf):
    r"""The EAD add-on of a revolving line: the CCF share of its undrawn limit.

    Notes
    -----
    .. math:: \text{add-on} = CCF \cdot \max(\text{limit} - \text{drawn}, 0)

    A line drawn over its limit has nothing undrawn.

    References
    ----------
    .. [1] IFRS 9 Financial Instruments, paragraphs B5.5.31 and B5.5.40 (expected drawdowns
       on loan commitments and revolving facilities).

    Examples
    --------
    >>> float(undrawn_exposure(3_000.0, 10_000.0, 0.5)), float(undrawn_exposure(12_000.0, 10_000.0, 0.5))
    (3500.0, 0.0)
    """
    return ccf * np.maximum(credit_limit - drawn, 0.0)


def revolving_ead(drawn, credit_limit, ccf):
    r"""EAD of a revolving line: the drawn balance plus the CCF share of the undrawn limit.

    Notes
    -----
    .. math:: EAD = \text{drawn} + CCF \cdot \max(\text{limit} - \text{drawn}, 0)

    The add-on is :func:`undrawn_exposure`; the ECL loop adds it to the drawn balance of
    every month. Under CECL an unconditionally cancellable line takes no add-on (drawn only).

    Examples
    --------
    >>> float(revolving_ead(3_000.0, 10_000.0, 0.5))
    6500.0
    >>> revolving_ead(np.array([3_000.0, 12_000.0]), 10_000.0, 0.5).tolist()
    [6500.0, 12000.0]
    """
    return drawn + undrawn_exposure(drawn, credit_limit, ccf)
