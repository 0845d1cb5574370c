"""The evidence workbook of a calibration (``calibration.xlsx``), written with XlsxWriter.

What a validator asks for, one sheet each: the summary and the caution; every choice made;
the roll-rate matrices with their observation counts, standard errors and what they imply
against the cohort default rates; the monthly roll rates, default rates and loss rates with
charts; the vintage curves and the PD by age with charts; workout LGD and recovery timing;
CCF, payment rates and prepayment speeds; and the intake (rows read, accepted, rejected by
reason). Text from the history goes through ``neutralise_text`` and is written as text,
never as a formula.

Implements
----------
write_calibration_workbook   the workbook
"""

from __future__ import annotations

import math
from collections.abc import Callable

from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from allowance.curves.roll_rates import roll_rate_summary
from allowance.exceptions import AllowanceError
from allowance.report.calibration_summary import segment_summary
from allowance.report.clock import now
from allowance.text import neutralise_text

if TYPE_CHECKING:
    from allowance.calibrate import Calibration

__all__ = ["write_calibration_workbook"]

_PCT = ("rate", "pd", "lgd", "ccf", "cpr", "smm", "share", "to_", "default_rate", "recovery_rate")
_FINE = ("hazard", "standard_error", "marginal")
_MONEY = ("balance", "ead", "written_off", "recoveries", "loss", "paid", "undrawn", "drawn", "charge_offs",
          "bankruptcy", "asset_sales", "opening", "limit", "recovered")
_COLOURS = ["#305496", "#C55A11", "#548235", "#7030A0", "#BF8F00", "#2E75B6", "#A5A5A5", "#833C0B", "#375623",
            "#FF0000"]


class _Book:
    """The workbook and its formats."""

    def __init__(self, path: Path) -> None:
        import xlsxwriter

        self.wb = xlsxwriter.Workbook(str(path), {"nan_inf_to_errors": False, "strings_to_formulas": False,
                                                  "strings_to_urls": False})
        stamp = now()
        self.wb.set_properties({"title": "Calibration evidence", "created": stamp.replace(tzinfo=None),
                                "comments": "Written by allowance calibrate"})
        f = self.wb.add_format
        self.title = f({"bold": True, "font_size": 13})
        self.subtitle = f({"bold": True, "font_size": 11})
        self.header = f({"bold": True, "font_color": "#FFFFFF", "bg_color": "#305496", "text_wrap": True,
                         "valign": "top"})
        self.pct = f({"num_format": "0.00%"})
        self.fine = f({"num_format": "0.0000%"})
        self.money = f({"num_format": "#,##0.00"})
        self.int = f({"num_format": "#,##0"})
        self.number = f({"num_format": "0.0000"})
        self.wrap = f({"text_wrap": True, "valign": "top"})
        self.bold = f({"bold": True})

    def sheet(self, name: str, widths: dict[int, float] | None = None) -> Any:
        ws = self.wb.add_worksheet(name)
        for col, width in (widths or {}).items():
            ws.set_column(col, col, width)
        return ws

    def close(self) -> None:
        self.wb.close()


def _format_for(book: _Book, name: str, dtype: Any) -> Any:
    lowered = str(name).lower()
    if pd.api.types.is_bool_dtype(dtype) or not pd.api.types.is_numeric_dtype(dtype):
        return None
    if pd.api.types.is_integer_dtype(dtype):
        return book.int
    if any(k in lowered for k in _FINE):
        return book.fine
    if any(k in lowered for k in _PCT):
        return book.pct
    if any(k in lowered for k in _MONEY):
        return book.money
    return book.number


def _cell(ws: Any, row: int, col: int, value: Any, fmt: Any = None) -> None:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        ws.write_blank(row, col, None, fmt)
    elif isinstance(value, (bool, np.bool_)):
        ws.write_boolean(row, col, bool(value))
    elif isinstance(value, (int, float, np.integer, np.floating)):
        number = float(value)
        if math.isfinite(number):
            ws.write_number(row, col, number, fmt)
        else:
            ws.write_blank(row, col, None, fmt)
    else:
        ws.write_string(row, col, neutralise_text(str(value)), fmt)


