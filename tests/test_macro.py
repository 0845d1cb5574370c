"""Scenarios as macro paths: quarter -> month, satellite models (probit / logit), collateral links,
their validation, and the engine run they feed."""

from __future__ import annotations

from datetime import date

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.special import expit
from scipy.special import logit as scipy_logit
from scipy.stats import norm

from tests import books
from allowance import engine
from allowance.exceptions import AssumptionsError
from allowance.links import shift_probability
from allowance.macro import (
    MacroLinks,
    collateral_path,
    macro_collateral,
    macro_marginals,
    macro_path_table,
    monthly_from_quarterly,
    on_months,
    pd_shift,
)
from allowance.scenarios import reversion_weights, revert, scenario_tables
from allowance.schemas import (
    Assumptions,
    CollateralLink,
    MacroSection,
    RunConfig,
    SatelliteModel,
    Scenario,
)

AS_OF = date(2026, 9, 30)
# the paths start one year before the as-of date: four quarters of history feed the lags
START = "2025Q4"
HISTORY = [4.3, 4.2, 4.1, 4.1]  # 2025Q4 .. 2026Q3, observed (invented)
BASELINE_U = HISTORY + [4.1] * 12
BASELINE_HPI = [100.0, 100.8, 101.6, 102.4] + [103.2 + 0.8 * q for q in range(12)]


def _links(interpolation="step", baseline=None, satellites=None, keys=()) -> MacroLinks:
    section = MacroSection(start=START, interpolation=interpolation,
                           baseline=baseline or {"u": BASELINE_U, "hpi": BASELINE_HPI})
    return MacroLinks(AS_OF, section, satellites or {}, tuple(keys))


def _assumptions(scenarios: dict, segments: dict | None = None, frameworks=("ifrs9", "cecl"),
                 interpolation="step", baseline=None) -> Assumptions:
    satellite = {"link": "probit", "coefficients": {"u": 0.08}, "lag_months": {"u": 3}}
    return Assumptions.model_validate({
        "run": {"as_of": AS_OF.isoformat(), "frameworks": list(frameworks)},
        "segments": segments or {
            "auto": {"pd_12m": 0.02, "lgd": 0.4, "cpr": 0.1, "satellite": satellite},
            "mort": {
                "pd_curve": [0.005, 0.012, 0.02], "lgd": 0.2, "psa": 150,
                "collateral_lgd": {"haircut": 0.2, "recovery_cost": 0.05, "floor": 0.05, "months_to_recovery": 12},
                "satellite": {"link": "logit", "coefficients": {"u": 0.1, "hpi": -0.01},
                              "lag_months": {"u": 6},
                              "collateral": {"variable": "hpi", "form": "level", "relative_to": "baseline"}},
            },
            "cards": {"pd_12m_by_grade": {"A": 0.02, "B": 0.06}, "lgd": 0.85, "ccf": 0.3,
                      "behavioural_life_months": 36, "payment_rate": 0.05, "unconditionally_cancellable": True,
                      "satellite": {"link": "probit", "coefficients": {"u": 0.05}}},
        },
        "ifrs9": {"sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month"},
        "cecl": {"reasonable_supportable_months": 24, "reversion_months": 12,
                 "payment_allocation": "measured_balance_first"},
        "macro": {"start": START, "interpolation": interpolation,
                  "baseline": baseline or {"u": BASELINE_U, "hpi": BASELINE_HPI}},
        "scenarios": scenarios,
    })


def _tape(n: int = 240, seed: int = 11) -> pd.DataFrame:
    """An accepted-tape frame as intake hands it over (invented loans)."""
    return books.engine_tape(n, seed, collateral_ratio=1.1)


TAPE = _tape()


def _run(a: Assumptions) -> pd.DataFrame:
    return engine.run(TAPE, RunConfig(assumptions=a), schedule_sample=0).loans


def _ecl_columns(loans: pd.DataFrame) -> list[str]:
    return [c for c in loans.columns if c.startswith("ecl_")]


