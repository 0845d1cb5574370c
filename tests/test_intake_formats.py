"""The same tape as CSV, XLSX and Parquet gives the same accepted frame (common practice, no source)."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import openpyxl
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from allowance.exceptions import InputFileError, TapeError
from allowance.intake import read_tape

COLUMNS = ["loan_id", "segment", "repayment", "origination_date", "maturity_date", "balance",
           "interest_rate", "days_past_due", "credit_limit", "grade", "watchlist", "prior_stage", "branch"]
ROWS = [
    ['=HYPERLINK("x")', "retail", "level", dt.date(2021, 5, 14), dt.date(2041, 6, 1), 248310.55, 0.0425, 0, None, None, "N", 1, "north"],
    ["L2", "graded", "balloon", dt.date(2024, 2, 29), dt.date(2031, 2, 28), 18422.1, 0.0699, 35, None, "B", "Y", 2, "south"],
    ["007", "cards", "revolving", dt.date(2019, 11, 20), None, 2310.0, 0.229, 0, 7500.0, None, "N", None, None],
    ["L4", "retail", "level", dt.date(2022, 1, 3), dt.date(2025, 1, 3), 0.0, 0.05, 0, None, None, "N", 3, "x"],  # matured, no balance
    ["L5", "retail", "level", dt.date(2022, 1, 3), dt.date(2030, 1, 3), -1.0, 0.05, 0, None, None, "N", 3, "y"],  # negative
]


@pytest.fixture()
def config(intake_config):
    return intake_config


def _text(value: object) -> str:
    if value is None:
        return ""
    if isinstance(value, dt.date):
        return value.isoformat()
    return str(value)


def write_csv(path: Path) -> Path:
    frame = pd.DataFrame([[_text(v) for v in row] for row in ROWS], columns=COLUMNS)
    frame.to_csv(path, index=False)
    return path


def write_xlsx(path: Path, sheet: str = "tape", skip_rows: int = 0) -> Path:
    book = openpyxl.Workbook()
    ws = book.active
    ws.title = "notes"
    ws.append(["not the tape"])
    ws = book.create_sheet(sheet)
    for _ in range(skip_rows):
        ws.append([])
    ws.append(COLUMNS)
    for row in ROWS:
        ws.append(row)
    book.save(path)
    return path


def write_parquet(path: Path) -> Path:
    columns = list(zip(*ROWS))
    types = [pa.string(), pa.string(), pa.string(), pa.date32(), pa.date32(), pa.float64(), pa.float64(),
             pa.int64(), pa.float64(), pa.string(), pa.string(), pa.int64(), pa.string()]
    table = pa.table({n: pa.array(list(c), t) for n, c, t in zip(COLUMNS, columns, types)})
    pq.write_table(table, path)
    return path


def test_csv_xlsx_parquet_give_the_same_accepted_frame(tmp_path, config):
    sheet_config = config.model_copy(update={"assumptions": config.assumptions.model_copy(
        update={"tape": config.assumptions.tape.model_copy(update={"sheet": "tape"})})})
    from_csv = read_tape(write_csv(tmp_path / "t.csv"), config)
    from_xlsx = read_tape(write_xlsx(tmp_path / "t.xlsx"), sheet_config)
    from_parquet = read_tape(write_parquet(tmp_path / "t.parquet"), config)

    assert from_csv.rows_accepted == 3 and from_csv.rows_rejected == 2
    pd.testing.assert_frame_equal(from_csv.accepted, from_xlsx.accepted)
    pd.testing.assert_frame_equal(from_csv.accepted, from_parquet.accepted)
    for other in (from_xlsx, from_parquet):
        assert other.rejected["reason_codes"].tolist() == from_csv.rejected["reason_codes"].tolist()
    assert from_csv.accepted["loan_id"].tolist() == ['=HYPERLINK("x")', "L2", "007"]


def test_a_parquet_column_with_no_value_at_all_reads_as_blank(tmp_path, config):
    """pandas and pyarrow write an all-blank column with the Parquet null type: it is a blank
    column, as an empty CSV column is (common practice, no source)."""
    table = pq.read_table(write_parquet(tmp_path / "t.parquet"))
    blank = table.set_column(COLUMNS.index("credit_limit"), "credit_limit", pa.nulls(table.num_rows))
    assert pa.types.is_null(blank.schema.field("credit_limit").type)
    pq.write_table(blank, tmp_path / "n.parquet")
    result = read_tape(tmp_path / "n.parquet", config)
    assert result.rows_read == result.rows_accepted + result.rows_rejected == 5
    assert result.rows_accepted and result.accepted["credit_limit"].isna().all()


def test_a_parquet_column_of_lists_is_refused_naming_file_and_column(tmp_path, config):
    """A type no tape column can hold (a list per row) is one error naming the file, the
    column and the type, with the fix, not a failure inside the parsers."""
    table = pq.read_table(write_parquet(tmp_path / "t.parquet"))
    listed = table.set_column(COLUMNS.index("balance"), "balance", pa.array([[1.0]] * table.num_rows))
    pq.write_table(listed, tmp_path / "l.parquet")
    with pytest.raises(TapeError) as err:
        read_tape(tmp_path / "l.parquet", config)
    said = str(err.value)
    assert str(tmp_path / "l.parquet") in said and "column balance" in said
    assert "holds list<element: double> values, which a tape cannot" in said
    assert said.count("balance") == 1  # named once


def test_xlsx_takes_the_first_sheet_by_default_and_numbers_rows_by_sheet_row(tmp_path, config):
    path = tmp_path / "t.xlsx"
    book = openpyxl.Workbook()
    ws = book.active
    ws.append([])
    ws.append([])
    ws.append(COLUMNS)
    for row in ROWS[:3]:
        ws.append(row)
    book.save(path)
    result = read_tape(path, config)
    assert result.accepted["source_row"].tolist() == [4, 5, 6]


def test_xlsx_missing_sheet_lists_the_sheets(tmp_path, config):
    path = write_xlsx(tmp_path / "t.xlsx")
    cfg = config.model_copy(update={"assumptions": config.assumptions.model_copy(
        update={"tape": config.assumptions.tape.model_copy(update={"sheet": "loans"})})})
    with pytest.raises(TapeError, match="no sheet 'loans'; its sheets are 'notes', 'tape'"):
        read_tape(path, cfg)


def test_xlsx_formula_loan_id_arrives_as_text(tmp_path, config):
    path = write_xlsx(tmp_path / "t.xlsx", sheet="Sheet")
    cell = openpyxl.load_workbook(path)["Sheet"]["A2"]
    assert cell.data_type == "f"  # written as a formula by openpyxl
    cfg = config.model_copy(update={"assumptions": config.assumptions.model_copy(
        update={"tape": config.assumptions.tape.model_copy(update={"sheet": "Sheet"})})})
    result = read_tape(path, cfg)
    assert result.accepted.loc[0, "loan_id"] == '=HYPERLINK("x")'


def test_a_file_named_xlsx_that_is_not_one(tmp_path, config):
    path = tmp_path / "t.xlsx"
    path.write_text("loan_id\n1\n")
    with pytest.raises(InputFileError, match="not a valid XLSX"):
        read_tape(path, config)


def test_a_workbook_named_csv_is_read_as_a_workbook(tmp_path, config):
    path = write_xlsx(tmp_path / "t.xlsx", sheet="Sheet")
    renamed = tmp_path / "t.csv"
    renamed.write_bytes(path.read_bytes())
    cfg = config.model_copy(update={"assumptions": config.assumptions.model_copy(
        update={"tape": config.assumptions.tape.model_copy(update={"sheet": "Sheet"})})})
    assert read_tape(renamed, cfg).rows_accepted == 3
