"""The ECL sums, compiled and in numpy, against worked examples, a per-loan numpy reference,
each other, and invariants."""

from __future__ import annotations

import dataclasses
import subprocess
import sys
from pathlib import Path

import numba
import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from allowance import ecl, ecl_compiled
from allowance.ecl import PER_FRAMEWORK, KernelInputs, KernelResult, expected_losses
from tests.strategies import random_kernel_book


def _one_loan(**over) -> KernelInputs:
    """One loan, one framework, one scenario; keyword arguments replace fields."""
    one = lambda v, dt=float: np.array([v], dtype=dt)  # noqa: E731
    base = dict(
        code=one(1, np.int64), balance=one(1e6), rate=one(0.0), months_left=one(60, np.int64),
        io_left=one(60, np.int64), residual=one(0.0), payment=one(np.nan), curve=np.zeros((1, 1), np.int64),
        prepay=one(0, np.int64), prepay_offset=one(0, np.int64), in_default=np.zeros((1, 1), np.bool_),
        lgd=one(0.25), collateral=one(0.0), haircut=one(0.0), recovery_cost=one(0.0), lgd_floor=one(0.0),
        recovery_discount=np.ones((1, 1)), cure=one(0.0), refinance_pd=one(0.0), horizon=np.full((1, 1), 60, np.int64),
        ead_add=np.zeros((1, 1)), paydown=np.zeros((1, 1)), discount=np.ones((1, 1)), interest=np.zeros((1, 1)),
        pd=np.zeros((1, 1, 60, 1)), smm=np.zeros((1, 60)), lgd_multiplier=np.ones((1, 60, 1)),
        collateral_index=np.ones((1, 1, 60, 1)),
    )
    base.update(over)
    return KernelInputs(**base)


def _hazard(pd_12m: float) -> float:
    """Constant monthly hazard reproducing a 12-month PD: 1 - (1 - PD)^(1/12)."""
    return 1.0 - (1.0 - pd_12m) ** (1.0 / 12.0)


@pytest.mark.parametrize("loop", ecl.LOOPS)
def test_one_period_worked_example(loop):
    # 1,000,000 bullet exposure, 12-month PD 0.5 %, LGD 25 %, no prepayment, undiscounted:
    # 12-month ECL = PD x LGD x EAD = 1,250; gross loss PD x EAD = 5,000 (common practice, no source)
    pd_table = np.full((1, 1, 60, 1), _hazard(0.005))
    net = expected_losses(_one_loan(pd=pd_table), loop)
    assert net.ecl_12m[0, 0, 0] == pytest.approx(1_250.0, rel=1e-12)
    assert net.pd_12m[0, 0, 0] == pytest.approx(0.005, rel=1e-12)
    assert net.ead[0, 0] == 1e6 and net.lgd[0, 0] == 0.25
    gross = expected_losses(_one_loan(pd=pd_table, lgd=np.array([1.0])), loop)
    assert gross.ecl_12m[0, 0, 0] == pytest.approx(5_000.0, rel=1e-12)
    assert net.gross_12m[0, 0, 0] == pytest.approx(5_000.0, rel=1e-12)  # the same, from the loop's gross sum
    # and as one monthly period: PD 0.5 % in the only month
    one_month = _one_loan(pd=np.full((1, 1, 60, 1), 0.005), horizon=np.ones((1, 1), np.int64))
    assert expected_losses(one_month, loop).ecl_lifetime[0, 0, 0] == pytest.approx(1_250.0, rel=1e-12)


@pytest.mark.parametrize("loop", ecl.LOOPS)
def test_defaulted_loan_takes_lgd_times_ead(loop):
    k = _one_loan(in_default=np.ones((1, 1), np.bool_), pd=np.full((1, 1, 60, 1), 0.01), ead_add=np.full((1, 1), 5e4))
    res = expected_losses(k, loop)
    # PD = 1 now: ECL = LGD x EAD_0 (common practice, no source)
    assert res.ecl_12m[0, 0, 0] == res.ecl_lifetime[0, 0, 0] == pytest.approx(0.25 * 1.05e6)
    assert res.pd_12m[0, 0, 0] == res.pd_lifetime[0, 0, 0] == 1.0


