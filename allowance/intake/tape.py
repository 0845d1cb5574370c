"""Read a loan tape: map its columns, parse and validate them column-wise, split the rows.

``read_tape`` is the one entry point. Nothing is lost: every data row of the file is either
in ``accepted`` or in ``rejected`` (with every reason it failed), and
``rows_read == rows_accepted + rows_rejected``.
"""

from __future__ import annotations

import contextlib
import dataclasses
import difflib
import functools
import gc
from collections.abc import Iterator, Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from allowance.exceptions import TapeError
from allowance.intake.fields import FIELDS, INT_COLUMNS
from allowance.intake.files import check_size, file_kind, kind_or_csv, refuse_other_separators
from allowance.intake.parse import NO_DAY, PARSERS, Parsed, parse_arrow, parse_dates
from allowance.intake.readers import Malformed, RawTape, as_text, read_frame, read_raw
from allowance.intake.results import IntakeResult, Later, extra_columns_note
from allowance.frameworks import rules_for
from allowance.intake.rules import Findings, TapeColumns, apply_rules, commitment_requirements, segment_requirements
from allowance.schemas import REQUIRED_COLUMNS, RunConfig, is_result_column

FINDING_COLUMNS = ["source_row", "loan_id", "column", "code", "severity", "message"]
_REJECTED_LEAD = ["source_row", "reason_codes", "reasons"]


def _norm(header: str) -> str:
    """A header as matched: case, spaces and underscores ignored (``Loan ID`` is ``loan_id``).

    Examples
    --------
    >>> _norm(" Loan ID"), _norm("loan_id"), _norm("Days Past_Due")
    ('loanid', 'loanid', 'dayspastdue')
    """
    return "".join(header.split()).replace("_", "").casefold()


@dataclass(frozen=True)
class ColumnMap:
    """Where each of our columns is in the file, and the extract's other columns."""

    ours: dict[str, int]  # our column -> position in the file
    extras: dict[str, int]  # output name -> position, for columns carried through
    renamed: dict[str, str] = field(default_factory=dict)  # header -> tape_<header>: named like a result


def _unique(names: list[str], taken: set[str]) -> list[str]:
    """Make names unique (case-insensitively) against each other and ``taken``."""
    seen = {t.casefold() for t in taken}
    out = []
    for name in names:
        candidate, n = name, 2
        while candidate.casefold() in seen:
            candidate, n = f"{name}_{n}", n + 1
        seen.add(candidate.casefold())
        out.append(candidate)
    return out


