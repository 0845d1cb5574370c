"""PD calibration tests against scipy, closed forms and simulated default counts."""

from __future__ import annotations

from math import comb

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import binomtest

from allowance.backtest import (
    BacktestOptions,
    binomial_p_value,
    calibration_table,
    clopper_pearson,
    jeffreys_interval,
    jeffreys_p_value,
    poisson_binomial_p_value,
    segment_verdicts,
    traffic_light,
)

GRID = [(0, 1), (0, 50), (1, 50), (3, 200), (17, 400), (120, 5000), (50, 50), (999, 1000)]


@pytest.mark.parametrize("defaults,n", GRID)
@pytest.mark.parametrize("confidence", [0.9, 0.95, 0.99])
def test_clopper_pearson_matches_scipy_binomtest(defaults, n, confidence):
    # reference: scipy.stats.binomtest(...).proportion_ci(method="exact"), which inverts the
    # binomial CDF by root finding (not through the beta quantile used here)
    ref = binomtest(defaults, n).proportion_ci(confidence_level=confidence, method="exact")
    lo, hi = clopper_pearson(defaults, n, confidence)
    assert float(lo) == pytest.approx(ref.low, abs=1e-12, rel=1e-9)
    assert float(hi) == pytest.approx(ref.high, abs=1e-12, rel=1e-9)


@pytest.mark.parametrize("n", [1, 10, 100, 12345])
def test_clopper_pearson_closed_forms_at_the_edges(n):
    # Clopper and Pearson (1934): with no defaults the upper limit is 1 - (alpha/2)^(1/n);
    # with all defaulted the lower limit is (alpha/2)^(1/n)
    lo, hi = clopper_pearson(0, n, 0.95)
    assert float(lo) == 0.0 and float(hi) == pytest.approx(1 - 0.025 ** (1 / n), rel=1e-12)
    lo, hi = clopper_pearson(n, n, 0.95)
    assert float(lo) == pytest.approx(0.025 ** (1 / n), rel=1e-12) and float(hi) == 1.0


@settings(max_examples=60, deadline=None, derandomize=True)
@given(st.integers(1, 20_000), st.data())
def test_jeffreys_lies_inside_clopper_pearson(n, data):
    # Beta(d + 1/2, n - d + 1/2) sits between the beta laws of the exact limits (stochastic
    # order), so the Jeffreys interval is inside the Clopper-Pearson one (Brown, Cai and DasGupta 2001)
    d = data.draw(st.integers(0, n))
    cl, ch = clopper_pearson(d, n)
    jl, jh = jeffreys_interval(d, n)
    assert cl - 1e-12 <= jl <= d / n <= jh <= ch + 1e-12


def test_jeffreys_edges_and_no_loans():
    lo, hi = jeffreys_interval([0, 10], [10, 10])
    assert lo[0] == 0.0 and hi[1] == 1.0  # Brown, Cai and DasGupta (2001) 4.1.2 modification
    assert [float(x) for x in clopper_pearson(0, 0)] == [0.0, 1.0]
    assert [float(x) for x in jeffreys_interval(0, 0)] == [0.0, 1.0]


@pytest.mark.parametrize("defaults,n,pd_used", [(0, 40, 0.01), (3, 40, 0.01), (12, 300, 0.02), (40, 40, 0.5)])
def test_binomial_p_value_by_hand(defaults, n, pd_used):
    # P(D >= d) = 1 - sum_{k<d} C(n, k) p^k (1-p)^(n-k)  (binomial distribution, by definition)
    hand = 1.0 - sum(comb(n, k) * pd_used**k * (1 - pd_used) ** (n - k) for k in range(defaults))
    assert float(binomial_p_value(defaults, n, pd_used)) == pytest.approx(hand, rel=1e-10, abs=1e-15)


def test_jeffreys_p_value_is_the_posterior_probability_below_the_pd():
    # the more defaults, the less posterior mass below a fixed PD
    p = [float(jeffreys_p_value(d, 1000, 0.02)) for d in (10, 20, 30, 40)]
    assert p == sorted(p, reverse=True) and p[-1] < 0.001 < 0.5 < p[0]


@settings(max_examples=30, deadline=None, derandomize=True)
@given(st.lists(st.tuples(st.integers(0, 30), st.floats(0.0, 1.0)), min_size=1, max_size=4), st.integers(0, 60))
def test_poisson_binomial_equals_brute_force_convolution(grades, defaults):
    pmf = np.ones(1)
    for n, p in grades:  # the full binomial pmfs convolved (definition)
        pmf = np.convolve(pmf, [comb(n, k) * p**k * (1 - p) ** (n - k) for k in range(n + 1)])
    want = float(pmf[defaults:].sum()) if defaults > 0 else 1.0
    got = poisson_binomial_p_value(defaults, [g[0] for g in grades], [g[1] for g in grades])
    assert got == pytest.approx(want, abs=1e-12)


def test_traffic_light_levels_are_options():
    assert traffic_light([0.04, 0.009, 0.0009]).tolist() == ["yellow", "yellow", "red"]
    strict = BacktestOptions(yellow_p=0.1, red_p=0.01)
    assert traffic_light([0.04, 0.009], strict).tolist() == ["yellow", "red"]
    with pytest.raises(ValueError, match="red_p must be below yellow_p"):
        BacktestOptions(yellow_p=0.01, red_p=0.05)


def _simulated(pds: dict[str, float], loans: int, factor: float, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = [{"segment": "auto", "grade": g, "loans": loans, "pd": p,
             "defaults": int(rng.binomial(loans, min(1.0, p * factor)))} for g, p in pds.items()]
    return pd.DataFrame(rows)


PDS = {"A": 0.004, "B": 0.009, "C": 0.02, "D": 0.042, "E": 0.085}


def test_defaults_drawn_at_the_pds_used_fall_inside_and_double_is_flagged():
    # seeded draws: at the PDs used every grade's PD lies inside its 95 % interval (each does with
    # probability about 0.95); at twice the PD, 4,000 loans a grade, every grade is flagged
    same = calibration_table(_simulated(PDS, 4_000, 1.0, seed=2026))
    assert same["pd_position"].eq("inside").all() and same["light"].ne("red").all()
    assert segment_verdicts(same)["light"].tolist() == ["green"]
    double = calibration_table(_simulated(PDS, 4_000, 2.0, seed=2026))
    assert double["pd_position"].eq("below").all() and double["light"].eq("red").all()
    verdict = segment_verdicts(double).iloc[0]
    assert verdict["light"] == "red" and verdict["grades_red"] == 5 and verdict["worst_grade_light"] == "red"


def test_the_jeffreys_test_can_set_the_light():
    c = pd.DataFrame({"segment": ["s"], "grade": ["A"], "loans": [1000], "defaults": [30], "pd": [0.02]})
    by_binomial = calibration_table(c)
    by_jeffreys = calibration_table(c, BacktestOptions(test="jeffreys"))
    assert by_binomial["binomial_p"].iloc[0] != by_jeffreys["jeffreys_p"].iloc[0]
    assert by_jeffreys["light"].iloc[0] == traffic_light(by_jeffreys["jeffreys_p"].iloc[0])
