"""The reserve workbook (``reserve.xlsx``): summary to loan detail, every figure traceable.

Implements
----------
SHEETS          the sheet names, in order
write_workbook  write the workbook for a :class:`~allowance.report.record.RunReport`

The summary, segment x stage and scenario figures are live SUM / SUMIFS / COUNTIFS formulas
over the ``Loans`` sheet, so a reviewer can click from a total to its loans. When the run has
more loans than ``[run] loan_detail_sheet_limit`` (or than a sheet holds), the loan detail is
in ``loans.csv`` only, the ``Loans`` sheet says so, and the same cells carry values, each
table noting the ``loans.csv`` column it ties to.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pandas as pd
from openpyxl import Workbook
from openpyxl.chart import BarChart, Reference
from openpyxl.styles import Alignment, Font
from openpyxl.utils import get_column_letter

from allowance.frameworks import FRAMEWORK_RULES
from allowance.report.figures import Figure, Ledger, LoanRefs
from allowance.report.record import CAUTION, RunReport
from allowance.report.sheets import (
    assumptions_sheet, intake_sheet, journal_sheet, movement_sheet, record_sheet, stage_changes_frame,
    term_structure_sheet, warnings_frame, what_if_sheet,
)
from allowance.report.xlsx import (
    EXCEL_MAX_ROWS, HEADER_FILL, HEADER_FONT, INTEGER, MONEY, RATE, TITLE_FONT, BulkSheet,
    clean_text, inject_bulk,
)

__all__ = ["SHEETS", "write_workbook"]

SHEETS: tuple[str, ...] = (
    "Summary", "By segment and stage", "Scenarios", "Overlays", "Movement", "Journal", "What-if",
    "Stage changes", "Intake", "Warnings", "Assumptions", "Term structures", "Monthly PD curves",
    "Schedules", "Run record", "Loans",
)
_FW_LABEL = {name: rules.label for name, rules in FRAMEWORK_RULES.items()}


def _staged(frameworks: list[str]) -> str | None:
    """The framework of the run whose loans carry stages (IFRS 9), if any."""
    return next((f for f in frameworks if FRAMEWORK_RULES[f].staged), None)


def _header(ws: Any, row: int, col: int, names: list[str], widths: list[float] | None = None) -> None:
    for j, name in enumerate(names):
        cell = ws.cell(row=row, column=col + j, value=clean_text(name))
        cell.font, cell.fill = HEADER_FONT, HEADER_FILL
        cell.alignment = Alignment(wrap_text=True, vertical="top")
        if widths:
            letter = get_column_letter(col + j)
            ws.column_dimensions[letter].width = max(ws.column_dimensions[letter].width or 0, widths[j])


def _coverage(allowance_ref: str, balance_ref: str, allowance: float, balance: float) -> Figure:
    return Figure(f"=IF({balance_ref}=0,0,{allowance_ref}/{balance_ref})", allowance / balance if balance else 0.0)


def _tie_note(ws: Any, row: int, refs: LoanRefs, what: str) -> int:
    if not refs.live:
        ws.cell(row=row, column=1, value=clean_text(
            f"Values, not formulas: the loan detail is in loans.csv only. {what}")).font = Font(italic=True)
        return row + 1
    return row


def _classes(loans: pd.DataFrame) -> list[tuple[str, Any, list[tuple[str, str, Any]]]]:
    """IFRS 9's reporting classes: stages 1-3 and, when there are any, POCI apart (IFRS 7 35H(c)).

    Each is (label, stage cell value, criteria); with POCI loans present the stage rows
    exclude them, so the rows add to the total and match the movement's columns.
    """
    poci = "poci" in loans.columns and bool(loans["poci"].astype(bool).any())
    stages = sorted(int(s) for s in loans["stage"].dropna().unique()) if "stage" in loans.columns else []
    out = []
    for stage in sorted(set(stages) | {1, 2, 3}):
        crit = [("stage", str(stage), stage)] + ([("poci", "FALSE", False)] if poci else [])
        out.append((f"Stage {stage}", stage, crit))
    if poci:
        out.append(("POCI", "POCI", [("poci", "TRUE", True)]))
    return out


# --------------------------------------------------------------------------------------
# Summary
# --------------------------------------------------------------------------------------


def _summary(ws: Any, report: RunReport, refs: LoanRefs, led: Ledger) -> None:
    run = report.config.assumptions.run
    loans = report.loans
    ws.cell(row=1, column=1, value="Credit-loss allowance: reserve summary").font = Font(bold=True, size=15)
    label = f" · run {run.label}" if run.label else ""
    ws.cell(row=2, column=1, value=clean_text(f"As of {run.as_of.isoformat()} · amounts in {run.currency}{label}"))
    ws.merge_cells("A3:H3")
    caution = ws.cell(row=3, column=1, value=clean_text("Caution: " + CAUTION))
    caution.alignment = Alignment(wrap_text=True, vertical="top")
    caution.font = Font(italic=True, color="9C0006")
    ws.row_dimensions[3].height = 78
    for letter, width in zip("ABCDEFGH", (30, 10, 18, 19, 16, 18, 16, 16)):
        ws.column_dimensions[letter].width = width
    row = _tie_note(ws, 5, refs, "Each total is the sum of the named loans.csv column (over the rows named).")

    ws.cell(row=row, column=1, value="Allowance by framework").font = TITLE_FONT
    _header(ws, row + 1, 1, ["Framework", "Loans", "Balance", "Modelled allowance", "Overlays", "Allowance", "Coverage"])
    r = row + 2
    for f in report.frameworks:
        ws.cell(row=r, column=1, value=_FW_LABEL[f])
        led.put(ws, r, 2, refs.count(), INTEGER)
        bal = led.put(ws, r, 3, refs.total("balance"), MONEY)
        led.put(ws, r, 4, refs.total(f"ecl_{f}_modelled"), MONEY)
        led.put(ws, r, 5, refs.total(f"overlay_{f}"), MONEY)
        allowance = led.put(ws, r, 6, refs.total(f"ecl_{f}"), MONEY)
        led.put(ws, r, 7, _coverage(allowance, bal, led.local(ws, allowance), led.local(ws, bal)), RATE)
        r += 1
    r += 1

    staged = _staged(report.frameworks)
    if staged is not None and "stage" in loans.columns:
        ws.cell(row=r, column=1, value=f"{_FW_LABEL[staged]} allowance by stage").font = TITLE_FONT
        _header(ws, r + 1, 1, ["Stage", "Loans", "Balance", "12-month ECL", "Lifetime ECL", "Allowance", "Coverage"])
        r += 2
        first = r
        for label, _, crit in _classes(loans):
            ws.cell(row=r, column=1, value=label)
            led.put(ws, r, 2, refs.count(crit), INTEGER)
            bal = led.put(ws, r, 3, refs.total("balance", crit), MONEY)
            led.put(ws, r, 4, refs.total("ecl_12m", crit), MONEY)
            led.put(ws, r, 5, refs.total("ecl_lifetime", crit), MONEY)
            allowance = led.put(ws, r, 6, refs.total(f"ecl_{staged}", crit), MONEY)
            led.put(ws, r, 7, _coverage(allowance, bal, led.local(ws, allowance), led.local(ws, bal)), RATE)
            r += 1
        _total_row(ws, r, first, r - 1, refs, led, [(2, None, INTEGER), (3, "balance", MONEY), (4, "ecl_12m", MONEY),
                                                    (5, "ecl_lifetime", MONEY), (6, f"ecl_{staged}", MONEY)],
                   coverage=(6, 3, 7))
        r += 2

    ws.cell(row=r, column=1, value="Allowance by segment").font = TITLE_FONT
    cols = ["Segment", "Loans", "Balance"]
    for f in report.frameworks:
        cols += [f"{_FW_LABEL[f]} allowance", f"{_FW_LABEL[f]} coverage"]
    _header(ws, r + 1, 1, cols)
    r += 2
    first = r
    specs: list[tuple[int, str | None, str]] = [(2, None, INTEGER), (3, "balance", MONEY)]
    for segment in sorted(loans["segment"].dropna().unique(), key=str) if "segment" in loans.columns else []:
        ws.cell(row=r, column=1, value=clean_text(str(segment)))
        crit = [("segment", f"$A{r}", segment)]
        led.put(ws, r, 2, refs.count(crit), INTEGER)
        bal = led.put(ws, r, 3, refs.total("balance", crit), MONEY)
        for k, f in enumerate(report.frameworks):
            allowance = led.put(ws, r, 4 + 2 * k, refs.total(f"ecl_{f}", crit), MONEY)
            led.put(ws, r, 5 + 2 * k, _coverage(allowance, bal, led.local(ws, allowance), led.local(ws, bal)), RATE)
        r += 1
    for k, f in enumerate(report.frameworks):
        specs.append((4 + 2 * k, f"ecl_{f}", MONEY))
    _total_row(ws, r, first, r - 1, refs, led, specs,
               coverage=[(4 + 2 * k, 3, 5 + 2 * k) for k in range(len(report.frameworks))])
    r += 2
    for m in report.movements:
        table = m.allowance.set_index("line")["total"]
        ws.cell(row=r, column=1, value=clean_text(
            f"{_FW_LABEL[m.framework]} movement since the prior run: opening {table['opening']:,.2f}, "
            f"provision {m.net_provision:,.2f}, closing {table['closing']:,.2f} (see Movement and Journal)"))
        r += 1
    ws.freeze_panes = "A4"


def _total_row(ws: Any, r: int, first: int, last: int, refs: LoanRefs, led: Ledger,
               specs: list[tuple[int, str | None, str]], coverage: Any = None) -> None:
    """A Total row: SUM over the loan sheet column (not over the rows above), so it ties directly."""
    ws.cell(row=r, column=1, value="Total").font = Font(bold=True)
    for col, column, fmt in specs:
        figure = refs.count() if column is None else refs.total(column)
        led.put(ws, r, col, figure, fmt, bold=True)
    pairs = coverage if isinstance(coverage, list) else ([coverage] if coverage else [])
    for a_col, b_col, out_col in pairs:
        a, b = f"{get_column_letter(a_col)}{r}", f"{get_column_letter(b_col)}{r}"
        led.put(ws, r, out_col, _coverage(a, b, led.local(ws, a), led.local(ws, b)), RATE, bold=True)


# --------------------------------------------------------------------------------------
# Segment x stage, with the chart
# --------------------------------------------------------------------------------------


def _segment_stage(ws: Any, report: RunReport, refs: LoanRefs, led: Ledger) -> None:
    loans = report.loans
    fws = report.frameworks
    has_stage = "stage" in loans.columns
    row = _tie_note(ws, 1, refs, "Each figure is the sum of the named loans.csv column for the segment and stage.")
    ws.cell(row=row, column=1, value="Allowance by segment and stage").font = TITLE_FONT
    money = [("balance", "Balance"), ("ead", "EAD")]
    for f in fws:
        money += [(f"ecl_{f}_modelled", f"{_FW_LABEL[f]} modelled"), (f"overlay_{f}", f"{_FW_LABEL[f]} overlays"),
                  (f"ecl_{f}", f"{_FW_LABEL[f]} allowance")]
    money = [(c, label) for c, label in money if refs.has(c)]
    names = ["Segment", "Stage", "Loans"] + [label for _, label in money] + [f"{_FW_LABEL[f]} coverage" for f in fws]
    _header(ws, row + 1, 1, names, [22, 8, 10] + [18] * (len(names) - 3))
    r = row + 2
    segments = sorted(loans["segment"].dropna().unique(), key=str)
    classes = _classes(loans) if has_stage else [("", None, [])]
    for segment in segments:
        for _, stage_cell, class_crit in classes:
            ws.cell(row=r, column=1, value=clean_text(str(segment)))
            crit = [("segment", f"$A{r}", segment)] + class_crit
            if stage_cell is not None:
                ws.cell(row=r, column=2, value=stage_cell)
            led.put(ws, r, 3, refs.count(crit), INTEGER)
            refs_by_col = {}
            for j, (column, _) in enumerate(money):
                refs_by_col[column] = led.put(ws, r, 4 + j, refs.total(column, crit), MONEY)
            for k, f in enumerate(fws):
                a, b = refs_by_col[f"ecl_{f}"], refs_by_col["balance"]
                led.put(ws, r, 4 + len(money) + k, _coverage(a, b, led.local(ws, a), led.local(ws, b)), RATE)
            r += 1
    ws.auto_filter.ref = f"A{row + 1}:{get_column_letter(len(names))}{max(r - 1, row + 1)}"
    ws.freeze_panes = f"A{row + 2}"

    # the grid behind the chart: segments down, stages across, the allowance of the staged
    # framework (else the first)
    f = _staged(fws) or fws[0]
    gr = r + 2
    ws.cell(row=gr, column=1, value=f"{_FW_LABEL[f]} allowance by segment and stage (chart data)").font = TITLE_FONT
    by_class = has_stage and FRAMEWORK_RULES[f].staged
    chart_classes = classes if by_class else [("Allowance", None, [])]
    heads = ["Segment"] + [label for label, _, _ in chart_classes]
    _header(ws, gr + 1, 1, heads)
    for i, segment in enumerate(segments):
        rr = gr + 2 + i
        ws.cell(row=rr, column=1, value=clean_text(str(segment)))
        for j, (_, _, class_crit) in enumerate(chart_classes):
            crit = [("segment", f"$A{rr}", segment)] + class_crit
            led.put(ws, rr, 2 + j, refs.total(f"ecl_{f}", crit), MONEY)
    if segments:
        chart = BarChart()
        chart.type, chart.grouping, chart.overlap = "col", "stacked", 100
        chart.title = f"{_FW_LABEL[f]} allowance by segment and stage"
        chart.y_axis.title, chart.x_axis.title = "Allowance", "Segment"
        chart.y_axis.numFmt = "#,##0"
        data = Reference(ws, min_col=2, max_col=len(heads), min_row=gr + 1, max_row=gr + 1 + len(segments))
        cats = Reference(ws, min_col=1, min_row=gr + 2, max_row=gr + 1 + len(segments))
        chart.add_data(data, titles_from_data=True)
        chart.set_categories(cats)
        chart.height, chart.width = 9, 18
        ws.add_chart(chart, f"{get_column_letter(len(names) + 2)}{row + 1}")


# --------------------------------------------------------------------------------------
# Scenarios and sensitivity, with the chart
# --------------------------------------------------------------------------------------


def _scenarios(ws: Any, report: RunReport, refs: LoanRefs, led: Ledger) -> None:
    scenarios = report.config.assumptions.scenarios
    row = _tie_note(ws, 1, refs, "Each scenario figure is the sum of loans.csv column ecl_<framework>_<scenario>.")
    ws.column_dimensions["A"].width = 46
    for letter in "BCDEF":
        ws.column_dimensions[letter].width = 20
    at_100: dict[str, dict[str, str]] = {}
    weighted_ref: dict[str, str] = {}
    for f in report.frameworks:
        ws.cell(row=row, column=1, value=f"{_FW_LABEL[f]}: allowance under each scenario").font = TITLE_FONT
        _header(ws, row + 1, 1, ["Scenario", "Weight", "Allowance at 100 % weight", "Weight x allowance",
                                 "Difference from weighted"])
        r = first = row + 2
        at_100[f] = {}
        weighted_row = first + len(scenarios)
        for name, scenario in scenarios.items():
            ws.cell(row=r, column=1, value=clean_text(name))
            led.put(ws, r, 2, scenario.weight, RATE)
            fig = refs.total(f"ecl_{f}_{name}")
            at_100[f][name] = led.put(ws, r, 3, fig, MONEY)
            led.put(ws, r, 4, Figure(f"=B{r}*C{r}", scenario.weight * fig.value), MONEY)
            r += 1
        w_sum = sum(s.weight * led.local(ws, at_100[f][n]) for n, s in scenarios.items())
        ws.cell(row=r, column=1, value="Probability-weighted (sum of weight x allowance)").font = Font(bold=True)
        led.put(ws, r, 2, Figure(f"=SUM(B{first}:B{r - 1})", sum(s.weight for s in scenarios.values())), RATE, bold=True)
        led.put(ws, r, 4, Figure(f"=SUM(D{first}:D{r - 1})", w_sum), MONEY, bold=True)
        for i, name in enumerate(scenarios):
            led.put(ws, first + i, 5, Figure(f"=C{first + i}-$D${weighted_row}",
                                             led.local(ws, at_100[f][name]) - w_sum), MONEY)
        modelled = refs.total(f"ecl_{f}_modelled")
        overlays = refs.total(f"overlay_{f}")
        final = refs.total(f"ecl_{f}")
        ws.cell(row=r + 1, column=1, value="Modelled allowance (sum of loans)")
        weighted_ref[f] = led.put(ws, r + 1, 4, modelled, MONEY)
        ws.cell(row=r + 2, column=1, value="Rounding to cents, loan by loan")
        led.put(ws, r + 2, 4, Figure(f"=D{r + 1}-D{r}", modelled.value - w_sum), MONEY)
        ws.cell(row=r + 3, column=1, value="Overlays")
        led.put(ws, r + 3, 4, overlays, MONEY)
        ws.cell(row=r + 4, column=1, value="Final allowance").font = Font(bold=True)
        led.put(ws, r + 4, 4, final, MONEY, bold=True)
        row = r + 6

    # sensitivity: one row per scenario, one column per framework (the chart's data)
    ws.cell(row=row, column=1, value="Sensitivity: the allowance at 100 % of each scenario").font = TITLE_FONT
    _header(ws, row + 1, 1, ["Scenario"] + [_FW_LABEL[f] for f in report.frameworks])
    r = row + 2
    for name in list(scenarios) + ["weighted"]:
        ws.cell(row=r, column=1, value=clean_text(name if name != "weighted" else "probability-weighted (modelled)"))
        for k, f in enumerate(report.frameworks):
            ref = at_100[f][name] if name != "weighted" else weighted_ref[f]
            led.put(ws, r, 2 + k, Figure(f"={ref}", led.local(ws, ref)), MONEY)
        r += 1
    chart = BarChart()
    chart.type = "col"
    chart.title = "Allowance at 100 % of each scenario"
    chart.y_axis.title, chart.x_axis.title = "Allowance", "Scenario"
    chart.y_axis.numFmt = "#,##0"
    data = Reference(ws, min_col=2, max_col=1 + len(report.frameworks), min_row=row + 1, max_row=r - 1)
    chart.add_data(data, titles_from_data=True)
    chart.set_categories(Reference(ws, min_col=1, min_row=row + 2, max_row=r - 1))
    chart.height, chart.width = 9, 18
    ws.add_chart(chart, "H2")


# --------------------------------------------------------------------------------------
# Overlays
# --------------------------------------------------------------------------------------


def _overlays(ws: Any, report: RunReport, refs: LoanRefs, led: Ledger) -> None:
    from allowance.report.xlsx import put_table

    ws.cell(row=1, column=1, value="Modelled and final allowance").font = TITLE_FONT
    _header(ws, 2, 1, ["Framework", "Modelled", "Overlays", "Final", "Final - modelled - overlays"], [22, 18, 18, 18, 18])
    r = 3
    for f in report.frameworks:
        ws.cell(row=r, column=1, value=_FW_LABEL[f])
        m = led.put(ws, r, 2, refs.total(f"ecl_{f}_modelled"), MONEY)
        o = led.put(ws, r, 3, refs.total(f"overlay_{f}"), MONEY)
        fin = led.put(ws, r, 4, refs.total(f"ecl_{f}"), MONEY)
        led.put(ws, r, 5, Figure(f"={fin}-{m}-{o}", led.local(ws, fin) - led.local(ws, m) - led.local(ws, o)), MONEY)
        r += 1
    table = report.overlays if report.overlays is not None else pd.DataFrame()
    start = r + 1
    if table.empty:
        ws.cell(row=start, column=1, value="No overlays in this run.")
        return
    put_table(ws, table.reset_index(drop=True), start, 1, title="Overlays (post-model adjustments)", autofilter=True,
              formats={"value": None})
    ws.freeze_panes = None


# --------------------------------------------------------------------------------------
# The workbook
# --------------------------------------------------------------------------------------


def _bulk_or_note(wb: Workbook, title: str, frame: pd.DataFrame | None, note: str, bulks: list[BulkSheet]) -> None:
    if frame is None or frame.empty:
        return
    ws = wb.create_sheet(title)
    if len(frame) + 1 > EXCEL_MAX_ROWS:
        ws.cell(row=1, column=1, value=clean_text(note))
        return
    bulk = BulkSheet(ws, frame.reset_index(drop=True))
    bulk.prepare()
    bulks.append(bulk)


def write_workbook(path: Path, report: RunReport) -> Ledger:
    """Write ``reserve.xlsx`` to ``path``; return the ledger of the figures it holds.

    Parameters
    ----------
    path : Path
        The file to write (its folder must exist).
    report : RunReport
        The run.

    Returns
    -------
    Ledger
        ``values``: every figure written as ``"Sheet!B7" -> value`` (what Python computed),
        ``formulas``: those that are formulas. A recalculation of the workbook must give the
        same values.
    """
    loans = report.loans.reset_index(drop=True)
    limit = min(report.config.assumptions.run.loan_detail_sheet_limit, EXCEL_MAX_ROWS - 1)
    live = 0 < len(loans) <= limit
    refs = LoanRefs(loans, live=live)
    led = Ledger()
    wb = Workbook()
    wb.remove(wb.active)
    bulks: list[BulkSheet] = []

    _summary(wb.create_sheet("Summary"), report, refs, led)
    _segment_stage(wb.create_sheet("By segment and stage"), report, refs, led)
    _scenarios(wb.create_sheet("Scenarios"), report, refs, led)
    _overlays(wb.create_sheet("Overlays"), report, refs, led)
    if report.movements:
        movement_sheet(wb.create_sheet("Movement"), report.movements, led)
        journal_sheet(wb.create_sheet("Journal"), report.movements, led)
    if report.what_if_parts is not None:
        what_if_sheet(wb.create_sheet("What-if"), report.what_if_parts)
        _bulk_or_note(wb, "Stage changes", stage_changes_frame(report.what_if_parts), "Too many rows for a sheet; see what_if_stage_changes.csv.", bulks)
    intake_sheet(wb.create_sheet("Intake"), report, refs, led)
    _bulk_or_note(wb, "Warnings", warnings_frame(report), "Too many warnings for a sheet; see warnings.csv.", bulks)
    assumptions_sheet(wb.create_sheet("Assumptions"), report)
    term_structure_sheet(wb.create_sheet("Term structures"), report)
    _bulk_or_note(wb, "Monthly PD curves", report.term_structures, "Too many rows for a sheet.", bulks)
    _bulk_or_note(wb, "Schedules", report.schedules, "Too many rows for a sheet.", bulks)
    record_sheet(wb.create_sheet("Run record"), report)

    ws = wb.create_sheet("Loans")
    if live:
        bulk = BulkSheet(ws, loans)
        bulk.prepare()
        bulks.append(bulk)
    else:
        ws.column_dimensions["A"].width = 110
        ws.cell(row=1, column=1, value=clean_text(
            f"The loan detail of this run ({len(loans):,} loans) is not in this workbook: it exceeds the "
            f"limit of {limit:,} loans per sheet ([run] loan_detail_sheet_limit). It is in loans.csv "
            "(and loans.parquet when asked for); every figure in this workbook is the sum of a column there."
            if len(loans) else "This run has no accepted loans."))
    bulk_titles = {b.ws.title for b in bulks}
    for sheet in wb.worksheets:
        if sheet.title not in bulk_titles:  # print a sheet across one page wide
            sheet.page_setup.orientation = "landscape"
            sheet.sheet_properties.pageSetUpPr.fitToPage = True
            sheet.page_setup.fitToWidth, sheet.page_setup.fitToHeight = 1, 0
    wb.save(path)
    inject_bulk(path, bulks)
    return led

