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


# --------------------------------------------------------------------------------------
# Through the engine: the loop's passes at the PD at purchase (R, Q)
# --------------------------------------------------------------------------------------


def _engine_book(rows: list[dict]):
    """A small accepted tape of auto loans (invented), each row's fields over the defaults."""
    import pandas as pd

    from allowance.schemas import OPTIONAL_COLUMNS, LoanRecord

    frame = pd.DataFrame([{
        "loan_id": f"P{i}", "segment": "auto", "repayment": "level",
        "origination_date": pd.Timestamp(r.get("bought", "2026-09-30")),
        "maturity_date": pd.Timestamp(r.get("maturity", "2031-09-30")), "balance": r.get("balance", 20_000.0),
        "interest_rate": 0.08, "days_past_due": r.get("dpd", 0),
    } for i, r in enumerate(rows)])
    for c in OPTIONAL_COLUMNS:
        frame[c] = False if LoanRecord.model_fields[c].annotation is bool else np.nan
    for i, r in enumerate(rows):
        for key in ("credit_impaired_at_purchase", "pd_12m_at_origination", "pd_12m_current",
                    "lifetime_ecl_at_purchase", "credit_adjusted_eir"):
            if key in r:
                frame.loc[i, key] = r[key]
    frame["source_row"] = np.arange(len(frame)) + 2
    return frame


def _engine_run(tape, as_of="2026-09-30"):
    import tomllib

    from allowance.engine import run

    config = load_assumptions(tomllib.loads(ASSUMPTIONS.replace("as_of = 2026-09-30", f"as_of = {as_of}")))
    return run(tape, config).loans.set_index("loan_id")


POCI = {"credit_impaired_at_purchase": True, "pd_12m_at_origination": 0.2, "pd_12m_current": 0.2,
        "credit_adjusted_eir": 0.14}


def test_engine_books_nothing_for_a_poci_loan_bought_on_the_reporting_date():
    # IFRS 9 5.5.13: no allowance at purchase. CECL (ASC 326-20-30-13): the full lifetime ECL,
    # all of it a gross-up of amortised cost, none of it provision.
    loans = _engine_run(_engine_book([POCI, {**POCI, "dpd": 120}]))
    assert loans["ecl_ifrs9"].tolist() == [0.0, 0.0]
    assert (loans["ecl_cecl"] > 0).all()
    assert loans["pcd_gross_up"].tolist() == loans["ecl_cecl"].tolist()
    assert loans["discount_rate_ifrs9"].tolist() == [0.14, 0.14]  # the credit-adjusted EIR (B5.5.45)


def test_engine_unchanged_risk_a_year_on_is_no_gain_from_paydown():
    # bought 2025-09-30 at a 20 % PD, the purchase ECL the model's own then (blank: measured
    # when bought in the period; here given as what that run booked), the same PD a year on
    bought = _engine_run(_engine_book([{**POCI, "bought": "2025-09-30", "balance": 25_000.0}]), "2025-09-30")
    e0 = float(bought["purchase_ecl_carried_ifrs9"].iloc[0])  # Q on the purchase date
    assert bought["ecl_ifrs9"].iloc[0] == 0.0
    # a year on: the balance is what the schedule left (npf.fv), the risk unchanged
    payment = float(npf.pmt(0.08 / 12, 72, -25_000.0))
    balance = round(-float(npf.fv(0.08 / 12, 12, -payment, 25_000.0)), 2)
    later = _engine_run(_engine_book([{**POCI, "bought": "2025-09-30", "balance": balance,
                                       "lifetime_ecl_at_purchase": round(e0, 2)}]))
    assert abs(later["ecl_ifrs9"].iloc[0]) <= 0.05  # not -(E0 - today's ECL): no gain from paydown
    assert later["ecl_lifetime"].iloc[0] < e0 - 100  # the naive comparison would book that gain
    # risk worse since purchase (current PD 30 %): the allowance is the extra lifetime ECL
    worse = _engine_run(_engine_book([{**POCI, "bought": "2025-09-30", "balance": balance, "pd_12m_current": 0.3,
                                       "lifetime_ecl_at_purchase": round(e0, 2)}]))
    assert worse["ecl_ifrs9"].iloc[0] == pytest.approx(worse["ecl_lifetime"].iloc[0] - later["ecl_lifetime"].iloc[0],
                                                       abs=0.1)


def test_engine_uses_the_loans_own_pd():
    # the segment's pool PD is 2 %; a loan scored at 6 % carries about three times the ECL, and
    # its reported 12-month PD is its own (a flat hazard within the year: exact)
    tape = _engine_book([{"pd_12m_current": 0.02}, {"pd_12m_current": 0.06}, {}])
    loans = _engine_run(tape)
    assert loans["pd_12m"].round(6).tolist() == [0.02, 0.06, 0.02]
    assert loans.loc["P0", "ecl_cecl"] == loans.loc["P2", "ecl_cecl"]
    assert 2.8 < loans.loc["P1", "ecl_cecl"] / loans.loc["P0", "ecl_cecl"] < 3.2
