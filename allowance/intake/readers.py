"""Readers: a CSV, XLSX or Parquet tape into one table of text, with the line number of each row.

Every reader returns a :class:`RawTape`: the headers as written, one Arrow string column per
header (``null`` for an empty field), and each row's ``source_row`` (the line of the file,
header = line 1; for XLSX the sheet row; for Parquet the row number + 1, as if a header
were line 1). Workbook and Parquet values become the same text a CSV export would hold
(``0.065``, ``2026-09-30``, ``true``), so the same tape in any format validates the same.
"""

from __future__ import annotations

import csv
import datetime as dt
import threading
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from allowance.exceptions import InputFileError, TapeError
from allowance.intake.files import FileKind, Scan, check_text, scan
from allowance.schemas import InputFile


@dataclass(frozen=True)
class Malformed:
    """A CSV line whose number of fields differs from the header's."""

    source_row: int
    fields: list[str]
    last_line: int = 0  # the physical line it ends on (after line breaks inside quoted values)


@dataclass(frozen=True)
class RawTape:
    """A tape as text: ``table`` has one string column per header, in the file's order."""

    headers: list[str]
    table: pa.Table
    source_row: np.ndarray
    record: Scan
    blank_rows: int = 0
    malformed: list[Malformed] = field(default_factory=list)
    lines: int = -1  # physical lines of a CSV file (header included); -1 for XLSX and Parquet
    line_breaks: np.ndarray | None = None  # per row of ``table``: line breaks inside its quoted values

    @property
    def lines_in_values(self) -> int:
        """Line breaks inside quoted values over the whole file (they join physical lines into one record)."""
        if self.lines < 0:
            return 0
        return self.lines - 1 - self.table.num_rows - self.blank_rows - len(self.malformed)

    def text_rows(self, rows: np.ndarray) -> pa.Table:
        """The given rows with every column as text, exactly as read (a typed Parquet value as
        the text a CSV export would hold)."""
        rows = np.asarray(rows, dtype=np.int64)
        if rows.size and (rows.size == 1 or bool(np.all(rows[1:] > rows[:-1]))):
            # rows in order: a mask filters the chunks where they are (a take joins every column's chunks first)
            mask = np.zeros(self.table.num_rows, dtype=bool)
            mask[rows] = True
            taken = self.table.filter(pa.array(mask))
        else:
            taken = self.table.take(pa.array(rows, pa.int64()))
        return pa.table([as_text(c) for c in taken.columns], names=taken.column_names)


def _names(count: int) -> list[str]:
    return [f"c{i}" for i in range(count)]


def _drop_blank(table: pa.Table, source_row: np.ndarray) -> tuple[pa.Table, np.ndarray, int, np.ndarray | None]:
    """Drop rows in which every field is empty (blank lines); return how many and the rows kept."""
    if table.num_rows == 0 or table.num_columns == 0:
        return table, source_row, 0, None
    empty = None
    for column in table.columns:
        if column.null_count == 0 and not pa.types.is_floating(column.type):
            return table, source_row, 0, None  # a column with a value on every row: no blank rows
        is_null = pc.is_null(column, nan_is_null=True)  # a NaN is a blank number
        empty = is_null if empty is None else pc.and_(empty, is_null)
    blank = np.asarray(empty, dtype=bool)
    if not blank.any():
        return table, source_row, 0, None
    return table.filter(pa.array(~blank)), source_row[~blank], int(blank.sum()), ~blank


# --------------------------------------------------------------------------------------
# CSV
# --------------------------------------------------------------------------------------


def _csv_header(path: Path) -> list[str]:
    with path.open("r", encoding="utf-8-sig", newline="") as handle:
        try:
            header = next(csv.reader(handle), None)
        except (UnicodeDecodeError, csv.Error) as err:
            check_text(path)
            raise InputFileError(f"the header line cannot be read ({err})", file=path) from err
    if not header or not any(h.strip() for h in header):
        raise TapeError("has no header line", file=path, hint="the first line must name the columns")
    return header


_BLOCK_BYTES = 1 << 22
_LINE_BREAK = "\r\n|\r|\n"


def _scan_in_background(path: Path) -> tuple[threading.Thread, dict[str, object]]:
    """Hash the file and check that it is UTF-8 while Arrow parses it (hashlib releases the GIL;
    an ASCII block is told in one pass over its bytes)."""
    box: dict[str, object] = {}

    def work() -> None:
        try:
            box["scan"] = scan(path, "tape", text=True, utf8=True)
        except BaseException as err:  # handed to the caller, which raises it
            box["error"] = err

    thread = threading.Thread(target=work, name="allowance-scan", daemon=True)
    thread.start()
    return thread, box


