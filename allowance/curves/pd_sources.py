"""PD sources: each turns a segment's PD assumption into monthly marginal PDs.

The source is chosen by the segment's ``pd_source`` key through the registry
:data:`PD_SOURCES`; :func:`pd_term_structure` is the one entry point.

Implements
----------
hazard_from_pd_12m     constant monthly hazard that reproduces a 12-month PD
marginal_from_curve    monthly marginals from a cumulative PD curve by year
marginal_by_age        monthly marginals for every loan age from a cumulative PD curve by year of age
pd_term_structure      the registry lookup: segment assumptions -> PdTermStructure
check_one_prepayment_source  a roll-rate matrix's payoffs or a stated CPR/PSA, not both
PD_SOURCES             pd_source key -> builder
"""

from __future__ import annotations

from typing import Literal
from collections.abc import Callable

import numpy as np

from allowance.curves.roll_rates import matrix_term_structure
from allowance.curves.term_structure import PdTermStructure
from allowance.exceptions import AssumptionsError, InvalidInputError
from allowance.schemas import SegmentAssumptions, TransitionMatrix

PdSource = Literal["pd_12m", "pd_12m_by_grade", "pd_curve", "pd_curve_by_grade", "pd_curve_by_age", "transition_matrix"]
PdBuilder = Callable[[str, SegmentAssumptions, int], PdTermStructure]


def hazard_from_pd_12m(pd_12m: float | np.ndarray) -> np.ndarray:
    r"""Constant monthly hazard whose 12 months compound to ``pd_12m``.

    Notes
    -----
    .. math:: h = 1 - (1 - PD_{12})^{1/12}

    computed as ``-expm1(log1p(-PD12) / 12)`` so small PDs keep their digits. A 12-month PD
    of 1 gives a hazard of 1.

    Examples
    --------
    >>> h = float(hazard_from_pd_12m(0.12))
    >>> round(h, 8), round(1 - (1 - h) ** 12, 12)
    (0.01059624, 0.12)
    """
    p = np.asarray(pd_12m, dtype=np.float64)
    with np.errstate(divide="ignore"):
        return -np.expm1(np.log1p(-p) / 12.0)


