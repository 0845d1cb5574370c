"""Roll-rate (transition) matrices over delinquency buckets: validation, PDs, analytics.

A monthly Markov chain over the delinquency buckets ``current, dpd_1_29, ..., dpd_90_119``
(and ``dpd_120_149, dpd_150_179`` when charge-off is at 180 days past due), with the
absorbing states ``charge_off`` and optionally ``paid_off``. A loan starts in the bucket of
its days past due; its marginal PD in month t is the probability of entering charge-off in
month t given that it is still active at the start of month t.

Implements
----------
delinquency_buckets    the bucket state names for a charge-off policy (120 or 180 dpd)
expected_states        the full state list, in order
bucket_index           days past due -> bucket (row of the term structure)
validate_matrix        check a TransitionMatrix and return it as an array
matrix_term_structure  marginal PD and payoff SMM by starting bucket
roll_rate_summary      12-month and lifetime PD, months to charge-off, by starting bucket

References
----------
.. [1] J. G. Kemeny and J. L. Snell, *Finite Markov Chains*, Van Nostrand, 1960, ch. III
   (absorbing chains: the fundamental matrix N = (I - Q)^-1, absorption probabilities
   B = N R and mean times to absorption).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from allowance.curves.term_structure import PdTermStructure
from allowance.exceptions import AssumptionsError, InvalidInputError
from allowance.schemas import TransitionMatrix

CHARGE_OFF = "charge_off"
PAID_OFF = "paid_off"
ROW_TOLERANCE = 1e-9

_BUCKETS_120: tuple[str, ...] = ("current", "dpd_1_29", "dpd_30_59", "dpd_60_89", "dpd_90_119")
#: charge-off policy (days past due) -> the delinquency bucket states, in order.
DELINQUENCY_BUCKETS: dict[int, tuple[str, ...]] = {
    120: _BUCKETS_120,
    180: _BUCKETS_120 + ("dpd_120_149", "dpd_150_179"),
}


def delinquency_buckets(charge_off_dpd: int) -> tuple[str, ...]:
    """The bucket state names for loans charged off at ``charge_off_dpd`` days past due.

    Examples
    --------
    >>> delinquency_buckets(120)[-1], len(delinquency_buckets(180))
    ('dpd_90_119', 7)
    """
    try:
        return DELINQUENCY_BUCKETS[charge_off_dpd]
    except KeyError:
        known = sorted(DELINQUENCY_BUCKETS)
        raise InvalidInputError(f"charge_off_dpd must be one of {known}; got {charge_off_dpd!r}") from None


def expected_states(charge_off_dpd: int, paid_off: bool) -> tuple[str, ...]:
    """All states of a matrix in order: the buckets, ``charge_off``, then ``paid_off`` if any.

    Examples
    --------
    >>> expected_states(120, paid_off=True)
    ('current', 'dpd_1_29', 'dpd_30_59', 'dpd_60_89', 'dpd_90_119', 'charge_off', 'paid_off')
    """
    return delinquency_buckets(charge_off_dpd) + (CHARGE_OFF,) + ((PAID_OFF,) if paid_off else ())


def bucket_index(days_past_due: np.ndarray, charge_off_dpd: int) -> np.ndarray:
    """Delinquency bucket of each loan: the row of its roll-rate term structure.

    0 for current, 1 for 1-29 days past due, 2 for 30-59, ... in steps of 30 days; loans at
    or beyond ``charge_off_dpd`` (not yet charged off on the tape) go in the last bucket.

    Examples
    --------
    >>> bucket_index(np.array([0, 1, 29, 30, 89, 90, 119, 150, 400]), 120).tolist()
    [0, 1, 1, 2, 3, 4, 4, 4, 4]
    >>> bucket_index(np.array([120, 179, 180]), 180).tolist()
    [5, 6, 6]
    """
    dpd = np.asarray(days_past_due)
    if dpd.size and dpd.min() < 0:
        raise InvalidInputError("days past due must be >= 0 (intake rejects negative values)")
    last = len(delinquency_buckets(charge_off_dpd)) - 1
    index = np.where(dpd <= 0, 0, 1 + dpd // 30)
    return np.minimum(index, last).astype(np.int64)


def _error(name: str, matrix: TransitionMatrix, cell: str, reason: str, hint: str) -> AssumptionsError:
    return AssumptionsError(reason, file=matrix.source, column=f"segments.{name}.transition_matrix{cell}", hint=hint)


def validate_matrix(name: str, matrix: TransitionMatrix, charge_off_dpd: int) -> np.ndarray:
    """Check a roll-rate matrix and return it as a float array (states x states).

    Checks, in order: the states are the expected ones for the charge-off policy, in order;
    the matrix is square; every entry is a number in [0, 1]; every row sums to 1 within
    1e-9; the absorbing states (``charge_off``, ``paid_off``) keep all their mass.

    Raises
    ------
    AssumptionsError
        Naming the segment and the cell, e.g.
        ``segments.cards.transition_matrix row dpd_30_59 column current``.

    Examples
    --------
    >>> states = list(expected_states(120, paid_off=False))
    >>> rows = [[0.9, 0.1, 0, 0, 0, 0], [0.5, 0, 0.5, 0, 0, 0], [0.2, 0, 0, 0.8, 0, 0],
    ...         [0.1, 0, 0, 0, 0.9, 0], [0, 0, 0, 0, 0.1, 0.9], [0, 0, 0, 0, 0, 1]]
    >>> validate_matrix("auto", TransitionMatrix(states=states, probabilities=rows), 120).shape
    (6, 6)
    >>> rows[2][0] = 0.3  # 30-59 now sums to 1.1
    >>> validate_matrix("auto", TransitionMatrix(states=states, probabilities=rows), 120)
    Traceback (most recent call last):
    ...
    allowance.exceptions.AssumptionsError: key segments.auto.transition_matrix row dpd_30_59: \
