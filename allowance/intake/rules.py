"""The row rules of a loan tape, applied column-wise: every failure of every row is found.

Each rule looks at whole parsed columns at once and returns :class:`Findings`: the failing row
positions, the column, a reason code and one message per row. A row is rejected when any
``reject`` finding names it; ``warning`` findings flag accepted rows. The field rules come from
:class:`allowance.schemas.LoanRecord` (kinds, bounds, required values, descriptions); the cross-
column rules need the assumptions (as-of date, segments, grades).

Reason codes
------------
See :data:`CODES`: the code, and what it means (the summary ``allowance check`` prints).
"""

from __future__ import annotations

import difflib
from collections.abc import Callable, Iterator, Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from allowance.exceptions import AssumptionsError
from allowance.intake.fields import FIELDS, FieldSpec, lower_first
from allowance.intake.parse import NO_DAY, Parsed
from allowance.intake.readers import as_text
from allowance.frameworks import rules_for
from allowance.poci import period_start
from allowance.schemas import MAX_MONTHS, OFF_BALANCE_FACILITIES, Assumptions

Severity = Literal["reject", "warning"]

#: Reason codes and what they mean; ``{column}`` is the column the finding names.
CODES: dict[str, str] = {
    "missing_value": "{column} is blank but required",
    "bad_number": "{column} is not a number",
    "not_whole_number": "{column} is not a whole number",
    "bad_date": "{column} is not a date (YYYY-MM-DD, years 1678 to 2261)",
    "bad_boolean": "{column} is not one of true/false, yes/no, y/n, 1/0, t/f",
    "bad_choice": "{column} is not one of the allowed values",
    "out_of_range": "{column} is outside its allowed range",
    "duplicate_loan_id": "loan_id appears on more than one row (every copy is rejected)",
    "unknown_segment": "segment has no [segments.<name>] table in the assumptions",
    "missing_grade": "grade is blank but the segment's PD is given by grade",
    "unknown_grade": "grade is not one of the segment's grades",
    "origination_after_as_of": "origination_date is after the as-of date",
    "maturity_before_origination": "maturity_date is not after origination_date",
    "matured": "term loan matured on or before the as-of date with no balance left",
    "wrong_field_count": "the line has a different number of fields from the header",
    "matured_with_balance": "term loan past maturity still carrying a balance (one-month horizon)",
    "over_limit": "revolving or HELOC balance above the credit limit",
    "draw_period_to_maturity": "HELOC whose draw period reaches its maturity (no repayment period)",
    "missing_amortization": "balloon loan with no balloon_amount or amortization_months, in a segment without one",
    "revolving_on_vintage_curve": "a revolving line in a segment that uses a vintage loss curve",
    "line_break_in_value": "{column} holds a line break: a quote closed in the wrong place (rejected in our columns)",
    "records_in_value": "{column} holds whole lines of the tape: a quote opened on one line closes lines later",
    "maturity_beyond_horizon": "maturity_date is more than the longest horizon after the as-of date",
    "commitment_with_balance": "a commitment or guarantee (facility_type) carries a drawn balance",
    "commitment_ended": "commitment_end_date is on or before the as-of date",
    "commitment_beyond_horizon": "commitment_end_date is more than the longest horizon after the as-of date",
}

_BAD_CODE: dict[str, str] = {
    "number": "bad_number",
    "whole": "bad_number",
    "date": "bad_date",
    "boolean": "bad_boolean",
    "choice": "bad_choice",
}


@dataclass(frozen=True)
class Findings:
    """One rule's findings on one column: row positions and a message for each."""

    rows: np.ndarray
    column: str
    code: str
    severity: Severity
    messages: list[str]


@dataclass(frozen=True)
class TapeColumns:
    """What the rules look at: every tape column parsed, the raw text, the assumptions."""

    parsed: dict[str, Parsed]
    raw: dict[str, pa.ChunkedArray]
    present: frozenset[str]
    assumptions: Assumptions
    source_row: np.ndarray
    #: a part of a tape read part by part: the ids the whole tape repeats -> their rows (found beforehand)
    repeated: Mapping[str, Sequence[int]] | None = None
    #: how a message names another row: "row" (a CSV's line, an XLSX sheet's row: the same
    #: number as ``source_row``) or "source_row" (a Parquet file's n-th row is source_row
    #: n + 1, so the number is given as the column of rejected.csv holds it)
    row_word: str = "row"

    @property
    def rows(self) -> int:
        return len(self.source_row)

    def text(self, column: str, rows: np.ndarray) -> list[str | None]:
        """The text of ``column`` at ``rows`` exactly as the cell holds it (``-100.50``, not -100.5).

        A typed Parquet value (no text to quote) is written as a CSV export would.
        """
        return as_text(pc.take(self.raw[column], pa.array(rows, pa.int64()))).to_pylist()


