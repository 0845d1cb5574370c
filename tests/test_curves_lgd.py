"""LGD and EAD kernels: worked examples, numpy and numba agreeing, per-loan base LGD."""

from __future__ import annotations

import numba
import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from allowance.curves import (
    collateral_lgd,
    effective_lgd,
    loss_given_default,
    recovery_discount_factor,
    revolving_ead,
    undrawn_exposure,
)
from allowance.ecl import _loss_given_default


def test_collateral_lgd_worked_example() -> None:
    # our own worked example, by hand:
    #   EAD 200,000 secured on a property worth 250,000; haircut 30 % -> 175,000 realisable
    #   recovery before costs = min(200,000, 175,000) = 175,000; costs 10 % -> 157,500
    #   recovered 12 months after default, EIR 6 %: DF = 1.005^-12 = 0.9419053 -> PV 148,350.09
    #   LGD = 1 - 148,350.09 / 200,000 = 0.2582495 (floor 10 % does not bind)
    #   cure rate 20 %: effective LGD = 0.8 x 0.2582495 = 0.2065996
    df = recovery_discount_factor(0.06, 12)
    assert df == pytest.approx(npf.pv(0.005, 12, 0, -1), rel=1e-14)  # numpy_financial.pv
    assert df == pytest.approx(0.9419053, abs=1e-7)
    lgd = collateral_lgd(200_000.0, 250_000.0, 0.30, 0.10, 0.10, df)
    assert 200_000.0 * (1 - lgd) == pytest.approx(148_350.09, abs=0.005)
    assert lgd == pytest.approx(0.2582495, abs=1e-7)
    assert effective_lgd(lgd, 0.20) == pytest.approx(0.2065996, abs=1e-7)


def test_collateral_lgd_floor_cap_and_zero_exposure() -> None:
    # by hand, common practice, no source
    # over-collateralised: 1 - 0.9 x 1.0 = 0.10 < floor 0.15 -> 0.15
    assert collateral_lgd(50_000.0, 120_000.0, 0.25, 0.10, 0.15, 1.0) == pytest.approx(0.15, abs=1e-15)
    # no collateral: nothing recovered -> LGD 1
    assert collateral_lgd(50_000.0, 0.0, 0.25, 0.10, 0.0, 1.0) == 1.0
    # zero exposure: the limit of a tiny exposure (fully covered -> 1 - 0.9 x 0.95 = 0.145)
    assert collateral_lgd(0.0, 10_000.0, 0.25, 0.10, 0.0, 0.95) == pytest.approx(0.145, abs=1e-15)
    assert collateral_lgd(0.0, 0.0, 0.25, 0.10, 0.0, 0.95) == 1.0
    # under-collateralised: 1 - 60,000 x 0.75 x 0.95 / 100,000 = 0.5725
    assert collateral_lgd(100_000.0, 60_000.0, 0.25, 0.05, 0.0, 1.0) == pytest.approx(0.5725, abs=1e-15)


def test_kernels_compile_with_numba_and_agree_with_numpy() -> None:
    # the fused loop calls these per loan-month on float scalars
    rng = np.random.default_rng(11)
    ead = rng.uniform(0, 300_000, 64)
    ead[:4] = 0.0
    collateral = rng.uniform(0, 400_000, 64)
    eir = rng.uniform(0.0, 0.2, 64)
    lgd_jit = numba.njit(collateral_lgd)
    df_jit = numba.njit(recovery_discount_factor)
    cure_jit = numba.njit(effective_lgd)
    ead_jit = numba.njit(revolving_ead)
    df = recovery_discount_factor(eir, 9.0)
    expected = collateral_lgd(ead, collateral, 0.3, 0.08, 0.05, df)
    for i in range(64):
        assert df_jit(eir[i], 9.0) == pytest.approx(df[i], rel=1e-15)
        got = lgd_jit(ead[i], collateral[i], 0.3, 0.08, 0.05, df[i])
        assert got == pytest.approx(expected[i], rel=1e-15, abs=1e-15)
        assert cure_jit(expected[i], 0.1) == pytest.approx(0.9 * expected[i], rel=1e-15)
        assert ead_jit(ead[i], 250_000.0, 0.4) == pytest.approx(revolving_ead(ead, 250_000.0, 0.4)[i], rel=1e-15)


@settings(max_examples=50)
@given(
    ead=st.floats(0.0, 1e9),
    collateral=st.floats(0.0, 1e9),
    haircut=st.floats(0.0, 1.0),
    cost=st.floats(0.0, 1.0),
    floor=st.floats(0.0, 1.0),
    df=st.floats(0.0, 1.0),
)
def test_collateral_lgd_is_a_probability_above_the_floor(ead, collateral, haircut, cost, floor, df) -> None:
    # common practice, no source
    lgd = float(collateral_lgd(ead, collateral, haircut, cost, floor, df))
    assert floor <= lgd <= 1.0
    assert np.isfinite(lgd)


def test_revolving_ead() -> None:
    # drawn + CCF x undrawn, by hand: 3,000 + 0.5 x 7,000 = 6,500; over the limit: no undrawn
    assert revolving_ead(3_000.0, 10_000.0, 0.5) == 6_500.0
    assert revolving_ead(12_000.0, 10_000.0, 0.5) == 12_000.0
    assert revolving_ead(3_000.0, 10_000.0, 0.0) == 3_000.0  # CECL, unconditionally cancellable


def test_loss_given_default_flat_collateral_and_fallback() -> None:
    """The LGD the ECL loop computes per loan-month (compiled), flat or secured, after cures."""
    for lgd in (loss_given_default, _loss_given_default):
        # by hand: flat 0.40 with 25 % cures -> 0.30 (loans without collateral take the flat LGD)
        flat = effective_lgd(0.40, 0.25)
        assert lgd(1_000.0, flat, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0, 0.25, 1.0) == pytest.approx(0.30, rel=1e-15)
        # secured: the worked example above (0.2582495) x (1 - 0.25) for the loan with collateral
        df = recovery_discount_factor(0.06, 12)
        got = lgd(200_000.0, flat, 250_000.0, 1.0, 0.30, 0.10, 0.10, df, 0.25, 1.0)
        assert got == pytest.approx(0.2582495 * 0.75, abs=1e-7)
        # a scenario's LGD multiplier scales it, capped at 1
        assert lgd(1_000.0, flat, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0, 0.25, 4.0) == 1.0


def test_undrawn_exposure_is_the_add_on_of_revolving_ead() -> None:
    # by hand: 0.5 x (10,000 - 3,000) = 3,500; nothing undrawn over the limit
    assert undrawn_exposure(3_000.0, 10_000.0, 0.5) == 3_500.0
    assert undrawn_exposure(12_000.0, 10_000.0, 0.5) == 0.0
    assert revolving_ead(3_000.0, 10_000.0, 0.5) == 3_000.0 + undrawn_exposure(3_000.0, 10_000.0, 0.5)
