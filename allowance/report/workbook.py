"""The reserve workbook (``reserve.xlsx``) and the summary workbook (``summary.xlsx``).

Implements
----------
SHEETS                 the sheet names, in order
write_workbook         the full workbook: summary to loan detail, every figure traceable
write_summary_workbook the printed sheets only, standing alone: no loan detail, no formula
                       that points at a sheet it does not hold
write_workbooks        both, what they share built once

The summary, segment x stage and scenario figures of ``reserve.xlsx`` are live formulas
(SUM / SUMIFS / COUNTIFS, or an exact-match SUMPRODUCT, see :mod:`allowance.report.figures`)
over the ``Loans`` sheet, so a reviewer can click from a total to its loans; every formula
carries its computed value, so a reader that does not calculate sees the same numbers. When
the run has more loans than ``[run] loan_detail_sheet_limit`` (or than a sheet holds), and
always in ``summary.xlsx``, the same cells hold values, each table naming the ``loans.csv``
column it ties to.
"""

from __future__ import annotations

from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any

import pandas as pd

from allowance.exceptions import AllowanceError
from allowance.frameworks import FRAMEWORK_RULES
from allowance.report import clock
from allowance.report.bulk import BULK_HEADER_ROW, BulkSheet, save
from allowance.report.cells import human
from allowance.report.figures import Figure, Ledger, LoanRefs
from allowance.report.measurement import gross_net_section, measurement_section
from allowance.report.record import CAUTION, RunReport
from allowance.report.sheets import (
    disclosures_sheet, intake_sheet, journal_sheet, movement_sheet, record_sheet, stage_changes_frame, warnings_frame,
    what_if_sheet,
)
from allowance.report.assumptions_sheet import (
    CurveGrid, assumptions_sheet, curve_grid, monthly_curves_frame, term_structure_sheet,
)
from allowance.report.forecast_sheets import macro_pd_sheet, roll_forecast_sheet
from allowance.report.xlsx import Book, Context, Sheet, col_letter, nice_axis

__all__ = ["SHEETS", "Shared", "write_summary_workbook", "write_workbook", "write_workbooks"]

SHEETS: tuple[str, ...] = (
    "Summary", "By segment and stage", "Scenarios", "Overlays", "Movement", "Journal", "Disclosures", "What-if",
    "Stage changes", "Intake", "Warnings", "Assumptions", "Term structures", "Monthly PD curves",
    "Schedules", "Run record", "Loans",
)
#: tables longer than this go on a sheet of their own that is not printed by default
PRINT_ROW_LIMIT = 250
EXCEL_MAX_ROWS = 1_048_576
FW_LABEL = {name: rules.label for name, rules in FRAMEWORK_RULES.items()}


def _staged(frameworks: list[str]) -> str | None:
    """The framework of the run whose loans carry stages (IFRS 9), if any."""
    return next((f for f in frameworks if FRAMEWORK_RULES[f].staged), None)
_TOP = 4  # the first row under the title rows and a blank row


def _coverage(allowance_ref: str, balance_ref: str, allowance: float, balance: float) -> Figure:
    return Figure(f"=IF({balance_ref}=0,0,{allowance_ref}/{balance_ref})", allowance / balance if balance else 0.0)


def _drawn_undrawn(sheet: Sheet, r: int, report: RunReport, refs: LoanRefs, led: Ledger) -> int:
    """The modelled allowance split into the ECL on drawn balances and on undrawn commitments,
    and the part presented apart from the loss allowance: an IFRS 9 provision (the undrawn part
    and any ECL above the drawn balance, IFRS 9 5.5.20, IFRS 7 B8E), a CECL liability for
    off-balance-sheet credit exposure (ASC 326-20-30-11). Returns the next free row."""
    fws = [f for f in report.frameworks if refs.has(f"provision_{f}")]
    if not fws:
        return r
    r = sheet.section(r, "Drawn and undrawn: the loss allowance and the provision for commitments")
    r = sheet.note(r, "Modelled figures, before overlays. IFRS 9: the ECL on undrawn commitments, and any ECL "
                   "above a loan's drawn balance, is a provision (IFRS 9 5.5.20, IFRS 7 B8E). CECL: the ECL on "
                   "the undrawn part of commitments the lender cannot unconditionally cancel is a liability for "
                   "off-balance-sheet credit exposure (ASC 326-20-30-11); cancellable lines carry none.")
    sheet.header(r, 1, ["Framework", "Modelled allowance", "On drawn balances", "On undrawn commitments",
                        "Provision or liability", "Against the loans", "Presented as"],
                 ["text", "money", "money", "money", "money", "money", "text"])
    r += 1
    for f in fws:
        sheet.label(r, 1, FW_LABEL[f])
        modelled = led.put(sheet, r, 2, refs.total(f"ecl_{f}_modelled"), "money")
        led.put(sheet, r, 3, refs.total(f"ecl_{f}_drawn"), "money")
        led.put(sheet, r, 4, refs.total(f"ecl_{f}_undrawn"), "money")
        provision = led.put(sheet, r, 5, refs.total(f"provision_{f}"), "money")
        against = led.local(sheet, modelled) - led.local(sheet, provision)
        led.put(sheet, r, 6, Figure(f"={modelled}-{provision}", round(against, 2)), "money")
        # wrapped in the column the tables above and below size (coverage): the long account name
        # would otherwise widen it and shrink the whole printed page
        sheet.put(r, 7, FRAMEWORK_RULES[f].provision_account, "wrap", fit=False)
        r += 1
    return r + 1


def _tie_note(sheet: Sheet, row: int, refs: LoanRefs, what: str) -> int:
    if refs.live:
        return row
    return sheet.note(row, f"Values, not formulas: the loan detail is not in this workbook. {what}")


def _detail(report: RunReport) -> str:
    """Where the loan detail is: loans.csv, or the Parquet files of a book computed part by part
    (whose figures here are the sums its parts sent back)."""
    return "loans.csv" if report.loan_detail is None else f"the loan detail (the Parquet files in {report.loan_detail})"


