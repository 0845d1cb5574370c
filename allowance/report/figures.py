"""Figures that are live formulas over the loan sheet, with the value Python computed for each.

Implements
----------
Figure     a formula (or None) and its value
LoanRefs   SUM / SUMIFS / COUNTIFS over the loan-detail sheet, or plain values when the
           loan detail is not in the workbook
Ledger     records every figure written, by cell, so tests can compare a recalculation
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from openpyxl.utils import get_column_letter

from allowance.report.xlsx import Formula, cell_value

__all__ = ["Figure", "Ledger", "LoanRefs"]


@dataclass(frozen=True)
class Figure:
    """A figure for one cell: ``formula`` when the workbook can compute it, and its ``value``."""

    formula: str | None
    value: float


def quote_sheet(name: str) -> str:
    """A sheet name as a formula reference needs it."""
    return name if name.isidentifier() else "'" + name.replace("'", "''") + "'"


class LoanRefs:
    """Formulas over the loan sheet (``live``) or the same figures as values.

    Criteria are ``(column, cell reference, python value)``: the formula compares the loan
    column with the label cell on the same row, so a reviewer can follow it; Python
    compares with the value.
    """

    def __init__(self, loans: pd.DataFrame, *, live: bool, sheet: str = "Loans") -> None:
        self.loans = loans
        self.live = live and len(loans) > 0
        self.sheet = quote_sheet(sheet)
        self.last_row = len(loans) + 1
        self.letters = {name: get_column_letter(j + 1) for j, name in enumerate(loans.columns)}
        self._arrays: dict[str, tuple[np.ndarray, dict]] = {}
        self._cents: dict[str, np.ndarray] = {}

    def _matches(self, column: str, value: Any) -> np.ndarray:
        """Loans whose ``column`` equals ``value`` (text through integer codes: fast on big tapes)."""
        series = self.loans[column]
        if pd.api.types.is_numeric_dtype(series.dtype) or pd.api.types.is_bool_dtype(series.dtype):
            return series.to_numpy() == value
        if column not in self._arrays:
            codes, uniques = pd.factorize(series)
            self._arrays[column] = (codes, {u: i for i, u in enumerate(uniques)})
        codes, lookup = self._arrays[column]
        code = lookup.get(value)
        return codes == code if code is not None else np.zeros(len(series), dtype=bool)

    def _money(self, column: str) -> np.ndarray:
        if column not in self._cents:
            values = pd.to_numeric(self.loans[column], errors="raise").to_numpy(dtype=np.float64, na_value=0.0)
            self._cents[column] = np.rint(values * 100.0).astype(np.int64)
        return self._cents[column]

    def has(self, column: str) -> bool:
        return column in self.loans.columns

    def range(self, column: str) -> str:
        letter = self.letters[column]
        return f"{self.sheet}!${letter}$2:${letter}${self.last_row}"

    def _mask(self, criteria: list[tuple[str, str, Any]]) -> np.ndarray:
        mask = np.ones(len(self.loans), dtype=bool)
        for column, _, value in criteria:
            mask &= self._matches(column, value)
        return mask

    def total(self, column: str, criteria: list[tuple[str, str, Any]] | None = None) -> Figure:
        """SUM (no criteria) or SUMIFS of a money column."""
        if not self.has(column):
            return Figure(None, 0.0)
        criteria = criteria or []
        value = int(self._money(column)[self._mask(criteria)].sum()) / 100.0
        if not self.live:
            return Figure(None, value)
        if not criteria:
            return Figure(f"=SUM({self.range(column)})", value)
        parts = ",".join(f"{self.range(c)},{ref}" for c, ref, _ in criteria)
        return Figure(f"=SUMIFS({self.range(column)},{parts})", value)

    def count(self, criteria: list[tuple[str, str, Any]] | None = None) -> Figure:
        """Number of loans (COUNTA of the loan id) or COUNTIFS."""
        criteria = criteria or []
        value = float(self._mask(criteria).sum())
        if not self.live:
            return Figure(None, value)
        if not criteria:
            return Figure(f"=COUNTA({self.range(self.loans.columns[0])})", value)
        parts = ",".join(f"{self.range(c)},{ref}" for c, ref, _ in criteria)
        return Figure(f"=COUNTIFS({parts})", value)


@dataclass
class Ledger:
    """Every figure written: ``"Sheet!B7" -> value``, and which of them are formulas."""

    values: dict[str, float] = field(default_factory=dict)
    formulas: dict[str, str] = field(default_factory=dict)

    def put(self, ws: Any, row: int, col: int, figure: Figure | float | None, number_format: str | None = None,
            *, bold: bool = False) -> str:
        """Write a figure (formula when it has one, else its value) and record it; return its reference."""
        ref = f"{get_column_letter(col)}{row}"
        if isinstance(figure, Figure):
            value = figure.value
            cell = ws.cell(row=row, column=col, value=Formula(figure.formula) if figure.formula else cell_value(value))
            key = f"{ws.title}!{ref}"
            self.values[key] = value
            if figure.formula:
                self.formulas[key] = figure.formula
        else:
            value = cell_value(figure)
            cell = ws.cell(row=row, column=col, value=value)
            if isinstance(value, (int, float)) and not isinstance(value, bool):
                self.values[f"{ws.title}!{ref}"] = float(value)
        if number_format:
            cell.number_format = number_format
        if bold:
            from allowance.report.xlsx import TOTAL_FONT

            cell.font = TOTAL_FONT
        return ref

    def local(self, ws: Any, ref: str) -> float:
        return self.values[f"{ws.title}!{ref}"]
