"""The back-test's output folder: tables as CSV, a record, and a workbook (XlsxWriter) with charts.

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

from allowance.backtest.compare import BacktestResult
from allowance.exceptions import OutputError
from allowance.report.record import CAUTION
from allowance.text import neutralise_frame

__all__ = ["BACKTEST_FILES", "write_backtest"]

BACKTEST_FILES = ("backtest_segments.csv", "backtest_grades.csv", "backtest_loans.csv", "backtest.xlsx",
                  "backtest.json")
_FILL = {"green": "#C6EFCE", "yellow": "#FFEB9C", "red": "#FFC7CE"}
_COLOURS = ("#1F4E79", "#C0504D", "#7F7F7F")
_KINDS = {"pd": "fine_rate", "default_rate": "fine_rate", "binomial_lower": "fine_rate", "binomial_upper": "fine_rate",
          "jeffreys_lower": "fine_rate", "jeffreys_upper": "fine_rate", "expected_default_rate": "fine_rate"}


def _lights(sheet, frame: pd.DataFrame, first: int, last: int, columns: tuple[str, ...]) -> None:
    """Colour the traffic lights (a conditional format on the cell's text, so the file reads without it too)."""
    if last < first:
        return
    book = sheet.book.workbook
    for name in columns:
        if name not in frame.columns:
            continue
        j = list(frame.columns).index(name)
        for light, colour in _FILL.items():
            sheet.ws.conditional_format(first - 1, j, last - 1, j, {
                "type": "cell", "criteria": "==", "value": f'"{light}"', "format": book.add_format({"bg_color": colour})})


def _bars(sheet, title: str, y_title: str, frame: pd.DataFrame, first: int, last: int, columns: tuple[str, ...],
          row: int, fmt: str) -> int:
    chart = sheet.book.workbook.add_chart({"type": "column"})
    for k, name in enumerate(columns):
        j = list(frame.columns).index(name)
        chart.add_series({"name": [sheet.name, first - 2, j], "categories": [sheet.name, first - 1, 0, last - 1, 0],
                          "values": [sheet.name, first - 1, j, last - 1, j], "fill": {"color": _COLOURS[k]}})
    chart.set_title({"name": title, "name_font": {"size": 11}})
    chart.set_y_axis({"name": y_title, "num_format": fmt,
                      "major_gridlines": {"visible": True, "line": {"color": "#D9DEE3"}}})
    chart.set_legend({"position": "bottom"})
    return sheet.chart(row, 1, chart, width=720, height=320)


def _workbook(path: Path, result: BacktestResult, record: Mapping[str, Any]) -> None:
    """``backtest.xlsx`` with the project's XlsxWriter writer: cached values, print setup, title rows."""
    from allowance.report import clock
    from allowance.report.bulk import save
    from allowance.report.xlsx import Book, Context

    book = Book(Context(as_of=str(record.get("as_of", "")), currency=str(record.get("currency") or ""),
                        label=f"back-test to {record.get('window_end', '')}"))
    sheet = book.sheet("Back-test", title="Back-test: the run's 12-month forecast against what happened")
    row = sheet.note(4, CAUTION, span=10)
    row = sheet.note(row, f"run: {record.get('run_dir', '')}   history: {record.get('history', '')}", span=10)
    segments = result.segments.reset_index(drop=True)
    first, last = sheet.table(row + 1, segments, title="Verdict by segment", kinds=_KINDS)
    _lights(sheet, segments, first, last, ("verdict", "pd_light", "loss_light", "worst_grade_light"))
    _, last_o = sheet.table(last + 2, result.options_table().reset_index(drop=True),
                            title="Choices of this back-test")
    if len(segments):
        _bars(sheet, "Expected 12-month loss and realised net credit loss", "amount", segments, first, last,
              ("expected_loss_12m", "realised_ncl"), last_o + 2, "#,##0")
    grades = result.grades.reset_index(drop=True)
    if len(grades):
        grades.insert(0, "label", grades["segment"].astype(str) + " " + grades["grade"].astype(str))
    sheet = book.sheet("Grades", title="Default rates by grade against the PDs used")
    first, last = sheet.table(4, grades, kinds=_KINDS, autofilter=True)
    _lights(sheet, grades, first, last, ("light",))
    if len(grades) and {"default_rate", "pd", "binomial_upper"} <= set(grades.columns):
        _bars(sheet, "Realised 12-month default rate, the PD used and the upper 95 % bound", "rate", grades, first,
              last, ("default_rate", "pd", "binomial_upper"), last + 2, "0.00%")
    save(book, path, [], created=clock.now(), title="Back-test")


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
