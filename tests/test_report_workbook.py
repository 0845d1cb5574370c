"""The reserve workbook: traceable formulas with cached values, totals that tie, safe text.

External checks: the workbook is read back with openpyxl (a second implementation of the
file format), both as formulas and as the values a non-calculating reader sees
(``data_only=True``); and, where LibreOffice is installed, recalculated by LibreOffice
headless with recalculation on load forced, whose results must equal Python's figures to
the cent.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import zipfile

import numpy as np
import pytest
import xlsxwriter
from openpyxl import load_workbook

from allowance.reconcile import compare_runs, what_if_comparison
from allowance.report import CAUTION, SHEETS, write_outputs, write_workbook
from allowance.report.bulk import BULK_HEADER_ROW
from tests.strategies import example_loans, example_report

#: segment names a SUMIFS criterion would misread: comparisons, wildcards, a date, case twins
HOSTILE_SEGMENTS = ("<5", ">x", "=y", "a*", "Auto", "auto", "2026-01", "TRUE")


def cents(x) -> int:
    return int(np.rint(np.asarray(x, dtype=np.float64) * 100).astype(np.int64).sum())


def _letter(index: int) -> str:
    from openpyxl.utils import get_column_letter

    return get_column_letter(index + 1)


def hostile_loans(n: int = 120, seed: int = 3):
    loans = example_loans(n, seed=seed)
    loans.loc[0, "loan_id"] = '=HYPERLINK("x")'
    loans.loc[1, "branch"] = "+danger"
    for i, name in enumerate(HOSTILE_SEGMENTS):
        loans.loc[loans.index[10 + 3 * i: 13 + 3 * i], "segment"] = name
    return loans


@pytest.fixture(scope="module")
def book(tmp_path_factory):
    """A workbook with every optional part: a movement, a what-if, hostile ids and segment names."""
    loans = hostile_loans()
    prior = example_loans(120, seed=4).iloc[10:]
    movements = compare_runs(prior, loans)
    what_if = what_if_comparison(loans, loans.assign(stage=np.where(loans.index % 9 == 0, 2, loans["stage"])),
                                 ["ifrs9", "cecl"])
    report = example_report(loans=loans, movement=movements, what_if=what_if)
    path = tmp_path_factory.mktemp("book") / "reserve.xlsx"
    ledger = write_workbook(path, report)
    return path, report, ledger


def _loan_header(path) -> list:
    ws = load_workbook(path, read_only=True)["Loans"]
    return [c.value for c in next(ws.iter_rows(min_row=BULK_HEADER_ROW, max_row=BULK_HEADER_ROW))]


def test_sheets_are_ours_and_in_order(book):
    path, _, _ = book
    names = load_workbook(path, read_only=True).sheetnames
    assert names == [s for s in SHEETS if s in names]
    for required in ("Summary", "By segment and stage", "Scenarios", "Overlays", "Movement", "Journal", "What-if",
                     "Stage changes", "Intake", "Assumptions", "Term structures", "Run record", "Loans", "Warnings"):
        assert required in names


def test_summary_formulas_reference_the_loan_sheet(book):
    path, report, _ = book
    ws = load_workbook(path)["Summary"]
    formulas = [c.value for row in ws.iter_rows() for c in row if c.data_type == "f"]
    assert len(formulas) > 20
    assert any(f.startswith("=SUMIFS(Loans!") for f in formulas)
    assert any(f.startswith("=SUM(Loans!") for f in formulas)
    # the IFRS 9 allowance total points at the ecl_ifrs9 column of the Loans sheet, over every loan row
    letter = re.escape(_letter(_loan_header(path).index("ecl_ifrs9")))
    first, last = BULK_HEADER_ROW + 1, BULK_HEADER_ROW + len(report.loans)
    assert any(re.fullmatch(rf"=SUM\(Loans!\${letter}\${first}:\${letter}\${last}\)", f) for f in formulas)


def test_every_formula_carries_its_value(book):
    """A reader that does not calculate (pandas, previews, data_only) sees Python's figures."""
    path, _, ledger = book
    values = load_workbook(path, data_only=True)
    assert len(ledger.formulas) > 100
    wrong = []
    for key in ledger.formulas:
        sheet, ref = key.split("!")
        got = values[sheet][ref].value
        if not isinstance(got, (int, float)) or abs(got - ledger.values[key]) > 0.005:
            wrong.append((key, ledger.values[key], got))
    assert not wrong, wrong[:5]


