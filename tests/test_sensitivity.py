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
