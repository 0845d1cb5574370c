"""Read a macroeconomic history file: one row per month or per quarter, one column per variable.

The file (CSV, XLSX or Parquet) has one period column, ``month`` or ``quarter``, and one
column per macro variable, named as the assumptions file names them
(``unemployment_rate``, ``house_price_index``, ...). Periods run one after another without
gaps or repeats; every value is a finite number (a blank cell is an error, not a missing
value: a regression must not run on a series with holes the user did not see).

``month``: ``2026-09`` or any date in the month (``2026-09-30``). ``quarter``: ``2026Q3``,
``2026-Q3`` or any date in the quarter (``2026-09-30``).

Implements
----------
MacroHistory        the series read (frozen), and its monthly form
read_macro_history  the reader
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
import pandas as pd

from allowance.exceptions import InputFileError
from allowance.intake.files import check_size, file_kind, refuse_other_separators
from allowance.intake.parse import NUMBER_PATTERN
from allowance.intake.readers import read_raw
from allowance.schemas import Interpolation

__all__ = ["MacroHistory", "read_macro_history"]

Frequency = Literal["monthly", "quarterly"]

_MONTH = re.compile(r"^(\d{4})-(\d{1,2})(?:-(\d{1,2}))?$")
_QUARTER = re.compile(r"^(\d{4})\s*-?\s*[Qq]([1-4])$")
_PERIOD_COLUMNS: dict[str, Frequency] = {"month": "monthly", "quarter": "quarterly"}


@dataclass(frozen=True)
class MacroHistory:
    """A macro history as read.

    frequency  ``monthly`` or ``quarterly``
    values     one row per period (index: ``pandas.Period``, freq M or Q), one float column
               per variable, in the file's order
    source     the file it was read from
    """

    frequency: Frequency
    values: pd.DataFrame
    source: str

    @property
    def variables(self) -> list[str]:
        return list(self.values.columns)

    def monthly(self, interpolation: Interpolation) -> pd.DataFrame:
        """The series by month (index ``Period[M]``); a quarterly file through ``interpolation``.

        Examples
        --------
        >>> q = pd.DataFrame({"u": [4.0, 5.0]}, index=pd.period_range("2026Q1", periods=2, freq="Q"))
        >>> MacroHistory("quarterly", q, "x.csv").monthly("step")["u"].tolist()
        [4.0, 4.0, 4.0, 5.0, 5.0, 5.0]
        """
        from allowance.macro import monthly_from_quarterly  # the one quarter -> month rule

        if self.frequency == "monthly":
            return self.values.copy()
        first = self.values.index[0].asfreq("M", how="start")
        months = pd.period_range(first, periods=3 * len(self.values), freq="M")
        return pd.DataFrame(
            {v: monthly_from_quarterly(self.values[v].to_numpy(), interpolation) for v in self.values.columns},
            index=months,
        )


def _periods(text: list[str | None], frequency: Frequency, path: Path, rows: np.ndarray, column: str) -> pd.PeriodIndex:
    out = []
    for value, line in zip(text, rows):
        cell = (value or "").strip()
        period = _parse_period(cell, frequency)
        if period is None:
            example = "2026-09 or 2026-09-30" if frequency == "monthly" else "2026Q3 or 2026-09-30"
            raise InputFileError(
                f"{cell!r} is not a {'month' if frequency == 'monthly' else 'quarter'}" if cell else f"{column} is blank",
                file=path, row=int(line), column=column, hint=f"write periods such as {example}",
            )
        out.append(period)
    return pd.PeriodIndex(out, freq="M" if frequency == "monthly" else "Q")


def _parse_period(cell: str, frequency: Frequency) -> pd.Period | None:
    freq = "M" if frequency == "monthly" else "Q"
    quarter = _QUARTER.match(cell)
    if quarter and frequency == "quarterly":
        return pd.Period(year=int(quarter.group(1)), quarter=int(quarter.group(2)), freq="Q")
    month = _MONTH.match(cell)
    if not month:
        return None
    year, mon, day = int(month.group(1)), int(month.group(2)), month.group(3)
    try:
        stamp = pd.Timestamp(year=year, month=mon, day=int(day) if day else 1)
    except ValueError:
        return None
    return stamp.to_period(freq)


def read_macro_history(path: Path, max_mb: float = 2048.0) -> MacroHistory:
    """Read a macro history file (CSV, XLSX or Parquet).

    Parameters
    ----------
    path : Path
    max_mb : float
        Largest file read, in MiB.

    Returns
    -------
    MacroHistory

    Raises
    ------
    InputFileError
        No period column, a period that does not parse, a gap or a repeat, a variable cell
        that is blank or not a number: the first problem, naming the row and the column.
    """
    path = Path(path)
    check_size(path, max_mb)
    raw = read_raw(path, file_kind(path))
    if raw.malformed:
        bad = raw.malformed[0]
        raise InputFileError(
            f"the line has {len(bad.fields)} fields but the header has {len(raw.headers)}",
            file=path, row=bad.source_row,
        )
    headers = [h.strip() for h in raw.headers]
    found = [h for h in headers if h.casefold() in _PERIOD_COLUMNS]
    if len(found) != 1:
        refuse_other_separators(headers, set(_PERIOD_COLUMNS), str.casefold, path, what="macro history",
                                instead="XLSX or Parquet", least=1)
        raise InputFileError(
            "needs exactly one period column, 'month' or 'quarter'" + (f" (found {', '.join(found)})" if found else ""),
            file=path, row=1, hint="e.g. the header month,unemployment_rate,house_price_index",
        )
    period_column = found[0]
    frequency = _PERIOD_COLUMNS[period_column.casefold()]
    variables = [h for h in headers if h != period_column]
    if not variables:
        raise InputFileError("has no variable columns beside the period", file=path, row=1)
    blank_header = [i for i, h in enumerate(headers) if not h]
    if blank_header:
        raise InputFileError(f"column {blank_header[0] + 1} has no header", file=path, row=1)
    twice = sorted({h for h in headers if headers.count(h) > 1})
    if twice:
        raise InputFileError(f"column {twice[0]!r} appears more than once", file=path, row=1)
    rows = raw.source_row
    if len(rows) == 0:
        raise InputFileError("has no rows of data", file=path)
    periods = _periods(raw.table.column(headers.index(period_column)).to_pylist(), frequency, path, rows, period_column)
    order = np.argsort(periods.asi8, kind="stable")
    step = np.diff(periods.asi8[order])
    if (step == 0).any():
        i = order[int(np.flatnonzero(step == 0)[0]) + 1]
        raise InputFileError(f"period {periods[i]} appears twice", file=path, row=int(rows[i]), column=period_column)
    if (step > 1).any():
        j = int(np.flatnonzero(step > 1)[0])
        missing = periods[order[j]] + 1
        raise InputFileError(
            f"period {missing} is missing (the series jumps from {periods[order[j]]} to {periods[order[j + 1]]})",
            file=path, row=int(rows[order[j + 1]]), column=period_column,
            hint="give every period in between; a regression needs a series without holes",
        )
    values = {}
    for name in variables:
        text = pd.Series(raw.table.column(headers.index(name)).to_pylist(), dtype="str").str.strip()
        good = text.str.fullmatch(NUMBER_PATTERN).fillna(False).astype(bool).to_numpy()
        numbers = pd.to_numeric(text.where(good, "nan"), errors="coerce").to_numpy(np.float64)
        bad = ~good | ~np.isfinite(numbers)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            cell = text.iloc[i]
            reason = "is blank" if cell is None or cell is pd.NA or cell != cell or cell == "" else f"{cell!r} is not a number"
            raise InputFileError(
                f"{name} {reason}", file=path, row=int(rows[i]), column=name,
                hint="every period needs a value for every variable (plain decimals such as 4.25)",
            )
        values[name] = numbers[order]
    frame = pd.DataFrame(values, index=periods[order])
    return MacroHistory(frequency=frequency, values=frame, source=str(path))
