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


def _dependent_config(**table):
    cfg = _mortgage_config(haircut=0.2, recovery_cost=0.08, floor=0.05, months_to_recovery=18)
    data = cfg.assumptions.model_dump(mode="json", exclude_none=True)
    data["segments"]["mort"]["collateral_dependent"] = {"costs_to_sell": 0.07, **table}
    return type(cfg)(assumptions=type(cfg.assumptions).model_validate(data))


def test_collateral_dependent_loan_is_measured_on_its_collateral():
    # ASC 326-20-35-5 (the practical expedient): ECL = amortised cost - fair value x (1 - costs to
    # sell), floored at 0, the same in every scenario and framework (hand computation):
    #   300,000 - 250,000 x 0.93 = 67,500.00; with ample collateral (500,000) it is 0
    cfg = _dependent_config()
    book = pd.concat([_one_mortgage(300_000.0, 250_000.0, days_past_due=0),
                      _one_mortgage(300_000.0, 500_000.0, days_past_due=0)], ignore_index=True)
    book["loan_id"] = ["CD-1", "CD-2"]
    book["collateral_dependent"] = True
    loans = engine.run(book, cfg).loans
    assert loans["measurement"].tolist() == ["collateral_dependent", "collateral_dependent"]
    for fw in ("ifrs9", "cecl"):
        assert loans[f"ecl_{fw}"].tolist() == [67_500.00, 0.0]
        assert loans[f"gross_loss_{fw}"].tolist() == [300_000.00, 300_000.00]  # the amortised cost at risk


def test_defaulted_secured_loans_and_the_framework_list():
    # the segment option treats a loan in default with a collateral value as collateral dependent,
    # here under CECL only: IFRS 9 keeps the model (collateral LGD) for it
    cfg = _dependent_config(defaulted_secured=True, frameworks=["cecl"])
    book = pd.concat([_one_mortgage(300_000.0, 250_000.0, days_past_due=120),
                      _one_mortgage(300_000.0, 250_000.0, days_past_due=0)], ignore_index=True)
    book["loan_id"] = ["D-1", "C-1"]
    loans = engine.run(book, cfg).loans
    assert loans["measurement"].tolist() == ["collateral_dependent_defaulted", "model"]
    # the column's type is the one a frame gives Python text (as loans.csv and the parts read it)
    assert loans["measurement"].dtype == pd.DataFrame({"m": np.array(["model"], dtype=object)})["m"].dtype
    assert loans["ecl_cecl"].iloc[0] == 67_500.00
    assert loans["ecl_ifrs9"].iloc[0] != 67_500.00 and loans["ecl_ifrs9"].iloc[0] > 0


def test_individual_assessment_replaces_the_model_in_every_framework():
    cfg = _dependent_config()
    book = _one_mortgage(300_000.0, 250_000.0, days_past_due=0)
    book["individual_ecl"] = 12_345.67
    loans = engine.run(book, cfg).loans
    assert loans["measurement"].iloc[0] == "individual"
    for fw in ("ifrs9", "cecl"):
        assert loans[f"ecl_{fw}"].iloc[0] == 12_345.67
        assert loans[f"gross_loss_{fw}"].iloc[0] >= 12_345.67


@pytest.mark.parametrize("collateral", [100_000.0, 250_000.0, 400_000.0])
def test_collateral_dependent_ecl_falls_as_the_collateral_rises(collateral):
    # monotone in the collateral value (common practice, no source)
    cfg = _dependent_config()
    book = pd.concat([_one_mortgage(300_000.0, collateral), _one_mortgage(300_000.0, collateral + 10_000.0)],
                     ignore_index=True)
    book["loan_id"], book["collateral_dependent"] = ["A", "B"], True
    loans = engine.run(book, cfg).loans
    assert loans["ecl_cecl"].iloc[1] <= loans["ecl_cecl"].iloc[0]


def _cards_config():
    from tests.strategies import example_roll_matrix

    data = engine_config(scenarios={"base": {"weight": 1.0}}).assumptions.model_dump(mode="json", exclude_none=True)
    cards = data["segments"]["cards"]
    cards.pop("pd_12m_by_grade")
    cards["transition_matrix"] = example_roll_matrix(180).model_dump(mode="json")
    cards["charge_off_dpd"] = 180
    cfg = engine_config()
    return type(cfg)(assumptions=type(cfg.assumptions).model_validate(data))


def test_a_roll_rate_loan_in_default_keeps_its_chance_of_charge_off():
    # one default definition: a card at 95 days past due is in default (stage 3, CECL's default
    # test), but its matrix bucket says some such accounts never charge off, so its PD is the
    # bucket's chance of reaching charge-off, below 1; past the charge-off threshold, or flagged
    # defaulted, the loss event is certain (PD = 1)
    book = engine_tape(n=60, seed=11)
    cards = book[book["segment"] == "cards"].head(3).copy()
    cards["loan_id"] = ["C95", "C185", "CFLAG"]
    cards["days_past_due"] = [95, 185, 95]
    cards["defaulted"] = [False, False, True]
    loans = engine.run(cards.reset_index(drop=True), _cards_config()).loans.set_index("loan_id")
    assert (loans["stage"] == 3).all()
    assert 0.0 < loans.loc["C95", "pd_lifetime"] < 1.0
    assert loans.loc["C95", "ecl_ifrs9"] < loans.loc["C95", "lgd"] * loans.loc["C95", "ead"]
    for loan in ("C185", "CFLAG"):
        assert loans.loc[loan, "pd_lifetime"] == 1.0
        assert loans.loc[loan, "ecl_ifrs9"] == pytest.approx(loans.loc[loan, "lgd"] * loans.loc[loan, "ead"], abs=0.011)


