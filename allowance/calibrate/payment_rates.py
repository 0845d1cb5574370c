r"""Monthly payment rates: the share of the balance at the start of a month repaid during it.

The history records balances, not payments, so the payment is inferred from the balance
movement of each loan on the book at the start of month m (and not charged off in it):

.. math::

    P_m = \max\bigl(0,\ B_{m-1} (1 + r / 12) - B_m\bigr), \qquad
    \text{payment rate} = \frac{\sum P_m}{\sum B_{m-1}},

with r the contract rate (0 where the history has none) and :math:`B_m = 0` for a loan repaid
in month m. New purchases on a revolving line in the same month offset its payments, so this
is a lower bound on the gross payment rate (it needs purchase data to do better); a lower
payment rate runs a CECL revolving balance off more slowly, so the bound errs on the side of a
larger allowance (common practice where only balances are recorded, no source). Pooled over
the window; the engine's ``payment_rate`` for revolving segments.

Implements
----------
collect   payments and opening balances by segment and month
estimate  the pooled rate by segment and the monthly series
PaymentRates the tables
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance.calibrate.frame import Frame, MonthView, month_label
from allowance.calibrate.states import CHARGE_OFF


def collect(view: MonthView) -> dict[str, np.ndarray]:
    frame = view.frame
    ends = np.flatnonzero(view.transition & (view.state != CHARGE_OFF))
    starts = view.before[ends]
    part = view.part
    rate = part.get("interest_rate")
    monthly = np.nan_to_num(rate[starts].astype(np.float64)) / 12.0 if rate is not None else 0.0
    opening = part.balance[starts]
    paid = np.maximum(0.0, opening * (1.0 + monthly) - part.balance[ends])
    shape = (len(frame.segments), frame.months)
    flat = np.ravel_multi_index((part.segment[ends].astype(np.int64), view.t[ends]), shape)
    size = shape[0] * shape[1]
    return {
        "paid": np.bincount(flat, weights=paid, minlength=size).reshape(shape),
        "opening": np.bincount(flat, weights=opening, minlength=size).reshape(shape),
    }


@dataclass(frozen=True)
class PaymentRates:
    """Payment rate by segment over the window (``by_segment``) and by month (``series``)."""

    by_segment: pd.DataFrame
    series: pd.DataFrame
    payment_rate: dict[str, float]


def estimate(stats: dict[str, np.ndarray], frame: Frame) -> PaymentRates:
    lo = frame.window_start - frame.first_month
    paid = stats["paid"][:, lo:].sum(axis=1)
    opening = stats["opening"][:, lo:].sum(axis=1)
    rates = {name: float(paid[s] / opening[s]) if opening[s] > 0 else np.nan for s, name in enumerate(frame.segments)}
    by_segment = pd.DataFrame({"segment": list(frame.segments), "opening_balance": opening, "paid": paid,
                               "payment_rate": [rates[n] for n in frame.segments]})
    rows = []
    for s, name in enumerate(frame.segments):
        for t in range(1, frame.months):
            base = stats["opening"][s, t]
            if base > 0:
                rows.append({"segment": name, "month": month_label(frame.first_month + t),
                             "payment_rate": stats["paid"][s, t] / base})
    return PaymentRates(by_segment=by_segment, series=pd.DataFrame(rows), payment_rate=rates)
