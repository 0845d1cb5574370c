"""Satellite models from history: known coefficients recovered from simulated default counts."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import minimize
from scipy.special import expit
from scipy.stats import norm

from allowance.satellite_fit import fit_satellite, lagged_design
from allowance.exceptions import AssumptionsError

TRUE = {"unemployment_rate": (0.08, 3), "house_price_growth": (-0.03, 6)}


def _macro(months: int, seed: int, start="2015-01") -> pd.DataFrame:
    """An invented monthly macro history: a 5-year cycle in unemployment, house prices against it."""
    rng = np.random.default_rng(seed)
    t = np.arange(months)
    u = 5.0 + 1.5 * np.sin(2 * np.pi * t / 60) + rng.normal(0, 0.15, months)
    h = 3.0 - 0.8 * (u - 5.0) + rng.normal(0, 1.0, months)
    return pd.DataFrame({"unemployment_rate": u, "house_price_growth": h},
                        index=pd.period_range(start, periods=months, freq="M"))


def _simulate(macro: pd.DataFrame, months: pd.PeriodIndex, at_risk: int, seed: int, link="probit",
              alpha=None, month_effect=0.0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = lagged_design(months, macro, {k: lag for k, (_, lag) in TRUE.items()}).to_numpy()
    beta = np.array([b for b, _ in TRUE.values()])
    cdf, ppf = (norm.cdf, norm.ppf) if link == "probit" else (expit, lambda p: np.log(p / (1 - p)))
    alpha = ppf(0.002) - x.mean(axis=0) @ beta if alpha is None else alpha
    index = alpha + x @ beta + rng.normal(0.0, month_effect, len(months))
    p = cdf(index)
    n = np.full(len(months), at_risk)
    return pd.DataFrame({"month": months.astype(str), "at_risk": n, "defaults": rng.binomial(n, p)})


MACRO = _macro(144, seed=1)
MONTHS = pd.period_range("2016-01", periods=120, freq="M")


@pytest.mark.parametrize("link", ["probit", "logit"])
def test_known_coefficients_are_recovered_within_two_standard_errors(link):
    # simulated from the model itself with a fixed seed: each estimate lies within 2 standard
    # errors of the value it was simulated from (the 95 % band of the MLE's normal limit,
    # McCullagh and Nelder 1989, section 4.4)
    rates = _simulate(MACRO, MONTHS, 40_000, seed=7, link=link)
    fit = fit_satellite(rates, MACRO, {k: lag for k, (_, lag) in TRUE.items()}, link, "binomial", segment="auto")
    got = fit.coefficients.set_index("term")
    for name, (beta, lag) in TRUE.items():
        row = got.loc[name]
        assert row["lag_months"] == lag
        assert abs(row["coefficient"] - beta) <= 2 * row["std_error"], (name, row["coefficient"], row["std_error"])
        assert row["ci_low"] < beta < row["ci_high"]
    model = fit.model(source="test")
    assert model.coefficients == pytest.approx({k: got.loc[k, "coefficient"] for k in TRUE})
    assert model.lag_months == {"unemployment_rate": 3, "house_price_growth": 6}
    assert fit.statistic("months_used") == 120


def test_the_estimate_is_the_binomial_maximum_likelihood():
    # scipy.optimize on the binomial log-likelihood written out by hand: the same estimate
    rates = _simulate(MACRO, MONTHS, 20_000, seed=3)
    variables = {k: lag for k, (_, lag) in TRUE.items()}
    fit = fit_satellite(rates, MACRO, variables, "probit", "binomial")
    x = np.column_stack([np.ones(120), lagged_design(MONTHS, MACRO, variables).to_numpy()])
    d, n = rates["defaults"].to_numpy(float), rates["at_risk"].to_numpy(float)

    def negative_log_likelihood(b):
        p = norm.cdf(x @ b)
        return -(d * np.log(p) + (n - d) * np.log1p(-p)).sum()

    start = np.array([norm.ppf(0.002) - 5 * 0.08 - 3 * -0.03, 0.0, 0.0])
    best = minimize(negative_log_likelihood, start, method="Nelder-Mead",
                    options={"xatol": 1e-10, "fatol": 1e-10, "maxiter": 20_000, "maxfev": 40_000})
    np.testing.assert_allclose(fit.coefficients["coefficient"], best.x, atol=2e-5)


@pytest.mark.slow
def test_the_95_percent_intervals_cover_the_true_value_about_95_percent_of_the_time():
    # 120 seeded replications: coverage of the nominal 95 % Wald interval (binomial model)
    hits, reps = 0, 120  # about 10 s
    months = pd.period_range("2016-01", periods=60, freq="M")
    for seed in range(reps):
        rates = _simulate(MACRO, months, 5_000, seed=1000 + seed)
        fit = fit_satellite(rates, MACRO, {"unemployment_rate": 3, "house_price_growth": 6}, "probit", "binomial")
        row = fit.coefficients.set_index("term").loc["unemployment_rate"]
        hits += row["ci_low"] <= 0.08 <= row["ci_high"]
    # the binomial sampling error of a coverage share from 120 runs is about 2 points
    assert 0.88 <= hits / reps <= 0.995


def test_a_systematic_month_effect_shows_as_dispersion_and_widens_the_errors():
    rates = _simulate(MACRO, MONTHS, 40_000, seed=11, month_effect=0.05)
    variables = {k: lag for k, (_, lag) in TRUE.items()}
    plain = fit_satellite(rates, MACRO, variables, "probit", "binomial")
    quasi = fit_satellite(rates, MACRO, variables, "probit", "overdispersed")
    hac = fit_satellite(rates, MACRO, variables, "probit", "hac")
    phi = quasi.statistic("dispersion")
    assert phi > 1.5  # about 3 expected: (phi(z) 0.05)^2 against p (1 - p) / n; 1 under the binomial model
    np.testing.assert_allclose(quasi.coefficients["coefficient"], plain.coefficients["coefficient"])
    # quasi-binomial: the covariance scaled by the Pearson dispersion (McCullagh and Nelder 4.5)
    np.testing.assert_allclose(quasi.coefficients["std_error"], plain.coefficients["std_error"] * np.sqrt(phi), rtol=1e-6)
    assert (hac.coefficients["std_error"] > plain.coefficients["std_error"]).all()
    assert "Newey-West" in hac.statistics.set_index("statistic").loc["standard_errors", "note"]


def test_months_outside_the_macro_file_are_left_out_and_counted():
    short = MACRO.loc[pd.Period("2016-06", "M"):]
    rates = _simulate(MACRO, MONTHS, 20_000, seed=5)
    fit = fit_satellite(rates, short, {"unemployment_rate": 3, "house_price_growth": 6}, "logit", "overdispersed")
    # the 6-month lag needs 2016-06 for 2016-12: the first 11 months have no lagged value
    assert fit.statistic("months_used") == 109
    assert fit.statistic("months_without_macro_values") == 11
    assert fit.fitted["month"].iloc[0] == "2016-12"


def test_problems_are_named():
    rates = _simulate(MACRO, MONTHS, 20_000, seed=5)
    with pytest.raises(AssumptionsError, match="no 'gdp'"):
        fit_satellite(rates, MACRO, {"gdp": 0}, "probit", "binomial", segment="auto")
    with pytest.raises(AssumptionsError, match="at least 12 are needed"):
        fit_satellite(rates.head(8), MACRO, {"unemployment_rate": 0}, "probit", "binomial")
    with pytest.raises(AssumptionsError, match="no defaults"):
        fit_satellite(rates.assign(defaults=0), MACRO, {"unemployment_rate": 0}, "probit", "binomial")