def map_columns(headers: list[str], mapping: dict[str, str], file: str | Path) -> ColumnMap:
    """Match the file's headers to our columns (ignoring case, spaces and underscores).

    ``mapping`` is ``[tape.columns]``: our name -> the extract's header. A missing required
    column is one :class:`TapeError` naming every missing column with its close matches.

    Examples
    --------
    >>> headers = [" Loan ID", "Segment", "repayment", "origination_date", "maturity_date", "Bal",
    ...            "interest_rate", "days_past_due", "branch"]
    >>> m = map_columns(headers, {"balance": "bal"}, "t.csv")
    >>> m.ours["loan_id"], m.ours["balance"], m.extras
    (0, 5, {'branch': 8})
    >>> map_columns(["Loan ID", "SEGMENT", "Repayment", "Origination Date", "maturity date", "balance",
    ...              "Interest_Rate", "days past due"], {}, "t.csv").ours["origination_date"]
    3

    A column named like a computed result (``stage``, ``ead``, ``ecl_cecl`` ...) is carried as
    ``tape_<name>``, so it can never stand in for the computed figure:

    >>> map_columns([*headers[:-1], "stage"], {"loan_id": "loan id", "balance": "bal"}, "t.csv").extras
    {'tape_stage': 8}
    """
    positions: dict[str, list[int]] = {}
    for i, header in enumerate(headers):
        positions.setdefault(_norm(header), []).append(i)
    ours: dict[str, int] = {}
    missing: list[str] = []
    for name in FIELDS:
        target = mapping.get(name, name)
        found = positions.get(_norm(target), [])
        if len(found) > 1:
            raise TapeError(
                f"header {target!r} appears {len(found)} times (columns {', '.join(str(i + 1) for i in found)})",
                file=file,
                column=name,
                hint="rename one of them or map the right one in [tape.columns]",
            )
        if found:
            ours[name] = found[0]
        elif name in REQUIRED_COLUMNS:
            used = {i for i in ours.values()}
            others = [h for i, h in enumerate(headers) if i not in used]
            close = difflib.get_close_matches(_norm(target), [_norm(h) for h in others], n=3, cutoff=0.6)
            originals = [h for h in others if _norm(h) in close]
            mapped = f" (mapped to {target!r})" if name in mapping else ""
            near = f" (close: {', '.join(map(repr, originals))})" if originals else ""
            missing.append(f"{name!r}{mapped}{near}")
    if missing:
        refuse_other_separators(headers, {_norm(mapping.get(name, name)) for name in FIELDS}, _norm, file,
                                TapeError, "tape")
        plural = "s" if len(missing) > 1 else ""
        raise TapeError(
            f"missing required column{plural}: {', '.join(missing)}",
            file=file,
            hint=f"rename the header{plural} or map {'them' if plural else 'it'} in [tape.columns] of the assumptions file",
        )
    used = set(ours.values())
    rest = [i for i in range(len(headers)) if i not in used]
    names = [headers[i].strip() or f"column_{i + 1}" for i in rest]
    ours_normalised = {_norm(f) for f in (*FIELDS, "source_row")}
    names = [f"extract_{n}" if _norm(n) in ours_normalised else n for n in names]
    # result names keep their underscores ('pd_12m', 'ecl_cecl'): matched as written, case and spaces aside
    renamed = {n: f"tape_{n}" for n in names if is_result_column("_".join(n.split()).casefold())}
    names = [renamed.get(n, n) for n in names]
    return ColumnMap(ours=ours, extras=dict(zip(_unique(names, {*FIELDS, "source_row"}), rest)), renamed=renamed)


def _parse(raw: RawTape, colmap: ColumnMap, config: RunConfig, file: str) -> TapeColumns:
    """Parse every field: a typed column (Parquet) in its own type where it is the field's
    (:func:`parse_arrow`), every other column from its text; dates file-wide."""
    rows = raw.table.num_rows
    held = {
        name: raw.table.column(colmap.ours[name]) if name in colmap.ours else pa.chunked_array([pa.nulls(rows, pa.string())])
        for name in FIELDS
    }
    parsed: dict[str, Parsed] = {}
    text: dict[str, pa.ChunkedArray] = {}
    # the columns parse apart on two threads: Arrow's casts and numpy's passes over a column
    # let go of the GIL, so the second core takes a share (the same values: each column alone)
    with ThreadPoolExecutor(2, thread_name_prefix="allowance-parse") as pool:
        typed = pool.map(lambda item: None if pa.types.is_string(item[1].type) else parse_arrow(item[1], FIELDS[item[0]]),
                         held.items())
        for (name, column), done in zip(held.items(), typed):
            if done is None:
                text[name] = as_text(column)
            else:
                parsed[name] = done
        dates = {n: c for n, c in text.items() if FIELDS[n].kind == "date"}
        rest = [name for name in FIELDS if name not in parsed and name not in dates]
        dated = pool.submit(parse_dates, dates, config.assumptions.tape.date_format, file, raw.source_row)
        others = pool.map(lambda name: PARSERS[FIELDS[name].kind](text[name], FIELDS[name]), rest)
        parsed.update(dated.result())  # a file-wide date error first, as when parsed in turn
        parsed.update(zip(rest, others))
    parsed = {name: parsed[name] for name in FIELDS}  # the fields' order
    return TapeColumns(
        parsed=parsed, raw={**held, **text}, present=frozenset(colmap.ours), assumptions=config.assumptions,
        source_row=raw.source_row,
    )


