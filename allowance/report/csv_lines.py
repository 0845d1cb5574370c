"""CSV lines of text columns and whole-cent columns, formatted by a compiled loop.

Implements
----------
FITS_CENTS   the largest amount in cents (exclusive) the loop formats as Arrow would
csv_lines    the CSV text of rows given as text codes and cents: the bytes Arrow's writer gives
table_lines  the CSV text of an Arrow table's rows, its whole-cent float columns formatted here

A table of text and money made from whole cents (the movement loan by loan: a million loans,
two frameworks, seventeen money columns) spends most of Arrow's CSV writing on formatting
each ``cents / 100`` float in its shortest form (about 70 ns a value). From the cents
themselves the text is ``units[.f[f]]`` (trailing zeros dropped), a few digit steps. The
bytes are Arrow's, as :func:`allowance.report.files` writes with ``quoting_style="needed"``:

* text: every value in double quotes, a quote inside doubled; a blank (missing) value empty;
* money: the shortest decimal that reads back as the float ``cents / 100``, which for
  ``|cents| < 10**12`` is ``units`` and up to two decimals, the trailing zeros dropped (the
  doubles are then 2**-14 apart or closer, so no shorter decimal reads back the same; Arrow
  switches to exponent form from 1e10, ``1e+10``), ``-`` before a negative amount and
  ``0`` for zero;
* ``,`` between fields, ``\\n`` after each row.

Rows holding an amount beyond :data:`FITS_CENTS` are for the caller to give Arrow.
"""

from __future__ import annotations

import numba
import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from allowance.jit import CACHE

__all__ = ["FITS_CENTS", "csv_lines", "table_lines"]

#: amounts formatted here: |cents| below this (Arrow writes 1e10 and above in exponent form)
FITS_CENTS = 10**12

_QUOTE, _COMMA, _MINUS, _POINT, _NEWLINE, _ZERO = 34, 44, 45, 46, 10, 48


@numba.njit(cache=CACHE, nogil=True)
def _lines(data: np.ndarray, offsets: np.ndarray, first: np.ndarray, codes: np.ndarray, cents: np.ndarray,
           out: np.ndarray) -> int:  # pragma: no cover - compiled (tested through csv_lines)
    """Row i: text column j's label ``codes[i, j]`` (bytes ``data[offsets[first[j] + code] :
    offsets[first[j] + code + 1]]``, -1 blank), then each cents column ``cents[i, :]``; the
    bytes used of ``out``. Row-major: a row's fields are side by side in memory."""
    n, k = codes.shape
    m = cents.shape[1]
    digits = np.empty(24, dtype=np.uint8)
    pos = 0
    for i in range(n):
        for j in range(k):
            if j:
                out[pos] = _COMMA
                pos += 1
            code = codes[i, j]
            if code < 0:
                continue
            out[pos] = _QUOTE
            pos += 1
            for b in range(offsets[first[j] + code], offsets[first[j] + code + 1]):
                if data[b] == _QUOTE:
                    out[pos] = _QUOTE
                    pos += 1
                out[pos] = data[b]
                pos += 1
            out[pos] = _QUOTE
            pos += 1
        for j in range(m):
            if k or j:
                out[pos] = _COMMA
                pos += 1
            c = cents[i, j]
            if c == 0:  # most lines of most loans: no digits to work out
                out[pos] = _ZERO
                pos += 1
                continue
            if c < 0:
                out[pos] = _MINUS
                pos += 1
                c = -c
            units, frac = c // 100, c % 100
            d = 0
            while True:
                digits[d] = _ZERO + units % 10
                d += 1
                units //= 10
                if units == 0:
                    break
            while d:
                d -= 1
                out[pos] = digits[d]
                pos += 1
            if frac:
                out[pos] = _POINT
                out[pos + 1] = _ZERO + frac // 10
                pos += 2
                if frac % 10:
                    out[pos] = _ZERO + frac % 10
                    pos += 1
        out[pos] = _NEWLINE
        pos += 1
    return pos


