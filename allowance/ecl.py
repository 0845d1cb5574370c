r"""The expected-credit-loss sum, per loan, per framework and scenario, 12-month and lifetime.

Each loan's balance path is walked once, and for every framework and scenario the sum

.. math::

    ECL = \sum_{t=1}^{H} S_{t-1}\; pd_t\; LGD_t\; EAD_t\; DF_t, \qquad
    S_t = \prod_{k \le t} (1 - pd_k)(1 - smm_k)

is accumulated, where :math:`pd_t` is the marginal PD conditional on survival, :math:`EAD_t` the balance at the
start of month t, :math:`DF_t = (1 + EIR/12)^{-t}` (1 where the framework does not discount)
and :math:`smm_t` the prepayment rate (competing risk). The 12-month ECL sums t ≤ 12. A loan
in default takes PD = 1 now: ECL = LGD · EAD_0. The expected gross credit loss is the same sum
with LGD = 1 (the exposure lost before recoveries); the ECL is the net loss after them. A
balloon or interest-only loan adds the refinance risk at its maturity month T when the horizon
reaches it: :math:`S_T\, q\; LGD_T\, EAD_T\, DF_T` (:mod:`allowance.curves.refinance`). The formulas live in the concept modules
(:mod:`~allowance.cashflows` for the balance path, :func:`~allowance.curves.lgd.loss_given_default`
for LGD_t, :func:`~allowance.discounting.monthly_discount` for the v of DF_t = v^t); this module
composes them, and never allocates a loans × months array.

Two ways, the same sums: a large book runs the fused loop compiled with numba
(:mod:`allowance.ecl_compiled`: loans on all cores, months in registers; some 3-4 s to
compile once, 0.7-0.9 s to load in each process); a small book runs it in numpy, the months
one after another and every loan at once (:func:`_sums_in_arrays`), with no compiler loaded.
``expected_losses(inputs, loop)`` takes either; the engine chooses once per book
(:func:`allowance.engine.tables.choose_loop`). They agree to rounding: ``tests/test_ecl.py``
holds both to a per-loan reference and to each other.

References
----------
.. [1] IFRS 9 *Financial Instruments*, 5.5.3-5.5.5 and B5.5.28-B5.5.44 (12-month and
   lifetime expected credit losses, probability-weighted, discounted at the EIR).
.. [2] FASB ASC 326-20-30 (current expected credit losses over the contractual life).

Implements
----------
KernelInputs     the per-loan arrays and the tables the sum reads
KernelResult     per loan, framework and scenario: ecl and gross loss, 12-month and lifetime,
                 pd_12m, pd_lifetime; ead, lgd
LOOPS            the two ways to compute it, "compiled" and "arrays" (allowance.jitcache)
expected_losses  check the inputs and compute the sums
expected_losses_together  the sums of several sets of inputs over the same tables (one pass in numpy)
compile_loop     compile the loop (into the cache) on the smallest book
MONTH_COLUMNS    the columns of loan_months
loan_months      one loan's sum month by month (the schedule view of what the loop did)
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from typing import TYPE_CHECKING

import numpy as np

from allowance.cashflows import (
    REVOLVING, balance_on_path, balances_by_month, contractual_payment, contractual_payments, path_terms,
    path_terms_array,
)
from allowance.curves.lgd import collateral_lgd, loss_given_default, loss_given_default_array
from allowance.curves.refinance import refinance_default
from allowance.shortfall import default_loss
from allowance.exceptions import InvalidInputError
from allowance.jitcache import LOOPS

if TYPE_CHECKING:  # loaded by loan_months: compiling the loop alone (compile_loop) needs no pandas
    import pandas as pd

@dataclass(frozen=True)
class KernelInputs:
    """Arrays for :func:`expected_losses`. n loans, F frameworks, S scenarios, T months.

    Per loan: ``code, balance, rate`` (monthly), ``months_left`` (contractual payments left;
    behavioural life for revolving), ``io_left``, ``residual``, ``payment`` (NaN = recompute),
    ``prepay`` (row of ``smm``; per loan ``[n]`` or per framework and loan ``[F, n]``: a
    framework that runs a line's balance off at its payment rate takes a row of zeros, so the
    payoffs are not counted twice) and ``prepay_offset`` (start column of ``smm``), ``lgd`` (flat LGD after cure), ``collateral`` (0 = flat LGD),
    ``haircut, recovery_cost, lgd_floor, cure``, ``refinance_pd`` (q: the probability that a
    balloon or interest-only loan outstanding at maturity fails to repay; 0 = none).
    Per framework and loan ``[F, n]``: ``curve`` (row of ``pd``: a framework may measure a loan
    on another row, IFRS 9 a loan on probation out of stage 3), ``in_default`` (the loss event
    is certain now: PD = 1), ``recovery_discount`` (PV
    factor of a collateral recovery at the EIR; 1 where the framework does not discount),
    ``horizon`` (months), ``ead_add`` (CCF × undrawn),
    ``paydown`` (revolving monthly repayment share), ``discount`` (monthly discount multiplier
    v = 1/(1 + EIR/12), or 1 where the framework does not discount), ``interest`` (the default
    month's lost interest EIR/12 under the cash-shortfall measure, else 0:
    :func:`allowance.shortfall.default_loss`).
    Tables: ``pd[F, K, T, S]``, ``smm[P, L]``, ``lgd_multiplier[F, T, S]``,
    ``collateral_index[F, K, T, S]`` (per curve key: a satellite model may link a segment's
    collateral to a price variable).
    Per loan, optional: ``pd_scale`` (the loan's own PD level: the loop reads
    ``min(pd_scale · pd_t, 1)`` for its curve row; None = 1 for every loan, the curve as it is).
    Per framework and loan, optional: ``add_months`` (the months t < add_months in which
    ``ead_add`` is exposure: a HELOC's draw period, a line's commitment; None = every month)
    and ``add_after`` (the add-on from month add_months on: the accrued interest, which stays;
    None = 0).
    """

    code: np.ndarray
    balance: np.ndarray
    rate: np.ndarray
    months_left: np.ndarray
    io_left: np.ndarray
    residual: np.ndarray
    payment: np.ndarray
    curve: np.ndarray
    prepay: np.ndarray
    prepay_offset: np.ndarray
    in_default: np.ndarray
    lgd: np.ndarray
    collateral: np.ndarray
    haircut: np.ndarray
    recovery_cost: np.ndarray
    lgd_floor: np.ndarray
    recovery_discount: np.ndarray
    cure: np.ndarray
    refinance_pd: np.ndarray
    horizon: np.ndarray
    ead_add: np.ndarray
    paydown: np.ndarray
    discount: np.ndarray
    interest: np.ndarray
    pd: np.ndarray
    smm: np.ndarray
    lgd_multiplier: np.ndarray
    collateral_index: np.ndarray
    pd_scale: np.ndarray | None = None
    add_months: np.ndarray | None = None
    add_after: np.ndarray | None = None


@dataclass(frozen=True)
class KernelResult:
    """Per loan, framework and scenario ``[n, F, S]``: ecl_12m, ecl_lifetime, pd_12m,
    pd_lifetime (default before prepayment or maturity), gross_12m and gross_lifetime (the
    expected gross credit loss: the same sums with LGD = 1); ``ead`` ``[n, F]`` at the as-of
    date; ``lgd`` ``[n, F]`` at the as-of date under the first scenario's path."""

    ecl_12m: np.ndarray
    ecl_lifetime: np.ndarray
    pd_12m: np.ndarray
    pd_lifetime: np.ndarray
    ead: np.ndarray
    lgd: np.ndarray
    gross_12m: np.ndarray
    gross_lifetime: np.ndarray


