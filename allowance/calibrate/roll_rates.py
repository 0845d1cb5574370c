r"""Monthly roll-rate (transition) matrices between delinquency buckets, from transition counts.

Every loan-month that ends a one-month transition from a delinquency bucket is one
observation: from the bucket at the previous month end to the state at this month end (a
bucket, ``charge_off`` or ``paid_off``). Pooled over the window, the maximum-likelihood
estimate of a time-homogeneous Markov chain's transition probabilities is the share of the
transitions from each state that went to each state [1]_:

.. math::

    \hat p_{ij} = \frac{n_{ij}}{n_i}, \qquad n_i = \sum_j n_{ij}, \qquad
    \operatorname{se}(\hat p_{ij}) = \sqrt{\hat p_{ij} (1 - \hat p_{ij}) / n_i},

and :math:`\sum_j n_i (\hat p_{ij} - p_{ij})^2 / p_{ij}` is asymptotically :math:`\chi^2` with
(number of states reached from i) - 1 degrees of freedom under the true matrix. The
balance-weighted matrix replaces the counts with the balances at the start of the month
(:math:`b_{ij} = \sum` balance of the loans that went from i to j), the share of the money
in bucket i that rolled to j. One of the two is written for the run (``weighting``); the
other is written beside it. A bucket with no observation in the window gets the contractual
roll (one bucket forward, the last bucket to charge-off) and is flagged.

Implements
----------
collect        transition counts and balances by segment, month, from-state and to-state
estimate       the pooled matrices over the window, their counts, standard errors and series
SegmentRolls   one segment's matrices and counts
RollRates      every segment's

References
----------
.. [1] T. W. Anderson and L. A. Goodman, "Statistical inference about Markov chains",
   *Annals of Mathematical Statistics* 28(1), 89-110, 1957 (maximum-likelihood estimates
   n_ij / n_i and their asymptotic distribution).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from allowance.calibrate.frame import Frame, MonthView, month_label
from allowance.calibrate.settings import Weighting
from allowance.calibrate.states import AFTER_EXIT, CHARGE_OFF, N_STATES, STATES, segment_states
from allowance.schemas import TransitionMatrix


def collect(view: MonthView) -> dict[str, np.ndarray]:
    """Transition counts and start-of-month balances, ``[segment, month, from, to]``."""
    frame = view.frame
    shape = (len(frame.segments), frame.months, N_STATES, N_STATES)
    ends = np.flatnonzero(view.transition)
    starts = view.before[ends]
    to = view.state[ends].astype(np.int64)
    flat = np.ravel_multi_index(
        (view.segment[ends].astype(np.int64), view.t[ends], view.state[starts].astype(np.int64), to), shape
    )
    size = int(np.prod(shape))
    counts = np.bincount(flat, minlength=size).reshape(shape)
    balances = np.bincount(flat, weights=view.part.balance[starts], minlength=size).reshape(shape)
    # loans that stop reporting while on the book (sold, transferred, or a gap): no transition
    last = np.r_[view.part.loan[1:] != view.part.loan[:-1], True] if view.part.rows else np.zeros(0, bool)
    vanished = last & view.active & (view.part.month < frame.as_of)
    gaps = ~view.follows & ~view.new_loan & (view.state != AFTER_EXIT)
    seg = view.segment.astype(np.int64)
    n = len(frame.segments)
    return {
        "counts": counts.astype(np.int64),
        "balances": balances,
        "vanished": np.bincount(seg[vanished], minlength=n),
        "gaps": np.bincount(seg[gaps], minlength=n),
    }


@dataclass(frozen=True)
class SegmentRolls:
    """One segment's roll rates over the window.

    ``by_count`` and ``by_balance`` are the matrices (rows sum to 1), ``counts`` the
    observations :math:`n_{ij}`, ``balances`` :math:`b_{ij}`, ``standard_error`` of the count
    estimate, ``unobserved`` the buckets with no observation (given the contractual roll).
    """

    segment: str
    charge_off_dpd: int
    states: tuple[str, ...]
    by_count: np.ndarray
    by_balance: np.ndarray
    counts: np.ndarray
    balances: np.ndarray
    standard_error: np.ndarray
    unobserved: tuple[str, ...]
    weighting: Weighting

    @property
    def chosen(self) -> np.ndarray:
        return self.by_count if self.weighting == "count" else self.by_balance

    @property
    def other(self) -> np.ndarray:
        return self.by_balance if self.weighting == "count" else self.by_count

    @property
    def other_weighting(self) -> Weighting:
        return "balance" if self.weighting == "count" else "count"

    def matrix(self, weighting: Weighting | None = None) -> TransitionMatrix:
        """The matrix as the ``transition_matrix`` key reads it (decimals that sum to 1 by row)."""
        probabilities = self.by_count if (weighting or self.weighting) == "count" else self.by_balance
        return TransitionMatrix(states=list(self.states), probabilities=rounded_rows(probabilities).tolist())

    def table(self, what: str) -> pd.DataFrame:
        """A matrix as a frame: ``from`` then one column per state."""
        values = {"count": self.by_count, "balance": self.by_balance, "observations": self.counts,
                  "balances": self.balances, "standard_error": self.standard_error}[what]
        frame = pd.DataFrame(values, columns=list(self.states))
        frame.insert(0, "from", list(self.states))
        return frame


@dataclass(frozen=True)
class RollRates:
    """Every segment's roll rates, and monthly roll rates over the whole history (``series``)."""

    segments: dict[str, SegmentRolls]
    series: pd.DataFrame = field(repr=False)
    window: tuple[str, str] = ("", "")
    vanished: dict[str, int] = field(default_factory=dict)
    gaps: dict[str, int] = field(default_factory=dict)