def _detail_column(report: RunReport) -> str:
    return "loans.csv column" if report.loan_detail is None else f"column of {_detail(report)}"


def _classes(loans: pd.DataFrame) -> list[tuple[str, Any, list[tuple[str, str, Any]]]]:
    """IFRS 9's reporting classes: stages 1-3 and, when there are any, POCI apart (IFRS 7 35H(c)).

    Each is (label, stage cell value, criteria); with POCI loans present the stage rows
    exclude them, so the rows add to the total and match the movement's columns.
    """
    poci = "poci" in loans.columns and bool(loans["poci"].astype(bool).any())
    stages = sorted(int(s) for s in loans["stage"].dropna().unique()) if "stage" in loans.columns else []
    out = []
    for stage in sorted(set(stages) | {1, 2, 3}):
        crit = [("stage", "", stage)] + ([("poci", "FALSE", False)] if poci else [])
        out.append((f"Stage {stage}", stage, crit))
    if poci:
        out.append(("POCI", "POCI", [("poci", "TRUE", True)]))
    return out


def _with_ref(crit: list[tuple[str, str, Any]], column: str, ref: str) -> list[tuple[str, str, Any]]:
    """The criteria with ``column``'s cell reference filled in."""
    return [(c, ref if c == column else r, v) for c, r, v in crit]


def _segments(refs: LoanRefs) -> list[Any]:
    """The segments of the loans (none missing), in order of their text."""
    return sorted(refs.labels("segment")[0], key=str) if refs.has("segment") else []


# --------------------------------------------------------------------------------------
# Prior-quarter figures (from the movement, when a prior run was given)
# --------------------------------------------------------------------------------------


def _prior(report: RunReport) -> dict[str, dict[str, Any]]:
    """Per framework: the prior run's total, by class (IFRS 9 stage / POCI) and by segment."""
    out: dict[str, dict[str, Any]] = {}
    for m in report.movements:
        table = m.allowance.set_index("line")
        opening = table.loc["opening"]
        classes = {str(c).capitalize() if str(c).startswith("stage") else str(c): float(opening[c])
                   for c in table.columns if c not in ("label", "total")}
        roll = m.rollforward.set_index("segment")
        out[m.framework] = {"total": float(opening["total"]), "by_class": classes,
                            "by_segment": {str(s): float(v) for s, v in roll["beginning"].items() if s != "Total"},
                            "roll": m.rollforward}
    return out


def _prior_columns(sheet: Sheet, led: Ledger, row: int, col: int, current_ref: str, prior: float | None,
                   *, total: bool = False) -> None:
    """Prior quarter, change and change in percent beside a current figure."""
    if prior is None:
        return
    led.put(sheet, row, col, prior, "money", total=total)
    current = led.local(sheet, current_ref)
    prior_ref = f"{col_letter(col)}{row}"
    change = led.put(sheet, row, col + 1, Figure(f"={current_ref}-{prior_ref}", current - prior), "money", total=total)
    led.put(sheet, row, col + 2, Figure(f"=IF({prior_ref}=0,0,{change}/{prior_ref})",
                                        (current - prior) / prior if prior else 0.0), "rate", total=total)


# --------------------------------------------------------------------------------------
# Summary
# --------------------------------------------------------------------------------------