#: The rows of the loop's one output array ``sums[row, n, F, S]`` (one array, not six: fewer
#: arguments for the compiled functions).
ECL_12M, ECL_LIFETIME, PD_12M, PD_LIFETIME, GROSS_12M, GROSS_LIFETIME = range(6)




def expected_losses(inputs: KernelInputs, loop: str = "compiled") -> KernelResult:
    """Compute every loan's sums: ``loop="compiled"`` runs the fused compiled loop (all
    cores; :mod:`allowance.ecl_compiled`), ``loop="arrays"`` the same recursion in numpy
    (:func:`_sums_in_arrays`; numba is not loaded). The same figures to rounding.

    Raises
    ------
    ValueError
        The inputs break the contract of :class:`KernelInputs`: a shape that does not match,
        an index past its table (a horizon longer than the PD table, a curve key, a
        prepayment row or offset), or NaN / inf anywhere but ``payment``. The engine builds
        inputs that pass; this keeps the compiled loop from reading past a table.

    Examples
    --------
    One loan, one month left, PD 0.5 % and LGD 25 % on 1,000,000, undiscounted: the loss is
    PD × LGD × EAD = 1,250 and the gross loss PD × EAD = 5,000 (common practice, no source).

    >>> one = lambda v, dt=float: np.array([v], dtype=dt)
    >>> k = KernelInputs(
    ...     code=one(0, np.int64), balance=one(1e6), rate=one(0.0), months_left=one(1, np.int64),
    ...     io_left=one(0, np.int64), residual=one(0.0), payment=one(np.nan),
    ...     curve=np.zeros((1, 1), np.int64), prepay=one(0, np.int64), prepay_offset=one(0, np.int64),
    ...     in_default=np.zeros((1, 1), np.bool_), lgd=one(0.25), collateral=one(0.0), haircut=one(0.0),
    ...     recovery_cost=one(0.0), lgd_floor=one(0.0), recovery_discount=np.ones((1, 1)), cure=one(0.0),
    ...     refinance_pd=one(0.0),
    ...     horizon=np.ones((1, 1), np.int64), ead_add=np.zeros((1, 1)), paydown=np.zeros((1, 1)),
    ...     discount=np.ones((1, 1)), interest=np.zeros((1, 1)), pd=np.full((1, 1, 1, 1), 0.005), smm=np.zeros((1, 1)),
    ...     lgd_multiplier=np.ones((1, 1, 1)), collateral_index=np.ones((1, 1, 1, 1)))
    >>> r = expected_losses(k)
    >>> round(float(r.ecl_12m[0, 0, 0]), 6), round(float(r.gross_12m[0, 0, 0]), 6)
    (1250.0, 5000.0)
    >>> r = expected_losses(k, "arrays")
    >>> round(float(r.ecl_12m[0, 0, 0]), 6), round(float(r.gross_12m[0, 0, 0]), 6)
    (1250.0, 5000.0)
    """
    if loop not in LOOPS:
        raise ValueError(f"loop must be one of {', '.join(LOOPS)}, not {loop!r}")
    args = _checked_arrays(inputs)
    n = inputs.balance.shape[0]
    n_fw, n_sc = inputs.pd.shape[0], inputs.pd.shape[3]
    sums = np.empty((6, n, n_fw, n_sc))  # rows ECL_12M ... GROSS_LIFETIME
    ead0, lgd0 = np.empty((n, n_fw)), np.empty((n, n_fw))
    if n:
        a = dict(zip(_FIELDS, args))
        # in numpy, not compiled: it tests the tape payment for NaN, which the loop's fast-math
        # flags would let the compiler assume away; the same bits as a compiled loop, no compile
        levels = contractual_payments(
            a["code"], a["balance"], a["rate"], a["months_left"], a["io_left"], a["residual"], a["payment"]
        )
        if loop == "arrays":
            _sums_in_arrays({**a, "level_payment": levels}, sums, ead0, lgd0)
        else:
            from allowance import ecl_compiled  # numba loads here, and only here

            unit_path = np.array([bool(np.all(inputs.lgd_multiplier[f] == 1.0)) for f in range(n_fw)], dtype=np.bool_)
            ecl_compiled.fused_sums(
                (a["code"], a["balance"], a["rate"], a["months_left"], a["io_left"], levels, *args[7:], unit_path),
                sums, ead0, lgd0)
        _defaulted_losses(a, sums)
        bad = ~np.isfinite(sums[ECL_LIFETIME]).all(axis=(1, 2))
        if bad.any():
            raise InvalidInputError(
                f"the ECL of loan {int(np.argmax(bad))} (position in the chunk) is not finite: "
                "an input array or table holds NaN or inf (the engine fills blanks before the loop)"
            )
    return KernelResult(
        ecl_12m=sums[ECL_12M], ecl_lifetime=sums[ECL_LIFETIME], pd_12m=sums[PD_12M], pd_lifetime=sums[PD_LIFETIME],
        ead=ead0, lgd=lgd0, gross_12m=sums[GROSS_12M], gross_lifetime=sums[GROSS_LIFETIME],
    )


