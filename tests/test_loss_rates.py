"""Loss-rate methods (pool, remaining life / WARM, vintage) against worked examples, hand
computations from numpy-financial, a per-loan numpy reference and the PD method's loop."""

from __future__ import annotations

import dataclasses

import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from allowance import scenarios
from allowance.ecl import KernelInputs, expected_losses
from allowance.loss_rates import (
    POOL,
    VINTAGE,
    WARM,
    LossRateInputs,
    loss_rate_losses,
    loss_rate_multipliers,
    pool_loss,
    reference_monthly_rate,
    vintage_curve_by_month,
    vintage_loss,
    warm_loss,
)
from allowance.schemas import Assumptions
from tests.strategies import random_loss_rate_book

LEVEL, INTEREST_ONLY, BALLOON, REVOLVING = 0, 1, 2, 3


def _book(loans: list[dict], months: int = 72, multiplier=None, frameworks: int = 1, smm_row=None,
          vintage_curve=None) -> LossRateInputs:
    """Loans given as dicts of per-loan values; one scenario unless ``multiplier`` says more."""
    n = len(loans)
    col = lambda name, default, dt=float: np.array([d.get(name, default) for d in loans], dtype=dt)  # noqa: E731
    per_fw = lambda name, default, dt=float: np.tile(col(name, default, dt), (frameworks, 1))  # noqa: E731
    mult = np.ones((frameworks, months, 1)) if multiplier is None else np.asarray(multiplier, float)
    smm = np.zeros((1, 200 + months)) if smm_row is None else np.atleast_2d(smm_row)
    return LossRateInputs(
        method=col("method", WARM, np.int64), loss_rate=col("loss_rate", 0.0), vintage=col("vintage", 0, np.int64),
        original_balance=col("original_balance", 0.0), age=col("age", 0, np.int64),
        default_lgd=col("default_lgd", np.nan), code=col("code", LEVEL, np.int64), balance=col("balance", 0.0),
        rate=col("rate", 0.0), months_left=col("months_left", 1, np.int64), io_left=col("io_left", 0, np.int64),
        residual=col("residual", 0.0), payment=col("payment", np.nan), prepay=np.zeros(n, np.int64),
        prepay_offset=col("age", 0, np.int64), in_default=per_fw("in_default", False, np.bool_),
        horizon=per_fw("horizon", 0, np.int64), ead_add=per_fw("ead_add", 0.0), paydown=per_fw("paydown", 0.0),
        discount=per_fw("discount", 1.0), multiplier=mult, lgd_multiplier=np.ones_like(mult),
        vintage_curve=np.zeros((1, 1)) if vintage_curve is None else np.atleast_2d(vintage_curve), smm=smm,
    )


# --------------------------------------------------------------------------------------
# worked examples and hand computations
# --------------------------------------------------------------------------------------


def test_pool_of_three_million_at_one_point_six_five_percent():
    # ASC 326-20-55 (the loss-rate example; from memory): a 3,000,000 pool at an adjusted
    # lifetime loss rate of 1.65 % carries an allowance of 49,500.00
    assert round(float(pool_loss(3_000_000.0, 0.0165)), 2) == 49_500.00
    # the same pool as loans with different schedules and prepayment: the lifetime rate is only
    # spread over the months, so the undiscounted base-case total is still L x amortised cost
    loans = [
        dict(method=POOL, loss_rate=0.0165, balance=1_250_000.0, rate=0.06 / 12, months_left=60, horizon=60),
        dict(method=POOL, loss_rate=0.0165, balance=1_000_000.0, rate=0.045 / 12, months_left=36, horizon=36,
             code=INTEREST_ONLY, io_left=12),
        dict(method=POOL, loss_rate=0.0165, balance=750_000.0, rate=0.08 / 12, months_left=12, horizon=12, age=30),
    ]
    smm = np.full((1, 300), 1 - (1 - 0.15) ** (1 / 12))  # CPR 15 %
    result = loss_rate_losses(_book(loans, smm_row=smm))
    assert round(float(result.ecl_lifetime[:, 0, 0].round(2).sum()), 2) == 49_500.00


def _schedule(balance: float, annual_rate: float, months: int) -> np.ndarray:
    """Opening balance of months 1..n of a level-pay loan, from numpy_financial.pmt and fv."""
    r = annual_rate / 12
    payment = npf.pmt(r, months, -balance)
    return npf.fv(r, np.arange(months), payment, -balance)