# --------------------------------------------------------------------------------------
# Quarters to months, and the calendar
# --------------------------------------------------------------------------------------


def test_step_keeps_each_quarter_value_for_its_three_months():
    # step convention: a quarterly average held over its months (common practice, no source)
    assert monthly_from_quarterly([4.0, 5.0, 7.0], "step").tolist() == [4.0] * 3 + [5.0] * 3 + [7.0] * 3


def test_linear_runs_through_quarter_mid_months():
    got = monthly_from_quarterly([4.0, 5.0, 7.0], "linear")
    # the same line evaluated with numpy.interp at mid-months 1, 4, 7 (0-based), flat at the ends
    np.testing.assert_allclose(got, np.interp(np.arange(9), [1, 4, 7], [4.0, 5.0, 7.0]))
    assert got[[1, 4, 7]].tolist() == [4.0, 5.0, 7.0]
    assert got[0] == 4.0 and got[8] == 7.0
    assert got[2] == pytest.approx(4.0 + 1.0 / 3.0)  # one third of the way from 4 to 5


def test_paths_align_with_the_calendar():
    links = _links()
    path = [float(q) for q in range(16)]  # quarter q of the path holds q
    # 2025Q4 is quarter 0; the as-of month, September 2026, lies in 2026Q3 = quarter 3;
    # month 1 (October 2026) lies in 2026Q4 = quarter 4; month 12 (September 2027) in quarter 7
    got = on_months(path, [-11, -9, 0, 1, 3, 4, 12, 36, 37], links)
    assert got[:8].tolist() == [0.0, 0.0, 3.0, 4.0, 4.0, 5.0, 7.0, 15.0]
    assert np.isnan(got[8])  # past the last quarter
    assert np.isnan(on_months(path, [-12], links)[0])  # before 2025Q4


# --------------------------------------------------------------------------------------
# The links
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("p", [1e-8, 1e-4, 0.003, 0.02, 0.3, 0.9])
@pytest.mark.parametrize("shift", [-1.5, -0.2, 0.05, 0.7])
def test_probit_and_logit_shifts_match_scipy(p, shift):
    # scipy.stats.norm and scipy.special.expit / logit as the reference implementations
    assert shift_probability(p, shift, "probit") == pytest.approx(norm.cdf(norm.ppf(p) + shift), rel=1e-12)
    assert shift_probability(p, shift, "logit") == pytest.approx(expit(scipy_logit(p) + shift), rel=1e-12)


@settings(max_examples=60, deadline=None, derandomize=True)
@given(p=st.floats(0.0, 1.0), a=st.floats(-3, 3), b=st.floats(-3, 3), link=st.sampled_from(["probit", "logit"]))
def test_a_larger_shift_never_lowers_the_pd(p, a, b, link):
    lo, hi = sorted([a, b])
    assert shift_probability(p, lo, link) <= shift_probability(p, hi, link)
    assert 0.0 <= shift_probability(p, hi, link) <= 1.0


def test_zero_shift_returns_the_probability_bit_for_bit():
    p = np.array([0.0, 1e-9, 0.0123456789, 0.5, 0.987654321, 1.0])
    for link in ("probit", "logit"):
        out = shift_probability(p, np.zeros(6), link)
        assert out.tobytes() == p.tobytes()


# --------------------------------------------------------------------------------------
# The satellite model's shift
# --------------------------------------------------------------------------------------


def test_shift_is_beta_times_the_lagged_deviation():
    links = _links()
    path = HISTORY + [5.1, 6.1, 6.6, 6.1] + [4.1] * 8  # +1, +2, +2.5, +2 points in 2026Q4..2027Q3
    model = SatelliteModel(link="probit", coefficients={"u": 0.08}, lag_months={"u": 3})
    shift = pd_shift(model, Scenario(weight=1, macro={"u": path}), 24, links)
    # month t reads the deviation of month t - 3 (hand-computed from the step path)
    expected = 0.08 * np.array([0] * 3 + [1] * 3 + [2] * 3 + [2.5] * 3 + [2] * 3 + [0] * 9)
    np.testing.assert_allclose(shift, expected, rtol=0, atol=1e-15)