def expected_losses_together(batch: list[KernelInputs | None], loop: str = "compiled") -> list[KernelResult | None]:
    """:func:`expected_losses` of each set of inputs in ``batch`` (None gives None): the same
    figures, to the bit, as one call each.

    In numpy (``loop="arrays"``) the sets that read the same tables (``pd``, ``smm``,
    ``lgd_multiplier``, ``collateral_index``: one chunk's loans and the extra passes the
    engine makes of some of them, e.g. a POCI loan at its purchase date) are summed in one
    pass, their loans side by side: each month's numpy calls then serve all of them, where
    one call per set repeated the month loop for a few loans (the demo quarter's two
    purchase-date passes and its drawn-only pass took 0.15 s that way). A loan's sums are
    elementwise in its own row (:func:`_sums_in_arrays`), so where it sits changes no bit.
    The compiled loop has no cost per call worth saving: one call each.
    """
    given = [i for i, inputs in enumerate(batch) if inputs is not None]
    out: list[KernelResult | None] = [None] * len(batch)
    first = batch[given[0]] if given else None
    if loop != "arrays" or len(given) < 2 or any(
            getattr(batch[i], name) is not getattr(first, name) for i in given for name in _TABLE_FIELDS):
        for i in given:
            out[i] = expected_losses(batch[i], loop)
        return out
    checked = [dict(zip(_FIELDS, _checked_arrays(batch[i]))) for i in given]
    joined = {name: (checked[0][name] if name in _TABLE_FIELDS else np.concatenate(
        [c[name] for c in checked], axis=1 if name in PER_FRAMEWORK else 0)) for name in _FIELDS}
    whole = expected_losses(KernelInputs(**joined), loop)
    start = 0
    for i, c in zip(given, checked):
        stop = start + c["balance"].shape[0]
        out[i] = KernelResult(**{f.name: getattr(whole, f.name)[start:stop] for f in fields(KernelResult)})
        start = stop
    return out