def _summary(sheet: Sheet, report: RunReport, refs: LoanRefs, led: Ledger, *, full: bool) -> None:
    loans = report.loans
    prior = _prior(report)
    what_if = report.what_if_parts is not None
    row = sheet.note(_TOP - 1, "Caution: " + CAUTION, style="caution")
    row += 1
    if what_if:
        files = _overlay_files(report)
        row = sheet.note(row, "What-if run, not for booking: the assumptions with "
                         + (", ".join(files) if files else "overlay files")
                         + " merged over them, compared with the base run on the What-if sheet.", style="caution")
        row += 1
    row = _tie_note(sheet, row, refs, f"Each total is the sum of the named {_detail_column(report)} (over the rows "
                    "named).")
    prior_heads = ["Prior quarter", "Change", "Change %"]
    prior_kinds = ["money", "money", "rate"]

    row = sheet.section(row, "Allowance by framework")
    heads = ["Framework", "Loans", "Balance", "Modelled allowance", "Overlays", "Allowance", "Coverage"]
    kinds = ["text", "count", "money", "money", "money", "money", "rate"]
    has_prior = any(f in prior for f in report.frameworks)
    sheet.header(row, 1, heads + (prior_heads if has_prior else []), kinds + (prior_kinds if has_prior else []))
    r = row + 1
    for f in report.frameworks:
        sheet.label(r, 1, FW_LABEL[f])
        led.put(sheet, r, 2, refs.count(), "count")
        bal = led.put(sheet, r, 3, refs.total("balance"), "money")
        led.put(sheet, r, 4, refs.total(f"ecl_{f}_modelled"), "money")
        led.put(sheet, r, 5, refs.total(f"overlay_{f}"), "money")
        allowance = led.put(sheet, r, 6, refs.total(f"ecl_{f}"), "money")
        led.put(sheet, r, 7, _coverage(allowance, bal, led.local(sheet, allowance), led.local(sheet, bal)), "rate")
        _prior_columns(sheet, led, r, 8, allowance, prior.get(f, {}).get("total"))
        r += 1
    r += 1
    r = _drawn_undrawn(sheet, r, report, refs, led)

    staged = _staged(report.frameworks)
    if staged is not None and "stage" in loans.columns:
        r = sheet.section(r, f"{FW_LABEL[staged]} allowance by stage")
        p = prior.get(staged)
        sheet.header(r, 1, ["Stage", "Loans", "Balance", "12-month ECL", "Lifetime ECL", "Allowance", "Coverage"]
                     + (prior_heads if p else []), kinds + (prior_kinds if p else []))
        r += 1
        for label, _, crit in _classes(loans):
            sheet.label(r, 1, label)
            crit = _with_ref(crit, "stage", f"{_stage_number_ref(label)}")
            led.put(sheet, r, 2, refs.count(crit), "count")
            bal = led.put(sheet, r, 3, refs.total("balance", crit), "money")
            led.put(sheet, r, 4, refs.total("ecl_12m", crit), "money")
            led.put(sheet, r, 5, refs.total("ecl_lifetime", crit), "money")
            allowance = led.put(sheet, r, 6, refs.total(f"ecl_{staged}", crit), "money")
            led.put(sheet, r, 7, _coverage(allowance, bal, led.local(sheet, allowance), led.local(sheet, bal)), "rate")
            if p:
                _prior_columns(sheet, led, r, 8, allowance, p["by_class"].get(label, 0.0))
            r += 1
        allowance = _total_row(sheet, r, refs, led, [(2, None, "count"), (3, "balance", "money"),
                                                     (4, "ecl_12m", "money"), (5, "ecl_lifetime", "money"),
                                                     (6, f"ecl_{staged}", "money")], coverage=[(6, 3, 7)])
        if p:
            _prior_columns(sheet, led, r, 8, "F" + str(r), p["total"], total=True)
        r += 2

    r = sheet.section(r, "Allowance by segment")
    cols, col_kinds = ["Segment", "Loans", "Balance"], ["text", "count", "money"]
    for f in report.frameworks:
        cols += [f"{FW_LABEL[f]} allowance", f"{FW_LABEL[f]} coverage"]
        col_kinds += ["money", "rate"]
        if f in prior:
            cols += [f"{FW_LABEL[f]} prior quarter", f"{FW_LABEL[f]} change"]
            col_kinds += ["money", "money"]
    sheet.header(r, 1, cols, col_kinds)
    r += 1
    positions = {}
    c = 4
    for f in report.frameworks:
        positions[f] = c
        c += 4 if f in prior else 2
    for segment in _segments(refs):
        sheet.label(r, 1, str(segment))
        crit = [("segment", f"$A{r}", segment)]
        led.put(sheet, r, 2, refs.count(crit), "count")
        bal = led.put(sheet, r, 3, refs.total("balance", crit), "money")
        for f in report.frameworks:
            c = positions[f]
            allowance = led.put(sheet, r, c, refs.total(f"ecl_{f}", crit), "money")
            led.put(sheet, r, c + 1, _coverage(allowance, bal, led.local(sheet, allowance), led.local(sheet, bal)), "rate")
            if f in prior:
                before = prior[f]["by_segment"].get(str(segment), 0.0)
                led.put(sheet, r, c + 2, before, "money")
                led.put(sheet, r, c + 3, Figure(f"={allowance}-{col_letter(c + 2)}{r}",
                                                led.local(sheet, allowance) - before), "money")
        r += 1
    specs: list[tuple[int, str | None, str]] = [(2, None, "count"), (3, "balance", "money")]
    specs += [(positions[f], f"ecl_{f}", "money") for f in report.frameworks]
    _total_row(sheet, r, refs, led, specs, coverage=[(positions[f], 3, positions[f] + 1) for f in report.frameworks])
    for f in report.frameworks:
        if f in prior:
            c = positions[f]
            led.put(sheet, r, c + 2, prior[f]["total"], "money", total=True)
            cur = led.local(sheet, f"{col_letter(c)}{r}")
            led.put(sheet, r, c + 3, Figure(f"={col_letter(c)}{r}-{col_letter(c + 2)}{r}", cur - prior[f]["total"]),
                    "money", total=True)
    r += 2
    r = gross_net_section(sheet, r, list(report.frameworks), loans, refs, led)
    r = measurement_section(sheet, r, list(report.frameworks), loans, refs, led, detail=_detail(report))

    if report.movements:
        r = sheet.section(r, "Movement since the prior quarter (details on the Movement and Journal sheets)")
        sheet.header(r, 1, ["Framework", "Opening allowance", "Provision for credit losses", "Charge-offs",
                            "Recoveries", "Closing allowance"], ["text"] + ["money"] * 5)
        r += 1
        for m in report.movements:
            total = m.rollforward[m.rollforward["segment"] == "Total"].iloc[0]
            sheet.label(r, 1, FW_LABEL[m.framework])
            for j, key in enumerate(("beginning", "provision", "charge_offs", "recoveries")):
                led.put(sheet, r, 2 + j, float(total[key]), "money")
            led.put(sheet, r, 6, Figure(f"=SUM(B{r}:E{r})", float(total["ending"])), "money")
            r += 1
        r += 1

    if what_if:
        r = _what_if_summary(sheet, r, report, led)

    r = sheet.section(r, "What this workbook holds")
    for name, what, printed in _contents(report, full=full):
        sheet.label(r, 1, name)
        sheet.put(r, 2, what + ("" if printed else " Not printed by default."), "text", fit=False)
        r += 1
    sheet.ws.freeze_panes(2, 0)


def _stage_number_ref(label: str) -> str:
    return "" if label == "POCI" else f"{label.split()[-1]}"


def _total_row(sheet: Sheet, r: int, refs: LoanRefs, led: Ledger, specs: list[tuple[int, str | None, str]],
               coverage: list[tuple[int, int, int]] = ()) -> str:
    """A Total row: SUM over the loan sheet column (not over the rows above), so it ties directly."""
    sheet.label(r, 1, "Total", total=True)
    last = ""
    for col, column, kind in specs:
        figure = refs.count() if column is None else refs.total(column)
        last = led.put(sheet, r, col, figure, kind, total=True)
    for a_col, b_col, out_col in coverage:
        a, b = f"{col_letter(a_col)}{r}", f"{col_letter(b_col)}{r}"
        led.put(sheet, r, out_col, _coverage(a, b, led.local(sheet, a), led.local(sheet, b)), "rate", total=True)
    return last


def _overlay_files(report: RunReport) -> list[str]:
    return [Path(i.path).name for i in report.config.inputs if i.role == "overlay"]