def test_warm_on_one_level_pay_loan_equals_the_numpy_financial_schedule():
    # hand computation: ECL = r x sum_t B_{t-1} / 12 with B_{t-1} the numpy-financial schedule
    # times the probability of not having prepaid by the start of month t (CPR 10 %)
    opening = _schedule(250_000.0, 0.06, 60)
    assert opening[0] == pytest.approx(250_000.0) and opening[-1] == pytest.approx(npf.pmt(0.005, 60, -250_000) / 1.005)
    smm = 1 - 0.9 ** (1 / 12)
    kept = (1 - smm) ** np.arange(60)
    hand = 0.012 * (opening * kept).sum() / 12
    loan = dict(method=WARM, loss_rate=0.012, balance=250_000.0, rate=0.005, months_left=60, horizon=60)
    got = loss_rate_losses(_book([loan], smm_row=np.full((1, 300), smm)))
    assert got.ecl_lifetime[0, 0, 0] == pytest.approx(hand, rel=1e-12)
    assert got.ecl_12m[0, 0, 0] == pytest.approx(0.012 * (opening * kept)[:12].sum() / 12, rel=1e-12)
    assert float(warm_loss(opening * kept, 0.012)) == pytest.approx(hand, rel=1e-15)
    # without prepayment: the contractual schedule alone
    plain = loss_rate_losses(_book([loan]))
    assert plain.ecl_lifetime[0, 0, 0] == pytest.approx(0.012 * opening.sum() / 12, rel=1e-12)


def test_warm_on_a_level_balance_is_rate_times_balance_times_years():
    # r x B x T/12 (definition): 1.2 % on a 1,000,000 bullet with 36 months left
    loan = dict(method=WARM, loss_rate=0.012, balance=1e6, rate=0.004, code=INTEREST_ONLY, months_left=36,
                io_left=36, horizon=36)
    got = loss_rate_losses(_book([loan]))
    assert got.ecl_lifetime[0, 0, 0] == pytest.approx(36_000.0, rel=1e-12)
    assert got.ecl_12m[0, 0, 0] == pytest.approx(12_000.0, rel=1e-12)  # IFRS 9 stage 1: the annual rate


def test_vintage_loss_is_original_balance_times_the_rest_of_the_curve():
    # O x (C(end of life) - C(a)) with C linear within each year (definition): a 60-month loan of
    # 20,000 at age 18; C(18) = 2.1 %, C(30) = 3.5 %, C(60) = 4 %
    curve = vintage_curve_by_month([0.012, 0.03, 0.04], 300)
    assert curve[[18, 30, 60]].round(6).tolist() == [0.021, 0.035, 0.04]
    loan = dict(method=VINTAGE, original_balance=20_000.0, age=18, balance=15_000.0, rate=0.005, months_left=42,
                horizon=42)
    got = loss_rate_losses(_book([loan], vintage_curve=curve))
    assert got.ecl_lifetime[0, 0, 0] == pytest.approx(380.0, rel=1e-12)
    assert got.ecl_12m[0, 0, 0] == pytest.approx(280.0, rel=1e-12)
    assert float(vintage_loss(20_000.0, 18, 60, curve)) == pytest.approx(380.0, rel=1e-12)


def test_discounting_from_the_end_of_each_month():
    v = 1 / 1.005
    loan = dict(method=WARM, loss_rate=0.012, balance=1e6, code=INTEREST_ONLY, months_left=3, io_left=3, horizon=3,
                discount=v)
    got = loss_rate_losses(_book([loan]))
    # sum over t = 1..3 of r/12 x B x (1 + i)^-t (definition)
    assert got.ecl_lifetime[0, 0, 0] == pytest.approx(sum(1000.0 * v**t for t in (1, 2, 3)), rel=1e-12)


