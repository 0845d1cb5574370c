"""Workbook sheets of scenario paths and forecasts: macro paths beside the PD paths they produce,
and the balance roll-rate forecast.

For every segment with a satellite model: one table by month after the as-of date (the
scenario's value of each variable the model reads, then the segment's PD at an annual rate
under each scenario and framework, ``pd_paths.csv``), and two line charts beside it: the PD
paths and the first variable's paths, scenario by scenario.

Implements
----------
macro_pd_frame   one segment's table (month by month)
macro_pd_sheet   the sheet
roll_forecast_sheet  the balance roll-rate forecast of each roll-rate segment, with its check
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from allowance.report.xlsx import Sheet

if TYPE_CHECKING:
    from allowance.report.record import RunReport

__all__ = ["MONTHS_SHOWN", "macro_pd_frame", "macro_pd_sheet", "roll_forecast_sheet"]

#: Months shown after the as-of date (the paths revert to the baseline after they end).
MONTHS_SHOWN = 48
_FW_LABEL = {"ifrs9": "IFRS 9", "cecl": "CECL"}
_COLOURS = ("#1F4E79", "#2E8B57", "#C0504D", "#7F6084", "#D08A2E", "#4BACC6")


def _variables(report: "RunReport", segment: str) -> list[str]:
    model = getattr(report.config.assumptions.segments[segment], "satellite", None)
    return [] if model is None else list(model.variables)


def _wide_paths(report: "RunReport", months: int) -> tuple:
    """Months 1..``months``: the calendar months, the scenarios, every (scenario, variable) path
    and every (segment, framework, scenario) annualised PD path, months down (one pivot each,
    not a filter per segment and column)."""
    paths, pds = report.macro_paths, report.pd_paths
    rows = paths[(paths["month"] >= 1) & (paths["month"] <= months) & (paths["scenario"] != "(baseline)")]
    first = rows[["month", "calendar_month"]].drop_duplicates().sort_values("month").set_index("month")
    scenarios = list(dict.fromkeys(rows["scenario"]))
    macro = rows.pivot(index="month", columns=["scenario", "variable"], values="value")
    mine = pds[(pds["month"] >= 1) & (pds["month"] <= months)]
    pd_paths = mine.pivot(index="month", columns=["segment", "framework", "scenario"], values="annualised_pd")
    frameworks: dict[str, list[str]] = {}
    for segment, framework in mine[["segment", "framework"]].drop_duplicates().itertuples(index=False, name=None):
        frameworks.setdefault(segment, []).append(framework)
    return first, scenarios, macro, pd_paths, frameworks


def _segment_frame(report: "RunReport", segment: str, wide: tuple) -> pd.DataFrame:
    first, scenarios, macro, pd_paths, frameworks = wide
    columns: dict[str, np.ndarray] = {}

    def put(label: str, table: pd.DataFrame, column: tuple) -> None:  # a path the tables lack: blank
        columns[label] = (table[column].reindex(first.index).to_numpy(dtype=float) if column in table.columns
                          else np.full(len(first), np.nan))

    for name in scenarios:
        for variable in _variables(report, segment):
            put(f"{name}: {variable}", macro, (name, variable))
    for framework in frameworks.get(segment, []):
        for name in scenarios:
            put(f"{name}: PD {_FW_LABEL.get(framework, framework)}", pd_paths, (segment, framework, name))
    return pd.concat([first, pd.DataFrame(columns, index=first.index)], axis=1).reset_index()


def macro_pd_frame(report: "RunReport", segment: str, months: int = MONTHS_SHOWN) -> pd.DataFrame:
    """Month, calendar month, each scenario's variables, then each scenario's annualised PD by framework."""
    return _segment_frame(report, segment, _wide_paths(report, months))


def macro_pd_sheet(sheet: Sheet, report: "RunReport") -> None:
    """Each segment's macro paths beside its PD paths, with two charts."""
    row = sheet.note(4, "Each scenario's macro paths (macro_paths.csv) beside the monthly PD they produce through "
                        "the segment's satellite model, at an annual rate 1 - (1 - pd)^12, weighted by the book's "
                        "balance on the segment's grades or buckets (pd_paths.csv). CECL PDs revert to the "
                        "long-run PD after the reasonable and supportable period.", span=10)
    if report.macro_paths is None or report.macro_paths.empty or report.pd_paths is None or report.pd_paths.empty:
        sheet.note(row, "This run states no macro paths.")
        return
    book = sheet.book.workbook
    wide = _wide_paths(report, MONTHS_SHOWN)
    for segment in report.config.assumptions.segments:
        variables = _variables(report, segment)
        if not variables:
            continue
        frame = _segment_frame(report, segment, wide)
        kinds = {c: ("rate" if ": PD " in c else "number") for c in frame.columns[2:]}
        kinds.update({"month": "count", "calendar_month": "text"})
        first, last = sheet.table(row, frame, title=f"{segment}: macro paths and PD paths", kinds=kinds,
                                  headers={c: c.replace("_", " ") for c in frame.columns})
        header = first - 1
        charts = []
        for title, columns, axis, fmt in (
            ("PD at an annual rate", [c for c in frame.columns if ": PD " in c], "PD", "0.00%"),
            (variables[0].replace("_", " "), [c for c in frame.columns if c.endswith(f": {variables[0]}")],
             variables[0].replace("_", " "), "0.0"),
        ):
            chart = book.add_chart({"type": "line"})
            for k, column in enumerate(columns):
                j = list(frame.columns).index(column)
                chart.add_series({
                    "name": [sheet.name, header - 1, j], "categories": [sheet.name, first - 1, 1, last - 1, 1],
                    "values": [sheet.name, first - 1, j, last - 1, j],
                    "line": {"color": _COLOURS[k % len(_COLOURS)], "width": 1.5,
                             "dash_type": "dash" if "CECL" in column else "solid"},
                    "marker": {"type": "none"},
                })
            chart.set_title({"name": f"{segment}: {title}", "name_font": {"size": 11}})
            chart.set_y_axis({"name": axis, "num_format": fmt,
                              "major_gridlines": {"visible": True, "line": {"color": "#D9DEE3"}}})
            chart.set_legend({"position": "bottom"})
            charts.append(chart)
        col = len(frame.columns) + 2
        sheet.chart(row, col, charts[0], width=560, height=300)
        sheet.chart(row + 17, col, charts[1], width=560, height=300)
        row = max(last, row + 34) + 3


