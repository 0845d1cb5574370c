"""CECL run-off of revolving lines: the measured balance runs off at the payment rate, to its end.

Check values: the closed-form geometric sum of a balance paying down a share p a month under a
constant monthly hazard h (common practice, no source),

    ECL = LGD · B · h · Σ_{t≥1} q^{t-1} = LGD · B · h / (1 − q),  q = (1 − h)(1 − p),

and its partial sum over n months, LGD · B · h · (1 − q^n) / (1 − q).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings

from allowance import cashflows, engine
from allowance.schemas import OPTIONAL_COLUMNS, Assumptions, LoanRecord, RunConfig
from tests.strategies import runoff_lines

B, P, LGD, PD_12M = 1_000.0, 0.06, 0.8, 0.05
H = 1.0 - (1.0 - PD_12M) ** (1.0 / 12.0)  # constant monthly hazard of a 12-month PD (common practice, no source)
Q = (1.0 - H) * (1.0 - P)


def _card_matrix():
    """A monthly card roll-rate matrix: a current account rolls 3 % a month, each later bucket
    90 % on to the next (invented, for the checks below)."""
    from allowance.schemas import TransitionMatrix

    states = ["current", "dpd_1_29", "dpd_30_59", "dpd_60_89", "dpd_90_119", "dpd_120_149", "dpd_150_179",
              "charge_off", "paid_off"]
    rows = [[0.95, 0.03, 0, 0, 0, 0, 0, 0, 0.02], [0.5, 0.2, 0.3, 0, 0, 0, 0, 0, 0],
            [0.2, 0.1, 0.1, 0.6, 0, 0, 0, 0, 0], [0.1, 0, 0, 0.1, 0.8, 0, 0, 0, 0],
            [0.05, 0, 0, 0, 0.05, 0.9, 0, 0, 0], [0.05, 0, 0, 0, 0, 0.05, 0.9, 0, 0],
            [0.05, 0, 0, 0, 0, 0, 0.05, 0.9, 0], [0, 0, 0, 0, 0, 0, 0, 1, 0], [0, 0, 0, 0, 0, 0, 0, 0, 1]]
    return TransitionMatrix(states=states, probabilities=rows)


def _card(days_past_due: int = 0, balance: float = B) -> pd.DataFrame:
    frame = pd.DataFrame({
        "loan_id": ["CARD"], "segment": ["cards"], "repayment": ["revolving"],
        "origination_date": pd.to_datetime(["2022-03-01"]), "maturity_date": pd.to_datetime([None]),
        "balance": [balance], "interest_rate": [0.0], "days_past_due": [days_past_due],
    })
    for c in OPTIONAL_COLUMNS:
        frame[c] = False if LoanRecord.model_fields[c].annotation is bool else np.nan
    frame["credit_limit"] = 5_000.0
    frame["source_row"] = [2]
    return frame


def _config(cecl: dict | None = None, segment: dict | None = None) -> RunConfig:
    cecl = {"reasonable_supportable_months": 12, "reversion_months": 0,
            "payment_allocation": "measured_balance_first", **(cecl or {})}
    cards = {"pd_12m": PD_12M, "lgd": LGD, "ccf": 0.0, "behavioural_life_months": 36, "payment_rate": P,
             "unconditionally_cancellable": True, **(segment or {})}
    return RunConfig(assumptions=Assumptions.model_validate({
        "run": {"as_of": "2026-09-30", "frameworks": ["cecl"], "currency": "USD"},
        "segments": {"cards": cards}, "cecl": cecl,
        "scenarios": {"base": {"weight": 1.0}},
    }))


def _cecl(tape: pd.DataFrame, config: RunConfig) -> float:
    return float(engine.run(tape, config).loans["ecl_cecl_modelled"].iloc[0])


def test_a_card_runs_off_to_its_end_the_closed_form_geometric_sum():
    # LGD · B · h / (1 − (1 − h)(1 − p)) (common practice, no source): not the 36-month cut
    whole = LGD * B * H / (1.0 - Q)
    cut_at_36 = LGD * B * H * (1.0 - Q**36) / (1.0 - Q)
    got = _cecl(_card(), _config())
    assert got == pytest.approx(whole, abs=0.01)
    assert got - cut_at_36 > 0.04 * whole  # the tail a behavioural-life cut leaves out


def test_a_stated_floor_stops_the_run_off_there():
    # 1 % floor: n = ceil(ln 0.01 / ln 0.94) = 75 months, the partial geometric sum (common practice, no source)
    n = math.ceil(math.log(0.01) / math.log(1.0 - P))
    assert n == 75
    got = _cecl(_card(), _config({"runoff_floor": 0.01}))
    assert got == pytest.approx(LGD * B * H * (1.0 - Q**n) / (1.0 - Q), abs=0.005)  # rounded to the cent


def test_pro_rata_allocation_retires_the_measured_balance_at_its_share_of_each_payment():
    # half of each 6 % payment retires the measured balance: it falls 3 % a month (ASC 326-20-30-6
    # leaves the allocation to the entity's stated policy; from memory)
    q = (1.0 - H) * (1.0 - 0.5 * P)
    got = _cecl(_card(), _config({"payment_allocation": "pro_rata", "measured_payment_share": 0.5}))
    assert got == pytest.approx(LGD * B * H / (1.0 - q), abs=0.01)


def test_the_matrix_paid_off_state_is_not_counted_on_top_of_the_payment_rate(tmp_path):
    # a roll-rate matrix whose current row pays off 2 % of the accounts a month: the payment rate
    # already holds those payments, so the CECL run-off equals the same matrix's charge-offs on
    # the run-off balance with no payoff removal (common practice, no source)
    from allowance.curves.roll_rates import matrix_term_structure

    matrix = _card_matrix()
    segment = {"pd_12m": None, "transition_matrix": matrix, "charge_off_dpd": 180}
    got = _cecl(_card(), _config(segment=segment))
    pd_t = matrix_term_structure("cards", matrix, 180, 1200).marginal[0]
    survival = np.concatenate([[1.0], np.cumprod(1.0 - pd_t)[:-1]])
    balance = B * (1.0 - P) ** np.arange(1200)
    assert got == pytest.approx(LGD * float(np.sum(survival * pd_t * balance)), abs=0.01)


def test_a_delinquent_card_pays_nothing_on_its_way_to_charge_off():
    # 95 days past due, charge-off at 180: ceil((180 − 95) / 30) = 3 months without a payment,
    # then the run-off (common practice, no source); its month-3 exposure is the whole balance
    from allowance.cashflows import age_months
    from allowance.ecl import loan_months
    from allowance.engine import prepare, tape_months
    from allowance.engine.chunk import chunk_inputs

    cfg = _config(segment={"pd_12m": None, "transition_matrix": _card_matrix(), "charge_off_dpd": 180})
    card = _card(days_past_due=95)
    prep = prepare(cfg, tape_months(card, cfg), int(age_months(card["origination_date"], pd.Timestamp("2026-09-30"))[0]))
    months = loan_months(chunk_inputs(card, prep).kernel, 0, 0, 0)
    assert months["ead"].iloc[:3].tolist() == [B, B, B]
    assert months["ead"].iloc[3] == pytest.approx(B)  # the first payment is made in month 4
    assert months["ead"].iloc[4] == pytest.approx(B * (1.0 - P))
    # month-3 charge-off on the whole balance: the classic roll-rate product 0.9 x 0.9 x 0.9 (common
    # practice, no source), within the 0.1 % of accounts that cure and pay off on the way (the
    # matrix's PD is conditional on the account being open; the payment rate removes the payoffs)
    month_3 = months["ecl"].iloc[:3].sum()
    assert month_3 == pytest.approx(LGD * B * 0.9**3, rel=2e-3)


@settings(max_examples=60, deadline=None)
@given(runoff_lines())
def test_the_run_off_never_rises_never_goes_negative_and_ends_below_its_floor(line):
    balance, paydown, floor = line["balance"], line["paydown"], line["floor"]
    n = int(cashflows.runoff_months(np.array([balance]), np.array([paydown]), floor, 1200)[0])
    s = cashflows.schedule("revolving", balance, 0.0, n, paydown=paydown)
    closing = s["closing_balance"].to_numpy()
    opening = s["opening_balance"].to_numpy()
    assert (closing >= 0.0).all() and (np.diff(np.concatenate([[balance], closing])) <= 1e-9).all()
    assert 1 <= n <= 1200
    if 0.0 < paydown and n < 1200 and balance > cashflows.HALF_CENT:
        # it ends in the first month the balance is below the floor (or half a cent)
        assert closing[-1] <= max(floor * balance, cashflows.HALF_CENT) * (1 + 1e-9)
        if n > 1:
            assert opening[-1] >= max(floor * balance, cashflows.HALF_CENT) * (1 - 1e-9)


CLI_ASSUMPTIONS = f"""
[run]
as_of = 2026-09-30
frameworks = ["ifrs9", "cecl"]
currency = "USD"

