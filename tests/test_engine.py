"""The engine end to end on synthetic accepted tapes (no files): invariants and identities."""

from __future__ import annotations

import numpy as np
import numpy_financial as npf
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from allowance import engine
from allowance.exceptions import AssumptionsError
from tests.books import AS_OF
from tests.books import engine_config as config
from tests.books import engine_tape as tape


@pytest.fixture(scope="module")
def result():
    return engine.run(tape(), config())


def test_every_loan_bounded_by_its_exposure(result):
    loans = result.loans
    # 12-month <= lifetime and ECL <= EAD, loan by loan (the expected loss cannot exceed the exposure)
    assert (loans["ecl_12m"] <= loans["ecl_lifetime"]).all()
    assert (loans["ecl_lifetime"] <= loans["ead"]).all()
    assert (loans["ecl_cecl_modelled"] <= loans["ead_cecl"]).all()
    assert (loans[["ecl_12m", "ecl_lifetime", "ecl_cecl"]] >= 0).all().all()
    assert ((loans["pd_12m"] >= 0) & (loans["pd_12m"] <= loans["pd_lifetime"]) & (loans["pd_lifetime"] <= 1)).all()


def test_weighting_is_on_losses(result):
    loans = result.loans
    for fw in ("ifrs9", "cecl"):
        weighted = 0.6 * loans[f"ecl_{fw}_base"] + 0.4 * loans[f"ecl_{fw}_down"]
        # each column is rounded to cents separately
        assert np.allclose(weighted, loans[f"ecl_{fw}_modelled"], atol=0.011)


def test_stage_one_takes_twelve_months_and_the_rest_lifetime(result):
    loans = result.loans
    s1 = loans["stage"] == 1
    assert np.array_equal(loans.loc[s1, "ecl_ifrs9_modelled"], loans.loc[s1, "ecl_12m"])
    assert np.array_equal(loans.loc[~s1, "ecl_ifrs9_modelled"], loans.loc[~s1, "ecl_lifetime"])
    assert (loans.loc[s1, "horizon_months"] <= 12).all()


def test_defaulted_loans_lose_lgd_times_exposure(result):
    loans = result.loans
    d = loans["stage"] == 3
    assert d.any()
    # PD = 1 now: ECL = LGD x EAD_0 (base scenario; the downside raises LGD by 10 %)
    expected = (loans.loc[d, "lgd"] * loans.loc[d, "ead"]).round(2)
    assert np.allclose(loans.loc[d, "ecl_ifrs9_base"], expected, atol=0.011)
    assert np.allclose(loans.loc[d, "pd_12m"], 1.0)


def test_revolving_exposure_differs_by_framework(result):
    loans = result.loans
    cards = loans["segment"] == "cards"
    t = tape()
    undrawn = (t["credit_limit"] - t["balance"]).clip(lower=0)[cards.to_numpy()]
    # IFRS 9: drawn + CCF x undrawn (B5.5.40), a line in stage 3 blocked (drawn only: common practice, no
    # source); CECL: drawn only, unconditionally cancellable (ASC 326-20-30-11)
    open_line = (loans.loc[cards, "stage"] != 3).to_numpy()
    assert (~open_line).any() and open_line.any()
    assert np.allclose(loans.loc[cards, "ead_ifrs9"],
                       (t.loc[cards.to_numpy(), "balance"] + 0.3 * undrawn * open_line).round(2))
    assert np.allclose(loans.loc[cards, "ead_cecl"], t.loc[cards.to_numpy(), "balance"])
    # CECL runs the drawn balance off at the payment rate (5 %) to its end, below half a cent:
    # ceil(ln(0.005 / B) / ln(1 - 0.05)) months for a current card (geometric run-off, common
    # practice, no source); IFRS 9 keeps the behavioural life
    current = cards & (loans["days_past_due"] == 0) & (loans["balance"] > 0)
    b = loans.loc[current, "balance"].to_numpy()
    assert np.array_equal(loans.loc[current, "horizon_months_cecl"], np.ceil(np.log(0.005 / b) / np.log(0.95)))
    assert (loans.loc[cards, "horizon_months_cecl"] > 36).all()


def test_chunks_do_not_change_the_answer(result):
    chunked = engine.run(tape(), config(), chunk_size=37)
    pd.testing.assert_frame_equal(chunked.loans, result.loans)


def test_extra_columns_are_carried_through():
    t = tape(20)
    t["branch"] = "north"
    out = engine.run(t, config()).loans
    assert list(out["branch"]) == ["north"] * 20
    assert list(out["source_row"]) == list(t["source_row"])


def test_a_scenario_at_full_weight_equals_that_scenario():
    scen = {
        "base": {"weight": 0.0, "pd_multiplier": [1.0]},
        "down": {"weight": 1.0, "pd_multiplier": [2.0, 1.5, 1.2], "lgd_multiplier": [1.1]},
    }
    alone = engine.run(tape(), config(scenarios=scen)).loans
    mixed = engine.run(tape(), config()).loans
    assert np.array_equal(alone["ecl_ifrs9_modelled"], mixed["ecl_ifrs9_down"])
    assert np.array_equal(alone["ecl_cecl_modelled"], mixed["ecl_cecl_down"])


