"""Loss-rate segments through the engine: beside PD segments, with scenarios, stages and overlays."""

from __future__ import annotations

import numpy as np
import numpy_financial as npf
import pytest

from allowance import engine
from allowance.schemas import Assumptions, RunConfig
from tests.books import engine_tape as tape

BASE = {
    "run": {"as_of": "2026-09-30", "frameworks": ["ifrs9", "cecl"]},
    "ifrs9": {"sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month"},
    "cecl": {"reasonable_supportable_months": 24, "reversion_months": 12, "payment_allocation": "measured_balance_first"},
    "scenarios": {"base": {"weight": 1.0, "pd_multiplier": [1.0]}},
}


def config(auto: dict, scenarios: dict | None = None, overlays: list | None = None) -> RunConfig:
    data = dict(BASE, segments={
        "auto": auto,
        "mort": {"pd_curve": [0.005, 0.012, 0.02], "lgd": 0.2, "psa": 150, "asset_correlation": 0.15},
        "cards": {"pd_12m_by_grade": {"A": 0.02, "B": 0.06}, "lgd": 0.85, "ccf": 0.3, "asset_correlation": 0.04,
                  "behavioural_life_months": 36, "payment_rate": 0.05, "unconditionally_cancellable": True},
    })
    if scenarios:
        data["scenarios"] = scenarios
    if overlays:
        data["overlays"] = overlays
    return RunConfig(assumptions=Assumptions.model_validate(data))


def book(n: int = 200):
    t = tape(n)
    t["origination_date"] = t["origination_date"].where(t["segment"] != "auto", np.datetime64("2025-09-15"))
    t["original_balance"] = (t["balance"] * 1.1).round(2)
    return t


def test_pool_rate_times_amortised_cost_beside_pd_segments():
    t = book()
    auto = (t["segment"] == "auto").to_numpy()
    out = engine.run(t, config({"lifetime_loss_rate": 0.0165, "cpr": 0.1})).loans
    a = out[auto]
    # ASC 326-20-55 loss-rate example (from memory): allowance = lifetime loss rate x amortised
    # cost, here loan by loan on undiscounted CECL; loans past 90 days stay in the pool
    assert np.allclose(a["ecl_cecl"], (a["balance"] * 0.0165).round(2), atol=0.011)
    assert a["pd_12m"].isna().all() and a["lgd"].isna().all()
    # the PD segments are untouched by the loss-rate segment beside them
    alone = engine.run(t, config({"pd_12m": 0.02, "lgd": 0.4, "cpr": 0.1})).loans
    assert np.array_equal(out.loc[~auto, "ecl_cecl"], alone.loc[~auto, "ecl_cecl"])


def test_warm_through_the_engine_equals_the_numpy_financial_schedule():
    t = book(60)
    auto = (t["segment"] == "auto").to_numpy()
    out = engine.run(t, config({"annual_loss_rate": 0.012})).loans
    i = int(np.flatnonzero(auto & (t["days_past_due"] == 0).to_numpy())[0])
    row = t.iloc[i]
    n = int(out.loc[i, "remaining_months"])
    r = row["interest_rate"] / 12
    opening = npf.fv(r, np.arange(n), npf.pmt(r, n, -row["balance"]), -row["balance"])
    # WARM: annual rate x sum_t B_{t-1} / 12 over the numpy-financial schedule (no prepayment stated)
    assert out.loc[i, "ecl_cecl"] == pytest.approx(round(0.012 * opening.sum() / 12, 2), abs=0.006)


def test_ifrs9_stage_one_takes_twelve_months_of_the_annual_rate():
    t = book()
    auto = (t["segment"] == "auto").to_numpy()
    out = engine.run(t, config({"annual_loss_rate": 0.012, "lgd": 0.5})).loans
    a = out[auto]
    s1, s3 = a["stage"] == 1, a["stage"] == 3
    assert s1.any() and s3.any()
    assert np.array_equal(a.loc[s1, "ecl_ifrs9_modelled"], a.loc[s1, "ecl_12m"])
    assert (a.loc[s1, "ecl_12m"] < a.loc[s1, "ecl_lifetime"]).all()
    # loans in default take the stated LGD x EAD (PD = 1 now)
    assert np.allclose(a.loc[s3, "ecl_ifrs9_modelled"], (0.5 * a.loc[s3, "ead"]).round(2), atol=0.011)
    # stage 2 from days past due only: a loss-rate segment has no PD for the PD-ratio test
    assert not a["stage_reason"].str.contains("pd_ratio").any()


def test_a_downside_scales_the_loss_rate_then_reverts():
    t = book()
    auto = (t["segment"] == "auto").to_numpy()
    scen = {"base": {"weight": 0.5, "pd_multiplier": [1.0]},
            "down": {"weight": 0.5, "pd_multiplier": [2.0, 2.0, 2.0, 2.0, 2.0]}}
    out = engine.run(t, config({"annual_loss_rate": 0.012}, scen)).loans[auto]
    ratio = out["ecl_cecl_down"].sum() / out["ecl_cecl_base"].sum()
    # CECL: doubled for the 24-month reasonable and supportable period, then straight back to
    # 1 over 12 months, so the lifetime ratio lies strictly between 1 and 2
    assert 1.3 < ratio < 2.0
    ifrs9 = out["ecl_ifrs9_down"].sum() / out["ecl_ifrs9_base"].sum()
    assert ifrs9 > ratio  # IFRS 9 takes the scenario for its whole list, without reversion


def test_vintage_curve_through_the_engine_and_overlays_apply():
    t = book()
    auto = (t["segment"] == "auto").to_numpy()
    overlay = [{"name": "x", "segment": "auto", "kind": "percent", "value": 0.1, "rationale": "r", "owner": "o"}]
    out = engine.run(t, config({"vintage_loss_curve": [0.01, 0.025, 0.035, 0.04]}, overlays=overlay)).loans[auto]
    # O x (C(end of life) - C(a)): one year old, 28 months left, life 40 months (CECL, undiscounted)
    c = np.interp(np.arange(61), 12.0 * np.arange(5), [0, 0.01, 0.025, 0.035, 0.04])
    life = 12 + out["remaining_months"].to_numpy()
    want = (t.loc[auto, "original_balance"].to_numpy() * (c[life] - c[12])).round(2)
    assert np.allclose(out["ecl_cecl_modelled"], want, atol=0.011)
    assert np.allclose(out["ecl_cecl"], (out["ecl_cecl_modelled"] * 1.1).round(2), atol=0.011)


def test_a_z_path_moves_the_reference_loss_rate_like_a_pd():
    # a z path moves the segment's reference monthly rate (annual rate / 12) through the Vasicek
    # conditional rate, as it moves a PD; z = -1.5 (a bad year) raises the allowance, z = 0 is
    # the median economy and lowers it against the unconditional rate
    t = book()
    auto = (t["segment"] == "auto").to_numpy()
    seg = {"annual_loss_rate": 0.012, "retail_class": "other_retail"}
    plain = engine.run(t, config(seg)).loans[auto]["ecl_cecl"].sum()
    bad = engine.run(t, config(seg, {"stress": {"weight": 1.0, "z": [-1.5]}})).loans[auto]["ecl_cecl"].sum()
    assert bad > plain * 1.3
