r"""The expected-credit-loss sum, per loan, per framework and scenario, 12-month and lifetime.

One fused compiled loop over loans (in parallel) and months: it walks each loan's balance
path once, and for every framework and scenario accumulates

.. math::

    ECL = \sum_{t=1}^{H} S_{t-1}\; pd_t\; LGD_t\; EAD_t\; DF_t, \qquad
    S_t = \prod_{k \le t} (1 - pd_k)(1 - smm_k)

where :math:`pd_t` is the marginal PD conditional on survival, :math:`EAD_t` the balance at the
start of month t, :math:`DF_t = (1 + EIR/12)^{-t}` (1 where the framework does not discount)
and :math:`smm_t` the prepayment rate (competing risk). The 12-month ECL sums t ≤ 12. A loan
in default takes PD = 1 now: ECL = LGD · EAD_0. The formulas live in the concept modules
(:mod:`~allowance.cashflows`, :mod:`~allowance.curves`, :mod:`~allowance.discounting`); this
module only composes them, and never allocates a loans × months array.

References
----------
.. [1] IFRS 9 *Financial Instruments*, 5.5.3-5.5.5 and B5.5.28-B5.5.44 (12-month and
   lifetime expected credit losses, probability-weighted, discounted at the EIR).
.. [2] FASB ASC 326-20-30 (current expected credit losses over the contractual life).

Implements
----------
KernelInputs   the per-loan arrays and the tables the loop reads
KernelResult   per loan, framework and scenario: ecl_12m, ecl_lifetime, pd_12m, pd_lifetime; ead
expected_losses  run the loop
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from allowance.cashflows import scheduled_principal
from allowance.curves.lgd import collateral_lgd as _collateral_lgd_py

_collateral_lgd = numba.njit(cache=True)(_collateral_lgd_py)


@dataclass(frozen=True)
class KernelInputs:
    """Arrays for :func:`expected_losses`. n loans, F frameworks, S scenarios, T months.

    Per loan: ``code, balance, rate`` (monthly), ``months_left`` (contractual payments left;
    behavioural life for revolving), ``io_left``, ``residual``, ``payment`` (NaN = recompute),
    ``curve`` (row of ``pd``), ``prepay`` and ``prepay_offset`` (row and start column of
    ``smm``), ``lgd`` (flat LGD after cure), ``collateral`` (0 = flat LGD),
    ``haircut, recovery_cost, lgd_floor, recovery_discount, cure``.
    Per framework and loan ``[F, n]``: ``in_default`` (PD = 1 now), ``horizon`` (months), ``ead_add`` (CCF × undrawn),
    ``paydown`` (revolving monthly repayment share), ``discount`` (monthly discount multiplier
    v = 1/(1 + EIR/12), or 1 where the framework does not discount).
    Tables: ``pd[F, K, T, S]``, ``smm[P, L]``, ``lgd_multiplier[F, T, S]``,
    ``collateral_index[F, T, S]``.
    """

    code: np.ndarray
    balance: np.ndarray
    rate: np.ndarray
    months_left: np.ndarray
    io_left: np.ndarray
    residual: np.ndarray
    payment: np.ndarray
    curve: np.ndarray
    prepay: np.ndarray
    prepay_offset: np.ndarray
    in_default: np.ndarray
    lgd: np.ndarray
    collateral: np.ndarray
    haircut: np.ndarray
    recovery_cost: np.ndarray
    lgd_floor: np.ndarray
    recovery_discount: np.ndarray
    cure: np.ndarray
    horizon: np.ndarray
    ead_add: np.ndarray
    paydown: np.ndarray
    discount: np.ndarray
    pd: np.ndarray
    smm: np.ndarray
    lgd_multiplier: np.ndarray
    collateral_index: np.ndarray


@dataclass(frozen=True)
class KernelResult:
    """Per loan, framework and scenario ``[n, F, S]``: ecl_12m, ecl_lifetime, pd_12m,
    pd_lifetime (default before prepayment or maturity); ``ead`` ``[n, F]`` at the as-of date;
    ``lgd`` ``[n, F]`` at the as-of date under the first scenario's path."""

    ecl_12m: np.ndarray
    ecl_lifetime: np.ndarray
    pd_12m: np.ndarray
    pd_lifetime: np.ndarray
    ead: np.ndarray
    lgd: np.ndarray


@numba.njit(cache=True, inline="always")
def _loss_given_default(ead, lgd_flat, collateral, index, haircut, cost, floor, rec_df, cure, mult):
    if collateral > 0.0:
        base = (1.0 - cure) * _collateral_lgd(ead, collateral * index, haircut, cost, floor, rec_df)
    else:
        base = lgd_flat
    return min(1.0, base * mult)


