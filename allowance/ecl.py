r"""The expected-credit-loss sum, per loan, per framework and scenario, 12-month and lifetime.

One fused compiled loop over loans (in parallel) and months: it walks each loan's balance
path once, and for every framework and scenario accumulates

.. math::

    ECL = \sum_{t=1}^{H} S_{t-1}\; pd_t\; LGD_t\; EAD_t\; DF_t, \qquad
    S_t = \prod_{k \le t} (1 - pd_k)(1 - smm_k)

where :math:`pd_t` is the marginal PD conditional on survival, :math:`EAD_t` the balance at the
start of month t, :math:`DF_t = (1 + EIR/12)^{-t}` (1 where the framework does not discount)
and :math:`smm_t` the prepayment rate (competing risk). The 12-month ECL sums t ≤ 12. A loan
in default takes PD = 1 now: ECL = LGD · EAD_0. The expected gross credit loss is the same sum
with LGD = 1 (the exposure lost before recoveries); the ECL is the net loss after them. A
balloon or interest-only loan adds the refinance risk at its maturity month T when the horizon
reaches it: :math:`S_T\, q\; LGD_T\, EAD_T\, DF_T` (:mod:`allowance.curves.refinance`). The formulas live in the concept modules
(:mod:`~allowance.cashflows` for the balance path, :func:`~allowance.curves.lgd.loss_given_default`
for LGD_t, :func:`~allowance.discounting.monthly_discount` for the v of DF_t = v^t); this module
compiles and composes them, and never allocates a loans × months array.

How the loop is made fast (``tests/bench/bench_engine.py`` measures it): the level payment
is computed once per loan (:func:`~allowance.cashflows.contractual_payment`) and the balance
follows its closed form (:func:`~allowance.cashflows.balance_on_path`), so no month waits on
the last; DF_t is a running product; up to four scenarios ride in scalars side by side; a
flat LGD on a unit multiplier path is one number per loan; loans run in blocks of 256 on all
cores with dynamic scheduling, with no allocation per loan; the inputs are checked finite
first, which lets the loop compile with fast-math.

References
----------
.. [1] IFRS 9 *Financial Instruments*, 5.5.3-5.5.5 and B5.5.28-B5.5.44 (12-month and
   lifetime expected credit losses, probability-weighted, discounted at the EIR).
.. [2] FASB ASC 326-20-30 (current expected credit losses over the contractual life).

Implements
----------
KernelInputs     the per-loan arrays and the tables the loop reads
KernelResult     per loan, framework and scenario: ecl and gross loss, 12-month and lifetime,
                 pd_12m, pd_lifetime; ead, lgd
expected_losses  check the inputs and run the loop
compile_loop     compile the loop (into the cache) on the smallest book
MONTH_COLUMNS    the columns of loan_months
loan_months      one loan's sum month by month (the schedule view of what the loop did)
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from typing import TYPE_CHECKING

import numba
import numpy as np

from allowance import jit, jitcache
from allowance.cashflows import REVOLVING, balance_on_path, contractual_payment, contractual_payments, path_terms
from allowance.curves.lgd import collateral_lgd, loss_given_default
from allowance.curves.refinance import refinance_default
from allowance.shortfall import default_loss
from allowance.exceptions import InvalidInputError

if TYPE_CHECKING:  # loaded by loan_months: compiling the loop alone (compile_loop) needs no pandas
    import pandas as pd

#: the LGD of a loan-month (:func:`allowance.curves.lgd.loss_given_default`), compiled into the loop
_loss_given_default = numba.njit(cache=jit.CACHE)(loss_given_default)
#: the loss of a default in the month (:func:`allowance.shortfall.default_loss`), compiled into the loop
_default_loss = numba.njit(cache=jit.CACHE)(default_loss)
#: the share failing to repay at maturity (:func:`allowance.curves.refinance.refinance_default`)
_refinance_default = numba.njit(cache=jit.CACHE)(refinance_default)


@numba.njit(cache=jit.CACHE)
def _flat_lgd(lgd, multiplier):
    """:func:`loss_given_default` of a loan without collateral (its collateral branch folds away)."""
    return _loss_given_default(0.0, lgd, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0, 0.0, multiplier)


#: Loans per block: large enough that scratch allocation vanishes, small enough that the
#: threads share a chunk evenly (:func:`allowance.jit.in_threads` hands out a few at a time).
_BLOCK = 256


@dataclass(frozen=True)
class KernelInputs:
    """Arrays for :func:`expected_losses`. n loans, F frameworks, S scenarios, T months.

    Per loan: ``code, balance, rate`` (monthly), ``months_left`` (contractual payments left;
    behavioural life for revolving), ``io_left``, ``residual``, ``payment`` (NaN = recompute),
    ``prepay`` (row of ``smm``; per loan ``[n]`` or per framework and loan ``[F, n]``: a
    framework that runs a line's balance off at its payment rate takes a row of zeros, so the
    payoffs are not counted twice) and ``prepay_offset`` (start column of ``smm``), ``lgd`` (flat LGD after cure), ``collateral`` (0 = flat LGD),
    ``haircut, recovery_cost, lgd_floor, cure``, ``refinance_pd`` (q: the probability that a
    balloon or interest-only loan outstanding at maturity fails to repay; 0 = none).
    Per framework and loan ``[F, n]``: ``curve`` (row of ``pd``: a framework may measure a loan
    on another row, IFRS 9 a loan on probation out of stage 3), ``in_default`` (the loss event
    is certain now: PD = 1), ``recovery_discount`` (PV
    factor of a collateral recovery at the EIR; 1 where the framework does not discount),
    ``horizon`` (months), ``ead_add`` (CCF × undrawn),
    ``paydown`` (revolving monthly repayment share), ``discount`` (monthly discount multiplier
    v = 1/(1 + EIR/12), or 1 where the framework does not discount), ``interest`` (the default
    month's lost interest EIR/12 under the cash-shortfall measure, else 0:
    :func:`allowance.shortfall.default_loss`).
    Tables: ``pd[F, K, T, S]``, ``smm[P, L]``, ``lgd_multiplier[F, T, S]``,
    ``collateral_index[F, K, T, S]`` (per curve key: a satellite model may link a segment's
    collateral to a price variable).
    Per loan, optional: ``pd_scale`` (the loan's own PD level: the loop reads
    ``min(pd_scale · pd_t, 1)`` for its curve row; None = 1 for every loan, the curve as it is).
    Per framework and loan, optional: ``add_months`` (the months t < add_months in which
    ``ead_add`` is exposure: a HELOC's draw period, a line's commitment; None = every month)
    and ``add_after`` (the add-on from month add_months on: the accrued interest, which stays;
    None = 0).
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
    refinance_pd: np.ndarray
    horizon: np.ndarray
    ead_add: np.ndarray
    paydown: np.ndarray
    discount: np.ndarray
    interest: np.ndarray
    pd: np.ndarray
    smm: np.ndarray
    lgd_multiplier: np.ndarray
    collateral_index: np.ndarray
    pd_scale: np.ndarray | None = None
    add_months: np.ndarray | None = None
    add_after: np.ndarray | None = None