@pytest.mark.parametrize("loop", ecl.LOOPS)
def test_discounting_from_the_end_of_the_default_month(loop):
    v = 1 / 1.005
    k = _one_loan(pd=np.full((1, 1, 60, 1), 0.01), horizon=np.full((1, 1), 3, np.int64), discount=np.full((1, 1), v))
    res = expected_losses(k, loop)
    # sum over months t = 1..3 of S_{t-1} pd EAD LGD (1 + i)^-t (common practice, no source)
    expected = sum(0.99 ** (t - 1) * 0.01 * 1e6 * 0.25 * v**t for t in (1, 2, 3))
    assert res.ecl_lifetime[0, 0, 0] == pytest.approx(expected, rel=1e-12)


# --------------------------------------------------------------------------------------
# the loop against a straightforward per-loan numpy reference
# --------------------------------------------------------------------------------------


def _balance_path(k: KernelInputs, i: int, f: int, months: int) -> np.ndarray:
    """Opening balance of months 1..months, from numpy_financial (or by definition)."""
    b, r, n, io = k.balance[i], k.rate[i], int(k.months_left[i]), int(k.io_left[i])
    t = np.arange(months)
    with np.errstate(invalid="ignore", divide="ignore"):  # npf evaluates its rate-0 branch's twin
        if k.code[i] == 3:  # revolving: a constant share repaid (common practice, no source)
            return b * (1.0 - k.paydown[f, i]) ** t
        if k.code[i] == 2:  # balloon: numpy_financial.pmt to the residual, then fv
            return -npf.fv(r, t, npf.pmt(r, n, b, -k.residual[i]), b)
        if k.code[i] == 1:  # interest-only months, then numpy_financial level pay over the rest
            amort = max(n - io, 1)
            return np.where(t < io, b, -npf.fv(r, np.maximum(t - io, 0), npf.pmt(r, amort, b), b))
        return -npf.fv(r, t, npf.pmt(r, n, b), b)  # level: numpy_financial.pmt and fv


def _loss_rate(k: KernelInputs, i, f, ead, t, s):
    if k.collateral[i] > 0:  # net proceeds C (1 - h)(1 - c), then cures and multiplier, then the floor
        proceeds = k.collateral[i] * k.collateral_index[f, k.curve[f, i], t, s] * (1 - k.haircut[i]) * (1 - k.recovery_cost[i])
        raw = 1 - np.minimum(1.0, proceeds * k.recovery_discount[f, i] / np.maximum(ead, 1e-12))
        return np.minimum(1.0, np.maximum(k.lgd_floor[i], k.lgd_multiplier[f, t, s] * (1 - k.cure[i]) * raw))
    return np.minimum(1.0, np.full_like(ead, k.lgd[i]) * k.lgd_multiplier[f, t, s])


def reference(k: KernelInputs) -> KernelResult:
    """ECL = sum_t S_{t-1} pd_t LGD_t EAD_t DF_t, loan by loan, vectorised over months."""
    n, (n_fw, _, _, n_sc) = len(k.balance), k.pd.shape
    out = {name: np.zeros((n, n_fw, n_sc)) for name in
           ("ecl_12m", "ecl_lifetime", "pd_12m", "pd_lifetime", "gross_12m", "gross_lifetime")}
    ead0, lgd0 = np.zeros((n, n_fw)), np.zeros((n, n_fw))
    for i in range(n):
        for f in range(n_fw):
            e0 = np.array([k.balance[i] + k.ead_add[f, i]])
            ead0[i, f] = e0[0]
            lgd0[i, f] = _loss_rate(k, i, f, e0, 0, 0)[0]
            if k.in_default[f, i]:
                for s in range(n_sc):
                    loss = e0[0] * _loss_rate(k, i, f, e0, 0, s)[0]
                    out["ecl_12m"][i, f, s] = out["ecl_lifetime"][i, f, s] = loss
                    out["pd_12m"][i, f, s] = out["pd_lifetime"][i, f, s] = 1.0
                    out["gross_12m"][i, f, s] = out["gross_lifetime"][i, f, s] = e0[0]  # no interest: defaulted
                continue
            h = int(k.horizon[f, i]) if k.code[i] == 3 else min(int(k.horizon[f, i]), int(k.months_left[i]))
            t = np.arange(h)
            ead = np.maximum(_balance_path(k, i, f, h), 0.0) + k.ead_add[f, i]
            df = k.discount[f, i] ** (t + 1)
            smm = k.smm[k.prepay[i], k.prepay_offset[i] + t]
            for s in range(n_sc):
                pd_t = k.pd[f, k.curve[f, i], :h, s]
                alive = np.concatenate([[1.0], np.cumprod((1 - pd_t) * (1 - smm))[:-1]])  # S_{t-1}
                default = alive * pd_t
                m = int(k.months_left[i]) - 1  # refinance risk at maturity: S_T q, if the horizon gets there
                if k.refinance_pd[i] > 0 and k.code[i] != 3 and m < h:
                    default[m] += alive[m] * (1 - pd_t[m]) * (1 - smm[m]) * k.refinance_pd[i]
                # the cash shortfall adds the default month's interest: (LGD + i) x EAD
                loss = default * (_loss_rate(k, i, f, ead, t, s) + k.interest[f, i]) * ead * df
                out["ecl_lifetime"][i, f, s] = loss.sum()
                out["ecl_12m"][i, f, s] = loss[:12].sum()
                out["pd_lifetime"][i, f, s] = default.sum()
                out["pd_12m"][i, f, s] = default[:12].sum()
                gross = default * (1.0 + k.interest[f, i]) * ead * df  # LGD = 1: before recoveries
                out["gross_lifetime"][i, f, s] = gross.sum()
                out["gross_12m"][i, f, s] = gross[:12].sum()
    return KernelResult(**out, ead=ead0, lgd=lgd0)