def read_csv(path: Path, sheet: str | None = None, typed: bool = False) -> RawTape:
    """Read a CSV tape with Arrow's multi-threaded reader, once, every column as text.

    The parsers convert the text column-wise (a clean number column in one cast), and the
    rows that fail a conversion are found in the same text, which is also what the rejected
    rows show: the file is never read a second time for them. Lines with the wrong number of
    fields send the whole file through :func:`read_csv_exact`, which keeps them (to be
    rejected) and knows every line number. ``typed`` is ignored (a CSV holds only text).
    """
    import pyarrow.csv as pacsv

    thread, box = _scan_in_background(path)

    def scanned() -> Scan:
        thread.join()
        if "error" in box:
            raise box["error"]  # type: ignore[misc]
        return box["scan"]  # type: ignore[return-value]

    try:
        header = _csv_header(path)
    except Exception:
        scanned()  # a binary or non-UTF-8 file: its error is the clearer one
        raise
    names = _names(len(header))
    # A block costs a chunk of every column: larger blocks for a wide tape (4 MiB for 64
    # columns or fewer, up to 64 MiB from 1,024 columns), small ones for the threads otherwise.
    block_size = min(max(_BLOCK_BYTES, len(names) << 16), 16 * _BLOCK_BYTES)
    invalid: list[object] = []

    def on_invalid(row: object) -> str:
        invalid.append(row)
        return "skip"

    def arrow_read(newlines_in_values: bool) -> pa.Table:
        invalid.clear()
        return pacsv.read_csv(
            path,
            read_options=pacsv.ReadOptions(skip_rows=1, column_names=names, block_size=block_size),
            parse_options=pacsv.ParseOptions(
                newlines_in_values=newlines_in_values, ignore_empty_lines=False, invalid_row_handler=on_invalid
            ),
            convert_options=pacsv.ConvertOptions(
                column_types=dict.fromkeys(names, pa.string()),
                null_values=[""],
                strings_can_be_null=True,
                quoted_strings_can_be_null=True,
                check_utf8=False,  # the scan checks the whole file (the same error, with the byte's offset)
            ),
        )

    # Fast when no quoted value holds a line break; when one does and it crosses a block,
    # Arrow raises (it never misreads) and the careful mode reads it.
    table = None
    for newlines_in_values in (False, True):
        try:
            table = arrow_read(newlines_in_values)
            break
        except pa.ArrowInvalid as err:
            message = str(err)
            if "out of sync" in message and not newlines_in_values:
                continue
            record = scanned()
            if "utf8" in message.lower() or "utf-8" in message.lower():
                check_text(path)
            return read_csv_exact(path, record)
    record = scanned()
    check_quotes_close(path, record)
    if table is None or invalid:
        return read_csv_exact(path, record)
    rows = table.num_rows
    source_row = np.arange(2, rows + 2, dtype=np.int64)
    breaks = None
    if record.lines != rows + 1:
        # Quoted values hold line breaks: each row starts below the breaks of the rows before it.
        breaks = np.zeros(rows, dtype=np.int64)
        for column in table.columns:
            found = pc.count_substring_regex(column, _LINE_BREAK)
            breaks += np.asarray(pc.fill_null(found, 0), dtype=np.int64)
        source_row += np.concatenate([[0], np.cumsum(breaks)[:-1]]) if rows else breaks
    table, source_row, blank, keep = _drop_blank(table, source_row)
    if breaks is not None and keep is not None:
        breaks = breaks[keep]
    return RawTape(
        headers=header, table=table, source_row=source_row, record=record, blank_rows=blank,
        lines=record.lines, line_breaks=breaks,
    )


def check_quotes_close(path: Path, record: Scan) -> None:
    """Raise :class:`TapeError` when a quoted value is still open at the end of the file.

    An odd number of double quotes is the sign (a quote inside an unquoted value, ``5" pipe``,
    is legal and also odd, so the file is then read once more, strictly, to tell them apart).
    Without this check a stray quote swallows every later line into one value.
    """
    if record.quotes < 0 or record.quotes % 2 == 0:
        return
    with path.open("r", encoding="utf-8-sig", newline="") as handle:
        reader = csv.reader(handle, strict=True)
        start = 1
        try:
            for _ in reader:
                start = reader.line_num + 1
        except csv.Error as err:
            if "unexpected end of data" not in str(err):
                return  # another quoting oddity: the lenient readers handle it line by line
            lines = record.lines
            raise TapeError(
                f"a quoted value is never closed: lines {start} to {lines} "
                f"({lines - start + 1} lines) would be read as one value",
                file=path,
                row=start,
                hint="close the quote on that line or remove it; a quote inside a value is written twice",
            ) from err
        except UnicodeDecodeError:
            return  # reported by the readers with its byte offset


