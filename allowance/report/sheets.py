"""The workbook's supporting sheets: movement, journal, disclosures, what-if, intake, run record.

Implements
----------
movement_sheet, journal_sheet   the period's movement and the journal that books it
disclosures_sheet               IFRS 7 35M and ASC 326-20-50-6 tables (allowance.disclosure)
what_if_sheet, stage_changes_frame
intake_sheet, warnings_frame    rows read / accepted / rejected, date formats, the ledger tie-out
record_sheet                    the run record
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from allowance.frameworks import FRAMEWORK_RULES
from allowance.report.cells import human
from allowance.report.figures import Figure, Ledger, LoanRefs
from allowance.report.xlsx import Sheet, col_letter

if TYPE_CHECKING:
    from allowance.reconcile import Movement, WhatIf
    from allowance.report.record import RunReport

__all__ = [
    "disclosures_sheet", "intake_sheet", "journal_sheet", "movement_sheet", "record_sheet", "stage_changes_frame",
    "warnings_frame", "what_if_sheet",
]

_FW_LABEL = {name: rules.label for name, rules in FRAMEWORK_RULES.items()}
_TOP = 4


def _class_header(name: Any) -> str:
    text = str(name)
    return text[:1].upper() + text[1:] if text.startswith("stage") else text


def _movement_table(sheet: Sheet, row: int, table: pd.DataFrame, title: str, led: Ledger) -> int:
    """A wide movement table whose closing row is a SUM of the lines above it."""
    shown = table.drop(columns="line")
    classes = [c for c in shown.columns if c != "label"]
    row = sheet.section(row, title)
    sheet.header(row, 1, ["Line"] + [_class_header(c) if c != "total" else "Total" for c in classes],
                 ["text"] + ["money"] * len(classes))
    first = row + 1
    for i, record in enumerate(shown.itertuples(index=False)):
        r = first + i
        closing = i == len(shown) - 1
        sheet.label(r, 1, record[0], total=closing)
        for j, column in enumerate(classes, start=2):
            value = float(shown[column].iloc[i])
            if closing:
                letter = col_letter(j)
                led.put(sheet, r, j, Figure(f"=SUM({letter}{first}:{letter}{r - 1})", value), "money", total=True)
            else:
                led.put(sheet, r, j, value, "money")
    return first + len(shown) + 1


def _detail_table(sheet: Sheet, row: int, detail: pd.DataFrame, title: str, led: Ledger) -> int:
    """The movement by segment and class: each segment's lines under its name, classes across."""
    if detail.empty:
        return row
    order = list(dict.fromkeys(detail["label"]))
    grid = detail.pivot_table(index=["segment", "label"], columns="class", values="amount", aggfunc="sum",
                              fill_value=0.0, sort=False)
    classes = sorted(grid.columns, key=lambda c: (str(c) == "POCI", str(c)))
    row = sheet.section(row, title)
    sheet.header(row, 1, ["Segment and line"] + [_class_header(c) for c in classes] + ["Total"],
                 ["text"] + ["money"] * (len(classes) + 1))
    r = row + 1
    for segment in sorted(grid.index.get_level_values(0).unique(), key=str):
        sheet.put(r, 1, str(segment), style=sheet.styles.named("subhead"))
        r += 1
        part = grid.loc[segment]
        for label in [x for x in order if x in part.index]:
            values = [float(part.loc[label, c]) for c in classes]
            closing = str(label).lower() == "closing"
            sheet.label(r, 1, f"   {label}", total=closing)
            for j, value in enumerate(values + [sum(values)], start=2):
                led.put(sheet, r, j, round(value, 2), "money", total=closing)
            r += 1
    return r + 1


