"""Shared hypothesis strategies (each module adds its own section)."""

from __future__ import annotations


# --------------------------------------------------------------------------------------
# curves: PD sources, roll-rate matrices, marginal PD arrays
# --------------------------------------------------------------------------------------

import numpy as _np
from hypothesis import strategies as _st
from hypothesis.extra import numpy as _hnp

from allowance.curves import DELINQUENCY_BUCKETS as _BUCKETS
from allowance.curves import expected_states as _expected_states
from allowance.schemas import SegmentAssumptions as _SegmentAssumptions
from allowance.schemas import TransitionMatrix as _TransitionMatrix

#: a probability, including the edges 0 and 1
curve_probabilities = _st.floats(min_value=0.0, max_value=1.0, allow_nan=False)
#: a 12-month PD as lenders give them (the edges are tested separately)
pd_12m_values = _st.floats(min_value=1e-6, max_value=0.6, allow_nan=False)
#: cumulative PD curves by year: non-decreasing, in [0, 1], 1 to 6 years
pd_curves = _st.lists(_st.floats(min_value=0.0, max_value=0.95, allow_nan=False), min_size=1, max_size=6).map(sorted)


def marginal_arrays(max_keys: int = 3, max_months: int = 48) -> _st.SearchStrategy:
    """Monthly marginal PDs (or SMMs), shape (keys, months), values in [0, 1]."""
    shapes = _st.tuples(_st.integers(1, max_keys), _st.integers(1, max_months))
    return _hnp.arrays(_np.float64, shapes, elements=_st.floats(0.0, 1.0, allow_nan=False))


@_st.composite
def transition_matrices(draw, charge_off_dpd: int | None = None, paid_off: bool | None = None) -> _TransitionMatrix:
    """A valid monthly roll-rate matrix: random rows over the states, absorbing rows unit."""
    dpd = draw(_st.sampled_from(sorted(_BUCKETS))) if charge_off_dpd is None else charge_off_dpd
    payoff = draw(_st.booleans()) if paid_off is None else paid_off
    states = _expected_states(dpd, payoff)
    nb = len(_BUCKETS[dpd])
    rows = []
    for _ in range(nb):
        weights = _np.array(draw(_st.lists(_st.floats(0.0, 1.0), min_size=len(states), max_size=len(states))))
        weights[nb] += 1e-3  # every bucket can charge off, so lifetime PDs are defined
        rows.append((weights / weights.sum()).tolist())
    for a in range(nb, len(states)):
        rows.append([1.0 if j == a else 0.0 for j in range(len(states))])
    return _TransitionMatrix(states=list(states), probabilities=rows, source="rolls.csv")


@_st.composite
def segment_assumptions(draw) -> _SegmentAssumptions:
    """Segment assumptions with any of the PD sources (roll-rate matrices given inline)."""
    source = draw(_st.sampled_from(["pd_12m", "pd_12m_by_grade", "pd_curve", "pd_curve_by_grade", "transition_matrix"]))
    grades = _st.lists(_st.sampled_from("ABCDE"), min_size=1, max_size=3, unique=True)
    if source == "pd_12m":
        value = draw(curve_probabilities)
    elif source == "pd_12m_by_grade":
        value = {g: draw(curve_probabilities) for g in draw(grades)}
    elif source == "pd_curve":
        value = draw(pd_curves)
    elif source == "pd_curve_by_grade":
        value = {g: draw(pd_curves) for g in draw(grades)}
    else:
        matrix = draw(transition_matrices())
        dpd = 180 if "dpd_150_179" in matrix.states else 120
        return _SegmentAssumptions(transition_matrix=matrix, charge_off_dpd=dpd, lgd=0.5)
    return _SegmentAssumptions(**{source: value}, lgd=0.5)


#: an invented card-style roll-rate matrix (charge-off at 180 dpd), rows sum to 1
_ROLLS_180 = [
    [0.940, 0.035, 0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 0.025],
    [0.450, 0.250, 0.280, 0.000, 0.000, 0.000, 0.000, 0.000, 0.020],
    [0.150, 0.100, 0.150, 0.600, 0.000, 0.000, 0.000, 0.000, 0.000],
    [0.060, 0.020, 0.040, 0.100, 0.780, 0.000, 0.000, 0.000, 0.000],
    [0.030, 0.000, 0.010, 0.020, 0.090, 0.850, 0.000, 0.000, 0.000],
    [0.020, 0.000, 0.000, 0.000, 0.010, 0.070, 0.900, 0.000, 0.000],
    [0.010, 0.000, 0.000, 0.000, 0.000, 0.010, 0.050, 0.930, 0.000],
    [0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 1.000, 0.000],
    [0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 1.000],
]
#: an invented auto-style roll-rate matrix (charge-off at 120 dpd)
_ROLLS_120 = [
    [0.955, 0.030, 0.000, 0.000, 0.000, 0.000, 0.015],
    [0.500, 0.200, 0.290, 0.000, 0.000, 0.000, 0.010],
    [0.200, 0.100, 0.100, 0.600, 0.000, 0.000, 0.000],
    [0.080, 0.020, 0.050, 0.100, 0.750, 0.000, 0.000],
    [0.040, 0.000, 0.010, 0.030, 0.070, 0.850, 0.000],
    [0.000, 0.000, 0.000, 0.000, 0.000, 1.000, 0.000],
    [0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 1.000],
]