def read_csv_exact(path: Path, record: Scan | None = None) -> RawTape:
    """Read a CSV tape row by row with the standard library (slow, exact line numbers)."""
    record = record or scan(path, "tape", text=True)
    check_quotes_close(path, record)
    columns: list[list[str | None]] | None = None
    malformed: list[Malformed] = []
    source_rows: list[int] = []
    breaks: list[int] = []
    blank = 0
    with path.open("r", encoding="utf-8-sig", newline="") as handle:
        reader = csv.reader(handle)
        try:
            header = next(reader, None)
            if not header:
                raise TapeError("has no header line", file=path, hint="the first line must name the columns")
            width = len(header)
            columns = [[] for _ in range(width)]
            start = reader.line_num + 1
            for fields in reader:
                line, start = start, reader.line_num + 1
                if not any(fields):
                    blank += 1
                elif len(fields) != width:
                    malformed.append(Malformed(source_row=line, fields=fields, last_line=reader.line_num))
                else:
                    source_rows.append(line)
                    breaks.append(reader.line_num - line)
                    for target, value in zip(columns, fields):
                        target.append(value if value != "" else None)
        except UnicodeDecodeError as err:
            check_text(path)
            raise InputFileError(f"is not UTF-8 text ({err})", file=path) from err
        except csv.Error as err:
            raise InputFileError(
                f"line {reader.line_num} cannot be read as CSV ({err})",
                file=path,
                row=reader.line_num,
                hint="check the quotes on that line",
            ) from err
    table = pa.table({n: pa.array(c, pa.string()) for n, c in zip(_names(width), columns)})
    return RawTape(
        headers=header,
        table=table,
        source_row=np.asarray(source_rows, dtype=np.int64),
        record=record,
        blank_rows=blank,
        malformed=malformed,
        lines=record.lines,
        line_breaks=np.asarray(breaks, dtype=np.int64) if any(breaks) else None,
    )


# --------------------------------------------------------------------------------------
# XLSX and Parquet: typed cells become the text a CSV export would hold
# --------------------------------------------------------------------------------------


def cell_text(value: object) -> str | None:
    """The CSV text of a workbook cell.

    Examples
    --------
    >>> [cell_text(v) for v in (0.065, 5.0, 7, True, dt.datetime(2026, 9, 30), None, " x ")]
    ['0.065', '5', '7', 'true', '2026-09-30', None, ' x ']
    """
    if value is None:
        return None
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return str(int(value)) if value.is_integer() and abs(value) < 1e15 else repr(value)
    if isinstance(value, dt.datetime):
        return value.date().isoformat() if value.time() == dt.time(0) else value.isoformat(sep=" ")
    if isinstance(value, (dt.date, dt.time)):
        return value.isoformat()
    text = str(value)
    return text if text != "" else None


def _workbook_error(path: Path, err: BaseException) -> InputFileError:
    """One line for a workbook openpyxl cannot open; an XML bomb is named as one."""
    from defusedxml import DefusedXmlException

    link: BaseException | None = err
    while link is not None:
        if isinstance(link, DefusedXmlException):
            return InputFileError(
                f"cannot be opened as a workbook: its XML declares entities or a DTD ({type(link).__name__}), "
                "which a spreadsheet program never writes (an XML bomb?)",
                file=path,
                hint="save the tape again from the spreadsheet program, or export it as CSV",
            )
        link = link.__cause__ or link.__context__
    return InputFileError(f"cannot be opened as a workbook ({err})", file=path,
                          hint="save it again from the spreadsheet program, or export it as CSV")


