"""The sample schedules shown to reviewers: typical loans of each segment, with the reason."""

from __future__ import annotations

import pandas as pd

from allowance.engine.views import representative_loans


def test_the_typical_loan_is_chosen_not_the_first_or_the_one_maturing():
    # invented book: the first auto loan matures next month, one is huge, one is in stage 2
    loans = pd.DataFrame({
        "segment": ["auto"] * 6 + ["card"] * 3,
        "stage": [1, 1, 1, 1, 2, 1, 1, 1, 1],
        "balance": [9_000.0, 12_000.0, 11_000.0, 900_000.0, 11_500.0, 10_500.0, 500.0, 700.0, 300.0],
        "remaining_months": [1, 40, 36, 38, 37, 60, 24, 24, 24],
    })
    picks = representative_loans(loans, 1)
    chosen = dict(zip(loans.loc[picks["position"], "segment"], picks["position"]))
    # auto, stage 1 only (positions 0, 1, 2, 3, 5), centred ranks (r - 1/2) / 5, by hand:
    #   balance 9,000 .1, 10,500 .3, 11,000 .5, 12,000 .7, 900,000 .9
    #   term    1 .1, 36 .3, 38 .5, 40 .7, 60 .9
    #   distance: pos 0 .8, pos 1 .4, pos 2 .2, pos 3 .4, pos 5 .6 -> pos 2 (11,000, 36 months)
    assert chosen["auto"] == 2
    assert chosen["card"] == 6  # the median balance (500); the terms are all equal
    assert all("median balance" in why and "stage 1" in why for why in picks["chosen"])


def test_no_stage_1_loans_falls_back_to_all_and_zero_means_none():
    loans = pd.DataFrame({"segment": ["cre"] * 3, "stage": [3, 3, 3], "balance": [1.0, 2.0, 3.0],
                          "remaining_months": [10, 20, 30]})
    picks = representative_loans(loans, 2)
    assert list(picks["position"]) == [1, 0]  # the median first, then the earlier of the two tied
    assert "among all cre loans" in picks["chosen"].iloc[0]
    assert representative_loans(loans, 0).empty


def test_the_sample_is_each_chosen_loan_scheduled_alone():
    # the sample builds the loop's inputs once for all its loans; each loan's table must be the
    # one loan_schedule gives it alone (a loan's inputs do not depend on its neighbours), here
    # on a book with every kind of loan the engine tests use (secured, revolving, delinquent)
    from allowance import engine
    from allowance.cashflows import age_months
    from allowance.engine import loan_schedule, prepare, tape_months
    from allowance.engine.views import schedule_sample
    from tests.books import engine_config, engine_tape

    cfg = engine_config()
    book = engine_tape(n=60, seed=3)
    loans = engine.run(book, cfg, schedule_sample=0).loans
    prep = prepare(cfg, tape_months(book, cfg), int(age_months(book["origination_date"], pd.Timestamp(cfg.as_of)).max()))
    sample = schedule_sample(book, loans, prep, 2)
    picks = representative_loans(loans, 2)
    assert sample["loan_id"].nunique() == len(picks) > 2
    alone = pd.concat([loan_schedule(book.iloc[[p]], prep).assign(chosen=why).loc[:, sample.columns]
                       for p, why in zip(picks["position"], picks["chosen"])], ignore_index=True)
    pd.testing.assert_frame_equal(sample, alone, check_exact=True)


def test_the_booked_columns_sit_beside_the_schedule_as_a_merge_puts_them():
    # pandas' left merge on month is the reference: the same columns, names (_x/_y where both
    # tables have one), order, dtypes and blanks, for a horizon shorter than the schedule,
    # the same, and a loss booked now (month 0)
    import numpy as np

    from allowance.engine.views import _beside

    rng = np.random.default_rng(5)
    for months, booked_months in ((12, range(1, 13)), (30, range(1, 13)), (1, [0]), (5, [])):
        frame = pd.DataFrame({"month": np.arange(1, months + 1) if booked_months != [0] else np.array([0]),
                              "opening_balance": rng.random(months), "survival": rng.random(months)})
        booked = pd.DataFrame({"month": np.array(list(booked_months), dtype=np.int64),
                               "ead": rng.random(len(booked_months)), "survival": rng.random(len(booked_months))})
        pd.testing.assert_frame_equal(pd.DataFrame(_beside(frame, booked)), frame.merge(booked, on="month", how="left"),
                                      check_exact=True)


def test_average_ranks_are_pandas_ranks_counted_or_sorted():
    # pandas' Series.rank() (average ties) is the reference, for whole months in a short
    # range (counted), a range too long to count, fractions, negatives, -0.0 and one value
    import numpy as np

    from allowance.engine.views import _average_ranks

    rng = np.random.default_rng(5)
    cases = [rng.integers(0, 361, 20_000).astype(float), rng.integers(0, 3, 500).astype(float),
             np.array([0.0, -0.0, 0.0, 7.0]), np.array([12.0]), np.array([5.0, 1e9, 5.0, 3.0]),
             rng.integers(-5, 5, 300).astype(float), np.round(rng.random(1_000) * 50, 1),
             rng.integers(0, 100, 2_000).astype(float) + 0.5]
    for values in cases:
        assert _average_ranks(values).tolist() == pd.Series(values).rank().tolist()


def test_each_sample_schedule_sums_to_what_the_loan_booked_with_its_own_pd_level():
    # the demo's auto and personal loans carry their own 12-month PD (pd_12m_current), which
    # scales their curve row in the loop (ecl.KernelInputs.pd_scale): the schedule a reviewer
    # checks by hand must read the same PDs, so its ecl column sums to the loan's booked
    # ecl_<framework>_<scenario> before rounding (to the cent after it)
    from allowance import api, engine
    from tests.books import DEMO_ASSUMPTIONS, DEMO_TAPE

    config = api._config(DEMO_ASSUMPTIONS)
    tape = api._read_tape(api._tape(DEMO_TAPE), config).accepted
    result = engine.run(tape, config)
    loans = result.loans.set_index("loan_id")
    sums = result.schedules.groupby(["loan_id", "framework", "scenario"], sort=False)["ecl"].sum()
    assert len(sums) >= 12
    scaled = 0
    for (loan, fw, scenario), total in sums.items():
        assert round(total, 2) == loans.loc[loan, f"ecl_{fw}_{scenario}"], (loan, fw, scenario)
        scaled += tape.loc[tape["loan_id"] == loan, "pd_12m_current"].notna().any()
    assert scaled >= 2  # the sample holds loans with their own PD (auto, personal)