def _put(book: _Book, ws: Any, row: int, col: int, frame: pd.DataFrame, *, title: str | None = None,
         formats: dict[str, Any] | None = None, limit: int | None = None) -> tuple[int, int, int]:
    """Write a frame with a header; returns (header row, first data row, last data row)."""
    if title:
        ws.write_string(row, col, title, book.subtitle)
        row += 1
    shown = frame if limit is None else frame.head(limit)
    for j, name in enumerate(shown.columns):
        ws.write_string(row, col + j, str(name), book.header)
    formats = formats or {}
    for j, name in enumerate(shown.columns):
        fmt = formats.get(name, _format_for(book, name, shown[name].dtype))
        for i, value in enumerate(shown[name].tolist()):
            _cell(ws, row + 1 + i, col + j, value, fmt)
    return row, row + 1, row + len(shown)


def _line_chart(book: _Book, title: str, y_title: str, percent: bool = True) -> Any:
    chart = book.wb.add_chart({"type": "line"})
    chart.set_title({"name": title, "name_font": {"size": 11}})
    chart.set_y_axis({"name": y_title, "num_format": "0.0%" if percent else "#,##0", "major_gridlines":
                      {"visible": True, "line": {"color": "#D9D9D9"}}})
    chart.set_legend({"position": "bottom"})
    chart.set_size({"width": 620, "height": 300})
    return chart


def _series(chart: Any, sheet: str, name: str, cat: tuple[int, int, int], val: tuple[int, int, int], k: int) -> None:
    """cat/val: (column, first row, last row)."""
    chart.add_series({
        "name": name,
        "categories": [sheet, cat[1], cat[0], cat[2], cat[0]],
        "values": [sheet, val[1], val[0], val[2], val[0]],
        "line": {"color": _COLOURS[k % len(_COLOURS)], "width": 1.5},
        "marker": {"type": "none"},
    })


# --------------------------------------------------------------------------------------
# Sheets
# --------------------------------------------------------------------------------------


def _summary(book: _Book, cal: "Calibration", matrix_name: Callable[[str], str]) -> None:
    from allowance.report.calibration import CALIBRATION_CAUTION

    ws = book.sheet("Summary", {0: 34, 1: 18, 2: 16, 3: 14, 4: 14, 5: 14, 6: 14, 7: 14, 8: 14, 9: 14})
    intake, frame = cal.intake, cal.frame
    ws.write_string(0, 0, "Calibration evidence: from the performance history to the assumptions", book.title)
    ws.merge_range(1, 0, 4, 9, "Caution: " + CALIBRATION_CAUTION, book.wrap)
    facts = [
        ("History file", str(cal.history_file.name if cal.history_file else "")),
        ("SHA-256", intake.file.sha256),
        ("Rows read", intake.rows_read), ("Rows accepted", intake.rows_accepted),
        ("Rows rejected (rejected.csv)", intake.rows_rejected), ("Blank lines skipped", intake.blank_rows),
        ("Accepted rows after the as-of month (not used)", cal.rows_after_as_of),
        ("Months in the history", f"{intake.first_month} to {intake.last_month}"),
        ("As-of month", frame.window[1]),
        ("Window", f"{frame.window[0]} to {frame.window[1]} ({cal.settings.window_months} months)"),
        ("Policy file", str(cal.policy_file.name) if cal.policy_file else "none (policy figures are placeholders)"),
        ("Written", now().isoformat()),
    ]
    row = 6
    for label, value in facts:
        ws.write_string(row, 0, label, book.bold)
        _cell(ws, row, 1, value, book.int if isinstance(value, int) else None)
        row += 1
    row += 1
    segments = segment_summary(cal, matrix_name)
    _put(book, ws, row, 0, segments, title="What each segment takes (the assumptions written)")


