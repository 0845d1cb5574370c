"""The back-test: a run's PDs and expected losses against a history of what happened."""

from __future__ import annotations

from datetime import date

import numpy as np
import pandas as pd
import pytest

from allowance.backtest.compare import backtest, event_dpd
from allowance.backtest.realised import realised_outcomes, window_months
from allowance.backtest.statistics import BacktestOptions

AS_OF = date(2025, 9, 30)
PDS = {"A": 0.005, "B": 0.012, "C": 0.03, "D": 0.07}
ASSUMPTIONS = {"run": {"frameworks": ["ifrs9", "cecl"]}, "ifrs9": {"default_dpd": 90}, "cecl": {"default_dpd": 90},
               "segments": {"auto": {"pd_12m_by_grade": PDS}, "pool": {"annual_loss_rate": 0.01}}}


def run_loans(per_grade: int = 3_000, seed: int = 1) -> pd.DataFrame:
    """A run's loans.csv: an auto segment by grade (PD method) and a loss-rate pool (no PD)."""
    rng = np.random.default_rng(seed)
    grades = np.repeat(list(PDS), per_grade)
    n = len(grades)
    balance = rng.uniform(5_000, 30_000, n).round(2)
    pd_12m = np.array([PDS[g] for g in grades])
    auto = pd.DataFrame({"loan_id": [f"A{i:06d}" for i in range(n)], "segment": "auto", "grade": grades,
                         "balance": balance, "pd_12m": pd_12m, "ecl_12m": (balance * pd_12m * 0.45).round(2)})
    m = 2_000
    pool_balance = rng.uniform(1_000, 10_000, m).round(2)
    pool = pd.DataFrame({"loan_id": [f"P{i:06d}" for i in range(m)], "segment": "pool", "grade": np.nan,
                         "balance": pool_balance, "pd_12m": np.nan, "ecl_12m": (pool_balance * 0.01).round(2)})
    return pd.concat([auto, pool], ignore_index=True)


def history_from(loans: pd.DataFrame, factor: float, seed: int = 2, pool_loss: float = 0.01) -> pd.DataFrame:
    """Twelve months after the as-of date: each auto loan defaults within the year with
    probability factor x its PD (90 days past due in a uniform month; written off 4 months
    later at 45 % when that falls in the window); each pool loan charges off in a uniform month
    with probability 2.5 x ``pool_loss``, at 40 % of its balance. Loans that survive stay current."""
    rng = np.random.default_rng(seed)
    ends = window_months(AS_OF, 12)
    n = len(loans)
    pd_12m = loans["pd_12m"].fillna(pool_loss * 2.5).to_numpy()
    severity = np.where(loans["segment"] == "pool", 0.4, 0.45)
    defaults = rng.random(n) < np.minimum(1.0, pd_12m * factor)
    month = rng.integers(0, 12, n)
    lag = np.where(loans["segment"] == "pool", 0, 4)
    rows = []
    for t, end in enumerate(ends):
        dpd = np.where(defaults & (t >= month), 90 + 30 * (t - month), 0)
        written = defaults & (t == month + lag)
        alive = ~defaults | (t <= month + lag)
        rows.append(pd.DataFrame({
            "loan_id": loans["loan_id"].to_numpy()[alive], "segment": loans["segment"].to_numpy()[alive],
            "month": end, "balance": np.where(written, 0.0, loans["balance"].to_numpy())[alive],
            "days_past_due": dpd[alive], "charge_off": np.where(written, loans["balance"] * severity, 0.0)[alive],
            "bankruptcy_loss": 0.0, "recoveries": 0.0, "asset_sales": 0.0, "paid_off": False,
        }))
    return pd.concat(rows, ignore_index=True)


def test_a_history_at_the_pds_used_puts_every_grade_inside_and_double_flags_it():
    # the back-test's own check: defaults drawn at the PDs the run used fall inside every
    # grade's 95 % interval (seeded history; each grade does with probability about 0.95, and
    # the test below shows it over many histories), and drawn at twice the PD every grade's
    # PD is below its interval and the segment is red
    loans = run_loans(per_grade=5_000)
    same = backtest(loans, ASSUMPTIONS, history_from(loans, 1.0, seed=4), AS_OF)
    auto = same.grades[same.grades["segment"] == "auto"]
    assert auto["pd_position"].eq("inside").all(), auto[["grade", "default_rate", "pd", "binomial_lower"]]
    seg = same.segments.set_index("segment")
    assert seg.loc["auto", "pd_light"] == "green" and seg.loc["auto", "method"] == "PD"

    double = backtest(loans, ASSUMPTIONS, history_from(loans, 2.0, seed=4), AS_OF)
    auto2 = double.grades[double.grades["segment"] == "auto"]
    assert auto2["pd_position"].eq("below").all() and auto2["light"].isin(["yellow", "red"]).all()
    assert double.segments.set_index("segment").loc["auto", "pd_light"] == "red"
    assert double.segments.set_index("segment").loc["auto", "verdict"] == "red"