def test_python_figures_equal_the_loans_totals(book):
    _, report, ledger = book
    loans = report.loans
    totals = {key: value for key, value in ledger.values.items() if key.startswith("Summary!")}
    for f in ("ifrs9", "cecl"):
        assert cents(loans[f"ecl_{f}"]) in {cents(v) for v in totals.values()}
    by_stage = loans.groupby("stage")["ecl_ifrs9"].apply(cents)
    assert by_stage.sum() == cents(loans["ecl_ifrs9"])
    # each hostile segment's figure on the summary is its own loans' sum
    for name in HOSTILE_SEGMENTS:
        assert cents(loans.loc[loans["segment"] == name, "ecl_cecl"]) in {cents(v) for v in totals.values()}


def test_summary_totals_equal_run_json(tmp_path):
    """The finished folder: Summary read without calculating equals run.json, in both workbooks."""
    loans = example_loans(80, seed=11)
    report = example_report(loans=loans, movement=compare_runs(example_loans(80, seed=12), loans))
    write_outputs(tmp_path / "q3", report)
    record = json.loads((tmp_path / "q3" / "run.json").read_text())
    for name in ("reserve.xlsx", "summary.xlsx"):
        ws = load_workbook(tmp_path / "q3" / name, data_only=True)["Summary"]
        rows = [[c.value for c in row] for row in ws.iter_rows()]
        head = next(i for i, r in enumerate(rows) if r[:2] == ["Framework", "Loans"])
        columns = rows[head]
        for label, fw in (("IFRS 9", "ifrs9"), ("CECL", "cecl")):
            row = next(r for r in rows[head + 1:] if r[0] == label)
            assert cents(row[columns.index("Allowance")]) == cents(record["total_allowance"][fw]), name
            assert cents(row[columns.index("Balance")]) == cents(record["total_balance"]), name
            assert row[columns.index("Loans")] == record["loans"]
            assert cents(row[columns.index("Prior quarter")]) == cents(record["movement"][fw]["opening"])
        stage = next(i for i, r in enumerate(rows) if r[:1] == ["Stage"])
        # the Summary shows stages 1-3 without POCI loans and POCI apart (IFRS 7 35H(c))
        poci = loans["poci"].astype(bool)
        for label, stage_number in (("Stage 1", 1), ("Stage 2", 2), ("Stage 3", 3)):
            row = next(r for r in rows[stage + 1:] if r[0] == label)
            expected = loans.loc[~poci & (loans["stage"] == stage_number), "ecl_ifrs9"]
            assert cents(row[rows[stage].index("Allowance")]) == cents(expected), (name, label)
        row = next(r for r in rows[stage + 1:] if r[0] == "POCI")
        assert cents(row[rows[stage].index("Allowance")]) == cents(loans.loc[poci, "ecl_ifrs9"])
        total = next(r for r in rows[stage + 1:] if r[0] == "Total")
        assert cents(total[rows[stage].index("Allowance")]) == cents(record["total_allowance"]["ifrs9"])


def test_loan_sheet_holds_every_loan_with_text_as_text(book):
    path, report, _ = book
    ws = load_workbook(path)["Loans"]
    header = [c.value for c in ws[BULK_HEADER_ROW]]
    first = BULK_HEADER_ROW + 1
    assert ws.max_row == BULK_HEADER_ROW + len(report.loans)
    cell = ws.cell(row=first, column=1)
    assert cell.data_type == "s" and cell.value == "'=HYPERLINK(\"x\")"  # neutralised, plain text
    branch = ws.cell(row=first + 1, column=header.index("branch") + 1)
    assert branch.data_type == "s" and branch.value == "'+danger"
    assert not any(c.data_type == "f" for row in ws.iter_rows() for c in row)
    bal = ws.cell(row=first, column=header.index("balance") + 1)
    assert isinstance(bal.value, float) and bal.number_format == "#,##0.00"
    assert ws.cell(row=first, column=header.index("pd_12m") + 1).number_format == "0.00%"
    assert ws.freeze_panes == f"B{first}"
    assert ws.auto_filter.ref == f"A{BULK_HEADER_ROW}:{_letter(len(header) - 1)}{BULK_HEADER_ROW + len(report.loans)}"
    column = [ws.cell(row=r, column=header.index("ecl_ifrs9") + 1).value for r in range(first, ws.max_row + 1)]
    assert cents(column) == cents(report.loans["ecl_ifrs9"])
    assert "not printed by default" in ws.cell(row=BULK_HEADER_ROW - 1, column=1).value.lower()


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
        names = ET.fromstring(z.read("xl/workbook.xml")).iter(
            "{http://schemas.openxmlformats.org/spreadsheetml/2006/main}definedName")
        keys = [(n.get("name"), n.get("localSheetId")) for n in names]
        assert len(keys) == len(set(keys))


