"""Vintage curves and the PD curve by age recover a simulated constant hazard as a log-linear curve.

A constant monthly hazard h gives a cumulative default curve with log(1 - C(a)) = a log(1 - h)
(the life table: J. D. Kalbfleisch and R. L. Prentice, The Statistical Analysis of Failure
Time Data, 2nd ed., 2002, section 3.3). The occurrence/exposure estimate of h has variance
about h (1 - h) / E for E loan-months at risk (binomial per loan-month), the bound used here.
"""

from __future__ import annotations

import numpy as np
import pytest

from allowance.calibrate import estimate
from tests.histories import constant_hazard_history, write_parquet

HAZARD, SMM = 0.004, 0.02


@pytest.fixture(scope="module")
def found(tmp_path_factory):
    frame = constant_hazard_history(HAZARD, SMM, vintages=3, per_vintage=60, months=48, seed=11)
    path = write_parquet(frame, tmp_path_factory.mktemp("vintages") / "history.parquet")
    return estimate(path, {"charge_off_dpd": {"book": 120}, "min_exposure_months": 2_000})


def _bound(exposure: float) -> float:
    return 4.0 * np.sqrt(HAZARD * (1 - HAZARD) / exposure)


def test_each_vintage_seen_from_origination_is_log_linear(found):
    curves, summary = found.vintages.curves, found.vintages.summary
    seen = summary[summary["seen_from_origination"]]
    assert len(seen) >= 4  # the vintages originated during the history
    for vintage in seen["vintage"]:
        c = curves[curves["vintage"] == vintage]
        age = c["age"].to_numpy(float)
        log_survival = np.log1p(-c["cumulative_default_rate"].to_numpy())
        exposure = c["loans"].to_numpy(float)
        # the cumulative curve is the product of its monthly survivals: exactly log-additive
        np.testing.assert_allclose(log_survival, np.cumsum(np.log1p(-c["hazard"].to_numpy())), atol=1e-12)
        # the true log-linear curve a log(1 - h) lies within the sampling error at every age ...
        envelope = 4 * np.sqrt(np.cumsum(HAZARD / exposure))
        assert np.all(np.abs(log_survival - age * np.log1p(-HAZARD)) <= envelope), vintage
        # ... and the line through the origin fitted to it has the true hazard's slope
        slope = float((exposure * age * log_survival).sum() / (exposure * age * age).sum())
        assert abs(-np.expm1(slope) - HAZARD) <= envelope[-1] / age[-1], vintage


def test_the_pooled_hazard_by_year_of_age_is_the_constant(found):
    ages = found.hazards.by_age
    book = ages[ages["segment"] == "book"]
    for row in book.itertuples():
        assert abs(row.hazard - HAZARD) <= _bound(row.loan_months), row.year_of_age


def test_the_pd_curve_by_age_is_one_minus_the_compounded_survival(found):
    book = found.hazards.by_age
    book = book[(book["segment"] == "book") & book["in_curve"]]
    curve = np.array(found.hazards.pd_curve_by_age["book"])
    assert len(curve) == len(book) >= 3
    np.testing.assert_allclose(curve, 1 - np.cumprod((1 - book["hazard"].to_numpy()) ** 12), rtol=1e-12)
    truth = 1 - (1 - HAZARD) ** (12 * np.arange(1, len(curve) + 1))
    se = np.array([12 * y * np.sqrt(HAZARD / e) for y, e in zip(range(1, len(curve) + 1),
                                                                np.cumsum(book["loan_months"].to_numpy()))])
    assert np.all(np.abs(curve - truth) <= 4 * se)
    # log-linear in age: the yearly survival ratios are all close to (1 - h)^12
    ratios = np.diff(np.log1p(-np.r_[0.0, curve]))
    assert np.all(np.abs(ratios - 12 * np.log1p(-HAZARD)) <= 12 * np.array([_bound(e) for e in book["loan_months"]]))


def test_repayments_are_censored_not_counted_as_survival_to_default(found):
    # with payoffs of 2 % a month, the share of a vintage ever charged off is far below the
    # life-table rate; the life table must not be pulled down by them
    pooled = found.hazards.pooled.set_index("segment").loc["book"]
    assert abs(pooled["hazard"] - HAZARD) <= _bound(pooled["loan_months"])