def movement_sheet(sheet: Sheet, movements: "tuple[Movement, ...]", led: Ledger) -> None:
    """Each framework's allowance and gross carrying amount movement, and the roll-forward."""
    row = _TOP
    for m in movements:
        fw = _FW_LABEL[m.framework]
        by = "stage" if FRAMEWORK_RULES[m.framework].class_order else "segment"
        for text in m.notes:
            row = sheet.note(row, f"Note: {text}.", span=7)
        if not m.assumptions_isolated:
            row = sheet.note(row, "No rerun at the prior assumptions was possible: remeasurement holds every "
                             "change, assumptions included.", span=7)
        row = _movement_table(sheet, row, m.allowance, f"{fw} allowance: opening to closing, by {by}", led)
        row = _movement_table(sheet, row, m.gross, f"{fw} gross carrying amount: opening to closing, by {by}", led)
        rules = _ledger_rules(m.framework)
        roll = m.rollforward.rename(columns={
            "segment": "Segment", "beginning": "Beginning allowance",
            "initial_allowance_pcd": "Initial allowance on PCD assets (gross-up)",
            "provision": "Provision for credit losses",
            "charge_offs": getattr(rules, "charge_off_label", "Charge-offs"),
            "recoveries": "Recoveries", "ending": "Ending allowance"})
        first, last = sheet.table(row, roll, title=f"{fw} allowance roll-forward by segment",
                                  kinds={c: "money" for c in roll.columns[1:]}, total_rows=1)
        end_col = list(roll.columns).index("Ending allowance") + 1
        for r in range(first, last + 1):  # ending = the sum of the lines before it
            led.put(sheet, r, end_col, Figure(f"=SUM(B{r}:{col_letter(end_col - 1)}{r})",
                                              float(roll["Ending allowance"].iloc[r - first])), "money",
                    total=r == last)
        row = last + 2
        write_offs = getattr(m, "write_offs", None)
        if write_offs is not None and not write_offs.empty:
            bridge = write_offs.rename(columns=lambda c: c[:1].upper() + c[1:].replace("_", " "))
            kinds = {c: "money" for c in bridge.columns if c not in ("Segment", "Recoveries treatment")}
            kinds["Recoveries treatment"] = "wrap"
            _, last = sheet.table(row, bridge, title=f"{fw}: allowance written off to gross charge-offs; recoveries "
                                  f"{getattr(rules, 'recoveries_treatment', '')}".rstrip("; "), kinds=kinds)
            row = last + 2
        for text in getattr(m, "not_isolated", ()):
            row = sheet.note(row, f"Not isolated: {text}.", span=7)
        row = _detail_table(sheet, row, m.allowance_detail, f"{fw} allowance movement by segment and class", led)


def _ledger_rules(framework: str) -> Any:
    """The framework's ledger wording (charge-off line, recoveries treatment): its FrameworkRules."""
    rules = FRAMEWORK_RULES.get(framework)
    return None if rules is None else rules.ledger


def journal_sheet(sheet: Sheet, report: "RunReport", led: Ledger) -> None:
    """The journal that books the period's provision (or release), by segment, with account codes."""
    accounts = getattr(report.config.assumptions, "gl_accounts", None) or {}
    row = _TOP
    row = sheet.note(row, "Provision = ending - beginning allowance - PCD gross-up + charge-offs - recoveries, per "
                     "segment. A provision debits the expense and credits the allowance; a release is the reverse. A "
                     "PCD gross-up debits the loans' amortised cost, not the expense.", span=6)
    if not accounts:
        row = sheet.note(row, "Account codes: none given. Set them in the assumptions file under "
                         "[gl_accounts.<framework>] (expense, allowance; per segment under segments.<name>).", span=6)
    row += 1
    for m in report.movements:
        codes = accounts.get(m.framework)
        row = sheet.section(row, f"{_FW_LABEL[m.framework]}: journal for the period's provision")
        journal = m.journal
        sheet.header(row, 1, ["Segment", "Entry", "Account code", "Account", "Debit", "Credit"],
                     ["text", "text", "text", "text", "money", "money"])
        first = row + 1
        r = first
        expense, allowance = FRAMEWORK_RULES[m.framework].journal_accounts
        for rec in journal.iloc[:-1].itertuples(index=False):
            # the PCD gross-up's debit (the loans' amortised cost) has no provision account code
            side = {expense: "expense", allowance: "allowance"}.get(rec.account)
            sheet.label(r, 1, rec.segment)
            sheet.put(r, 2, rec.entry)
            sheet.put(r, 3, _account_code(codes, str(rec.segment), side) if side else None)
            sheet.put(r, 4, rec.account)
            led.put(sheet, r, 5, float(rec.debit), "money")
            led.put(sheet, r, 6, float(rec.credit), "money")
            r += 1
        total = journal.iloc[-1]
        sheet.label(r, 1, "Total", total=True)
        for c in (2, 3, 4):
            sheet.put(r, c, None, total=True)
        for j, column in ((5, "debit"), (6, "credit")):
            letter = col_letter(j)
            led.put(sheet, r, j, Figure(f"=SUM({letter}{first}:{letter}{r - 1})", float(total[column])), "money",
                    total=True)
        sheet.label(r + 1, 1, "Net provision (a release is negative)", total=True)
        led.put(sheet, r + 1, 5, m.net_provision, "money", total=True)
        row = r + 3


