"""Column-wise parsing of tape text into numbers, dates, booleans and allowed words.

Every parser takes one column of text (a pyarrow string array, ``null`` for an empty field)
and returns a :class:`Parsed`: the values, a ``blank`` mask and a ``bad`` mask (a value was
given but is not readable as the column's kind). The work is done by Arrow compute kernels
and numpy over the whole column; a clean column takes the fast path (one cast), a column with
bad values the strict path (trim, regular expression, cast of the matching values only).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from allowance.exceptions import TapeError
from allowance.intake.fields import FieldSpec, Kind

Column = pa.ChunkedArray | pa.Array

NUMBER_PATTERN = r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d{1,3})?$"
_YEAR_FIRST = (
    r"^(?P<y>\d{4})[-/.](?P<m>\d{1,2})[-/.](?P<d>\d{1,2})"
    r"(?:[ T]\d{1,2}:\d{2}(?::\d{2}(?:\.\d+)?)?)?$"
)
_YEAR_LAST = r"^(?P<a>\d{1,2})[-/.](?P<b>\d{1,2})[-/.](?P<y>\d{4})$"
TRUE_WORDS = ("true", "yes", "y", "1", "t")
FALSE_WORDS = ("false", "no", "n", "0", "f")
#: Dates a nanosecond timestamp holds (pandas' datetime64[ns] range), in days since 1970.
_FIRST_DAY = int(np.datetime64("1678-01-01", "D").astype(np.int64))
_LAST_DAY = int(np.datetime64("2261-12-31", "D").astype(np.int64))
NO_DAY = np.iinfo(np.int64).min


@dataclass(frozen=True)
class Parsed:
    """One parsed column: ``values`` (numpy, or Arrow text), ``blank`` and ``bad`` masks.

    ``not_whole`` marks numbers that are not whole in a whole-number column. Text columns
    hold the trimmed Arrow text; dates hold days since 1970-01-01.
    """

    values: np.ndarray | pa.ChunkedArray
    blank: np.ndarray
    bad: np.ndarray
    not_whole: np.ndarray | None = None
    form: str = ""  # dates: the format the column was read in, and why (see parse_dates)


def _mask(array: Column) -> np.ndarray:
    """An Arrow boolean array as a numpy bool array, null counting as False."""
    if array.null_count:
        array = pc.fill_null(array, False)
    return np.asarray(array, dtype=bool)


def _nulls(column: Column) -> np.ndarray:
    if column.null_count == 0:
        return np.zeros(len(column), dtype=bool)
    return np.asarray(pc.is_null(column), dtype=bool)


_SPACE_BYTES = np.zeros(256, dtype=bool)
_SPACE_BYTES[[0x09, 0x0A, 0x0B, 0x0C, 0x0D, 0x20]] = True
_SPACE_BYTES[0x80:] = True  # a multi-byte character may be a Unicode space: let Arrow decide


def _edges_clean(column: Column) -> tuple[bool, np.ndarray]:
    """Whether no value starts or ends with a (possible) space, and the mask of empty values.

    Reads only the first and last byte of each value, from Arrow's buffers.
    """
    array = column.combine_chunks() if isinstance(column, pa.ChunkedArray) else column
    rows = len(array)
    if rows == 0 or array.null_count == rows or not pa.types.is_string(array.type):
        return rows == 0, np.ones(rows, dtype=bool) if rows else np.zeros(0, dtype=bool)
    _, offsets_buffer, data_buffer = array.buffers()
    offsets = np.frombuffer(offsets_buffer, dtype=np.int32, count=rows + 1, offset=array.offset * 4)
    lengths = np.diff(offsets)
    empty = (lengths == 0) | _nulls(array)
    if data_buffer is None or len(data_buffer) == 0:
        return True, empty
    data = np.frombuffer(data_buffer, dtype=np.uint8)
    given = np.flatnonzero(~empty)
    first = np.take(data, offsets[:-1][given])
    last = np.take(data, offsets[1:][given] - 1)
    return not (_SPACE_BYTES[first].any() or _SPACE_BYTES[last].any()), empty


def trimmed_text(column: Column) -> tuple[pa.ChunkedArray, np.ndarray]:
    """Trim surrounding white space; return the text (null where blank) and the blank mask."""
    clean, empty = _edges_clean(column)
    if clean:
        text, blank = column, empty
    else:
        text = pc.utf8_trim_whitespace(column)
        blank = _mask(pc.or_kleene(pc.is_null(text), pc.equal(text, "")))
    if blank.any() and pc.sum(pc.is_valid(text)).as_py() != int((~blank).sum()):
        text = pc.if_else(pa.array(~blank), text, pa.scalar(None, pa.string()))
    return text, blank


def parse_text(column: Column, spec: FieldSpec) -> Parsed:
    """Text: trimmed; blank when empty."""
    text, blank = trimmed_text(column)
    return Parsed(values=text, blank=blank, bad=np.zeros(len(blank), dtype=bool))


def parse_choice(column: Column, spec: FieldSpec) -> Parsed:
    """One of ``spec.choices``, case-insensitive and trimmed; the lower-case word is kept."""
    blank = _nulls(column)
    known = _mask(pc.is_in(column, value_set=pa.array(spec.choices, pa.string())))
    if (known | blank).all():  # written as we spell them: nothing to trim or lower
        return Parsed(values=column, blank=blank, bad=np.zeros(len(blank), dtype=bool))
    text, blank = trimmed_text(column)
    text = pc.utf8_lower(text)
    known = _mask(pc.is_in(text, value_set=pa.array(spec.choices, pa.string())))
    return Parsed(values=text, blank=blank, bad=~blank & ~known)


def _to_float(text: Column) -> np.ndarray:
    """Cast text to float64 (null -> NaN); values the cast cannot hold become NaN one by one."""
    try:
        return np.asarray(pc.cast(text, pa.float64()).to_numpy(zero_copy_only=False), dtype=np.float64)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        out = []
        for item in text.to_pylist():
            try:
                out.append(float(item) if item is not None else np.nan)
            except (TypeError, ValueError, OverflowError):
                out.append(np.nan)
        return np.asarray(out, dtype=np.float64)


def parse_number(column: Column, spec: FieldSpec) -> Parsed:
    """A plain decimal number (``1234.5``, ``-0.5``, ``1e-3``); no thousands separators, no NaN."""
    if pa.types.is_floating(column.type):  # converted by the reader
        values = np.asarray(column.to_numpy(zero_copy_only=False), dtype=np.float64)
        blank = _nulls(column)
        bad = ~blank & ~np.isfinite(values)
        if bad.any():
            values = np.where(bad, np.nan, values)
        return Parsed(values=values, blank=blank, bad=bad)
    try:
        values = np.asarray(pc.cast(column, pa.float64()).to_numpy(zero_copy_only=False), dtype=np.float64)
        blank = _nulls(column)
        bad = ~blank & ~np.isfinite(values)  # 'nan' and 'inf' are text the cast takes
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        text, blank = trimmed_text(column)
        well_formed = _mask(pc.match_substring_regex(text, NUMBER_PATTERN))
        candidates = pc.if_else(pa.array(well_formed), text, pa.scalar(None, pa.string()))
        values = _to_float(candidates)
        bad = ~blank & (~well_formed | ~np.isfinite(values))
    if bad.any():
        values = np.where(bad, np.nan, values)
    return Parsed(values=values, blank=blank, bad=bad)


def parse_whole(column: Column, spec: FieldSpec) -> Parsed:
    """A whole number: parsed as a number, then ``not_whole`` marks ``2.5``; ``5.0`` is 5."""
    number = parse_number(column, spec)
    values = number.values
    with np.errstate(invalid="ignore"):
        not_whole = ~number.blank & ~number.bad & (np.floor(values) != values)
    return Parsed(values=values, blank=number.blank, bad=number.bad, not_whole=not_whole)


_BOOLEAN_WORDS = [w for word in (*TRUE_WORDS, *FALSE_WORDS) for w in dict.fromkeys((word, word.upper(), word.title()))]
_BOOLEAN_TRUTH = np.array([w.lower() in TRUE_WORDS for w in _BOOLEAN_WORDS] + [False])


def parse_boolean(column: Column, spec: FieldSpec) -> Parsed:
    """true/false, yes/no, y/n, 1/0, t/f in any case; blank is False."""
    true = _mask(pc.equal(column, "true"))
    blank = _nulls(column)
    if (true | blank | _mask(pc.equal(column, "false"))).all():  # written as we spell them: two comparisons
        return Parsed(values=true, blank=blank, bad=np.zeros(len(true), dtype=bool))
    position = pc.index_in(column, value_set=pa.array(_BOOLEAN_WORDS))
    found = np.asarray(pc.fill_null(position, len(_BOOLEAN_WORDS)), dtype=np.int64)
    values = _BOOLEAN_TRUTH[found]
    blank = _nulls(column)
    rest = np.flatnonzero((found == len(_BOOLEAN_WORDS)) & ~blank)
    bad = np.zeros(len(values), dtype=bool)
    if rest.size:  # padded or mixed-case spellings: trim and compare in lower case
        text, rest_blank = trimmed_text(pc.take(column, pa.array(rest)))
        lower = pc.utf8_lower(text)
        true = _mask(pc.is_in(lower, value_set=pa.array(TRUE_WORDS)))
        false = _mask(pc.is_in(lower, value_set=pa.array(FALSE_WORDS)))
        values[rest] = true
        blank[rest] = rest_blank
        bad[rest] = ~rest_blank & ~true & ~false
    return Parsed(values=values, blank=blank, bad=bad)


#: Parsers by column kind (dates are parsed file-wide by :func:`parse_dates`).
PARSERS: dict[Kind, Callable[[Column, FieldSpec], Parsed]] = {
    "text": parse_text,
    "choice": parse_choice,
    "number": parse_number,
    "whole": parse_whole,
    "boolean": parse_boolean,
}


# --------------------------------------------------------------------------------------
# Typed Arrow columns (Parquet, DataFrames): checked in their own type
# --------------------------------------------------------------------------------------


def _is_number(kind: pa.DataType) -> bool:
    return pa.types.is_floating(kind) or pa.types.is_integer(kind) or pa.types.is_decimal(kind)


def _typed_number(column: Column, spec: FieldSpec) -> Parsed:
    values = np.asarray(pc.cast(column, pa.float64(), safe=False).to_numpy(zero_copy_only=False), dtype=np.float64)
    blank = np.isnan(values)  # null, or a NaN (how pandas writes a missing number)
    bad = np.isinf(values)
    if bad.any():
        values = np.where(bad, np.nan, values)
    not_whole = None
    if spec.kind == "whole":
        with np.errstate(invalid="ignore"):
            not_whole = ~blank & ~bad & (np.floor(values) != values)
    return Parsed(values=values, blank=blank, bad=bad, not_whole=not_whole)


def _typed_date(column: Column, spec: FieldSpec) -> Parsed:
    kind = column.type
    days32 = column if pa.types.is_date32(kind) else pc.cast(column, pa.date32(), safe=False)  # a time of day dropped
    blank = _nulls(days32)
    days = np.asarray(pc.fill_null(pc.cast(days32, pa.int32()), 0).to_numpy(zero_copy_only=False), dtype=np.int64)
    in_range = ~blank & (days >= _FIRST_DAY) & (days <= _LAST_DAY)
    return Parsed(values=np.where(in_range, days, NO_DAY), blank=blank, bad=~blank & ~in_range,
                  form="typed dates (the file stores dates, not text)" if in_range.any() else "blank")


def _typed_boolean(column: Column, spec: FieldSpec) -> Parsed:
    values = np.asarray(pc.fill_null(column, False).to_numpy(zero_copy_only=False), dtype=bool)
    blank = _nulls(column)
    return Parsed(values=values, blank=blank, bad=np.zeros(len(values), dtype=bool))


def parse_arrow(column: Column, spec: FieldSpec) -> Parsed | None:
    """A typed Arrow column checked in its own type, or ``None`` when it is to be read as text.

    A number column of floats, integers or decimals: a null or NaN is blank, an infinity is
    not a number; a date column of dates or timestamps without a time zone (the time of day
    dropped, as the text parser drops ``12:00`` from ``2026-09-30 12:00``): outside years
    1678 to 2261 it is not a date; a boolean column of booleans: null is blank. The bounds
    and every other rule then apply to the values as for text. Any other pairing (text in
    a number column, numbers in a date column, a text or choice field) goes through the
    text parser, which sees the text a CSV export of the column would hold, so the same
    tape as CSV and as Parquet gives the same findings.

    Examples
    --------
    >>> from allowance.intake.fields import FIELDS
    >>> parsed = parse_arrow(pa.array([1.5, None, float("nan"), float("inf")]), FIELDS["balance"])
    >>> parsed.blank.tolist(), parsed.bad.tolist()
    ([False, True, True, False], [False, False, False, True])
    >>> parse_arrow(pa.array(["1.5"]), FIELDS["balance"]) is None
    True
    """
    kind = column.type
    if spec.kind in ("number", "whole") and _is_number(kind):
        return _typed_number(column, spec)
    if spec.kind == "date" and (pa.types.is_date(kind) or (pa.types.is_timestamp(kind) and kind.tz is None)):
        return _typed_date(column, spec)
    if spec.kind == "boolean" and pa.types.is_boolean(kind):
        return _typed_boolean(column, spec)
    return None


# --------------------------------------------------------------------------------------
# Dates: ISO always; day-first or month-first only when the file shows which
# --------------------------------------------------------------------------------------


_MONTH_DAYS = np.array([[0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31],
                        [0, 31, 29, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31]], dtype=np.int32)
_BEFORE_MONTH = np.concatenate([np.zeros((2, 1), np.int32), np.cumsum(_MONTH_DAYS, axis=1, dtype=np.int32)[:, :-1]], axis=1)
_FIRST_YEAR, _LAST_YEAR = 1000, 9999
_YEARS = np.arange(_FIRST_YEAR, _LAST_YEAR + 2, dtype=np.int64)
_LEAP = ((_YEARS % 4 == 0) & ((_YEARS % 100 != 0) | (_YEARS % 400 == 0))).astype(np.int32)
_Y = _YEARS - 1
_BEFORE_YEAR = (365 * _Y + _Y // 4 - _Y // 100 + _Y // 400 - 719162).astype(np.int32)  # Jan 1 since 1970


def _days(year: np.ndarray, month: np.ndarray, day: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Days since 1970-01-01 for calendar dates; ``ok`` is False for 2024-02-30, month 13 etc.

    Notes
    -----
    Proleptic Gregorian calendar: a year is a leap year when divisible by 4, except
    centuries not divisible by 400. Days before 1 January of year :math:`y`, counted from
    1 January 1 AD, are :math:`365 (y-1) + \\lfloor (y-1)/4 \\rfloor - \\lfloor (y-1)/100 \\rfloor
    + \\lfloor (y-1)/400 \\rfloor`, and 1970-01-01 is day 719,162. The counts are tabulated for
    years 1000 to 9999 and looked up.

    References
    ----------
    .. [1] E. G. Richards, "Calendars", in *Explanatory Supplement to the Astronomical
       Almanac*, 3rd ed., ch. 15, 2013.

    Examples
    --------
    >>> days, ok = _days(np.array([1970, 2024, 2024]), np.array([1, 2, 2]), np.array([1, 29, 30]))
    >>> days[ok].tolist(), ok.tolist()
    ([0, 19782], [True, True, False])
    """
    year = np.asarray(year, dtype=np.int32)
    month = np.asarray(month, dtype=np.int32)
    day = np.asarray(day, dtype=np.int32)
    year_ok = (year >= _FIRST_YEAR) & (year <= _LAST_YEAR)
    index = np.where(year_ok, year - _FIRST_YEAR, 0)
    leap = np.take(_LEAP, index)
    month_ok = (month >= 1) & (month <= 12)
    month = np.where(month_ok, month, 0)
    flat = leap * 13 + month
    ok = year_ok & month_ok & (day >= 1) & (day <= np.take(_MONTH_DAYS.ravel(), flat))
    count = np.take(_BEFORE_YEAR, index) + np.take(_BEFORE_MONTH.ravel(), flat) + day - 1
    return np.where(ok, count.astype(np.int64), NO_DAY), ok