def _accepted(cols: TapeColumns, raw: RawTape, colmap: ColumnMap, keep: np.ndarray | None) -> pd.DataFrame:
    """The accepted tape frame (the tape-frame contract), built from the parsed columns.

    Built as an Arrow table and converted with one block per column: no copy into
    consolidated 2-D blocks.
    """
    keep_array = None if keep is None else pa.array(keep)

    def take(values: np.ndarray) -> np.ndarray:
        return values if keep is None else values[keep]

    def text(column: pa.ChunkedArray) -> pa.ChunkedArray:
        return column if keep_array is None else pc.filter(column, keep_array)

    out: dict[str, pa.Array | pa.ChunkedArray] = {}
    for name, spec in FIELDS.items():
        values = cols.parsed[name].values
        if spec.kind in ("text", "choice"):
            out[name] = text(values)
        elif spec.kind == "date":
            # days (every parsed date is within a nanosecond timestamp's range) to nanoseconds; NO_DAY is null
            days = take(values)
            missing = days == NO_DAY
            stamps = np.where(missing, 0, days) * np.int64(86_400_000_000_000)
            out[name] = pa.array(stamps, mask=missing if missing.any() else None).view(pa.timestamp("ns"))
        elif name in INT_COLUMNS:
            out[name] = pa.array(take(values).astype(np.int64))
        else:
            out[name] = pa.array(take(values))
    out["source_row"] = pa.array(take(raw.source_row))
    for name, position in colmap.extras.items():
        out[name] = text(as_text(raw.table.column(position)))
    return pa.table(out).to_pandas(split_blocks=True, date_as_object=False)


def _findings_frame(chunks: list[Findings], cols: TapeColumns) -> pd.DataFrame:
    if not chunks:
        return pd.DataFrame({
            "source_row": pd.Series(dtype=np.int64),
            **{c: pd.Series(dtype="str") for c in FINDING_COLUMNS[1:]},
            "_pos": pd.Series(dtype=np.int64),
        })
    rows = np.concatenate([c.rows for c in chunks])
    frame = pd.DataFrame({
        "source_row": cols.source_row[rows],
        "loan_id": pc.take(cols.raw["loan_id"], pa.array(rows, pa.int64())).to_pandas().astype("str").to_numpy(),
        "column": np.repeat([c.column for c in chunks], [len(c.rows) for c in chunks]),
        "code": np.repeat([c.code for c in chunks], [len(c.rows) for c in chunks]),
        "severity": np.repeat([c.severity for c in chunks], [len(c.rows) for c in chunks]),
        "message": [m for c in chunks for m in c.messages],
        "_pos": rows,
    })
    return frame.iloc[np.argsort(frame["source_row"].to_numpy(), kind="stable")].reset_index(drop=True)


def rejected_headers(raw: RawTape) -> list[str]:
    """The rejected frame's names for the file's columns: as written, made unique."""
    return _unique([h or f"column_{i + 1}" for i, h in enumerate(raw.headers)], set(_REJECTED_LEAD))


def _reasons(findings: pd.DataFrame, rows: np.ndarray) -> tuple[list[str], list[str]]:
    """Each rejected row's distinct codes (";"-joined) and messages ("; "-joined), in row order."""
    bad = findings[findings["severity"] == "reject"]
    order = np.argsort(bad["_pos"].to_numpy(), kind="stable")
    positions = bad["_pos"].to_numpy()[order].tolist()
    codes = bad["code"].to_numpy()[order].tolist()
    messages = bad["message"].to_numpy()[order].tolist()
    by_row: dict[int, tuple[dict[str, None], list[str]]] = {}
    for position, code, message in zip(positions, codes, messages):
        seen, said = by_row.setdefault(position, ({}, []))
        seen[code] = None
        said.append(message)
    out = [by_row[int(r)] for r in rows]
    return [";".join(seen) for seen, _ in out], ["; ".join(said) for _, said in out]