Rule = Callable[[TapeColumns], Iterator[Findings]]


def _about(spec: FieldSpec) -> str:
    """The field's description as a clause: 'outstanding principal ... at the as-of date'."""
    return lower_first(spec.description.rstrip("."))


def _date_text(days: np.ndarray) -> list[str]:
    return [str(d) for d in days.astype("datetime64[D]")]


def _findings(rows: np.ndarray, column: str, code: str, messages: list[str], severity: Severity = "reject") -> Findings:
    return Findings(rows=rows, column=column, code=code, severity=severity, messages=messages)


# --------------------------------------------------------------------------------------
# Field rules: one column at a time, from LoanRecord
# --------------------------------------------------------------------------------------


def _percent_hint(spec: FieldSpec, parsed: Parsed) -> str:
    """A hint when a decimal-share column looks like percents (most values above 1)."""
    if not spec.is_probability:
        return ""
    valid = ~parsed.blank & ~parsed.bad
    if not valid.any():
        return ""
    share = float(np.mean(parsed.values[valid] > 1.0))
    if share <= 0.5:
        return ""
    return (
        f"; the column looks like percents ({share:.0%} of its values are above 1): "
        "give decimals, 6.5% as 0.065"
    )


def field_rules(cols: TapeColumns) -> Iterator[Findings]:
    """Required values, readable values, whole numbers and bounds, column by column."""
    for name, spec in FIELDS.items():
        if name not in cols.present:
            continue
        parsed = cols.parsed[name]
        if spec.required:
            rows = np.flatnonzero(parsed.blank)
            if rows.size:
                yield _findings(rows, name, "missing_value", [f"{name} is blank but required ({_about(spec)})"] * rows.size)
        rows = np.flatnonzero(parsed.bad)
        if rows.size:
            words = _bad_words(spec)
            yield _findings(rows, name, _BAD_CODE[spec.kind], [_bad_message(spec, t, words) for t in cols.text(name, rows)])
        if parsed.not_whole is not None:
            rows = np.flatnonzero(parsed.not_whole)
            if rows.size:
                messages = [f"{name} {t!r} is not a whole number" for t in cols.text(name, rows)]
                yield _findings(rows, name, "not_whole_number", messages)
        if spec.kind in ("number", "whole") and spec.bounds_text:
            yield from _bounds(cols, spec, parsed)


def _bad_words(spec: FieldSpec) -> str:
    """What a value of the column that cannot be read is not, in words."""
    return {
        "number": "is not a number (write plain decimals such as 1234.56)",
        "whole": "is not a number (write a whole number such as 30)",
        "date": "is not a date (write YYYY-MM-DD; years 1678 to 2261)",
        "boolean": "is not true/false, yes/no, y/n, 1/0 or t/f",
        "choice": f"is not one of {', '.join(spec.choices)}",
    }[spec.kind]


def _bad_message(spec: FieldSpec, text: str | None, words: str | None = None) -> str:
    message = f"{spec.name} {text!r} {words if words is not None else _bad_words(spec)}"
    given = (text or "").strip()
    if given.startswith("="):
        message += " (a formula: the tape holds the formula, not its value; paste values)"
    elif spec.kind == "number" and given.endswith("%"):
        message += f" (a percent: write it as a decimal{', 6.5% as 0.065' if spec.is_probability else ''})"
    return message


def _bounds(cols: TapeColumns, spec: FieldSpec, parsed: Parsed) -> Iterator[Findings]:
    values = parsed.values
    valid = ~parsed.blank & ~parsed.bad
    outside = np.zeros(cols.rows, dtype=bool)
    with np.errstate(invalid="ignore"):
        for bound, test in ((spec.ge, np.less), (spec.gt, np.less_equal), (spec.le, np.greater), (spec.lt, np.greater_equal)):
            if bound is not None:
                outside |= valid & test(values, bound)
    rows = np.flatnonzero(outside)
    if rows.size:
        hint = _percent_hint(spec, parsed)
        percent = not hint and spec.is_probability
        said = f" is outside its range: it must be {spec.bounds_text} ({_about(spec)}){hint}"
        messages = []
        for t, v in zip(cols.text(spec.name, rows), values[rows].tolist()):
            own = f"; if it is a percent, write it as {v / 100:.10g}" if percent and 1.0 < v <= 100.0 else ""
            messages.append(f"{spec.name} {t!r}{said}{own}")
        yield _findings(rows, spec.name, "out_of_range", messages)


# --------------------------------------------------------------------------------------
# Cross-column rules
# --------------------------------------------------------------------------------------


_MIX = np.uint64(0x9E3779B97F4A7C15)
_BUCKET_BITS = 22