def _ascii_digits(word: np.ndarray, width: int) -> tuple[np.ndarray, np.ndarray]:
    """Read ``width`` ASCII digits packed big-endian in unsigned ints; ``ok`` where all are digits."""
    high = int("F0" * width, 16)
    zeros = int("30" * width, 16)
    sixes = int("06" * width, 16)
    word = word.astype(np.uint32)
    ok = ((word & high) == zeros) & (((word + sixes) & high) == zeros)
    value = np.zeros(len(word), dtype=np.int32)
    for k in range(width - 1, -1, -1):  # most significant byte first
        value = value * 10 + ((word >> np.uint32(8 * k)) & np.uint32(0xF)).astype(np.int32)
    return value, ok


def _fast_iso(column: Column) -> tuple[np.ndarray, np.ndarray]:
    """The zero-padded ``YYYY-MM-DD`` values, the common case, read straight from Arrow's bytes.

    The year, month and day digits are read as big-endian words from the rows' bytes
    (no string objects). Returns days since 1970 and the mask of values read; everything
    else is left to the careful path.
    """
    array = column.combine_chunks() if isinstance(column, pa.ChunkedArray) else column
    rows = len(array)
    days = np.full(rows, NO_DAY, dtype=np.int64)
    ok = np.zeros(rows, dtype=bool)
    if rows == 0 or array.null_count == rows:
        return days, ok
    clean = _arrow_iso(array)
    if clean is not None:
        return clean
    _, offsets_buffer, data_buffer = array.buffers()
    offsets = np.frombuffer(offsets_buffer, dtype=np.int32, count=rows + 1, offset=array.offset * 4)
    data = np.frombuffer(data_buffer, dtype=np.uint8)
    lengths = np.diff(offsets)
    valid = np.asarray(array.is_valid(), dtype=bool)
    ten = np.flatnonzero(valid & (lengths == 10))
    if ten.size == 0:
        return days, ok
    if ten.size == int(valid.sum()) and not lengths[~valid].any():
        block = np.ascontiguousarray(data[offsets[0]:offsets[-1]])  # every value is 10 bytes, back to back
    else:
        block = data[offsets[ten][:, None] + np.arange(10)].reshape(-1)
    count = ten.size

    def field(offset: int, dtype: str) -> np.ndarray:
        return np.ndarray(shape=(count,), dtype=dtype, buffer=block, offset=offset, strides=(10,))

    year, year_ok = _ascii_digits(field(0, ">u4"), 4)
    month, month_ok = _ascii_digits(field(5, ">u2"), 2)
    day, day_ok = _ascii_digits(field(8, ">u2"), 2)
    shape = year_ok & month_ok & day_ok & (field(4, "u1") == 45) & (field(7, "u1") == 45)
    value, calendar = _days(year, month, day)
    good = shape & calendar
    if good.all() and count == rows:
        return value, good
    days[ten[good]] = value[good]
    ok[ten[good]] = True
    return days, ok


