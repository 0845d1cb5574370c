"""Collateral-dependent loans and individual assessments."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from allowance.individual import (
    COLLATERAL_DEPENDENT,
    COLLATERAL_DEPENDENT_DEFAULTED,
    INDIVIDUAL,
    MEASUREMENTS,
    MODEL,
    collateral_dependent_ecl,
    measurement_method,
)


def test_collateral_dependent_is_amortised_cost_less_collateral_less_costs_to_sell():
    # ASC 326-20-35-5: ECL = amortised cost - (fair value of collateral - costs to sell), floored at 0
    #   450,000 amortised cost, collateral 400,000, costs to sell 7 % -> 450,000 - 372,000 = 78,000
    assert collateral_dependent_ecl(450_000.0, 400_000.0, 0.07) == pytest.approx(78_000.0, abs=1e-9)
    #   collateral covers it: 0, not a negative allowance
    assert collateral_dependent_ecl(100_000.0, 400_000.0, 0.07) == 0.0
    #   no costs to sell (repayment from operating the collateral): 450,000 - 400,000
    assert collateral_dependent_ecl(450_000.0, 400_000.0, 0.0) == pytest.approx(50_000.0, abs=1e-9)
    #   worthless collateral: the whole amortised cost
    assert collateral_dependent_ecl(450_000.0, 0.0, 0.07) == 450_000.0


@settings(max_examples=100, deadline=None, derandomize=True)
@given(cost=st.floats(0.0, 1e8), low=st.floats(0.0, 1e8), extra=st.floats(0.0, 1e8), sell=st.floats(0.0, 1.0))
def test_collateral_dependent_ecl_is_bounded_and_falls_with_collateral(cost, low, extra, sell):
    # common practice, no source: 0 <= ECL <= amortised cost, and more collateral never loses more
    ecl = collateral_dependent_ecl(cost, low, sell)
    assert 0.0 <= ecl <= cost
    assert collateral_dependent_ecl(cost, low + extra, sell) <= ecl


def test_measurement_precedence():
    # individual assessment > tape flag > defaulted secured (segment option) > model
    individual = np.array([np.nan, 1_000.0, np.nan, np.nan, np.nan, np.nan])
    flagged = np.array([False, True, True, False, False, False])
    option = np.array([False, True, False, True, True, True])
    in_default = np.array([True, True, False, True, False, True])
    has_collateral = np.array([True, True, True, True, True, False])
    got = measurement_method(individual, flagged, option, in_default, has_collateral)
    assert got.tolist() == [MODEL, INDIVIDUAL, COLLATERAL_DEPENDENT, COLLATERAL_DEPENDENT_DEFAULTED, MODEL, MODEL]
    assert list(MEASUREMENTS)[INDIVIDUAL] == "individual"
    assert list(MEASUREMENTS)[COLLATERAL_DEPENDENT_DEFAULTED] == "collateral_dependent_defaulted"
