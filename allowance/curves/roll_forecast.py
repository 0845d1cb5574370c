r"""Balance roll-rate forecast: delinquency-bucket balances rolled forward through the matrix.

The analyst's roll-rate view of a delinquent book: today's balance in each delinquency bucket
is moved forward one month at a time through the segment's monthly roll-rate matrix, and the
balance that rolls into charge-off each month is the charge-off forecast. Next month's
charge-offs are the balance in the last bucket times its roll rate to charge-off; three
months out, a bucket's balance reaches charge-off through the product of the roll rates
along the path (common practice, no source).

Balances are rolled as they stand: the matrix's own ``paid_off`` column (where it has one)
takes out payoffs; scheduled amortisation of the balance that stays is not modelled, which is
how a balance roll-rate forecast is read (the matrix, if estimated on balances, carries it).
The loan-level figure instead amortises every loan, applies the LGD, the scenarios and (IFRS 9)
discounting; :func:`roll_forecast_check` puts the two side by side.

Implements
----------
bucket_balances      today's balance by delinquency bucket
roll_forecast        charge-offs, payoffs and bucket balances by month, and the lifetime total
roll_forecast_check  the forecast beside the loan-level allowance of the same segment

References
----------
.. [1] J. G. Kemeny and J. L. Snell, *Finite Markov Chains*, Van Nostrand, 1960, ch. III
   (absorbing chains: the balance absorbed in charge-off over all time is b N r with the
   fundamental matrix N = (I - Q)^-1).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance.curves.roll_rates import (
    PAID_OFF,
    _check_transient,
    bucket_index,
    delinquency_buckets,
    validate_matrix,
)
from allowance.schemas import TransitionMatrix
from allowance.exceptions import InvalidInputError


def bucket_balances(days_past_due, balance, charge_off_dpd: int) -> np.ndarray:
    """Total balance in each delinquency bucket (the order of :func:`delinquency_buckets`).

    Examples
    --------
    >>> bucket_balances([0, 0, 45, 95, 400], [100.0, 50.0, 20.0, 10.0, 5.0], 120).tolist()
    [150.0, 0.0, 20.0, 0.0, 15.0]
    """
    nb = len(delinquency_buckets(charge_off_dpd))
    index = bucket_index(np.asarray(days_past_due), charge_off_dpd)
    return np.bincount(index, weights=np.asarray(balance, dtype=float), minlength=nb)


@dataclass(frozen=True)
class RollForecast:
    """A balance roll-rate forecast of one segment.

    Attributes
    ----------
    by_month : DataFrame
        One row per month 1..T: ``month, opening_balance`` (in the buckets at the start of the
        month), ``charge_offs``, ``paid_off`` (0 without a ``paid_off`` state),
        ``closing_balance``, ``cumulative_charge_offs`` and one column per bucket with its
        balance at the end of the month.
    lifetime_charge_offs : float
        Balance that ever reaches charge-off, :math:`b_0 N r` (Kemeny and Snell).
    """

    by_month: pd.DataFrame
    lifetime_charge_offs: float

    @property
    def charge_offs_12m(self) -> float:
        """Charge-offs over the first 12 months (all months when fewer are forecast)."""
        return float(self.by_month["charge_offs"].iloc[:12].sum())


def roll_forecast(opening, matrix: TransitionMatrix, charge_off_dpd: int, months: int = 12,
                  name: str = "") -> RollForecast:
    r"""Roll bucket balances forward month by month through a monthly roll-rate matrix.

    Parameters
    ----------
    opening : array_like, shape (buckets,)
        Balance in each delinquency bucket today (:func:`bucket_balances`).
    matrix : TransitionMatrix
        The segment's monthly roll rates (validated here).
    charge_off_dpd : {120, 180}
        The segment's charge-off policy.
    months : int
        Months to forecast.
    name : str
        Segment name, for error messages.

    Notes
    -----
    With :math:`Q` the bucket-to-bucket block, :math:`r` the column into charge-off and
    :math:`p` the column into payoff,

    .. math::

        b_t = b_{t-1} Q, \qquad CO_t = b_{t-1} r, \qquad PO_t = b_{t-1} p,

    so :math:`CO_t = b_0 Q^{t-1} r`: the balance in bucket i reaches charge-off in month t
    along every path of t rolls, each weighted by the product of its roll rates. The
    lifetime total is :math:`b_0 (I - Q)^{-1} r`.

    Examples
    --------
    Everything rolls one bucket a month or cures to current (the invented matrix below):
    1,000 in 90-119 days past due under a 180-day policy charges off in month 3 through
    90-119 → 120-149 → 150-179 → charge-off, 1,000 × 0.5 × 0.6 × 0.7 = 210.

    >>> from allowance.curves.roll_rates import expected_states
    >>> rows = np.zeros((8, 8))
    >>> for i, roll in enumerate([0.02, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7]):
    ...     rows[i, i + 1], rows[i, 0] = roll, 1 - roll
    >>> rows[7, 7] = 1.0
    >>> m = TransitionMatrix(states=list(expected_states(180, paid_off=False)), probabilities=rows.tolist())
    >>> f = roll_forecast([0, 0, 0, 0, 1000.0, 0, 0], m, 180, months=3)
    >>> f.by_month["charge_offs"].round(6).tolist()
    [0.0, 0.0, 210.0]
    """
    probs = validate_matrix(name, matrix, charge_off_dpd)
    nb = len(delinquency_buckets(charge_off_dpd))
    b = np.asarray(opening, dtype=float)
    if b.shape != (nb,) or not np.all(np.isfinite(b)) or np.any(b < 0):
        raise InvalidInputError(f"opening must be {nb} balances >= 0, one per bucket; got {b!r}")
    q, to_charge_off = probs[:nb, :nb], probs[:nb, nb]
    to_payoff = probs[:nb, nb + 1] if PAID_OFF in matrix.states else np.zeros(nb)
    rows = np.empty((months, nb))
    opening_total = np.empty(months)
    charge_offs = np.empty(months)
    paid_off = np.empty(months)
    for t in range(months):
        opening_total[t] = b.sum()
        charge_offs[t] = b @ to_charge_off
        paid_off[t] = b @ to_payoff
        b = b @ q
        rows[t] = b
    frame = pd.DataFrame(
        {
            "month": np.arange(1, months + 1),
            "opening_balance": opening_total,
            "charge_offs": charge_offs,
            "paid_off": paid_off,
            "closing_balance": rows.sum(axis=1),
            "cumulative_charge_offs": np.cumsum(charge_offs),
        }
    )
    for j, bucket in enumerate(delinquency_buckets(charge_off_dpd)):
        frame[bucket] = rows[:, j]
    opening_b = np.asarray(opening, dtype=float)
    if opening_b.sum() > 0:
        _check_transient(name, matrix, probs, nb)
        lifetime = float(opening_b @ np.linalg.solve(np.eye(nb) - q, to_charge_off))
    else:
        lifetime = 0.0
    return RollForecast(frame, lifetime)


def roll_forecast_check(forecast: RollForecast, lgd: float, ecl_12m: float, ecl_lifetime: float,
                        segment: str = "") -> pd.DataFrame:
    """The forecast's losses beside the loan-level allowance of the same segment.

    Parameters
    ----------
    forecast : RollForecast
    lgd : float
        The segment's LGD: forecast loss = charge-offs × LGD.
    ecl_12m, ecl_lifetime : float
        The loan-level figures of the segment's loans (12-month and lifetime).

    Returns
    -------
    DataFrame
        Two rows (``12 months``, ``lifetime``): ``segment, horizon, forecast_charge_offs,
        lgd, forecast_loss, loan_level_ecl, difference`` (loan level − forecast) and
        ``ratio`` (loan level / forecast; blank when the forecast is 0).

    Notes
    -----
    The two differ by design: the loan-level figure amortises each loan's balance and
    applies the scenarios (and discounting where the framework asks), while the forecast rolls
    today's balances unchanged except through the matrix. A large gap is the prompt to look.

    Examples
    --------
    >>> f = RollForecast(pd.DataFrame({"charge_offs": [10.0] * 12}), 200.0)
    >>> roll_forecast_check(f, 0.5, 55.0, 90.0, "cards")[["horizon", "forecast_loss", "ratio"]]
         horizon  forecast_loss  ratio
    0  12 months           60.0  0.917
    1   lifetime          100.0  0.900
    """
    gross = np.array([forecast.charge_offs_12m, forecast.lifetime_charge_offs])
    loss = gross * lgd
    loan = np.array([ecl_12m, ecl_lifetime], dtype=float)
    ratio = np.full(2, np.nan)
    np.divide(loan, loss, out=ratio, where=loss > 0)
    return pd.DataFrame(
        {
            "segment": segment,
            "horizon": ["12 months", "lifetime"],
            "forecast_charge_offs": gross.round(2),
            "lgd": lgd,
            "forecast_loss": loss.round(2),
            "loan_level_ecl": loan.round(2),
            "difference": (loan - loss).round(2),
            "ratio": ratio.round(3),
        }
    )


def segment_roll_forecasts(tape: pd.DataFrame, segments: dict, loans: pd.DataFrame | None = None,
                           months: int = 12) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The forecast of every roll-rate segment of a book, and its check on the loan-level figure.

    Parameters
    ----------
    tape : DataFrame
        Accepted loans: ``segment, days_past_due, balance``.
    segments : dict of SegmentAssumptions
        The run's segments; those with a (read) ``transition_matrix`` are forecast.
    loans : DataFrame, optional
        The run's loan results (``segment, ecl_12m, ecl_lifetime``) for the check; without
        them the check's loan-level columns are 0.
    months : int
        Months forecast.

    Returns
    -------
    (by_month, check) : DataFrame, DataFrame
        ``by_month``: :attr:`RollForecast.by_month` of each segment with a ``segment`` column
        first; ``check``: :func:`roll_forecast_check` of each segment.
    """
    by_month, checks = [], []
    for name, seg in segments.items():
        if seg.pd_source != "transition_matrix" or not isinstance(seg.transition_matrix, TransitionMatrix):
            continue
        mine = (tape["segment"] == name).to_numpy()
        opening = bucket_balances(tape["days_past_due"].to_numpy()[mine], tape["balance"].to_numpy(float)[mine],
                                  seg.charge_off_dpd)
        forecast = roll_forecast(opening, seg.transition_matrix, seg.charge_off_dpd, months, name)
        by_month.append(forecast.by_month.assign(segment=name)[["segment", *forecast.by_month.columns]])
        if loans is not None:
            # the segment's two columns only (a row filter of the whole frame copies every column);
            # blanks skipped as a Series sum skips them
            theirs = (loans["segment"] == name).to_numpy(dtype=bool, na_value=False)
            twelve, life = (float(np.nansum(loans[c].to_numpy(dtype=float)[theirs])) for c in ("ecl_12m", "ecl_lifetime"))
        else:
            twelve = life = 0.0
        checks.append(roll_forecast_check(forecast, float(seg.lgd), twelve, life, name))
    if not by_month:
        return pd.DataFrame(), pd.DataFrame()
    return pd.concat(by_month, ignore_index=True), pd.concat(checks, ignore_index=True)
