"""Stream a large CSV or Parquet file in batches, each row with its line in the file.

A tape fits in memory; a monthly performance history of tens of millions of loan-months does
not have to. These readers yield the file a batch at a time (Parquet: within its row groups;
CSV: blocks of a few MiB), so the memory used does not grow with the file.

Every batch carries each row's ``source_row`` (the line of the file, header = line 1; for
Parquet the row number + 1), the lines that could not be read as a row (a different number of
fields from the header), and the number of blank lines skipped. Nothing is dropped silently:
rows in batches + malformed lines + blank lines = the file's data lines.

Implements
----------
RawBatch        one batch: the columns as read, line numbers, malformed lines, blank lines
stream_file     the file's header and an iterator of batches (CSV or Parquet, by content)

How CSV line numbers stay exact
-------------------------------
Arrow's streaming reader is fast but, in streaming mode, cannot say on which line a
malformed row was. So the fast reader runs until it meets one (or a quoted value whose line
break confuses its block splitting); then the batch in hand is discarded and the rest of the
file is read from the first record not yet delivered with the standard library's ``csv``
module, which knows every line. A clean file never leaves the fast path.
"""

from __future__ import annotations

import csv
import threading
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from allowance.exceptions import InputFileError, TapeError
from allowance.intake.files import Scan, check_text, file_kind, scan
from allowance.intake.readers import Malformed

#: CSV block read at a time. Arrow reads a few blocks ahead, so peak memory is a few times this.
CSV_BLOCK_BYTES = 1 << 22
#: Rows per batch from Parquet (a row group is decoded a batch at a time).
PARQUET_BATCH_ROWS = 1 << 18
#: Rows per batch in the careful (standard library) CSV path.
EXACT_BATCH_ROWS = 1 << 16


@dataclass(frozen=True)
class RawBatch:
    """A batch of rows as read: one column per header, in the file's order.

    ``table`` columns are named ``c0, c1, ...``; CSV columns are text (``null`` for an empty
    field), Parquet columns keep their types. ``source_row`` is each row's line in the file.
    Blank lines are not rows: they are counted in ``blank_rows``.
    """

    table: pa.Table
    source_row: np.ndarray
    malformed: list[Malformed] = field(default_factory=list)
    blank_rows: int = 0

    @property
    def rows(self) -> int:
        return self.table.num_rows


@dataclass
class FileStream:
    """A file being streamed: its header, its batches, and its fingerprint once read.

    ``estimated_rows`` is the number of data rows (exact for Parquet, from the file size
    and the first block for CSV). ``record`` is available once the batches are exhausted.
    """

    path: Path
    kind: str
    headers: list[str]
    batches: Iterator[RawBatch]
    estimated_rows: int
    _scan: dict[str, object]

    @property
    def record(self) -> Scan:
        thread = self._scan.get("thread")
        if isinstance(thread, threading.Thread):
            thread.join()
        if "error" in self._scan:
            raise self._scan["error"]  # type: ignore[misc]
        return self._scan["scan"]  # type: ignore[return-value]


def _names(count: int) -> list[str]:
    return [f"c{i}" for i in range(count)]


def _split_blank(table: pa.Table, source_row: np.ndarray) -> RawBatch:
    """Drop rows in which every field is empty; count them."""
    if table.num_rows == 0 or table.num_columns == 0:
        return RawBatch(table, source_row)
    empty = None
    for column in table.columns:
        if column.null_count == 0:
            return RawBatch(table, source_row)
        is_null = pc.is_null(column)
        empty = is_null if empty is None else pc.and_(empty, is_null)
    blank = np.asarray(empty, dtype=bool)
    if not blank.any():
        return RawBatch(table, source_row)
    return RawBatch(table.filter(pa.array(~blank)), source_row[~blank], blank_rows=int(blank.sum()))


def _background_scan(path: Path, role: str, text: bool) -> dict[str, object]:
    """Hash the file while it is parsed (hashlib releases the GIL)."""
    box: dict[str, object] = {}

    def work() -> None:
        try:
            box["scan"] = scan(path, role, text=text)
        except BaseException as err:  # handed to the caller, which raises it
            box["error"] = err

    thread = threading.Thread(target=work, name="allowance-scan", daemon=True)
    box["thread"] = thread
    thread.start()
    return box


# --------------------------------------------------------------------------------------
# CSV
# --------------------------------------------------------------------------------------


