"""The fused ECL loop, compiled: the sums of :mod:`allowance.ecl` for a large book.

Two compiled loops walk each loan's balance path once and for every framework and scenario
accumulate the sums :mod:`allowance.ecl` states (the formulas live in the concept modules;
this module compiles and composes them, and never allocates a loans × months array).
:func:`allowance.ecl.expected_losses` calls them for a book computed with
``loop="compiled"`` (:func:`allowance.engine.tables.choose_loop`); a small book is summed in
numpy instead and numba is never loaded (:mod:`allowance.jit`).

* Loans without collateral (the flat LGD, most of a book) run **side by side**: blocks of up
  to 256 (framework, loan) pairs on one PD curve row, longest horizon first, month by month,
  so that each month's step is a loop along the loans that the compiler turns into vector
  instructions (eight loans at a time on AVX-512), with no month waiting on the one before
  for the same loan. Pairs are taken in windows of the tape (:data:`_WINDOW` loans), so a
  block reads and writes rows that lie close together.
* Secured loans (the LGD moves with the balance and the collateral index) and loans in
  default run one at a time, as before.

How the loops are made fast (``tests/bench/bench_engine.py`` measures them): the level
payment is computed once per loan (:func:`~allowance.cashflows.contractual_payment`) and the
balance follows its closed form (:func:`~allowance.cashflows.balance_on_path`); DF_t is a
running product; the inputs are checked finite first, which lets the loops compile with
fast-math; the loops run in blocks on all cores with dynamic scheduling, with no allocation
per loan. The side-by-side loop is compiled with numba's ``noalias`` flag (its arrays do not
overlap: the outputs and the block's scratch are fresh arrays, the inputs are only read),
without which the compiler cannot vectorise a loop that reads a table at a loan's own index.

Implements
----------
fused_sums   run the loops over checked inputs (all cores), into the caller's arrays
"""

from __future__ import annotations

import numba
import numpy as np
from numba.core.compiler import Compiler, Flags

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