@pytest.mark.parametrize("loop", ecl.LOOPS)
@settings(max_examples=20)
@given(st.integers(0, 2**32 - 1), st.integers(1, 2), st.integers(1, 6), st.booleans())
def test_loop_equals_the_numpy_reference(loop, seed, frameworks, scenarios, secured):
    k = random_kernel_book(seed, n=30, frameworks=frameworks, scenarios=scenarios, secured=secured,
                           multipliers=secured)
    got, want = expected_losses(k, loop), reference(k)
    for name in ("ecl_12m", "ecl_lifetime", "pd_12m", "pd_lifetime", "ead", "lgd", "gross_12m", "gross_lifetime"):
        np.testing.assert_allclose(getattr(got, name), getattr(want, name), rtol=1e-9, atol=1e-6, err_msg=name)


def test_many_scenarios_use_every_lane():
    """More scenarios than the loop carries at once (4): each group lands in its own column."""
    k = random_kernel_book(7, n=25, frameworks=1, scenarios=9, secured=False, multipliers=True)
    np.testing.assert_allclose(expected_losses(k).ecl_lifetime, reference(k).ecl_lifetime, rtol=1e-9, atol=1e-6)


_SUMS = ("ecl_12m", "ecl_lifetime", "pd_12m", "pd_lifetime", "ead", "lgd", "gross_12m", "gross_lifetime")


@settings(max_examples=40)
@given(st.integers(0, 2**32 - 1), st.integers(1, 2), st.integers(1, 9), st.booleans(), st.booleans())
def test_the_numpy_sums_equal_the_compiled_loop(seed, frameworks, scenarios, secured, multipliers):
    """The two ways agree on what the reference does not cover too: a loan's own PD level
    (pd_scale, capped at PD 1), an add-on for the first months only and another after them."""
    k = random_kernel_book(seed, n=60, frameworks=frameworks, scenarios=scenarios, secured=secured,
                           multipliers=multipliers)
    rng = np.random.default_rng(seed)
    n = len(k.balance)
    k = dataclasses.replace(
        k, pd_scale=np.where(rng.random(n) < 0.5, 1.0, rng.uniform(0.0, 60.0, n)),
        add_months=rng.integers(0, 30, (frameworks, n)), add_after=np.where(rng.random((frameworks, n)) < 0.5, 0.0,
                                                                            rng.uniform(0.0, 500.0, (frameworks, n))))
    compiled, arrays = expected_losses(k, "compiled"), expected_losses(k, "arrays")
    for name in _SUMS:
        np.testing.assert_allclose(getattr(arrays, name), getattr(compiled, name), rtol=1e-12, atol=1e-9, err_msg=name)