def _rejected(raw: RawTape, reject: np.ndarray, findings: pd.DataFrame) -> pd.DataFrame:
    """Rejected rows exactly as read, led by their line, reason codes and reasons."""
    headers = rejected_headers(raw)
    rows = np.flatnonzero(reject)
    if not rows.size and not raw.malformed:
        # no rejected row: one empty block, not one empty column per header (seconds on a wide tape)
        lead = pd.DataFrame({"source_row": pd.Series(dtype=np.int64), "reason_codes": pd.Series(dtype="str"),
                             "reasons": pd.Series(dtype="str")})
        body = pd.DataFrame(np.empty((0, len(headers)), dtype=object), columns=headers, dtype=object)
        return pd.concat([lead, body], axis=1)
    body = raw.text_rows(rows)
    codes, reasons = _reasons(findings, rows)
    # one Arrow table, converted once: a column at a time costs seconds on a 10,000-column tape
    columns = {"source_row": pa.array(raw.source_row[rows], pa.int64()),
               "reason_codes": pa.array(codes, pa.string()), "reasons": pa.array(reasons, pa.string())}
    table = pa.table([*columns.values(), *body.columns], names=[*columns, *headers])
    frame = table.to_pandas()
    if raw.malformed:
        width = len(headers)
        lines = []
        for m in raw.malformed:
            record = {"source_row": m.source_row, "reason_codes": "wrong_field_count",
                      "reasons": _malformed_message(m, width)}
            record.update({h: (v if v != "" else None) for h, v in zip(headers, m.fields)})
            if len(m.fields) > width:
                record["extra_fields"] = ",".join(m.fields[width:])
            lines.append(record)
        extra = pd.DataFrame(lines)
        frame = pd.concat([frame, extra], ignore_index=True)
        frame = frame.sort_values("source_row", kind="stable", ignore_index=True)
        frame = frame.astype(dict.fromkeys(frame.columns[1:], "str"))
    frame["source_row"] = frame["source_row"].astype(np.int64)
    return frame.reset_index(drop=True)


def _malformed_message(m: Malformed, width: int) -> str:
    message = f"the line has {len(m.fields)} fields but the header has {width}"
    if m.last_line > m.source_row:
        message += (f"; it runs on to line {m.last_line} inside a quoted value: a quote opened on line "
                    f"{m.source_row} closes on line {m.last_line}")
    return message


def _malformed_findings(raw: RawTape, colmap: ColumnMap) -> pd.DataFrame:
    at = colmap.ours["loan_id"]
    width = len(raw.headers)
    return pd.DataFrame({
        "source_row": [m.source_row for m in raw.malformed],
        "loan_id": [m.fields[at] if at < len(m.fields) else None for m in raw.malformed],
        "column": "",
        "code": "wrong_field_count",
        "severity": "reject",
        "message": [_malformed_message(m, width) for m in raw.malformed],
    })


def read_tape(path: Path | str | pd.DataFrame, config: RunConfig, *, max_mb: float | None = None,
              accepted_later: bool = False) -> IntakeResult:
    """Read, parse and validate a loan tape (CSV, XLSX, Parquet or a DataFrame).

    Parameters
    ----------
    path
        The tape. CSV must be UTF-8 (a BOM is fine); XLSX is read from ``[tape] sheet`` or its
        first sheet; Parquet columns may be typed. A pandas DataFrame is read like a Parquet
        file (row n is line n + 1, as if a header were line 1) and goes through the same rules.
    config
        The run configuration: ``[tape]`` (column mapping, date format, sheet), the as-of date
        and the segments the rows are checked against.
    max_mb
        Largest file read, in MiB; default ``[run] max_input_mb``.
    accepted_later
        Build the accepted frame only when it is first read (``allowance check`` needs only
        its row count and balance total); the counts and findings are the same.

    Returns
    -------
    IntakeResult
        ``accepted`` (the tape frame), ``rejected`` (each rejected row as read, with every
        reason), ``findings`` (one row per finding, warnings included) and the file record.

    Raises
    ------
    InputFileError
        Missing, too large, binary or not UTF-8 (with the byte offset).
    TapeError
        A required column is missing, dates are ambiguous, or there are no data rows.

    Notes
    -----
    Every rule is applied to whole columns (Arrow kernels and numpy); a row can fail several
    rules and every failure is reported. ``rows_read`` counts the data rows of the file;
    lines in which every field is empty are skipped and counted in ``blank_rows``.
    """
    assumptions = config.assumptions
    with collector_paused():
        if isinstance(path, pd.DataFrame):
            raw = read_frame(path)
            path = Path(raw.record.record.path)
        else:
            path = Path(path)
            check_size(path, max_mb if max_mb is not None else assumptions.run.max_input_mb)
            raw = read_raw(path, file_kind(path), assumptions.tape.sheet, typed=True)
        return _intake(raw, config, path, later=accepted_later)