# fastmath: the inputs are checked finite first (so "no NaN, no inf" holds); it lets the
# compiler reassociate and fuse the survival products (about 1.3 x faster here).
# nogil, not parallel=True: the threads of :func:`allowance.jit.in_threads` run its blocks;
# numba's parallel lowering compiled the loop 2.5 x longer on the first run.
@numba.njit(cache=jit.CACHE, nogil=True, fastmath=True)
def _kernel(
    code, balance, rate, months_left, io_left, level_payment, curve, prepay, prepay_offset,
    in_default, lgd, collateral, haircut, recovery_cost, lgd_floor, recovery_discount, cure, refinance_pd,
    horizon, ead_add, paydown, discount, interest, pd, smm, lgd_multiplier, collateral_index, pd_scale, add_months,
    add_after, block, first, last,
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
                if not (in_default[f, i] or secured):  # summed side by side with the others (_flat_blocks)
                    continue
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


#: Pairs per block of the side-by-side loop: enough for the vector loops to run long, few
#: enough that a block's scratch stays in the core's caches.
_SIDE = 256
#: Tape rows per window: a block's pairs come from one window, so the rows it reads (and the
#: sums it writes) lie within some 16,000 loans of each other, not across the whole chunk.
_WINDOW = 16_384


class _Unaliased(Compiler):
    """numba's compiler with its ``noalias`` flag: each array argument's memory is reached
    through that argument alone. It lets the compiler vectorise a loop that reads a table at
    each loan's own index (otherwise any store in the loop might change the table). True of
    :func:`_flat_block`'s arguments: it writes only ``sums`` and its scratch, fresh arrays
    that no input shares."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.state.flags.noalias = True


# numba's compiler keeps its flags in a class of its own; were the flag ever gone, the loop
# compiles as any other (the same figures, not vectorised)
_UNALIASED = {"pipeline_class": _Unaliased} if "noalias" in dir(Flags) else {}


@numba.njit(cache=jit.CACHE, nogil=True, fastmath=True, **_UNALIASED)
def _flat_block(
    lo, m, f, order, mu_max, key, code, balance, rate, months_left, io_left, level_payment, paydown,
    horizon, refinance_pd, pd_t, smm, smm_width, prepay, prepay_offset, pd_scale, ead_add, add_months, add_after,
    discount, interest, lgd, multiplier_t, sums,
    row, months, io, amort_from, growth, pay, x, annuity, df, v, smm_at, scale, add, add_m, add_a, w, keep,
    flat, it, maturity, q, hazard, alive, net, cum, gross, net_12, cum_12, gross_12,
):
    r"""The pairs ``order[lo:lo+m]`` of framework ``f`` (loans without collateral, not in
    default, one curve row ``key``, longest horizon first) side by side, into ``sums``.

    The recursion of :func:`allowance.ecl._sums_in_arrays` (month t from 0): the balance
    :math:`B_t` (:func:`~allowance.cashflows.balance_on_path`, held while interest-only), the
    weight :math:`w_t = (B_t + add_t)\,v^{t+1}`, and for each scenario

    .. math::

        d_t = S_{t-1} \min(c\, pd_t, 1), \qquad S_t = (S_{t-1} - d_t)(1 - smm_t),

        E = \sum_t d_t w_t, \qquad
        N = \sum_t d_t w_t \,(\min(1, LGD\, m_t) + i) \quad
        (:func:`~allowance.shortfall.default_loss`),

    and the refinance failures :math:`S_T q` in the maturity month T, the pair's last. The
    pairs still running in month t are the first ones, so each month is a loop along them.
    In a scenario where :math:`LGD\, m_t \le 1` in every month for every pair of the block
    (``mu_max[s]`` is the scenario's largest multiplier; :func:`_side_by_side` gives loans
    blocks of their own by the scenarios in which the cap can bind), the cap never binds and
    :math:`N = LGD \sum_t d_t w_t m_t + i E`: the loop reads no per-loan LGD or interest. The
    12-month figures are the sums after month 12 (all of them for a shorter horizon); gross
    is :math:`(1 + i) E`.
    """
    n_sc = pd_t.shape[1]
    waits = adds = scaled = False
    lgd_max = 0.0
    for j in range(m):
        i = order[lo + j]
        row[j] = i
        c = code[i]
        # no exposure after maturity: a horizon past it adds nothing (nor to the PD)
        months[j] = horizon[f, i] if c == REVOLVING else min(horizon[f, i], months_left[i])
        amort_from[j] = balance[i]
        growth[j], pay[j] = _path_terms(c, balance[i], rate[i], level_payment[i], paydown[f, i])
        io[j] = io_left[i]
        x[j], annuity[j], df[j], v[j] = 1.0, 0.0, 1.0, discount[f, i]
        smm_at[j] = prepay[f, i] * smm_width + prepay_offset[i]  # month t's SMM: smm[smm_at + t]
        scale[j] = pd_scale[i]  # the loan's own PD level against its curve row
        add[j], add_m[j], add_a[j] = ead_add[f, i], add_months[f, i], add_after[f, i]
        flat[j], it[j], q[j] = lgd[i], interest[f, i], refinance_pd[i]
        maturity[j] = months_left[i] - 1 if (refinance_pd[i] > 0.0 and c != REVOLVING) else -1
        waits |= io_left[i] > 0
        adds |= add[j] != 0.0 or add_a[j] != 0.0
        scaled |= pd_scale[i] != 1.0
        lgd_max = max(lgd_max, lgd[i])
        for s in range(n_sc):
            alive[s, j], net[s, j], cum[s, j], gross[s, j] = 1.0, 0.0, 0.0, 0.0
    run = m
    for t in range(months[0] if m else 0):
        while run > 0 and months[run - 1] <= t:  # the pairs whose horizon ends here drop off the end
            run -= 1
        # the month's balance, discount factor, survival to prepayment and weight of each pair;
        # without interest-only months or add-ons the simpler loop (no selects)
        if waits or adds:
            for j in range(run):
                held = t < io[j]
                xj, sj, gj = x[j], annuity[j], growth[j]
                bal = _balance_on_path(amort_from[j], xj, sj, pay[j])
                bal = amort_from[j] if held else bal
                x[j] = xj if held else xj * gj
                annuity[j] = sj if held else sj * gj + 1.0
                d = df[j] * v[j]
                df[j] = d
                keep[j] = 1.0 - smm[smm_at[j] + t]
                w[j] = (bal + (add[j] if t < add_m[j] else add_a[j])) * d
        else:
            for j in range(run):
                xj, sj, gj = x[j], annuity[j], growth[j]
                bal = _balance_on_path(amort_from[j], xj, sj, pay[j])
                x[j] = xj * gj
                annuity[j] = sj * gj + 1.0
                d = df[j] * v[j]
                df[j] = d
                keep[j] = 1.0 - smm[smm_at[j] + t]
                w[j] = bal * d
        for s in range(n_sc):
            h = pd_t[t, s, key]  # one curve row for the block: one number a month and scenario
            mu = multiplier_t[t, s, f]
            hc = min(h, 1.0)
            if scaled:  # each loan's own PD level against the row
                for j in range(run):
                    hazard[j] = min(h * scale[j], 1.0)
            else:
                for j in range(run):
                    hazard[j] = hc
            # d = S min(c pd, 1), E += d w, S = (S - d)(1 - smm), and the net loss: one loop for
            # each form, without a test inside it (so that each is vectorised)
            alive_s, gross_s, cum_s, net_s = alive[s], gross[s], cum[s], net[s]
            if lgd_max * mu_max[s] <= 1.0:  # the cap never binds (this scenario's largest multiplier)
                for j in range(run):
                    d = alive_s[j] * hazard[j]
                    dw = d * w[j]
                    gross_s[j] += dw
                    net_s[j] += dw * mu
                    cum_s[j] += d
                    alive_s[j] = (alive_s[j] - d) * keep[j]
            else:
                for j in range(run):
                    d = alive_s[j] * hazard[j]
                    dw = d * w[j]
                    gross_s[j] += dw
                    net_s[j] += _default_loss(dw, min(1.0, flat[j] * mu), it[j])
                    cum_s[j] += d
                    alive_s[j] = (alive_s[j] - d) * keep[j]
        if t == 11:  # end of month 12: the 12-month figures
            for s in range(n_sc):
                for j in range(run):
                    net_12[s, j], cum_12[s, j], gross_12[s, j] = net[s, j], cum[s, j], gross[s, j]
    for j in range(m):
        last = maturity[j]
        if 0 <= last < months[j]:  # refinance risk in the last month: S_T q cannot repay
            for s in range(n_sc):
                failed = _refinance_default(alive[s, j], q[j])
                fw_ = failed * w[j]  # w holds the last month's weight
                mu = multiplier_t[last, s, f]
                more = fw_ * mu if lgd_max * mu_max[s] <= 1.0 else fw_ * (min(1.0, flat[j] * mu) + it[j])
                gross[s, j] += fw_
                cum[s, j] += failed
                net[s, j] += more
                if last == 11:  # within the first 12 months
                    gross_12[s, j] += fw_
                    cum_12[s, j] += failed
                    net_12[s, j] += more
        short = months[j] < 12  # a horizon under 12 months: its 12-month figures are its lifetime ones
        i, lgd_j, i_j = row[j], flat[j], it[j]
        for s in range(n_sc):
            g, g12 = gross[s, j], (gross[s, j] if short else gross_12[s, j])
            n_, n12 = net[s, j], (net[s, j] if short else net_12[s, j])
            if lgd_max * mu_max[s] <= 1.0:
                n_, n12 = lgd_j * n_ + i_j * g, lgd_j * n12 + i_j * g12
            _store(sums, i, f, s, n12, n_, cum[s, j] if short else cum_12[s, j], cum[s, j],
                   g12 * (1.0 + i_j), g * (1.0 + i_j))


@numba.njit(cache=jit.CACHE, nogil=True)
def _flat_blocks(
    starts, block_f, block_key, order, mu_max, code, balance, rate, months_left, io_left, level_payment,
    paydown, horizon, refinance_pd, pd_t, smm, smm_width, prepay, prepay_offset, pd_scale, ead_add, add_months,
    add_after, discount, interest, lgd, multiplier_t, sums, first, last,
):
    """Blocks ``first..last-1`` of :func:`_flat_block`, each pair ``order[starts[b]:starts[b+1]]``;
    the block's scratch allocated once for them all."""
    n_sc = pd_t.shape[1]
    row, months, io, add_m = np.empty(_SIDE, np.int64), np.empty(_SIDE, np.int64), np.empty(_SIDE, np.int64), np.empty(_SIDE, np.int64)
    maturity, smm_at = np.empty(_SIDE, np.int64), np.empty(_SIDE, np.int64)
    amort_from, growth, pay, x = np.empty(_SIDE), np.empty(_SIDE), np.empty(_SIDE), np.empty(_SIDE)
    annuity, df, v, scale = np.empty(_SIDE), np.empty(_SIDE), np.empty(_SIDE), np.empty(_SIDE)
    add, add_a, w, keep = np.empty(_SIDE), np.empty(_SIDE), np.empty(_SIDE), np.empty(_SIDE)
    flat, it, q, hazard = np.empty(_SIDE), np.empty(_SIDE), np.empty(_SIDE), np.empty(_SIDE)
    alive, net, cum, gross = np.empty((n_sc, _SIDE)), np.empty((n_sc, _SIDE)), np.empty((n_sc, _SIDE)), np.empty((n_sc, _SIDE))
    net_12, cum_12, gross_12 = np.empty((n_sc, _SIDE)), np.empty((n_sc, _SIDE)), np.empty((n_sc, _SIDE))
    for b in range(first, last):
        f = block_f[b]
        _flat_block(
            starts[b], starts[b + 1] - starts[b], f, order, mu_max[f], block_key[b], code, balance, rate,
            months_left, io_left, level_payment, paydown, horizon, refinance_pd, pd_t, smm, smm_width, prepay,
            prepay_offset, pd_scale, ead_add, add_months, add_after, discount, interest, lgd, multiplier_t, sums,
            row, months, io, amort_from, growth, pay, x, annuity, df, v, smm_at, scale, add, add_m, add_a, w, keep,
            flat, it, maturity, q, hazard, alive, net, cum, gross, net_12, cum_12, gross_12,
        )


def _side_by_side(a: dict, mu_max: np.ndarray) -> tuple:
    """The blocks of :func:`_flat_blocks`: every (framework, loan) pair without collateral and
    not in default, by framework, tape window, net-loss forms, curve row and horizon (longest
    first), cut into blocks of at most :data:`_SIDE` pairs that never span two groups.

    The net-loss form of each scenario (:func:`_flat_block`: the cap on LGD x multiplier can
    bind or not) is a loan's own, set by its LGD and that scenario's multipliers alone, so
    that a loan's figures never depend on which other loans share its block (a chunk of
    another size, a partition of the tape on a cluster) or on the other scenarios (a
    scenario run alone, as the sensitivities run it): the same bits. Returns ``(starts, block_f, block_key, order)``, ``order`` the
    loans' rows and ``block_key`` the row of ``pd_t``'s last axis."""
    n_fw, n_keys, n_sc = a["pd"].shape[0], a["pd"].shape[1], a["pd"].shape[3]
    flat = ~(a["collateral"] > 0.0)
    revolving = a["code"] == REVOLVING
    windows = a["balance"].shape[0] // _WINDOW + 1
    orders, groups, keys, fws = [], [], [], []
    for f in range(n_fw):
        rows = np.flatnonzero(flat & ~a["in_default"][f])
        k = a["curve"][f, rows]
        months = np.where(revolving[rows], a["horizon"][f, rows], np.minimum(a["horizon"][f, rows], a["months_left"][rows]))
        capped = (a["lgd"][rows, None] * mu_max[f] > 1.0).sum(axis=1)  # the scenarios where the cap can bind
        group = ((f * windows + rows // _WINDOW) * (n_sc + 1) + capped) * n_keys + k  # no two frameworks share one
        top = int(months.max(initial=0)) + 1
        rank = np.argsort(group * top + (top - 1 - months), kind="stable")
        orders.append(rows[rank])
        groups.append(group[rank])
        keys.append(f * n_keys + k[rank])
        fws.append(np.full(rows.size, f, np.int64))
    order, group = np.concatenate(orders), np.concatenate(groups)
    first = np.flatnonzero(np.r_[True, group[1:] != group[:-1]]) if order.size else np.zeros(0, np.int64)
    sizes = np.diff(np.r_[first, order.size])
    per = -(-sizes // _SIDE)  # blocks in each group
    starts = np.repeat(first, per) + (np.arange(per.sum()) - np.repeat(np.cumsum(per) - per, per)) * _SIDE
    return (np.r_[starts, order.size].astype(np.int64), np.concatenate(fws)[starts], np.concatenate(keys)[starts],
            order)


def fused_sums(head: tuple, sums, ead0, lgd0) -> None:
    """Run the loops over every loan of ``head`` (the checked inputs in
    :class:`allowance.ecl.KernelInputs` order, the level payments in place of the tape's
    payment and residual) on all cores, into ``sums`` ``[6, n, F, S]``, ``ead0`` and ``lgd0``
    ``[n, F]``: :func:`_kernel` for every loan's exposure and LGD today and the secured and
    defaulted loans' sums, :func:`_flat_blocks` for the rest."""
    n = head[1].shape[0]
    jitcache.wait_for_ahead()  # a second process compiling the loops into the cache: load them, not compile them
    jit.in_threads(lambda first, last: _kernel(*head, _BLOCK, first, last, sums, ead0, lgd0), n, _BLOCK)
    a = dict(zip(_KERNEL_INPUTS, head))
    n_fw, n_keys, n_months, n_sc = a["pd"].shape
    mu_max = np.ascontiguousarray(a["lgd_multiplier"].max(axis=1))  # [F, S]: each scenario's largest
    starts, block_f, block_key, order = _side_by_side(a, mu_max)
    if not order.size:
        return
    # the tables month-major, the frameworks' curve rows side by side: a block's month is one row
    pd_t = np.ascontiguousarray(a["pd"].transpose(2, 3, 0, 1).reshape(n_months, n_sc, n_fw * n_keys))
    multiplier_t = np.ascontiguousarray(a["lgd_multiplier"].transpose(1, 2, 0))  # [T, S, F]
    smm = a["smm"]
    jit.in_threads(lambda first, last: _flat_blocks(
        starts, block_f, block_key, order, mu_max, a["code"], a["balance"], a["rate"], a["months_left"],
        a["io_left"], a["level_payment"], a["paydown"], a["horizon"], a["refinance_pd"], pd_t, np.ravel(smm),
        smm.shape[1], a["prepay"], a["prepay_offset"], a["pd_scale"], a["ead_add"], a["add_months"], a["add_after"],
        a["discount"], a["interest"], a["lgd"], multiplier_t, sums, first, last), starts.size - 1, 1)


#: :func:`_kernel`'s inputs, the order of ``fused_sums``' ``head``
_KERNEL_INPUTS = (
    "code", "balance", "rate", "months_left", "io_left", "level_payment", "curve", "prepay", "prepay_offset",
    "in_default", "lgd", "collateral", "haircut", "recovery_cost", "lgd_floor", "recovery_discount", "cure",
    "refinance_pd", "horizon", "ead_add", "paydown", "discount", "interest", "pd", "smm", "lgd_multiplier",
    "collateral_index", "pd_scale", "add_months", "add_after",
)
