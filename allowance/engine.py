"""Chunked orchestration: accepted tape + run configuration -> loan results.

The engine composes the concept modules in one direction: loan terms (cash flows) -> PD
term structures (curves) -> scenario paths per framework (scenarios) -> stages and horizons
(staging) -> the fused ECL loop (ecl) -> rounding to cents -> overlays. Book-level tables
(term structures, scenario paths, prepayment curves) are built once by :func:`prepare`;
:func:`run_chunk` is a pure function of a chunk of loans and those tables, so chunks can run
in-process, on several cores or on a cluster without change.

Implements
----------
Prepared      the book-level tables a chunk needs
EngineResult  loan results plus the tables the workbook shows
prepare       build the tables for a tape
run_chunk     loan results (modelled, unrounded) for a chunk of loans
run           the whole book: chunks, rounding to cents, overlays, summaries
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance import cashflows, curves, overlays, scenarios, staging
from allowance.discounting import monthly_rate
from allowance.ecl import KernelInputs, expected_losses
from allowance.exceptions import AssumptionsError
from allowance.schemas import Framework, RunConfig, SegmentAssumptions

#: Loans per chunk: bounds the memory of the per-loan arrays, not of any loans x months array.
CHUNK_SIZE = 250_000

_MONEY = 2  # decimals: money is rounded to cents once, per loan, at the end


@dataclass(frozen=True)
class Prepared:
    """Book-level tables for a run (see :class:`allowance.ecl.KernelInputs` for shapes)."""

    config: RunConfig
    months: int
    frameworks: tuple[Framework, ...]
    scenario_names: tuple[str, ...]
    weights: np.ndarray
    structures: dict[str, curves.PdTermStructure]
    key_offset: dict[str, int]
    prepay_row: dict[str, int]
    pd: np.ndarray  # [F, K, T, S]
    smm: np.ndarray  # [P, L]
    lgd_multiplier: np.ndarray  # [F, T, S]
    collateral_index: np.ndarray  # [F, T, S]
    tables: dict[Framework, scenarios.ScenarioTables]
    pd_12m_now: np.ndarray  # [K]: IFRS 9 probability-weighted 12-month PD, for staging


@dataclass(frozen=True)
class EngineResult:
    """Everything a run computes. ``loans`` is the loan-results contract (rounded to cents)."""

    loans: pd.DataFrame
    overlays: pd.DataFrame
    scenarios: pd.DataFrame
    term_structures: pd.DataFrame
    roll_rates: pd.DataFrame
    reversion: pd.DataFrame
    schedules: pd.DataFrame
    findings: pd.DataFrame
    warnings: list[str]


# --------------------------------------------------------------------------------------
# Loan terms
# --------------------------------------------------------------------------------------


def _segment_values(tape: pd.DataFrame, segments: dict[str, SegmentAssumptions], attr: str, default=np.nan):
    table = {name: getattr(seg, attr) for name, seg in segments.items()}
    values = tape["segment"].map(lambda s: table.get(s)).to_numpy(dtype=object)
    return np.array([default if v is None else v for v in values], dtype=float)


def _behavioural_life(tape: pd.DataFrame, segments: dict[str, SegmentAssumptions]) -> np.ndarray:
    life = _segment_values(tape, segments, "behavioural_life_months")
    revolving = (tape["repayment"] == "revolving").to_numpy()
    missing = revolving & np.isnan(life)
    if missing.any():
        seg = tape["segment"].to_numpy()[missing][0]
        raise AssumptionsError(
            f"segment {seg!r} has revolving lines but no behavioural_life_months",
            column=f"segments.{seg}.behavioural_life_months",
            hint="state the behavioural life in months (IFRS 9 B5.5.40)",
        )
    return np.where(revolving, life, 0).astype(np.int64)


def _remaining(tape: pd.DataFrame, as_of: pd.Timestamp, behavioural: np.ndarray) -> np.ndarray:
    revolving = (tape["repayment"] == "revolving").to_numpy()
    term = cashflows.remaining_months(as_of, tape["maturity_date"])
    # a matured loan still carrying a balance gets a one-month horizon (intake flags it)
    return np.where(revolving, behavioural, np.maximum(term, 1)).astype(np.int64)


def tape_months(tape: pd.DataFrame, config: RunConfig) -> int:
    """Months the book's tables must cover: the longest horizon on the tape (at least 12)."""
    if tape.empty:
        return 12
    segments = config.assumptions.segments
    as_of = pd.Timestamp(config.as_of)
    life = _remaining(tape, as_of, _behavioural_life(tape, segments))
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
        cpr = np.array([cashflows.psa_cpr(a, seg.psa) for a in age])
    elif seg.cpr_by_age is not None:
        vector = np.asarray(seg.cpr_by_age, float)
        cpr = vector[np.minimum(np.arange(length), len(vector) - 1)]
    else:
        cpr = np.zeros(length)
    return cashflows.smm_from_cpr(cpr)