def _wide_book(seed: int, frameworks: int, lgd_high: float, multipliers: bool) -> KernelInputs:
    """A random book of 700 loans on two curve rows per framework (the compiled loop's blocks
    of loans run full and end part-full), a third of them with a PD level of their own, some
    ending in month 12 with a refinance test."""
    k = random_kernel_book(seed, n=700, frameworks=frameworks, scenarios=3, secured=False, multipliers=multipliers)
    rng = np.random.default_rng(seed)
    n = 700
    months_left = np.where(rng.random(n) < 0.2, 12, k.months_left)
    return dataclasses.replace(
        k, curve=rng.integers(0, 2, k.curve.shape), lgd=rng.uniform(0.05, lgd_high, n), months_left=months_left,
        io_left=np.minimum(k.io_left, months_left), horizon=np.where(rng.random((frameworks, n)) < 0.5, months_left, k.horizon),
        pd_scale=np.where(rng.random(n) < 0.3, rng.uniform(0.0, 3.0, n), 1.0))


@settings(max_examples=10)
@given(st.integers(0, 2**32 - 1), st.integers(1, 2), st.sampled_from([(0.6, True), (0.95, True), (0.9, False)]))
def test_the_compiled_loop_equals_the_numpy_sums_on_each_net_loss_form(seed, frameworks, case):
    """Loans without collateral under each net-loss form: LGD x multiplier never above 1,
    sometimes above 1 (the cap binds in some months), a unit LGD path; the compiled loop
    against the numpy sums (to rounding, 1e-12)."""
    lgd_high, multipliers = case
    k = _wide_book(seed, frameworks, lgd_high, multipliers)
    compiled, arrays = expected_losses(k, "compiled"), expected_losses(k, "arrays")
    for name in _SUMS:
        np.testing.assert_allclose(getattr(compiled, name), getattr(arrays, name), rtol=1e-12, atol=1e-9, err_msg=name)


@settings(max_examples=10)
@given(st.integers(0, 2**32 - 1), st.integers(1, 2), st.booleans())
def test_a_loans_compiled_figures_do_not_depend_on_the_other_loans(seed, frameworks, secured):
    """A loan's compiled figures are the same bits whichever loans share its chunk (the tape
    in another order, a part of it, as a cluster's partition holds), so that a run's loan
    detail never depends on how the book was cut."""
    k = _wide_book(seed, frameworks, 0.95, True)
    if secured:
        k = dataclasses.replace(k, collateral=np.where(np.arange(700) % 5 == 0, k.balance * 1.2, 0.0))
    whole = expected_losses(k, "compiled")
    rng = np.random.default_rng(seed)
    low = np.flatnonzero(k.lgd * k.lgd_multiplier.max() <= 1.0)  # the cap never binds for these
    for rows in (rng.permutation(700), np.sort(rng.choice(700, 300, replace=False)), np.arange(699, -1, -1)[::3], low):
        part = expected_losses(_some_loans(k, rows), "compiled")
        for name in _SUMS:
            np.testing.assert_array_equal(getattr(part, name), getattr(whole, name)[rows], err_msg=name)


@settings(max_examples=10)
@given(st.integers(0, 2**32 - 1), st.integers(1, 2))
def test_a_scenario_alone_gives_its_column_of_the_compiled_run_to_the_bit(seed, frameworks):
    """The sensitivities rerun each scenario alone and report it beside the weighted run;
    the compiled loop gives a loan the same bits for a scenario whether the other scenarios
    run beside it or not, secured or not, its horizon short or long (so a large book's
    scenario alone gives the cents of its column, as the numpy sums do for a small one)."""
    k = _wide_book(seed, frameworks, 0.95, True)
    k = dataclasses.replace(k, collateral=np.where(np.arange(700) % 4 == 0, k.balance * 1.1, 0.0))
    together = expected_losses(k, "compiled")
    for s in range(k.pd.shape[3]):
        alone = expected_losses(dataclasses.replace(
            k, pd=k.pd[..., s:s + 1], lgd_multiplier=k.lgd_multiplier[..., s:s + 1],
            collateral_index=k.collateral_index[..., s:s + 1]), "compiled")
        for name in ("ecl_12m", "ecl_lifetime", "pd_12m", "pd_lifetime", "gross_12m", "gross_lifetime"):
            np.testing.assert_array_equal(getattr(alone, name)[..., 0], getattr(together, name)[..., s],
                                          err_msg=f"{name}, scenario {s}")


def _some_loans(k: KernelInputs, rows: np.ndarray, **changes) -> KernelInputs:
    """``k``'s loans at ``rows`` (its tables whole, the same objects), with ``changes``."""
    out = {}
    for f in dataclasses.fields(k):
        value = getattr(k, f.name)
        if f.name in ("pd", "smm", "lgd_multiplier", "collateral_index") or value is None:
            out[f.name] = value
        else:
            out[f.name] = value[:, rows] if np.ndim(value) == 2 else value[rows]
    return KernelInputs(**(out | changes))