def _choices(book: _Book, cal: "Calibration") -> None:
    ws = book.sheet("Choices", {0: 38, 1: 26, 2: 10, 3: 110})
    ws.write_string(0, 0, "Every choice made, its value, and where it came from", book.title)
    frame = pd.DataFrame([{"topic": c.topic, "value": c.value, "source": c.source, "why": c.why} for c in cal.choices])
    _put(book, ws, 2, 0, frame)
    row = len(frame) + 5
    notes = [
        "Default event: a charge-off (a charge-off or bankruptcy loss in the history, or days past due reaching the "
        "segment's charge-off point). PDs here are probabilities of charge-off, paired with LGDs measured on "
        "charge-offs; IFRS 9 stage 3 uses the run's default_dpd (the 90-day presumption, B5.5.37).",
        "Hazards are occurrences over exposure (charge-offs / loan-months on the book at the start of the month): "
        "the marginal PD conditional on survival that the engine uses, with repayments censored (prepayment is "
        "applied separately in the run).",
        "Curves by loan age (PD and CPR) pool every month of the history up to the as-of month; point-in-time "
        "figures (roll rates, PD by grade, payment rates, CPR without ages) pool the window.",
    ]
    ws.write_string(row, 0, "Conventions", book.subtitle)
    for i, note in enumerate(notes):
        ws.merge_range(row + 1 + i, 0, row + 1 + i, 3, note, book.wrap)
        ws.set_row(row + 1 + i, 45)


def _rolls(book: _Book, cal: "Calibration") -> None:
    ws = book.sheet("Roll rates", {0: 16})
    rr = cal.results["roll_rates"]
    cohorts = cal.results["cohorts"].by_bucket
    ws.write_string(0, 0, f"Monthly roll-rate matrices, pooled over {rr.window[0]} to {rr.window[1]}", book.title)
    ws.write_string(1, 0, "Rows: the state at the start of the month; columns: the state at its end. Count-weighted "
                          "= n_ij / n_i (maximum likelihood, Anderson & Goodman 1957); balance-weighted = share of the "
                          "balance at the start of the month.")
    row = 3
    for name, rolls in rr.segments.items():
        ws.write_string(row, 0, f"Segment {neutralise_text(name)} (charge-off at {rolls.charge_off_dpd} days; "
                                f"written: {rolls.weighting}-weighted)", book.title)
        row += 1
        width = len(rolls.states) + 2
        _, _, last = _put(book, ws, row, 0, rolls.table(rolls.weighting), title=f"{rolls.weighting}-weighted (written)",
                          formats={s: book.pct for s in rolls.states})
        _put(book, ws, row, width, rolls.table("observations"), title="observations n_ij",
             formats={s: book.int for s in rolls.states})
        row = last + 2
        _, _, last = _put(book, ws, row, 0, rolls.table(rolls.other_weighting),
                          title=f"{rolls.other_weighting}-weighted (written beside it)",
                          formats={s: book.pct for s in rolls.states})
        _put(book, ws, row, width, rolls.table("standard_error"), title="standard error of the count estimate",
             formats={s: book.fine for s in rolls.states})
        row = last + 2
        try:
            implied = roll_rate_summary(name, rolls.matrix(), rolls.charge_off_dpd).drop(columns="segment")
        except AllowanceError:
            implied = pd.DataFrame()
        if not implied.empty:
            seen = cohorts[cohorts["segment"] == name].set_index("bucket")
            implied["cohort_default_rate_12m"] = [seen["default_rate_12m"].get(b, np.nan) for b in implied["bucket"]]
            implied["cohort_loans"] = [int(seen["loans"].get(b, 0)) for b in implied["bucket"]]
            _, _, last = _put(book, ws, row, 0, implied,
                              title="What the written matrix implies, against the cohort 12-month default rates "
                                    "(a check of the Markov assumption)")
            row = last + 2
        if rolls.unobserved:
            ws.write_string(row, 0, f"No observation in the window from {', '.join(rolls.unobserved)}: "
                                    "those rows take the contractual roll (one bucket a month).")
            row += 2
        row += 1