def roll_forecast_sheet(sheet: Sheet, report: "RunReport") -> None:
    """The balance roll-rate forecast of every roll-rate segment, its check, and charge-offs charted."""
    row = sheet.note(4, "The tape's balance in each delinquency bucket rolled forward month by month through the "
                        "segment's monthly roll-rate matrix: b(t) = b(t-1) Q; charge-offs in month t = b(t-1) r, "
                        "r the column into charge-off (three months out from a bucket: its balance times the "
                        "product of the roll rates along the path). The check sets the forecast's charge-offs "
                        "times the LGD beside the loan-level 12-month and lifetime ECL (roll_forecast.csv).",
                     span=10)
    check = report.roll_forecast_check
    if check is not None and not check.empty:
        _, last = sheet.table(row, check.reset_index(drop=True), title="Forecast against the loan-level allowance",
                              kinds={"lgd": "rate", "ratio": "number"})
        row = last + 2
    book = sheet.book.workbook
    table = report.roll_forecast
    for k, segment in enumerate(dict.fromkeys(table["segment"])):
        mine = table[table["segment"] == segment].drop(columns="segment").reset_index(drop=True)
        first, last = sheet.table(row, mine, title=f"{segment}: bucket balances rolled forward (12 months)",
                                  kinds={"month": "count"})
        chart = book.add_chart({"type": "column"})
        j = list(mine.columns).index("charge_offs")
        chart.add_series({"name": [sheet.name, first - 2, j], "categories": [sheet.name, first - 1, 0, last - 1, 0],
                          "values": [sheet.name, first - 1, j, last - 1, j],
                          "fill": {"color": _COLOURS[k % len(_COLOURS)]}})
        chart.set_title({"name": f"{segment}: forecast charge-offs by month", "name_font": {"size": 11}})
        chart.set_y_axis({"num_format": "#,##0", "major_gridlines": {"visible": True, "line": {"color": "#D9DEE3"}}})
        chart.set_legend({"none": True})
        sheet.chart(row, len(mine.columns) + 2, chart, width=520, height=280)
        row = max(last, row + 16) + 3