def _arrow_iso(array: pa.Array) -> tuple[np.ndarray, np.ndarray] | None:
    """A column of nothing but blanks and zero-padded ``YYYY-MM-DD`` calendar dates, read by
    Arrow's own cast in one pass: days since 1970 and the mask of values read; ``None`` when
    any value is written otherwise (the cast refuses the whole column) or the column is not text.

    Arrow reads exactly the values :func:`_fast_iso` reads, and years 0 to 999 as well, which
    :func:`_fast_iso` leaves to the careful path: that finds them too (year first), and both
    are outside the dates a timestamp holds, so the column parses the same either way.
    """
    if not pa.types.is_string(array.type):
        return None
    try:
        stamped = pc.cast(array, pa.date32())
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return None
    ok = ~_nulls(stamped)
    days = np.asarray(pc.fill_null(stamped.cast(pa.int32()), 0), dtype=np.int64)
    days[~ok] = NO_DAY
    return days, ok


@dataclass(frozen=True)
class _Pending:
    """Dates of one column written day and month first or month and day first (not yet told apart)."""

    index: np.ndarray  # row positions
    a: np.ndarray  # first number
    b: np.ndarray  # second number
    year: np.ndarray
    text: pa.Array  # the trimmed text, for examples in messages


def _year_first(text: pa.Array) -> tuple[np.ndarray, np.ndarray]:
    parts = pc.extract_regex(text, _YEAR_FIRST)
    found = _mask(pc.is_valid(parts))
    ymd = [np.asarray(pc.cast(pc.fill_null(pc.struct_field(parts, k), "0"), pa.int64())) for k in "ymd"]
    days, ok = _days(*ymd)
    return np.where(found & ok, days, NO_DAY), found


