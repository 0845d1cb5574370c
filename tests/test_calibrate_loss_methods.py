"""The loss-rate methods' inputs from a hand-made history (our own numbers, computed by hand).

Three auto loans followed from January 2025 to February 2026. Loan A (original balance 10,000,
originated December 2024) is charged off in June 2025 (10,000) and 3,000 is recovered in
September; loan B (10,000, December 2024) pays off in December 2025; loan C (5,000, January
2025) stays current. NCL = charge-offs + bankruptcy losses - recoveries - asset sales (common
practice, no source).

- WARM (remaining-life) annual rate = 12 x NCL / the month-opening balances of the window
  (common practice, no source): openings Feb 2025..Feb 2026 = 5 x 25,000 + 6 x 15,000 +
  2 x 5,000 = 225,000; NCL 7,000; 12 x 7,000 / 225,000 = 0.373333.
- Pool lifetime rate (closed pool, ASC 326-20-55-18 to 55-22 in outline, from memory): the pool
  on the book at the end of January 2025 holds 25,000; its NCL since is 7,000: 0.28; 5,000 (20 %)
  is still on the book.
- Vintage curve (ASC 326-20-55-23 to 55-27 in outline, from memory): every loan reached age 12;
  loss at age 6 (10,000) and age 9 (-3,000) over 25,000 of original balance: C(12) = 0.28.
"""

from __future__ import annotations

import pytest

from allowance.calibrate import calibrate
from allowance.calibrate.loss_methods import method_table
from allowance.exceptions import AssumptionsError, HistoryError

HEADER = "loan_id,segment,month,balance,days_past_due,origination_date,original_balance,charge_off,recoveries,paid_off"


def _history() -> str:
    months = [f"2025-{m:02d}" for m in range(1, 13)] + ["2026-01", "2026-02"]
    lines = [HEADER]
    dpd_a = {"2025-02": 30, "2025-03": 60, "2025-04": 90, "2025-05": 120}
    for month in months[:5]:
        lines.append(f"A,auto,{month},10000,{dpd_a.get(month, 0)},2024-12-15,10000,,,")
    lines.append("A,auto,2025-06,0,150,2024-12-15,10000,10000,,")
    lines.append("A,auto,2025-09,0,150,2024-12-15,10000,,3000,")
    for month in months[:11]:
        lines.append(f"B,auto,{month},10000,0,2024-12-20,10000,,,")
    lines.append("B,auto,2025-12,0,0,2024-12-20,10000,,,true")
    for month in months:
        lines.append(f"C,auto,{month},5000,0,2025-01-10,5000,,,")
    return "\n".join(lines) + "\n"


SETTINGS = {"min_vintage_loans": 3, "lgd_workout_months": 1}


@pytest.fixture(scope="module")
def history(tmp_path_factory):
    path = tmp_path_factory.mktemp("lm") / "history.csv"
    path.write_text(_history())
    return path


@pytest.fixture(scope="module")
def calibration(history):
    return calibrate(history, {**SETTINGS, "loss_rate_method": {"auto": "vintage_loss_curve"}})


def test_the_three_inputs_by_hand(calibration):
    table = method_table(calibration.results, calibration.frame).set_index("segment")
    assert table.loc["auto", "annual_loss_rate"] == pytest.approx(12 * 7_000 / 225_000, rel=1e-12)  # by hand
    assert table.loc["auto", "lifetime_loss_rate"] == pytest.approx(7_000 / 25_000, rel=1e-12)  # by hand
    assert table.loc["auto", "pool_run_off"] == pytest.approx(5_000 / 25_000, rel=1e-12)  # by hand
    assert calibration.results["loss_methods"].curves["auto"] == pytest.approx([0.28], rel=1e-12)  # by hand
    assert table.loc["auto", "method_written"] == "vintage_loss_curve"


def test_vintage_losses_by_age(calibration):
    v = calibration.results["loss_methods"].vintage.set_index("age")
    assert v.loc[6, "net_credit_loss"] == 10_000 and v.loc[9, "net_credit_loss"] == -3_000
    assert v.loc[13, "original_balance_reached"] == 25_000  # C reaches age 13 at Feb 2026
    assert v.loc[14, "original_balance_reached"] == 20_000  # only A and B reach 14
    assert v.loc[8, "cumulative_loss_rate"] == pytest.approx(0.4) and v.loc[12, "cumulative_loss_rate"] == 0.28


@pytest.mark.parametrize("method, value", [("annual_loss_rate", 0.3733), ("lifetime_loss_rate", 0.28),
                                           ("vintage_loss_curve", [0.28])])
def test_the_chosen_method_replaces_the_pd_source(history, method, value):
    cal = calibrate(history, {**SETTINGS, "loss_rate_method": {"auto": method}})
    segment = cal.assumptions.data["segments"]["auto"]
    assert segment[method] == value  # 4 significant digits, as written
    assert not {"pd_12m", "pd_12m_by_grade", "pd_curve_by_age", "transition_matrix"} & set(segment)


def test_the_policy_cannot_state_a_loss_rate(history):
    with pytest.raises(AssumptionsError, match="loss_rate_method"):
        calibrate(history, SETTINGS, policy={"segments": {"auto": {"annual_loss_rate": 0.02}}})


def test_a_curve_needs_enough_loans(history):
    with pytest.raises(HistoryError, match="min_vintage_loans"):
        calibrate(history, {**SETTINGS, "min_vintage_loans": 4, "loss_rate_method": {"auto": "vintage_loss_curve"}})


def test_an_unknown_segment_is_named(history):
    with pytest.raises(HistoryError, match="'cars'"):
        calibrate(history, {**SETTINGS, "loss_rate_method": {"cars": "annual_loss_rate"}})