def id_hashes(ids: pa.ChunkedArray) -> np.ndarray:
    """A 64-bit hash of each id's bytes (uint64; equal ids always hash equal, a blank id as "").

    The bytes are read eight at a time (unaligned little-endian words at each id's offset),
    masked to the id's length and mixed; ids longer than 64 bytes are hashed by pandas
    instead. Rows that share a hash are checked exactly by the caller.
    """
    array = ids.combine_chunks()
    rows = len(array)
    if rows == 0:
        return np.zeros(0, dtype=np.uint64)
    if not (pa.types.is_string(array.type)):
        array = pc.cast(array, pa.string())
    _, offsets_buffer, data_buffer = array.buffers()
    offsets = np.frombuffer(offsets_buffer, dtype=np.int32, count=rows + 1, offset=array.offset * 4)
    lengths = np.diff(offsets).astype(np.int64)
    width = int(lengths.max())
    if data_buffer is None:
        return lengths.astype(np.uint64) * _MIX
    if width > 64:
        return pd.util.hash_array(pc.fill_null(array, "").to_numpy(zero_copy_only=False).astype(object))
    data = np.frombuffer(data_buffer, dtype=np.uint8)[offsets[0]:offsets[-1]]
    padded = np.zeros(len(data) + 8, dtype=np.uint8)
    padded[: len(data)] = data
    windows = np.ndarray(shape=(len(data) + 1,), dtype="<u8", buffer=padded, strides=(1,))
    start = (offsets[:-1] - offsets[0]).astype(np.int64)
    hashed = lengths.astype(np.uint64) * _MIX
    for word in range((width + 7) // 8):
        left = np.clip(lengths - 8 * word, 0, 8)
        if not left.any():
            break
        keep = np.where(left == 8, np.uint64(0xFFFFFFFFFFFFFFFF), (np.uint64(1) << (left * 8).astype(np.uint64)) - np.uint64(1))
        value = windows[np.minimum(start + 8 * word, len(data))] & keep  # fancy indexing: no copy of the view
        hashed = (hashed ^ value) * _MIX
        hashed ^= hashed >> np.uint64(31)
    return hashed


def _maybe_repeated(ids: pa.ChunkedArray) -> np.ndarray:
    """Rows whose id may be repeated (they share a hash, :func:`id_hashes`)."""
    hashed = id_hashes(ids)
    rows = len(hashed)
    if rows == 0:
        return np.zeros(0, dtype=bool)
    # Bucket by the top bits first: only rows sharing a bucket need the full comparison.
    buckets = (hashed >> np.uint64(64 - _BUCKET_BITS)).astype(np.intp)
    crowded = np.flatnonzero(np.take(np.bincount(buckets, minlength=1 << _BUCKET_BITS), buckets) > 1)
    repeated = np.zeros(rows, dtype=bool)
    if crowded.size:
        repeated[crowded] = np.asarray(pd.Series(hashed[crowded]).duplicated(keep=False))
    return repeated


def _also_on(cols: TapeColumns, loan_id: str, others: Sequence[int]) -> str:
    """The message of a repeated id: its other rows, named as the tape's file names them
    (:attr:`TapeColumns.row_word`), the first ten and how many more.

    >>> _also_on(TapeColumns({}, {}, frozenset(), None, np.zeros(0)), "L1", [4, 5])
    "loan_id 'L1' is also on rows 4, 5"
    >>> _also_on(TapeColumns({}, {}, frozenset(), None, np.zeros(0), row_word="source_row"), "L1", [4])
    "loan_id 'L1' is also at source_row 4"
    """
    shown = ", ".join(str(x) for x in others[:10]) + (f" and {len(others) - 10} more" if len(others) > 10 else "")
    if cols.row_word == "source_row":
        return f"loan_id {loan_id!r} is also at source_row {shown}"
    return f"loan_id {loan_id!r} is also on row{'s' if len(others) > 1 else ''} {shown}"


def _repeated_elsewhere(cols: TapeColumns) -> Iterator[Findings]:
    """A part of a tape read part by part: every row whose id the whole tape repeats
    (``cols.repeated``, found before the parts are read), naming the id's other rows."""
    ids = cols.parsed["loan_id"].values
    known = pa.array(list(cols.repeated), pa.string())
    rows = np.flatnonzero(np.asarray(pc.fill_null(pc.is_in(ids, value_set=known), False)))
    if not rows.size:
        return
    messages = []
    for loan_id, line in zip(pc.take(ids, pa.array(rows, pa.int64())).to_pylist(), cols.source_row[rows]):
        messages.append(_also_on(cols, loan_id, [x for x in cols.repeated[loan_id] if x != line]))
    yield _findings(rows, "loan_id", "duplicate_loan_id", messages)


def duplicate_ids(cols: TapeColumns) -> Iterator[Findings]:
    """Every copy of a repeated loan_id is rejected, each naming the other rows."""
    if cols.repeated is not None:
        yield from _repeated_elsewhere(cols)
        return
    ids = cols.parsed["loan_id"].values
    candidates = _maybe_repeated(ids)
    if not candidates.any():
        return
    series = ids.to_pandas()
    series = series.iloc[np.flatnonzero(candidates)]  # equal ids share a hash: only those rows need the exact check
    dup = series.duplicated(keep=False) & series.notna()
    rows = np.asarray(series.index[dup.to_numpy()], dtype=np.int64)
    if not rows.size:
        return
    frame = pd.DataFrame({"id": series[dup].to_numpy(), "line": cols.source_row[rows]})
    lines_by_id = frame.groupby("id", sort=False)["line"].agg(list).to_dict()
    messages = []
    for loan_id, line in zip(frame["id"], frame["line"]):
        messages.append(_also_on(cols, loan_id, [x for x in lines_by_id[loan_id] if x != line]))
    yield _findings(rows, "loan_id", "duplicate_loan_id", messages)


def _close(word: str, choices: list[str]) -> str:
    match = difflib.get_close_matches(word, choices, n=1)
    return f" (did you mean {match[0]!r}?)" if match else ""


def unknown_segments(cols: TapeColumns) -> Iterator[Findings]:
    """The segment must have a ``[segments.<name>]`` table."""
    segment = cols.parsed["segment"]
    names = list(cols.assumptions.segments)
    known = np.asarray(pc.fill_null(pc.is_in(segment.values, value_set=pa.array(names, pa.string())), True))
    rows = np.flatnonzero(~known & ~segment.blank)
    if rows.size:
        values = pc.take(segment.values, pa.array(rows)).to_pylist()
        advice = {v: _close(v, names) for v in set(values)}
        messages = [f"segment {v!r} has no [segments.{v}] table in the assumptions{advice[v]}" for v in values]
        yield _findings(rows, "segment", "unknown_segment", messages)


def grades(cols: TapeColumns) -> Iterator[Findings]:
    """Where a segment's PD is given by grade, the grade is required and must be one of them."""
    segment = cols.parsed["segment"].values
    grade = cols.parsed["grade"]
    for name, seg in cols.assumptions.segments.items():
        table = seg.pd_12m_by_grade or seg.pd_curve_by_grade
        if table is None:
            continue
        in_segment = np.asarray(pc.fill_null(pc.equal(segment, name), False))
        rows = np.flatnonzero(in_segment & grade.blank)
        if rows.size:
            message = f"grade is blank but segment {name!r} gives its PD by grade ({', '.join(table)})"
            yield _findings(rows, "grade", "missing_grade", [message] * rows.size)
        known = np.asarray(pc.fill_null(pc.is_in(grade.values, value_set=pa.array(list(table), pa.string())), True))
        rows = np.flatnonzero(in_segment & ~grade.blank & ~known)
        if rows.size:
            messages = [
                f"grade {g!r} is not one of segment {name!r}'s grades ({', '.join(table)})"
                for g in pc.take(grade.values, pa.array(rows)).to_pylist()
            ]
            yield _findings(rows, "grade", "unknown_grade", messages)


def dates(cols: TapeColumns) -> Iterator[Findings]:
    """Origination on or before the as-of date; maturity after origination; term loans' maturity."""
    as_of = int(np.datetime64(cols.assumptions.run.as_of, "D").astype(np.int64))
    as_of_text = cols.assumptions.run.as_of.isoformat()
    origination = cols.parsed["origination_date"].values
    maturity = cols.parsed["maturity_date"]
    repayment = cols.parsed["repayment"]
    balance = cols.parsed["balance"]
    has_origination = origination != NO_DAY
    has_maturity = maturity.values != NO_DAY

    rows = np.flatnonzero(has_origination & (origination > as_of))
    if rows.size:
        messages = [f"origination_date {d} is after the as-of date {as_of_text}" for d in _date_text(origination[rows])]
        yield _findings(rows, "origination_date", "origination_after_as_of", messages)

    run_date = cols.assumptions.run.as_of
    years = MAX_MONTHS // 12
    last_day = run_date.replace(year=run_date.year + years, day=min(run_date.day, 28 if run_date.month == 2 else 31))
    limit = int(np.datetime64(last_day, "D").astype(np.int64))
    rows = np.flatnonzero(has_maturity & (maturity.values > limit))
    if rows.size:
        messages = [
            f"maturity_date {m} is more than {years} years after the as-of date {as_of_text}: horizons are "
            f"capped at {MAX_MONTHS:,} months"
            for m in _date_text(maturity.values[rows])
        ]
        yield _findings(rows, "maturity_date", "maturity_beyond_horizon", messages)

    rows = np.flatnonzero(has_origination & has_maturity & (maturity.values <= origination))
    if rows.size:
        messages = [
            f"maturity_date {m} is not after origination_date {o}"
            for m, o in zip(_date_text(maturity.values[rows]), _date_text(origination[rows]))
        ]
        yield _findings(rows, "maturity_date", "maturity_before_origination", messages)

    known_repayment = ~repayment.blank & ~repayment.bad
    # a standalone commitment or guarantee runs to its commitment_end_date, not to a maturity
    term = (known_repayment & np.asarray(pc.fill_null(pc.not_equal(repayment.values, "revolving"), False))
            & ~_off_balance(cols))
    rows = np.flatnonzero(term & maturity.blank)
    if rows.size:
        about = _about(FIELDS["maturity_date"])
        message = f"maturity_date is blank but required for level, interest_only, balloon and heloc loans ({about})"
        yield _findings(rows, "maturity_date", "missing_value", [message] * rows.size)

    valid_balance = ~balance.blank & ~balance.bad
    matured = term & has_maturity & (maturity.values <= as_of) & valid_balance
    with np.errstate(invalid="ignore"):
        carrying = balance.values > 0
    rows = np.flatnonzero(matured & carrying)
    if rows.size:
        messages = [
            f"maturity_date {m} is on or before the as-of date {as_of_text} but the balance is "
            f"{b:,.2f}; given a one-month horizon"
            for m, b in zip(_date_text(maturity.values[rows]), balance.values[rows])
        ]
        yield _findings(rows, "maturity_date", "matured_with_balance", messages, "warning")
    rows = np.flatnonzero(matured & ~carrying & (balance.values >= 0))
    if rows.size:
        messages = [
            f"maturity_date {m} is on or before the as-of date {as_of_text} and the balance is 0: "
            "the loan has ended (take it off the tape)"
            for m in _date_text(maturity.values[rows])
        ]
        yield _findings(rows, "maturity_date", "matured", messages)


def _off_balance(cols: TapeColumns) -> np.ndarray:
    """Rows whose facility_type is a standalone commitment or guarantee."""
    facility = cols.parsed["facility_type"].values
    return np.asarray(pc.fill_null(pc.is_in(facility, value_set=pa.array(list(OFF_BALANCE_FACILITIES))), False))


def commitments(cols: TapeColumns) -> Iterator[Findings]:
    """Standalone commitments and guarantees: no drawn balance, an amount (``credit_limit``) and
    a ``commitment_end_date`` after the as-of date; any row's commitment end within the longest
    horizon. A line whose commitment has ended is flagged (measured without a commitment period).

    The exposure of a commitment or guarantee is CCF × its amount over the period the lender
    is committed (IFRS 9 5.5.19, B5.5.31; ASC 326-20-30-11): without an end date it has no
    horizon, and a drawn amount belongs on its own row as a funded loan.
    """
    off = _off_balance(cols)
    end = cols.parsed["commitment_end_date"]
    has_end = end.values != NO_DAY
    as_of = int(np.datetime64(cols.assumptions.run.as_of, "D").astype(np.int64))
    as_of_text = cols.assumptions.run.as_of.isoformat()
    run_date = cols.assumptions.run.as_of
    years = MAX_MONTHS // 12
    last_day = run_date.replace(year=run_date.year + years, day=min(run_date.day, 28 if run_date.month == 2 else 31))
    rows = np.flatnonzero(has_end & (end.values > int(np.datetime64(last_day, "D").astype(np.int64))))
    if rows.size:
        messages = [f"commitment_end_date {d} is more than {years} years after the as-of date {as_of_text}: horizons "
                    f"are capped at {MAX_MONTHS:,} months" for d in _date_text(end.values[rows])]
        yield _findings(rows, "commitment_end_date", "commitment_beyond_horizon", messages)
    ended = has_end & (end.values <= as_of)
    rows = np.flatnonzero(ended & off)
    if rows.size:
        messages = [f"commitment_end_date {d} is on or before the as-of date {as_of_text}: the commitment has ended "
                    "(take it off the tape)" for d in _date_text(end.values[rows])]
        yield _findings(rows, "commitment_end_date", "commitment_ended", messages)
    rows = np.flatnonzero(ended & ~off)
    if rows.size:
        messages = [f"commitment_end_date {d} is on or before the as-of date {as_of_text}: measured without a "
                    "commitment period" for d in _date_text(end.values[rows])]
        yield _findings(rows, "commitment_end_date", "commitment_ended", messages, "warning")
    if not off.any():
        return
    rows = np.flatnonzero(off & end.blank)
    if rows.size:
        message = ("commitment_end_date is blank but required for a commitment or guarantee (facility_type): the "
                   "exposure lasts until the lender's commitment ends (IFRS 9 5.5.19)")
        yield _findings(rows, "commitment_end_date", "missing_value", [message] * rows.size)
    limit = cols.parsed["credit_limit"]
    rows = np.flatnonzero(off & limit.blank)
    if rows.size:
        message = ("credit_limit is blank but required for a commitment or guarantee (facility_type): the committed "
                   "or guaranteed amount, of which the CCF share is the exposure")
        yield _findings(rows, "credit_limit", "missing_value", [message] * rows.size)
    balance = cols.parsed["balance"]
    with np.errstate(invalid="ignore"):
        rows = np.flatnonzero(off & ~balance.blank & ~balance.bad & (balance.values > 0))
    if rows.size:
        facility = pc.take(cols.parsed["facility_type"].values, pa.array(rows)).to_pylist()
        messages = [f"balance {b:,.2f} on a {f} row: a commitment or guarantee carries no drawn balance (put the "
                    "drawn part on its own row as a funded loan, facility_type blank or funded)"
                    for b, f in zip(balance.values[rows], facility)]
        yield _findings(rows, "balance", "commitment_with_balance", messages)


def revolving_lines(cols: TapeColumns) -> Iterator[Findings]:
    """Revolving lines and HELOCs need a credit limit; a balance above it is flagged, not rejected."""
    repayment = cols.parsed["repayment"]
    limit = cols.parsed["credit_limit"]
    balance = cols.parsed["balance"]
    revolving = np.asarray(pc.fill_null(pc.equal(repayment.values, "revolving"), False))
    heloc = np.asarray(pc.fill_null(pc.equal(repayment.values, "heloc"), False))
    for lines, what in ((revolving, "revolving lines"), (heloc, "HELOCs (the undrawn limit is exposure in the draw period)")):
        rows = np.flatnonzero(lines & limit.blank)
        if rows.size:
            message = f"credit_limit is blank but required for {what} ({_about(FIELDS['credit_limit'])})"
            yield _findings(rows, "credit_limit", "missing_value", [message] * rows.size)
    revolving = revolving | heloc
    if not revolving.any():
        return
    both = revolving & ~limit.blank & ~limit.bad & ~balance.blank & ~balance.bad
    with np.errstate(invalid="ignore"):
        rows = np.flatnonzero(both & (balance.values > limit.values) & (limit.values >= 0))
    if rows.size:
        messages = [
            f"balance {b:,.2f} is above the credit_limit {c:,.2f}"
            for b, c in zip(balance.values[rows], limit.values[rows])
        ]
        yield _findings(rows, "balance", "over_limit", messages, "warning")


def heloc_terms(cols: TapeColumns) -> Iterator[Findings]:
    """A HELOC needs its draw period (``draw_period_months``), shorter than its term: the draw
    period is interest only, the repayment period after it amortises to maturity."""
    repayment = cols.parsed["repayment"]
    heloc = np.asarray(pc.fill_null(pc.equal(repayment.values, "heloc"), False))
    if not heloc.any():
        return
    draw = cols.parsed["draw_period_months"]
    rows = np.flatnonzero(heloc & draw.blank)
    if rows.size:
        message = f"draw_period_months is blank but required for HELOCs ({_about(FIELDS['draw_period_months'])})"
        yield _findings(rows, "draw_period_months", "missing_value", [message] * rows.size)
    origination, maturity = cols.parsed["origination_date"], cols.parsed["maturity_date"]
    dated = ~origination.blank & ~origination.bad & ~maturity.blank & ~maturity.bad
    known = heloc & dated & ~draw.blank & ~draw.bad
    if not known.any():
        return
    helocs = np.flatnonzero(known)  # the months of the HELOCs only: a calendar cast of every row is slow
    start = origination.values[helocs].astype("datetime64[D]").astype("datetime64[M]").astype(np.int64)
    end = maturity.values[helocs].astype("datetime64[D]").astype("datetime64[M]").astype(np.int64)
    term = end - start  # whole calendar months from origination to maturity
    with np.errstate(invalid="ignore"):
        reaches = draw.values[helocs] >= term
    rows, term = helocs[reaches], term[reaches]
    if rows.size:
        messages = [f"draw_period_months {int(d)} reaches the maturity {m} ({int(t)} months after origination): "
                    "a HELOC repays over the months after its draw period (shorten it, or use interest_only)"
                    for d, t, m in zip(draw.values[rows], term, _date_text(maturity.values[rows]))]
        yield _findings(rows, "draw_period_months", "draw_period_to_maturity", messages)


def balloon_terms(cols: TapeColumns) -> Iterator[Findings]:
    """A balloon loan needs its ``balloon_amount``, its ``amortization_months`` or its segment's."""
    repayment = cols.parsed["repayment"]
    balloon = np.asarray(pc.fill_null(pc.equal(repayment.values, "balloon"), False))
    if not balloon.any():
        return
    segment = cols.parsed["segment"].values
    segments = cols.assumptions.segments
    stated = [name for name, seg in segments.items() if seg.amortization_months is not None]
    known = np.asarray(pc.fill_null(pc.is_in(segment, value_set=pa.array(list(segments), pa.string())), False))
    covered = np.asarray(pc.fill_null(pc.is_in(segment, value_set=pa.array(stated, pa.string())), False))
    amount, months = cols.parsed["balloon_amount"], cols.parsed["amortization_months"]
    rows = np.flatnonzero(balloon & known & ~covered & amount.blank & months.blank)
    if rows.size:
        messages = [
            f"balloon loan with neither balloon_amount nor amortization_months, and segment {v!r} states no "
            "amortization_months (give either column, or amortization_months in the segment)"
            for v in pc.take(segment, pa.array(rows)).to_pylist()
        ]
        yield _findings(rows, "amortization_months", "missing_amortization", messages)


def segment_requirements(cols: TapeColumns, paydown_frameworks: list[str], file: str | None = None) -> None:
    """Raise :class:`AssumptionsError` when a segment holding revolving lines lacks a key they need.

    Every revolving line needs its segment's ``behavioural_life_months`` (IFRS 9 B5.5.40);
    where a framework runs a line's drawn balance off (CECL), its ``payment_rate`` too, and
    the framework's payment allocation policy (``[cecl] payment_allocation``). The
    fix is in the assumptions, not in the rows, so it is one error naming the key.
    """
    repayment = cols.parsed["repayment"]
    revolving = np.asarray(pc.fill_null(pc.equal(repayment.values, "revolving"), False))
    if not revolving.any():
        return
    segment = cols.parsed["segment"].values
    needs = ["behavioural_life_months"] + (["payment_rate"] if paydown_frameworks else [])
    for name, seg in cols.assumptions.segments.items():
        missing = [key for key in needs if getattr(seg, key) is None]
        if not missing:
            continue
        rows = np.flatnonzero(revolving & np.asarray(pc.fill_null(pc.equal(segment, name), False)))
        if not rows.size:
            continue
        key = missing[0]
        lines = ", ".join(str(r) for r in cols.source_row[rows[:5]]) + (" ..." if rows.size > 5 else "")
        why = "" if key == "behavioural_life_months" else f" ({', '.join(paydown_frameworks)} runs the drawn balance off)"
        raise AssumptionsError(
            f"segment {name!r} holds {rows.size} revolving line(s) (tape lines {lines}) but states no {key}{why}",
            file=file, column=f"segments.{name}.{key}",
            hint=f"add {key} to [segments.{name}]"
                 + (" (months; IFRS 9 B5.5.40)" if key == "behavioural_life_months" else " (monthly share of the drawn balance repaid, e.g. 0.05)"),
        )
    for fw in paydown_frameworks:  # the payment allocation policy that runs the balance off (stated, not assumed)
        try:
            rules_for(fw).runoff(cols.assumptions)
        except AssumptionsError as err:
            raise AssumptionsError(err.reason, file=file, column=err.column, hint=err.hint) from None


def commitment_requirements(cols: TapeColumns, file: str | None = None) -> None:
    """Raise :class:`AssumptionsError` when a segment holding undrawn amounts does not state
    its CCF (``ccf`` or ``ccf_by_dpd``) or ``unconditionally_cancellable``.

    Neither has a safe default: a non-cancellable commitment taken as cancellable would carry
    no CECL reserve on its undrawn part (ASC 326-20-30-11), and a CCF of 0 none under IFRS 9
    (B5.5.31). A row holds undrawn amounts when it is a revolving line or a HELOC with a credit
    limit above its balance, or a standalone commitment or guarantee (``facility_type``).
    """
    repayment = cols.parsed["repayment"]
    facility = cols.parsed["facility_type"]
    limit, balance = cols.parsed["credit_limit"], cols.parsed["balance"]
    # a HELOC's undrawn limit is exposure in its draw period, as a revolving line's
    revolving = np.asarray(pc.fill_null(pc.is_in(repayment.values, value_set=pa.array(["revolving", "heloc"])), False))
    off = np.asarray(pc.fill_null(pc.is_in(facility.values, value_set=pa.array(list(OFF_BALANCE_FACILITIES))), False))
    with np.errstate(invalid="ignore"):
        above = ~limit.blank & ~limit.bad & (limit.values > np.where(balance.blank | balance.bad, 0.0, balance.values))
    undrawn = (revolving | off) & above
    if not undrawn.any():
        return
    segment = cols.parsed["segment"].values
    for name, seg in cols.assumptions.segments.items():
        missing = [key for key, value in (("ccf", seg.ccf if seg.ccf is not None else seg.ccf_by_dpd),
                                          ("unconditionally_cancellable", seg.unconditionally_cancellable))
                   if value is None]
        if not missing:
            continue
        rows = np.flatnonzero(undrawn & np.asarray(pc.fill_null(pc.equal(segment, name), False)))
        if not rows.size:
            continue
        key = missing[0]
        lines = ", ".join(str(r) for r in cols.source_row[rows[:5]]) + (" ..." if rows.size > 5 else "")
        hint = ("add ccf (the share of the undrawn amount drawn by default, IFRS 9 B5.5.31) or ccf_by_dpd"
                if key == "ccf" else
                "add unconditionally_cancellable = true or false: false books a CECL liability on the undrawn "
                "part (ASC 326-20-30-11); there is no default")
        raise AssumptionsError(
            f"segment {name!r} holds {rows.size} row(s) with undrawn amounts (tape lines {lines}) but states no {key}",
            file=file, column=f"segments.{name}.{key}", hint=f"{hint} in [segments.{name}]",
        )


def vintage_segments(cols: TapeColumns) -> Iterator[Findings]:
    """A segment with a vintage loss curve needs each loan's original balance; a revolving line
    has none (its balance is redrawn), so it cannot be placed on a vintage curve."""
    segment = cols.parsed["segment"].values
    original = cols.parsed["original_balance"]
    repayment = cols.parsed["repayment"]
    for name, seg in cols.assumptions.segments.items():
        if seg.vintage_loss_curve is None:
            continue
        in_segment = np.asarray(pc.fill_null(pc.equal(segment, name), False))
        revolving = in_segment & np.asarray(pc.fill_null(pc.equal(repayment.values, "revolving"), False))
        rows = np.flatnonzero(revolving)
        if rows.size:
            message = (f"segment {name!r} uses a vintage loss curve, which needs an original balance; "
                       "a revolving line has none (give its segment an annual_loss_rate instead)")
            yield _findings(rows, "repayment", "revolving_on_vintage_curve", [message] * rows.size)
        rows = np.flatnonzero(in_segment & ~revolving & original.blank)
        if rows.size:
            message = (f"original_balance is blank but segment {name!r} uses a vintage loss curve "
                       f"({_about(FIELDS['original_balance'])})")
            yield _findings(rows, "original_balance", "missing_value", [message] * rows.size)


def purchased_credit_impaired(cols: TapeColumns) -> Iterator[Findings]:
    """POCI loans under IFRS 9: the credit-adjusted EIR, and the lifetime ECL at purchase.

    IFRS 9 discounts a POCI loan's expected losses at its credit-adjusted EIR (B5.5.45), and
    its allowance is the change in lifetime ECL since purchase (5.5.13): a blank purchase
    ECL is not read as 0 (that would book the whole lifetime ECL on day one). It may be left
    blank only for a loan bought in the reporting period, which is measured at its purchase
    date. CECL-only runs need neither.
    """
    # the staged framework (IFRS 9) measures POCI loans as the change since purchase
    if not any(rules_for(f).staged for f in cols.assumptions.run.frameworks):
        return
    flag = cols.parsed["credit_impaired_at_purchase"]
    poci = np.asarray(flag.values, dtype=bool) & ~flag.blank & ~flag.bad
    if not poci.any():
        return
    rate = cols.parsed["credit_adjusted_eir"]
    rows = np.flatnonzero(poci & rate.blank)
    if rows.size:
        message = ("credit_adjusted_eir is blank but required for a purchased credit-impaired loan under IFRS 9 "
                   "(the rate that discounts its expected credit losses, B5.5.45)")
        yield _findings(rows, "credit_adjusted_eir", "missing_value", [message] * rows.size)
    run = cols.assumptions.run
    start = period_start(run.as_of, run.period_months)
    first = int(np.datetime64(start, "D").astype(np.int64))
    origination = cols.parsed["origination_date"].values
    before = (origination != NO_DAY) & (origination <= first)
    ecl = cols.parsed["lifetime_ecl_at_purchase"]
    rows = np.flatnonzero(poci & ecl.blank & before)
    if rows.size:
        message = (f"lifetime_ecl_at_purchase is blank but required for a purchased credit-impaired loan bought "
                   f"before this reporting period (on or before {start.isoformat()}): its IFRS 9 allowance is the "
                   "change since purchase (5.5.13); only a loan bought in the period may leave it blank")
        yield _findings(rows, "lifetime_ecl_at_purchase", "missing_value", [message] * rows.size)


#: The rules, in the order their findings are listed for a row.
ROW_RULES: tuple[Rule, ...] = (
    field_rules, duplicate_ids, unknown_segments, grades, dates, revolving_lines, heloc_terms, commitments,
    balloon_terms, vintage_segments, purchased_credit_impaired,
)


def apply_rules(cols: TapeColumns) -> list[Findings]:
    """Every finding of every rule on the tape, in the rules' order.

    The rules read the columns and write nothing, so they run on two threads (their Arrow
    and numpy passes let go of the GIL): the same findings in the same order."""
    with ThreadPoolExecutor(2, thread_name_prefix="allowance-rules") as pool:
        return [finding for found in pool.map(lambda rule: list(rule(cols)), ROW_RULES) for finding in found]
