r"""Satellite models estimated from history: the monthly default rate on lagged macro variables.

The estimator behind the coefficients of ``[segments.<name>.satellite]``: a pure function of a
segment's monthly counts (loans at risk, defaults) and the macro history
(:func:`allowance.intake.read_macro_history`), for ``allowance calibrate`` to call.

For one segment, month t has :math:`n_t` loans at risk (on the book at the start of the
month) and :math:`d_t` defaults. The satellite model of :mod:`allowance.macro` says

.. math::

    d_t \sim \mathrm{Binomial}(n_t, p_t), \qquad
    F^{-1}(p_t) = \alpha + \sum_j \beta_j\, x_j(t - L_j),

with F the standard normal CDF (probit) or the logistic function (logit), the lags
:math:`L_j` stated. The coefficients :math:`\beta_j` are estimated by maximum likelihood
(a binomial generalised linear model, iteratively reweighted least squares) with
statsmodels; the run then uses them as shifts of the long-run PD by the deviation of each
variable from its baseline path, so the intercept α is reported but not used.

Standard errors, a stated choice (``standard_errors``):

- ``binomial``: the model-based covariance, dispersion 1. Right when months differ only by
  the macro variables and binomial sampling;
- ``overdispersed``: quasi-binomial, the covariance scaled by the Pearson dispersion
  :math:`\hat\phi = X^2 / (T - k)` [2]_. Default rates of a book move together for reasons
  no regressor captures (a systematic factor), so :math:`\hat\phi` is usually well above 1
  and the binomial standard errors far too small;
- ``hac``: heteroskedasticity- and autocorrelation-consistent (Newey-West, Bartlett kernel)
  with ``hac_lags`` lags (default :math:`\lfloor 4 (T/100)^{2/9} \rfloor`) [3]_, for
  residuals correlated from month to month.

Implements
----------
SatelliteFit    coefficients with standard errors, fit statistics, observed and fitted rates
fit_satellite   the estimate for one segment
lagged_design   the regressors x_j(t - L_j) aligned with the months of the rates

References
----------
.. [1] McCullagh, P. and Nelder, J. A. (1989). *Generalized Linear Models*, 2nd ed.,
   Chapman and Hall, chapter 4 (binary data: probit and logit links, IRLS).
.. [2] Ibid., section 4.5 (over-dispersion; the Pearson estimate of the dispersion).
.. [3] Newey, W. K. and West, K. D. (1987). "A simple, positive semi-definite,
   heteroskedasticity and autocorrelation consistent covariance matrix". Econometrica
   55(3), 703-708.
.. [4] Seabold, S. and Perktold, J. (2010). "statsmodels: Econometric and statistical
   modeling with Python". Proceedings of the 9th Python in Science Conference.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pandas as pd

from allowance.exceptions import AssumptionsError
from allowance.schemas import Link, SatelliteModel

__all__ = ["STANDARD_ERRORS", "SatelliteFit", "StandardErrors", "fit_satellite", "lagged_design"]

StandardErrors = Literal["binomial", "overdispersed", "hac"]
STANDARD_ERRORS: tuple[StandardErrors, ...] = ("binomial", "overdispersed", "hac")


@dataclass(frozen=True)
class SatelliteFit:
    """A fitted satellite model of one segment.

    coefficients  one row per term (``intercept`` first): ``term, variable, lag_months,
                  coefficient, std_error, z, p_value, ci_low, ci_high`` (95 %)
    statistics    one row per statistic: ``statistic, value, note``
    fitted        one row per month used: ``month, at_risk, defaults, observed_rate,
                  fitted_rate``, then the lagged regressors
    """

    segment: str
    link: Link
    standard_errors: StandardErrors
    coefficients: pd.DataFrame
    statistics: pd.DataFrame
    fitted: pd.DataFrame

    def model(self, source: str = "") -> SatelliteModel:
        """The satellite model for the assumptions file (slopes and lags; the intercept is not used)."""
        slopes = self.coefficients[self.coefficients["term"] != "intercept"]
        return SatelliteModel(
            link=self.link,
            coefficients={r.variable: float(r.coefficient) for r in slopes.itertuples()},
            lag_months={r.variable: int(r.lag_months) for r in slopes.itertuples() if int(r.lag_months)},
            source=source,
        )

    def statistic(self, name: str) -> float:
        """One fit statistic by name (``dispersion``, ``pseudo_r2_mcfadden``, ...)."""
        row = self.statistics[self.statistics["statistic"] == name]
        if row.empty:
            raise KeyError(name)
        return float(row["value"].iloc[0])


def _months(values) -> pd.PeriodIndex:
    index = pd.PeriodIndex(pd.Series(values).astype(str), freq="M") if not isinstance(values, pd.PeriodIndex) else values
    return index.asfreq("M")


def lagged_design(months: pd.PeriodIndex, macro: pd.DataFrame, variables: Mapping[str, int]) -> pd.DataFrame:
    """The regressors :math:`x_j(t - L_j)` for each month t (NaN where the macro file has no value).

    Parameters
    ----------
    months : PeriodIndex (monthly)
        The months of the default rates.
    macro : DataFrame
        Monthly macro series, index ``Period[M]`` (:meth:`MacroHistory.monthly`).
    variables : mapping
        Variable -> lag in months.

    Examples
    --------
    >>> m = pd.DataFrame({"u": [4.0, 5.0, 6.0]}, index=pd.period_range("2026-01", periods=3, freq="M"))
    >>> lagged_design(pd.period_range("2026-02", periods=3, freq="M"), m, {"u": 1})["u"].tolist()
    [4.0, 5.0, 6.0]
    """
    out = {}
    for name, lag in variables.items():
        series = macro[name]
        series = pd.Series(series.to_numpy(), index=macro.index.asfreq("M"))
        out[name] = series.reindex(months - int(lag)).to_numpy()
    return pd.DataFrame(out, index=months)


def _family(link: Link):
    import statsmodels.api as sm

    links = {"probit": sm.families.links.Probit, "logit": sm.families.links.Logit}
    return sm.families.Binomial(link=links[link]())


def fit_satellite(
    rates: pd.DataFrame,
    macro: pd.DataFrame,
    variables: Mapping[str, int],
    link: Link,
    standard_errors: StandardErrors,
    *,
    segment: str = "",
    hac_lags: int | None = None,
) -> SatelliteFit:
    r"""Estimate a segment's satellite model from its monthly defaults and the macro history.

    Parameters
    ----------
    rates : DataFrame
        One row per month: ``month`` (``Period[M]`` or ``YYYY-MM``), ``at_risk`` (loans on
        the book at the start of the month, not in default) and ``defaults`` (of those, the
        loans that defaulted in the month).
    macro : DataFrame
        Monthly macro series, index ``Period[M]``, one column per variable.
    variables : mapping
        Each regressor and its lag in months, ``{"unemployment_rate": 3}``.
    link : {"probit", "logit"}
    standard_errors : {"binomial", "overdispersed", "hac"}
        See the module notes.
    segment : str
        For messages and the result.
    hac_lags : int, optional
        Lags of the Newey-West estimator (``hac`` only).

    Returns
    -------
    SatelliteFit

    Raises
    ------
    AssumptionsError
        A variable the macro file does not have; fewer usable months than terms + 10; no
        defaults at all; a fit that does not converge.

    Notes
    -----
    Months with no loans at risk, and months whose lagged regressors fall outside the macro
    file, are left out; the statistics say how many.
    """
    import warnings

    import statsmodels.api as sm
    from statsmodels.stats.stattools import durbin_watson
    from statsmodels.tools.sm_exceptions import ConvergenceWarning, PerfectSeparationWarning

    where = f"satellite model of segment {segment!r}" if segment else "satellite model"
    missing = [v for v in variables if v not in macro.columns]
    if missing:
        raise AssumptionsError(
            f"{where}: the macro history has no {', '.join(map(repr, missing))}",
            hint=f"the macro file's variables are {', '.join(map(str, macro.columns))}",
        )
    if standard_errors not in STANDARD_ERRORS:
        raise AssumptionsError(f"{where}: standard_errors must be one of {', '.join(STANDARD_ERRORS)}")
    months = _months(rates["month"])
    at_risk = rates["at_risk"].to_numpy(dtype=float)
    defaults = rates["defaults"].to_numpy(dtype=float)
    if np.any(defaults < 0) or np.any(defaults > at_risk):
        raise ValueError("fit_satellite: defaults must lie in 0..at_risk each month")
    design = lagged_design(months, macro, variables)
    has_risk = at_risk > 0
    has_macro = design.notna().all(axis=1).to_numpy()
    used = has_risk & has_macro
    k = len(variables) + 1
    if used.sum() < k + 10:
        raise AssumptionsError(
            f"{where}: {int(used.sum())} months have both loans at risk and the lagged macro values; "
            f"at least {k + 10} are needed for {k} terms",
            hint="extend the macro file back in time, shorten the lags, or use fewer variables",
        )
    if defaults[used].sum() == 0:
        raise AssumptionsError(f"{where}: no defaults in the months used; nothing to fit")
    x = design.to_numpy()[used]
    exog = np.column_stack([np.ones(int(used.sum())), x])
    endog = np.column_stack([defaults[used], at_risk[used] - defaults[used]])
    model = sm.GLM(endog, exog, family=_family(link))
    n = int(used.sum())
    with warnings.catch_warnings():
        warnings.simplefilter("error", ConvergenceWarning)
        warnings.simplefilter("error", PerfectSeparationWarning)
        try:
            result = model.fit()
            note = "model-based (binomial, dispersion 1)"
            if standard_errors == "overdispersed":
                # the Pearson dispersion of the count model, passed as a number: statsmodels'
                # own "X2" scale works on the proportions without their binomial weights
                phi = float(result.pearson_chi2 / result.df_resid)
                result = model.fit(scale=phi)
                note = f"quasi-binomial: the covariance scaled by the Pearson dispersion {phi:.4g}"
            elif standard_errors == "hac":
                lags = int(np.floor(4 * (n / 100.0) ** (2.0 / 9.0))) if hac_lags is None else int(hac_lags)
                result = model.fit(cov_type="HAC", cov_kwds={"maxlags": lags})
                note = f"Newey-West HAC (Bartlett kernel), {lags} lags"
        except (ConvergenceWarning, PerfectSeparationWarning, np.linalg.LinAlgError) as err:
            raise AssumptionsError(
                f"{where}: the regression did not converge ({err})",
                hint="check the variables for collinearity or a constant series",
            ) from err
    params = np.asarray(result.params)
    bse = np.asarray(result.bse)
    ci = np.asarray(result.conf_int(0.05))
    terms = ["intercept", *variables]
    coefficients = pd.DataFrame({
        "term": terms,
        "variable": ["", *variables],
        "lag_months": [0, *[int(v) for v in variables.values()]],
        "coefficient": params,
        "std_error": bse,
        "z": np.asarray(result.tvalues),
        "p_value": np.asarray(result.pvalues),
        "ci_low": ci[:, 0],
        "ci_high": ci[:, 1],
    })
    pearson = float(result.pearson_chi2)
    df_resid = float(result.df_resid)
    observed = defaults[used] / at_risk[used]
    fitted_rate = np.asarray(result.fittedvalues)
    resid = (observed - fitted_rate) / np.sqrt(fitted_rate * (1 - fitted_rate) / at_risk[used])
    stats = [
        ("months_used", n, f"{months[used][0]} to {months[used][-1]}"),
        ("months_without_loans", int((~has_risk).sum()), "left out"),
        ("months_without_macro_values", int((has_risk & ~has_macro).sum()), "lagged values outside the macro file; left out"),
        ("loan_months", float(at_risk[used].sum()), ""),
        ("defaults", float(defaults[used].sum()), ""),
        ("mean_monthly_default_rate", float(defaults[used].sum() / at_risk[used].sum()), "pooled"),
        ("log_likelihood", float(result.llf), "binomial"),
        ("log_likelihood_intercept_only", float(result.llnull), ""),
        ("pseudo_r2_mcfadden", float(1.0 - result.llf / result.llnull), "1 - llf / llnull"),
        ("deviance", float(result.deviance), f"on {df_resid:g} residual degrees of freedom"),
        ("pearson_chi2", pearson, ""),
        ("dispersion", pearson / df_resid, "Pearson chi2 / residual df; 1 under the binomial model"),
        ("aic", float(result.aic), ""),
        ("bic", float(result.bic_llf), "from the log-likelihood"),
        ("durbin_watson", float(durbin_watson(resid)), "of the Pearson residuals; 2 = no autocorrelation"),
        ("correlation_observed_fitted", float(np.corrcoef(observed, fitted_rate)[0, 1]), "monthly rates"),
    ]
    stats.append(("standard_errors", np.nan, note))
    statistics = pd.DataFrame(stats, columns=["statistic", "value", "note"])
    fitted = pd.DataFrame({
        "month": months[used].astype(str),
        "at_risk": at_risk[used],
        "defaults": defaults[used],
        "observed_rate": observed,
        "fitted_rate": fitted_rate,
    })
    for i, name in enumerate(variables):
        fitted[f"{name} (lag {int(variables[name])})"] = x[:, i]
    return SatelliteFit(segment=segment, link=link, standard_errors=standard_errors,
                        coefficients=coefficients, statistics=statistics, fitted=fitted)
