"""Long tables in the workbook (loan detail, monthly curves), and saving the book to disk.

Implements
----------
BulkSheet   a frame laid out by XlsxWriter (title rows, header, first row) whose other rows
            are generated column-wise and streamed into the sheet's XML when the book is saved
save        close the book and write the file: bulk rows streamed in, every ZIP entry dated
            from the run's clock (byte-identical reruns under ``SOURCE_DATE_EPOCH``)

Why bulk sheets
---------------
A writer that goes cell by cell in Python manages some 30,000-100,000 cells a second; the
loan sheet of a 10,000-loan tape has ~450,000 and a 200,000-loan one ~9 million. A bulk
sheet's rows are instead formatted a column at a time by Arrow's compute functions (numbers
cast to their shortest text, cells and rows joined element-wise; a text that repeats is
cleaned and escaped once). XlsxWriter lays the sheet out (title rows, header, the first
data row, widths, filter, frozen panes) so every style is registered; the saved sheet's
first data row gives each column's style id, and the remaining rows go in after it. Text
is written as inline strings (``t="inlineStr"``), which every reader takes as text, never
as a formula. Bulk sheets hold values only, never formulas.
"""

from __future__ import annotations

import io
import re
import zipfile
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from allowance.report.cells import TEXT_LIMIT, clean_text, number_kind
from allowance.report.xlsx import Book, Sheet, col_letter, value_width

__all__ = ["BULK_HEADER_ROW", "BulkSheet", "save"]

#: On a bulk sheet: rows 1-2 are the title rows, row 3 says what the sheet holds and that it
#: is not printed by default, row 4 is the header, the data start on row 5.
BULK_HEADER_ROW = 4
_EXCEL_EPOCH = np.datetime64("1899-12-30", "s")


def escape(text: str) -> str:
    """``&``, ``<`` and ``>`` as XML entities (what ``xml.sax.saxutils.escape`` does; that module
    imports ``urllib.request``, and with it ``http.client`` and ``ssl``, at every start).

    >>> escape("a<b & c>d")
    'a&lt;b &amp; c&gt;d'
    """
    return text.replace("&", "&amp;").replace(">", "&gt;").replace("<", "&lt;")


#: text that :func:`clean_text` or the XML escape would change (a would-be formula, ``& < >``,
#: a character XML cannot hold), in RE2 syntax; Arrow finds these, Python mends only them
_NEEDS_MENDING = r"^[=+\-@\t\r]|[&<>\x00-\x08\x0b\x0c\x0e-\x1f\x{FFFE}\x{FFFF}]"


def _xml_texts(values: Any) -> pa.Array:
    """Cell text, cleaned (and cut) first, XML-escaped after: an escape is never cut.

    Plain text (nearly all of a tape: ids, segments, grades) passes through Arrow untouched;
    only the values that need it go through :func:`clean_text` and the escape one by one.
    """
    try:
        texts = pa.array(values, type=pa.string())
    except (pa.ArrowInvalid, pa.ArrowTypeError):  # not all text: each value as a cell shows it
        return pa.array([escape(clean_text(v)) for v in list(values)], type=pa.string())
    odd = pc.or_(pc.match_substring_regex(texts, _NEEDS_MENDING), pc.greater(pc.utf8_length(texts), TEXT_LIMIT))
    if not pc.any(odd).as_py():
        return texts
    mended = [escape(clean_text(texts[i].as_py())) for i in np.flatnonzero(odd.to_numpy(zero_copy_only=False))]
    return pc.replace_with_mask(texts, odd, pa.array(mended, type=pa.string()))


def _numbers_text(numbers: np.ndarray) -> pa.Array:
    """Each number as the shortest text that reads back to it (Arrow's formatting, in C++)."""
    return pc.cast(pa.array(numbers), pa.string())