def _csv_header(path: Path) -> tuple[list[str], int]:
    """The header fields and the number of lines the header takes (1 unless a name holds a break)."""
    with path.open("r", encoding="utf-8-sig", newline="") as handle:
        try:
            reader = csv.reader(handle)
            header = next(reader, None)
        except (UnicodeDecodeError, csv.Error) as err:
            check_text(path)
            raise InputFileError(f"the header line cannot be read ({err})", file=path) from err
        lines = reader.line_num
    if not header or not any(h.strip() for h in header):
        raise TapeError("has no header line", file=path, hint="the first line must name the columns")
    return header, lines


def _embedded_breaks(table: pa.Table) -> np.ndarray:
    """Line breaks inside each row's quoted values (they push the next row's line down)."""
    breaks = np.zeros(table.num_rows, dtype=np.int64)
    for column in table.columns:
        if pa.types.is_string(column.type) and column.null_count < len(column):
            counts = pc.count_substring(column, "\n")
            if pc.max(counts).as_py():
                breaks += np.asarray(pc.fill_null(counts, 0), dtype=np.int64)
    return breaks


def _fast_csv(path: Path, width: int, header_lines: int, delivered: list[int]) -> Iterator[RawBatch]:
    """Arrow's streaming reader. ``delivered[0]`` counts records handed out (blank ones too),
    ``delivered[1]`` the lines they took; on a malformed line it stops and says so by raising
    :class:`_Resume`."""
    import pyarrow.csv as pacsv

    names = _names(width)
    trouble: list[object] = []

    def on_invalid(row: object) -> str:
        trouble.append(row)
        return "skip"

    try:
        reader = pacsv.open_csv(
            path,
            read_options=pacsv.ReadOptions(skip_rows=1, column_names=names, block_size=CSV_BLOCK_BYTES),
            parse_options=pacsv.ParseOptions(ignore_empty_lines=False, invalid_row_handler=on_invalid),
            convert_options=pacsv.ConvertOptions(
                column_types={n: pa.string() for n in names},
                null_values=[""],
                strings_can_be_null=True,
                quoted_strings_can_be_null=True,
            ),
        )
    except pa.ArrowInvalid as err:
        raise _Resume(str(err)) from err
    while True:
        try:
            batch = reader.read_next_batch()
        except StopIteration:
            return
        except pa.ArrowInvalid as err:
            raise _Resume(str(err)) from err
        if trouble:
            raise _Resume("a line with another number of fields than the header")
        table = pa.Table.from_batches([batch])
        breaks = _embedded_breaks(table)
        before = np.concatenate([[0], np.cumsum(breaks)[:-1]]) if len(breaks) else breaks
        source_row = delivered[1] + header_lines + np.arange(1, table.num_rows + 1, dtype=np.int64) + before
        delivered[0] += table.num_rows
        delivered[1] += table.num_rows + int(breaks.sum())
        yield _split_blank(table, source_row)


class _Resume(Exception):
    """The fast reader cannot go on with exact line numbers; the careful one takes over."""


def _exact_csv(path: Path, width: int, skip_records: int) -> Iterator[RawBatch]:
    """The standard library's reader from record ``skip_records`` on: exact lines, malformed kept."""
    names = _names(width)
    with path.open("r", encoding="utf-8-sig", newline="") as handle:
        reader = csv.reader(handle)
        try:
            next(reader)  # the header
            for _ in range(skip_records):
                next(reader)
            while True:
                columns: list[list[str | None]] = [[] for _ in range(width)]
                lines: list[int] = []
                malformed: list[Malformed] = []
                blank = 0
                start = reader.line_num + 1
                for fields in reader:
                    line, start = start, reader.line_num + 1
                    if not any(fields):
                        blank += 1
                    elif len(fields) != width:
                        malformed.append(Malformed(source_row=line, fields=fields))
                    else:
                        lines.append(line)
                        for target, value in zip(columns, fields):
                            target.append(value if value != "" else None)
                    if len(lines) + len(malformed) + blank >= EXACT_BATCH_ROWS:
                        break
                else:
                    if lines or malformed or blank:
                        yield _exact_batch(names, columns, lines, malformed, blank)
                    return
                yield _exact_batch(names, columns, lines, malformed, blank)
        except UnicodeDecodeError as err:
            check_text(path)
            raise InputFileError(f"is not UTF-8 text ({err})", file=path) from err
        except csv.Error as err:
            raise InputFileError(
                f"line {reader.line_num} cannot be read as CSV ({err})",
                file=path, row=reader.line_num, hint="check the quotes on that line",
            ) from err


