r"""Scenarios as macroeconomic paths: satellite models from macro variables to PDs and collateral.

A scenario may state the paths of macro variables by calendar quarter (any names the user
chooses: ``unemployment_rate``, ``house_price_index``, ...). ``[macro.baseline]`` gives the
path of each variable at which every segment's satellite model returns its long-run PD; a
scenario moves the PD by its *deviation* from that baseline. Every function here is pure
and works on per-curve tables (curve keys × months), never on loans.

Implements
----------
MacroLinks           what the paths need from an assumptions file: calendar, baseline, models
monthly_from_quarterly  quarterly values -> monthly values (step or linear)
on_months            a quarterly path read at months counted from the as-of month
deviations           scenario path − baseline path at given months (0 outside the paths)
pd_shift             a segment's shift on the link scale, month by month
macro_marginals      one scenario's monthly marginal PDs for every curve key
collateral_path      a segment's collateral index from a price variable
macro_collateral     one scenario's collateral index for every curve key
macro_path_table     the monthly paths used, long form, for the workbook
pd_path_table        the PD paths the scenarios produce, by segment, for the workbook
path_changes         a what-if's macro paths against the base run's, where they differ

The satellite model
-------------------
For segment g with link F (probit: Φ; logit: the logistic function), coefficients
:math:`\beta_j` and lags :math:`L_j` (months), the monthly marginal PD of curve key k in
month t under scenario s is

.. math::

    pd_{k,t}^{s} = F\Big(F^{-1}\big(pd_{k,t}\big)
        + \sum_j \beta_j \big(x_j^{s}(t - L_j) - b_j(t - L_j)\big)\Big)

where :math:`pd_{k,t}` is the long-run (unconditional) monthly marginal PD of the
segment's PD source, :math:`x_j^s` the scenario's path of variable j and :math:`b_j` the
baseline path, both read monthly. The coefficients are on the link scale of the *monthly*
PD. For roll-rate segments the shift moves the monthly PD of charge-off from each starting
bucket; the roll rates themselves are not shifted.

Conventions
-----------
- Month offset 0 is the as-of month; month t = 1, 2, ... are the projected months. Paths
  start at the calendar quarter ``[macro] start``; quarters up to the as-of date are history
  and feed the lags.
- Quarter to month (``[macro] interpolation``): ``step``, each month of a quarter takes the
  quarter's value; ``linear``, the quarter's value sits on its middle month with straight
  lines between middle months, the outer months of the first and last quarter held flat.
- Outside a scenario's path (before ``start``, after its last quarter) the variable is at
  its baseline: deviation 0, as a PD multiplier is 1.0 after its list ends.
- The collateral index holds its last value after the scenario's path ends.
- A shift of exactly 0 leaves the long-run PD bit for bit: a path equal to the baseline, or
  zero coefficients, give the run without the macro link to the cent.

References
----------
.. [1] Wilson, T. C. (1997). "Portfolio credit risk (I)" and "(II)". Risk, 10(9), 111-117,
   and 10(10), 56-61 (default rates linked to macro variables by a logit index; from memory).
.. [2] McCullagh, P. and Nelder, J. A. (1989). *Generalized Linear Models*, 2nd ed.,
   Chapman and Hall, section 4.3 (probit and logit links for binary data).
.. [3] IFRS 9 Financial Instruments, paragraphs 5.5.17(c) and B5.5.52 (forecasts of future
   economic conditions); FASB ASC 326-20-30-9 (reasonable and supportable forecasts).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import date

import numpy as np
import pandas as pd

from allowance.exceptions import AssumptionsError, InvalidInputError
from allowance.links import shift_probability
from allowance.schemas import (
    Assumptions,
    CollateralLink,
    Interpolation,
    MacroSection,
    SatelliteModel,
    Scenario,
    quarter_number,
)

__all__ = [
    "MacroLinks",
    "collateral_path",
    "deviations",
    "macro_collateral",
    "macro_marginals",
    "macro_path_table",
    "monthly_from_quarterly",
    "on_months",
    "path_changes",
    "pd_path_table",
    "pd_shift",
]


@dataclass(frozen=True)
class MacroLinks:
    """What macro paths need from the assumptions: the calendar, the baseline and the models.

    as_of        the reporting date (month offset 0 is its month)
    macro        the ``[macro]`` table (None when no scenario gives macro paths)
    satellites   segment name -> its satellite model (None where the segment has none)
    key_segments the segment of each curve key (row of the PD table), in order
    """

    as_of: date
    macro: MacroSection | None
    satellites: dict[str, SatelliteModel | None]
    key_segments: tuple[str, ...]

    @classmethod
    def from_assumptions(cls, assumptions: Assumptions, key_segments: Sequence[str]) -> MacroLinks:
        """Collect the links of an assumptions file for a PD table whose rows are ``key_segments``."""
        return cls(
            as_of=assumptions.run.as_of,
            macro=assumptions.macro,
            satellites={n: s.satellite for n, s in assumptions.segments.items()},
            key_segments=tuple(key_segments),
        )

    def _section(self) -> MacroSection:
        if self.macro is None:
            raise AssumptionsError(
                "a scenario gives macro paths but there is no [macro] table",
                column="macro",
                hint="add [macro] with start, interpolation and [macro.baseline]",
            )
        return self.macro

    def offset_of_start(self) -> int:
        """Month offset (from the as-of month) of the first month of ``[macro] start``."""
        as_of_month = self.as_of.year * 12 + self.as_of.month - 1
        return 3 * quarter_number(self._section().start) - as_of_month


# --------------------------------------------------------------------------------------
# Quarters to months
# --------------------------------------------------------------------------------------


def _interpolate_step(values: np.ndarray) -> np.ndarray:
    return np.repeat(values, 3)


def _interpolate_linear(values: np.ndarray) -> np.ndarray:
    middle = 3.0 * np.arange(values.size) + 1.0  # the middle month of each quarter
    return np.interp(np.arange(3 * values.size, dtype=float), middle, values)


_INTERPOLATIONS = {"step": _interpolate_step, "linear": _interpolate_linear}


def monthly_from_quarterly(values: Sequence[float], interpolation: Interpolation) -> np.ndarray:
    """Quarterly values -> monthly values, three months per quarter.

    Parameters
    ----------
    values : array_like, shape (n,)
        One value per quarter.
    interpolation : {"step", "linear"}
        ``step``: each month takes its quarter's value. ``linear``: a quarter's value sits
        on its middle month; months between middle months lie on the straight line; the
        first month of the first quarter and the last month of the last quarter are flat.

    Returns
    -------
    ndarray, shape (3n,)

    Notes
    -----
    Step keeps every quarter's average exactly; linear keeps the middle-month values and
    the average of every quarter whose neighbours lie on a straight line with it.

    Examples
    --------
    >>> monthly_from_quarterly([4.0, 5.5], "step").tolist()
    [4.0, 4.0, 4.0, 5.5, 5.5, 5.5]
    >>> monthly_from_quarterly([4.0, 5.5], "linear").tolist()
    [4.0, 4.0, 4.5, 5.0, 5.5, 5.5]
    """
    return _INTERPOLATIONS[interpolation](np.asarray(values, dtype=float))


def on_months(values: Sequence[float], offsets, links: MacroLinks) -> np.ndarray:
    """A quarterly path read at month offsets from the as-of month (NaN outside the path).

    Parameters
    ----------
    values : array_like
        The path by quarter, from ``[macro] start``.
    offsets : array_like of int
        Months counted from the as-of month (0 = the as-of month, 1 = the first projected month,
        negative = history).
    links : MacroLinks
        The calendar and the interpolation.

    Examples
    --------
    >>> from allowance.schemas import MacroSection
    >>> m = MacroSection(start="2026Q3", interpolation="step", baseline={"u": [4.0, 4.0]})
    >>> links = MacroLinks(date(2026, 9, 30), m, {}, ())
    >>> on_months([4.0, 5.0], [-3, -2, 0, 1, 3, 4], links).tolist()   # Jul..Sep, Oct..Dec 2026
    [nan, 4.0, 4.0, 5.0, 5.0, nan]
    """
    monthly = monthly_from_quarterly(values, links._section().interpolation)
    index = np.asarray(offsets, dtype=np.int64) - links.offset_of_start()
    inside = (index >= 0) & (index < monthly.size)
    return np.where(inside, monthly[np.clip(index, 0, max(monthly.size - 1, 0))], np.nan)


def deviations(scenario: Scenario, variable: str, offsets, links: MacroLinks) -> np.ndarray:
    """Scenario path − baseline path of one variable at month offsets; 0 outside the scenario's path.

    Raises
    ------
    AssumptionsError
        The scenario gives no path for the variable, or the baseline has none.
    """
    macro = links._section()
    if variable not in scenario.macro:
        raise AssumptionsError(
            f"the scenario gives no macro path for {variable!r}",
            column="scenarios",
            hint=f"add {variable} = [...] to the scenario's macro table",
        )
    if variable not in macro.baseline:
        raise AssumptionsError(f"there is no baseline path for {variable!r}", column=f"macro.baseline.{variable}")
    path = on_months(scenario.macro[variable], offsets, links)
    base = on_months(macro.baseline[variable], offsets, links)
    gap = path - base
    if np.isnan(base[~np.isnan(path)]).any():
        raise AssumptionsError(
            f"the baseline path of {variable!r} is shorter than a scenario's",
            column=f"macro.baseline.{variable}",
            hint="extend the baseline to cover every quarter a scenario gives",
        )
    return np.where(np.isnan(path), 0.0, gap)


# --------------------------------------------------------------------------------------
# The PD link
# --------------------------------------------------------------------------------------


def pd_shift(model: SatelliteModel, scenario: Scenario, months: int, links: MacroLinks) -> np.ndarray:
    r"""The shift on the link scale in months 1..``months``: :math:`\sum_j \beta_j d_j(t - L_j)`.

    Parameters
    ----------
    model : SatelliteModel
        Coefficients :math:`\beta_j` and lags :math:`L_j` (months).
    scenario : Scenario
        Its macro paths.
    months : int
    links : MacroLinks

    Returns
    -------
    ndarray, shape (months,)
        Exactly 0 where every deviation is 0 or every coefficient is 0.

    Examples
    --------
    Unemployment 1 point above the baseline in the second projected quarter only, β = 0.1
    on the probit scale, lag 3 months: the shift is 0.1 in months 7-9, then 0 again (the
    path has ended: the variable is back at its baseline).

    >>> from allowance.schemas import MacroSection, SatelliteModel, Scenario
    >>> m = MacroSection(start="2026Q4", interpolation="step", baseline={"u": [4.0, 4.0, 4.0]})
    >>> links = MacroLinks(date(2026, 9, 30), m, {}, ())
    >>> model = SatelliteModel(link="probit", coefficients={"u": 0.1}, lag_months={"u": 3})
    >>> pd_shift(model, Scenario(weight=1, macro={"u": [4.0, 5.0]}), 12, links).tolist()
    [0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.1, 0.1, 0.1, 0.0, 0.0, 0.0]
    """
    t = np.arange(1, months + 1)
    shift = np.zeros(months)
    for variable, beta in model.coefficients.items():
        if beta == 0.0:
            continue
        lag = model.lag_months.get(variable, 0)
        shift = shift + beta * deviations(scenario, variable, t - lag, links)
    return shift


def macro_marginals(base: np.ndarray, scenario: Scenario, links: MacroLinks) -> np.ndarray:
    """One scenario's monthly marginal PDs from the long-run ones, through each segment's model.

    Parameters
    ----------
    base : ndarray, shape (K, T)
        Long-run monthly marginal PDs per curve key (rows in ``links.key_segments`` order).
    scenario : Scenario
        Its macro paths.
    links : MacroLinks

    Returns
    -------
    ndarray, shape (K, T)

    Raises
    ------
    AssumptionsError
        A segment has no satellite model.

    Examples
    --------
    >>> from allowance.schemas import MacroSection, SatelliteModel, Scenario
    >>> m = MacroSection(start="2026Q4", interpolation="step", baseline={"u": [4.0, 4.0]})
    >>> model = SatelliteModel(link="logit", coefficients={"u": float(np.log(2.0))})
    >>> links = MacroLinks(date(2026, 9, 30), m, {"auto": model}, ("auto",))
    >>> out = macro_marginals(np.full((1, 6), 0.2), Scenario(weight=1, macro={"u": [4.0, 5.0]}), links)
    >>> out.round(6).tolist()   # one point more: the odds double, 0.25 -> 0.5
    [[0.2, 0.2, 0.2, 0.333333, 0.333333, 0.333333]]
    """
    base = np.asarray(base, dtype=float)
    if base.ndim != 2 or base.shape[0] != len(links.key_segments):
        raise InvalidInputError("macro_marginals: base must have one row per curve key of links.key_segments")
    out = base.copy()
    segments = np.asarray(links.key_segments, dtype=object)
    for name in dict.fromkeys(links.key_segments):
        model = links.satellites.get(name)
        if model is None:
            raise AssumptionsError(
                f"segment {name!r} has no satellite model, and a scenario gives macro paths",
                column=f"segments.{name}.satellite",
                hint="state link and coefficients (zero coefficients keep the long-run PD)",
            )
        rows = segments == name
        shift = pd_shift(model, scenario, base.shape[1], links)
        out[rows] = shift_probability(base[rows], shift[None, :], model.link)
    return out


# --------------------------------------------------------------------------------------
# The collateral link
# --------------------------------------------------------------------------------------


def _growth(values: np.ndarray, form: str) -> np.ndarray:
    return values / 100.0 if form == "annual_growth_percent" else values


def _level_index(path: np.ndarray, where: str) -> np.ndarray:
    if np.isnan(path[0]):
        raise AssumptionsError(
            "a price level is measured from the as-of month, but the paths start after it",
            column=where,
            hint="start [macro] at the as-of quarter or earlier, or give the variable as annual growth",
        )
    known = path[~np.isnan(path)]
    if np.any(known <= 0.0):
        raise AssumptionsError("a price level must be above 0", column=where)
    return path / path[0]


def _growth_index(path: np.ndarray, form: str, where: str) -> np.ndarray:
    g = _growth(path[1:], form)
    if np.any(g[~np.isnan(g)] <= -1.0):
        raise AssumptionsError("annual growth must be above -100 %", column=where)
    monthly = np.where(np.isnan(g), 0.0, np.log1p(np.nan_to_num(g)) / 12.0)
    return np.concatenate([[1.0], np.exp(np.cumsum(monthly))])


def collateral_path(link: CollateralLink, scenario: Scenario, months: int, links: MacroLinks,
                    where: str = "satellite.collateral") -> np.ndarray:
    r"""Collateral value relative to today's in months 1..``months``, from a price variable.

    Parameters
    ----------
    link : CollateralLink
        The variable, its form (``level``, ``annual_growth``, ``annual_growth_percent``) and
        what it is measured against (``baseline`` or ``as_of``).
    scenario : Scenario
    months : int
    links : MacroLinks
    where : str
        The key named in an error message.

    Returns
    -------
    ndarray, shape (months,)

    Notes
    -----
    With :math:`I^x_t` the price index of path x at month t relative to the as-of month,
    level :math:`I_t = P_t / P_0`, annual growth :math:`I_t = \prod_{m=1}^{t} (1 + g_m)^{1/12}`:

    - ``as_of``: :math:`C_t = I^{s}_t`, the scenario's own price change;
    - ``baseline``: :math:`C_t = I^{s}_t / I^{b}_t`, the scenario's prices relative to the
      baseline's, so the baseline path leaves collateral at today's value (index 1 exactly).

    After the scenario's path ends the index holds its last value.

    Examples
    --------
    >>> from allowance.schemas import CollateralLink, MacroSection, Scenario
    >>> m = MacroSection(start="2026Q3", interpolation="step",
    ...                  baseline={"hpi": [100.0, 101.0, 102.0]})
    >>> links = MacroLinks(date(2026, 9, 30), m, {}, ())
    >>> down = Scenario(weight=1, macro={"hpi": [100.0, 95.0, 90.0]})
    >>> c = CollateralLink(variable="hpi", form="level", relative_to="as_of")
    >>> collateral_path(c, down, 8, links).tolist()
    [0.95, 0.95, 0.95, 0.9, 0.9, 0.9, 0.9, 0.9]
    """
    offsets = np.arange(0, months + 1)
    scenario_path = on_months(scenario.macro[link.variable], offsets, links)
    ended = np.isnan(scenario_path) & (offsets > 0)
    if link.form == "level":
        index = _level_index(scenario_path, where)
    else:
        index = _growth_index(scenario_path, link.form, where)
    if link.relative_to == "baseline":
        base_path = on_months(links._section().baseline[link.variable], offsets, links)
        base_path = np.where(ended, np.nan, base_path)  # the ratio holds once the scenario ends
        base_index = _level_index(base_path, where) if link.form == "level" else _growth_index(base_path, link.form, where)
        index = index / base_index
    index = pd.Series(index).ffill().to_numpy()  # hold the last value after the path ends
    return index[1:]


def macro_collateral(scenario: Scenario, fallback: np.ndarray, links: MacroLinks) -> np.ndarray:
    """One scenario's collateral index per curve key: the linked variable, or ``fallback``.

    Parameters
    ----------
    scenario : Scenario
    fallback : ndarray, shape (T,)
        The scenario's by-year ``collateral_index`` path, for segments with no collateral link.
    links : MacroLinks

    Returns
    -------
    ndarray, shape (K, T)
    """
    fallback = np.asarray(fallback, dtype=float)
    out = np.tile(fallback, (len(links.key_segments), 1))
    if not scenario.macro:
        return out
    segments = np.asarray(links.key_segments, dtype=object)
    for name in dict.fromkeys(links.key_segments):
        model = links.satellites.get(name)
        if model is None or model.collateral is None:
            continue
        out[segments == name] = collateral_path(model.collateral, scenario, fallback.size, links,
                                                where=f"segments.{name}.satellite.collateral")
    return out


# --------------------------------------------------------------------------------------
# For the workbook
# --------------------------------------------------------------------------------------


def macro_path_table(assumptions: Assumptions, months: int) -> pd.DataFrame:
    """The macro paths used, monthly, long form: one row per scenario, variable and month.

    Columns: ``scenario, variable, month`` (offset from the as-of month; history months are
    0 and below), ``calendar_month`` (``YYYY-MM``), ``value``, ``baseline``, ``deviation``.
    Empty when no scenario gives macro paths. The baseline is listed once more as scenario
    ``"(baseline)"``.

    Examples
    --------
    >>> from allowance.schemas import Assumptions
    >>> a = Assumptions.model_validate({
    ...     "run": {"as_of": "2026-09-30", "frameworks": ["cecl"]},
    ...     "segments": {"auto": {"pd_12m": 0.02, "lgd": 0.4,
    ...                           "satellite": {"link": "probit", "coefficients": {"u": 0.1}}}},
    ...     "cecl": {"reasonable_supportable_months": 12},
    ...     "macro": {"start": "2026Q4", "interpolation": "step", "baseline": {"u": [4.0, 4.0]}},
    ...     "scenarios": {"down": {"weight": 1.0, "macro": {"u": [5.0, 6.0]}}}})
    >>> t = macro_path_table(a, 6)
    >>> t[t.scenario == "down"][["month", "calendar_month", "value", "deviation"]].head(4).values.tolist()
    [[1, '2026-10', 5.0, 1.0], [2, '2026-11', 5.0, 1.0], [3, '2026-12', 5.0, 1.0], [4, '2027-01', 6.0, 2.0]]
    """
    macro = assumptions.macro
    scenarios = {n: s for n, s in assumptions.scenarios.items() if s.macro}
    columns = ["scenario", "variable", "month", "calendar_month", "value", "baseline", "deviation"]
    if macro is None or not scenarios:
        return pd.DataFrame(columns=columns)
    links = MacroLinks.from_assumptions(assumptions, ())
    first = min(links.offset_of_start(), 1)
    offsets = np.arange(first, months + 1)
    as_of_month = assumptions.run.as_of.year * 12 + assumptions.run.as_of.month - 1
    absolute = as_of_month + offsets
    calendar = [f"{m // 12}-{m % 12 + 1:02d}" for m in absolute]
    frames = []
    for variable, path in macro.baseline.items():
        base = on_months(path, offsets, links)
        listed = [("(baseline)", Scenario(weight=0.0, macro={variable: path}))]
        listed += [(n, s) for n, s in scenarios.items() if variable in s.macro]
        for name, scenario in listed:
            value = on_months(scenario.macro[variable], offsets, links)
            frames.append(pd.DataFrame({
                "scenario": name, "variable": variable, "month": offsets, "calendar_month": calendar,
                "value": value, "baseline": base,
                "deviation": deviations(scenario, variable, offsets, links),
            }))
    out = pd.concat(frames, ignore_index=True)
    return out[~out["value"].isna() | ~out["baseline"].isna()].reset_index(drop=True)


def pd_path_table(pd_table: np.ndarray, names: Sequence[str], key_segments: Sequence[str],
                  key_weights: np.ndarray | None = None, framework: str = "") -> pd.DataFrame:
    r"""The monthly PD path of each segment under each scenario, long form, for the workbook.

    Parameters
    ----------
    pd_table : ndarray, shape (K, S, T)
        Monthly marginal PDs per curve key, scenario and month (``ScenarioTables.pd``).
    names : sequence of str
        The scenario names.
    key_segments : sequence of str
        The segment of each curve key.
    key_weights : ndarray, shape (K,), optional
        Weight of each curve key within its segment (the book's balance on it); equal
        weights where a segment's weights are all 0 or none are given.
    framework : str
        Carried into the table.

    Returns
    -------
    DataFrame
        ``framework, scenario, segment, month, marginal_pd`` (the weighted average of the
        segment's keys) and ``annualised_pd`` :math:`= 1 - (1 - pd_t)^{12}`, the PD at an
        annual rate in month t.

    Examples
    --------
    >>> table = np.array([[[0.001, 0.002]], [[0.003, 0.004]]])   # 2 keys, 1 scenario, 2 months
    >>> t = pd_path_table(table, ["base"], ["auto", "auto"], np.array([3.0, 1.0]))
    >>> t["marginal_pd"].round(6).tolist()
    [0.0015, 0.0025]
    """
    pd_table = np.asarray(pd_table, dtype=float)
    n_keys, n_scenarios, months = pd_table.shape
    weights = np.ones(n_keys) if key_weights is None else np.asarray(key_weights, dtype=float)
    segments = np.asarray(key_segments, dtype=object)
    scenario_col, segment_col, marginal, annualised = [], [], [], []
    for name in dict.fromkeys(key_segments):
        rows = segments == name
        w = weights[rows]
        w = np.ones(rows.sum()) if w.sum() <= 0 else w
        average = np.einsum("k,kst->st", w / w.sum(), pd_table[rows])
        with np.errstate(divide="ignore"):  # a monthly PD of 1 is an annualised PD of 1
            annual = -np.expm1(12.0 * np.log1p(-np.minimum(average, 1.0)))
        for s, scenario in enumerate(names):  # the rows of a segment and scenario, month by month
            scenario_col.append(scenario)
            segment_col.append(name)
            marginal.append(average[s])
            annualised.append(annual[s])
    columns = ["framework", "scenario", "segment", "month", "marginal_pd", "annualised_pd"]
    if not marginal:
        return pd.DataFrame(columns=columns)
    # one frame for the whole table (a frame per segment and scenario cost more than the sums)
    return pd.DataFrame({
        "framework": framework, "scenario": np.repeat(np.asarray(scenario_col, dtype=object), months),
        "segment": np.repeat(np.asarray(segment_col, dtype=object), months),
        "month": np.tile(np.arange(1, months + 1), len(marginal)),
        "marginal_pd": np.concatenate(marginal), "annualised_pd": np.concatenate(annualised),
    }, columns=columns)


def path_changes(base: Assumptions, what_if: Assumptions, months: int) -> pd.DataFrame:
    """A what-if's macro paths against the base run's: every scenario and variable that differs.

    Columns ``scenario, variable, month, calendar_month, base, what_if, change``; a
    (scenario, variable) pair appears with its whole path when any month differs (the
    baseline as scenario ``"(baseline)"``). Empty when neither run gives macro paths or
    nothing changed.

    Examples
    --------
    >>> from allowance.schemas import Assumptions
    >>> data = {"run": {"as_of": "2026-09-30", "frameworks": ["cecl"]},
    ...         "segments": {"a": {"pd_12m": 0.02, "lgd": 0.4,
    ...                            "satellite": {"link": "probit", "coefficients": {"u": 0.1}}}},
    ...         "cecl": {"reasonable_supportable_months": 12},
    ...         "macro": {"start": "2026Q4", "interpolation": "step", "baseline": {"u": [4.0, 4.0]}},
    ...         "scenarios": {"down": {"weight": 1.0, "macro": {"u": [5.0, 6.0]}}}}
    >>> worse = {**data, "scenarios": {"down": {"weight": 1.0, "macro": {"u": [5.0, 7.0]}}}}
    >>> t = path_changes(Assumptions.model_validate(data), Assumptions.model_validate(worse), 6)
    >>> t[["month", "base", "what_if", "change"]].iloc[2:4].to_dict("split")["data"]
    [[3, 5.0, 5.0, 0.0], [4, 6.0, 7.0, 1.0]]
    """
    keys = ["scenario", "variable", "month", "calendar_month"]
    columns = [*keys, "base", "what_if", "change"]
    before = macro_path_table(base, months)
    after = macro_path_table(what_if, months)
    if before.empty and after.empty:
        return pd.DataFrame(columns=columns)
    joined = before[[*keys, "value"]].merge(after[[*keys, "value"]], on=keys, how="outer",
                                          suffixes=("_base", "_what_if"))
    joined = joined.rename(columns={"value_base": "base", "value_what_if": "what_if"})
    joined["change"] = joined["what_if"] - joined["base"]
    differs = ~((joined["base"] == joined["what_if"]) | (joined["base"].isna() & joined["what_if"].isna()))
    changed = joined.loc[differs, ["scenario", "variable"]].drop_duplicates()
    out = joined.merge(changed, on=["scenario", "variable"], how="inner")
    return out.sort_values(["scenario", "variable", "month"]).reset_index(drop=True)[columns]
