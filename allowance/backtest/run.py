"""The back-test from files: a finished run's folder and the history since its as-of date.

Implements
----------
backtest_files  run folder + history file -> (BacktestResult, record for backtest.json)
"""

from __future__ import annotations

from datetime import date
from pathlib import Path
from typing import Any

import allowance
from allowance.backtest.compare import BacktestResult, backtest
from allowance.backtest.statistics import BacktestOptions
from allowance.exceptions import InputFileError
from allowance.intake import file_record, read_prior_run
from allowance.intake.history_window import read_history_window


def backtest_files(run_dir: Path, history: Path, options: BacktestOptions | None = None,
                   months: int = 12) -> tuple[BacktestResult, dict[str, Any]]:
    """Read a finished run (``loans.csv``, ``run.json``) and the history, and back-test the run.

    Raises
    ------
    InputFileError
        A missing or unreadable file, a run record without an as-of date, or a history that
        does not reach the end of the window.
    """
    o = options or BacktestOptions()
    prior = read_prior_run(Path(run_dir))
    record = prior.record
    try:
        as_of = date.fromisoformat(str(record["as_of"]))
    except (KeyError, ValueError) as err:
        raise InputFileError("the run record has no as-of date", file=Path(run_dir) / "run.json") from err
    rows = read_history_window(Path(history), as_of, months)
    result = backtest(prior.loans, record.get("assumptions") or {}, rows, as_of, o, months)
    last = rows["month"].max() if len(rows) else None
    if last is None or last.date() < result.window_end:
        seen = "no month" if last is None else f"months up to {last.date().isoformat()}"
        raise InputFileError(
            f"the history has {seen} after the run's as-of date {as_of.isoformat()}; a {months}-month back-test "
            f"needs every month end up to {result.window_end.isoformat()}",
            file=history, column="month", hint="back-test a run whose as-of date is at least a year before the history ends",
        )
    summary = {
        "package": "allowance", "version": allowance.__version__, "run_dir": str(run_dir), "history": str(history),
        "inputs": [file_record(Path(run_dir) / "loans.csv", "prior").model_dump(mode="json"),
                   file_record(Path(history), "history").model_dump(mode="json")],
        "as_of": as_of.isoformat(), "window_end": result.window_end.isoformat(),
        "options": o.model_dump(mode="json"), "history_rows_in_window": int(len(rows)),
        "verdicts": dict(zip(result.segments["segment"], result.segments["verdict"])),
    }
    return result, summary
