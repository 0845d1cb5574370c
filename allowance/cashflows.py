"""Cash flows: contractual balance paths for every repayment type, and expected prepayment.

The maths is written once, as small scalar functions that numba compiles into the loops
(:mod:`allowance.jitable`; :func:`path_terms` and :func:`balance_on_path` are compiled on their
own by :mod:`allowance.ecl_compiled`). Both the fused ECL loop (:mod:`allowance.ecl`, through :func:`contractual_payments`,
the same payment for every loan at once in numpy) and the schedule view (:func:`schedule`,
plain Python) take a loan's level payment from :func:`contractual_payment`, bit for bit the
same figure; the schedule then steps month by month
(:func:`principal_step`: interest and principal for people to check), the loop follows the same
path in closed form (:func:`path_terms`, :func:`balance_on_path`: no month waits on the last).
The tests hold the two paths equal for every repayment type, and both against
numpy-financial, so what an auditor checks by hand is what the engine computes.

Implements
----------
remaining_months     monthly payment dates after the as-of date up to and including maturity
age_months           whole months from origination to the as-of date (PSA seasoning)
smm_from_cpr         single monthly mortality from an annual constant prepayment rate
psa_cpr              the PSA standard prepayment benchmark at a multiple
discount_power       (1 + r)^-n as numba computes it (repeated squaring), in any of the three
level_payment        the level payment that amortizes a balance to a residual
contractual_payment  a loan's level payment, once per loan, for the compiled loop
contractual_payments the same for every loan at once, in numpy
principal_step       one month's scheduled principal given that payment (the schedule's form)
path_terms           growth and payment of the closed-form balance path
balance_on_path      the scheduled balance after t months in closed form (the loop's form)
path_terms_array     path_terms of many loans at once
balances_by_month    many loans' scheduled balances month after month (the numpy form of the loop's path)
balloon_residual     the amount left at maturity of a balloon loan
months_without_payment  months a delinquent loan pays nothing on its way to its loss event
runoff_months        months a revolving line's measured balance takes to run off at its payment rate
payment_shortfall    the balance a given payment leaves at maturity (a final balloon)
schedule             one loan's month-by-month schedule, contractual and expected

Repayment codes used inside the compiled loop: ``LEVEL, INTEREST_ONLY, BALLOON, REVOLVING, HELOC``.

A HELOC (home-equity line of credit) has a draw period, interest only with the undrawn limit
available (the framework's exposure add-on, :mod:`allowance.frameworks`), then a repayment
period in which the balance amortises with a level payment to maturity: its path is the
interest-only one with ``io_left`` the draw months left (the level payment is
``numpy_financial.pmt`` over the repayment months; ``tests/test_cashflows.py`` checks it).
"""

from __future__ import annotations

import math

from typing import TYPE_CHECKING

import numpy as np

from allowance.jitable import jitable

if TYPE_CHECKING:  # pandas is loaded by the functions on dates: the compiled maths alone need not wait for it
    import pandas as pd

LEVEL, INTEREST_ONLY, BALLOON, REVOLVING, HELOC = 0, 1, 2, 3, 4
REPAYMENT_CODES: dict[str, int] = {
    "level": LEVEL,
    "interest_only": INTEREST_ONLY,
    "balloon": BALLOON,
    "revolving": REVOLVING,
    "heloc": HELOC,
}


def remaining_months(as_of: pd.Timestamp, maturity: pd.Series) -> np.ndarray:
    """Number of monthly payment dates after ``as_of`` up to and including ``maturity``.

    Payment dates fall on the maturity date's day of the month (clipped to the month's last
    day). A matured loan, or a blank maturity, gives 0; the caller decides what that means.

    Examples
    --------
    >>> import pandas as pd
    >>> m = pd.Series(pd.to_datetime(["2027-09-30", "2027-10-15", "2027-03-31", "2026-09-30"]))
    >>> remaining_months(pd.Timestamp("2026-09-30"), m).tolist()
    [12, 13, 6, 0]
    """
    import pandas as pd

    mat = pd.to_datetime(maturity)
    valid = mat.notna().to_numpy()
    years = mat.dt.year.fillna(0).to_numpy(np.int64)
    months = mat.dt.month.fillna(1).to_numpy(np.int64)
    days = mat.dt.day.fillna(1).to_numpy(np.int64)
    whole = (years - as_of.year) * 12 + (months - as_of.month)
    # the payment date that falls in the as-of month, clipped to that month's length
    day_in_as_of_month = np.minimum(days, as_of.days_in_month)
    count = whole + (day_in_as_of_month > as_of.day)
    return np.where(valid, np.maximum(count, 0), 0).astype(np.int64)