def test_movement_and_journal_sheets(book):
    path, report, ledger = book
    wb = load_workbook(path)
    sums = [c.value for row in wb["Movement"].iter_rows() for c in row
            if isinstance(c.value, str) and c.value.startswith("=SUM(")]
    assert sums  # the closing rows are formulas over the lines above
    journal = {k: v for k, v in ledger.values.items() if k.startswith("Journal!")}
    assert cents(report.movements[0].net_provision) in {cents(v) for v in journal.values()}


def test_over_the_limit_loan_detail_goes_to_csv_only(tmp_path):
    report = example_report(40, loan_detail_sheet_limit=10)
    path = tmp_path / "reserve.xlsx"
    ledger = write_workbook(path, report)
    wb = load_workbook(path)
    assert "loans.csv" in wb["Loans"]["A4"].value
    summary = wb["Summary"]
    assert not any(c.data_type == "f" and "Loans!" in str(c.value) for row in summary.iter_rows() for c in row)
    assert any("loans.csv" in str(c.value) for row in summary.iter_rows(max_row=10) for c in row)
    assert cents(report.loans["ecl_ifrs9"]) in {cents(v) for v in ledger.values.values()}
    assert not ledger.formulas or all("Loans!" not in f for f in ledger.formulas.values())


def test_single_framework_and_no_extras(tmp_path):
    report = example_report(15, frameworks=("cecl",), warnings=())
    write_workbook(tmp_path / "r.xlsx", report)
    wb = load_workbook(tmp_path / "r.xlsx")
    assert "Movement" not in wb.sheetnames and "What-if" not in wb.sheetnames
    assert "IFRS 9 allowance" not in " ".join(str(c.value) for row in wb["Summary"].iter_rows() for c in row if c.value)


def _recalculating_profile(tmp_path) -> str:
    """A LibreOffice profile that recalculates every formula on load (OOXMLRecalcMode 0 = always).

    By default LibreOffice keeps the values cached in an XLSX file, which would make the
    recalculation test compare the workbook with itself.
    """
    user = tmp_path / "profile" / "user"
    user.mkdir(parents=True)
    (user / "registrymodifications.xcu").write_text(
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<oor:items xmlns:oor="http://openoffice.org/2001/registry" xmlns:xs="http://www.w3.org/2001/XMLSchema" '
        'xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance">\n'
        '<item oor:path="/org.openoffice.Office.Calc/Formula/Load"><prop oor:name="OOXMLRecalcMode" oor:op="fuse">'
        '<value>0</value></prop></item>\n</oor:items>\n')
    return (tmp_path / "profile").as_uri()


@pytest.mark.slow
@pytest.mark.skipif(shutil.which("soffice") is None, reason="LibreOffice (soffice) is not installed")
def test_libreoffice_recalculation_matches_python(book, tmp_path):
    path, _, ledger = book
    # a canary with a wrong cached value proves that LibreOffice really recalculated
    canary = tmp_path / "canary.xlsx"
    wb = xlsxwriter.Workbook(str(canary))
    wb.add_worksheet("S").write_formula("A1", "=1+1", None, 5)
    wb.close()
    subprocess.run(
        ["soffice", f"-env:UserInstallation={_recalculating_profile(tmp_path)}", "--headless", "--convert-to", "xlsx",
         "--outdir", str(tmp_path / "out"), str(path), str(canary)],
        check=True, capture_output=True, timeout=300,
    )
    assert load_workbook(tmp_path / "out" / canary.name, data_only=True)["S"]["A1"].value == 2
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
    assert recalculated["Loans"].cell(row=BULK_HEADER_ROW + 1, column=1).value == "'=HYPERLINK(\"x\")"


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
