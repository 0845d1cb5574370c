"""Low-level workbook writing: cell values, number formats, small tables, and bulk sheets.

Implements
----------
Formula        a string the workbook must read as a formula (every other string is text)
cell_value     a Python / numpy / pandas value as a safe cell value
column_format  the number format a column takes from its name and dtype
put_table      write a small frame as a formatted table on an openpyxl worksheet
BulkSheet      a large frame streamed into a worksheet's XML after openpyxl has saved the book
inject_bulk    rewrite the saved workbook with every bulk sheet's rows

Why bulk sheets
---------------
openpyxl without lxml writes about 100,000 cells a second; the loan sheet of a 10,000-loan
tape has ~400,000. A bulk sheet is laid out by openpyxl (header, one styled sample row,
column widths, frozen header, filter), so its styles are registered in the workbook; after
saving, its ``<sheetData>`` is replaced by rows generated column-wise with numpy and
pandas. Text goes in as inline strings (``t="inlineStr"``), which every reader takes as
text, never as a formula.
"""

from __future__ import annotations

import os
import re
import zipfile
from dataclasses import dataclass
from datetime import date, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from openpyxl.styles import Alignment, Font, PatternFill
from openpyxl.utils import get_column_letter

from allowance.text import neutralise_text
from allowance.exceptions import InvalidInputError

__all__ = [
    "BulkSheet", "Formula", "MONEY", "RATE", "INTEGER", "DATE", "cell_value", "column_format", "inject_bulk",
    "put_table", "HEADER_FONT", "HEADER_FILL", "TITLE_FONT",
]

MONEY = "#,##0.00"
RATE = "0.00%"
FINE_RATE = "0.0000%"
INTEGER = "0"
DATE = "yyyy-mm-dd"
HEADER_FONT = Font(bold=True, color="FFFFFF")
HEADER_FILL = PatternFill("solid", fgColor="305496")
TITLE_FONT = Font(bold=True, size=13)
TOTAL_FONT = Font(bold=True)
EXCEL_MAX_ROWS = 1_048_576
_CELL_TEXT_LIMIT = 32_767
_ILLEGAL = re.compile(r"[\000-\010\013\014\016-\037]")
_EXCEL_EPOCH = np.datetime64("1899-12-30", "D")

_MONEY_NAMES = {
    "balance", "ead", "credit_limit", "payment", "collateral_value", "balloon_amount",
    "lifetime_ecl_at_purchase", "opening_balance", "interest", "scheduled_principal", "prepayment",
    "closing_balance", "expected_balance", "amount", "debit", "credit", "base", "what_if", "difference",
    "value_amount", "ledger_balance", "accepted_balance", "rejected_balance", "tolerance", "beginning",
    "provision", "charge_offs", "recoveries", "ending", "gross_charge_off", "opening", "closing",
}
_RATE_NAMES = {
    "pd_12m", "pd_lifetime", "lgd", "interest_rate", "eir", "coverage", "weight", "cpr", "ccf", "cure_rate",
    "pd_12m_at_origination", "weight_on_scenario", "survival", "pd_lifetime_cecl", "payment_rate",
}
_FINE_RATE_NAMES = {"marginal_pd", "cumulative_pd"}


class Formula(str):
    """A formula of our own making (``=SUM(...)``); plain ``str`` values are always text."""


def column_format(name: str, dtype: Any) -> str | None:
    """The number format of a column: money, rate, date, integer, or None (general / text).

    Examples
    --------
    >>> column_format("ecl_ifrs9_base", np.float64), column_format("pd_12m", np.float64)
    ('#,##0.00', '0.00%')
    >>> column_format("stage", np.int64), column_format("loan_id", object) is None
    ('0', True)
    """
    lowered = str(name).lower()
    if pd.api.types.is_datetime64_any_dtype(dtype):
        return DATE
    if pd.api.types.is_bool_dtype(dtype) or not pd.api.types.is_numeric_dtype(dtype):
        return None
    if lowered in _FINE_RATE_NAMES or lowered.startswith("cumulative_pd_"):
        return FINE_RATE
    if lowered in _RATE_NAMES or lowered.startswith(("pd_", "coverage", "weight")):
        return RATE
    if lowered in _MONEY_NAMES or lowered.startswith(("ecl_", "overlay_", "effect_", "balance_", "g_")):
        return MONEY
    if pd.api.types.is_integer_dtype(dtype):
        return INTEGER
    return None


def clean_text(value: str) -> str:
    """Neutralised, without the control characters XML cannot carry, within Excel's cell limit."""
    return _ILLEGAL.sub("", neutralise_text(value))[:_CELL_TEXT_LIMIT]


def cell_value(value: Any) -> Any:
    """A value openpyxl writes safely: text neutralised, NaN / NaT / NA empty, numpy unwrapped."""
    if value is None:
        return None
    if isinstance(value, Formula):
        return str(value)
    if isinstance(value, str):
        return clean_text(value)
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if np.isfinite(value) else None
    if isinstance(value, pd.Timestamp):
        return None if pd.isna(value) else value.to_pydatetime()
    if isinstance(value, (datetime, date)):
        return value
    try:
        if pd.isna(value):
            return None
    except (TypeError, ValueError):
        pass
    return clean_text(str(value))


