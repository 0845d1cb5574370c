"""Writing a workbook: styles, sheets addressed like a reader does (row 1, column 1 = A1),
tables with human headers, and the page setup of every sheet.

Implements
----------
Book       an XlsxWriter workbook plus what it needs at the end (widths, heights, printing)
Sheet      one worksheet: cells, tables, notes, charts; fits its columns and rows when closed
Styles     the workbook's formats, one per (kind, role), made once
Context    what every sheet's title rows and page footer say (as-of, run label, what-if)
KIND_FORMAT  the number format of each display kind

Why XlsxWriter
--------------
It stores a cached value with every formula (``write_formula(..., value)``), so a reader
that does not calculate (pandas, openpyxl ``data_only``, previews, mail clients) sees the
numbers, while a spreadsheet that recalculates gets the live formula.

Layout of every sheet
---------------------
Row 1 is the sheet's title (on a what-if run: "What-if, not for booking" in a banner), row
2 the run it belongs to (as-of date, currency, label). Both repeat on every printed page; a
sheet with one table also repeats the table's header row. The page footer carries the
as-of date, the run label, the sheet name and "page n of m".
"""

from __future__ import annotations

import datetime as _dt
import math
import textwrap
from collections import defaultdict
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from xlsxwriter.utility import xl_col_to_name, xl_rowcol_to_cell

from allowance.report.cells import clean_text, human, is_missing, number_kind

__all__ = ["KIND_FORMAT", "Book", "Context", "Sheet", "Styles", "col_letter", "nice_axis", "value_width"]

KIND_FORMAT: dict[str, str | None] = {
    "money": "#,##0.00", "count": "#,##0", "code": "0", "rate": "0.00%", "fine_rate": "0.0000%",
    "decimal": "#,##0.00##", "multiplier": "0.00", "factor": "0.0000", "date": "yyyy-mm-dd",
    "text": None, "wrap": None, "bool": None, "center": "0",
}
_NUMERIC = {"money", "count", "code", "rate", "fine_rate", "decimal", "multiplier", "factor", "date"}
_CENTRED = {"code", "bool", "center"}

# Our palette: slate headers, a pale total band, a burnt-orange what-if banner.
_INK = "#1B2A38"
_HEADER_FILL = "#2E4A62"
_TOTAL_FILL = "#E8EDF2"
_RULE = "#8CA0B3"
_NOTE = "#5A6672"
_CAUTION = "#8B1A1A"
_WHAT_IF_FILL = "#B4441C"

#: widths are in characters of the default font; a line of wrapped text holds about this many
_CHARS_PER_WIDTH = 1.15
_LINE_POINTS = 13.0
_ROW_POINTS = 13.5
_MAX_WIDTH = 60.0


def col_letter(col: int) -> str:
    """The letter of a 1-based column (1 -> A)."""
    return xl_col_to_name(col - 1)


