"""One chunk of loans: their terms at the as-of date, their stages, and the fused ECL loop.

:func:`run_chunk` is a pure function of a chunk of accepted loans and the book-level tables
(:class:`~allowance.engine.tables.Prepared`); it returns a frozen :class:`ChunkResult`. That
is the boundary an executor's ``map`` crosses: in-process, to a process pool or to a cluster.

Implements
----------
LoanTerms    each loan's state and segment parameters, as the loop reads them (looked up once)
loan_terms   remaining term, seasoning, schedule inputs, curve rows, the loan's own PD level
             and segment parameters
ChunkInputs  what the loop reads for a chunk (chunk_inputs builds it)
ChunkResult  the modelled (unrounded) loan results and the engine's findings for a chunk
run_chunk    a chunk of loans -> ChunkResult
modelled_chunk  a chunk of loans -> its modelled ECL per framework alone

Purchased or originated credit-impaired loans (POCI / PCD) take two more passes of the loop,
at their PD at purchase, today (R) and at the purchase date (Q), so that their IFRS 9
allowance is the change in lifetime ECL since purchase (:mod:`allowance.poci`).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from allowance import cashflows, curves, individual, loss_rates, poci, scenarios, staging
from allowance.curves.ead import accrued_exposure
from allowance.curves.refinance import maturity_ltv, refinance_pd
from allowance.discounting import monthly_rate
from allowance.ecl import KernelInputs, KernelResult, expected_losses_together
from allowance.engine.tables import (
    Prepared, age_months, commitment_months, months_held, off_balance, remaining_life, revolving_parameter, runoff_horizon,
)
from allowance.exceptions import AssumptionsError

__all__ = ["ChunkInputs", "ChunkResult", "LoanTerms", "chunk_inputs", "loan_terms", "modelled_chunk", "run_chunk"]


@dataclass(frozen=True)
class LoanTerms:
    """Each loan's state at the as-of date, as the fused loop reads it (arrays of length n).

    The segment parameters (``lgd`` to ``months_to_recovery``) are taken from the book's
    :class:`~allowance.engine.tables.SegmentTable` by each loan's segment code, once.
    """

    segment: np.ndarray  # segment code: the row of the book's SegmentTable
    repayment: np.ndarray | pd.api.extensions.ExtensionArray  # text per loan
    code: np.ndarray
    balance: np.ndarray
    rate: np.ndarray  # monthly contract rate
    eir: np.ndarray  # nominal annual, defaulted to the contract rate
    age: np.ndarray
    behavioural: np.ndarray
    remaining: np.ndarray
    held: np.ndarray  # months a delinquent loan pays nothing on its way to its loss event
    draw_left: np.ndarray  # HELOCs: months of the draw period left (0 for other loans)
    io_left: np.ndarray
    residual: np.ndarray
    payment: np.ndarray
    curve: np.ndarray
    prepay: np.ndarray
    prepay_offset: np.ndarray
    lgd: np.ndarray  # flat LGD after cures
    cure: np.ndarray
    ccf: np.ndarray  # the line's CCF (by its days-past-due bucket where the segment states ccf_by_dpd); NaN unstated
    cancellable: np.ndarray  # 1.0 unconditionally cancellable, 0.0 not, NaN unstated
    off_balance: np.ndarray  # bool: a standalone commitment or guarantee (facility_type), nothing drawn
    commitment: np.ndarray  # months of the contractual commitment period left (0: no commitment_end_date)
    collateral: np.ndarray  # 0 where the loan has none or its segment has no collateral LGD
    haircut: np.ndarray
    recovery_cost: np.ndarray
    lgd_floor: np.ndarray
    months_to_recovery: np.ndarray
    refinance_pd: np.ndarray  # q at maturity (0: none)
    refinance_unknown: np.ndarray  # bool: q taken at the riskiest band (no collateral value or coverage)
    pd_scale: np.ndarray  # the loan's own PD level against its curve row (1: the curve as it is)


def _number(chunk: pd.DataFrame, column: str) -> np.ndarray:
    """An optional numeric tape column (NaN where blank or absent)."""
    if column not in chunk.columns:
        return np.full(len(chunk), np.nan)
    return chunk[column].to_numpy(dtype=float, na_value=np.nan)


def _flag(chunk: pd.DataFrame, column: str) -> np.ndarray:
    return chunk[column].to_numpy(dtype=bool) if column in chunk.columns else np.zeros(len(chunk), dtype=bool)


def _own_pd(chunk: pd.DataFrame) -> np.ndarray:
    """Each loan's own 12-month PD today: ``pd_12m_current``; for a POCI loan without one, its PD
    at purchase (a credit-impaired purchase is never priced at its pool's performing PD, and
    with no newer score its risk is taken as unchanged since purchase); NaN: the curve's own."""
    now = _number(chunk, "pd_12m_current")
    bought = _number(chunk, "pd_12m_at_origination")
    return np.where(np.isnan(now) & _flag(chunk, "credit_impaired_at_purchase"), bought, now)