def _account_code(codes: Any, segment: str, side: str) -> str | None:
    if codes is None:
        return None
    per_segment = (getattr(codes, "segments", None) or {}).get(segment)
    if per_segment is not None and getattr(per_segment, side, None):
        return getattr(per_segment, side)
    return getattr(codes, side, None)


def what_if_sheet(sheet: Sheet, what_if: "WhatIf") -> None:
    """Base against what-if: totals, by segment and stage, by scenario."""
    summary = what_if.summary
    row = sheet.note(_TOP, f"{len(what_if.stage_changes):,} loans change stage under the what-if"
                     + (" (listed on the Stage changes sheet and in what_if_stage_changes.csv)."
                        if len(what_if.stage_changes) else "."), span=7)
    row += 1
    for view, title in (("total", "Total allowance"), ("segment and stage", "By segment and stage"),
                        ("scenario", "Each scenario at 100 % weight")):
        part = summary[summary["view"] == view].drop(columns="view")
        if part.empty:
            continue
        part = part.assign(framework=part["framework"].map(lambda f: _FW_LABEL.get(f, f)))
        part["change_percent"] = np.where(part["base"] != 0, part["difference"] / part["base"].where(part["base"] != 0, 1),
                                          0.0)
        keep = ["framework"] + [c for c in ("segment", "stage", "scenario") if part[c].astype(str).ne("").any()]
        part = part[keep + ["base", "what_if", "difference", "change_percent"]]
        _, last = sheet.table(row, part.reset_index(drop=True), title=title,
                              kinds={"stage": "center", "change_percent": "rate"},
                              headers={"change_percent": "Change %", "difference": "Change"})
        row = last + 2


_DISCLOSURE_TITLES = {
    "ifrs7_35m": "IFRS 7 35M: gross carrying amount by credit grade and stage (POCI apart)",
    "asc326_vintage": "ASC 326-20-50-6: amortised cost by credit quality indicator and year of origination, "
                      "with the period's gross write-offs by year of origination (ASU 2022-02)",
}


def disclosures_sheet(sheet: Sheet, disclosures: Mapping[str, pd.DataFrame], led: Ledger) -> None:
    """The disclosure tables (:mod:`allowance.disclosure`), one under the other.

    Each figure is a value the ledger records (the tables are sums of rounded loan balances in
    whole cents); a table's total row is a cached ``SUM`` over the rows above it.
    """
    row = sheet.note(_TOP, "Gross carrying amount and amortised cost are the tape's outstanding principal. The credit "
                     "quality indicator is the loan's grade, or its days-past-due band where the segment has no grade "
                     "(IFRS 7 B8I; ASC 326-20-55-79).", span=8)
    row += 1
    for name, table in disclosures.items():
        text = [c for c in table.columns if c in ("segment", "row", "credit_quality", "basis")]
        kinds = {c: "money" for c in table.columns if c not in text}
        book_total = int(len(table) and str(table["segment"].iloc[-1]) == "Total")
        first, last = sheet.table(row, table.reset_index(drop=True), title=_DISCLOSURE_TITLES.get(name, name),
                                  kinds=kinds, total_rows=book_total)
        for j, column in enumerate(table.columns, start=1):
            if column in text:
                continue
            for r in range(first, last + 1):
                value = float(table[column].iloc[r - first])
                if book_total and r == last:  # the book's total: the segments' total rows above it
                    letter, q = col_letter(j), col_letter(list(table.columns).index("credit_quality") + 1)
                    led.put(sheet, r, j, Figure(f'=SUMIF({q}{first}:{q}{r - 1},"Total",{letter}{first}:{letter}{r - 1})',
                                                value), "money", total=True)
                else:
                    led.put(sheet, r, j, value, "money")
        row = last + 2