def test_a_loan_on_probation_takes_the_stated_probation_pd_not_one():
    # out of stage 3 on probation (prior stage 3, current, 2 of 6 months performing): stage 3,
    # lifetime ECL, on the stated probation PD (12 %) rather than PD = 1; without it, on the
    # segment's own PD (2 %)
    book = engine_tape(n=60, seed=11)
    auto = book[book["segment"] == "auto"].head(1).copy()
    auto["days_past_due"], auto["prior_stage"], auto["months_performing"] = 0, 3, 2
    ifrs9 = {"sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month", "probation_months_stage3": 6}
    single = {"base": {"weight": 1.0}}
    segments = engine_config().assumptions.model_dump(mode="json", exclude_none=True)["segments"]
    segments["auto"].pop("cpr")  # no prepayment: the reported 12-month PD is then the PD itself
    stated = engine.run(auto, engine_config(ifrs9={**ifrs9, "probation_pd_12m": 0.12}, scenarios=single,
                                            segments=segments)).loans
    plain = engine.run(auto, engine_config(ifrs9=ifrs9, scenarios=single, segments=segments)).loans
    for loans, pd_12m in ((stated, 0.12), (plain, 0.02)):
        assert loans["stage"].iloc[0] == 3 and "probation_from_3" in loans["stage_reason"].iloc[0]
        assert loans["pd_12m"].iloc[0] == pytest.approx(pd_12m, rel=1e-9)  # constant hazard: 12 months give the PD
        assert loans["ecl_ifrs9"].iloc[0] < 0.4 * loans["ead"].iloc[0]
    # CECL does not stage: the loan is current, measured on the segment's PD
    assert plain["ecl_cecl"].iloc[0] == stated["ecl_cecl"].iloc[0]


def test_a_delinquent_loan_pays_nothing_on_its_way_to_default_and_carries_its_arrears():
    # the same loan current and 45 days past due (CECL: lifetime either way, same PD): behind, it
    # pays nothing for ceil((90 - 45) / 30) = 2 months, so its exposure path stays higher
    book = engine_tape(n=60, seed=11)
    auto = pd.concat([book[book["segment"] == "auto"].head(1)] * 2, ignore_index=True)
    auto["loan_id"], auto["days_past_due"] = ["CURRENT", "BEHIND"], [0, 45]
    auto["accrued_interest"] = 500.0
    cecl = {"reasonable_supportable_months": 24, "reversion_months": 12}
    loans = engine.run(auto, engine_config(cecl=cecl)).loans.set_index("loan_id")
    assert loans.loc["BEHIND", "ecl_cecl"] > loans.loc["CURRENT", "ecl_cecl"]
    assert loans.loc["BEHIND", "ead_cecl"] == loans.loc["CURRENT", "ead_cecl"] == auto["balance"].iloc[0]
    # accrued interest and arrears in the EAD, by the framework's stated option (ASC 326-20-30-5A
    # lets CECL exclude it; IFRS 9's gross carrying amount includes it)
    loans = engine.run(auto, engine_config(cecl={**cecl, "accrued_interest": "all"},
                                           ifrs9={"sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month", "accrued_interest": "delinquent"})).loans
    loans = loans.set_index("loan_id")
    balance = auto["balance"].iloc[0]
    assert loans.loc["CURRENT", "ead_cecl"] == loans.loc["BEHIND", "ead_cecl"] == pytest.approx(balance + 500.0)
    assert loans.loc["CURRENT", "ead_ifrs9"] == pytest.approx(balance)
    assert loans.loc["BEHIND", "ead_ifrs9"] == pytest.approx(balance + 500.0)


def test_the_schedule_shows_what_the_engine_booked():
    # the schedule's ECL column sums to loans.csv's figure for every kind of loan: performing
    # (12 months in stage 1), delinquent, in default, secured, on a roll-rate matrix
    from allowance.engine import loan_schedule, prepare, tape_months
    from allowance.cashflows import age_months

    cfg = _cards_config()
    book = engine_tape(n=40, seed=2)
    loans = engine.run(book, cfg).loans.set_index("loan_id")
    prep = prepare(cfg, tape_months(book, cfg), int(age_months(book["origination_date"], pd.Timestamp("2026-09-30")).max()))
    for position in range(len(book)):
        row = book.iloc[[position]]
        loan = row["loan_id"].iloc[0]
        for fw in ("ifrs9", "cecl"):
            for s, name in enumerate(prep.scenario_names):
                table = loan_schedule(row, prep, fw, s)
                assert table["ecl"].sum() == pytest.approx(loans.loc[loan, f"ecl_{fw}_{name}"], abs=0.006), (loan, fw)
        if loans.loc[loan, "pd_lifetime"] == 1.0:  # the loss event is certain now: one row, month 0
            assert table["month"].tolist() == [0]