def _text_buffers(labels: pa.Array) -> tuple[np.ndarray, np.ndarray]:
    """A text array's bytes and its n + 1 offsets into them (int64, from 0)."""
    labels = labels.cast(pa.large_string())
    buffers = labels.buffers()
    offsets = np.frombuffer(buffers[1], dtype=np.int64)[labels.offset: labels.offset + len(labels) + 1]
    data = np.frombuffer(buffers[2], dtype=np.uint8) if buffers[2] is not None else np.zeros(0, dtype=np.uint8)
    return data[offsets[0]: offsets[-1]], offsets - offsets[0]


def csv_lines(text: list[tuple[pa.Array, np.ndarray]], cents: list[np.ndarray]) -> memoryview | None:
    """The CSV rows (no header) of text columns, then money columns, as Arrow writes them with
    ``quoting_style="needed"`` (see the module docstring).

    ``text``: each column as its labels (Arrow text, already neutralised; a missing label is
    written blank) and one code per row into them (-1: blank); ``cents``: each money column in
    whole cents, written as currency units. None when an amount is beyond :data:`FITS_CENTS`
    (the caller writes those rows otherwise).
    """
    n = len(cents[0]) if cents else len(text[0][1])
    money = np.empty((n, len(cents)), dtype=np.int64)
    for j, column in enumerate(cents):
        money[:, j] = column
    if n and len(cents) and np.abs(money).max() >= FITS_CENTS:
        return None
    datas, offsets, first, codes = [], [], [], np.empty((n, len(text)), dtype=np.int64)
    base = start = 0
    widest = 0
    for j, (labels, picked) in enumerate(text):
        data, offs = _text_buffers(labels)
        valid = labels.is_valid().to_numpy(zero_copy_only=False)
        picked = np.asarray(picked, dtype=np.int64)
        blank = picked < 0
        if len(valid) and not valid.all():  # a missing label is written blank, as a missing value
            blank |= ~valid[np.maximum(picked, 0)]
        codes[:, j] = np.where(blank, -1, picked)
        datas.append(data)
        offsets.append(offs + base)
        first.append(start)
        base += len(data)
        start += len(offs)
        lengths = np.diff(offs)
        widest += 2 * (int(lengths[picked[picked >= 0]].sum()) if lengths.size else 0) + 3 * n
    size = widest + n * (len(cents) * 17 + 1)  # a money field: comma, sign, 12 digits, point, 2 decimals
    out = np.empty(size, dtype=np.uint8)
    used = _lines(np.concatenate(datas) if datas else np.zeros(0, dtype=np.uint8),
                  np.concatenate(offsets) if offsets else np.zeros(0, dtype=np.int64),
                  np.array(first, dtype=np.int64), codes, money, out)
    return memoryview(out[:used])


#: how :func:`table_lines` writes a column: its text as given, a whole-cent amount, quoted text
_AS_GIVEN, _CENTS, _QUOTED = 0, 1, 2


@numba.njit(cache=CACHE, nogil=True)
def _table_lines(kinds: np.ndarray, data: np.ndarray, offsets: np.ndarray, first: np.ndarray, cents: np.ndarray,
                 slot: np.ndarray, blank: np.ndarray, out: np.ndarray) -> int:  # pragma: no cover - compiled
    """Row i, field j: blank (``blank[i, j]``) empty; else by ``kinds[j]``: the bytes
    ``data[offsets[first[j] + i] : offsets[first[j] + i + 1]]`` as given, or quoted (a quote
    inside doubled), or the amount ``cents[i, slot[j]]`` in units; the bytes used of ``out``."""
    n, k = blank.shape
    digits = np.empty(24, dtype=np.uint8)
    pos = 0
    for i in range(n):
        for j in range(k):
            if j:
                out[pos] = _COMMA
                pos += 1
            if blank[i, j]:
                continue
            kind = kinds[j]
            if kind == _CENTS:
                c = cents[i, slot[j]]
                if c == 0:
                    out[pos] = _ZERO
                    pos += 1
                    continue
                if c < 0:
                    out[pos] = _MINUS
                    pos += 1
                    c = -c
                units, frac = c // 100, c % 100
                d = 0
                while True:
                    digits[d] = _ZERO + units % 10
                    d += 1
                    units //= 10
                    if units == 0:
                        break
                while d:
                    d -= 1
                    out[pos] = digits[d]
                    pos += 1
                if frac:
                    out[pos] = _POINT
                    out[pos + 1] = _ZERO + frac // 10
                    pos += 2
                    if frac % 10:
                        out[pos] = _ZERO + frac % 10
                        pos += 1
                continue
            start, stop = offsets[first[j] + i], offsets[first[j] + i + 1]
            if kind == _QUOTED:
                out[pos] = _QUOTE
                pos += 1
                for b in range(start, stop):
                    if data[b] == _QUOTE:
                        out[pos] = _QUOTE
                        pos += 1
                    out[pos] = data[b]
                    pos += 1
                out[pos] = _QUOTE
                pos += 1
            else:
                for b in range(start, stop):
                    out[pos] = data[b]
                    pos += 1
        out[pos] = _NEWLINE
        pos += 1
    return pos