class Styles:
    """The workbook's formats, each made once (XlsxWriter formats are workbook objects)."""

    def __init__(self, workbook: Any) -> None:
        self._wb = workbook
        self._cache: dict[tuple, Any] = {}

    def _make(self, key: tuple, props: dict) -> Any:
        if key not in self._cache:
            self._cache[key] = self._wb.add_format({"font_name": "Calibri", "font_size": 10, "font_color": _INK,
                                                    **props})
        return self._cache[key]

    def cell(self, kind: str, *, total: bool = False, align: str | None = None) -> Any:
        """A body cell of a display kind; ``align="left"`` for a value in a label / value list."""
        props: dict[str, Any] = {"valign": "top"}
        fmt = KIND_FORMAT.get(kind)
        if fmt:
            props["num_format"] = fmt
        if align is not None:
            props["align"] = align
        elif kind in _CENTRED:
            props["align"] = "center"
        if kind == "wrap":
            props["text_wrap"] = True
        if kind in ("text", "wrap") or align == "left":
            props["indent"] = 1  # text never runs into the right-aligned number before it
        if total:
            props.update(bold=True, top=1, top_color=_RULE, bg_color=_TOTAL_FILL)
        return self._make(("cell", kind, total, align), props)

    def header(self, kind: str = "text") -> Any:
        align = "right" if kind in _NUMERIC and kind not in _CENTRED else ("center" if kind in _CENTRED else "left")
        props = {"bold": True, "font_color": "#FFFFFF", "bg_color": _HEADER_FILL, "text_wrap": True,
                 "valign": "bottom", "align": align, "border": 1, "border_color": "#FFFFFF"}
        if align == "left":
            props["indent"] = 1
        return self._make(("header", align), props)

    def named(self, name: str) -> Any:
        props = {
            "title": {"bold": True, "font_size": 14},
            "what_if": {"bold": True, "font_size": 13, "font_color": "#FFFFFF", "bg_color": _WHAT_IF_FILL,
                        "valign": "vcenter"},
            "context": {"font_color": _NOTE, "italic": False},
            "section": {"bold": True, "font_size": 12, "font_color": _HEADER_FILL},
            "note": {"italic": True, "font_color": _NOTE, "text_wrap": True, "valign": "top"},
            "paragraph": {"text_wrap": True, "valign": "top", "indent": 1},
            "caution": {"italic": True, "font_color": _CAUTION, "text_wrap": True, "valign": "top",
                        "border": 1, "border_color": _CAUTION},
            "label": {"valign": "top", "indent": 1},
            "label_total": {"bold": True, "valign": "top", "indent": 1, "top": 1, "top_color": _RULE,
                            "bg_color": _TOTAL_FILL},
            "subhead": {"bold": True, "valign": "top", "indent": 1},
        }[name]
        return self._make(("named", name), props)


@dataclass(frozen=True)
class Context:
    """What every sheet's title rows and page footer carry."""

    as_of: str
    currency: str
    label: str | None
    what_if: bool = False
    what_if_files: tuple[str, ...] = ()

    @property
    def line(self) -> str:
        parts = [f"As of {self.as_of}", f"amounts in {self.currency}"]
        if self.label:
            parts.append(f"run: {self.label}")
        if self.what_if:
            parts.append("what-if with " + ", ".join(self.what_if_files) if self.what_if_files else "what-if")
        return " · ".join(parts)


def _footer_text(text: str, limit: int) -> str:
    """Text for a page header/footer: '&' doubled (it starts a code there), within ``limit``."""
    text = clean_text(text).replace("&", "&&")
    return text if len(text) <= limit else text[: limit - 3] + "..."


def value_width(value: Any, kind: str) -> float:
    """Characters a value needs in its display format."""
    if isinstance(value, bool) or kind == "bool":
        return 7
    if isinstance(value, (int, float, np.integer, np.floating)):
        v = float(value)
        if kind in ("rate", "fine_rate"):
            return len(f"{v * 100:.{4 if kind == 'fine_rate' else 2}f}%") + 2
        if kind == "code":
            return len(f"{v:.0f}") + 3
        if kind == "count":
            return len(f"{v:,.0f}") + 2
        if kind in ("multiplier", "factor"):
            return len(f"{v:.4f}") + 2
        return len(f"{v:,.2f}") + 2
    if isinstance(value, (_dt.date, pd.Timestamp)):
        return 12
    return min(len(str(value)), _MAX_WIDTH) + 2


def _header_width(text: str) -> float:
    """The narrowest width at which a header wraps onto at most two lines."""
    longest = max((len(w) for w in text.split()), default=0)
    for width in range(max(longest, 4), len(text) + 1):
        if len(textwrap.wrap(text, width)) <= 2:
            return width + 2
    return len(text) + 2


def _lines(text: str, width: float) -> int:
    per_line = max(int(width * _CHARS_PER_WIDTH) - 1, 8)
    return sum(max(len(textwrap.wrap(part, per_line)), 1) for part in str(text).split("\n"))


