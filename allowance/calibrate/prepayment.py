r"""Repayment speeds: CPR by loan age, the pooled CPR, and the expected life of revolving lines.

Single monthly mortality of the loans on the book at the start of a month that were not
charged off in it, weighted by their balance at the start of the month (a repayment is a full
payoff, the ``paid_off`` flag):

.. math::

    SMM = \frac{\sum_{\text{repaid}} B_{m-1}}{\sum B_{m-1}}, \qquad CPR = 1 - (1 - SMM)^{12}

(the CPR/SMM convention of the mortgage market [1]_). By loan age the months of every year of
age are pooled over the whole history up to the as-of month (a year of age is short of data
below ``min_exposure_months`` loan-months, and ends the curve); the engine's ``cpr_by_age``
takes the year's CPR for each of its twelve months and the last value after. Payoffs at
contractual maturity cannot be told from prepayments without maturity dates; weighting by
balance keeps them small (a loan about to mature owes little). Partial prepayments are not
visible in month-end balances and are not included.

Revolving lines have no term: their expected life is the inverse of the monthly rate at which
lines leave the book (closed or charged off), :math:`1 / q` months, over the window; IFRS 9
B5.5.40 asks for the period over which the entity is exposed to credit risk, which this
observed life informs (a judgement to review, not a rule).

Implements
----------
collect   repaid and opening balances by segment and month of life, and by segment and month
estimate  CPR by year of age and pooled, and the expected life of revolving lines
Prepayment the tables

References
----------
.. [1] F. J. Fabozzi (ed.), *The Handbook of Mortgage-Backed Securities*, chapter on
   prepayment conventions (SMM and CPR).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance.calibrate.frame import Frame, MonthView
from allowance.calibrate.states import CHARGE_OFF, PAID_OFF

MAX_AGE_MONTHS = 600


def collect(view: MonthView) -> dict[str, np.ndarray]:
    frame = view.frame
    part = view.part
    ends = np.flatnonzero(view.transition)
    starts = view.before[ends]
    seg = part.segment[ends].astype(np.int64)
    to = view.state[ends]
    opening = part.balance[starts]
    n_seg = len(frame.segments)
    shape = (n_seg, frame.months)
    size = shape[0] * shape[1]
    flat = np.ravel_multi_index((seg, view.t[ends]), shape)
    live = to != CHARGE_OFF
    repaid = to == PAID_OFF
    out = {
        "month_opening": np.bincount(flat[live], weights=opening[live], minlength=size).reshape(shape),
        "month_repaid": np.bincount(flat[repaid], weights=opening[repaid], minlength=size).reshape(shape),
        "month_exposure": np.bincount(flat, minlength=size).reshape(shape),
        "month_exits": np.bincount(flat[to >= CHARGE_OFF], minlength=size).reshape(shape),
    }
    life = view.age[ends]
    known = live & (life >= 1)
    shape = (n_seg, MAX_AGE_MONTHS + 1)
    size = shape[0] * shape[1]
    flat = np.ravel_multi_index((seg[known], np.minimum(life[known], MAX_AGE_MONTHS)), shape)
    out["age_opening"] = np.bincount(flat, weights=opening[known], minlength=size).reshape(shape)
    out["age_repaid"] = np.bincount(flat[repaid[known]], weights=opening[known][repaid[known]],
                                    minlength=size).reshape(shape)
    out["age_loans"] = np.bincount(flat, minlength=size).reshape(shape)
    return out


def cpr_from_smm(smm: float | np.ndarray) -> np.ndarray:
    """``1 - (1 - SMM)^12``.

    Examples
    --------
    >>> round(float(cpr_from_smm(0.005143)), 4)
    0.06
    """
    with np.errstate(divide="ignore"):  # SMM 1 (every loan repaid) is a CPR of 1
        return -np.expm1(12.0 * np.log1p(-np.asarray(smm, float)))


@dataclass(frozen=True)
class Prepayment:
    """CPR by year of age and pooled; expected life of revolving lines.

    by_age       segment, year_of_age, loan_months, opening_balance, repaid_balance, smm, cpr, in_curve
    pooled       segment, opening_balance, repaid_balance, smm, cpr (window)
    cpr_by_age   segment -> CPR per month of age (each year's value twelve times)
    cpr          segment -> pooled CPR
    life         segment -> (expected life in months, exits, line-months) for revolving segments
    """

    by_age: pd.DataFrame
    pooled: pd.DataFrame
    cpr_by_age: dict[str, list[float]]
    cpr: dict[str, float]
    life: dict[str, tuple[float, int, int]]


def estimate(stats: dict[str, np.ndarray], frame: Frame) -> Prepayment:
    settings = frame.settings
    lo = frame.window_start - frame.first_month
    years = MAX_AGE_MONTHS // 12
    rows, pooled, by_age, cpr, life = [], [], {}, {}, {}
    for s, name in enumerate(frame.segments):
        opening = stats["month_opening"][s, lo:].sum()
        repaid = stats["month_repaid"][s, lo:].sum()
        smm = repaid / opening if opening > 0 else np.nan
        cpr[name] = float(cpr_from_smm(smm)) if opening > 0 else np.nan
        pooled.append({"segment": name, "opening_balance": opening, "repaid_balance": repaid, "smm": smm,
                       "cpr": cpr[name]})
        if frame.revolving[s]:
            exits = int(stats["month_exits"][s, lo:].sum())
            exposure = int(stats["month_exposure"][s, lo:].sum())
            life[name] = (exposure / exits if exits else np.nan, exits, exposure)
        base = stats["age_opening"][s, 1:].reshape(years, 12).sum(axis=1)
        paid = stats["age_repaid"][s, 1:].reshape(years, 12).sum(axis=1)
        loans = stats["age_loans"][s, 1:].reshape(years, 12).sum(axis=1)
        if loans.sum() == 0:
            by_age[name] = []
            continue
        with np.errstate(divide="ignore", invalid="ignore"):
            year_smm = np.where(base > 0, paid / base, np.nan)
        year_cpr = cpr_from_smm(year_smm)
        enough = loans >= settings.min_exposure_months
        n = int(np.argmin(enough)) if not enough.all() else years
        by_age[name] = [float(round(c, 6)) for c in np.repeat(year_cpr[:n], 12)]
        last = int(np.flatnonzero(loans)[-1]) + 1
        for y in range(last):
            rows.append({"segment": name, "year_of_age": y + 1, "loan_months": int(loans[y]),
                         "opening_balance": base[y], "repaid_balance": paid[y], "smm": year_smm[y],
                         "cpr": year_cpr[y], "in_curve": y < n})
    return Prepayment(
        by_age=pd.DataFrame(rows, columns=["segment", "year_of_age", "loan_months", "opening_balance",
                                           "repaid_balance", "smm", "cpr", "in_curve"]),
        pooled=pd.DataFrame(pooled), cpr_by_age=by_age, cpr=cpr, life=life,
    )