def _width(frame: pd.DataFrame, column: Any) -> float:
    """A column width from the header and the first values (numbers: a fixed money width)."""
    series = frame[column]
    if pd.api.types.is_numeric_dtype(series.dtype) and not pd.api.types.is_bool_dtype(series.dtype):
        longest = 14 if pd.api.types.is_float_dtype(series.dtype) else 8
    elif pd.api.types.is_datetime64_any_dtype(series.dtype):
        longest = 11
    else:
        longest = max((len(str(v)) for v in series.head(200).tolist()), default=0)
    return float(min(max(len(str(column)) + 2, min(longest, 40) + 2, 9), 50))


def put_table(
    ws: Any,
    frame: pd.DataFrame,
    row: int = 1,
    col: int = 1,
    *,
    title: str | None = None,
    formats: dict[str, str | None] | None = None,
    autofilter: bool = False,
    total_rows: int = 0,
    widths: bool = True,
) -> tuple[int, int]:
    """Write ``frame`` (header + rows) at (row, col); return (first data row, last data row).

    ``formats`` overrides :func:`column_format` per column; values that are :class:`Formula`
    are written as formulas, all other text as (neutralised) text. The last ``total_rows``
    rows are bold.
    """
    if title:
        ws.cell(row=row, column=col, value=clean_text(title)).font = TITLE_FONT
        row += 1
    formats = formats or {}
    for j, name in enumerate(frame.columns):
        cell = ws.cell(row=row, column=col + j, value=clean_text(str(name)))
        cell.font, cell.fill = HEADER_FONT, HEADER_FILL
        cell.alignment = Alignment(wrap_text=True, vertical="top")
    fmts = [formats.get(name, column_format(name, frame[name].dtype)) for name in frame.columns]
    first = row + 1
    for i, record in enumerate(frame.itertuples(index=False, name=None)):
        bold = i >= len(frame) - total_rows
        for j, value in enumerate(record):
            cell = ws.cell(row=first + i, column=col + j, value=cell_value(value))
            if fmts[j] is not None:
                cell.number_format = fmts[j]
            if bold:
                cell.font = TOTAL_FONT
    last = first + len(frame) - 1
    if widths:
        for j, name in enumerate(frame.columns):
            letter = get_column_letter(col + j)
            current = ws.column_dimensions[letter].width or 0
            ws.column_dimensions[letter].width = max(current, _width(frame, name))
    if autofilter and len(frame.columns):
        ws.auto_filter.ref = f"{get_column_letter(col)}{row}:{get_column_letter(col + len(frame.columns) - 1)}{max(last, row)}"
    return first, last


# --------------------------------------------------------------------------------------
# Bulk sheets
# --------------------------------------------------------------------------------------


def _escape(values: list[str]) -> list[str]:
    """XML-escape text (and drop the control characters XML cannot carry)."""
    out = []
    for text in values:
        if _ILLEGAL.search(text):
            text = _ILLEGAL.sub("", text)
        if "&" in text or "<" in text or ">" in text:
            text = text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
        out.append(text[:_CELL_TEXT_LIMIT])
    return out


def _column_cells(series: pd.Series, letter: str, rows: list[str], style: int) -> list[str]:
    """The ``<c>`` element of every cell of one column ('' for a blank cell).

    One pass per column in a comprehension; a value that repeats (segments, stages, zeros)
    is formatted once.
    """
    pre = f'<c r="{letter}'
    if pd.api.types.is_bool_dtype(series.dtype):
        mid = f'" s="{style}" t="b"><v>'
        return [f"{pre}{r}{mid}{1 if v else 0}</v></c>" for r, v in zip(rows, series.to_numpy(dtype=bool).tolist())]
    if pd.api.types.is_datetime64_any_dtype(series.dtype):
        stamps = series.to_numpy(dtype="datetime64[ns]")
        blank = np.isnat(stamps)
        numbers = (stamps.astype("datetime64[s]") - _EXCEL_EPOCH.astype("datetime64[s]")).astype(np.float64) / 86400.0
        kind = "number"
    elif pd.api.types.is_numeric_dtype(series.dtype):
        if pd.api.types.is_integer_dtype(series.dtype) and not series.hasnans:
            numbers, blank = series.to_numpy(dtype=np.int64), None
        else:
            numbers = series.to_numpy(dtype=np.float64, na_value=np.nan)
            blank = ~np.isfinite(numbers)
        kind = "number"
    else:
        kind = "text"
    if kind == "text":
        # escape each distinct value once (ids are unique, segments and grades repeat)
        codes, uniques = pd.factorize(series, use_na_sentinel=True)
        texts = _escape([clean_text(v) if isinstance(v, str) else clean_text(str(v)) for v in uniques.tolist()])
        tail = [f'" s="{style}" t="inlineStr"><is><t xml:space="preserve">{t}</t></is></c>' for t in texts]
        return [pre + r + tail[c] if c >= 0 else "" for r, c in zip(rows, codes.tolist())]
    mid = f'" s="{style}"><v>'
    if blank is not None and blank.any():
        numbers = np.where(blank, 0.0, numbers)
    else:
        blank = None
    codes, uniques = pd.factorize(numbers)
    if len(uniques) * 4 < len(numbers):  # repeated values: format each once
        formatted = [repr(u) for u in uniques.tolist()]
        values = [formatted[c] for c in codes.tolist()]
    else:
        values = [repr(v) for v in numbers.tolist()]
    if blank is None:
        return [f"{pre}{r}{mid}{v}</v></c>" for r, v in zip(rows, values)]
    return [f"{pre}{r}{mid}{v}</v></c>" if not b else "" for r, v, b in zip(rows, values, blank.tolist())]