def age_months(origination: pd.Series, as_of: pd.Timestamp) -> np.ndarray:
    """Whole months from origination to the as-of date (0 in the month of origination).

    Examples
    --------
    >>> import pandas as pd
    >>> o = pd.Series(pd.to_datetime(["2026-09-01", "2024-09-30", "2024-10-01", "2026-08-31"]))
    >>> age_months(o, pd.Timestamp("2026-09-30")).tolist()
    [0, 24, 23, 1]
    """
    import pandas as pd

    orig = pd.to_datetime(origination)
    whole = (as_of.year - orig.dt.year.to_numpy(np.int64)) * 12 + (
        as_of.month - orig.dt.month.to_numpy(np.int64)
    )
    # the monthly anniversary in the as-of month, clipped to that month's length (31 Aug -> 30 Sep)
    anniversary = np.minimum(orig.dt.day.to_numpy(np.int64), as_of.days_in_month)
    return np.maximum(whole - (anniversary > as_of.day), 0).astype(np.int64)


def smm_from_cpr(cpr):
    r"""Single monthly mortality from an annual constant prepayment rate (a number or an array).

    Notes
    -----
    .. math:: SMM = 1 - (1 - CPR)^{1/12}

    Plain numpy, not compiled: only the book-level prepayment table calls it, once per
    segment over every age, and no compiled loop does (the first call of a compiled function
    loads numba's whole machinery, which the run then pays before it needs it).

    References
    ----------
    .. [1] Fabozzi, F. J. (ed.), *The Handbook of Mortgage-Backed Securities*, chapter on
       prepayment conventions (CPR and SMM).

    Examples
    --------
    >>> round(smm_from_cpr(0.06), 6)
    0.005143
    """
    return 1.0 - (1.0 - cpr) ** (1.0 / 12.0)


def psa_cpr(age, psa):
    r"""Annual CPR of the PSA standard prepayment benchmark at a loan age in months.

    ``age`` is a number or an array of ages (numpy broadcasting, like :func:`smm_from_cpr`).

    Notes
    -----
    100 PSA: CPR rises by 0.2 percentage points a month from 0.2 % in month 1 to 6 % in month
    30, then stays at 6 %. A multiple scales the whole ramp: CPR = psa/100 × 0.06 ×
    min(age, 30)/30, capped at 1.

    References
    ----------
    .. [1] Public Securities Association, *Standard Formulas for the Analysis of
       Mortgage-Backed Securities and Other Related Securities* (the PSA benchmark).

    Examples
    --------
    >>> psa_cpr(np.array([1, 15, 30, 45]), 100.0).round(4).tolist()
    [0.002, 0.03, 0.06, 0.06]
    """
    ramp = np.minimum(np.maximum(age, 0.0), 30.0) / 30.0
    return np.minimum(1.0, psa / 100.0 * 0.06 * ramp)


#: Past this exponent numba's float ** int calls pow() instead of squaring (numba's own cutoff).
_SQUARING_CUTOFF = 0x10000


@jitable
def discount_power(rate: float, months: int) -> float:
    r"""(1 + r)^{-n} for n >= 1 months, as numba compiles ``(1.0 + rate) ** (-months)``.

    numba raises a float to an integer power by repeated squaring (then 1 / the product),
    where Python's ``**`` calls the C library's pow(): the two can differ in the last bit.
    Spelt out here, plain Python, numpy (:func:`contractual_payments`) and compiled code all
    give the compiled figure, bit for bit, and none of them needs compiling.

    Examples
    --------
    >>> discount_power(0.01, 2) == 1.0 / (1.01 * 1.01)
    True
    """
    base = 1.0 + rate
    if months > _SQUARING_CUTOFF:
        return math.pow(base, float(-months))
    power, n = 1.0, months
    while n != 0:
        if n & 1:
            power *= base
        n >>= 1
        base *= base
    return 1.0 / power


