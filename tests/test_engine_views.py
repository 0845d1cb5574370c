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
