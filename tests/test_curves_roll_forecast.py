"""Balance roll-rate forecast: the roll-forward identities and the tie to the loan-level PDs."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from allowance.curves import (
    bucket_balances,
    expected_states,
    matrix_term_structure,
    pd_over,
    roll_forecast,
    roll_forecast_check,
    roll_rate_summary,
)
from allowance.exceptions import AssumptionsError
from allowance.schemas import TransitionMatrix
from tests.strategies import example_roll_matrix, transition_matrices


def _forward_or_cure(rolls: list[float], charge_off_dpd: int, payoff: float = 0.0) -> TransitionMatrix:
    """Each bucket rolls one bucket forward or cures to current; current also pays off."""
    states = expected_states(charge_off_dpd, paid_off=True)
    n = len(states)
    rows = np.zeros((n, n))
    for i, roll in enumerate(rolls):
        rows[i, i + 1] = roll
        rows[i, 0] = 1.0 - roll - (payoff if i == 0 else 0.0)
        if i == 0:
            rows[i, -1] = payoff
    rows[n - 2, n - 2] = rows[n - 1, n - 1] = 1.0
    return TransitionMatrix(states=list(states), probabilities=rows.tolist())


def test_three_months_out_from_bucket_four_is_the_product_of_three_roll_rates():
    # common practice, no source: 90-119 days past due (bucket 4, current = bucket 0) under a
    # 180-day charge-off policy reaches charge-off in month 3 through 120-149 and 150-179
    rolls = [0.025, 0.28, 0.45, 0.62, 0.74, 0.83, 0.91]
    m = _forward_or_cure(rolls, 180, payoff=0.012)
    opening = np.zeros(7)
    opening[4] = 2_500_000.0
    f = roll_forecast(opening, m, 180, months=3)
    assert f.by_month["charge_offs"].tolist()[:2] == [0.0, 0.0]
    assert f.by_month["charge_offs"].iloc[2] == pytest.approx(2_500_000.0 * 0.74 * 0.83 * 0.91, rel=1e-14)
    # next month's charge-offs: the balance in the last bucket times its roll rate to charge-off
    last = np.zeros(7)
    last[6] = 400_000.0
    assert roll_forecast(last, m, 180, 1).by_month["charge_offs"].iloc[0] == pytest.approx(400_000.0 * 0.91)


def test_the_roll_forward_is_the_matrix_power():
    m = example_roll_matrix(180, paid_off=True)
    p = np.array(m.probabilities)
    b0 = np.array([9e6, 4e5, 2e5, 1.5e5, 1e5, 8e4, 6e4])
    f = roll_forecast(b0, m, 180, months=12)
    for t in (1, 5, 12):  # CO_t = b0 Q^(t-1) r (definition)
        want = b0 @ np.linalg.matrix_power(p[:7, :7], t - 1) @ p[:7, 7]
        assert f.by_month["charge_offs"].iloc[t - 1] == pytest.approx(want, rel=1e-12)
    # every unit of balance is somewhere: buckets + charged off + paid off
    total = f.by_month["closing_balance"] + f.by_month["cumulative_charge_offs"] + f.by_month["paid_off"].cumsum()
    np.testing.assert_allclose(total, b0.sum(), rtol=1e-12)
    assert f.by_month[list(m.states[:7])].sum(axis=1).to_numpy() == pytest.approx(f.by_month["closing_balance"])


@settings(max_examples=40, deadline=None, derandomize=True)
@given(transition_matrices(), st.integers(0, 2**32 - 1))
def test_forecast_ties_to_balance_times_the_matrix_pds(matrix, seed):
    """Rolling balances is linear: the forecast equals sum over loans of balance x the PD the
    loan-level term structure gives its bucket (12 months and lifetime, Kemeny and Snell)."""
    dpd = 180 if "dpd_150_179" in matrix.states else 120
    nb = 7 if dpd == 180 else 5
    rng = np.random.default_rng(seed)
    b0 = rng.uniform(0, 1e6, nb)
    f = roll_forecast(b0, matrix, dpd, months=12)
    ts = matrix_term_structure("x", matrix, dpd, 12)
    pd12 = pd_over(ts.marginal, 12, ts.smm)
    assert f.charge_offs_12m == pytest.approx(float(b0 @ pd12), rel=1e-9, abs=1e-6)
    try:
        summary = roll_rate_summary("x", matrix, dpd)
    except AssumptionsError:  # a bucket that never leaves: no lifetime figure to compare
        return
    assert f.lifetime_charge_offs == pytest.approx(float(b0 @ summary["pd_lifetime"].to_numpy()), rel=1e-9, abs=1e-6)


def test_bucket_balances_and_the_check_table():
    assert bucket_balances([0, 30, 130, 179, 500], [1.0, 2.0, 3.0, 4.0, 5.0], 180).tolist() == [1, 0, 2, 0, 0, 3, 9]
    m = example_roll_matrix(180)
    f = roll_forecast(bucket_balances([0, 100], [1e6, 1e5], 180), m, 180, 12)
    check = roll_forecast_check(f, 0.87, 20_000.0, 60_000.0, "cards")
    assert check["forecast_loss"].iloc[0] == pytest.approx(round(f.charge_offs_12m * 0.87, 2))
    assert check["difference"].iloc[1] == pytest.approx(round(60_000.0 - round(f.lifetime_charge_offs * 0.87, 2), 2),
                                                        abs=0.011)


def test_bad_opening_balances_are_refused():
    with pytest.raises(ValueError, match="one per bucket"):
        roll_forecast([1.0, 2.0], example_roll_matrix(180), 180)


def test_segment_forecasts_roll_each_matrix_segment_of_a_book():
    import pandas as pd

    from allowance.curves import segment_roll_forecasts
    from allowance.schemas import SegmentAssumptions

    segments = {
        "cards": SegmentAssumptions(transition_matrix=example_roll_matrix(180), charge_off_dpd=180, lgd=0.9),
        "auto": SegmentAssumptions(pd_12m=0.02, lgd=0.4),
    }
    tape = pd.DataFrame({"segment": ["cards", "cards", "auto"], "days_past_due": [0, 100, 0],
                         "balance": [1_000.0, 500.0, 9_999.0]})
    loans = pd.DataFrame({"segment": ["cards", "cards", "auto"], "ecl_12m": [10.0, 200.0, 5.0],
                          "ecl_lifetime": [40.0, 260.0, 9.0]})
    by_month, check = segment_roll_forecasts(tape, segments, loans, months=6)
    direct = roll_forecast([1_000.0, 0, 0, 0, 500.0, 0, 0], example_roll_matrix(180), 180, 6)  # 100 dpd: 90-119
    assert by_month["segment"].unique().tolist() == ["cards"]
    np.testing.assert_allclose(by_month["charge_offs"], direct.by_month["charge_offs"])
    assert check["loan_level_ecl"].tolist() == [210.0, 300.0] and check["lgd"].tolist() == [0.9, 0.9]
