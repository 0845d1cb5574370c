"""The workbook's supporting sheets: movement, journal, what-if, intake, assumptions, record.

Implements
----------
movement_sheet, journal_sheet   the period's movement and the journal to book it
what_if_sheet, stage_changes_frame
intake_sheet, warnings_frame    rows read / accepted / rejected, the ledger tie-out, warnings
assumptions_sheet               segments, staging rules, CECL period, scenario paths, reversion, roll rates
term_structure_sheet            cumulative PD at 12 / 24 / 36 / 60 / 120 months
record_sheet                    the run record
"""

from __future__ import annotations

import json
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from openpyxl.styles import Font
from openpyxl.utils import get_column_letter

from allowance.frameworks import FRAMEWORK_RULES
from allowance.report.figures import Figure, Ledger, LoanRefs
from allowance.report.xlsx import INTEGER, MONEY, RATE, TITLE_FONT, clean_text, put_table

if TYPE_CHECKING:
    from allowance.reconcile import Movement, WhatIf
    from allowance.report.record import RunReport

__all__ = [
    "assumptions_sheet", "intake_sheet", "journal_sheet", "movement_sheet", "record_sheet",
    "stage_changes_frame", "term_structure_sheet", "warnings_frame", "what_if_sheet",
]

_FW_LABEL = {name: rules.label for name, rules in FRAMEWORK_RULES.items()}
#: months at which the term-structure sheet shows cumulative PD
PD_MONTHS: tuple[int, ...] = (12, 24, 36, 60, 120)


def _title(ws: Any, row: int, text: str) -> int:
    ws.cell(row=row, column=1, value=clean_text(text)).font = TITLE_FONT
    return row + 1


def _movement_table(ws: Any, row: int, table: pd.DataFrame, title: str, led: Ledger) -> int:
    """A wide movement table whose closing row is a SUM of the lines above it."""
    shown = table.drop(columns="line").rename(columns={"label": "Line", "total": "Total"})
    shown.columns = [c[:1].upper() + c[1:] if str(c).startswith("stage") else c for c in shown.columns]
    first, last = put_table(ws, shown, row, 1, title=title, formats={c: MONEY for c in shown.columns[1:]})
    closing = last  # the closing line is last
    ws.cell(row=closing, column=1).font = Font(bold=True)
    for j, column in enumerate(shown.columns[1:], start=2):
        letter = get_column_letter(j)
        value = float(shown[column].iloc[-1])
        led.put(ws, closing, j, Figure(f"=SUM({letter}{first}:{letter}{closing - 1})", value), MONEY, bold=True)
    return last + 2


def movement_sheet(ws: Any, movements: tuple[Movement, ...], led: Ledger) -> None:
    """Each framework's allowance and gross carrying amount movement, and the roll-forward."""
    ws.column_dimensions["A"].width = 44
    row = 1
    for m in movements:
        fw = _FW_LABEL[m.framework]
        by = "stage" if FRAMEWORK_RULES[m.framework].class_order else "segment"
        note = "" if m.assumptions_isolated else " (no rerun at prior assumptions: remeasurement holds every change)"
        for text in m.notes:
            ws.cell(row=row, column=1, value=clean_text(f"Note: {text}.")).font = Font(italic=True)
            row += 1
        row = _movement_table(ws, row, m.allowance, f"{fw} allowance: opening to closing, by {by}{note}", led)
        row = _movement_table(ws, row, m.gross, f"{fw} gross carrying amount: opening to closing, by {by}", led)
        roll = m.rollforward.rename(columns={
            "segment": "Segment", "beginning": "Beginning allowance", "provision": "Provision for credit losses",
            "charge_offs": "Charge-offs", "recoveries": "Recoveries", "ending": "Ending allowance"})
        first, last = put_table(ws, roll, row, 1, title=f"{fw} allowance roll-forward by segment",
                                formats={c: MONEY for c in roll.columns[1:]}, total_rows=1)
        for r in range(first, last + 1):
            led.put(ws, r, 6, Figure(f"=SUM(B{r}:E{r})", float(roll["Ending allowance"].iloc[r - first])), MONEY,
                    bold=r == last)
        row = last + 2
        detail = m.allowance_detail.drop(columns="line").rename(columns={
            "segment": "Segment", "class": "Class", "label": "Line", "amount": "Amount"})
        _, last = put_table(ws, detail, row, 1, title=f"{fw} allowance movement by segment and class")
        row = last + 2