@settings(max_examples=25)
@given(st.integers(0, 2**32 - 1), st.integers(1, 2), st.integers(1, 5), st.booleans())
def test_sets_summed_together_give_the_bits_of_one_call_each(seed, frameworks, scenarios, secured):
    """Several sets of inputs over the same tables (a chunk, and extra passes of some of its
    loans at other terms, as the engine makes for POCI loans and drawn exposures): summed in
    one numpy pass, each loan's figures are those of its own call to the bit."""
    k = random_kernel_book(seed, n=50, frameworks=frameworks, scenarios=scenarios, secured=secured,
                           multipliers=secured)
    rng = np.random.default_rng(seed)
    rows = np.sort(rng.choice(50, 12, replace=False))
    other = _some_loans(k, rows, pd_scale=rng.uniform(0.0, 5.0, 12), horizon=np.minimum(k.horizon[:, rows], 12),
                        prepay=np.broadcast_to(k.prepay[rows], (frameworks, 12)).copy())
    few = _some_loans(k, rows[:3], ead_add=np.zeros((frameworks, 3)))
    batch = [k, None, other, few]
    together = ecl.expected_losses_together(batch, "arrays")
    assert together[1] is None
    for inputs, got in zip(batch, together):
        if inputs is None:
            continue
        alone = expected_losses(inputs, "arrays")
        for name in _SUMS:
            np.testing.assert_array_equal(getattr(got, name), getattr(alone, name), err_msg=name)


def _framework(k: KernelInputs, f: int) -> KernelInputs:
    """``k`` with framework ``f`` alone."""
    return dataclasses.replace(k, **{name: getattr(k, name)[f:f + 1] for name in (*PER_FRAMEWORK, "pd",
                                                                                 "lgd_multiplier", "collateral_index")
                                     if getattr(k, name) is not None and np.ndim(getattr(k, name)) > 1})


@settings(max_examples=25)
@given(st.integers(0, 2**32 - 1), st.integers(1, 4), st.booleans(), st.sampled_from(["both", "first", "none"]))
def test_frameworks_summed_side_by_side_give_each_frameworks_own_bits(seed, scenarios, secured, paths):
    """The numpy sums take the frameworks' (framework, loan) pairs in one month loop; each
    framework's figures are those of a run of that framework alone, to the bit, whether both,
    one or neither framework has an LGD path other than 1 (the unit path takes a shortcut)."""
    k = random_kernel_book(seed, n=40, frameworks=2, scenarios=scenarios, secured=secured, multipliers=True)
    if paths != "both":
        multiplier = k.lgd_multiplier.copy()
        multiplier[1 if paths == "first" else slice(None)] = 1.0  # "first": only the first has a path
        k = dataclasses.replace(k, lgd_multiplier=multiplier)
    both = expected_losses(k, "arrays")
    for f in range(2):
        alone = expected_losses(_framework(k, f), "arrays")
        for name in _SUMS:
            got = getattr(both, name)[:, f]
            np.testing.assert_array_equal(got, getattr(alone, name)[:, 0], err_msg=f"{name}, framework {f}")


def test_sets_over_other_tables_are_summed_one_by_one():
    k = random_kernel_book(5, n=20)
    other = dataclasses.replace(k, pd=k.pd * 0.5)  # another table: not one pass
    a, b = ecl.expected_losses_together([k, other], "arrays")
    np.testing.assert_array_equal(a.ecl_lifetime, expected_losses(k, "arrays").ecl_lifetime)
    np.testing.assert_array_equal(b.ecl_lifetime, expected_losses(other, "arrays").ecl_lifetime)
    assert (b.ecl_lifetime <= a.ecl_lifetime + 1e-9).all()


def test_the_numpy_sums_load_no_compiler():
    code = ("import sys\nfrom tests.strategies import random_kernel_book\nfrom allowance.ecl import expected_losses\n"
            "r = expected_losses(random_kernel_book(3), 'arrays')\nprint(r.ecl_lifetime.sum() > 0, 'numba' in sys.modules)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120,
                          cwd=Path(__file__).parents[1])
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["True", "False"]


def test_an_unknown_loop_is_refused():
    with pytest.raises(ValueError, match="loop must be one of compiled, arrays"):
        expected_losses(_one_loan(), "fast")


# --------------------------------------------------------------------------------------
# invariants
# --------------------------------------------------------------------------------------