def test_one_period_worked_example():
    # a 1,000,000 loan, 12-month PD 0.5 %, LGD 25 %, maturing in 12 months, no discounting
    # and no prepayment: 12-month allowance = PD x LGD x EAD = 1,250 on a bullet exposure
    # (common practice, no source). An interest-only loan keeps its EAD flat until maturity.
    t = tape(1)
    t.loc[0, ["segment", "repayment", "balance", "interest_rate", "days_past_due"]] = ["auto", "interest_only", 1e6, 0.0, 0]
    t["maturity_date"] = pd.to_datetime(["2027-09-30"])
    t["grade"] = None
    cfg = config(
        run={"as_of": AS_OF, "frameworks": ["cecl"]},
        segments={"auto": {"pd_12m": 0.005, "lgd": 0.25}},
        scenarios={"base": {"weight": 1.0}},
    )
    loans = engine.run(t, cfg).loans
    assert loans.loc[0, "horizon_months"] == 12
    assert loans.loc[0, "ecl_cecl"] == pytest.approx(1250.0, abs=0.005)


def test_discounting_reduces_ifrs9_against_undiscounted_cecl():
    # with no reversion effect (R&S covers the life) the only difference is the EIR discount
    cfg = config(cecl={"reasonable_supportable_months": 600, "reversion_months": 0},
                 segments={"auto": {"pd_12m": 0.02, "lgd": 0.4}},
                 scenarios={"base": {"weight": 1.0}})
    t = tape(50)
    t["segment"], t["repayment"], t["grade"] = "auto", "level", None
    t["maturity_date"] = pd.to_datetime("2029-01-15")
    t["days_past_due"] = 0
    loans = engine.run(t, cfg).loans
    assert (loans["ecl_lifetime"] < loans["ecl_cecl"]).all()
    # CECL's discounted cash-flow method is the cash shortfall at the EIR (ASC 326-20-30-4): the
    # IFRS 9 lifetime figure measured the same way, and more than discounted PD x LGD x EAD
    cfg_dcf = config(cecl={"reasonable_supportable_months": 600, "reversion_months": 0, "discount": True},
                     ifrs9={"sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month", "measure": "cash_shortfall"},
                     segments={"auto": {"pd_12m": 0.02, "lgd": 0.4}}, scenarios={"base": {"weight": 1.0}})
    dcf = engine.run(t, cfg_dcf).loans
    assert np.allclose(dcf["ecl_cecl"], dcf["ecl_lifetime"], atol=0.011)
    assert (dcf["ecl_cecl"] > loans["ecl_lifetime"]).all()


def test_undiscounted_lifetime_loss_matches_a_hand_built_schedule():
    # level-pay balance path from numpy_financial.ppmt; constant hazard h; ECL = Σ S_{t-1} h LGD B_t
    t = tape(1)
    t.loc[0, ["segment", "repayment", "balance", "interest_rate", "days_past_due"]] = ["auto", "level", 25_000.0, 0.09, 0]
    t["maturity_date"] = pd.to_datetime(["2029-09-30"])
    t["grade"] = None
    cfg = config(run={"as_of": AS_OF, "frameworks": ["cecl"]},
                 segments={"auto": {"pd_12m": 0.03, "lgd": 0.5}}, scenarios={"base": {"weight": 1.0}})
    got = engine.run(t, cfg).loans.loc[0, "ecl_cecl"]
    n, r = 36, 0.09 / 12
    principal = -npf.ppmt(r, np.arange(1, n + 1), n, 25_000.0)  # numpy-financial reference
    opening = 25_000.0 - np.concatenate([[0.0], np.cumsum(principal)[:-1]])
    h = 1 - (1 - 0.03) ** (1 / 12)
    survival = (1 - h) ** np.arange(n)
    assert got == pytest.approx(round(float((survival * h * 0.5 * opening).sum()), 2), abs=0.006)


def test_missing_revolving_behaviour_is_an_error_naming_the_segment():
    cfg = config(segments={
        "auto": {"pd_12m": 0.02, "lgd": 0.4},
        "mort": {"pd_12m": 0.01, "lgd": 0.2},
        "cards": {"pd_12m_by_grade": {"A": 0.02, "B": 0.06}, "lgd": 0.85},
    })
    with pytest.raises(AssumptionsError, match="cards.*behavioural_life_months"):
        engine.run(tape(), cfg)


