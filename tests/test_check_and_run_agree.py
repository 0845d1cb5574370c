"""check and run share one validation path: what check refuses, run refuses the same way.

Each case is a tape or an assumptions file the engine could not compute. A row the engine
cannot compute is a rejected row (line, column, reason) in both; a segment missing a key it
needs is the same assumptions error, naming the key, in both. The expectations are our own
contract (common practice, no source).
"""

from __future__ import annotations

from pathlib import Path

import pytest

import allowance
from allowance.exceptions import AllowanceError, AssumptionsError

HEADER = "loan_id,segment,repayment,origination_date,maturity_date,balance,interest_rate,days_past_due,credit_limit"
GOOD = "L1,retail,level,2024-01-15,2030-01-15,1000.50,0.065,0,"
BALLOON = "B1,retail,balloon,2024-01-15,2031-01-15,50000,0.07,0,"
CARD = "C1,cards,revolving,2020-03-01,,500,0.2,0,2000"

BASE = """
[run]
as_of = 2026-09-30
frameworks = ["ifrs9", "cecl"]

[segments.retail]
pd_12m = 0.02
lgd = 0.4
{retail}

[segments.cards]
pd_12m = 0.05
lgd = 0.8
{cards}

[ifrs9]
sicr_pd_ratio = 2.0
sicr_pd_measure = "12_month"

[cecl]
reasonable_supportable_months = 12
{cecl}

[scenarios.base]
weight = 1.0
{scenario}
"""


def _files(tmp_path: Path, lines: list[str], retail: str = "", cards: str = "", scenario: str = "",
           extra: str = "", cecl: str = 'payment_allocation = "measured_balance_first"') -> tuple[Path, Path]:
    cards = cards or "behavioural_life_months = 36\npayment_rate = 0.05\nccf = 0.3\nunconditionally_cancellable = true"
    tape = tmp_path / "tape.csv"
    tape.write_text("\n".join([HEADER, *lines]) + "\n", encoding="utf-8")
    assumptions = tmp_path / "a.toml"
    assumptions.write_text(BASE.format(retail=retail, cards=cards, scenario=scenario, cecl=cecl) + extra, encoding="utf-8")
    return tape, assumptions


def _outcome(call) -> tuple[str, object]:
    try:
        return "ok", call()
    except AllowanceError as err:
        return "error", (type(err).__name__, str(err))


def test_a_balloon_loan_its_segment_cannot_amortize_is_rejected_by_both(tmp_path):
    tape, assumptions = _files(tmp_path, [GOOD, BALLOON, CARD])
    checked = allowance.check(tape, assumptions)
    ran = allowance.run(tape, assumptions, sensitivities=False)
    for rejected in (checked.rejected, ran.rejected):
        assert list(rejected["source_row"]) == [3]
        assert rejected["reason_codes"].iloc[0] == "missing_amortization"
        assert "amortization_months" in rejected["reasons"].iloc[0]
    assert (checked.findings["column"] == "amortization_months").any()
    assert list(ran.loans["loan_id"]) == ["L1", "C1"]
    # the segment's amortization term fixes it for both
    tape, assumptions = _files(tmp_path, [GOOD, BALLOON, CARD], retail="amortization_months = 300")
    assert allowance.check(tape, assumptions).ok
    assert len(allowance.run(tape, assumptions, sensitivities=False).loans) == 3


@pytest.mark.parametrize(
    ("case", "files", "key"),
    [
        ("revolving line, no behavioural life",
         {"cards": "ccf = 0.3"}, "segments.cards.behavioural_life_months"),
        ("revolving line under CECL, no payment rate",
         {"cards": "behavioural_life_months = 36"}, "segments.cards.payment_rate"),
        ("revolving line under CECL, no payment allocation policy (ASC 326-20-30-6)",
         {"cecl": ""}, "cecl.payment_allocation"),
        ("a falling cumulative PD curve",
         {"retail": "", "extra": "[segments.curve]\npd_curve = [0.05, 0.03]\nlgd = 0.4\n"}, "segments.curve.pd_curve"),
        ("a z path with no asset correlation",
         {"scenario": "z = [-1.0]"}, "segments.retail"),
    ],
)
def test_a_segment_missing_what_it_needs_is_the_same_error(tmp_path, case, files, key):
    tape, assumptions = _files(tmp_path, [GOOD, CARD], **files)
    checked = _outcome(lambda: allowance.check(tape, assumptions))
    ran = _outcome(lambda: allowance.run(tape, assumptions, sensitivities=False))
    assert checked[0] == ran[0] == "error", case
    assert checked == ran, case
    assert checked[1][0] == "AssumptionsError" and key in checked[1][1], checked


def test_prepayment_stated_twice_is_the_same_error(tmp_path):
    rolls = tmp_path / "rolls.csv"
    rolls.write_text(
        "from,current,dpd_1_29,dpd_30_59,dpd_60_89,dpd_90_119,charge_off,paid_off\n"
        "current,0.95,0.03,0,0,0,0,0.02\n"
        "dpd_1_29,0.5,0.3,0.2,0,0,0,0\n"
        "dpd_30_59,0.2,0,0.3,0.5,0,0,0\n"
        "dpd_60_89,0.1,0,0,0.3,0.6,0,0\n"
        "dpd_90_119,0,0,0,0,0.5,0.5,0\n"
        "charge_off,0,0,0,0,0,1,0\n"
        "paid_off,0,0,0,0,0,0,1\n", encoding="utf-8")
    extra = '[segments.rolled]\ntransition_matrix = "rolls.csv"\ncharge_off_dpd = 120\nlgd = 0.5\ncpr = 0.1\n'
    tape, assumptions = _files(tmp_path, [GOOD], extra=extra)
    checked = _outcome(lambda: allowance.check(tape, assumptions))
    ran = _outcome(lambda: allowance.run(tape, assumptions, sensitivities=False))
    assert checked == ran and checked[0] == "error"
    assert "prepayment twice" in checked[1][1] and "segments.rolled" in checked[1][1]


def test_the_core_raises_domain_errors_only():
    """A library function given values outside its contract raises a named domain error."""
    import numpy as np

    from allowance.exceptions import InvalidInputError
    from allowance.scenarios import vasicek_conditional_pd

    with pytest.raises(InvalidInputError, match="PD must be in"):
        vasicek_conditional_pd(np.array([1.5]), 0.1, 0.0)
    assert issubclass(InvalidInputError, AllowanceError) and issubclass(InvalidInputError, ValueError)
    assert issubclass(AssumptionsError, AllowanceError)
