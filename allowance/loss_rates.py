r"""Loss-rate methods: the allowance from historical loss rates instead of PD × LGD × EAD.

Three methods, each a loss per month that the scenarios scale and the framework sums:

.. math::

    \text{pool (lifetime loss rate } L):\quad & \ell_t = L \cdot EAD_0 \cdot E_t / \textstyle\sum_{k \le H} E_k \\
    \text{remaining life, WARM (annual rate } r):\quad & \ell_t = \tfrac{r}{12}\, E_t \\
    \text{vintage (cumulative curve } C \text{ by age)}:\quad & \ell_t = O \,\bigl(C(a + t) - C(a + t - 1)\bigr)

with :math:`E_t` the expected balance at the start of month t: the contractual schedule's
opening balance :math:`B_{t-1}` times the probability of not having prepaid by then,
:math:`\prod_{k<t}(1 - smm_k)` (losses are not taken off the balance: a loss-rate history
measures losses against the balance outstanding). :math:`O` is the loan's original balance and
:math:`a` its age in months at the as-of date. Then, for scenario s and framework f,

.. math::

    ECL_{s} = \sum_{t=1}^{H} \ell_t \, m_{s,t} \, DF_t, \qquad ECL^{12}_{s} = \sum_{t \le 12} \ell_t \, m_{s,t} \, DF_t

where :math:`m_{s,t}` is the scenario's loss-rate multiplier in month t: how far the scenario's
path moves the segment's reference monthly rate (a PD multiplier path scales it by the
multiplier; a z or macro path moves it as it would a PD), times its LGD multiplier, each
reverted after the reasonable and supportable period under CECL by :mod:`allowance.scenarios`, :math:`DF_t` the discount factor (1 where the framework does not
discount) and H the loan's horizon. With no scenario adjustment and no discounting the three
reduce to the textbook forms: :math:`L \cdot EAD_0` (:func:`pool_loss`),
:math:`r \sum_t B_{t-1}/12` (:func:`warm_loss`) and :math:`O\,(C(a+H) - C(a))`
(:func:`vintage_loss`). A pool lifetime rate is spread over the life in proportion to the
expected balance, which makes it a remaining-life method with the annual rate
:math:`12 L\, EAD_0 / \sum_t E_t`; that timing is what lets a scenario scale it by month.

IFRS 9 takes the 12-month sum for stage 1 and the lifetime sum for stages 2 and 3 (the stage
rules are unchanged; a loss-rate segment has no PD, so the PD-ratio test does not apply to it).
A loan in default takes ``default_lgd × EAD_0`` when the segment states an LGD for defaulted
loans (PD = 1 now, as in the PD method); otherwise it stays in the pool at the loss rate.

References
----------
.. [1] FASB ASC 326-20-30-3 (the allowance may be estimated with loss-rate, roll-rate,
   vintage or PD methods), 326-20-55-18 to 55-22 (Example 1, a loss-rate approach) and
   326-20-55-23 to 55-27 (Example 2, vintage loss rates); paragraph numbers from memory.
.. [2] FASB ASC 326-20-30-9 (reverting to historical loss information after the reasonable
   and supportable period).
.. [3] IFRS 9 *Financial Instruments*, 5.5.3, 5.5.5 and B5.5.35 (loss-rate practical
   expedients such as a provision matrix).
.. [4] FASB Staff Q&A, Topic 326, No. 2, *Developing an Estimate of Expected Credit Losses on
   Financial Assets* (January 2019), on the weighted-average remaining maturity (WARM)
   method (from memory).

Implements
----------
LOSS_RATE_METHODS      method key -> method code used by the compiled loop
pool_loss              L × amortised cost
warm_loss              r × Σ_t B_{t-1} / 12 over a given balance path
vintage_loss           O × (C(end of life) − C(age))
vintage_curve_by_month a cumulative loss curve by year of age, spread over months
reference_monthly_rate the monthly rate a scenario path moves, per loss-rate method
loss_rate_multipliers  a segment's scenario multipliers for its loss rate, by scenario and month
LossRateInputs         per-loan arrays and the tables the loop reads
LossRateResult         per loan, framework and scenario: ecl_12m, ecl_lifetime; ead
loss_rate_losses       check the inputs and run the loop
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from typing import Literal

import numpy as np

from allowance.cashflows import REVOLVING, balances_by_month, contractual_payments, path_terms_array
from allowance.exceptions import InvalidInputError
from allowance.jitcache import LOOPS

LossRateMethod = Literal["lifetime_loss_rate", "annual_loss_rate", "vintage_loss_curve"]

POOL, WARM, VINTAGE = 0, 1, 2
#: segment key -> method code read by the compiled loop
LOSS_RATE_METHODS: dict[LossRateMethod, int] = {
    "lifetime_loss_rate": POOL,
    "annual_loss_rate": WARM,
    "vintage_loss_curve": VINTAGE,
}


# --------------------------------------------------------------------------------------
# The textbook forms (no scenario, no discounting)
# --------------------------------------------------------------------------------------


def pool_loss(amortised_cost, lifetime_loss_rate):
    r"""Pool (cohort) lifetime loss rate × amortised cost.

    Notes
    -----
    .. math:: ECL = L \cdot AC

    where L is the pool's expected lifetime loss rate (historical, adjusted for current
    conditions and forecasts) and AC the amortised cost basis. This tool takes the tape
    balance as the amortised cost (no premiums, discounts or deferred fees).

    References
    ----------
    .. [1] FASB ASC 326-20-55-18 to 55-22, Example 1 (estimating expected credit losses with
       a loss-rate approach).

    Examples
    --------
    A 3,000,000 pool at an adjusted lifetime loss rate of 1.65 % (ASC 326-20-55, the loss-rate
    example, from memory):

    >>> round(float(pool_loss(3_000_000.0, 0.0165)), 2)
    49500.0
    """
    return np.asarray(amortised_cost, dtype=float) * np.asarray(lifetime_loss_rate, dtype=float)


def warm_loss(opening_balances, annual_loss_rate):
    r"""Remaining-life (WARM) loss: the annual rate applied to the balance month by month.

    Parameters
    ----------
    opening_balances : array_like, shape (..., T)
        :math:`B_{t-1}`, the expected balance at the start of months 1..T (the contractual
        schedule after expected prepayments).
    annual_loss_rate : float or array_like
        Annual net loss rate (net charge-offs over the average balance, annualised).

    Notes
    -----
    .. math:: ECL = r \sum_{t=1}^{T} \frac{B_{t-1}}{12}

    i.e. the annual rate times the balance-years remaining; with a level balance of B for
    T months this is :math:`r \cdot B \cdot T / 12`, the annual rate times the remaining life
    in years.

    References
    ----------
    .. [1] FASB Staff Q&A, Topic 326, No. 2 (January 2019), the weighted-average remaining
       maturity (WARM) method (from memory).

    Examples
    --------
    >>> float(warm_loss([1200.0, 800.0, 400.0], 0.03))
    6.0
    """
    b = np.asarray(opening_balances, dtype=float)
    return np.asarray(annual_loss_rate, dtype=float) * b.sum(axis=-1) / 12.0


def vintage_curve_by_month(curve_by_year, months: int) -> np.ndarray:
    r"""A cumulative loss curve by year of age, as :math:`C(m)` for m = 0..``months``.

    Parameters
    ----------
    curve_by_year : array_like, shape (Y,)
        Cumulative net loss as a share of original balance at ages 12, 24, ..., 12Y months;
        non-decreasing, each in [0, 1].
    months : int
        Largest age wanted.

    Returns
    -------
    ndarray, shape (months + 1,)
        :math:`C(0) = 0`; linear within each year (the year's losses fall evenly over its
        months); flat after age 12Y (the curve's last point is the vintage's lifetime loss).

    Examples
    --------
    >>> vintage_curve_by_month([0.012, 0.03], 30)[[0, 6, 12, 18, 24, 30]].round(4).tolist()
    [0.0, 0.006, 0.012, 0.021, 0.03, 0.03]
    """
    knots = np.concatenate([[0.0], np.asarray(curve_by_year, dtype=float)])
    ages = np.arange(months + 1, dtype=float)
    return np.interp(ages, 12.0 * np.arange(knots.size), knots)


def vintage_loss(original_balance, age, life, curve_by_month):
    r"""Vintage method: original balance × the loss still to come on the curve.

    Parameters
    ----------
    original_balance : array_like
        O, the loan's balance at origination.
    age : array_like of int
        a, whole months since origination at the as-of date.
    life : array_like of int
        Age at the end of the loan's life (a + remaining months).
    curve_by_month : array_like
        :math:`C(m)`, cumulative net loss as a share of original balance at age m
        (:func:`vintage_curve_by_month`); ages past its end take its last value.

    Notes
    -----
    .. math:: ECL = O \,\bigl(C(\text{end of life}) - C(a)\bigr)

    References
    ----------
    .. [1] FASB ASC 326-20-55-23 to 55-27, Example 2 (estimating expected credit losses with
       vintage loss rates).

    Examples
    --------
    A 60-month loan of 20,000, 18 months old, on a curve reaching 1.2 % at 12 months and 3 %
    at 24 months and flat after: 20,000 × (3 % − 2.1 %) = 180.

    >>> c = vintage_curve_by_month([0.012, 0.03], 60)
    >>> round(float(vintage_loss(20_000.0, 18, 60, c)), 6)
    180.0
    """
    c = np.asarray(curve_by_month, dtype=float)
    last = c.size - 1
    a = np.minimum(np.asarray(age, dtype=np.int64), last)
    end = np.minimum(np.asarray(life, dtype=np.int64), last)
    return np.asarray(original_balance, dtype=float) * (c[end] - c[a])


# --------------------------------------------------------------------------------------
# Scenarios: the loss-rate multiplier by scenario and month
# --------------------------------------------------------------------------------------


def reference_monthly_rate(method: LossRateMethod, value) -> float:
    r"""The monthly loss rate a scenario path moves, for a segment's loss rate.

    Notes
    -----
    A scenario moves a monthly rate through the same path a PD takes (a multiplier, the
    Vasicek conditional rate for a z path, a satellite model for macro paths). The reference
    level is ``annual_loss_rate`` / 12, ``lifetime_loss_rate`` / 12, or the vintage curve's
    last point spread evenly over its years, :math:`C_Y / 12Y`. For a multiplier path the
    level does not matter (the ratio is the multiplier); for the non-linear paths it is the
    level the shift is applied at (a stated convention).

    Examples
    --------
    >>> reference_monthly_rate("annual_loss_rate", 0.024), reference_monthly_rate("vintage_loss_curve", [0.01, 0.024])
    (0.002, 0.001)
    """
    if method == "vintage_loss_curve":
        curve = list(value)
        return float(curve[-1]) / (12.0 * len(curve))
    return float(value) / 12.0


def loss_rate_multipliers(shifted, reference, lgd_multiplier) -> np.ndarray:
    r"""A loss-rate segment's multiplier by scenario and month.

    Parameters
    ----------
    shifted : array_like, shape (S, T)
        The scenario paths of the reference monthly rate (:func:`reference_monthly_rate`), as
        :func:`allowance.scenarios.scenario_tables` moves it (CECL: already reverted after the
        reasonable and supportable period, ASC 326-20-30-9).
    reference : array_like, shape (T,)
        The unshifted reference rate.
    lgd_multiplier : array_like, shape (S, T)
        The scenarios' LGD multiplier paths (reverted likewise).

    Notes
    -----
    A loss rate is a default rate times a severity, so month t of scenario s scales it by
    :math:`m_{s,t} = \frac{q^{s}_t}{q_t}\, m^{LGD}_{s,t}`: for a PD multiplier path
    :math:`q^s_t / q_t` is the multiplier itself; for a z or macro path it is how far the path
    moves the reference rate. A zero reference rate takes a multiplier of 1.

    Examples
    --------
    >>> loss_rate_multipliers([[0.004, 0.003, 0.002]], [0.002] * 3, [[1.1, 1.1, 1.0]]).round(4).tolist()
    [[2.2, 1.65, 1.0]]
    """
    q = np.asarray(reference, dtype=float)
    moved = np.asarray(shifted, dtype=float)
    ratio = np.divide(moved, q, out=np.ones(np.broadcast_shapes(moved.shape, q.shape)), where=q > 0)
    return ratio * np.asarray(lgd_multiplier, dtype=float)


# --------------------------------------------------------------------------------------
# The compiled loop
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class LossRateInputs:
    """Arrays for :func:`loss_rate_losses`. n loans, F frameworks, S scenarios, T months.

    Per loan: ``method`` (:data:`LOSS_RATE_METHODS` code), ``loss_rate`` (pool: lifetime
    rate; remaining life: annual rate; vintage: unused), ``vintage`` (row of
    ``vintage_curve``), ``original_balance`` (vintage), ``age`` (months since origination),
    ``default_lgd`` (LGD for a loan in default; NaN: it stays in the pool), and the schedule
    inputs as in :class:`allowance.ecl.KernelInputs`: ``code, balance, rate`` (monthly),
    ``months_left, io_left, residual, payment`` (NaN = recompute), ``prepay`` (row of ``smm``,
    per loan or per framework and loan ``[F, n]``) and ``prepay_offset`` (start column).
    Per framework and loan ``[F, n]``: ``in_default``, ``horizon``, ``ead_add``, ``paydown``,
    ``discount`` (monthly discount multiplier v, 1 where the framework does not discount),
    optionally ``add_months`` (the months in which ``ead_add`` is exposure; None: every month).
    Tables: ``multiplier[F, T, S]`` (loss-rate multiplier, :func:`loss_rate_multipliers`),
    ``lgd_multiplier[F, T, S]`` (for loans in default), ``vintage_curve[V, A]`` (C by month
    of age, ``A`` > oldest age + T), ``smm[P, L]``.
    """

    method: np.ndarray
    loss_rate: np.ndarray
    vintage: np.ndarray
    original_balance: np.ndarray
    age: np.ndarray
    default_lgd: np.ndarray
    code: np.ndarray
    balance: np.ndarray
    rate: np.ndarray
    months_left: np.ndarray
    io_left: np.ndarray
    residual: np.ndarray
    payment: np.ndarray
    prepay: np.ndarray
    prepay_offset: np.ndarray
    in_default: np.ndarray
    horizon: np.ndarray
    ead_add: np.ndarray
    paydown: np.ndarray
    discount: np.ndarray
    multiplier: np.ndarray
    lgd_multiplier: np.ndarray
    vintage_curve: np.ndarray
    smm: np.ndarray
    add_months: np.ndarray | None = None  # [F, n]: the months in which ead_add is exposure (None: every month)
    add_after: np.ndarray | None = None  # [F, n]: the add-on after those months (accrued interest; None: 0)


@dataclass(frozen=True)
class LossRateResult:
    """Per loan, framework and scenario ``[n, F, S]``: ``ecl_12m``, ``ecl_lifetime``;
    ``ead`` ``[n, F]`` at the as-of date."""

    ecl_12m: np.ndarray
    ecl_lifetime: np.ndarray
    ead: np.ndarray


_FIELDS = [f.name for f in fields(LossRateInputs)]
_INTEGER = {"method", "vintage", "age", "code", "months_left", "io_left", "prepay", "prepay_offset", "horizon",
            "add_months"}


def _checked(inputs: LossRateInputs) -> dict[str, np.ndarray]:
    """The inputs as contiguous arrays of the compiled types, after the checks that keep the
    loop's unchecked indexing inside its tables."""
    a = {}
    for name in _FIELDS:
        dtype = np.int64 if name in _INTEGER else (np.bool_ if name == "in_default" else np.float64)
        value = getattr(inputs, name)
        if name == "add_months" and value is None:  # the add-on in every month
            value = np.full(np.shape(inputs.horizon), np.iinfo(np.int64).max)
        if name == "add_after" and value is None:  # nothing after the add-on's months
            value = np.zeros(np.shape(inputs.horizon))
        if name == "prepay" and np.ndim(value) == 1:  # one row per loan, the same in every framework
            value = np.broadcast_to(value, np.shape(inputs.horizon))
        a[name] = np.ascontiguousarray(value, dtype=dtype)
    n = a["balance"].shape[0]
    n_fw, n_months, n_sc = a["multiplier"].shape
    problems = []
    for name in _FIELDS[:15]:
        if name == "prepay":
            continue
        if a[name].shape != (n,):
            problems.append(f"{name} has shape {a[name].shape}, not (loans,) = {(n,)}")
    for name in ("prepay", "in_default", "horizon", "ead_add", "paydown", "discount", "add_months", "add_after"):
        if a[name].shape != (n_fw, n):
            problems.append(f"{name} has shape {a[name].shape}, not (frameworks, loans) = {(n_fw, n)}")
    if a["lgd_multiplier"].shape != (n_fw, n_months, n_sc):
        problems.append(f"lgd_multiplier has shape {a['lgd_multiplier'].shape}, not {(n_fw, n_months, n_sc)}")
    if a["vintage_curve"].ndim != 2 or a["vintage_curve"].shape[1] < 1:
        problems.append("vintage_curve must be a (curves, ages) table with at least one age")
    if n and not problems:
        if a["method"].min() < POOL or a["method"].max() > VINTAGE:
            problems.append("a method code is not one of LOSS_RATE_METHODS")
        if a["horizon"].min() < 0 or a["horizon"].max() > n_months:
            problems.append(f"a horizon lies outside 0..{n_months} (the months of the multiplier table)")
        if a["vintage"].min() < 0 or a["vintage"].max() >= a["vintage_curve"].shape[0]:
            problems.append("a vintage curve row lies outside the vintage table")
        if a["age"].min() < 0:
            problems.append("an age is negative")
        if a["prepay"].min() < 0 or a["prepay"].max() >= a["smm"].shape[0]:
            problems.append("a prepayment row lies outside the SMM table")
        if a["prepay_offset"].min() < 0 or (a["prepay_offset"] + a["horizon"].max(axis=0)).max() > a["smm"].shape[1]:
            problems.append("prepayment offset + horizon runs past the SMM table's columns")
    for name, value in a.items():
        # NaN means "not given" only in the tape payment and the LGD of loans in default
        if value.dtype == np.float64 and name not in ("payment", "default_lgd") and not np.isfinite(value).all():
            where = np.argwhere(~np.isfinite(value))[0].tolist()
            problems.append(f"{name} holds NaN or inf at {where} (the engine fills blanks before the loop)")
    if problems:
        raise InvalidInputError("LossRateInputs: " + "; ".join(problems))
    return a