_INVARIANT = settings(max_examples=30)


@_INVARIANT
@given(st.integers(0, 2**32 - 1))
def test_ecl_bounded_by_exposure_and_twelve_months_by_lifetime(seed):
    r = expected_losses(random_kernel_book(seed, n=40))
    assert (r.ecl_lifetime <= r.ead[:, :, None] * (1 + 1e-12)).all()
    assert (r.ecl_12m <= r.ecl_lifetime * (1 + 1e-12)).all()
    assert (r.pd_12m <= r.pd_lifetime + 1e-15).all() and (r.pd_lifetime <= 1 + 1e-12).all()
    assert (r.ecl_12m >= 0).all()
    # the gross loss (before recoveries) is never below the net loss (common practice, no source)
    assert (r.gross_lifetime >= r.ecl_lifetime * (1 - 1e-12)).all() and (r.gross_12m >= r.ecl_12m * (1 - 1e-12)).all()
    assert (r.gross_lifetime <= r.ead[:, :, None] * (1 + 1e-12)).all()


@_INVARIANT
@given(st.integers(0, 2**32 - 1), st.floats(1.0, 3.0), st.floats(0.0, 0.5))
def test_monotone_in_pd_and_in_lgd(seed, pd_scale, lgd_step):
    # flat LGD on a unit path: the loss severity EAD_t x DF_t never rises, so more PD means more
    # loss even though fewer loans survive to default later
    k = random_kernel_book(seed, n=40, secured=False, multipliers=False)
    base = expected_losses(k)
    more_pd = expected_losses(dataclasses.replace(k, pd=np.minimum(1.0, k.pd * pd_scale)))
    more_lgd = expected_losses(dataclasses.replace(k, lgd=np.minimum(1.0, k.lgd + lgd_step)))
    for bigger in (more_pd, more_lgd):
        assert (bigger.ecl_lifetime >= base.ecl_lifetime * (1 - 1e-12)).all()
        assert (bigger.ecl_12m >= base.ecl_12m * (1 - 1e-12)).all()


def test_short_horizon_twelve_months_equal_lifetime():
    k = _one_loan(pd=np.full((1, 1, 60, 1), 0.01), horizon=np.full((1, 1), 7, np.int64))
    r = expected_losses(k)
    assert r.ecl_12m[0, 0, 0] == r.ecl_lifetime[0, 0, 0] > 0
    assert r.pd_12m[0, 0, 0] == pytest.approx(1 - 0.99**7, rel=1e-12)  # 1 - (1 - pd)^7 (definition)


def test_empty_book():
    k = random_kernel_book(1, n=1)
    empty = KernelInputs(**{
        f.name: (getattr(k, f.name)[..., :0] if f.name in PER_FRAMEWORK
                 else getattr(k, f.name)[:0] if getattr(k, f.name).ndim == 1 else getattr(k, f.name))
        for f in dataclasses.fields(KernelInputs) if getattr(k, f.name) is not None  # pd_scale: None = 1
    })
    assert expected_losses(empty).ecl_lifetime.shape == (0, 2, 3)


@pytest.mark.parametrize(
    ("field", "value", "message"),
    [
        ("balance", np.array([np.nan]), "balance holds NaN"),
        ("horizon", np.full((1, 1), 61, np.int64), "horizon lies outside"),
        ("curve", np.full((1, 1), 3, np.int64), "curve key"),
        ("prepay_offset", np.array([5]), "SMM table"),
    ],
)
def test_bad_inputs_are_refused_not_read_past_the_tables(field, value, message):
    with pytest.raises(ValueError, match=message):
        expected_losses(_one_loan(**{field: value}))


def test_read_only_and_writable_inputs_share_one_compiled_loop():
    """A read-only view (an Arrow-backed column) must not compile the loop a second time.

    numba makes read-only-ness part of an array's type (numba documentation, "Supported
    NumPy features": readonly arrays), so the inputs are normalised to writable first.
    """
    hazard = np.full((1, 1, 60, 1), 0.002)
    writable = _one_loan(pd=hazard.copy())
    frozen = _one_loan(pd=hazard.copy())
    for name in ("balance", "rate", "lgd", "pd"):
        getattr(frozen, name).flags.writeable = False
    a, b = expected_losses(writable), expected_losses(frozen)
    np.testing.assert_array_equal(a.ecl_lifetime, b.ecl_lifetime)
    assert a.ecl_lifetime.sum() > 0
    arrays = [t for sig in ecl_compiled._kernel.signatures for t in sig if isinstance(t, numba.types.Array)]
    assert arrays and all(t.mutable for t in arrays)
    assert not frozen.balance.flags.writeable  # the caller's array is left as it was


