"""Loss given default and exposure at default of a loan.

The kernels (:func:`collateral_lgd`, :func:`recovery_discount_factor`, :func:`effective_lgd`,
:func:`revolving_ead`) use only arithmetic and ``np.minimum`` / ``np.maximum``: they work
elementwise on numpy arrays and compile unchanged with ``numba.njit`` on float scalars, so
the fused ECL loop can call them per loan-month.

Implements
----------
collateral_lgd             LGD of a secured loan from its collateral, haircut, costs and a floor
recovery_discount_factor   present value factor of a recovery months after default, at the EIR
effective_lgd              LGD after cures
base_lgd                   the LGD of each loan at the as-of date, per its segment
revolving_ead              drawn balance plus the CCF share of the undrawn limit
"""

from __future__ import annotations

import numpy as np

from allowance.schemas import SegmentAssumptions

#: Exposures below this (currency units, far below a cent) are treated as this small, so a
#: zero exposure takes the limiting LGD of a tiny one instead of dividing by zero.
TINY_EAD = 1e-12


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


def recovery_discount_factor(eir_annual, months_to_recovery):
    r"""Present value at default of 1 recovered ``months_to_recovery`` months later.

    Notes
    -----
    .. math:: DF = (1 + EIR / 12)^{-m}

    the monthly compounding convention of the whole package (IFRS 9 B5.5.44: discount
    recoveries at the effective interest rate).

    Examples
    --------
    >>> round(float(recovery_discount_factor(0.06, 12)), 6)
    0.941905
    """
    return (1.0 + eir_annual / 12.0) ** (-months_to_recovery)


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


def revolving_ead(drawn, credit_limit, ccf):
    r"""EAD of a revolving line: the drawn balance plus the CCF share of the undrawn limit.

    Notes
    -----
    .. math:: EAD = \text{drawn} + CCF \cdot \max(\text{limit} - \text{drawn}, 0)

    Under CECL an unconditionally cancellable line takes ``ccf = 0`` (drawn only). The caller
    fills a missing limit with the drawn balance (nothing undrawn).

    Examples
    --------
    >>> float(revolving_ead(3_000.0, 10_000.0, 0.5))
    6500.0
    >>> revolving_ead(np.array([3_000.0, 12_000.0]), 10_000.0, 0.5).tolist()
    [6500.0, 12000.0]
    """
    return drawn + ccf * np.maximum(credit_limit - drawn, 0.0)


def base_lgd(segment: SegmentAssumptions, ead: np.ndarray, collateral: np.ndarray, eir: np.ndarray) -> np.ndarray:
    """The LGD of each loan at the as-of date, cures applied.

    Parameters
    ----------
    segment : SegmentAssumptions
        The loans' segment: its flat ``lgd``, optional ``collateral_lgd`` and ``cure_rate``.
    ead : ndarray
        Exposure at default per loan.
    collateral : ndarray
        ``collateral_value`` per loan; NaN where the tape gives none.
    eir : ndarray
        Effective interest rate per loan (nominal annual), already defaulted to the contract rate.

    Returns
    -------
    ndarray
        Per loan: ``effective_lgd(collateral_lgd(...), cure_rate)`` when the segment sets
        ``collateral_lgd`` and the loan has a collateral value, otherwise
        ``effective_lgd(lgd, cure_rate)``.

    Raises
    ------
    ValueError
        An EAD or EIR the collateral LGD needs is NaN (the engine fills them before this).

    Examples
    --------
    >>> seg = SegmentAssumptions(pd_12m=0.02, lgd=0.40, cure_rate=0.1, collateral_lgd={
    ...     "haircut": 0.25, "recovery_cost": 0.1, "floor": 0.05, "months_to_recovery": 0})
    >>> base_lgd(seg, np.array([100_000.0, 100_000.0]), np.array([120_000.0, np.nan]),
    ...          np.array([0.06, 0.06])).round(6).tolist()
    [0.171, 0.36]
    """
    ead, collateral, eir = np.broadcast_arrays(
        np.asarray(ead, dtype=np.float64), np.asarray(collateral, dtype=np.float64), np.asarray(eir, dtype=np.float64)
    )
    flat = np.full(ead.shape, segment.lgd, dtype=np.float64)
    terms = segment.collateral_lgd
    if terms is None:
        return effective_lgd(flat, segment.cure_rate)
    secured = ~np.isnan(collateral)
    if np.isnan(ead[secured]).any() or np.isnan(eir[secured]).any():
        raise ValueError("collateral LGD needs an EAD and an EIR for every loan with a collateral value")
    discount = recovery_discount_factor(eir, terms.months_to_recovery)
    secured_lgd = collateral_lgd(ead, collateral, terms.haircut, terms.recovery_cost, terms.floor, discount)
    return effective_lgd(np.where(secured, secured_lgd, flat), segment.cure_rate)