def _pd_scale(prep: Prepared, curve: np.ndarray, own: np.ndarray) -> np.ndarray:
    """:func:`allowance.curves.loan_pd_scale` of the loans that have their own 12-month PD; 1
    for the rest (their curve row as it is).

    The scale is solved row by row, so it is solved once for each distinct pair of curve row
    and own PD and given to every loan of the pair: the same figures, and where PDs come from
    a rating scale (a few dozen values) a fraction of the Newton steps."""
    scale = np.ones(len(own))
    has = np.flatnonzero(~np.isnan(own))
    if not has.size:
        return scale
    own_code, own_values = pd.factorize(own[has])
    pair_code, pairs = pd.factorize(curve[has] * len(own_values) + own_code)
    solved = curves.loan_pd_scale(prep.pd_first_year[pairs // len(own_values)], own_values[pairs % len(own_values)])
    scale[has] = solved[pair_code]
    return scale


def _curve_keys(chunk: pd.DataFrame, prep: Prepared, segment: np.ndarray, age: np.ndarray | None = None) -> np.ndarray:
    """Row of the stacked PD table for every loan (by segment, grade or DPD bucket); ``age``:
    each loan's age in months when the caller has it (:func:`allowance.cashflows.age_months`)."""
    out = np.zeros(len(chunk), dtype=np.int64)
    for j, (name, ts) in enumerate(prep.structures.items()):
        mask = segment == j
        if not mask.any():
            continue
        seg = prep.config.assumptions.segments[name]
        if ts.source == "transition_matrix":
            local = curves.bucket_index(chunk["days_past_due"].to_numpy()[mask], seg.charge_off_dpd)
        elif ts.source == "pd_curve_by_age":  # one row per whole month of age at the as-of date
            months = (age[mask] if age is not None
                      else age_months(chunk["origination_date"][mask], pd.Timestamp(prep.config.as_of)))
            local = np.minimum(months, len(ts.keys) - 1)
        elif ts.source.endswith("_by_grade"):
            local = ts.key_index(chunk["grade"].array[mask])
        else:
            local = np.zeros(mask.sum(), dtype=np.int64)
        out[mask] = prep.key_offset[name] + local
    return out


def _prepay_keys(prep: Prepared, segment: np.ndarray, curve: np.ndarray, age: np.ndarray):
    """Row and first column of the SMM table for every loan (by age, or by roll-rate bucket)."""
    row = np.zeros(len(segment), dtype=np.int64)
    offset = np.zeros(len(segment), dtype=np.int64)
    for j, (name, ts) in enumerate(prep.structures.items()):
        mask = segment == j
        if not mask.any():
            continue
        if ts.smm is not None and np.any(ts.smm > 0):
            row[mask] = prep.prepay_row[name] + (curve[mask] - prep.key_offset[name])
        else:
            row[mask] = prep.prepay_row[name]
            offset[mask] = age[mask]
    return row, offset


def _residual(chunk: pd.DataFrame, amortization: np.ndarray, rate, months_left, age) -> np.ndarray:
    """Balloon loans: the amount due at maturity (the tape's, or from the amortization term)."""
    balloon = (chunk["repayment"] == "balloon").to_numpy()
    given = chunk["balloon_amount"].to_numpy(dtype=float)
    amort = chunk["amortization_months"].to_numpy(dtype=float)
    amort = np.where(np.isnan(amort), amortization, amort)
    lacking = balloon & np.isnan(given) & np.isnan(amort)
    if lacking.any():  # intake rejects such rows; a direct caller of the engine gets this
        seg = chunk["segment"].to_numpy()[lacking][0]
        raise AssumptionsError(
            f"balloon loans in segment {seg!r} give neither balloon_amount nor amortization_months",
            column=f"segments.{seg}.amortization_months",
            hint="add amortization_months to the segment, or the tape columns balloon_amount / amortization_months",
        )
    balance = chunk["balance"].to_numpy(float)
    residual = np.zeros(len(chunk))
    by_term = balloon & np.isnan(given)
    residual[by_term] = cashflows.balloon_residual(
        balance[by_term], rate[by_term], months_left[by_term], amort[by_term] - age[by_term]
    )
    residual[balloon & ~by_term] = given[balloon & ~by_term]
    return np.minimum(residual, balance)


def _refinance(chunk: pd.DataFrame, prep: Prepared, segment, code, residual, balance, io_left, remaining):
    """Refinance-failure probability at maturity per loan, and the loans taken at the riskiest
    band for want of a collateral value or a coverage (:mod:`allowance.curves.refinance`)."""
    q, unknown = np.zeros(len(chunk)), np.zeros(len(chunk), dtype=bool)
    collateral = chunk["collateral_value"].to_numpy(float)
    coverage = chunk["debt_service_coverage"].to_numpy(float)
    for j, name in enumerate(prep.segments.names):
        risk = prep.config.assumptions.segments[name].refinance_risk
        if risk is None:
            continue
        # balance due at maturity: the balloon, or the whole balance of a loan interest-only to the end
        due = np.where(code == cashflows.BALLOON, residual,
                       np.where((code == cashflows.INTEREST_ONLY) & (io_left >= remaining), balance, 0.0))
        mask = (segment == j) & (due > 0.0)
        if not mask.any():
            continue
        ltv = maturity_ltv(due[mask], collateral[mask])
        q[mask] = refinance_pd(ltv, risk.ltv_bands, risk.pd, coverage[mask], risk.dscr_bands)
        unknown[mask] = ~np.isfinite(ltv) | ((risk.dscr_bands is not None) & np.isnan(coverage[mask]))
    return q, unknown


def loan_terms(chunk: pd.DataFrame, prep: Prepared) -> LoanTerms:
    """Remaining term, seasoning, repayment schedule inputs, curve rows and segment parameters."""
    table = prep.segments
    as_of = pd.Timestamp(prep.config.as_of)
    segment = table.codes(chunk["segment"])  # the one segment lookup of the chunk
    repayment = chunk["repayment"].array  # Arrow text: no Python object per loan
    kinds, names = pd.factorize(chunk["repayment"])
    code = np.array([cashflows.REPAYMENT_CODES[k] for k in names] + [0], dtype=np.int64)[kinds]
    rate = monthly_rate(chunk["interest_rate"].to_numpy(float))
    eir = chunk["eir"].to_numpy(float)
    eir = np.where(np.isnan(eir), chunk["interest_rate"].to_numpy(float), eir)
    # a POCI loan's losses are discounted at its credit-adjusted EIR (IFRS 9 B5.5.45)
    adjusted = _number(chunk, "credit_adjusted_eir")
    eir = np.where(_flag(chunk, "credit_impaired_at_purchase") & ~np.isnan(adjusted), adjusted, eir)
    age = age_months(chunk["origination_date"], as_of)
    behavioural = revolving_parameter(chunk, table, segment, "behavioural_life").astype(np.int64)
    commitment = commitment_months(chunk, as_of)  # the dates read once
    remaining = remaining_life(chunk, as_of, behavioural, commitment)
    io_months = chunk["interest_only_months"].to_numpy(float)
    # a HELOC pays interest only through its draw period, then amortises over its repayment period
    draw_left = np.where(code == cashflows.HELOC,
                         np.maximum(np.nan_to_num(_number(chunk, "draw_period_months")) - age, 0), 0).astype(np.int64)
    draw_left = np.minimum(draw_left, np.maximum(remaining - 1, 0))  # intake refuses a draw period to maturity
    io_left = np.where(
        code == cashflows.INTEREST_ONLY,
        np.where(np.isnan(io_months), remaining, np.maximum(np.nan_to_num(io_months) - age, 0)),
        draw_left,
    ).astype(np.int64)
    # a delinquent loan pays nothing on its way to its loss event: its balance is held as in
    # interest-only months (the charge-off threshold of a roll-rate segment, else the default one)
    held = months_held(chunk, prep.config, table, segment, remaining)
    io_left = np.maximum(io_left, held)
    curve = _curve_keys(chunk, prep, segment, age)
    prepay, prepay_offset = _prepay_keys(prep, segment, curve, age)
    secured = table.collateral[segment]
    residual = _residual(chunk, table.amortization_months[segment], rate, remaining, age)
    balance = chunk["balance"].to_numpy(float)
    q, unknown = _refinance(chunk, prep, segment, code, residual, balance, io_left, remaining)
    ccf = table.ccf[segment]
    dpd = chunk["days_past_due"].to_numpy()
    for j, buckets in enumerate(table.ccf_by_dpd):  # a CCF by days-past-due bucket (ccf is a copy)
        mask = segment == j
        if buckets is not None and mask.any():
            ccf[mask] = curves.ccf_by_days_past_due(dpd[mask], *buckets)
    return LoanTerms(
        segment=segment, repayment=repayment, code=code, balance=chunk["balance"].to_numpy(float), rate=rate,
        eir=eir, age=age, behavioural=behavioural, remaining=remaining, held=held, draw_left=draw_left,
        io_left=io_left,
        residual=residual,
        payment=np.where(code == cashflows.LEVEL, chunk["payment"].to_numpy(float), np.nan),
        curve=curve, prepay=prepay, prepay_offset=prepay_offset,
        lgd=table.lgd[segment], cure=table.cure_rate[segment], ccf=ccf,
        cancellable=table.cancellable[segment], off_balance=off_balance(chunk),
        commitment=commitment,
        collateral=np.where(secured, np.nan_to_num(chunk["collateral_value"].to_numpy(float)), 0.0),
        haircut=table.haircut[segment], recovery_cost=table.recovery_cost[segment], lgd_floor=table.lgd_floor[segment],
        months_to_recovery=table.months_to_recovery[segment], refinance_pd=q, refinance_unknown=unknown,
        # the loan's own 12-month PD (e.g. a behavioural score) sets the level of its curve row
        pd_scale=_pd_scale(prep, curve, _own_pd(chunk)),
    )


@dataclass(frozen=True)
class ChunkResult:
    """What :func:`run_chunk` returns for a chunk of loans.

    columns   one array per loan-result column, one entry per loan in the chunk's order:
              stage, horizons, EAD, PDs, LGD, ECL per framework and scenario, the modelled
              weighted ECL and the expected gross credit loss (``gross_loss_<framework>``),
              unrounded. The loop's arrays as they are: the book's frame is built once from
              every chunk's columns (:func:`allowance.engine.run`), not a frame per chunk
    index     the chunk's index (the tape's labels of its rows)
    findings  the engine's findings on these loans (``payment_short`` warnings), in the
              intake findings' columns
    reweighted  the ``columns`` under each of the other scenario weights asked for (see
              :func:`run_chunk`), in the same order
    alone     ``ecl_<framework>_modelled`` (unrounded) under each of the ``alone`` weights
              asked for (:func:`run_chunk`), in the same order: nothing else
    under     ``ecl_<framework>_modelled`` (rounded to cents) under each other configuration's
              own tables asked for (:func:`allowance.engine.run`'s ``modelled_under``), in the
              same order; where those assumptions could not be applied to these loans, the reason
    """

    columns: dict[str, np.ndarray | pd.api.extensions.ExtensionArray]
    index: pd.Index
    findings: pd.DataFrame
    reweighted: tuple[dict[str, np.ndarray | pd.api.extensions.ExtensionArray], ...] = ()
    alone: tuple[dict[str, np.ndarray], ...] = ()
    under: tuple[dict[str, np.ndarray] | str, ...] = ()

    @property
    def loans(self) -> pd.DataFrame:
        """The columns as a frame over the chunk's index."""
        return pd.DataFrame(self.columns, index=self.index, copy=False)


@dataclass(frozen=True)
class _Frameworks:
    """Per framework and loan ``[F, n]``: what the loop reads besides the loan terms."""

    curve: np.ndarray
    in_default: np.ndarray
    recovery_discount: np.ndarray
    horizon: np.ndarray
    ead_add: np.ndarray
    paydown: np.ndarray
    discount: np.ndarray
    interest: np.ndarray
    undrawn_add: np.ndarray  # the part of ead_add that is CCF × undrawn (the rest: accrued interest)
    prepay: np.ndarray  # the row of the SMM table
    add_months: np.ndarray  # the months in which undrawn_add is exposure (accrued interest: every month)


def _undrawn_amounts(chunk: pd.DataFrame, terms: LoanTerms, prep: Prepared) -> tuple[np.ndarray, np.ndarray]:
    """Each row's limit (a line's credit limit, a commitment's or guarantee's amount; a term
    loan's balance) and its undrawn amount, after checking that every segment holding undrawn
    amounts states its CCF and whether the lender can cancel them (intake refuses such a
    segment first; a direct caller of the engine gets this)."""
    # the undrawn limit is exposure on a revolving line, on a HELOC through its draw period, and
    # the whole amount of a commitment or guarantee
    lines = (terms.repayment == "revolving") | (terms.draw_left > 0) | terms.off_balance
    limit = np.where(lines, np.nan_to_num(chunk["credit_limit"].to_numpy(float)), terms.balance)
    undrawn = np.maximum(limit - terms.balance, 0.0)
    for key, values in (("ccf", terms.ccf), ("unconditionally_cancellable", terms.cancellable)):
        lacking = (undrawn > 0) & np.isnan(values)
        if lacking.any():
            seg = chunk["segment"].to_numpy()[lacking][0]
            raise AssumptionsError(
                f"segment {seg!r} holds undrawn amounts but states no {key}",
                column=f"segments.{seg}.{key}",
                hint=f"state {key} in [segments.{seg}] (ASC 326-20-30-11, IFRS 9 B5.5.31)",
            )
    return limit, undrawn


def _framework_inputs(chunk: pd.DataFrame, terms: LoanTerms, stage: np.ndarray | None, prep: Prepared) -> _Frameworks:
    a = prep.config.assumptions
    n, n_fw = len(chunk), len(prep.rules)
    limit, undrawn = _undrawn_amounts(chunk, terms, prep)
    cancellable = np.nan_to_num(terms.cancellable, nan=1.0) > 0  # NaN only where nothing is undrawn
    ccf = np.nan_to_num(terms.ccf)
    revolving = terms.repayment == "revolving"
    committed = np.zeros(n, dtype=bool)
    out = _Frameworks(
        curve=np.tile(terms.curve, (n_fw, 1)),
        in_default=np.zeros((n_fw, n), dtype=np.bool_), recovery_discount=np.ones((n_fw, n)),
        horizon=np.zeros((n_fw, n), dtype=np.int64),
        ead_add=np.zeros((n_fw, n)), paydown=np.zeros((n_fw, n)), discount=np.ones((n_fw, n)),
        interest=np.zeros((n_fw, n)), undrawn_add=np.zeros((n_fw, n)), prepay=np.tile(terms.prepay, (n_fw, 1)),
        add_months=np.tile(np.where(revolving, terms.behavioural,
                                    np.where(terms.code == cashflows.HELOC, terms.draw_left, terms.remaining)), (n_fw, 1)),
    )
    # one default definition: a roll-rate loan in default keeps its bucket's chance of reaching
    # charge-off unless it is past the threshold or flagged (staging.loss_event_now)
    charge_off = _by_segment(terms, prep, lambda s: (s.charge_off_dpd or 0) if s.pd_source == "transition_matrix"
                             else 0, 0).astype(np.int64)
    flagged = chunk["defaulted"].to_numpy(bool) | chunk["bankrupt"].to_numpy(bool)
    dpd = chunk["days_past_due"].to_numpy()
    probation_row = np.array([prep.probation_key.get(n, -1) for n in prep.segments.names] + [-1],
                             dtype=np.int64)[terms.segment]
    for f, rules in enumerate(prep.rules):
        credit_impaired = rules.in_default(chunk, stage, a)
        default_now = rules.default_test(chunk, a)
        out.in_default[f] = credit_impaired & staging.loss_event_now(default_now, flagged, dpd, charge_off)
        # on probation out of stage 3 (credit-impaired class, no longer in default): the stated
        # probation PD where there is one, else the segment's own PD for the loan
        on_probation = credit_impaired & ~default_now & (probation_row >= 0)
        out.curve[f] = np.where(on_probation, probation_row, terms.curve)
        out.recovery_discount[f] = rules.recovery_discount(a, terms.eir, terms.months_to_recovery)
        # the loop runs over the whole life; a 12-month horizon takes its first 12 months
        out.horizon[f] = terms.remaining
        if rules.commitment_period:  # a non-cancellable commitment: its contractual period (ASC 326-20-30-11)
            committed = (undrawn > 0) & ~cancellable & (terms.commitment > 0)
            out.horizon[f] = np.where(committed, terms.commitment, terms.remaining)
        # the months the undrawn amount is exposure: a commitment's period, else a line's behavioural life
        out.add_months[f] = np.where(committed, terms.commitment, out.add_months[f])
        # a line in default is blocked: nothing more is drawn, EAD = drawn (common practice, no
        # source); a commitment or guarantee in default is still called on its CCF
        add_on = rules.exposure_add_on(terms.balance, limit, ccf, cancellable)
        out.undrawn_add[f] = np.where(credit_impaired & ~terms.off_balance, 0.0, add_on)
        out.ead_add[f] = out.undrawn_add[f].copy()
        # accrued interest and arrears in the exposure, as the framework's option says
        out.ead_add[f] += accrued_exposure(chunk["accrued_interest"].to_numpy(float), dpd, rules.accrued_interest(a))
        if rules.revolving_paydown and revolving.any():
            # the measured balance runs off at the payment rate times the share of each payment
            # the allocation policy gives it, to its end or the floor (ASC 326-20-30-6); the
            # payment rate holds the lines that pay in full, so they take no payoff SMM on top
            runoff = rules.runoff(a)
            rate = revolving_parameter(chunk, prep.segments, terms.segment, "payment_rate")
            out.paydown[f] = rate * runoff.measured_share
            add_months = np.where(out.undrawn_add[f] > 0.0, out.add_months[f], 0)
            lines = runoff_horizon(terms.balance, out.paydown[f], terms.held, runoff, add_months)
            out.horizon[f] = np.where(revolving, np.minimum(lines, prep.months), out.horizon[f])
            out.prepay[f] = np.where(revolving, prep.no_prepayment_row, terms.prepay)
        out.discount[f] = rules.discount(a, terms.eir)
        out.interest[f] = rules.shortfall_interest(a, terms.eir)
    return out


def _kernel_inputs(terms: LoanTerms, fw: _Frameworks, prep: Prepared) -> KernelInputs:
    return KernelInputs(
        code=terms.code, balance=terms.balance, rate=terms.rate, months_left=terms.remaining, io_left=terms.io_left,
        residual=terms.residual, payment=terms.payment, curve=fw.curve, prepay=fw.prepay,
        prepay_offset=terms.prepay_offset, in_default=fw.in_default, lgd=np.nan_to_num(terms.lgd),
        collateral=terms.collateral,
        haircut=terms.haircut, recovery_cost=terms.recovery_cost, lgd_floor=terms.lgd_floor,
        recovery_discount=fw.recovery_discount, cure=terms.cure, refinance_pd=terms.refinance_pd, horizon=fw.horizon, ead_add=fw.ead_add,
        paydown=fw.paydown, discount=fw.discount, interest=fw.interest, pd=prep.pd, smm=prep.smm,
        lgd_multiplier=prep.lgd_multiplier,
        collateral_index=prep.collateral_index, pd_scale=terms.pd_scale, add_months=fw.add_months,
        add_after=fw.ead_add - fw.undrawn_add,
    )


#: KernelInputs fields that are book-level tables, not per loan (a subset keeps them whole)
_TABLES = frozenset({"pd", "smm", "lgd_multiplier", "collateral_index"})


def _subset(inputs: KernelInputs, rows: np.ndarray, **changes) -> KernelInputs:
    """The kernel inputs of some loans (per-loan ``[n]`` and per-framework ``[F, n]`` arrays
    taken at ``rows``; the tables whole), with ``changes`` (already of the subset) applied."""
    out = {}
    for field in dataclasses.fields(inputs):
        value = getattr(inputs, field.name)
        if field.name in changes:
            value = changes[field.name]
        elif field.name not in _TABLES and value is not None:
            value = value[:, rows] if np.ndim(value) == 2 else value[rows]
        out[field.name] = value
    return KernelInputs(**out)


@dataclass(frozen=True)
class _Purchase:
    """POCI loans of a chunk, per framework ``[n, F]`` (NaN for other loans).

    carried      B = E0 R / Q: the purchase-date lifetime ECL carried to the reporting date
    at_purchase  E0: the tape's lifetime ECL at purchase, or Q (measured) where blank
    in_period    bought in the reporting period (the PCD gross-up applies to these)
    """

    carried: np.ndarray
    at_purchase: np.ndarray
    in_period: np.ndarray


@dataclass(frozen=True)
class _PurchasePasses:
    """The inputs of the two purchase-date passes (``today``: R, ``then``: Q) of a chunk's POCI
    loans at ``rows``, and what weighting their results needs (:func:`_purchase_views`)."""

    rows: np.ndarray
    today: KernelInputs
    then: KernelInputs
    given: np.ndarray
    in_period: np.ndarray


def _purchase_passes(chunk: pd.DataFrame, terms: LoanTerms, fw: _Frameworks, inputs: KernelInputs,
                     prep: Prepared) -> _PurchasePasses | None:
    """The two purchase-date passes of the loop for the chunk's POCI loans (:mod:`allowance.poci`),
    as inputs (None: no POCI loans); :func:`_purchase_views` weights their results.

    R: today's balance, remaining term and scenario paths at the loan's PD at purchase
    (``pd_12m_at_origination``). Q: the purchase date (the tape's ``origination_date`` of a
    POCI loan): the contractual balance then (:func:`allowance.poci.purchase_balance`), the
    term then, age 0 on age-indexed curves and prepayments, the same PD at purchase and this
    run's scenario paths and LGDs. Both are discounted at the credit-adjusted EIR and are
    lifetime. A loan in default today that was bought in the reporting period is taken to
    have been bought in default (so its day-one allowance is 0); an older one is not. The
    passes are per scenario; only their weighting (the benchmark carried, B = E0 R / Q with R
    and Q probability-weighted, IFRS 9 5.5.13-5.5.14, B5.5.42) depends on the weights.
    """
    flags = _flag(chunk, "credit_impaired_at_purchase")
    rows = np.flatnonzero(flags)
    n = len(chunk)
    if not rows.size:
        return None
    a = prep.config.assumptions
    as_of = prep.config.as_of
    bought = poci.purchased_in_period(pd.DatetimeIndex(chunk["origination_date"].to_numpy()[rows]), as_of,
                                      a.run.period_months)
    scale = _pd_scale(prep, terms.curve[rows], _number(chunk, "pd_12m_at_origination")[rows])
    defaulted = fw.in_default[:, rows] & bought[None, :]
    lifetime = fw.horizon[:, rows].copy()  # the life (a line's run-off where a framework runs it off)
    today = _subset(inputs, rows, in_default=defaulted, horizon=lifetime, pd_scale=scale)

    age = terms.age[rows]
    code = terms.code[rows]
    months = terms.remaining[rows] + age
    # the payment of the months since purchase (a small set of loans: one call each)
    payment = np.array([cashflows.contractual_payment(c, b, q, m, io, res, pay) for c, b, q, m, io, res, pay in zip(
        code, terms.balance[rows], terms.rate[rows], terms.remaining[rows], terms.io_left[rows], terms.residual[rows],
        terms.payment[rows])], dtype=float)
    amortising = (code == cashflows.LEVEL) | (code == cashflows.BALLOON)
    balance = np.where(amortising & (terms.io_left[rows] == 0),
                       poci.purchase_balance(terms.balance[rows], terms.rate[rows], payment, age), terms.balance[rows])
    io_months = _number(chunk, "interest_only_months")[rows]
    draw = np.nan_to_num(_number(chunk, "draw_period_months")[rows])
    io_left = np.where(code == cashflows.INTEREST_ONLY, np.where(np.isnan(io_months), months, io_months),
                       np.where(code == cashflows.HELOC, draw, 0))
    curve = fw.curve[:, rows].copy()
    segment = chunk["segment"].iloc[rows].to_numpy()  # the POCI loans' only: not the chunk's text as objects
    for name, ts in prep.structures.items():  # an age-indexed curve starts again at age 0
        if ts.source == "pd_curve_by_age":
            curve[:, segment == name] = prep.key_offset[name]
    revolving = code == cashflows.REVOLVING
    then = _subset(
        inputs, rows, balance=balance, months_left=np.where(revolving, terms.remaining[rows], months),
        io_left=io_left.astype(np.int64), curve=curve, prepay_offset=np.zeros(rows.size, dtype=np.int64),
        in_default=defaulted, horizon=np.where(revolving[None, :], fw.horizon[:, rows], months[None, :]),
        ead_add=fw.ead_add[:, rows], pd_scale=scale,
    )
    in_period = np.zeros(n, dtype=bool)
    in_period[rows] = bought
    return _PurchasePasses(rows, today, then, _number(chunk, "lifetime_ecl_at_purchase")[rows], in_period)


def _purchase_views(passes: _PurchasePasses | None, r: KernelResult | None, q: KernelResult | None,
                    weights: tuple[np.ndarray, ...]) -> tuple[_Purchase | None, ...]:
    """The POCI loans' purchase views from the results ``r`` and ``q`` of their two passes
    (:func:`_purchase_passes`), weighted by each of ``weights`` in turn (one :class:`_Purchase`
    each; None each where the chunk has no POCI loans): the benchmark carried, B = E0 R / Q
    with R and Q probability-weighted (IFRS 9 5.5.13-5.5.14, B5.5.42)."""
    if passes is None or r is None or q is None:
        return (None,) * len(weights)
    rows, e0, in_period = passes.rows, passes.given, passes.in_period
    n, n_fw = len(in_period), r.ecl_lifetime.shape[1]
    views = []
    for w in weights:
        carried = np.full((n, n_fw), np.nan)
        at_purchase = np.full((n, n_fw), np.nan)
        for f in range(n_fw):
            r_f = scenarios.weighted(r.ecl_lifetime[:, f, :], w)
            q_f = scenarios.weighted(q.ecl_lifetime[:, f, :], w)
            given = np.where(np.isnan(e0), q_f, e0)  # blank: measured at the purchase date
            carried[rows, f] = poci.purchase_benchmark(given, r_f, q_f)
            at_purchase[rows, f] = given
        views.append(_Purchase(carried=carried, at_purchase=at_purchase, in_period=in_period))
    return tuple(views)


def _loan_results(chunk: pd.DataFrame, terms: LoanTerms, stages: pd.DataFrame | None, k: KernelResult,
                  prep: Prepared, purchase: _Purchase | None, fw: _Frameworks,
                  drawn: _DrawnOnly) -> dict[str, np.ndarray | pd.api.extensions.ExtensionArray]:
    """The per-loan columns: the first staged framework leads the shared columns (ead, PDs, LGD).

    ``ecl_<framework>_undrawn`` is the part of the modelled ECL that relates to the undrawn
    commitment (the whole ECL less the ECL on the drawn exposure alone, :func:`_drawn_only`);
    a loan measured one by one has none.
    """
    # the columns are gathered and handed back as arrays: the book's frame is built once from
    # every chunk's (a frame per chunk was built, rounded and joined again); text columns keep
    # their Arrow arrays
    out: dict[str, object] = {
        "loan_id": chunk["loan_id"].array, "segment": chunk["segment"].array,
        "repayment": terms.repayment, "grade": chunk["grade"].array,
        # for the disclosure tables: the vintage and the days-past-due band of each loan
        "origination_date": _iso_dates(chunk["origination_date"]),
        "days_past_due": chunk["days_past_due"].to_numpy()}
    w = prep.weights
    staged = prep.staged
    primary = prep.rules.index(staged) if staged is not None else 0
    lead = prep.rules[primary]
    if stages is not None:
        out["stage"] = stages["stage"].to_numpy()
        out["stage_reason"] = stages["stage_reason"].array
        out["poci"] = stages["poci"].to_numpy()
        out["stage_class"] = stages["stage_class"].array
    else:
        out["poci"] = chunk["credit_impaired_at_purchase"].to_numpy(bool)
    stage = out["stage"] if stages is not None else np.ones(len(chunk), dtype=np.int64)
    out["horizon_months"] = lead.horizon(stage, fw.horizon[primary])
    for rules in prep.rules:  # a framework without stages also shows its own horizon column
        if not rules.staged:
            out[f"horizon_months_{rules.name}"] = rules.horizon(stage, fw.horizon[prep.rules.index(rules)])
    out["remaining_months"] = terms.remaining
    out["balance"] = terms.balance
    out["ead"] = k.ead[:, primary]
    for f, rules in enumerate(prep.rules):
        out[f"ead_{rules.name}"] = k.ead[:, f]
    out["pd_12m"] = scenarios.weighted(k.pd_12m[:, primary, :], w)
    out["pd_lifetime"] = scenarios.weighted(k.pd_lifetime[:, primary, :], w)
    out["lgd"] = k.lgd[:, primary]
    out["ecl_12m"] = scenarios.weighted(k.ecl_12m[:, primary, :], w)
    out["ecl_lifetime"] = scenarios.weighted(k.ecl_lifetime[:, primary, :], w)
    poci_flag = out["poci"]
    n = len(chunk)
    a = prep.config.assumptions
    none = np.full(n, np.nan)
    method, replaced = _individual_measurement(chunk, terms, prep)
    # Arrow text taken from the few labels: a Python string per loan became Arrow text again in
    # each frame built from the column (0.1 s a frame at a million loans)
    out["measurement"] = pd.array(list(individual.MEASUREMENTS), dtype="str").take(method)
    assessed = (method == individual.INDIVIDUAL)[:, None]
    for f, rules in enumerate(prep.rules):
        # the purchase-date lifetime ECL carried to today (NaN for loans not POCI)
        carried = purchase.carried[:, f] if purchase is not None else none
        per_scenario, one_by_one = _allowance(k, f, rules, stage, poci_flag, carried, replaced[f])
        # the expected gross credit loss over the same horizon (LGD = 1: before recoveries);
        # the POCI shift is an allowance convention, not a loss, so it does not apply
        gross = rules.allowance(k.gross_12m[:, f, :], k.gross_lifetime[:, f, :], stage, poci_flag, none)
        # measured one by one: the same amount in every scenario; a collateral-dependent loan
        # stands to lose its amortised cost before the collateral, an assessed one at least its
        # assessment
        amount = replaced[f][:, None]
        dependent = one_by_one & ~assessed
        gross = np.where(dependent, terms.balance[:, None], np.where(one_by_one, np.fmax(gross, amount), gross))
        if f == primary:
            out["ecl_12m"] = np.where(one_by_one[:, 0], replaced[f], out["ecl_12m"])
            out["ecl_lifetime"] = np.where(one_by_one[:, 0], replaced[f], out["ecl_lifetime"])
        for s, name in enumerate(prep.scenario_names):
            out[f"ecl_{rules.name}_{name}"] = per_scenario[:, s]
        out[f"gross_loss_{rules.name}"] = scenarios.weighted(gross, w)
        out[f"ecl_{rules.name}_modelled"] = scenarios.weighted(per_scenario, w)
        # the ECL of the undrawn commitment: the whole less the drawn exposure's (the POCI shift cancels)
        # (loans without an add-on in any framework have none: not measured again)
        at = drawn.rows
        on_drawn = rules.allowance(drawn.ecl_12m[:, f, :], drawn.ecl_lifetime[:, f, :], stage[at], poci_flag[at],
                                   carried[at])
        undrawn = np.zeros(per_scenario.shape)
        undrawn[at] = np.where(one_by_one[at] | (fw.undrawn_add[f, at] <= 0.0)[:, None], 0.0,
                               np.maximum(per_scenario[at] - on_drawn, 0.0))
        out[f"ecl_{rules.name}_undrawn"] = scenarios.weighted(undrawn, w)
        # the annual rate that discounted the allowance (0: undiscounted), for the unwind line
        out[f"discount_rate_{rules.name}"] = terms.eir if rules.discounted(a) else np.zeros(n)
        if rules.staged:  # measured as the change since purchase (IFRS 9 5.5.13-5.5.14)
            out[f"purchase_ecl_{rules.name}"] = purchase.at_purchase[:, f] if purchase is not None else none
            out[f"purchase_ecl_carried_{rules.name}"] = carried
    lifetime = next((f for f, rules in enumerate(prep.rules) if not rules.staged), None)
    if lifetime is not None:  # CECL: a PCD asset bought in the period enters with its allowance (gross-up)
        gross_up = np.zeros(n)
        if purchase is not None:
            gross_up = np.where(purchase.in_period, np.nan_to_num(purchase.at_purchase[:, lifetime]), 0.0)
        out["pcd_gross_up"] = gross_up
    out["modified"] = _flag(chunk, "modified")
    return out


def _allowance(k: KernelResult, f: int, rules, stage: np.ndarray, poci_flag: np.ndarray, carried: np.ndarray,
               replaced: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Framework ``f``'s allowance per loan and scenario ``[n, S]`` as its rules measure it from
    the loop's 12-month and lifetime ECL (the POCI loans' against their carried benchmark), a
    loan measured one by one taking its amount in every scenario; and where that is so ``[n, 1]``."""
    per_scenario = rules.allowance(k.ecl_12m[:, f, :], k.ecl_lifetime[:, f, :], stage, poci_flag, carried)
    one_by_one = ~np.isnan(replaced[:, None])
    return np.where(one_by_one, replaced[:, None], per_scenario), one_by_one


def _iso_dates(dates: pd.Series) -> pd.Series:
    """Dates as ``YYYY-MM-DD`` text, formatted by Arrow (strftime per loan took seconds)."""
    days = pd.DatetimeIndex(dates).to_numpy(dtype="datetime64[D]")
    return pc.cast(pa.array(days), pa.string()).to_pandas().array


def _by_segment(terms: LoanTerms, prep: Prepared, get, default) -> np.ndarray:
    """A per-segment value for every loan (``get(segment assumptions)``; ``default`` for None)."""
    segments = prep.config.assumptions.segments
    values = [get(segments[name]) for name in prep.segments.names]
    return np.array([default if v is None else v for v in values] + [default])[terms.segment]


def _individual_measurement(chunk: pd.DataFrame, terms: LoanTerms, prep: Prepared) -> tuple[np.ndarray, np.ndarray]:
    """Which loans are measured one by one, and their ECL: (measurement code per loan, per
    framework ``[F, n]`` the ECL that replaces the model's, NaN where the model measures).

    A loan with ``individual_ecl`` takes it in every framework. A collateral-dependent loan
    (flagged, or in default with a collateral value where the segment's ``defaulted_secured``
    says so) takes max(0, amortised cost - fair value × (1 - costs to sell)) in the frameworks
    its segment's ``[collateral_dependent]`` table lists (ASC 326-20-35-4/35-5, IFRS 9 B5.5.55).
    """
    n = len(chunk)
    table = lambda attr, default: _by_segment(  # noqa: E731
        terms, prep, lambda s: getattr(s.collateral_dependent, attr) if s.collateral_dependent else None, default)
    has_table = _by_segment(terms, prep, lambda s: s.collateral_dependent is not None, False).astype(bool)
    flagged = chunk["collateral_dependent"].to_numpy(bool)
    collateral = chunk["collateral_value"].to_numpy(float)
    rows = chunk["source_row"].to_numpy() if "source_row" in chunk else np.arange(n) + 2
    # intake checks these against the assumptions; a direct caller of the engine gets this
    for bad, column, what, hint in (
        (flagged & ~has_table, "collateral_dependent",
         "is flagged collateral_dependent but its segment states no [collateral_dependent] table",
         "add [segments.<name>.collateral_dependent] with costs_to_sell (ASC 326-20-35-4)"),
        (flagged & np.isnan(collateral), "collateral_value",
         "is flagged collateral_dependent but has no collateral_value to measure it on",
         "give the collateral's fair value, or clear the flag"),
    ):
        if bad.any():
            first = int(np.flatnonzero(bad)[0])
            raise AssumptionsError(f"loan {chunk['loan_id'].iloc[first]!r} {what}", row=int(rows[first]),
                                   column=column, hint=hint)
    default_now = ((chunk["days_past_due"].to_numpy() >= table("default_dpd", np.iinfo(np.int64).max))
                   | chunk["defaulted"].to_numpy(bool) | chunk["bankrupt"].to_numpy(bool))
    method = individual.measurement_method(
        chunk["individual_ecl"].to_numpy(float), flagged, table("defaulted_secured", False).astype(bool) & has_table,
        default_now, ~np.isnan(collateral),
    )
    fair_value = collateral * (1.0 - table("appraisal_discount", 0.0).astype(float))
    on_collateral = individual.collateral_dependent_ecl(terms.balance, fair_value, table("costs_to_sell", 0.0).astype(float))
    dependent = np.isin(method, [individual.COLLATERAL_DEPENDENT, individual.COLLATERAL_DEPENDENT_DEFAULTED])
    assessed = method == individual.INDIVIDUAL
    replaced = np.full((len(prep.rules), n), np.nan)
    for f, rules in enumerate(prep.rules):
        listed = _by_segment(terms, prep, lambda s, fw=rules.name: bool(s.collateral_dependent)
                             and fw in s.collateral_dependent.frameworks, False).astype(bool)
        replaced[f] = np.where(assessed, chunk["individual_ecl"].to_numpy(float),
                               np.where(dependent & listed, on_collateral, np.nan))
    return method, replaced


@dataclass(frozen=True)
class ChunkInputs:
    """What :func:`run_chunk` feeds the loop for a chunk: the loan terms, the IFRS 9 stages
    (None when no framework stages), the per-framework inputs and the loop's own inputs."""

    terms: LoanTerms
    stages: pd.DataFrame | None
    frameworks: _Frameworks
    kernel: KernelInputs


def chunk_inputs(chunk: pd.DataFrame, prep: Prepared, stages: pd.DataFrame | None = None) -> ChunkInputs:
    """The loop's inputs for a chunk of loans, exactly as :func:`run_chunk` builds them (the
    schedule view reads the same ones). ``stages``: the chunk's stages (``stage``, ``poci``)
    already assigned under the same staging rules, not assigned again."""
    a = prep.config.assumptions
    terms = loan_terms(chunk, prep)
    if prep.staged is None:
        stages = None
    elif stages is None:
        stages = staging.assign_stages(chunk, a.ifrs9, a.segments, remaining_months=terms.remaining)
    stage = None if stages is None else stages["stage"].to_numpy()
    fw = _framework_inputs(chunk, terms, stage, prep)
    return ChunkInputs(terms, stages, fw, _kernel_inputs(terms, fw, prep))


def run_chunk(chunk: pd.DataFrame, prep: Prepared, reweighted: tuple[np.ndarray, ...] = (),
              alone: tuple[np.ndarray, ...] = ()) -> ChunkResult:
    r"""Modelled results (unrounded) for a chunk of accepted loans, and the engine's findings.

    A pure function of its arguments: the same chunk and tables give the same result in any
    process, so an executor's ``map`` may run chunks anywhere (:func:`allowance.engine.run`).

    ``reweighted``: other scenario weights (each as ``prep.weights``), whose loan results come
    back in ``ChunkResult.reweighted``. Stages, horizons and every scenario's loss come from
    the loan terms and the scenario paths, never the weights (IFRS 9 5.5.17(a), B5.5.42: the
    weights apply to the scenarios' losses), so the loop runs once and only the weighted
    figures are made again; a POCI loan's benchmark is a weighted ECL, so its per-scenario
    allowance follows it (:func:`_purchase_views`).

    ``alone``: more scenario weights, whose modelled ECL per framework alone comes back in
    ``ChunkResult.alone`` (what a sensitivity reads; the other columns are the run's). With
    one-hot weights (1 for a scenario, 0 for the rest) it is that scenario's figure at
    weight 1, to the bit: :math:`1 \cdot x + 0 \cdot y = x` in floating point for finite
    :math:`y`, and the loop checks every scenario's losses finite.
    """
    c = chunk_inputs(chunk, prep)
    terms, stages, fw = c.terms, c.stages, c.frameworks
    weights = (prep.weights, *reweighted)
    stage, poci_flag = _stage_and_poci(chunk, c.stages)
    k, purchases, drawn = _losses(chunk, prep, c, (*weights, *alone), (stage, poci_flag))
    loans = [_loan_results(chunk, terms, stages, k, prep if i == 0 else dataclasses.replace(prep, weights=w),
                           purchase, fw, drawn) for i, (w, purchase) in enumerate(zip(weights, purchases))]
    alone_columns = ()
    if alone:
        _, replaced = _individual_measurement(chunk, terms, prep)
        alone_columns = _modelled_under(k, prep, stage, poci_flag, purchases[len(weights):], replaced, alone)
    return ChunkResult(
        columns=loans[0],
        index=chunk.index,
        findings=pd.concat([_payment_findings(chunk, terms.balance, terms.rate, terms.remaining, terms.payment),
                            _refinance_findings(chunk, terms)], ignore_index=True),
        reweighted=tuple(loans[1:]),
        alone=alone_columns,
    )


def _losses(chunk: pd.DataFrame, prep: Prepared, c: ChunkInputs, weights: tuple[np.ndarray, ...],
            drawn: tuple[np.ndarray, np.ndarray] | None = None,
            ) -> tuple[KernelResult, tuple[_Purchase | None, ...], _DrawnOnly | None]:
    """The loop's per-scenario losses for a chunk (loss-rate segments through their own loop),
    the POCI loans' purchase views under each of ``weights``, and, given ``drawn`` (each
    loan's stage and POCI flag), the drawn-only pass (:func:`_drawn_pass`; else None).

    The chunk's loans and the extra passes of some of them go to the loop together
    (:func:`allowance.ecl.expected_losses_together`: one pass in numpy, the same bits)."""
    terms, fw = c.terms, c.frameworks
    passes = _purchase_passes(chunk, terms, fw, c.kernel, prep)
    drawn_rows, drawn_inputs = _drawn_pass(prep, c, *drawn) if drawn is not None else (None, None)
    today, then = (None, None) if passes is None else (passes.today, passes.then)
    k, r, q, d = expected_losses_together([c.kernel, today, then, drawn_inputs], prep.loop)
    purchases = _purchase_views(passes, r, q, weights)
    # loss-rate segments: their own loop on the same terms (a loss rate has no PD or LGD)
    for rows, lr in _loss_rate_loans(chunk, prep, terms, fw) or ():
        k.ecl_12m[rows], k.ecl_lifetime[rows] = lr.ecl_12m, lr.ecl_lifetime
        k.pd_12m[rows] = k.pd_lifetime[rows] = np.nan
        k.gross_12m[rows] = k.gross_lifetime[rows] = np.nan  # a loss rate is net of recoveries
        k.lgd[rows] = np.nan
    return k, purchases, None if drawn is None else _drawn_only(chunk, prep, c, drawn_rows, d)


def modelled_chunk(chunk: pd.DataFrame, prep: Prepared, stages: pd.DataFrame | None = None) -> pd.DataFrame:
    """A chunk's modelled ECL per framework, unrounded: ``loan_id, ecl_<framework>_modelled``.

    The figures :func:`run_chunk` gives, from the same loop and stages, without what only the
    loan detail needs: the drawn-only pass (the undrawn split), the findings and the other
    columns. What a second pass at other assumptions needs for the movement's remeasurement.
    ``stages`` as for :func:`chunk_inputs`.
    """
    c = chunk_inputs(chunk, prep, stages)
    stage, poci_flag = _stage_and_poci(chunk, c.stages)
    # the loop walks only the months the allowance takes (12 in IFRS 9 stage 1, not the whole
    # life the loan detail's lifetime column needs): the same 12-month and lifetime sums, to
    # the bit (:func:`_allowance_horizon`), for a fraction of a long book's months
    c = dataclasses.replace(c, kernel=dataclasses.replace(
        c.kernel, horizon=_allowance_horizon(prep, c.frameworks.horizon, stage, poci_flag)))
    k, (purchase,), _ = _losses(chunk, prep, c, (prep.weights,))
    _, replaced = _individual_measurement(chunk, c.terms, prep)
    out = _modelled(k, prep, stage, poci_flag, purchase, replaced, prep.weights)
    return pd.DataFrame({"loan_id": chunk["loan_id"].array, **out}, index=chunk.index)


def _modelled_under(k: KernelResult, prep: Prepared, stage: np.ndarray, poci_flag: np.ndarray,
                    purchases: tuple[_Purchase | None, ...], replaced: np.ndarray,
                    weights: tuple[np.ndarray, ...]) -> tuple[dict[str, np.ndarray], ...]:
    """:func:`_modelled` under each of ``weights`` (``purchases`` weighted by each in turn).

    Each framework's allowance per scenario is made once: only a POCI loan's depends on the
    weights (its benchmark, :func:`_purchase_views`), so only those loans' are made again
    under each weight set. Every loan's figure is a weighting of its own row, as
    :func:`_modelled` makes it."""
    n = len(stage)
    rows = np.flatnonzero(poci_flag)
    bought = _rows(k, rows)
    out: tuple[dict[str, np.ndarray], ...] = tuple({} for _ in weights)
    for f, rules in enumerate(prep.rules):
        per_scenario, _ = _allowance(k, f, rules, stage, poci_flag, np.full(n, np.nan), replaced[f])
        for j, (w, purchase) in enumerate(zip(weights, purchases)):
            modelled = scenarios.weighted(per_scenario, w)
            if purchase is not None and rows.size:
                again, _ = _allowance(bought, f, rules, stage[rows], poci_flag[rows], purchase.carried[rows, f],
                                      replaced[f][rows])
                modelled[rows] = scenarios.weighted(again, w)
            out[j][f"ecl_{rules.name}_modelled"] = modelled
    return out


def _rows(k: KernelResult, rows: np.ndarray) -> KernelResult:
    """The loop's results of some loans (what :func:`_allowance` reads)."""
    return dataclasses.replace(k, ecl_12m=k.ecl_12m[rows], ecl_lifetime=k.ecl_lifetime[rows])


def _stage_and_poci(chunk: pd.DataFrame, stages: pd.DataFrame | None) -> tuple[np.ndarray, np.ndarray]:
    """Each loan's stage and POCI flag as :func:`_loan_results` reads them (stage 1 throughout
    where no framework stages)."""
    if stages is not None:
        return stages["stage"].to_numpy(), stages["poci"].to_numpy()
    return np.ones(len(chunk), dtype=np.int64), chunk["credit_impaired_at_purchase"].to_numpy(bool)


def _modelled(k: KernelResult, prep: Prepared, stage: np.ndarray, poci_flag: np.ndarray, purchase: _Purchase | None,
              replaced: np.ndarray, weights: np.ndarray) -> dict[str, np.ndarray]:
    """``ecl_<framework>_modelled`` under ``weights``: each framework's allowance per scenario
    (:func:`_allowance`, the POCI loans' against ``purchase``, the benchmark weighted by the
    same weights) weighted on the losses (IFRS 9 5.5.17(a), B5.5.42), as :func:`_loan_results`
    computes the column."""
    n = len(stage)
    out: dict[str, np.ndarray] = {}
    for f, rules in enumerate(prep.rules):
        carried = purchase.carried[:, f] if purchase is not None else np.full(n, np.nan)
        per_scenario, _ = _allowance(k, f, rules, stage, poci_flag, carried, replaced[f])
        out[f"ecl_{rules.name}_modelled"] = scenarios.weighted(per_scenario, weights)
    return out


@dataclass(frozen=True)
class _DrawnOnly:
    """The ECL measured without the undrawn add-on, ``[m, F, S]`` (12-month and lifetime), of
    the loans at ``rows`` (those with an add-on in some framework; the others have no undrawn
    part). Only what the undrawn split reads is measured: nothing in a framework where the
    loan has no add-on, and no month past the horizon its allowance takes (12 in IFRS 9
    stage 1), so the other figures of those loans are not their ECL."""

    rows: np.ndarray
    ecl_12m: np.ndarray
    ecl_lifetime: np.ndarray


def _allowance_horizon(prep: Prepared, life: np.ndarray, stage: np.ndarray, poci_flag: np.ndarray) -> np.ndarray:
    """The months ``[F, n]`` each framework's allowance takes of the loop's horizon ``life``
    (``[F, n]``): the framework's horizon (:attr:`~allowance.frameworks.FrameworkRules.horizon`:
    12 months in IFRS 9 stage 1, IFRS 9 5.5.5 and B5.5.38; else the life), a POCI loan's
    whole life (IFRS 9 5.5.13), never past ``life``.

    The loop's 12-month sums are taken at month 12 whatever the horizon beyond it (and the
    month-by-month sums to month 12 are the same steps in the same order), so a horizon cut
    to 12 months gives the same 12-month figures, to the bit; the lifetime sums of a loan
    whose horizon is cut are then not its lifetime ECL, and are not read."""
    out = np.empty_like(life)
    for f, rules in enumerate(prep.rules):
        measured = np.where(poci_flag, life[f], rules.horizon(stage, life[f]))
        out[f] = np.minimum(measured, life[f])
    return out


def _drawn_horizon(prep: Prepared, c: ChunkInputs, rows: np.ndarray, stage: np.ndarray,
                   poci_flag: np.ndarray) -> np.ndarray:
    """The months of the drawn-only pass ``[F, m]`` at ``rows``: the horizon the allowance
    takes (:func:`_allowance_horizon`), 0 where the framework puts no add-on on the loan (its
    split is nil, not read)."""
    fw = c.frameworks
    measured = _allowance_horizon(prep, fw.horizon[:, rows], stage[rows], poci_flag[rows])
    return np.where(fw.undrawn_add[:, rows] > 0.0, measured, 0)


def _drawn_pass(prep: Prepared, c: ChunkInputs, stage: np.ndarray,
                poci_flag: np.ndarray) -> tuple[np.ndarray, KernelInputs | None]:
    """The loans with an undrawn add-on (their rows) and the inputs of the loop again for them on
    their drawn exposure alone (None: no such loan); :func:`_drawn_only` reads its results.

    The ECL of the undrawn commitment is the whole ECL less this (an incremental split): with
    a flat LGD the loss is linear in EAD_t = drawn_t + CCF × undrawn, so the split is the
    add-on's share of each month's exposure exactly; with a collateral LGD the collateral
    covers the drawn balance first. Loans without an add-on have no undrawn part and are not
    measured again; ``stage`` and ``poci_flag`` (per loan) set the horizon each allowance takes
    (:func:`_drawn_horizon`).
    """
    fw = c.frameworks
    rows = np.flatnonzero((fw.undrawn_add > 0.0).any(axis=0))
    if not rows.size:
        return rows, None
    drawn_add = fw.ead_add - fw.undrawn_add
    return rows, _subset(c.kernel, rows, ead_add=drawn_add[:, rows],
                         horizon=_drawn_horizon(prep, c, rows, stage, poci_flag))


def _drawn_only(chunk: pd.DataFrame, prep: Prepared, c: ChunkInputs, rows: np.ndarray,
                d: KernelResult | None) -> _DrawnOnly:
    """The drawn-only ECL of the loans at ``rows`` (:func:`_drawn_pass`) from the loop's results
    ``d`` for them, the loss-rate segments' through their own loop."""
    fw = c.frameworks
    n_fw, n_sc = len(prep.rules), prep.pd.shape[3]
    if d is None:
        return _DrawnOnly(rows, np.zeros((0, n_fw, n_sc)), np.zeros((0, n_fw, n_sc)))
    drawn_add = fw.ead_add - fw.undrawn_add
    ecl_12m, ecl_lifetime = d.ecl_12m, d.ecl_lifetime
    lines = chunk["segment"].iloc[rows].to_numpy()  # these loans' only
    if prep.loss_rates is not None and np.isin(lines, list(prep.loss_rates.method)).any():
        for part, lr in _loss_rate_loans(chunk, prep, c.terms, dataclasses.replace(fw, ead_add=drawn_add, undrawn_add=np.zeros_like(drawn_add))) or ():
            at = np.searchsorted(rows, part).clip(max=rows.size - 1)
            mine = rows[at] == part  # the loss-rate loans among ``rows``
            ecl_12m[at[mine]], ecl_lifetime[at[mine]] = lr.ecl_12m[mine], lr.ecl_lifetime[mine]
    return _DrawnOnly(rows, ecl_12m, ecl_lifetime)


def _loss_rate_loans(chunk: pd.DataFrame, prep: Prepared, terms: LoanTerms, fw: _Frameworks):
    """The loans of loss-rate segments through the loss-rate loop: (their rows, ecl_12m, ecl_lifetime).

    They share the PD method's loan terms, horizons, prepayment rows, exposure add-ons and
    discounting; a loan in default takes the segment's stated LGD, or stays in the pool. Each
    segment runs with its own scenario multipliers.
    """
    tables = prep.loss_rates
    if tables is None:
        return None
    segment = chunk["segment"].to_numpy()
    original = chunk["original_balance"].to_numpy(float) if "original_balance" in chunk else np.zeros(len(chunk))
    parts = []
    for name in tables.method:
        rows = np.flatnonzero(segment == name)
        if not rows.size:
            continue
        n = rows.size
        inputs = loss_rates.LossRateInputs(
            method=np.full(n, tables.method[name]), loss_rate=np.full(n, tables.rate[name]),
            vintage=np.full(n, tables.vintage[name]), original_balance=np.nan_to_num(original[rows]),
            age=terms.age[rows], default_lgd=terms.lgd[rows], code=terms.code[rows], balance=terms.balance[rows],
            rate=terms.rate[rows], months_left=terms.remaining[rows], io_left=terms.io_left[rows],
            residual=terms.residual[rows], payment=terms.payment[rows], prepay=fw.prepay[:, rows],
            prepay_offset=terms.prepay_offset[rows], in_default=fw.in_default[:, rows], horizon=fw.horizon[:, rows],
            ead_add=fw.ead_add[:, rows], paydown=fw.paydown[:, rows], discount=fw.discount[:, rows],
            multiplier=tables.multiplier[name], lgd_multiplier=prep.lgd_multiplier, vintage_curve=tables.curve,
            smm=prep.smm, add_months=fw.add_months[:, rows], add_after=(fw.ead_add - fw.undrawn_add)[:, rows],
        )
        parts.append((rows, loss_rates.loss_rate_losses(inputs, prep.loop)))
    return parts or None


def _refinance_findings(chunk: pd.DataFrame, terms: LoanTerms) -> pd.DataFrame:
    flagged = terms.refinance_unknown
    return pd.DataFrame(
        {
            "source_row": chunk["source_row"].to_numpy()[flagged] if "source_row" in chunk else np.nonzero(flagged)[0],
            "loan_id": np.asarray(chunk["loan_id"].array[flagged], dtype=object),
            "column": "collateral_value",
            "code": "refinance_riskiest_band",
            "severity": "warning",
            "message": "refinance risk at maturity taken at the riskiest band: no collateral_value "
                       "(or no debt_service_coverage where the segment bands by coverage)",
        }
    )


def _payment_findings(chunk, balance, rate, remaining, payment) -> pd.DataFrame:
    given = ~np.isnan(payment)
    short = np.zeros(len(chunk))
    short[given] = cashflows.payment_shortfall(balance[given], rate[given], remaining[given], payment[given])
    # a payment rounded to the cent leaves a few cents; flag only a real final balloon
    flagged = short > 0.5 * np.nan_to_num(payment)
    return pd.DataFrame(
        {
            "source_row": chunk["source_row"].to_numpy()[flagged] if "source_row" in chunk else np.nonzero(flagged)[0],
            "loan_id": np.asarray(chunk["loan_id"].array[flagged], dtype=object),
            "column": "payment",
            "code": "payment_short",
            "severity": "warning",
            "message": [f"the tape's payment leaves {v:,.2f} due at maturity (a final balloon)" for v in short[flagged]],
        }
    )
