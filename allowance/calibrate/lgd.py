r"""Workout LGD from charge-offs and the recoveries that followed them, and the recovery timing curve.

For a loan written off in month :math:`m_0` with gross write-off :math:`W` (charge-offs and
bankruptcy losses over the workout), exposure at charge-off :math:`EAD` (its balance at the
month end before :math:`m_0`; :math:`W` where the history has no such row) and cash
:math:`R_k` recovered or received from selling the debt k months after :math:`m_0`
(:math:`0 \le k \le K`, K = ``lgd_workout_months``), discounted at the loan's monthly contract
rate r (the EIR proxy of IFRS 9 B5.5.44; ``recovery_discount = "none"`` sets r = 0):

.. math::

    LGD_i = \frac{W_i - \sum_{k=0}^{K} R_{i,k} (1 + r_i)^{-k}}{EAD_i}, \qquad
    LGD = \frac{\sum_i \bigl(W_i - PV_i\bigr)}{\sum_i EAD_i}

(exposure-weighted, over the charge-offs at least K months before the as-of month, so every
workout is complete; common practice, no source). The recovery timing curve is the share of
the gross write-off recovered by k months after charge-off, over the charge-offs observed for
at least k months: :math:`\sum_i \sum_{j \le k} R_{i,j} / \sum_i W_i`.

Implements
----------
collect   per segment: exposures, write-offs, discounted and undiscounted cash of complete
          workouts; cash by months since charge-off for the timing curve
estimate  LGD by segment and the timing curve
WorkoutLgd the tables
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance.calibrate.frame import Frame, MonthView
from allowance.intake.panel import sort_key

MAX_MONTHS = 120
#: Loan-level LGD histogram: bins of 5 percentage points from -10 % to 110 %.
BINS = np.linspace(-0.1, 1.1, 25)


def collect(view: MonthView) -> dict[str, np.ndarray]:
    frame = view.frame
    n_seg = len(frame.segments)
    workout = frame.settings.lgd_workout_months
    part = view.part
    events = part.events
    out = {name: np.zeros(n_seg) for name in ("ead", "written_off", "cash", "cash_pv", "loans")}
    out["timing_cash"] = np.zeros((n_seg, MAX_MONTHS + 1))
    out["timing_base"] = np.zeros((n_seg, MAX_MONTHS + 1))
    out["histogram"] = np.zeros((n_seg, len(BINS) + 1))
    out["cash_before_write_off"] = np.zeros(n_seg)
    out["cash_without_write_off"] = np.zeros(n_seg)
    if not len(events["loan"]):
        return out
    loan = events["loan"].astype(np.int64)
    month = events["month"].astype(np.int64)
    write = events["charge_off"] + events["bankruptcy_loss"]
    cash = events["recoveries"] + events["asset_sales"]
    # each loan's write-off month: its first event with an amount written off
    written = write > 0
    starts = np.flatnonzero(np.r_[True, loan[1:] != loan[:-1]])
    group = np.cumsum(np.r_[True, loan[1:] != loan[:-1]]) - 1
    big = np.iinfo(np.int64).max
    first_write = np.minimum.reduceat(np.where(written, month, big), starts)
    m0 = first_write[group]
    has = m0 != big
    k = np.where(has, month - m0, -1)
    segment_of_loan = np.maximum.reduceat(np.where(written, events["segment"].astype(np.int64), -1), starts)
    seg = segment_of_loan[group]
    before = has & (k < 0) & (cash > 0)
    np.add.at(out["cash_before_write_off"], seg[before], cash[before])
    orphan = ~has & (cash > 0)  # recoveries on amounts written off before the history began
    np.add.at(out["cash_without_write_off"], events["segment"][orphan].astype(np.int64), cash[orphan])
    # per written-off loan: write-offs and cash within the workout
    inside = has & (k >= 0) & (k <= workout)
    loans = np.flatnonzero(first_write != big)
    loan_seg = segment_of_loan[loans]
    loan_m0 = first_write[loans]
    w = np.bincount(group[inside], weights=write[inside], minlength=len(starts))[loans]
    undiscounted = np.bincount(group[inside], weights=cash[inside], minlength=len(starts))[loans]
    rate = _monthly_rate(part, loan[starts][loans], loan_m0, frame)
    factor = (1.0 + rate[np.searchsorted(loans, group[inside])]) ** -k[inside].astype(float)
    pv = np.bincount(group[inside], weights=cash[inside] * factor, minlength=len(starts))[loans]
    ead = _exposure(part, loan[starts][loans], loan_m0, w)
    complete = loan_m0 + workout <= frame.as_of
    for name, values in (("ead", ead), ("written_off", w), ("cash", undiscounted), ("cash_pv", pv),
                         ("loans", np.ones(len(loans)))):
        np.add.at(out[name], loan_seg[complete], values[complete])
    with np.errstate(divide="ignore", invalid="ignore"):
        loss = np.where(ead > 0, (w - pv) / ead, np.nan)
    bins = np.digitize(loss[complete & np.isfinite(loss)], BINS)
    np.add.at(out["histogram"], (loan_seg[complete & np.isfinite(loss)], bins), 1.0)
    # timing: cash k months after charge-off over the write-offs observed for at least k months
    timing = has & (k >= 0) & (k <= MAX_MONTHS)
    np.add.at(out["timing_cash"], (seg[timing], k[timing]), cash[timing])
    # base[k] = write-offs observed for at least k months: a reverse running sum by segment
    observed = np.minimum(frame.as_of - loan_m0, MAX_MONTHS)
    by_length = np.zeros((n_seg, MAX_MONTHS + 1))
    np.add.at(by_length, (loan_seg, observed), w)
    out["timing_base"] = np.cumsum(by_length[:, ::-1], axis=1)[:, ::-1]
    return out


def _rows_at(part, loans: np.ndarray, months: np.ndarray) -> np.ndarray:
    """Position of each (loan, month) row in the partition, or -1."""
    key = sort_key(part.loan, part.month)
    want = sort_key(loans, months)
    at = np.searchsorted(key, want)
    ok = (at < len(key)) & (key[np.minimum(at, len(key) - 1)] == want)
    return np.where(ok, at, -1)


def _exposure(part, loans: np.ndarray, m0: np.ndarray, written: np.ndarray) -> np.ndarray:
    """Balance at the month end before the charge-off; the write-off where there is no such row."""
    at = _rows_at(part, loans, m0 - 1)
    balance = np.where(at >= 0, part.balance[np.maximum(at, 0)], 0.0)
    return np.where((at >= 0) & (balance > 0), balance, written)


def _monthly_rate(part, loans: np.ndarray, m0: np.ndarray, frame: Frame) -> np.ndarray:
    if frame.settings.recovery_discount == "none" or part.get("interest_rate") is None:
        return np.zeros(len(loans))
    rates = part.interest_rate.astype(np.float64)
    at = _rows_at(part, loans, m0 - 1)
    here = _rows_at(part, loans, m0)
    rate = np.where(at >= 0, rates[np.maximum(at, 0)], np.nan)
    rate = np.where(np.isnan(rate) & (here >= 0), rates[np.maximum(here, 0)], rate)
    return np.nan_to_num(rate) / 12.0


@dataclass(frozen=True)
class WorkoutLgd:
    """Workout LGD by segment and the recovery timing curve.

    by_segment  segment, charge_offs, ead, written_off, recoveries (undiscounted), recoveries_pv,
                lgd, lgd_undiscounted, mean_months_to_recovery
    timing      segment, months_since_charge_off, written_off_observed, recovered, cumulative_recovery_rate
    histogram   segment, lgd_from, lgd_to, charge_offs
    """

    by_segment: pd.DataFrame
    timing: pd.DataFrame
    histogram: pd.DataFrame
    lgd: dict[str, float]
    cash_before_write_off: dict[str, float]
    cash_without_write_off: dict[str, float]


def estimate(stats: dict[str, np.ndarray], frame: Frame) -> WorkoutLgd:
    rows, timing, histogram, lgd = [], [], [], {}
    for s, name in enumerate(frame.segments):
        ead, w = stats["ead"][s], stats["written_off"][s]
        cash, pv = stats["cash"][s], stats["cash_pv"][s]
        value = float(np.clip((w - pv) / ead, 0.0, 1.0)) if ead > 0 else np.nan
        lgd[name] = value
        paid = stats["timing_cash"][s]
        months = np.arange(MAX_MONTHS + 1)
        mean_months = float((paid * months).sum() / paid.sum()) if paid.sum() > 0 else np.nan
        rows.append({
            "segment": name, "charge_offs": int(stats["loans"][s]), "ead": ead, "written_off": w,
            "recoveries": cash, "recoveries_pv": pv, "lgd": value,
            "lgd_undiscounted": float(np.clip((w - cash) / ead, 0.0, 1.0)) if ead > 0 else np.nan,
            "mean_months_to_recovery": mean_months,
        })
        base = stats["timing_base"][s]
        seen = np.flatnonzero(base > 0)
        if seen.size:
            last = int(seen[-1])
            with np.errstate(divide="ignore", invalid="ignore"):
                share = np.cumsum(paid[: last + 1] / np.where(base[: last + 1] > 0, base[: last + 1], np.nan))
            timing.append(pd.DataFrame({
                "segment": name, "months_since_charge_off": months[: last + 1],
                "written_off_observed": base[: last + 1], "recovered": paid[: last + 1],
                "cumulative_recovery_rate": share,
            }))
        counts = stats["histogram"][s]
        for b in range(1, len(BINS)):
            histogram.append({"segment": name, "lgd_from": BINS[b - 1], "lgd_to": BINS[b], "charge_offs": int(counts[b])})
    return WorkoutLgd(
        by_segment=pd.DataFrame(rows),
        timing=pd.concat(timing, ignore_index=True) if timing else pd.DataFrame(
            columns=["segment", "months_since_charge_off", "written_off_observed", "recovered",
                     "cumulative_recovery_rate"]),
        histogram=pd.DataFrame(histogram), lgd=lgd,
        cash_before_write_off={name: float(v) for name, v in zip(frame.segments, stats["cash_before_write_off"])},
        cash_without_write_off={name: float(v) for name, v in zip(frame.segments, stats["cash_without_write_off"])},
    )
