"""Long sheets read back as written: every dtype a loan frame holds, blanks anywhere, over several
chunks of rows, and widths that fit the values.

External check: the saved file is read by openpyxl (an independent reader of the OOXML format),
and every cell is compared with the frame it was written from.
"""

from __future__ import annotations

from datetime import datetime

import numpy as np
import pandas as pd
from openpyxl import load_workbook

from allowance.report.bulk import BULK_HEADER_ROW, BulkSheet, save
from allowance.report.xlsx import Book, Context, value_width


def _frame() -> pd.DataFrame:
    n = 11
    rng = np.random.default_rng(7)
    floats = rng.normal(size=(n, 3)) * 10.0 ** rng.integers(-6, 6, size=(n, 3))
    floats[2, 0], floats[5, 1], floats[9, 2] = np.nan, np.inf, np.nan
    return pd.DataFrame({
        "loan_id": [f"L{i}" if i != 4 else "=1+1 & <b>" for i in range(n)],
        "a": floats[:, 0], "b": floats[:, 1], "c": floats[:, 2],  # a run of floats: one block
        "count": pd.array([i * 1_000 if i != 6 else None for i in range(n)], dtype="Int64"),
        "whole": np.arange(n, dtype=np.int64) * 123_456_789_012,
        "flag": pd.array([bool(i % 2) if i != 3 else None for i in range(n)], dtype="boolean"),
        "when": pd.to_datetime(["2026-09-30" if i != 7 else None for i in range(n)]),
        "rate": np.linspace(0.0, 0.123456789012345678, n),  # a float column alone
    })


def test_every_cell_reads_back_as_the_frame_holds_it(tmp_path):
    frame = _frame()
    book = Book(Context(as_of="2026-09-30", currency="USD", label=None))
    sheet = book.sheet("Long", printed=False)
    bulk = BulkSheet(sheet, frame, note="A test.", chunk_rows=3)  # rows 2-11 in four chunks
    path = tmp_path / "long.xlsx"
    save(book, path, [bulk], created=datetime(2026, 10, 1), title="t")
    ws = load_workbook(path, read_only=True)["Long"]
    rows = list(ws.iter_rows(min_row=BULK_HEADER_ROW, values_only=True))
    assert list(rows[0]) == list(frame.columns)
    assert len(rows) == len(frame) + 1
    for i, row in enumerate(rows[1:]):
        for name, got in zip(frame.columns, row):
            want = frame[name].iloc[i]
            if pd.isna(want) or (isinstance(want, float) and not np.isfinite(want)):
                assert got is None, (i, name, got)  # blank: a reader sees an empty cell
            elif name == "loan_id":
                assert got == ("'" + want if want.startswith("=") else want), (i, got)
            elif name == "when":
                assert got == datetime(2026, 9, 30), (i, got)
            elif name == "flag":
                assert got is bool(want), (i, got)
            else:
                assert got == want, (i, name, got, want)  # exact, the first row included


def test_widths_fit_the_widest_value(tmp_path):
    frame = _frame()
    book = Book(Context(as_of="2026-09-30", currency="USD", label=None))
    sheet = book.sheet("Long", printed=False)
    bulk = BulkSheet(sheet, frame, note="A test.")
    for j, name in enumerate(frame.columns, start=1):
        if name in ("a", "b", "c", "whole", "rate", "count"):
            values = [v for v in frame[name].dropna().tolist() if np.isfinite(v)]
            widest = max(value_width(v, bulk.column_kinds[j - 1]) for v in values)
            assert sheet.fit[j] >= widest, (name, sheet.fit[j], widest)


def test_the_xml_escape_is_the_standard_librarys():
    """Source: ``xml.sax.saxutils.escape`` (Python standard library): ``&``, ``<``, ``>`` only."""
    from xml.sax.saxutils import escape as standard

    from allowance.report.bulk import escape

    for text in ("plain", "a<b & c>d", "&amp;", "<<&&>>", "'\"quotes\"'", "", "é & ü"):
        assert escape(text) == standard(text)


def test_the_default_chunks_give_the_bytes_of_one_chunk(tmp_path):
    """A sheet of a few thousand rows is made in several chunks by default (so compressing one
    runs beside making the next) and the file is byte for byte that of one chunk."""
    rows = 4_500
    frame = pd.concat([_frame()] * (rows // 11 + 1), ignore_index=True).head(rows)
    saved = {}
    for label, chunk_rows in (("default", None), ("one", rows)):
        book = Book(Context(as_of="2026-09-30", currency="USD", label=None))
        bulk = BulkSheet(book.sheet("Long", printed=False), frame, note="A test.", chunk_rows=chunk_rows)
        if label == "default":
            assert len(list(bulk.rows_xml([0] * len(frame.columns)))) == 4  # 1,125 rows each
        path = tmp_path / f"{label}.xlsx"
        save(book, path, [bulk], created=datetime(2026, 10, 1), title="t")
        saved[label] = path.read_bytes()
    assert saved["default"] == saved["one"]