def test_history_quarters_feed_the_lags():
    # 2026Q3 (history, July-September) sits 0.4 above the baseline and 2026Q2 on it: with a
    # 6-month lag, months 1-3 read April-June (0), months 4-6 read July-September (0.4)
    baseline = {"u": [4.1] * 16}
    links = _links(baseline=baseline)
    path = [4.3, 4.2, 4.1, 4.5] + [4.1] * 12
    model = SatelliteModel(link="probit", coefficients={"u": 0.1}, lag_months={"u": 6})
    shift = pd_shift(model, Scenario(weight=1, macro={"u": path}), 9, links)
    np.testing.assert_allclose(shift, [0.0] * 3 + [0.04] * 3 + [0.0] * 3, atol=1e-15)


def test_macro_marginals_shift_each_segment_along_its_own_link():
    links = _links(satellites={
        "a": SatelliteModel(link="probit", coefficients={"u": 0.2}),
        "b": SatelliteModel(link="logit", coefficients={"u": 0.3}),
    }, keys=("a", "a", "b"))
    base = np.array([[0.001] * 6, [0.004] * 6, [0.01] * 6])
    path = HISTORY + [5.1, 5.1]  # one point above the baseline for two quarters
    out = macro_marginals(base, Scenario(weight=1, macro={"u": path}), links)
    np.testing.assert_allclose(out[0], norm.cdf(norm.ppf(0.001) + 0.2), rtol=1e-12)  # scipy.stats.norm
    np.testing.assert_allclose(out[1], norm.cdf(norm.ppf(0.004) + 0.2), rtol=1e-12)
    np.testing.assert_allclose(out[2], expit(scipy_logit(0.01) + 0.3), rtol=1e-12)  # scipy.special


def test_a_segment_without_a_model_is_an_error_not_a_silent_long_run_pd():
    links = _links(satellites={"a": None}, keys=("a",))
    with pytest.raises(AssumptionsError, match="segment 'a' has no satellite model"):
        macro_marginals(np.full((1, 3), 0.01), Scenario(weight=1, macro={"u": BASELINE_U}), links)


# --------------------------------------------------------------------------------------
# Property: the baseline path and zero coefficients give the long-run PD exactly
# --------------------------------------------------------------------------------------

_paths = st.lists(st.floats(0.0, 15.0, allow_nan=False), min_size=5, max_size=16)


@settings(max_examples=60, deadline=None, derandomize=True)
@given(
    base=st.lists(st.floats(0.0, 0.2), min_size=3, max_size=3),
    beta=st.floats(-2.0, 2.0),
    lag=st.integers(0, 18),
    link=st.sampled_from(["probit", "logit"]),
    interpolation=st.sampled_from(["step", "linear"]),
    path=_paths,
)
def test_a_path_equal_to_the_baseline_gives_the_long_run_pd_exactly(base, beta, lag, link, interpolation, path):
    links = _links(interpolation, baseline={"u": path},
                   satellites={"s": SatelliteModel(link=link, coefficients={"u": beta}, lag_months={"u": lag})},
                   keys=("s",) * 3)
    table = np.repeat(np.asarray(base)[:, None], 40, axis=1)
    out = macro_marginals(table, Scenario(weight=1, macro={"u": list(path)}), links)
    assert out.tobytes() == table.tobytes()


@settings(max_examples=60, deadline=None, derandomize=True)
@given(base=st.floats(0.0, 0.3), link=st.sampled_from(["probit", "logit"]), path=_paths, lag=st.integers(0, 12))
def test_zero_coefficients_give_the_long_run_pd_whatever_the_path(base, link, path, lag):
    links = _links(baseline={"u": [4.0] * len(path)},
                   satellites={"s": SatelliteModel(link=link, coefficients={"u": 0.0}, lag_months={"u": lag})},
                   keys=("s",))
    table = np.full((1, 30), base)
    out = macro_marginals(table, Scenario(weight=1, macro={"u": list(path)}), links)
    assert out.tobytes() == table.tobytes()


