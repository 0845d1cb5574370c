r"""Vintage analysis: cumulative default curves by loan age, one per origination year.

Loans originated in the same year (a vintage) are followed by their month of life a (months
since origination). With :math:`E_v(a)` the vintage's loans on the book at the start of month
of life a and :math:`D_v(a)` those charged off in it, the life-table estimate of the vintage's
cumulative default rate is [1]_

.. math::

    h_v(a) = D_v(a) / E_v(a), \qquad C_v(a) = 1 - \prod_{k \le a} \bigl(1 - h_v(k)\bigr),

which treats repayments and the end of the history as censoring (the cumulative default rate
of a vintage that nobody repaid). A constant hazard h gives a log-linear curve,
:math:`\log(1 - C(a)) = a \log(1 - h)`. A vintage originated before the history starts is
seen only from a later age: its curve starts at ``first_age`` and is conditional on the loans
having survived to it.

Implements
----------
collect   exposure and defaults by segment, vintage and month of life
estimate  the curves (long form: segment, vintage, age) and each vintage's size
Vintages  the curves
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance.calibrate.frame import Frame, MonthView
from allowance.calibrate.states import CHARGE_OFF

MAX_AGE_MONTHS = 360
#: Vintages are origination years; the first tracked is the history's first year less this.
YEARS_BEFORE = 40


def _vintage_axis(frame: Frame) -> tuple[int, int]:
    """First origination year tracked and the number of years."""
    last_year = 1970 + frame.as_of // 12
    first_year = 1970 + frame.first_month // 12 - YEARS_BEFORE
    return first_year, last_year - first_year + 1


def collect(view: MonthView) -> dict[str, np.ndarray]:
    """Loans at risk and charge-offs ``[segment, vintage, month of life]`` (month of life 1..360)."""
    frame = view.frame
    first_year, n_years = _vintage_axis(frame)
    shape = (len(frame.segments), n_years, MAX_AGE_MONTHS + 1)
    size = int(np.prod(shape))
    origination = view.part.get("origination")
    if origination is None:
        return {"exposure": np.zeros(shape, np.int64), "defaults": np.zeros(shape, np.int64)}
    ends = np.flatnonzero(view.transition)
    life = view.age[ends]
    known = (life >= 1) & (life <= MAX_AGE_MONTHS)
    ends, life = ends[known], life[known]
    vintage = 1970 + origination[ends].astype(np.int64) // 12 - first_year
    inside = (vintage >= 0) & (vintage < n_years)
    ends, life, vintage = ends[inside], life[inside], vintage[inside]
    flat = np.ravel_multi_index((view.segment[ends].astype(np.int64), vintage, life), shape)
    default = view.state[ends] == CHARGE_OFF
    return {
        "exposure": np.bincount(flat, minlength=size).reshape(shape),
        "defaults": np.bincount(flat[default], minlength=size).reshape(shape),
    }


@dataclass(frozen=True)
class Vintages:
    """Cumulative default curves by vintage and age.

    curves    segment, vintage, age (month of life), loans (at risk), defaults, hazard, cumulative_default_rate
    summary   segment, vintage, first_age, last_age, loans_at_first_age, defaults, cumulative_default_rate
              (at last_age), seen_from_origination (first_age <= 3)
    """

    curves: pd.DataFrame
    summary: pd.DataFrame


def estimate(stats: dict[str, np.ndarray], frame: Frame) -> Vintages:
    first_year, n_years = _vintage_axis(frame)
    curves, summary = [], []
    for s, name in enumerate(frame.segments):
        for v in range(n_years):
            exposure = stats["exposure"][s, v]
            seen = np.flatnonzero(exposure)
            if not seen.size:
                continue
            ages = np.arange(seen[0], seen[-1] + 1)
            e = exposure[ages].astype(float)
            d = stats["defaults"][s, v, ages].astype(float)
            with np.errstate(divide="ignore", invalid="ignore"):
                hazard = np.where(e > 0, d / e, 0.0)
            cumulative = 1.0 - np.cumprod(1.0 - hazard)
            curves.append(pd.DataFrame({
                "segment": name, "vintage": first_year + v, "age": ages, "loans": e.astype(np.int64),
                "defaults": d.astype(np.int64), "hazard": hazard, "cumulative_default_rate": cumulative,
            }))
            summary.append({
                "segment": name, "vintage": first_year + v, "first_age": int(ages[0]), "last_age": int(ages[-1]),
                "loans_at_first_age": int(e[0]), "defaults": int(d.sum()),
                "cumulative_default_rate": float(cumulative[-1]), "seen_from_origination": bool(ages[0] <= 3),
            })
    columns = ["segment", "vintage", "age", "loans", "defaults", "hazard", "cumulative_default_rate"]
    return Vintages(
        curves=pd.concat(curves, ignore_index=True) if curves else pd.DataFrame(columns=columns),
        summary=pd.DataFrame(summary, columns=["segment", "vintage", "first_age", "last_age", "loans_at_first_age",
                                               "defaults", "cumulative_default_rate", "seen_from_origination"]),
    )