the row sums to 1.1, not 1 (fix: make each row's probabilities add up to 1 within 1e-09)
    """
    if charge_off_dpd not in DELINQUENCY_BUCKETS:
        raise AssumptionsError(
            f"charge_off_dpd {charge_off_dpd!r} is not a charge-off policy we know",
            column=f"segments.{name}.charge_off_dpd",
            hint="use 120 (closed-end installment loans) or 180 (open-end revolving lines)",
        )
    states = tuple(matrix.states)
    want = expected_states(charge_off_dpd, paid_off=PAID_OFF in states)
    if states != want:
        pos = next((i for i, (a, b) in enumerate(zip(states, want)) if a != b), min(len(states), len(want)))
        got = repr(states[pos]) if pos < len(states) else "nothing"
        expected = repr(want[pos]) if pos < len(want) else "no more states"
        raise _error(
            name, matrix, " states",
            f"state {pos + 1} is {got}, expected {expected} (charge-off at {charge_off_dpd} days past due)",
            f"the header must read from,{','.join(want)} (paid_off optional)",
        )
    n = len(states)
    if len(matrix.probabilities) != n:
        raise _error(name, matrix, "", f"has {len(matrix.probabilities)} rows, expected {n} (one per state)",
                     f"give one row per state: {', '.join(states)}")
    for i, row in enumerate(matrix.probabilities):
        if len(row) != n:
            raise _error(name, matrix, f" row {states[i]}", f"has {len(row)} columns, expected {n}",
                         "the matrix must be square: one column per state")
    probs = np.array(matrix.probabilities, dtype=np.float64)
    bad = ~(np.isfinite(probs) & (probs >= 0.0) & (probs <= 1.0))
    if bad.any():
        i, j = np.argwhere(bad)[0]
        raise _error(name, matrix, f" row {states[i]} column {states[j]}",
                     f"{probs[i, j]!r} is not a probability", "give a decimal between 0 and 1")
    sums = probs.sum(axis=1)
    off = np.abs(sums - 1.0) > ROW_TOLERANCE
    if off.any():
        i = int(np.argmax(off))
        raise _error(name, matrix, f" row {states[i]}", f"the row sums to {sums[i]:.12g}, not 1",
                     f"make each row's probabilities add up to 1 within {ROW_TOLERANCE:g}")
    for a in range(len(delinquency_buckets(charge_off_dpd)), n):
        if abs(probs[a, a] - 1.0) > ROW_TOLERANCE:
            raise _error(name, matrix, f" row {states[a]} column {states[a]}",
                         f"{states[a]} is absorbing but stays with probability {probs[a, a]:g}",
                         f"put 1 on the {states[a]} diagonal and 0 elsewhere in its row")
    return probs


def matrix_term_structure(name: str, matrix: TransitionMatrix, charge_off_dpd: int, months: int) -> PdTermStructure:
    r"""Marginal PD (and payoff SMM) by starting bucket, from a validated roll-rate matrix.

    Parameters
    ----------
    name : str
        Segment name.
    matrix : TransitionMatrix
        Monthly roll rates; validated with :func:`validate_matrix`.
    charge_off_dpd : {120, 180}
        The segment's charge-off policy.
    months : int
        Months of term structure.

    Returns
    -------
    PdTermStructure
        ``keys`` are the bucket states; ``smm`` is set when the matrix has ``paid_off``.

    Notes
    -----
    With :math:`Q` the bucket-to-bucket block, :math:`r` the column into charge-off and
    :math:`p` the column into payoff, let :math:`\pi_{t-1}` be the distribution over buckets
    at the start of month t, conditional on being active (:math:`\pi_0 = e_i`). Then

    .. math::

        pd_t = \pi_{t-1} r, \qquad
        smm_t = \frac{\pi_{t-1} p}{1 - pd_t}, \qquad
        \pi_t = \frac{\pi_{t-1} Q}{\pi_{t-1} Q \mathbf{1}},

    so that :math:`S_{t-1} pd_t` is the probability of entering charge-off in month t.
    Carrying the conditional distribution (instead of the unconditional one) keeps full
    precision however small survival becomes. A start that is absorbed with certainty gets
    ``pd = smm = 0`` afterwards (there is nothing left to default).

    Examples
    --------
    >>> rows = [[0.95, 0.03, 0, 0, 0, 0, 0.02], [0.5, 0.2, 0.3, 0, 0, 0, 0],
    ...         [0.2, 0.1, 0.1, 0.6, 0, 0, 0], [0.1, 0, 0, 0.1, 0.8, 0, 0],
    ...         [0.05, 0, 0, 0, 0.05, 0.9, 0], [0, 0, 0, 0, 0, 1, 0], [0, 0, 0, 0, 0, 0, 1]]
    >>> m = TransitionMatrix(states=list(expected_states(120, paid_off=True)), probabilities=rows)
    >>> ts = matrix_term_structure("auto", m, 120, 3)
    >>> ts.keys[4], ts.marginal[4].round(4).tolist(), ts.smm[0].round(4).tolist()
    ('dpd_90_119', [0.9, 0.45, 0.0417], [0.02, 0.0194, 0.0191])

    From 30-59 the only way to charge off within 3 months is to roll forward each month:

    >>> from allowance.curves.term_structure import pd_over
    >>> round(float(pd_over(ts.marginal[2], 3, ts.smm[2])), 12), round(0.6 * 0.8 * 0.9, 12)
    (0.432, 0.432)
    """
    probs = validate_matrix(name, matrix, charge_off_dpd)
    nb = len(delinquency_buckets(charge_off_dpd))
    has_payoff = PAID_OFF in matrix.states
    q = probs[:nb, :nb]
    to_charge_off = probs[:nb, nb]
    to_payoff = probs[:nb, nb + 1] if has_payoff else np.zeros(nb)
    not_defaulting = q.sum(axis=1) + to_payoff  # 1 - to_charge_off, without the cancellation

    marginal = np.zeros((nb, months))
    smm = np.zeros((nb, months))
    dist = np.eye(nb)  # row i: conditional bucket distribution of a loan that started in bucket i
    for t in range(months):
        marginal[:, t] = dist @ to_charge_off
        stay = dist @ not_defaulting
        np.divide(dist @ to_payoff, stay, out=smm[:, t], where=stay > 0.0)
        dist = dist @ q
        active = dist.sum(axis=1, keepdims=True)
        np.divide(dist, active, out=dist, where=active > 0.0)
    np.minimum(marginal, 1.0, out=marginal)
    np.minimum(smm, 1.0, out=smm)
    return PdTermStructure(name, delinquency_buckets(charge_off_dpd), marginal, smm if has_payoff else None,
                           "transition_matrix")


def _check_transient(name: str, matrix: TransitionMatrix, probs: np.ndarray, nb: int) -> None:
    """Every bucket must reach an absorbing state, or (I - Q) is singular."""
    step = probs[:nb, :nb] > 0.0
    reaches = probs[:nb, nb:].sum(axis=1) > 0.0
    for _ in range(nb):
        reaches = reaches | (step & reaches[None, :]).any(axis=1)
    if not reaches.all():
        state = matrix.states[int(np.argmin(reaches))]
        raise _error(name, matrix, f" row {state}",
                     f"a loan in {state} never reaches {CHARGE_OFF} or {PAID_OFF}, so its lifetime PD is undefined",
                     "give every bucket a path to charge_off (or paid_off)")


def roll_rate_summary(name: str, matrix: TransitionMatrix, charge_off_dpd: int) -> pd.DataFrame:
    r"""Implied 12-month PD, lifetime PD and months to charge-off from each starting bucket.

    Parameters
    ----------
    name : str
        Segment name (the ``segment`` column).
    matrix : TransitionMatrix
        Monthly roll rates.
    charge_off_dpd : {120, 180}
        The segment's charge-off policy.

    Returns
    -------
    DataFrame
        One row per starting bucket: ``segment, bucket, pd_12m, pd_lifetime,
        expected_months_to_charge_off, pd_lifetime_payoff``.

    Notes
    -----
    Write the matrix in canonical form with :math:`Q` (bucket to bucket) and :math:`R`
    (bucket to absorbing state). Following Kemeny and Snell [1]_:

    - ``pd_12m`` is :math:`(P^{12})_{i,\,co}`, charge-off within 12 months;
    - the fundamental matrix :math:`N = (I - Q)^{-1}` gives the absorption probabilities
      :math:`B = N R`; ``pd_lifetime`` is :math:`B_{i,\,co}` and ``pd_lifetime_payoff``
      :math:`B_{i,\,po}` (0 without a payoff state);
    - with :math:`b = B_{\cdot,\,co}` and :math:`T` the month in which the loan is
      absorbed, :math:`E[T;\ \text{charge-off}] = \sum_t t\,(Q^{t-1} r)_i = (N^2 r)_i = (N b)_i`,
      so ``expected_months_to_charge_off`` is :math:`(N b)_i / b_i`, the mean month of
      charge-off among the loans from bucket i that do charge off. It is NaN only where
      ``pd_lifetime`` is 0 (no loan from that bucket ever charges off).

    References
    ----------
    .. [1] J. G. Kemeny and J. L. Snell, *Finite Markov Chains*, Van Nostrand, 1960,
       sections 3.2-3.3.

    Examples
    --------
    >>> rows = [[0.95, 0.03, 0, 0, 0, 0, 0.02], [0.5, 0.2, 0.3, 0, 0, 0, 0],
    ...         [0.2, 0.1, 0.1, 0.6, 0, 0, 0], [0.1, 0, 0, 0.1, 0.8, 0, 0],
    ...         [0.05, 0, 0, 0, 0.05, 0.9, 0], [0, 0, 0, 0, 0, 1, 0], [0, 0, 0, 0, 0, 0, 1]]
    >>> m = TransitionMatrix(states=list(expected_states(120, paid_off=True)), probabilities=rows)
    >>> print(roll_rate_summary("auto", m, 120).drop(columns="segment").round(3).to_string(index=False))
        bucket  pd_12m  pd_lifetime  expected_months_to_charge_off  pd_lifetime_payoff
       current   0.043        0.248                         43.653               0.752
      dpd_1_29   0.247        0.413                         23.653               0.587
     dpd_30_59   0.600        0.688                          9.653               0.312
     dpd_60_89   0.848        0.881                          4.069               0.119
    dpd_90_119   0.949        0.960                          1.646               0.040
    """
    probs = validate_matrix(name, matrix, charge_off_dpd)
    buckets = delinquency_buckets(charge_off_dpd)
    nb = len(buckets)
    _check_transient(name, matrix, probs, nb)
    fundamental_inv = np.eye(nb) - probs[:nb, :nb]
    absorbed = np.linalg.solve(fundamental_inv, probs[:nb, nb:])  # B = N R
    pd_lifetime = absorbed[:, 0]
    weighted_time = np.linalg.solve(fundamental_inv, pd_lifetime)  # N b
    months = np.full(nb, np.nan)
    np.divide(weighted_time, pd_lifetime, out=months, where=pd_lifetime > 0.0)
    return pd.DataFrame(
        {
            "segment": name,
            "bucket": list(buckets),
            "pd_12m": np.linalg.matrix_power(probs, 12)[:nb, nb],
            "pd_lifetime": np.minimum(pd_lifetime, 1.0),
            "expected_months_to_charge_off": months,
            "pd_lifetime_payoff": absorbed[:, 1] if absorbed.shape[1] > 1 else np.zeros(nb),
        }
    )
