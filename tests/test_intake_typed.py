"""Typed tapes (Parquet, Arrow tables) are checked in their own types, with the findings of the
same tape as CSV; a CSV tape is read once; extra columns are named (common practice, no source:
the rules are the product's own, checked here against the CSV reading of the same values)."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from allowance.intake import read_tape
from allowance.intake.fields import FIELDS
from allowance.intake.parse import parse_arrow
from allowance.intake.readers import read_raw
from allowance.intake.parts import read_parts
from allowance.intake.tieout import check_table

D = dt.date
NAN = float("nan")

#: One good loan and eleven spoiled ones; each spoiled value is typed as the field is (the
#: typed path) except the columns noted; a blank number is null in the CSV and NaN in Parquet.
ROWS: list[dict] = [
    dict(loan_id="G1"),
    dict(loan_id="B1", balance=-5.0),                           # out of range, typed
    dict(loan_id="B2", balance=None),                           # blank required number (NaN in Parquet)
    dict(loan_id="B3", origination_date=D(1600, 1, 1)),         # typed date before 1678
    dict(loan_id="B4", maturity_date=D(2300, 1, 1)),            # typed date after 2261
    dict(loan_id="B5", days_past_due=-3),                       # whole number out of range, typed
    dict(loan_id="B6", interest_rate="abc"),                    # text in place of a number
    dict(loan_id="B7", interest_rate="6.5%"),                   # a percent written as text
    dict(loan_id="B8", watchlist=2.0),                          # a number column where a boolean belongs
    dict(loan_id="B9", months_performing=2.5),                  # not whole, typed
    dict(loan_id="B10", interest_rate="1.5"),                   # a number in text, out of range
    dict(loan_id="B11", origination_date=None, balance=float("inf")),  # blank date, infinite balance
]
GOOD = dict(segment="retail", repayment="level", origination_date=D(2021, 5, 14), maturity_date=D(2041, 6, 1),
            balance=248310.55, interest_rate="0.0425", days_past_due=0, watchlist=0.0, months_performing=12.0,
            branch="north")
TYPES = dict(loan_id=pa.string(), segment=pa.string(), repayment=pa.string(), origination_date=pa.date32(),
             maturity_date=pa.date32(), balance=pa.float64(), interest_rate=pa.string(), days_past_due=pa.int64(),
             watchlist=pa.float64(), months_performing=pa.float64(), branch=pa.string())


def _table(nan_for_blank: bool) -> pa.Table:
    rows = [{**GOOD, **row} for row in ROWS]
    columns = {}
    for name, kind in TYPES.items():
        values = [r[name] for r in rows]
        if nan_for_blank and pa.types.is_floating(kind):
            values = [NAN if v is None else v for v in values]
        columns[name] = pa.array(values, kind)
    return pa.table(columns)


def _write(tmp_path: Path) -> tuple[Path, Path]:
    csv, parquet = tmp_path / "tape.csv", tmp_path / "tape.parquet"
    text = _table(nan_for_blank=False)
    # the CSV holds what a CSV export holds; its infinite balance is the text 'inf'
    pacsv.write_csv(text, csv, pacsv.WriteOptions(quoting_style="none"))
    pq.write_table(_table(nan_for_blank=True), parquet)
    return csv, parquet


def _by_line(result) -> dict[int, tuple[str, str]]:
    rejected = result.rejected
    return {int(r.source_row): (r.reason_codes, r.reasons)
            for r in rejected[["source_row", "reason_codes", "reasons"]].itertuples(index=False)}


def test_the_same_bad_tape_as_csv_and_parquet_gives_the_same_rejected_rows(tmp_path, intake_config):
    csv, parquet = _write(tmp_path)
    held = read_raw(parquet, "parquet", typed=True).table
    assert [held.column(i).type for i in (3, 5, 7)] == [pa.date32(), pa.float64(), pa.int64()]  # not text
    from_csv, from_parquet = read_tape(csv, intake_config), read_tape(parquet, intake_config)

    assert _by_line(from_parquet) == _by_line(from_csv)
    # every column of rejected.csv as read: the same text
    assert from_parquet.rejected.astype(str).to_dict("records") == from_csv.rejected.astype(str).to_dict("records")
    assert from_parquet.findings.to_dict("records") == from_csv.findings.to_dict("records")
    assert from_parquet.accepted.drop(columns="source_row").equals(from_csv.accepted.drop(columns="source_row"))
    for result in (from_csv, from_parquet):  # nothing silently dropped
        assert result.rows_read == len(ROWS) == result.rows_accepted + result.rows_rejected
    assert from_parquet.accepted["loan_id"].tolist() == ["G1"]


def test_each_typed_fault_is_named_with_its_line_column_and_reason(tmp_path, intake_config):
    _, parquet = _write(tmp_path)
    findings = read_tape(parquet, intake_config).findings
    found = {(int(f.source_row), f.column, f.code) for f in findings.itertuples(index=False)}
    line = {row["loan_id"]: i + 2 for i, row in enumerate(ROWS)}  # the header is line 1
    expected = {
        (line["B1"], "balance", "out_of_range"),
        (line["B2"], "balance", "missing_value"),          # a NaN in a required number column is blank
        (line["B3"], "origination_date", "bad_date"),
        (line["B4"], "maturity_date", "bad_date"),
        (line["B5"], "days_past_due", "out_of_range"),
        (line["B6"], "interest_rate", "bad_number"),       # a string column in place of a number
        (line["B7"], "interest_rate", "bad_number"),
        (line["B8"], "watchlist", "bad_boolean"),          # a float column where a boolean belongs
        (line["B9"], "months_performing", "not_whole_number"),
        (line["B10"], "interest_rate", "out_of_range"),
        (line["B11"], "origination_date", "missing_value"),
        (line["B11"], "balance", "bad_number"),
    }
    assert expected <= found
    messages = dict(((int(f.source_row), f.column), f.message) for f in findings.itertuples(index=False))
    assert messages[(line["B3"], "origination_date")].startswith("origination_date '1600-01-01' is not a date")
    assert messages[(line["B1"], "balance")].startswith("balance '-5' is outside its range")
    assert messages[(line["B8"], "watchlist")] == "watchlist '2' is not true/false, yes/no, y/n, 1/0 or t/f"
    assert "a percent" in messages[(line["B7"], "interest_rate")]


def test_typed_columns_are_not_parsed_from_text():
    """A typed column is checked in its own type; text, or a type that is not the field's, is not."""
    assert parse_arrow(pa.array([1.0, 2.0]), FIELDS["balance"]) is not None
    assert parse_arrow(pa.array([1, None], pa.int32()), FIELDS["days_past_due"]).blank.tolist() == [False, True]
    assert parse_arrow(pa.array([D(2026, 9, 30)]), FIELDS["origination_date"]).values.tolist() == [20726]  # days since 1970
    stamps = pa.array([dt.datetime(2026, 9, 30, 15, 30)], pa.timestamp("us"))  # a time of day is dropped, as in text
    assert parse_arrow(stamps, FIELDS["origination_date"]).values.tolist() == [20726]
    assert parse_arrow(pa.array([True, None]), FIELDS["watchlist"]).values.tolist() == [True, False]
    for column, field in ((pa.array(["1.5"]), "balance"), (pa.array([1.0]), "watchlist"), (pa.array([1]), "loan_id"),
                          (pa.array([True]), "balance"), (pa.array([20726]), "origination_date"),
                          (pa.array([dt.datetime(2026, 9, 30)], pa.timestamp("us", tz="UTC")), "origination_date")):
        assert parse_arrow(column, FIELDS[field]) is None, (column.type, field)


