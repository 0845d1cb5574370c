"""The back-test's output folder: tables as CSV, a record, and a workbook sheet with charts.

Implements
----------
BACKTEST_FILES  the files a back-test writes
write_backtest  write them into a folder, all or nothing
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import pandas as pd
from openpyxl import Workbook
from openpyxl.chart import BarChart, Reference
from openpyxl.styles import Font, PatternFill

from allowance.backtest.compare import BacktestResult
from allowance.exceptions import OutputError
from allowance.report.record import CAUTION
from allowance.text import neutralise_frame
from allowance.report.openpyxl_table import TITLE_FONT, put_table

__all__ = ["BACKTEST_FILES", "write_backtest"]

BACKTEST_FILES = ("backtest_segments.csv", "backtest_grades.csv", "backtest_loans.csv", "backtest.xlsx",
                  "backtest.json")
_FILL = {"green": "C6EFCE", "yellow": "FFEB9C", "red": "FFC7CE"}


def _colour_lights(ws: Any, frame: pd.DataFrame, first: int, columns: tuple[str, ...]) -> None:
    for name in columns:
        if name not in frame.columns:
            continue
        j = list(frame.columns).index(name) + 1
        for i, value in enumerate(frame[name].tolist()):
            if value in _FILL:
                ws.cell(row=first + i, column=j).fill = PatternFill("solid", fgColor=_FILL[value])


def _chart(ws: Any, title: str, y_title: str, cats: Reference, series: list[tuple[Reference, str]], anchor: str):
    chart = BarChart()
    chart.type, chart.title, chart.y_axis.title = "col", title, y_title
    for ref, _ in series:
        chart.add_data(ref, titles_from_data=True)
    chart.set_categories(cats)
    chart.height, chart.width = 8, 18
    ws.add_chart(chart, anchor)


def _workbook(path: Path, result: BacktestResult, record: Mapping[str, Any]) -> None:
    wb = Workbook()
    ws = wb.active
    ws.title = "Back-test"
    ws.cell(row=1, column=1, value="Back-test: the run's 12-month forecast against what happened").font = TITLE_FONT
    ws.cell(row=2, column=1, value=CAUTION).font = Font(italic=True)
    ws.cell(row=3, column=1, value=f"run: {record['run_dir']}   history: {record['history']}")
    first, last = put_table(ws, result.segments, row=5, title="Verdict by segment")
    _colour_lights(ws, result.segments, first, ("verdict", "pd_light", "loss_light", "worst_grade_light"))
    row = last + 3
    first_o, last_o = put_table(ws, result.options_table(), row=row, title="Choices of this back-test")
    if len(result.segments):
        cats = Reference(ws, min_col=1, min_row=first, max_row=last)
        cols = list(result.segments.columns)
        series = [(Reference(ws, min_col=cols.index(c) + 1, min_row=first - 1, max_row=last), c)
                  for c in ("expected_loss_12m", "realised_ncl")]
        _chart(ws, "Expected 12-month loss and realised net credit loss", "amount", cats, series, f"A{last_o + 3}")

    grades = wb.create_sheet("Grades")
    table = result.grades
    first, last = put_table(grades, table, row=1, title="Default rates by grade against the PDs used", autofilter=True)
    _colour_lights(grades, table, first, ("light",))
    if len(table) and "default_rate" in table:
        cols = list(table.columns)
        grades.cell(row=last + 2, column=1, value="label")
        labels = (table["segment"].astype(str) + " " + table["grade"].astype(str)).tolist()
        for i, text in enumerate(labels):
            grades.cell(row=last + 3 + i, column=1, value=text)
        cats = Reference(grades, min_col=1, min_row=last + 3, max_row=last + 2 + len(labels))
        series = [(Reference(grades, min_col=cols.index(c) + 1, min_row=first - 1, max_row=last), c)
                  for c in ("default_rate", "pd", "binomial_upper")]
        _chart(grades, "Realised 12-month default rate, the PD used and the upper 95 % bound", "rate", cats, series,
               f"A{last + 4 + len(labels)}")
    wb.save(path)


def write_backtest(out_dir: Path, result: BacktestResult, record: Mapping[str, Any]) -> list[Path]:
    """Write a back-test's outputs into ``out_dir``, all or nothing.

    ``backtest_segments.csv`` (verdict per segment), ``backtest_grades.csv`` (calibration and
    losses per segment and grade), ``backtest_loans.csv`` (each loan of the run and what
    happened to it), ``backtest.xlsx`` (the verdicts, the grades and two charts) and
    ``backtest.json`` (inputs, choices, verdicts).

    Raises
    ------
    OutputError
        The folder cannot be written; nothing is left half written.
    """
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputError("the output path exists and is not a folder", file=out_dir)
    parent = out_dir.absolute().parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
        partial = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.partial-", dir=parent))
    except OSError as err:
        raise OutputError(f"cannot create the output folder ({err.strerror or err})", file=out_dir) from err
    try:
        neutralise_frame(result.segments).to_csv(partial / "backtest_segments.csv", index=False)
        neutralise_frame(result.grades).to_csv(partial / "backtest_grades.csv", index=False)
        neutralise_frame(result.loans).to_csv(partial / "backtest_loans.csv", index=False)
        _workbook(partial / "backtest.xlsx", result, record)
        (partial / "backtest.json").write_text(json.dumps(record, indent=2, default=str) + "\n", encoding="utf-8")
        out_dir.mkdir(exist_ok=True)
        for name in BACKTEST_FILES:
            os.replace(partial / name, out_dir / name)
        partial.rmdir()
    except OSError as err:
        shutil.rmtree(partial, ignore_errors=True)
        raise OutputError(f"cannot write the outputs ({err.strerror or err})", file=err.filename or out_dir) from err
    except BaseException:
        shutil.rmtree(partial, ignore_errors=True)
        raise
    return [out_dir / name for name in BACKTEST_FILES]