def rounded_rows(matrix: np.ndarray, decimals: int = 8) -> np.ndarray:
    """Round each row to ``decimals`` places so that the rounded row still sums to exactly 1.

    The rounding residue goes to the row's largest entry.

    Examples
    --------
    >>> rounded_rows(np.array([[1 / 3, 1 / 3, 1 / 3]]), 2).tolist()
    [[0.34, 0.33, 0.33]]
    """
    scale = 10**decimals
    units = np.rint(np.asarray(matrix, float) * scale).astype(np.int64)
    residue = scale - units.sum(axis=1)
    top = np.argmax(units, axis=1)
    units[np.arange(len(units)), top] += residue
    return units / scale


def _contractual(states: np.ndarray) -> np.ndarray:
    """One bucket forward each month; the last bucket to charge-off (rows of unobserved buckets)."""
    k = len(states)
    matrix = np.zeros((k, k))
    buckets = k - 2
    for i in range(buckets):
        matrix[i, i + 1 if i + 1 < buckets else buckets] = 1.0
    return matrix


def _normalise(weights: np.ndarray, fallback: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    total = weights.sum(axis=1, keepdims=True)
    observed = total[:, 0] > 0
    matrix = np.where(observed[:, None], weights / np.where(total > 0, total, 1.0), fallback)
    return matrix, observed


def estimate(stats: dict[str, np.ndarray], frame: Frame) -> RollRates:
    """Pool the window's transitions into each segment's matrices (count- and balance-weighted)."""
    lo = frame.window_start - frame.first_month
    counts = stats["counts"][:, lo:].sum(axis=1)
    balances = stats["balances"][:, lo:].sum(axis=1)
    weighting = frame.settings.weighting
    out = {}
    for s, name in enumerate(frame.segments):
        codes = segment_states(int(frame.charge_off_dpd[s]))
        names = tuple(STATES[c] for c in codes)
        n = counts[s][np.ix_(codes, codes)].astype(np.int64)
        b = balances[s][np.ix_(codes, codes)]
        k = len(codes)
        buckets = k - 2
        fallback = _contractual(codes)
        by_count, seen = _normalise(n[:buckets].astype(float), fallback[:buckets])
        by_balance, _ = _normalise(b[:buckets], fallback[:buckets])
        absorbing = np.zeros((2, k))
        absorbing[0, buckets] = absorbing[1, buckets + 1] = 1.0
        by_count = np.vstack([by_count, absorbing])
        by_balance = np.vstack([by_balance, absorbing])
        rows = np.r_[n[:buckets].sum(axis=1), np.zeros(2)]
        se = np.sqrt(by_count * (1 - by_count) / np.where(rows > 0, rows, 1.0)[:, None])
        se[buckets:] = 0.0
        se[:buckets][~seen] = np.nan
        out[name] = SegmentRolls(
            segment=name, charge_off_dpd=int(frame.charge_off_dpd[s]), states=names, by_count=by_count,
            by_balance=by_balance, counts=n, balances=b, standard_error=se,
            unobserved=tuple(names[i] for i in range(buckets) if not seen[i]), weighting=weighting,
        )
    return RollRates(
        segments=out, series=_series(stats["counts"], frame), window=frame.window,
        vanished={name: int(v) for name, v in zip(frame.segments, stats["vanished"])},
        gaps={name: int(v) for name, v in zip(frame.segments, stats["gaps"])},
    )


def _series(counts: np.ndarray, frame: Frame) -> pd.DataFrame:
    """Monthly roll rates forward and to charge-off, by segment (for the stability charts).

    One row per segment and month: the share of each bucket that rolled one bucket forward
    (``current -> dpd_1_29`` and so on), that charged off, and that paid off, with the loans
    in each bucket at the start of the month.
    """
    rows = []
    for s, name in enumerate(frame.segments):
        codes = segment_states(int(frame.charge_off_dpd[s]))
        buckets = len(codes) - 2
        for t in range(1, frame.months):
            n = counts[s, t]
            start = n.sum(axis=1)
            total = start[:buckets].sum()
            if total == 0:
                continue
            record = {"segment": name, "month": month_label(frame.first_month + t), "loans": int(total)}
            for i in range(buckets):
                to = i + 1 if i + 1 < buckets else CHARGE_OFF
                label = f"{STATES[i]}_to_{STATES[to]}"
                record[label] = n[i, to] / start[i] if start[i] else np.nan
            record["to_charge_off"] = n[:buckets, CHARGE_OFF].sum() / total
            record["to_paid_off"] = n[:buckets, CHARGE_OFF + 1].sum() / total
            rows.append(record)
    return pd.DataFrame(rows)