#: The tables of :class:`KernelInputs` (read whole by every loan); the other fields are per loan.
_TABLE_FIELDS = ("pd", "smm", "lgd_multiplier", "collateral_index")


def compile_loop() -> None:
    """Compile the loop, into the compile cache when there is one, by running one loan.

    The signature is that of every run (:func:`_checked_arrays` makes the dtypes one set), so
    a later :func:`expected_losses` in any process loads it from the cache. The command line
    runs this in a second process while the first reads the tape (:mod:`allowance.jitcache`).
    """
    one = lambda v, dt=float: np.array([v], dtype=dt)  # noqa: E731
    frame = lambda v, dt=float: np.full((1, 1), v, dtype=dt)  # noqa: E731
    expected_losses(KernelInputs(
        code=one(0, np.int64), balance=one(1.0), rate=one(0.0), months_left=one(1, np.int64),
        io_left=one(0, np.int64), residual=one(0.0), payment=one(np.nan), curve=frame(0, np.int64),
        prepay=one(0, np.int64), prepay_offset=one(0, np.int64), in_default=frame(False, np.bool_), lgd=one(0.5),
        collateral=one(0.0), haircut=one(0.0), recovery_cost=one(0.0), lgd_floor=one(0.0),
        recovery_discount=frame(1.0), cure=one(0.0), refinance_pd=one(0.0), horizon=frame(1, np.int64),
        ead_add=frame(0.0), paydown=frame(0.0), discount=frame(1.0), interest=frame(0.0),
        pd=np.full((1, 1, 1, 1), 0.01), smm=frame(0.0), lgd_multiplier=np.ones((1, 1, 1)),
        collateral_index=np.ones((1, 1, 1, 1)),
    ))


def _sums_in_arrays(a: dict[str, np.ndarray], sums: np.ndarray, ead0: np.ndarray, lgd0: np.ndarray) -> None:
    r"""The loop's sums in numpy: the months one after another, every loan and scenario at once.

    The same recursion as the compiled loop, for each framework: in month t (from 0) a loan's
    balance is its interest-only balance or :func:`~allowance.cashflows.balance_on_path`
    (:math:`\max(B g^j - P s_j, 0)` with g and P from :func:`~allowance.cashflows.path_terms`),
    its exposure that plus the add-on, :math:`w_t = EAD_t\, v^{t+1}`, and for each scenario

    .. math::

        d_t = S_{t-1} \min(c \cdot pd_t, 1), \qquad S_t = (S_{t-1} - d_t)(1 - smm_t),

        E = \sum_t d_t w_t, \qquad N = \sum_t d_t w_t LGD_t, \qquad
        ECL = N + i E, \qquad \text{gross} = (1 + i) E

    (:func:`~allowance.shortfall.default_loss`: a default loses :math:`(LGD_t + i) EAD_t`),
    plus the refinance failures :math:`S_T q` in the maturity month T. A loan without
    collateral on a unit LGD path has :math:`N = \min(1, LGD) E`, so only E is summed for
    it; the secured loans, whose LGD moves with the balance, are summed apart. Every
    framework's loans go through one month loop as (framework, loan) pairs, so each numpy
    call of a month serves all frameworks. The pairs are taken longest horizon first, so the
    pairs still running in month t are the first ones: each month works on one slice, and the
    work is the book's loan-months, not loans × the longest horizon. A loan whose loss event
    is certain now takes PD 1 (its losses are set by :func:`_defaulted_losses`). Memory: a
    few arrays of frameworks × loans × scenarios.

    It gives the compiled loop's figures to rounding (the two order a sum's terms apart:
    last-bit differences; ``tests/test_ecl.py`` holds them to 1e-12).
    """
    n_fw, n = a["pd"].shape[0], a["balance"].shape[0]
    revolving = a["code"] == REVOLVING
    secured = a["collateral"] > 0.0
    months = np.empty((n_fw, n), dtype=np.int64)
    unit = np.empty(n_fw, dtype=bool)
    for f in range(n_fw):
        k, multiplier, index = a["curve"][f], a["lgd_multiplier"][f], a["collateral_index"][f]  # [T, S], [K, T, S]
        ead = a["balance"] + a["ead_add"][f]
        ead0[:, f] = ead
        lgd0[:, f] = loss_given_default_array(
            ead, a["lgd"], a["collateral"], index[k, 0, 0], a["haircut"], a["recovery_cost"], a["lgd_floor"],
            a["recovery_discount"][f], a["cure"], multiplier[0, 0])
        # no exposure after maturity: a horizon past it adds nothing (nor to the PD)
        life = np.where(revolving, a["horizon"][f], np.minimum(a["horizon"][f], a["months_left"]))
        months[f] = np.where(a["in_default"][f], 0, life)
        unit[f] = bool((multiplier == 1.0).all())
    # the (framework, loan) pairs, the frameworks side by side in one month loop (each numpy
    # call of a month then serves both: half the calls of a loop per framework), apart where
    # the sums take another path: secured or not, a unit LGD path or not. One thread: with
    # these short arrays, the groups on two threads were slower (the GIL).
    fw_of, loan_of = np.divmod(np.arange(n_fw * n), n)
    for group in (~secured[loan_of] & unit[fw_of], ~secured[loan_of] & ~unit[fw_of], secured[loan_of]):
        pairs = np.flatnonzero(group)
        if pairs.size:
            pairs = pairs[np.argsort(-months[fw_of[pairs], loan_of[pairs]], kind="stable")]
            _months_in_arrays(a, fw_of[pairs], loan_of[pairs], months, bool(unit[fw_of[pairs]].all()), sums)
    # after the months: a loan in default was summed over none of them
    f, i = np.nonzero(a["in_default"])
    sums[PD_12M, i, f, :] = sums[PD_LIFETIME, i, f, :] = 1.0