class _Column:
    """One column of a bulk sheet, read from the frame once: its values as numbers, flags or
    codes into its distinct texts (cleaned and escaped once), and which cells are blank; each
    chunk of rows then only slices these."""

    def __init__(self, series: pd.Series | None, letter: str, style: int,
                 block: "_FloatBlock | None" = None, index: int = 0) -> None:
        self.pre = f'<c r="{letter}'
        self.mid, self.tail = f'" s="{style}"><v>', "</v></c>"
        self.blank: np.ndarray | None = None
        self.integers: np.ndarray | None = None
        self.numbers: np.ndarray | None = None
        self.texts: pa.Array | None = None
        self.codes: np.ndarray | None = None
        self.block, self.index = block, index
        if block is not None:  # a float column of a run of them: its numbers are the block's
            self.blank = block.blank[:, index]
            return
        dtype = series.dtype
        if pd.api.types.is_bool_dtype(dtype):
            self.blank = series.isna().to_numpy(dtype=bool) if series.hasnans else None
            self.texts = pa.array(["0", "1"])
            self.codes = series.fillna(False).to_numpy(dtype=bool).astype(np.int8)
            self.mid = f'" s="{style}" t="b"><v>'
        elif pd.api.types.is_datetime64_any_dtype(dtype):
            stamps = series.to_numpy(dtype="datetime64[s]")
            self.blank = np.isnat(stamps)
            self.numbers = np.where(self.blank, 0.0, (stamps - _EXCEL_EPOCH).astype(np.float64) / 86400.0)
        elif pd.api.types.is_numeric_dtype(dtype):
            numbers = series.to_numpy(dtype=np.float64, na_value=np.nan)
            self.blank = ~np.isfinite(numbers)
            self.numbers = np.where(self.blank, 0.0, numbers)
            if pd.api.types.is_integer_dtype(dtype):
                # whole numbers as integers, except in a chunk holding a blank (as floats there)
                self.integers = series.to_numpy(dtype=np.int64, na_value=0) if series.hasnans else \
                    series.to_numpy(dtype=np.int64)
        else:
            # text: clean and escape each distinct value once (ids are unique, segments repeat)
            codes, uniques = pd.factorize(series, use_na_sentinel=True)
            self.texts = pa.concat_arrays([_xml_texts(uniques), pa.array([""], type=pa.string())])
            self.blank = codes < 0
            self.codes = np.where(self.blank, len(self.texts) - 1, codes)
            self.mid, self.tail = f'" s="{style}" t="inlineStr"><is><t xml:space="preserve">', "</t></is></c>"

    def values(self, start: int, stop: int, blank: np.ndarray | None) -> pa.Array:
        """The text of each cell's value in rows ``start:stop``."""
        if self.block is not None:
            return self.block.texts(start, stop, self.index)
        if self.texts is not None:
            return pc.take(self.texts, pa.array(self.codes[start:stop]))
        if self.integers is not None and blank is None:
            return _numbers_text(self.integers[start:stop])
        return _numbers_text(self.numbers[start:stop])

    def pieces(self, start: int, stop: int, rows: pa.Array) -> list[Any]:
        """The pieces whose element-wise join is each cell's ``<c>`` element: a blank column's
        cells joined already ('' where blank), a full one's left for the row's one join."""
        blank = self.blank[start:stop] if self.blank is not None else None
        blank = blank if blank is not None and blank.any() else None
        values = self.values(start, stop, blank)
        if blank is None:
            return [self.pre, rows, self.mid, values, self.tail]
        cells = pc.binary_join_element_wise(self.pre, rows, self.mid, values, self.tail, "")
        return [pc.if_else(pa.array(blank), "", cells)]


class _FloatBlock:
    """Adjacent float columns read from the frame as one array, each chunk's numbers cast to
    text in one call (a wide sheet of months has hundreds of such columns)."""

    def __init__(self, numbers: np.ndarray) -> None:
        self.blank = ~np.isfinite(numbers)
        self.numbers = np.where(self.blank, 0.0, numbers)
        self._chunk: tuple[int, int] | None = None
        self._texts: pa.Array | None = None

    def texts(self, start: int, stop: int, index: int) -> pa.Array:
        if self._chunk != (start, stop):
            self._texts = _numbers_text(self.numbers[start:stop].ravel(order="F"))
            self._chunk = (start, stop)
        return self._texts.slice(index * (stop - start), stop - start)


