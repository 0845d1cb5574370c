r"""The inputs of the loss-rate methods, from the history: a closed pool's lifetime loss rate and
vintage loss curves by loan age (the annual rate of the remaining-life method is the window's
annualised net credit-loss rate of :mod:`allowance.calibrate.loss_rates`).

Net credit loss (NCL) = charge-offs + bankruptcy losses − recoveries − asset sales, as in
:mod:`~allowance.calibrate.loss_rates`.

**Pool (closed-pool) lifetime loss rate** [1]_. The pool is every loan on the book at the
end of the history's first month (not charged off, not paid off); it is followed to the
as-of month:

.. math:: L = \frac{\sum NCL \text{ of the pool's loans after its first month}}
                   {\text{the pool's balance at the end of its first month}}.

The pool's balance left at the as-of month over its starting balance (``run_off``) says how
far the pool has run off: the rate is a lifetime rate only for a pool that has (about) run
off; for one that has not, it understates the lifetime loss (the evidence shows it).

**Vintage loss curve** [2]_. Loans seen from origination (their first row at most
:data:`FIRST_AGE_SEEN` months after it) are followed by month of life a. With :math:`O_i`
the original balance of loan i and :math:`A_i` = as-of month − its origination month (the
last age the history can show), the marginal loss rate at age a pools every vintage that
has reached it:

.. math::

    m(a) = \frac{\sum_i NCL_i(a)}{\sum_{i:\,A_i \ge a} O_i}, \qquad
    C(a) = \sum_{k \le a} m(k),

loans that paid off or defaulted staying in the denominator (a loss rate on original
balance). The curve written is :math:`C` at ages 12, 24, ... months, up to the last year
that at least ``min_vintage_loans`` loans have reached; it is made non-decreasing (a year in
which recoveries exceed write-offs adds nothing) and flat after, as the vintage method reads
it (:func:`allowance.loss_rates.vintage_curve_by_month`).

Implements
----------
collect      the pool's balance and losses; original balance and losses by segment and age
estimate     LossMethods: the pool table, the vintage loss table and each segment's curve
method_table the three methods' inputs side by side, per segment (the evidence)

References
----------
.. [1] FASB ASC 326-20-55-18 to 55-22 (Example 1, historical loss information and a
   loss-rate method); the closed-pool lifetime rate is common practice (no source).
.. [2] FASB ASC 326-20-55-23 to 55-27 (Example 2, vintage loss rates).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance.calibrate.frame import Frame, MonthView, month_label

#: Ages of life tracked (months); older ages are pooled in the last.
MAX_AGE_MONTHS = 360
#: A loan whose first row is at most this many months after origination is seen from origination.
FIRST_AGE_SEEN = 3
_NCL = (("charge_off", 1.0), ("bankruptcy_loss", 1.0), ("recoveries", -1.0), ("asset_sales", -1.0))


def _event_ncl(events: dict[str, np.ndarray]) -> np.ndarray:
    return sum(sign * events[name] for name, sign in _NCL)


def collect(view: MonthView) -> dict[str, np.ndarray]:
    """Pool balances and losses ``[segment]``; original balance and losses ``[segment, age]``."""
    frame = view.frame
    part = view.part
    n_seg = len(frame.segments)
    group = np.cumsum(view.new_loan) - 1  # loan of each row within the partition
    n_loans = int(group[-1]) + 1 if part.rows else 0
    segment = part.segment.astype(np.int64)
    events = part.events
    event_group = group[part.event_rows()] if len(events["loan"]) else np.zeros(0, np.int64)
    ncl = _event_ncl(events)
    event_month = events["month"].astype(np.int64)
    # the pool: on the book at the end of the history's first month
    start = (part.month == frame.first_month) & view.active
    in_pool = np.zeros(n_loans, bool)
    in_pool[group[start]] = True
    last = (part.month == frame.as_of) & view.active & in_pool[group]
    after = in_pool[event_group] & (event_month > frame.first_month)
    out = {
        "pool_loans": np.bincount(segment[start], minlength=n_seg),
        "pool_balance": np.bincount(segment[start], weights=part.balance[start], minlength=n_seg),
        "pool_left": np.bincount(segment[last], weights=part.balance[last], minlength=n_seg),
        "pool_ncl": np.bincount(events["segment"][after].astype(np.int64), weights=ncl[after], minlength=n_seg),
    }
    shape = (n_seg, MAX_AGE_MONTHS + 1)
    zeros = np.zeros(shape)
    origination, original = part.get("origination"), part.get("original_balance")
    if origination is None or original is None or not part.rows:
        return {**out, "reached_balance": zeros, "reached_loans": zeros, "age_ncl": zeros.copy()}
    first = np.flatnonzero(view.new_loan)
    age0 = view.age[first]
    o = original[first]
    seen = (age0 >= 0) & (age0 <= FIRST_AGE_SEEN) & np.isfinite(o) & (o > 0)
    seen_loan = np.zeros(n_loans, bool)
    seen_loan[np.flatnonzero(seen)] = True
    reach = np.clip(frame.as_of - origination[first].astype(np.int64), 0, MAX_AGE_MONTHS)
    flat = segment[first][seen] * shape[1] + reach[seen]
    size = shape[0] * shape[1]
    out["reached_balance"] = np.bincount(flat, weights=o[seen], minlength=size).reshape(shape)
    out["reached_loans"] = np.bincount(flat, minlength=size).reshape(shape).astype(float)
    keep = seen_loan[event_group]
    age = np.clip(event_month[keep] - origination[first][event_group[keep]].astype(np.int64), 0, MAX_AGE_MONTHS)
    flat = events["segment"][keep].astype(np.int64) * shape[1] + age
    out["age_ncl"] = np.bincount(flat, weights=ncl[keep], minlength=size).reshape(shape)
    return out


@dataclass(frozen=True)
class LossMethods:
    """The pool and vintage loss-rate estimates.

    pool     segment, start_month, loans, start_balance, net_credit_loss, lifetime_loss_rate,
             balance_left, run_off (balance left / start balance)
    vintage  segment, age (months), loans_reached, original_balance_reached, net_credit_loss,
             marginal_loss_rate, cumulative_loss_rate
    curves   segment -> the cumulative loss rate at ages 12, 24, ... (empty: no year reached)
    """

    pool: pd.DataFrame
    vintage: pd.DataFrame
    curves: dict[str, list[float]]


def estimate(stats: dict[str, np.ndarray], frame: Frame) -> LossMethods:
    with np.errstate(divide="ignore", invalid="ignore"):
        rate = np.where(stats["pool_balance"] > 0, stats["pool_ncl"] / stats["pool_balance"], np.nan)
        run_off = np.where(stats["pool_balance"] > 0, stats["pool_left"] / stats["pool_balance"], np.nan)
    pool = pd.DataFrame({
        "segment": list(frame.segments), "start_month": month_label(frame.first_month),
        "loans": stats["pool_loans"].astype(np.int64), "start_balance": stats["pool_balance"],
        "net_credit_loss": stats["pool_ncl"], "lifetime_loss_rate": rate, "balance_left": stats["pool_left"],
        "run_off": run_off,
    })
    parts, curves = [], {}
    need = frame.settings.min_vintage_loans
    for s, name in enumerate(frame.segments):
        # loans and balance that reached age a: those whose last observable age is >= a
        balance = np.cumsum(stats["reached_balance"][s, ::-1])[::-1]
        loans = np.cumsum(stats["reached_loans"][s, ::-1])[::-1]
        ages = np.arange(1, MAX_AGE_MONTHS + 1)
        ncl = stats["age_ncl"][s, 1:]
        with np.errstate(divide="ignore", invalid="ignore"):
            marginal = np.where(balance[1:] > 0, ncl / balance[1:], 0.0)
        cumulative = np.cumsum(marginal)
        reached = loans[1:]
        years = [k for k in range(1, MAX_AGE_MONTHS // 12 + 1) if reached[12 * k - 1] >= need]
        if years:
            last = max(years)  # ages beyond are too thin; the curve is flat after
            points = np.maximum.accumulate(cumulative[11:12 * last:12])
            curves[name] = [float(v) for v in np.clip(points, 0.0, 1.0)]
        else:
            curves[name] = []
        seen = reached > 0
        parts.append(pd.DataFrame({
            "segment": name, "age": ages[seen], "loans_reached": reached[seen].astype(np.int64),
            "original_balance_reached": balance[1:][seen], "net_credit_loss": ncl[seen],
            "marginal_loss_rate": marginal[seen], "cumulative_loss_rate": cumulative[seen],
        }))
    columns = ["segment", "age", "loans_reached", "original_balance_reached", "net_credit_loss",
               "marginal_loss_rate", "cumulative_loss_rate"]
    vintage = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=columns)
    return LossMethods(pool=pool, vintage=vintage, curves=curves)


def method_table(results: dict, frame: Frame) -> pd.DataFrame:
    """Per segment, the input of each loss-rate method as the calibration estimates it.

    Columns: ``segment, annual_loss_rate`` (window's annualised NCL rate), ``lifetime_loss_rate``
    (closed pool), ``pool_run_off``, ``vintage_loss_curve`` (text, by year of age),
    ``vintage_years``, ``method_written`` (the loss-rate method written to the assumptions, or
    blank: the segment keeps its PD source).
    """
    averages = results["loss_rates"].averages.set_index("segment")
    found = results["loss_methods"]
    pool = found.pool.set_index("segment")
    chosen = frame.settings.loss_rate_method
    rows = []
    for name in frame.segments:
        curve = found.curves.get(name, [])
        rows.append({
            "segment": name,
            "annual_loss_rate": float(averages.loc[name, "ncl_rate_annualised"]) if name in averages.index else np.nan,
            "lifetime_loss_rate": float(pool.loc[name, "lifetime_loss_rate"]),
            "pool_run_off": float(pool.loc[name, "run_off"]),
            "vintage_loss_curve": ", ".join(f"{100 * c:.3f} %" for c in curve),
            "vintage_years": len(curve),
            "method_written": chosen.get(name, ""),
        })
    return pd.DataFrame(rows)


__all__ = ["LossMethods", "collect", "estimate", "method_table"]