def _months_in_arrays(a: dict[str, np.ndarray], fw: np.ndarray, rows: np.ndarray, months: np.ndarray, unit: bool,
                      sums: np.ndarray) -> None:
    """:func:`_sums_in_arrays` for the (framework, loan) pairs ``(fw, rows)`` (longest horizon
    first, ``months[fw, rows]``), all secured or none; their six sums go into
    ``sums[:, rows, fw, :]``. Scenarios by pairs (``[S, m]``), so numpy's inner loops run
    along the pairs; a framework's curve row k is row ``f K + k`` of the frameworks' tables
    side by side."""
    m_all, (n_fw, n_keys, n_months, n_sc) = rows.size, a["pd"].shape
    months = months[fw, rows]
    take = lambda name: a[name][rows]  # noqa: E731
    taken = lambda name: a[name][fw, rows]  # noqa: E731
    balance, lgd, code = take("balance"), take("lgd"), take("code")
    growth, pay = path_terms_array(code, balance, take("rate"), take("level_payment"), taken("paydown"))
    add, add_months, add_after, v = taken("ead_add"), taken("add_months"), taken("add_after"), taken("discount")
    key, prepay, offset, scale = fw * n_keys + taken("curve"), taken("prepay"), take("prepay_offset"), take("pd_scale")
    q = take("refinance_pd")
    maturity = np.where((q > 0.0) & (code != REVOLVING), take("months_left") - 1, -1)
    collateral = take("collateral")
    secured = bool(collateral[0] > 0.0)
    if secured:
        terms = (take("haircut"), take("recovery_cost"), take("lgd_floor"), taken("recovery_discount"), take("cure"))
    # the tables month-major, scenarios before the frameworks' keys: a month's rows for the
    # pairs are one gather
    pd_t = np.ascontiguousarray(a["pd"].transpose(2, 3, 0, 1).reshape(n_months, n_sc, n_fw * n_keys))  # [T, S, F K]
    index_t = np.ascontiguousarray(a["collateral_index"].transpose(2, 3, 0, 1).reshape(
        n_months, n_sc, n_fw * n_keys)) if secured else None
    one = bool((fw == fw[0]).all())  # one framework: its multipliers broadcast along the pairs
    multiplier = a["lgd_multiplier"][fw[0]][:, :, None] if one else \
        np.ascontiguousarray(a["lgd_multiplier"].transpose(1, 2, 0))  # [T, S, 1] or [T, S, F]
    smm = a["smm"].ravel()
    smm_at = prepay * a["smm"].shape[1] + offset  # month t's SMM of a loan: smm[smm_at + t]
    # the loans that reach their maturity month within their horizon, by that month
    ends = np.flatnonzero((maturity >= 0) & (maturity < months))
    due_in = {int(t): ends[maturity[ends] == t] for t in np.unique(maturity[ends])}
    scaled = bool((scale != 1.0).any())
    adds = bool((add != 0.0).any() or (add_after != 0.0).any())  # an exposure beyond the balance
    df = np.ones(m_all)
    alive = np.ones((n_sc, m_all))
    exposed, net, cum = np.zeros((n_sc, m_all)), np.zeros((n_sc, m_all)), np.zeros((n_sc, m_all))
    exposed_12, net_12, cum_12 = np.zeros((n_sc, m_all)), np.zeros((n_sc, m_all)), np.zeros((n_sc, m_all))
    share, part = np.empty((n_sc, m_all)), np.empty((n_sc, m_all))
    for t, m, bal in balances_by_month(balance, growth, pay, take("io_left"), months):
        dfm = df[:m]
        dfm *= v[:m]
        exposure = bal + np.where(t < add_months[:m], add[:m], add_after[:m]) if adds else bal
        weight = exposure * dfm
        keep = 1.0 - smm.take(smm_at[:m] + t)
        hazard = pd_t[t].take(key[:m], axis=1)
        if scaled:
            hazard *= scale[:m]
            np.minimum(hazard, 1.0, out=hazard)
        sh, pa, al = share[:, :m], part[:, :m], alive[:, :m]
        np.multiply(al, hazard, out=sh)  # d_t = S_{t-1} pd_t
        np.multiply(sh, weight, out=pa)  # d_t w_t
        exposed[:, :m] += pa
        cum[:, :m] += sh
        al -= sh
        al *= keep
        if secured:  # the collateral at the month's index, as loss_given_default takes it
            haircut, cost, floor, recovery, cure = (term[:m] for term in terms)
            value = index_t[t].take(key[:m], axis=1)
            value *= collateral[:m]
            loss_rate = collateral_lgd(exposure, value, haircut, cost, floor, recovery, cure,
                                       multiplier[t] if one else multiplier[t].take(fw[:m], axis=1))
            pa *= loss_rate  # d_t w_t LGD_t (d_t w_t is in E already)
            net[:, :m] += pa
        elif not unit:
            loss_rate = np.minimum(1.0, lgd[:m] * (multiplier[t] if one else multiplier[t].take(fw[:m], axis=1)))
            net[:, :m] += pa * loss_rate
        due = due_in.get(t)
        if due is not None:  # refinance risk: of the loans still outstanding, S_T q cannot repay
            failed = refinance_default(alive[:, due], q[due])
            exposed[:, due] += failed * weight[due]
            cum[:, due] += failed
            alive[:, due] -= failed
            if secured or not unit:
                net[:, due] += failed * weight[due] * loss_rate[:, due]
        if t == 11:  # end of month 12: the 12-month figures
            exposed_12[:, :m], net_12[:, :m], cum_12[:, :m] = exposed[:, :m], net[:, :m], cum[:, :m]
    short = months < 12  # a horizon under 12 months: its 12-month figures are its lifetime ones
    exposed_12[:, short], net_12[:, short], cum_12[:, short] = exposed[:, short], net[:, short], cum[:, short]
    if not secured and unit:  # a flat LGD on a unit path: N = min(1, LGD) E
        flat = np.minimum(1.0, lgd)
        net, net_12 = flat * exposed, flat * exposed_12
    interest = taken("interest")
    for row, values in ((ECL_12M, net_12 + interest * exposed_12), (ECL_LIFETIME, net + interest * exposed),
                        (PD_12M, cum_12), (PD_LIFETIME, cum), (GROSS_12M, (1.0 + interest) * exposed_12),
                        (GROSS_LIFETIME, (1.0 + interest) * exposed)):
        sums[row, rows, fw, :] = values.T