# --------------------------------------------------------------------------------------
# Collateral linked to a price variable
# --------------------------------------------------------------------------------------


def test_collateral_level_relative_to_the_as_of_month():
    links = _links()
    hpi = BASELINE_HPI[:4] + [100.0, 96.0, 92.0]  # 2026Q3 = 102.4 at the as-of month
    c = CollateralLink(variable="hpi", form="level", relative_to="as_of")
    got = collateral_path(c, Scenario(weight=1, macro={"hpi": hpi}), 12, links)
    np.testing.assert_allclose(got, np.repeat([100.0, 96.0, 92.0, 92.0], 3) / 102.4, rtol=1e-15)


def test_collateral_level_relative_to_the_baseline():
    links = _links()
    hpi = BASELINE_HPI[:4] + [100.0, 96.0]
    c = CollateralLink(variable="hpi", form="level", relative_to="baseline")
    got = collateral_path(c, Scenario(weight=1, macro={"hpi": hpi}), 9, links)
    base = np.repeat(BASELINE_HPI[4:7], 3)
    scen = np.repeat([100.0, 96.0, 96.0], 3)
    expected = (scen / 102.4) / (base / 102.4)
    expected[6:] = expected[5]  # holds its last value once the scenario's path ends
    np.testing.assert_allclose(got, expected, rtol=1e-14)


@pytest.mark.parametrize("form, value", [("annual_growth", 0.03), ("annual_growth_percent", 3.0)])
def test_collateral_growth_compounds_monthly_to_the_annual_rate(form, value):
    links = _links(baseline={"g": [0.0] * 12})
    c = CollateralLink(variable="g", form=form, relative_to="as_of")
    got = collateral_path(c, Scenario(weight=1, macro={"g": [value] * 12}), 24, links)
    # (1.03)^(t/12): twelve months at 3 % a year compound to 1.03 (common practice, no source)
    np.testing.assert_allclose(got, 1.03 ** (np.arange(1, 25) / 12), rtol=1e-13)


def test_the_baseline_leaves_collateral_at_today_exactly():
    links = _links()
    for form, baseline in (("level", BASELINE_HPI), ("annual_growth", [0.02] * 16)):
        c = CollateralLink(variable="hpi", form=form, relative_to="baseline")
        links = _links(baseline={"hpi": baseline})
        got = collateral_path(c, Scenario(weight=1, macro={"hpi": baseline}), 60, links)
        assert (got == 1.0).all()


def test_a_level_needs_the_as_of_month_in_the_path():
    section = MacroSection(start="2026Q4", interpolation="step", baseline={"hpi": [100.0, 99.0]})
    links = MacroLinks(AS_OF, section, {}, ())
    c = CollateralLink(variable="hpi", form="level", relative_to="as_of")
    with pytest.raises(AssumptionsError, match="measured from the as-of month"):
        collateral_path(c, Scenario(weight=1, macro={"hpi": [100.0, 99.0]}), 6, links)


def test_unlinked_segments_keep_the_scenarios_by_year_collateral_path():
    links = _links(satellites={
        "mort": SatelliteModel(link="probit", coefficients={"u": 0.0},
                               collateral=CollateralLink(variable="hpi", form="level", relative_to="as_of")),
        "auto": SatelliteModel(link="probit", coefficients={"u": 0.1}),
    }, keys=("mort", "auto"))
    scenario = Scenario(weight=1, macro={"u": BASELINE_U, "hpi": BASELINE_HPI[:4] + [51.2] * 4})
    out = macro_collateral(scenario, np.full(6, 0.9), links)
    np.testing.assert_allclose(out[0], 0.5)  # 51.2 / 102.4
    np.testing.assert_allclose(out[1], 0.9)


