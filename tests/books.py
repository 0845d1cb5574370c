"""Shared sample books for the tests: the bundled demo and a small synthetic engine book.

The demo's files are named by its manifest (``demo/manifest.toml``), the one list of the
sample data that tests, docs and the command line all read. The synthetic book is an
accepted-tape frame as intake hands it to the engine (invented data).
"""

from __future__ import annotations

import tomllib

import numpy as np
import pandas as pd

from allowance.intake import bundled_path
from allowance.schemas import OPTIONAL_COLUMNS, Assumptions, LoanRecord, RunConfig

# --------------------------------------------------------------------------------------
# The bundled demo
# --------------------------------------------------------------------------------------

DEMO = bundled_path("demo")
MANIFEST = tomllib.loads((DEMO / "manifest.toml").read_text(encoding="utf-8"))
DEMO_TAPE = DEMO / MANIFEST["current"]["tape"]
DEMO_ASSUMPTIONS = DEMO / MANIFEST["current"]["assumptions"]
DEMO_BAD_TAPE = DEMO / MANIFEST["bad"]["tape"]
DEMO_WHAT_IF = DEMO / MANIFEST["what_if"]["overlay"]

# --------------------------------------------------------------------------------------
# A synthetic engine book: three segments, both frameworks, two scenarios
# --------------------------------------------------------------------------------------

AS_OF = "2026-09-30"


def engine_config(**changes) -> RunConfig:
    """Assumptions covering a flat PD, a curve with collateral LGD and graded revolving lines."""
    data = {
        "run": {"as_of": AS_OF, "frameworks": ["ifrs9", "cecl"]},
        "segments": {
            "auto": {"pd_12m": 0.02, "lgd": 0.4, "cpr": 0.1},
            "mort": {
                "pd_curve": [0.005, 0.012, 0.02], "lgd": 0.2, "psa": 150,
                "collateral_lgd": {"haircut": 0.2, "recovery_cost": 0.05, "floor": 0.05, "months_to_recovery": 12},
            },
            "cards": {"pd_12m_by_grade": {"A": 0.02, "B": 0.06}, "lgd": 0.85, "ccf": 0.3,
                      "behavioural_life_months": 36, "payment_rate": 0.05, "unconditionally_cancellable": True},
        },
        "ifrs9": {"sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month"},
        "cecl": {"reasonable_supportable_months": 24, "reversion_months": 12,
                 "payment_allocation": "measured_balance_first"},
        "scenarios": {
            "base": {"weight": 0.6, "pd_multiplier": [1.0, 1.0, 1.0]},
            "down": {"weight": 0.4, "pd_multiplier": [2.0, 1.5, 1.2], "lgd_multiplier": [1.1]},
        },
    }
    for key, value in changes.items():
        data[key] = value
    return RunConfig(assumptions=Assumptions.model_validate(data))


def engine_tape(n: int = 300, seed: int = 7, collateral_ratio: float = 1.2) -> pd.DataFrame:
    """An accepted-tape frame as intake hands it over (invented data for the tests); mortgages
    carry collateral of ``collateral_ratio`` times their balance."""
    rng = np.random.default_rng(seed)
    seg = rng.choice(["auto", "mort", "cards"], n)
    frame = pd.DataFrame({
        "loan_id": [f"L{i:05d}" for i in range(n)],
        "segment": seg,
        "repayment": np.where(seg == "cards", "revolving", "level"),
        "origination_date": pd.to_datetime("2024-01-15"),
        "maturity_date": pd.to_datetime(
            np.where(seg == "cards", None, np.where(seg == "mort", "2054-01-15", "2029-01-15"))
        ),
        "balance": rng.uniform(1_000, 200_000, n).round(2),
        "interest_rate": rng.uniform(0.03, 0.2, n).round(4),
        "days_past_due": rng.choice([0, 0, 0, 0, 15, 45, 100], n),
    })
    for c in OPTIONAL_COLUMNS:
        frame[c] = False if LoanRecord.model_fields[c].annotation is bool else np.nan
    frame["grade"] = np.where(seg == "cards", rng.choice(["A", "B"], n), None)
    frame["credit_limit"] = np.where(seg == "cards", (frame["balance"] * 1.5).round(2), np.nan)
    frame["collateral_value"] = np.where(seg == "mort", (frame["balance"] * collateral_ratio).round(2), np.nan)
    frame["source_row"] = np.arange(n) + 2
    return frame
