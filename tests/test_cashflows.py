"""Cash flows: amortization against numpy-financial, PSA and SMM, and identities for every type."""

from __future__ import annotations

import numpy as np
import numpy_financial as npf
import pandas as pd
import pytest
from hypothesis import given, settings

from allowance import cashflows as cf
from tests.strategies import contract_loans, monthly_rates

# balance, annual rate, months: rates include 0, terms from 1 to 360
LEVEL_LOANS = [
    (100_000.0, 0.06, 360),
    (250_000.0, 0.0345, 180),
    (25_000.0, 0.0, 60),
    (5_000.0, 0.18, 36),
    (1_000_000.0, 0.075, 120),
    (1_200.0, 0.12, 3),
    (900.0, 0.09, 1),
]


@pytest.mark.parametrize(("balance", "annual", "n"), LEVEL_LOANS)
def test_level_pay_matches_numpy_financial(balance, annual, n):
    s = cf.schedule("level", balance, annual, n)
    r, per = annual / 12, np.arange(1, n + 1)
    with np.errstate(invalid="ignore", divide="ignore"):  # npf evaluates its rate-0 branch's twin
        ipmt, ppmt = -npf.ipmt(r, per, n, balance), -npf.ppmt(r, per, n, balance)
        pmt, left = -npf.pmt(r, n, balance), -npf.fv(r, per, npf.pmt(r, n, balance), balance)
    # 1e-8, plus 1e-11 relative for the last cent-fractions of a million-sized balance
    close = {"rtol": 1e-11, "atol": 1e-8}
    # numpy_financial.ipmt / ppmt / pmt (payments are negative there: the borrower pays)
    np.testing.assert_allclose(s["interest"], ipmt, **close)
    np.testing.assert_allclose(s["scheduled_principal"], ppmt, **close)
    np.testing.assert_allclose(s["interest"] + s["scheduled_principal"], pmt, **close)
    # numpy_financial.fv: the balance after t payments
    np.testing.assert_allclose(s["closing_balance"], left, **close)
    assert s["closing_balance"].iloc[-1] == 0.0


def test_level_payment_equals_pmt():
    for balance, annual, n in LEVEL_LOANS:
        # numpy_financial.pmt
        assert cf.level_payment(balance, annual / 12, n, 0.0) == pytest.approx(-npf.pmt(annual / 12, n, balance), abs=1e-9)


def _payment_inputs(n: int = 4_000, seed: int = 11):
    """Random loan terms for the payment, with the edges: 0 and 1 months, negative interest-only
    months, zero rates, balloons, tape payments."""
    rng = np.random.default_rng(seed)
    code = rng.integers(0, 5, n)
    balance = rng.uniform(0.0, 1e6, n)
    rate = np.where(rng.random(n) < 0.1, 0.0, rng.uniform(0.0, 0.03, n))
    months_left = rng.integers(0, 481, n)
    io_left = rng.integers(-2, 61, n)
    residual = np.where(code == cf.BALLOON, balance * rng.random(n), 0.0)
    payment = np.where(rng.random(n) < 0.3, rng.uniform(0.0, 5_000.0, n), np.nan)
    return code, balance, rate, months_left, io_left, residual, payment


def test_payments_in_numpy_are_the_compiled_payments_bit_for_bit():
    """contractual_payments (numpy), contractual_payment (plain Python) and the same formula
    compiled as numba compiles ``(1.0 + rate) ** (-months)`` (a float to an int power: repeated
    squaring, then 1 / the product) give the same bits (the engine's figures must not depend on
    which of them computed the payment); and each equals numpy_financial.pmt to 1e-9."""
    numba = pytest.importorskip("numba")

    @numba.njit
    def compiled(code, balance, rate, months_left, io_left, residual, payment):
        out = np.empty(balance.shape[0])
        for i in range(balance.shape[0]):
            after = max(months_left[i] - max(io_left[i], 0), 1)
            res = residual[i] if code[i] == cf.BALLOON else 0.0
            if code[i] == cf.REVOLVING:
                out[i] = 0.0
            elif code[i] != cf.BALLOON and payment[i] == payment[i]:
                out[i] = payment[i]
            elif after == 1:
                out[i] = balance[i] * (1.0 + rate[i]) - res
            elif rate[i] == 0.0:
                out[i] = (balance[i] - res) / after
            else:
                v_n = (1.0 + rate[i]) ** (-after)
                out[i] = (balance[i] - res * v_n) * rate[i] / (1.0 - v_n)
        return out

    args = _payment_inputs()
    vector = cf.contractual_payments(*args)
    scalar = np.array([cf.contractual_payment(*(a.item() for a in row)) for row in zip(*args)])
    assert vector.tobytes() == scalar.tobytes()
    assert vector.tobytes() == compiled(*args).tobytes()
    code, balance, rate, months_left, io_left, residual, payment = args
    level = (code == cf.LEVEL) & np.isnan(payment) & (io_left <= 0) & (months_left > 1) & (rate > 0)
    # numpy_financial.pmt
    np.testing.assert_allclose(vector[level], -npf.pmt(rate[level], months_left[level], balance[level]), rtol=1e-12,
                               atol=1e-9)