# --------------------------------------------------------------------------------------
# Scenario tables: CECL reversion applies on top, unchanged
# --------------------------------------------------------------------------------------


def test_cecl_reverts_macro_paths_to_the_long_run_pd():
    worse = [u + 2.0 for u in BASELINE_U[4:]]
    a = _assumptions({"down": {"weight": 1.0, "macro": {"u": HISTORY + worse, "hpi": BASELINE_HPI}}})
    keys = ["auto", "mort", "cards", "cards"]
    base = np.array([np.full(60, v) for v in (0.002, 0.001, 0.003, 0.008)])
    ifrs9 = scenario_tables(base, None, a, None, keys)
    cecl = scenario_tables(base, None, a, a.cecl, keys)
    w = reversion_weights(24, 12, "straight_line", 60)
    np.testing.assert_allclose(cecl.pd, revert(base[:, None, :], ifrs9.pd, w), rtol=0, atol=0)
    assert (cecl.pd[:, 0, 36:] == base[:, 36:]).all()  # fully reverted after 24 + 12 months
    # 2 points worse for 12 quarters (36 months), read with lags 3 (auto), 6 (mort), 0 (cards)
    assert (ifrs9.pd[:, 0, 6:36] > base[:, 6:36]).all()
    assert (ifrs9.pd[0, 0, 3:39] > base[0, 3:39]).all() and (ifrs9.pd[0, 0, 39:] == base[0, 39:]).all()
    assert np.isnan(ifrs9.pd_multiplier).all()  # a macro path has no multiplier to show


def test_scenarios_may_mix_kinds_across_a_run_but_not_within_one():
    a = _assumptions({
        "base": {"weight": 0.5, "macro": {"u": BASELINE_U, "hpi": BASELINE_HPI}},
        "management": {"weight": 0.5, "pd_multiplier": [1.3]},
    })
    t = scenario_tables(np.full((4, 24), 0.002), None, a, None, ["auto", "mort", "cards", "cards"])
    assert (t.pd[:, 0] == 0.002).all() and np.allclose(t.pd[:, 1, :12], 0.0026)


# --------------------------------------------------------------------------------------
# Validation at the edge
# --------------------------------------------------------------------------------------


GOOD_TOML = """
[run]
as_of = 2026-09-30
frameworks = ["cecl"]

[segments.auto]
pd_12m = 0.02
lgd = 0.4

[segments.auto.satellite]
link = "probit"
coefficients = { u = 0.08, hpi = -0.01 }
lag_months = { u = 3 }

[cecl]
reasonable_supportable_months = 24

[macro]
start = "2025Q4"
interpolation = "step"

[macro.baseline]
u = [4.3, 4.2, 4.1, 4.1, 4.1, 4.1, 4.1, 4.1, 4.1]
hpi = [100, 101, 102, 103, 104, 105, 106, 107, 108]

[scenarios.base]
weight = 0.5
macro = { u = [4.3, 4.2, 4.1, 4.1, 4.1, 4.1], hpi = [100, 101, 102, 103, 104, 105] }

[scenarios.down]
weight = 0.5
macro = { u = [4.3, 4.2, 4.1, 4.1, 5.0, 6.0, 6.5], hpi = [100, 101, 102, 103, 99, 95, 93] }
"""


def test_the_good_file_loads(tmp_path):
    from allowance.intake import load_assumptions

    path = tmp_path / "a.toml"
    path.write_text(GOOD_TOML, encoding="utf-8")
    config = load_assumptions(path)
    assert config.assumptions.scenarios["down"].pd_path_kind == "macro"
    assert config.assumptions.macro.start == "2025Q4"


