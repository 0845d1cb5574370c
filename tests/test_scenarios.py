"""Scenarios: Vasicek conditional PD, Basel correlations, scenario paths, CECL reversion, weighting."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.polynomial.hermite_e import hermegauss
from scipy.stats import norm

from allowance.exceptions import AssumptionsError
from allowance.scenarios import (
    ScenarioTables,
    asset_correlation,
    by_year,
    reversion_table,
    reversion_weights,
    revert,
    scenario_marginals,
    scenario_tables,
    vasicek_conditional_pd,
    weighted,
)
from allowance.schemas import Assumptions, Scenario, SegmentAssumptions
from tests.strategies import asset_correlations, interior_pds, monthly_pd_tables, z_values


def _assumptions(scenarios: dict, frameworks=("ifrs9", "cecl"), cecl=None) -> Assumptions:
    return Assumptions.model_validate(
        {
            "run": {"as_of": "2026-09-30", "frameworks": list(frameworks)},
            "segments": {"auto": {"pd_12m": 0.02, "lgd": 0.4}},
            "ifrs9": {"sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month"},
            "cecl": cecl or {"reasonable_supportable_months": 24, "reversion_months": 12},
            "scenarios": scenarios,
        }
    )


def _scipy_vasicek(pd, rho, z):
    # the formula, evaluated with scipy.stats.norm as the reference implementation
    return norm.cdf((norm.ppf(pd) - np.sqrt(rho) * z) / np.sqrt(1.0 - rho))


# --------------------------------------------------------------------------------------
# Vasicek conditional PD
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("z", "expected"),
    [
        (-1.0, 0.035341),  # computed with scipy.stats.norm: 0.0353406638
        (0.0, 0.012953),  # computed with scipy.stats.norm: 0.0129534850
        (1.0, 0.004052),  # computed with scipy.stats.norm: 0.0040522204
    ],
)
def test_vasicek_published_points(z, expected):
    assert vasicek_conditional_pd(0.02, 0.15, z) == pytest.approx(expected, abs=5e-7)


def test_vasicek_matches_scipy_on_a_grid():
    pd = np.array([1e-6, 1e-4, 0.003, 0.02, 0.2, 0.5, 0.9, 0.999999])[:, None, None]
    rho = np.array([0.01, 0.04, 0.15, 0.3, 0.6])[None, :, None]
    z = np.linspace(-5.0, 5.0, 11)[None, None, :]
    got = vasicek_conditional_pd(pd, rho, z)
    assert got.shape == (8, 5, 11)
    np.testing.assert_allclose(got, _scipy_vasicek(pd, rho, z), rtol=1e-10, atol=1e-300)  # scipy.stats.norm


@pytest.mark.parametrize("pd", [0.003, 0.02, 0.1, 0.4])
@pytest.mark.parametrize("rho", [0.04, 0.15, 0.3])
def test_vasicek_averages_back_to_the_unconditional_pd(pd, rho):
    # E[PD(Z)] = PD for Z ~ N(0, 1): the identity behind the Basel II IRB formula
    # (BCBS 2005, An Explanatory Note on the Basel II IRB Risk Weight Functions);
    # Gauss-Hermite quadrature for the weight exp(-x^2/2), numpy.polynomial.hermite_e.hermegauss
    nodes, weights = hermegauss(120)
    mean = np.sum(weights * vasicek_conditional_pd(pd, rho, nodes)) / math.sqrt(2.0 * math.pi)
    assert mean == pytest.approx(pd, rel=1e-9)


def test_vasicek_at_the_999_quantile():
    # Basel II para 328 risk-weight function: N[(G(PD) + sqrt(R) G(0.999)) / sqrt(1 - R)];
    # value 0.1102648 computed with scipy.stats.norm
    z = -norm.ppf(0.999)
    assert vasicek_conditional_pd(0.01, 0.15, z) == pytest.approx(0.110265, abs=5e-7)


def test_median_economy_is_below_the_average():
    # z = 0 is the median economy: PD(0) < PD for PD < 0.5 (convexity); from the formula
    assert vasicek_conditional_pd(0.02, 0.15, 0.0) < 0.02
    assert vasicek_conditional_pd(0.5, 0.15, 0.0) == pytest.approx(0.5, abs=1e-15)


def test_vasicek_edges_and_scalars():
    assert vasicek_conditional_pd([0.0, 1.0], 0.15, [-3.0, 3.0]).tolist() == [0.0, 1.0]
    assert np.ndim(vasicek_conditional_pd(0.02, 0.15, 0.5)) == 0
    assert vasicek_conditional_pd(0.02, 0.0, 2.0) == pytest.approx(0.02, rel=1e-14)  # no correlation
    for bad in [dict(pd=1.2, rho=0.1, z=0.0), dict(pd=np.nan, rho=0.1, z=0.0),
                dict(pd=0.1, rho=1.0, z=0.0), dict(pd=0.1, rho=0.1, z=np.inf)]:
        with pytest.raises(ValueError):
            vasicek_conditional_pd(**bad)


@settings(max_examples=50)
@given(pd=interior_pds, rho=asset_correlations, z1=z_values, z2=z_values)
def test_vasicek_monotone_decreasing_in_z_and_a_probability(pd, rho, z1, z2):
    lo, hi = min(z1, z2), max(z1, z2)
    a, b = vasicek_conditional_pd(pd, rho, lo), vasicek_conditional_pd(pd, rho, hi)
    assert 0.0 <= b <= a <= 1.0


# --------------------------------------------------------------------------------------
# Asset correlation
# --------------------------------------------------------------------------------------


def test_other_retail_correlation_by_hand():
    seg = SegmentAssumptions(pd_12m=0.01, lgd=0.5, retail_class="other_retail")
    # by hand, Basel II para 330: e^-0.35 = 0.7046881, k = 0.2953119 (e^-35 negligible),
    # 0.03 * 0.2953119 + 0.16 * 0.7046881 = 0.1216095
    assert asset_correlation(seg, 0.01) == pytest.approx(0.1216095, abs=1e-7)
    # by hand: e^-1.75 = 0.1737739, k = 0.8262261, 0.03 k + 0.16 (1 - k) = 0.0525906
    assert asset_correlation(seg, 0.05) == pytest.approx(0.0525906, abs=1e-7)
    np.testing.assert_allclose(asset_correlation(seg, np.array([0.0, 1.0])), [0.16, 0.03])  # the bounds, para 330


def test_fixed_correlations_and_the_stated_value_wins():
    mortgage = SegmentAssumptions(pd_12m=0.01, lgd=0.2, retail_class="residential_mortgage")
    card = SegmentAssumptions(pd_12m=0.05, lgd=0.8, retail_class="qualifying_revolving")
    stated = SegmentAssumptions(pd_12m=0.05, lgd=0.8, retail_class="qualifying_revolving", asset_correlation=0.2)
    assert asset_correlation(mortgage, 0.01) == 0.15  # Basel II para 328
    assert asset_correlation(card, 0.05) == 0.04  # Basel II para 329
    assert asset_correlation(stated, np.array([0.01, 0.02])).tolist() == [0.2, 0.2]


def test_no_correlation_stated_is_an_error_naming_the_segment():
    seg = SegmentAssumptions(pd_12m=0.01, lgd=0.5)
    with pytest.raises(AssumptionsError, match="segments.auto") as err:
        asset_correlation(seg, 0.01, name="auto")
    assert "retail_class" in str(err.value)


# --------------------------------------------------------------------------------------
# Paths
# --------------------------------------------------------------------------------------


def test_by_year():
    path = by_year([2.0, 1.5], 30, after=1.0)
    assert path.tolist() == [2.0] * 12 + [1.5] * 12 + [1.0] * 6
    assert by_year([], 3, after=0.7).tolist() == [0.7, 0.7, 0.7]


def test_multiplier_path_caps_and_stops():
    base = np.array([[0.01] * 24 + [0.6] * 12])
    out = scenario_marginals(base, Scenario(weight=1.0, pd_multiplier=[3.0, 1.0, 2.0]), None)
    np.testing.assert_allclose(out[0, :12], 0.03)
    np.testing.assert_allclose(out[0, 12:24], 0.01)
    np.testing.assert_allclose(out[0, 24:], 1.0)  # capped at 1
    assert np.array_equal(scenario_marginals(base, Scenario(weight=1.0), None), base)  # no path


def test_z_path_matches_the_annual_conditional_pd():
    base = np.array([np.linspace(0.001, 0.003, 30), np.full(30, 0.0)])
    rho = np.array([0.15, 0.15])
    out = scenario_marginals(base, Scenario(weight=1.0, z=[-1.5, 0.8]), rho)
    for year, z in enumerate([-1.5, 0.8]):
        months = slice(12 * year, 12 * year + 12)
        q = 1.0 - np.prod(1.0 - base[0, months])
        q_z = 1.0 - np.prod(1.0 - out[0, months])
        assert q_z == pytest.approx(_scipy_vasicek(q, 0.15, z), rel=1e-10)  # scipy.stats.norm
    np.testing.assert_array_equal(out[0, 24:], base[0, 24:])  # after the list: the base
    np.testing.assert_array_equal(out[1], 0.0)  # a year with no default risk stays at zero
    ratio = out[0, :12] / base[0, :12]
    assert ratio.min() > 1.0  # z < 0: every month worse


def test_z_path_partial_year_and_certain_default():
    base = np.array([[0.02] * 5 + [1.0] + [0.02] * 3])
    out = scenario_marginals(base, Scenario(weight=1.0, z=[2.0]), np.array([0.1]))
    assert out[0, 5] == 1.0 and np.all(np.isfinite(out))
    np.testing.assert_array_equal(out, base)  # the year's PD is 1 whatever z is


def test_z_path_without_correlation_is_an_error():
    with pytest.raises(AssumptionsError, match="asset correlation"):
        scenario_marginals(np.full((1, 12), 0.01), Scenario(weight=1.0, z=[-1.0]), None)


@settings(max_examples=50)
@given(base=monthly_pd_tables(), multipliers=st.lists(st.floats(1.0, 10.0), max_size=5))
def test_multipliers_of_at_least_one_never_lower_a_pd(base, multipliers):
    out = scenario_marginals(base, Scenario(weight=1.0, pd_multiplier=multipliers), None)
    assert np.all(out >= base) and np.all(out <= 1.0)


@settings(max_examples=50)
@given(base=monthly_pd_tables(), z=st.lists(z_values, min_size=1, max_size=5), rho=asset_correlations)
def test_z_paths_stay_probabilities(base, z, rho):
    out = scenario_marginals(base, Scenario(weight=1.0, z=z), np.full(base.shape[0], rho))
    assert np.all((out >= 0.0) & (out <= 1.0))
    np.testing.assert_array_equal(out[base == 0.0], 0.0)
    np.testing.assert_array_equal(out[base == 1.0], 1.0)


# --------------------------------------------------------------------------------------
# CECL reversion
# --------------------------------------------------------------------------------------


def test_immediate_reversion_is_one_from_the_first_month_after_the_period():
    # ASC 326-20-30-9: revert to historical loss information after the forecast period
    w = reversion_weights(24, 12, "immediate", 36)
    assert w.tolist() == [1.0] * 24 + [0.0] * 12
    a = _assumptions({"down": {"weight": 1.0, "pd_multiplier": [1.8, 1.8, 1.8]}},
                     cecl={"reasonable_supportable_months": 24, "reversion_months": 12, "reversion": "immediate"})
    tables = scenario_tables(np.full((1, 36), 0.002), None, a, a.cecl)
    np.testing.assert_allclose(tables.pd_multiplier[0], [1.8] * 24 + [1.0] * 12)
    np.testing.assert_allclose(tables.pd[0, 0], [0.0036] * 24 + [0.002] * 12)


def test_straight_line_reversion_hand_computed():
    # hand-computed: R = 3, M = 4 -> weights 1, 1, 1, 3/4, 2/4, 1/4, 0, 0
    w = reversion_weights(3, 4, "straight_line", 8)
    assert w.tolist() == [1.0, 1.0, 1.0, 0.75, 0.5, 0.25, 0.0, 0.0]
    a = _assumptions({"down": {"weight": 1.0, "pd_multiplier": [1.8]}},
                     cecl={"reasonable_supportable_months": 3, "reversion_months": 4})
    tables = scenario_tables(np.full((2, 8), 0.001), None, a, a.cecl)
    # multiplier moves linearly from 1.8 to 1: 1.8, 1.8, 1.8, 1.6, 1.4, 1.2, 1.0, 1.0
    np.testing.assert_allclose(tables.pd_multiplier[0], [1.8, 1.8, 1.8, 1.6, 1.4, 1.2, 1.0, 1.0])
    np.testing.assert_allclose(tables.pd[:, 0] / 0.001, [[1.8, 1.8, 1.8, 1.6, 1.4, 1.2, 1.0, 1.0]] * 2)
    assert reversion_weights(3, 0, "straight_line", 5).tolist() == [1.0, 1.0, 1.0, 0.0, 0.0]
    assert reversion_weights(0, 2, "straight_line", 3).tolist() == [0.5, 0.0, 0.0]


def test_revert_broadcasts_over_months():
    out = revert(np.full((2, 3, 4), 0.01), np.full((2, 3, 4), 0.03), np.array([1.0, 0.5, 0.0, 0.0]))
    np.testing.assert_allclose(out[1, 2], [0.03, 0.02, 0.01, 0.01])


def test_scenario_tables_ifrs9_and_cecl_side_paths():
    a = _assumptions(
        {
            "base": {"weight": 0.5, "pd_multiplier": [1.0]},
            "down": {"weight": 0.3, "pd_multiplier": [2.0, 1.5], "lgd_multiplier": [1.2],
                     "collateral_index": [0.9, 0.8]},
            "macro": {"weight": 0.2, "z": [-1.0, -0.5]},
        },
        cecl={"reasonable_supportable_months": 12, "reversion_months": 12},
    )
    base = np.full((3, 48), 0.002)
    rho = np.array([0.15, 0.04, 0.1])
    ifrs9 = scenario_tables(base, rho, a)
    assert ifrs9.names == ("base", "down", "macro") and ifrs9.weights.tolist() == [0.5, 0.3, 0.2]
    assert ifrs9.pd.shape == (3, 3, 48) and ifrs9.reversion is None
    np.testing.assert_allclose(ifrs9.lgd_multiplier[1], [1.2] * 12 + [1.0] * 36)
    np.testing.assert_allclose(ifrs9.collateral_index[1], [0.9] * 12 + [0.8] * 36)  # holds its last value
    np.testing.assert_allclose(ifrs9.collateral_index[0], 1.0)
    assert np.isnan(ifrs9.pd_multiplier[2]).all()
    np.testing.assert_allclose(ifrs9.pd[:, 2, 24:], base[:, 24:])
    cecl = scenario_tables(base, rho, a, a.cecl)
    # after 24 months every path is back to the base and the side paths to 1
    np.testing.assert_allclose(cecl.pd[:, :, 24:], np.broadcast_to(base[:, None, 24:], (3, 3, 24)))
    np.testing.assert_allclose(cecl.collateral_index[1, [0, 17, 30]], [0.9, 0.9, 1.0])  # 0.8 + 0.5 * 0.2
    np.testing.assert_allclose(cecl.lgd_multiplier[1, [0, 12, 17]], [1.2, 1.0, 1.0])


def test_reversion_table_long_form():
    a = _assumptions({"base": {"weight": 0.6}, "macro": {"weight": 0.4, "z": [-1.0]}})
    tables = scenario_tables(np.full((1, 40), 0.001), np.array([0.15]), a, a.cecl)
    frame = reversion_table(tables)
    assert list(frame.columns) == ["scenario", "month", "weight_on_scenario", "pd_multiplier",
                                   "lgd_multiplier", "collateral_index"]
    assert len(frame) == 80
    assert frame["pd_multiplier"][frame["scenario"] == "macro"].isna().all()
    assert frame["weight_on_scenario"].iloc[[0, 23, 24, 29, 36]].tolist() == pytest.approx([1, 1, 11 / 12, 0.5, 0])


# --------------------------------------------------------------------------------------
# Weighting on losses
# --------------------------------------------------------------------------------------


def _lifetime_loss(pd_path: np.ndarray, lgd: float = 0.5, ead: float = 1_000.0) -> np.ndarray:
    # constant EAD: loss = LGD x EAD x cumulative PD = LGD x EAD x (1 - prod(1 - pd_t))
    return lgd * ead * (1.0 - np.prod(1.0 - pd_path, axis=-1))


def test_weighted_loss_differs_from_loss_at_the_weighted_pd():
    # IFRS 9 5.5.17(a), B5.5.42: weight outcomes, not inputs; losses are non-linear in PD
    a = _assumptions(
        {"up": {"weight": 0.3, "z": [1.5] * 5}, "mid": {"weight": 0.4, "z": [0.0] * 5},
         "down": {"weight": 0.3, "z": [-1.5] * 5}},
    )
    tables = scenario_tables(np.full((1, 60), 0.004), np.array([0.15]), a)
    losses = _lifetime_loss(tables.pd[0])  # one per scenario
    weighted_loss = float(weighted(losses, tables.weights))
    loss_at_weighted_pd = float(_lifetime_loss(weighted(tables.pd[0].T, tables.weights)))
    loss_at_weighted_z = float(_lifetime_loss(tables.pd[0, 1]))  # the weighted z is 0
    assert abs(weighted_loss - loss_at_weighted_pd) > 0.01
    assert weighted_loss < loss_at_weighted_pd  # survival makes loss concave in PD (Jensen)
    assert weighted_loss > loss_at_weighted_z * 1.05  # and the z transform is convex


def test_weighting_with_a_cap():
    # PD multiplier 3 on a monthly PD of 0.4 caps at 1: the weighted loss is not the loss at the weighted multiplier
    a = _assumptions({"down": {"weight": 0.5, "pd_multiplier": [3.0]}, "up": {"weight": 0.5, "pd_multiplier": [0.5]}})
    tables = scenario_tables(np.full((1, 1), 0.4), None, a)
    losses = _lifetime_loss(tables.pd[0])
    assert float(weighted(losses, tables.weights)) == pytest.approx(0.5 * 500.0 + 0.5 * 100.0)  # by hand
    at_mean_multiplier = _lifetime_loss(np.minimum(1.0, np.array([0.4 * 1.75])))
    assert float(at_mean_multiplier) == pytest.approx(350.0)  # by hand: 0.5 x 1000 x 0.7


def test_a_scenario_at_weight_one_equals_that_scenario():
    a = _assumptions({"up": {"weight": 0.0, "pd_multiplier": [0.8]}, "down": {"weight": 1.0, "z": [-2.0, -1.0]},
                      "base": {"weight": 0.0}})
    base = np.full((2, 36), 0.003)
    tables = scenario_tables(base, np.array([0.15, 0.04]), a)
    losses = _lifetime_loss(tables.pd)  # (K, S)
    np.testing.assert_array_equal(weighted(losses, tables.weights), losses[:, 1])
    alone = scenario_marginals(base, a.scenarios["down"], np.array([0.15, 0.04]))
    np.testing.assert_array_equal(weighted(losses, tables.weights), _lifetime_loss(alone))


def test_weighted_checks_the_scenario_axis():
    with pytest.raises(ValueError, match="2 weights"):
        weighted(np.ones((4, 3)), [0.5, 0.5])


def test_scenario_tables_is_a_frozen_result():
    tables = scenario_tables(np.full((1, 2), 0.01), None, _assumptions({"b": {"weight": 1.0}}))
    assert isinstance(tables, ScenarioTables)
    with pytest.raises(AttributeError):
        tables.names = ("x",)  # type: ignore[misc]