def journal_sheet(ws: Any, movements: tuple[Movement, ...], led: Ledger) -> None:
    """The journal summary that books the period's provision (or release), by segment."""
    row = 1
    for m in movements:
        fw = _FW_LABEL[m.framework]
        row = _title(ws, row, f"{fw}: journal for the period's provision")
        ws.cell(row=row, column=1, value=clean_text(
            "Provision = ending - beginning allowance + charge-offs - recoveries, per segment. A positive provision "
            "debits the expense and credits the allowance; a release is the reverse."))
        row += 1
        journal = m.journal.rename(columns=str.capitalize)
        first, last = put_table(ws, journal, row, 1, formats={"Debit": MONEY, "Credit": MONEY}, total_rows=1)
        for j, column in ((4, "Debit"), (5, "Credit")):
            letter = get_column_letter(j)
            led.put(ws, last, j, Figure(f"=SUM({letter}{first}:{letter}{last - 1})", float(journal[column].iloc[-1])),
                    MONEY, bold=True)
        ws.cell(row=last + 1, column=1, value="Net provision (release negative)").font = Font(bold=True)
        led.put(ws, last + 1, 4, m.net_provision, MONEY, bold=True)
        row = last + 3
    ws.column_dimensions["C"].width = 48


def what_if_sheet(ws: Any, what_if: WhatIf) -> None:
    summary = what_if.summary
    ws.cell(row=1, column=1, value=clean_text(
        f"What-if rerun against the base run: {len(what_if.stage_changes):,} loans change stage "
        "(listed on the Stage changes sheet)."))
    put_table(ws, summary, 3, 1, title="Allowance, base against what-if", autofilter=True)
    ws.freeze_panes = "A5"


def stage_changes_frame(what_if: WhatIf) -> pd.DataFrame:
    return what_if.stage_changes


def warnings_frame(report: RunReport) -> pd.DataFrame:
    """Intake findings on accepted rows, then the run's own warnings."""
    cols = ["source_row", "loan_id", "column", "code", "message"]
    intake = report.intake.warnings
    parts = [intake.reindex(columns=cols)] if len(intake) else []
    if report.warnings:
        parts.append(pd.DataFrame({"code": "run", "message": list(report.warnings)}).reindex(columns=cols))
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=cols)


def intake_sheet(ws: Any, report: RunReport, refs: LoanRefs, led: Ledger) -> None:
    """Rows read, accepted and rejected (by reason), warnings by code, and the ledger tie-out."""
    intake = report.intake
    ws.column_dimensions["A"].width = 42
    ws.column_dimensions["B"].width = 20
    row = _title(ws, 1, f"Loan tape: {intake.file.path}")
    for label, value in (("Rows read", intake.rows_read), ("Accepted", intake.rows_accepted),
                         ("Rejected", intake.rows_rejected)):
        ws.cell(row=row, column=1, value=label)
        led.put(ws, row, 2, value, INTEGER)
        row += 1
    ws.cell(row=row, column=1, value="Read - accepted - rejected (must be 0)")
    led.put(ws, row, 2, Figure(f"=B{row - 3}-B{row - 2}-B{row - 1}", 0.0), INTEGER)
    row += 1
    ws.cell(row=row, column=1, value="Balance of the accepted loans (sum of the Loans sheet)")
    led.put(ws, row, 2, refs.total("balance"), MONEY)
    row += 2

    rejected = intake.rejected
    if len(rejected) and "reason_codes" in rejected.columns:
        codes = rejected["reason_codes"].astype(str).str.split(";").explode().str.strip()
        counts = codes[codes != ""].value_counts().rename_axis("reason").reset_index(name="rows")
        _, last = put_table(ws, counts, row, 1, title="Rejected rows by reason (a row can fail several rules)",
                            formats={"rows": INTEGER})
        row = last + 2
    warnings = intake.warnings
    if len(warnings):
        counts = warnings["code"].astype(str).value_counts().rename_axis("warning").reset_index(name="rows")
        _, last = put_table(ws, counts, row, 1, title="Warnings on accepted rows, by code", formats={"rows": INTEGER})
        row = last + 2
    tie = report.tie_out
    row = _title(ws, row, "Ledger tie-out")
    if tie is None:
        ws.cell(row=row, column=1, value="No ledger control total was given ([run] ledger_balance).")
        return
    items = [("Ledger balance", tie.ledger_balance, MONEY), ("Accepted tape balance", tie.accepted_balance, MONEY),
             ("Rejected rows' balance", tie.rejected_balance, MONEY), ("Difference (accepted - ledger)", tie.difference, MONEY),
             ("Tolerance", tie.tolerance, MONEY), ("Within tolerance", tie.within_tolerance, None),
             ("Accepted by the user despite the difference", tie.accepted_by_user, None),
             ("Explanation", tie.explanation, None)]
    for label, value, fmt in items:
        ws.cell(row=row, column=1, value=label)
        led.put(ws, row, 2, value, fmt)
        row += 1


def _text(value: Any) -> Any:
    """Scalars as they are; lists and tables as compact text."""
    if isinstance(value, (dict, list)):
        return json.dumps(value, separators=(", ", ": "), default=str)
    return value


def _key_values(ws: Any, row: int, title: str, data: dict) -> int:
    row = _title(ws, row, title)
    for key, value in data.items():
        ws.cell(row=row, column=1, value=clean_text(str(key)))
        cell = ws.cell(row=row, column=2)
        value = _text(value)
        cell.value = clean_text(value) if isinstance(value, str) else value
        row += 1
    return row + 1


