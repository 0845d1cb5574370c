"""PD term structures: the one primitive, its derived quantities, and every PD source at once."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import allowance.curves as curves
from allowance.curves import (
    PD_SOURCES,
    PdTermStructure,
    cumulative_pd,
    hazard_from_pd_12m,
    marginal_from_curve,
    pd_over,
    pd_term_structure,
    survival,
    unconditional_marginal,
)
from allowance.exceptions import AssumptionsError
from allowance.schemas import SegmentAssumptions
from tests.strategies import example_roll_matrix, marginal_arrays, pd_12m_values, pd_curves, segment_assumptions

MONTHS = 120
# an external prepayment (CPR 12 %/year as a monthly SMM), for the competing-risk cases
CPR_SMM = 1.0 - (1.0 - 0.12) ** (1.0 / 12.0)  # CPR -> SMM, common practice, no source


def _segments() -> dict[str, SegmentAssumptions]:
    """One segment per PD source (every key of the registry), invented values."""
    return {
        "pd_12m": SegmentAssumptions(pd_12m=0.021, lgd=0.45),
        "pd_12m_by_grade": SegmentAssumptions(pd_12m_by_grade={"A": 0.004, "B": 0.012, "C": 0.08}, lgd=0.45),
        "pd_curve": SegmentAssumptions(pd_curve=[0.02, 0.05, 0.07], lgd=0.45),
        "pd_curve_by_grade": SegmentAssumptions(
            pd_curve_by_grade={"A": [0.01, 0.02], "B": [0.05, 0.11, 0.15]}, lgd=0.45
        ),
        "pd_curve_by_age": SegmentAssumptions(pd_curve_by_age=[0.003, 0.011, 0.02, 0.026], lgd=0.3),
        "transition_matrix": SegmentAssumptions(
            transition_matrix=example_roll_matrix(120, False), charge_off_dpd=120, lgd=0.6
        ),
        "transition_matrix_paid_off": SegmentAssumptions(
            transition_matrix=example_roll_matrix(180, True), charge_off_dpd=180, lgd=0.8
        ),
    }


def _own_input_pd(name: str, segment: SegmentAssumptions, ts: PdTermStructure) -> tuple[np.ndarray, np.ndarray]:
    """(model, input): what each source must reproduce at its own horizons, without extra payoffs."""
    if name in ("pd_12m", "pd_12m_by_grade"):
        given_pd = [segment.pd_12m] if name == "pd_12m" else list(segment.pd_12m_by_grade.values())
        return pd_over(ts.marginal, 12), np.array(given_pd)  # constant hazard returns the input
    if name == "pd_curve_by_age":
        # a loan of age 0 lives through the curve year by year: it reproduces every point
        curve = segment.pd_curve_by_age
        return np.array([pd_over(ts.marginal[0], 12 * (y + 1)) for y in range(len(curve))]), np.asarray(curve)
    if name in ("pd_curve", "pd_curve_by_grade"):
        table = {"*": segment.pd_curve} if name == "pd_curve" else segment.pd_curve_by_grade
        model = [pd_over(ts.marginal[k], 12 * (y + 1)) for k, c in enumerate(table.values()) for y in range(len(c))]
        return np.array(model), np.concatenate([np.asarray(c) for c in table.values()])
    probs = np.array(segment.transition_matrix.probabilities)
    nb = len(ts.keys)
    # Kemeny & Snell, Finite Markov Chains: P(absorbed in charge_off by t) = (P^t)[i, charge_off]
    return pd_over(ts.marginal, 12, ts.smm), np.linalg.matrix_power(probs, 12)[:nb, nb]


CASES = [(name, extra) for name in _segments() for extra in (False, True) if not (extra and name.endswith("paid_off"))]


@pytest.mark.parametrize(("name", "extra_smm"), CASES, ids=[f"{n}-{'cpr' if e else 'no_cpr'}" for n, e in CASES])
def test_identities_hold_for_every_pd_source(name: str, extra_smm: bool) -> None:
    # identities of the competing-risk survival model, common practice, no source
    segment = _segments()[name]
    ts = pd_term_structure("demo", segment, MONTHS)
    assert ts.source == segment.pd_source and ts.marginal.shape == (len(ts.keys), MONTHS)
    smm = np.full(ts.marginal.shape, CPR_SMM) if extra_smm else ts.smm

    d = unconditional_marginal(ts.marginal, smm)
    cum = cumulative_pd(ts.marginal, smm)
    # unconditional marginals sum to the cumulative PD, at every horizon
    np.testing.assert_allclose(np.cumsum(d, axis=-1), cum, rtol=0, atol=1e-14)
    for h in (0, 1, 12, 37, MONTHS):
        np.testing.assert_allclose(pd_over(ts.marginal, h, smm), d[:, :h].sum(axis=-1), rtol=0, atol=1e-14)
    # lifetime PD <= 1 and non-decreasing in the horizon
    horizons = np.stack([pd_over(ts.marginal, h, smm) for h in range(MONTHS + 1)], axis=-1)
    assert np.all(np.diff(horizons, axis=-1) >= 0.0) and np.all(horizons <= 1.0)
    # defaulted + still active <= 1 (the rest paid off); = 1 without payoffs
    total = cum + survival(ts.marginal, smm)
    if smm is None:
        np.testing.assert_allclose(total, 1.0, rtol=0, atol=1e-12)
    else:
        assert np.all(total <= 1.0 + 1e-12)

    model, expected = _own_input_pd(name, segment, ts)
    if not extra_smm:
        # each source reproduces its own input: 12-month PD, curve points, (P^12)[i, co]
        np.testing.assert_allclose(model, expected, rtol=0, atol=1e-12)
    else:
        # a competing payoff can only lower the PD before payoff
        assert np.all(pd_over(ts.marginal, 12, smm) <= pd_over(ts.marginal, 12, ts.smm) + 1e-15)


def test_every_registry_key_is_covered_by_the_parametrised_test() -> None:
    # common practice, no source: a new PD source must join the identity test
    assert set(PD_SOURCES) == {s.pd_source for s in _segments().values()}


def test_constant_hazard_of_a_12_month_pd() -> None:
    # h = 1 - (1 - PD12)^(1/12), common practice, no source; 1 - 0.98^(1/12) from memory ~ 0.0016821
    assert float(hazard_from_pd_12m(0.02)) == pytest.approx(1.0 - 0.98 ** (1.0 / 12.0), rel=1e-14)
    assert float(hazard_from_pd_12m(0.02)) == pytest.approx(0.0016821, abs=1e-7)
    assert float(hazard_from_pd_12m(0.0)) == 0.0
    assert float(hazard_from_pd_12m(1.0)) == 1.0
    ts = pd_term_structure("auto", SegmentAssumptions(pd_12m=1.0, lgd=0.4), 24)
    assert float(pd_over(ts.marginal, 1)[0]) == 1.0 and float(pd_over(ts.marginal, 24)[0]) == 1.0


def test_cumulative_curve_by_hand() -> None:
    # worked by hand, common practice, no source: curve [0.02, 0.05]
    #   year 1: S_12 = 0.98, monthly hazard h1 = 1 - 0.98^(1/12)
    #   year 2: S_24 / S_12 = 0.95 / 0.98, h2 = 1 - (0.95 / 0.98)^(1/12); year 3 onwards keeps h2
    pd_t = marginal_from_curve([0.02, 0.05], 48)
    h1 = 1.0 - 0.98 ** (1.0 / 12.0)
    h2 = 1.0 - (0.95 / 0.98) ** (1.0 / 12.0)
    np.testing.assert_allclose(pd_t[:12], h1, rtol=1e-13)
    np.testing.assert_allclose(pd_t[12:], h2, rtol=1e-13)
    cum = cumulative_pd(pd_t)
    assert cum[11] == pytest.approx(0.02, abs=1e-14)
    assert cum[23] == pytest.approx(0.05, abs=1e-14)
    assert cum[35] == pytest.approx(1.0 - 0.95 * (0.95 / 0.98), abs=1e-14)  # flat hazard after the curve


def test_curve_reaching_one_and_flat_zero() -> None:
    # edge cases by hand, common practice, no source
    pd_t = marginal_from_curve([0.5, 1.0, 1.0], 48)
    assert np.all(pd_t[12:24] == 1.0) and np.all(pd_t[24:] == 1.0)
    assert cumulative_pd(pd_t)[23] == pytest.approx(1.0, abs=1e-15)
    assert np.all(marginal_from_curve([0.0, 0.0], 30) == 0.0)


def test_competing_risk_by_hand() -> None:
    # worked by hand, common practice, no source: pd = 0.1, smm = 0.5 each month
    #   month 1: default 0.1, pay off 0.9 * 0.5 = 0.45, active 0.45
    #   month 2: default 0.45 * 0.1 = 0.045, active 0.45 * 0.9 * 0.5 = 0.2025
    np.testing.assert_allclose(unconditional_marginal([0.1, 0.1], [0.5, 0.5]), [0.1, 0.045], rtol=1e-15)
    np.testing.assert_allclose(survival([0.1, 0.1], [0.5, 0.5]), [0.45, 0.2025], rtol=1e-15)
    np.testing.assert_allclose(cumulative_pd([0.1, 0.1], [0.5, 0.5]), [0.1, 0.145], rtol=1e-15)


def test_derived_quantities_broadcast_over_leading_axes() -> None:
    # common practice, no source: pd[K, S, T] with one smm per month for every key and scenario
    rng = np.random.default_rng(5)
    pd_kst = rng.uniform(0, 0.05, size=(3, 4, 30))
    smm_t = rng.uniform(0, 0.02, size=30)
    cum = cumulative_pd(pd_kst, smm_t)
    assert cum.shape == (3, 4, 30)
    np.testing.assert_allclose(cum[2, 1], cumulative_pd(pd_kst[2, 1], smm_t), rtol=1e-15)
    horizon = np.array([0, 5, 30, 12])  # one per scenario
    np.testing.assert_allclose(pd_over(pd_kst, horizon, smm_t)[1], [0.0, cum[1, 1, 4], cum[1, 2, 29], cum[1, 3, 11]])
    assert cumulative_pd(np.zeros((2, 0))).shape == (2, 0)
    assert pd_over(np.zeros((2, 0)), 0).tolist() == [0.0, 0.0]


def test_pd_over_rejects_a_horizon_beyond_the_curve() -> None:
    with pytest.raises(ValueError, match="horizon"):
        pd_over(np.full((1, 12), 0.01), 13)
    with pytest.raises(ValueError, match="horizon"):
        pd_over(np.full((1, 12), 0.01), -1)


def test_term_structure_is_immutable_and_maps_keys() -> None:
    ts = pd_term_structure("auto", SegmentAssumptions(pd_12m_by_grade={"A": 0.01, "B": 0.02}, lgd=0.4), 6)
    with pytest.raises(dataclasses.FrozenInstanceError):
        ts.source = "x"  # type: ignore[misc]
    with pytest.raises(ValueError):
        ts.marginal[0, 0] = 0.5
    assert ts.key_index(np.array(["B", "A", "B"], dtype=object)).tolist() == [1, 0, 1]


def test_public_api() -> None:
    # the names the engine relies on
    assert {
        "PdTermStructure", "survival", "unconditional_marginal", "cumulative_pd", "pd_over",
        "pd_term_structure", "PD_SOURCES", "bucket_index", "validate_matrix", "roll_rate_summary",
        "collateral_lgd", "recovery_discount_factor", "effective_lgd", "loss_given_default",
    } <= set(curves.__all__)
    assert all(hasattr(curves, name) for name in curves.__all__)


# --------------------------------------------------------------------------------------
# Properties (hypothesis)
# --------------------------------------------------------------------------------------


@settings(max_examples=50)
@given(segment=segment_assumptions(), months=st.integers(1, 60))
def test_any_source_gives_probabilities_and_a_falling_survival(segment: SegmentAssumptions, months: int) -> None:
    # properties of a survival model, common practice, no source
    ts = pd_term_structure("seg", segment, months)
    assert np.all((ts.marginal >= 0.0) & (ts.marginal <= 1.0))
    if ts.smm is not None:
        assert np.all((ts.smm >= 0.0) & (ts.smm <= 1.0))
    s = survival(ts.marginal, ts.smm)
    assert np.all(np.diff(s, axis=-1) <= 0.0) and np.all((s >= 0.0) & (s <= 1.0))
    cum = cumulative_pd(ts.marginal, ts.smm)
    assert np.all(np.diff(cum, axis=-1) >= 0.0) and np.all((cum >= 0.0) & (cum <= 1.0))
    assert np.all(cum + s <= 1.0 + 1e-12)


@settings(max_examples=50)
@given(marginal=marginal_arrays(), data=st.data())
def test_derived_quantities_are_consistent(marginal: np.ndarray, data: st.DataObject) -> None:
    # common practice, no source: C_t = sum S_{k-1} pd_k = 1 - S_t without payoffs
    smm = data.draw(st.sampled_from([None, np.full(marginal.shape[-1], 0.03)]))
    s = survival(marginal, smm)
    assert np.all(np.diff(s, axis=-1) <= 0.0)
    d = unconditional_marginal(marginal, smm)
    assert np.all((d >= 0.0) & (d <= 1.0))
    if smm is None:
        np.testing.assert_allclose(cumulative_pd(marginal), 1.0 - s, rtol=0, atol=1e-12)


@settings(max_examples=50)
@given(curve=pd_curves, extra_years=st.integers(0, 3))
def test_curve_points_are_reproduced(curve: list[float], extra_years: int) -> None:
    # log-linear survival within each year passes through every given point, common practice, no source
    months = 12 * (len(curve) + extra_years)
    cum = cumulative_pd(marginal_from_curve(curve, months))
    np.testing.assert_allclose(cum[11 : 12 * len(curve) : 12], curve, rtol=0, atol=1e-12)
    pd_t = marginal_from_curve(curve, months)
    for y in range(len(curve)):
        assert np.ptp(pd_t[12 * y : 12 * y + 12]) == 0.0  # constant hazard within each year
    assert np.all(pd_t[12 * len(curve) :] == pd_t[12 * len(curve) - 1])  # flat after the last year


@settings(max_examples=50)
@given(pd_12m=pd_12m_values)
def test_constant_hazard_returns_the_12_month_pd(pd_12m: float) -> None:
    # common practice, no source
    ts = pd_term_structure("s", SegmentAssumptions(pd_12m=pd_12m, lgd=0.5), 12)
    assert float(pd_over(ts.marginal, 12)[0]) == pytest.approx(pd_12m, rel=1e-12)


# --------------------------------------------------------------------------------------
# Validation of the PD sources: errors name the segment and the cell
# --------------------------------------------------------------------------------------


def test_falling_cumulative_curve_names_the_year() -> None:
    with pytest.raises(AssumptionsError, match=r"key segments\.auto\.pd_curve year 3: cumulative PD 0\.04 is below"):
        pd_term_structure("auto", SegmentAssumptions(pd_curve=[0.02, 0.05, 0.04], lgd=0.4), 36)
    segment = SegmentAssumptions(pd_curve_by_grade={"A": [0.01, 0.02], "B": [0.06, 0.05]}, lgd=0.4)
    with pytest.raises(AssumptionsError, match=r"segments\.auto\.pd_curve_by_grade\.B year 2"):
        pd_term_structure("auto", segment, 36)


def test_pd_outside_zero_one_names_the_cell() -> None:
    # pydantic bounds these at load time; the curves check again for models built in code
    bad = SegmentAssumptions.model_construct(pd_12m=1.5, lgd=0.4)
    with pytest.raises(AssumptionsError, match=r"key segments\.auto\.pd_12m: 12-month PD 1\.5 is not a probability"):
        pd_term_structure("auto", bad, 12)
    bad = SegmentAssumptions.model_construct(pd_12m_by_grade={"A": 0.01, "B": float("nan")}, lgd=0.4)
    with pytest.raises(AssumptionsError, match=r"segments\.auto\.pd_12m_by_grade\.B"):
        pd_term_structure("auto", bad, 12)
    bad = SegmentAssumptions.model_construct(pd_curve=[0.02, 1.2], lgd=0.4)
    with pytest.raises(AssumptionsError, match=r"segments\.auto\.pd_curve year 2"):
        pd_term_structure("auto", bad, 12)


def test_empty_sources_are_errors() -> None:
    with pytest.raises(AssumptionsError, match=r"segments\.auto\.pd_curve: the cumulative PD curve is empty"):
        pd_term_structure("auto", SegmentAssumptions(pd_curve=[], lgd=0.4), 12)
    with pytest.raises(AssumptionsError, match=r"segments\.auto\.pd_12m_by_grade: no grades given"):
        pd_term_structure("auto", SegmentAssumptions(pd_12m_by_grade={}, lgd=0.4), 12)


def test_unknown_grade_names_the_grade() -> None:
    ts = pd_term_structure("auto", SegmentAssumptions(pd_12m_by_grade={"A": 0.01, "B": 0.02}, lgd=0.4), 6)
    with pytest.raises(AssumptionsError, match=r"segments\.auto\.pd_12m_by_grade: no PD for 'C'"):
        ts.key_index(["A", "C"])


def test_key_index_reads_arrow_text_and_names_missing_grades_in_order() -> None:
    # the engine passes the tape's Arrow text; the rows are those of a plain lookup by label
    import pandas as pd

    ts = pd_term_structure("auto", SegmentAssumptions(pd_12m_by_grade={"A": 0.01, "B": 0.02}, lgd=0.4), 6)
    arrow = pd.array(["B", "A", "B", "A"], dtype="string[pyarrow]")
    assert ts.key_index(arrow).tolist() == [1, 0, 1, 0]
    assert ts.key_index(iter(["A", "B"])).tolist() == [0, 1]
    with pytest.raises(AssumptionsError, match=r"no PD for 'C', 'D'"):
        ts.key_index(["D", "A", "C", "D"])


@settings(max_examples=50)
@given(rows=st.lists(st.tuples(st.integers(0, 4), st.sampled_from([np.nan, 0.0, 0.002, 0.03, 0.3, 0.99])),
                     min_size=1, max_size=60),
       table=st.lists(st.lists(st.floats(0.0, 0.05), min_size=12, max_size=12), min_size=5, max_size=5))
def test_pd_scale_solved_per_distinct_pair_equals_per_loan(rows, table) -> None:
    # the engine solves each distinct (curve row, own PD) once: bit for bit the per-loan figures
    import types

    from allowance.engine.chunk import _pd_scale

    curve = np.array([r[0] for r in rows], dtype=np.int64)
    own = np.array([r[1] for r in rows], dtype=float)
    first_year = np.array(table, dtype=float)
    expected = curves.loan_pd_scale(first_year[curve], own)
    got = _pd_scale(types.SimpleNamespace(pd_first_year=first_year), curve, own)
    assert np.array_equal(got, expected)
