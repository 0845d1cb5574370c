"""The loss of one default: PD x LGD x EAD against the cash shortfall at the EIR."""

from __future__ import annotations

import numba
import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from allowance.shortfall import default_loss


def _cash_flow_reference(balance: float, annual_rate: float, months: int, monthly_pd: float, lgd: float):
    """Amortised cost less the PV of the expected cash flows, built cash flow by cash flow.

    Independent of the package: a level-pay loan (numpy_financial.pmt); each month the loans
    still alive either default (a share ``monthly_pd``, paying nothing that month and
    returning (1 - lgd) x the opening balance at its end) or pay the contractual payment;
    the expected cash flows are discounted at the contract rate with numpy_financial.npv.
    Returns (shortfall, discounted PD x LGD x EAD).
    """
    r = annual_rate / 12.0
    payment = float(npf.pmt(r, months, -balance))
    alive, opening, flows, pd_lgd_ead = 1.0, balance, [], 0.0
    for t in range(1, months + 1):
        defaulted = alive * monthly_pd
        recovery = defaulted * (1.0 - lgd) * opening
        alive -= defaulted
        flows.append(alive * payment + recovery)
        pd_lgd_ead += defaulted * lgd * opening * (1.0 + r) ** -t
        opening = opening * (1.0 + r) - payment
    present = float(npf.npv(r, [0.0] + flows))  # npv discounts its first value by (1 + r)^0
    return balance - present, pd_lgd_ead


def _package_sum(balance, annual_rate, months, monthly_pd, lgd, interest):
    """sum_t S_{t-1} pd L_t DF_t with L_t from allowance.shortfall.default_loss."""
    r = annual_rate / 12.0
    payment = float(npf.pmt(r, months, -balance))
    t = np.arange(months)
    opening = np.asarray(npf.fv(r, t, payment, -balance), float)
    survival = (1.0 - monthly_pd) ** t
    return float((survival * monthly_pd * default_loss(opening, lgd, interest) * (1.0 + r) ** -(t + 1.0)).sum())


def test_dcf_check_value():
    # a 36-month 10,000 loan at 12 % with a 1 % monthly PD and 50 % LGD: the cash shortfall is
    # 788.46 against 773.00 for discounted PD x LGD x EAD (hand computation, checked by the
    # cash-flow reference above built on numpy_financial)
    shortfall, pd_lgd_ead = _cash_flow_reference(10_000.0, 0.12, 36, 0.01, 0.5)
    assert round(shortfall, 2) == 788.46
    assert round(pd_lgd_ead, 2) == 773.00
    assert _package_sum(10_000.0, 0.12, 36, 0.01, 0.5, 0.01) == pytest.approx(shortfall, rel=1e-12)
    assert _package_sum(10_000.0, 0.12, 36, 0.01, 0.5, 0.0) == pytest.approx(pd_lgd_ead, rel=1e-12)


def test_zero_pd_has_no_shortfall():
    # nobody defaults: the expected cash flows are the contractual ones, worth the balance
    shortfall, _ = _cash_flow_reference(10_000.0, 0.12, 36, 0.0, 0.5)
    assert abs(shortfall) < 1e-9
    assert _package_sum(10_000.0, 0.12, 36, 0.0, 0.5, 0.01) == 0.0


@settings(max_examples=40, deadline=None, derandomize=True)
@given(
    balance=st.floats(100.0, 1e7),
    annual_rate=st.floats(0.001, 0.3),  # numpy_financial.fv divides by the rate
    months=st.integers(1, 120),
    monthly_pd=st.floats(0.0, 0.2),
    lgd=st.floats(0.0, 1.0),
)
def test_shortfall_equals_the_cash_flow_reference(balance, annual_rate, months, monthly_pd, lgd):
    shortfall, pd_lgd_ead = _cash_flow_reference(balance, annual_rate, months, monthly_pd, lgd)
    ours = _package_sum(balance, annual_rate, months, monthly_pd, lgd, annual_rate / 12.0)
    assert ours == pytest.approx(shortfall, rel=1e-9, abs=1e-6 * balance)
    # the month's lost interest never makes the shortfall smaller than PD x LGD x EAD
    assert ours >= pd_lgd_ead - 1e-6 * balance


def test_gross_is_at_least_net_and_it_compiles():
    # gross loss = the same measure with LGD = 1 (common practice, no source)
    jit = numba.njit(default_loss)
    for lgd in (0.0, 0.3, 1.0):
        assert jit(1_000.0, lgd, 0.01) == default_loss(1_000.0, lgd, 0.01)
        assert default_loss(1_000.0, 1.0, 0.01) >= default_loss(1_000.0, lgd, 0.01)