@numba.njit(cache=True, parallel=True)
def _kernel(
    code, balance, rate, months_left, io_left, residual, payment, curve, prepay, prepay_offset,
    in_default, lgd, collateral, haircut, recovery_cost, lgd_floor, recovery_discount, cure,
    horizon, ead_add, paydown, discount, pd, smm, lgd_multiplier, collateral_index,
    ecl12, ecllife, pd12, pdlife, ead0, lgd0,
):
    n = balance.shape[0]
    n_fw = pd.shape[0]
    n_sc = pd.shape[3]
    for i in numba.prange(n):
        survival = np.empty((n_fw, n_sc))
        cum_pd = np.empty((n_fw, n_sc))
        for f in range(n_fw):
            ead = balance[i] + ead_add[f, i]
            ead0[i, f] = ead
            lgd0[i, f] = _loss_given_default(
                ead, lgd[i], collateral[i], collateral_index[f, 0, 0], haircut[i], recovery_cost[i],
                lgd_floor[i], recovery_discount[i], cure[i], lgd_multiplier[f, 0, 0],
            )
            if in_default[f, i]:
                for s in range(n_sc):
                    loss = ead * _loss_given_default(
                        ead, lgd[i], collateral[i], collateral_index[f, 0, s], haircut[i],
                        recovery_cost[i], lgd_floor[i], recovery_discount[i], cure[i],
                        lgd_multiplier[f, 0, s],
                    )
                    ecl12[i, f, s] = loss
                    ecllife[i, f, s] = loss
                    pd12[i, f, s] = 1.0
                    pdlife[i, f, s] = 1.0
                continue
            for s in range(n_sc):
                survival[f, s] = 1.0
                cum_pd[f, s] = 0.0
                ecl12[i, f, s] = 0.0
                ecllife[i, f, s] = 0.0
            bal = balance[i]
            df = 1.0
            k = curve[i]
            p = prepay[i]
            off = prepay_offset[i]
            for t in range(horizon[f, i]):
                ead = bal + ead_add[f, i]
                df *= discount[f, i]
                m = smm[p, min(off + t, smm.shape[1] - 1)]
                for s in range(n_sc):
                    h = pd[f, k, t, s]
                    loss_rate = _loss_given_default(
                        ead, lgd[i], collateral[i], collateral_index[f, t, s], haircut[i],
                        recovery_cost[i], lgd_floor[i], recovery_discount[i], cure[i],
                        lgd_multiplier[f, t, s],
                    )
                    default_now = survival[f, s] * h
                    loss = default_now * loss_rate * ead * df
                    ecllife[i, f, s] += loss
                    cum_pd[f, s] += default_now
                    if t < 12:
                        ecl12[i, f, s] += loss
                        pd12[i, f, s] = cum_pd[f, s]
                    survival[f, s] *= (1.0 - h) * (1.0 - m)
                bal -= scheduled_principal(
                    code[i], bal, rate[i], months_left[i] - t, io_left[i] - t, residual[i],
                    payment[i], paydown[f, i],
                )
            for s in range(n_sc):
                pdlife[i, f, s] = cum_pd[f, s]
                if horizon[f, i] == 0:
                    pd12[i, f, s] = 0.0


def expected_losses(inputs: KernelInputs) -> KernelResult:
    """Run the fused loop over every loan (all cores) and return the per-loan sums.

    Examples
    --------
    One loan, one month left, PD 0.5 % and LGD 25 % on 1,000,000, undiscounted: the loss is
    PD × LGD × EAD = 1,250 (common practice, no source).

    >>> one = lambda v, dt=float: np.array([v], dtype=dt)
    >>> k = KernelInputs(
    ...     code=one(0, np.int64), balance=one(1e6), rate=one(0.0), months_left=one(1, np.int64),
    ...     io_left=one(0, np.int64), residual=one(0.0), payment=one(np.nan),
    ...     curve=one(0, np.int64), prepay=one(0, np.int64), prepay_offset=one(0, np.int64),
    ...     in_default=np.zeros((1, 1), np.bool_), lgd=one(0.25), collateral=one(0.0), haircut=one(0.0),
    ...     recovery_cost=one(0.0), lgd_floor=one(0.0), recovery_discount=one(1.0), cure=one(0.0),
    ...     horizon=np.ones((1, 1), np.int64), ead_add=np.zeros((1, 1)), paydown=np.zeros((1, 1)),
    ...     discount=np.ones((1, 1)), pd=np.full((1, 1, 1, 1), 0.005), smm=np.zeros((1, 1)),
    ...     lgd_multiplier=np.ones((1, 1, 1)), collateral_index=np.ones((1, 1, 1)))
    >>> round(float(expected_losses(k).ecl_12m[0, 0, 0]), 6)
    1250.0
    """
    n = inputs.balance.shape[0]
    n_fw, n_sc = inputs.pd.shape[0], inputs.pd.shape[3]
    shape = (n, n_fw, n_sc)
    ecl12, ecllife = np.zeros(shape), np.zeros(shape)
    pd12, pdlife = np.zeros(shape), np.zeros(shape)
    ead0, lgd0 = np.zeros((n, n_fw)), np.zeros((n, n_fw))
    if n:
        _kernel(
            inputs.code, inputs.balance, inputs.rate, inputs.months_left, inputs.io_left,
            inputs.residual, inputs.payment, inputs.curve, inputs.prepay, inputs.prepay_offset,
            inputs.in_default, inputs.lgd, inputs.collateral, inputs.haircut, inputs.recovery_cost,
            inputs.lgd_floor, inputs.recovery_discount, inputs.cure, inputs.horizon, inputs.ead_add,
            inputs.paydown, inputs.discount, inputs.pd, inputs.smm, inputs.lgd_multiplier,
            inputs.collateral_index, ecl12, ecllife, pd12, pdlife, ead0, lgd0,
        )
    return KernelResult(ecl12, ecllife, pd12, pdlife, ead0, lgd0)
