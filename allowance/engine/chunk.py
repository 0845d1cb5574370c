"""One chunk of loans: their terms at the as-of date, their stages, and the fused ECL loop.

Implements
----------
LoanTerms   each loan's state as the loop reads it
loan_terms  remaining term, seasoning, schedule inputs and curve rows of every loan
run_chunk   modelled (unrounded) results and engine findings for a chunk
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance import cashflows, curves, scenarios, staging
from allowance.discounting import monthly_rate
from allowance.ecl import KernelInputs, expected_losses
from allowance.engine.tables import (
    Prepared,
    _behavioural_life,
    _by_segment,
    _remaining,
    _revolving_parameter,
    _segment_values,
)
from allowance.exceptions import AssumptionsError


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


@dataclass(frozen=True)
class LoanTerms:
    """Each loan's state at the as-of date, as the fused loop reads it (arrays of length n)."""

    repayment: np.ndarray
    code: np.ndarray
    balance: np.ndarray
    rate: np.ndarray  # monthly contract rate
    eir: np.ndarray  # nominal annual, defaulted to the contract rate
    age: np.ndarray
    behavioural: np.ndarray
    remaining: np.ndarray
    io_left: np.ndarray
    residual: np.ndarray
    payment: np.ndarray
    curve: np.ndarray
    prepay: np.ndarray
    prepay_offset: np.ndarray


def loan_terms(chunk: pd.DataFrame, prep: Prepared) -> LoanTerms:
    """Remaining term, seasoning, repayment schedule inputs and curve rows of every loan."""
    segments = prep.config.assumptions.segments
    as_of = pd.Timestamp(prep.config.as_of)
    repayment = chunk["repayment"].to_numpy()
    kinds, names = pd.factorize(chunk["repayment"])
    code = np.array([cashflows.REPAYMENT_CODES[k] for k in names] + [0], dtype=np.int64)[kinds]
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
    curve = _curve_keys(chunk, prep)
    prepay, prepay_offset = _prepay_keys(chunk, prep, curve, age)
    return LoanTerms(
        repayment=repayment, code=code, balance=chunk["balance"].to_numpy(float), rate=rate, eir=eir,
        age=age, behavioural=behavioural, remaining=remaining, io_left=io_left,
        residual=_residual(chunk, segments, rate, remaining, age),
        payment=np.where(code == cashflows.LEVEL, chunk["payment"].to_numpy(float), np.nan),
        curve=curve, prepay=prepay, prepay_offset=prepay_offset,
    )


def run_chunk(chunk: pd.DataFrame, prep: Prepared) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Modelled results (unrounded) for a chunk of accepted loans, and engine findings.

    Returns the per-loan frame (stage, horizons, EAD, PDs, LGD, ECL per framework and
    scenario, modelled weighted ECL) and a findings frame (``payment_short`` warnings).
    """
    a = prep.config.assumptions
    segments = a.segments
    n = len(chunk)
    terms = loan_terms(chunk, prep)
    repayment, revolving = terms.repayment, terms.repayment == "revolving"
    code, balance, rate, eir = terms.code, terms.balance, terms.rate, terms.eir
    behavioural, remaining = terms.behavioural, terms.remaining
    io_left, residual, payment = terms.io_left, terms.residual, terms.payment
    curve, prepay, prepay_offset = terms.curve, terms.prepay, terms.prepay_offset

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
            paydown[f] = _revolving_parameter(
                chunk, segments, "payment_rate", " for CECL",
                "state the monthly share of the drawn balance repaid (e.g. 0.05)",
            )
            if a.cecl.discount:
                discount[f] = 1.0 / (1.0 + monthly_rate(eir))

    # LGD per loan
    has_coll_lgd = _by_segment(chunk, {k: float(v.collateral_lgd is not None) for k, v in segments.items()}, 0.0) > 0
    collateral = np.where(has_coll_lgd, np.nan_to_num(chunk["collateral_value"].to_numpy(float)), 0.0)
    cure = _segment_values(chunk, segments, "cure_rate", 0.0)
    flat = curves.effective_lgd(_segment_values(chunk, segments, "lgd"), cure)

    def coll_param(attr):
        table = {k: (getattr(s.collateral_lgd, attr) if s.collateral_lgd else 0.0) for k, s in segments.items()}
        return _by_segment(chunk, table, 0.0)

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