@jitable
def level_payment(balance: float, rate: float, months: int, residual: float) -> float:
    r"""Level monthly payment that takes ``balance`` to ``residual`` in ``months`` payments.

    Notes
    -----
    With monthly rate r, n payments and v = (1 + r)^{-1},

    .. math:: P = \frac{(B - R v^n)\, r}{1 - v^n}

    and P = (B - R)/n when r = 0; with n <= 1 the whole difference B - R is due now.

    References
    ----------
    .. [1] Kellison, S. G., *The Theory of Interest*, chapter on amortization schedules
       (the level-payment annuity); ``numpy_financial.pmt`` computes the same payment.

    Examples
    --------
    >>> round(level_payment(100_000.0, 0.005, 360, 0.0), 2)
    599.55
    """
    if months <= 1:
        return balance * (1.0 + rate) - residual if months == 1 else balance - residual
    if rate == 0.0:
        return (balance - residual) / months
    v_n = discount_power(rate, months)
    return (balance - residual * v_n) * rate / (1.0 - v_n)


@jitable
def contractual_payment(
    code: int, balance: float, rate: float, months_left: int, io_left: int, residual: float, payment: float
) -> float:
    """The level payment of a loan's amortizing phase, from its state at the as-of date.

    Notes
    -----
    balloon: the :func:`level_payment` to the residual over the months after ``io_left``;
    level, interest-only and HELOC: the tape's ``payment`` when given, else the level payment to
    zero over the months after ``io_left`` (the interest-only period, a HELOC's draw period, or
    the months a delinquent loan pays nothing: the balance does not move during them);
    revolving: 0 (its principal is a share of the balance).

    Examples
    --------
    >>> round(contractual_payment(INTEREST_ONLY, 100_000.0, 0.005, 384, 24, 0.0, float("nan")), 2)
    599.55
    """
    if code == REVOLVING:
        return 0.0
    after = max(months_left - max(io_left, 0), 1)  # the months left to amortize in
    if code == BALLOON:
        return level_payment(balance, rate, after, residual)
    if payment == payment:
        return payment
    return level_payment(balance, rate, after, 0.0)


def contractual_payments(code, balance, rate, months_left, io_left, residual, payment) -> np.ndarray:
    """:func:`contractual_payment` of every loan at once, in numpy: the same operations in the
    same order on each loan (bit for bit the same payments), with no compiling.

    The level payment is needed once per loan (annuity invariance), before the compiled loop;
    computed here, a first run need not compile a loop for it (about 1.6 s).

    Examples
    --------
    >>> contractual_payments(np.array([LEVEL, REVOLVING]), np.array([100_000.0, 500.0]), np.array([0.005, 0.01]),
    ...                      np.array([360, 12]), np.array([0, 0]), np.zeros(2), np.full(2, np.nan)).round(2).tolist()
    [599.55, 0.0]
    """
    code = np.asarray(code, np.int64)
    balance, rate = np.asarray(balance, np.float64), np.asarray(rate, np.float64)
    months_left, io_left = np.asarray(months_left, np.int64), np.asarray(io_left, np.int64)
    residual, payment = np.asarray(residual, np.float64), np.asarray(payment, np.float64)
    months = np.maximum(months_left - np.maximum(io_left, 0), 1)  # the months left to amortize in
    balloon = code == BALLOON
    left = np.where(balloon, residual, 0.0)  # level, interest-only, HELOC: to zero
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        v_n = _discount_powers(rate, months)
        level = np.where(
            months == 1, balance * (1.0 + rate) - left,
            np.where(rate == 0.0, (balance - left) / months, (balance - left * v_n) * rate / (1.0 - v_n)),
        )
    given = ~balloon & (payment == payment)  # a tape payment (not NaN) stands, except on a balloon
    return np.where(code == REVOLVING, 0.0, np.where(given, payment, level))


