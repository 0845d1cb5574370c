"""Loss-rate identities on a hand-made history (our own numbers).

GCL = charge-offs + bankruptcy losses; NCL = GCL - recoveries - asset sales; each rate over the
segment's balance at the previous month end; annualised = 12 x monthly (common practice, no
source).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from allowance.calibrate import calibrate
from allowance.calibrate.loss_rates import COLUMNS

# Three months of a two-loan auto book and a one-line card book. Loan A is written off in
# February (1,000 charged off); loan B pays normally; in March A's debt brings 150 recovered
# and 50 from a debt sale. The card line is written off on a bankruptcy in March (600).
HISTORY = """loan_id,segment,month,balance,days_past_due,charge_off,bankruptcy_loss,recoveries,asset_sales,paid_off
A,auto,2026-01,1000.00,95,,,,,
B,auto,2026-01,3000.00,0,,,,,
A,auto,2026-02,0,125,1000.00,,,,
B,auto,2026-02,2900.00,0,,,,,
A,auto,2026-03,0,125,,,150.00,50.00,
B,auto,2026-03,2800.00,0,,,,,
C,cards,2026-01,500.00,0,,,,,
C,cards,2026-02,600.00,40,,,,,
C,cards,2026-03,0,70,,600.00,,,
"""


@pytest.fixture(scope="module")
def rates(tmp_path_factory):
    path = tmp_path_factory.mktemp("loss") / "history.csv"
    path.write_text(HISTORY)
    return calibrate(path, {"lgd_workout_months": 1}).loss_rates


def _row(table: pd.DataFrame, segment: str, month: str) -> pd.Series:
    return table[(table["segment"] == segment) & (table["month"] == month)].iloc[0]


def test_columns_are_the_contract(rates):
    assert list(rates.table.columns) == list(COLUMNS)


def test_february_auto_charge_off_over_januarys_balance(rates):
    row = _row(rates.table, "auto", "2026-02")
    assert row["opening_balance"] == 4000.00  # 1,000 + 3,000 at the end of January
    assert row["charge_offs"] == 1000.00 and row["gross_credit_loss"] == 1000.00
    assert row["net_credit_loss"] == 1000.00
    assert row["gcl_rate"] == pytest.approx(0.25, abs=1e-15)  # 1,000 / 4,000
    assert row["gcl_rate_annualised"] == pytest.approx(3.0, abs=1e-14)


def test_march_recoveries_and_sales_make_a_negative_net_loss(rates):
    row = _row(rates.table, "auto", "2026-03")
    assert row["opening_balance"] == 2900.00  # A's balance is 0 after the write-off
    assert row["gross_credit_loss"] == 0.0
    assert row["recoveries"] == 150.00 and row["asset_sales"] == 50.00
    assert row["net_credit_loss"] == -200.00  # 0 - 150 - 50
    assert row["ncl_rate"] == pytest.approx(-200 / 2900, abs=1e-15)


def test_bankruptcy_losses_are_gross_losses(rates):
    row = _row(rates.table, "cards", "2026-03")
    assert row["bankruptcy_losses"] == 600.00 and row["charge_offs"] == 0.0
    assert row["gross_credit_loss"] == 600.00 and row["net_credit_loss"] == 600.00
    assert row["opening_balance"] == 600.00
    assert row["gcl_rate"] == pytest.approx(1.0, abs=1e-15)


def test_identities_hold_on_every_row(rates):
    t = rates.table
    np.testing.assert_allclose(t["gross_credit_loss"], t["charge_offs"] + t["bankruptcy_losses"], rtol=0, atol=1e-9)
    np.testing.assert_allclose(t["net_credit_loss"], t["gross_credit_loss"] - t["recoveries"] - t["asset_sales"],
                               rtol=0, atol=1e-9)
    np.testing.assert_allclose(t["gcl_rate"], t["gross_credit_loss"] / t["opening_balance"], rtol=1e-15)
    np.testing.assert_allclose(t["ncl_rate_annualised"], 12 * t["ncl_rate"], rtol=1e-15)


def test_the_first_month_has_no_row_for_want_of_an_opening_balance(rates):
    assert set(rates.table["month"]) == {"2026-02", "2026-03"}


def test_window_averages_are_ratios_of_sums(rates):
    auto = rates.averages.set_index("segment").loc["auto"]
    assert auto["gross_credit_loss"] == 1000.0 and auto["opening_balance"] == 6900.0
    assert auto["gcl_rate"] == pytest.approx(1000 / 6900, abs=1e-15)
    assert auto["ncl_rate"] == pytest.approx((1000 - 200) / 6900, abs=1e-15)
