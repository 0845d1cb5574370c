"""Write templates/loan_tape.xlsx from templates/loan_tape.csv and the loan-record schema.

Run from the repository root after changing ``allowance.schemas.LoanRecord`` or the CSV
template:  python templates/make_templates.py

The workbook has two sheets: ``tape`` (the CSV template's header and example rows, as typed
cells) and ``data dictionary`` (column, type, required, meaning: from the schema).
"""

from __future__ import annotations

import csv
import datetime as dt
import sys
from pathlib import Path

import openpyxl
from openpyxl.styles import Alignment, Font

from allowance.intake.fields import FIELDS, data_dictionary

HERE = Path(__file__).resolve().parent
_FIXED_TIME = dt.datetime(2026, 1, 1)  # workbook metadata, so reruns give the same content


def _cell(column: str, text: str) -> object:
    """The typed cell for a CSV value: dates as dates, numbers as numbers, the rest as text."""
    if text == "":
        return None
    kind = FIELDS[column].kind if column in FIELDS else "text"
    if kind == "date":
        return dt.date.fromisoformat(text)
    if kind in ("number", "whole"):
        number = float(text)
        return int(number) if kind == "whole" else number
    return text


def build(csv_path: Path, xlsx_path: Path) -> None:
    """Build the XLSX template from the CSV template."""
    with csv_path.open(encoding="utf-8", newline="") as handle:
        header, *rows = list(csv.reader(handle))
    book = openpyxl.Workbook()
    book.properties.created = book.properties.modified = _FIXED_TIME
    book.properties.creator = "allowance"
    tape = book.active
    tape.title = "tape"
    tape.append(header)
    for row in rows:
        tape.append([_cell(c, v) for c, v in zip(header, row)])
    for cell in tape[1]:
        cell.font = Font(bold=True)
        tape.column_dimensions[cell.column_letter].width = max(12, len(str(cell.value)) + 2)
    for row in tape.iter_rows(min_row=2):
        for cell in row:
            if isinstance(cell.value, dt.date):
                cell.number_format = "yyyy-mm-dd"
    tape.freeze_panes = "A2"

    sheet = book.create_sheet("data dictionary")
    sheet.append(["column", "type", "required", "meaning"])
    for entry in data_dictionary():
        sheet.append([entry["column"], entry["type"], entry["required"], entry["meaning"]])
    for cell in sheet[1]:
        cell.font = Font(bold=True)
    for letter, width in zip("ABCD", (28, 22, 22, 100)):
        sheet.column_dimensions[letter].width = width
    for row in sheet.iter_rows(min_row=2, min_col=4, max_col=4):
        row[0].alignment = Alignment(wrap_text=True, vertical="top")
    sheet.freeze_panes = "A2"
    book.save(xlsx_path)


if __name__ == "__main__":
    out = Path(sys.argv[1]) if len(sys.argv) > 1 else HERE / "loan_tape.xlsx"
    build(HERE / "loan_tape.csv", out)
    print(f"wrote {out}")
