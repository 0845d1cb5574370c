"""Disclosure tables: IFRS 7 35M (gross carrying amount by credit grade and stage) and
ASC 326-20-50-6 (amortised cost by credit quality indicator and year of origination, with the
period's gross write-offs by year of origination, ASU 2022-02). Each must foot to the book's
balance to the cent (common practice, no source)."""

from __future__ import annotations

from datetime import date

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from allowance.disclosure import asc326_vintage, credit_quality, disclosure_tables, ifrs7_35m


def _book(seed: int, n: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    segment = rng.choice(["auto", "card", "mortgage"], n)
    return pd.DataFrame({
        "loan_id": [f"L{i}" for i in range(n)],
        "segment": segment,
        "grade": np.where(segment == "auto", rng.choice(["A", "B", "C"], n), ""),
        "days_past_due": rng.choice([0, 0, 0, 15, 45, 75, 120], n),
        "stage": rng.integers(1, 4, n),
        "poci": rng.random(n) < 0.05,
        "balance": rng.integers(0, 10**7, n) / 100.0,
        "origination_date": pd.to_datetime("2015-01-01") + pd.to_timedelta(rng.integers(0, 4200, n), unit="D"),
        "repayment": np.where(segment == "card", "revolving", "level"),
    })


def cents(x) -> int:
    return int(np.rint(np.asarray(x, dtype=np.float64) * 100).sum())


@settings(max_examples=40)
@given(st.integers(0, 2**32 - 1), st.integers(1, 80))
def test_both_tables_foot_to_the_book(seed, n):
    book = _book(seed, n)
    table = ifrs7_35m(book)
    total = table[table["segment"] == "Total"].iloc[0]
    assert cents(total["total"]) == cents(book["balance"])
    # POCI is its own column (IFRS 7 35M(b)(iii)), whatever its stage
    assert cents(total["POCI"]) == cents(book.loc[book["poci"], "balance"])
    rows = table[(table["credit_quality"] != "Total") & (table["segment"] != "Total")]
    assert cents(rows["total"]) == cents(book["balance"])
    vintage = asc326_vintage(book, date(2026, 9, 30))
    assert cents(vintage["total"]) == cents(book["balance"])
    # revolving lines apart from the vintages
    assert cents(vintage["revolving"]) == cents(book.loc[book["repayment"] == "revolving", "balance"])


def _same_as_a_pivot_table(book: pd.DataFrame) -> None:
    """The IFRS 7 35M grid's cells (totals apart) are pandas' pivot_table of the balance in
    cents by segment, credit quality and basis against the class (stage, POCI apart)."""
    quality = credit_quality(book)
    plain = pd.DataFrame({"segment": book["segment"], "credit_quality": quality["credit_quality"],
                          "basis": quality["basis"], "cents": np.rint(book["balance"] * 100).astype(np.int64),
                          "class": np.where(book["poci"], "POCI", "stage " + book["stage"].astype(str))})
    expected = plain.pivot_table(index=["segment", "credit_quality", "basis"], columns="class", values="cents",
                                 aggfunc="sum", fill_value=0)
    got = ifrs7_35m(book)
    got = got[(got["credit_quality"] != "Total") & (got["segment"] != "Total")]
    assert got[["segment", "credit_quality", "basis"]].values.tolist() == [list(k) for k in expected.index]
    for column in expected.columns:
        assert (np.rint(got[column].to_numpy() * 100).astype(np.int64) == expected[column].to_numpy()).all()


@settings(max_examples=25)
@given(st.integers(0, 2**32 - 1), st.integers(1, 120))
def test_the_grid_is_a_pivot_of_the_loans(seed, n):
    # the tables group integer codes; pandas' pivot_table over the labels is the reference
    book = _book(seed, n)
    _same_as_a_pivot_table(book)


def test_a_write_off_of_a_loan_in_neither_run_is_unknown_with_text_columns_of_nullable_strings():
    # the charge-off file names a loan neither run holds: its repayment type is missing (NA in
    # a nullable string column), and the write-off goes under "unknown", not an error
    book = _book(1, 6).astype({"segment": "string", "repayment": "string", "grade": "string"})
    charge_offs = pd.DataFrame({"loan_id": ["L0", "gone"], "segment": ["auto", "auto"], "gross_charge_off": [1.0, 2.0]})
    table = disclosure_tables(book, date(2026, 9, 30), ["cecl"], charge_offs=charge_offs)["asc326_vintage"]
    written = table[table["row"] == "gross write-offs"]
    assert written["unknown"].sum() == 2.0 and written["total"].sum() == 3.0


def test_credit_quality_is_the_grade_else_delinquency():
    # IFRS 7 B8I: a past-due analysis where it is the only borrower-specific information
    q = credit_quality(pd.DataFrame({"grade": ["A", "", ""], "days_past_due": [90, 0, 95]}))
    assert q.values.tolist() == [["A", "grade"], ["current", "days past due"],
                                 ["90 or more days past due", "days past due"]]


def test_vintage_columns_and_gross_write_offs_by_year_of_origination():
    # ASC 326-20-50-6: the current year and the four before it, then prior; ASU 2022-02 adds
    # the period's gross write-offs by year of origination
    book = pd.DataFrame({"segment": "auto", "grade": "A", "balance": [10.0, 20.0],
                         "origination_date": ["2026-03-01", "2021-12-31"], "repayment": "level"})
    write_offs = pd.DataFrame({"segment": ["auto", "auto"], "gross_charge_off": [5.0, 7.0],
                               "origination_date": ["2024-06-01", None], "repayment": "level"})
    table = asc326_vintage(book, date(2026, 9, 30), write_offs)
    assert list(table.columns[4:]) == ["2026", "2025", "2024", "2023", "2022", "prior", "revolving", "unknown", "total"]
    cost = table[table["row"] == "amortised cost"].iloc[0]
    assert (cost["2026"], cost["prior"]) == (10.0, 20.0)
    written = table[table["row"] == "gross write-offs"].iloc[0]
    assert (written["2024"], written["unknown"], written["total"]) == (5.0, 7.0, 12.0)


def test_disclosures_are_written_as_csv_and_a_workbook_sheet(tmp_path):
    import dataclasses

    import openpyxl

    from allowance.report import write_outputs
    from tests.strategies import example_report

    report = example_report(20)
    loans = report.loans.assign(days_past_due=0, origination_date="2024-01-01")
    tables = {"ifrs7_35m": ifrs7_35m(loans), "asc326_vintage": asc326_vintage(loans, date(2026, 9, 30))}
    write_outputs(tmp_path / "out", dataclasses.replace(report, disclosures=tables))
    written = pd.read_csv(tmp_path / "out" / "disclosure_ifrs7_35m.csv")
    assert cents(written.loc[written["segment"] == "Total", "total"]) == cents(report.loans["balance"])
    assert (tmp_path / "out" / "disclosure_asc326_vintage.csv").is_file()
    assert "Disclosures" in openpyxl.load_workbook(tmp_path / "out" / "reserve.xlsx", read_only=True).sheetnames


@pytest.mark.parametrize("missing", [0.0, 0.05])
def test_the_grid_is_a_pivot_with_blank_odd_and_missing_labels(missing):
    # pandas' pivot_table over the labels is the reference: blank, padded, non-ASCII and
    # digit segment names sort as text; a loan without a segment is left out of the grid (as
    # the pivot leaves it), and with none missing every loan is in it
    rng = np.random.default_rng(11)
    n = 3_000
    book = _book(11, n)
    names = np.array(["auto", "", " card", "Zeta", "ärger", "10", "9", "auto "], dtype=object)
    segment = pd.Series(names[rng.integers(0, len(names), n)], dtype="str")
    segment[rng.random(n) < missing] = None
    book["segment"] = segment
    book["grade"] = pd.Series(np.array(["A", "", " B", None], dtype=object)[rng.integers(0, 4, n)], dtype="str")
    _same_as_a_pivot_table(book)
    vintage = asc326_vintage(book, date(2026, 9, 30))
    assert cents(vintage["total"]) == cents(book.loc[book["segment"].notna(), "balance"])


def test_both_tables_from_codes_made_once_are_the_tables_made_alone():
    # disclosure_tables codes the segments and grades once for both tables; each must equal
    # the table its own function makes (common practice, no source: the same computation)
    rng = np.random.default_rng(3)
    book = _book(3, 2_000)
    book["segment"] = pd.Series(np.array(["auto", "", "Zeta", None], dtype=object)[rng.integers(0, 4, 2_000)], dtype="str")
    book["grade"] = pd.Series(np.array(["A", "", " B", None], dtype=object)[rng.integers(0, 4, 2_000)], dtype="str")
    tables = disclosure_tables(book, date(2026, 9, 30), ["ifrs9", "cecl"])
    assert tables["ifrs7_35m"].equals(ifrs7_35m(book))
    assert tables["asc326_vintage"].equals(asc326_vintage(book, date(2026, 9, 30)))
