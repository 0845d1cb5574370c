"""Discount factors at the effective interest rate (EIR).

Implements
----------
monthly_rate       nominal annual rate -> monthly rate (rate / 12)
monthly_discount   v = 1 / (1 + eir/12): one month's discount, which the ECL loop compounds
discount_factor    DF_t = (1 + eir/12)^-t, for an amount at the end of month t

Conventions: the EIR defaults to the contract rate (no fees). IFRS 9 discounts expected
credit losses at the EIR to the reporting date (IFRS 9 B5.5.44); CECL's PD/LGD method is
undiscounted unless the discounted cash-flow option is chosen (ASC 326-20-30-4). Which
framework discounts is a rule of :mod:`allowance.frameworks`.

The functions work on scalars and on numpy arrays, and compile with numba where a compiled
loop calls them.
"""

from __future__ import annotations

from allowance.jitable import jitable



@jitable
def monthly_rate(annual_rate):
    """Monthly rate of a nominal annual rate compounded monthly.

    Examples
    --------
    >>> monthly_rate(0.06)
    0.005
    """
    return annual_rate / 12.0


def monthly_discount(eir_annual):
    r"""One month's discount factor at the EIR: :math:`v = 1 / (1 + EIR/12)`.

    Notes
    -----
    The ECL loop carries :math:`DF_t = v^t` as a running product, one multiplication a month
    (:mod:`allowance.ecl`); :func:`discount_factor` is the same factor in closed form.

    Examples
    --------
    >>> round(monthly_discount(0.06) ** 12, 6)
    0.941905
    """
    return 1.0 / (1.0 + monthly_rate(eir_annual))


@jitable
def discount_factor(eir_monthly, month):
    r"""Discount factor for an amount at the end of ``month`` at the monthly EIR.

    Notes
    -----
    .. math:: DF_t = (1 + i)^{-t}, \qquad i = EIR / 12

    Works on scalars and broadcasts over arrays.

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
