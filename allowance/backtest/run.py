"""The back-test from files: a finished run's folder and the history since its as-of date.

The history is read by the one history reader, :func:`allowance.intake.read_history` (the
reader ``allowance calibrate`` uses): streamed, every row checked with the same rules and
messages. A back-test judges a forecast on what happened, so a history with rejected rows is
refused (the first one named by line, column and reason) rather than judged on part of it.

Implements
----------
window_rows     the rows of a read history in the months after an as-of date, as a frame
backtest_files  run folder + history file -> (BacktestResult, record for backtest.json)
"""

from __future__ import annotations

from datetime import date
from pathlib import Path
from typing import Any

import allowance
import numpy as np
import pandas as pd

from allowance.backtest.compare import BacktestResult, backtest
from allowance.backtest.realised import window_months
from allowance.backtest.statistics import BacktestOptions
from allowance.exceptions import HistoryError, InputFileError
from allowance.intake import file_record, read_prior_run
from allowance.intake.panel import PAID_OFF
from allowance.intake.performance import HistoryIntake, read_history

_EVENTS = ("charge_off", "bankruptcy_loss", "recoveries", "asset_sales")


def window_rows(intake: HistoryIntake, as_of: date, months: int = 12) -> pd.DataFrame:
    """The accepted rows whose month is one of the ``months`` months after ``as_of``.

    Returns
    -------
    DataFrame
        ``loan_id, segment`` (text), ``month`` (month-end timestamp), ``balance``,
        ``days_past_due``, the money columns (blank = 0), ``paid_off`` and ``source_row``,
        the columns :func:`allowance.backtest.realised.realised_outcomes` reads.
    """
    ends = window_months(as_of, months)
    first = int(np.datetime64(ends[0].strftime("%Y-%m"), "M").astype(np.int64))
    last = first + months - 1
    ids = intake.panel.loans.ids
    segments = np.asarray(intake.panel.segments, dtype=object)
    frames = []
    for part in intake.panel.parts():
        keep = (part.month >= first) & (part.month <= last)
        if not keep.any():
            continue
        money = {name: part.event_sums(name)[keep] for name in _EVENTS}
        month = part.month[keep].astype(np.int64)
        frames.append(pd.DataFrame({
            "loan_id": ids.take(part.loan[keep]).to_numpy(zero_copy_only=False),
            "segment": segments[part.segment[keep].astype(np.int64)],
            "month": pd.PeriodIndex.from_ordinals(month, freq="M").to_timestamp(how="end").normalize(),
            "balance": part.balance[keep], "days_past_due": part.dpd[keep].astype(np.int64), **money,
            "paid_off": (part.flags[keep] & PAID_OFF) > 0, "source_row": part.source_row[keep],
        }))
    if not frames:
        return pd.DataFrame(columns=["loan_id", "segment", "month", "balance", "days_past_due", *_EVENTS,
                                     "paid_off", "source_row"])
    return pd.concat(frames, ignore_index=True)


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
    with read_history(Path(history)) as intake:
        if intake.rows_rejected:
            row = int(intake.rejected["source_row"].min())
            first = intake.rejected[intake.rejected["source_row"] == row].iloc[0]
            found = intake.findings[(intake.findings["source_row"] == row) & (intake.findings["severity"] == "reject")]
            column = str(found["column"].iloc[0]) if len(found) else None
            reason = str(found["message"].iloc[0]) if len(found) else str(first["reasons"])
            raise HistoryError(
                f"{reason} ({intake.rows_rejected:,} of {intake.rows_read:,} rows rejected; a back-test is judged "
                "on the whole history)",
                file=history, row=row, column=column,
                hint="correct the rows (allowance calibrate lists every one with its reasons)",
            )
        rows = window_rows(intake, as_of, months)
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
        "currency": ((record.get("assumptions") or {}).get("run") or {}).get("currency", ""),
        "options": o.model_dump(mode="json"), "history_rows_in_window": int(len(rows)),
        "verdicts": dict(zip(result.segments["segment"], result.segments["verdict"])),
    }
    return result, summary