def _whole_cents(values: np.ndarray) -> np.ndarray | None:
    """The amounts as whole cents when each one is the float ``cents / 100`` of a whole number
    of cents below :data:`FITS_CENTS` (and no zero is negative: Arrow writes ``-0``); else None."""
    cents = np.rint(values * 100.0)
    if not (np.abs(cents) < FITS_CENTS).all() or not (cents / 100.0 == values).all():
        return None
    if np.signbit(values[values == 0.0]).any():
        return None
    return cents.astype(np.int64)


def table_lines(table: pa.Table) -> memoryview | None:
    """The CSV rows (no header) of an Arrow table, the bytes Arrow's writer gives with
    ``quoting_style="needed"`` (see the module docstring): text quoted, a float column whose
    every value is a whole number of cents formatted from its cents here, any other number or
    flag as Arrow's cast to text gives it (the writer's own formatting); a missing value empty.
    None for a column of another type (the caller gives the table to Arrow)."""
    n, k = table.num_rows, table.num_columns
    kinds = np.zeros(k, dtype=np.int64)
    first = np.zeros(k, dtype=np.int64)
    slot = np.zeros(k, dtype=np.int64)
    blank = np.zeros((n, k), dtype=np.uint8)
    datas, offsets, amounts = [], [], []
    base = start = size = 0
    for j, column in enumerate(table.columns):
        kind = column.type
        array = column.combine_chunks() if column.num_chunks != 1 else column.chunk(0)
        if array.null_count:
            blank[:, j] = array.is_null().to_numpy(zero_copy_only=False)
        if pa.types.is_floating(kind) and kind == pa.float64():
            values = array.to_numpy(zero_copy_only=False)
            cents = _whole_cents(values[blank[:, j] == 0]) if array.null_count else _whole_cents(values)
            if cents is not None:
                if array.null_count:
                    full = np.zeros(n, dtype=np.int64)
                    full[blank[:, j] == 0] = cents
                    cents = full
                kinds[j], slot[j] = _CENTS, len(amounts)
                amounts.append(cents)
                size += 16 * n  # sign, 12 digits, point, 2 decimals
                continue
            array = pc.cast(array, pa.large_string())
        elif pa.types.is_integer(kind) or pa.types.is_boolean(kind) or pa.types.is_floating(kind):
            array = pc.cast(array, pa.large_string())
        elif pa.types.is_string(kind) or pa.types.is_large_string(kind):
            kinds[j] = _QUOTED
        else:
            return None
        data, offs = _text_buffers(array)
        datas.append(data)
        offsets.append(offs + base)
        first[j] = start
        base += len(data)
        start += len(offs)
        size += (2 * len(data) + 2 * n) if kinds[j] == _QUOTED else len(data)
    money = np.empty((n, len(amounts)), dtype=np.int64)
    for j, cents in enumerate(amounts):
        money[:, j] = cents
    out = np.empty(size + n * k + 1, dtype=np.uint8)
    used = _table_lines(kinds, np.concatenate(datas) if datas else np.zeros(0, dtype=np.uint8),
                        np.concatenate(offsets) if offsets else np.zeros(0, dtype=np.int64), first, money, slot,
                        blank, out)
    return memoryview(out[:used])
