"""Book-level tables, built once per run: term structures, prepayment curves, scenario paths.

Implements
----------
Prepared     the tables every chunk of loans reads (shapes in :class:`allowance.ecl.KernelInputs`)
prepare      build them for a book
tape_months  the longest horizon on a tape (how many months the tables must cover)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance import cashflows, curves, scenarios
from allowance.exceptions import AssumptionsError
from allowance.schemas import Framework, RunConfig, SegmentAssumptions


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
    collateral_index: np.ndarray  # [F, K, T, S]
    tables: dict[Framework, scenarios.ScenarioTables]
    pd_12m_now: np.ndarray  # [K]: IFRS 9 probability-weighted 12-month PD, for staging

# --------------------------------------------------------------------------------------
# Loan terms
# --------------------------------------------------------------------------------------


def _by_segment(tape: pd.DataFrame, table: dict[str, object], default=np.nan) -> np.ndarray:
    """One number per loan from a per-segment table (a lookup per segment, not per loan)."""
    codes, names = pd.factorize(tape["segment"])
    per_segment = np.array([default if table.get(n) is None else table[n] for n in names] + [default], dtype=float)
    return per_segment[codes]  # code -1 (no segment) takes the default


def _segment_values(tape: pd.DataFrame, segments: dict[str, SegmentAssumptions], attr: str, default=np.nan):
    return _by_segment(tape, {name: getattr(seg, attr) for name, seg in segments.items()}, default)


def _revolving_parameter(tape: pd.DataFrame, segments: dict[str, SegmentAssumptions], attr: str,
                         why: str, hint: str) -> np.ndarray:
    """A segment parameter revolving lines cannot do without; never assumed when missing."""
    values = _segment_values(tape, segments, attr)
    revolving = (tape["repayment"] == "revolving").to_numpy()
    missing = revolving & np.isnan(values)
    if missing.any():
        seg = tape["segment"].to_numpy()[missing][0]
        raise AssumptionsError(f"segment {seg!r} has revolving lines but no {attr}{why}",
                               column=f"segments.{seg}.{attr}", hint=hint)
    return np.where(revolving, values, 0.0)


def _behavioural_life(tape: pd.DataFrame, segments: dict[str, SegmentAssumptions]) -> np.ndarray:
    return _revolving_parameter(
        tape, segments, "behavioural_life_months", "", "state the behavioural life in months (IFRS 9 B5.5.40)"
    ).astype(np.int64)


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
    key_segments = [name for name, ts in structures.items() for _ in ts.keys]
    tables = {fw: scenarios.scenario_tables(base, rho, a, fw, key_segments) for fw in frameworks}
    pd_table = np.ascontiguousarray(np.stack([tables[fw].pd.transpose(0, 2, 1) for fw in frameworks]))
    lgd_mult = np.ascontiguousarray(np.stack([tables[fw].lgd_multiplier.T for fw in frameworks]))
    coll_idx = np.ascontiguousarray(
        np.stack([tables[fw].collateral_per_key(base.shape[0]).transpose(0, 2, 1) for fw in frameworks]))
    weights = np.asarray(a.weights, float)
    first = tables["ifrs9"] if "ifrs9" in tables else tables[frameworks[0]]
    pd_12m_now = scenarios.weighted(curves.pd_over(first.pd, 12), weights)
    return Prepared(
        config=config, months=months, frameworks=frameworks, scenario_names=tuple(a.scenarios),
        weights=weights, structures=structures, key_offset=key_offset, prepay_row=prepay_row,
        pd=pd_table, smm=smm, lgd_multiplier=lgd_mult, collateral_index=coll_idx, tables=tables,
        pd_12m_now=pd_12m_now,
    )
