r"""Credit conversion factor of revolving lines: how much of the undrawn limit was drawn before default.

For each revolving line charged off in month :math:`m_0` and on the book H months earlier
(H = ``ccf_horizon_months``, the fixed-horizon approach), with drawn balance :math:`D_r` and
limit :math:`L_r` at the reference month :math:`r = m_0 - H` and exposure at charge-off
:math:`EAD` (the balance at the month end before :math:`m_0`),

.. math::

    CCF = \frac{\sum_i (EAD_i - D_{r,i})}{\sum_i (L_{r,i} - D_{r,i})}

over the lines with undrawn limit at the reference month (a ratio of sums: exposure-weighted),
bounded to [0, 1] for the assumptions: the engine's ``ccf``, the share of the undrawn limit
drawn by default (IFRS 9 B5.5.31; common practice, no source for the estimator).

Implements
----------
collect   per segment: lines, undrawn at reference and drawn since, over all charge-offs to the as-of month
estimate  the CCF by segment
Ccf       the table
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance.calibrate.frame import Frame, MonthView
from allowance.calibrate.states import CHARGE_OFF
from allowance.intake.panel import sort_key


def collect(view: MonthView) -> dict[str, np.ndarray]:
    frame = view.frame
    n_seg = len(frame.segments)
    out = {name: np.zeros(n_seg) for name in ("lines", "undrawn", "drawn_since", "no_reference", "fully_drawn",
                                              "ead", "limit")}
    limit = view.part.get("credit_limit")
    if limit is None:
        return out
    part = view.part
    # the exit row of each charged-off loan, and its exposure (the row before)
    exits = np.flatnonzero((view.state == CHARGE_OFF) & view.follows)
    seg = part.segment[exits].astype(np.int64)
    revolving = frame.revolving[seg]
    exits, seg = exits[revolving], seg[revolving]
    ead = part.balance[exits - 1]
    key = sort_key(part.loan, part.month)
    want = sort_key(part.loan[exits], part.month[exits].astype(np.int64) - frame.settings.ccf_horizon_months)
    at = np.searchsorted(key, want)
    found = (at < len(key)) & (key[np.minimum(at, len(key) - 1)] == want)
    np.add.at(out["no_reference"], seg[~found], 1.0)
    exits, seg, ead, at = exits[found], seg[found], ead[found], at[found]
    drawn, cap = part.balance[at], limit[at]
    undrawn = np.nan_to_num(cap - drawn)
    room = undrawn > 0
    np.add.at(out["fully_drawn"], seg[~room], 1.0)
    for name, values in (("lines", np.ones(room.sum())), ("undrawn", undrawn[room]),
                         ("drawn_since", (ead - drawn)[room]), ("ead", ead[room]), ("limit", cap[room])):
        np.add.at(out[name], seg[room], values)
    return out


@dataclass(frozen=True)
class Ccf:
    """CCF by revolving segment: ``segment, lines, undrawn_at_reference, drawn_since, ccf``, the
    lines without a row at the reference month and those fully drawn then."""

    by_segment: pd.DataFrame
    ccf: dict[str, float]


def estimate(stats: dict[str, np.ndarray], frame: Frame) -> Ccf:
    rows, ccf = [], {}
    for s, name in enumerate(frame.segments):
        if not frame.revolving[s]:
            continue
        undrawn, drawn = stats["undrawn"][s], stats["drawn_since"][s]
        value = float(np.clip(drawn / undrawn, 0.0, 1.0)) if undrawn > 0 else np.nan
        ccf[name] = value
        rows.append({"segment": name, "lines": int(stats["lines"][s]), "undrawn_at_reference": undrawn,
                     "drawn_since": drawn, "ccf_unbounded": drawn / undrawn if undrawn > 0 else np.nan, "ccf": value,
                     "no_reference_row": int(stats["no_reference"][s]), "fully_drawn_at_reference": int(stats["fully_drawn"][s]),
                     "horizon_months": frame.settings.ccf_horizon_months})
    return Ccf(by_segment=pd.DataFrame(rows), ccf=ccf)