@dataclass
class BulkSheet:
    """A frame to stream into a worksheet laid out by :meth:`prepare`.

    Call :meth:`prepare` before the workbook is saved (it writes the header and one styled
    sample row and records each column's style id), then :func:`inject_bulk` after.
    """

    ws: Any
    frame: pd.DataFrame
    styles: list[int] | None = None
    header_style: int = 0
    chunk_rows: int = 20_000

    def prepare(self) -> None:
        frame, ws = self.frame, self.ws
        fmts = [column_format(name, frame[name].dtype) for name in frame.columns]
        head = frame.head(1)
        put_table(ws, head, 1, 1, formats=dict(zip(frame.columns, fmts)), autofilter=False, widths=False)
        for j, name in enumerate(frame.columns):
            ws.column_dimensions[get_column_letter(j + 1)].width = _width(frame, name)
        self.header_style = ws.cell(row=1, column=1).style_id if len(frame.columns) else 0
        sample_row = 2
        self.styles = []
        for j, fmt in enumerate(fmts):
            cell = ws.cell(row=sample_row, column=j + 1)
            if cell.value is None:  # a blank first value: still register the column's format
                cell.value = 0
            if fmt is not None:
                cell.number_format = fmt
            self.styles.append(cell.style_id)
        ws.freeze_panes = "A2"
        if len(frame.columns):
            ws.auto_filter.ref = f"A1:{get_column_letter(len(frame.columns))}{len(frame) + 1}"

    def sheet_data(self):
        """Yield the ``<sheetData>`` element in pieces: the header row, then chunks of rows."""
        frame = self.frame
        letters = [get_column_letter(j + 1) for j in range(len(frame.columns))]
        header = "".join(
            f'<c r="{letter}1" s="{self.header_style}" t="inlineStr"><is><t xml:space="preserve">'
            f"{_escape([clean_text(str(name))])[0]}</t></is></c>"
            for letter, name in zip(letters, frame.columns)
        )
        yield f'<sheetData><row r="1">{header}</row>'
        for start in range(0, len(frame), self.chunk_rows):
            part = frame.iloc[start:start + self.chunk_rows]
            rows = [str(r) for r in range(start + 2, start + 2 + len(part))]
            starts = [f'<row r="{r}">' for r in rows]
            columns = [_column_cells(part.iloc[:, j], letters[j], rows, self.styles[j]) for j in range(len(letters))]
            yield "".join(["".join(cells) + "</row>" for cells in zip(starts, *columns)])
        yield "</sheetData>"

    @property
    def dimension(self) -> str:
        cols = max(len(self.frame.columns), 1)
        return f"A1:{get_column_letter(cols)}{len(self.frame) + 1}"


_SHEET_DATA = re.compile(r"<sheetData>.*?</sheetData>|<sheetData\s*/>", re.S)
_DIMENSION = re.compile(r'<dimension ref="[^"]*"\s*/>')


def inject_bulk(path: Path, sheets: list[BulkSheet]) -> None:
    """Replace each bulk sheet's placeholder rows in the saved workbook at ``path`` (in place)."""
    if not sheets:
        return
    targets = {bulk.ws.path.lstrip("/"): bulk for bulk in sheets}
    tmp = path.with_name(path.name + ".bulk")
    with zipfile.ZipFile(path) as zin, zipfile.ZipFile(tmp, "w", zipfile.ZIP_DEFLATED, compresslevel=1) as zout:
        for info in zin.infolist():
            data = zin.read(info.filename)
            bulk = targets.get(info.filename)
            if bulk is None:
                zout.writestr(info, data, compress_type=info.compress_type)
                continue
            xml = data.decode("utf-8")
            match = _SHEET_DATA.search(xml)
            if match is None:  # pragma: no cover - openpyxl always writes sheetData
                raise InvalidInputError(f"no sheetData in {info.filename}")
            head = _DIMENSION.sub(f'<dimension ref="{bulk.dimension}"/>', xml[: match.start()], count=1)
            with zout.open(info.filename, "w") as out:
                out.write(head.encode("utf-8"))
                for piece in bulk.sheet_data():
                    out.write(piece.encode("utf-8"))
                out.write(xml[match.end():].encode("utf-8"))
    os.replace(tmp, path)