def _what_if_summary(sheet: Sheet, r: int, report: RunReport, led: Ledger) -> int:
    """The what-if's effect on each framework's total, and the overlay files that made it."""
    parts = report.what_if_parts
    totals = parts.summary[parts.summary["view"] == "total"]
    r = sheet.section(r, "What-if against the base run")
    sheet.header(r, 1, ["Framework", "Base allowance", "What-if allowance", "Change", "Change %"],
                 ["text", "money", "money", "money", "rate"])
    r += 1
    for row in totals.itertuples(index=False):
        sheet.label(r, 1, FW_LABEL.get(row.framework, row.framework))
        led.put(sheet, r, 2, float(row.base), "money")
        led.put(sheet, r, 3, float(row.what_if), "money")
        led.put(sheet, r, 4, Figure(f"=C{r}-B{r}", float(row.what_if) - float(row.base)), "money")
        led.put(sheet, r, 5, Figure(f"=IF(B{r}=0,0,D{r}/B{r})",
                                    (float(row.what_if) - float(row.base)) / float(row.base) if row.base else 0.0), "rate")
        r += 1
    files = [i for i in report.config.inputs if i.role == "overlay"]
    if files:
        r += 1
        sheet.header(r, 1, ["Overlay file", "SHA-256"], ["text", "text"])
        r += 1
        for i in files:
            sheet.label(r, 1, Path(i.path).name)
            sheet.put(r, 2, i.sha256, "text", fit=False)
            r += 1
    return r + 1


def _has(frame: pd.DataFrame | None) -> bool:
    return frame is not None and not frame.empty


def _contents(report: RunReport, *, full: bool) -> list[tuple[str, str, bool]]:
    rows = [
        ("By segment and stage", "Loans, balance, EAD, modelled and final allowance, coverage; a chart.", True),
        ("Scenarios", "Each scenario at 100 % weight, the weighted result, overlays; a chart.", True),
        ("Overlays", "Post-model adjustments: terms, rationale, owner, effect.", True),
    ]
    if full and _has(report.macro_paths) and _has(report.pd_paths):
        rows.insert(2, ("Macro and PD paths", "Each scenario's macro paths beside the PD paths they produce; charts.",
                        True))
    if report.movements:
        rows += [("Movement", "Opening to closing allowance and gross carrying amount; roll-forward.", True),
                 ("Journal", "The entries that book the period's provision.", True)]
    if report.disclosures:
        rows += [("Disclosures", "Gross carrying amount by credit quality and stage; amortised cost by year of "
                                 "origination.", True)]
    if report.what_if_parts is not None:
        rows += [("What-if", "Base against what-if by segment, stage and scenario.", True)]
        if full:
            rows += [("Stage changes", "Loans whose stage differs under the what-if.", False)]
    rows += [("Intake", "Rows read, accepted and rejected; dates; the ledger tie-out.", True)]
    if full:
        rows += [("Warnings", "Findings on accepted rows.", len(warnings_frame(report)) <= PRINT_ROW_LIMIT)]
    rows += [("Assumptions", "Every assumption the run used, as grids.", True),
             ("Term structures", "Cumulative PD at 1, 2, 3, 5 and 10 years by segment and grade.", True)]
    if full and _has(report.roll_forecast):
        rows += [("Roll-rate forecast", "Bucket balances rolled forward: charge-offs by month, against the "
                                        "loan-level allowance.", True)]
    if full:
        rows += [("Monthly PD curves", "Marginal and cumulative PD month by month.", False),
                 ("Schedules", "Representative loans' schedules, month by month.", False)]
    rows += [("Run record", "Version, input files with SHA-256, counts and totals (run.json).", True)]
    if full:
        rows += [("Loans", "One row per loan, as loans.csv.", False)]
    else:
        rows += [("(loan detail)", "Not in this file: see reserve.xlsx and loans.csv." if report.loan_detail is None
                  else f"Not in this file: {_detail(report)}.", True)]
    return rows


# --------------------------------------------------------------------------------------
# Segment x stage, with the chart
# --------------------------------------------------------------------------------------