def _exact_batch(names, columns, lines, malformed, blank) -> RawBatch:
    table = pa.table({n: pa.array(c, pa.string()) for n, c in zip(names, columns)})
    return RawBatch(table, np.asarray(lines, dtype=np.int64), malformed, blank)


def _csv_batches(path: Path, width: int, header_lines: int) -> Iterator[RawBatch]:
    delivered = [0, 0]
    try:
        yield from _fast_csv(path, width, header_lines, delivered)
        return
    except _Resume as why:
        if "utf8" in str(why).lower() or "utf-8" in str(why).lower():
            check_text(path)
            raise InputFileError(f"is not UTF-8 text ({why})", file=path) from None
    yield from _exact_csv(path, width, delivered[0])


# --------------------------------------------------------------------------------------
# Parquet
# --------------------------------------------------------------------------------------


def _parquet_batches(path: Path, handle) -> Iterator[RawBatch]:
    names = _names(len(handle.schema_arrow.names))
    start = 2
    try:
        for batch in handle.iter_batches(batch_size=PARQUET_BATCH_ROWS, use_threads=True):
            table = pa.Table.from_batches([batch]).rename_columns(names)
            rows = np.arange(start, start + table.num_rows, dtype=np.int64)
            start += table.num_rows
            yield _split_blank(table, rows)
    except (pa.ArrowException, OSError) as err:
        raise InputFileError(f"cannot be read as Parquet ({err})", file=path) from err


# --------------------------------------------------------------------------------------
# The entry point
# --------------------------------------------------------------------------------------


def stream_file(path: Path, role: str = "history") -> FileStream:
    """Open a CSV or Parquet file for streaming; the kind is told by content, then suffix.

    Parameters
    ----------
    path
        The file. CSV must be UTF-8 (a byte-order mark is fine).
    role
        What the file is to the run (for its record: ``history``).

    Returns
    -------
    FileStream
        The headers as written, an iterator of :class:`RawBatch` and the estimated row count.
        Its ``record`` (SHA-256 and size, hashed in the background) is ready once the
        batches are exhausted.

    Raises
    ------
    InputFileError
        Missing, empty, binary, not UTF-8 (with the byte offset), a workbook (an XLSX history
        is not streamed: export it as CSV or Parquet), or a damaged Parquet file.
    TapeError
        No header line.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = Path(d) / "h.csv"
    ...     _ = p.write_text('loan_id,month\\nA,2026-01\\n\\n"B\\nB",2026-02\\nC\\nD,2026-03\\n')
    ...     s = stream_file(p)
    ...     batches = list(s.batches)
    >>> [b.source_row.tolist() for b in batches], [m.source_row for b in batches for m in b.malformed]
    ([[2, 4, 7]], [6])
    """
    path = Path(path)
    kind = file_kind(path)
    if kind == "xlsx":
        raise InputFileError(
            "is a workbook; a performance history is read as CSV or Parquet",
            file=path, hint="save the sheet as CSV (UTF-8) or export the history as Parquet",
        )
    if kind == "parquet":
        import pyarrow.parquet as pq

        try:
            handle = pq.ParquetFile(path)
        except (pa.ArrowException, OSError) as err:
            raise InputFileError(f"cannot be read as Parquet ({err})", file=path) from err
        box = _background_scan(path, role, text=False)
        headers = list(handle.schema_arrow.names)
        return FileStream(path, kind, headers, _parquet_batches(path, handle), handle.metadata.num_rows, box)
    box = _background_scan(path, role, text=True)
    try:
        headers, header_lines = _csv_header(path)
    except Exception:
        thread = box["thread"]
        thread.join()  # type: ignore[union-attr]
        if "error" in box:  # a binary or non-UTF-8 file: its error is the clearer one
            raise box["error"] from None  # type: ignore[misc]
        raise
    size = path.stat().st_size
    with path.open("rb") as handle:
        sample = handle.read(1 << 20)
    lines = max(sample.count(b"\n"), 1)
    estimated = max(int(size / max(len(sample) / lines, 1.0)) - header_lines, 0)
    return FileStream(path, kind, headers, _csv_batches(path, len(headers), header_lines), estimated, box)
