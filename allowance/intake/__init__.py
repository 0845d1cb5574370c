"""Read the user's input files: loan tape, assumptions, overlays, charge-offs, prior runs.

Implements
----------
load_assumptions    TOML assumptions + overlay files -> validated RunConfig
read_tape           CSV / XLSX / Parquet tape -> IntakeResult (accepted, rejected, findings)
read_parts          a Parquet tape (file or folder) read part by part through a map -> IntakeResult
tie_out             accepted tape balance against the ledger control total -> TieOut
check_table         the counts ``allowance check`` prints
read_charge_offs    the period's charge-off file
read_prior_run      a previous run's loans.csv and run.json -> PriorRun
read_prior_figures  the same, only the columns asked for, each kept compactly -> PriorFigures
                    (a book computed part by part: its Parquet loan detail, which run.json names)
detail_files        the Parquet files of such a book's loan detail, in tape order
read_macro_history  a monthly or quarterly macro history file -> MacroHistory
read_history        a monthly performance history (CSV / Parquet, streamed) -> HistoryIntake
read_policy         a calibration policy file (TOML)
file_record         SHA-256 and size of an input file, for run.json
bundled_path        the shipped demo/ or templates/ folder
data_dictionary     the tape's columns: type, required, meaning (from LoanRecord)

Layout: ``files`` (files as bytes), ``readers`` (bytes -> text table), ``fields`` (the tape
columns from LoanRecord), ``parse`` (text -> values, column-wise), ``rules`` (the row rules),
``tape`` (read_tape), ``assumptions``, ``tieout``, ``history``, ``macro_series``; the
performance history: ``stream`` (batches), ``performance`` (read_history), ``panel``
(the loan-month panel), ``policy``.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

#: each public name and the submodule it lives in: imported on first use, so a command loads
#: only the readers it needs (``check`` and ``run`` never the performance history's)
_EXPORTS: dict[str, str] = {
    "load_assumptions": "assumptions",
    "read_transition_matrix": "assumptions",
    "FIELDS": "fields",
    "FieldSpec": "fields",
    "data_dictionary": "fields",
    "bundled_path": "files",
    "file_record": "files",
    "LoanFigures": "history",
    "PriorFigures": "history",
    "PriorRun": "history",
    "read_charge_offs": "history",
    "read_prior_figures": "history",
    "read_prior_run": "history",
    "detail_files": "history",
    "read_detail_figures": "history",
    "locate_prior_run": "history",
    "MacroHistory": "macro_series",
    "read_macro_history": "macro_series",
    "is_partitioned": "parts",
    "read_parts": "parts",
    "HistoryIntake": "performance",
    "read_history": "performance",
    "read_policy": "policy",
    "IntakeResult": "results",
    "TieOut": "results",
    "CODES": "rules",
    "read_tape": "tape",
    "check_table": "tieout",
    "tie_out": "tieout",
}

if TYPE_CHECKING:  # pragma: no cover
    from allowance.intake.assumptions import load_assumptions, read_transition_matrix
    from allowance.intake.fields import FIELDS, FieldSpec, data_dictionary
    from allowance.intake.files import bundled_path, file_record
    from allowance.intake.history import (
        LoanFigures, PriorFigures, PriorRun, detail_files, locate_prior_run, read_charge_offs, read_detail_figures,
        read_prior_figures, read_prior_run,
    )
    from allowance.intake.macro_series import MacroHistory, read_macro_history
    from allowance.intake.parts import is_partitioned, read_parts
    from allowance.intake.performance import HistoryIntake, read_history
    from allowance.intake.policy import read_policy
    from allowance.intake.results import IntakeResult, TieOut
    from allowance.intake.rules import CODES
    from allowance.intake.tape import read_tape
    from allowance.intake.tieout import check_table, tie_out

__all__ = [
    "HistoryIntake",
    "read_history",
    "is_partitioned",
    "read_parts",
    "read_policy",
    "CODES",
    "FIELDS",
    "FieldSpec",
    "IntakeResult",
    "LoanFigures",
    "MacroHistory",
    "PriorFigures",
    "PriorRun",
    "TieOut",
    "bundled_path",
    "check_table",
    "data_dictionary",
    "detail_files",
    "file_record",
    "load_assumptions",
    "locate_prior_run",
    "read_charge_offs",
    "read_detail_figures",
    "read_macro_history",
    "read_prior_figures",
    "read_prior_run",
    "read_tape",
    "read_transition_matrix",
    "tie_out",
]


def __getattr__(name: str) -> Any:
    if name in _EXPORTS:
        value = getattr(importlib.import_module(f"allowance.intake.{_EXPORTS[name]}"), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'allowance.intake' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_EXPORTS))