def example_roll_matrix(charge_off_dpd: int = 180, paid_off: bool = True) -> _TransitionMatrix:
    """A fixed, invented roll-rate matrix; without ``paid_off`` its payoffs stay current."""
    rows = _np.array(_ROLLS_180 if charge_off_dpd == 180 else _ROLLS_120)
    if not paid_off:
        rows[:, 0] += rows[:, -1]
        rows = rows[:-1, :-1]
    return _TransitionMatrix(
        states=list(_expected_states(charge_off_dpd, paid_off)), probabilities=rows.tolist(), source="rolls.csv"
    )


# --------------------------------------------------------------------------------------
# scenarios, staging, overlays
# --------------------------------------------------------------------------------------

import numpy as _np_sso  # noqa: E402  (own imports: this section stands alone)
import pandas as _pd_sso  # noqa: E402
from hypothesis import strategies as _st_sso  # noqa: E402
from hypothesis.extra import numpy as _hnp_sso  # noqa: E402

#: an interior PD, one the Vasicek transform moves
interior_pds = _st_sso.floats(min_value=1e-6, max_value=0.999, allow_nan=False)
#: a systematic factor, within the range a scenario file would use
z_values = _st_sso.floats(min_value=-6.0, max_value=6.0, allow_nan=False)
#: an asset correlation
asset_correlations = _st_sso.floats(min_value=0.01, max_value=0.6, allow_nan=False)


@_st_sso.composite
def monthly_pd_tables(draw, max_keys: int = 4, max_months: int = 48) -> _np_sso.ndarray:
    """A (keys, months) table of monthly marginal PDs, with exact zeros and ones now and then."""
    shape = (draw(_st_sso.integers(1, max_keys)), draw(_st_sso.integers(1, max_months)))
    element = _st_sso.one_of(_st_sso.floats(0.0, 0.2, allow_nan=False), _st_sso.sampled_from([0.0, 1.0]))
    return draw(_hnp_sso.arrays(_np_sso.float64, shape, elements=element))


@_st_sso.composite
def staging_tapes(draw, max_loans: int = 40) -> tuple[_pd_sso.DataFrame, _np_sso.ndarray]:
    """A tape with the staging columns (segments ``a`` and ``b``) and each loan's 12-month PD now."""
    n = draw(_st_sso.integers(1, max_loans))

    def ints(lo: int, hi: int) -> _np_sso.ndarray:
        return draw(_hnp_sso.arrays(_np_sso.int64, n, elements=_st_sso.integers(lo, hi)))

    def flags() -> _np_sso.ndarray:
        return draw(_hnp_sso.arrays(_np_sso.bool_, n))

    def pds() -> _np_sso.ndarray:
        return draw(_hnp_sso.arrays(_np_sso.float64, n, elements=_st_sso.floats(0.0, 0.5, allow_nan=False)))

    prior = ints(0, 3).astype(float)
    tape = _pd_sso.DataFrame(
        {
            "segment": _np_sso.where(flags(), "a", "b"),
            "grade": _np_sso.where(flags(), "A", "B"),
            "days_past_due": ints(0, 200),
            "defaulted": flags(),
            "bankrupt": flags() & flags(),
            "watchlist": flags(),
            "forborne": flags(),
            "credit_impaired_at_purchase": flags() & flags(),
            "pd_12m_at_origination": _np_sso.where(flags(), pds(), _np_sso.nan),
            "prior_stage": _np_sso.where(prior == 0, _np_sso.nan, prior),
            "months_performing": ints(0, 12).astype(float),
        }
    )
    return tape, pds()


@_st_sso.composite
def ecl_vectors(draw, max_loans: int = 30) -> _np_sso.ndarray:
    """Modelled ECL per loan, already in whole cents (zeros common)."""
    n = draw(_st_sso.integers(1, max_loans))
    element = _st_sso.one_of(_st_sso.just(0), _st_sso.integers(0, 10**9))
    return draw(_hnp_sso.arrays(_np_sso.int64, n, elements=element)) / 100.0