def test_scenarios_scale_the_loss_rate_then_revert():
    a = Assumptions.model_validate({
        "run": {"as_of": "2026-09-30", "frameworks": ["cecl"]},
        "segments": {"pool": {"annual_loss_rate": 0.012}},
        "cecl": {"reasonable_supportable_months": 12, "reversion_months": 12},
        "scenarios": {"down": {"weight": 1.0, "pd_multiplier": [2.0, 2.0], "lgd_multiplier": [1.1]}},
    })
    q = np.full((1, 36), reference_monthly_rate("annual_loss_rate", 0.012))
    tables = scenarios.scenario_tables(q, None, a, a.cecl)
    mult = loss_rate_multipliers(tables.pd[0], q[0], tables.lgd_multiplier)
    # months 1-12: 2.0 x 1.1; months 13-24: 2 - k/12 (straight-line reversion, ASC 326-20-30-9); then 1
    assert mult[0, :12] == pytest.approx(2.2) and mult[0, 24:] == pytest.approx(1.0)
    assert mult[0, 12:24] == pytest.approx(2.0 - np.arange(1, 13) / 12)
    loan = dict(method=WARM, loss_rate=0.012, balance=1e6, code=INTEREST_ONLY, months_left=36, io_left=36, horizon=36)
    got = loss_rate_losses(_book([loan], months=36, multiplier=mult.T[None, :, :]))
    # 1,000 a month x (12 x 2.2 + sum_k (2 - k/12) + 12) = 1,000 x 55.9 (hand computation)
    assert got.ecl_lifetime[0, 0, 0] == pytest.approx(55_900.0, rel=1e-12)


def test_a_zero_reference_rate_takes_no_multiplier():
    assert loss_rate_multipliers([[0.0, 0.5]], [0.0, 0.25], [[1.0, 1.0]]).tolist() == [[1.0, 2.0]]


def test_loans_in_default_take_the_stated_lgd_or_stay_in_the_pool():
    loan = dict(method=WARM, loss_rate=0.012, balance=1e6, code=INTEREST_ONLY, months_left=36, io_left=36,
                horizon=36, in_default=True)
    stated = loss_rate_losses(_book([dict(loan, default_lgd=0.45)]))
    assert stated.ecl_12m[0, 0, 0] == stated.ecl_lifetime[0, 0, 0] == pytest.approx(450_000.0)  # LGD x EAD_0
    pooled = loss_rate_losses(_book([loan]))
    assert pooled.ecl_lifetime[0, 0, 0] == pytest.approx(36_000.0)


def test_revolving_lines_pay_down_and_carry_the_ccf_add_on():
    line = dict(method=WARM, loss_rate=0.06, balance=10_000.0, code=REVOLVING, months_left=24, horizon=24,
                paydown=0.05, ead_add=2_000.0)
    got = loss_rate_losses(_book([line]))
    # r/12 x sum_t (B (1 - p)^(t-1) + add) over 24 months (common practice, no source)
    hand = 0.005 * (10_000.0 * (0.95 ** np.arange(24)) + 2_000.0).sum()
    assert got.ecl_lifetime[0, 0, 0] == pytest.approx(hand, rel=1e-12)
    assert got.ead[0, 0] == 12_000.0


# --------------------------------------------------------------------------------------
# the loop against a per-loan numpy reference, and against the PD method's loop
# --------------------------------------------------------------------------------------


def _opening(k: LossRateInputs, i: int, f: int, h: int) -> np.ndarray:
    b, r, n, io = k.balance[i], k.rate[i], int(k.months_left[i]), int(k.io_left[i])
    t = np.arange(h)
    with np.errstate(invalid="ignore", divide="ignore"):
        if k.code[i] == REVOLVING:
            path = b * (1.0 - k.paydown[f, i]) ** t
        elif k.code[i] == BALLOON:
            path = -npf.fv(r, t, npf.pmt(r, n, b, -k.residual[i]), b)
        elif k.code[i] == INTEREST_ONLY:
            path = np.where(t < io, b, -npf.fv(r, np.maximum(t - io, 0), npf.pmt(r, max(n - io, 1), b), b))
        else:
            path = -npf.fv(r, t, npf.pmt(r, n, b), b)
    return np.maximum(path, 0.0)