def test_a_parquet_column_with_no_values_is_blank(tmp_path, intake_config):
    table = _table(nan_for_blank=True).slice(0, 1).append_column("balloon_amount", pa.nulls(1))
    pq.write_table(table, tmp_path / "t.parquet")
    assert pq.read_schema(tmp_path / "t.parquet").field("balloon_amount").type == pa.null()
    result = read_tape(tmp_path / "t.parquet", intake_config)
    assert result.rows_accepted == 1 and np.isnan(result.accepted["balloon_amount"].iloc[0])


def test_a_parquet_tape_read_part_by_part_gives_the_rejected_rows_of_the_whole(tmp_path, intake_config):
    """Each row group goes through the same typed checks (intake.parts.read_part), numbered in the whole tape."""
    path = tmp_path / "parts.parquet"
    pq.write_table(_table(nan_for_blank=True), path, row_group_size=5)
    assert pq.ParquetFile(path).metadata.num_row_groups == 3
    whole, by_part = read_tape(path, intake_config), read_parts(path, intake_config)
    assert _by_line(by_part) == _by_line(whole)
    assert by_part.rejected.astype(str).to_dict("records") == whole.rejected.astype(str).to_dict("records")
    assert by_part.rows_accepted == whole.rows_accepted == 1
    assert by_part.extra_columns == whole.extra_columns == ("branch",)


def test_a_csv_tape_with_bad_numbers_is_read_once(tmp_path, intake_config, monkeypatch):
    csv, _ = _write(tmp_path)
    calls = []
    original = pacsv.read_csv

    def counted(*args, **kwargs):
        calls.append(args[0])
        return original(*args, **kwargs)

    monkeypatch.setattr(pacsv, "read_csv", counted)
    result = read_tape(csv, intake_config)
    assert len(calls) == 1
    assert result.rejected.loc[result.rejected["reason_codes"] == "bad_number", "interest_rate"].tolist() == ["abc", "6.5%"]


def test_columns_outside_the_data_dictionary_are_named(tmp_path, intake_config):
    table = _table(nan_for_blank=True).slice(0, 1)
    for i in range(300):
        table = table.append_column(f"extra {i}", pa.array([str(i)]))
    pacsv.write_csv(table, tmp_path / "wide.csv")
    result = read_tape(tmp_path / "wide.csv", intake_config)
    assert result.extra_columns == ("branch", *(f"extra {i}" for i in range(300)))
    assert result.accepted["extra 299"].tolist() == ["299"]  # carried through untouched
    assert ("301 columns are not in the data dictionary and are carried through to loans.csv untouched: "
            "'branch', 'extra 0', 'extra 1'") in result.notes[0]
    assert result.notes[0].endswith("'extra 8' and 291 more")
    line = check_table(result).set_index("section").loc["columns"]
    assert line["code"] == "not_in_dictionary" and line["rows"] == 301