def read_xlsx(path: Path, sheet: str | None = None, typed: bool = False) -> RawTape:
    """Read a workbook sheet (``sheet`` or the first) in read-only mode; formulas arrive as text."""
    import openpyxl  # parses through defusedxml when it is installed

    record = scan(path, "tape")
    with path.open("rb") as handle:  # a handle, so a workbook named .csv still opens
        try:
            book = openpyxl.load_workbook(handle, read_only=True, data_only=False)
        except Exception as err:  # openpyxl raises many kinds for a damaged file
            raise _workbook_error(path, err) from err
        try:
            if sheet is None:
                ws = book.worksheets[0]
            elif sheet in book.sheetnames:
                ws = book[sheet]
            else:
                raise TapeError(
                    f"has no sheet {sheet!r}; its sheets are {', '.join(map(repr, book.sheetnames))}",
                    file=path,
                    hint="correct [tape] sheet in the assumptions file",
                )
            rows = [[cell_text(v) for v in row] for row in ws.iter_rows(min_row=1, values_only=True)]
        finally:
            book.close()
    first = next((i for i, r in enumerate(rows) if any(v is not None for v in r)), None)
    if first is None:
        raise TapeError("the sheet is empty", file=path, hint="put the header in the first row")
    width = max(len(r) for r in rows)
    header = [h if h is not None else "" for h in rows[first]] + [""] * (width - len(rows[first]))
    while width > 1 and not header[width - 1] and all(len(r) < width or r[width - 1] is None for r in rows):
        width -= 1  # trailing columns with no header and no values
    header = header[:width]
    body = [r[:width] + [None] * (width - len(r)) for r in rows[first + 1:]]
    table = pa.table({n: pa.array([r[i] for r in body], pa.string()) for i, n in enumerate(_names(width))})
    source_row = np.arange(first + 2, first + 2 + len(body), dtype=np.int64)
    table, source_row, blank, _ = _drop_blank(table, source_row)
    return RawTape(headers=header, table=table, source_row=source_row, record=record, blank_rows=blank)


def supported_column(column: pa.ChunkedArray, name: str, path: Path) -> pa.ChunkedArray:
    """The column in a type the tape's parsers read: dictionaries decoded, long text as text,
    empty text as blank, a column with no values (Arrow's null type) as blank text.

    Other types than text, numbers, dates, times and booleans are a :class:`TapeError`."""
    kind = column.type
    if pa.types.is_dictionary(kind):
        column = pc.cast(column, kind.value_type)
        kind = column.type
    if pa.types.is_null(kind):
        return pa.chunked_array([pa.nulls(len(column), pa.string())])
    if pa.types.is_large_string(kind) or pa.types.is_string_view(kind):
        column = pc.cast(column, pa.string())
        kind = column.type
    if pa.types.is_string(kind):
        if column.null_count == len(column) or not pc.any(pc.equal(column, "")).as_py():
            return column
        return pc.if_else(pc.equal(column, ""), pa.scalar(None, pa.string()), column)
    if (pa.types.is_floating(kind) or pa.types.is_integer(kind) or pa.types.is_boolean(kind)
            or pa.types.is_decimal(kind) or pa.types.is_timestamp(kind) or pa.types.is_date(kind)
            or pa.types.is_time(kind)):
        return column
    raise TapeError(
        f"holds {kind} values, which a tape cannot",  # the error names the file and the column
        file=path,
        column=name,
        hint="store it as text, numbers or dates",
    )


def as_text(column: pa.ChunkedArray | pa.Array) -> pa.ChunkedArray | pa.Array:
    """The CSV text of an Arrow column of a supported type (see :func:`arrow_tape`).

    Text stays as it is; numbers, dates and booleans become the text a CSV export holds
    (``0.065``, ``8800``, ``2026-09-30``, ``true``); a NaN is blank, as pandas writes a
    missing number; an infinity is the text ``inf`` (not a number: rejected).

    Examples
    --------
    >>> as_text(pa.array([0.065, 8800.0, float("nan"), float("inf"), None])).to_pylist()
    ['0.065', '8800', None, 'inf', None]
    >>> as_text(pa.array([dt.date(2026, 9, 30), None])).to_pylist(), as_text(pa.array([True, False])).to_pylist()
    (['2026-09-30', None], ['true', 'false'])
    """
    kind = column.type
    if pa.types.is_string(kind):
        return column
    if pa.types.is_dictionary(kind) or pa.types.is_large_string(kind) or pa.types.is_null(kind):
        return pc.cast(column, pa.string())
    if pa.types.is_floating(kind):
        text = pc.cast(column, pa.string())
        if column.null_count == len(column) or not pc.any(pc.is_nan(column)).as_py():
            return text
        return pc.if_else(pc.is_nan(column), pa.scalar(None, pa.string()), text)
    return pc.cast(column, pa.string())


