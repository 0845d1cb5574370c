"""Roll-rate matrices: absorbing-chain identities, bucket mapping, validation, analytics."""

from __future__ import annotations

import numpy as np
import pytest
from pydantic import ValidationError
from hypothesis import given, settings

from allowance.curves import (
    bucket_index,
    cumulative_pd,
    delinquency_buckets,
    expected_states,
    matrix_term_structure,
    pd_over,
    pd_term_structure,
    roll_rate_summary,
    survival,
    unconditional_marginal,
    validate_matrix,
)
from allowance.exceptions import AssumptionsError
from allowance.schemas import SegmentAssumptions, TransitionMatrix
from tests.strategies import example_roll_matrix, transition_matrices

POLICIES = [(120, True), (120, False), (180, True), (180, False)]


def _fundamental(probs: np.ndarray, nb: int) -> tuple[np.ndarray, np.ndarray]:
    """N = (I - Q)^-1 and B = N R, computed here independently of the package."""
    n = np.linalg.inv(np.eye(nb) - probs[:nb, :nb])  # Kemeny & Snell, Finite Markov Chains, def. 3.2.2
    return n, n @ probs[:nb, nb:]  # Kemeny & Snell, Finite Markov Chains, thm. 3.3.7


@pytest.mark.parametrize(("dpd", "paid_off"), POLICIES)
def test_absorption_probabilities_match_the_fundamental_matrix(dpd: int, paid_off: bool) -> None:
    # Kemeny & Snell, Finite Markov Chains: absorption probabilities B = N R, N = (I - Q)^-1
    matrix = example_roll_matrix(dpd, paid_off)
    probs = np.array(matrix.probabilities)
    nb = len(delinquency_buckets(dpd))
    n, b = _fundamental(probs, nb)
    ts = matrix_term_structure("cards", matrix, dpd, 6000)  # long enough for Q^t to vanish
    d = unconditional_marginal(ts.marginal, ts.smm)
    np.testing.assert_allclose(d.sum(axis=1), b[:, 0], rtol=0, atol=1e-10)
    np.testing.assert_allclose(pd_over(ts.marginal, 6000, ts.smm), b[:, 0], rtol=0, atol=1e-10)
    if paid_off:
        # payoffs in month t: S_{t-1} (1 - pd_t) smm_t, summed, against B[:, paid_off]
        before = np.hstack([np.ones((nb, 1)), survival(ts.marginal, ts.smm)[:, :-1]])
        np.testing.assert_allclose((before * (1 - ts.marginal) * ts.smm).sum(axis=1), b[:, 1], rtol=0, atol=1e-10)
    summary = roll_rate_summary("cards", matrix, dpd)
    np.testing.assert_allclose(summary["pd_lifetime"], b[:, 0], rtol=1e-12)
    np.testing.assert_allclose(summary["pd_lifetime_payoff"], b[:, 1] if paid_off else 0.0, rtol=1e-12, atol=0)
    # mean month of charge-off, by definition sum t d_t / sum d_t, against (N b)_i / b_i
    t = np.arange(1, 6001)
    np.testing.assert_allclose(summary["expected_months_to_charge_off"], (d * t).sum(axis=1) / d.sum(axis=1), rtol=1e-8)
    np.testing.assert_allclose(summary["expected_months_to_charge_off"], (n @ b[:, 0]) / b[:, 0], rtol=1e-12)


@pytest.mark.parametrize(("dpd", "paid_off"), POLICIES)
def test_12_month_pd_is_the_12th_matrix_power(dpd: int, paid_off: bool) -> None:
    # (P^12)[i, charge_off]: Chapman-Kolmogorov, computed with numpy.linalg.matrix_power
    matrix = example_roll_matrix(dpd, paid_off)
    probs = np.array(matrix.probabilities)
    nb = len(delinquency_buckets(dpd))
    ts = matrix_term_structure("cards", matrix, dpd, 24)
    for months in (1, 3, 12, 24):
        expected = np.linalg.matrix_power(probs, months)[:nb, nb]  # numpy.linalg.matrix_power
        np.testing.assert_allclose(pd_over(ts.marginal, months, ts.smm), expected, rtol=0, atol=1e-13)
    # survival = the mass still in the buckets
    np.testing.assert_allclose(
        survival(ts.marginal, ts.smm)[:, 11], np.linalg.matrix_power(probs, 12)[:nb, :nb].sum(axis=1), atol=1e-13
    )
    summary = roll_rate_summary("cards", matrix, dpd)
    np.testing.assert_allclose(summary["pd_12m"], np.linalg.matrix_power(probs, 12)[:nb, nb], rtol=1e-13)
    assert summary["bucket"].tolist() == list(delinquency_buckets(dpd))
    assert summary.columns.tolist() == [
        "segment", "bucket", "pd_12m", "pd_lifetime", "expected_months_to_charge_off", "pd_lifetime_payoff",
    ]


