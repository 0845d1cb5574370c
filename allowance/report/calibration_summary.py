"""The headline of a calibration, one row per segment (the command line and the workbook show it)."""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING

import pandas as pd

from allowance.calibrate.assumptions import rolls_file

if TYPE_CHECKING:
    from allowance.calibrate import Calibration

__all__ = ["segment_summary"]


def segment_summary(cal: "Calibration", matrix_name: Callable[[str], str] | None = None) -> pd.DataFrame:
    """One row per segment: the PD source and its headline figures, LGD, CCF, payment rate,
    prepayment, the charge-offs behind the LGD and the window's annualised net loss rate."""
    name_of = matrix_name or rolls_file
    data = cal.assumptions.data["segments"]
    frame = cal.frame
    lgd = cal.results["lgd"].by_segment.set_index("segment")
    loss = cal.results["loss_rates"].averages.set_index("segment")
    rows = []
    for s, name in enumerate(frame.segments):
        values = data.get(name, {})
        source = next((k for k in ("transition_matrix", "pd_12m_by_grade", "pd_curve_by_age", "pd_12m") if k in values),
                      "")
        rows.append({
            "segment": name, "pd_source": source,
            "pd_detail": name_of(name) if source == "transition_matrix" else
            (", ".join(f"{g} {p:.2%}" for g, p in values[source].items()) if source == "pd_12m_by_grade" else
             (f"year 1 {values[source][0]:.2%}, year {len(values[source])} {values[source][-1]:.2%}"
              if source == "pd_curve_by_age" else f"{values.get('pd_12m', float('nan')):.2%}")),
            "charge_off_dpd": int(frame.charge_off_dpd[s]), "lgd": values.get("lgd"),
            "ccf": values.get("ccf"), "payment_rate": values.get("payment_rate"),
            "prepayment": "in the matrix" if source == "transition_matrix" else (
                "cpr_by_age" if "cpr_by_age" in values else ("cpr" if "cpr" in values else
                                                             next((k for k in ("psa",) if k in values), "none"))),
            "charge_offs_in_lgd": int(lgd.loc[name, "charge_offs"]) if name in lgd.index else 0,
            "ncl_rate_annualised_window": float(loss.loc[name, "ncl_rate_annualised"]) if name in loss.index else None,
        })
    return pd.DataFrame(rows)