def stage_changes_frame(what_if: "WhatIf") -> pd.DataFrame:
    return what_if.stage_changes


def warnings_frame(report: "RunReport") -> pd.DataFrame:
    """Intake findings on accepted rows, then the run's own warnings."""
    cols = ["source_row", "loan_id", "column", "code", "message"]
    intake = report.intake.warnings
    parts = [intake.reindex(columns=cols)] if len(intake) else []
    if report.warnings:
        parts.append(pd.DataFrame({"code": "run", "message": list(report.warnings)}).reindex(columns=cols))
    frame = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=cols)
    if len(frame):
        frame["source_row"] = pd.to_numeric(frame["source_row"], errors="coerce").astype("Int64")
    return frame


def _key_values(sheet: Sheet, row: int, items: list[tuple[str, Any, str]], *, title: str | None = None) -> int:
    """Label / value rows (each value in its display kind); returns the row after a gap."""
    if title:
        row = sheet.section(row, title)
    for label, value, kind in items:
        sheet.label(row, 1, label)
        sheet.put(row, 2, value, kind, align="left", fit=kind != "wrap")
        row += 1
    return row + 1


def intake_sheet(sheet: Sheet, report: "RunReport", refs: LoanRefs, led: Ledger) -> None:
    """Rows read, accepted and rejected (by reason), the date formats read, warnings and the tie-out."""
    intake = report.intake
    row = sheet.section(_TOP, f"Loan tape: {Path(intake.file.path).name}")
    first = row
    for label, value in (("Rows read", intake.rows_read), ("Accepted", intake.rows_accepted),
                         ("Rejected", intake.rows_rejected)):
        sheet.label(row, 1, label)
        led.put(sheet, row, 2, value, "count")
        row += 1
    sheet.label(row, 1, "Rows read - accepted - rejected (must be 0)", total=True)
    led.put(sheet, row, 2, Figure(f"=B{first}-B{first + 1}-B{first + 2}", 0.0), "count", total=True)
    row += 1
    if getattr(intake, "lines", -1) >= 0:  # a CSV tape: its physical lines, reconciled with the rows read
        row += 1
        lines = row
        for label, value in (("Lines of the file", intake.lines), ("Header line", 1),
                             ("Blank lines skipped (not counted as rows)", intake.blank_rows),
                             ("Line breaks inside quoted values", intake.lines_in_values)):
            sheet.label(row, 1, label)
            led.put(sheet, row, 2, value, "count")
            row += 1
        sheet.label(row, 1, "Lines - header - rows read - blank - line breaks (must be 0)", total=True)
        led.put(sheet, row, 2, Figure(f"=B{lines}-B{lines + 1}-B{first}-B{lines + 2}-B{lines + 3}",
                                      float(intake.lines - 1 - intake.rows_read - intake.blank_rows
                                            - intake.lines_in_values)), "count", total=True)
        row += 1
    elif getattr(intake, "blank_rows", 0):
        sheet.label(row, 1, "Blank lines skipped (not counted as rows)")
        led.put(sheet, row, 2, intake.blank_rows, "count")
        row += 1
    sheet.label(row, 1, "Balance of the accepted loans")
    led.put(sheet, row, 2, refs.total("balance"), "money")
    row += 2

    formats = getattr(intake, "date_formats", None) or {}
    if formats:
        frame = pd.DataFrame({"column": list(formats), "format": list(formats.values())})
        _, last = sheet.table(row, frame, title="Date columns: the format each was read in",
                              headers={"format": "Format read (and why)"}, kinds={"format": "wrap"})
        sheet.width(2, max(sheet.widths.get(2, 0), 48))
        row = last + 2
    rejected = intake.rejected
    if len(rejected) and "reason_codes" in rejected.columns:
        codes = rejected["reason_codes"].astype(str).str.split(";").explode().str.strip()
        counts = codes[codes != ""].value_counts().rename_axis("reason").reset_index(name="rows")
        _, last = sheet.table(row, counts, title="Rejected rows by reason (a row can fail several rules)")
        row = last + 2
    warnings = intake.warnings
    if len(warnings):
        counts = warnings["code"].astype(str).value_counts().rename_axis("warning").reset_index(name="rows")
        _, last = sheet.table(row, counts, title="Warnings on accepted rows, by code")
        row = last + 2
    tie = report.tie_out
    row = sheet.section(row, "Ledger tie-out")
    if tie is None:
        sheet.note(row, "No ledger control total was given ([run] ledger_balance).", span=2)
        return
    items = [("Ledger balance", tie.ledger_balance, "money"), ("Accepted tape balance", tie.accepted_balance, "money"),
             ("Rejected rows' balance", tie.rejected_balance, "money"),
             ("Difference (accepted - ledger)", tie.difference, "money"), ("Tolerance", tie.tolerance, "money"),
             ("Within tolerance", "yes" if tie.within_tolerance else "no", "text"),
             ("Accepted by the user despite the difference", "yes" if tie.accepted_by_user else "no", "text")]
    for label, value, kind in items:
        sheet.label(row, 1, label)
        led.put(sheet, row, 2, value, kind)
        row += 1
    sheet.note(row + 1, f"Explanation: {tie.explanation}", span=2, style="paragraph")


