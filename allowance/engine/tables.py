"""Book-level tables, built once per run: term structures, prepayment curves, scenario paths.

Implements
----------
SegmentTable     every per-segment parameter as arrays, looked up by segment code
Prepared         the tables every chunk of loans reads (shapes in :class:`allowance.ecl.KernelInputs`)
prepare          build them for a book
remaining_life   each loan's months left (contractual term, or a line's behavioural life)
tape_months      the longest horizon on a tape (how many months the tables must cover)
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from allowance import cashflows, curves, loss_rates, scenarios, staging
from allowance.jitcache import ARRAYS_UP_TO, LOOPS
from allowance.exceptions import AssumptionsError
from allowance.frameworks import FrameworkRules, Runoff, rules_for
from allowance.schemas import MAX_MONTHS, OFF_BALANCE_FACILITIES, Framework, RunConfig, SegmentAssumptions


@dataclass(frozen=True)
class SegmentTable:
    """Every per-segment number the engine reads, one array entry per segment.

    Entry ``j`` belongs to the segment ``names[j]``; the extra last entry holds the default a
    loan of an unknown segment would take (intake rejects such loans, so it is never used by
    a run). A chunk looks each loan's segment up once (:meth:`codes`) and takes every
    parameter by that code.
    """

    names: tuple[str, ...]
    lgd: np.ndarray  # flat LGD after cures
    cure_rate: np.ndarray
    ccf: np.ndarray  # NaN when not stated (or stated by days-past-due bucket: ccf_by_dpd)
    cancellable: np.ndarray  # 1.0 unconditionally cancellable (CECL: no allowance on undrawn), 0.0 not, NaN unstated
    ccf_by_dpd: tuple[tuple[np.ndarray, np.ndarray] | None, ...]  # per segment: (lowest DPD of each bucket, CCF)
    payment_rate: np.ndarray  # NaN when not given
    behavioural_life: np.ndarray  # NaN when not given
    amortization_months: np.ndarray  # NaN when not given
    collateral: np.ndarray  # bool: the segment has a collateral LGD
    haircut: np.ndarray
    recovery_cost: np.ndarray
    lgd_floor: np.ndarray
    months_to_recovery: np.ndarray

    def codes(self, segment: pd.Series | np.ndarray) -> np.ndarray:
        """The code of each loan's segment: its position in ``names``; -1 (the last entry) if unknown.

        The column is factorised (Arrow's hash, no Python per loan) and only its few distinct
        values are looked up.
        """
        codes, uniques = pd.factorize(segment if isinstance(segment, pd.Series) else np.asarray(segment, dtype=object))
        position = {name: k for k, name in enumerate(self.names)}
        where = np.array([position.get(u, -1) for u in uniques.tolist()] + [-1], dtype=np.int64)
        return where[codes]


def segment_table(segments: dict[str, SegmentAssumptions]) -> SegmentTable:
    """The per-segment parameters as arrays (see :class:`SegmentTable`)."""

    def column(get, default=np.nan, dtype=float) -> np.ndarray:
        values = [get(seg) for seg in segments.values()]
        return np.array([default if v is None else v for v in values] + [default], dtype=dtype)

    def collateral(attr: str) -> np.ndarray:
        return column(lambda s: getattr(s.collateral_lgd, attr) if s.collateral_lgd else 0.0, 0.0)

    return SegmentTable(
        names=tuple(segments),
        lgd=curves.effective_lgd(column(lambda s: s.lgd), column(lambda s: s.cure_rate, 0.0)),
        cure_rate=column(lambda s: s.cure_rate, 0.0),
        ccf=column(lambda s: s.ccf),
        cancellable=column(lambda s: None if s.unconditionally_cancellable is None
                           else float(s.unconditionally_cancellable)),
        ccf_by_dpd=tuple(None if s.ccf_by_dpd is None else curves.ccf_buckets(s.ccf_by_dpd) for s in segments.values()),
        payment_rate=column(lambda s: s.payment_rate),
        behavioural_life=column(lambda s: s.behavioural_life_months),
        amortization_months=column(lambda s: s.amortization_months),
        collateral=column(lambda s: float(s.collateral_lgd is not None), 0.0) > 0,
        haircut=collateral("haircut"),
        recovery_cost=collateral("recovery_cost"),
        lgd_floor=collateral("floor"),
        months_to_recovery=collateral("months_to_recovery"),
    )


@dataclass(frozen=True)
class Prepared:
    """Book-level tables for a run (see :class:`allowance.ecl.KernelInputs` for shapes).

    Built once per run by :func:`prepare`; every chunk of loans reads it and none changes it,
    so it is what a process pool or a cluster ships to each worker with the chunk.
    """

    config: RunConfig
    months: int
    frameworks: tuple[Framework, ...]
    rules: tuple[FrameworkRules, ...]  # the rules of each framework, in the same order
    scenario_names: tuple[str, ...]
    weights: np.ndarray
    segments: SegmentTable
    structures: dict[str, curves.PdTermStructure]
    key_offset: dict[str, int]
    prepay_row: dict[str, int]
    pd: np.ndarray  # [F, K, T, S]
    smm: np.ndarray  # [P, L]
    lgd_multiplier: np.ndarray  # [F, T, S]
    collateral_index: np.ndarray  # [F, K, T, S]
    tables: dict[Framework, scenarios.ScenarioTables]
    pd_first_year: np.ndarray  # [K, 12]: each curve key's own monthly PDs of the first year, before the
    # scenario paths (NaN for loss-rate keys): a loan's pd_12m_current is set against them
    loss_rates: LossRateTables | None = None  # the loss-rate segments' tables (None: there are none)
    #: segment -> the PD row of a loan on probation out of stage 3 (``[ifrs9] probation_pd_12m``)
    probation_key: dict[str, int] = field(default_factory=dict)
    #: the row of ``smm`` that holds zeros: a line whose balance runs off at its payment rate
    #: takes it (the payment rate already holds the lines paid off: not counted twice)
    no_prepayment_row: int = 0
    #: how the ECL sums are computed (:func:`allowance.ecl.expected_losses`): ``"compiled"``
    #: (the compiled loop) or ``"arrays"`` (numpy, no compile): the same figures to rounding;
    #: chosen once for the book (:func:`choose_loop`), so every chunk and pass of it agrees
    loop: str = "compiled"

    @property
    def staged(self) -> FrameworkRules | None:
        """The rules of the framework whose loans carry stages (IFRS 9), if it is run."""
        return next((r for r in self.rules if r.staged), None)


@dataclass(frozen=True)
class LossRateTables:
    """What the loss-rate loop reads besides the loan terms (see :mod:`allowance.loss_rates`).

    Per segment name: ``method`` (code), ``rate`` (pool: lifetime rate; WARM: annual rate),
    ``vintage`` (row of ``curve``) and ``multiplier[F, T, S]`` (the scenarios' loss-rate
    multipliers). ``curve[V, A]``: vintage curves by month of age (one zero row when none).
    """

    method: dict[str, int]
    rate: dict[str, float]
    vintage: dict[str, int]
    multiplier: dict[str, np.ndarray]
    curve: np.ndarray


def _loss_rate_structure(name: str, seg: SegmentAssumptions, months: int) -> curves.PdTermStructure:
    """A loss-rate segment's reference monthly rate, as one curve key: the scenario paths move
    it like a PD (its ratio is the loss-rate multiplier); staging and the PD loop ignore it."""
    key = seg.loss_rate_method
    q = min(1.0, loss_rates.reference_monthly_rate(key, getattr(seg, key)))
    return curves.PdTermStructure(name, ("*",), np.full((1, months), q), None, key)


def _loss_rate_tables(config: RunConfig, months: int, max_age: int, tables, structures,
                      key_offset) -> LossRateTables | None:
    """The loss-rate segments' methods, rates, vintage curves and the scenarios' multipliers."""
    a = config.assumptions
    named = {n: s for n, s in a.segments.items() if s.loss_rate_method is not None}
    if not named:
        return None
    ages = max_age + months + 1
    curve_rows = [np.zeros(ages + 1)]
    method, rate, vintage, multiplier = {}, {}, {}, {}
    for name, seg in named.items():
        key = seg.loss_rate_method
        method[name] = loss_rates.LOSS_RATE_METHODS[key]
        rate[name] = float(getattr(seg, key)) if key != "vintage_loss_curve" else 0.0
        vintage[name] = 0
        if key == "vintage_loss_curve":
            vintage[name] = len(curve_rows)
            curve_rows.append(loss_rates.vintage_curve_by_month(seg.vintage_loss_curve, ages))
        # the scenario paths the PD method's tables already hold for this key (the maths lives once)
        k = key_offset[name]
        multiplier[name] = np.ascontiguousarray(np.stack([
            loss_rates.loss_rate_multipliers(t.pd[k], structures[name].marginal[0], t.lgd_multiplier).T
            for t in tables.values()
        ]))
    return LossRateTables(method=method, rate=rate, vintage=vintage, multiplier=multiplier,
                          curve=np.vstack(curve_rows))


# --------------------------------------------------------------------------------------
# Loan terms
# --------------------------------------------------------------------------------------


def per_date(dates: pd.Series, months: Callable[[pd.Series], np.ndarray]) -> np.ndarray:
    """``months(dates)`` for a function of each date alone, computed once per distinct date (a
    book of a million loans holds a few thousand) and spread to the loans by their codes; a
    blank date is handed over as a blank."""
    codes, distinct = pd.factorize(dates, use_na_sentinel=True)
    distinct = pd.Series(distinct)
    if (codes < 0).any():
        distinct = distinct.reindex(range(len(distinct) + 1))  # a blank last, for code -1
    return np.asarray(months(distinct))[codes]


def age_months(origination: pd.Series, as_of: pd.Timestamp) -> np.ndarray:
    """:func:`allowance.cashflows.age_months`, once per distinct origination date."""
    return per_date(origination, lambda dates: cashflows.age_months(dates, as_of))


def off_balance(tape: pd.DataFrame) -> np.ndarray:
    """Rows that are standalone commitments or guarantees (``facility_type``), nothing drawn."""
    if "facility_type" not in tape.columns:
        return np.zeros(len(tape), dtype=bool)
    return tape["facility_type"].isin(OFF_BALANCE_FACILITIES).to_numpy(dtype=bool)


def commitment_months(tape: pd.DataFrame, as_of: pd.Timestamp) -> np.ndarray:
    """Months of the contractual commitment period left: payment dates after ``as_of`` up to
    ``commitment_end_date`` (0 where blank or ended)."""
    if "commitment_end_date" not in tape.columns:
        return np.zeros(len(tape), dtype=np.int64)
    return per_date(tape["commitment_end_date"], lambda dates: cashflows.remaining_months(as_of, dates))


def remaining_life(tape: pd.DataFrame, as_of: pd.Timestamp, behavioural: np.ndarray,
                   commitment: np.ndarray | None = None) -> np.ndarray:
    """Months left of every loan: the contractual term (at least 1), a line's behavioural life,
    a standalone commitment's or guarantee's commitment period (IFRS 9 5.5.19). ``commitment``:
    :func:`commitment_months` when the caller has it already."""
    term = per_date(tape["maturity_date"], lambda dates: cashflows.remaining_months(as_of, dates))
    # a matured loan still carrying a balance gets a one-month horizon (intake flags it)
    off = off_balance(tape)
    revolving = (tape["repayment"] == "revolving").to_numpy(dtype=bool) & ~off
    life = staging.lifetime_months(np.maximum(term, 1), np.where(revolving, "revolving", "level"),
                                   np.where(off, 1, behavioural))
    commitment = commitment_months(tape, as_of) if commitment is None else commitment
    return np.where(off, np.maximum(commitment, 1), life).astype(np.int64)


def revolving_parameter(tape: pd.DataFrame, table: SegmentTable, codes: np.ndarray, attr: str) -> np.ndarray:
    """A segment parameter revolving lines cannot do without (0 for other loans).

    Intake refuses a segment that holds revolving lines and lacks it; this guard keeps a
    direct caller of the engine from computing with a value nobody stated.
    """
    values = getattr(table, attr)[codes]
    revolving = (tape["repayment"] == "revolving").to_numpy()
    missing = revolving & np.isnan(values)
    if missing.any():
        seg = tape["segment"].to_numpy()[missing][0]
        key = {"behavioural_life": "behavioural_life_months"}.get(attr, attr)
        raise AssumptionsError(f"segment {seg!r} has revolving lines but no {key}",
                               column=f"segments.{seg}.{key}", hint=f"state {key} in [segments.{seg}]")
    return np.where(revolving, values, 0.0)


def behavioural_life(tape: pd.DataFrame, table: SegmentTable, codes: np.ndarray | None = None) -> np.ndarray:
    """Each revolving line's behavioural life from its segment (0 for other loans)."""
    codes = table.codes(tape["segment"]) if codes is None else codes
    return revolving_parameter(tape, table, codes, "behavioural_life").astype(np.int64)


def months_held(tape: pd.DataFrame, config: RunConfig, table: SegmentTable, codes: np.ndarray,
                remaining: np.ndarray) -> np.ndarray:
    """Months each loan pays nothing on its way to its loss event (a delinquent loan; 0 for a
    current one): :func:`allowance.cashflows.months_without_payment` at the charge-off threshold
    of a roll-rate segment, else the default threshold; at most the months before its last."""
    a = config.assumptions
    default_dpd = min((t.default_dpd for t in (a.ifrs9, a.cecl) if t is not None), default=90)
    charge_off = np.array([(s.charge_off_dpd or 0) if s.pd_source == "transition_matrix" else 0
                           for s in (a.segments[n] for n in table.names)] + [0], dtype=np.int64)[codes]
    hold = cashflows.months_without_payment(tape["days_past_due"].to_numpy(),
                                            np.where(charge_off > 0, charge_off, default_dpd))
    return np.minimum(hold, np.maximum(remaining - 1, 0))


def runoff_horizon(balance: np.ndarray, paydown: np.ndarray, held: np.ndarray, runoff: Runoff,
                   add_months: np.ndarray) -> np.ndarray:
    """Months a revolving line is measured where its drawn balance runs off (CECL): the months
    it pays nothing while delinquent, then until its balance is gone or below the floor
    (:func:`allowance.cashflows.runoff_months`), and at least ``add_months`` (the months its
    undrawn add-on is exposure; 0 where there is none); at most 1,200."""
    months = held + cashflows.runoff_months(balance, paydown, runoff.floor, MAX_MONTHS)
    return np.minimum(np.maximum(months, add_months), MAX_MONTHS).astype(np.int64)


def tape_months(tape: pd.DataFrame, config: RunConfig) -> int:
    """Months the book's tables must cover: the longest horizon on the tape (at least 12), and
    for a purchased credit-impaired loan its life from the purchase date (its age added)."""
    if tape.empty:
        return 12
    table = segment_table(config.assumptions.segments)
    as_of = pd.Timestamp(config.as_of)
    codes = table.codes(tape["segment"])
    behavioural = behavioural_life(tape, table, codes)
    commitment = commitment_months(tape, as_of)  # the dates read once
    life = remaining_life(tape, as_of, behavioural, commitment)
    life = np.maximum(life, commitment)  # CECL: a commitment's contractual period
    revolving = (tape["repayment"] == "revolving").to_numpy()
    for runoff in (rules_for(fw).runoff(config.assumptions) for fw in config.assumptions.run.frameworks
                   if rules_for(fw).revolving_paydown and revolving.any()):
        paydown = np.nan_to_num(table.payment_rate[codes]) * runoff.measured_share
        held = months_held(tape, config, table, codes, life)
        lines = runoff_horizon(tape["balance"].to_numpy(float), paydown, held, runoff, behavioural)
        life = np.where(revolving, np.maximum(life, lines), life)
    if "credit_impaired_at_purchase" in tape.columns:
        poci = tape["credit_impaired_at_purchase"].to_numpy(dtype=bool)
        if poci.any():
            life = np.where(poci, life + age_months(tape["origination_date"], as_of), life)
    return int(max(12, life.max()))


# --------------------------------------------------------------------------------------
# Book-level tables
# --------------------------------------------------------------------------------------


def _prepayment_row(seg: SegmentAssumptions, length: int) -> np.ndarray:
    """SMM by loan age (column j = age j + 1 months) for a segment's prepayment source."""
    age = np.arange(1, length + 1, dtype=float)
    if seg.cpr is not None:
        cpr = np.full(length, seg.cpr)
    elif seg.psa is not None:
        cpr = cashflows.psa_cpr(age, seg.psa)
    elif seg.cpr_by_age is not None:
        vector = np.asarray(seg.cpr_by_age, float)
        cpr = vector[np.minimum(np.arange(length), len(vector) - 1)]
    else:
        cpr = np.zeros(length)
    return cashflows.smm_from_cpr(cpr)


def choose_loop(loans: int | None, loop: str | None = None) -> str:
    """How a book's ECL sums are computed: ``loop`` when given, else ``"arrays"`` for a book
    of at most :data:`~allowance.jitcache.ARRAYS_UP_TO` loans and ``"compiled"`` for a larger
    one (or an unknown size).

    Loading the compiled loop costs a process 0.7-0.9 s (numba's import and its typing
    context), and compiling it the first time 3-4 s; numpy needs neither and computes a
    small book in a fraction of that (``tests/bench/bench_engine.py`` measures both). The two
    give the same figures to rounding (``tests/test_ecl.py``).
    """
    if loop is not None:
        if loop not in LOOPS:
            raise ValueError(f"loop must be one of {', '.join(LOOPS)}, not {loop!r}")
        return loop
    return "arrays" if loans is not None and loans <= ARRAYS_UP_TO else "compiled"


def prepare(config: RunConfig, months: int, max_age: int, *, loans: int | None = None,
            loop: str | None = None) -> Prepared:
    """Build the term structures, prepayment curves and scenario paths for a book of ``loans``
    loans (how its sums are computed: :func:`choose_loop`)."""
    a = config.assumptions
    frameworks = tuple(a.run.frameworks)
    structures, key_offset, bases, key_smm = {}, {}, [], []
    offset = 0
    for name, seg in a.segments.items():
        if seg.loss_rate_method is not None:
            ts = _loss_rate_structure(name, seg, months)
        else:
            ts = curves.pd_term_structure(name, seg, months)
        structures[name], key_offset[name] = ts, offset
        offset += len(ts.keys)
        bases.append(ts.marginal)
        key_smm.append(ts.smm if ts.smm is not None else np.zeros_like(ts.marginal))
    # a loan on probation out of stage 3 is no longer in default: the stated probation PD as a
    # constant hazard, one row per segment after all the segments' own rows (so the scenarios
    # move it with the segment); a roll-rate segment measures such a loan from its bucket
    probation = a.ifrs9.probation_pd_12m if a.ifrs9 is not None else None
    probation_key, probation_segments = {}, []
    if probation is not None:
        for name, ts in structures.items():
            if a.segments[name].loss_rate_method is None and ts.source != "transition_matrix":
                probation_key[name] = offset
                offset += 1
                probation_segments.append(name)
                bases.append(np.full((1, months), float(curves.hazard_from_pd_12m(probation))))
    base = np.vstack(bases)

    length = max_age + months + 1
    rows, prepay_row = [], {}
    for name, seg in a.segments.items():
        ts = structures[name]
        curves.check_one_prepayment_source(name, seg, ts)  # intake checks it first; a guard here
        if ts.smm is not None and np.any(ts.smm > 0):
            prepay_row[name] = len(rows)  # one row per bucket key, indexed by month
            for k in range(len(ts.keys)):
                row = np.zeros(length)
                row[:months] = ts.smm[k]
                rows.append(row)
        else:
            prepay_row[name] = len(rows)
            rows.append(_prepayment_row(seg, length))
    no_prepayment_row = len(rows)
    rows.append(np.zeros(length))
    smm = np.vstack(rows)

    uses_z = any(s.z for s in a.scenarios.values())
    rho = None
    if uses_z:
        pd12_base = curves.pd_over(base, 12)
        rho = np.concatenate(
            [
                np.atleast_1d(scenarios.asset_correlation(seg, pd12_base[key_offset[n]: key_offset[n] + len(structures[n].keys)], name=n))
                for n, seg in a.segments.items()
            ]
            + [np.atleast_1d(scenarios.asset_correlation(a.segments[n], pd12_base[probation_key[n]: probation_key[n] + 1],
                                                         name=n)) for n in probation_segments]
        )
    key_segments = [name for name, ts in structures.items() for _ in ts.keys] + probation_segments
    rules = tuple(rules_for(fw) for fw in frameworks)
    tables = {r.name: scenarios.scenario_tables(base, rho, a, r.reversion(a), key_segments) for r in rules}
    pd_table = np.ascontiguousarray(np.stack([tables[fw].pd.transpose(0, 2, 1) for fw in frameworks]))
    lgd_mult = np.ascontiguousarray(np.stack([tables[fw].lgd_multiplier.T for fw in frameworks]))
    coll_idx = np.ascontiguousarray(
        np.stack([tables[fw].collateral_per_key(base.shape[0]).transpose(0, 2, 1) for fw in frameworks]))
    weights = np.asarray(a.weights, float)
    # a loan's own 12-month PD (pd_12m_current) is set against its curve row's first year
    pd_first_year = np.array(base[:, :12], dtype=float)
    for name, seg in a.segments.items():  # a loss-rate segment has no PD to scale
        if seg.loss_rate_method is not None:
            pd_first_year[key_offset[name]] = np.nan
    return Prepared(
        config=config, months=months, frameworks=frameworks, rules=rules, scenario_names=tuple(a.scenarios),
        weights=weights, segments=segment_table(a.segments), structures=structures, key_offset=key_offset,
        prepay_row=prepay_row,
        pd=pd_table, smm=smm, lgd_multiplier=lgd_mult, collateral_index=coll_idx, tables=tables,
        pd_first_year=pd_first_year, loss_rates=_loss_rate_tables(config, months, max_age, tables, structures, key_offset),
        probation_key=probation_key, no_prepayment_row=no_prepayment_row, loop=choose_loop(loans, loop),
    )
