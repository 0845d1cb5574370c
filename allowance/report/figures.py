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

Figures by group
----------------
Nearly every figure is a sum over the loans of a segment, a stage, POCI or not, a
measurement: the loans are given one integer code for their combination of these labels
(:data:`GROUP_COLUMNS`, factorised once), each money column is added up by code once, in
exact int64 cents (:func:`allowance.money.cents_by_group`), and a figure is the sum of the
codes its criteria select. A workbook's figures thus cost one pass over the book a column,
not one a figure (at a million loans, hundreds of passes). Criteria on other columns are
matched loan by loan.

A book computed part by part (:mod:`allowance.partitioned`) has no loan frame: its loans
come as their sums by segment, stage, POCI flag and measurement, each row counting
``loan_count`` loans. ``LoanRefs(sums, count="loan_count")`` takes such a frame: money is
summed as for loans (the rows' cents are the loans' cents added up) and a count adds up the
rows' counts, so every figure over those labels is the loan frame's, exactly.

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
from functools import reduce
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa

from allowance.money import cents_by_group
from allowance.report.cells import clean_text
from allowance.report.xlsx import Sheet, col_letter

__all__ = ["GROUP_COLUMNS", "Figure", "Ledger", "LoanRefs", "needs_exact_match", "quote_sheet"]

