"""Small formatted tables on an openpyxl worksheet, for the back-test workbook.

The reserve and calibration workbooks are written with XlsxWriter (:mod:`allowance.report.xlsx`);
the back-test workbook still builds its sheets with openpyxl and takes its table helper from
here until it moves to that writer.

Implements
----------
Formula        a string the workbook must read as a formula (every other string is text)
cell_value     a Python / numpy / pandas value as a safe cell value
column_format  the number format a column takes from its name and dtype
put_table      write a small frame as a formatted table on an openpyxl worksheet
"""

from __future__ import annotations

import re
from datetime import date, datetime
from typing import Any

import numpy as np
import pandas as pd
from openpyxl.styles import Alignment, Font, PatternFill
from openpyxl.utils import get_column_letter

from allowance.text import neutralise_text

__all__ = ["cell_value", "column_format", "put_table", "HEADER_FONT", "HEADER_FILL", "TITLE_FONT"]

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


