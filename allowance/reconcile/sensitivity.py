"""Scenario sensitivities: the allowance with each scenario at 100 % weight, restaged under it.

The probability-weighted allowance (IFRS 9 5.5.17(a), B5.5.42; ASC 326-20-30-9) hides how
far apart the scenarios are. A sensitivity reruns the book with one scenario alone at
weight 1: every figure that depends on the weights moves with it, the IFRS 9 stages
included where they depend on the scenarios, and percentage overlays scale with the
modelled figure. (The PD-ratio test compares each loan's own PD now with its PD at
origination, both from the tape, so a scenario alone moves no loan on that test.) This differs from the per-scenario columns of ``loans.csv``, which keep the stages
of the weighted run.

A run computes them without a rerun: the weights apply to each scenario's losses, never to
the PDs, stages or horizons (IFRS 9 5.5.17(a), B5.5.42; ASC 326-20-30-9), so the engine
weights its one pass's per-scenario losses again with weights 1 and 0, which give a rerun's
figures to the cent (:func:`allowance.engine.run`'s ``alone``). :func:`single_scenario` is
the rerun's configuration, the reference the tests hold it to.

Implements
----------
single_scenario     the run configuration with one scenario alone at weight 1
sensitivity_table   weighted run and single-scenario runs side by side
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

from allowance.frameworks import rules_for
from allowance.schemas import RunConfig

__all__ = ["SENSITIVITY_COLUMNS", "sensitivity_table", "single_scenario"]

SENSITIVITY_COLUMNS = [
    "framework", "scenario", "weight", "allowance_modelled", "overlays", "allowance",
    "difference_from_weighted", "difference_pct", "stage_1", "stage_2", "stage_3", "poci",
    "loans_stage_2", "loans_stage_3",
]


def _example_config(frameworks=("ifrs9", "cecl")) -> RunConfig:
    """A small configuration for the examples (invented figures)."""
    from allowance.schemas import Assumptions

    return RunConfig(assumptions=Assumptions.model_validate({
        "run": {"as_of": "2026-09-30", "frameworks": list(frameworks)},
        "segments": {"auto": {"pd_12m": 0.02, "lgd": 0.4}},
        "ifrs9": {"sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month"},
        "cecl": {"reasonable_supportable_months": 24},
        "scenarios": {"base": {"weight": 0.6}, "down": {"weight": 0.4, "pd_multiplier": [2.0]}},
    }))


def single_scenario(config: RunConfig, name: str) -> RunConfig:
    """``config`` with scenario ``name`` alone, at weight 1 (its paths unchanged).

    Examples
    --------
    >>> alone = single_scenario(_example_config(), "down")
    >>> {n: s.weight for n, s in alone.assumptions.scenarios.items()}
    {'down': 1.0}
    """
    a = config.assumptions
    if name not in a.scenarios:
        raise KeyError(f"no scenario {name!r}")
    scenario = a.scenarios[name].model_copy(update={"weight": 1.0})
    return config.model_copy(update={"assumptions": a.model_copy(update={"scenarios": {name: scenario}})})


def _cents(frame: pd.DataFrame, column: str, rows: np.ndarray | None = None) -> int:
    """The column's cents summed (over ``rows``, a mask, where given): the column alone is
    read, never the frame's other columns (a frame of a million loans sliced by stage copied
    them all)."""
    if column not in frame.columns:
        return 0
    values = frame[column].to_numpy(dtype=np.float64)
    return int(np.rint((values if rows is None else values[rows]) * 100).astype(np.int64).sum())


def _row(frame: pd.DataFrame, framework: str, scenario: str, weight: float) -> dict:
    row = {"framework": framework, "scenario": scenario, "weight": weight,
           "allowance_modelled": _cents(frame, f"ecl_{framework}_modelled"),
           "overlays": _cents(frame, f"overlay_{framework}"),
           "allowance": _cents(frame, f"ecl_{framework}")}
    staged = rules_for(framework).staged and "stage" in frame.columns
    # the one stage vocabulary: POCI loans are their own class, not in stage 2 or 3
    poci = frame["poci"].astype(bool).to_numpy() if staged and "poci" in frame.columns else np.zeros(len(frame), bool)
    for s in (1, 2, 3):
        mask = (frame["stage"].to_numpy() == s) & ~poci if staged else None
        row[f"stage_{s}"] = _cents(frame, f"ecl_{framework}", mask) if staged else np.nan
    row["poci"] = _cents(frame, f"ecl_{framework}", poci) if staged else np.nan
    row["loans_stage_2"] = int(((frame["stage"] == 2).to_numpy() & ~poci).sum()) if staged else np.nan
    row["loans_stage_3"] = int(((frame["stage"] == 3).to_numpy() & ~poci).sum()) if staged else np.nan
    return row


def sensitivity_table(weighted: pd.DataFrame, alone: Mapping[str, pd.DataFrame], config: RunConfig) -> pd.DataFrame:
    """The weighted allowance and each scenario's allowance at 100 % weight, per framework.

    Parameters
    ----------
    weighted : DataFrame
        Loan results of the probability-weighted run.
    alone : mapping
        Scenario name -> loan results with that scenario alone: a run's ``EngineResult.alone``
        (:func:`allowance.engine.run` with ``alone``), or a rerun's loans
        (:func:`single_scenario`); only ``ecl_<fw>_modelled``, ``overlay_<fw>``, ``ecl_<fw>``,
        ``stage`` and ``poci`` are read.
    config : RunConfig
        The weighted run's configuration (frameworks, scenario weights).

    Returns
    -------
    DataFrame
        One row per framework and scenario, then ``weighted``: ``framework, scenario,
        weight`` (the scenario's weight in the weighted run), ``allowance_modelled,
        overlays, allowance`` (after overlays), ``difference_from_weighted`` and
        ``difference_pct`` (of the weighted allowance), and for IFRS 9 the allowance by
        class (stage 1, 2, 3 and POCI apart) and the loans in stages 2 and 3 (blank for CECL). Money is the sum of the
        loans' rounded figures.

    Examples
    --------
    >>> base = pd.DataFrame({"ecl_cecl_modelled": [1.0, 2.0], "overlay_cecl": [0.0, 0.0], "ecl_cecl": [1.0, 2.0]})
    >>> down = base * 2
    >>> t = sensitivity_table(base, {"base": base, "down": down}, _example_config(["cecl"]))
    >>> t[t.framework == "cecl"][["scenario", "allowance", "difference_from_weighted"]].values.tolist()
    [['base', 3.0, 0.0], ['down', 6.0, 3.0], ['weighted', 3.0, 0.0]]
    """
    weights = {n: s.weight for n, s in config.assumptions.scenarios.items()}
    rows = []
    for fw in config.frameworks:
        reference = _row(weighted, fw, "weighted", 1.0)
        for name, frame in alone.items():
            row = _row(frame, fw, name, weights.get(name, np.nan))
            rows.append(row)
        rows.append(reference)
        for row in rows[-len(alone) - 1:]:
            row["difference_from_weighted"] = row["allowance"] - reference["allowance"]
            row["difference_pct"] = (row["difference_from_weighted"] / reference["allowance"]
                                     if reference["allowance"] else np.nan)
    out = pd.DataFrame(rows, columns=SENSITIVITY_COLUMNS)
    for money in ("allowance_modelled", "overlays", "allowance", "difference_from_weighted",
                  "stage_1", "stage_2", "stage_3", "poci"):
        out[money] = out[money].astype(float) / 100.0
    out["difference_pct"] = out["difference_pct"].astype(float)
    return out