_RECORD_LABELS = {
    "package": "Package", "version": "Version", "run_label": "Run label", "as_of": "As-of date",
    "currency": "Currency", "run_by": "Run by", "started": "Started (UTC)", "timestamp": "Finished (UTC)",
    "loans": "Loans", "total_balance": "Total balance", "warnings": "Warnings",
}


def _record_kind(key: str, value: Any) -> str:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return "text"
    return "money" if key in ("total_balance",) or "balance" in key or "allowance" in key else "count"


def record_sheet(sheet: Sheet, report: "RunReport") -> None:
    """The run record: who, when, what version, which files (with SHA-256), counts and totals."""
    record = report.record or {}
    skip = {"assumptions"}
    scalars = [(_RECORD_LABELS.get(k, human(k)), v if not isinstance(v, list) else ", ".join(map(str, v)),
                _record_kind(k, v))
               for k, v in record.items() if k not in skip and not isinstance(v, dict)
               and not (isinstance(v, list) and v and isinstance(v[0], dict))]
    row = _key_values(sheet, _TOP, scalars, title="The run")
    rows = record.get("rows")
    if isinstance(rows, dict):
        row = _key_values(sheet, row, [(human(k), v, "count") for k, v in rows.items()], title="Rows")
    inputs = pd.DataFrame(record.get("inputs") or [])
    if not inputs.empty and "path" in inputs.columns:
        shown = pd.DataFrame({"role": inputs["role"].map(human),
                              "file": inputs["path"].map(lambda p: Path(str(p)).name),
                              "sha256": inputs.get("sha256"), "bytes": inputs.get("bytes"),
                              "folder": inputs["path"].map(lambda p: str(Path(str(p)).parent))})
        _, last = sheet.table(row, shown, title="Input files", kinds={"bytes": "count", "folder": "wrap"})
        sheet.width(5, 40)
        row = last + 2
    totals = record.get("total_allowance")
    if isinstance(totals, dict):
        row = _key_values(sheet, row, [(_FW_LABEL.get(k, k), v, "money") for k, v in totals.items()],
                          title="Total allowance by framework")
    tie = record.get("tie_out")
    if isinstance(tie, dict):
        row = _key_values(sheet, row, [(human(k), v if not isinstance(v, bool) else ("yes" if v else "no"),
                                        "money" if isinstance(v, (int, float)) and not isinstance(v, bool) else "wrap")
                                       for k, v in tie.items()], title="Ledger tie-out")
    for key, value in record.items():
        if key in ("rows", "inputs", "total_allowance", "tie_out", "totals", "movement", "assumptions"):
            continue
        if isinstance(value, dict) and value and all(not isinstance(v, (dict, list)) for v in value.values()):
            row = _key_values(sheet, row, [(str(k), v, _record_kind(str(k), v)) for k, v in value.items()],
                              title=human(key))
    sheet.width(2, max(sheet.fit.get(2, 0), 30))
