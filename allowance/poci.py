r"""Purchased or originated credit-impaired assets (IFRS 9 POCI, CECL PCD): the allowance that
is the change since purchase, and the purchase-date measurement.

Implements
----------
period_start          the first day after the previous reporting date
purchased_in_period   loans bought in the reporting period (measured at the purchase date)
purchase_balance      the contractual balance at the purchase date, rolled back from today's
purchase_benchmark    the purchase-date lifetime ECL carried to the reporting date
poci_allowance        IFRS 9: the cumulative change in lifetime ECL since purchase

How the IFRS 9 allowance is measured
------------------------------------
IFRS 9 5.5.13 books no allowance at purchase: the lifetime ECL then expected, :math:`E_0`, is
in the purchase price and in the credit-adjusted effective interest rate (B5.5.45). The
allowance afterwards is only the cumulative change in lifetime ECL since purchase (5.5.14),
so it is zero while credit risk and the outlook are as they were at purchase, however far
the loan has paid down. Comparing today's lifetime ECL with :math:`E_0` as it was at
purchase would book a gain for every payment received (the expected losses of the balance
already repaid are gone from today's figure, but not from :math:`E_0`). The purchase ECL is
therefore carried to the reporting date first:

.. math::

    B = E_0 \cdot \frac{R}{Q}, \qquad \text{allowance}_s = L_s - B

* :math:`L_s` -- lifetime ECL today at the loan's current PD, scenario s (discounted at the
  credit-adjusted EIR);
* :math:`R` -- lifetime ECL today at the loan's PD at purchase (probability-weighted): the
  losses the purchase-date view still expects, on today's balance and remaining months;
* :math:`Q` -- lifetime ECL at the purchase date at the PD at purchase, on the contractual
  balance then (:func:`purchase_balance`) and the term then, with this run's assumptions.

:math:`R / Q` is how much of the purchase-date expected loss is still to come; with risk
unchanged (current PD = PD at purchase, the same outlook) :math:`L = R` and the allowance is
:math:`R (1 - E_0 / Q)`: zero when :math:`E_0` is the model's own purchase-date figure, and
never a gain from paydown alone. A loan bought in the reporting period whose
:math:`E_0` is blank is measured at the purchase date: :math:`E_0 = Q`, so its allowance
is :math:`L - R`, zero on the purchase date.

CECL (ASC 326-20-30-13) instead grosses up: the allowance of a PCD asset is its full lifetime
ECL, and the allowance at purchase is added to the purchase price (amortised cost), not
charged to the provision; the movement shows it as its own line.

References
----------
.. [1] IFRS 9 Financial Instruments, paragraphs 5.5.13, 5.5.14, B5.4.7 and B5.5.45.
.. [2] FASB ASC 326-20-30-13 and 326-20-30-14 (purchased financial assets with credit
   deterioration: initial allowance added to the purchase price).
"""

from __future__ import annotations

from datetime import date

import numpy as np
import pandas as pd

__all__ = ["period_start", "poci_allowance", "purchase_balance", "purchase_benchmark", "purchased_in_period"]


def period_start(as_of: date, period_months: int) -> date:
    """The previous reporting date: ``period_months`` before ``as_of`` (month ends stay month ends).

    The reporting period is the days after it, up to and including ``as_of``.

    Examples
    --------
    >>> period_start(date(2026, 9, 30), 3), period_start(date(2026, 6, 30), 3)
    (datetime.date(2026, 6, 30), datetime.date(2026, 3, 31))
    >>> period_start(date(2026, 8, 15), 12)
    datetime.date(2025, 8, 15)
    """
    stamp = pd.Timestamp(as_of)
    back = stamp - pd.DateOffset(months=int(period_months))
    if stamp.is_month_end:
        back = back + pd.offsets.MonthEnd(0)
    return back.date()


def purchased_in_period(purchase_date, as_of: date, period_months: int) -> np.ndarray:
    """True where the purchase (origination) date falls in the reporting period ending at ``as_of``.

    Examples
    --------
    >>> dates = pd.to_datetime(["2026-06-30", "2026-07-01", "2026-09-30", "2025-01-10"])
    >>> purchased_in_period(dates, date(2026, 9, 30), 3).tolist()
    [False, True, True, False]
    """
    days = pd.DatetimeIndex(purchase_date).to_numpy(dtype="datetime64[D]")
    start = np.datetime64(period_start(as_of, period_months), "D")
    end = np.datetime64(as_of, "D")
    return ~np.isnat(days) & (days > start) & (days <= end)