def _defaulted_losses(a: dict[str, np.ndarray], sums: np.ndarray) -> None:
    """LGD × EAD_0 of the loans whose loss event is certain now, again in plain numpy.

    The loop computes the same figure, but under fast-math the compiler may fuse its few
    products differently with one scenario than with several; a product of round figures can
    land on a half cent, and a rerun of one scenario alone must give the cents of its column
    in the weighted run. Elementwise numpy rounds every operation the same way every time.
    """
    f, i = np.nonzero(a["in_default"])
    if not f.size:
        return
    ead = a["balance"][i] + a["ead_add"][f, i]
    multiplier = a["lgd_multiplier"][f, 0, :]  # [m, S]
    value = a["collateral"][i][:, None] * a["collateral_index"][f, a["curve"][f, i], 0, :]
    column = lambda name: a[name][i][:, None]  # noqa: E731
    secured = collateral_lgd(ead[:, None], value, column("haircut"), column("recovery_cost"), column("lgd_floor"),
                             a["recovery_discount"][f, i][:, None], column("cure"), multiplier)
    flat = np.minimum(1.0, column("lgd") * multiplier)
    loss = ead[:, None] * np.where(column("collateral") > 0.0, secured, flat)
    sums[ECL_12M, i, f] = sums[ECL_LIFETIME, i, f] = loss
    sums[GROSS_12M, i, f] = sums[GROSS_LIFETIME, i, f] = ead[:, None]


#: Columns of :func:`loan_months`.
MONTH_COLUMNS: tuple[str, ...] = (
    "month", "ead", "survival_opening", "marginal_pd", "refinance_pd", "default_share", "lgd", "discount_factor",
    "gross_loss", "ecl",
)