def _columns(frame: pd.DataFrame, styles: list[int]) -> list[_Column]:
    """The frame's columns read once; a run of float columns as one block."""
    dtypes = frame.dtypes.tolist()
    floats = [isinstance(d, np.dtype) and d == np.float64 for d in dtypes]
    columns: list[_Column] = []
    j = 0
    while j < len(dtypes):
        k = j
        while k < len(dtypes) and floats[k]:
            k += 1
        if k - j > 1:
            block = _FloatBlock(frame.iloc[:, j:k].to_numpy(dtype=np.float64))
            columns += [_Column(None, col_letter(m + 1), styles[m], block, m - j) for m in range(j, k)]
            j = k
        else:
            columns.append(_Column(frame.iloc[:, j], col_letter(j + 1), styles[j]))
            j += 1
    return columns


def _joined(pieces: list[Any]) -> list[Any]:
    """Adjacent texts (not arrays) as one, for fewer arguments to the join."""
    out: list[Any] = []
    for piece in pieces:
        if isinstance(piece, str) and out and isinstance(out[-1], str):
            out[-1] += piece
        else:
            out.append(piece)
    return out


def _utf8(texts: pa.Array) -> memoryview:
    """The UTF-8 bytes of an Arrow string array's values, back to back, without a copy."""
    offsets = np.frombuffer(texts.buffers()[1], dtype=np.int32 if texts.type == pa.string() else np.int64)
    first, last = int(offsets[texts.offset]), int(offsets[texts.offset + len(texts)])
    return memoryview(texts.buffers()[2])[first:last]


def _widest(numbers: np.ndarray) -> list[list[float]]:
    """Per column of ``numbers`` (rows down, NaN for blank), the values among its first 50
    non-blank whose display is widest: the smallest and the largest finite one (a number's
    display grows with its size on each side of zero) and any infinity."""
    present = ~np.isnan(numbers)
    taken = present & (np.cumsum(present, axis=0) <= 50)
    finite = taken & np.isfinite(numbers)
    low = np.where(finite, numbers, np.inf).min(axis=0, initial=np.inf)
    high = np.where(finite, numbers, -np.inf).max(axis=0, initial=-np.inf)
    some = finite.any(axis=0)
    below = (taken & (numbers == -np.inf)).any(axis=0)
    above = (taken & (numbers == np.inf)).any(axis=0)
    return [[float(v) for v, keep in ((low[j], some[j]), (high[j], some[j]), (-np.inf, below[j]), (np.inf, above[j]))
             if keep] for j in range(numbers.shape[1])]


