"""Text safety for the files a spreadsheet opens: neutralise would-be formulas.

A leaf module (it imports nothing of ours): intake, the movement (for join keys of ids as a
prior run wrote them) and the report writers all read it, so no stage imports a later one.

Implements
----------
neutralise_text    prefix a quote to text that a spreadsheet would read as a formula
neutralise_frame   the same over every text column (and the header) of a frame
neutralise_table   the same over an Arrow table (a few microseconds a column: wide tapes)
FORMULA_PREFIXES   the leading characters that trigger it
"""

from __future__ import annotations

from typing import Any, overload

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

__all__ = ["FORMULA_PREFIXES", "neutralise_frame", "neutralise_table", "neutralise_text"]

#: Leading characters that make a spreadsheet treat a text value as a formula or command.
FORMULA_PREFIXES: tuple[str, ...] = ("=", "+", "-", "@", "\t", "\r")


@overload
def neutralise_text(values: str) -> str: ...
@overload
def neutralise_text(values: pd.Series) -> pd.Series: ...
@overload
def neutralise_text(values: pd.Index) -> pd.Index: ...


def neutralise_text(values: Any) -> Any:
    """Prefix ``'`` to every text value that starts with ``= + - @``, a tab or a carriage return.

    Numbers, missing values and all other text pass through unchanged. A value already
    neutralised starts with ``'`` and is left alone, so the function is idempotent.

    Parameters
    ----------
    values : str, pandas.Series, pandas.Index or any other scalar
        A scalar, or a Series / Index of (possibly mixed) values.

    Returns
    -------
    The same kind of object, a new one where anything changed.

    Notes
    -----
    A spreadsheet that opens a CSV or XLSX cell beginning with one of these characters may
    evaluate it (``=HYPERLINK(...)``, ``@SUM(...)``, DDE payloads). Prefixing a single quote
    makes it plain text; the quote is visible, which is the point: nothing is hidden.

    References
    ----------
    .. [1] OWASP, "CSV Injection" (owasp.org/www-community/attacks/CSV_Injection).

    Examples
    --------
    >>> neutralise_text('=HYPERLINK("x")')
    '\\'=HYPERLINK("x")'
    >>> neutralise_text("L-001"), neutralise_text(-5.0)
    ('L-001', -5.0)
    >>> neutralise_text(pd.Series(["@cmd", "ok", None, 3])).tolist()
    ["'@cmd", 'ok', None, 3]
    """
    if isinstance(values, str):
        return "'" + values if values.startswith(FORMULA_PREFIXES) else values
    if isinstance(values, pd.Index):
        return pd.Index(neutralise_text(pd.Series(values, dtype=object)), name=values.name)
    if isinstance(values, pd.Series):
        flagged = _flagged(values)
        if not flagged.any():
            return values
        out = values.astype(object) if not _is_text_dtype(values) else values.copy()
        out[flagged] = "'" + values[flagged].astype(str)
        return out
    return values


def _is_text_dtype(series: pd.Series) -> bool:
    return isinstance(series.dtype, pd.StringDtype) or pd.api.types.is_string_dtype(series.dtype)


def _flagged(series: pd.Series) -> np.ndarray:
    """Boolean mask of the text values to neutralise (vectorised over the column)."""
    if pd.api.types.is_numeric_dtype(series.dtype) or pd.api.types.is_bool_dtype(series.dtype):
        return np.zeros(len(series), dtype=bool)
    if pd.api.types.is_datetime64_any_dtype(series.dtype):
        return np.zeros(len(series), dtype=bool)
    if isinstance(series.dtype, pd.StringDtype):  # pandas text: every value is a str or missing
        first = series.str.slice(0, 1)
        return first.isin(FORMULA_PREFIXES).to_numpy(dtype=bool, na_value=False) & series.notna().to_numpy()
    # a missing value is not text; mapping every value avoids a fill of bool into float
    is_str = pd.Series([isinstance(v, str) for v in series.to_numpy(dtype=object)], index=series.index, dtype=bool)
    if not is_str.any():
        return np.zeros(len(series), dtype=bool)
    first = series[is_str].astype(str).str[:1]
    mask = np.zeros(len(series), dtype=bool)
    mask[np.flatnonzero(is_str.to_numpy())] = first.isin(FORMULA_PREFIXES).to_numpy()
    return mask


def neutralise_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A new frame with every text column and every column name passed through :func:`neutralise_text`.

    Examples
    --------
    >>> f = pd.DataFrame({"loan_id": ["=1+1", "A"], "balance": [-1.0, 2.0], "+x": ["a", "b"]})
    >>> g = neutralise_frame(f)
    >>> g["loan_id"].tolist(), g["balance"].tolist(), list(g.columns)
    (["'=1+1", 'A'], [-1.0, 2.0], ['loan_id', 'balance', "'+x"])
    """
    result = frame.copy()
    for position in range(frame.shape[1]):
        column = frame.iloc[:, position]
        cleaned = neutralise_text(column)
        if cleaned is not column:
            result.isetitem(position, cleaned)
    result.columns = [neutralise_text(str(c)) if isinstance(c, str) else c for c in frame.columns]
    return result


def neutralise_table(table: pa.Table) -> pa.Table:
    """:func:`neutralise_frame` for an Arrow table: its text columns and its column names.

    Arrow compute kernels over each text column: a 10,000-column tape costs a fraction of a
    second here, against minutes through pandas one column at a time.

    Examples
    --------
    >>> t = pa.table({"loan_id": ["=1+1", "A", None], "balance": [-1.0, 2.0, 3.0], "+x": ["a", "b", "c"]})
    >>> u = neutralise_table(t)
    >>> u.column("loan_id").to_pylist(), u.column("balance").to_pylist(), u.column_names
    (["'=1+1", 'A', None], [-1.0, 2.0, 3.0], ['loan_id', 'balance', "'+x"])
    """
    columns = []
    for column in table.columns:
        kind = column.type
        if pa.types.is_string(kind) or pa.types.is_large_string(kind):
            prefixes = pa.array(FORMULA_PREFIXES, kind)
            flagged = pc.is_in(pc.utf8_slice_codeunits(column, 0, 1), value_set=prefixes)
            if pc.any(flagged).as_py():
                quoted = pc.binary_join_element_wise(pa.scalar("'", kind), column, pa.scalar("", kind))
                column = pc.if_else(flagged, quoted, column)
        columns.append(column)
    names = [neutralise_text(name) for name in table.column_names]
    return pa.table(columns, names=names)
