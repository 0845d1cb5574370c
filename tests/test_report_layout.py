"""The workbook as a reader and a printer see it: page setup, headers, formats, what-if marks.

Each check reads the written file back with openpyxl; none looks at our own code's state.
"""

from __future__ import annotations

import re
import zipfile

import numpy as np
import pandas as pd
import pytest
from openpyxl import load_workbook

from allowance.reconcile import compare_runs, what_if_comparison
from allowance.report import write_summary_workbook, write_workbook
from allowance.report.xlsx import nice_axis
from tests.strategies import example_assumptions, example_loans, example_report

HEADER_FILL = "FF2E4A62"
NOT_PRINTED = {"Loans", "Monthly PD curves", "Schedules"}


@pytest.fixture(scope="module")
def books(tmp_path_factory):
    folder = tmp_path_factory.mktemp("layout")
    loans = example_loans(150, seed=21)
    movements = compare_runs(example_loans(150, seed=22), loans)
    base = example_report(loans=loans, movement=movements)
    what_if = example_report(loans=loans, what_if=what_if_comparison(
        loans, loans.assign(stage=np.where(loans.index % 7 == 0, 2, loans["stage"])), ["ifrs9", "cecl"]))
    write_workbook(folder / "base.xlsx", base)
    write_workbook(folder / "what_if.xlsx", what_if)
    write_summary_workbook(folder / "summary.xlsx", base)
    return {"base": folder / "base.xlsx", "what_if": folder / "what_if.xlsx", "summary": folder / "summary.xlsx",
            "report": base}


def _printed(wb):
    return [ws for ws in wb.worksheets if ws.title not in NOT_PRINTED]


def test_every_printed_sheet_has_its_page_setup(books):
    wb = load_workbook(books["base"])
    printed = _printed(wb)
    assert len(printed) >= 10
    for ws in printed:
        area = ws.print_area
        assert area, ws.title
        last_row = int(re.findall(r"\$(\d+)$", area[0] if isinstance(area, list) else area)[0])
        assert last_row >= ws.max_row - 1, (ws.title, area, ws.max_row)
        assert ws.page_setup.orientation in ("portrait", "landscape"), ws.title
        assert ws.sheet_properties.pageSetUpPr.fitToPage, ws.title
        assert ws.page_setup.fitToWidth in (1, None) and ws.page_setup.fitToHeight == 0, ws.title
        assert ws.print_title_rows and ws.print_title_rows.startswith("$1:"), ws.title
        footer = ws.oddFooter
        assert "2026-09-30" in footer.left.text and "2026 Q3 example" in footer.left.text, ws.title
        assert "&P" in footer.right.text and "&N" in footer.right.text, ws.title
        assert "&A" in footer.center.text, ws.title


def test_long_sheets_are_not_printed_and_say_so(books):
    wb = load_workbook(books["base"])
    for name in NOT_PRINTED:
        ws = wb[name]
        area = ws.print_area
        assert re.search(r"\$3$", area[0] if isinstance(area, list) else area), (name, area)
        assert "Not printed by default" in ws["A3"].value
        assert ws.max_row > 3


def test_what_if_is_marked_on_every_sheet(books):
    wb = load_workbook(books["what_if"])
    for ws in wb.worksheets:
        assert ws["A1"].value.startswith("WHAT-IF, NOT FOR BOOKING"), ws.title
        assert "NOT FOR BOOKING" in ws.oddHeader.center.text, ws.title
    base = load_workbook(books["base"])
    for ws in base.worksheets:
        assert "WHAT-IF" not in str(ws["A1"].value) and not ws.oddHeader.center.text


def _headers(ws):
    """Cells styled as table headers (our header fill)."""
    return [c for row in ws.iter_rows() for c in row
            if c.value is not None and c.fill is not None and c.fill.fgColor is not None
            and c.fill.fgColor.rgb == HEADER_FILL]


def test_headers_are_words_and_sit_over_their_numbers(books):
    wb = load_workbook(books["base"])
    snake = re.compile(r"^[a-z0-9]+(_[a-z0-9]+)+$")
    for ws in _printed(wb):
        for cell in _headers(ws):
            assert not snake.match(str(cell.value)), (ws.title, cell.coordinate, cell.value)
            below = ws.cell(row=cell.row + 1, column=cell.column)
            if isinstance(below.value, (int, float)) and not isinstance(below.value, bool) \
                    and below.alignment.horizontal != "center":
                assert cell.alignment.horizontal == "right", (ws.title, cell.coordinate, cell.value)