def test_cash_shortfall_check_value_through_the_loop():
    # a 36-month 10,000 level-pay loan at 12 % with a 1 % monthly PD and 50 % LGD, discounted at
    # the EIR: PD x LGD x EAD gives 773.00, the cash shortfall (ASC 326-20-30-4) 788.46 (hand
    # computation; tests/test_shortfall.py rebuilds both cash flow by cash flow with numpy_financial)
    v = 1 / 1.01
    loan = dict(code=np.array([0]), rate=np.array([0.01]), balance=np.array([10_000.0]),
                months_left=np.array([36]), io_left=np.array([0]), lgd=np.array([0.5]),
                horizon=np.full((1, 1), 36, np.int64), discount=np.full((1, 1), v), pd=np.full((1, 1, 60, 1), 0.01))
    assert round(float(expected_losses(_one_loan(**loan)).ecl_lifetime[0, 0, 0]), 2) == 773.00
    shortfall = expected_losses(_one_loan(**loan, interest=np.full((1, 1), 0.01)))
    assert round(float(shortfall.ecl_lifetime[0, 0, 0]), 2) == 788.46
    # a loan nobody expects to default has no shortfall at all
    none = expected_losses(_one_loan(**{**loan, "pd": np.zeros((1, 1, 60, 1))}, interest=np.full((1, 1), 0.01)))
    assert none.ecl_lifetime[0, 0, 0] == 0.0


def test_refinance_risk_at_maturity():
    # an interest-only 1,000,000 loan maturing in 3 months, LGD 25 %, undiscounted, refinance-failure
    # probability 10 % at maturity (hand computation, common practice, no source):
    #   no term PD: ECL = S_T q LGD EAD_T = 1 x 0.10 x 0.25 x 1,000,000 = 25,000
    #   1 % monthly PD: term defaults 0.01 + 0.0099 + 0.009801 = 0.029701 of 250,000 = 7,425.25,
    #   then S_T = 0.99^3 = 0.970299 fails with 10 %: 0.0970299 x 250,000 = 24,257.475
    loan = dict(code=np.array([1]), months_left=np.array([3]), io_left=np.array([3]),
                horizon=np.full((1, 1), 3, np.int64), refinance_pd=np.array([0.10]))
    assert expected_losses(_one_loan(**loan)).ecl_lifetime[0, 0, 0] == pytest.approx(25_000.0, rel=1e-12)
    r = expected_losses(_one_loan(**loan, pd=np.full((1, 1, 60, 1), 0.01)))
    assert r.ecl_lifetime[0, 0, 0] == pytest.approx(7_425.25 + 24_257.475, rel=1e-12)
    assert r.pd_lifetime[0, 0, 0] == pytest.approx(0.029701 + 0.0970299, rel=1e-12)
    # a horizon that stops before maturity (IFRS 9 stage 1, 12 months, on a longer loan) takes none of it
    longer = dict(loan, months_left=np.array([24]), io_left=np.array([24]), horizon=np.full((1, 1), 12, np.int64))
    assert expected_losses(_one_loan(**longer)).ecl_lifetime[0, 0, 0] == 0.0


def test_a_loans_own_pd_scale_multiplies_its_monthly_pds():
    # pd_scale k: the loop reads min(k pd_t, 1). One month at PD 0.5 %, LGD 25 %, 1,000,000:
    # 1,250 at k = 1, 2,500 at k = 2, and LGD x EAD = 250,000 when k pd_t passes 1 (capped)
    # (common practice, no source)
    month = dict(horizon=np.ones((1, 1), np.int64), months_left=np.array([1]), io_left=np.array([1]),
                 pd=np.full((1, 1, 60, 1), 0.005))
    ecl = [float(expected_losses(_one_loan(**month, pd_scale=np.array([k]))).ecl_12m[0, 0, 0]) for k in (1.0, 2.0, 500.0)]
    assert np.round(ecl, 6).tolist() == [1250.0, 2500.0, 250000.0]
    assert expected_losses(_one_loan(**month)).ecl_12m[0, 0, 0] == pytest.approx(1250.0)  # None: the curve as it is