def test_psa_benchmark_cpr():
    # PSA standard prepayment model: 0.2 % CPR in month 1, rising 0.2 points a month to 6 % at
    # month 30, then flat; a multiple scales the ramp (from memory)
    months = (1, 15, 30, 45)
    assert [cf.psa_cpr(m, 100.0) for m in months] == pytest.approx([0.002, 0.03, 0.06, 0.06], abs=1e-12)
    assert [cf.psa_cpr(m, 150.0) for m in months] == pytest.approx([0.003, 0.045, 0.09, 0.09], abs=1e-12)
    assert cf.psa_cpr(0, 100.0) == 0.0
    # over an array of ages, the same values age by age (the book's prepayment table takes them so)
    ages = np.arange(0, 61, dtype=float)
    assert cf.psa_cpr(ages, 150.0).tolist() == [cf.psa_cpr(float(m), 150.0) for m in ages]
    assert cf.psa_cpr(ages, 150.0)[[1, 15, 30, 45]] == pytest.approx([0.003, 0.045, 0.09, 0.09], abs=1e-12)


def test_smm_from_cpr():
    # standard MBS formulas: SMM = 1 - (1 - CPR)^(1/12); 6 % CPR is about 0.5143 % SMM (from memory)
    assert cf.smm_from_cpr(0.06) == pytest.approx(0.005143, abs=5e-7)
    assert cf.smm_from_cpr(0.0) == 0.0
    assert cf.smm_from_cpr(1.0) == 1.0
    # twelve months at the SMM leave (1 - CPR) of the balance (the definition)
    assert (1 - cf.smm_from_cpr(0.2)) ** 12 == pytest.approx(0.8, rel=1e-12)
    # an array of CPRs gives each one's SMM
    cprs = np.array([0.0, 0.06, 0.2, 1.0])
    assert cf.smm_from_cpr(cprs).tolist() == [cf.smm_from_cpr(float(c)) for c in cprs]


@pytest.mark.parametrize(("balance", "annual", "n", "amort"), [(1e6, 0.06, 120, 360), (5e5, 0.0, 84, 300), (2e6, 0.045, 60, 240)])
def test_balloon_residual_is_fv_of_the_amortizing_annuity(balance, annual, n, amort):
    r = annual / 12
    with np.errstate(invalid="ignore", divide="ignore"):  # npf evaluates its rate-0 branch's twin
        # numpy_financial.fv of the L-month annuity after n payments
        expected = -npf.fv(r, n, npf.pmt(r, amort, balance), balance)
    assert float(cf.balloon_residual(balance, r, n, amort)) == pytest.approx(expected, rel=1e-12)
    s = cf.schedule("balloon", balance, annual, n, residual=expected)
    # numpy_financial.pmt: every payment before maturity is the L-month level payment
    np.testing.assert_allclose((s["interest"] + s["scheduled_principal"])[:-1], -npf.pmt(r, amort, balance), rtol=1e-10)
    assert s["opening_balance"].iloc[-1] * (1 + r) - (-npf.pmt(r, amort, balance)) == pytest.approx(expected, rel=1e-9)
    assert s["scheduled_principal"].iloc[-1] == pytest.approx(s["opening_balance"].iloc[-1])
    assert s["closing_balance"].iloc[-1] == 0.0