def _discount_powers(rate: np.ndarray, months: np.ndarray) -> np.ndarray:
    """:func:`discount_power` of every element (months >= 1), step for step."""
    base = 1.0 + rate
    power = np.ones_like(base)
    far = months > _SQUARING_CUTOFF
    n = np.where(far, 0, months)
    for _ in range(int(n.max(initial=0)).bit_length()):  # a chunk's loans in a few passes
        power *= np.where((n & 1) == 1, base, 1.0)  # times 1.0: exactly the power it was
        n >>= 1
        base *= base
    np.divide(1.0, power, out=power)
    if far.any():
        power[far] = np.power(1.0 + rate[far], -months[far].astype(np.float64))
    return power


@jitable
def principal_step(
    code: int, balance: float, rate: float, months_left: int, io_left: int, level: float, paydown: float
) -> float:
    """One month's scheduled principal given the loan's ``level`` payment.

    Parameters
    ----------
    code : repayment code (LEVEL, INTEREST_ONLY, BALLOON, REVOLVING)
    rate : monthly contract rate (interest_rate / 12)
    months_left : payments left including this one (1 = maturity month)
    io_left : interest-only months left including this one
    level : :func:`contractual_payment` of the loan at the as-of date
    paydown : revolving lines: monthly share of the drawn balance repaid

    Notes
    -----
    principal = min(B, max(P - B r, 0)); the whole balance at maturity; 0 during the
    interest-only months; ``paydown`` x B for revolving lines. Recomputing the level payment
    every month from the current balance would give the same payment (annuity invariance),
    so the payment is computed once per loan and no month needs a power.

    level: level payment to zero by maturity, or the tape's payment (whatever it leaves is
    due at maturity). interest_only: no principal during the interest-only months, then level
    payment over the rest (pure interest-only pays everything at maturity). balloon: level
    payment to the residual, which is due at maturity. revolving: ``paydown`` x balance.
    heloc: no principal in the draw period (``io_left``), then the level payment to zero by
    maturity over the repayment period.

    Examples
    --------
    >>> p = contractual_payment(LEVEL, 100_000.0, 0.005, 360, 0, 0.0, float("nan"))
    >>> round(principal_step(LEVEL, 100_000.0, 0.005, 360, 0, p, 0.0), 2)
    99.55
    """
    if code == REVOLVING:
        return balance * paydown
    if months_left <= 1:
        return balance
    if io_left > 0:
        return 0.0
    return min(balance, max(level - balance * rate, 0.0))


def path_terms(code: int, balance: float, rate: float, level: float, paydown: float) -> tuple[float, float]:
    """Growth factor g and payment P of a loan's closed-form balance path.

    See :func:`balance_on_path`. Amortizing loans: g = 1 + r and P = max(level, B r) (a tape
    payment below the interest leaves the balance where it is, as :func:`principal_step`
    does); revolving lines: g = 1 - paydown and P = 0.

    Examples
    --------
    >>> path_terms(REVOLVING, 1_000.0, 0.01, 0.0, 0.05)
    (0.95, 0.0)
    """
    if code == REVOLVING:
        return 1.0 - paydown, 0.0
    return 1.0 + rate, max(level, balance * rate)


def balance_on_path(balance: float, growth_power: float, annuity_factor: float, payment: float) -> float:
    r"""Scheduled balance after t amortizing months, in closed form.

    Notes
    -----
    With g and P from :func:`path_terms`, :math:`x_t = g^t` and
    :math:`s_t = \sum_{j<t} g^j = (g^t - 1)/(g - 1)` (``numpy_financial.fv`` of an annuity of 1),

    .. math:: B_t = \max(B\, x_t - P\, s_t,\ 0)

    which is the month-by-month recursion :math:`B_{t+1} = B_t - \text{principal}_t` of
    :func:`principal_step` unrolled (the floor is its ``min(B, ...)``). The compiled loop
    carries :math:`x_{t+1} = g x_t` and :math:`s_{t+1} = g s_t + 1`: two short recurrences
    that do not wait on the balance, so the months pipeline. Interest-only months do not
    advance t; at r = 0, :math:`s_t = t` (straight-line principal).

    Examples
    --------
    12 monthly payments of 100 retire 1,200 at a zero rate; half-way, 600 is left:

    >>> balance_on_path(1_200.0, 1.0, 6.0, 100.0)
    600.0
    """
    left = balance * growth_power - payment * annuity_factor
    return left if left > 0.0 else 0.0  # a compare, not max(): one instruction in the loop


