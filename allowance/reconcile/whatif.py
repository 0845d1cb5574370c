"""A what-if rerun against its base run: allowance by segment, stage and scenario, and stage changes.

Implements
----------
WhatIf               the comparison (frozen)
what_if_comparison   base against what-if
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance.frameworks import rules_for
from allowance.exceptions import MovementError
from allowance.text import neutralise_text
from allowance.schemas import Framework

__all__ = ["WhatIf", "what_if_comparison"]


@dataclass(frozen=True)
class WhatIf:
    """A what-if rerun against its base run (the same tape).

    summary        long: ``framework, view`` (``total``, ``segment and stage``, ``scenario``),
                   ``segment, stage, scenario, base, what_if, difference``
    stage_changes  the loans whose IFRS 9 stage differs: ``loan_id, segment, base_stage,
                   what_if_stage, base_reason, what_if_reason`` and the IFRS 9 allowance of each
    """

    summary: pd.DataFrame
    stage_changes: pd.DataFrame


def _scenario_columns(frame: pd.DataFrame, framework: Framework) -> list[str]:
    prefix = f"ecl_{framework}_"
    return [c for c in frame.columns if c.startswith(prefix) and c != prefix + "modelled"]


def _classed(loans: pd.DataFrame, staged: bool) -> pd.DataFrame:
    """The loans with ``stage`` as the one vocabulary's class: 1, 2, 3, or "POCI" apart."""
    if not staged or "stage" not in loans.columns:
        return loans
    stage = loans["stage"].astype("Int64").astype(str)
    if "poci" in loans.columns:
        stage = stage.where(~loans["poci"].astype(bool), "POCI")
    return loans.assign(stage=stage)


def what_if_comparison(base: pd.DataFrame, what_if: pd.DataFrame, frameworks: list[Framework]) -> WhatIf:
    """Allowance by segment, stage and scenario, base against what-if, and the loans whose stage moved.

    Sums are of the rounded loan figures (whole cents). A scenario in only one run shows 0
    in the other.

    Examples
    --------
    >>> base = pd.DataFrame({"loan_id": ["a", "b"], "segment": "auto", "stage": [1, 1],
    ...                      "ecl_ifrs9": [1.0, 2.0], "ecl_ifrs9_base": [1.0, 2.0]})
    >>> alt = base.assign(stage=[1, 2], ecl_ifrs9=[1.5, 6.0], ecl_ifrs9_base=[1.5, 6.0])
    >>> w = what_if_comparison(base, alt, ["ifrs9"])
    >>> w.summary.query("view == 'total'")[["base", "what_if", "difference"]].iloc[0].tolist()
    [3.0, 7.5, 4.5]
    >>> w.stage_changes[["loan_id", "base_stage", "what_if_stage"]].values.tolist()
    [['b', 1, 2]]
    """
    b_key = neutralise_text(base["loan_id"].astype(str))
    w_key = neutralise_text(what_if["loan_id"].astype(str))
    if set(b_key) != set(w_key) or b_key.duplicated().any():
        raise MovementError("the what-if run does not cover the same loans as the base run",
                            hint="rerun the what-if on the same tape as the base run")
    rows: list[dict] = []

    def cents(frame: pd.DataFrame, col: str) -> np.ndarray:
        return np.rint(frame[col].to_numpy(dtype=np.float64) * 100).astype(np.int64)

    for f in frameworks:
        col = f"ecl_{f}"
        for name, frame in (("base", base), ("what-if", what_if)):
            if col not in frame.columns:
                raise MovementError(f"the {name} run has no {col} column", column=col,
                                    hint=f"run both with {f} in [run] frameworks")
        rows.append({"framework": f, "view": "total", "segment": "", "stage": "", "scenario": "",
                     "base": int(cents(base, col).sum()), "what_if": int(cents(what_if, col).sum())})
        staged = rules_for(f).staged
        keys = ["segment"] + (["stage"] if staged else [])
        b = _classed(base, staged).assign(_c=cents(base, col)).groupby(keys)["_c"].sum()
        w = _classed(what_if, staged).assign(_c=cents(what_if, col)).groupby(keys)["_c"].sum()
        both = pd.concat({"base": b, "what_if": w}, axis=1).fillna(0).astype(np.int64).reset_index()
        for r in both.itertuples(index=False):
            rows.append({"framework": f, "view": "segment and stage", "segment": r.segment,
                         "stage": r.stage if staged else "", "scenario": "",
                         "base": r.base, "what_if": r.what_if})
        scen_b, scen_w = _scenario_columns(base, f), _scenario_columns(what_if, f)
        for sc in dict.fromkeys(scen_b + scen_w):
            rows.append({"framework": f, "view": "scenario", "segment": "", "stage": "",
                         "scenario": sc[len(f"ecl_{f}_"):],
                         "base": int(cents(base, sc).sum()) if sc in base.columns else 0,
                         "what_if": int(cents(what_if, sc).sum()) if sc in what_if.columns else 0})
    summary = pd.DataFrame(rows, columns=["framework", "view", "segment", "stage", "scenario", "base", "what_if"])
    summary["difference"] = summary["what_if"] - summary["base"]
    for money in ("base", "what_if", "difference"):
        summary[money] = summary[money].astype(np.int64) / 100.0

    cols = ["loan_id", "segment", "base_stage", "what_if_stage", "base_reason", "what_if_reason",
            "base_ecl_ifrs9", "what_if_ecl_ifrs9", "difference"]
    if "stage" not in base.columns or "stage" not in what_if.columns:
        return WhatIf(summary=summary, stage_changes=pd.DataFrame(columns=cols))
    left = pd.DataFrame({"key": b_key.to_numpy(dtype=object), "loan_id": base["loan_id"].to_numpy(dtype=object),
                         "segment": base["segment"].to_numpy(dtype=object),
                         "base_stage": base["stage"].to_numpy(),
                         "base_reason": base.get("stage_reason", pd.Series("", index=base.index)).to_numpy(dtype=object),
                         "base_ecl_ifrs9": base.get("ecl_ifrs9", pd.Series(np.nan, index=base.index)).to_numpy()})
    right = pd.DataFrame({"key": w_key.to_numpy(dtype=object), "what_if_stage": what_if["stage"].to_numpy(),
                          "what_if_reason": what_if.get("stage_reason", pd.Series("", index=what_if.index)).to_numpy(dtype=object),
                          "what_if_ecl_ifrs9": what_if.get("ecl_ifrs9", pd.Series(np.nan, index=what_if.index)).to_numpy()})
    joined = left.merge(right, on="key", how="inner")
    changed = joined[joined["base_stage"] != joined["what_if_stage"]].copy()
    changed["difference"] = (np.rint(changed["what_if_ecl_ifrs9"] * 100) - np.rint(changed["base_ecl_ifrs9"] * 100)) / 100
    return WhatIf(summary=summary, stage_changes=changed[cols].reset_index(drop=True))