def test_no_residual_when_the_amortization_term_is_not_longer():
    assert cf.balloon_residual(1e5, 0.005, 60, 60) == 0.0
    assert cf.balloon_residual(1e5, 0.005, 60, 48) == 0.0


def test_interest_only_period_then_level_pay():
    balance, annual, n, io = 300_000.0, 0.054, 120, 24
    s = cf.schedule("interest_only", balance, annual, n, interest_only_months_left=io)
    r = annual / 12
    assert (s["scheduled_principal"][:io] == 0.0).all()
    np.testing.assert_allclose(s["interest"][:io], balance * r, rtol=1e-14)  # interest only: B r
    per = np.arange(1, n - io + 1)
    # numpy_financial.ppmt / ipmt of the level loan over the months after the IO period
    np.testing.assert_allclose(s["scheduled_principal"][io:], -npf.ppmt(r, per, n - io, balance), rtol=0, atol=1e-8)
    np.testing.assert_allclose(s["interest"][io:], -npf.ipmt(r, per, n - io, balance), rtol=0, atol=1e-8)
    assert s["closing_balance"].iloc[-1] == 0.0


def test_pure_interest_only_pays_the_balance_at_maturity():
    s = cf.schedule("interest_only", 50_000.0, 0.06, 12, interest_only_months_left=12)
    assert (s["scheduled_principal"][:-1] == 0.0).all()
    assert s["scheduled_principal"].iloc[-1] == 50_000.0
    assert s["interest"].tolist() == pytest.approx([250.0] * 12)  # 50,000 x 6 % / 12 (common practice, no source)


def test_revolving_pays_down_at_the_payment_rate():
    s = cf.schedule("revolving", 8_000.0, 0.22, 36, paydown=0.05)
    # a constant share of the drawn balance repaid: B_t = B (1 - p)^t (common practice, no source)
    np.testing.assert_allclose(s["opening_balance"], 8_000.0 * 0.95 ** np.arange(36), rtol=1e-12)
    np.testing.assert_allclose(s["scheduled_principal"], 0.05 * s["opening_balance"], rtol=1e-12)


def test_tape_payment_short_of_the_schedule_leaves_a_balloon():
    balance, annual, n, pay = 20_000.0, 0.08, 48, 400.0
    r = annual / 12
    s = cf.schedule("level", balance, annual, n, payment=pay)
    # numpy_financial.fv: what the tape payment leaves after n payments
    left = -npf.fv(r, n, -pay, balance)
    assert float(cf.payment_shortfall(balance, r, n, pay)) == pytest.approx(left, rel=1e-10)
    assert s["opening_balance"].iloc[-1] == pytest.approx(-npf.fv(r, n - 1, -pay, balance), rel=1e-10)
    enough = -npf.pmt(r, n, balance)
    assert float(cf.payment_shortfall(balance, r, n, enough)) == pytest.approx(0.0, abs=1e-6)


def test_payment_below_interest_does_not_capitalise():
    s = cf.schedule("level", 10_000.0, 0.12, 6, payment=50.0)  # interest is 100 a month
    assert (s["scheduled_principal"][:-1] == 0.0).all()
    assert s["closing_balance"].iloc[-1] == 0.0


def test_remaining_and_age_months_at_month_ends():
    as_of = pd.Timestamp("2026-02-28")
    maturity = pd.Series(pd.to_datetime(["2026-03-31", "2027-02-28", "2026-02-28", None]))
    assert cf.remaining_months(as_of, maturity).tolist() == [1, 12, 0, 0]
    orig = pd.Series(pd.to_datetime(["2026-01-31", "2025-02-28", "2026-02-28"]))
    assert cf.age_months(orig, as_of).tolist() == [1, 12, 0]


# --------------------------------------------------------------------------------------
# identities for every repayment type (property tests)
# --------------------------------------------------------------------------------------

_PROPERTY = settings(max_examples=50)


def _run(loan: dict, smm=0.0, pd_=0.0) -> pd.DataFrame:
    return cf.schedule(**loan, smm=smm, marginal_pd=pd_)