def test_every_number_has_a_format(books):
    wb = load_workbook(books["base"])
    for ws in _printed(wb):
        for row in ws.iter_rows():
            for c in row:
                if isinstance(c.value, (int, float)) and not isinstance(c.value, bool):
                    assert c.number_format != "General", (ws.title, c.coordinate, c.value)
    summary = wb["Summary"]
    heads = [c for c in _headers(summary) if c.value == "Loans"]
    assert heads
    for head in heads:  # loan counts: thousands separated
        assert summary.cell(row=head.row + 1, column=head.column).number_format == "#,##0"


def test_no_empty_poci_rows_and_a_total_row(books):
    ws = load_workbook(books["base"], data_only=True)["By segment and stage"]
    report = books["report"]
    loans = report.loans
    rows = [[c.value for c in row] for row in ws.iter_rows()]
    head = next(i for i, r in enumerate(rows) if r[:3] == ["Segment", "Stage", "Loans"])
    poci_rows = [r for r in rows[head + 1:] if r[1] == "POCI"]
    with_poci = set(loans.loc[loans["poci"], "segment"])
    assert {r[0] for r in poci_rows} == with_poci and all(r[2] > 0 for r in poci_rows)
    total = next(r for r in rows[head + 1:] if r[0] == "Total")
    assert total[2] == len(loans)


def test_stage_is_centred_apart_from_its_reason(books):
    ws = load_workbook(books["base"])["By segment and stage"]
    stages = [c for c in ws["B"] if c.value in (1, 2, 3, "POCI")]
    assert stages and all(c.alignment.horizontal == "center" for c in stages)


def test_chart_axis_ignores_a_tiny_negative(books):
    assert nice_axis(-143.0, 4_700_000.0) == (0.0, 5_000_000.0)  # the demo's one POCI gain
    assert nice_axis(-60_000.0, 250_000.0) == (-100_000.0, 300_000.0)
    assert nice_axis(0.0, 0.0) == (0.0, 1.0)
    with zipfile.ZipFile(books["base"]) as z:
        charts = [z.read(n).decode() for n in z.namelist() if n.startswith("xl/charts/chart")]
    assert all("<c:min " in c for c in charts)


def test_summary_workbook_stands_alone(books):
    wb = load_workbook(books["summary"])
    assert "Loans" not in wb.sheetnames and "Monthly PD curves" not in wb.sheetnames
    for ws in wb.worksheets:
        for row in ws.iter_rows():
            for c in row:
                if c.data_type == "f":
                    refs = re.findall(r"(?:'([^']+)'|([A-Za-z][\w ]*))!", c.value)
                    for quoted, plain in refs:
                        assert (quoted or plain) in wb.sheetnames, (ws.title, c.coordinate, c.value)
    values = load_workbook(books["summary"], data_only=True)
    full = load_workbook(books["base"], data_only=True)
    for name in values.sheetnames:
        if name in ("Run record",):
            continue
        ours = [[c.value for c in row] for row in values[name].iter_rows()]
        theirs = [[c.value for c in row] for row in full[name].iter_rows()]
        numbers = lambda grid: sorted(round(float(v), 2) for r in grid for v in r
                                      if isinstance(v, (int, float)) and not isinstance(v, bool))
        assert numbers(ours) == numbers(theirs), name


def test_prior_quarter_column_and_variance(books):
    ws = load_workbook(books["base"], data_only=True)["Summary"]
    rows = [[c.value for c in row] for row in ws.iter_rows()]
    head = next(i for i, r in enumerate(rows) if r[:2] == ["Framework", "Loans"])
    cols = rows[head]
    assert {"Prior quarter", "Change", "Change %"} <= set(cols)
    movement = books["report"].movements[0]
    opening = float(movement.allowance.set_index("line").loc["opening", "total"])
    ifrs9 = next(r for r in rows[head + 1:] if r[0] == "IFRS 9")
    assert round(ifrs9[cols.index("Prior quarter")], 2) == round(opening, 2)
    assert round(ifrs9[cols.index("Change")], 2) == round(ifrs9[cols.index("Allowance")] - opening, 2)


