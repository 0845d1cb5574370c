"""The one PD primitive, and every quantity derived from it.

Every PD source (12-month PD, cumulative curve, roll-rate matrix) produces one thing: the
monthly marginal PD conditional on survival, ``pd_t`` for months t = 1..T (column t - 1).
Survival, the unconditional marginal PD, the cumulative PD and the PD over a horizon are
derived from it here and nowhere else.

Implements
----------
PdTermStructure         the marginal PDs (and payoff SMMs) of one segment, one row per key
survival                S_t = prod_{k<=t} (1 - pd_k)(1 - smm_k)
unconditional_marginal  S_{t-1} pd_t: probability of defaulting in month t
cumulative_pd           running sum of the unconditional marginals
pd_over                 cumulative PD at a horizon (the 12-month PD is ``pd_over(m, 12)``)
loan_pd_scale           the multiplier that gives a curve row a loan's own 12-month PD
"""

from __future__ import annotations

from dataclasses import dataclass
from collections.abc import Iterable

import numpy as np
import pandas as pd

from allowance.exceptions import AssumptionsError, InvalidInputError


@dataclass(frozen=True, eq=False)
class PdTermStructure:
    r"""Monthly marginal PDs of one segment, one row per curve key.

    Attributes
    ----------
    segment : str
        The segment name (the ``[segments.<name>]`` table).
    keys : tuple of str
        What a row stands for: ``("*",)`` for one curve per segment, grade names, or
        delinquency bucket state names (a loan starts in the bucket of its DPD).
    marginal : ndarray, shape (len(keys), months)
        ``marginal[k, t - 1]`` = P(default in month t | active at the start of month t).
    smm : ndarray or None, same shape
        Payoff probability in month t, conditional on being active and not defaulting that
        month. Only roll-rate matrices with a ``paid_off`` state carry one.
    source : str
        The PD source key it was built from (``SegmentAssumptions.pd_source``).

    Notes
    -----
    With defaults and payoffs competing within a month,

    .. math::

        S_t = \prod_{k=1}^{t} (1 - pd_k)(1 - smm_k), \qquad
        P(\text{default in month } t) = S_{t-1}\, pd_t .

    Examples
    --------
    >>> ts = PdTermStructure("auto", ("*",), np.full((1, 24), 0.01), None, "pd_12m")
    >>> ts.months, ts.key_index(["*", "*"]).tolist()
    (24, [0, 0])
    """

    segment: str
    keys: tuple[str, ...]
    marginal: np.ndarray
    smm: np.ndarray | None
    source: str

    def __post_init__(self) -> None:
        marginal = np.array(self.marginal, dtype=np.float64)
        if marginal.ndim != 2 or marginal.shape[0] != len(self.keys):
            raise InvalidInputError(f"marginal must have shape (len(keys)={len(self.keys)}, months); got {marginal.shape}")
        marginal.setflags(write=False)
        object.__setattr__(self, "marginal", marginal)
        object.__setattr__(self, "keys", tuple(self.keys))
        if self.smm is not None:
            smm = np.array(self.smm, dtype=np.float64)
            if smm.shape != marginal.shape:
                raise InvalidInputError(f"smm must have the shape of marginal {marginal.shape}; got {smm.shape}")
            smm.setflags(write=False)
            object.__setattr__(self, "smm", smm)

    @property
    def months(self) -> int:
        """Number of months covered (the last axis)."""
        return int(self.marginal.shape[1])

    def key_index(self, labels: Iterable[str]) -> np.ndarray:
        """Row of ``marginal`` for each label (a grade name, ``"*"``, or a bucket state).

        Raises
        ------
        AssumptionsError
            A label has no curve in this segment (e.g. a grade the assumptions do not give).
        """
        lookup = {key: i for i, key in enumerate(self.keys)}
        if not isinstance(labels, (pd.Series, pd.api.extensions.ExtensionArray, np.ndarray)):
            labels = np.asarray(list(labels), dtype=object)
        # codes by first appearance (Arrow text is factorised without a Python object a label)
        inverse, found = pd.factorize(labels, use_na_sentinel=False)
        uniques = [str(u) for u in found]
        missing = sorted(u for u in set(uniques) if u not in lookup)
        if missing:
            raise AssumptionsError(
                f"no PD for {', '.join(repr(str(m)) for m in missing)}; the segment gives "
                f"{', '.join(repr(k) for k in self.keys)}",
                column=f"segments.{self.segment}.{self.source}",
                hint="add the missing grades to the assumptions or correct the tape's grade column",
            )
        return np.array([lookup[u] for u in uniques], dtype=np.int64)[inverse].reshape(np.shape(labels))