def _roll_series(book: _Book, cal: "Calibration") -> None:
    ws = book.sheet("Roll-rate series", {0: 12, 1: 9})
    series = cal.results["roll_rates"].series
    ws.write_string(0, 0, "Monthly roll rates (share of the loans in a bucket at the start of the month)", book.title)
    if series.empty:
        return
    columns = [c for c in series.columns if c not in ("segment",)]
    _, first, last = _put(book, ws, 2, 0, series[["segment", *columns]])
    chart_row = 2
    for name in series["segment"].unique():
        rows = np.flatnonzero(series["segment"].to_numpy() == name)
        lo, hi = first + int(rows[0]), first + int(rows[-1])
        chart = _line_chart(book, f"{name}: monthly roll rates", "share of the bucket")
        for j, column in enumerate(c for c in series.columns if c.startswith("current_to") or c == "to_charge_off"):
            col = list(series[["segment", *columns]].columns).index(column)
            _series(chart, ws.name, column, (1, lo, hi), (col, lo, hi), j)
        ws.insert_chart(chart_row, len(columns) + 3, chart)
        chart_row += 16


def _defaults(book: _Book, cal: "Calibration") -> None:
    ws = book.sheet("Default rates", {0: 12})
    co = cal.results["cohorts"]
    hz = cal.results["hazards"]
    ws.write_string(0, 0, "Default rates (default = charge-off)", book.title)
    _, _, last = _put(book, ws, 2, 0, co.by_bucket,
                      title=f"12-month default rate by starting bucket, cohorts {co.cohorts[0]} to {co.cohorts[1]}")
    _, _, last = _put(book, ws, last + 2, 0, co.by_grade, title="12-month default rate by grade (cohort method)")
    _, _, last = _put(book, ws, last + 2, 0, hz.by_grade,
                      title="Monthly default hazard by grade over the window, and the 12-month PD written")
    _, _, last = _put(book, ws, last + 2, 0, hz.pooled, title="Pooled over all grades")
    row = last + 3
    if co.series.empty:
        return
    ws.write_string(row, 0, "12-month default rate of each monthly cohort", book.subtitle)
    _, first, end = _put(book, ws, row + 1, 0, co.series)
    columns = list(co.series.columns)
    chart = _line_chart(book, "12-month default rate by cohort month", "default rate")
    for k, name in enumerate(co.series["segment"].unique()):
        rows = np.flatnonzero(co.series["segment"].to_numpy() == name)
        lo, hi = first + int(rows[0]), first + int(rows[-1])
        _series(chart, ws.name, name, (columns.index("cohort"), lo, hi),
                (columns.index("default_rate_12m"), lo, hi), k)
    ws.insert_chart(row, len(columns) + 1, chart)


def _losses(book: _Book, cal: "Calibration") -> None:
    ws = book.sheet("Loss rates", {0: 12, 1: 9})
    lr = cal.results["loss_rates"]
    ws.write_string(0, 0, "Gross and net credit-loss rates by month (over the opening balance)", book.title)
    ws.write_string(1, 0, "GCL = charge-offs + bankruptcy losses; NCL = GCL - recoveries - asset sales; rates over the "
                          "previous month-end balance; annualised = 12 x monthly.")
    _, _, last = _put(book, ws, 3, 0, lr.averages, title=f"Averages over the window {lr.window[0]} to {lr.window[1]}")
    row = last + 3
    _, first, end = _put(book, ws, row, 0, lr.table, title="By segment and month (loss_rates.csv)")
    columns = list(lr.table.columns)
    chart_row = row
    for name in lr.table["segment"].unique():
        rows = np.flatnonzero(lr.table["segment"].to_numpy() == name)
        lo, hi = first + int(rows[0]), first + int(rows[-1])
        chart = _line_chart(book, f"{name}: annualised loss rates", "annualised rate")
        for j, column in enumerate(("gcl_rate_annualised", "ncl_rate_annualised")):
            _series(chart, ws.name, column, (columns.index("month"), lo, hi), (columns.index(column), lo, hi), j)
        ws.insert_chart(chart_row, len(columns) + 1, chart)
        chart_row += 16


