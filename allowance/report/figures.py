"""Figures that are live formulas over the loan sheet, each stored with the value Python computed.

Implements
----------
Figure     a formula (or None) and its value
LoanRefs   SUM / SUMIFS / COUNTIFS over the loan-detail sheet (exact-match SUMPRODUCT for
           labels a criterion would misread), or plain values when the loan detail is not
           in the workbook
Ledger     writes figures (formula + cached value) and records each by cell, so tests can
           compare a recalculation and a non-calculating read with Python's figures
needs_exact_match  whether a label must be compared exactly rather than as a SUMIFS criterion

Why exact matching
------------------
A SUMIFS / COUNTIFS criterion is not plain text: a leading ``<``, ``>`` or ``=`` is a
comparison, ``*``, ``?`` and ``~`` are wildcards, text that looks like a number, a date or
TRUE / FALSE matches those, and matching ignores case. A segment named ``<auto``, ``a*`` or
``2026-01`` would be summed with the wrong loans. Such labels (and labels that differ only by
case) are compared with ``EXACT`` inside ``SUMPRODUCT``, which compares text as text, case
included, as Python does.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from allowance.report.cells import clean_text
from allowance.report.xlsx import Sheet, col_letter

__all__ = ["Figure", "Ledger", "LoanRefs", "needs_exact_match", "quote_sheet"]

# A label every SUMIFS implementation reads as itself: a letter first, then letters, digits,
# spaces and a few punctuation marks that carry no meaning in a criterion.
_PLAIN_LABEL = re.compile(r"[A-Za-z][A-Za-z0-9 _.\-/()]*")


@dataclass(frozen=True)
class Figure:
    """A figure for one cell: ``formula`` when the workbook can compute it, and its ``value``."""

    formula: str | None
    value: float


def quote_sheet(name: str) -> str:
    """A sheet name as a formula reference needs it."""
    return name if name.isidentifier() else "'" + name.replace("'", "''") + "'"


def needs_exact_match(label: str, others: set[str] = frozenset()) -> bool:  # type: ignore[assignment]
    """Whether a text label must be matched with EXACT rather than as a SUMIFS criterion.

    ``others`` are the other labels of the same column (labels equal but for case collide).

    Examples
    --------
    >>> [needs_exact_match(x) for x in ("auto", "heloc 2", "<auto", "=x", "a*", "2026-01", "TRUE")]
    [False, False, True, True, True, True, True]
    >>> needs_exact_match("Auto", {"auto", "Auto"})
    True
    """
    if not _PLAIN_LABEL.fullmatch(label) or label.upper() in ("TRUE", "FALSE"):
        return True
    folded = label.casefold()
    return any(o != label and o.casefold() == folded for o in others)


class LoanRefs:
    """Formulas over the loan sheet (``live``) or the same figures as values.

    Criteria are ``(column, cell reference, python value)``: the formula compares the loan
    column with the label cell on the same row, so a reviewer can follow it; Python compares
    with the value. ``first_row`` / ``last_row`` are the loan rows of the loan sheet.
    """

    def __init__(self, loans: pd.DataFrame, *, live: bool, sheet: str = "Loans", first_row: int = 2,
                 like: "LoanRefs | None" = None) -> None:
        self.loans = loans
        self.live = live and len(loans) > 0
        self.sheet = quote_sheet(sheet)
        self.first_row = first_row
        self.last_row = first_row + len(loans) - 1
        self.letters = {name: col_letter(j + 1) for j, name in enumerate(loans.columns)}
        # ``like``: the same loans' figures for another workbook; what Python computed is shared
        # (every figure is a pass over the book: at a million loans, seconds)
        self._arrays: dict[str, tuple[np.ndarray, dict]] = {} if like is None else like._arrays
        self._cents: dict[str, np.ndarray] = {} if like is None else like._cents
        self._labels: dict[str, set[str]] = {} if like is None else like._labels
        self._seen: dict[tuple[str, Any], np.ndarray] = {} if like is None else like._seen
        self._values: dict[tuple, float] = {} if like is None else like._values

    def _value(self, column: str | None, criteria: list[tuple[str, str, Any]]) -> float:
        """The sum of a money column in cents (None: the count) over the loans meeting ``criteria``."""
        key = (column, tuple((c, v) for c, _, v in criteria))
        if key not in self._values:
            mask = self.mask(criteria) if criteria else None
            if column is None:
                self._values[key] = float(len(self.loans) if mask is None else np.count_nonzero(mask))
            else:
                cents = self._money(column)
                self._values[key] = int(cents.sum() if mask is None else cents.sum(where=mask)) / 100.0
        return self._values[key]

    def _matches(self, column: str, value: Any) -> np.ndarray:
        """Loans whose ``column`` equals ``value`` (text through integer codes: fast on big tapes)."""
        key = (column, value)
        if key not in self._seen:
            self._seen[key] = self._compare(column, value)
        return self._seen[key]

    def _compare(self, column: str, value: Any) -> np.ndarray:
        series = self.loans[column]
        if pd.api.types.is_numeric_dtype(series.dtype) or pd.api.types.is_bool_dtype(series.dtype):
            return series.to_numpy() == value
        codes, lookup = self._codes(column)
        code = lookup.get(value)
        return codes == code if code is not None else np.zeros(len(series), dtype=bool)

    def labels_where(self, column: str, where: np.ndarray) -> set[Any]:
        """The labels of ``column`` on the loans where ``where`` is True (through integer codes)."""
        codes, lookup = self._codes(column)
        seen = np.bincount(codes[where & (codes >= 0)], minlength=len(lookup)) > 0
        return {label for label, code in lookup.items() if seen[code]}

    def _codes(self, column: str) -> tuple[np.ndarray, dict]:
        if column not in self._arrays:
            codes, uniques = pd.factorize(self.loans[column])
            self._arrays[column] = (codes, {u: i for i, u in enumerate(uniques)})
        return self._arrays[column]

    def _money(self, column: str) -> np.ndarray:
        if column not in self._cents:
            values = pd.to_numeric(self.loans[column], errors="raise").to_numpy(dtype=np.float64, na_value=0.0)
            self._cents[column] = np.rint(values * 100.0).astype(np.int64)
        return self._cents[column]

    def has(self, column: str) -> bool:
        return column in self.loans.columns

    def range(self, column: str) -> str:
        letter = self.letters[column]
        return f"{self.sheet}!${letter}${self.first_row}:${letter}${self.last_row}"

    def mask(self, criteria: list[tuple[str, str, Any]]) -> np.ndarray:
        mask = np.ones(len(self.loans), dtype=bool)
        for column, _, value in criteria:
            mask &= self._matches(column, value)
        return mask

    def _exact(self, column: str, value: Any) -> bool:
        if not isinstance(value, str):
            return False
        if column not in self._labels:
            self._labels[column] = {clean_text(v) for v in pd.unique(self.loans[column].dropna()) if isinstance(v, str)}
        return needs_exact_match(clean_text(value), self._labels[column])

    def _criteria_formula(self, criteria: list[tuple[str, str, Any]], values: str | None) -> str:
        """SUMIFS / COUNTIFS, or SUMPRODUCT with EXACT when a label is not a plain criterion."""
        if any(self._exact(c, v) for c, _, v in criteria):
            terms = [f"EXACT({self.range(c)},{ref})" if self._exact(c, v) else f"({self.range(c)}={ref})"
                     for c, ref, v in criteria]
            product = "*".join(terms)
            return f"=SUMPRODUCT({product},{values})" if values else f"=SUMPRODUCT({product}*1)"
        parts = ",".join(f"{self.range(c)},{ref}" for c, ref, _ in criteria)
        return f"=SUMIFS({values},{parts})" if values else f"=COUNTIFS({parts})"

    def total(self, column: str, criteria: list[tuple[str, str, Any]] | None = None) -> Figure:
        """SUM (no criteria) or SUMIFS of a money column."""
        if not self.has(column):
            return Figure(None, 0.0)
        criteria = criteria or []
        value = self._value(column, criteria)
        if not self.live:
            return Figure(None, value)
        if not criteria:
            return Figure(f"=SUM({self.range(column)})", value)
        return Figure(self._criteria_formula(criteria, self.range(column)), value)

    def count(self, criteria: list[tuple[str, str, Any]] | None = None) -> Figure:
        """Number of loans (COUNTA of the loan id) or COUNTIFS."""
        criteria = criteria or []
        value = self._value(None, criteria)
        if not self.live:
            return Figure(None, value)
        if not criteria:
            return Figure(f"=COUNTA({self.range(self.loans.columns[0])})", value)
        return Figure(self._criteria_formula(criteria, None), value)


@dataclass
class Ledger:
    """Every figure written: ``"Sheet!B7" -> value``, and which of them are formulas."""

    values: dict[str, float] = field(default_factory=dict)
    formulas: dict[str, str] = field(default_factory=dict)

    def put(self, sheet: Sheet, row: int, col: int, figure: Figure | float | None, kind: str = "money",
            *, total: bool = False) -> str:
        """Write a figure (a formula with its value cached, or the value) and record it; return its cell."""
        ref = f"{col_letter(col)}{row}"
        key = f"{sheet.name}!{ref}"
        if isinstance(figure, Figure):
            if kind == "money":  # a difference of cent amounts is a cent amount: no binary noise
                figure = Figure(figure.formula, round(float(figure.value), 2))
            if figure.formula:
                sheet.formula(row, col, figure.formula, figure.value, kind, total=total)
                self.formulas[key] = figure.formula
            else:
                sheet.put(row, col, figure.value, kind, total=total)
            self.values[key] = float(figure.value)
            return ref
        sheet.put(row, col, figure, kind, total=total)
        if isinstance(figure, (int, float, np.integer, np.floating)) and not isinstance(figure, bool) \
                and np.isfinite(figure):
            self.values[key] = float(figure)
        return ref

    def local(self, sheet: Sheet, ref: str) -> float:
        return self.values[f"{sheet.name}!{ref}"]