def loan_months(inputs: KernelInputs, i: int, f: int, s: int, horizon: int | None = None) -> pd.DataFrame:
    """One loan's expected loss month by month, as the loop sums it (for people to check).

    Columns (:data:`MONTH_COLUMNS`): ``month``; ``ead`` (exposure at the start of the month);
    ``survival_opening`` (:math:`S_{t-1}`, no default before the month; named apart from the
    schedule's ``survival``, which also removes prepayments, so that the two sit side by side); ``marginal_pd``; ``refinance_pd`` (q in the maturity
    month); ``default_share`` (:math:`S_{t-1} pd_t`, plus the refinance failures at maturity);
    ``lgd``; ``discount_factor``; ``gross_loss`` and ``ecl`` (the month's share of the gross
    and the net loss, discounted). A loan whose loss event is certain now has one row, month 0:
    PD 1, ECL = LGD × EAD. ``horizon`` cuts the months (an IFRS 9 stage 1 loan: 12); the
    ``ecl`` column then sums to the loop's figure over that horizon. The same concept functions
    as the loop (one loan, so plain Python: not a hot path).

    Examples
    --------
    >>> one = lambda v, dt=float: np.array([v], dtype=dt)
    >>> k = KernelInputs(
    ...     code=one(0, np.int64), balance=one(1_200.0), rate=one(0.0), months_left=one(3, np.int64),
    ...     io_left=one(0, np.int64), residual=one(0.0), payment=one(np.nan),
    ...     curve=np.zeros((1, 1), np.int64), prepay=one(0, np.int64), prepay_offset=one(0, np.int64),
    ...     in_default=np.zeros((1, 1), np.bool_), lgd=one(0.5), collateral=one(0.0), haircut=one(0.0),
    ...     recovery_cost=one(0.0), lgd_floor=one(0.0), recovery_discount=np.ones((1, 1)), cure=one(0.0),
    ...     refinance_pd=one(0.0), horizon=np.full((1, 1), 3, np.int64), ead_add=np.zeros((1, 1)),
    ...     paydown=np.zeros((1, 1)), discount=np.ones((1, 1)), interest=np.zeros((1, 1)),
    ...     pd=np.full((1, 1, 12, 1), 0.01), smm=np.zeros((1, 12)),
    ...     lgd_multiplier=np.ones((1, 12, 1)), collateral_index=np.ones((1, 1, 12, 1)))
    >>> m = loan_months(k, 0, 0, 0)
    >>> print(m[["month", "ead", "default_share", "ecl"]].round(4).to_string(index=False))
     month    ead  default_share    ecl
         1 1200.0         0.0100 6.0000
         2  800.0         0.0099 3.9600
         3  400.0         0.0098 1.9602
    >>> round(float(m["ecl"].sum()), 9) == round(float(expected_losses(k).ecl_lifetime[0, 0, 0]), 9)
    True
    """
    a = dict(zip(_FIELDS, _checked_arrays(inputs)))
    code, balance, rate = int(a["code"][i]), float(a["balance"][i]), float(a["rate"][i])
    months_left, io_left, k = int(a["months_left"][i]), int(a["io_left"][i]), int(a["curve"][f, i])
    add, v, interest = float(a["ead_add"][f, i]), float(a["discount"][f, i]), float(a["interest"][f, i])
    p, off, q = int(a["prepay"][f, i]), int(a["prepay_offset"][i]), float(a["refinance_pd"][i])
    add_months, add_after = int(a["add_months"][f, i]), float(a["add_after"][f, i])
    scale = float(a["pd_scale"][i])

    def lgd_at(ead: float, t: int) -> float:
        return loss_given_default(
            ead, float(a["lgd"][i]), float(a["collateral"][i]), float(a["collateral_index"][f, k, t, s]),
            float(a["haircut"][i]), float(a["recovery_cost"][i]), float(a["lgd_floor"][i]),
            float(a["recovery_discount"][f, i]), float(a["cure"][i]), float(a["lgd_multiplier"][f, t, s]),
        )

    if a["in_default"][f, i]:
        ead = balance + add
        lgd = lgd_at(ead, 0)
        return _month_frame([[0, ead, 1.0, 1.0, 0.0, 1.0, lgd, 1.0, ead, ead * lgd]])
    level = contractual_payment(code, balance, rate, months_left, io_left, float(a["residual"][i]),
                                float(a["payment"][i]))
    growth, pay = path_terms(code, balance, rate, level, float(a["paydown"][f, i]))
    h = int(a["horizon"][f, i]) if code == REVOLVING else min(int(a["horizon"][f, i]), months_left)
    maturity = months_left - 1 if (q > 0.0 and code != REVOLVING) else -1
    rows, x, annuity, df, alive = [], 1.0, 0.0, 1.0, 1.0
    for t in range(h if horizon is None else min(h, horizon)):
        if t < io_left:
            bal = balance
        else:
            bal = balance_on_path(balance, x, annuity, pay)
            x *= growth
            annuity = annuity * growth + 1.0
        ead, df = bal + (add if t < add_months else add_after), df * v
        lgd = lgd_at(ead, t)
        start, marginal = alive, min(float(a["pd"][f, k, t, s]) * scale, 1.0)  # the loan's own PD level, as the loop
        share = alive * marginal
        alive = (alive - share) * (1.0 - float(a["smm"][p, off + t]))
        if t == maturity:
            failed = refinance_default(alive, q)
            share, alive = share + failed, alive - failed
        rows.append([t + 1, ead, start, marginal, q if t == maturity else 0.0, share, lgd, df,
                     share * default_loss(ead, 1.0, interest) * df, share * default_loss(ead, lgd, interest) * df])
    return _month_frame(rows)