def _loss_methods(book: _Book, cal: "Calibration") -> None:
    from allowance.calibrate.loss_methods import method_table

    ws = book.sheet("Loss-rate methods", {0: 12, 1: 16, 2: 16, 3: 14, 4: 44})
    found = cal.results["loss_methods"]
    ws.write_string(0, 0, "Inputs of the loss-rate methods (WARM, pool, vintage), estimated from the history",
                    book.title)
    ws.write_string(1, 0, "WARM: the window's annualised NCL rate; pool: NCL of the loans on the book in the first "
                          "month over their balance then; vintage: cumulative NCL / original balance by age, vintages "
                          "seen from origination pooled. A segment takes one in the assumptions only when "
                          "[calibration] loss_rate_method names it (method_written).")
    table = method_table(cal.results, cal.frame)
    _, _, last = _put(book, ws, 3, 0, table, title="By segment (loss_rate_methods.csv)",
                      formats={c: book.pct for c in ("annual_loss_rate", "lifetime_loss_rate", "pool_run_off")})
    _, _, last = _put(book, ws, last + 3, 0, found.pool, title="The closed pools (on the book at the end of the "
                      "history's first month)", formats={"lifetime_loss_rate": book.pct, "run_off": book.pct})
    row = last + 3
    vintage = found.vintage
    for k, name in enumerate(vintage["segment"].unique() if not vintage.empty else []):
        rows = vintage[vintage["segment"] == name]
        _, first, end = _put(book, ws, row, 0, rows, title=f"{name}: net loss by month of age (vintage_losses.csv)",
                             formats={"marginal_loss_rate": book.pct, "cumulative_loss_rate": book.pct})
        chart = _line_chart(book, f"{name}: cumulative net loss / original balance by age (months)",
                            "cumulative loss rate")
        _series(chart, ws.name, "cumulative loss rate", (1, first, end), (6, first, end), k)
        ws.insert_chart(row, 8, chart)
        row = max(end, row + 16) + 3


def _satellites(book: _Book, cal: "Calibration") -> None:
    fits = cal.results.get("satellites", {}) or {}
    if not fits:
        return
    ws = book.sheet("Satellite models", {0: 26, 1: 18, 2: 12, 3: 14, 4: 12, 5: 10, 6: 10, 7: 12, 8: 12})
    source = cal.macro_file.name if cal.macro_file else "the macro history"
    ws.write_string(0, 0, f"Satellite models fitted to the history and {source}", book.title)
    ws.write_string(1, 0, "Binomial GLM of each segment's monthly charge-offs on the lagged macro variables "
                          "(statsmodels); the run uses the slopes as shifts of the long-run PD by each variable's "
                          "deviation from the baseline path. The intercept is not used.")
    row = 3
    for name, fit in fits.items():
        _, _, last = _put(book, ws, row, 0, fit.coefficients, title=f"{name}: {fit.link} link, standard errors "
                          f"{fit.standard_errors}")
        _, _, last = _put(book, ws, last + 2, 0, fit.statistics, title=f"{name}: fit statistics")
        table = fit.fitted.iloc[:, :5]
        _, first, end = _put(book, ws, last + 2, 0, table, title=f"{name}: observed and fitted monthly rates",
                             formats={"observed_rate": book.pct, "fitted_rate": book.pct})
        chart = _line_chart(book, f"{name}: monthly charge-off rate, observed and fitted", "monthly rate")
        for j, column in enumerate(("observed_rate", "fitted_rate")):
            _series(chart, ws.name, column, (0, first, end), (3 + j, first, end), j)
        ws.insert_chart(row, 10, chart)
        row = end + 3


def _vintages(book: _Book, cal: "Calibration") -> None:
    ws = book.sheet("Vintages", {0: 10})
    vt = cal.results["vintages"]
    hz = cal.results["hazards"]
    ws.write_string(0, 0, "Vintage curves: cumulative default rate by month of loan age (life table)", book.title)
    _, _, last = _put(book, ws, 2, 0, vt.summary, title="Vintages (origination years)")
    row = last + 3
    for name in vt.summary["segment"].unique() if not vt.summary.empty else []:
        seen = vt.summary[(vt.summary["segment"] == name) & vt.summary["seen_from_origination"]]
        curves = vt.curves[(vt.curves["segment"] == name) & vt.curves["vintage"].isin(seen["vintage"])]
        if curves.empty:
            continue
        pivot = curves.pivot(index="age", columns="vintage", values="cumulative_default_rate")
        pivot.columns = [str(c) for c in pivot.columns]
        table = pivot.reset_index()
        _, first, end = _put(book, ws, row, 0, table, title=f"{name}: vintages seen from origination",
                             formats={c: book.pct for c in table.columns[1:]})
        chart = _line_chart(book, f"{name}: cumulative default rate by age (months)", "cumulative default rate")
        for k, column in enumerate(table.columns[1:]):
            _series(chart, ws.name, column, (0, first, end), (1 + k, first, end), k)
        ws.insert_chart(row, len(table.columns) + 1, chart)
        row = max(end, row + 16) + 3
    ws.write_string(row, 0, "PD by year of loan age (all vintages pooled): the pd_curve_by_age source", book.title)
    row += 1
    for k, name in enumerate(hz.by_age["segment"].unique() if not hz.by_age.empty else []):
        table = hz.by_age[hz.by_age["segment"] == name]
        _, first, end = _put(book, ws, row, 0, table, title=name)
        chart = _line_chart(book, f"{name}: cumulative PD by year of age", "cumulative PD")
        _series(chart, ws.name, "cumulative PD", (1, first, end), (5, first, end), k)
        ws.insert_chart(row, 9, chart)
        row = max(end, row + 16) + 3