@dataclass(frozen=True)
class KernelResult:
    """Per loan, framework and scenario ``[n, F, S]``: ecl_12m, ecl_lifetime, pd_12m,
    pd_lifetime (default before prepayment or maturity), gross_12m and gross_lifetime (the
    expected gross credit loss: the same sums with LGD = 1); ``ead`` ``[n, F]`` at the as-of
    date; ``lgd`` ``[n, F]`` at the as-of date under the first scenario's path."""

    ecl_12m: np.ndarray
    ecl_lifetime: np.ndarray
    pd_12m: np.ndarray
    pd_lifetime: np.ndarray
    ead: np.ndarray
    lgd: np.ndarray
    gross_12m: np.ndarray
    gross_lifetime: np.ndarray


#: The rows of the loop's one output array ``sums[row, n, F, S]`` (one array, not six: fewer
#: arguments for the compiled functions).
ECL_12M, ECL_LIFETIME, PD_12M, PD_LIFETIME, GROSS_12M, GROSS_LIFETIME = range(6)


@numba.njit(cache=jit.CACHE)
def _store(sums, i, f, s, ecl12, ecllife, pd12, pdlife, gross12, grosslife):
    """Write one loan, framework and scenario's six sums (rows as :data:`ECL_12M` ...)."""
    sums[0, i, f, s], sums[1, i, f, s], sums[2, i, f, s] = ecl12, ecllife, pd12
    sums[3, i, f, s], sums[4, i, f, s], sums[5, i, f, s] = pdlife, gross12, grosslife


