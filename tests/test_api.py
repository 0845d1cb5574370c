"""The public surface users' scripts rely on: exported names, commands, output columns.

A refactor may add names; removing or renaming one must be a decision, made here.
"""

from __future__ import annotations

import importlib

import pytest

from allowance.cli import app
from tests.books import engine_config, engine_tape

PINNED = {
    "allowance.intake": {"IntakeResult", "PriorRun", "TieOut", "bundled_path", "check_table", "file_record",
                         "load_assumptions", "read_charge_offs", "read_prior_run", "read_tape", "tie_out"},
    "allowance.engine": {"ChunkResult", "EngineResult", "Prepared", "loan_schedule", "prepare", "run", "run_chunk",
                         "scenario_summary", "tape_months"},
    "allowance.frameworks": {"FRAMEWORK_RULES", "FrameworkRules", "rules_for"},
    "allowance.curves": {"PdTermStructure", "pd_term_structure", "survival", "unconditional_marginal",
                         "cumulative_pd", "pd_over", "roll_rate_summary", "collateral_lgd", "bucket_index"},
    "allowance.report": {"CAUTION", "RunReport", "run_record", "write_outputs", "neutralise_text"},
    "allowance.reconcile": {"Movement", "WhatIf", "movement", "compare_runs", "what_if_comparison"},
    "allowance.calibrate": {"Calibration", "CalibrationSettings", "ESTIMATORS", "Estimator", "calibrate", "estimate"},
}


@pytest.mark.parametrize("module", sorted(PINNED))
def test_exported_names_stay(module):
    mod = importlib.import_module(module)
    missing = PINNED[module] - set(mod.__all__)
    assert not missing, f"{module} no longer exports {sorted(missing)}"
    for name in mod.__all__:
        assert hasattr(mod, name), f"{module}.__all__ names {name}, which does not exist"


def test_commands_stay():
    # the command-line contract of DESIGN.md, plus later additions
    names = {cmd.name or cmd.callback.__name__ for cmd in app.registered_commands}
    assert {"demo", "run", "check", "init", "schedule", "compare"} <= names


def test_loans_csv_contract_columns():
    from allowance import engine

    loans = engine.run(engine_tape(30), engine_config()).loans
    contract = ["loan_id", "segment", "stage", "horizon_months", "balance", "ead", "pd_12m", "pd_lifetime",
                "lgd", "ecl_12m", "ecl_lifetime", "ecl_ifrs9", "ecl_cecl"]
    assert set(contract) <= set(loans.columns)
    assert {f"ecl_{fw}_{s}" for fw in ("ifrs9", "cecl") for s in ("base", "down")} <= set(loans.columns)


def test_every_subpackage_ships_in_the_wheel():
    # the tests import the checkout, so a package missing from pyproject would pass here and
    # break 'pip install .'; this keeps the two in step
    import tomllib
    from pathlib import Path

    root = Path(__file__).parents[1]
    listed = set(tomllib.loads((root / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"])
    found = {
        ".".join(p.parent.relative_to(root).parts)
        for p in (root / "allowance").rglob("__init__.py")
        if "__pycache__" not in p.parts
    }
    assert found <= listed, f"add to [tool.setuptools] packages: {sorted(found - listed)}"
