"""The reserve workbook: traceable formulas, totals that tie to loans.csv, safe text, valid layout.

External checks: the workbook is read back with openpyxl (a second implementation of the
file format), and, where LibreOffice is installed, recalculated by LibreOffice headless
(``soffice --convert-to xlsx`` recalculates formulas that have no cached value on load);
its results must equal Python's figures to the cent.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import zipfile

import numpy as np
import pytest
from openpyxl import load_workbook

from allowance.reconcile import compare_runs, what_if_comparison
from allowance.report import CAUTION, SHEETS, write_workbook
from tests.strategies import example_loans, example_report


def cents(x) -> int:
    return int(np.rint(np.asarray(x, dtype=np.float64) * 100).astype(np.int64).sum())


@pytest.fixture(scope="module")
def book(tmp_path_factory):
    """A workbook with every optional part: a movement, a what-if and a hostile loan id."""
    loans = example_loans(120, seed=3)
    loans.loc[0, "loan_id"] = '=HYPERLINK("x")'
    loans.loc[1, "branch"] = "+danger"
    prior = example_loans(120, seed=4).iloc[10:]
    movements = compare_runs(prior, loans)
    what_if = what_if_comparison(loans, loans.assign(stage=np.where(loans.index % 9 == 0, 2, loans["stage"])),
                                 ["ifrs9", "cecl"])
    report = example_report(loans=loans, movement=movements, what_if=what_if)
    path = tmp_path_factory.mktemp("book") / "reserve.xlsx"
    ledger = write_workbook(path, report)
    return path, report, ledger


def test_sheets_are_ours_and_in_order(book):
    path, _, _ = book
    names = load_workbook(path, read_only=True).sheetnames
    assert names == [s for s in SHEETS if s in names]
    for required in ("Summary", "By segment and stage", "Scenarios", "Overlays", "Movement", "Journal", "What-if",
                     "Intake", "Assumptions", "Term structures", "Run record", "Loans", "Warnings"):
        assert required in names


def test_summary_formulas_reference_the_loan_sheet(book):
    path, report, ledger = book
    ws = load_workbook(path)["Summary"]
    formulas = [c.value for row in ws.iter_rows() for c in row if c.data_type == "f"]
    assert len(formulas) > 20
    assert any(f.startswith("=SUMIFS(Loans!") for f in formulas)
    assert any(f.startswith("=SUM(Loans!") for f in formulas)
    # the IFRS 9 allowance total formula points at the ecl_ifrs9 column of the Loans sheet
    loans_ws = load_workbook(path, read_only=True)["Loans"]
    header = [c.value for c in next(loans_ws.iter_rows(min_row=1, max_row=1))]
    letter = re.escape(_letter(header.index("ecl_ifrs9")))
    assert any(re.fullmatch(rf"=SUM\(Loans!\${letter}\$2:\${letter}\$121\)", f) for f in formulas)


def _letter(index: int) -> str:
    from openpyxl.utils import get_column_letter

    return get_column_letter(index + 1)


def test_python_figures_equal_the_loans_totals(book):
    _, report, ledger = book
    loans = report.loans
    totals = {key: value for key, value in ledger.values.items() if key.startswith("Summary!")}
    for f in ("ifrs9", "cecl"):
        assert cents(loans[f"ecl_{f}"]) in {cents(v) for v in totals.values()}
    # the stage rows add to the total, in cents
    by_stage = loans.groupby("stage")["ecl_ifrs9"].apply(cents)
    assert by_stage.sum() == cents(loans["ecl_ifrs9"])


def test_loan_sheet_holds_every_loan_with_text_as_text(book):
    path, report, _ = book
    ws = load_workbook(path)["Loans"]
    assert ws.max_row == len(report.loans) + 1
    cell = ws["A2"]
    assert cell.data_type == "s" and cell.value == "'=HYPERLINK(\"x\")"  # neutralised, plain text
    header = [c.value for c in ws[1]]
    branch = ws.cell(row=3, column=header.index("branch") + 1)
    assert branch.data_type == "s" and branch.value == "'+danger"
    # no cell on the loan sheet is a formula
    assert not any(c.data_type == "f" for row in ws.iter_rows() for c in row)
    # numbers are numbers, with money and rate formats
    bal = ws.cell(row=2, column=header.index("balance") + 1)
    assert isinstance(bal.value, float) and bal.number_format == "#,##0.00"
    assert ws.cell(row=2, column=header.index("pd_12m") + 1).number_format == "0.00%"
    assert ws.freeze_panes == "A2" and ws.auto_filter.ref == f"A1:{_letter(len(header) - 1)}{len(report.loans) + 1}"
    # the sheet's cells sum to the frame's totals
    column = [ws.cell(row=r, column=header.index("ecl_ifrs9") + 1).value for r in range(2, ws.max_row + 1)]
    assert cents(column) == cents(report.loans["ecl_ifrs9"])


def test_caution_and_charts(book):
    path, _, _ = book
    wb = load_workbook(path)
    texts = [c.value for row in wb["Summary"].iter_rows(max_row=6) for c in row if isinstance(c.value, str)]
    assert any(CAUTION in t for t in texts)
    for term in ("assumptions", "governance", "model-risk", "ASC 326", "IFRS 9", "auditors", "regulators"):
        assert term in CAUTION
    with zipfile.ZipFile(path) as z:
        charts = [n for n in z.namelist() if n.startswith("xl/charts/chart")]
    assert len(charts) >= 2


def test_workbook_parts_are_well_formed(book):
    """Every XML part parses, no defined name repeats, and every table of the book is readable."""
    import xml.etree.ElementTree as ET

    path, _, _ = book
    with zipfile.ZipFile(path) as z:
        assert z.testzip() is None
        for name in z.namelist():
            if name.endswith(".xml") or name.endswith(".rels"):
                ET.fromstring(z.read(name))
        names = ET.fromstring(z.read("xl/workbook.xml")).iter("{http://schemas.openxmlformats.org/spreadsheetml/2006/main}definedName")
        keys = [(n.get("name"), n.get("localSheetId")) for n in names]
        assert len(keys) == len(set(keys))


def test_movement_and_journal_sheets(book):
    path, report, ledger = book
    wb = load_workbook(path)
    movement = wb["Movement"]
    sums = [c.value for row in movement.iter_rows() for c in row if isinstance(c.value, str) and c.value.startswith("=SUM(")]
    assert sums  # the closing rows are formulas over the lines above
    journal = {k: v for k, v in ledger.values.items() if k.startswith("Journal!")}
    ifrs9 = report.movements[0]
    assert cents(ifrs9.net_provision) in {cents(v) for v in journal.values()}


def test_over_the_limit_loan_detail_goes_to_csv_only(tmp_path):
    report = example_report(40, loan_detail_sheet_limit=10)
    path = tmp_path / "reserve.xlsx"
    ledger = write_workbook(path, report)
    wb = load_workbook(path)
    assert wb["Loans"].max_row == 1 and "loans.csv" in wb["Loans"]["A1"].value
    summary = wb["Summary"]
    assert not any(c.data_type == "f" and "Loans!" in str(c.value) for row in summary.iter_rows() for c in row)
    assert any("loans.csv" in str(c.value) for row in summary.iter_rows(max_row=8) for c in row)
    assert cents(report.loans["ecl_ifrs9"]) in {cents(v) for v in ledger.values.values()}
    assert not ledger.formulas or all("Loans!" not in f for f in ledger.formulas.values())


def test_single_framework_and_no_extras(tmp_path):
    report = example_report(15, frameworks=("cecl",), warnings=())
    write_workbook(tmp_path / "r.xlsx", report)
    wb = load_workbook(tmp_path / "r.xlsx")
    assert "Movement" not in wb.sheetnames and "What-if" not in wb.sheetnames
    assert "IFRS 9 allowance" not in " ".join(str(c.value) for row in wb["Summary"].iter_rows() for c in row if c.value)


@pytest.mark.slow
@pytest.mark.skipif(shutil.which("soffice") is None, reason="LibreOffice (soffice) is not installed")
def test_libreoffice_recalculation_matches_python(book, tmp_path):
    path, _, ledger = book
    profile = (tmp_path / "profile").as_uri()
    subprocess.run(
        ["soffice", f"-env:UserInstallation={profile}", "--headless", "--convert-to", "xlsx", "--outdir",
         str(tmp_path / "out"), str(path)],
        check=True, capture_output=True, timeout=180,
    )
    recalculated = load_workbook(tmp_path / "out" / path.name, data_only=True)
    assert ledger.formulas
    wrong = []
    for key in ledger.formulas:
        sheet, ref = key.split("!")
        got = recalculated[sheet][ref].value
        if got is None or abs(float(got) - ledger.values[key]) > 0.005:
            wrong.append((key, ledger.formulas[key], ledger.values[key], got))
    assert not wrong, wrong[:5]
    # the text that came from the tape is still text after LibreOffice rewrote the file
    assert recalculated["Loans"]["A2"].value == "'=HYPERLINK(\"x\")"


def test_scenario_table_and_sensitivity(book):
    from allowance.engine import scenario_summary

    _, report, ledger = book
    table = scenario_summary(report.loans, report.config)
    base = table[(table["framework"] == "ifrs9") & (table["scenario"] == "base")].iloc[0]
    assert cents(base["ecl"]) == cents(report.loans["ecl_ifrs9_base"]) and base["weight"] == 0.6
    weighted = table[(table["framework"] == "cecl") & (table["scenario"] == "weighted (modelled)")].iloc[0]
    assert cents(weighted["ecl"]) == cents(report.loans["ecl_cecl_modelled"])
    # each scenario at 100 % is on the Scenarios sheet, as a figure over the loan sheet
    scenario_figures = {cents(v) for k, v in ledger.values.items() if k.startswith("Scenarios!")}
    for name in ("base", "upside", "downside"):
        assert cents(report.loans[f"ecl_ifrs9_{name}"]) in scenario_figures


def test_user_text_on_other_sheets_is_neutralised(book):
    path, _, _ = book
    wb = load_workbook(path)
    texts = [c for row in wb["Overlays"].iter_rows() for c in row if isinstance(c.value, str)]
    rationale = [c for c in texts if "prices falling faster" in c.value]
    assert rationale and all(c.data_type == "s" and c.value.startswith("'=") for c in rationale)
    for ws in wb.worksheets:  # our formulas only: none of them holds tape text
        for row in ws.iter_rows():
            for c in row:
                if c.data_type == "f":
                    assert "HYPERLINK" not in c.value and "danger" not in c.value