@contextlib.contextmanager
def collector_paused() -> Iterator[None]:
    """Python's cycle collector off while a tape is read, as it was before afterwards.

    The intake makes few reference cycles, but the tens of thousands of message lists and
    tuples it builds for a tape with many findings set off full collections, each walking
    every object the loaded libraries hold (about 0.1 s a tape of a million rows with 1 %
    of them rejected). Whatever cycles the intake leaves are collected after it.
    """
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()


def _intake(raw: RawTape, config: RunConfig, path: Path, *, later: bool = False) -> IntakeResult:
    """A whole tape as read through the rules, then the as-of check on all of it."""
    if raw.table.num_rows + len(raw.malformed) == 0:
        raise TapeError("has a header but no data rows", file=path, hint="export the tape again with its loans")
    checked = validate(raw, path, config, later=later)
    check_as_of_leaves_loans(checked.dates, config.assumptions.run.as_of, path)
    return checked.intake


@dataclass(frozen=True)
class Validated:
    """A tape (or a part of one) through the rules: the split rows, and the evidence of its
    dates the as-of check reads (:func:`check_as_of_leaves_loans`, run on the whole tape)."""

    intake: IntakeResult
    dates: DateEvidence


def validate(raw: RawTape, path: Path, config: RunConfig, *,
             repeated: Mapping[str, Sequence[int]] | None = None, later: bool = False) -> Validated:
    """Apply every row rule to a tape as read: the one validation path of :func:`read_tape` and
    of a tape read part by part (:mod:`allowance.intake.parts`).

    ``repeated`` is given for a part: the loan ids the whole tape repeats, with their rows
    (a part cannot see the other parts' ids). ``later``: the accepted frame is built when it is
    first read (see :class:`~allowance.intake.results.Later`).
    """
    mapping = config.assumptions.tape.columns
    rows_read = raw.table.num_rows + len(raw.malformed)
    colmap = map_columns(raw.headers, mapping, path)
    cols = _parse(raw, colmap, config, str(path))
    if repeated is not None:
        cols = dataclasses.replace(cols, repeated=repeated)
    if kind_or_csv(path) == "parquet":  # its n-th row is source_row n + 1: messages name source_row
        cols = dataclasses.replace(cols, row_word="source_row")
    # a segment the rows need a key of: one error naming the key (the fix is in the assumptions)
    paydown = [fw for fw in config.frameworks if rules_for(fw).revolving_paydown]
    assumptions_file = next((i.path for i in config.inputs if i.role == "assumptions"), None)
    segment_requirements(cols, paydown, assumptions_file)
    commitment_requirements(cols, assumptions_file)
    chunks = apply_rules(cols) + _line_break_findings(raw, colmap)
    dates = date_evidence(cols)
    reject = np.zeros(cols.rows, dtype=bool)
    for chunk in chunks:
        if chunk.severity == "reject":
            reject[chunk.rows] = True
    findings = _findings_frame(chunks, cols)
    keep = ~reject if reject.any() else None
    if later:
        balance = cols.parsed["balance"].values
        accepted: pd.DataFrame | Later = Later(
            functools.partial(_accepted, cols, raw, colmap, keep), rows=cols.rows - int(reject.sum()),
            # the sum the built frame's balance column gives: the same values in the same order
            balance=float(np.asarray(balance if keep is None else balance[keep], dtype=np.float64).sum()),
        )
    else:
        accepted = _accepted(cols, raw, colmap, keep)
    rejected = _rejected(raw, reject, findings)
    findings = findings.drop(columns="_pos", errors="ignore")
    if raw.malformed:
        findings = pd.concat([findings, _malformed_findings(raw, colmap)], ignore_index=True)
        findings = findings.sort_values("source_row", kind="stable", ignore_index=True)
    as_written = rejected_headers(raw)
    notes = [
        f"the tape's column {header!r} is named like a computed result: it is carried through as "
        f"{carried!r} and the computed {header!r} is not replaced"
        for header, carried in colmap.renamed.items()
    ]
    extra_columns = tuple(as_written[i] for i in sorted(colmap.extras.values()))
    if extra_columns:
        notes.append(extra_columns_note(extra_columns))
    if raw.lines_in_values:
        notes.append(
            f"{path}: {raw.lines:,} lines = 1 header + {rows_read:,} records + {raw.blank_rows:,} blank + "
            f"{raw.lines_in_values:,} line breaks inside quoted values; the records holding them are listed "
            "with code line_break_in_value or records_in_value"
        )
    return Validated(intake=IntakeResult(
        accepted=accepted,
        rejected=rejected,
        findings=findings,
        rows_read=rows_read,
        file=raw.record.record,
        blank_rows=raw.blank_rows,
        headers={name: as_written[i] for name, i in colmap.ours.items()},
        date_formats={name: cols.parsed[name].form for name in FIELDS
                      if FIELDS[name].kind == "date" and name in colmap.ours},
        lines=raw.lines,
        lines_in_values=raw.lines_in_values,
        notes=tuple(notes),
        extra_columns=extra_columns,
    ), dates=dates)