def assumptions_sheet(ws: Any, report: RunReport) -> None:
    """The assumptions the run used, as the engine saw them after every overlay file was merged."""
    a = report.config.assumptions
    ws.column_dimensions["A"].width = 30
    ws.column_dimensions["B"].width = 24
    row = _key_values(ws, 1, "Run", a.run.model_dump(mode="json"))
    segments = pd.DataFrame(
        [{"segment": name, "pd_source": seg.pd_source,
          **{k: _text(v) for k, v in seg.model_dump(mode="json", exclude_none=True).items()}}
         for name, seg in a.segments.items()]
    )
    _, last = put_table(ws, segments, row, 1, title="Segments: PD source, LGD, EAD / CCF, prepayment")
    row = last + 2
    if a.ifrs9 is not None:
        row = _key_values(ws, row, "IFRS 9 staging rules", a.ifrs9.model_dump(mode="json"))
    if a.cecl is not None:
        row = _key_values(ws, row, "CECL: reasonable and supportable period and reversion", a.cecl.model_dump(mode="json"))
    paths = []
    for name, s in a.scenarios.items():
        for kind in ("pd_multiplier", "z", "lgd_multiplier", "collateral_index"):
            values = getattr(s, kind)
            if values:
                paths.append({"scenario": name, "weight": s.weight, "path": kind,
                              **{f"year {i + 1}": v for i, v in enumerate(values)}})
        if not any(getattr(s, k) for k in ("pd_multiplier", "z", "lgd_multiplier", "collateral_index")):
            paths.append({"scenario": name, "weight": s.weight, "path": "none (long-run PDs)"})
    scen = pd.DataFrame(paths)
    year_cols = {c: "0.0000" for c in scen.columns if c.startswith("year")}
    _, last = put_table(ws, scen, row, 1, title="Scenario paths by year from the as-of date", formats=year_cols)
    row = last + 2
    descriptions = {n: s.description for n, s in a.scenarios.items() if s.description}
    if descriptions:
        row = _key_values(ws, row, "Scenario descriptions", descriptions)
    reversion = report.reversion
    if reversion is not None and not reversion.empty:
        grid = reversion.pivot_table(index="month", columns="scenario", values="weight_on_scenario", aggfunc="first")
        grid = grid.reset_index()
        grid.columns = [str(c) for c in grid.columns]
        _, last = put_table(ws, grid, row, 1, title="CECL reversion path: weight on the scenario path by month",
                            formats={c: RATE for c in grid.columns[1:]})
        row = last + 2
    rolls = report.roll_rates
    if rolls is not None and not rolls.empty:
        _, last = put_table(ws, rolls, row, 1, title="Roll-rate summary by delinquency bucket",
                            formats={"expected_months_to_charge_off": "0.0"})
        row = last + 2


def term_structure_sheet(ws: Any, report: RunReport) -> None:
    """Cumulative PD at fixed months, one row per segment / curve key / framework / scenario."""
    ts = report.term_structures
    ws.cell(row=1, column=1, value="Cumulative PD term structures (full monthly curves on 'Monthly PD curves')").font = TITLE_FONT
    if ts is None or ts.empty:
        ws.cell(row=2, column=1, value="No term structures were recorded for this run.")
        return
    keys = [c for c in ("segment", "key", "framework", "scenario") if c in ts.columns]
    picked = ts[ts["month"].isin(PD_MONTHS)]
    grid = picked.pivot_table(index=keys, columns="month", values="cumulative_pd", aggfunc="first")
    grid = grid.reindex(columns=[m for m in PD_MONTHS if m in grid.columns])
    grid.columns = [f"cumulative_pd_{m}m" for m in grid.columns]
    last = ts.sort_values("month").groupby(keys, sort=False).tail(1).set_index(keys)
    grid = grid.reindex(last.index)
    grid["horizon_months"] = last["month"].astype(np.int64)
    grid["cumulative_pd_horizon"] = last["cumulative_pd"]
    put_table(ws, grid.reset_index(), 3, 1, autofilter=True)
    ws.freeze_panes = "A4"


def record_sheet(ws: Any, report: RunReport) -> None:
    """The run record: who, when, what version, which files (with SHA-256), counts and totals."""
    record = report.record or {}
    ws.column_dimensions["A"].width = 26
    ws.column_dimensions["B"].width = 70
    scalars = {k: v for k, v in record.items() if not isinstance(v, (dict, list)) and k != "assumptions"}
    row = _key_values(ws, 1, "Run record (run.json)", scalars)
    rows = record.get("rows")
    if isinstance(rows, dict):
        row = _key_values(ws, row, "Rows", rows)
    inputs = pd.DataFrame(record.get("inputs") or [])
    if not inputs.empty:
        _, last = put_table(ws, inputs, row, 1, title="Input files", formats={"bytes": "#,##0"}, widths=False)
        ws.column_dimensions["C"].width = 66
        row = last + 2
    totals = record.get("total_allowance")
    if isinstance(totals, dict):
        row = _key_values(ws, row, "Total allowance by framework", totals)
    tie = record.get("tie_out")
    if isinstance(tie, dict):
        _key_values(ws, row, "Ledger tie-out", tie)
