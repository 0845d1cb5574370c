r"""What happened to a run's loans after its as-of date, from the performance history.

For each loan, over the months whose month end falls in
:math:`(\text{as-of},\ \text{as-of} + w]` (w = 12 months by default):

- **default**: the loan met the PD's default event in some month of the window: days past due
  at or beyond the segment's threshold, or an amount charged off or written off on a
  bankruptcy that month (a write-off is a default under every definition);
- **losses**: gross credit loss = charge-offs + bankruptcy losses; net credit loss = gross −
  recoveries − asset sales, summed over the window (the performance-history contract of
  DESIGN.md; common practice, no source).

Implements
----------
WINDOW_COLUMNS     the history columns the back-test reads
window_months      the month ends of the window after an as-of date
realised_outcomes  per loan: observed, defaulted, month of default, losses, paid off
"""

from __future__ import annotations

from datetime import date
from collections.abc import Mapping

import numpy as np
import pandas as pd

#: The history columns read (DESIGN.md, the performance history); blank money is 0.
WINDOW_COLUMNS = ("loan_id", "segment", "month", "balance", "days_past_due", "charge_off", "bankruptcy_loss",
                  "recoveries", "asset_sales", "paid_off")
_MONEY = ("charge_off", "bankruptcy_loss", "recoveries", "asset_sales")


def window_months(as_of: date, months: int = 12) -> pd.DatetimeIndex:
    """Month ends of the ``months`` months after the as-of date's month.

    Examples
    --------
    >>> [d.strftime("%Y-%m-%d") for d in window_months(date(2025, 9, 30), 3)]
    ['2025-10-31', '2025-11-30', '2025-12-31']
    """
    first = pd.Timestamp(as_of).to_period("M") + 1
    return pd.period_range(first, periods=months, freq="M").to_timestamp(how="end").normalize()


def realised_outcomes(history: pd.DataFrame, as_of: date, event_dpd: Mapping[str, int] | int,
                      months: int = 12) -> pd.DataFrame:
    """Per loan, what happened in the window after ``as_of``.

    Parameters
    ----------
    history : DataFrame
        Rows of the performance history (:data:`WINDOW_COLUMNS`; ``month`` any date in the
        month). Rows outside the window are ignored.
    as_of : date
        The run's as-of date.
    event_dpd : int or mapping segment -> int
        Days past due at which a loan counts as defaulted (per segment, from the run's
        assumptions: the default threshold, or the charge-off policy for roll-rate segments).
        A segment not in the mapping raises.
    months : int
        Length of the window (12 for a 12-month PD).

    Returns
    -------
    DataFrame
        One row per loan seen in the window: ``loan_id, segment`` (of its first month in the
        window), ``months_observed, defaulted, default_month, paid_off, charge_offs,
        bankruptcy_losses, gross_credit_loss, recoveries, asset_sales, net_credit_loss``.

    Examples
    --------
    >>> h = pd.DataFrame({"loan_id": ["a", "a", "b", "b"], "segment": "auto",
    ...     "month": pd.to_datetime(["2025-10-31", "2025-11-30", "2025-10-31", "2025-11-30"]),
    ...     "balance": [900.0, 0.0, 500.0, 480.0], "days_past_due": [95, 125, 0, 0],
    ...     "charge_off": [0.0, 880.0, 0.0, 0.0], "bankruptcy_loss": 0.0,
    ...     "recoveries": [0.0, 30.0, 0.0, 0.0], "asset_sales": 0.0, "paid_off": False})
    >>> out = realised_outcomes(h, date(2025, 9, 30), {"auto": 90}, months=2)
    >>> out[["loan_id", "defaulted", "default_month", "net_credit_loss"]]
      loan_id  defaulted default_month  net_credit_loss
    0       a       True    2025-10-31            850.0
    1       b      False           NaT              0.0
    """
    ends = window_months(as_of, months)
    month = pd.to_datetime(history["month"]).dt.to_period("M").dt.to_timestamp(how="end").dt.normalize()
    inside = month.between(ends[0], ends[-1]).to_numpy()
    rows = history.loc[inside].copy()
    rows["month"] = month[inside].to_numpy()
    for name in _MONEY:
        rows[name] = pd.to_numeric(rows[name], errors="raise").fillna(0.0) if name in rows else 0.0
    rows["paid_off"] = rows["paid_off"].fillna(False).astype(bool) if "paid_off" in rows else False
    segment = rows["segment"].astype(str).to_numpy()
    if isinstance(event_dpd, Mapping):
        known = np.array([s in event_dpd for s in pd.unique(segment)])
        if not known.all():
            missing = pd.unique(segment)[~known][0]
            raise KeyError(f"no default threshold for segment {missing!r}")
        codes, names = pd.factorize(segment)
        threshold = np.array([event_dpd[n] for n in names] + [0], dtype=np.int64)[codes]
    else:
        threshold = np.full(len(rows), int(event_dpd))
    written_off = (rows["charge_off"].to_numpy() > 0) | (rows["bankruptcy_loss"].to_numpy() > 0)
    rows["event"] = (rows["days_past_due"].to_numpy() >= threshold) | written_off
    rows["event_month"] = rows["month"].where(rows["event"])
    rows = rows.sort_values(["loan_id", "month"], kind="stable")
    grouped = rows.groupby("loan_id", sort=True)
    out = pd.DataFrame({
        "segment": grouped["segment"].first(),
        "months_observed": grouped["month"].nunique(),
        "defaulted": grouped["event"].any(),
        "default_month": grouped["event_month"].min(),
        "paid_off": grouped["paid_off"].any(),
        "charge_offs": grouped["charge_off"].sum(),
        "bankruptcy_losses": grouped["bankruptcy_loss"].sum(),
        "recoveries": grouped["recoveries"].sum(),
        "asset_sales": grouped["asset_sales"].sum(),
    })
    out.insert(7, "gross_credit_loss", out["charge_offs"] + out["bankruptcy_losses"])
    out["net_credit_loss"] = out["gross_credit_loss"] - out["recoveries"] - out["asset_sales"]
    return out.reset_index()