def test_forward_rolls_on_a_revolving_segment() -> None:
    # common practice, no source: with forward rolls only, the balance charging off in three
    # months from 90-119 = balance x roll(90-119 -> 120-149) x roll(120-149 -> 150-179) x roll(150-179 -> charge_off)
    r1, r2, r3 = 0.70, 0.80, 0.90
    rows = [  # no cures: stay, roll one bucket forward, or pay off
        [0.96, 0.03, 0, 0, 0, 0, 0, 0, 0.01],
        [0, 0.30, 0.65, 0, 0, 0, 0, 0, 0.05],
        [0, 0, 0.20, 0.75, 0, 0, 0, 0, 0.05],
        [0, 0, 0, 0.15, 0.80, 0, 0, 0, 0.05],
        [0, 0, 0, 0, 0.20, r1, 0, 0, 0.10],
        [0, 0, 0, 0, 0, 0.10, r2, 0, 0.10],
        [0, 0, 0, 0, 0, 0, 0.05, r3, 0.05],
        [0, 0, 0, 0, 0, 0, 0, 1, 0],
        [0, 0, 0, 0, 0, 0, 0, 0, 1],
    ]
    matrix = TransitionMatrix(states=list(expected_states(180, True)), probabilities=rows)
    segment = SegmentAssumptions(transition_matrix=matrix, charge_off_dpd=180, lgd=0.85)
    ts = pd_term_structure("cards", segment, 12)
    start = ts.keys.index("dpd_90_119")
    balance = 2_500.0
    charged_off = balance * unconditional_marginal(ts.marginal, ts.smm)[start]
    assert charged_off[:2].tolist() == [0.0, 0.0]  # cannot reach charge-off sooner
    assert charged_off[2] == pytest.approx(balance * r1 * r2 * r3, rel=1e-14)  # 1,260.00
    assert charged_off[2] == pytest.approx(1_260.0, rel=1e-14)


def test_bucket_index() -> None:
    # the DPD buckets of the contract: 0, 1-29, 30-59, 60-89, 90-119, 120-149, 150-179
    dpd = np.array([0, 1, 29, 30, 59, 60, 89, 90, 119, 120, 149, 150, 179, 180, 365])
    assert bucket_index(dpd, 120).tolist() == [0, 1, 1, 2, 2, 3, 3, 4, 4, 4, 4, 4, 4, 4, 4]
    assert bucket_index(dpd, 180).tolist() == [0, 1, 1, 2, 2, 3, 3, 4, 4, 5, 5, 6, 6, 6, 6]
    names = np.array(delinquency_buckets(180))[bucket_index(dpd, 180)]
    assert names[9] == "dpd_120_149" and names[0] == "current"
    with pytest.raises(ValueError):
        bucket_index(np.array([-1]), 120)


@settings(max_examples=30)
@given(matrix=transition_matrices())
def test_any_valid_matrix_matches_matrix_powers(matrix: TransitionMatrix) -> None:
    # Chapman-Kolmogorov: P(charged off by t | start i) = (P^t)[i, charge_off]; numpy.linalg.matrix_power
    dpd = 180 if "dpd_150_179" in matrix.states else 120
    probs = validate_matrix("s", matrix, dpd)
    nb = len(delinquency_buckets(dpd))
    ts = matrix_term_structure("s", matrix, dpd, 13)
    cum = cumulative_pd(ts.marginal, ts.smm)
    for t in (1, 5, 13):
        np.testing.assert_allclose(cum[:, t - 1], np.linalg.matrix_power(probs, t)[:nb, nb], rtol=0, atol=1e-12)
    assert np.all((ts.marginal >= 0) & (ts.marginal <= 1))
    summary = roll_rate_summary("s", matrix, dpd)  # Kemeny & Snell: B rows sum to 1
    np.testing.assert_allclose(summary["pd_lifetime"] + summary["pd_lifetime_payoff"], 1.0, rtol=0, atol=1e-9)


