r"""Monthly default hazards (occurrences over exposure), by grade and by loan age, and the PDs from them.

Every loan-month on the book at the start of a month is a month of exposure; it is a default if
the loan is charged off that month. The maximum-likelihood estimate of a constant monthly
hazard from such data, with repayments and the end of the history as censoring, is the
occurrence/exposure rate [1]_

.. math::

    \hat h = D / E, \qquad PD_{12} = 1 - (1 - \hat h)^{12},

which is the engine's convention: a marginal PD conditional on survival, with prepayment
applied separately (so repayments are not counted as non-defaults twice). A group with no
defaults gets, by the stated ``zero_default_rule``, either 0 or the posterior mean under the
Jeffreys prior, :math:`(0 + 1/2) / (E + 1)` [2]_.

By grade, the window's loan-months are pooled (grade at the start of the month): the
``pd_12m_by_grade`` source. By loan age, every month up to the as-of month is pooled (ages
are spread across calendar time, so a long span is needed), in years of age: the hazard of
year y is :math:`D_y / E_y`, constant within the year, and the cumulative PD by the end of
year y is :math:`C_y = 1 - \prod_{k \le y} (1 - h_k)^{12}`: the ``pd_curve_by_age`` source.
Years of age with fewer than ``min_exposure_months`` loan-months end the curve; the engine
carries the last year's hazard on.

Implements
----------
collect        exposure and defaults by segment, month and grade, and by segment and month of life
estimate       hazards, PD by grade, the pooled 12-month PD, the PD curve by age
Hazards        the tables
annual_pd      PD over 12 months from a monthly hazard
jeffreys_mean  the Jeffreys posterior mean of a rate with no events

References
----------
.. [1] J. D. Kalbfleisch and R. L. Prentice, *The Statistical Analysis of Failure Time Data*,
   2nd ed., Wiley, 2002, section 3.3 (the life table and occurrence/exposure rates).
.. [2] L. D. Brown, T. T. Cai and A. DasGupta, "Interval estimation for a binomial
   proportion", *Statistical Science* 16(2), 101-133, 2001 (the Jeffreys prior Beta(1/2, 1/2)).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance.calibrate.frame import Frame, MonthView
from allowance.calibrate.states import CHARGE_OFF

#: Oldest month of life tracked (50 years); older loans count in the last month.
MAX_AGE_MONTHS = 600


def annual_pd(hazard: float | np.ndarray) -> np.ndarray:
    """``1 - (1 - h)^12``, computed without losing small values.

    Examples
    --------
    >>> round(float(annual_pd(0.001)), 8)
    0.01193422
    """
    h = np.asarray(hazard, dtype=np.float64)
    return -np.expm1(12.0 * np.log1p(-h))


def jeffreys_mean(events: np.ndarray, exposure: np.ndarray) -> np.ndarray:
    """Posterior mean of a rate under the Jeffreys prior Beta(1/2, 1/2): (d + 1/2) / (n + 1).

    Examples
    --------
    >>> float(jeffreys_mean(np.array(0), np.array(999)))
    0.0005
    """
    return (np.asarray(events, float) + 0.5) / (np.asarray(exposure, float) + 1.0)


def collect(view: MonthView) -> dict[str, np.ndarray]:
    """Loan-months at risk and charge-offs by ``[segment, month, grade]`` and ``[segment, month of life]``."""
    frame = view.frame
    ends = np.flatnonzero(view.transition)
    starts = view.before[ends]
    default = view.state[ends] == CHARGE_OFF
    seg = view.segment[ends].astype(np.int64)
    n_seg = len(frame.segments)
    grade = view.part.get("grade")
    n_grade = len(frame.grades) + 1
    g = (np.where(grade[starts] >= 0, grade[starts], n_grade - 1).astype(np.int64) if grade is not None
         else np.full(len(ends), n_grade - 1, np.int64))
    shape = (n_seg, frame.months, n_grade)
    flat = np.ravel_multi_index((seg, view.t[ends], g), shape)
    size = int(np.prod(shape))
    out = {
        "grade_exposure": np.bincount(flat, minlength=size).reshape(shape),
        "grade_defaults": np.bincount(flat[default], minlength=size).reshape(shape),
    }
    life = view.age[ends]
    known = life >= 1
    shape = (n_seg, MAX_AGE_MONTHS + 1)
    flat = np.ravel_multi_index((seg[known], np.minimum(life[known], MAX_AGE_MONTHS)), shape)
    out["age_exposure"] = np.bincount(flat, minlength=shape[0] * shape[1]).reshape(shape)
    out["age_defaults"] = np.bincount(flat[default[known]], minlength=shape[0] * shape[1]).reshape(shape)
    return out


@dataclass(frozen=True)
class Hazards:
    """Default hazards and the PDs the assumptions take from them.

    by_grade        segment, grade, loan_months, defaults, hazard, pd_12m (window)
    pooled          segment, loan_months, defaults, hazard, pd_12m (window, all grades)
    by_age          segment, year_of_age, loan_months, defaults, hazard, cumulative_pd, in_curve
    pd_12m_by_grade segment -> {grade: pd_12m}
    pd_12m          segment -> pd_12m
    pd_curve_by_age segment -> cumulative PD by year of age
    monthly         segment, month (``YYYY-MM``), at_risk, defaults: every month after the first,
                    all grades (the series a satellite model is fitted to)
    """

    by_grade: pd.DataFrame
    pooled: pd.DataFrame
    by_age: pd.DataFrame
    pd_12m_by_grade: dict[str, dict[str, float]]
    pd_12m: dict[str, float]
    pd_curve_by_age: dict[str, list[float]]
    monthly: pd.DataFrame | None = None


def _monthly(stats: dict[str, np.ndarray], frame: Frame) -> pd.DataFrame:
    from allowance.calibrate.frame import month_label

    exposure = stats["grade_exposure"].sum(axis=2)
    defaults = stats["grade_defaults"].sum(axis=2)
    months = [month_label(frame.first_month + t) for t in range(1, frame.months)]
    return pd.concat([pd.DataFrame({"segment": name, "month": months, "at_risk": exposure[s, 1:],
                                    "defaults": defaults[s, 1:]}) for s, name in enumerate(frame.segments)]
                     or [pd.DataFrame(columns=["segment", "month", "at_risk", "defaults"])], ignore_index=True)


def _hazard(defaults: np.ndarray, exposure: np.ndarray, rule: str) -> np.ndarray:
    defaults = np.asarray(defaults, float)
    exposure = np.asarray(exposure, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        mle = np.where(exposure > 0, defaults / exposure, np.nan)
    if rule == "jeffreys_mean":
        mle = np.where((defaults == 0) & (exposure > 0), jeffreys_mean(defaults, exposure), mle)
    return mle


def estimate(stats: dict[str, np.ndarray], frame: Frame) -> Hazards:
    settings = frame.settings
    lo = frame.window_start - frame.first_month
    exposure = stats["grade_exposure"][:, lo:].sum(axis=1)
    defaults = stats["grade_defaults"][:, lo:].sum(axis=1)
    grades = [*frame.grades, ""]
    rows, pooled_rows = [], []
    by_grade: dict[str, dict[str, float]] = {}
    pd_12m: dict[str, float] = {}
    order = sorted(range(len(grades)), key=lambda g: (grades[g] == "", grades[g]))  # A, B, ... then blank
    for s, name in enumerate(frame.segments):
        table: dict[str, float] = {}
        for g in order:
            grade = grades[g]
            e, d = int(exposure[s, g]), int(defaults[s, g])
            if e == 0:
                continue
            h = float(_hazard(d, e, settings.zero_default_rule))
            rows.append({"segment": name, "grade": grade or "(blank)", "loan_months": e, "defaults": d,
                         "hazard": h, "pd_12m": float(annual_pd(h))})
            if grade:
                table[grade] = float(annual_pd(h))
        by_grade[name] = table
        e, d = int(exposure[s].sum()), int(defaults[s].sum())
        h = float(_hazard(d, e, settings.zero_default_rule)) if e else np.nan
        pd_12m[name] = float(annual_pd(h)) if e else np.nan
        pooled_rows.append({"segment": name, "loan_months": e, "defaults": d, "hazard": h, "pd_12m": pd_12m[name]})
    age_rows, curves = _by_age(stats, frame)
    return Hazards(
        by_grade=pd.DataFrame(rows, columns=["segment", "grade", "loan_months", "defaults", "hazard", "pd_12m"]),
        pooled=pd.DataFrame(pooled_rows), by_age=age_rows, pd_12m_by_grade=by_grade, pd_12m=pd_12m,
        pd_curve_by_age=curves, monthly=_monthly(stats, frame),
    )


def _by_age(stats: dict[str, np.ndarray], frame: Frame) -> tuple[pd.DataFrame, dict[str, list[float]]]:
    settings = frame.settings
    years = MAX_AGE_MONTHS // 12
    rows, curves = [], {}
    for s, name in enumerate(frame.segments):
        exposure = stats["age_exposure"][s, 1:].reshape(years, 12).sum(axis=1)
        defaults = stats["age_defaults"][s, 1:].reshape(years, 12).sum(axis=1)
        if exposure.sum() == 0:
            curves[name] = []
            continue
        hazard = _hazard(defaults, exposure, settings.zero_default_rule)
        enough = exposure >= settings.min_exposure_months
        n = int(np.argmin(enough)) if not enough.all() else years  # the first year short of exposure ends the curve
        survival = np.cumprod(np.where(np.isnan(hazard), 1.0, (1.0 - hazard) ** 12))
        cumulative = 1.0 - survival
        curves[name] = [float(c) for c in cumulative[:n]]
        last = int(np.flatnonzero(exposure)[-1]) + 1
        for y in range(last):
            rows.append({"segment": name, "year_of_age": y + 1, "loan_months": int(exposure[y]),
                         "defaults": int(defaults[y]), "hazard": float(hazard[y]),
                         "cumulative_pd": float(cumulative[y]) if y < n else np.nan, "in_curve": y < n})
    return pd.DataFrame(rows, columns=["segment", "year_of_age", "loan_months", "defaults", "hazard",
                                       "cumulative_pd", "in_curve"]), curves