def parse_dates(
    columns: Mapping[str, Column],
    date_format: str | None,
    file: str,
    source_row: np.ndarray,
) -> dict[str, Parsed]:
    """Parse every date column of a tape, deciding day-first or month-first once for the file.

    ISO dates (``2026-09-30``, with or without a time of day) are always read. Dates written
    ``31/01/2026`` or ``01/31/2026`` are read only when ``date_format`` says which, or when the
    file shows it (a first number above 12 means day-first, a second above 12 month-first);
    a file that shows neither, or both, is a :class:`TapeError`.

    Returns ``Parsed`` with ``values`` in days since 1970-01-01 (:data:`NO_DAY` where blank or bad).
    """
    results: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    pending: dict[str, _Pending] = {}
    year_first_seen: dict[str, bool] = {}
    for name, column in columns.items():
        days, ok = _fast_iso(column)
        blank = _nulls(column)
        year_first_seen[name] = False
        rest = np.flatnonzero(~ok & ~blank)
        if rest.size:
            text, rest_blank = trimmed_text(pc.take(column, pa.array(rest)))
            blank[rest[rest_blank]] = True
            keep = ~rest_blank
            rest, text = rest[keep], pc.filter(text, pa.array(keep))
            year_first_days, year_first = _year_first(text)
            days[rest] = year_first_days
            year_first_seen[name] = bool(year_first.any())
            if date_format != "iso":
                parts = pc.extract_regex(text, _YEAR_LAST)
                found = _mask(pc.is_valid(parts)) & ~year_first
                if found.any():
                    nums = {
                        k: np.asarray(pc.cast(pc.struct_field(pc.filter(parts, pa.array(found)), k), pa.int64()))
                        for k in "aby"
                    }
                    pending[name] = _Pending(
                        index=rest[found], a=nums["a"], b=nums["b"], year=nums["y"],
                        text=pc.filter(text, pa.array(found)),
                    )
        results[name] = (days, blank, ok)
    if date_format in ("day_first", "month_first"):
        order, why = date_format, "as [tape] date_format says"
    else:
        order, evidence = _decide_order(pending, file, source_row)
        why = (f"inferred from {evidence[2]!r} ({evidence[0]}, row {evidence[1]})" if evidence
               else "every such date reads the same either way")
    for name, waiting in pending.items():
        day, month = (waiting.a, waiting.b) if order == "day_first" else (waiting.b, waiting.a)
        days, ok = _days(waiting.year, month, day)
        results[name][0][waiting.index] = np.where(ok, days, NO_DAY)
    parsed = {}
    for name, (days, blank, ok) in results.items():
        in_range = (days >= _FIRST_DAY) & (days <= _LAST_DAY)
        days = np.where(in_range, days, NO_DAY)
        forms = []
        if ok.any() or year_first_seen[name]:
            forms.append("year first (YYYY-MM-DD)")
        if name in pending:
            forms.append(f"{DATE_FORMS[order]}, {why}")
        parsed[name] = Parsed(values=days, blank=blank, bad=~blank & ~in_range,
                              form="; ".join(forms) if forms else "blank")
    return parsed


