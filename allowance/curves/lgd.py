"""Loss given default and exposure at default of a loan.

The kernels (:func:`collateral_lgd`, :func:`recovery_discount_factor`, :func:`effective_lgd`,
:func:`undrawn_exposure`, :func:`revolving_ead`) use only arithmetic and ``np.minimum`` /
``np.maximum``: they work elementwise on numpy arrays and compile unchanged with
``numba.njit`` on float scalars. The fused ECL loop (:mod:`allowance.ecl`) compiles
:func:`loss_given_default`, which composes them, and calls it per loan-month; the engine
takes the exposure add-on of revolving lines from :func:`undrawn_exposure`.

Implements
----------
collateral_lgd             LGD of a secured loan from its collateral, haircut, costs and a floor
recovery_discount_factor   present value factor of a recovery months after default, at the EIR
effective_lgd              LGD after cures
loss_given_default         a loan's LGD in one month and scenario: flat or collateral, cures,
                           the scenario's LGD multiplier (what the ECL loop calls)
undrawn_exposure           the CCF share of the undrawn limit (the EAD add-on of a line)
revolving_ead              drawn balance plus the CCF share of the undrawn limit
"""

from __future__ import annotations

import numpy as np
from numba.extending import register_jitable

from allowance.discounting import discount_factor, monthly_rate

#: Exposures below this (currency units, far below a cent) are treated as this small, so a
#: zero exposure takes the limiting LGD of a tiny one instead of dividing by zero.
TINY_EAD = 1e-12


@register_jitable
def collateral_lgd(ead, collateral, haircut, recovery_cost, floor, recovery_discount):
    r"""LGD of a secured exposure: the share of EAD not recovered from the collateral.

    Parameters
    ----------
    ead : float or ndarray
        Exposure at default (>= 0).
    collateral : float or ndarray
        Collateral value at default (>= 0; scale by a collateral index first).
    haircut : float or ndarray
        Forced-sale discount on the collateral value.
    recovery_cost : float or ndarray
        Costs to recover, as a share of the proceeds.
    floor : float or ndarray
        Lowest LGD allowed.
    recovery_discount : float or ndarray
        Present value factor of the recovery (:func:`recovery_discount_factor`).

    Returns
    -------
    float or ndarray
        LGD in [floor, 1].

    Notes
    -----
    .. math::

        \text{recovery} = \min(EAD,\ C (1 - h)) (1 - c)\, DF, \qquad
        LGD = \min\bigl(1, \max(\text{floor}, 1 - \text{recovery} / EAD)\bigr).

    It is computed as ``1 - min(1, C (1 - h) / max(EAD, 1e-12)) (1 - c) DF``, which equals the
    formula for any exposure above 1e-12 and, for a zero exposure, gives the limit as the
    exposure tends to 0 (a loan with collateral loses ``1 - (1 - c) DF``; without, 1). Only
    arithmetic and ``np.minimum`` / ``np.maximum``, so ``numba.njit`` compiles it.

    Examples
    --------
    A 100,000 loan on a 120,000 property, 25 % haircut (90,000 after it), 10 % costs, no
    discounting: recovery 81,000, LGD 19 %.

    >>> round(float(collateral_lgd(100_000.0, 120_000.0, 0.25, 0.10, 0.05, 1.0)), 6)
    0.19

    Fully covered (the floor binds), and a zero exposure (the limit of a tiny one):

    >>> collateral_lgd(np.array([50_000.0, 0.0]), 120_000.0, 0.25, 0.10, 0.15, 1.0).round(6).tolist()
    [0.15, 0.15]
    """
    covered = np.minimum(1.0, collateral * (1.0 - haircut) / np.maximum(ead, TINY_EAD))
    recovered_share = covered * (1.0 - recovery_cost) * recovery_discount
    return np.minimum(1.0, np.maximum(floor, 1.0 - recovered_share))


@register_jitable
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


@register_jitable(inline="always")
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
        :math:`\min(1, m \cdot LGD)` with LGD the collateral LGD of ``collateral ×
        collateral_index`` after cures when ``collateral > 0``, else ``flat_lgd``.

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
    if collateral > 0.0:
        value = collateral * collateral_index
        base = effective_lgd(collateral_lgd(ead, value, haircut, recovery_cost, floor, recovery_discount), cure_rate)
    else:
        base = flat_lgd
    return min(1.0, base * multiplier)


@register_jitable
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