def _lgd(book: _Book, cal: "Calibration") -> None:
    ws = book.sheet("LGD and recoveries", {0: 12})
    lgd = cal.results["lgd"]
    settings = cal.settings
    ws.write_string(0, 0, "Workout LGD and recovery timing", book.title)
    ws.write_string(1, 0, f"LGD = (write-offs - recoveries and debt-sale proceeds discounted "
                          f"{'at the contract rate' if settings.recovery_discount == 'contract_rate' else '(not)'}) / "
                          f"exposure at charge-off; charge-offs with {settings.lgd_workout_months} months of recoveries "
                          "observed; exposure-weighted.")
    _, _, last = _put(book, ws, 3, 0, lgd.by_segment, title="By segment")
    notes = pd.DataFrame({"segment": list(lgd.cash_without_write_off),
                          "recoveries_on_write_offs_before_the_history": list(lgd.cash_without_write_off.values()),
                          "cash_before_the_write_off": [lgd.cash_before_write_off[s] for s in lgd.cash_without_write_off]})
    _, _, last = _put(book, ws, last + 2, 0, notes, title="Cash not in the LGD (counted in the loss rates)")
    row = last + 3
    if not lgd.timing.empty:
        _, first, end = _put(book, ws, row, 0, lgd.timing, title="Recovery timing: cumulative recovery rate by months "
                                                                 "since charge-off")
        columns = list(lgd.timing.columns)
        chart = _line_chart(book, "Cumulative recovery rate by months since charge-off", "share of write-offs")
        for k, name in enumerate(lgd.timing["segment"].unique()):
            rows = np.flatnonzero(lgd.timing["segment"].to_numpy() == name)
            lo, hi = first + int(rows[0]), first + int(rows[-1])
            _series(chart, ws.name, name, (columns.index("months_since_charge_off"), lo, hi),
                    (columns.index("cumulative_recovery_rate"), lo, hi), k)
        ws.insert_chart(row, len(columns) + 1, chart)
        row = end + 3
    _put(book, ws, row, 0, lgd.histogram, title="Loan-level LGD of the charge-offs in the estimate")