def _segment_stage(sheet: Sheet, report: RunReport, refs: LoanRefs, led: Ledger) -> None:
    loans = report.loans
    fws = report.frameworks
    has_stage = "stage" in loans.columns
    row = _tie_note(sheet, _TOP, refs, f"Each figure is the sum of the named {_detail_column(report)} for the "
                    "segment and stage.")
    money = [("balance", "Balance"), ("ead", "EAD")]
    for f in fws:
        money += [(f"ecl_{f}_modelled", f"{FW_LABEL[f]} modelled"), (f"overlay_{f}", f"{FW_LABEL[f]} overlays"),
                  (f"ecl_{f}", f"{FW_LABEL[f]} allowance")]
    money = [(c, label) for c, label in money if refs.has(c)]
    names = ["Segment", "Stage", "Loans"] + [label for _, label in money] + [f"{FW_LABEL[f]} coverage" for f in fws]
    kinds = ["text", "center", "count"] + ["money"] * len(money) + ["rate"] * len(fws)
    head = row
    sheet.header(head, 1, names, kinds)
    sheet.repeat_to = head
    r = head + 1
    segments = _segments(refs)
    classes = _classes(loans) if has_stage else [("", None, [])]
    for segment in segments:
        for label, stage_cell, class_crit in classes:
            if label == "POCI" and not refs.count([("segment", "", segment)] + class_crit).value:
                continue  # no POCI loans in this segment: no empty row
            sheet.label(r, 1, str(segment))
            crit = [("segment", f"$A{r}", segment)] + _with_ref(class_crit, "stage", f"$B{r}")
            if stage_cell is not None:
                sheet.put(r, 2, stage_cell, "center")
            led.put(sheet, r, 3, refs.count(crit), "count")
            by_col = {}
            for j, (column, _) in enumerate(money):
                by_col[column] = led.put(sheet, r, 4 + j, refs.total(column, crit), "money")
            for k, f in enumerate(fws):
                a, b = by_col[f"ecl_{f}"], by_col["balance"]
                led.put(sheet, r, 4 + len(money) + k, _coverage(a, b, led.local(sheet, a), led.local(sheet, b)), "rate")
            r += 1
    sheet.ws.autofilter(head - 1, 0, r - 2, len(names) - 1)
    _total_row(sheet, r, refs, led, [(3, None, "count")] + [(4 + j, c, "money") for j, (c, _) in enumerate(money)],
               coverage=[(4 + [c for c, _ in money].index(f"ecl_{f}"), 4, 4 + len(money) + k) for k, f in enumerate(fws)])
    sheet.ws.freeze_panes(head, 1)

    # the grid behind the chart: segments down, classes across, the allowance of the first framework
    f = _staged(fws) or fws[0]
    gr = r + 3
    by_class = has_stage and FRAMEWORK_RULES[f].staged
    chart_classes = classes if by_class else [("Allowance", None, [])]
    gr = sheet.section(gr, f"{FW_LABEL[f]} allowance by segment and stage (the chart's data)")
    heads = ["Segment"] + [label for label, _, _ in chart_classes]
    sheet.header(gr, 1, heads, ["text"] + ["money"] * len(chart_classes))
    lows, highs = [], []
    for i, segment in enumerate(segments):
        rr = gr + 1 + i
        sheet.label(rr, 1, str(segment))
        neg = pos = 0.0
        for j, (label, _, class_crit) in enumerate(chart_classes):
            crit = [("segment", f"$A{rr}", segment)] + _with_ref(class_crit, "stage", str(_stage_number_ref(label)))
            ref = led.put(sheet, rr, 2 + j, refs.total(f"ecl_{f}", crit), "money")
            value = led.local(sheet, ref)
            neg, pos = neg + min(value, 0.0), pos + max(value, 0.0)
        lows.append(neg)
        highs.append(pos)
    if not segments:
        return
    book = sheet.book.workbook
    chart = book.add_chart({"type": "column", "subtype": "stacked"})
    last = gr + len(segments)
    for j in range(len(chart_classes)):
        chart.add_series({
            "name": [sheet.name, gr - 1, 1 + j],
            "categories": [sheet.name, gr, 0, last - 1, 0],
            "values": [sheet.name, gr, 1 + j, last - 1, 1 + j],
            "fill": {"color": _SERIES_COLOURS[j % len(_SERIES_COLOURS)]},
            "gap": 60,
        })
    low, high = nice_axis(min(lows), max(highs))
    chart.set_title({"name": f"{FW_LABEL[f]} allowance by segment and stage", "name_font": {"size": 11}})
    chart.set_y_axis({"name": f"Allowance ({report.config.assumptions.run.currency})", "num_format": "#,##0",
                      "min": low, "max": high, "major_gridlines": {"visible": True, "line": {"color": "#D9DEE3"}}})
    chart.set_x_axis({"name": "Segment"})
    chart.set_legend({"position": "bottom"})
    # beside its data when the table above leaves room (7 pixels a character), else below it
    room = sum(sheet.fit.get(c, 8.43) for c in range(len(heads) + 2, len(names) + 1)) * 7
    if room >= 520:
        r = max(sheet.chart(gr - 1, len(heads) + 2, chart, width=int(min(room, 760)) - 12, height=300), last + 2)
    else:
        r = sheet.chart(last + 2, 1, chart, width=720, height=340)
    if min(lows) < 0 and low == 0:
        sheet.note(r, f"Negative amounts (POCI gains, {min(lows):,.2f} in total at most per segment) are too "
                   "small to show at this scale; they are in the tables above.")


_SERIES_COLOURS = ("#2E4A62", "#5B8DB8", "#C9853A", "#8C5E8F", "#6E9A5B", "#A35B4F")


# --------------------------------------------------------------------------------------
# Scenarios and sensitivity, with the chart
# --------------------------------------------------------------------------------------


def _scenarios(sheet: Sheet, report: RunReport, refs: LoanRefs, led: Ledger) -> None:
    scenarios = report.config.assumptions.scenarios
    row = _tie_note(sheet, _TOP, refs, f"Each scenario figure is the sum of the {_detail_column(report)} "
                    "ecl_<framework>_<scenario>.")
    at_100: dict[str, dict[str, str]] = {}
    weighted_ref: dict[str, str] = {}
    for f in report.frameworks:
        row = sheet.section(row, f"{FW_LABEL[f]}: allowance under each scenario")
        sheet.header(row, 1, ["Scenario", "Weight", "Allowance at 100 % weight", "Weight x allowance",
                              "Difference from the weighted allowance"], ["text", "rate", "money", "money", "money"])
        r = first = row + 1
        at_100[f] = {}
        weighted_row = first + len(scenarios)
        for name, scenario in scenarios.items():
            sheet.label(r, 1, name)
            led.put(sheet, r, 2, scenario.weight, "rate")
            fig = refs.total(f"ecl_{f}_{name}")
            at_100[f][name] = led.put(sheet, r, 3, fig, "money")
            led.put(sheet, r, 4, Figure(f"=B{r}*C{r}", scenario.weight * fig.value), "money")
            r += 1
        w_sum = sum(s.weight * led.local(sheet, at_100[f][n]) for n, s in scenarios.items())
        sheet.label(r, 1, "Probability-weighted", total=True)
        led.put(sheet, r, 2, Figure(f"=SUM(B{first}:B{r - 1})", sum(s.weight for s in scenarios.values())), "rate",
                total=True)
        sheet.put(r, 3, None, "money", total=True)
        led.put(sheet, r, 4, Figure(f"=SUM(D{first}:D{r - 1})", w_sum), "money", total=True)
        sheet.put(r, 5, None, "money", total=True)
        for i, name in enumerate(scenarios):
            led.put(sheet, first + i, 5, Figure(f"=C{first + i}-$D${weighted_row}",
                                                led.local(sheet, at_100[f][name]) - w_sum), "money")
        modelled = refs.total(f"ecl_{f}_modelled")
        sheet.label(r + 1, 1, "Modelled allowance (sum of loans)")
        weighted_ref[f] = led.put(sheet, r + 1, 4, modelled, "money")
        sheet.label(r + 2, 1, "Rounding to cents, loan by loan")
        led.put(sheet, r + 2, 4, Figure(f"=D{r + 1}-D{r}", modelled.value - w_sum), "money")
        sheet.label(r + 3, 1, "Overlays")
        led.put(sheet, r + 3, 4, refs.total(f"overlay_{f}"), "money")
        sheet.label(r + 4, 1, "Allowance", total=True)
        for c in (2, 3, 5):
            sheet.put(r + 4, c, None, "money", total=True)
        led.put(sheet, r + 4, 4, refs.total(f"ecl_{f}"), "money", total=True)
        row = r + 6

    row = _restaged(sheet, row, report)
    row = sheet.section(row, "The allowance at 100 % of each scenario (this run's stages)")
    sheet.header(row, 1, ["Scenario"] + [FW_LABEL[f] for f in report.frameworks], ["text"] + ["money"] * len(report.frameworks))
    r = row + 1
    for name in list(scenarios) + ["weighted"]:
        sheet.label(r, 1, name if name != "weighted" else "probability-weighted (modelled)")
        for k, f in enumerate(report.frameworks):
            ref = at_100[f][name] if name != "weighted" else weighted_ref[f]
            led.put(sheet, r, 2 + k, Figure(f"={ref}", led.local(sheet, ref)), "money")
        r += 1
    chart = sheet.book.workbook.add_chart({"type": "column"})
    for k in range(len(report.frameworks)):
        chart.add_series({
            "name": [sheet.name, row - 1, 1 + k],
            "categories": [sheet.name, row, 0, r - 2, 0],
            "values": [sheet.name, row, 1 + k, r - 2, 1 + k],
            "fill": {"color": _SERIES_COLOURS[k % len(_SERIES_COLOURS)]},
        })
    values = [led.local(sheet, at_100[f][n]) for f in report.frameworks for n in scenarios]
    low, high = nice_axis(min(values + [0.0]), max(values + [0.0]))
    chart.set_title({"name": "Allowance at 100 % of each scenario", "name_font": {"size": 11}})
    chart.set_y_axis({"name": f"Allowance ({report.config.assumptions.run.currency})", "num_format": "#,##0",
                      "min": low, "max": high, "major_gridlines": {"visible": True, "line": {"color": "#D9DEE3"}}})
    chart.set_x_axis({"name": "Scenario"})
    chart.set_legend({"position": "bottom"})
    sheet.chart(r + 1, 1, chart, width=620, height=320)