def _month_frame(rows: list[list[float]]) -> "pd.DataFrame":
    """:func:`loan_months`' rows as its frame, built from columns (a frame made from the rows and
    then cast took 2-3 ms a loan, most of the schedule sample's time)."""
    import pandas as pd

    values = np.array(rows, dtype=np.float64).reshape(len(rows), len(MONTH_COLUMNS))
    columns = {name: values[:, j] for j, name in enumerate(MONTH_COLUMNS)}
    columns["month"] = values[:, 0].astype(np.int64)
    return pd.DataFrame(columns)


_FIELDS = [f.name for f in fields(KernelInputs)]
#: The fields of :class:`KernelInputs` given per framework and loan, shape ``[F, n]``.
PER_FRAMEWORK: tuple[str, ...] = (
    "curve", "in_default", "recovery_discount", "horizon", "ead_add", "paydown", "discount", "interest", "prepay",
    "add_months", "add_after",
)
_INTEGER = {"code", "months_left", "io_left", "curve", "prepay", "prepay_offset", "horizon", "add_months"}


def _checked_arrays(inputs: KernelInputs) -> list[np.ndarray]:
    """The inputs as contiguous arrays of the compiled types, in field order, after the checks
    that keep the loop's unchecked indexing inside its tables.

    One set of dtypes means one compiled signature (a new one would compile for seconds).
    """
    out = []
    for field in fields(KernelInputs):
        value = getattr(inputs, field.name)
        if field.name == "pd_scale" and value is None:  # the curves as they are
            value = np.ones(np.shape(inputs.balance)[0])
        if field.name == "add_months" and value is None:  # the add-on in every month
            value = np.full(np.shape(inputs.horizon), np.iinfo(np.int64).max)
        if field.name == "add_after" and value is None:  # nothing after the add-on's months
            value = np.zeros(np.shape(inputs.horizon))
        if field.name == "prepay" and np.ndim(value) == 1:  # one row per loan, the same in every framework
            value = np.broadcast_to(value, np.shape(inputs.horizon))
        dtype = np.int64 if field.name in _INTEGER else (np.bool_ if field.name == "in_default" else np.float64)
        array = np.ascontiguousarray(value, dtype=dtype)
        # read-only-ness is part of a compiled signature: a read-only view (an Arrow-backed
        # column) and a writable array would each compile the loop (12-16 s); one kind, one compile
        out.append(array if array.flags.writeable else array.copy())
    a = dict(zip([f.name for f in fields(KernelInputs)], out))
    n = a["balance"].shape[0]
    n_fw, n_keys, n_months, n_sc = a["pd"].shape
    problems = []
    for name in PER_FRAMEWORK:
        if a[name].shape != (n_fw, n):
            problems.append(f"{name} has shape {a[name].shape}, not (frameworks, loans) = {(n_fw, n)}")
    if a["lgd_multiplier"].shape != (n_fw, n_months, n_sc):
        problems.append(f"lgd_multiplier has shape {a['lgd_multiplier'].shape}, not {(n_fw, n_months, n_sc)}")
    if a["collateral_index"].shape != (n_fw, n_keys, n_months, n_sc):
        problems.append(f"collateral_index has shape {a['collateral_index'].shape}, not {(n_fw, n_keys, n_months, n_sc)}")
    if n and not problems:
        if a["horizon"].min() < 0 or a["horizon"].max() > n_months:
            problems.append(f"a horizon lies outside 0..{n_months} (the months of the PD table)")
        if a["curve"].min() < 0 or a["curve"].max() >= n_keys:
            problems.append(f"a curve key lies outside 0..{n_keys - 1}")
        if a["prepay"].min() < 0 or a["prepay"].max() >= a["smm"].shape[0]:
            problems.append("a prepayment row lies outside the SMM table")
        if a["prepay_offset"].min() < 0 or (a["prepay_offset"] + a["horizon"].max(axis=0)).max() > a["smm"].shape[1]:
            problems.append("prepayment offset + horizon runs past the SMM table's columns")
        if a["pd_scale"].shape != (n,) or a["pd_scale"].min() < 0:
            problems.append("pd_scale must be one number >= 0 per loan")
    for name, value in a.items():
        # NaN is allowed only where it means "not given" (the tape payment)
        if value.dtype == np.float64 and name != "payment" and not np.isfinite(value).all():
            where = np.argwhere(~np.isfinite(value))[0].tolist()
            problems.append(f"{name} holds NaN or inf at {where} (the engine fills blanks before the loop)")
    if problems:
        raise InvalidInputError("KernelInputs: " + "; ".join(problems))
    return out
