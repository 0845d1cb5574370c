"""Purchased or originated credit-impaired assets: the allowance is the change since purchase.

Sources: IFRS 9 5.5.13-5.5.14 (no allowance at purchase; the cumulative change in lifetime
ECL afterwards), B5.5.45 (credit-adjusted EIR); ASC 326-20-30-13 (PCD gross-up). Balances
are checked against numpy-financial.
"""

from __future__ import annotations

from datetime import date
from pathlib import Path

import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from allowance.intake import load_assumptions, read_tape
from allowance.poci import (
    period_start,
    poci_allowance,
    purchase_balance,
    purchase_benchmark,
    purchased_in_period,
)

ASSUMPTIONS = """
[run]
as_of = 2026-09-30
frameworks = ["ifrs9", "cecl"]

[segments.auto]
pd_12m = 0.02
lgd = 0.4

[ifrs9]
sicr_pd_ratio = 2.0
sicr_pd_measure = "12_month"

[cecl]
reasonable_supportable_months = 12

[scenarios.base]
weight = 1.0
"""

HEADER = ("loan_id,segment,repayment,origination_date,maturity_date,balance,interest_rate,days_past_due,"
          "credit_impaired_at_purchase,lifetime_ecl_at_purchase,credit_adjusted_eir")


def test_the_reporting_period():
    # a quarter ending at a month end starts after the previous quarter end
    assert period_start(date(2026, 9, 30), 3) == date(2026, 6, 30)
    assert period_start(date(2026, 6, 30), 3) == date(2026, 3, 31)
    assert period_start(date(2026, 3, 31), 1) == date(2026, 2, 28)
    bought = np.array(["2026-06-30", "2026-07-01", "2026-09-30", "2026-10-01"], dtype="datetime64[D]")
    assert purchased_in_period(bought, date(2026, 9, 30), 3).tolist() == [False, True, True, False]


@settings(max_examples=60, deadline=None, derandomize=True)
@given(st.floats(1_000, 1_000_000), st.floats(0.001, 0.15), st.integers(12, 360), st.data())
def test_purchase_balance_inverts_the_schedule(amount, annual_rate, term, data):
    # numpy-financial: the balance after k level payments is npf.fv(r, k, -pmt, amount)
    k = data.draw(st.integers(0, term - 1))
    r = annual_rate / 12
    payment = float(npf.pmt(r, term, -amount))
    today = -float(npf.fv(r, k, -payment, amount))
    assert purchase_balance(today, r, payment, k) == pytest.approx(amount, rel=1e-9)


def test_interest_only_months_leave_the_balance_unchanged():
    # paying exactly the interest: the balance at purchase is today's
    assert float(purchase_balance(50_000.0, 0.005, 250.0, 18)) == pytest.approx(50_000.0)


def test_poci_bought_on_the_reporting_date_has_no_allowance():
    # IFRS 9 5.5.13: at purchase the lifetime ECL is in the price; the allowance is 0.00.
    # Bought in the period with a blank purchase ECL: measured at the purchase date (Q).
    ecl_now = np.array([[174.99, 120.0, 260.0]])  # three scenarios
    weighted = float((ecl_now @ [0.5, 0.3, 0.2])[0])
    out = poci_allowance(ecl_now, [np.nan], [weighted], [weighted])
    assert np.round(out @ [0.5, 0.3, 0.2], 2).tolist() == [0.0]


def test_unchanged_risk_a_year_later_is_no_gain_from_paydown():
    # IFRS 9 5.5.14: the allowance is the change in lifetime ECL since purchase. The model
    # gave 174.99 at purchase on the purchased balance; a year on, the loan has paid down and
    # the same risk gives 120.40 today. Comparing 120.40 with 174.99 would book a gain of
    # 54.59 from paydown alone; carried forward, the purchase ECL is 120.40 and the allowance 0.
    assert poci_allowance([[120.40]], [174.99], [120.40], [174.99]).round(2).tolist() == [[0.0]]
    # risk worse today (lifetime ECL 150.00 at the current PD): the change is 29.60
    assert poci_allowance([[150.00]], [174.99], [120.40], [174.99]).round(2).tolist() == [[29.60]]
    # risk better: IFRS 9 5.5.14 books the favourable change, a negative allowance
    assert poci_allowance([[100.00]], [174.99], [120.40], [174.99]).round(2).tolist() == [[-20.40]]


def test_a_purchase_ecl_above_the_models_is_carried_in_proportion():
    # E0 = 200 where the model said 174.99: 200 x 120.40 / 174.99 = 137.607 still expected
    assert purchase_benchmark([200.0], [120.40], [174.99]).round(3).tolist() == [137.608]


def _read(tmp_path: Path, *rows: str):
    (tmp_path / "a.toml").write_text(ASSUMPTIONS, encoding="utf-8")
    (tmp_path / "t.csv").write_text("\n".join([HEADER, *rows]) + "\n", encoding="utf-8")
    return read_tape(tmp_path / "t.csv", load_assumptions(tmp_path / "a.toml"))


def test_poci_rows_need_their_rate_and_purchase_ecl(tmp_path):
    result = _read(
        tmp_path,
        "P1,auto,level,2025-01-15,2030-01-15,9000,0.08,0,true,175.00,0.21",  # complete
        "P2,auto,level,2025-01-15,2030-01-15,9000,0.08,0,true,,0.21",  # bought before the period
        "P3,auto,level,2026-08-01,2031-08-01,9000,0.08,0,true,,0.21",  # bought in the period: measured
        "P4,auto,level,2025-01-15,2030-01-15,9000,0.08,0,true,175.00,",  # no credit-adjusted EIR
        "L5,auto,level,2025-01-15,2030-01-15,9000,0.08,0,false,,",  # not POCI: neither needed
        "P6,auto,level,2026-06-30,2031-06-30,9000,0.08,0,true,,0.21",  # bought on the last period end
    )
    assert result.accepted["loan_id"].tolist() == ["P1", "P3", "L5"]
    rejected = result.rejected.set_index("loan_id")
    assert rejected.loc["P2", "reason_codes"] == "missing_value"
    assert "lifetime_ecl_at_purchase is blank" in rejected.loc["P2", "reasons"]
    assert "2026-06-30" in rejected.loc["P6", "reasons"]
    assert "credit_adjusted_eir is blank" in rejected.loc["P4", "reasons"]
    assert result.rows_read == len(result.accepted) + len(result.rejected)
    findings = result.findings.set_index("loan_id")
    assert findings.loc["P2", "column"] == "lifetime_ecl_at_purchase"
    assert findings.loc["P4", "column"] == "credit_adjusted_eir"


def test_cecl_only_runs_need_neither(tmp_path):
    text = ASSUMPTIONS.replace('frameworks = ["ifrs9", "cecl"]', 'frameworks = ["cecl"]')
    (tmp_path / "a.toml").write_text(text, encoding="utf-8")
    (tmp_path / "t.csv").write_text(HEADER + "\nP2,auto,level,2025-01-15,2030-01-15,9000,0.08,0,true,,\n",
                                    encoding="utf-8")
    assert read_tape(tmp_path / "t.csv", load_assumptions(tmp_path / "a.toml")).rows_rejected == 0
