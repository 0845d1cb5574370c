"""The reserve workbook's macro-and-PD-path sheet and balance roll-rate forecast sheet.

Checks: the sheets show what the run computed (pd_paths, macro_paths, the roll forecast of
allowance.curves.segment_roll_forecasts, whose arithmetic is tested in
tests/test_curves_roll_forecast.py against the product of roll rates, common practice, no
source) as a reader opening the file sees it (openpyxl reads the cached values).
"""

from __future__ import annotations

import openpyxl
import pandas as pd
import pytest

import allowance
from tests.strategies import example_roll_matrix
from tests.test_macro import BASELINE_HPI, BASELINE_U, HISTORY, TAPE, _assumptions


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    data = _assumptions({"base": {"weight": 0.6, "macro": {"u": BASELINE_U, "hpi": BASELINE_HPI}},
                         "down": {"weight": 0.4, "macro": {"u": HISTORY + [6.5] * 12, "hpi": BASELINE_HPI}}}
                        ).model_dump(mode="json", exclude_none=True)
    cards = data["segments"]["cards"]
    data["segments"]["cards"] = {
        "transition_matrix": example_roll_matrix(180).model_dump(mode="json"), "charge_off_dpd": 180, "lgd": 0.85,
        "ccf": cards["ccf"], "behavioural_life_months": cards["behavioural_life_months"],
        "payment_rate": cards["payment_rate"], "satellite": cards["satellite"], "unconditionally_cancellable": True}
    result = allowance.run(TAPE, data, sensitivities=False)
    out = tmp_path_factory.mktemp("sheets")
    result.write(out)
    return result, out


def _table(ws, title: str) -> pd.DataFrame:
    """The table under a section title: its header row, then rows until a blank first cell."""
    rows = [list(r) for r in ws.iter_rows(values_only=True)]
    start = next(i for i, r in enumerate(rows) if r[0] == title)
    header = rows[start + 1]
    body = []
    for r in rows[start + 2:]:
        if r[0] is None:
            break
        body.append(r)
    width = max(i for i, h in enumerate(header) if h is not None) + 1
    return pd.DataFrame([b[:width] for b in body], columns=header[:width])


def test_the_macro_sheet_sets_each_path_beside_its_pd_path(written):
    result, out = written
    book = openpyxl.load_workbook(out / "reserve.xlsx")
    ws = book["Macro and PD paths"]
    table = _table(ws, "auto: macro paths and PD paths")
    assert table["down: u"].iloc[0] == 6.5 and table["base: u"].iloc[0] == 4.1
    paths = result.report.pd_paths
    down = paths[(paths.segment == "auto") & (paths.scenario == "down") & (paths.framework == "ifrs9")]
    expected = down.set_index("month")["annualised_pd"].loc[table["month"]].to_numpy()
    assert table["down: PD IFRS 9"].to_numpy() == pytest.approx(expected, rel=1e-12)
    assert len(ws._charts) == 2 * 3  # noqa: SLF001 - two charts per segment with a satellite model


def test_the_roll_forecast_sheet_and_csv(written):
    from allowance.curves import segment_roll_forecasts

    result, out = written
    ws = openpyxl.load_workbook(out / "reserve.xlsx")["Roll-rate forecast"]
    check = _table(ws, "Forecast against the loan-level allowance")
    csv = pd.read_csv(out / "roll_forecast.csv")
    assert set(csv["segment"]) == {"cards"} and len(csv) == 12
    tape = result.report.intake.accepted
    by_month, direct = segment_roll_forecasts(tape, result.report.config.assumptions.segments, result.loans)
    assert check.iloc[:, 2].tolist() == pytest.approx(direct["forecast_charge_offs"].tolist(), rel=1e-9)
    assert csv["charge_offs"].to_numpy() == pytest.approx(by_month["charge_offs"].to_numpy(), rel=1e-9)