def _restaged(sheet: Sheet, row: int, report: RunReport) -> int:
    """Each scenario alone at 100 % weight with the book restaged under it (when the run made them)."""
    table = getattr(report, "sensitivity", None)
    if table is None or table.empty:
        return row
    shown = table.copy()
    shown["framework"] = shown["framework"].map(lambda f: FW_LABEL.get(f, f))
    keep = [c for c in ("framework", "scenario", "weight", "allowance_modelled", "overlays", "allowance",
                        "difference_from_weighted", "difference_pct", "loans_stage_2", "loans_stage_3")
            if c in shown.columns]
    headers = {"framework": "Framework", "scenario": "Scenario", "weight": "Weight",
               "allowance_modelled": "Modelled", "overlays": "Overlays", "allowance": "Allowance",
               "difference_from_weighted": "Difference from the weighted run", "difference_pct": "Difference %",
               "loans_stage_2": "Loans in stage 2", "loans_stage_3": "Loans in stage 3"}
    kinds = {"weight": "rate", "difference_pct": "rate", "loans_stage_2": "count", "loans_stage_3": "count"}
    row = sheet.section(row, "Each scenario alone at 100 % weight, the book restaged under it (sensitivity.csv)")
    _, last = sheet.table(row, shown[keep].reset_index(drop=True), kinds=kinds, headers=headers)
    return last + 2


# --------------------------------------------------------------------------------------
# Overlays
# --------------------------------------------------------------------------------------