def _exposure(book: _Book, cal: "Calibration") -> None:
    ws = book.sheet("CCF, payments, prepayment", {0: 12})
    ws.write_string(0, 0, "Revolving exposure, payment rates and prepayment speeds", book.title)
    ccf = cal.results["ccf"].by_segment
    pay = cal.results["payment_rates"]
    pp = cal.results["prepayment"]
    row = 2
    if not ccf.empty:
        _, _, last = _put(book, ws, row, 0, ccf, title="CCF: (exposure at charge-off - drawn) / (limit - drawn) at the "
                                                       "reference month")
        row = last + 2
    life = pd.DataFrame([{"segment": n, "expected_life_months": v[0], "exits": v[1], "line_months": v[2]}
                         for n, v in pp.life.items()])
    if not life.empty:
        _, _, last = _put(book, ws, row, 0, life, title="Revolving lines: expected life = 1 / monthly exit rate")
        row = last + 2
    _, _, last = _put(book, ws, row, 0, pay.by_segment, title="Payment rate over the window (net repayments / "
                                                              "balance at the start of the month)")
    row = last + 2
    _, _, last = _put(book, ws, row, 0, pp.pooled, title="Pooled SMM and CPR over the window")
    row = last + 3
    if not pp.by_age.empty:
        _, first, end = _put(book, ws, row, 0, pp.by_age, title="CPR by year of age (balance-weighted SMM)")
        columns = list(pp.by_age.columns)
        chart = _line_chart(book, "CPR by year of loan age", "CPR")
        for k, name in enumerate(pp.by_age["segment"].unique()):
            rows = np.flatnonzero(pp.by_age["segment"].to_numpy() == name)
            lo, hi = first + int(rows[0]), first + int(rows[-1])
            _series(chart, ws.name, name, (columns.index("year_of_age"), lo, hi), (columns.index("cpr"), lo, hi), k)
        ws.insert_chart(row, len(columns) + 1, chart)
        row = end + 3
    if not pay.series.empty:
        _, first, end = _put(book, ws, row, 0, pay.series, title="Payment rate by month")
        chart = _line_chart(book, "Monthly payment rate", "payment rate")
        for k, name in enumerate(pay.series["segment"].unique()):
            rows = np.flatnonzero(pay.series["segment"].to_numpy() == name)
            lo, hi = first + int(rows[0]), first + int(rows[-1])
            _series(chart, ws.name, name, (1, lo, hi), (2, lo, hi), k)
        ws.insert_chart(row, 4, chart)


def _intake(book: _Book, cal: "Calibration") -> None:
    from allowance.intake.performance import HISTORY_CODES

    ws = book.sheet("Intake", {0: 28, 1: 16, 2: 60})
    intake = cal.intake
    ws.write_string(0, 0, "The history as read", book.title)
    counts = pd.DataFrame([
        {"what": "rows read", "rows": intake.rows_read},
        {"what": "rows accepted", "rows": intake.rows_accepted},
        {"what": "rows rejected", "rows": intake.rows_rejected},
        {"what": "blank lines (skipped, not rows)", "rows": intake.blank_rows},
        {"what": "accepted rows after the as-of month (not used)", "rows": cal.rows_after_as_of},
    ])
    _, _, last = _put(book, ws, 2, 0, counts)
    ws.write_string(last + 1, 0, "rows read = rows accepted + rows rejected", book.bold)
    findings = intake.findings
    by_code = (findings.groupby(["severity", "code"]).agg(rows=("source_row", "nunique"), column=("column", "first"))
               .reset_index() if len(findings) else pd.DataFrame(columns=["severity", "code", "rows", "column"]))
    by_code["meaning"] = [HISTORY_CODES.get(c, c).format(column=col or "the line")
                          for c, col in zip(by_code["code"], by_code["column"])]
    _, _, last = _put(book, ws, last + 3, 0, by_code, title="Findings by reason")
    mapping = pd.DataFrame({"column": list(intake.columns), "read_from_header": list(intake.columns.values())})
    _, _, last = _put(book, ws, last + 3, 0, mapping, title="Columns read")
    if intake.ignored:
        _, _, last = _put(book, ws, last + 3, 0, pd.DataFrame({"ignored_header": intake.ignored}),
                          title="Headers that are not history columns (not read)")
    if len(intake.rejected):
        _put(book, ws, last + 3, 0, intake.rejected, limit=1000,
             title=f"Rejected rows (the first {min(1000, len(intake.rejected)):,}; all are in rejected.csv)")


def write_calibration_workbook(path: Path, calibration: "Calibration",
                               matrix_name: Callable[[str], str] | None = None) -> None:
    """Write ``calibration.xlsx``: summary, choices, matrices, series and charts, LGD, intake."""
    from allowance.calibrate.assumptions import rolls_file

    book = _Book(Path(path))
    name_of = matrix_name or rolls_file
    try:
        _summary(book, calibration, name_of)
        _choices(book, calibration)
        _rolls(book, calibration)
        _roll_series(book, calibration)
        _defaults(book, calibration)
        _losses(book, calibration)
        _loss_methods(book, calibration)
        _satellites(book, calibration)
        _vintages(book, calibration)
        _lgd(book, calibration)
        _exposure(book, calibration)
        _intake(book, calibration)
    finally:
        book.close()


