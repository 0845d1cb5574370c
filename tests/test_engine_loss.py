"""Loss measurement through the engine: collateral LGD per framework on one-loan books."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from allowance import engine
from tests.books import engine_config, engine_tape


def _one_mortgage(balance: float, collateral: float, *, days_past_due: int = 120, rate: float = 0.06) -> pd.DataFrame:
    book = engine_tape(n=40, seed=3)
    row = book[book["segment"] == "mort"].head(1).copy()
    row["balance"], row["collateral_value"], row["interest_rate"] = balance, collateral, rate
    row["days_past_due"], row["eir"] = days_past_due, np.nan
    return row.reset_index(drop=True)


def _mortgage_config(**collateral_lgd):
    cfg = engine_config()
    data = cfg.assumptions.model_dump(mode="json", exclude_none=True)
    mort = data["segments"]["mort"]
    mort["collateral_lgd"] = {**mort["collateral_lgd"], **collateral_lgd}
    mort.pop("cure_rate", None)
    data["scenarios"] = {"base": {"weight": 1.0}}
    return type(cfg)(assumptions=type(cfg.assumptions).model_validate(data))


def test_ample_collateral_books_the_floor_under_both_frameworks():
    # a defaulted mortgage at 28 % loan-to-value: the net proceeds (C x 0.8 x 0.95) cover the claim
    # even after 18 months of interest, so both frameworks book the 5 % floor x EAD (hand
    # computation, common practice, no source)
    cfg = _mortgage_config(haircut=0.2, recovery_cost=0.05, floor=0.05, months_to_recovery=18)
    loans = engine.run(_one_mortgage(195_000.0, 195_000.0 / 0.28), cfg).loans
    assert loans["stage"].iloc[0] == 3
    assert loans["ecl_ifrs9"].iloc[0] == pytest.approx(9_750.00, abs=0.005)
    assert loans["ecl_cecl"].iloc[0] == pytest.approx(9_750.00, abs=0.005)


def test_partly_covered_default_cecl_undiscounted_and_ifrs9_discounted():
    # EAD 200,000, collateral 180,000, haircut 20 %, costs 8 %, recovery 18 months after default
    # at a 6 % EIR, floor 5 % (hand computation, common practice, no source):
    #   net proceeds 180,000 x 0.8 x 0.92 = 132,480
    #   CECL (nothing discounted, no accrual): 200,000 - 132,480 = 67,520.00
    #   IFRS 9: the claim accrues to 218,785.79 > proceeds; PV 132,480 x 1.005^-18 = 121,104.76;
    #   loss 200,000 - 121,104.76 = 78,895.24
    cfg = _mortgage_config(haircut=0.2, recovery_cost=0.08, floor=0.05, months_to_recovery=18)
    loans = engine.run(_one_mortgage(200_000.0, 180_000.0), cfg).loans
    assert loans["ecl_cecl"].iloc[0] == pytest.approx(67_520.00, abs=0.005)
    assert loans["ecl_ifrs9"].iloc[0] == pytest.approx(78_895.24, abs=0.005)


def test_gross_loss_is_the_exposure_lost_before_recoveries():
    # PD x EAD beside PD x LGD x EAD (common practice, no source): never below the net loss, and
    # a loan in default loses its whole exposure gross
    loans = engine.run(engine_tape(n=120, seed=5), engine_config()).loans
    for fw in ("ifrs9", "cecl"):
        gross, net = loans[f"gross_loss_{fw}"], loans[f"ecl_{fw}_modelled"]
        assert (gross >= net - 0.01).all() and (gross <= loans[f"ead_{fw}"] + 0.01).all()
    d = loans["stage"] == 3
    assert d.any()
    np.testing.assert_allclose(loans.loc[d, "gross_loss_ifrs9"], loans.loc[d, "ead_ifrs9"], atol=0.011)
    # the flat-LGD segment: gross x LGD = net in the base scenario (no LGD multiplier there)
    auto = (loans["segment"] == "auto") & (loans["stage"] == 1)
    cfg = engine_config(scenarios={"base": {"weight": 1.0}})
    single = engine.run(engine_tape(n=120, seed=5), cfg).loans
    np.testing.assert_allclose(single.loc[auto, "gross_loss_ifrs9"] * 0.4, single.loc[auto, "ecl_ifrs9_modelled"],
                               atol=0.011)
