r"""Monthly gross and net credit-loss rates by segment.

For segment s and month m (common practice, no source):

.. math::

    GCL_m = \text{charge-offs}_m + \text{bankruptcy losses}_m, \qquad
    NCL_m = GCL_m - \text{recoveries}_m - \text{asset sales}_m,

    gcl\_rate_m = GCL_m / B_{m-1}, \qquad ncl\_rate_m = NCL_m / B_{m-1},

with :math:`B_{m-1}` the segment's total balance at the previous month end (the opening
balance). The annualised rates are 12 times the monthly ones (the usual annualisation of a
monthly charge-off rate). The window's average rate is the ratio of the sums,
:math:`\sum GCL / \sum B_{m-1}` (a balance-weighted average of the monthly rates).

Implements
----------
collect    balances and money movements by segment and month
estimate   the loss-rate table (``loss_rates.csv``) and the window averages
LossRates  the table and the averages
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance.calibrate.frame import Frame, MonthView, month_label

AMOUNTS = ("charge_offs", "bankruptcy_losses", "recoveries", "asset_sales")
#: The columns of ``loss_rates.csv``, in order.
COLUMNS = (
    "segment", "month", "opening_balance", "charge_offs", "bankruptcy_losses", "gross_credit_loss",
    "recoveries", "asset_sales", "net_credit_loss", "gcl_rate", "gcl_rate_annualised", "ncl_rate",
    "ncl_rate_annualised",
)
_EVENT = {"charge_offs": "charge_off", "bankruptcy_losses": "bankruptcy_loss", "recoveries": "recoveries",
          "asset_sales": "asset_sales"}


def collect(view: MonthView) -> dict[str, np.ndarray]:
    """Month-end balances, loans on the book and money movements, ``[segment, month]``."""
    frame = view.frame
    shape = (len(frame.segments), frame.months)
    size = shape[0] * shape[1]
    flat = view.segment.astype(np.int64) * frame.months + view.t
    out = {
        "balance": np.bincount(flat, weights=view.part.balance, minlength=size).reshape(shape),
        "loans": np.bincount(flat[view.active], minlength=size).reshape(shape),
    }
    events = view.part.events
    where = events["segment"].astype(np.int64) * frame.months + (events["month"].astype(np.int64) - frame.first_month)
    for name, column in _EVENT.items():
        out[name] = np.bincount(where, weights=events[column], minlength=size).reshape(shape)
    return out


@dataclass(frozen=True)
class LossRates:
    """The monthly loss-rate table and, per segment, the window's average rates."""

    table: pd.DataFrame
    averages: pd.DataFrame
    window: tuple[str, str]


def estimate(stats: dict[str, np.ndarray], frame: Frame) -> LossRates:
    """The loss-rate table: one row per segment and month from the history's second month."""
    parts = []
    for s, name in enumerate(frame.segments):
        opening = stats["balance"][s, :-1]
        amounts = {k: stats[k][s, 1:] for k in AMOUNTS}
        gcl = amounts["charge_offs"] + amounts["bankruptcy_losses"]
        ncl = gcl - amounts["recoveries"] - amounts["asset_sales"]
        with np.errstate(divide="ignore", invalid="ignore"):
            gcl_rate = np.where(opening > 0, gcl / opening, np.nan)
            ncl_rate = np.where(opening > 0, ncl / opening, np.nan)
        parts.append(pd.DataFrame({
            "segment": name,
            "month": [month_label(frame.first_month + t) for t in range(1, frame.months)],
            "opening_balance": opening, **amounts, "gross_credit_loss": gcl, "net_credit_loss": ncl,
            "gcl_rate": gcl_rate, "gcl_rate_annualised": 12 * gcl_rate,
            "ncl_rate": ncl_rate, "ncl_rate_annualised": 12 * ncl_rate,
        }))
    table = pd.concat(parts, ignore_index=True)[list(COLUMNS)] if parts else pd.DataFrame(columns=COLUMNS)
    start, end = frame.window
    inside = table[(table["month"] >= start) & (table["month"] <= end)]
    sums = inside.groupby("segment", sort=False)[["opening_balance", "gross_credit_loss", "net_credit_loss"]].sum()
    averages = pd.DataFrame({
        "segment": sums.index,
        "months": inside.groupby("segment", sort=False).size().to_numpy(),
        "opening_balance": sums["opening_balance"].to_numpy(),
        "gross_credit_loss": sums["gross_credit_loss"].to_numpy(),
        "net_credit_loss": sums["net_credit_loss"].to_numpy(),
    })
    with np.errstate(divide="ignore", invalid="ignore"):
        averages["gcl_rate"] = averages["gross_credit_loss"] / averages["opening_balance"]
        averages["ncl_rate"] = averages["net_credit_loss"] / averages["opening_balance"]
    averages["gcl_rate_annualised"] = 12 * averages["gcl_rate"]
    averages["ncl_rate_annualised"] = 12 * averages["ncl_rate"]
    return LossRates(table=table, averages=averages, window=frame.window)
