"""Chunked orchestration: accepted tape + run configuration -> loan results.

The engine composes the concept modules in one direction: loan terms (cash flows) -> PD
term structures (curves) -> scenario paths per framework (scenarios) -> stages and horizons
(staging) -> the fused ECL loop (ecl) -> rounding to cents -> overlays. Book-level tables
(term structures, scenario paths, prepayment curves) are built once by :func:`prepare`;
:func:`run_chunk` is a pure function of a chunk of loans and those tables, so chunks can run
in-process, on several cores or on a cluster without change.

Implements
----------
Prepared      the book-level tables a chunk needs
EngineResult  loan results plus the tables the workbook shows
prepare       build the tables for a tape
run_chunk     loan results (modelled, unrounded) for a chunk of loans
run           the whole book: chunks, rounding to cents, overlays, summaries
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance import cashflows, overlays, scenarios
from allowance.engine.chunk import LoanTerms, loan_terms, run_chunk
from allowance.engine.tables import Prepared, prepare, tape_months
from allowance.engine.views import (
    _scenario_summary,
    _schedule_sample,
    _term_structure_table,
    loan_schedule,
    roll_rate_table,
)
from allowance.schemas import LoanRecord, RunConfig

__all__ = [
    "CHUNK_SIZE", "EngineResult", "LoanTerms", "Prepared", "loan_schedule", "loan_terms",
    "prepare", "roll_rate_table", "run", "run_chunk", "tape_months",
]

CHUNK_SIZE = 250_000

_MONEY = 2  # decimals: money is rounded to cents once, per loan, at the end

@dataclass(frozen=True)
class EngineResult:
    """Everything a run computes. ``loans`` is the loan-results contract (rounded to cents)."""

    loans: pd.DataFrame
    overlays: pd.DataFrame
    scenarios: pd.DataFrame
    term_structures: pd.DataFrame
    roll_rates: pd.DataFrame
    reversion: pd.DataFrame
    schedules: pd.DataFrame
    findings: pd.DataFrame
    warnings: list[str]


# --------------------------------------------------------------------------------------
# The whole book
# --------------------------------------------------------------------------------------


def _round_money(loans: pd.DataFrame) -> pd.DataFrame:
    money = [c for c in loans.columns if c.startswith("ecl_") or c.startswith("ead") or c == "balance"]
    rounded = loans.copy()
    rounded[money] = rounded[money].round(_MONEY)
    return rounded


def run(tape: pd.DataFrame, config: RunConfig, *, chunk_size: int = CHUNK_SIZE, schedule_sample: int = 2) -> EngineResult:
    """Compute the allowance for an accepted tape.

    Money is computed unrounded and rounded to cents once per loan; overlays are applied to
    the rounded modelled figures; every total is the sum of rounded loan figures.
    """
    a = config.assumptions
    months = tape_months(tape, config)
    as_of = pd.Timestamp(config.as_of)
    max_age = int(cashflows.age_months(tape["origination_date"], as_of).max()) if len(tape) else 0
    prep = prepare(config, months, max_age)

    parts, found = [], []
    for start in range(0, max(len(tape), 1), chunk_size):
        chunk = tape.iloc[start: start + chunk_size]
        out, fnd = run_chunk(chunk, prep)
        parts.append(out)
        found.append(fnd)
    loans = _round_money(pd.concat(parts) if parts else pd.DataFrame())

    applied = overlays.apply_overlays(loans, list(a.overlays), config.as_of, list(prep.frameworks))
    for fw in prep.frameworks:
        adj = np.asarray(applied.adjustments[fw], float)
        loans[f"overlay_{fw}"] = adj
        loans[f"ecl_{fw}"] = (loans[f"ecl_{fw}_modelled"] + adj).round(_MONEY)
    loans = _order_columns(loans, tape, prep)

    return EngineResult(
        loans=loans,
        overlays=applied.table,
        scenarios=_scenario_summary(loans, prep),
        term_structures=_term_structure_table(prep),
        roll_rates=roll_rate_table(config),
        reversion=scenarios.reversion_table(prep.tables["cecl"]) if "cecl" in prep.tables else pd.DataFrame(),
        schedules=_schedule_sample(tape, loans, prep, schedule_sample),
        findings=pd.concat(found, ignore_index=True) if found else pd.DataFrame(),
        warnings=list(applied.warnings),
    )


def _order_columns(loans: pd.DataFrame, tape: pd.DataFrame, prep: Prepared) -> pd.DataFrame:
    first = [
        "loan_id", "segment", "repayment", "grade", "stage", "stage_reason", "poci",
        "horizon_months", "horizon_months_cecl", "remaining_months", "balance", "ead",
        "pd_12m", "pd_lifetime", "lgd", "ecl_12m", "ecl_lifetime",
    ]
    for fw in prep.frameworks:
        first += [f"ecl_{fw}_modelled", f"overlay_{fw}", f"ecl_{fw}"]
    for fw in prep.frameworks:
        first += [f"ecl_{fw}_{s}" for s in prep.scenario_names]
    first += [f"ead_{fw}" for fw in prep.frameworks]
    ordered = loans[[c for c in first if c in loans.columns]].copy()
    ordered["source_row"] = tape["source_row"].to_numpy() if "source_row" in tape else np.arange(len(tape)) + 2
    extras = [c for c in tape.columns if c not in LoanRecord.model_fields and c != "source_row"]
    for c in extras:
        ordered[c] = tape[c].to_numpy()
    return ordered.reset_index(drop=True)