@numba.njit(cache=jit.CACHE, fastmath=True)
def _flat_lanes(
    i, f, s0, n_sc, pd, k, smm, p, off, lgd_multiplier, unit, lgd_i, code, balance, rate,
    io_left, level, paydown, add, add_months, add_after, v, horizon_i, interest, maturity, q, sums, sc,
):
    r"""One loan and framework, scenarios s0..s0+3, flat LGD: the hot path.

    ``e`` sums the exposure-weighted default share :math:`\sum S_{t-1} pd_t EAD_t DF_t`,
    the expected gross loss; ``l`` the net loss (on a unit LGD path, LGD × e). Under the
    cash-shortfall measure each default also loses the month's interest (both times
    ``1 + interest`` and ``LGD + interest``).

    The four scenarios are carried in scalars (registers) rather than arrays, so their
    survival recursions run side by side; a lane past the last scenario does no work and is
    never written.
    """
    j1 = s0 + 1 if s0 + 1 < n_sc else s0
    j2 = s0 + 2 if s0 + 2 < n_sc else s0
    j3 = s0 + 3 if s0 + 3 < n_sc else s0
    a0 = a1 = a2 = a3 = 1.0  # survival S_{t-1}
    l0 = l1 = l2 = l3 = 0.0  # lifetime ECL so far
    c0 = c1 = c2 = c3 = 0.0  # cumulative PD so far
    y0 = y1 = y2 = y3 = 0.0  # 12-month ECL
    q0 = q1 = q2 = q3 = 0.0  # 12-month PD
    e0 = e1 = e2 = e3 = 0.0  # gross loss so far
    u0 = u1 = u2 = u3 = 0.0  # 12-month gross loss
    lgd_c = _flat_lgd(lgd_i, 1.0) + interest
    growth, pay = path_terms(code, balance, rate, level, paydown)
    x = 1.0  # g^t
    annuity = 0.0  # sum of g^j, j < t
    df = 1.0
    two, three, four = j1 != s0, j2 != s0, j3 != s0
    for t in range(horizon_i):
        if t < io_left:
            bal = balance
        else:
            bal = balance_on_path(balance, x, annuity, pay)
            x *= growth
            annuity = annuity * growth + 1.0
        df *= v
        keep = 1.0 - smm[p, off + t]
        w = (bal + (add if t < add_months else add_after)) * df
        if unit:
            w0 = w1 = w2 = w3 = w * lgd_c
        else:
            w0 = _default_loss(w, _flat_lgd(lgd_i, lgd_multiplier[f, t, s0]), interest)
            w1 = _default_loss(w, _flat_lgd(lgd_i, lgd_multiplier[f, t, j1]), interest)
            w2 = _default_loss(w, _flat_lgd(lgd_i, lgd_multiplier[f, t, j2]), interest)
            w3 = _default_loss(w, _flat_lgd(lgd_i, lgd_multiplier[f, t, j3]), interest)
        # S_t = (S_{t-1} - S_{t-1} pd_t)(1 - smm_t): the default share d is computed anyway
        d0 = a0 * min(pd[f, k, t, s0] * sc, 1.0)
        l0 += d0 * w0
        e0 += d0 * w
        c0 += d0
        a0 = (a0 - d0) * keep
        if two:  # lanes past the last scenario do no work
            d1 = a1 * min(pd[f, k, t, j1] * sc, 1.0)
            l1 += d1 * w1
            e1 += d1 * w
            c1 += d1
            a1 = (a1 - d1) * keep
        if three:
            d2 = a2 * min(pd[f, k, t, j2] * sc, 1.0)
            l2 += d2 * w2
            e2 += d2 * w
            c2 += d2
            a2 = (a2 - d2) * keep
        if four:
            d3 = a3 * min(pd[f, k, t, j3] * sc, 1.0)
            l3 += d3 * w3
            e3 += d3 * w
            c3 += d3
            a3 = (a3 - d3) * keep
        if t == maturity:  # refinance risk: of the loans still outstanding, S_T q cannot repay
            r0 = _refinance_default(a0, q)
            l0, e0, c0, a0 = l0 + r0 * w0, e0 + r0 * w, c0 + r0, a0 - r0
            r1 = _refinance_default(a1, q)
            l1, e1, c1, a1 = l1 + r1 * w1, e1 + r1 * w, c1 + r1, a1 - r1
            r2 = _refinance_default(a2, q)
            l2, e2, c2, a2 = l2 + r2 * w2, e2 + r2 * w, c2 + r2, a2 - r2
            r3 = _refinance_default(a3, q)
            l3, e3, c3, a3 = l3 + r3 * w3, e3 + r3 * w, c3 + r3, a3 - r3
        if t == 11:  # end of month 12: the 12-month figures
            y0, y1, y2, y3, q0, q1, q2, q3 = l0, l1, l2, l3, c0, c1, c2, c3
            u0, u1, u2, u3 = e0, e1, e2, e3
    if horizon_i < 12:
        y0, y1, y2, y3, q0, q1, q2, q3 = l0, l1, l2, l3, c0, c1, c2, c3
        u0, u1, u2, u3 = e0, e1, e2, e3
    g = 1.0 + interest  # the gross loss of a default: its whole exposure (and the month's interest)
    _store(sums, i, f, s0, y0, l0, q0, c0, u0 * g, e0 * g)
    if j1 != s0:
        _store(sums, i, f, j1, y1, l1, q1, c1, u1 * g, e1 * g)
    if j2 != s0:
        _store(sums, i, f, j2, y2, l2, q2, c2, u2 * g, e2 * g)
    if j3 != s0:
        _store(sums, i, f, j3, y3, l3, q3, c3, u3 * g, e3 * g)


