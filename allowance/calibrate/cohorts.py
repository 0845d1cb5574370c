r"""Cohort 12-month default rates by starting delinquency bucket and by grade.

The cohort method: every loan on the book at a month end c (in a delinquency bucket) joins the
cohort of c, grouped by its bucket (or grade) that month; it defaults if it is charged off in
the next 12 months, :math:`c < m_{co} \le c + 12`. Over the cohorts of the window,

.. math::

    DR_{12}(g) = \frac{\sum_c D_c(g)}{\sum_c N_c(g)}, \qquad
    \operatorname{se} = \sqrt{DR (1 - DR) / \sum_c N_c(g)},

where the cohorts are the window's months shifted back 12, so that every cohort's year is
observed by the as-of month. Loans repaid within the year count as not defaulted (they are in
:math:`N`; the rate is the probability of default before repayment); loans that stop
reporting before the year ends without leaving are counted apart (``unknown``) and kept in
:math:`N` (common practice, no source).

Implements
----------
collect   cohort sizes, defaults, repayments and unknown outcomes by segment, month, bucket and grade
estimate  pooled 12-month default rates by bucket and by grade, and the monthly series
Cohorts   the tables
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance.calibrate.frame import Frame, MonthView, month_label
from allowance.calibrate.states import BUCKETS, CHARGE_OFF, PAID_OFF, segment_states

HORIZON = 12
_OUTCOMES = ("loans", "defaults", "repaid", "unknown")


def _outcomes(view: MonthView, rows: np.ndarray) -> dict[str, np.ndarray]:
    month = view.part.month.astype(np.int64)
    start = month[rows]
    exit_row = view.exit_row[rows]
    exit_month = np.where(exit_row >= 0, month[np.maximum(exit_row, 0)], np.iinfo(np.int64).max)
    within = (exit_month > start) & (exit_month <= start + HORIZON)
    loan = view.part.loan
    last_row = np.r_[np.flatnonzero(loan[1:] != loan[:-1]), len(loan) - 1] if len(loan) else np.zeros(0, np.int64)
    group = np.cumsum(np.r_[True, loan[1:] != loan[:-1]]) - 1 if len(loan) else np.zeros(0, np.int64)
    last_month = month[last_row][group[rows]]
    return {
        "loans": np.ones(len(rows), dtype=bool),
        "defaults": within & (view.exit_state[rows] == CHARGE_OFF),
        "repaid": within & (view.exit_state[rows] == PAID_OFF),
        "unknown": ~within & (last_month < start + HORIZON) & (exit_row < 0),
    }


def collect(view: MonthView) -> dict[str, np.ndarray]:
    """Cohort counts ``[segment, month, bucket]`` and ``[segment, month, grade]`` (grade -1 last)."""
    frame = view.frame
    last_cohort = frame.as_of - HORIZON
    rows = np.flatnonzero(view.active & (view.part.month <= last_cohort))
    n_seg, n_t = len(frame.segments), frame.months
    seg = view.segment[rows].astype(np.int64)
    t = view.t[rows]
    outcomes = _outcomes(view, rows)
    out = {}
    bucket = view.state[rows].astype(np.int64)
    shape = (n_seg, n_t, len(BUCKETS))
    flat = np.ravel_multi_index((seg, t, bucket), shape)
    for name, hit in outcomes.items():
        out[f"bucket_{name}"] = np.bincount(flat[hit], minlength=int(np.prod(shape))).reshape(shape)
    grade = view.part.get("grade")
    n_grade = len(frame.grades) + 1
    g = np.where(grade[rows] >= 0, grade[rows], n_grade - 1).astype(np.int64) if grade is not None \
        else np.full(len(rows), n_grade - 1, np.int64)
    shape = (n_seg, n_t, n_grade)
    flat = np.ravel_multi_index((seg, t, g), shape)
    for name, hit in outcomes.items():
        out[f"grade_{name}"] = np.bincount(flat[hit], minlength=int(np.prod(shape))).reshape(shape)
    return out


@dataclass(frozen=True)
class Cohorts:
    """Pooled 12-month default rates by bucket and by grade, and the rate of each monthly cohort.

    ``cohorts`` is the first and last cohort month pooled.
    """

    by_bucket: pd.DataFrame
    by_grade: pd.DataFrame
    series: pd.DataFrame
    cohorts: tuple[str, str]


def _rates(frame: pd.DataFrame) -> pd.DataFrame:
    with np.errstate(divide="ignore", invalid="ignore"):
        rate = frame["defaults"] / frame["loans"]
        frame["default_rate_12m"] = rate
        frame["standard_error"] = np.sqrt(rate * (1 - rate) / frame["loans"])
    return frame


def estimate(stats: dict[str, np.ndarray], frame: Frame) -> Cohorts:
    """Pool the window's cohorts (the window moved back 12 months) into rates."""
    last = frame.as_of - HORIZON - frame.first_month
    first = max(0, frame.window_start - HORIZON - frame.first_month)
    pooled = slice(first, last + 1) if last >= 0 else slice(0, 0)
    rows = []
    for s, name in enumerate(frame.segments):
        codes = segment_states(int(frame.charge_off_dpd[s]))[:-2]
        for b in codes:
            record = {"segment": name, "bucket": BUCKETS[b]}
            record.update({k: int(stats[f"bucket_{k}"][s, pooled, b].sum()) for k in _OUTCOMES})
            rows.append(record)
    by_bucket = _rates(pd.DataFrame(rows, columns=["segment", "bucket", *_OUTCOMES]))
    grades = [*frame.grades, ""]
    rows = []
    for s, name in enumerate(frame.segments):
        for g, grade in enumerate(grades):
            counts = {k: int(stats[f"grade_{k}"][s, pooled, g].sum()) for k in _OUTCOMES}
            if counts["loans"]:
                rows.append({"segment": name, "grade": grade or "(blank)", **counts})
    by_grade = _rates(pd.DataFrame(rows, columns=["segment", "grade", *_OUTCOMES]))
    rows = []
    for s, name in enumerate(frame.segments):
        for t in range(0, max(last + 1, 0)):
            counts = {k: int(stats[f"bucket_{k}"][s, t].sum()) for k in _OUTCOMES}
            current = {k: int(stats[f"bucket_{k}"][s, t, 0]) for k in ("loans", "defaults")}
            if counts["loans"]:
                rows.append({"segment": name, "cohort": month_label(frame.first_month + t), **counts,
                             "default_rate_12m": counts["defaults"] / counts["loans"],
                             "current_loans": current["loans"],
                             "default_rate_12m_current": current["defaults"] / current["loans"]
                             if current["loans"] else np.nan})
    series = pd.DataFrame(rows)
    span = (month_label(frame.first_month + first), month_label(frame.first_month + last)) if last >= first else ("", "")
    return Cohorts(by_bucket=by_bucket, by_grade=by_grade, series=series, cohorts=span)
