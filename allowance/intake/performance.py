"""Read a monthly performance history: stream it, validate every row, keep it as a loan-month panel.

``read_history`` is the one entry point. The file (CSV or Parquet) is read a batch at a time
(:mod:`allowance.intake.stream`); each batch is parsed and checked column-wise with the same
parsers and messages as the tape; accepted rows become a few numbers each in a
:class:`~allowance.intake.panel.LoanMonthPanel`, partitioned by loan and spilled to disk when
the file is large. Nothing is lost: every data row is accepted or rejected with every reason
and its line, and ``rows_read == rows_accepted + rows_rejected``.

Row rules
---------
See :data:`HISTORY_CODES`. The field rules (required, readable, whole, bounds) come from
:class:`allowance.schemas.HistoryRecord`. A loan-month given twice is rejected in every copy
(it cannot be told which is right); that is found once all rows are in, and those rows are
read again from the file so that they are reported exactly as written.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from allowance.exceptions import HistoryError
from allowance.intake.fields import FieldSpec, _spec
from allowance.intake.files import check_size, refuse_other_separators
from allowance.intake.panel import (
    CASH_IN,
    NO_MONTH,
    PAID_OFF,
    REQUIRED_PANEL,
    WRITTEN_OFF,
    LoanMonthPanel,
    Repeated,
)
from allowance.intake.parse import NO_DAY, PARSERS, Parsed, parse_dates, trimmed_text
from allowance.intake.readers import as_text, supported_column
from allowance.intake.rules import Findings, _bad_message, _bounds
from allowance.intake.stream import RawBatch, stream_file
from allowance.schemas import HISTORY_OPTIONAL_COLUMNS, HISTORY_REQUIRED_COLUMNS, HistoryRecord, InputFile

#: Every history column of :class:`HistoryRecord`, in the contract's order.
HISTORY_FIELDS: dict[str, FieldSpec] = {
    name: _spec(name, HistoryRecord.model_fields[name]) for name in (*HISTORY_REQUIRED_COLUMNS, *HISTORY_OPTIONAL_COLUMNS)
}
#: Money movements: blank means 0.
AMOUNTS: tuple[str, ...] = ("charge_off", "bankruptcy_loss", "recoveries", "asset_sales")

#: Reason codes of history rows and what they mean.
HISTORY_CODES: dict[str, str] = {
    "missing_value": "{column} is blank but required",
    "bad_number": "{column} is not a number",
    "not_whole_number": "{column} is not a whole number",
    "bad_date": "{column} is not a date (YYYY-MM-DD; month also YYYY-MM)",
    "bad_boolean": "{column} is not one of true/false, yes/no, y/n, 1/0, t/f",
    "out_of_range": "{column} is outside its allowed range",
    "wrong_field_count": "the line has a different number of fields from the header",
    "origination_after_month": "origination_date is after the end of the row's month",
    "paid_off_and_written_off": "paid_off and a charge-off or bankruptcy loss in the same month",
    "repeated_loan_month": "the loan has another row for the same month (every copy is rejected)",
    "paid_off_with_balance": "paid off but a balance is left at the month end (warning)",
    "balance_after_write_off": "written off but a balance is left at the month end (warning)",
}
_BAD_CODE = {"number": "bad_number", "whole": "bad_number", "date": "bad_date", "boolean": "bad_boolean"}
FINDING_COLUMNS = ["source_row", "loan_id", "column", "code", "severity", "message"]
#: Above this many estimated rows the panel is spilled to disk in partitions.
MEMORY_ROWS = 3_000_000
#: Rows per partition when spilled.
PARTITION_ROWS = 2_000_000


@dataclass(frozen=True)
class HistoryIntake:
    """A performance history read and checked: the panel of accepted rows and the rejected ones.

    panel          the accepted rows (:class:`LoanMonthPanel`, settled); close it when done
                   (``with read_history(...) as history:`` does)
    rejected       one row per rejected row: ``source_row, reason_codes, reasons``, then every
                   column exactly as read (text)
    findings       one row per finding: ``source_row, loan_id, column, code, severity, message``
    rows_read      data rows of the file (blank lines are skipped and counted in ``blank_rows``)
    file           SHA-256 and size of the file
    columns        our column -> the header it was read from
    ignored        headers that are not history columns (not read)
    first_month, last_month   the span of the accepted rows (``YYYY-MM``)
    """

    panel: LoanMonthPanel
    rejected: pd.DataFrame
    findings: pd.DataFrame
    rows_read: int
    file: InputFile
    blank_rows: int
    columns: dict[str, str]
    ignored: list[str]
    first_month: str | None
    last_month: str | None

    @property
    def rows_accepted(self) -> int:
        return self.panel.rows

    @property
    def rows_rejected(self) -> int:
        return len(self.rejected)

    def __enter__(self) -> "HistoryIntake":
        return self

    def __exit__(self, *exc) -> None:
        self.panel.close()


# --------------------------------------------------------------------------------------
# Columns
# --------------------------------------------------------------------------------------


def _norm(header: str) -> str:
    return header.strip().casefold()


def map_history_columns(headers: list[str], mapping: dict[str, str], file: str | Path) -> dict[str, int]:
    """Our history column -> its position in the file (headers matched ignoring case and spaces).

    ``mapping`` maps our name to the extract's header where they differ.

    Raises
    ------
    HistoryError
        A required column is missing (naming close matches), or a header appears twice.

    Examples
    --------
    >>> map_history_columns(["Loan_ID", "segment", "Month", "balance", "dpd"], {"days_past_due": "DPD"}, "h.csv")
    {'loan_id': 0, 'segment': 1, 'month': 2, 'balance': 3, 'days_past_due': 4}
    """
    positions: dict[str, list[int]] = {}
    for i, header in enumerate(headers):
        positions.setdefault(_norm(header), []).append(i)
    unknown = [k for k in mapping if k not in HISTORY_FIELDS]
    if unknown:
        close = difflib.get_close_matches(unknown[0], list(HISTORY_FIELDS), n=1)
        raise HistoryError(
            f"unknown history column {unknown[0]!r} in the column mapping"
            + (f" (did you mean {close[0]!r}?)" if close else ""),
            file=file, hint="the keys are our column names; the values the extract's headers",
        )
    ours: dict[str, int] = {}
    missing = []
    for name in HISTORY_FIELDS:
        target = mapping.get(name, name)
        found = positions.get(_norm(target), [])
        if len(found) > 1:
            raise HistoryError(
                f"header {target!r} appears {len(found)} times (columns {', '.join(str(i + 1) for i in found)})",
                file=file, column=name, hint="rename one of them or map the right one",
            )
        if found:
            ours[name] = found[0]
        elif name in HISTORY_REQUIRED_COLUMNS:
            close = difflib.get_close_matches(_norm(target), list(positions), n=2, cutoff=0.6)
            near = f" (close: {', '.join(repr(headers[positions[c][0]]) for c in close)})" if close else ""
            missing.append(f"{name!r}{near}")
    if missing:
        refuse_other_separators(headers, {_norm(mapping.get(name, name)) for name in HISTORY_FIELDS}, _norm, file,
                                HistoryError, "history", "Parquet")
        raise HistoryError(
            f"missing required column{'s' if len(missing) > 1 else ''}: {', '.join(missing)}",
            file=file,
            hint="a performance history needs loan_id, segment, month, balance and days_past_due; "
                 "rename the headers or map them",
        )
    return ours


# --------------------------------------------------------------------------------------
# Parsing a batch
# --------------------------------------------------------------------------------------



def _as_text(column: pa.ChunkedArray | pa.Array, name: str, file: Path) -> pa.ChunkedArray:
    """Any column as plain text (a typed Parquet column as a CSV export would write it)."""
    if isinstance(column, pa.Array):
        column = pa.chunked_array([column])
    if pa.types.is_string(column.type):
        return column
    return as_text(supported_column(column, name, file))


def _days_of(column: pa.ChunkedArray) -> np.ndarray:
    """Days since 1970 of a typed date or timestamp column (NO_DAY where null)."""
    days = pc.cast(pc.cast(column, pa.timestamp("s")) if pa.types.is_timestamp(column.type) else column, pa.date32())
    values = np.asarray(pc.fill_null(pc.cast(days, pa.int32()), 0), dtype=np.int64)
    return np.where(np.asarray(pc.is_null(days), dtype=bool), NO_DAY, values)


def _months_of_days(days: np.ndarray) -> np.ndarray:
    ok = days != NO_DAY
    months = np.full(len(days), NO_MONTH, dtype=np.int64)
    months[ok] = days[ok].astype("datetime64[D]").astype("datetime64[M]").astype(np.int64)
    return months


def _month_end_day(months: np.ndarray) -> np.ndarray:
    return (months + 1).astype("datetime64[M]").astype("datetime64[D]").astype(np.int64) - 1


@dataclass
class _DateOrder:
    """Day-first or month-first, decided once for the whole file."""

    order: str | None

    def parse(self, columns: dict[str, pa.ChunkedArray], file: str, source_row: np.ndarray) -> dict[str, Parsed]:
        if self.order is not None or not columns:
            return parse_dates(columns, self.order, file, source_row)
        parsed = parse_dates(columns, None, file, source_row)
        if any(_non_iso(c) for c in columns.values()):
            as_day_first = parse_dates(columns, "day_first", file, source_row)
            same = all(np.array_equal(parsed[n].values, as_day_first[n].values) for n in columns)
            as_month_first = parse_dates(columns, "month_first", file, source_row)
            other = all(np.array_equal(parsed[n].values, as_month_first[n].values) for n in columns)
            if same != other:
                self.order = "day_first" if same else "month_first"
        return parsed


def _non_iso(column: pa.ChunkedArray) -> bool:
    """Whether any value is not written year first (``2026-09-30``, ``2026-09``)."""
    given = pc.drop_null(column)
    if len(given) == 0:
        return False
    fifth = pc.utf8_slice_codeunits(pc.utf8_trim_whitespace(given), 4, 5)
    return not pc.all(pc.equal(fifth, "-")).as_py()


def _month_text(column: pa.ChunkedArray) -> pa.ChunkedArray:
    """``YYYY-MM`` becomes ``YYYY-MM-01`` so the date parser reads it; other text is kept."""
    text, _ = trimmed_text(column)
    short = pc.equal(pc.utf8_length(text), 7)
    return pc.if_else(short, pc.binary_join_element_wise(text, "01", "-"), text)


@dataclass(frozen=True)
class _Columns:
    """One batch, parsed: what the rules look at (the interface of the tape rules' columns)."""

    parsed: dict[str, Parsed]
    raw: dict[str, pa.ChunkedArray]
    present: frozenset[str]
    source_row: np.ndarray

    @property
    def rows(self) -> int:
        return len(self.source_row)

    def text(self, column: str, rows: np.ndarray) -> list[str | None]:
        values = pc.take(self.raw[column], pa.array(rows, pa.int64()))
        return _as_text(values, column, Path("")).to_pylist()


def _parse_batch(batch: RawBatch, ours: dict[str, int], dates: _DateOrder, file: Path) -> _Columns:
    rows = batch.rows
    raw = {name: batch.table.column(i) for name, i in ours.items()}
    parsed: dict[str, Parsed] = {}
    date_text: dict[str, pa.ChunkedArray] = {}
    typed_days: dict[str, np.ndarray] = {}
    for name in ("month", "origination_date"):
        if name not in raw:
            continue
        column = raw[name]
        if pa.types.is_date(column.type) or pa.types.is_timestamp(column.type):
            typed_days[name] = _days_of(column)
        else:
            text = _as_text(column, name, file)
            date_text[name] = _month_text(text) if name == "month" else text
    parsed.update(dates.parse(date_text, str(file), batch.source_row))
    for name, days in typed_days.items():
        blank = days == NO_DAY
        parsed[name] = Parsed(values=days, blank=blank, bad=np.zeros(rows, dtype=bool))
    for name, spec in HISTORY_FIELDS.items():
        if spec.kind == "date":
            if name not in parsed:
                parsed[name] = Parsed(np.full(rows, NO_DAY), np.ones(rows, bool), np.zeros(rows, bool))
            continue
        if name not in raw:
            empty = np.ones(rows, dtype=bool)
            values = pa.chunked_array([pa.nulls(rows, pa.string())]) if spec.kind == "text" else np.full(rows, np.nan)
            if spec.kind == "boolean":
                values = np.zeros(rows, dtype=bool)
            parsed[name] = Parsed(values, empty, np.zeros(rows, dtype=bool))
            continue
        column = raw[name]
        if spec.kind == "boolean" and pa.types.is_boolean(column.type):
            blank = np.asarray(pc.is_null(column), dtype=bool)
            values = np.asarray(pc.fill_null(column, False), dtype=bool)
            parsed[name] = Parsed(values, blank, np.zeros(rows, dtype=bool))
            continue
        numeric = pa.types.is_integer(column.type) or pa.types.is_floating(column.type)
        if not (spec.kind in ("number", "whole") and numeric):
            column = _as_text(column, name, file)
        parsed[name] = PARSERS[spec.kind](column, spec)
    return _Columns(parsed=parsed, raw=raw, present=frozenset(ours), source_row=batch.source_row)


# --------------------------------------------------------------------------------------
# The rules
# --------------------------------------------------------------------------------------


def _findings(rows: np.ndarray, column: str, code: str, messages: list[str], severity: str = "reject") -> Findings:
    return Findings(rows=rows, column=column, code=code, severity=severity, messages=messages)  # type: ignore[arg-type]


def _field_rules(cols: _Columns) -> Iterator[Findings]:
    for name, spec in HISTORY_FIELDS.items():
        if name not in cols.present:
            continue
        parsed = cols.parsed[name]
        if spec.required:
            rows = np.flatnonzero(parsed.blank)
            if rows.size:
                what = spec.description.rstrip(".")
                yield _findings(rows, name, "missing_value", [f"{name} is blank but required ({what[:1].lower()}{what[1:]})"] * rows.size)
        rows = np.flatnonzero(parsed.bad)
        if rows.size:
            texts = cols.text(name, rows)
            if name == "month":
                messages = [f"month {t!r} is not a month (write YYYY-MM or the month-end date YYYY-MM-DD)" for t in texts]
            else:
                messages = [_bad_message(spec, t) for t in texts]
            yield _findings(rows, name, _BAD_CODE[spec.kind], messages)
        if parsed.not_whole is not None:
            rows = np.flatnonzero(parsed.not_whole)
            if rows.size:
                yield _findings(rows, name, "not_whole_number",
                                [f"{name} {t!r} is not a whole number" for t in cols.text(name, rows)])
        if spec.kind in ("number", "whole") and spec.bounds_text:
            yield from _bounds(cols, spec, parsed)  # type: ignore[arg-type]


def _row_rules(cols: _Columns) -> Iterator[Findings]:
    p = cols.parsed
    month = p["month"]
    months = _months_of_days(month.values)
    origination = p["origination_date"]
    both = ~origination.blank & ~origination.bad & ~month.blank & ~month.bad
    if both.any():
        late = both & (origination.values > _month_end_day(np.where(both, months, 0)))
        rows = np.flatnonzero(late)
        if rows.size:
            messages = [
                f"origination_date {o} is after the end of month {m}"
                for o, m in zip(origination.values[rows].astype("datetime64[D]"), months[rows].astype("datetime64[M]"))
            ]
            yield _findings(rows, "origination_date", "origination_after_month", messages)
    amount = {n: np.nan_to_num(p[n].values) for n in AMOUNTS}
    written_off = (amount["charge_off"] > 0) | (amount["bankruptcy_loss"] > 0)
    paid = p["paid_off"].values.astype(bool) & ~p["paid_off"].bad
    rows = np.flatnonzero(paid & written_off)
    if rows.size:
        yield _findings(rows, "paid_off", "paid_off_and_written_off",
                        ["paid_off is true but the row also writes an amount off; a loan leaves either repaid or "
                         "written off"] * rows.size)
    balance = np.nan_to_num(p["balance"].values)
    rows = np.flatnonzero(paid & ~written_off & (balance > 0))
    if rows.size:
        yield _findings(rows, "balance", "paid_off_with_balance",
                        [f"paid off with {b:,.2f} left at the month end; treated as repaid" for b in balance[rows]],
                        "warning")
    rows = np.flatnonzero(written_off & (balance > 0))
    if rows.size:
        yield _findings(rows, "balance", "balance_after_write_off",
                        [f"written off with {b:,.2f} left at the month end; the loan is treated as leaving the "
                         "history that month" for b in balance[rows]], "warning")


# --------------------------------------------------------------------------------------
# Rows out
# --------------------------------------------------------------------------------------


def _rejected_frame(headers: list[str], table: pa.Table, source_row: np.ndarray, codes: list[str],
                    reasons: list[str], file: Path) -> pd.DataFrame:
    names = _unique_headers(headers)
    frame = pd.DataFrame({
        "source_row": source_row.astype(np.int64),
        "reason_codes": pd.Series(codes, dtype="str"),
        "reasons": pd.Series(reasons, dtype="str"),
    })
    for i, name in enumerate(names):
        frame[name] = _as_text(table.column(i), name, file).to_pandas().astype("str").to_numpy()
    return frame


def _unique_headers(headers: list[str]) -> list[str]:
    seen = {"source_row", "reason_codes", "reasons"}
    out = []
    for i, h in enumerate(headers):
        name, n = (h or f"column_{i + 1}"), 2
        candidate = name
        while candidate.casefold() in seen:
            candidate, n = f"{name}_{n}", n + 1
        seen.add(candidate.casefold())
        out.append(candidate)
    return out


def _loan_text(cols: _Columns, rows: np.ndarray) -> list[str | None]:
    if "loan_id" not in cols.raw:
        return [None] * len(rows)
    return cols.text("loan_id", rows)


@dataclass
class _Codes:
    """Text -> small integer codes, stable across batches (segments, grades)."""

    names: list[str]

    def encode(self, text: pa.ChunkedArray, blank: np.ndarray) -> np.ndarray:
        if isinstance(text, pa.ChunkedArray):
            text = text.combine_chunks()
        encoded = pc.dictionary_encode(text)
        lookup = {n: i for i, n in enumerate(self.names)}
        table = []
        for value in encoded.dictionary.to_pylist():
            if value not in lookup:
                lookup[value] = len(self.names)
                self.names.append(value)
            table.append(lookup[value])
        index = np.asarray(pc.fill_null(encoded.indices, 0), dtype=np.int64)
        codes = np.asarray(table + [-1], dtype=np.int64)[np.where(blank, len(table), index)]
        if len(self.names) > np.iinfo(np.int16).max:
            raise HistoryError(f"more than {np.iinfo(np.int16).max:,} distinct segments or grades",
                               hint="segments and grades are a short list; check the columns are mapped right")
        return codes


def _panel_rows(cols: _Columns, keep: np.ndarray, panel: LoanMonthPanel, segments: _Codes,
                grades: _Codes) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
    p = cols.parsed
    take = pa.array(keep)

    def text(name: str) -> pa.ChunkedArray:
        return pc.filter(p[name].values, take)

    amounts = {n: np.nan_to_num(p[n].values[keep]) for n in AMOUNTS}
    flags = np.zeros(int(keep.sum()), dtype=np.uint8)
    flags[(amounts["charge_off"] > 0) | (amounts["bankruptcy_loss"] > 0)] |= WRITTEN_OFF
    flags[p["paid_off"].values[keep].astype(bool)] |= PAID_OFF
    flags[(amounts["recoveries"] > 0) | (amounts["asset_sales"] > 0)] |= CASH_IN
    months = _months_of_days(p["month"].values[keep])
    loan = panel.loans.encode(text("loan_id"))
    segment = segments.encode(text("segment"), p["segment"].blank[keep])
    rows = {
        "loan": loan, "month": months, "segment": segment,
        "dpd": p["days_past_due"].values[keep], "balance": p["balance"].values[keep],
        "flags": flags, "source_row": cols.source_row[keep],
    }
    if "grade" in panel.names:
        rows["grade"] = grades.encode(text("grade"), p["grade"].blank[keep])
    if "origination" in panel.names:
        rows["origination"] = _months_of_days(p["origination_date"].values[keep])
    for name in ("original_balance", "credit_limit", "interest_rate", "collateral_value"):
        if name in panel.names:
            rows[name] = p[name].values[keep]
    moved = np.flatnonzero(sum(amounts.values()) > 0)
    events = {"loan": loan[moved], "month": months[moved], "segment": segment[moved],
              "source_row": rows["source_row"][moved], **{n: a[moved] for n, a in amounts.items()}}
    return rows, events


def _findings_frame(chunks: list[Findings], cols: _Columns) -> pd.DataFrame:
    rows = np.concatenate([c.rows for c in chunks])
    counts = [len(c.rows) for c in chunks]
    return pd.DataFrame({
        "source_row": cols.source_row[rows],
        "loan_id": pd.Series(_loan_text(cols, rows), dtype="str"),
        "column": np.repeat([c.column for c in chunks], counts),
        "code": np.repeat([c.code for c in chunks], counts),
        "severity": np.repeat([c.severity for c in chunks], counts),
        "message": [m for c in chunks for m in c.messages],
        "_pos": rows,
    })


def _empty_findings() -> pd.DataFrame:
    return pd.DataFrame({"source_row": pd.Series(dtype=np.int64),
                         **{c: pd.Series(dtype="str") for c in FINDING_COLUMNS[1:]}})


def _reasons(found: pd.DataFrame, positions: np.ndarray) -> tuple[list[str], list[str]]:
    bad = found[found["severity"] == "reject"]
    codes: dict[int, dict[str, None]] = {}
    said: dict[int, list[str]] = {}
    for pos, code, message in zip(bad["_pos"].tolist(), bad["code"].tolist(), bad["message"].tolist()):
        codes.setdefault(pos, {})[code] = None
        said.setdefault(pos, []).append(message)
    return ([";".join(codes[int(r)]) for r in positions], ["; ".join(said[int(r)]) for r in positions])


def _month_text_of(months: np.ndarray) -> list[str]:
    return [str(m) for m in np.asarray(months, np.int64).astype("datetime64[M]")]


def _repeated_rows(path: Path, headers: list[str], repeated: Repeated, panel: LoanMonthPanel,
                   ours: dict[str, int]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Every copy of a repeated loan-month, read again from the file exactly as written."""
    lines_by_key: dict[tuple[int, int], list[int]] = {}
    for line, loan, month in zip(repeated.source_row.tolist(), repeated.loan.tolist(), repeated.month.tolist()):
        lines_by_key.setdefault((loan, month), []).append(line)
    where = {}
    for (loan, month), lines in lines_by_key.items():
        for line in lines:
            where[line] = (loan, month, [x for x in lines if x != line])
    ids = panel.loans.ids
    wanted = np.sort(repeated.source_row)
    parts = []
    for batch in stream_file(path).batches:
        hit = np.isin(batch.source_row, wanted)
        if hit.any():
            parts.append((batch.table.filter(pa.array(hit)), batch.source_row[hit]))
    tables = [t for t, _ in parts]
    table = pa.concat_tables(tables) if tables else None
    lines = np.concatenate([r for _, r in parts]) if parts else np.zeros(0, np.int64)
    messages, loan_ids = [], []
    for line in lines.tolist():
        loan, month, others = where[line]
        loan_id = ids[loan].as_py()
        loan_ids.append(loan_id)
        shown = ", ".join(str(x) for x in sorted(others)[:10]) + (f" and {len(others) - 10} more" if len(others) > 10 else "")
        messages.append(f"loan {loan_id!r} has another row for {_month_text_of([month])[0]} "
                        f"(row{'s' if len(others) > 1 else ''} {shown})")
    rejected = _rejected_frame(headers, table, lines, ["repeated_loan_month"] * len(lines), messages, path) \
        if table is not None else None
    findings = pd.DataFrame({"source_row": lines, "loan_id": pd.Series(loan_ids, dtype="str"),
                             "column": "month", "code": "repeated_loan_month", "severity": "reject",
                             "message": messages})
    return rejected, findings


# --------------------------------------------------------------------------------------
# The entry point
# --------------------------------------------------------------------------------------


def read_history(
    path: Path,
    *,
    columns: dict[str, str] | None = None,
    date_format: str | None = None,
    max_mb: float = 65_536.0,
    memory_rows: int = MEMORY_ROWS,
    partition_rows: int = PARTITION_ROWS,
    spill_dir: Path | None = None,
) -> HistoryIntake:
    """Read, parse and validate a monthly performance history (CSV or Parquet), streaming.

    Parameters
    ----------
    path
        The history: one row per loan per month (see :class:`allowance.schemas.HistoryRecord`).
    columns
        Our column name -> the file's header, where they differ.
    date_format
        ``"iso"``, ``"day_first"`` or ``"month_first"``; only needed when the file's dates are
        ambiguous (ISO dates and ``YYYY-MM`` months are always read).
    max_mb
        Largest file read, in MiB.
    memory_rows, partition_rows
        A history estimated above ``memory_rows`` rows is spilled to disk in partitions of
        about ``partition_rows`` rows each (at most ``memory_rows``) (in ``spill_dir``, default the system's
        temporary folder), so memory holds one partition at a time.

    Returns
    -------
    HistoryIntake
        The settled panel of accepted rows, the rejected rows with every reason, the findings
        and the counts; ``rows_read == rows_accepted + rows_rejected``. Use it in a ``with``
        block, or call ``panel.close()``, to remove any spill files.

    Raises
    ------
    InputFileError
        Missing, too large, binary, not UTF-8, a workbook, a damaged Parquet file.
    HistoryError
        A required column is missing, or the file has no data rows.
    """
    path = Path(path)
    check_size(path, max_mb)
    stream = stream_file(path, "history")
    ours = map_history_columns(stream.headers, columns or {}, path)
    optional = {"grade": "grade", "origination": "origination_date", "original_balance": "original_balance",
                "credit_limit": "credit_limit", "interest_rate": "interest_rate",
                "collateral_value": "collateral_value"}
    names = REQUIRED_PANEL + tuple(n for n, col in optional.items() if col in ours)
    size = min(partition_rows, memory_rows)
    partitions = 1 if stream.estimated_rows <= memory_rows else -(-stream.estimated_rows // size)
    panel = LoanMonthPanel(names=names, partitions=partitions, spill_dir=spill_dir)
    try:
        return _read(path, stream, ours, panel, date_format)
    except BaseException:
        panel.close()
        raise


def _read(path, stream, ours, panel: LoanMonthPanel, date_format) -> HistoryIntake:
    dates = _DateOrder(date_format)
    segments, grades = _Codes(panel.segments), _Codes(panel.grades)
    rejected_parts: list[pd.DataFrame] = []
    finding_parts: list[pd.DataFrame] = []
    rows_read = blank_rows = 0
    first = last = None
    for batch in stream.batches:
        rows_read += batch.rows + len(batch.malformed)
        blank_rows += batch.blank_rows
        if batch.malformed:
            rejected_parts.append(_malformed(stream.headers, batch, ours))
            finding_parts.append(_malformed_findings(batch, ours))
        if batch.rows == 0:
            continue
        cols = _parse_batch(batch, ours, dates, path)
        chunks = [*_field_rules(cols), *_row_rules(cols)]
        reject = np.zeros(cols.rows, dtype=bool)
        for chunk in chunks:
            if chunk.severity == "reject":
                reject[chunk.rows] = True
        if chunks:
            found = _findings_frame(chunks, cols)
            if reject.any():
                positions = np.flatnonzero(reject)
                codes, reasons = _reasons(found, positions)
                rejected_parts.append(_rejected_frame(stream.headers, batch.table.take(pa.array(positions)),
                                                      batch.source_row[positions], codes, reasons, path))
            finding_parts.append(found.drop(columns="_pos"))
        keep = ~reject
        if keep.any():
            rows, events = _panel_rows(cols, keep, panel, segments, grades)
            panel.add(rows, events)
            low, high = int(rows["month"].min()), int(rows["month"].max())
            first = low if first is None else min(first, low)
            last = high if last is None else max(last, high)
    if rows_read == 0:
        raise HistoryError("has a header but no data rows", file=path, hint="export the history again with its rows")
    repeated = panel.settle()
    if len(repeated.source_row):
        again, found = _repeated_rows(path, stream.headers, repeated, panel, ours)
        if again is not None:
            rejected_parts.append(again)
        finding_parts.append(found)
    rejected = (pd.concat(rejected_parts, ignore_index=True).sort_values("source_row", kind="stable", ignore_index=True)
                if rejected_parts else _rejected_frame(stream.headers, _empty_table(stream.headers),
                                                        np.zeros(0, np.int64), [], [], path))
    findings = (pd.concat(finding_parts, ignore_index=True).sort_values("source_row", kind="stable", ignore_index=True)
                if finding_parts else _empty_findings())
    header_of = {name: stream.headers[i] for name, i in ours.items()}
    ignored = [h for i, h in enumerate(stream.headers) if i not in set(ours.values())]
    return HistoryIntake(
        panel=panel, rejected=rejected, findings=findings, rows_read=rows_read, file=stream.record.record,
        blank_rows=blank_rows, columns=header_of, ignored=ignored,
        first_month=None if first is None else _month_text_of([first])[0],
        last_month=None if last is None else _month_text_of([last])[0],
    )


def _empty_table(headers: list[str]) -> pa.Table:
    return pa.table({f"c{i}": pa.array([], pa.string()) for i in range(len(headers))})


def _malformed(headers: list[str], batch: RawBatch, ours: dict[str, int]) -> pd.DataFrame:
    width = len(headers)
    names = _unique_headers(headers)
    records = []
    for m in batch.malformed:
        record = {"source_row": m.source_row, "reason_codes": "wrong_field_count",
                  "reasons": f"the line has {len(m.fields)} fields but the header has {width}"}
        record.update({h: (v if v != "" else None) for h, v in zip(names, m.fields)})
        if len(m.fields) > width:
            record["extra_fields"] = ",".join(m.fields[width:])
        records.append(record)
    frame = pd.DataFrame(records)
    for column in frame.columns[1:]:
        frame[column] = frame[column].astype("str")
    return frame


def _malformed_findings(batch: RawBatch, ours: dict[str, int]) -> pd.DataFrame:
    at = ours.get("loan_id", 0)
    return pd.DataFrame({
        "source_row": [m.source_row for m in batch.malformed],
        "loan_id": pd.Series([m.fields[at] if at < len(m.fields) else None for m in batch.malformed], dtype="str"),
        "column": "", "code": "wrong_field_count", "severity": "reject",
        "message": [f"the line has {len(m.fields)} fields but the header has {len(batch.table.columns)}"
                    for m in batch.malformed],
    })
