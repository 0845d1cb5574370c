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
from allowance.curves.lgd import collateral_recovery, final_lgd
from allowance.ecl_compiled import _loss_given_default


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
    # zero exposure: the limit of a tiny exposure (the proceeds cover the whole claim -> 0)
    assert collateral_lgd(0.0, 10_000.0, 0.25, 0.10, 0.0, 0.95) == 0.0
    assert collateral_lgd(0.0, 0.0, 0.25, 0.10, 0.0, 0.95) == 1.0
    # under-collateralised: 1 - 60,000 x 0.75 x 0.95 / 100,000 = 0.5725
    assert collateral_lgd(100_000.0, 60_000.0, 0.25, 0.05, 0.0, 1.0) == pytest.approx(0.5725, abs=1e-15)


def test_ample_collateral_gives_the_floor_under_both_frameworks() -> None:
    # a defaulted mortgage at 28 % loan-to-value (hand computation, common practice, no source):
    #   net proceeds = C x 0.8 x 0.92 = 0.736 C = 2.63 x EAD, far more than the claim even after
    #   18 months of interest at 5 %, so nothing is lost and the 5 % floor is the LGD
    ead = 195_000.0
    collateral = ead / 0.28
    df = recovery_discount_factor(0.05, 18)
    for discount in (df, 1.0):  # IFRS 9 (discounted, claim accruing) and undiscounted CECL
        assert collateral_lgd(ead, collateral, 0.20, 0.08, 0.05, discount) == pytest.approx(0.05, abs=1e-15)
    # the former formula took the costs off the capped recovery and discounted the whole claim:
    # 1 - 0.92 x DF_18 = 0.1463 at 5 %, nearly three times the floor
    assert 1.0 - 0.92 * df == pytest.approx(0.14634, abs=1e-5)


def test_partly_covered_default_discounted_and_undiscounted() -> None:
    # EAD 200,000, collateral 180,000, haircut 20 %, costs 8 % of proceeds, recovery after 18
    # months at a 6 % EIR (hand computation, common practice, no source):
    #   net proceeds NP = 180,000 x 0.8 x 0.92 = 132,480
    #   CECL, undiscounted: recovery = min(200,000, 132,480) = 132,480; loss 67,520.00
    #   IFRS 9: the claim accrues to 200,000 x 1.005^18 = 218,785.79 > NP, so recovery = NP;
    #   PV = 132,480 x 1.005^-18 = 121,104.76; LGD = 1 - 121,104.76 / 200,000 = 0.3944762
    df = recovery_discount_factor(0.06, 18)
    assert df == pytest.approx(npf.pv(0.005, 18, 0, -1), rel=1e-14)  # numpy_financial.pv
    assert 200_000.0 / df == pytest.approx(218_785.79, abs=0.005)
    cecl = collateral_lgd(200_000.0, 180_000.0, 0.20, 0.08, 0.05, 1.0)
    ifrs9 = collateral_lgd(200_000.0, 180_000.0, 0.20, 0.08, 0.05, df)
    assert 200_000.0 * cecl == pytest.approx(67_520.00, abs=0.005)
    assert 200_000.0 * (1 - ifrs9) == pytest.approx(121_104.76, abs=0.005)
    assert ifrs9 == pytest.approx(0.3944762, abs=1e-7)


def test_the_accruing_claim_caps_the_recovery() -> None:
    # EAD 100,000 at a 12 % EIR, recovered 12 months after default (hand computation, common
    # practice, no source): the claim at recovery is 100,000 x 1.01^12 = 112,682.50
    df = recovery_discount_factor(0.12, 12)
    assert 100_000.0 / df == pytest.approx(112_682.50, abs=0.005)
    # proceeds 150,000 x 0.8 x 0.9 = 108,000 < claim: all of it recovered, PV 108,000 x 1.01^-12
    assert collateral_recovery(100_000.0, 150_000.0, 0.2, 0.1, df) == pytest.approx(0.9584452, abs=1e-7)
    # proceeds 120,000 > claim: the lender recovers the claim only (the surplus is the
    # borrower's), worth exactly the EAD today: LGD 0, then the floor
    assert collateral_recovery(100_000.0, 120_000.0 / 0.72, 0.2, 0.1, df) == 1.0
    assert collateral_lgd(100_000.0, 120_000.0 / 0.72, 0.2, 0.1, 0.03, df) == pytest.approx(0.03, abs=1e-15)


def test_cure_and_multiplier_come_before_the_floor() -> None:
    # by hand, common practice, no source: raw 0.30, half cure -> 0.15, floor 0.20 binds
    assert final_lgd(0.30, 0.5, 0.20, 1.0) == pytest.approx(0.20, abs=1e-15)
    assert final_lgd(0.30, 0.5, 0.10, 1.0) == pytest.approx(0.15, abs=1e-15)
    # an upside multiplier of 0.5 does not take it below the floor either; a downside one caps at 1
    assert final_lgd(0.30, 0.0, 0.20, 0.5) == pytest.approx(0.20, abs=1e-15)
    assert final_lgd(0.90, 0.0, 0.0, 1.25) == 1.0


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
        cured = collateral_lgd(ead[i], collateral[i], 0.3, 0.08, 0.05, df[i], 0.2, 1.1)
        assert lgd_jit(ead[i], collateral[i], 0.3, 0.08, 0.05, df[i], 0.2, 1.1) == pytest.approx(cured, rel=1e-15, abs=1e-15)
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


@settings(max_examples=50, deadline=None)
@given(
    ead=st.floats(0.0, 1e9),
    collateral=st.floats(0.0, 1e9),
    haircut=st.floats(0.0, 1.0),
    cost=st.floats(0.0, 1.0),
    floor=st.floats(0.0, 1.0),
    df=st.floats(0.0, 1.0),
    cure=st.floats(0.0, 1.0),
    multiplier=st.floats(0.0, 3.0),
)
def test_cure_never_takes_the_lgd_below_the_floor(ead, collateral, haircut, cost, floor, df, cure, multiplier) -> None:
    # the floor is the lowest LGD booked (common practice, no source)
    lgd = float(collateral_lgd(ead, collateral, haircut, cost, floor, df, cure, multiplier))
    assert floor <= lgd <= 1.0
    assert lgd >= float(collateral_lgd(ead, collateral, haircut, cost, floor, df, 1.0, multiplier))


@settings(max_examples=50, deadline=None)
@given(
    ead=st.floats(1.0, 1e8),
    low=st.floats(0.0, 1e8),
    extra=st.floats(0.0, 1e8),
    haircut=st.floats(0.0, 1.0),
    cost=st.floats(0.0, 1.0),
    floor=st.floats(0.0, 1.0),
    df=st.floats(0.0, 1.0),
)
def test_lgd_falls_as_the_collateral_rises(ead, low, extra, haircut, cost, floor, df) -> None:
    # more collateral never loses more (common practice, no source)
    assert collateral_lgd(ead, low + extra, haircut, cost, floor, df) <= collateral_lgd(ead, low, haircut, cost, floor, df)


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