def reference(k: LossRateInputs):
    n, (n_fw, _, n_sc) = len(k.balance), k.multiplier.shape
    ecl12, life = np.zeros((n, n_fw, n_sc)), np.zeros((n, n_fw, n_sc))
    for i in range(n):
        for f in range(n_fw):
            ead0 = k.balance[i] + k.ead_add[f, i]
            if k.in_default[f, i] and not np.isnan(k.default_lgd[i]):
                for s in range(n_sc):
                    ecl12[i, f, s] = life[i, f, s] = ead0 * min(1.0, k.default_lgd[i] * k.lgd_multiplier[f, 0, s])
                continue
            h = int(k.horizon[f, i]) if k.code[i] == REVOLVING else min(int(k.horizon[f, i]), int(k.months_left[i]))
            t = np.arange(h)
            smm = k.smm[k.prepay[i], k.prepay_offset[i] + t]
            kept = np.concatenate([[1.0], np.cumprod(1 - smm)[:-1]])[:h]
            expected = (_opening(k, i, f, h) + k.ead_add[f, i]) * kept
            if k.method[i] == POOL:
                loss = k.loss_rate[i] * ead0 * expected / expected.sum() if expected.sum() > 0 else 0 * expected
            elif k.method[i] == WARM:
                loss = k.loss_rate[i] / 12 * expected
            else:
                c = k.vintage_curve[k.vintage[i]]
                age = k.age[i] + np.arange(h + 1)
                loss = k.original_balance[i] * np.diff(c[np.minimum(age, c.size - 1)])
            df = k.discount[f, i] ** (t + 1)
            for s in range(n_sc):
                monthly = loss * df * k.multiplier[f, :h, s]
                life[i, f, s], ecl12[i, f, s] = monthly.sum(), monthly[:12].sum()
    return ecl12, life


@pytest.mark.parametrize("loop", ["compiled", "arrays"])
@settings(max_examples=20, deadline=None, derandomize=True)
@given(st.integers(0, 2**32 - 1), st.integers(1, 2), st.integers(1, 5))
def test_loop_equals_the_numpy_reference(loop, seed, frameworks, n_scenarios):
    k = random_loss_rate_book(seed, n=30, frameworks=frameworks, scenarios=n_scenarios)
    got = loss_rate_losses(k, loop)
    ecl12, life = reference(k)
    np.testing.assert_allclose(got.ecl_lifetime, life, rtol=1e-9, atol=1e-6)
    np.testing.assert_allclose(got.ecl_12m, ecl12, rtol=1e-9, atol=1e-6)


@settings(max_examples=10, deadline=None, derandomize=True)
@given(st.integers(0, 2**32 - 1), st.floats(0.001, 0.05))
def test_warm_is_the_pd_loop_with_unconditional_monthly_losses_of_r_over_12(seed, annual_rate):
    """The same balance path as the PD method: with LGD 1 and marginal PDs pd_t = q / (1 - (t-1) q),
    S_{t-1} pd_t is q times the prepayment survival, so the PD loop computes r/12 x sum E_t."""
    k = random_loss_rate_book(seed, n=30, frameworks=1, scenarios=1)
    months = k.multiplier.shape[1]
    q = annual_rate / 12
    pd_t = q / (1 - q * np.arange(months))
    k = dataclasses.replace(k, method=np.full(30, WARM), loss_rate=np.full(30, annual_rate),
                            in_default=np.zeros_like(k.in_default), multiplier=np.ones_like(k.multiplier))
    pd_loop = expected_losses(KernelInputs(
        code=k.code, balance=k.balance, rate=k.rate, months_left=k.months_left, io_left=k.io_left,
        residual=k.residual, payment=k.payment, curve=np.zeros((1, 30), np.int64), prepay=k.prepay,
        prepay_offset=k.prepay_offset, in_default=k.in_default, lgd=np.ones(30), collateral=np.zeros(30),
        haircut=np.zeros(30), recovery_cost=np.zeros(30), lgd_floor=np.zeros(30), recovery_discount=np.ones((1, 30)),
        cure=np.zeros(30), refinance_pd=np.zeros(30), horizon=k.horizon, ead_add=k.ead_add, paydown=k.paydown, discount=k.discount,
        interest=np.zeros_like(k.discount),
        pd=pd_t[None, None, :, None], smm=k.smm, lgd_multiplier=np.ones((1, months, 1)),
        collateral_index=np.ones((1, 1, months, 1)),
    ))
    np.testing.assert_allclose(loss_rate_losses(k).ecl_lifetime, pd_loop.ecl_lifetime, rtol=1e-9, atol=1e-6)


# --------------------------------------------------------------------------------------
# invariants
# --------------------------------------------------------------------------------------

