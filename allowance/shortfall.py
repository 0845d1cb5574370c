r"""The loss of one default: PD × LGD × EAD, or the cash shortfall at the EIR.

The expected credit loss sums, over the months of a loan's horizon, the share of loans that
default in the month times the loss of such a default, discounted from the end of the month:

.. math:: ECL = \sum_t S_{t-1}\, pd_t\; L_t\; DF_t .

This module defines :math:`L_t`, the loss, at the end of month t, of a default in month t
(measured on :math:`EAD_t`, the balance at the start of the month). Two measures are offered:

* **PD × LGD × EAD**: :math:`L_t = LGD_t \cdot EAD_t`, the common practice.
* **cash shortfall**: the amortised cost less the present value at the EIR of the cash flows
  still expected (ASC 326-20-30-4 for CECL's discounted cash-flow method; IFRS 9 Appendix A,
  *credit loss*). A defaulter pays nothing in the month it defaults, so the shortfall also
  carries that month's interest: :math:`L_t = (LGD_t + i)\, EAD_t` with :math:`i = EIR/12`.

The gross credit loss (before recoveries) is the same measure with LGD = 1.

Implements
----------
default_loss   the loss at the end of the default month of a default in that month
"""

from __future__ import annotations

from allowance.jitable import jitable


@jitable
def default_loss(ead, lgd, interest):
    r"""Loss, at the end of month t, of a default in month t.

    Parameters
    ----------
    ead : float or ndarray
        :math:`EAD_t`, the exposure at the start of the month.
    lgd : float or ndarray
        :math:`LGD_t`, the present value at default of what is not recovered, per unit of EAD
        (1 for the gross loss).
    interest : float or ndarray
        The month's interest rate at the EIR, :math:`i = EIR / 12`, under the cash-shortfall
        measure; 0 under PD × LGD × EAD.

    Notes
    -----
    At the start of month t the contractual cash flows still due are worth the amortised cost
    :math:`EAD_t` at the EIR. A loan that defaults in month t pays nothing that month and
    returns :math:`(1 - LGD_t)\, EAD_t` (the recovery's value at the end of the month, the
    date :math:`LGD_t` is measured at). Its cash shortfall at the start of the month is
    :math:`EAD_t - (1 - LGD_t) EAD_t (1 + i)^{-1}`, which at the end of the month is

    .. math:: L_t = EAD_t (1 + i) - (1 - LGD_t)\, EAD_t = (LGD_t + i)\, EAD_t .

    A surviving loan pays as contracted and a prepaying one pays its balance, which at the
    EIR are worth their amortised cost: neither adds a shortfall, so the loan's shortfall is
    :math:`\sum_t S_{t-1}\, pd_t\, L_t\, DF_t`. With :math:`i = 0` this is PD × LGD × EAD.
    Exact when the EIR equals the contract rate (no fees), so that the balance is the present
    value of the contractual cash flows.

    References
    ----------
    .. [1] FASB ASC 326-20-30-4 (the allowance under a discounted cash-flow method: the
       amortised cost basis less the present value of the expected cash flows at the
       effective interest rate).
    .. [2] IFRS 9 *Financial Instruments*, Appendix A (*credit loss*: the difference between
       the contractual cash flows and the cash flows expected, discounted at the original
       effective interest rate) and B5.5.44.

    Examples
    --------
    A default on 10,000 with a 50 % LGD loses 5,000 under PD × LGD × EAD; as a cash shortfall
    at 12 % a year it also loses the month's 1 % interest:

    >>> default_loss(10_000.0, 0.5, 0.0), default_loss(10_000.0, 0.5, 0.01)
    (5000.0, 5100.0)
    """
    return ead * (lgd + interest)