# fastmath: the inputs are checked finite first (so "no NaN, no inf" holds); it lets the
# compiler reassociate and fuse the survival products (about 1.3 x faster here).
# nogil, not parallel=True: the threads of :func:`allowance.jit.in_threads` run its blocks;
# numba's parallel lowering compiled the loop 2.5 x longer on the first run.
@numba.njit(cache=jit.CACHE, nogil=True, fastmath=True)
def _kernel(
    code, balance, rate, months_left, io_left, level_payment, curve, prepay, prepay_offset,
    in_default, lgd, collateral, haircut, recovery_cost, lgd_floor, recovery_discount, cure, refinance_pd,
    horizon, ead_add, paydown, discount, interest, pd, smm, lgd_multiplier, collateral_index, pd_scale, add_months,
    add_after, unit_path, block, first, last,
    sums, ead0, lgd0,
):
    n = balance.shape[0]
    n_fw = pd.shape[0]
    n_sc = pd.shape[3]
    # blocks first..last-1 of ``block`` loans: the per-scenario state of the secured path is
    # allocated once per block, not per loan (an allocation costs as much as a short loan's
    # month loop)
    for b in range(first, last):
        survival = np.empty(n_sc)
        cum_pd = np.empty(n_sc)
        life = np.empty(n_sc)
        twelve = np.empty(n_sc)
        cum_12 = np.empty(n_sc)
        gross = np.empty(n_sc)
        gross_12 = np.empty(n_sc)
        for i in range(b * block, min(n, (b + 1) * block)):
            c, r, m_left, io, off = code[i], rate[i], months_left[i], io_left[i], prepay_offset[i]
            level = level_payment[i]
            sc = pd_scale[i]  # the loan's own PD level against its curve row
            secured = collateral[i] > 0.0
            lgd_i, coll_i, cut_i, cost_i = lgd[i], collateral[i], haircut[i], recovery_cost[i]
            floor_i, cure_i = lgd_floor[i], cure[i]
            for f in range(n_fw):
                rec_i = recovery_discount[f, i]
                k = curve[f, i]
                add = ead_add[f, i]
                p = prepay[f, i]
                add_m, add_a = add_months[f, i], add_after[f, i]
                ead = balance[i] + add
                ead0[i, f] = ead
                lgd0[i, f] = _loss_given_default(
                    ead, lgd_i, coll_i, collateral_index[f, k, 0, 0], cut_i, cost_i, floor_i, rec_i, cure_i,
                    lgd_multiplier[f, 0, 0],
                )
                if in_default[f, i]:
                    for s in range(n_sc):
                        loss = ead * _loss_given_default(
                            ead, lgd_i, coll_i, collateral_index[f, k, 0, s], cut_i, cost_i, floor_i, rec_i,
                            cure_i, lgd_multiplier[f, 0, s],
                        )
                        _store(sums, i, f, s, loss, loss, 1.0, 1.0, ead, ead)
                    continue
                # no exposure after maturity: a horizon past it adds nothing (nor to the PD)
                horizon_i = horizon[f, i] if c == REVOLVING else min(horizon[f, i], m_left)
                q_i = refinance_pd[i]
                maturity = m_left - 1 if (q_i > 0.0 and c != REVOLVING) else -1  # the month of the test
                v = discount[f, i]
                down = paydown[f, i]
                if not secured:
                    for s0 in range(0, n_sc, 4):
                        _flat_lanes(
                            i, f, s0, n_sc, pd, k, smm, p, off, lgd_multiplier, unit_path[f], lgd_i,
                            c, balance[i], r, io, level, down, add, add_m, add_a, v, horizon_i, interest[f, i], maturity, q_i,
                            sums, sc,
                        )
                    continue
                # secured: the collateral LGD moves with the balance and the collateral index
                for s in range(n_sc):
                    survival[s] = 1.0
                    cum_pd[s] = 0.0
                    life[s] = 0.0
                    gross[s] = 0.0
                growth, pay = path_terms(c, balance[i], r, level, down)
                x = 1.0
                annuity = 0.0
                df = 1.0
                for t in range(horizon_i):
                    if t < io:
                        bal = balance[i]
                    else:
                        bal = balance_on_path(balance[i], x, annuity, pay)
                        x *= growth
                        annuity = annuity * growth + 1.0
                    ead = bal + (add if t < add_m else add_a)
                    df *= v
                    keep = 1.0 - smm[p, off + t]
                    weight = ead * df
                    for s in range(n_sc):
                        h = min(pd[f, k, t, s] * sc, 1.0)
                        loss_rate = _loss_given_default(
                            ead, lgd_i, coll_i, collateral_index[f, k, t, s], cut_i, cost_i, floor_i,
                            rec_i, cure_i, lgd_multiplier[f, t, s],
                        )
                        default_now = survival[s] * h
                        life[s] += default_now * _default_loss(weight, loss_rate, interest[f, i])
                        gross[s] += default_now * _default_loss(weight, 1.0, interest[f, i])
                        cum_pd[s] += default_now
                        survival[s] *= (1.0 - h) * keep
                        if t == maturity:  # refinance risk at maturity: S_T q
                            refi = _refinance_default(survival[s], q_i)
                            life[s] += refi * _default_loss(weight, loss_rate, interest[f, i])
                            gross[s] += refi * _default_loss(weight, 1.0, interest[f, i])
                            cum_pd[s] += refi
                            survival[s] -= refi
                    if t == 11:  # end of month 12: the 12-month figures
                        for s in range(n_sc):
                            twelve[s] = life[s]
                            cum_12[s] = cum_pd[s]
                            gross_12[s] = gross[s]
                if horizon_i < 12:
                    for s in range(n_sc):
                        twelve[s] = life[s]
                        cum_12[s] = cum_pd[s]
                        gross_12[s] = gross[s]
                for s in range(n_sc):
                    _store(sums, i, f, s, twelve[s], life[s], cum_12[s], cum_pd[s], gross_12[s], gross[s])