def overlay_frames(table: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The overlay table for people, in two parts: terms and effect; rationale and governance.

    Percent and amount overlays have their own columns, each in its own format.
    """
    scope = [
        " · ".join([f"segment {seg}" if seg != "*" else "all segments",
                    f"stage {int(st)}" if pd.notna(st) else "all stages",
                    FW_LABEL.get(fw, fw) if fw not in ("both", None) else "both frameworks"])
        for seg, st, fw in zip(table["segment"], table["stage"], table["framework"])
    ]
    terms = pd.DataFrame({
        "Overlay": table["name"], "Applies to": scope,
        "Percent of modelled ECL": table["value"].where(table["kind"] == "percent"),
        "Amount": table["value"].where(table["kind"] == "amount"),
        "Status": table["status"], "Loans in scope": table["loans_in_scope"],
        "Effect, IFRS 9": table["effect_ifrs9"], "Effect, CECL": table["effect_cecl"],
    })
    governance = pd.DataFrame({
        "Overlay": table["name"], "Rationale": table["rationale"], "Owner": table["owner"],
        "Approved": pd.to_datetime(table["approved"], errors="coerce"),
        "Expires": pd.to_datetime(table["expires"], errors="coerce"),
    })
    if "note" in table.columns and table["note"].fillna("").astype(str).str.strip().ne("").any():
        governance["Note"] = table["note"]
    return terms, governance


_OVERLAY_KINDS = {"Applies to": "wrap", "Percent of modelled ECL": "rate", "Amount": "money", "Rationale": "wrap",
                  "Note": "wrap", "Approved": "date", "Expires": "date", "Effect, IFRS 9": "money",
                  "Effect, CECL": "money", "Loans in scope": "count", "Owner": "wrap"}


def _overlays(sheet: Sheet, report: RunReport, refs: LoanRefs, led: Ledger) -> None:
    row = sheet.section(_TOP, "Modelled and final allowance")
    sheet.header(row, 1, ["Framework", "Modelled", "Overlays", "Allowance", "Check: allowance - modelled - overlays"],
                 ["text", "money", "money", "money", "money"])
    r = row + 1
    for f in report.frameworks:
        sheet.label(r, 1, FW_LABEL[f])
        m = led.put(sheet, r, 2, refs.total(f"ecl_{f}_modelled"), "money")
        o = led.put(sheet, r, 3, refs.total(f"overlay_{f}"), "money")
        fin = led.put(sheet, r, 4, refs.total(f"ecl_{f}"), "money")
        led.put(sheet, r, 5, Figure(f"={fin}-{m}-{o}", led.local(sheet, fin) - led.local(sheet, m)
                                    - led.local(sheet, o)), "money")
        r += 1
    table = report.overlays if report.overlays is not None else pd.DataFrame()
    r += 1
    if table.empty:
        sheet.note(r, "No overlays in this run.", span=5)
        return
    terms, governance = overlay_frames(table.reset_index(drop=True))
    _, last = sheet.table(r, terms, title="Overlays (post-model adjustments): terms and effect", kinds=_OVERLAY_KINDS,
                          headers={c: c for c in terms.columns})
    sheet.table(last + 2, governance, title="Why, who and until when", kinds=_OVERLAY_KINDS,
                headers={c: c for c in governance.columns})
    sheet.width(2, 46)  # "Applies to" and "Rationale" share the column; both wrap


# --------------------------------------------------------------------------------------
# The workbooks
# --------------------------------------------------------------------------------------


def _context(report: RunReport) -> Context:
    run = report.config.assumptions.run
    return Context(as_of=run.as_of.isoformat(), currency=run.currency, label=run.label,
                   what_if=report.what_if_parts is not None, what_if_files=tuple(_overlay_files(report)))


def _created(report: RunReport) -> datetime:
    """The run's time (the run record's timestamp), so the workbook and run.json agree."""
    stamp = (report.record or {}).get("timestamp")
    if isinstance(stamp, str):
        try:
            return datetime.fromisoformat(stamp)
        except ValueError:
            pass
    return clock.now()


def _long(book: Book, name: str, title: str, frame: pd.DataFrame | None, note: str, bulks: list[BulkSheet],
          *, headers: dict[str, str] | None = None, freeze_columns: int = 0, kinds: dict[str, str] | None = None) -> None:
    """A long table on its own sheet, not printed by default (the sheet says so)."""
    if frame is None or frame.empty:
        return
    sheet = book.sheet(name, title=title, printed=False)
    if len(frame) + BULK_HEADER_ROW > EXCEL_MAX_ROWS:
        sheet.note(_TOP, f"{len(frame):,} rows: too many for a sheet. {note}", span=8)
        return
    bulks.append(BulkSheet(sheet, frame.reset_index(drop=True), note=note, headers=headers or {},
                           freeze_columns=freeze_columns, kinds=kinds or {}))


def _short_or_long(book: Book, name: str, title: str, frame: pd.DataFrame, note: str, bulks: list[BulkSheet],
                   kinds: dict[str, str] | None = None, wide: dict[str, float] | None = None) -> None:
    """A table printed on its own sheet when short; a long one is not printed by default."""
    if frame is None or frame.empty:
        return
    headers = {c: human(c) for c in frame.columns}
    if len(frame) > PRINT_ROW_LIMIT:
        _long(book, name, title, frame, note, bulks, headers=headers)
        return
    sheet = book.sheet(name, title=title)
    sheet.table(_TOP, frame.reset_index(drop=True), kinds=kinds, headers=headers, autofilter=True)
    for column, width in (wide or {}).items():
        sheet.width(list(frame.columns).index(column) + 1, width)
    sheet.repeat_to = _TOP
    sheet.ws.freeze_panes(_TOP, 0)


def _monthly_curves(book: Book, grid: CurveGrid, bulks: list[BulkSheet]) -> None:
    """The monthly PD curves: a row per curve and measure, months across (a row per curve and
    month made some 100,000 rows and 50 MB of sheet for the demo)."""
    curves = monthly_curves_frame(grid)
    months = [c for c in curves.columns if str(c).startswith("month_")]
    headers = {c: human(c) for c in curves.columns} | {c: "Month " + c[len("month_"):] for c in months}
    _long(book, "Monthly PD curves", "Monthly PD curves", curves, "Marginal PD (conditional on survival) and "
          "cumulative PD by month from the as-of date, months across; a row per measure of each segment, grade or "
          "bucket, framework and scenario.", bulks, headers=headers, freeze_columns=5,
          kinds={c: "fine_rate" for c in months})


@dataclass(frozen=True)
class Shared:
    """What both workbooks show, built once for the two (:func:`write_workbooks`)."""

    curves: CurveGrid
    #: the loan figures computed for one workbook, reused by the other (values, not formulas)
    refs: LoanRefs

    @classmethod
    def of(cls, report: RunReport) -> "Shared":
        return cls(curves=curve_grid(report), refs=LoanRefs(report.loans.reset_index(drop=True), live=False,
                                                            count=report.loan_counts))


def _build(path: Path, report: RunReport, *, full: bool, shared: Shared | None = None) -> Ledger:
    saving, led = _laid_out(path, report, full=full, shared=shared)
    saving()
    return led


def _laid_out(path: Path, report: RunReport, *, full: bool,
              shared: Shared | None = None) -> tuple[Callable[[], None], Ledger]:
    """Every sheet of a workbook laid out; returns what saves it to ``path`` (the long sheets'
    rows made and the file compressed then) and the ledger of its figures."""
    shared = Shared.of(report) if shared is None else shared
    loans = report.loans.reset_index(drop=True)
    limit = min(report.config.assumptions.run.loan_detail_sheet_limit, EXCEL_MAX_ROWS - BULK_HEADER_ROW)
    live = full and 0 < len(loans) <= limit
    refs = LoanRefs(loans, live=live, first_row=BULK_HEADER_ROW + 1, like=shared.refs, count=report.loan_counts)
    led = Ledger()
    book = Book(_context(report))
    bulks: list[BulkSheet] = []
    what = "What-if (not for booking)" if report.what_if_parts is not None else "Credit-loss allowance"

    _summary(book.sheet("Summary", title="Credit-loss allowance: reserve summary"), report, refs, led, full=full)
    _segment_stage(book.sheet("By segment and stage", title="Allowance by segment and stage"), report, refs, led)
    _scenarios(book.sheet("Scenarios", title="Allowance under each economic scenario"), report, refs, led)
    if full and _has(report.macro_paths) and _has(report.pd_paths):
        macro_pd_sheet(book.sheet("Macro and PD paths", title="Macro paths and the PD paths they produce"), report)
    _overlays(book.sheet("Overlays", title="Overlays: post-model adjustments"), report, refs, led)
    if report.movements:
        movement_sheet(book.sheet("Movement", title="Movement from the prior quarter"), report.movements, led)
        journal_sheet(book.sheet("Journal", title="Journal for the period's provision"), report, led)
    if report.disclosures:
        disclosures_sheet(book.sheet("Disclosures", title="Disclosures: credit quality by stage and by vintage"),
                          report.disclosures, led)
    if report.what_if_parts is not None:
        what_if_sheet(book.sheet("What-if", title="What-if against the base run"), report.what_if_parts)
        if full:
            _short_or_long(book, "Stage changes", "Loans whose stage changes under the what-if",
                           stage_changes_frame(report.what_if_parts), "They are also in what_if_stage_changes.csv.",
                           bulks, kinds={"base_stage": "code", "what_if_stage": "code"})
    intake_sheet(book.sheet("Intake", title="Intake: the tape read, checked and tied to the ledger"), report, refs, led)
    if full:
        _short_or_long(book, "Warnings", "Warnings on accepted rows and on the run", warnings_frame(report),
                       "They are also in warnings.csv.", bulks, kinds={"message": "wrap"}, wide={"message": 70})
    assumptions_sheet(book.sheet("Assumptions", title="Assumptions used in this run"), report)
    term_structure_sheet(book.sheet("Term structures", title="Cumulative PD term structures"), report, shared.curves)
    if full and _has(report.roll_forecast):
        roll_forecast_sheet(book.sheet("Roll-rate forecast", title="Balance roll-rate forecast"), report)
    if full:
        _monthly_curves(book, shared.curves, bulks)
        schedules = report.schedules
        if schedules is not None and not schedules.empty:
            _long(book, "Schedules", "Schedules of representative loans", schedules, _chosen(schedules), bulks,
                  headers={c: human(c) for c in schedules.columns})
    record_sheet(book.sheet("Run record", title="Run record (run.json)"), report)
    if full:
        _loans_sheet(book, loans, live, limit, bulks)
    created, title = _created(report), f"{what} as of {report.config.as_of.isoformat()}"
    return (lambda: save(book, path, bulks, created=created, title=title)), led


def _chosen(schedules: pd.DataFrame) -> str:
    """How the loans were chosen (the engine records it per loan)."""
    loans = schedules["loan_id"].nunique() if "loan_id" in schedules.columns else 0
    if "chosen" in schedules.columns:
        return (f"{loans} loans, month by month, contractual and expected: in each segment the stage 1 loans "
                "nearest the segment's median balance and median remaining term (the 'Why this loan' column).")
    return f"{loans} loans, month by month, contractual and expected."


def _loans_sheet(book: Book, loans: pd.DataFrame, live: bool, limit: int, bulks: list[BulkSheet]) -> None:
    if live:
        sheet = book.sheet("Loans", title="Loan detail", printed=False)
        bulks.append(BulkSheet(sheet, loans, note="One row per loan, with the column names of loans.csv; every "
                               "figure on the summary sheets is a formula over these rows.", freeze_columns=1))
        return
    sheet = book.sheet("Loans", title="Loan detail")
    sheet.width(1, 110)
    sheet.note(_TOP, (
        f"The loan detail of this run ({len(loans):,} loans) is not in this workbook: it exceeds the limit of "
        f"{limit:,} loans per sheet ([run] loan_detail_sheet_limit). It is in loans.csv (and loans.parquet when "
        "asked for); every figure in this workbook is the sum of a column there.")
        if len(loans) else "This run has no accepted loans.", span=1)


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
        ``values``: every figure written as ``"Sheet!B7" -> value`` (what Python computed,
        also cached in the cell), ``formulas``: those that are formulas. A recalculation of
        the workbook must give the same values.

    Raises
    ------
    AllowanceError
        For a book computed part by part (``report.loan_detail``): its loan sheet and
        schedules need the loans, which are in the Parquet folder; its summary workbook is
        :func:`write_summary_workbook`.
    """
    if report.loan_detail is not None:
        raise AllowanceError("the reserve workbook needs the loans, and this book was computed part by part",
                             file=report.loan_detail, hint="write its summary workbook (summary.xlsx) instead; the "
                             "loan detail is the Parquet files in this folder")
    return _build(Path(path), report, full=True)