def arrow_tape(table: pa.Table | pa.RecordBatch, path: Path, record: Scan, first_line: int = 2) -> RawTape:
    """A typed Arrow table (a Parquet file, one of its partitions, a DataFrame) as a tape.

    Its columns keep their types: the tape's parsers check a number, date or boolean column
    in its own type and send only text columns, or columns of another type than the field's,
    through the text parser (see :func:`allowance.intake.parse.parse_arrow`). Row ``i`` is
    line ``first_line + i``: 2 for a whole file (as if a header were line 1), the partition's
    first row number + 2 for a partition. Rows in which every value is blank are dropped and
    counted, as blank lines of a CSV are.
    """
    if isinstance(table, pa.RecordBatch):
        table = pa.Table.from_batches([table])
    header = [str(n) for n in table.column_names]
    names = _names(len(header))
    columns = [supported_column(table.column(i), header[i], path) for i in range(len(header))]
    typed = pa.table(columns, names=names) if columns else pa.table({})
    source_row = np.arange(first_line, first_line + typed.num_rows, dtype=np.int64)
    typed, source_row, blank, _ = _drop_blank(typed, source_row)
    return RawTape(headers=header, table=typed, source_row=source_row, record=record, blank_rows=blank)


def read_parquet(path: Path, sheet: str | None = None, typed: bool = False) -> RawTape:
    """Read a Parquet tape: typed columns as they are (``typed``), or each value as its CSV text."""
    import pyarrow.parquet as pq

    record = scan(path, "tape")
    try:
        source = pq.read_table(path)
    except (pa.ArrowException, OSError) as err:
        raise InputFileError(f"cannot be read as Parquet ({err})", file=path) from err
    raw = arrow_tape(source, path, record)
    if typed:
        return raw
    text = pa.table([as_text(c) for c in raw.table.columns], names=raw.table.column_names)
    return RawTape(headers=raw.headers, table=text, source_row=raw.source_row, record=record,
                   blank_rows=raw.blank_rows)


def arrow_record(table: pa.Table, label: str) -> Scan:
    """The run-record entry of a tape handed over in memory: the SHA-256 of its Arrow IPC
    stream (its values and their types), under the path ``<label>``."""
    import hashlib

    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, table.schema.remove_metadata()) as writer:
        writer.write_table(table.replace_schema_metadata(None))
    data = sink.getvalue()
    record = InputFile(role="tape", path=f"<{label}>", sha256=hashlib.sha256(memoryview(data)).hexdigest(),
                       bytes=data.size)
    return Scan(record=record, newlines=-1, ends_with_newline=False)


def read_frame(frame, label: str = "DataFrame") -> RawTape:
    """A tape handed over as a pandas DataFrame, read like a typed Parquet file (row n is line
    n + 1); a column of timestamps that are all at midnight is a column of dates.

    The run record fingerprints it with the SHA-256 of its Arrow IPC stream (the values and
    their types), under the path ``<label>``.
    """
    path = Path(f"<{label}>")
    try:
        source = pa.Table.from_pandas(frame, preserve_index=False)
    except (pa.ArrowException, TypeError, ValueError) as err:
        raise TapeError(f"cannot be read as a tape ({err})", file=path,
                        hint="give text, numbers, dates or true/false in every column") from err
    header = [str(c) for c in frame.columns]
    columns = []
    for i in range(len(header)):
        column = source.column(i)
        if pa.types.is_timestamp(column.type) and column.type.tz is None:
            days = pc.cast(pc.cast(column, pa.date32()), column.type)
            if pc.all(pc.or_kleene(pc.equal(days, column), pc.is_null(column))).as_py() is not False:
                column = pc.cast(column, pa.date32())  # midnight throughout: a date
        columns.append(column)
    table = pa.table(columns, names=header) if columns else pa.table({})
    return arrow_tape(table, path, arrow_record(source, label))


#: Readers by file kind.
READERS: dict[FileKind, Callable[[Path, str | None, bool], RawTape]] = {
    "csv": read_csv,
    "xlsx": read_xlsx,
    "parquet": read_parquet,
}


def read_raw(path: Path, kind: FileKind, sheet: str | None = None, typed: bool = False) -> RawTape:
    """Read a tape of the given kind; ``typed``: keep the Arrow types of a Parquet file's columns
    (see :func:`arrow_tape`) instead of turning every value into its CSV text."""
    return READERS[kind](Path(path), sheet, typed)

