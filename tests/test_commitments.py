"""Revolving lines, loan commitments and guarantees: the undrawn exposure as its own figure.

The closed forms below use a flat 12-month PD (constant monthly hazard), no prepayment, a 0 %
contract rate (IFRS 9 discounts at the EIR: 0 here; CECL does not discount) and one scenario,
so the expected loss of a constant exposure E over n years is (1 - (1 - PD_12m)^n) × LGD × E
(IFRS 9 5.5.17 and B5.5.31 with the definition of expected credit losses, Appendix A;
ASC 326-20-30-11 for a commitment the lender cannot cancel).
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings

from allowance import engine
from allowance.exceptions import AssumptionsError
from allowance.schemas import OPTIONAL_COLUMNS, Assumptions, LoanRecord, RunConfig
from tests.strategies import commitment_books

PD, LGD, CCF = 0.05, 0.8, 0.5


def _config(cancellable: bool | None = True, **segment) -> RunConfig:
    cards = {"pd_12m": PD, "lgd": LGD, "ccf": CCF, "behavioural_life_months": 24, "payment_rate": 0.05}
    if cancellable is not None:
        cards["unconditionally_cancellable"] = cancellable
    cards.update(segment)
    return RunConfig(assumptions=Assumptions.model_validate({
        "run": {"as_of": "2026-09-30", "frameworks": ["ifrs9", "cecl"]},
        "segments": {"cards": {k: v for k, v in cards.items() if v is not None}},
        "ifrs9": {"sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month"},
        "cecl": {"reasonable_supportable_months": 12, "reversion_months": 6,
                 "payment_allocation": "measured_balance_first"},
        "scenarios": {"base": {"weight": 1.0}},
    }))


def _row(balance: float, limit: float, *, facility=None, end=None, dpd: int = 0, defaulted: bool = False,
         repayment: str = "revolving") -> dict:
    return {"balance": balance, "credit_limit": limit, "facility_type": facility, "commitment_end_date": end,
            "days_past_due": dpd, "defaulted": defaulted, "repayment": repayment}


def _tape(*rows: dict) -> pd.DataFrame:
    n = len(rows)
    frame = pd.DataFrame({
        "loan_id": [f"K{i}" for i in range(n)], "segment": "cards",
        "repayment": [r["repayment"] for r in rows], "origination_date": pd.Timestamp("2024-03-15"),
        "maturity_date": pd.NaT, "balance": [r["balance"] for r in rows], "interest_rate": 0.0,
        "days_past_due": [r["days_past_due"] for r in rows],
    })
    for c in OPTIONAL_COLUMNS:
        frame[c] = False if LoanRecord.model_fields[c].annotation is bool else np.nan
    frame["credit_limit"] = [r["credit_limit"] for r in rows]
    frame["facility_type"] = pd.Series([r["facility_type"] for r in rows], dtype=object)
    frame["commitment_end_date"] = pd.to_datetime(pd.Series([r["commitment_end_date"] for r in rows]))
    frame["defaulted"] = [r["defaulted"] for r in rows]
    frame["source_row"] = np.arange(n) + 2
    return frame


def _loans(tape: pd.DataFrame, config: RunConfig) -> pd.DataFrame:
    return engine.run(tape, config).loans


def test_undrawn_card_carries_ifrs9_ecl_all_undrawn_and_cecl_only_when_not_cancellable():
    # a card with nothing drawn and a 10,000 limit (the case)
    card = _tape(_row(0.0, 10_000.0, end="2028-09-30"))
    cancellable = _loans(card, _config(True)).iloc[0]
    # IFRS 9 stage 1: 12-month ECL = PD × LGD × CCF × undrawn = 0.05 × 0.8 × 5,000 (B5.5.31)
    assert cancellable["ecl_ifrs9_modelled"] == pytest.approx(200.0, abs=0.01)
    assert cancellable["ecl_ifrs9_undrawn"] == cancellable["ecl_ifrs9_modelled"] > 0
    assert cancellable["ecl_ifrs9_drawn"] == 0
    assert cancellable["provision_ifrs9"] == cancellable["ecl_ifrs9_modelled"]  # IFRS 9 5.5.20, IFRS 7 B8E
    # CECL: an unconditionally cancellable commitment carries none (ASC 326-20-30-11)
    assert cancellable["ecl_cecl_modelled"] == 0 and cancellable["provision_cecl"] == 0
    binding = _loans(card, _config(False)).iloc[0]
    # not cancellable: a liability over the contractual commitment period, 24 months to 2028-09-30
    # (ASC 326-20-30-11): (1 - 0.95^2) × 0.8 × 5,000 = 390
    assert binding["horizon_months_cecl"] == 24
    assert binding["ecl_cecl_modelled"] == pytest.approx(390.0, abs=0.01)
    assert binding["ecl_cecl_undrawn"] == binding["provision_cecl"] == binding["ecl_cecl_modelled"] > 0


def test_partly_drawn_line_splits_by_the_exposure_share():
    # IFRS 9 holds a line's drawn balance flat over its behavioural life, so each month's loss
    # splits in the ratio drawn : CCF × undrawn = 4,000 : 3,000 (pro rata by EAD: common
    # practice, no source); 12-month ECL = 0.05 × 0.8 × 7,000 = 280 -> 160 drawn, 120 undrawn
    loan = _loans(_tape(_row(4_000.0, 10_000.0)), _config(True)).iloc[0]
    assert loan["ead_ifrs9"] == 7_000.0
    assert loan["ecl_ifrs9_modelled"] == pytest.approx(280.0, abs=0.01)
    assert loan["ecl_ifrs9_undrawn"] == pytest.approx(120.0, abs=0.01)
    assert loan["ecl_ifrs9_drawn"] == pytest.approx(160.0, abs=0.01)
    assert loan["provision_ifrs9"] == loan["ecl_ifrs9_undrawn"]  # the drawn part is below the balance
    assert loan["ecl_cecl_undrawn"] == 0 == loan["provision_cecl"]  # cancellable (ASC 326-20-30-11)


def test_line_in_default_is_blocked_but_a_called_guarantee_is_not():
    book = _tape(_row(3_000.0, 10_000.0, dpd=120), _row(0.0, 10_000.0, facility="guarantee", end="2027-09-30",
                                                         defaulted=True, repayment="level"))
    loans = _loans(book, _config(False))
    line, guarantee = loans.iloc[0], loans.iloc[1]
    # a line in default draws no more: EAD = drawn (common practice, no source)
    assert line["stage"] == 3 and line["ead_ifrs9"] == line["ead_cecl"] == 3_000.0
    assert line["ecl_ifrs9_undrawn"] == 0 == line["ecl_cecl_undrawn"]
    # a guarantee whose holder has defaulted is called: PD = 1, ECL = LGD × CCF × amount = 4,000
    assert guarantee["ead_ifrs9"] == 5_000.0
    assert guarantee["ecl_ifrs9_modelled"] == pytest.approx(4_000.0, abs=0.01)
    assert guarantee["ecl_ifrs9_undrawn"] == guarantee["provision_ifrs9"] == guarantee["ecl_ifrs9_modelled"]


def test_standalone_commitment_runs_to_its_end_date():
    # 100,000 committed to 2028-09-30, CCF 0.5: exposure 50,000, nothing drawn (IFRS 9 5.5.19: the
    # contractual period of the commitment)
    loan = _loans(_tape(_row(0.0, 100_000.0, facility="commitment", end="2028-09-30", repayment="level")),
                  _config(False)).iloc[0]
    assert loan["remaining_months"] == 24 and loan["ead_ifrs9"] == 50_000.0
    # IFRS 9 stage 1: 0.05 × 0.8 × 50,000 = 2,000; CECL over 24 months: (1 - 0.95^2) × 0.8 × 50,000 = 3,900
    assert loan["ecl_ifrs9_modelled"] == pytest.approx(2_000.0, abs=0.01)
    assert loan["ecl_cecl_modelled"] == pytest.approx(3_900.0, abs=0.01)
    assert loan["ecl_ifrs9_undrawn"] == loan["ecl_ifrs9_modelled"]
    assert loan["ecl_cecl_undrawn"] == loan["provision_cecl"] == loan["ecl_cecl_modelled"]


def test_ccf_by_days_past_due_bucket():
    # 45 days past due falls in the 30-day bucket: EAD = 2,000 + 0.7 × 8,000 (the stated CCFs)
    book = _tape(_row(2_000.0, 10_000.0, dpd=45), _row(2_000.0, 10_000.0))
    loans = _loans(book, _config(True, ccf=None, ccf_by_dpd={"0": 0.3, "30": 0.7}))
    assert loans["ead_ifrs9"].tolist() == [7_600.0, 4_400.0]


def test_engine_refuses_unstated_cancellability():
    with pytest.raises(AssumptionsError, match="cards.*unconditionally_cancellable"):
        _loans(_tape(_row(1_000.0, 5_000.0)), _config(None))


@settings(max_examples=25, deadline=None)
@given(commitment_books())
def test_drawn_plus_undrawn_is_the_modelled_ecl(book):
    tape, config = book
    loans = engine.run(tape, config).loans
    cents = lambda c: np.rint(loans[c].to_numpy(float) * 100).astype(np.int64)  # noqa: E731
    off = tape["facility_type"].isin(["commitment", "guarantee"]).to_numpy()
    cancellable = tape["segment"].map(
        {n: bool(s.unconditionally_cancellable) for n, s in config.assumptions.segments.items()}).to_numpy()
    for fw in ("ifrs9", "cecl"):
        drawn, undrawn, modelled = cents(f"ecl_{fw}_drawn"), cents(f"ecl_{fw}_undrawn"), cents(f"ecl_{fw}_modelled")
        assert (drawn + undrawn == modelled).all()  # to the cent, every loan
        assert (modelled >= 0).all() and (undrawn >= 0).all() and (drawn >= 0).all()  # no POCI here
    # a funded line in default is blocked: EAD = drawn (with its accrued interest, [ifrs9] accrued_interest =
    # "all"), nothing undrawn (common practice, no source)
    blocked = (loans["stage"] == 3).to_numpy() & ~off
    drawn_exposure = (tape["balance"] + np.nan_to_num(tape["accrued_interest"])).to_numpy()
    assert np.allclose(loans["ead_ifrs9"].to_numpy()[blocked], drawn_exposure[blocked], atol=0.006)
    assert (cents("ecl_ifrs9_undrawn")[blocked] == 0).all()
    # CECL: nothing on the undrawn part of a cancellable commitment (ASC 326-20-30-11)
    assert (cents("ecl_cecl_undrawn")[cancellable] == 0).all() and (cents("provision_cecl")[cancellable] == 0).all()
    # IFRS 9: the undrawn part and any ECL above the drawn balance are a provision (5.5.20, IFRS 7 B8E)
    expected = cents("ecl_ifrs9_undrawn") + np.maximum(cents("ecl_ifrs9_drawn") - cents("balance"), 0)
    assert (cents("provision_ifrs9") == expected).all()


@pytest.mark.slow
def test_command_line_writes_the_split(tmp_path):
    tape = tmp_path / "tape.csv"
    tape.write_text(
        "loan_id,segment,repayment,origination_date,maturity_date,balance,interest_rate,days_past_due,"
        "credit_limit,facility_type,commitment_end_date\n"
        "C1,cards,revolving,2024-03-15,,0,0.19,0,10000,,\n"
        "C2,cards,revolving,2024-03-15,,4000,0.19,0,10000,funded,2027-09-30\n"
        "C3,cards,revolving,2024-03-15,,3000,0.19,120,10000,,\n"
        "G1,cards,level,2024-03-15,,0,0.02,0,250000,guarantee,2028-09-30\n"
        "M1,cards,level,2024-03-15,,0,0.05,0,100000,commitment,2027-03-31\n",
        encoding="utf-8")
    assumptions = tmp_path / "a.toml"
    assumptions.write_text(
        '[run]\nas_of = 2026-09-30\nframeworks = ["ifrs9", "cecl"]\ncurrency = "USD"\n\n'
        "[segments.cards]\npd_12m = 0.04\nlgd = 0.8\nccf = 0.5\nbehavioural_life_months = 24\n"
        "payment_rate = 0.05\nunconditionally_cancellable = false\n\n[ifrs9]\nsicr_pd_ratio = 2.0\nsicr_pd_measure = \"12_month\"\n\n"
        "[cecl]\nreasonable_supportable_months = 12\nreversion_months = 6\n"
        'payment_allocation = "measured_balance_first"\n\n[scenarios.base]\nweight = 1.0\n',
        encoding="utf-8")
    out = tmp_path / "out"
    done = subprocess.run([sys.executable, "-m", "allowance", "run", str(tape), "--assumptions", str(assumptions),
                           "--out", str(out), "--no-sensitivities"], capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stdout + done.stderr
    loans = pd.read_csv(out / "loans.csv").set_index("loan_id")
    for fw in ("ifrs9", "cecl"):
        cents = lambda c: np.rint(loans[c] * 100).astype(np.int64)  # noqa: E731
        assert (cents(f"ecl_{fw}_drawn") + cents(f"ecl_{fw}_undrawn") == cents(f"ecl_{fw}_modelled")).all()
        assert loans.loc[["C1", "G1", "M1"], f"ecl_{fw}_drawn"].eq(0).all()  # nothing drawn
        assert loans.loc[["C1", "G1", "M1"], f"provision_{fw}"].gt(0).all()  # not cancellable: 326-20-30-11
    assert loans.loc["C3", "ead_ifrs9"] == 3_000.0  # in default: blocked
    assert loans.loc["G1", "ead_ifrs9"] == 125_000.0
    assert (out / "reserve.xlsx").exists()
    record = json.loads((out / "run.json").read_text(encoding="utf-8"))
    for fw in ("ifrs9", "cecl"):  # the record's totals are the columns' sums, drawn + undrawn = modelled
        totals = record["totals"][fw]
        assert round(totals["drawn"] + totals["undrawn"], 2) == totals["modelled"]
        assert totals["provision"] == round(loans[f"provision_{fw}"].sum(), 2)


def test_journal_moves_the_undrawn_part_to_the_provision_account():
    from allowance.frameworks import rules_for
    from allowance.reconcile import movement

    prior = pd.DataFrame({"loan_id": ["a", "b"], "segment": "cards", "stage": [1, 1], "balance": [100.0, 0.0],
                          "ecl_ifrs9": [10.0, 2.0], "provision_ifrs9": [3.0, 2.0]})
    current = prior.assign(ecl_ifrs9=[12.0, 2.5], provision_ifrs9=[4.0, 2.5])
    journal = movement(prior, current, None, None, "ifrs9").journal
    moved = journal[journal["entry"] == "undrawn commitments presented as a provision"]
    account = rules_for("ifrs9").provision_account
    # the provision for commitments grows 5.00 -> 6.50: the allowance is debited, the provision
    # credited (IFRS 9 5.5.20, IFRS 7 B8E); the expense is the provision line's 2.50 alone
    assert moved.loc[moved["account"] == account, "credit"].tolist() == [1.5]
    assert moved["debit"].sum() == moved["credit"].sum() == 1.5
    provision = journal[journal["entry"] == "provision"]
    assert provision["debit"].sum() == 2.5
    total = journal.iloc[-1]
    assert total["debit"] == total["credit"]