def write_summary_workbook(path: Path, report: RunReport) -> Ledger:
    """Write ``summary.xlsx``: the printed sheets of the reserve workbook, standing alone.

    No loan detail, monthly curves or schedules; every figure is a value (or a formula over
    cells of its own sheet), so the file can be mailed on its own and opens the same everywhere.
    """
    return _build(Path(path), report, full=False)


def write_workbooks(reserve: Path, summary: Path, report: RunReport) -> tuple[Ledger, Ledger]:
    """Write ``reserve.xlsx`` and ``summary.xlsx`` (:func:`write_workbook`,
    :func:`write_summary_workbook`), building what both show (:class:`Shared`) once.

    The reserve workbook is saved on a thread of its own while the summary's sheets are laid
    out: its long sheets' rows are made by Arrow and compressed by zlib, both outside the GIL,
    so that work overlaps the summary's Python on a second core. Each file's bytes are those
    of writing one after the other (nothing the two share is changed by either)."""
    shared = Shared.of(report)
    save_reserve, reserve_ledger = _laid_out(Path(reserve), report, full=True, shared=shared)
    with ThreadPoolExecutor(1, thread_name_prefix="allowance-reserve") as pool:
        saving = pool.submit(save_reserve)  # on an error below the block still waits for it
        summary_ledger = _build(Path(summary), report, full=False, shared=shared)
    saving.result()
    return reserve_ledger, summary_ledger