def path_terms_array(code, balance, rate, level, paydown):
    """:func:`path_terms` of many loans at once (numpy arrays): growth factors g and payments P.

    Examples
    --------
    >>> g, p = path_terms_array(np.array([LEVEL, REVOLVING]), np.array([100_000.0, 1_000.0]),
    ...                         np.array([0.005, 0.01]), np.array([599.55, 0.0]), np.array([0.0, 0.05]))
    >>> g.tolist(), p.tolist()
    ([1.005, 0.95], [599.55, 0.0])
    """
    revolving = np.asarray(code) == REVOLVING
    return (np.where(revolving, 1.0 - paydown, 1.0 + rate),
            np.where(revolving, 0.0, np.maximum(level, balance * rate)))


def balances_by_month(balance, growth, payment, io_left, months):
    r"""Many loans' scheduled balances, month after month, each for as long as it runs.

    The loans come longest first (``months`` not increasing), so the loans still running in
    month t (from 0) are the first m: yields ``(t, m, B_t)`` with :math:`B_t` the opening
    balance of each of them, ``balance`` while interest-only months last (``io_left``), then
    :func:`balance_on_path`'s :math:`\max(B x - P s, 0)`, its :math:`x = g^j` and
    :math:`s = \sum_{i<j} g^i` carried month to month as the compiled loop carries them
    (g and P from :func:`path_terms_array`). The numpy form of the loop's balance path, for
    the ECL and loss-rate sums of a small book (:mod:`allowance.ecl`, :mod:`allowance.loss_rates`).

    Examples
    --------
    Twelve payments of 100 retire 1,200 at a zero rate; a loan with 2 interest-only months
    and 3 to run waits, then pays (by hand, common practice, no source):

    >>> for t, m, b in balances_by_month(np.array([1_200.0, 300.0]), np.ones(2), np.array([100.0, 100.0]),
    ...                                  np.array([0, 2]), np.array([4, 3])):
    ...     print(t, m, b.tolist())
    0 2 [1200.0, 300.0]
    1 2 [1100.0, 300.0]
    2 2 [1000.0, 300.0]
    3 1 [900.0]
    """
    n = len(balance)
    if not n:
        return
    x, annuity = np.ones(n), np.zeros(n)
    running = n - np.searchsorted(months[::-1], np.arange(int(months[0])), side="right")
    io_any = int(io_left.max())
    for t, m in enumerate(running.tolist()):
        b, g, ann, xm = balance[:m], growth[:m], annuity[:m], x[:m]
        path = b * xm - payment[:m] * ann
        np.maximum(path, 0.0, out=path)
        if t < io_any:  # some loans still pay interest only: their balance and path wait
            paying = t >= io_left[:m]
            path = np.where(paying, path, b)
            x[:m] = np.where(paying, xm * g, xm)
            annuity[:m] = np.where(paying, ann * g + 1.0, ann)
        else:
            xm *= g
            ann *= g
            ann += 1.0
        yield t, m, path