@dataclass
class BulkSheet:
    """A long table on its own sheet: column names as given (``loans.csv``'s own names on
    the loan sheet), one display kind per column, not printed by default.

    ``headers`` maps a column to the header shown (default: the column name itself),
    ``kinds`` a column to its display kind (default: :func:`~allowance.report.cells.number_kind`).
    """

    sheet: Sheet
    frame: pd.DataFrame
    note: str = ""
    headers: dict[str, str] = field(default_factory=dict)
    freeze_columns: int = 0
    kinds: dict[str, str] = field(default_factory=dict)
    styles: list[int] = field(default_factory=list)
    #: rows per chunk of XML; by default a quarter of the rows, from 1,000 to 20,000, so that
    #: even a short sheet is made in a few chunks and each chunk's compression runs beside the
    #: making of the next (:func:`_write_behind`). One chunk of the demo's 10,022-loan sheet
    #: saved the workbook in 0.61-0.79 s, four in 0.53-0.70 s (5 tries each, the same bytes).
    chunk_rows: int | None = None

    def __post_init__(self) -> None:
        sheet, frame = self.sheet, self.frame
        names = list(frame.columns)
        self.column_kinds = [self.kinds.get(n) or number_kind(n, frame[n].dtype) for n in names]
        sheet.printed = False
        sheet.note_rows = BULK_HEADER_ROW - 1
        sheet.note(BULK_HEADER_ROW - 1, f"{len(frame):,} rows. {self.note} Not printed by default: printing this "
                   "sheet gives this note only (to print the table, clear the print area: Page Layout > Print Area).",
                   span=min(max(len(names), 1), 10))
        sheet.header(BULK_HEADER_ROW, 1, [self.headers.get(n, str(n)) for n in names], self.column_kinds)
        first = frame.head(1)
        for j, value in enumerate(first.iloc[0].tolist() if len(first) else []):
            sheet.put(BULK_HEADER_ROW + 1, j + 1, value, self.column_kinds[j])
        # column widths from the first rows, so a long id or reason is not cut
        head = frame.head(200)
        dtypes = head.dtypes.tolist()
        numeric = [j for j, d in enumerate(dtypes) if self.column_kinds[j] != "text"
                   and pd.api.types.is_numeric_dtype(d) and not pd.api.types.is_bool_dtype(d)]
        widest = dict(zip(numeric, _widest(head.iloc[:, numeric].to_numpy(dtype=np.float64, na_value=np.nan))))
        for j, (_, sample) in enumerate(head.items()) if len(widest) < len(dtypes) else ():
            if self.column_kinds[j] == "text":
                longest = max((len(str(v)) for v in sample.dropna().tolist()), default=0)
                sheet.fit[j + 1] = max(sheet.fit[j + 1], min(longest, 40) + 2)
            elif j not in widest:  # dates, flags: each of the first 50 values
                for value in sample.dropna().tolist()[:50]:
                    sheet.fit[j + 1] = max(sheet.fit[j + 1], value_width(value, self.column_kinds[j]))
        for j, values in widest.items():
            for value in values:
                sheet.fit[j + 1] = max(sheet.fit[j + 1], value_width(value, self.column_kinds[j]))
        sheet.ws.freeze_panes(BULK_HEADER_ROW, self.freeze_columns)
        if names:
            sheet.ws.autofilter(BULK_HEADER_ROW - 1, 0, BULK_HEADER_ROW - 1 + len(frame), len(names) - 1)
        sheet.last_row = max(sheet.last_row, BULK_HEADER_ROW + len(frame))

    @property
    def first_data_row(self) -> int:
        return BULK_HEADER_ROW + 1

    @property
    def last_data_row(self) -> int:
        return BULK_HEADER_ROW + len(self.frame)

    def rows_xml(self, styles: list[int]):
        """The XML (UTF-8) of the data rows after the first, in chunks: each chunk's rows made by
        one element-wise join over every column's pieces."""
        frame = self.frame
        columns = _columns(frame, styles)
        start_row = BULK_HEADER_ROW + 2
        step = self.chunk_rows or min(max(-(-len(frame) // 4), 1_000), 20_000)
        for start in range(1, len(frame), step):
            stop = min(start + step, len(frame))
            first = start_row + start - 1
            rows = pc.cast(pa.array(np.arange(first, first + stop - start, dtype=np.int64)), pa.string())
            pieces: list[Any] = ['<row r="', rows, '">']
            for column in columns:
                pieces += column.pieces(start, stop, rows)
            xml = pc.binary_join_element_wise(*_joined(pieces + ["</row>"]), "")
            yield _utf8(xml)

    @property
    def dimension(self) -> str:
        cols = max(len(self.frame.columns), 1)
        return f"A1:{col_letter(cols)}{BULK_HEADER_ROW + max(len(self.frame), 1)}"


_DIMENSION = re.compile(r'<dimension ref="[^"]*"\s*/>')
_STYLE = re.compile(r'<c r="([A-Z]+)(\d+)"(?: s="(\d+)")?')


_NUMBER_CELL = re.compile(r'(<c r="([A-Z]+)(\d+)"(?: s="\d+")?><v>)([^<]*)(</v></c>)')


def _exact_first_row(xml: str, bulk: BulkSheet) -> str:
    """The first data row with every float that XlsxWriter wrote at 16 significant digits (and
    so not as computed) as the other rows give it: the shortest text that reads back exactly."""
    first = bulk.frame.head(1)
    floats = {}
    for j, (dtype, value) in enumerate(zip(first.dtypes.tolist(), first.iloc[0].tolist() if len(first) else [])):
        if pd.api.types.is_float_dtype(dtype) and pd.notna(value) and np.isfinite(float(value)):
            floats[col_letter(j + 1)] = float(value)
    if not floats:
        return xml
    row = str(bulk.first_data_row)
    start = xml.find(f'<row r="{row}"')
    end = xml.find("</row>", start)
    if start < 0 or end < 0:
        return xml

    def exact(match: re.Match) -> str:
        value = floats.get(match.group(2))
        if match.group(3) != row or value is None or float(match.group(4)) == value:
            return match.group(0)
        return match.group(1) + _numbers_text(np.array([value]))[0].as_py() + match.group(5)

    return xml[:start] + _NUMBER_CELL.sub(exact, xml[start:end]) + xml[end:]


def _first_row_styles(xml: str, bulk: BulkSheet) -> list[int]:
    row = str(bulk.first_data_row)
    found = {m.group(1): int(m.group(3) or 0) for m in _STYLE.finditer(xml) if m.group(2) == row}
    return [found.get(col_letter(j + 1), 0) for j in range(len(bulk.frame.columns))]


def _write_behind(out: Any, pieces: Iterator[Any]) -> None:
    """Write each piece while the next is made: compressing (zlib) and making rows (Arrow) both
    run outside the GIL, so on two cores they overlap; the bytes are those of writing in turn."""
    with ThreadPoolExecutor(1, thread_name_prefix="allowance-xlsx") as pool:
        pending = None
        for piece in pieces:
            if pending is not None:
                pending.result()
            pending = pool.submit(out.write, piece)
        if pending is not None:
            pending.result()


def _zip_time(stamp: datetime) -> tuple[int, int, int, int, int, int]:
    """A ZIP entry time (DOS times start in 1980 and end in 2107)."""
    if stamp.year < 1980:
        return (1980, 1, 1, 0, 0, 0)
    if stamp.year > 2107:
        return (2107, 12, 31, 23, 59, 58)
    return (stamp.year, stamp.month, stamp.day, stamp.hour, stamp.minute, stamp.second)


def save(book: Book, path: Path, bulks: list[BulkSheet], *, created: datetime, title: str) -> None:
    """Finish every sheet, close the book and write it to ``path``.

    Every time in the file (document created / modified, each ZIP entry) is ``created``, so
    two runs with the same inputs and the same clock (``SOURCE_DATE_EPOCH``) give the same
    bytes.
    """
    import allowance

    book.workbook.set_properties({
        "title": clean_text(title), "subject": "Credit-loss allowance (CECL / IFRS 9)",
        "author": f"allowance {allowance.__version__}", "comments": "Written by allowance; see the Run record sheet.",
        "created": created.replace(tzinfo=None),
    })
    for sheet in book.sheets:
        sheet.finish()
    book.workbook.close()
    positions = {id(sheet.ws): i for i, sheet in enumerate(book.sheets)}
    targets = {f"xl/worksheets/sheet{positions[id(b.sheet.ws)] + 1}.xml": b for b in bulks if len(b.frame)}
    when = _zip_time(created)
    with zipfile.ZipFile(io.BytesIO(book.buffer.getvalue())) as zin, \
            zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zout:
        for info in zin.infolist():
            entry = zipfile.ZipInfo(info.filename, when)
            entry.compress_type = zipfile.ZIP_DEFLATED
            entry.create_system = 0
            entry.external_attr = 0
            data = zin.read(info.filename)
            bulk = targets.get(info.filename)
            if bulk is None:
                zout.writestr(entry, data)
                continue
            xml = _exact_first_row(data.decode("utf-8"), bulk)
            if len(bulk.frame) == 1:  # the first row is the only one
                zout.writestr(entry, xml.encode("utf-8"))
                continue
            styles = _first_row_styles(xml, bulk)
            end = xml.rindex("</sheetData>")
            head = _DIMENSION.sub(f'<dimension ref="{bulk.dimension}"/>', xml[:end], count=1)
            large = len(bulk.frame) * max(len(bulk.frame.columns), 1) > 4_000_000
            # fast compression for the long sheets (tens of megabytes of XML); the attribute is
            # the ZipInfo's level (named compress_level from Python 3.13, _compresslevel before)
            try:
                entry.compress_level = 1  # type: ignore[attr-defined]
            except AttributeError:
                entry._compresslevel = 1  # type: ignore[attr-defined]
            with zout.open(entry, "w", force_zip64=large) as out:
                out.write(head.encode("utf-8"))
                _write_behind(out, bulk.rows_xml(styles))
                out.write(xml[end:].encode("utf-8"))
