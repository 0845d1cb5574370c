"""The loss-rate loop, compiled: the sums of :mod:`allowance.loss_rates` for every loan.

:func:`allowance.loss_rates.loss_rate_losses` calls :func:`fused_losses` with its checked
inputs; numba is loaded only when a book has loss-rate segments. The balance path is the
one the PD method's loop walks (:mod:`allowance.ecl_compiled` compiles the same two
functions of :mod:`allowance.cashflows` with the same flags).

Implements
----------
fused_losses   run the loop over checked inputs (all cores), into the caller's arrays
"""

from __future__ import annotations

import numba
import numpy as np

from allowance import jit
from allowance.cashflows import REVOLVING, balance_on_path, contractual_payment, path_terms

__all__ = ["fused_losses"]

#: The method codes of :data:`allowance.loss_rates.LOSS_RATE_METHODS` (that module calls this
#: one, so it is not imported here; ``tests/test_loss_rates.py`` holds the two the same)
POOL, WARM, VINTAGE = 0, 1, 2

#: Loans per block handed to a thread (:func:`allowance.jit.in_threads`).
_BLOCK = 256
#: g and P of a loan's closed-form balance path (:func:`allowance.cashflows.path_terms`)
_path_terms = numba.njit(cache=jit.CACHE)(path_terms)
#: the scheduled balance in closed form, with the fused loop's flags (see :mod:`allowance.ecl_compiled`)
_balance_on_path = numba.njit(cache=jit.CACHE, fastmath=True)(balance_on_path)


@numba.njit(cache=jit.CACHE, inline="always")
def _expected_balance(t, io, balance, x, annuity, pay):
    return balance if t < io else _balance_on_path(balance, x, annuity, pay)


@numba.njit(cache=jit.CACHE, nogil=True)  # threads: allowance.jit.in_threads
def _loop(
    method, loss_rate, vintage, original_balance, age, default_lgd, code, balance, rate, months_left,
    io_left, residual, payment, prepay, prepay_offset, in_default, horizon, ead_add, paydown, discount,
    multiplier, lgd_multiplier, vintage_curve, smm, add_months, add_after, block, first, last, ecl12, ecllife, ead0,
):
    n = balance.shape[0]
    n_fw = multiplier.shape[0]
    n_sc = multiplier.shape[2]
    last_age = vintage_curve.shape[1] - 1
    for b in range(first, last):
        life = np.empty(n_sc)
        twelve = np.empty(n_sc)
        for i in range(b * block, min(n, (b + 1) * block)):
            c, m, b0, r, io = code[i], method[i], balance[i], rate[i], io_left[i]
            level = contractual_payment(c, b0, r, months_left[i], io, residual[i], payment[i])
            off, a = prepay_offset[i], age[i]
            for f in range(n_fw):
                p = prepay[f, i]  # a line a framework runs off takes no payoff SMM on top
                add_m, add_a = add_months[f, i], add_after[f, i]
                add = ead_add[f, i]
                ead = b0 + add
                ead0[i, f] = ead
                if in_default[f, i] and default_lgd[i] == default_lgd[i]:  # an LGD is stated
                    for s in range(n_sc):
                        loss = ead * min(1.0, default_lgd[i] * lgd_multiplier[f, 0, s])
                        ecl12[i, f, s] = loss
                        ecllife[i, f, s] = loss
                    continue
                h = horizon[f, i] if c == REVOLVING else min(horizon[f, i], months_left[i])
                growth, pay = _path_terms(c, b0, r, level, paydown[f, i])
                # pool: the lifetime loss L x EAD_0 is spread over the months in proportion to
                # the expected balance, so a first pass sums the expected balance
                scale = 0.0
                if m == POOL:
                    total = 0.0
                    x, annuity, kept = 1.0, 0.0, 1.0
                    for t in range(h):
                        total += (_expected_balance(t, io, b0, x, annuity, pay) + (add if t < add_m else add_a)) * kept
                        if t >= io:
                            x *= growth
                            annuity = annuity * growth + 1.0
                        kept *= 1.0 - smm[p, off + t]
                    scale = loss_rate[i] * ead / total if total > 0.0 else 0.0
                elif m == WARM:
                    scale = loss_rate[i] / 12.0
                for s in range(n_sc):
                    life[s] = 0.0
                    twelve[s] = 0.0
                x, annuity, kept, df = 1.0, 0.0, 1.0, 1.0
                v = discount[f, i]
                for t in range(h):
                    df *= v
                    if m == VINTAGE:
                        lo = min(a + t, last_age)
                        hi = min(a + t + 1, last_age)
                        loss = original_balance[i] * (vintage_curve[vintage[i], hi] - vintage_curve[vintage[i], lo])
                    else:
                        loss = scale * (_expected_balance(t, io, b0, x, annuity, pay) + (add if t < add_m else add_a)) * kept
                        if t >= io:
                            x *= growth
                            annuity = annuity * growth + 1.0
                        kept *= 1.0 - smm[p, off + t]
                    w = loss * df
                    for s in range(n_sc):
                        life[s] += w * multiplier[f, t, s]
                    if t == 11:
                        for s in range(n_sc):
                            twelve[s] = life[s]
                if h < 12:
                    for s in range(n_sc):
                        twelve[s] = life[s]
                for s in range(n_sc):
                    ecl12[i, f, s] = twelve[s]
                    ecllife[i, f, s] = life[s]


def fused_losses(head: tuple, ecl12, ecllife, ead0) -> None:
    """Run :func:`_loop` over every loan of ``head`` (the checked inputs in
    :class:`allowance.loss_rates.LossRateInputs` order) on all cores, into ``ecl12`` and
    ``ecllife`` ``[n, F, S]`` and ``ead0`` ``[n, F]``."""
    n = head[7].shape[0]  # balance
    jit.in_threads(lambda first, last: _loop(*head, _BLOCK, first, last, ecl12, ecllife, ead0), n, _BLOCK)
