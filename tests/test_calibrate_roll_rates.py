"""Roll-rate matrices recovered from a history simulated from a known monthly matrix.

Source of the method: T. W. Anderson and L. A. Goodman, "Statistical inference about Markov
chains", Annals of Mathematical Statistics 28(1), 1957: the maximum-likelihood estimate of a
transition probability is n_ij / n_i, asymptotically normal with variance p_ij (1 - p_ij) / n_i,
and sum_j n_i (p^_ij - p_ij)^2 / p_ij is asymptotically chi-square with (cells with p_ij > 0)
- 1 degrees of freedom under the true matrix.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from allowance.calibrate import calibrate
from allowance.curves import validate_matrix
from allowance.report.calibration import matrix_csv
from tests.histories import markov_history, write_parquet

STATES = ("current", "dpd_1_29", "dpd_30_59", "dpd_60_89", "dpd_90_119", "charge_off", "paid_off")
#: A known monthly matrix (our own numbers), closed-end: charge-off at 120 days past due.
TRUE = np.array([
    [0.955, 0.025, 0.000, 0.000, 0.000, 0.002, 0.018],
    [0.420, 0.250, 0.310, 0.000, 0.000, 0.004, 0.016],
    [0.180, 0.100, 0.170, 0.540, 0.000, 0.000, 0.010],
    [0.080, 0.040, 0.060, 0.120, 0.700, 0.000, 0.000],
    [0.040, 0.010, 0.020, 0.040, 0.080, 0.810, 0.000],
    [0.000, 0.000, 0.000, 0.000, 0.000, 1.000, 0.000],
    [0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 1.000],
])
ACCOUNTS, MONTHS = 30_000, 24
pytestmark = pytest.mark.slow  # tens of thousands of simulated accounts: seconds


@pytest.fixture(scope="module")
def simulated(tmp_path_factory):
    truth = markov_history(TRUE, 120, ACCOUNTS, MONTHS, seed=20260930)
    path = write_parquet(truth.frame, tmp_path_factory.mktemp("rolls") / "history.parquet")
    cal = calibrate(path, {"window_months": MONTHS, "charge_off_dpd": {"book": 120}})
    return truth, cal


def test_the_history_is_read_whole(simulated):
    truth, cal = simulated
    assert cal.intake.rows_read == len(truth.frame) == cal.intake.rows_accepted
    assert cal.intake.rows_rejected == 0


def test_observation_counts_are_the_transitions_drawn(simulated):
    truth, cal = simulated
    rolls = cal.roll_rates.segments["book"]
    assert rolls.states == STATES
    assert np.array_equal(rolls.counts[:5], truth.counts[:5])  # from every bucket, to every state


def test_the_estimate_is_the_maximum_likelihood_share(simulated):
    # Anderson and Goodman (1957), eq. (2.5): p^_ij = n_ij / n_i
    truth, cal = simulated
    rolls = cal.roll_rates.segments["book"]
    n = truth.counts[:5].astype(float)
    np.testing.assert_allclose(rolls.by_count[:5], n / n.sum(axis=1, keepdims=True), rtol=0, atol=1e-15)
    np.testing.assert_array_equal(rolls.by_count[5:], TRUE[5:])  # absorbing rows


def test_every_cell_within_its_sampling_error(simulated):
    # Anderson and Goodman (1957): se(p^_ij) = sqrt(p_ij (1 - p_ij) / n_i); a Bonferroni bound
    # over the cells at a family error of 0.001
    truth, cal = simulated
    rolls = cal.roll_rates.segments["book"]
    n_i = truth.counts[:5].sum(axis=1)
    positive = TRUE[:5] > 0
    z = stats.norm.isf(0.001 / (2 * positive.sum()))
    bound = z * np.sqrt(TRUE[:5] * (1 - TRUE[:5]) / n_i[:, None])
    assert n_i.min() > 1_000  # tens of thousands of accounts: every bucket well observed
    assert np.all(np.abs(rolls.by_count[:5] - TRUE[:5])[positive] <= bound[positive])
    assert np.all(rolls.by_count[:5][~positive] == 0.0)  # a roll that cannot happen is never seen


def test_each_row_passes_the_anderson_goodman_chi_square_test(simulated):
    truth, cal = simulated
    rolls = cal.roll_rates.segments["book"]
    for i in range(5):
        n_i = truth.counts[i].sum()
        cells = TRUE[i] > 0
        statistic = float((n_i * (rolls.by_count[i, cells] - TRUE[i, cells]) ** 2 / TRUE[i, cells]).sum())
        assert stats.chi2.sf(statistic, cells.sum() - 1) > 0.001, STATES[i]


def test_equal_balances_make_both_weightings_equal(simulated):
    _, cal = simulated
    rolls = cal.roll_rates.segments["book"]
    np.testing.assert_allclose(rolls.by_balance, rolls.by_count, atol=1e-12)


def test_the_written_matrix_is_what_transition_matrix_reads(simulated, tmp_path):
    _, cal = simulated
    rolls = cal.roll_rates.segments["book"]
    matrix = rolls.matrix()
    probabilities = validate_matrix("book", matrix, 120)  # rows sum to 1 within 1e-9
    np.testing.assert_allclose(probabilities, rolls.by_count, atol=5e-9)
    text = matrix_csv(rolls.states, matrix.probabilities)
    assert text.splitlines()[0] == "from," + ",".join(STATES)


def test_a_bucket_never_observed_takes_the_contractual_roll(tmp_path):
    # nobody ever goes past 30-59: the later buckets have no observation in the window
    matrix = TRUE.copy()
    matrix[2] = [0.5, 0.2, 0.3, 0, 0, 0, 0]
    truth = markov_history(matrix, 120, 2_000, 6, seed=7)
    cal = calibrate(write_parquet(truth.frame, tmp_path / "h.parquet"), {"charge_off_dpd": {"book": 120}})
    rolls = cal.roll_rates.segments["book"]
    assert rolls.unobserved == ("dpd_60_89", "dpd_90_119")
    assert rolls.by_count[3].tolist() == [0, 0, 0, 0, 1, 0, 0]
    assert rolls.by_count[4].tolist() == [0, 0, 0, 0, 0, 1, 0]
    assert np.isnan(rolls.standard_error[3]).all()