def expected_losses(inputs: KernelInputs) -> KernelResult:
    """Run the fused loop over every loan (all cores) and return the per-loan sums.

    Raises
    ------
    ValueError
        The inputs break the contract of :class:`KernelInputs`: a shape that does not match,
        an index past its table (a horizon longer than the PD table, a curve key, a
        prepayment row or offset), or NaN / inf anywhere but ``payment``. The engine builds
        inputs that pass; this keeps the compiled loop from reading past a table.

    Examples
    --------
    One loan, one month left, PD 0.5 % and LGD 25 % on 1,000,000, undiscounted: the loss is
    PD × LGD × EAD = 1,250 and the gross loss PD × EAD = 5,000 (common practice, no source).

    >>> one = lambda v, dt=float: np.array([v], dtype=dt)
    >>> k = KernelInputs(
    ...     code=one(0, np.int64), balance=one(1e6), rate=one(0.0), months_left=one(1, np.int64),
    ...     io_left=one(0, np.int64), residual=one(0.0), payment=one(np.nan),
    ...     curve=np.zeros((1, 1), np.int64), prepay=one(0, np.int64), prepay_offset=one(0, np.int64),
    ...     in_default=np.zeros((1, 1), np.bool_), lgd=one(0.25), collateral=one(0.0), haircut=one(0.0),
    ...     recovery_cost=one(0.0), lgd_floor=one(0.0), recovery_discount=np.ones((1, 1)), cure=one(0.0),
    ...     refinance_pd=one(0.0),
    ...     horizon=np.ones((1, 1), np.int64), ead_add=np.zeros((1, 1)), paydown=np.zeros((1, 1)),
    ...     discount=np.ones((1, 1)), interest=np.zeros((1, 1)), pd=np.full((1, 1, 1, 1), 0.005), smm=np.zeros((1, 1)),
    ...     lgd_multiplier=np.ones((1, 1, 1)), collateral_index=np.ones((1, 1, 1, 1)))
    >>> r = expected_losses(k)
    >>> round(float(r.ecl_12m[0, 0, 0]), 6), round(float(r.gross_12m[0, 0, 0]), 6)
    (1250.0, 5000.0)
    """
    args = _checked_arrays(inputs)
    n = inputs.balance.shape[0]
    n_fw, n_sc = inputs.pd.shape[0], inputs.pd.shape[3]
    sums = np.empty((6, n, n_fw, n_sc))  # rows ECL_12M ... GROSS_LIFETIME
    ead0, lgd0 = np.empty((n, n_fw)), np.empty((n, n_fw))
    unit_path = np.array([bool(np.all(inputs.lgd_multiplier[f] == 1.0)) for f in range(n_fw)], dtype=np.bool_)
    if n:
        a = dict(zip(_FIELDS, args))
        # in numpy, not compiled: it tests the tape payment for NaN, which the loop's fast-math
        # flags would let the compiler assume away; the same bits as a compiled loop, no compile
        levels = contractual_payments(
            a["code"], a["balance"], a["rate"], a["months_left"], a["io_left"], a["residual"], a["payment"]
        )
        head = (a["code"], a["balance"], a["rate"], a["months_left"], a["io_left"], levels, *args[7:], unit_path)
        jitcache.wait_for_ahead()  # a second process compiling the loop into the cache: load it, not compile it
        jit.in_threads(lambda first, last: _kernel(*head, _BLOCK, first, last, sums, ead0, lgd0), n, _BLOCK)
        _defaulted_losses(a, sums)
        bad = ~np.isfinite(sums[ECL_LIFETIME]).all(axis=(1, 2))
        if bad.any():
            raise InvalidInputError(
                f"the ECL of loan {int(np.argmax(bad))} (position in the chunk) is not finite: "
                "an input array or table holds NaN or inf (the engine fills blanks before the loop)"
            )
    return KernelResult(
        ecl_12m=sums[ECL_12M], ecl_lifetime=sums[ECL_LIFETIME], pd_12m=sums[PD_12M], pd_lifetime=sums[PD_LIFETIME],
        ead=ead0, lgd=lgd0, gross_12m=sums[GROSS_12M], gross_lifetime=sums[GROSS_LIFETIME],
    )