def purchase_balance(balance, monthly_rate, payment, months_since_purchase) -> np.ndarray:
    r"""The contractual balance at the purchase date that runs down to today's balance.

    Parameters
    ----------
    balance : array_like
        Balance at the reporting date.
    monthly_rate : array_like
        Contract rate per month.
    payment : array_like
        The payment of the months since purchase (for an interest-only month: the interest,
        which leaves the balance unchanged).
    months_since_purchase : array_like of int
        Payments made since the purchase date.

    Notes
    -----
    Rolling the balance back k payments of P at the monthly rate r:

    .. math:: B_0 = B_k v^k + P \, a_{\overline{k}|}, \qquad v = (1 + r)^{-1}, \quad
              a_{\overline{k}|} = (1 - v^k) / r \;(= k \text{ when } r = 0)

    the inverse of :math:`B_k = B_0 (1 + r)^k - P s_{\overline{k}|}`.

    Examples
    --------
    A level-pay loan of 100,000 at 6 % over 360 months pays 599.5505 (``npf.pmt``); after 24
    payments it owes 97,468.2355 (``npf.fv(0.005, 24, -599.5505, 100000)``, numpy-financial); rolled back
    it is 100,000 again.

    >>> round(float(purchase_balance(97468.235504, 0.005, 599.550525, 24)), 2)
    100000.0
    >>> float(purchase_balance(1200.0, 0.0, 100.0, 3))
    1500.0
    """
    b = np.asarray(balance, dtype=float)
    r = np.asarray(monthly_rate, dtype=float)
    p = np.asarray(payment, dtype=float)
    k = np.asarray(months_since_purchase, dtype=float)
    v_k = (1.0 + r) ** -k
    with np.errstate(divide="ignore", invalid="ignore"):
        annuity = np.where(r > 0.0, (1.0 - v_k) / np.where(r > 0.0, r, 1.0), k)
    return b * v_k + p * annuity


def purchase_benchmark(purchase_ecl, ecl_now_at_purchase_pd, ecl_at_purchase_date) -> np.ndarray:
    r"""The purchase-date lifetime ECL carried to the reporting date: :math:`B = E_0 R / Q`.

    ``purchase_ecl`` (:math:`E_0`), ``ecl_now_at_purchase_pd`` (:math:`R`) and
    ``ecl_at_purchase_date`` (:math:`Q`) as in the module docstring. Where :math:`Q = 0`
    nothing was expected to be lost at purchase on the model's terms and :math:`B = 0`.

    Examples
    --------
    Purchase ECL 1,000 at purchase; the model gave 1,250 then and gives 500 now for the
    purchase-date risk (the loan has paid down): 1,000 x 500 / 1,250 = 400 is still expected.

    >>> purchase_benchmark([1000.0, 10.0], [500.0, 0.0], [1250.0, 0.0]).tolist()
    [400.0, 0.0]
    """
    e0 = np.asarray(purchase_ecl, dtype=float)
    r = np.asarray(ecl_now_at_purchase_pd, dtype=float)
    q = np.asarray(ecl_at_purchase_date, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(q > 0.0, e0 * r / np.where(q > 0.0, q, 1.0), 0.0)


def poci_allowance(ecl_now, purchase_ecl, ecl_now_at_purchase_pd, ecl_at_purchase_date) -> np.ndarray:
    r"""IFRS 9 allowance of POCI loans per scenario: :math:`L_s - E_0 R / Q`.

    Parameters
    ----------
    ecl_now : array_like, shape (n, S)
        Lifetime ECL today at the current PD, per scenario (:math:`L_s`).
    purchase_ecl : array_like, shape (n,)
        Lifetime ECL at purchase (:math:`E_0`); NaN where the loan was bought in the period
        and the tape left it blank: it is then measured at the purchase date (:math:`Q`).
    ecl_now_at_purchase_pd, ecl_at_purchase_date : array_like, shape (n,)
        :math:`R` and :math:`Q` (probability-weighted).

    Returns
    -------
    ndarray, shape (n, S)
        The cumulative change in lifetime ECL since purchase, negative where risk improved
        (IFRS 9 5.5.14 books the gain).

    Examples
    --------
    Bought on the reporting date, purchase ECL blank: measured now, allowance 0.
    A year later, risk unchanged and paid down: today's ECL equals the purchase-date view
    carried forward and the allowance is the change in lifetime ECL, 0, not a gain.
    Risk worse: the allowance is the extra lifetime ECL.

    >>> poci_allowance([[175.0], [120.0], [180.0]], [np.nan, 175.0, 175.0], [175.0, 120.0, 120.0],
    ...                [175.0, 175.0, 175.0]).round(2).tolist()
    [[0.0], [0.0], [60.0]]
    """
    now = np.asarray(ecl_now, dtype=float)
    q = np.asarray(ecl_at_purchase_date, dtype=float)
    e0 = np.asarray(purchase_ecl, dtype=float)
    e0 = np.where(np.isnan(e0), q, e0)
    return now - purchase_benchmark(e0, ecl_now_at_purchase_pd, q)[:, None]