def prepare(config: RunConfig, months: int, max_age: int) -> Prepared:
    """Build the term structures, prepayment curves and scenario paths for a book."""
    a = config.assumptions
    frameworks = tuple(a.run.frameworks)
    structures, key_offset, bases, key_smm = {}, {}, [], []
    offset = 0
    for name, seg in a.segments.items():
        ts = curves.pd_term_structure(name, seg, months)
        structures[name], key_offset[name] = ts, offset
        offset += len(ts.keys)
        bases.append(ts.marginal)
        key_smm.append(ts.smm if ts.smm is not None else np.zeros_like(ts.marginal))
    base = np.vstack(bases)

    length = max_age + months + 1
    rows, prepay_row = [], {}
    for name, seg in a.segments.items():
        ts = structures[name]
        stated = any(getattr(seg, k) is not None for k in ("cpr", "psa", "cpr_by_age"))
        if ts.smm is not None and np.any(ts.smm > 0):
            if stated:
                raise AssumptionsError(
                    f"segment {name!r} gives prepayment twice: its roll-rate matrix has a paid_off "
                    "state and it also states cpr/psa/cpr_by_age",
                    column=f"segments.{name}",
                    hint="drop the cpr/psa key, or the paid_off column of the matrix",
                )
            prepay_row[name] = len(rows)  # one row per bucket key, indexed by month
            for k in range(len(ts.keys)):
                row = np.zeros(length)
                row[:months] = ts.smm[k]
                rows.append(row)
        else:
            prepay_row[name] = len(rows)
            rows.append(_prepayment_row(seg, length))
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
        )
    tables = {fw: scenarios.scenario_tables(base, rho, a, fw) for fw in frameworks}
    pd_table = np.ascontiguousarray(np.stack([tables[fw].pd.transpose(0, 2, 1) for fw in frameworks]))
    lgd_mult = np.ascontiguousarray(np.stack([tables[fw].lgd_multiplier.T for fw in frameworks]))
    coll_idx = np.ascontiguousarray(np.stack([tables[fw].collateral_index.T for fw in frameworks]))
    weights = np.asarray(a.weights, float)
    first = tables["ifrs9"] if "ifrs9" in tables else tables[frameworks[0]]
    pd_12m_now = scenarios.weighted(curves.pd_over(first.pd, 12), weights)
    return Prepared(
        config=config, months=months, frameworks=frameworks, scenario_names=tuple(a.scenarios),
        weights=weights, structures=structures, key_offset=key_offset, prepay_row=prepay_row,
        pd=pd_table, smm=smm, lgd_multiplier=lgd_mult, collateral_index=coll_idx, tables=tables,
        pd_12m_now=pd_12m_now,
    )


# --------------------------------------------------------------------------------------
# A chunk of loans
# --------------------------------------------------------------------------------------