@pytest.mark.parametrize(
    ("old", "new", "message"),
    [
        ("weight = 0.5\nmacro = { u = [4.3, 4.2, 4.1, 4.1, 5.0",
         "weight = 0.5\npd_multiplier = [1.2]\nmacro = { u = [4.3, 4.2, 4.1, 4.1, 5.0",
         "not pd_multiplier and macro"),
        ("[macro]\nstart", "[macro_]\nstart", "unknown key 'macro_'"),
        ('[segments.auto.satellite]\nlink = "probit"\ncoefficients = { u = 0.08, hpi = -0.01 }\nlag_months = { u = 3 }',
         "", "segment 'auto' has no \\[segments.auto.satellite\\]"),
        (", hpi = [100, 101, 102, 103, 99, 95, 93]", "", "scenarios.down.macro gives no path for 'hpi'"),
        ("hpi = [100, 101, 102, 103, 99, 95, 93]", "hpi = [100, 101, 102, 103, 99, 95, 93], gdp = [1.0]",
         "scenarios.down.macro.gdp has no baseline path"),
        ('start = "2025Q4"', 'start = "2027Q1"', "begins after the first projected month"),
        ('start = "2025Q4"', 'start = "Q4 2025"', "not a calendar quarter"),
        ('interpolation = "step"', 'interpolation = "cubic"', "'step' or 'linear'"),
        ("5.0, 6.0, 6.5]", "5.0, 6.0, 6.5, 6.5, 6.5, 6.5]", "the baseline must cover"),
        ("u = [4.3, 4.2, 4.1, 4.1, 5.0", "u = [4.4, 4.2, 4.1, 4.1, 5.0", "differ in 2025Q4, which is history"),
        ("lag_months = { u = 3 }", "lag_months = { v = 3 }", "lag_months names 'v'"),
        ('link = "probit"', 'link = "cloglog"', "'probit' or 'logit'"),
        ("lag_months = { u = 3 }", "lag_months = { u = -1 }", "at least 0"),
        ('interpolation = "step"', "", "required key 'interpolation' is missing"),
    ],
)
def test_bad_macro_assumptions_are_named(old, new, message, tmp_path):
    from allowance.intake import load_assumptions

    assert old in GOOD_TOML
    path = tmp_path / "a.toml"
    path.write_text(GOOD_TOML.replace(old, new, 1), encoding="utf-8")
    with pytest.raises(AssumptionsError, match=message) as info:
        load_assumptions(path)
    assert "a.toml" in str(info.value)


# --------------------------------------------------------------------------------------
# The engine: to the cent, and the direction of the effect
# --------------------------------------------------------------------------------------


def test_a_baseline_path_gives_the_run_without_the_macro_link_to_the_cent():
    # secured segment with a linked collateral index, CECL reversion and IFRS 9 staging included
    with_link = _assumptions({
        "base": {"weight": 0.7, "macro": {"u": BASELINE_U, "hpi": BASELINE_HPI}},
        "flat": {"weight": 0.3, "macro": {"u": BASELINE_U[:6], "hpi": BASELINE_HPI[:9]}},
    })
    data = with_link.model_dump(mode="json", exclude_none=True)
    data.pop("macro")
    for seg in data["segments"].values():
        seg.pop("satellite")
    data["scenarios"] = {"base": {"weight": 0.7}, "flat": {"weight": 0.3}}
    without = Assumptions.model_validate(data)
    a, b = _run(with_link), _run(without)
    for col in _ecl_columns(a):
        assert (a[col].to_numpy() == b[col].to_numpy()).all(), col
    assert (a["stage"] == b["stage"]).all()


