"""HELOCs: a draw period (interest only, the undrawn limit is exposure), then level amortisation.

Check values from numpy-financial (``pmt``, ``fv``): the repayment period's level payment and
the balance after each payment; the exposure add-on is the framework's CCF × undrawn (IFRS 9
B5.5.31 and B5.5.40; CECL for a commitment not unconditionally cancellable, ASC 326-20-30-11).
"""

from __future__ import annotations

import numpy as np
import numpy_financial as npf
import pandas as pd
import pytest

from allowance import cashflows, engine
from allowance.cashflows import age_months
from allowance.ecl import loan_months
from allowance.engine import prepare, tape_months
from allowance.engine.chunk import chunk_inputs
from allowance.schemas import OPTIONAL_COLUMNS, Assumptions, LoanRecord, RunConfig

B, LIMIT, RATE, CCF = 60_000.0, 100_000.0, 0.072, 0.5


def test_the_schedule_is_interest_only_in_the_draw_period_then_the_numpy_financial_payment():
    months, draw = 240, 60
    s = cashflows.schedule("heloc", B, RATE, months, interest_only_months_left=draw)
    assert (s["scheduled_principal"].iloc[:draw] == 0.0).all()
    assert s["interest"].iloc[:draw].to_numpy() == pytest.approx(B * RATE / 12)
    pay = float(npf.pmt(RATE / 12, months - draw, -B))  # numpy-financial
    paid = (s["interest"] + s["scheduled_principal"]).iloc[draw:].to_numpy()
    assert paid == pytest.approx(pay, rel=1e-12)
    k = np.arange(1, months - draw + 1)
    assert s["closing_balance"].iloc[draw:].to_numpy() == pytest.approx(
        npf.fv(RATE / 12, k, pay, -B), abs=1e-6)  # numpy-financial
    assert s["closing_balance"].iloc[-1] == pytest.approx(0.0, abs=1e-6)


def _book(draw_period_months: float = 120.0) -> pd.DataFrame:
    frame = pd.DataFrame({
        "loan_id": ["HEL"], "segment": ["heloc"], "repayment": ["heloc"],
        "origination_date": pd.to_datetime(["2022-09-30"]), "maturity_date": pd.to_datetime(["2042-09-30"]),
        "balance": [B], "interest_rate": [RATE], "days_past_due": [0],
    })
    for c in OPTIONAL_COLUMNS:
        frame[c] = False if LoanRecord.model_fields[c].annotation is bool else np.nan
    frame["credit_limit"] = LIMIT
    frame["draw_period_months"] = draw_period_months
    frame["source_row"] = [2]
    return frame


def _config() -> RunConfig:
    return RunConfig(assumptions=Assumptions.model_validate({
        "run": {"as_of": "2026-09-30", "frameworks": ["ifrs9", "cecl"], "currency": "USD"},
        "segments": {"heloc": {"pd_12m": 0.01, "lgd": 0.4, "ccf": CCF, "unconditionally_cancellable": False}},
        "ifrs9": {"sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month"},
        "cecl": {"reasonable_supportable_months": 12, "reversion_months": 0},
        "scenarios": {"base": {"weight": 1.0}},
    }))


@pytest.mark.parametrize("f", [0, 1], ids=["ifrs9", "cecl"])
def test_the_engine_adds_the_undrawn_limit_in_the_draw_period_then_amortises_to_maturity(f):
    # aged 48 months of a 120-month draw period: 72 months of draw left, then 120 of repayment
    book, cfg = _book(), _config()
    prep = prepare(cfg, tape_months(book, cfg), int(age_months(book["origination_date"], pd.Timestamp("2026-09-30"))[0]))
    months = loan_months(chunk_inputs(book, prep).kernel, 0, f, 0)
    assert len(months) == 192
    ead = months["ead"].to_numpy()
    assert ead[:72] == pytest.approx(B + CCF * (LIMIT - B))  # drawn + CCF x undrawn, held (interest only)
    pay = float(npf.pmt(RATE / 12, 120, -B))  # numpy-financial
    assert ead[72:] == pytest.approx(npf.fv(RATE / 12, np.arange(120), pay, -B), rel=1e-9)  # no undrawn limit left


def test_a_heloc_in_its_repayment_period_has_no_undrawn_exposure():
    book = _book(draw_period_months=36.0)  # the draw period ended a year ago
    loans = engine.run(book, _config()).loans
    assert loans["ead_ifrs9"].iloc[0] == loans["ead_cecl"].iloc[0] == B
    # and it amortises over what is left of its term: 192 months at the numpy-financial payment
    prep = prepare(_config(), tape_months(book, _config()), 48)
    ead = loan_months(chunk_inputs(book, prep).kernel, 0, 0, 0)["ead"].to_numpy()
    assert ead == pytest.approx(npf.fv(RATE / 12, np.arange(192), float(npf.pmt(RATE / 12, 192, -B)), -B), rel=1e-9)


@pytest.mark.slow
def test_the_command_line_checks_and_runs_a_heloc(tmp_path):
    import subprocess
    import sys

    header = ("loan_id,segment,repayment,origination_date,maturity_date,balance,interest_rate,days_past_due,"
              "credit_limit,draw_period_months")
    tape = tmp_path / "tape.csv"
    tape.write_text(f"{header}\nHEL,heloc,heloc,2022-09-30,2042-09-30,60000.00,0.072,0,100000,120\n"
                    "BAD,heloc,heloc,2022-09-30,2042-09-30,60000.00,0.072,0,100000,\n", encoding="utf-8")
    assumptions = tmp_path / "a.toml"
    assumptions.write_text("""
[run]
as_of = 2026-09-30
frameworks = ["ifrs9", "cecl"]
currency = "USD"

[segments.heloc]
pd_12m = 0.01
lgd = 0.4
ccf = 0.5
unconditionally_cancellable = false

[ifrs9]
sicr_pd_ratio = 2.0
sicr_pd_measure = "12_month"

[cecl]
reasonable_supportable_months = 12
reversion_months = 0

[scenarios.base]
weight = 1.0
""", encoding="utf-8")
    command = [sys.executable, "-m", "allowance"]
    check = subprocess.run([*command, "check", str(tape), "--assumptions", str(assumptions)],
                           capture_output=True, text=True, timeout=600)
    assert check.returncode == 1 and "line 3" in check.stdout and "draw_period_months is blank" in check.stdout, (
        check.stdout + check.stderr)
    done = subprocess.run([*command, "run", str(tape), "--assumptions", str(assumptions), "--out", str(tmp_path / "out")],
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stdout + done.stderr
    loan = pd.read_csv(tmp_path / "out" / "loans.csv").set_index("loan_id").loc["HEL"]
    # drawn + CCF x undrawn at the as-of date, in both frameworks (IFRS 9 B5.5.31; ASC 326-20-30-11)
    assert loan["ead_ifrs9"] == loan["ead_cecl"] == B + CCF * (LIMIT - B)
    assert loan["horizon_months_cecl"] == 192
    rejected = pd.read_csv(tmp_path / "out" / "rejected.csv")
    assert rejected["loan_id"].tolist() == ["BAD"]
