"""A PD curve by loan age: a loan deep in its life does not take a new loan's early-life PD.

Hazards by hand from a cumulative curve by year of age (constant hazard within a year of age,
log-linear survival; common practice, no source): h_y = 1 - ((1 - C_y) / (1 - C_{y-1}))^(1/12).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st
from typer.testing import CliRunner

from allowance.cli import app
from allowance.curves import pd_over
from allowance.curves.pd_sources import marginal_by_age, marginal_from_curve, pd_term_structure
from allowance.schemas import SegmentAssumptions
from tests.strategies import pd_curves

CURVE = [0.002, 0.008, 0.015, 0.02, 0.024, 0.027, 0.029, 0.030, 0.031, 0.0315]  # rises, then flattens


def _hazard(year: int) -> float:
    before = 0.0 if year == 1 else CURVE[year - 2]
    return 1.0 - ((1.0 - CURVE[year - 1]) / (1.0 - before)) ** (1.0 / 12.0)


@given(pd_curves, st.integers(0, 200), st.integers(1, 60))
def test_row_of_an_age_is_the_curve_read_from_that_age(curve, age, months):
    table = marginal_by_age(curve, months)
    row = table[min(age, table.shape[0] - 1)]
    np.testing.assert_array_equal(row, marginal_from_curve(curve, age + months)[age:age + months])


def test_the_source_keys_every_month_of_age_and_reproduces_the_curve_from_age_0():
    ts = pd_term_structure("mortgage", SegmentAssumptions(pd_curve_by_age=CURVE, lgd=0.2), 360)
    assert ts.source == "pd_curve_by_age" and ts.keys[0] == "0" and len(ts.keys) == 12 * len(CURVE) + 1
    np.testing.assert_allclose([pd_over(ts.marginal[0], 12 * y) for y in range(1, 11)], CURVE, atol=1e-14)


@pytest.mark.slow
def test_an_old_mortgage_takes_the_pd_of_its_own_age_in_the_run(tmp_path):
    tape = pd.DataFrame({
        "loan_id": ["NEW", "OLD"], "segment": "mortgage", "repayment": "level",
        "origination_date": ["2026-03-30", "2012-04-30"],  # 6 and 173 whole months before the as-of date
        "maturity_date": ["2056-03-30", "2042-04-30"], "balance": [200_000.0, 200_000.0],
        "interest_rate": [0.05, 0.05], "days_past_due": [0, 0],
    })
    tape.to_csv(tmp_path / "tape.csv", index=False)
    (tmp_path / "a.toml").write_text(f"""
[run]
as_of = 2026-09-30
frameworks = ["cecl"]

[segments.mortgage]
pd_curve_by_age = {CURVE}
lgd = 0.2

[cecl]
reasonable_supportable_months = 12

[scenarios.base]
weight = 1.0
""")
    result = CliRunner().invoke(app, ["run", str(tmp_path / "tape.csv"), "-a", str(tmp_path / "a.toml"),
                                      "--out", str(tmp_path / "out")], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    loans = pd.read_csv(tmp_path / "out" / "loans.csv").set_index("loan_id")
    # the new loan's next 12 months are months of life 7-18: half of year 1, half of year 2
    young = 1 - (1 - _hazard(1)) ** 6 * (1 - _hazard(2)) ** 6
    # the old loan's are months 174-185, past the curve: the last year's hazard
    old = 1 - (1 - _hazard(10)) ** 12
    assert loans.loc["NEW", "pd_12m"] == pytest.approx(young, rel=1e-9)
    assert loans.loc["OLD", "pd_12m"] == pytest.approx(old, rel=1e-9)
    assert old < young / 3  # a 173-month-old mortgage is not a new loan