_INVARIANT = settings(max_examples=25, deadline=None, derandomize=True)


@_INVARIANT
@given(st.integers(0, 2**32 - 1), st.floats(0.1, 5.0))
def test_linear_in_the_rate_and_in_the_multiplier(seed, factor):
    k = random_loss_rate_book(seed, n=30)
    k = dataclasses.replace(k, in_default=np.zeros_like(k.in_default))
    base = loss_rate_losses(k)
    scaled = loss_rate_losses(dataclasses.replace(k, multiplier=k.multiplier * factor))
    np.testing.assert_allclose(scaled.ecl_lifetime, base.ecl_lifetime * factor, rtol=1e-12, atol=1e-9)
    more = loss_rate_losses(dataclasses.replace(k, loss_rate=k.loss_rate * factor,
                                                vintage_curve=k.vintage_curve * factor,
                                                original_balance=k.original_balance))
    np.testing.assert_allclose(more.ecl_lifetime, base.ecl_lifetime * factor, rtol=1e-12, atol=1e-9)
    assert (base.ecl_12m <= base.ecl_lifetime * (1 + 1e-12) + 1e-12).all() and (base.ecl_12m >= 0).all()


@_INVARIANT
@given(st.integers(0, 2**32 - 1))
def test_undiscounted_unscaled_pool_is_rate_times_exposure(seed):
    k = random_loss_rate_book(seed, n=30)
    k = dataclasses.replace(k, method=np.full(30, POOL), multiplier=np.ones_like(k.multiplier),
                            discount=np.ones_like(k.discount), in_default=np.zeros_like(k.in_default))
    got = loss_rate_losses(k)
    h = np.where(k.code == REVOLVING, k.horizon, np.minimum(k.horizon, k.months_left))
    exposure = (k.balance + k.ead_add) * k.loss_rate
    # a loan with a horizon of 0 (or nothing left on its schedule) carries no loss
    want = np.where(h > 0, exposure, 0.0)
    np.testing.assert_allclose(got.ecl_lifetime[:, :, 0], want.T, rtol=1e-9, atol=1e-6)


def test_bad_inputs_are_refused():
    k = random_loss_rate_book(3, n=5)
    with pytest.raises(ValueError, match="horizon lies outside"):
        loss_rate_losses(dataclasses.replace(k, horizon=k.horizon + 1000))
    with pytest.raises(ValueError, match="loss_rate holds NaN"):
        loss_rate_losses(dataclasses.replace(k, loss_rate=np.full(5, np.nan)))
    with pytest.raises(ValueError, match="method code"):
        loss_rate_losses(dataclasses.replace(k, method=np.full(5, 7)))


def test_the_compiled_loop_reads_the_same_method_codes():
    from allowance import loss_rates, loss_rates_compiled

    assert (loss_rates_compiled.POOL, loss_rates_compiled.WARM, loss_rates_compiled.VINTAGE) == (
        loss_rates.POOL, loss_rates.WARM, loss_rates.VINTAGE)


@settings(max_examples=30, deadline=None)
@given(st.integers(0, 2**32 - 1), st.integers(1, 2), st.integers(1, 6), st.booleans())
def test_the_numpy_sums_equal_the_compiled_loop(seed, frameworks, n_scenarios, add_on_months):
    # and where the reference does not go: an add-on for the first months only, another after them
    k = random_loss_rate_book(seed, n=50, frameworks=frameworks, scenarios=n_scenarios)
    if add_on_months:
        rng = np.random.default_rng(seed)
        n = len(k.balance)
        k = dataclasses.replace(k, add_months=rng.integers(0, 30, (frameworks, n)),
                                add_after=rng.uniform(0.0, 300.0, (frameworks, n)))
    compiled, arrays = loss_rate_losses(k, "compiled"), loss_rate_losses(k, "arrays")
    for name in ("ecl_12m", "ecl_lifetime", "ead"):
        np.testing.assert_allclose(getattr(arrays, name), getattr(compiled, name), rtol=1e-12, atol=1e-9, err_msg=name)


def test_an_unknown_loop_is_refused():
    with pytest.raises(ValueError, match="loop must be one of compiled, arrays"):
        loss_rate_losses(random_loss_rate_book(1, n=2), "fast")