def compile_loop() -> None:
    """Compile the loop, into the compile cache when there is one, by running one loan.

    The signature is that of every run (:func:`_checked_arrays` makes the dtypes one set), so
    a later :func:`expected_losses` in any process loads it from the cache. The command line
    runs this in a second process while the first reads the tape (:mod:`allowance.jitcache`).
    """
    one = lambda v, dt=float: np.array([v], dtype=dt)  # noqa: E731
    frame = lambda v, dt=float: np.full((1, 1), v, dtype=dt)  # noqa: E731
    expected_losses(KernelInputs(
        code=one(0, np.int64), balance=one(1.0), rate=one(0.0), months_left=one(1, np.int64),
        io_left=one(0, np.int64), residual=one(0.0), payment=one(np.nan), curve=frame(0, np.int64),
        prepay=one(0, np.int64), prepay_offset=one(0, np.int64), in_default=frame(False, np.bool_), lgd=one(0.5),
        collateral=one(0.0), haircut=one(0.0), recovery_cost=one(0.0), lgd_floor=one(0.0),
        recovery_discount=frame(1.0), cure=one(0.0), refinance_pd=one(0.0), horizon=frame(1, np.int64),
        ead_add=frame(0.0), paydown=frame(0.0), discount=frame(1.0), interest=frame(0.0),
        pd=np.full((1, 1, 1, 1), 0.01), smm=frame(0.0), lgd_multiplier=np.ones((1, 1, 1)),
        collateral_index=np.ones((1, 1, 1, 1)),
    ))


def _defaulted_losses(a: dict[str, np.ndarray], sums: np.ndarray) -> None:
    """LGD × EAD_0 of the loans whose loss event is certain now, again in plain numpy.

    The loop computes the same figure, but under fast-math the compiler may fuse its few
    products differently with one scenario than with several; a product of round figures can
    land on a half cent, and a rerun of one scenario alone must give the cents of its column
    in the weighted run. Elementwise numpy rounds every operation the same way every time.
    """
    f, i = np.nonzero(a["in_default"])
    if not f.size:
        return
    ead = a["balance"][i] + a["ead_add"][f, i]
    multiplier = a["lgd_multiplier"][f, 0, :]  # [m, S]
    value = a["collateral"][i][:, None] * a["collateral_index"][f, a["curve"][f, i], 0, :]
    column = lambda name: a[name][i][:, None]  # noqa: E731
    secured = collateral_lgd(ead[:, None], value, column("haircut"), column("recovery_cost"), column("lgd_floor"),
                             a["recovery_discount"][f, i][:, None], column("cure"), multiplier)
    flat = np.minimum(1.0, column("lgd") * multiplier)
    loss = ead[:, None] * np.where(column("collateral") > 0.0, secured, flat)
    sums[ECL_12M, i, f] = sums[ECL_LIFETIME, i, f] = loss
    sums[GROSS_12M, i, f] = sums[GROSS_LIFETIME, i, f] = ead[:, None]


#: Columns of :func:`loan_months`.
MONTH_COLUMNS: tuple[str, ...] = (
    "month", "ead", "survival_opening", "marginal_pd", "refinance_pd", "default_share", "lgd", "discount_factor",
    "gross_loss", "ecl",
)