def months_without_payment(days_past_due, loss_event_dpd):
    r"""Months a delinquent loan is projected to pay nothing: until it would reach its loss event.

    Parameters
    ----------
    days_past_due : array_like of int
        Days past due at the as-of date.
    loss_event_dpd : array_like of int
        Days past due at which the loan reaches its loss event: the charge-off threshold of a
        roll-rate segment, else the default threshold.

    Notes
    -----
    .. math:: h = \lceil (D - d) / 30 \rceil \quad \text{for } 0 < d < D, \qquad h = 0 \text{ otherwise}

    A loan that is behind and goes on to its loss event makes no payment on the way there, so
    its EAD path stays at the balance for those months instead of amortising (the loop holds
    the balance as in interest-only months); after them it pays the level payment that retires
    the balance by maturity. A current loan pays as contracted; a loan at or past D is measured
    at its loss event now (common practice, no source).

    Examples
    --------
    >>> months_without_payment(np.array([0, 15, 30, 95, 179, 180]), np.array([90, 90, 90, 180, 180, 180])).tolist()
    [0, 3, 2, 3, 1, 0]
    """
    dpd = np.asarray(days_past_due, np.int64)
    event = np.asarray(loss_event_dpd, np.int64)
    behind = (dpd > 0) & (dpd < event)
    return np.where(behind, -((dpd - event) // 30), 0).astype(np.int64)  # ceil((D - d) / 30)


#: The run-off of a measured balance ends when what is left rounds to no cents.
HALF_CENT = 0.005


def runoff_months(balance, paydown, floor, cap):
    r"""Months a revolving line's measured balance takes to run off, paying a share a month.

    Parameters
    ----------
    balance : array_like
        The drawn balance measured today (>= 0).
    paydown : array_like
        The share of the measured balance repaid each month: the payment rate times the share
        of each payment the allocation policy gives the measured balance.
    floor : float
        Stop once the balance is below this share of today's (0: run to the end).
    cap : int
        The longest horizon (months).

    Notes
    -----
    With :math:`B_t = B (1 - p)^t` the run-off ends in the first month n in which the balance
    left is below :math:`x B`, :math:`x = \max(floor,\ 0.005 / B)` (below half a cent it rounds
    to nothing: the end):

    .. math:: n = \left\lceil \frac{\ln x}{\ln (1 - p)} \right\rceil

    at least 1 and at most ``cap``; ``cap`` when p = 0 (a balance that is never repaid), 1
    when p = 1. The months of a delinquent line that pays nothing come on top (the caller's).

    Examples
    --------
    1,000 paying 6 % a month is below half a cent after 198 months; a 1 % floor stops at 75:

    >>> runoff_months(np.array([1_000.0, 1_000.0, 0.0]), np.array([0.06, 0.0, 0.06]), 0.0, 1200).tolist()
    [198, 1200, 1]
    >>> runoff_months(np.array([1_000.0]), np.array([0.06]), 0.01, 1200).tolist()
    [75]
    """
    balance = np.asarray(balance, float)
    paydown = np.clip(np.asarray(paydown, float), 0.0, 1.0)
    share = np.maximum(floor, HALF_CENT / np.maximum(balance, HALF_CENT))  # in (0, 1]
    kept = np.log1p(-np.minimum(paydown, 1.0 - 1e-15))  # ln(1 - p) < 0 where p > 0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        months = np.where(paydown > 0.0, np.ceil(np.log(share) / np.where(paydown > 0.0, kept, -1.0)), cap)
    return np.clip(np.nan_to_num(months, nan=1.0), 1, cap).astype(np.int64)


def balloon_residual(balance, rate, months_left, amortization_left):
    r"""Balance left at maturity when a loan amortizes over a longer term than it runs.

    Notes
    -----
    Amortizing B over L months at monthly rate r, the balance after n < L payments is

    .. math:: R = B \frac{(1+r)^L - (1+r)^n}{(1+r)^L - 1}

    and R = B (L - n)/L when r = 0. Works on scalars and arrays.

    Examples
    --------
    >>> round(float(balloon_residual(1_000_000.0, 0.06 / 12, 120, 360)), 2)
    836857.25
    """
    balance, rate = np.asarray(balance, float), np.asarray(rate, float)
    n, big_l = np.asarray(months_left, float), np.asarray(amortization_left, float)
    safe = np.where(rate == 0.0, 1.0, rate)
    grown = np.where(
        rate == 0.0,
        (big_l - n) / np.maximum(big_l, 1.0),
        ((1 + safe) ** big_l - (1 + safe) ** n) / np.where(rate == 0.0, 1.0, (1 + safe) ** big_l - 1),
    )
    return np.where(big_l > n, balance * grown, 0.0)


def payment_shortfall(balance, rate, months_left, payment):
    r"""Balance a given level payment leaves at maturity (0 when it retires the loan).

    Notes
    -----
    .. math:: B_n = B (1+r)^n - P \frac{(1+r)^n - 1}{r}

    (B - nP when r = 0), floored at 0. A positive figure is a final balloon: the tape's payment
    cannot retire the balance by maturity.

    Examples
    --------
    >>> float(payment_shortfall(1200.0, 0.0, 12, 100.0)), float(payment_shortfall(1200.0, 0.0, 12, 90.0))
    (0.0, 120.0)
    """
    balance, rate = np.asarray(balance, float), np.asarray(rate, float)
    n, payment = np.asarray(months_left, float), np.asarray(payment, float)
    growth = (1.0 + rate) ** n
    annuity = np.where(rate == 0.0, n, (growth - 1.0) / np.where(rate == 0.0, 1.0, rate))
    left = np.where(rate == 0.0, balance - n * payment, balance * growth - payment * annuity)
    return np.maximum(left, 0.0)


def _schedule_arrays(code, balance, rate, months, io_left, residual, payment, paydown, smm, pd):
    """One loan's schedule rows, month by month (the columns of :func:`schedule`).

    Plain Python on purpose: a schedule is one loan (a few are sampled per run), and compiling
    this loop cost a first run about 0.7 s, for microseconds of work. The same operations in
    the same order as the compiled loop it replaces, on the same IEEE doubles: the same bits.
    """
    rows = []
    bal = balance
    alive = 1.0  # survival: neither prepaid nor defaulted
    level = contractual_payment(code, balance, rate, months, io_left, residual, payment)
    for t, (default_share, smm_t) in enumerate(zip(pd.tolist(), smm.tolist())):
        principal = principal_step(code, bal, rate, months - t, io_left - t, level, paydown)
        interest = bal * rate
        close = bal - principal
        prepay_share = (1.0 - default_share) * smm_t
        opening_alive = alive
        alive *= (1.0 - default_share) * (1.0 - smm_t)
        rows.append((
            bal, interest, principal, close,
            opening_alive * prepay_share * close,  # expected prepayment of the closing balance
            opening_alive * default_share * bal,  # expected defaulted balance (EAD_t × S_{t-1} × pd_t)
            alive, alive * close,
        ))
        bal = close
    return np.array(rows, dtype=np.float64).reshape(months, 8)


def schedule(
    repayment: str,
    balance: float,
    interest_rate: float,
    months: int,
    *,
    interest_only_months_left: int = 0,
    residual: float = 0.0,
    payment: float = float("nan"),
    paydown: float = 0.0,
    smm=0.0,
    marginal_pd=0.0,
) -> pd.DataFrame:
    """One loan's projected schedule, contractual and expected, as a frame for people.

    Columns: month, opening_balance (EAD at the start of the month), interest,
    scheduled_principal, closing_balance (contractual), expected_prepayment,
    expected_default (balance), survival (neither prepaid nor defaulted by month end) and
    expected_balance (survival-weighted closing balance). ``smm`` and ``marginal_pd`` are a
    number or one value per month.

    Examples
    --------
    A 3-month, 1,200 loan at 12 % a year (1 % a month); the balance reaches 0 at maturity:

    >>> s = schedule("level", 1200.0, 0.12, 3)
    >>> s[["month", "opening_balance", "interest", "scheduled_principal", "closing_balance"]].round(2)
       month  opening_balance  interest  scheduled_principal  closing_balance
    0      1          1200.00     12.00               396.03           803.97
    1      2           803.97      8.04               399.99           403.99
    2      3           403.99      4.04               403.99             0.00
    """
    import pandas as pd

    code = REPAYMENT_CODES[repayment]
    smm_path = np.broadcast_to(np.asarray(smm, float), (months,)).copy()
    pd_path = np.broadcast_to(np.asarray(marginal_pd, float), (months,)).copy()
    arr = _schedule_arrays(
        code, float(balance), interest_rate / 12.0, int(months), int(interest_only_months_left),
        float(residual), float(payment), float(paydown), smm_path, pd_path,
    )
    frame = pd.DataFrame(
        arr,
        columns=[
            "opening_balance", "interest", "scheduled_principal", "closing_balance",
            "expected_prepayment", "expected_default", "survival", "expected_balance",
        ],
    )
    frame.insert(0, "month", np.arange(1, months + 1))
    return frame