def _expected_balances(balance, growth, pay, io_left, months, add, add_months, add_after, smm, smm_at):
    """E_t of the loans still running in each month (longest horizon first): the scheduled
    balance (:func:`~allowance.cashflows.balances_by_month`) plus the add-on, times the share
    not prepaid by then. Yields (t, how many, E_t)."""
    kept = np.ones(balance.size)
    for t, m, bal in balances_by_month(balance, growth, pay, io_left, months):
        yield t, m, (bal + np.where(t < add_months[:m], add[:m], add_after[:m])) * kept[:m]
        kept[:m] *= 1.0 - smm.take(smm_at[:m] + t)


def _losses_in_arrays(a: dict[str, np.ndarray], ecl12: np.ndarray, ecllife: np.ndarray, ead0: np.ndarray) -> None:
    r"""The loss-rate loop's sums in numpy: the months one after another, every loan at once.

    The recursion of the compiled loop (:mod:`allowance.loss_rates_compiled`): for each
    framework, the expected balance :math:`E_t = (B_t + \text{add-on}_t)\prod_{k<t}(1 - smm_k)`
    (:math:`B_t` the interest-only balance or :func:`~allowance.cashflows.balance_on_path`),
    the month's loss :math:`\ell_t` of the loan's method (the module notes), and
    :math:`ECL_s \mathrel{+}= \ell_t\, v^{t+1} m_{s,t}`; a pool loan's scale
    :math:`L \cdot EAD_0 / \sum_t E_t` takes a first pass over its months. The loans are taken
    longest horizon first, so each month works on one slice. The same figures as the compiled
    loop to rounding (``tests/test_loss_rates.py``).
    """
    n_fw, _, n_sc = a["multiplier"].shape
    balance, rate, io_left, method = a["balance"], a["rate"], a["io_left"], a["method"]
    revolving = a["code"] == REVOLVING
    level = contractual_payments(a["code"], balance, rate, a["months_left"], io_left, a["residual"], a["payment"])
    stated = a["default_lgd"] == a["default_lgd"]  # a loan in default with an LGD of its own
    last_age = a["vintage_curve"].shape[1] - 1
    for f in range(n_fw):
        ead = balance + a["ead_add"][f]
        ead0[:, f] = ead
        lost = a["in_default"][f] & stated
        loss = ead[lost, None] * np.minimum(1.0, a["default_lgd"][lost, None] * a["lgd_multiplier"][f, 0, :])
        ecl12[lost, f, :] = ecllife[lost, f, :] = loss
        months = np.where(revolving, a["horizon"][f], np.minimum(a["horizon"][f], a["months_left"]))
        rows = np.flatnonzero(~lost)
        rows = rows[np.argsort(-months[rows], kind="stable")]
        if not rows.size:
            continue
        months = months[rows]
        b0 = balance[rows]
        growth, pay = path_terms_array(a["code"][rows], b0, rate[rows], level[rows], a["paydown"][f][rows])
        add, add_months, add_after = a["ead_add"][f][rows], a["add_months"][f][rows], a["add_after"][f][rows]
        smm_at = a["prepay"][f][rows] * a["smm"].shape[1] + a["prepay_offset"][rows]
        terms = (b0, growth, pay, io_left[rows], months, add, add_months, add_after, a["smm"].ravel(), smm_at)
        kind = method[rows]
        scale = np.where(kind == WARM, a["loss_rate"][rows] / 12.0, 0.0)
        pool = kind == POOL
        if pool.any():  # the lifetime loss spread over the months in proportion to E_t
            total = np.zeros(rows.size)
            for _, m, e in _expected_balances(*terms):
                total[:m] += e
            with np.errstate(divide="ignore", invalid="ignore"):
                spread = np.where(total > 0.0, a["loss_rate"][rows] * ead[rows] / total, 0.0)
            scale = np.where(pool, spread, scale)
        vintage = kind == VINTAGE
        curve = a["vintage_curve"][a["vintage"][rows]] if vintage.any() else None  # [m, A]
        original, age = a["original_balance"][rows], a["age"][rows]
        v, multiplier = a["discount"][f][rows], a["multiplier"][f][:, :, None]  # [T, S, 1]
        df = np.ones(rows.size)
        life, twelve = np.zeros((n_sc, rows.size)), np.zeros((n_sc, rows.size))
        for t, m, e in _expected_balances(*terms):
            month_loss = scale[:m] * e
            if curve is not None:
                span = np.arange(m)
                step = curve[span, np.minimum(age[:m] + t + 1, last_age)] - curve[span, np.minimum(age[:m] + t, last_age)]
                month_loss = np.where(vintage[:m], original[:m] * step, month_loss)
            df[:m] *= v[:m]
            life[:, :m] += (month_loss * df[:m]) * multiplier[t]
            if t == 11:
                twelve[:, :m] = life[:, :m]
        short = months < 12
        twelve[:, short] = life[:, short]
        ecl12[rows, f, :], ecllife[rows, f, :] = twelve.T, life.T