def loan_months(inputs: KernelInputs, i: int, f: int, s: int, horizon: int | None = None) -> pd.DataFrame:
    """One loan's expected loss month by month, as the loop sums it (for people to check).

    Columns (:data:`MONTH_COLUMNS`): ``month``; ``ead`` (exposure at the start of the month);
    ``survival_opening`` (:math:`S_{t-1}`, no default before the month; named apart from the
    schedule's ``survival``, which also removes prepayments, so that the two sit side by side); ``marginal_pd``; ``refinance_pd`` (q in the maturity
    month); ``default_share`` (:math:`S_{t-1} pd_t`, plus the refinance failures at maturity);
    ``lgd``; ``discount_factor``; ``gross_loss`` and ``ecl`` (the month's share of the gross
    and the net loss, discounted). A loan whose loss event is certain now has one row, month 0:
    PD 1, ECL = LGD × EAD. ``horizon`` cuts the months (an IFRS 9 stage 1 loan: 12); the
    ``ecl`` column then sums to the loop's figure over that horizon. The same concept functions
    as the loop (one loan, so plain Python: not a hot path).

    Examples
    --------
    >>> one = lambda v, dt=float: np.array([v], dtype=dt)
    >>> k = KernelInputs(
    ...     code=one(0, np.int64), balance=one(1_200.0), rate=one(0.0), months_left=one(3, np.int64),
    ...     io_left=one(0, np.int64), residual=one(0.0), payment=one(np.nan),
    ...     curve=np.zeros((1, 1), np.int64), prepay=one(0, np.int64), prepay_offset=one(0, np.int64),
    ...     in_default=np.zeros((1, 1), np.bool_), lgd=one(0.5), collateral=one(0.0), haircut=one(0.0),
    ...     recovery_cost=one(0.0), lgd_floor=one(0.0), recovery_discount=np.ones((1, 1)), cure=one(0.0),
    ...     refinance_pd=one(0.0), horizon=np.full((1, 1), 3, np.int64), ead_add=np.zeros((1, 1)),
    ...     paydown=np.zeros((1, 1)), discount=np.ones((1, 1)), interest=np.zeros((1, 1)),
    ...     pd=np.full((1, 1, 12, 1), 0.01), smm=np.zeros((1, 12)),
    ...     lgd_multiplier=np.ones((1, 12, 1)), collateral_index=np.ones((1, 1, 12, 1)))
    >>> m = loan_months(k, 0, 0, 0)
    >>> print(m[["month", "ead", "default_share", "ecl"]].round(4).to_string(index=False))
     month    ead  default_share    ecl
         1 1200.0         0.0100 6.0000
         2  800.0         0.0099 3.9600
         3  400.0         0.0098 1.9602
    >>> round(float(m["ecl"].sum()), 9) == round(float(expected_losses(k).ecl_lifetime[0, 0, 0]), 9)
    True
    """
    import pandas as pd

    a = dict(zip(_FIELDS, _checked_arrays(inputs)))
    code, balance, rate = int(a["code"][i]), float(a["balance"][i]), float(a["rate"][i])
    months_left, io_left, k = int(a["months_left"][i]), int(a["io_left"][i]), int(a["curve"][f, i])
    add, v, interest = float(a["ead_add"][f, i]), float(a["discount"][f, i]), float(a["interest"][f, i])
    p, off, q = int(a["prepay"][f, i]), int(a["prepay_offset"][i]), float(a["refinance_pd"][i])
    add_months, add_after = int(a["add_months"][f, i]), float(a["add_after"][f, i])

    def lgd_at(ead: float, t: int) -> float:
        return loss_given_default(
            ead, float(a["lgd"][i]), float(a["collateral"][i]), float(a["collateral_index"][f, k, t, s]),
            float(a["haircut"][i]), float(a["recovery_cost"][i]), float(a["lgd_floor"][i]),
            float(a["recovery_discount"][f, i]), float(a["cure"][i]), float(a["lgd_multiplier"][f, t, s]),
        )

    if a["in_default"][f, i]:
        ead = balance + add
        lgd = lgd_at(ead, 0)
        row = [0, ead, 1.0, 1.0, 0.0, 1.0, lgd, 1.0, ead, ead * lgd]
        return pd.DataFrame([row], columns=list(MONTH_COLUMNS)).astype({"month": np.int64})
    level = contractual_payment(code, balance, rate, months_left, io_left, float(a["residual"][i]),
                                float(a["payment"][i]))
    growth, pay = path_terms(code, balance, rate, level, float(a["paydown"][f, i]))
    h = int(a["horizon"][f, i]) if code == REVOLVING else min(int(a["horizon"][f, i]), months_left)
    maturity = months_left - 1 if (q > 0.0 and code != REVOLVING) else -1
    rows, x, annuity, df, alive = [], 1.0, 0.0, 1.0, 1.0
    for t in range(h if horizon is None else min(h, horizon)):
        if t < io_left:
            bal = balance
        else:
            bal = balance_on_path(balance, x, annuity, pay)
            x *= growth
            annuity = annuity * growth + 1.0
        ead, df = bal + (add if t < add_months else add_after), df * v
        lgd = lgd_at(ead, t)
        start, marginal = alive, float(a["pd"][f, k, t, s])
        share = alive * marginal
        alive = (alive - share) * (1.0 - float(a["smm"][p, off + t]))
        if t == maturity:
            failed = refinance_default(alive, q)
            share, alive = share + failed, alive - failed
        rows.append([t + 1, ead, start, marginal, q if t == maturity else 0.0, share, lgd, df,
                     share * default_loss(ead, 1.0, interest) * df, share * default_loss(ead, lgd, interest) * df])
    return pd.DataFrame(rows, columns=list(MONTH_COLUMNS)).astype({"month": np.int64})