#: the label columns the workbooks' criteria name; figures over them are sums over groups
GROUP_COLUMNS: tuple[str, ...] = ("segment", "stage", "poci", "measurement")
#: more combinations than this (labels that hardly repeat): figures are matched loan by loan
_MAX_GROUPS = 1 << 20

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
                 like: "LoanRefs | None" = None, count: str | None = None) -> None:
        self.loans = loans
        # ``count``: a column of how many loans each row stands for (sums by group, not loans);
        # such rows are never a loan sheet, so their figures are values
        self.counts = None if count is None else loans[count].to_numpy(dtype=np.int64)
        self.live = live and len(loans) > 0 and count is None
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
        # the loans' codes by group ("grouping"), and each money column's cents by group
        self._grouped_by: dict[str, Any] = {} if like is None else like._grouped_by
        self._group_cents: dict[str, np.ndarray] = {} if like is None else like._group_cents

    def _value(self, column: str | None, criteria: list[tuple[str, str, Any]]) -> float:
        """The sum of a money column in cents (None: the count) over the loans meeting ``criteria``."""
        key = (column, tuple((c, v) for c, _, v in criteria))
        if key not in self._values:
            grouped = self._grouped(column, criteria)
            if grouped is not None:
                self._values[key] = grouped
                return grouped
            mask = self.mask(criteria) if criteria else None
            if column is None and self.counts is not None:
                self._values[key] = float(int(self.counts.sum() if mask is None else self.counts.sum(where=mask)))
            elif column is None:
                self._values[key] = float(len(self.loans) if mask is None else np.count_nonzero(mask))
            else:
                cents = self._money(column)
                self._values[key] = int(cents.sum() if mask is None else cents.sum(where=mask)) / 100.0
        return self._values[key]

    def _grouping(self) -> dict[str, Any] | None:
        """Each loan's code for its combination of :data:`GROUP_COLUMNS` labels (a missing label
        its own code, matched by no criterion), the loans of each code counted; None when the
        combinations are too many to list."""
        if "grouping" not in self._grouped_by:
            columns = [c for c in GROUP_COLUMNS if c in self.loans.columns]
            axes = [self._axis(c) for c in columns]
            dims = [len(labels) + 1 for _, labels in axes]  # code 0: a missing label
            grouping = None
            if float(np.prod(dims, dtype=np.float64)) <= _MAX_GROUPS:
                # mixed radix, digit by digit in place (int32: fewer than 2**20 combinations)
                combo = np.zeros(len(self.loans), dtype=np.int32)
                for (codes, _), size in zip(axes, dims):
                    combo *= size
                    combo += codes
                    combo += 1
                combo = combo.astype(np.intp)
                size = int(np.prod(dims, dtype=np.int64))
                counts = np.bincount(combo, minlength=size) if self.counts is None else \
                    np.rint(np.bincount(combo, weights=self.counts, minlength=size)).astype(np.int64)
                grouping = {"columns": columns, "labels": [labels for _, labels in axes], "dims": dims,
                            "combo": combo, "counts": counts}
            self._grouped_by["grouping"] = grouping
        return self._grouped_by["grouping"]

    def _axis(self, column: str) -> tuple[np.ndarray, np.ndarray]:
        """A label column as integer codes (-1: missing) and the label of each code."""
        series = self.loans[column]
        if pd.api.types.is_bool_dtype(series.dtype) and isinstance(series.dtype, np.dtype):
            return series.to_numpy().view(np.int8), np.array([False, True])
        if pd.api.types.is_integer_dtype(series.dtype) and isinstance(series.dtype, np.dtype) and len(series):
            values = series.to_numpy()
            low, high = int(values.min()), int(values.max())
            if high - low < 256:  # small whole numbers (stages): the value less the least is the code
                return (values.astype(np.int64) - low).astype(np.int16), np.arange(low, high + 1)
        if pd.api.types.is_numeric_dtype(series.dtype) or pd.api.types.is_bool_dtype(series.dtype):
            codes, uniques = pd.factorize(series)
            return codes, np.asarray(uniques)
        codes, lookup = self._codes(column)
        return codes, np.array(list(lookup), dtype=object)

    def _allowed(self, grouping: dict[str, Any], at: int, value: Any) -> np.ndarray:
        """Which codes of the ``at``-th group column a criterion ``== value`` keeps: those of the
        loans :meth:`_compare` keeps (numbers and flags compared as numbers, text through the
        column's labels); a missing label never."""
        column = grouping["columns"][at]
        allowed = np.zeros(grouping["dims"][at], dtype=bool)
        series = self.loans[column]
        if pd.api.types.is_numeric_dtype(series.dtype) or pd.api.types.is_bool_dtype(series.dtype):
            allowed[1:] = grouping["labels"][at] == value
        else:
            code = self._codes(column)[1].get(value)
            if code is not None:
                allowed[code + 1] = True
        return allowed

    def _grouped(self, column: str | None, criteria: list[tuple[str, str, Any]]) -> float | None:
        """:meth:`_value` from the sums by group, or None when a criterion names another column."""
        grouping = self._grouping()
        if grouping is None or any(c not in grouping["columns"] for c, _, _ in criteria):
            return None
        keep = [np.ones(d, dtype=bool) for d in grouping["dims"]]
        for c, _, value in criteria:
            at = grouping["columns"].index(c)
            keep[at] &= self._allowed(grouping, at, value)
        chosen = reduce(np.multiply.outer, keep).reshape(-1) if keep else np.ones(1, dtype=bool)
        if column is None:
            return float(int(grouping["counts"][chosen].sum()))
        if column not in self._group_cents:
            # the column's cents by group, exact; its cents are not kept (a million loans: 8 MB a column)
            self._group_cents[column] = np.array(
                cents_by_group(self._cents_of(column), grouping["combo"], len(grouping["counts"])), dtype=object)
        return int(self._group_cents[column][chosen].sum()) / 100.0

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

    def labels(self, column: str) -> tuple[list[Any], bool]:
        """The distinct labels of ``column`` (what ``Series.dropna().unique()`` gives, in order
        of first appearance) and whether any loan has none, from the codes kept for the figures."""
        codes, lookup = self._codes(column)
        return list(lookup), bool(len(codes)) and int(codes.min()) < 0

    def labels_where(self, column: str, where: np.ndarray) -> set[Any]:
        """The labels of ``column`` on the loans where ``where`` is True (through integer codes)."""
        codes, lookup = self._codes(column)
        seen = np.bincount(codes[where & (codes >= 0)], minlength=len(lookup)) > 0
        return {label for label, code in lookup.items() if seen[code]}

    def _codes(self, column: str) -> tuple[np.ndarray, dict]:
        if column not in self._arrays:
            self._arrays[column] = _factorised(self.loans[column])
        return self._arrays[column]

    def _money(self, column: str) -> np.ndarray:
        if column not in self._cents:
            self._cents[column] = self._cents_of(column)
        return self._cents[column]

    def _cents_of(self, column: str) -> np.ndarray:
        """A money column in whole cents (missing: 0)."""
        cents = pd.to_numeric(self.loans[column], errors="raise").to_numpy(dtype=np.float64, na_value=0.0) * 100.0
        return np.rint(cents, out=cents).astype(np.int64)

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


def _factorised(series: pd.Series) -> tuple[np.ndarray, dict]:
    """Integer codes of a label column (-1: missing) and each label's code, as
    :func:`pandas.factorize` gives them (codes in order of first appearance); Arrow-backed text
    through Arrow's dictionary encoding (several times faster on a million loans)."""
    dtype = series.dtype
    if isinstance(dtype, pd.StringDtype) and dtype.storage == "pyarrow":
        array = pa.array(series.array)
        encoded = (array.combine_chunks() if isinstance(array, pa.ChunkedArray) else array).dictionary_encode()
        codes = encoded.indices.fill_null(-1).to_numpy(zero_copy_only=False)
        return codes, {label: i for i, label in enumerate(encoded.dictionary.to_pylist())}
    codes, uniques = pd.factorize(series)
    return codes, {u: i for i, u in enumerate(uniques)}


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