def test_journal_carries_configured_account_codes(tmp_path):
    loans = example_loans(60, seed=31)
    report = example_report(loans=loans, movement=compare_runs(example_loans(60, seed=32), loans))
    accounts = {"ifrs9": {"expense": "6100", "allowance": "1490", "segments": {"cre": {"allowance": "1491"}}},
                "cecl": {"expense": "6200", "allowance": "1495"}}
    assumptions = example_assumptions().model_validate(
        {**example_assumptions().model_dump(mode="python"), "gl_accounts": accounts})
    config = report.config.model_copy(update={"assumptions": assumptions})
    import dataclasses

    write_workbook(tmp_path / "r.xlsx", dataclasses.replace(report, config=config))
    ws = load_workbook(tmp_path / "r.xlsx")["Journal"]
    rows = [[c.value for c in row] for row in ws.iter_rows()]
    lines = [r for r in rows if r[1] in ("provision", "release")]
    assert lines
    for segment, entry, code, account, debit in (r[:5] for r in lines):
        expense_side = (entry == "provision") == (debit > 0)
        fw_codes = ("6100", "1490") if "Loss allowance" in account or "Impairment" in account else ("6200", "1495")
        expected = fw_codes[0] if expense_side else fw_codes[1]
        if fw_codes[0] == "6100" and segment == "cre" and not expense_side:
            expected = "1491"
        assert code == expected, (segment, entry, account, code)


def test_unknown_segment_in_accounts_is_refused():
    from pydantic import ValidationError

    data = {**example_assumptions().model_dump(mode="python"),
            "gl_accounts": {"cecl": {"segments": {"boats": {"allowance": "1"}}}}}
    with pytest.raises(ValidationError, match="boats"):
        example_assumptions().model_validate(data)


def test_term_structures_one_row_per_curve_in_the_assumptions_order(books):
    report = books["report"]
    ts = report.term_structures
    ws = load_workbook(books["base"], data_only=True)["Term structures"]
    rows = [[c.value for c in row] for row in ws.iter_rows()]
    head = next(i for i, r in enumerate(rows) if r[:4] == ["Segment", "Grade or bucket", "Framework", "Scenario"])
    body = [r for r in rows[head + 1:] if r[0] is not None]
    assert len(body) == len(ts.drop_duplicates(["segment", "key", "framework", "scenario"]))
    assumptions = report.config.assumptions
    seg_rank = {s: i for i, s in enumerate(assumptions.segments)}
    sc_rank = {s: i for i, s in enumerate(assumptions.scenarios)}
    fw_rank = {"IFRS 9": 0, "CECL": 1}
    keys = [(seg_rank[r[0]], fw_rank[r[2]], sc_rank[r[3]]) for r in body]
    by_segment = [k[0] for k in keys]
    assert by_segment == sorted(by_segment)
    first_curve = [k[2] for k in keys[: len(sc_rank)]]
    assert first_curve == sorted(first_curve)
    twelve = ts[(ts["month"] == 12)].iloc[0]
    assert any(r[0] == twelve["segment"] and abs(r[4] - twelve["cumulative_pd"]) < 1e-12 for r in body)


def test_monthly_pd_curves_a_row_per_curve_and_measure_months_across(books):
    """Every value of the run's long term-structure table, read back from the wide sheet exactly
    (the sheet must not round: openpyxl reads the XML text as Python floats)."""
    ts = books["report"].term_structures
    ws = load_workbook(books["base"], read_only=True)["Monthly PD curves"]
    rows = [list(r) for r in ws.iter_rows(min_row=4, values_only=True)]
    head, body = rows[0], rows[1:]
    assert head[:5] == ["Segment", "Grade or bucket", "Framework", "Scenario", "Measure"]
    months = sorted(ts["month"].unique())
    assert head[5:] == [f"Month {m}" for m in months]
    curves = ts.drop_duplicates(["segment", "key", "framework", "scenario"])
    assert len(body) == 2 * len(curves)
    assert [r[4] for r in body[:2]] == ["Marginal PD", "Cumulative PD"]
    label = {"ifrs9": "IFRS 9", "cecl": "CECL"}
    sheet = {(r[0], r[1], r[2], r[3], r[4]): r[5:] for r in body}
    for key, curve in ts.groupby(["segment", "key", "framework", "scenario"], sort=False):
        segment, k, framework, scenario = key
        shown = (segment, "all" if k == "*" else k, label[framework], scenario)
        for measure, column in (("Marginal PD", "marginal_pd"), ("Cumulative PD", "cumulative_pd")):
            values = dict(zip(curve["month"], curve[column]))
            assert sheet[(*shown, measure)] == [values.get(m) for m in months], (shown, measure)


def test_first_row_of_a_long_sheet_is_exact(books):
    """The first loan row is laid out by XlsxWriter, which writes 16 significant digits; it must
    read back as the loan frame holds it, like every other row."""
    loans = books["report"].loans
    ws = load_workbook(books["base"], read_only=True)["Loans"]
    head, first, second = (list(r) for r in ws.iter_rows(min_row=4, max_row=6, values_only=True))
    for row, values in ((0, first), (1, second)):
        for name, value in zip(head, values):
            if pd.api.types.is_float_dtype(loans[name].dtype) and pd.notna(loans[name].iat[row]):
                assert value == float(loans[name].iat[row]), (row, name)