#: How the two-number date forms are written out for people.
DATE_FORMS = {"day_first": "day first (DD/MM/YYYY)", "month_first": "month first (MM/DD/YYYY)"}


def _decide_order(pending: Mapping[str, _Pending], file: str,
                  source_row: np.ndarray) -> tuple[str, tuple[str, int, str] | None]:
    """Day-first or month-first from the evidence in the file, with the first date that shows it
    (column, row, text); :class:`TapeError` if it is unclear."""
    if not pending:
        return "day_first", None  # nothing to decide
    day_first: tuple[str, int, str] | None = None
    month_first: tuple[str, int, str] | None = None
    undecided: tuple[str, int, str] | None = None
    for name, p in pending.items():
        small_a, small_b = p.a <= 12, p.b <= 12  # both above 12 is no date either way: no evidence
        for mask, slot in ((~small_a & small_b, "d"), (small_a & ~small_b, "m"), (small_a & small_b & (p.a != p.b), "u")):
            hits = np.flatnonzero(mask)
            if hits.size:
                example = (name, int(source_row[p.index[hits[0]]]), p.text[int(hits[0])].as_py())
                if slot == "d" and day_first is None:
                    day_first = example
                elif slot == "m" and month_first is None:
                    month_first = example
                elif slot == "u" and undecided is None:
                    undecided = example
    if day_first and month_first:
        raise TapeError(
            f"dates are written both day-first ({day_first[0]} {day_first[2]!r} on row {day_first[1]}) "
            f"and month-first ({month_first[0]} {month_first[2]!r} on row {month_first[1]})",
            file=file,
            hint="export the dates as YYYY-MM-DD",
        )
    if day_first:
        return "day_first", day_first
    if month_first:
        return "month_first", month_first
    if undecided:
        raise TapeError(
            f"cannot tell whether dates such as {undecided[2]!r} ({undecided[0]}, row {undecided[1]}) "
            "are day-first or month-first",
            file=file,
            row=undecided[1],
            column=undecided[0],
            hint='set date_format = "day_first" or "month_first" in [tape] of the assumptions file',
        )
    return "day_first", None  # every such date reads the same either way (01/01/2026)