def _line_break_findings(raw: RawTape, colmap: ColumnMap) -> list[Findings]:
    """Records whose quoted values hold line breaks: the sign of a quote closed in the wrong place.

    A value of one of our columns never holds a line break, so such a record is rejected
    (``line_break_in_value``). In another column (free text) a line break can be genuine and
    the record is kept with a warning, unless the value holds what look like whole lines of
    the tape (at least half a header's worth of commas per line break): then a quote opened
    on one line closed lines later and the loans in between were swallowed into one value, so
    the record is rejected (``records_in_value``) and the swallowed lines are named.
    """
    if raw.line_breaks is None or not raw.line_breaks.any():
        return []
    rows = np.flatnonzero(raw.line_breaks > 0)
    taken = pa.array(rows, pa.int64())
    ours = {i: name for name, i in colmap.ours.items()}
    names = rejected_headers(raw)
    width = len(raw.headers)
    found: dict[int, tuple[str, str]] = {}  # row position -> (code, column), the first column wins
    for i, column in enumerate(raw.table.columns):
        if not (pa.types.is_string(column.type) or pa.types.is_large_string(column.type)):
            continue
        values = pc.take(column, taken)
        breaks = np.asarray(pc.fill_null(pc.count_substring_regex(values, r"\r\n|\r|\n"), 0), dtype=np.int64)
        if not breaks.any():
            continue
        commas = np.asarray(pc.fill_null(pc.count_substring(values, ","), 0), dtype=np.int64)
        swallowed = commas >= breaks * max(1, (width - 1) // 2)
        for position in np.flatnonzero(breaks):
            code = "line_break_in_value" if i in ours else ("records_in_value" if swallowed[position] else "line_break_warning")
            found.setdefault(int(rows[position]), (code, ours.get(i, names[i])))
    out: list[Findings] = []
    for code in ("line_break_in_value", "records_in_value", "line_break_warning"):
        positions = np.array(sorted(p for p, (c, _) in found.items() if c == code), dtype=np.int64)
        for column in sorted({found[int(p)][1] for p in positions}):
            here = np.array([p for p in positions if found[int(p)][1] == column], dtype=np.int64)
            messages = []
            for p in here:
                first = int(raw.source_row[p])
                last = first + int(raw.line_breaks[p])
                span = f"the record runs from line {first} to line {last}"
                if code == "line_break_in_value":
                    messages.append(f"{column} holds a line break ({span}): a quote is closed in the wrong place")
                elif code == "records_in_value":
                    messages.append(
                        f"{column} holds what look like whole lines of the tape ({span}): a quote opened on "
                        f"line {first} closes on line {last}, swallowing the loans in between"
                    )
                else:
                    messages.append(f"{column} holds line breaks ({span}); kept as text")
            severity = "warning" if code == "line_break_warning" else "reject"
            out.append(Findings(rows=here, column=column, code=code if severity == "reject" else "line_break_in_value",
                                severity=severity, messages=messages))
    return out


@dataclass(frozen=True)
class DateEvidence:
    """What the as-of check needs from a tape's dates; parts of a tape combine with ``|``.

    Days since 1970-01-01; ``first``/``last`` origination over dated rows, ``matures`` the
    latest maturity of a term loan (None: no such row).
    """

    dated: bool = False
    revolving_on_book: bool = False  # a revolving line originated by the as-of date
    term: bool = False  # a dated term loan with a maturity
    live_term: bool = False  # a term loan on the book at the as-of date
    first: int | None = None
    last: int | None = None
    matures: int | None = None

    def __or__(self, other: DateEvidence) -> DateEvidence:
        def pick(f, x, y):
            return y if x is None else x if y is None else f(x, y)

        return DateEvidence(
            dated=self.dated or other.dated, revolving_on_book=self.revolving_on_book or other.revolving_on_book,
            term=self.term or other.term, live_term=self.live_term or other.live_term,
            first=pick(min, self.first, other.first), last=pick(max, self.last, other.last),
            matures=pick(max, self.matures, other.matures),
        )


def date_evidence(cols: TapeColumns) -> DateEvidence:
    """The tape's :class:`DateEvidence` at the as-of date."""
    as_of = int(np.datetime64(cols.assumptions.run.as_of, "D").astype(np.int64))
    origination = cols.parsed["origination_date"].values
    maturity = cols.parsed["maturity_date"].values
    dated = origination != NO_DAY
    if not dated.any():
        return DateEvidence()
    revolving = np.asarray(pc.fill_null(pc.equal(cols.parsed["repayment"].values, "revolving"), False))
    originated = dated & (origination <= as_of)
    term = dated & ~revolving & (maturity != NO_DAY)
    return DateEvidence(
        dated=True, revolving_on_book=bool((originated & revolving).any()), term=bool(term.any()),
        live_term=bool((term & originated & (maturity > as_of)).any()),
        first=int(origination[dated].min()), last=int(origination[dated].max()),
        matures=int(maturity[term].max()) if term.any() else None,
    )


def check_as_of_leaves_loans(evidence: DateEvidence, as_of: date, path: Path | str) -> None:
    """Raise :class:`TapeError` when the as-of date leaves no loan on the book.

    A loan is on the book at the as-of date when it was originated on or before it and, for
    a term loan, matures after it. When no row with readable dates is, or when the tape has
    term loans and every one of them has matured (revolving lines never mature, so they
    cannot vouch for the date), the as-of date or the tape is wrong: a run would report an
    allowance for a book that is not there.
    """
    if not evidence.dated:
        return
    if evidence.revolving_on_book and (evidence.live_term or not evidence.term):
        return
    if evidence.live_term:
        return
    first, last = _date_text(evidence.first), _date_text(evidence.last)
    ends = f" and its term loans mature by {_date_text(evidence.matures)}" if evidence.matures is not None else ""
    raise TapeError(
        f"the as-of date {as_of.isoformat()} leaves no loan on the book: the tape's loans were originated from "
        f"{first} to {last}{ends}",
        file=path,
        hint="check [run] as_of in the assumptions file against the tape's dates",
    )


def _date_text(day: np.integer) -> str:
    return str(np.datetime64(int(day), "D"))