[segments.cards]
pd_12m = {PD_12M}
lgd = {LGD}
ccf = 0.0
behavioural_life_months = 36
payment_rate = {P}
unconditionally_cancellable = true

[ifrs9]
sicr_pd_ratio = 2.0
sicr_pd_measure = "12_month"

[cecl]
reasonable_supportable_months = 12
reversion_months = 0
payment_allocation = "measured_balance_first"

[scenarios.base]
weight = 1.0
"""


@pytest.mark.slow
def test_the_command_line_runs_a_card_off_under_cecl_and_holds_it_under_ifrs9(tmp_path):
    import subprocess
    import sys

    tape = tmp_path / "tape.csv"
    tape.write_text("loan_id,segment,repayment,origination_date,maturity_date,balance,interest_rate,days_past_due,"
                    "credit_limit\nCARD,cards,revolving,2022-03-01,,1000.00,0,0,5000\n", encoding="utf-8")
    assumptions = tmp_path / "a.toml"
    assumptions.write_text(CLI_ASSUMPTIONS, encoding="utf-8")
    done = subprocess.run([sys.executable, "-m", "allowance", "run", str(tape), "--assumptions", str(assumptions),
                           "--out", str(tmp_path / "out")], capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stdout + done.stderr
    loan = pd.read_csv(tmp_path / "out" / "loans.csv").iloc[0]
    # CECL: the closed-form geometric sum to the end (common practice, no source), 198 months
    assert loan["ecl_cecl"] == pytest.approx(LGD * B * H / (1.0 - Q), abs=0.01)
    assert loan["horizon_months_cecl"] == math.ceil(math.log(0.005 / B) / math.log(1.0 - P))
    # IFRS 9 stage 1: 12 months of the held balance, discounted at the contract rate 0 (IFRS 9 5.5.5)
    assert loan["ecl_ifrs9"] == pytest.approx(LGD * B * PD_12M, abs=0.01)
