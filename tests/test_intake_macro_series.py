"""The macro history file: periods, gaps, blanks and numbers, each problem named by row and column."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from allowance.exceptions import InputFileError
from allowance.intake.macro_series import read_macro_history


def _write(tmp_path, text: str, name: str = "macro.csv"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_a_monthly_file_reads_in_period_order(tmp_path):
    path = _write(tmp_path, "month,unemployment_rate,gdp_growth\n2026-02,4.4,-0.5\n2026-01,4.2,1.25\n2026-03-31,4.5,0\n")
    m = read_macro_history(path)
    assert m.frequency == "monthly" and m.variables == ["unemployment_rate", "gdp_growth"]
    assert [str(p) for p in m.values.index] == ["2026-01", "2026-02", "2026-03"]
    assert m.values["gdp_growth"].tolist() == [1.25, -0.5, 0.0]


def test_a_quarterly_file_becomes_monthly_by_the_stated_convention(tmp_path):
    path = _write(tmp_path, "quarter,u\n2025Q4,4.0\n2026-Q1,5.0\n2026-06-30,7.0\n")
    m = read_macro_history(path)
    assert m.frequency == "quarterly"
    step = m.monthly("step")
    assert [str(p) for p in step.index[[0, 3, 8]]] == ["2025-10", "2026-01", "2026-06"]
    assert step["u"].tolist() == [4.0] * 3 + [5.0] * 3 + [7.0] * 3
    # linear: straight lines through the quarters' middle months (numpy.interp as the reference)
    np.testing.assert_allclose(m.monthly("linear")["u"], np.interp(np.arange(9), [1, 4, 7], [4.0, 5.0, 7.0]))


def test_xlsx_and_parquet_read_the_same(tmp_path):
    frame = pd.DataFrame({"month": ["2026-01", "2026-02"], "u": [4.2, 4.4]})
    frame.to_parquet(tmp_path / "m.parquet")
    frame.to_excel(tmp_path / "m.xlsx", index=False)
    a = read_macro_history(tmp_path / "m.parquet").values
    b = read_macro_history(tmp_path / "m.xlsx").values
    pd.testing.assert_frame_equal(a, b)


@pytest.mark.parametrize(
    ("text", "row", "column", "message"),
    [
        ("date,u\n2026-01,4\n", 1, None, "exactly one period column"),
        ("month,quarter,u\n2026-01,2026Q1,4\n", 1, None, "exactly one period column"),
        ("month\n2026-01\n", 1, None, "no variable columns"),
        ("month,u\n2026-01,4\n2026-13,4\n", 3, "month", "'2026-13' is not a month"),
        ("month,u\n2026-01,4\n,4\n", 3, "month", "month is blank"),
        ("quarter,u\n2026Q1,4\n2026Q5,4\n", 3, "quarter", "'2026Q5' is not a quarter"),
        ("month,u\n2026-01,4\n2026-01-31,5\n", 3, "month", "2026-01 appears twice"),
        ("month,u\n2026-01,4\n2026-02,4\n2026-04,5\n", 4, "month", "2026-03 is missing"),
        ("month,u\n2026-01,4\n2026-02,\n", 3, "u", "u is blank"),
        ("month,u\n2026-01,4\n2026-02,4.1%\n", 3, "u", "'4.1%' is not a number"),
        ("month,u,u\n2026-01,4,4\n", 1, None, "'u' appears more than once"),
        ("month,u\n2026-01,4,5\n", 2, None, "3 fields but the header has 2"),
    ],
)
def test_every_problem_names_its_row_and_column(tmp_path, text, row, column, message):
    path = _write(tmp_path, text)
    with pytest.raises(InputFileError, match=message) as info:
        read_macro_history(path)
    err = info.value
    assert err.row == row and err.column == column and str(path) in str(err)


def test_a_file_separated_by_semicolons_says_so(tmp_path):
    """A decimal-comma locale's CSV export: one error naming the separator, not 'no period column'."""
    path = tmp_path / "macro.csv"
    path.write_text("quarter;unemployment_rate\n2026Q1;4.1\n2026Q2;4.3\n")
    with pytest.raises(InputFileError, match="joined by semicolons: the file is separated by semicolons, not commas"):
        read_macro_history(path)


def test_a_charge_off_file_separated_by_tabs_says_so(tmp_path):
    from allowance.intake.history import read_charge_offs

    path = tmp_path / "charge_offs.csv"
    path.write_text("loan_id\tgross_charge_off\trecoveries\nA-1\t100.00\t0.00\n")
    with pytest.raises(InputFileError, match="joined by tabs: the file is separated by tabs, not commas"):
        read_charge_offs(path)