def _curve_keys(chunk: pd.DataFrame, prep: Prepared) -> np.ndarray:
    """Row of the stacked PD table for every loan (by segment, grade or DPD bucket)."""
    out = np.zeros(len(chunk), dtype=np.int64)
    seg_col = chunk["segment"].to_numpy()
    for name, ts in prep.structures.items():
        mask = seg_col == name
        if not mask.any():
            continue
        seg = prep.config.assumptions.segments[name]
        if ts.source == "transition_matrix":
            local = curves.bucket_index(chunk["days_past_due"].to_numpy()[mask], seg.charge_off_dpd)
        elif ts.source.endswith("_by_grade"):
            local = ts.key_index(chunk["grade"].to_numpy()[mask])
        else:
            local = np.zeros(mask.sum(), dtype=np.int64)
        out[mask] = prep.key_offset[name] + local
    return out


def _prepay_keys(chunk: pd.DataFrame, prep: Prepared, curve: np.ndarray, age: np.ndarray):
    row = np.zeros(len(chunk), dtype=np.int64)
    offset = np.zeros(len(chunk), dtype=np.int64)
    seg_col = chunk["segment"].to_numpy()
    for name, ts in prep.structures.items():
        mask = seg_col == name
        if not mask.any():
            continue
        by_bucket = ts.smm is not None and np.any(ts.smm > 0)
        if by_bucket:
            row[mask] = prep.prepay_row[name] + (curve[mask] - prep.key_offset[name])
        else:
            row[mask] = prep.prepay_row[name]
            offset[mask] = age[mask]
    return row, offset


def _residual(chunk, segments, rate, months_left, age) -> np.ndarray:
    balloon = (chunk["repayment"] == "balloon").to_numpy()
    given = chunk["balloon_amount"].to_numpy(dtype=float)
    amort = chunk["amortization_months"].to_numpy(dtype=float)
    amort = np.where(np.isnan(amort), _segment_values(chunk, segments, "amortization_months"), amort)
    lacking = balloon & np.isnan(given) & np.isnan(amort)
    if lacking.any():
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