class Sheet:
    """One worksheet, addressed 1-based (``put(1, 1, ...)`` is A1).

    It remembers what it needs when the book closes: the width each column's content needs,
    which cells wrap (for row heights), the used range (print area), the rows to repeat on
    printed pages and whether the sheet is printed at all.
    """

    def __init__(self, book: "Book", name: str, *, printed: bool = True) -> None:
        self.book = book
        self.name = name
        self.ws = book.workbook.add_worksheet(name)
        self.styles = book.styles
        self.printed = printed
        self.not_printed_note: str | None = None
        self.last_row = 0
        self.last_col = 0
        self.fit: dict[int, float] = defaultdict(float)
        self.widths: dict[int, float] = {}
        self.wrapped: list[tuple[int, int, int, str]] = []  # row, first col, last col, text
        self.heights: dict[int, float] = {}
        self.repeat_to = 2  # rows 1..repeat_to repeat on every printed page
        self.tables = 0
        self.first_header: int | None = None
        self.landscape: bool | None = None
        self.context = book.context
        self.title = name
        self._notes: list[tuple[int, int, str, int | None, str]] = []
        self.blocks: list[tuple[int, int]] = []  # rows kept on one printed page (charts)
        self.note_rows = 3  # a sheet not printed by default prints rows 1..note_rows

    # -- cells ---------------------------------------------------------------------------

    def _used(self, row: int, col: int) -> None:
        self.last_row = max(self.last_row, row)
        self.last_col = max(self.last_col, col)

    def put(self, row: int, col: int, value: Any, kind: str = "text", *, total: bool = False, fit: bool = True,
            style: Any = None, align: str | None = None) -> None:
        """Write one value (text is cleaned; NaN / None leave a blank cell that keeps its style)."""
        fmt = style if style is not None else self.styles.cell(kind, total=total, align=align)
        r, c = row - 1, col - 1
        self._used(row, col)
        if is_missing(value):
            self.ws.write_blank(r, c, None, fmt)
            return
        if isinstance(value, (bool, np.bool_)):
            self.ws.write_boolean(r, c, bool(value), fmt)
        elif isinstance(value, (int, float, np.integer, np.floating)):
            self.ws.write_number(r, c, float(value), fmt)
        elif isinstance(value, (pd.Timestamp, _dt.datetime, _dt.date)):
            stamp = pd.Timestamp(value)
            if stamp.tzinfo is not None:
                stamp = stamp.tz_convert("UTC").tz_localize(None)
            dfmt = fmt if kind == "date" else self.styles.cell("date", total=total, align=align)
            self.ws.write_datetime(r, c, stamp.to_pydatetime(), dfmt)
        else:
            text = clean_text(value)
            self.ws.write_string(r, c, text, fmt)
            if kind == "wrap":
                self.wrapped.append((row, col, col, text))
        if fit:
            self.fit[col] = max(self.fit[col], value_width(value, kind))

    def formula(self, row: int, col: int, formula: str, value: float, kind: str, *, total: bool = False) -> None:
        """A formula with its computed value cached (what non-calculating readers show)."""
        self._used(row, col)
        cached = float(value) if value is not None and np.isfinite(value) else 0
        self.ws.write_formula(row - 1, col - 1, formula, self.styles.cell(kind, total=total), cached)
        self.fit[col] = max(self.fit[col], value_width(cached, kind))

    def label(self, row: int, col: int, text: str, *, total: bool = False, fit: bool = True) -> None:
        self.put(row, col, text, "text", style=self.styles.named("label_total" if total else "label"), fit=fit)

    def section(self, row: int, text: str) -> int:
        """A section heading; returns the next row."""
        self.put(row, 1, text, style=self.styles.named("section"), fit=False)
        self.heights[row] = 18
        return row + 1

    def note(self, row: int, text: str, *, span: int | None = None, style: str = "note", col: int = 1) -> int:
        """A paragraph from column ``col`` across ``span`` columns (default: to the used width at
        close), wrapped; the row grows to hold it. Returns the next row."""
        self._used(row, col)
        self._notes.append((row, col, text, span, style))
        return row + 1

    def header(self, row: int, col: int, names: list[str], kinds: list[str]) -> None:
        """A table's header row: numeric columns' headers aligned right, over their numbers."""
        for j, (name, kind) in enumerate(zip(names, kinds)):
            text = clean_text(name)
            self.ws.write_string(row - 1, col - 1 + j, text, self.styles.header(kind))
            self.fit[col + j] = max(self.fit[col + j], _header_width(text))
            self.wrapped.append((row, col + j, col + j, text))
        self._used(row, col + len(names) - 1)
        self.tables += 1
        if self.first_header is None:
            self.first_header = row

    def table(self, row: int, frame: pd.DataFrame, *, col: int = 1, title: str | None = None,
              kinds: dict[str, str] | None = None, headers: dict[str, str] | None = None,
              total_rows: int = 0, autofilter: bool = False) -> tuple[int, int]:
        """Write a frame (human headers, a display kind per column); return (first data row, last).

        ``kinds`` overrides :func:`~allowance.report.cells.number_kind`; ``headers`` overrides
        :func:`~allowance.report.cells.human`. The last ``total_rows`` rows are total rows.
        """
        if title:
            row = self.section(row, title)
        kinds = kinds or {}
        headers = headers or {}
        names = list(frame.columns)
        col_kinds = [kinds.get(n, number_kind(n, frame[n].dtype)) for n in names]
        self.header(row, col, [headers.get(n, human(n)) for n in names], col_kinds)
        first = row + 1
        # each column's two formats looked up once (a format only reaches the file when a cell uses it)
        formats = [(self.styles.cell(kind), self.styles.cell(kind, total=True)) for kind in col_kinds]
        for i, record in enumerate(frame.itertuples(index=False, name=None)):
            total = i >= len(frame) - total_rows
            for j, value in enumerate(record):
                self.put(first + i, col + j, value, col_kinds[j], total=total, style=formats[j][total])
        last = first + len(frame) - 1
        if autofilter and len(frame):
            self.ws.autofilter(row - 1, col - 1, last - 1, col - 2 + len(names))
        return first, max(last, row)

    def width(self, col: int, width: float) -> None:
        """Fix a column's width (characters)."""
        self.widths[col] = width

    def chart(self, row: int, col: int, chart: Any, *, width: int, height: int) -> int:
        """Place a chart (size in pixels) with its top-left at (row, col); it counts as used range and
        is kept on one printed page. Returns the next free row."""
        chart.set_size({"width": width, "height": height})
        rows = math.ceil((height + 8) / (_ROW_POINTS * 96 / 72)) + 1
        # the columns it covers count as used too, or the print area would cut the chart at its
        # left edge; counted at the narrowest column width a sheet sets (6 characters, 47 px)
        cols = math.ceil((width + 8) / 47)
        self.ws.insert_chart(row - 1, col - 1, chart, {"x_offset": 4, "y_offset": 4})
        self._used(row + rows, col + cols - 1)
        self.blocks.append((row, row + rows))
        return row + rows + 1

    # -- closing -------------------------------------------------------------------------

    def finish(self) -> None:
        """Column widths, row heights, title rows, notes and the page setup."""
        ws, ctx = self.ws, self.context
        span = max(self.last_col, 1)
        widths = {c: min(max(self.fit.get(c, 0), 6.0), _MAX_WIDTH) for c in range(1, span + 1)}
        widths.update(self.widths)
        total_width = sum(widths.values())
        # title rows: a what-if run says so on every sheet, in a banner across the sheet
        title = self.title
        if ctx.what_if:
            text = f"WHAT-IF, NOT FOR BOOKING · {title}"
            if span > 1:
                ws.merge_range(0, 0, 0, span - 1, clean_text(text), self.styles.named("what_if"))
            else:
                ws.write_string(0, 0, clean_text(text), self.styles.named("what_if"))
            ws.set_row(0, 22)
        else:
            ws.write_string(0, 0, clean_text(title), self.styles.named("title"))
            ws.set_row(0, 20)
        ws.write_string(1, 0, clean_text(ctx.line), self.styles.named("context"))
        for row, first, text, note_span, style in self._notes:
            last = min(first - 1 + note_span, span) if note_span else span
            last = max(last, first)
            width = sum(widths.get(c, 8.43) for c in range(first, last + 1))
            cleaned = clean_text(text)
            if last > first:
                ws.merge_range(row - 1, first - 1, row - 1, last - 1, cleaned, self.styles.named(style))
            else:
                ws.write_string(row - 1, first - 1, cleaned, self.styles.named(style))
            self.heights[row] = max(self.heights.get(row, 0), _lines(cleaned, width) * _LINE_POINTS + 2)
        for c, w in widths.items():
            ws.set_column(c - 1, c - 1, w)
        for row, first, last, text in self.wrapped:
            width = sum(widths.get(c, 8.43) for c in range(first, last + 1))
            lines = _lines(text, width - 1)
            if lines > 1:
                self.heights[row] = max(self.heights.get(row, 0), lines * _LINE_POINTS + 2)
        ws.set_default_row(_ROW_POINTS)
        for row, height in self.heights.items():
            ws.set_row(row - 1, height)
        self._page_setup(span, total_width)

    def _pagination(self, landscape: bool, total_width: float) -> tuple[list[int], int]:
        """Manual page breaks that keep each chart on one page, and the number of pages printed.

        Estimated with Excel's metrics on US Letter with half-inch side margins: a page holds
        about 103 (portrait) or 137 (landscape) characters of column width; fitting the width
        scales the page down, so it holds proportionally more rows. A little room is kept for
        error. Another program or font paginates differently (a missing font changes every
        width), so when the sheet takes more than one page every chart starts a page of its
        own: it can then never be cut, whoever prints it.
        """
        width_chars = 137.0 if landscape else 103.0
        scale = min(1.0, width_chars / max(total_width, 1.0))
        usable = (511.0 if landscape else 691.0) * 0.93 / scale
        repeated = sum(self._height(r) for r in range(1, self.repeat_to + 1))
        breaks, used, pages = [], 0.0, 1
        blocks = self._merged_blocks()
        starts = {first: last for first, last in blocks}
        for row in range(1, max(self.last_row, 1) + 1):
            if row in starts:
                block = sum(self._height(r) for r in range(row, starts[row] + 1))
                if used + block > usable and used > repeated:
                    breaks.append(row)
                    used, pages = repeated, pages + 1
            height = self._height(row)
            if used + height > usable:
                used, pages = repeated, pages + 1
            used += height
        if pages > 1:
            # a block right under the title and its notes starts the first page already: a
            # break there would print a page holding nothing but the title
            first = max([self.repeat_to + 2, *self._preamble_rows()])
            breaks = [start for start, _ in blocks if start > first + 1]
            pages = max(pages, 1 + len(breaks))
        return breaks, pages

    def _merged_blocks(self) -> list[tuple[int, int]]:
        """The chart blocks, overlapping ones merged (two charts beside one table print together)."""
        merged: list[tuple[int, int]] = []
        for first, last in sorted(self.blocks):
            if merged and first <= merged[-1][1]:
                merged[-1] = (merged[-1][0], max(merged[-1][1], last))
            else:
                merged.append((first, last))
        return merged

    def _preamble_rows(self) -> list[int]:
        """The rows of the notes that follow the title rows without a gap (the sheet's preamble)."""
        rows, expected = [], self.repeat_to + 1
        for row in sorted(r for r, *_ in self._notes):
            if row > expected + 1:
                break
            rows.append(row)
            expected = row + 1
        return rows

    def _height(self, row: int) -> float:
        return self.heights.get(row, 20.0 if row == 1 else _ROW_POINTS)

    def _page_setup(self, span: int, total_width: float) -> None:
        ws, ctx = self.ws, self.context
        ws.hide_gridlines(1)
        left = _footer_text(f"As of {ctx.as_of}" + (f" · {ctx.label}" if ctx.label else ""), 110)
        ws.set_footer(f"&L&8{left}&C&8&A&R&8Page &P of &N")
        if ctx.what_if:
            ws.set_header('&C&"Calibri,Bold"&11WHAT-IF, NOT FOR BOOKING')
        ws.set_margins(left=0.5, right=0.5, top=0.7, bottom=0.7)
        if not self.printed:
            # a long sheet: printing it gives its title rows and the note saying how to print it all
            ws.print_area(0, 0, self.note_rows - 1, max(min(span, 10), 1) - 1)
            ws.set_portrait()
            ws.fit_to_pages(1, 1)
            return
        ws.print_area(0, 0, max(self.last_row, 2) - 1, span - 1)
        landscape = self.landscape
        if landscape is None and min(1.0, 103.0 / max(total_width, 1.0)) < _SMALLEST_PORTRAIT_SCALE:
            landscape = True  # a wide sheet: readable type before fewer pages
        if landscape is None:  # the orientation that prints fewer pages; on a tie, the larger print
            portrait_pages = self._pagination(False, total_width)[1]
            landscape_pages = self._pagination(True, total_width)[1]
            landscape = landscape_pages < portrait_pages or (landscape_pages == portrait_pages and total_width > 103)
        if landscape:
            ws.set_landscape()
        else:
            ws.set_portrait()
        ws.fit_to_pages(1, 0)
        ws.repeat_rows(0, self.repeat_to - 1)
        breaks = self._pagination(landscape, total_width)[0]
        if breaks:
            ws.set_h_pagebreaks([r - 1 for r in breaks])