_FIELDS = [f.name for f in fields(KernelInputs)]
#: The fields of :class:`KernelInputs` given per framework and loan, shape ``[F, n]``.
PER_FRAMEWORK: tuple[str, ...] = (
    "curve", "in_default", "recovery_discount", "horizon", "ead_add", "paydown", "discount", "interest", "prepay",
    "add_months", "add_after",
)
_INTEGER = {"code", "months_left", "io_left", "curve", "prepay", "prepay_offset", "horizon", "add_months"}


def _checked_arrays(inputs: KernelInputs) -> list[np.ndarray]:
    """The inputs as contiguous arrays of the compiled types, in field order, after the checks
    that keep the loop's unchecked indexing inside its tables.

    One set of dtypes means one compiled signature (a new one would compile for seconds).
    """
    out = []
    for field in fields(KernelInputs):
        value = getattr(inputs, field.name)
        if field.name == "pd_scale" and value is None:  # the curves as they are
            value = np.ones(np.shape(inputs.balance)[0])
        if field.name == "add_months" and value is None:  # the add-on in every month
            value = np.full(np.shape(inputs.horizon), np.iinfo(np.int64).max)
        if field.name == "add_after" and value is None:  # nothing after the add-on's months
            value = np.zeros(np.shape(inputs.horizon))
        if field.name == "prepay" and np.ndim(value) == 1:  # one row per loan, the same in every framework
            value = np.broadcast_to(value, np.shape(inputs.horizon))
        dtype = np.int64 if field.name in _INTEGER else (np.bool_ if field.name == "in_default" else np.float64)
        array = np.ascontiguousarray(value, dtype=dtype)
        # read-only-ness is part of a compiled signature: a read-only view (an Arrow-backed
        # column) and a writable array would each compile the loop (12-16 s); one kind, one compile
        out.append(array if array.flags.writeable else array.copy())
    a = dict(zip([f.name for f in fields(KernelInputs)], out))
    n = a["balance"].shape[0]
    n_fw, n_keys, n_months, n_sc = a["pd"].shape
    problems = []
    for name in PER_FRAMEWORK:
        if a[name].shape != (n_fw, n):
            problems.append(f"{name} has shape {a[name].shape}, not (frameworks, loans) = {(n_fw, n)}")
    if a["lgd_multiplier"].shape != (n_fw, n_months, n_sc):
        problems.append(f"lgd_multiplier has shape {a['lgd_multiplier'].shape}, not {(n_fw, n_months, n_sc)}")
    if a["collateral_index"].shape != (n_fw, n_keys, n_months, n_sc):
        problems.append(f"collateral_index has shape {a['collateral_index'].shape}, not {(n_fw, n_keys, n_months, n_sc)}")
    if n and not problems:
        if a["horizon"].min() < 0 or a["horizon"].max() > n_months:
            problems.append(f"a horizon lies outside 0..{n_months} (the months of the PD table)")
        if a["curve"].min() < 0 or a["curve"].max() >= n_keys:
            problems.append(f"a curve key lies outside 0..{n_keys - 1}")
        if a["prepay"].min() < 0 or a["prepay"].max() >= a["smm"].shape[0]:
            problems.append("a prepayment row lies outside the SMM table")
        if a["prepay_offset"].min() < 0 or (a["prepay_offset"] + a["horizon"].max(axis=0)).max() > a["smm"].shape[1]:
            problems.append("prepayment offset + horizon runs past the SMM table's columns")
        if a["pd_scale"].shape != (n,) or a["pd_scale"].min() < 0:
            problems.append("pd_scale must be one number >= 0 per loan")
    for name, value in a.items():
        # NaN is allowed only where it means "not given" (the tape payment)
        if value.dtype == np.float64 and name != "payment" and not np.isfinite(value).all():
            where = np.argwhere(~np.isfinite(value))[0].tolist()
            problems.append(f"{name} holds NaN or inf at {where} (the engine fills blanks before the loop)")
    if problems:
        raise InvalidInputError("KernelInputs: " + "; ".join(problems))
    return out
