"""Discount factors at the effective interest rate (EIR).

Implements
----------
monthly_rate       nominal annual rate -> monthly rate (rate / 12)
discount_factor    DF_t = (1 + eir/12)^-t, for a loss in month t (discounted from its end)
present_value      PV of a stream of monthly amounts at the EIR

Conventions: the EIR defaults to the contract rate (no fees). IFRS 9 discounts expected
credit losses at the EIR to the reporting date (IFRS 9 B5.5.44); CECL's PD/LGD method is
undiscounted unless the discounted cash-flow option is chosen (ASC 326-20-30-4).
"""

from __future__ import annotations

import numba
import numpy as np


def monthly_rate(annual_rate):
    """Monthly rate of a nominal annual rate compounded monthly.

    Examples
    --------
    >>> monthly_rate(0.06)
    0.005
    """
    return annual_rate / 12.0


@numba.njit(cache=True)
def discount_factor(eir_monthly: float, month: float) -> float:
    r"""Discount factor for an amount at the end of ``month`` at the monthly EIR.

    Notes
    -----
    .. math:: DF_t = (1 + i)^{-t}, \qquad i = EIR / 12

    References
    ----------
    .. [1] IFRS 9 *Financial Instruments*, B5.5.44 (discounting expected credit losses at
       the effective interest rate) and Appendix A (effective interest method).

    Examples
    --------
    >>> round(discount_factor(0.005, 12), 6)
    0.941905
    """
    return (1.0 + eir_monthly) ** (-month)


def present_value(amounts, eir_annual):
    """PV at the EIR of monthly amounts paid at the end of months 1..n (last axis).

    Examples
    --------
    A level-pay loan's payments at its own contract rate are worth its balance:

    >>> import numpy_financial as npf
    >>> pay = -npf.pmt(0.06 / 12, 36, 10_000.0)
    >>> round(float(present_value(np.full(36, pay), 0.06)), 6)
    10000.0
    """
    amounts = np.asarray(amounts, float)
    months = np.arange(1, amounts.shape[-1] + 1)
    factors = (1.0 + monthly_rate(np.asarray(eir_annual, float))[..., None]) ** (-months)
    return (amounts * factors).sum(axis=-1)