@pytest.mark.slow
def test_coverage_over_many_histories():
    # Clopper-Pearson intervals cover at least their confidence level (Clopper and Pearson 1934):
    # over 20 seeded histories at the PDs used, at least 90 % of grade-years fall inside (about
    # 95 % or more expected); at twice the PD the segment is red in every one
    loans = run_loans(per_grade=2_000)
    inside, red = [], []
    for seed in range(100, 120):
        same = backtest(loans, ASSUMPTIONS, history_from(loans, 1.0, seed=seed), AS_OF)
        inside += same.grades.loc[same.grades["segment"] == "auto", "pd_position"].eq("inside").tolist()
        double = backtest(loans, ASSUMPTIONS, history_from(loans, 2.0, seed=seed), AS_OF)
        red.append(double.segments.set_index("segment").loc["auto", "pd_light"] == "red")
    assert np.mean(inside) >= 0.9 and all(red)


def test_loss_rate_segments_are_judged_on_their_losses():
    loans = run_loans(per_grade=200)
    # expected 1 % of balance; realised about 2.5 % x 40 % = 1 % of balance, then twice that
    ok = backtest(loans, ASSUMPTIONS, history_from(loans, 1.0), AS_OF).segments.set_index("segment")
    assert ok.loc["pool", "method"] == "loss rate" and ok.loc["pool", "pd_light"] == "n/a"
    assert ok.loc["pool", "loss_ratio"] < 1.25 or pytest.fail(f"ratio {ok.loc['pool', 'loss_ratio']}")
    bad = backtest(loans, ASSUMPTIONS, history_from(loans, 1.0, pool_loss=0.02), AS_OF).segments.set_index("segment")
    assert bad.loc["pool", "loss_ratio"] > 1.5 and bad.loc["pool", "verdict"] == "red"
    strict = BacktestOptions(loss_yellow=3.0, loss_red=4.0)
    lenient = backtest(loans, ASSUMPTIONS, history_from(loans, 1.0, pool_loss=0.02), AS_OF, strict)
    assert lenient.segments.set_index("segment").loc["pool", "loss_light"] == "green"


def test_realised_losses_tie_to_the_history():
    loans = run_loans(per_grade=300)
    history = history_from(loans, 1.5)
    result = backtest(loans, ASSUMPTIONS, history, AS_OF)
    # net credit loss = charge-offs + bankruptcy losses - recoveries - asset sales (DESIGN.md)
    assert result.segments["realised_ncl"].sum() == pytest.approx(history["charge_off"].sum())
    assert result.grades["realised_ncl"].sum() == pytest.approx(history["charge_off"].sum())
    assert result.segments["expected_loss_12m"].sum() == pytest.approx(loans["ecl_12m"].sum())
    assert result.segments["loans_in_run"].sum() == len(loans)


def test_loans_missing_from_the_history_are_counted_not_tested():
    loans = run_loans(per_grade=100)
    history = history_from(loans, 1.0)
    gone = loans["loan_id"].iloc[:10]
    result = backtest(loans, ASSUMPTIONS, history[~history["loan_id"].isin(gone)], AS_OF)
    seg = result.segments.set_index("segment")
    assert seg.loc["auto", "not_in_history"] == 10
    assert seg.loc["auto", "loans_tested"] == 4 * 100 - 10


def test_the_event_is_charge_off_for_roll_rate_segments():
    h = pd.DataFrame({"loan_id": ["c", "c"], "segment": "cards", "month": pd.to_datetime(["2025-10-31", "2025-11-30"]),
                      "balance": [1000.0, 1000.0], "days_past_due": [120, 150], "charge_off": 0.0,
                      "bankruptcy_loss": 0.0, "recoveries": 0.0, "asset_sales": 0.0, "paid_off": False})
    thresholds = event_dpd({"run": {"frameworks": ["ifrs9"]}, "ifrs9": {"default_dpd": 90},
                            "segments": {"cards": {"transition_matrix": "r.csv", "charge_off_dpd": 180}}})
    assert not realised_outcomes(h, AS_OF, thresholds, 2)["defaulted"].iloc[0]  # 150 days: not yet charged off
    assert realised_outcomes(h, AS_OF, {"cards": 90}, 2)["defaulted"].iloc[0]


def test_rows_outside_the_window_are_ignored():
    h = pd.DataFrame({"loan_id": ["a"] * 3, "segment": "auto",
                      "month": ["2025-09", "2025-10", "2026-10"], "balance": 1.0, "days_past_due": [120, 0, 120],
                      "charge_off": [5.0, 0.0, 7.0], "bankruptcy_loss": None, "recoveries": None,
                      "asset_sales": None, "paid_off": None})
    out = realised_outcomes(h, AS_OF, 90)
    assert out["months_observed"].tolist() == [1] and not out["defaulted"].iloc[0]
    assert out["net_credit_loss"].iloc[0] == 0.0