def test_zero_coefficients_give_the_long_run_run_whatever_the_path():
    zero = {"link": "probit", "coefficients": {"u": 0.0, "hpi": 0.0}}
    segments = {
        "auto": {"pd_12m": 0.02, "lgd": 0.4, "cpr": 0.1, "satellite": zero},
        "mort": {"pd_curve": [0.005, 0.012, 0.02], "lgd": 0.2, "psa": 150,
                 "collateral_lgd": {"haircut": 0.2, "recovery_cost": 0.05, "floor": 0.05, "months_to_recovery": 12},
                 "satellite": zero},
        "cards": {"pd_12m_by_grade": {"A": 0.02, "B": 0.06}, "lgd": 0.85, "ccf": 0.3,
                  "behavioural_life_months": 36, "payment_rate": 0.05, "unconditionally_cancellable": True, "satellite": zero},
    }
    wild = {"u": HISTORY + [9.0, 12.0, 15.0], "hpi": BASELINE_HPI[:4] + [70.0] * 8}
    loans = _run(_assumptions({"down": {"weight": 1.0, "macro": wild}}, segments=segments))
    data = _assumptions({"down": {"weight": 1.0, "macro": wild}}, segments=segments).model_dump(
        mode="json", exclude_none=True)
    data.pop("macro")
    for seg in data["segments"].values():
        seg.pop("satellite")
    data["scenarios"] = {"down": {"weight": 1.0}}
    plain = _run(Assumptions.model_validate(data))
    for col in _ecl_columns(loans):
        assert (loans[col].to_numpy() == plain[col].to_numpy()).all(), col


@pytest.mark.slow
@settings(max_examples=12, deadline=None, derandomize=True)
@given(
    beta=st.floats(0.01, 0.5),
    lag=st.integers(0, 9),
    bumps=st.lists(st.floats(0.0, 4.0), min_size=8, max_size=8).filter(lambda b: max(b) > 0.05),
    link=st.sampled_from(["probit", "logit"]),
)
def test_a_higher_unemployment_path_gives_higher_pds_and_a_higher_allowance(beta, lag, bumps, link):
    satellite = {"link": link, "coefficients": {"u": beta}, "lag_months": {"u": lag}}
    segments = {
        "auto": {"pd_12m": 0.02, "lgd": 0.4, "cpr": 0.1, "satellite": satellite},
        "cards": {"pd_12m_by_grade": {"A": 0.02, "B": 0.06}, "lgd": 0.85, "ccf": 0.3,
                  "behavioural_life_months": 36, "payment_rate": 0.05, "unconditionally_cancellable": True, "satellite": satellite},
        "mort": {"pd_curve": [0.005, 0.012, 0.02], "lgd": 0.2, "psa": 150, "satellite": satellite},
    }
    low = HISTORY + [4.5] * 8
    high = HISTORY + [4.5 + b for b in bumps]
    runs = {}
    for name, path in (("low", low), ("high", high)):
        a = _assumptions({"s": {"weight": 1.0, "macro": {"u": path, "hpi": BASELINE_HPI}}}, segments=segments)
        keys = ["auto", "cards", "cards", "mort"]
        runs[name] = (scenario_tables(np.full((4, 48), 0.003), None, a, None, keys), _run(a))
    pd_low, pd_high = runs["low"][0].pd, runs["high"][0].pd
    assert (pd_high >= pd_low).all() and (pd_high > pd_low).any()
    for fw in ("ifrs9", "cecl"):
        assert runs["high"][1][f"ecl_{fw}"].sum() > runs["low"][1][f"ecl_{fw}"].sum()
        assert (runs["high"][1][f"ecl_{fw}_modelled"] >= runs["low"][1][f"ecl_{fw}_modelled"] - 1e-9).all()


def test_a_worse_house_price_path_raises_the_secured_allowance_through_collateral():
    hpi_down = BASELINE_HPI[:4] + [95.0, 88.0, 82.0, 80.0] + BASELINE_HPI[8:]
    base = _run(_assumptions({"s": {"weight": 1.0, "macro": {"u": BASELINE_U, "hpi": BASELINE_HPI}}}))
    down = _run(_assumptions({"s": {"weight": 1.0, "macro": {"u": BASELINE_U, "hpi": hpi_down}}}))
    mort = base["segment"] == "mort"
    assert down.loc[mort, "ecl_ifrs9"].sum() > base.loc[mort, "ecl_ifrs9"].sum()
    assert (down.loc[~mort, "ecl_ifrs9"] == base.loc[~mort, "ecl_ifrs9"]).all()