#: below this scale a portrait page's type is too small to read (about 8 pt from 11 pt);
#: a sheet that wide prints landscape (common practice, no source)
_SMALLEST_PORTRAIT_SCALE = 0.75


@dataclass
class Book:
    """An XlsxWriter workbook being built in memory; :mod:`allowance.report.bulk` writes it out."""

    context: Context
    workbook: Any = None
    styles: Styles = None  # type: ignore[assignment]
    sheets: list[Sheet] = field(default_factory=list)
    buffer: Any = None

    def __post_init__(self) -> None:
        import io

        import xlsxwriter

        self.buffer = io.BytesIO()
        self.workbook = xlsxwriter.Workbook(self.buffer, {
            "in_memory": True, "strings_to_formulas": False, "strings_to_urls": False,
            "strings_to_numbers": False, "nan_inf_to_errors": False,
        })
        self.styles = Styles(self.workbook)

    def sheet(self, name: str, *, title: str | None = None, printed: bool = True) -> Sheet:
        sheet = Sheet(self, name, printed=printed)
        sheet.title = title or name
        self.sheets.append(sheet)
        return sheet

    def cell(self, sheet: Sheet, row: int, col: int, *, absolute: bool = False) -> str:
        """A reference to a cell (``B7`` or ``$B$7``)."""
        return xl_rowcol_to_cell(row - 1, col - 1, row_abs=absolute, col_abs=absolute)


def nice_axis(low: float, high: float) -> tuple[float, float]:
    """Axis bounds that include 0, ``low`` and ``high``, rounded out to a 1-2-5 step.

    A negative part smaller than 1 % of the positive range is not given room (the axis
    starts at 0), so one small negative cell cannot stretch the axis.

    Examples
    --------
    >>> nice_axis(-143.0, 4_700_000.0)
    (0.0, 5000000.0)
    >>> nice_axis(-60_000.0, 250_000.0)
    (-100000.0, 300000.0)
    """
    high = max(high, 0.0)
    low = min(low, 0.0)
    if high == low == 0.0:
        return 0.0, 1.0
    if high > 0 and -low < 0.01 * high:
        low = 0.0
    span = max(high - low, 1.0)
    raw = span / 5
    magnitude = 10 ** math.floor(math.log10(raw))
    step = next(m * magnitude for m in (1, 2, 5, 10) if m * magnitude >= raw)
    return (float(math.floor(low / step) * step) if low < 0 else 0.0), float(math.ceil(high / step) * step)