def loss_rate_losses(inputs: LossRateInputs, loop: str = "compiled") -> LossRateResult:
    """Run the loss-rate loop over every loan and return the per-loan sums: ``loop="compiled"``
    on all cores (:mod:`allowance.loss_rates_compiled`), ``loop="arrays"`` in numpy with no
    compiler loaded (:func:`_losses_in_arrays`), as :func:`allowance.ecl.expected_losses`.

    The balance path is the one the PD method's loop walks (the same
    :func:`~allowance.cashflows.contractual_payment`, :func:`~allowance.cashflows.path_terms`
    and :func:`~allowance.cashflows.balance_on_path`), as are the prepayment table, the
    horizon and the discounting; only the loss per month differs (see the module notes).

    Raises
    ------
    ValueError
        The inputs break the contract of :class:`LossRateInputs` (a shape, an index past its
        table, NaN or inf where a number is needed).

    Examples
    --------
    One bullet loan of 1,000,000 with 12 months left at an annual loss rate of 1.2 %, no
    prepayment, undiscounted: 1.2 % × 1,000,000 × 12/12 = 12,000 (common practice, no source).

    >>> one = lambda v, dt=float: np.array([v], dtype=dt)
    >>> k = LossRateInputs(
    ...     method=one(WARM, np.int64), loss_rate=one(0.012), vintage=one(0, np.int64),
    ...     original_balance=one(0.0), age=one(0, np.int64), default_lgd=one(np.nan),
    ...     code=one(1, np.int64), balance=one(1e6), rate=one(0.005), months_left=one(12, np.int64),
    ...     io_left=one(12, np.int64), residual=one(0.0), payment=one(np.nan),
    ...     prepay=one(0, np.int64), prepay_offset=one(0, np.int64),
    ...     in_default=np.zeros((1, 1), np.bool_), horizon=np.full((1, 1), 12, np.int64),
    ...     ead_add=np.zeros((1, 1)), paydown=np.zeros((1, 1)), discount=np.ones((1, 1)),
    ...     multiplier=np.ones((1, 12, 1)), lgd_multiplier=np.ones((1, 12, 1)),
    ...     vintage_curve=np.zeros((1, 1)), smm=np.zeros((1, 12)))
    >>> round(float(loss_rate_losses(k).ecl_lifetime[0, 0, 0]), 6)
    12000.0
    """
    if loop not in LOOPS:
        raise ValueError(f"loop must be one of {', '.join(LOOPS)}, not {loop!r}")
    a = _checked(inputs)
    n = a["balance"].shape[0]
    n_fw, _, n_sc = a["multiplier"].shape
    ecl12, ecllife = np.zeros((n, n_fw, n_sc)), np.zeros((n, n_fw, n_sc))
    ead0 = np.zeros((n, n_fw))
    if n and loop == "arrays":
        _losses_in_arrays(a, ecl12, ecllife, ead0)
    elif n:
        from allowance import loss_rates_compiled  # numba loads here, and only here

        loss_rates_compiled.fused_losses(tuple(a[name] for name in _FIELDS), ecl12, ecllife, ead0)
    return LossRateResult(ecl12, ecllife, ead0)