@pytest.mark.slow
@settings(max_examples=20)
@given(pd12=st.floats(0.001, 0.3), bump=st.floats(1.0, 3.0), lgd=st.floats(0.05, 0.6), lgd_bump=st.floats(1.0, 1.6))
def test_allowance_is_monotone_in_pd_and_lgd(pd12, bump, lgd, lgd_bump):
    t = tape(40, seed=3)
    t["segment"], t["repayment"], t["grade"] = "auto", "level", None
    t["maturity_date"] = pd.to_datetime("2030-01-15")

    def total(p, lgd_value):
        cfg = config(segments={"auto": {"pd_12m": min(p, 0.99), "lgd": min(lgd_value, 1.0), "cpr": 0.05}})
        loans = engine.run(t, cfg).loans
        return loans["ecl_ifrs9_modelled"].to_numpy(), loans["ecl_cecl_modelled"].to_numpy()

    lo = total(pd12, lgd)
    hi_pd = total(pd12 * bump, lgd)
    hi_lgd = total(pd12, lgd * lgd_bump)
    for a, b in zip(lo, hi_pd):
        assert (b >= a - 0.01).all()
    for a, b in zip(lo, hi_lgd):
        assert (b >= a - 0.01).all()


# --------------------------------------------------------------------------------------
# The chunk boundary: a pure function, a frozen result, any executor-style map
# --------------------------------------------------------------------------------------


def test_a_chunk_gives_a_frozen_result_of_its_own_loans():
    import dataclasses

    from allowance.engine.tables import prepare

    t, cfg = tape(40), config()
    prep = prepare(cfg, engine.tape_months(t, cfg), 60)
    part = engine.run_chunk(t.iloc[10:25], prep)
    assert isinstance(part, engine.ChunkResult)
    with pytest.raises(dataclasses.FrozenInstanceError):
        part.loans = part.loans  # type: ignore[misc]
    assert list(part.loans.index) == list(range(10, 25))
    assert list(part.loans["loan_id"]) == list(t["loan_id"].iloc[10:25])


def test_segment_parameters_are_looked_up_by_segment_code():
    from allowance.engine.tables import prepare

    t, cfg = tape(60), config()
    prep = prepare(cfg, engine.tape_months(t, cfg), 60)
    terms = engine.loan_terms(t, prep)
    segments = cfg.assumptions.segments
    for name in ("auto", "mort", "cards"):
        rows = (t["segment"] == name).to_numpy()
        assert (np.asarray(prep.segments.names)[terms.segment[rows]] == name).all()
        # lgd after cures, ccf: each loan carries its segment's figure (the assumptions, no source)
        assert np.allclose(terms.lgd[rows], segments[name].lgd * (1 - segments[name].cure_rate))
        stated = np.nan if segments[name].ccf is None else segments[name].ccf  # NaN: not stated
        assert np.allclose(terms.ccf[rows], stated, equal_nan=True)
    assert (terms.collateral[(t["segment"] != "mort").to_numpy()] == 0).all()


def test_any_map_gives_the_same_answer_and_progress_is_told(result):
    calls = []
    seen = []

    def recording_map(function, chunks):
        for chunk in chunks:
            seen.append(len(chunk))
            yield function(chunk)

    again = engine.run(tape(), config(), chunk_size=70, map=recording_map,
                       progress=lambda phase, done, total: calls.append((phase, done, total)))
    pd.testing.assert_frame_equal(again.loans, result.loans)
    assert seen == [70, 70, 70, 70, 20]
    assert calls == [("loans", d, 300) for d in (70, 140, 210, 280, 300)]


@pytest.mark.slow
def test_chunks_run_in_other_processes():
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    t, cfg = tape(120), config()
    here = engine.run(t, cfg)
    # spawn: a fresh interpreter per worker, as a cluster's would be (no state shared by fork)
    with ProcessPoolExecutor(max_workers=2, mp_context=multiprocessing.get_context("spawn")) as pool:
        there = engine.run(t, cfg, chunk_size=50, map=pool.map)
    pd.testing.assert_frame_equal(there.loans, here.loans)


# --------------------------------------------------------------------------------------
# One home per framework difference
# --------------------------------------------------------------------------------------


def test_no_module_branches_on_a_framework_name():
    """What differs between IFRS 9 and CECL is asked of allowance.frameworks, never tested by name."""
    import ast
    from pathlib import Path

    import allowance
    from allowance.schemas import FRAMEWORKS

    root = Path(allowance.__file__).parent
    found = []
    for path in root.rglob("*.py"):
        if path.name in ("frameworks.py", "schemas.py"):
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Compare):
                names = [c.value for c in [node.left, *node.comparators] if isinstance(c, ast.Constant)]
                if any(n in FRAMEWORKS for n in names):
                    found.append(f"{path.relative_to(root)}:{node.lineno}")
    assert not found, f"framework names tested in {found}: ask allowance.frameworks instead"


def test_every_framework_has_its_rules():
    from allowance.frameworks import FRAMEWORK_RULES
    from allowance.schemas import FRAMEWORKS

    assert tuple(FRAMEWORK_RULES) == FRAMEWORKS
    assert [r.name for r in FRAMEWORK_RULES.values()] == list(FRAMEWORKS)
    assert sum(r.staged for r in FRAMEWORK_RULES.values()) == 1  # IFRS 9 alone stages loans