def test_macro_path_table_lists_scenarios_and_the_baseline():
    a = _assumptions({"down": {"weight": 1.0, "macro": {"u": HISTORY + [6.0] * 4, "hpi": BASELINE_HPI}}})
    t = macro_path_table(a, 12)
    down = t[(t.scenario == "down") & (t.variable == "u")]
    assert down["month"].min() == -11 and down["calendar_month"].iloc[0] == "2025-10"
    np.testing.assert_allclose(down.loc[down.month.between(1, 12), "deviation"], 1.9)
    assert set(t.scenario) == {"(baseline)", "down"}


def test_pd_path_table_weights_keys_by_balance_and_annualises():
    from allowance.macro import pd_path_table

    table = np.zeros((3, 2, 4))
    table[0], table[1], table[2] = 0.001, 0.003, 0.01  # a, a, b
    table[:, 1] *= 2.0  # the second scenario doubles every PD
    t = pd_path_table(table, ["base", "down"], ["a", "a", "b"], np.array([1.0, 3.0, 0.0]), framework="ifrs9")
    a = t[(t.segment == "a") & (t.scenario == "base")]
    np.testing.assert_allclose(a["marginal_pd"], 0.25 * 0.001 + 0.75 * 0.003)
    b = t[(t.segment == "b") & (t.scenario == "down")]  # no balance on b: its keys weigh equally
    np.testing.assert_allclose(b["marginal_pd"], 0.02)
    # the monthly PD at an annual rate: 1 - (1 - 0.02)^12 (common practice, no source)
    np.testing.assert_allclose(b["annualised_pd"], 1 - 0.98 ** 12, rtol=1e-12)
    assert set(t.framework) == {"ifrs9"} and t["month"].max() == 4


def test_path_changes_list_only_the_paths_a_what_if_moved():
    from allowance.macro import path_changes

    base = _assumptions({"base": {"weight": 0.5, "macro": {"u": BASELINE_U, "hpi": BASELINE_HPI}},
                         "down": {"weight": 0.5, "macro": {"u": HISTORY + [6.0] * 8, "hpi": BASELINE_HPI}}})
    worse = _assumptions({"base": {"weight": 0.5, "macro": {"u": BASELINE_U, "hpi": BASELINE_HPI}},
                          "down": {"weight": 0.5, "macro": {"u": HISTORY + [7.0] * 8, "hpi": BASELINE_HPI}}})
    t = path_changes(base, worse, 36)
    assert set(zip(t.scenario, t.variable)) == {("down", "u")}
    future = t[t.month.between(1, 24)]
    np.testing.assert_allclose(future["change"], 1.0)
    assert (t[t.month <= 0]["change"] == 0).all()  # history is the same in both
    assert path_changes(base, base, 36).empty


def test_the_engine_hands_over_each_segments_pd_path():
    worse = HISTORY + [6.1] * 8
    result = engine.run(TAPE, RunConfig(assumptions=_assumptions(
        {"base": {"weight": 0.5, "macro": {"u": BASELINE_U, "hpi": BASELINE_HPI}},
         "down": {"weight": 0.5, "macro": {"u": worse, "hpi": BASELINE_HPI}}})), schedule_sample=0)
    paths = result.pd_paths.set_index(["framework", "scenario", "segment", "month"]).sort_index()
    assert set(paths.index.get_level_values("segment")) == {"auto", "mort", "cards"}
    for seg, lag in (("auto", 3), ("mort", 6), ("cards", 0)):
        base = paths.loc[("ifrs9", "base", seg)]["marginal_pd"]
        down = paths.loc[("ifrs9", "down", seg)]["marginal_pd"]
        months = np.arange(1 + lag, 25)  # 2 points worse for 8 quarters, read with the segment's lag
        assert (down.loc[months] > base.loc[months]).all()
        assert (down.loc[np.arange(25 + lag, 40)] == base.loc[np.arange(25 + lag, 40)]).all()
