"""Economic scenarios: PD paths per scenario, the Vasicek conditional PD, CECL reversion.

Every function here is pure and works on the small per-curve tables (curve keys × months),
never on loans: the engine maps loans to curve keys afterwards.

Implements
----------
vasicek_conditional_pd  PD conditional on the systematic factor z (single-factor model)
asset_correlation       ρ per segment: stated, or the Basel II retail correlation
by_year                 a by-year list spread over months, with a value after it ends
scenario_marginals      one scenario's monthly marginal PDs from the base (unconditional) PDs:
                        PD multipliers, a z path, or macro paths (:mod:`allowance.macro`)
reversion_weights       CECL: weight on the scenario adjustment by month (ASC 326-20-30-9)
revert                  base + weight × (adjusted − base)
ScenarioTables          the stacked PD table ``pd[K, S, T]`` and its companion paths
scenario_tables         all scenarios of an assumptions file, whole life or reverting (CECL)
weighted                probability-weighted sum over the scenario axis (on losses)
reversion_table         the paths used, long form, for the workbook

Conventions
-----------
Month t (1-based) lies in year ``(t − 1) // 12`` counted from the as-of date. A negative z is
a worse economy than the median; z = 0 is the *median* economy, not the average one.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pandas as pd

from allowance import macro
from allowance.exceptions import AssumptionsError, InvalidInputError
from allowance.links import norm_cdf as _norm_cdf
from allowance.links import norm_ppf as _norm_ppf
from allowance.schemas import Assumptions, CeclRules, Reversion, Scenario, SegmentAssumptions

__all__ = [
    "ScenarioTables",
    "asset_correlation",
    "by_year",
    "reversion_table",
    "reversion_weights",
    "revert",
    "scenario_marginals",
    "scenario_tables",
    "vasicek_conditional_pd",
    "weighted",
]

# --------------------------------------------------------------------------------------
# The single-factor model
# --------------------------------------------------------------------------------------


def vasicek_conditional_pd(pd: np.ndarray | float, rho: np.ndarray | float, z: np.ndarray | float):
    r"""PD conditional on the systematic factor ``z`` in the Vasicek single-factor model.

    Broadcasts over ``pd``, ``rho`` and ``z``; a scalar in gives a scalar out.

    Parameters
    ----------
    pd : array_like
        Unconditional PD over some horizon, in [0, 1]. 0 and 1 map to themselves.
    rho : array_like
        Asset correlation, in [0, 1).
    z : array_like
        Systematic factor; negative is a worse economy.

    Returns
    -------
    ndarray or float
        The conditional PD, in [0, 1].

    Raises
    ------
    ValueError
        A PD outside [0, 1], a correlation outside [0, 1) or a non-finite z.

    Notes
    -----
    A borrower defaults when its asset value :math:`\sqrt{\rho}Z + \sqrt{1-\rho}\varepsilon`
    falls below :math:`\Phi^{-1}(PD)`; given :math:`Z = z`,

    .. math:: PD(z) = \Phi\left(\frac{\Phi^{-1}(PD) - \sqrt{\rho}\,z}{\sqrt{1-\rho}}\right)

    Averaged over :math:`Z \sim N(0, 1)` this returns the unconditional PD,
    :math:`E[PD(Z)] = PD`. Because :math:`PD(z)` is convex where PDs are small, the median
    economy :math:`z = 0` gives a PD *below* the average: :math:`PD(0) < PD` for
    PD < 0.5. A scenario path of zeros is therefore a benign median path, not the
    unconditional base. The Basel II IRB capital formula is this function at
    :math:`z = \Phi^{-1}(0.001)`, the 99.9 % worst economy.

    References
    ----------
    .. [1] Vasicek, O. (2002). "The distribution of loan portfolio value". Risk, 15(12),
       160-162.
    .. [2] Basel Committee on Banking Supervision (2005). "An Explanatory Note on the
       Basel II IRB Risk Weight Functions". Bank for International Settlements.

    Examples
    --------
    >>> round(float(vasicek_conditional_pd(0.02, 0.15, -1.0)), 6)
    0.035341
    >>> round(float(vasicek_conditional_pd(0.02, 0.15, 0.0)), 6)   # median < 0.02
    0.012953
    >>> vasicek_conditional_pd([0.0, 1.0], 0.15, -2.0).tolist()
    [0.0, 1.0]
    """
    pd_a = np.asarray(pd, dtype=float)
    rho_a = np.asarray(rho, dtype=float)
    z_a = np.asarray(z, dtype=float)
    if not np.all((pd_a >= 0.0) & (pd_a <= 1.0)):
        raise InvalidInputError("vasicek_conditional_pd: every PD must be in [0, 1] (no NaN)")
    if not np.all((rho_a >= 0.0) & (rho_a < 1.0)):
        raise InvalidInputError("vasicek_conditional_pd: every asset correlation must be in [0, 1)")
    if not np.all(np.isfinite(z_a)):
        raise InvalidInputError("vasicek_conditional_pd: every z must be finite")
    pd_a, rho_a, z_a = np.broadcast_arrays(pd_a, rho_a, z_a)
    interior = (pd_a > 0.0) & (pd_a < 1.0)
    threshold = _norm_ppf(np.where(interior, pd_a, 0.5))
    shifted = (threshold - np.sqrt(rho_a) * z_a) / np.sqrt(1.0 - rho_a)
    out = np.where(interior, _norm_cdf(shifted), pd_a)
    return out[()]


def _constant(value: float) -> Callable[[np.ndarray], np.ndarray]:
    return lambda pd_12m: np.full(np.shape(pd_12m), value)


def _other_retail_correlation(pd_12m: np.ndarray) -> np.ndarray:
    share = -np.expm1(-35.0 * pd_12m) / -math.expm1(-35.0)
    return 0.03 * share + 0.16 * (1.0 - share)


#: Basel II IRB retail asset correlations (paras 328-330), by retail class.
_RETAIL_CORRELATION: dict[str, Callable[[np.ndarray], np.ndarray]] = {
    "residential_mortgage": _constant(0.15),
    "qualifying_revolving": _constant(0.04),
    "other_retail": _other_retail_correlation,
}


def asset_correlation(segment: SegmentAssumptions, pd_12m, *, name: str | None = None):
    r"""The asset correlation ρ of a segment, for the Vasicek conditional PD.

    The segment's ``asset_correlation`` when set; otherwise the Basel II IRB correlation of
    its ``retail_class``. Nothing is assumed that the user did not state: a segment with
    neither key is an error (call this only when a scenario uses a z path).

    Parameters
    ----------
    segment : SegmentAssumptions
        The segment's assumptions.
    pd_12m : array_like
        12-month PD (the other-retail correlation depends on it).
    name : str, optional
        The segment's name, for the error message.

    Returns
    -------
    ndarray or float
        ρ, shaped like ``pd_12m``.

    Raises
    ------
    AssumptionsError
        Neither ``asset_correlation`` nor ``retail_class`` is set.

    Notes
    -----
    Residential mortgage ρ = 0.15; qualifying revolving retail ρ = 0.04; other retail

    .. math:: \rho = 0.03\,k + 0.16\,(1 - k), \quad k = \frac{1 - e^{-35 PD}}{1 - e^{-35}}

    References
    ----------
    .. [1] Basel Committee on Banking Supervision (2006). "International Convergence of
       Capital Measurement and Capital Standards", paras 328-330.

    Examples
    --------
    >>> from allowance.schemas import SegmentAssumptions
    >>> seg = SegmentAssumptions(pd_12m=0.01, lgd=0.5, retail_class="other_retail")
    >>> round(float(asset_correlation(seg, 0.01)), 4)
    0.1216
    """
    pd_a = np.asarray(pd_12m, dtype=float)
    if segment.asset_correlation is not None:
        return np.full(pd_a.shape, segment.asset_correlation)[()]
    if segment.retail_class is None:
        label = f"segments.{name}" if name else "a segment"
        raise AssumptionsError(
            f"{label} has no asset correlation, and a scenario gives a z path",
            column=f"segments.{name}" if name else None,
            hint="set asset_correlation = 0.15 (say) or retail_class = "
            "'residential_mortgage' / 'qualifying_revolving' / 'other_retail' in that segment",
        )
    return _RETAIL_CORRELATION[segment.retail_class](pd_a)[()]


# --------------------------------------------------------------------------------------
# Paths by month
# --------------------------------------------------------------------------------------


def by_year(values: Sequence[float], months: int, after: float) -> np.ndarray:
    """Spread a by-year list over months: element y applies to months 12y+1 .. 12y+12.

    Examples
    --------
    >>> by_year([1.5, 1.2], 30, after=1.0)[[0, 11, 12, 23, 24, 29]].tolist()
    [1.5, 1.5, 1.2, 1.2, 1.0, 1.0]
    """
    table = np.append(np.asarray(values, dtype=float), float(after))
    year = np.arange(months) // 12
    return table[np.minimum(year, len(values))]


def _multiplier_path(base: np.ndarray, scenario: Scenario, rho: np.ndarray | None,
                     links: macro.MacroLinks | None) -> np.ndarray:
    factor = by_year(scenario.pd_multiplier, base.shape[-1], after=1.0)
    return np.minimum(1.0, base * factor)


def _z_path(base: np.ndarray, scenario: Scenario, rho: np.ndarray | None,
            links: macro.MacroLinks | None) -> np.ndarray:
    months = base.shape[-1]
    years = min(len(scenario.z), -(-months // 12))
    if years == 0:
        return base.copy()
    if rho is None or np.shape(rho) != base.shape[:1] or not np.all(np.isfinite(rho)):
        raise AssumptionsError(
            "a scenario gives a z path but no asset correlation was supplied for every curve",
            column="scenarios",
            hint="set asset_correlation or retail_class in every segment",
        )
    span = min(months, 12 * years)
    block = base[:, :span]
    year_of = np.arange(span) // 12
    with np.errstate(divide="ignore", invalid="ignore"):
        log_survival = np.log1p(-block)  # -inf where a monthly PD is 1
        annual = -np.expm1(np.add.reduceat(log_survival, np.arange(0, span, 12), axis=1))
        annual = np.clip(annual, 0.0, 1.0)
        shifted = vasicek_conditional_pd(annual, np.asarray(rho, float)[:, None], np.asarray(scenario.z[:years]))
        usable = (annual > 0.0) & (annual < 1.0)
        exponent = np.where(usable, np.log1p(-shifted) / np.log1p(-np.where(usable, annual, 0.5)), 1.0)
        # a zero monthly PD stays zero even when the year's conditional PD rounds to 1
        scaled = np.where(block > 0.0, log_survival * exponent[:, year_of], 0.0)
    out = base.copy()
    out[:, :span] = -np.expm1(scaled)
    return out


def _macro_path(base: np.ndarray, scenario: Scenario, rho: np.ndarray | None,
                links: macro.MacroLinks | None) -> np.ndarray:
    if links is None:
        raise InvalidInputError("scenario_marginals: a scenario with macro paths needs links (macro.MacroLinks)")
    return macro.macro_marginals(base, scenario, links)


def _unchanged(base: np.ndarray, scenario: Scenario, rho: np.ndarray | None,
               links: macro.MacroLinks | None) -> np.ndarray:
    return base.copy()


PathKind = Literal["pd_multiplier", "z", "macro", "none"]

_PATHS: dict[PathKind, Callable[[np.ndarray, Scenario, np.ndarray | None, macro.MacroLinks | None], np.ndarray]] = {
    "pd_multiplier": _multiplier_path,
    "z": _z_path,
    "macro": _macro_path,
    "none": _unchanged,
}


def _path_kind(scenario: Scenario) -> PathKind:
    return scenario.pd_path_kind  # type: ignore[return-value]


def scenario_marginals(base: np.ndarray, scenario: Scenario, rho: np.ndarray | None,
                       links: macro.MacroLinks | None = None) -> np.ndarray:
    r"""One scenario's monthly marginal PDs from the base (unconditional) marginal PDs.

    Parameters
    ----------
    base : ndarray, shape (K, T)
        Monthly marginal PD conditional on survival, per curve key and month.
    scenario : Scenario
        Its ``pd_multiplier`` or ``z`` path (by year) or its ``macro`` paths (by quarter);
        none leaves the base unchanged.
    rho : ndarray, shape (K,), optional
        Asset correlation per curve key; needed only for a z path.
    links : macro.MacroLinks, optional
        The calendar, baseline and satellite models; needed only for macro paths.

    Returns
    -------
    ndarray, shape (K, T)

    Notes
    -----
    PD multiplier path: :math:`pd_t = \min(1, base_t \cdot m_{y(t)})`, with m = 1 after the
    list. z path: the year's PD :math:`q_y = 1 - \prod_{t \in y}(1 - base_t)` becomes
    :math:`q_y(z_y)` through :func:`vasicek_conditional_pd`, and each month of the year is
    rescaled so the year's log-survival matches,

    .. math:: pd_t(z) = 1 - (1 - base_t)^{\ln(1 - q_y(z_y)) / \ln(1 - q_y)}

    (a year with :math:`q_y = 0` stays 0); after the z list, the base. Macro paths: each
    segment's satellite model shifts the base along its probit or logit link
    (:func:`allowance.macro.macro_marginals`).

    Examples
    --------
    >>> from allowance.schemas import Scenario
    >>> base = np.full((1, 24), 0.01)
    >>> scenario_marginals(base, Scenario(weight=1, pd_multiplier=[2.0]), None)[0, [0, 11, 12]].tolist()
    [0.02, 0.02, 0.01]
    """
    base = np.asarray(base, dtype=float)
    if base.ndim != 2 or not np.all((base >= 0.0) & (base <= 1.0)):
        raise InvalidInputError("scenario_marginals: base must be a (keys, months) table of PDs in [0, 1]")
    return _PATHS[_path_kind(scenario)](base, scenario, rho, links)


# --------------------------------------------------------------------------------------
# CECL reversion
# --------------------------------------------------------------------------------------


def _immediate(reasonable_supportable_months: int, reversion_months: int, months: int) -> np.ndarray:
    return (np.arange(1, months + 1) <= reasonable_supportable_months).astype(float)


def _straight_line(reasonable_supportable_months: int, reversion_months: int, months: int) -> np.ndarray:
    if reversion_months == 0:
        return _immediate(reasonable_supportable_months, 0, months)
    k = np.arange(1, months + 1) - reasonable_supportable_months  # months after the period
    return np.clip(1.0 - k / reversion_months, 0.0, 1.0)


_REVERSIONS: dict[Reversion, Callable[[int, int, int], np.ndarray]] = {
    "immediate": _immediate,
    "straight_line": _straight_line,
}


def reversion_weights(
    reasonable_supportable_months: int,
    reversion_months: int,
    reversion: Reversion,
    months: int,
) -> np.ndarray:
    r"""CECL: the weight on the scenario adjustment in each month 1..``months``.

    Notes
    -----
    :math:`w_t = 1` for :math:`t \le R` (the reasonable and supportable period). After it,
    ``immediate``: :math:`w_t = 0`; ``straight_line``: :math:`w_{R+k} = 1 - k / M` for
    k = 1..M (``reversion_months``), then 0. A PD multiplier m thus reverts as
    :math:`1 + w_t (m - 1)`, linearly to 1.

    References
    ----------
    .. [1] FASB ASC 326-20-30-9 (reversion to historical loss information).

    Examples
    --------
    >>> reversion_weights(2, 4, "straight_line", 8).tolist()
    [1.0, 1.0, 0.75, 0.5, 0.25, 0.0, 0.0, 0.0]
    >>> reversion_weights(2, 4, "immediate", 4).tolist()
    [1.0, 1.0, 0.0, 0.0]
    """
    return _REVERSIONS[reversion](int(reasonable_supportable_months), int(reversion_months), int(months))


def revert(base, adjusted, weights) -> np.ndarray:
    """``base + weights × (adjusted − base)``, broadcasting ``weights`` over the month axis.

    Examples
    --------
    >>> revert(np.array([1.0, 1.0]), np.array([3.0, 3.0]), np.array([1.0, 0.5])).tolist()
    [3.0, 2.0]
    """
    base = np.asarray(base, dtype=float)
    return base + np.asarray(weights, dtype=float) * (np.asarray(adjusted, dtype=float) - base)


# --------------------------------------------------------------------------------------
# All scenarios at once
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ScenarioTables:
    """The scenario paths of a run, for one framework.

    names            scenario names, in the assumptions file's order
    weights          shape (S,), summing to 1
    pd               shape (K, S, T): monthly marginal PD per curve key, scenario and month
    lgd_multiplier   shape (S, T)
    collateral_index shape (S, T): collateral value relative to today (the by-year path)
    reversion        shape (T,): CECL weight on the scenario adjustment; None for IFRS 9
    pd_multiplier    shape (S, T): the PD multiplier used (after reversion); NaN for a z or
                     macro path
    collateral_by_key shape (K, S, T): the collateral index per curve key, where a segment's
                     satellite model links it to a price variable (else the by-year path);
                     None when no scenario gives macro paths
    """

    names: tuple[str, ...]
    weights: np.ndarray
    pd: np.ndarray
    lgd_multiplier: np.ndarray
    collateral_index: np.ndarray
    reversion: np.ndarray | None
    pd_multiplier: np.ndarray | None = None
    collateral_by_key: np.ndarray | None = None

    def collateral_per_key(self, keys: int) -> np.ndarray:
        """The collateral index per curve key, shape (K, S, T)."""
        if self.collateral_by_key is not None:
            return self.collateral_by_key
        return np.broadcast_to(self.collateral_index, (keys, *self.collateral_index.shape))


def _multiplier_shown(scenario: Scenario, months: int) -> np.ndarray:
    if _path_kind(scenario) in ("z", "macro"):
        return np.full(months, np.nan)
    return by_year(scenario.pd_multiplier, months, after=1.0)


def _reverted(tables: ScenarioTables, base: np.ndarray, rules: CeclRules) -> ScenarioTables:
    months = base.shape[-1]
    w = reversion_weights(rules.reasonable_supportable_months, rules.reversion_months, rules.reversion, months)
    return ScenarioTables(
        names=tables.names,
        weights=tables.weights,
        pd=revert(base[:, None, :], tables.pd, w),
        lgd_multiplier=revert(1.0, tables.lgd_multiplier, w),
        collateral_index=revert(1.0, tables.collateral_index, w),
        reversion=w,
        pd_multiplier=revert(1.0, tables.pd_multiplier, w),
        collateral_by_key=None if tables.collateral_by_key is None else revert(1.0, tables.collateral_by_key, w),
    )


def scenario_tables(
    base: np.ndarray,
    rho: np.ndarray | None,
    assumptions: Assumptions,
    reversion: CeclRules | None = None,
    key_segments: Sequence[str] | None = None,
) -> ScenarioTables:
    """Every scenario's paths, for the whole life or reverting after a forecast period.

    Parameters
    ----------
    base : ndarray, shape (K, T)
        Base (unconditional, long-run) monthly marginal PDs per curve key.
    rho : ndarray, shape (K,), optional
        Asset correlation per curve key (:func:`asset_correlation`); needed only when a
        scenario gives a z path.
    assumptions : Assumptions
        Scenarios and weights.
    reversion : CeclRules, optional
        The reasonable and supportable period and the reversion after it (the ``[cecl]``
        table); ``None`` keeps the scenario paths for the whole life. Which framework reverts
        is a rule of :mod:`allowance.frameworks`.
    key_segments : sequence of str, optional
        The segment of each curve key (row of ``base``); needed only when a scenario gives
        macro paths (each segment's satellite model shifts its own rows).

    Returns
    -------
    ScenarioTables

    Notes
    -----
    Whole life (IFRS 9): the scenario paths for the whole life (PD multiplier and LGD
    multiplier 1.0, z the base, after the lists end; the collateral index holds its last
    value; macro paths at their baseline after they end). With ``reversion`` (CECL): the same
    paths for the reasonable and supportable period, then reverted to the base PDs and to
    multipliers of 1 with :func:`reversion_weights` (ASC 326-20-30-9), whatever kind of path
    the scenario states.

    Examples
    --------
    >>> from allowance.schemas import Assumptions
    >>> a = Assumptions.model_validate({
    ...     "run": {"as_of": "2026-09-30", "frameworks": ["cecl"]},
    ...     "segments": {"auto": {"pd_12m": 0.02, "lgd": 0.4}},
    ...     "cecl": {"reasonable_supportable_months": 12, "reversion_months": 12},
    ...     "scenarios": {"down": {"weight": 1.0, "pd_multiplier": [2.0, 2.0, 2.0]}}})
    >>> t = scenario_tables(np.full((1, 36), 0.001), None, a, a.cecl)
    >>> (t.pd[0, 0, [0, 11, 17, 23, 35]] / 0.001).round(4).tolist()
    [2.0, 2.0, 1.5, 1.0, 1.0]
    """
    base = np.asarray(base, dtype=float)
    if base.ndim != 2:
        raise InvalidInputError("scenario_tables: base must be a (keys, months) table")
    months = base.shape[-1]
    rho_a = None if rho is None else np.asarray(rho, dtype=float)
    scenarios = list(assumptions.scenarios.values())
    collateral = [by_year(s.collateral_index, months, after=s.collateral_index[-1] if s.collateral_index else 1.0)
                  for s in scenarios]
    links = None
    if any(s.macro for s in scenarios):
        if key_segments is None or len(key_segments) != base.shape[0]:
            raise InvalidInputError("scenario_tables: macro paths need key_segments, the segment of each row of base")
        links = macro.MacroLinks.from_assumptions(assumptions, key_segments)
    whole_life = ScenarioTables(
        names=tuple(assumptions.scenarios),
        weights=np.asarray(assumptions.weights, dtype=float),
        pd=np.stack([scenario_marginals(base, s, rho_a, links) for s in scenarios], axis=1),
        lgd_multiplier=np.stack([by_year(s.lgd_multiplier, months, after=1.0) for s in scenarios]),
        collateral_index=np.stack(collateral),
        reversion=None,
        pd_multiplier=np.stack([_multiplier_shown(s, months) for s in scenarios]),
        collateral_by_key=None if links is None else np.stack(
            [macro.macro_collateral(s, c, links) for s, c in zip(scenarios, collateral)], axis=1),
    )
    return whole_life if reversion is None else _reverted(whole_life, base, reversion)


def weighted(values, weights) -> np.ndarray:
    r"""Probability-weighted sum over the last (scenario) axis: :math:`\sum_s w_s v_s`.

    Weight the *losses* of each scenario, never the PDs: losses are not linear in PD.

    References
    ----------
    .. [1] IFRS 9 Financial Instruments, paragraphs 5.5.17(a) and B5.5.42.

    Examples
    --------
    >>> weighted(np.array([[100.0, 300.0], [10.0, 30.0]]), [0.75, 0.25]).tolist()
    [150.0, 15.0]
    """
    values = np.asarray(values, dtype=float)
    w = np.asarray(weights, dtype=float)
    if values.shape[-1:] != w.shape:
        raise InvalidInputError(f"weighted: {values.shape[-1]} scenarios in the values but {w.size} weights")
    return values @ w


def reversion_table(tables: ScenarioTables) -> pd.DataFrame:
    """The scenario paths used, long form: one row per scenario and month, for the workbook.

    Columns: ``scenario, month`` (1-based), ``weight_on_scenario`` (1 throughout for
    IFRS 9), ``pd_multiplier`` (blank for a z path), ``lgd_multiplier``, ``collateral_index``.

    Examples
    --------
    >>> t = ScenarioTables(("base",), np.ones(1), np.zeros((1, 1, 3)), np.ones((1, 3)),
    ...                    np.ones((1, 3)), np.array([1.0, 0.5, 0.0]), np.array([[2.0, 1.5, 1.0]]))
    >>> print(reversion_table(t)[["scenario", "month", "weight_on_scenario", "pd_multiplier"]])
      scenario  month  weight_on_scenario  pd_multiplier
    0     base      1                 1.0            2.0
    1     base      2                 0.5            1.5
    2     base      3                 0.0            1.0
    """
    n_scenarios, months = tables.lgd_multiplier.shape
    weight = np.ones(months) if tables.reversion is None else np.asarray(tables.reversion, float)
    multiplier = (
        np.full((n_scenarios, months), np.nan) if tables.pd_multiplier is None else tables.pd_multiplier
    )
    return pd.DataFrame(
        {
            "scenario": np.repeat(np.asarray(tables.names, dtype=object), months),
            "month": np.tile(np.arange(1, months + 1), n_scenarios),
            "weight_on_scenario": np.tile(weight, n_scenarios),
            # NaN (a z path) becomes a missing value, written as a blank cell
            "pd_multiplier": pd.array(np.asarray(multiplier, float).ravel(), dtype="Float64"),
            "lgd_multiplier": tables.lgd_multiplier.ravel(),
            "collateral_index": tables.collateral_index.ravel(),
        }
    )
