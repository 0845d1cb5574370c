"""Discounting at the EIR: present values against numpy-financial.

A present value here is Σ amount_t × DF_t with DF_t from :func:`discount_factor`, the function
the engine discounts collateral recoveries with; the ECL loop's running product v^t is held to
it in tests/test_ecl.py.
"""

from __future__ import annotations

import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings

from allowance import cashflows as cf
from allowance.discounting import discount_factor, monthly_discount, monthly_rate
from tests.strategies import contract_loans


def present_value(amounts, eir_annual):
    """PV at the EIR of monthly amounts paid at the end of months 1..n (last axis)."""
    amounts = np.asarray(amounts, float)
    months = np.arange(1, amounts.shape[-1] + 1)
    return (amounts * discount_factor(monthly_rate(np.asarray(eir_annual, float))[..., None], months)).sum(axis=-1)


@pytest.mark.parametrize(("balance", "annual", "n"), [(10_000.0, 0.06, 36), (350_000.0, 0.041, 360), (7_500.0, 0.199, 60)])
def test_pv_of_level_payments_at_the_contract_rate_is_the_balance(balance, annual, n):
    payment = -npf.pmt(annual / 12, n, balance)
    # numpy_financial.pv of the level payments
    assert -npf.pv(annual / 12, n, payment) == pytest.approx(balance, rel=1e-12)
    assert float(present_value(np.full(n, payment), annual)) == pytest.approx(balance, rel=1e-12)


def test_discount_factor_is_the_pv_of_one():
    for i, t in [(0.005, 12), (0.01, 1), (0.0, 60), (0.0175, 360)]:
        with np.errstate(invalid="ignore", divide="ignore"):  # npf's rate-0 branch's twin
            expected = -npf.pv(i, t, 0.0, 1.0)  # numpy_financial.pv of 1 due at the end of month t
        assert discount_factor(i, t) == pytest.approx(expected, rel=1e-13)
        # the loop's monthly multiplier compounds to the same factor
        assert monthly_discount(12 * i) ** t == pytest.approx(expected, rel=1e-12)
    assert monthly_rate(0.06) == 0.005


def test_present_value_broadcasts_over_loans():
    amounts = np.array([[100.0, 100.0], [0.0, 50.0]])
    pv = present_value(amounts, np.array([0.12, 0.0]))
    assert pv.tolist() == pytest.approx([100 / 1.01 + 100 / 1.01**2, 50.0])  # (1 + i)^-t by hand


@settings(max_examples=40)
@given(contract_loans().filter(lambda x: x["repayment"] != "revolving"))
def test_pv_of_any_contract_at_its_rate_is_its_balance(loan):
    """Every amortizing type's scheduled payments (interest + principal, the balloon included)
    are worth the balance at the contract rate: the EIR with no fees (IFRS 9 Appendix A)."""
    s = cf.schedule(**loan)
    payments = (s["interest"] + s["scheduled_principal"]).to_numpy()
    pv = float(present_value(payments, loan["interest_rate"]))
    assert pv == pytest.approx(loan["balance"], rel=1e-9, abs=1e-6)
