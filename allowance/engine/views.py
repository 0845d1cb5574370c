"""What a run shows people beside the loan results: scenario totals, the term structures
used, roll-rate analytics and sample loan schedules.
"""

from __future__ import annotations


import numpy as np
import pandas as pd

from allowance import cashflows, curves
from allowance.engine.chunk import loan_terms
from allowance.engine.tables import Prepared
from allowance.schemas import Framework, RunConfig


def _scenario_summary(loans: pd.DataFrame, prep: Prepared) -> pd.DataFrame:
    rows = []
    for fw in prep.frameworks:
        for s, name in enumerate(prep.scenario_names):
            rows.append({"framework": fw, "scenario": name, "weight": float(prep.weights[s]),
                         "ecl": round(float(loans[f"ecl_{fw}_{name}"].sum()), 2)})
        rows.append({"framework": fw, "scenario": "weighted (modelled)", "weight": float(prep.weights.sum()),
                     "ecl": round(float(loans[f"ecl_{fw}_modelled"].sum()), 2)})
        rows.append({"framework": fw, "scenario": "final (after overlays)", "weight": np.nan,
                     "ecl": round(float(loans[f"ecl_{fw}"].sum()), 2)})
    return pd.DataFrame(rows)


def _term_structure_table(prep: Prepared) -> pd.DataFrame:
    frames = []
    months = np.arange(1, prep.months + 1)
    for f, fw in enumerate(prep.frameworks):
        for name, ts in prep.structures.items():
            off = prep.key_offset[name]
            for k, key in enumerate(ts.keys):
                marg = prep.pd[f, off + k].T  # [S, T]
                smm = ts.smm[k] if ts.smm is not None else None
                cum = curves.cumulative_pd(marg, smm)
                for s, scen in enumerate(prep.scenario_names):
                    frames.append(pd.DataFrame({
                        "segment": name, "key": key, "framework": fw, "scenario": scen,
                        "month": months, "marginal_pd": marg[s], "cumulative_pd": cum[s],
                    }))
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()


def roll_rate_table(config: RunConfig) -> pd.DataFrame:
    """Roll-rate analytics of every segment whose PD comes from a transition matrix."""
    frames = [
        curves.roll_rate_summary(name, seg.transition_matrix, seg.charge_off_dpd)
        for name, seg in config.assumptions.segments.items()
        if seg.pd_source == "transition_matrix"
    ]
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()


def _schedule_sample(tape: pd.DataFrame, loans: pd.DataFrame, prep: Prepared, per_segment: int) -> pd.DataFrame:
    """A few performing loans per segment, scheduled month by month (first scenario's PDs)."""
    if per_segment <= 0 or tape.empty:
        return pd.DataFrame()
    frames = []
    performing = loans["stage"].to_numpy() == 1 if "stage" in loans else np.ones(len(loans), bool)
    for name in prep.structures:
        picks = np.nonzero((tape["segment"].to_numpy() == name) & performing)[0][:per_segment]
        for i in picks:
            frames.append(loan_schedule(tape.iloc[[i]], prep))
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()


def loan_schedule(row: pd.DataFrame, prep: Prepared, framework: Framework | None = None, scenario: int = 0) -> pd.DataFrame:
    """One loan's schedule (contractual and expected) on the engine's own terms and curves."""
    fw = framework or prep.frameworks[0]
    f = prep.frameworks.index(fw)
    seg = prep.config.assumptions.segments[row["segment"].iloc[0]]
    t = loan_terms(row, prep)
    months = int(t.remaining[0])
    cols = np.minimum(t.prepay_offset[0] + np.arange(months), prep.smm.shape[1] - 1)
    repayment = t.repayment[0]
    paydown = (seg.payment_rate or 0.0) if (repayment == "revolving" and fw == "cecl") else 0.0
    frame = cashflows.schedule(
        repayment, float(t.balance[0]), float(row["interest_rate"].iloc[0]), months,
        interest_only_months_left=int(t.io_left[0]), residual=float(t.residual[0]),
        payment=float(t.payment[0]), paydown=paydown, smm=prep.smm[t.prepay[0], cols],
        marginal_pd=prep.pd[f, t.curve[0], :months, scenario],
    )
    frame.insert(0, "scenario", prep.scenario_names[scenario])
    frame.insert(0, "framework", fw)
    frame.insert(0, "loan_id", row["loan_id"].iloc[0])
    return frame
