"""The fused ECL loop, compiled: the sums of :mod:`allowance.ecl` for a large book.

One compiled loop over loans (in parallel) and months walks each loan's balance path once
and for every framework and scenario accumulates the sums :mod:`allowance.ecl` states
(the formulas live in the concept modules; this module compiles and composes them, and
never allocates a loans × months array). :func:`allowance.ecl.expected_losses` calls it
for a book computed with ``loop="compiled"`` (:func:`allowance.engine.tables.choose_loop`);
a small book is summed in numpy instead and numba is never loaded (:mod:`allowance.jit`).

How the loop is made fast (``tests/bench/bench_engine.py`` measures it): the level payment
is computed once per loan (:func:`~allowance.cashflows.contractual_payment`) and the balance
follows its closed form (:func:`~allowance.cashflows.balance_on_path`), so no month waits on
the last; DF_t is a running product; up to four scenarios ride in scalars side by side; a
flat LGD on a unit multiplier path is one number per loan; loans run in blocks of 256 on all
cores with dynamic scheduling, with no allocation per loan; the inputs are checked finite
first, which lets the loop compile with fast-math.

Implements
----------
fused_sums   run the loop over checked inputs (all cores), into the caller's arrays
"""

from __future__ import annotations

import numba
import numpy as np

from allowance import jit, jitcache
from allowance.cashflows import REVOLVING, balance_on_path, path_terms
from allowance.curves.lgd import loss_given_default
from allowance.curves.refinance import refinance_default
from allowance.shortfall import default_loss

__all__ = ["fused_sums"]

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


#: g and P of a loan's closed-form balance path (:func:`allowance.cashflows.path_terms`)
_path_terms = numba.njit(cache=jit.CACHE)(path_terms)
# fastmath as the fused loop compiles it, whoever calls it first: numba compiles a function once
# per signature with the flags of its first caller (a fastmath loop passes its flags down), so
# without this the loop's cached code could hold B x - P s with or without a fused
# multiply-add depending on which call compiled it first, a last-digit difference
#: the scheduled balance in closed form (:func:`allowance.cashflows.balance_on_path`)
_balance_on_path = numba.njit(cache=jit.CACHE, fastmath=True)(balance_on_path)


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
    growth, pay = _path_terms(code, balance, rate, level, paydown)
    x = 1.0  # g^t
    annuity = 0.0  # sum of g^j, j < t
    df = 1.0
    two, three, four = j1 != s0, j2 != s0, j3 != s0
    for t in range(horizon_i):
        if t < io_left:
            bal = balance
        else:
            bal = _balance_on_path(balance, x, annuity, pay)
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
                growth, pay = _path_terms(c, balance[i], r, level, down)
                x = 1.0
                annuity = 0.0
                df = 1.0
                for t in range(horizon_i):
                    if t < io:
                        bal = balance[i]
                    else:
                        bal = _balance_on_path(balance[i], x, annuity, pay)
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


def fused_sums(head: tuple, sums, ead0, lgd0) -> None:
    """Run :func:`_kernel` over every loan of ``head`` (the checked inputs in
    :class:`allowance.ecl.KernelInputs` order, the level payments in place of the tape's
    payment and residual, the unit-path flags last) on all cores, into ``sums``
    ``[6, n, F, S]``, ``ead0`` and ``lgd0`` ``[n, F]``."""
    n = head[1].shape[0]
    jitcache.wait_for_ahead()  # a second process compiling the loop into the cache: load it, not compile it
    jit.in_threads(lambda first, last: _kernel(*head, _BLOCK, first, last, sums, ead0, lgd0), n, _BLOCK)