def marginal_from_curve(curve: list[float] | np.ndarray, months: int) -> np.ndarray:
    r"""Monthly marginal PDs from a cumulative PD curve by year.

    Parameters
    ----------
    curve : array_like, shape (years,)
        Cumulative PD at the end of years 1..n, non-decreasing, in [0, 1].
    months : int
        Months of term structure wanted; beyond ``12 n`` the last year's hazard continues.

    Returns
    -------
    ndarray, shape (months,)

    Notes
    -----
    Log-survival is linear within each year (a constant hazard within the year):

    .. math::

        S_y = 1 - C_y, \qquad h_y = 1 - (S_y / S_{y-1})^{1/12}, \qquad S_0 = 1,

    and month t of year y = ceil(t / 12) has marginal PD :math:`h_y`, with :math:`h_n` after
    the curve ends. Once survival reaches 0 the hazard is 1 (nothing is left to default).

    Examples
    --------
    >>> pd_t = marginal_from_curve([0.02, 0.05], 36)
    >>> pd_t[[0, 11, 12, 23, 24, 35]].round(6).tolist()
    [0.001682, 0.001682, 0.002588, 0.002588, 0.002588, 0.002588]
    >>> round(1 - float(np.prod(1 - pd_t[:24])), 12)
    0.05
    """
    cum = np.asarray(curve, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_surv = np.log1p(-cum)  # -inf once the curve reaches 1
        before = np.concatenate([[0.0], log_surv[:-1]])
        hazard = np.where(np.isneginf(before), 1.0, -np.expm1((log_surv - before) / 12.0))
    year = np.minimum(np.arange(months) // 12, cum.size - 1)
    return hazard[year]


def marginal_by_age(curve: list[float] | np.ndarray, months: int) -> np.ndarray:
    r"""Monthly marginal PDs from a cumulative PD curve by year of loan age, for every age.

    Parameters
    ----------
    curve : array_like, shape (years,)
        Cumulative PD at the end of years 1..n of the loan's life (from origination).
    months : int
        Months of term structure wanted from the as-of date.

    Returns
    -------
    ndarray, shape (12 n + 1, months)
        Row a is a loan aged a whole months at the as-of date: ``[a, t - 1]`` is the hazard of
        its month of life a + t. Loans older than 12 n months take the last row (every month
        of theirs is past the curve, at the last year's hazard).

    Notes
    -----
    The hazards by month of life are those of :func:`marginal_from_curve` (constant within a
    year of age, log-linear survival, the last year's hazard after the curve ends), read from
    the loan's own age instead of from its first month after the as-of date: a loan deep in
    its life does not take a new loan's early-life PD.

    Examples
    --------
    >>> pd_t = marginal_by_age([0.02, 0.05], 3)
    >>> pd_t.shape, pd_t[0].round(6).tolist(), pd_t[11].round(6).tolist(), pd_t[24].round(6).tolist()
    ((25, 3), [0.001682, 0.001682, 0.001682], [0.001682, 0.002588, 0.002588], [0.002588, 0.002588, 0.002588])
    """
    cum = np.asarray(curve, dtype=np.float64)
    by_life = marginal_from_curve(cum, 12 * cum.size + months)  # month of life 1, 2, ...
    ages = np.arange(12 * cum.size + 1)
    return by_life[ages[:, None] + np.arange(months)[None, :]]


# --------------------------------------------------------------------------------------
# Validation of the inputs of each source
# --------------------------------------------------------------------------------------


def _check_probability(value: float, where: str, what: str) -> None:
    if not (np.isfinite(value) and 0.0 <= value <= 1.0):
        raise AssumptionsError(
            f"{what} {value!r} is not a probability",
            column=where,
            hint="give a decimal between 0 and 1 (0.021 for 2.1 %)",
        )


def _check_curve(curve: list[float], where: str) -> np.ndarray:
    if len(curve) == 0:
        raise AssumptionsError("the cumulative PD curve is empty", column=where,
                               hint="give the cumulative PD at the end of year 1, 2, ...")
    for year, value in enumerate(curve, start=1):
        _check_probability(value, f"{where} year {year}", "cumulative PD")
        if year > 1 and value < curve[year - 2]:
            raise AssumptionsError(
                f"cumulative PD {value:g} is below year {year - 1}'s {curve[year - 2]:g}; "
                "a cumulative curve cannot fall",
                column=f"{where} year {year}",
                hint="give cumulative (not yearly marginal) PDs, each at least the one before",
            )
    return np.asarray(curve, dtype=np.float64)


def _check_grades(table: dict, where: str) -> None:
    if not table:
        raise AssumptionsError("no grades given", column=where, hint="give at least one grade, e.g. {A = 0.004}")


# --------------------------------------------------------------------------------------
# The builders
# --------------------------------------------------------------------------------------


def _from_pd_12m(name: str, segment: SegmentAssumptions, months: int) -> PdTermStructure:
    _check_probability(segment.pd_12m, f"segments.{name}.pd_12m", "12-month PD")
    marginal = np.full((1, months), float(hazard_from_pd_12m(segment.pd_12m)))
    return PdTermStructure(name, ("*",), marginal, None, "pd_12m")


def _from_pd_12m_by_grade(name: str, segment: SegmentAssumptions, months: int) -> PdTermStructure:
    table = segment.pd_12m_by_grade
    where = f"segments.{name}.pd_12m_by_grade"
    _check_grades(table, where)
    for grade, value in table.items():
        _check_probability(value, f"{where}.{grade}", "12-month PD")
    hazard = hazard_from_pd_12m(np.array(list(table.values()), dtype=np.float64))
    marginal = np.repeat(hazard[:, None], months, axis=1)
    return PdTermStructure(name, tuple(table), marginal, None, "pd_12m_by_grade")


def _from_pd_curve(name: str, segment: SegmentAssumptions, months: int) -> PdTermStructure:
    curve = _check_curve(segment.pd_curve, f"segments.{name}.pd_curve")
    return PdTermStructure(name, ("*",), marginal_from_curve(curve, months)[None, :], None, "pd_curve")


def _from_pd_curve_by_grade(name: str, segment: SegmentAssumptions, months: int) -> PdTermStructure:
    table = segment.pd_curve_by_grade
    where = f"segments.{name}.pd_curve_by_grade"
    _check_grades(table, where)
    rows = [marginal_from_curve(_check_curve(c, f"{where}.{g}"), months) for g, c in table.items()]
    return PdTermStructure(name, tuple(table), np.vstack(rows), None, "pd_curve_by_grade")


def _from_pd_curve_by_age(name: str, segment: SegmentAssumptions, months: int) -> PdTermStructure:
    curve = _check_curve(segment.pd_curve_by_age, f"segments.{name}.pd_curve_by_age")
    marginal = marginal_by_age(curve, months)
    return PdTermStructure(name, tuple(str(a) for a in range(marginal.shape[0])), marginal, None, "pd_curve_by_age")


def _from_transition_matrix(name: str, segment: SegmentAssumptions, months: int) -> PdTermStructure:
    matrix = segment.transition_matrix
    if not isinstance(matrix, TransitionMatrix):
        raise AssumptionsError(
            f"the roll-rate matrix file {matrix!r} has not been read",
            column=f"segments.{name}.transition_matrix",
            hint="run through intake, which loads the CSV named here",
        )
    return matrix_term_structure(name, matrix, segment.charge_off_dpd, months)


#: pd_source key -> builder ``(segment name, assumptions, months) -> PdTermStructure``.
PD_SOURCES: dict[PdSource, PdBuilder] = {
    "pd_12m": _from_pd_12m,
    "pd_12m_by_grade": _from_pd_12m_by_grade,
    "pd_curve": _from_pd_curve,
    "pd_curve_by_grade": _from_pd_curve_by_grade,
    "pd_curve_by_age": _from_pd_curve_by_age,
    "transition_matrix": _from_transition_matrix,
}


def pd_term_structure(name: str, segment: SegmentAssumptions, months: int) -> PdTermStructure:
    """Monthly marginal PDs for segment ``name`` over ``months`` months, from its PD source.

    Parameters
    ----------
    name : str
        The segment name (used in error messages and carried on the result).
    segment : SegmentAssumptions
        Its assumptions; ``segment.pd_source`` picks the builder in :data:`PD_SOURCES`.
    months : int
        Number of months (>= 0), normally the longest horizon in the segment.

    Raises
    ------
    AssumptionsError
        The PD assumption is invalid; the message names the segment and the cell.

    Examples
    --------
    >>> seg = SegmentAssumptions(pd_curve_by_grade={"A": [0.01, 0.03], "B": [0.05]}, lgd=0.4)
    >>> ts = pd_term_structure("auto", seg, 36)
    >>> ts.keys, ts.marginal.shape, ts.source
    (('A', 'B'), (2, 36), 'pd_curve_by_grade')
    """
    if months < 0:
        raise InvalidInputError(f"months must be >= 0; got {months}")
    return PD_SOURCES[segment.pd_source](name, segment, int(months))


def check_one_prepayment_source(name: str, segment: SegmentAssumptions, structure: PdTermStructure) -> None:
    """A segment models prepayment once: a roll-rate matrix with a ``paid_off`` state, or a
    stated ``cpr`` / ``psa`` / ``cpr_by_age``, never both (payoffs would count twice).

    Raises
    ------
    AssumptionsError
        Naming the segment.
    """
    stated = any(getattr(segment, k) is not None for k in ("cpr", "psa", "cpr_by_age"))
    if stated and structure.smm is not None and np.any(structure.smm > 0):
        raise AssumptionsError(
            f"segment {name!r} gives prepayment twice: its roll-rate matrix has a paid_off "
            "state and it also states cpr/psa/cpr_by_age",
            column=f"segments.{name}",
            hint="drop the cpr/psa key, or the paid_off column of the matrix",
        )
