"""Performance histories simulated from known parameters, for the calibration tests.

Every simulator is seeded and vectorised over accounts; each returns the history as a frame in
the contract's columns and what it drew (the true counts), so a test can compare what the
calibration estimates with the truth.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from allowance.calibrate.states import BUCKETS

START = np.datetime64("2022-01", "M")


def month_end(month: np.ndarray | int) -> np.ndarray:
    """Month-end dates of month offsets from START."""
    m = START + np.asarray(month)
    return ((m + 1).astype("datetime64[D]") - 1).astype("datetime64[D]")


@dataclass(frozen=True)
class MarkovHistory:
    """A history drawn from a monthly roll-rate matrix, and the transitions actually drawn."""

    frame: pd.DataFrame
    counts: np.ndarray  # [from, to] over the matrix's states


def markov_history(probabilities: np.ndarray, charge_off_dpd: int, accounts: int, months: int, seed: int,
                   segment: str = "book", start: np.ndarray | None = None) -> MarkovHistory:
    """Accounts following a monthly Markov chain over ``current, dpd_1_29, ..., charge_off, paid_off``.

    Every account is on the book at month 0 in ``start`` (default: current); each month it
    moves by the matrix's row. A bucket b is written as days past due 30 (b - 1) + 15; the
    month an account enters ``charge_off`` it is written off (``charge_off`` = its balance of
    1,000, balance 0), the month it enters ``paid_off`` it is flagged repaid; then it leaves.
    """
    rng = np.random.default_rng(seed)
    p = np.asarray(probabilities, float)
    k = p.shape[0]
    buckets = k - 2
    cum = np.cumsum(p, axis=1)
    state = np.zeros(accounts, np.int64) if start is None else np.asarray(start, np.int64).copy()
    counts = np.zeros((k, k), np.int64)
    frames = []

    def rows(idx: np.ndarray, month: int, st: np.ndarray) -> pd.DataFrame:
        written = st == buckets
        repaid = st == buckets + 1
        dpd = np.where(st == 0, 0, np.where(st < buckets, 30 * (st - 1) + 15, charge_off_dpd + 15))
        return pd.DataFrame({
            "loan_id": [f"L{i:07d}" for i in idx], "segment": segment,
            "month": month_end(np.full(len(idx), month)).astype(str),
            "balance": np.where(written | repaid, 0.0, 1000.0), "days_past_due": dpd,
            "charge_off": np.where(written, 1000.0, np.nan), "paid_off": repaid,
        })

    active = np.arange(accounts)
    frames.append(rows(active, 0, state[active]))
    for month in range(1, months):
        u = rng.random(len(active))
        nxt = (u[:, None] > cum[state[active]]).sum(axis=1)
        nxt = np.minimum(nxt, k - 1)
        np.add.at(counts, (state[active], nxt), 1)
        state[active] = nxt
        frames.append(rows(active, month, nxt))
        active = active[nxt < buckets]
        if not len(active):
            break
    return MarkovHistory(frame=pd.concat(frames, ignore_index=True), counts=counts)


def constant_hazard_history(hazard: float, smm: float, vintages: int, per_vintage: int, months: int,
                            seed: int) -> pd.DataFrame:
    """Loans originated over ``vintages`` years (``per_vintage`` a month), each month charged off
    with probability ``hazard`` and otherwise repaid with probability ``smm``; observed for the
    last ``months`` months (older vintages enter the history already seasoned)."""
    rng = np.random.default_rng(seed)
    first = -12 * vintages  # origination months relative to the history's first month
    origination = np.repeat(np.arange(first, months), per_vintage)
    n = len(origination)
    alive = np.ones(n, bool)
    frames = []
    for month in range(first + 1, months):
        on = alive & (origination < month)
        idx = np.flatnonzero(on)
        u = rng.random(len(idx))
        written = u < hazard
        repaid = ~written & (u < hazard + (1 - hazard) * smm)
        alive[idx[written | repaid]] = False
        if month >= 0:
            frames.append(pd.DataFrame({
                "loan_id": [f"V{i:07d}" for i in idx], "segment": "book",
                "month": month_end(np.full(len(idx), month)).astype(str),
                "balance": np.where(written | repaid, 0.0, 500.0), "days_past_due": np.where(written, 125, 0),
                "origination_date": month_end(origination[idx]).astype(str),
                "charge_off": np.where(written, 500.0, np.nan), "paid_off": repaid,
            }))
    return pd.concat(frames, ignore_index=True)


@dataclass(frozen=True)
class MacroHistory:
    """A history whose monthly default probability follows a macro series, and that series."""

    frame: pd.DataFrame
    macro: pd.DataFrame  # month (YYYY-MM), one column per variable, from 24 months before START


def macro_driven_history(slots: int, months: int, intercept: float, beta: float, lag: int, seed: int,
                         segment: str = "book") -> MacroHistory:
    """A book of ``slots`` accounts: each month the live loan of a slot is charged off with
    probability Phi(intercept + beta * u(t - lag)) (a probit satellite model with known
    coefficients), and a new loan takes its place the month after. u is a seeded cycle around
    5 % with noise, monthly, starting 24 months before the history."""
    from scipy.stats import norm

    rng = np.random.default_rng(seed)
    back = 24
    t = np.arange(-back, months)
    u = 5.0 + 1.5 * np.sin(2 * np.pi * t / 30.0) + rng.normal(0.0, 0.3, t.size)
    p = norm.cdf(intercept + beta * u[back - lag:back - lag + months])
    default = rng.random((slots, months)) < p[None, :]
    loan = np.cumsum(default, axis=1) - default  # loans charged off before this month in the slot
    slot = np.repeat(np.arange(slots), months)
    month = np.tile(np.arange(months), slots)
    written = default.ravel()
    frame = pd.DataFrame({
        "loan_id": [f"M{s:05d}-{k:03d}" for s, k in zip(slot, loan.ravel())], "segment": segment,
        "month": month_end(month).astype(str), "balance": np.where(written, 0.0, 1000.0),
        "days_past_due": np.where(written, 125, 0), "charge_off": np.where(written, 1000.0, np.nan),
    })
    macro = pd.DataFrame({"month": [str(START + int(k)) for k in t], "unemployment_rate": np.round(u, 4)})
    return MacroHistory(frame=frame, macro=macro)


def write_csv(frame: pd.DataFrame, path: Path) -> Path:
    frame.to_csv(path, index=False)
    return path


def write_parquet(frame: pd.DataFrame, path: Path) -> Path:
    frame.to_parquet(path, index=False)
    return path


__all__ = ["BUCKETS", "MacroHistory", "MarkovHistory", "constant_hazard_history", "macro_driven_history", "markov_history", "month_end", "write_csv",
           "write_parquet"]
