r"""Satellite models fitted in a calibration: each segment's monthly charge-offs on lagged macro variables.

A policy file names, per segment, the model to fit (``[segments.<name>.satellite]``: ``link``,
``lag_months`` with every variable, ``0`` for no lag, and optionally ``collateral``); with a
macro history (``allowance calibrate --macro FILE``) the coefficients are estimated by
:func:`allowance.satellite_fit.fit_satellite` (a binomial GLM, statsmodels) from the segment's
loans at risk and charge-offs by month (:attr:`allowance.calibrate.hazards.Hazards.monthly`,
every month of the history after the first, up to the as-of month):

.. math:: d_t \sim \mathrm{Binomial}(n_t, p_t), \qquad F^{-1}(p_t) = \alpha + \sum_j \beta_j x_j(t - L_j).

The run uses the slopes :math:`\beta_j` as the shift of the long-run PD by each variable's
deviation from the baseline path (:mod:`allowance.macro`); the intercept is reported, not used.
A policy that also states ``coefficients`` keeps them (the estimate is shown beside them).

Implements
----------
SATELLITE_VARIABLES  the policy keys that name the variables of a model to fit
model_variables      the variables and lags a policy's satellite table asks for
fit_satellites       every segment's fit (segment -> SatelliteFit)
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

import pandas as pd

from allowance.calibrate.frame import Frame
from allowance.exceptions import AssumptionsError
from allowance.satellite_fit import SatelliteFit, fit_satellite

#: The policy keys that name a model's variables (lags of 0 included).
SATELLITE_VARIABLES = ("lag_months", "coefficients")


def model_variables(table: Mapping[str, Any]) -> dict[str, int]:
    """Variable -> lag in months, from a policy's satellite table (``lag_months``, then ``coefficients``).

    Examples
    --------
    >>> model_variables({"link": "probit", "lag_months": {"u": 3, "hpi": 0}})
    {'u': 3, 'hpi': 0}
    >>> model_variables({"coefficients": {"u": 0.05, "hpi": -0.01}, "lag_months": {"u": 6}})
    {'u': 6, 'hpi': 0}
    """
    lags = dict(table.get("lag_months", {}) or {})
    names = [*lags, *[v for v in (table.get("coefficients", {}) or {}) if v not in lags]]
    return {name: int(lags.get(name, 0)) for name in names}


def fit_satellites(monthly: pd.DataFrame, frame: Frame, macro: pd.DataFrame,
                   policy_segments: Mapping[str, Any], policy_file: Path | None) -> dict[str, SatelliteFit]:
    """Fit the satellite model the policy names for each segment.

    Parameters
    ----------
    monthly : DataFrame
        ``segment, month, at_risk, defaults`` (:attr:`Hazards.monthly`).
    frame : Frame
        The calibration frame (its settings choose the standard errors).
    macro : DataFrame
        Monthly macro series (index ``Period[M]``).
    policy_segments : mapping
        The policy's ``[segments]`` tables.

    Raises
    ------
    AssumptionsError
        A satellite table naming no variable or an unknown link, a variable the macro history
        lacks, too few months, or a fit that does not converge (from :func:`fit_satellite`).
    """
    fits = {}
    for name in frame.segments:
        table = (policy_segments.get(name, {}) or {}).get("satellite")
        if not table:
            continue
        where = f"segments.{name}.satellite"
        variables = model_variables(table)
        if not variables:
            raise AssumptionsError("the satellite model names no variable", file=policy_file, column=where,
                                   hint="list each variable in lag_months, with 0 for no lag")
        link = table.get("link")
        if link not in ("probit", "logit"):
            raise AssumptionsError(f"link must be probit or logit, not {link!r}", file=policy_file,
                                   column=f"{where}.link")
        rows = monthly[monthly["segment"] == name]
        try:
            fits[name] = fit_satellite(rows[["month", "at_risk", "defaults"]], macro, variables, link,
                                       frame.settings.satellite_standard_errors, segment=name)
        except AssumptionsError as err:
            raise AssumptionsError(err.reason, file=policy_file, column=where, hint=err.hint) from err
    return fits


__all__ = ["SATELLITE_VARIABLES", "fit_satellites", "model_variables"]