def run_chunk(chunk: pd.DataFrame, prep: Prepared) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Modelled results (unrounded) for a chunk of accepted loans, and engine findings.

    Returns the per-loan frame (stage, horizons, EAD, PDs, LGD, ECL per framework and
    scenario, modelled weighted ECL) and a findings frame (``payment_short`` warnings).
    """
    a = prep.config.assumptions
    segments = a.segments
    as_of = pd.Timestamp(prep.config.as_of)
    n = len(chunk)
    repayment = chunk["repayment"].to_numpy()
    revolving = repayment == "revolving"
    code = np.array([cashflows.REPAYMENT_CODES[r] for r in repayment], dtype=np.int64) if n else np.zeros(0, np.int64)
    balance = chunk["balance"].to_numpy(float)
    rate = monthly_rate(chunk["interest_rate"].to_numpy(float))
    eir = chunk["eir"].to_numpy(float)
    eir = np.where(np.isnan(eir), chunk["interest_rate"].to_numpy(float), eir)
    age = cashflows.age_months(chunk["origination_date"], as_of)
    behavioural = _behavioural_life(chunk, segments)
    remaining = _remaining(chunk, as_of, behavioural)

    io_months = chunk["interest_only_months"].to_numpy(float)
    io_left = np.where(
        code == cashflows.INTEREST_ONLY,
        np.where(np.isnan(io_months), remaining, np.maximum(np.nan_to_num(io_months) - age, 0)),
        0,
    ).astype(np.int64)
    residual = _residual(chunk, segments, rate, remaining, age)
    payment = np.where(code == cashflows.LEVEL, chunk["payment"].to_numpy(float), np.nan)

    curve = _curve_keys(chunk, prep)
    prepay, prepay_offset = _prepay_keys(chunk, prep, curve, age)

    # staging (IFRS 9) and the PD = 1 test per framework
    pd_now = prep.pd_12m_now[curve]
    in_default = np.zeros((len(prep.frameworks), n), dtype=np.bool_)
    horizon = np.zeros((len(prep.frameworks), n), dtype=np.int64)
    stage_frame = None
    if "ifrs9" in prep.frameworks:
        stage_frame = staging.assign_stages(chunk, pd_now, a.ifrs9, segments)
    for f, fw in enumerate(prep.frameworks):
        if fw == "ifrs9":
            in_default[f] = stage_frame["stage"].to_numpy() == 3
            # the loop runs over the whole life; stage 1 takes its first 12 months
            horizon[f] = staging.horizon_months(np.full(n, 2), remaining, repayment, behavioural, "ifrs9")
        else:
            in_default[f] = staging.in_default(chunk, a.cecl.default_dpd)
            horizon[f] = staging.horizon_months(np.ones(n), remaining, repayment, behavioural, "cecl")

    # revolving exposure: IFRS 9 drawn + CCF x undrawn; CECL drawn paying down
    limit = chunk["credit_limit"].to_numpy(float)
    undrawn = np.where(revolving, np.maximum(np.nan_to_num(limit) - balance, 0.0), 0.0)
    ccf = _segment_values(chunk, segments, "ccf", 0.0)
    pay_rate = _segment_values(chunk, segments, "payment_rate")
    cancellable = _segment_values(chunk, segments, "unconditionally_cancellable", 1.0) > 0
    ead_add = np.zeros((len(prep.frameworks), n))
    paydown = np.zeros((len(prep.frameworks), n))
    discount = np.ones((len(prep.frameworks), n))
    for f, fw in enumerate(prep.frameworks):
        if fw == "ifrs9":
            ead_add[f] = ccf * undrawn
            discount[f] = 1.0 / (1.0 + monthly_rate(eir))
        else:
            ead_add[f] = np.where(cancellable, 0.0, ccf * undrawn)
            missing = revolving & np.isnan(pay_rate)
            if missing.any():
                seg = chunk["segment"].to_numpy()[missing][0]
                raise AssumptionsError(
                    f"segment {seg!r} has revolving lines but no payment_rate for CECL",
                    column=f"segments.{seg}.payment_rate",
                    hint="state the monthly share of the drawn balance repaid (e.g. 0.05)",
                )
            paydown[f] = np.where(revolving, np.nan_to_num(pay_rate), 0.0)
            if a.cecl.discount:
                discount[f] = 1.0 / (1.0 + monthly_rate(eir))

    # LGD per loan
    has_coll_lgd = np.array([segments[s].collateral_lgd is not None for s in chunk["segment"]], dtype=bool)
    collateral = np.where(has_coll_lgd, np.nan_to_num(chunk["collateral_value"].to_numpy(float)), 0.0)
    cure = _segment_values(chunk, segments, "cure_rate", 0.0)
    flat = curves.effective_lgd(_segment_values(chunk, segments, "lgd"), cure)

    def coll_param(attr):
        table = {k: (getattr(s.collateral_lgd, attr) if s.collateral_lgd else 0.0) for k, s in segments.items()}
        return chunk["segment"].map(table).to_numpy(dtype=float)

    rec_df = curves.recovery_discount_factor(eir, coll_param("months_to_recovery"))
    inputs = KernelInputs(
        code=code, balance=balance, rate=rate, months_left=remaining, io_left=io_left,
        residual=residual, payment=payment, curve=curve, prepay=prepay, prepay_offset=prepay_offset,
        in_default=in_default, lgd=flat, collateral=collateral, haircut=coll_param("haircut"),
        recovery_cost=coll_param("recovery_cost"), lgd_floor=coll_param("floor"),
        recovery_discount=np.asarray(rec_df, float), cure=cure, horizon=horizon, ead_add=ead_add,
        paydown=paydown, discount=discount, pd=prep.pd, smm=prep.smm,
        lgd_multiplier=prep.lgd_multiplier, collateral_index=prep.collateral_index,
    )
    k = expected_losses(inputs)

    out = pd.DataFrame(
        {"loan_id": chunk["loan_id"].to_numpy(), "segment": chunk["segment"].to_numpy(),
         "repayment": repayment, "grade": chunk["grade"].to_numpy()},
        index=chunk.index,
    )
    w = prep.weights
    primary = 0  # IFRS 9 when run (frameworks are listed in the order given; see below)
    if "ifrs9" in prep.frameworks:
        primary = prep.frameworks.index("ifrs9")
        stage = stage_frame["stage"].to_numpy()
        out["stage"] = stage
        out["stage_reason"] = stage_frame["stage_reason"].to_numpy()
        out["poci"] = stage_frame["poci"].to_numpy()
        out["horizon_months"] = staging.horizon_months(stage, remaining, repayment, behavioural, "ifrs9")
    else:
        out["poci"] = chunk["credit_impaired_at_purchase"].to_numpy(bool)
    if "cecl" in prep.frameworks:
        f = prep.frameworks.index("cecl")
        out["horizon_months_cecl"] = horizon[f]
        if "ifrs9" not in prep.frameworks:
            out["horizon_months"] = horizon[f]
    out["remaining_months"] = remaining
    out["balance"] = balance
    out["ead"] = k.ead[:, primary]
    for f, fw in enumerate(prep.frameworks):
        out[f"ead_{fw}"] = k.ead[:, f]
    out["pd_12m"] = scenarios.weighted(k.pd_12m[:, primary, :], w)
    out["pd_lifetime"] = scenarios.weighted(k.pd_lifetime[:, primary, :], w)
    out["lgd"] = k.lgd[:, primary]
    out["ecl_12m"] = scenarios.weighted(k.ecl_12m[:, primary, :], w)
    out["ecl_lifetime"] = scenarios.weighted(k.ecl_lifetime[:, primary, :], w)
    purchase = chunk["lifetime_ecl_at_purchase"].to_numpy(float)
    for f, fw in enumerate(prep.frameworks):
        if fw == "ifrs9":
            twelve = (out["stage"].to_numpy() == 1) & ~out["poci"].to_numpy()
            per_scenario = np.where(twelve[:, None], k.ecl_12m[:, f, :], k.ecl_lifetime[:, f, :])
            # POCI: the allowance is the change in lifetime ECL since purchase (IFRS 9 5.5.13)
            poci_shift = np.where(out["poci"].to_numpy() & ~np.isnan(purchase), purchase, 0.0)
            per_scenario = per_scenario - poci_shift[:, None]
        else:
            per_scenario = k.ecl_lifetime[:, f, :]
        for s, name in enumerate(prep.scenario_names):
            out[f"ecl_{fw}_{name}"] = per_scenario[:, s]
        out[f"ecl_{fw}_modelled"] = scenarios.weighted(per_scenario, w)

    findings = _payment_findings(chunk, balance, rate, remaining, payment)
    return out, findings


def _payment_findings(chunk, balance, rate, remaining, payment) -> pd.DataFrame:
    given = ~np.isnan(payment)
    short = np.zeros(len(chunk))
    short[given] = cashflows.payment_shortfall(balance[given], rate[given], remaining[given], payment[given])
    # a payment rounded to the cent leaves a few cents; flag only a real final balloon
    flagged = short > 0.5 * np.nan_to_num(payment)
    return pd.DataFrame(
        {
            "source_row": chunk["source_row"].to_numpy()[flagged] if "source_row" in chunk else np.nonzero(flagged)[0],
            "loan_id": chunk["loan_id"].to_numpy()[flagged],
            "column": "payment",
            "code": "payment_short",
            "severity": "warning",
            "message": [f"the tape's payment leaves {v:,.2f} due at maturity (a final balloon)" for v in short[flagged]],
        }
    )


# --------------------------------------------------------------------------------------
# The whole book
# --------------------------------------------------------------------------------------


def _round_money(loans: pd.DataFrame) -> pd.DataFrame:
    money = [c for c in loans.columns if c.startswith("ecl_") or c.startswith("ead") or c == "balance"]
    rounded = loans.copy()
    rounded[money] = rounded[money].round(_MONEY)
    return rounded


def run(tape: pd.DataFrame, config: RunConfig, *, chunk_size: int = CHUNK_SIZE, schedule_sample: int = 2) -> EngineResult:
    """Compute the allowance for an accepted tape.

    Money is computed unrounded and rounded to cents once per loan; overlays are applied to
    the rounded modelled figures; every total is the sum of rounded loan figures.
    """
    a = config.assumptions
    months = tape_months(tape, config)
    as_of = pd.Timestamp(config.as_of)
    max_age = int(cashflows.age_months(tape["origination_date"], as_of).max()) if len(tape) else 0
    prep = prepare(config, months, max_age)

    parts, found = [], []
    for start in range(0, max(len(tape), 1), chunk_size):
        chunk = tape.iloc[start: start + chunk_size]
        out, fnd = run_chunk(chunk, prep)
        parts.append(out)
        found.append(fnd)
    loans = _round_money(pd.concat(parts) if parts else pd.DataFrame())

    applied = overlays.apply_overlays(loans, list(a.overlays), config.as_of, list(prep.frameworks))
    for fw in prep.frameworks:
        adj = np.asarray(applied.adjustments[fw], float)
        loans[f"overlay_{fw}"] = adj
        loans[f"ecl_{fw}"] = (loans[f"ecl_{fw}_modelled"] + adj).round(_MONEY)
    loans = _order_columns(loans, tape, prep)

    return EngineResult(
        loans=loans,
        overlays=applied.table,
        scenarios=_scenario_summary(loans, prep),
        term_structures=_term_structure_table(prep),
        roll_rates=roll_rate_table(config),
        reversion=scenarios.reversion_table(prep.tables["cecl"]) if "cecl" in prep.tables else pd.DataFrame(),
        schedules=_schedule_sample(tape, loans, prep, schedule_sample),
        findings=pd.concat(found, ignore_index=True) if found else pd.DataFrame(),
        warnings=list(applied.warnings),
    )


def _order_columns(loans: pd.DataFrame, tape: pd.DataFrame, prep: Prepared) -> pd.DataFrame:
    first = [
        "loan_id", "segment", "repayment", "grade", "stage", "stage_reason", "poci",
        "horizon_months", "horizon_months_cecl", "remaining_months", "balance", "ead",
        "pd_12m", "pd_lifetime", "lgd", "ecl_12m", "ecl_lifetime",
    ]
    for fw in prep.frameworks:
        first += [f"ecl_{fw}_modelled", f"overlay_{fw}", f"ecl_{fw}"]
    for fw in prep.frameworks:
        first += [f"ecl_{fw}_{s}" for s in prep.scenario_names]
    first += [f"ead_{fw}" for fw in prep.frameworks]
    ordered = loans[[c for c in first if c in loans.columns]].copy()
    ordered["source_row"] = tape["source_row"].to_numpy() if "source_row" in tape else np.arange(len(tape)) + 2
    known = set(ordered.columns) | set(tape.columns) - set()
    from allowance.schemas import LoanRecord

    extras = [c for c in tape.columns if c not in LoanRecord.model_fields and c != "source_row"]
    for c in extras:
        ordered[c] = tape[c].to_numpy()
    del known
    return ordered.reset_index(drop=True)


def _scenario_summary(loans: pd.DataFrame, prep: Prepared) -> pd.DataFrame:
    rows = []
    for fw in prep.frameworks:
        for s, name in enumerate(prep.scenario_names):
            rows.append({"framework": fw, "scenario": name, "weight": float(prep.weights[s]),
                         "ecl": round(float(loans[f"ecl_{fw}_{name}"].sum()), 2)})
        rows.append({"framework": fw, "scenario": "weighted (modelled)", "weight": float(prep.weights.sum()),
                     "ecl": round(float(loans[f"ecl_{fw}_modelled"].sum()), 2)})
        rows.append({"framework": fw, "scenario": "final (after overlays)", "weight": np.nan,
                     "ecl": round(float(loans[f"ecl_{fw}"].sum()), 2)})
    return pd.DataFrame(rows)


def _term_structure_table(prep: Prepared) -> pd.DataFrame:
    frames = []
    months = np.arange(1, prep.months + 1)
    for f, fw in enumerate(prep.frameworks):
        for name, ts in prep.structures.items():
            off = prep.key_offset[name]
            for k, key in enumerate(ts.keys):
                marg = prep.pd[f, off + k].T  # [S, T]
                smm = ts.smm[k] if ts.smm is not None else None
                cum = curves.cumulative_pd(marg, smm)
                for s, scen in enumerate(prep.scenario_names):
                    frames.append(pd.DataFrame({
                        "segment": name, "key": key, "framework": fw, "scenario": scen,
                        "month": months, "marginal_pd": marg[s], "cumulative_pd": cum[s],
                    }))
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()


def roll_rate_table(config: RunConfig) -> pd.DataFrame:
    """Roll-rate analytics of every segment whose PD comes from a transition matrix."""
    frames = [
        curves.roll_rate_summary(name, seg.transition_matrix, seg.charge_off_dpd)
        for name, seg in config.assumptions.segments.items()
        if seg.pd_source == "transition_matrix"
    ]
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()


def _schedule_sample(tape: pd.DataFrame, loans: pd.DataFrame, prep: Prepared, per_segment: int) -> pd.DataFrame:
    """A few performing loans per segment, scheduled month by month (first scenario's PDs)."""
    if per_segment <= 0 or tape.empty:
        return pd.DataFrame()
    frames = []
    performing = loans["stage"].to_numpy() == 1 if "stage" in loans else np.ones(len(loans), bool)
    for name in prep.structures:
        picks = np.nonzero((tape["segment"].to_numpy() == name) & performing)[0][:per_segment]
        for i in picks:
            frames.append(loan_schedule(tape.iloc[[i]], prep))
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()


def loan_schedule(row: pd.DataFrame, prep: Prepared, framework: Framework | None = None, scenario: int = 0) -> pd.DataFrame:
    """One loan's schedule (contractual and expected) on the engine's own terms and curves."""
    fw = framework or prep.frameworks[0]
    f = prep.frameworks.index(fw)
    a = prep.config.assumptions
    as_of = pd.Timestamp(prep.config.as_of)
    seg = a.segments[row["segment"].iloc[0]]
    behavioural = _behavioural_life(row, a.segments)
    remaining = _remaining(row, as_of, behavioural)
    age = cashflows.age_months(row["origination_date"], as_of)
    rate = monthly_rate(row["interest_rate"].to_numpy(float))
    curve = _curve_keys(row, prep)
    prepay, offset = _prepay_keys(row, prep, curve, age)
    months = int(remaining[0])
    cols = np.minimum(offset[0] + np.arange(months), prep.smm.shape[1] - 1)
    repayment = row["repayment"].iloc[0]
    io = row["interest_only_months"].to_numpy(float)[0]
    io_left = months if repayment == "interest_only" and np.isnan(io) else (max(int(io) - int(age[0]), 0) if repayment == "interest_only" else 0)
    paydown = (seg.payment_rate or 0.0) if (repayment == "revolving" and fw == "cecl") else 0.0
    frame = cashflows.schedule(
        repayment, float(row["balance"].iloc[0]), float(row["interest_rate"].iloc[0]), months,
        interest_only_months_left=io_left,
        residual=float(_residual(row, a.segments, rate, remaining, age)[0]),
        payment=float(row["payment"].iloc[0]) if repayment == "level" else float("nan"),
        paydown=paydown, smm=prep.smm[prepay[0], cols], marginal_pd=prep.pd[f, curve[0], :months, scenario],
    )
    frame.insert(0, "scenario", prep.scenario_names[scenario])
    frame.insert(0, "framework", fw)
    frame.insert(0, "loan_id", row["loan_id"].iloc[0])
    return frame