def _keep_factors(marginal: np.ndarray, smm: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """The marginal PD broadcast against ``smm``, and the monthly survival factor."""
    pd_t = np.asarray(marginal, dtype=np.float64)
    if pd_t.ndim == 0:
        raise InvalidInputError("marginal PDs need a months axis (the last axis)")
    keep = 1.0 - pd_t
    if smm is not None:
        keep = keep * (1.0 - np.asarray(smm, dtype=np.float64))
    return np.broadcast_to(pd_t, keep.shape), keep


def survival(marginal: np.ndarray, smm: np.ndarray | None = None) -> np.ndarray:
    r"""Probability of being active (not defaulted, not paid off) at the end of each month.

    Parameters
    ----------
    marginal : array_like, shape (..., T)
        Monthly marginal PD conditional on survival; the last axis is months 1..T.
    smm : array_like, optional
        Monthly payoff probability conditional on being active and not defaulting that month;
        broadcasts against ``marginal``. None: no prepayment.

    Returns
    -------
    ndarray, shape (..., T)
        ``S_t`` for t = 1..T (``S_0 = 1`` is not included).

    Notes
    -----
    .. math:: S_t = \prod_{k=1}^{t} (1 - pd_k)(1 - smm_k)

    Examples
    --------
    >>> survival([0.1, 0.1, 0.1]).round(4).tolist()
    [0.9, 0.81, 0.729]
    >>> survival([0.1, 0.1], smm=[0.5, 0.5]).round(4).tolist()
    [0.45, 0.2025]
    """
    _, keep = _keep_factors(np.asarray(marginal), smm)
    return np.cumprod(keep, axis=-1)


def unconditional_marginal(marginal: np.ndarray, smm: np.ndarray | None = None) -> np.ndarray:
    r"""Probability of defaulting in month t, seen from today: ``S_{t-1} pd_t``.

    Parameters
    ----------
    marginal, smm : array_like
        As in :func:`survival`.

    Notes
    -----
    Default in month t is measured on the loans active at the start of month t, so payoffs in
    month t do not compete with defaults in month t:

    .. math:: d_t = S_{t-1}\, pd_t, \qquad S_0 = 1 .

    Examples
    --------
    >>> unconditional_marginal([0.1, 0.1, 0.1]).round(4).tolist()
    [0.1, 0.09, 0.081]
    >>> unconditional_marginal([0.1, 0.1], smm=[0.5, 0.5]).round(4).tolist()
    [0.1, 0.045]
    """
    pd_t, keep = _keep_factors(np.asarray(marginal), smm)
    before = np.empty(keep.shape, dtype=np.float64)
    if keep.shape[-1]:
        before[..., 0] = 1.0
        before[..., 1:] = np.cumprod(keep[..., :-1], axis=-1)
    return before * pd_t


def cumulative_pd(marginal: np.ndarray, smm: np.ndarray | None = None) -> np.ndarray:
    r"""Probability of defaulting (before paying off) by the end of each month.

    Parameters
    ----------
    marginal, smm : array_like
        As in :func:`survival`.

    Returns
    -------
    ndarray, shape (..., T)
        ``C_t`` for t = 1..T, non-decreasing, in [0, 1].

    Notes
    -----
    .. math:: C_t = \sum_{k=1}^{t} S_{k-1}\, pd_k

    Without payoffs :math:`C_t = 1 - S_t`. The running sum is capped at 1 against rounding.

    Examples
    --------
    >>> cumulative_pd([0.1, 0.1, 0.1]).round(4).tolist()
    [0.1, 0.19, 0.271]
    >>> cumulative_pd([0.1, 0.1], smm=[0.5, 0.5]).round(4).tolist()
    [0.1, 0.145]
    """
    return np.minimum(np.cumsum(unconditional_marginal(marginal, smm), axis=-1), 1.0)


def pd_over(marginal: np.ndarray, months: int | np.ndarray, smm: np.ndarray | None = None) -> np.ndarray:
    r"""Cumulative PD over a horizon of ``months`` (0 for a horizon of 0).

    Parameters
    ----------
    marginal, smm : array_like
        As in :func:`survival`.
    months : int or array of int
        The horizon; an array broadcasts against the leading axes of ``marginal`` (one
        horizon per loan, say). Must not exceed the number of months given.

    Returns
    -------
    ndarray
        :math:`C_{months}`, with the leading shape of ``marginal`` broadcast against ``months``.

    Notes
    -----
    The 12-month PD is ``pd_over(marginal, 12)``; the lifetime PD of a loan is its
    ``pd_over`` at its horizon.

    Examples
    --------
    >>> float(pd_over([0.1, 0.1, 0.1], 2).round(4))
    0.19
    >>> pd_over([[0.1, 0.1, 0.1], [0.2, 0.2, 0.2]], np.array([0, 3])).round(4).tolist()
    [0.0, 0.488]
    """
    cum = cumulative_pd(marginal, smm)
    horizon = np.asarray(months)
    if horizon.dtype.kind not in "iu":
        if not np.all(np.isfinite(horizon)) or np.any(horizon != np.round(horizon)):
            raise InvalidInputError("months must be whole numbers")
        horizon = horizon.astype(np.int64)
    if horizon.size and (horizon.min() < 0 or horizon.max() > cum.shape[-1]):
        raise InvalidInputError(f"horizon must lie in 0..{cum.shape[-1]} months; got {horizon.min()}..{horizon.max()}")
    padded = np.concatenate([np.zeros(cum.shape[:-1] + (1,)), cum], axis=-1)
    lead = np.broadcast_shapes(padded.shape[:-1], horizon.shape)
    padded = np.broadcast_to(padded, lead + padded.shape[-1:])
    index = np.broadcast_to(horizon, lead)[..., None]
    return np.take_along_axis(padded, index, axis=-1)[..., 0]


def loan_pd_scale(first_year, pd_12m, *, iterations: int = 6) -> np.ndarray:
    r"""The multiplier :math:`k` of a curve row's monthly PDs that gives it a loan's own 12-month PD.

    Parameters
    ----------
    first_year : array_like, shape (n, 12)
        The monthly marginal PDs of the first year of each loan's curve row (before the
        scenario paths). A row of NaN (no PD curve: a loss-rate segment) gives 1.
    pd_12m : array_like, shape (n,)
        The loan's own 12-month PD (tape ``pd_12m_current``); NaN gives 1 (the curve as it is).

    Returns
    -------
    ndarray, shape (n,)
        :math:`k \ge 0`; the loop reads :math:`\min(k \, pd_t, 1)` in every month and scenario.

    Notes
    -----
    The loan keeps its segment's term structure (its shape over time, the scenario paths and
    CECL's reversion) and takes its own level: :math:`k` solves

    .. math:: 1 - \prod_{t=1}^{12} (1 - k \, pd_t) = PD^{loan}_{12}

    by Newton's method from :math:`k_0 = \ln(1 - PD^{loan}_{12}) / \sum_t \ln(1 - pd_t)`
    (exact for a flat first year when :math:`k\,pd_t` stays small). A monthly PD is scaled as a
    scenario's PD multiplier scales it (DESIGN: "a PD multiplier scales the monthly marginal
    PD, capped at 1"): relative risk held through the life is common practice, no source.
    A curve row with no default risk in its first year (all :math:`pd_t = 0`) cannot be scaled
    and gives 1.

    Examples
    --------
    A flat 1 % a month (12-month PD 11.36 %) set to a loan's 5 %: each month becomes 0.4265 %.

    >>> k = loan_pd_scale(np.full((2, 12), 0.01), [0.05, np.nan])
    >>> (k * 0.01).round(6).tolist()
    [0.004265, 0.01]
    >>> float(pd_over(np.full(12, 0.01 * k[0]), 12).round(6))
    0.05
    """
    p = np.asarray(first_year, dtype=float)
    target = np.asarray(pd_12m, dtype=float)
    if p.ndim != 2 or p.shape[0] != target.shape[0]:
        raise InvalidInputError("loan_pd_scale: first_year must be (loans, months) with one pd_12m per loan")
    log_keep = np.log1p(-np.clip(p, 0.0, 1.0 - 1e-12)).sum(axis=1)
    usable = ~np.isnan(target) & ~np.isnan(log_keep) & (log_keep < 0.0) & (target < 1.0)
    k = np.ones(target.shape[0])
    if not usable.any():
        return k
    q = np.nan_to_num(p[usable])
    goal = np.log1p(-np.clip(target[usable], 0.0, 1.0 - 1e-12))
    top = 1.0 / np.maximum(q.max(axis=1), 1e-300) * (1.0 - 1e-9)  # k pd_t stays below 1
    x = np.minimum(goal / log_keep[usable], top)
    for _ in range(iterations):  # g(k) = sum ln(1 - k pd_t) - ln(1 - PD): decreasing, concave
        kp = np.minimum(x[:, None] * q, 1.0 - 1e-12)
        g = np.log1p(-kp).sum(axis=1) - goal
        slope = -(q / (1.0 - kp)).sum(axis=1)
        x = np.clip(x - g / slope, 0.0, top)
    k[usable] = x
    return k
