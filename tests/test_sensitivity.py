"""Scenario sensitivities: each scenario alone at 100 % weight, restaged, beside the weighted run."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from allowance import engine
from allowance.reconcile import sensitivity_table, single_scenario
from tests.books import engine_config, engine_tape

TAPE = engine_tape(300)
CONFIG = engine_config()


@pytest.fixture(scope="module")
def runs():
    weighted = engine.run(TAPE, CONFIG, schedule_sample=0).loans
    alone = {name: engine.run(TAPE, single_scenario(CONFIG, name), schedule_sample=0).loans
             for name in CONFIG.assumptions.scenarios}
    return weighted, alone, sensitivity_table(weighted, alone, CONFIG)


def _cents(series: pd.Series) -> int:
    return int(np.rint(series.to_numpy(float) * 100).sum())


def test_cecl_alone_equals_the_scenarios_column_of_the_weighted_run(runs):
    # CECL has no stages: a scenario alone gives the loan figures of its own column, to the cent
    weighted, alone, _ = runs
    for name, frame in alone.items():
        assert (frame["ecl_cecl_modelled"].to_numpy() == weighted[f"ecl_cecl_{name}"].to_numpy()).all()


def test_the_weighted_allowance_is_the_weighted_average_of_the_scenario_losses(runs):
    # scenarios are weighted on losses (IFRS 9 5.5.17(a), B5.5.42): for CECL the weighted
    # modelled allowance is sum_s w_s A_s, up to each loan's rounding to the cent
    weighted, alone, table = runs
    cecl = table[table.framework == "cecl"].set_index("scenario")
    w = {n: s.weight for n, s in CONFIG.assumptions.scenarios.items()}
    mixed = sum(w[n] * cecl.loc[n, "allowance_modelled"] for n in w)
    assert mixed == pytest.approx(cecl.loc["weighted", "allowance_modelled"], abs=0.005 * len(weighted))


def test_a_worse_scenario_alone_moves_loans_into_stage_2(runs):
    # staging never falls when a worse scenario stands alone (the PD-ratio test reads the
    # loans' own PDs from the tape, so it moves none of them); the allowance rises
    _, alone, table = runs
    ifrs9 = table[table.framework == "ifrs9"].set_index("scenario")
    assert ifrs9.loc["down", "loans_stage_2"] >= ifrs9.loc["weighted", "loans_stage_2"] >= ifrs9.loc["base", "loans_stage_2"]
    assert ifrs9.loc["down", "allowance"] > ifrs9.loc["weighted", "allowance"] > ifrs9.loc["base", "allowance"]


def test_the_table_foots(runs):
    weighted, alone, table = runs
    for row in table.itertuples():
        frame = weighted if row.scenario == "weighted" else alone[row.scenario]
        assert row.allowance == _cents(frame[f"ecl_{row.framework}"]) / 100
        assert row.allowance == pytest.approx(row.allowance_modelled + row.overlays, abs=1e-6)
        ref = table[(table.framework == row.framework) & (table.scenario == "weighted")]["allowance"].iloc[0]
        assert row.difference_from_weighted == pytest.approx(row.allowance - ref, abs=1e-6)
        if row.framework == "ifrs9":
            assert row.stage_1 + row.stage_2 + row.stage_3 == pytest.approx(row.allowance, abs=1e-6)
        else:
            assert np.isnan(row.stage_1) and np.isnan(row.loans_stage_2)
    assert list(table.scenario[table.framework == "cecl"]) == ["base", "down", "weighted"]
    assert table[table.scenario != "weighted"]["weight"].tolist() == [0.6, 0.4, 0.6, 0.4]


def test_single_scenario_keeps_the_paths_and_names_an_unknown_scenario():
    alone = single_scenario(CONFIG, "down")
    assert alone.assumptions.scenarios["down"].pd_multiplier == [2.0, 1.5, 1.2]
    assert CONFIG.assumptions.scenarios["down"].weight == 0.4  # the input is not changed
    with pytest.raises(KeyError, match="'sideways'"):
        single_scenario(CONFIG, "sideways")


# --------------------------------------------------------------------------------------
# One pass: the sensitivities weighted again, never rerun
# --------------------------------------------------------------------------------------

_OVERLAYS = [  # a percentage, amounts (one on stage 2 only, one a release) and one framework's
    {"name": "auto uplift", "segment": "auto", "kind": "percent", "value": 0.1, "rationale": "r", "owner": "o"},
    {"name": "cards amount", "segment": "cards", "kind": "amount", "value": 1234.56, "rationale": "r", "owner": "o"},
    {"name": "stage 2", "segment": "*", "stage": 2, "kind": "amount", "value": 5000.0, "rationale": "r", "owner": "o"},
    {"name": "mort release", "segment": "mort", "kind": "amount", "value": -2000.0, "rationale": "r", "owner": "o"},
    {"name": "cecl trim", "segment": "*", "framework": "cecl", "kind": "percent", "value": -0.03, "rationale": "r",
     "owner": "o"},
]


def _varied_book() -> tuple[pd.DataFrame, object]:
    """The engine book with POCI loans (some bought in the period, half with a stated ECL at
    purchase), loans moved to stage 2 on the PD-ratio test and the watchlist, one by one
    measured loans, revolving lines on a loss rate and mortgages on a vintage loss curve
    (invented figures); three scenarios whose paths differ."""
    tape = engine_tape(900, seed=3)
    auto = np.flatnonzero((tape["segment"] == "auto").to_numpy())
    poci = auto[:30]
    tape.loc[poci, "credit_impaired_at_purchase"] = True
    tape.loc[poci, "pd_12m_at_origination"] = 0.25
    tape.loc[poci, "pd_12m_current"] = np.linspace(0.05, 0.6, poci.size)
    tape.loc[poci, "credit_adjusted_eir"] = 0.12
    tape.loc[poci[::2], "lifetime_ecl_at_purchase"] = 900.0
    tape.loc[poci[:4], "origination_date"] = pd.Timestamp("2026-08-01")
    rated = auto[30:200]
    tape.loc[rated, "pd_12m_at_origination"] = 0.01
    tape.loc[rated, "pd_12m_current"] = np.linspace(0.005, 0.05, rated.size)
    tape.loc[auto[200:210], "individual_ecl"] = 1234.5
    tape.loc[auto[210:220], "watchlist"] = True
    segments = engine_config().assumptions.model_dump(mode="json", exclude_none=True)["segments"]
    segments["cards"] = {k: v for k, v in segments["cards"].items() if k != "pd_12m_by_grade"} | {"annual_loss_rate": 0.04}
    segments["mort"] = ({k: v for k, v in segments["mort"].items() if k not in ("pd_curve", "collateral_lgd")}
                        | {"vintage_loss_curve": [0.002, 0.006, 0.01]})
    segments["auto"]["collateral_lgd"] = {"haircut": 0.3, "recovery_cost": 0.05, "floor": 0.1, "months_to_recovery": 6}
    tape.loc[auto, "collateral_value"] = (tape.loc[auto, "balance"] * 0.9).round(2)
    scenarios = {"base": {"weight": 0.5, "pd_multiplier": [1.0]},
                 "down": {"weight": 0.3, "pd_multiplier": [2.0, 1.5], "lgd_multiplier": [1.1],
                          "collateral_index": [0.85, 0.9]},
                 "up": {"weight": 0.2, "pd_multiplier": [0.7]}}
    return tape, engine_config(segments=segments, scenarios=scenarios, overlays=_OVERLAYS)


def test_one_pass_sensitivities_equal_a_rerun_of_each_scenario_alone_to_the_cent():
    # Reference: the engine rerun with the scenario alone at weight 1 (single_scenario), the
    # definition of the sensitivity; one pass weights the loop's per-scenario losses with
    # weights 1 and 0 (IFRS 9 5.5.17(a), B5.5.42: the weights apply to the scenarios'
    # losses; the POCI benchmark, 5.5.13, is weighted again), and 1*x + 0*y is x exactly
    tape, config = _varied_book()
    names = list(config.assumptions.scenarios)
    once = engine.run(tape, config, schedule_sample=0, alone=names, chunk_size=250)  # several chunks
    reruns = {n: engine.run(tape, single_scenario(config, n), schedule_sample=0).loans for n in names}
    loans = once.loans
    assert loans["poci"].sum() == 30 and set(loans["stage"]) == {1, 2, 3}
    assert (loans["stage"] == 2).sum() > 50 and (loans["stage"] == 3).sum() > 50
    for name in names:
        mine, rerun = once.alone[name], reruns[name]
        for column in mine.columns:  # every loan's figure, to the bit
            np.testing.assert_array_equal(mine[column].to_numpy(), rerun[column].to_numpy(), err_msg=f"{name} {column}")
        for fw in config.frameworks:  # a wrong scenario, or the weighted figures, would not pass
            for other in names:
                if other != name:
                    assert _cents(reruns[other][f"ecl_{fw}_modelled"]) != _cents(mine[f"ecl_{fw}_modelled"])
            assert _cents(loans[f"ecl_{fw}_modelled"]) != _cents(mine[f"ecl_{fw}_modelled"])
            poci = loans["poci"].to_numpy()
            # the POCI loans' benchmark is weighted again: their scenario column of the weighted run is not it
            assert (mine[f"ecl_{fw}_modelled"].to_numpy()[poci] != loans[f"ecl_{fw}_{name}"].to_numpy()[poci]).any() \
                or fw == "cecl"
        assert mine["overlay_cecl"].abs().sum() > 0 and mine["overlay_ifrs9"].abs().sum() > 0
    pd.testing.assert_frame_equal(sensitivity_table(loans, once.alone, config),
                                  sensitivity_table(loans, reruns, config))


def test_a_run_tables_the_sensitivities_from_one_pass_through_the_engine(monkeypatch):
    from allowance import api

    tape, config = _varied_book()
    assumptions = config.assumptions.model_dump(mode="json", exclude_none=True)
    calls, seen = [], []
    real = engine.run
    monkeypatch.setattr(engine, "run", lambda *a, **k: calls.append(k) or real(*a, **k))
    done = api.run(tape, assumptions, accept_ledger_difference=True, progress=lambda *told: seen.append(told))
    assert len(calls) == 1 and calls[0]["alone"] == ["base", "down", "up"]
    assert ("sensitivities", 3, 3) in seen
    reruns = {}
    for name in config.assumptions.scenarios:  # the run with the scenario alone, through the whole API
        single = {**assumptions, "scenarios": {name: {**assumptions["scenarios"][name], "weight": 1.0}}}
        reruns[name] = api.run(tape, single, accept_ledger_difference=True, sensitivities=False).loans
    pd.testing.assert_frame_equal(done.sensitivity, sensitivity_table(done.loans, reruns, config))
    calls.clear()
    assert api.run(tape, assumptions, accept_ledger_difference=True, sensitivities=False).sensitivity.empty
    assert len(calls) == 1 and "alone" not in calls[0]


def test_a_scenario_the_run_does_not_have_is_named():
    with pytest.raises(KeyError, match="'sideways'"):
        engine.run(TAPE.head(5), CONFIG, alone=["sideways"])