# --------------------------------------------------------------------------------------
# Validation: every error names the segment and the cell
# --------------------------------------------------------------------------------------


def _rows(dpd: int = 180) -> list[list[float]]:
    return [list(r) for r in example_roll_matrix(dpd, True).probabilities]


def _matrix(rows: list[list[float]], states: list[str] | None = None, dpd: int = 180) -> TransitionMatrix:
    states = states or list(expected_states(dpd, True))
    return TransitionMatrix(states=states, probabilities=rows, source="cards_rolls.csv")


def test_entry_outside_zero_one_names_the_cell() -> None:
    rows = _rows()
    rows[2][0], rows[2][2] = -0.05, 0.35  # row still sums to 1
    with pytest.raises(AssumptionsError) as err:
        validate_matrix("cards", _matrix(rows), 180)
    assert "segments.cards.transition_matrix row dpd_30_59 column current" in str(err.value)
    assert str(err.value).startswith("cards_rolls.csv: ")


def test_row_not_summing_to_one_names_the_row() -> None:
    rows = _rows()
    rows[3][0] += 1e-8  # beyond the 1e-9 tolerance
    with pytest.raises(AssumptionsError, match=r"segments\.cards\.transition_matrix row dpd_60_89: the row sums to"):
        validate_matrix("cards", _matrix(rows), 180)
    rows[3][0] -= 1e-8 - 5e-10  # within it
    validate_matrix("cards", _matrix(rows), 180)


def test_absorbing_state_must_absorb() -> None:
    rows = _rows()
    rows[7] = [0.1, 0, 0, 0, 0, 0, 0, 0.9, 0]  # a charge-off that comes back
    with pytest.raises(AssumptionsError, match="row charge_off column charge_off"):
        validate_matrix("cards", _matrix(rows), 180)
    rows = _rows()
    rows[8] = [0.0, 0, 0, 0, 0, 0, 0, 0.5, 0.5]
    with pytest.raises(AssumptionsError, match="row paid_off column paid_off"):
        validate_matrix("cards", _matrix(rows), 180)


def test_states_must_match_the_charge_off_policy() -> None:
    # a 180-dpd matrix under a 120-dpd policy: state 6 should be charge_off
    expected = r"transition_matrix states: state 6 is 'dpd_120_149', expected 'charge_off'"
    with pytest.raises(AssumptionsError, match=expected):
        validate_matrix("cards", _matrix(_rows()), 120)
    states = list(expected_states(180, True))
    states[1], states[2] = states[2], states[1]
    with pytest.raises(AssumptionsError, match="segments.cards.transition_matrix states: state 2"):
        validate_matrix("cards", _matrix(_rows(), states), 180)


def test_matrix_must_be_square() -> None:
    with pytest.raises(AssumptionsError, match="has 8 rows, expected 9"):
        validate_matrix("cards", _matrix(_rows()[:8]), 180)
    rows = _rows()
    rows[4] = rows[4][:-1]
    with pytest.raises(AssumptionsError, match="row dpd_90_119: has 8 columns, expected 9"):
        validate_matrix("cards", _matrix(rows), 180)


def test_nan_entry_is_an_error() -> None:
    rows = _rows()
    rows[0][1] = float("nan")
    # the assumptions models refuse every non-finite number, a matrix entry included
    with pytest.raises(ValidationError, match="finite number"):
        validate_matrix("cards", _matrix(rows), 180)


def test_closed_loop_of_buckets_has_no_lifetime_pd() -> None:
    # Kemeny & Snell: N exists only when every transient state reaches an absorbing one
    rows = _rows(120)
    rows[0] = [1.0, 0, 0, 0, 0, 0, 0]  # current never leaves current
    matrix = _matrix(rows, dpd=120)
    assert matrix_term_structure("auto", matrix, 120, 12).marginal[0].max() == 0.0  # fine month by month
    with pytest.raises(AssumptionsError, match="row current: a loan in current never reaches charge_off"):
        roll_rate_summary("auto", matrix, 120)


def test_unread_matrix_file_is_an_error() -> None:
    segment = SegmentAssumptions(transition_matrix="cards_rolls.csv", charge_off_dpd=180, lgd=0.8)
    with pytest.raises(AssumptionsError, match="segments.cards.transition_matrix"):
        pd_term_structure("cards", segment, 12)