@_PROPERTY
@given(contract_loans())
def test_scheduled_principal_retires_the_balance(loan):
    s = _run(loan)
    tol = 1e-9 * max(loan["balance"], 1.0)
    if loan["repayment"] == "revolving":
        # a line does not mature: what is not repaid is still drawn at the end of its life
        assert s["scheduled_principal"].sum() + s["closing_balance"].iloc[-1] == pytest.approx(loan["balance"], abs=tol)
    else:
        assert s["scheduled_principal"].sum() == pytest.approx(loan["balance"], abs=tol)
        assert s["closing_balance"].iloc[-1] == 0.0


@_PROPERTY
@given(contract_loans(), monthly_rates, monthly_rates)
def test_balances_never_negative_and_expected_below_scheduled(loan, smm, pd_):
    s = _run(loan, smm, pd_)
    assert (s["opening_balance"] >= 0).all() and (s["closing_balance"] >= 0).all()
    assert (s["scheduled_principal"] >= 0).all()
    assert (s["expected_balance"] <= s["closing_balance"] * (1 + 1e-12)).all()
    assert (np.diff(s["survival"]) <= 0).all()


@_PROPERTY
@given(contract_loans())
def test_zero_prepayment_gives_the_contractual_path(loan):
    s = _run(loan, 0.0, 0.0)
    np.testing.assert_array_equal(s["expected_balance"], s["closing_balance"])
    assert (s["expected_prepayment"] == 0).all()


@_PROPERTY
@given(contract_loans(zero_rate=True).filter(lambda x: x["repayment"] != "revolving"))
def test_zero_rate_gives_straight_line_principal(loan):
    s = _run(loan)
    n, io = loan["months"], loan.get("interest_only_months_left", 0)
    residual = loan.get("residual", 0.0)
    if n - io <= 0:
        return  # pure interest-only: nothing amortizes before maturity
    # with no interest each amortizing month repays an equal share (common practice, no source)
    share = (loan["balance"] - residual) / (n - io)
    body = s["scheduled_principal"].to_numpy()[io:-1]
    np.testing.assert_allclose(body, share, rtol=1e-9, atol=1e-9)
    assert (s["interest"] == 0).all()


@_PROPERTY
@given(contract_loans())
def test_closed_form_path_equals_the_monthly_recursion(loan):
    """The loop's closed form (balance_on_path) against the schedule's month-by-month steps."""
    s = _run(loan)
    code = cf.REPAYMENT_CODES[loan["repayment"]]
    r = loan["interest_rate"] / 12
    n, io = loan["months"], loan.get("interest_only_months_left", 0)
    level = cf.contractual_payment(code, loan["balance"], r, n, io, loan.get("residual", 0.0), float("nan"))
    growth, pay = cf.path_terms(code, loan["balance"], r, level, loan.get("paydown", 0.0))
    x, annuity, path = 1.0, 0.0, []
    for t in range(n):
        if t < io:
            path.append(loan["balance"])
            continue
        path.append(cf.balance_on_path(loan["balance"], x, annuity, pay))
        x, annuity = x * growth, annuity * growth + 1.0
    np.testing.assert_allclose(path, s["opening_balance"], rtol=1e-9, atol=1e-7 * max(loan["balance"], 1.0))


@_PROPERTY
@given(contract_loans())
def test_principal_equals_the_level_payment_recomputed_each_month(loan):
    """principal_step (payment once per loan) equals the level payment recomputed every month
    from the opening balance with numpy_financial.pmt (annuity invariance), for every type."""
    s = _run(loan)
    r = loan["interest_rate"] / 12
    n, io = loan["months"], loan.get("interest_only_months_left", 0)
    residual, paydown = loan.get("residual", 0.0), loan.get("paydown", 0.0)

    def reference(t: int, b: float) -> float:
        left = n - t
        if loan["repayment"] == "revolving":
            return b * paydown
        if left <= 1:
            return b
        if t < io:
            return 0.0
        due = residual if loan["repayment"] == "balloon" else 0.0
        with np.errstate(invalid="ignore", divide="ignore"):  # npf evaluates its rate-0 branch's twin
            payment = -npf.pmt(r, left, b, -due)  # numpy_financial.pmt to the residual
        return payment - b * r

    stateless = [reference(t, b) for t, b in enumerate(s["opening_balance"])]
    np.testing.assert_allclose(stateless, s["scheduled_principal"], rtol=1e-8, atol=1e-8 * max(loan["balance"], 1.0))
