r"""PD calibration tests: realised default rates against the PDs used.

For a grade with n performing loans at the start of the year, d of which defaulted within 12
months, and the 12-month PD p the run used for them:

- the **exact binomial (Clopper–Pearson)** interval for the default rate,
  :math:`[B^{-1}(\alpha/2;\ d,\ n-d+1),\ B^{-1}(1-\alpha/2;\ d+1,\ n-d)]` [1]_;
- the **Jeffreys** interval, the equal-tailed interval of the Beta(d + ½, n − d + ½)
  posterior, with the lower end 0 when d = 0 and the upper end 1 when d = n [2]_;
- the one-sided **binomial test** of "the PD is not too low": the p-value
  :math:`P(D \ge d \mid n, p)` [3]_, and the one-sided **Jeffreys test** p-value
  :math:`P(\theta \le p)` under the Beta(d + ½, n − d + ½) posterior [4]_;
- a **traffic light** from the chosen test's p-value: green at or above ``yellow_p``,
  yellow below it, red below ``red_p`` [3]_.

A segment's verdict tests its total defaults against the sum of its grades' binomials
(a Poisson-binomial distribution, by exact convolution). Every test assumes defaults are
independent given the PD; correlated defaults (one economy for all borrowers) widen the true
distribution, so a red light in a bad year is a prompt to look, not a proof.

References
----------
.. [1] C. J. Clopper and E. S. Pearson, "The use of confidence or fiducial limits illustrated
   in the case of the binomial", *Biometrika* 26 (1934) 404-413.
.. [2] L. D. Brown, T. T. Cai and A. DasGupta, "Interval estimation for a binomial
   proportion", *Statistical Science* 16 (2001) 101-133.
.. [3] D. Tasche, "A traffic lights approach to PD validation", working paper (2003)
   (green / yellow / red by the binomial tail probability; levels from memory).
.. [4] European Central Bank, *Instructions for reporting the validation results of internal
   models* (IRB), the Jeffreys test of PD back-testing (2019; from memory).

Implements
----------
BacktestOptions          confidence level, traffic-light levels and the test behind the light
clopper_pearson          exact binomial interval
jeffreys_interval        Jeffreys interval
binomial_p_value         P(D >= d | n, p)
jeffreys_p_value         P(theta <= p | d, n) under the Jeffreys posterior
poisson_binomial_p_value P(sum of independent binomials >= d)
traffic_light            p-value -> green / yellow / red
calibration_table        the per-grade table with intervals, p-values and lights
segment_verdicts         the per-segment test and light
"""

from __future__ import annotations

from typing import Literal

import numpy as np
import pandas as pd
from pydantic import BaseModel, ConfigDict, Field, model_validator

from allowance.exceptions import InvalidInputError

Light = Literal["green", "yellow", "red"]
LIGHTS: tuple[Light, ...] = ("green", "yellow", "red")


class BacktestOptions(BaseModel):
    """The statistical choices of a back-test, stated in every output that uses them.

    Attributes
    ----------
    confidence : float
        Two-sided confidence level of the intervals (0.95).
    yellow_p, red_p : float
        Traffic light: yellow when the test's p-value is below ``yellow_p`` (0.05), red below
        ``red_p`` (0.001); the levels follow Tasche (2003), from memory.
    test : {"binomial", "jeffreys"}
        Which one-sided test sets a grade's light (the exact binomial test, or the Jeffreys
        test of the ECB's IRB validation instructions).
    loss_yellow, loss_red : float
        Loss-rate segments (no PD to test): yellow when realised net credit loss exceeds the
        expected 12-month loss by this factor (1.25), red by ``loss_red`` (1.5). A stated
        policy choice, no source.
    """

    model_config = ConfigDict(extra="forbid", frozen=True)

    confidence: float = Field(default=0.95, gt=0.0, lt=1.0)
    yellow_p: float = Field(default=0.05, gt=0.0, lt=1.0)
    red_p: float = Field(default=0.001, gt=0.0, lt=1.0)
    test: Literal["binomial", "jeffreys"] = "binomial"
    loss_yellow: float = Field(default=1.25, gt=0.0)
    loss_red: float = Field(default=1.5, gt=0.0)

    @model_validator(mode="after")
    def _ordered(self) -> "BacktestOptions":
        if self.red_p >= self.yellow_p:
            raise InvalidInputError("red_p must be below yellow_p (red is the stronger evidence)")
        if self.loss_red < self.loss_yellow:
            raise InvalidInputError("loss_red must be at least loss_yellow")
        return self


def _counts(defaults, n) -> tuple[np.ndarray, np.ndarray]:
    d = np.asarray(defaults, dtype=float)
    total = np.asarray(n, dtype=float)
    if np.any(total < 0) or np.any(d < 0) or np.any(d > total) or np.any(d != np.round(d)):
        raise InvalidInputError("defaults must be whole numbers between 0 and the number of loans")
    return np.broadcast_arrays(d, total)


def clopper_pearson(defaults, n, confidence: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
    r"""Exact (Clopper–Pearson) two-sided interval for a default rate.

    Notes
    -----
    .. math::

        \underline{p} = B^{-1}\!\left(\tfrac{\alpha}{2};\ d,\ n - d + 1\right), \qquad
        \overline{p} = B^{-1}\!\left(1 - \tfrac{\alpha}{2};\ d + 1,\ n - d\right)

    with :math:`B^{-1}` the beta quantile, :math:`\underline{p} = 0` at d = 0 and
    :math:`\overline{p} = 1` at d = n. With no defaults the upper end is
    :math:`1 - (\alpha/2)^{1/n}` (Clopper and Pearson 1934). n = 0 gives [0, 1].

    Examples
    --------
    >>> lo, hi = clopper_pearson(0, 100)
    >>> float(lo), round(float(hi), 6), round(1 - 0.025 ** (1 / 100), 6)
    (0.0, 0.036217, 0.036217)
    """
    from scipy.stats import beta

    d, n = _counts(defaults, n)
    alpha = 1.0 - confidence
    with np.errstate(invalid="ignore"):
        lower = np.where(d > 0, beta.ppf(alpha / 2, np.maximum(d, 1), n - d + 1), 0.0)
        upper = np.where(d < n, beta.ppf(1 - alpha / 2, d + 1, np.maximum(n - d, 1)), 1.0)
    return lower[()], upper[()]


def jeffreys_interval(defaults, n, confidence: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
    r"""Jeffreys two-sided interval: the equal-tailed Beta(d + ½, n − d + ½) interval.

    Notes
    -----
    .. math::

        \left[B^{-1}\!\left(\tfrac{\alpha}{2};\ d + \tfrac12,\ n - d + \tfrac12\right),\
              B^{-1}\!\left(1 - \tfrac{\alpha}{2};\ d + \tfrac12,\ n - d + \tfrac12\right)\right]

    with the lower end set to 0 when d = 0 and the upper end to 1 when d = n (Brown, Cai and
    DasGupta 2001, section 4.1.2). n = 0 gives [0, 1].

    Examples
    --------
    >>> lo, hi = jeffreys_interval(0, 100)
    >>> float(lo), round(float(hi), 6)
    (0.0, 0.024745)
    """
    from scipy.stats import beta

    d, n = _counts(defaults, n)
    alpha = 1.0 - confidence
    a, b = d + 0.5, n - d + 0.5
    lower = np.where(d > 0, beta.ppf(alpha / 2, a, b), 0.0)
    upper = np.where(d < n, beta.ppf(1 - alpha / 2, a, b), 1.0)
    return lower[()], upper[()]


def binomial_p_value(defaults, n, pd) -> np.ndarray:
    r"""One-sided exact binomial test that the PD is not too low: :math:`P(D \ge d \mid n, p)`.

    Examples
    --------
    >>> round(float(binomial_p_value(5, 100, 0.02)), 5)  # 1 - P(D <= 4), D ~ Bin(100, 0.02)
    0.05083
    """
    from scipy.stats import binom

    d, n = _counts(defaults, n)
    return np.where(d > 0, binom.sf(d - 1, n, np.asarray(pd, dtype=float)), 1.0)[()]


def jeffreys_p_value(defaults, n, pd) -> np.ndarray:
    r"""One-sided Jeffreys test p-value: :math:`P(\theta \le p)` with θ ~ Beta(d + ½, n − d + ½).

    Small when the realised default rate is well above the PD used (the PD is too low).

    Examples
    --------
    >>> round(float(jeffreys_p_value(5, 100, 0.02)), 4)
    0.0286
    """
    from scipy.stats import beta

    d, n = _counts(defaults, n)
    return beta.cdf(np.asarray(pd, dtype=float), d + 0.5, n - d + 0.5)[()]


def _binomial_window(n: int, p: float, tail: float = 1e-16) -> tuple[int, np.ndarray]:
    """The pmf of Bin(n, p) over the counts holding all but ``tail`` of its mass."""
    from scipy.stats import binom

    if n == 0 or p <= 0.0:
        return 0, np.ones(1)
    if p >= 1.0:
        return n, np.ones(1)
    lo = int(max(binom.ppf(tail, n, p) - 1, 0))
    hi = int(min(binom.isf(tail, n, p) + 1, n))
    return lo, binom.pmf(np.arange(lo, hi + 1), n, p)


def poisson_binomial_p_value(defaults: int, counts, pds) -> float:
    r"""P(total defaults >= ``defaults``) for independent grades, grade g ~ Bin(n_g, p_g).

    Notes
    -----
    The distribution of the total is the convolution of the grades' binomial distributions,
    each truncated to all but 1e-16 of its mass (so the tail is exact to about 1e-15).

    Examples
    --------
    With one grade it is the binomial test:

    >>> round(poisson_binomial_p_value(5, [100], [0.02]), 5)
    0.05083
    >>> round(poisson_binomial_p_value(0, [10, 20], [0.1, 0.3]), 6)
    1.0
    """
    start, pmf = 0, np.ones(1)
    for n, p in zip(np.asarray(counts, dtype=np.int64), np.asarray(pds, dtype=float)):
        lo, window = _binomial_window(int(n), float(p))
        start, pmf = start + lo, np.convolve(pmf, window)
    k = int(defaults) - start
    if k <= 0:
        return 1.0
    return float(min(1.0, max(0.0, pmf[k:].sum())))


def traffic_light(p_value, options: BacktestOptions | None = None) -> np.ndarray:
    """Green at or above ``yellow_p``, yellow below it, red below ``red_p``.

    Examples
    --------
    >>> traffic_light([0.5, 0.05, 0.01, 0.0005]).tolist()
    ['green', 'green', 'yellow', 'red']
    """
    o = options or BacktestOptions()
    p = np.asarray(p_value, dtype=float)
    return np.where(p < o.red_p, "red", np.where(p < o.yellow_p, "yellow", "green")).astype(object)


def calibration_table(counts: pd.DataFrame, options: BacktestOptions | None = None) -> pd.DataFrame:
    """Per grade: realised default rate, intervals, p-values, whether the PD lies inside, light.

    Parameters
    ----------
    counts : DataFrame
        One row per segment and grade: ``segment, grade, loans`` (performing at the start),
        ``defaults`` (within 12 months) and ``pd`` (the mean 12-month PD the run used).
    options : BacktestOptions

    Returns
    -------
    DataFrame
        The input columns and ``expected_defaults`` (loans × pd), ``default_rate``,
        ``binomial_lower, binomial_upper, jeffreys_lower, jeffreys_upper``,
        ``pd_position`` (``inside``, ``below`` — the PD is below the binomial interval, realised
        defaults ran higher — or ``above``), ``binomial_p``, ``jeffreys_p`` and ``light``.

    Examples
    --------
    >>> c = pd.DataFrame({"segment": ["auto"] * 2, "grade": ["A", "B"], "loans": [1000, 1000],
    ...                   "defaults": [5, 45], "pd": [0.004, 0.02]})
    >>> calibration_table(c)[["grade", "default_rate", "pd_position", "light"]]
      grade  default_rate pd_position  light
    0     A         0.005      inside  green
    1     B         0.045       below    red
    """
    o = options or BacktestOptions()
    out = counts.copy()
    n = out["loans"].to_numpy(dtype=float)
    d = out["defaults"].to_numpy(dtype=float)
    p = out["pd"].to_numpy(dtype=float)
    out["expected_defaults"] = n * p
    out["default_rate"] = np.divide(d, n, out=np.full(len(out), np.nan), where=n > 0)
    out["binomial_lower"], out["binomial_upper"] = (np.atleast_1d(x) for x in clopper_pearson(d, n, o.confidence))
    out["jeffreys_lower"], out["jeffreys_upper"] = (np.atleast_1d(x) for x in jeffreys_interval(d, n, o.confidence))
    low, high = out["binomial_lower"].to_numpy(), out["binomial_upper"].to_numpy()
    out["pd_position"] = np.where(p < low, "below", np.where(p > high, "above", "inside")).astype(object)
    out["binomial_p"] = np.atleast_1d(binomial_p_value(d, n, p))
    out["jeffreys_p"] = np.atleast_1d(jeffreys_p_value(d, n, p))
    out["light"] = traffic_light(out[f"{o.test}_p"], o)
    return out


def segment_verdicts(table: pd.DataFrame, options: BacktestOptions | None = None) -> pd.DataFrame:
    """Per segment: total defaults against the sum of its grades' binomials, and the light.

    Parameters
    ----------
    table : DataFrame
        :func:`calibration_table` output.

    Returns
    -------
    DataFrame
        ``segment, loans, defaults, expected_defaults, default_rate, pd`` (loan-weighted),
        ``p_value`` (Poisson-binomial, :func:`poisson_binomial_p_value`), ``light`` (from it),
        ``grades_red, grades_yellow`` and ``worst_grade_light``.

    Examples
    --------
    >>> c = pd.DataFrame({"segment": ["auto"] * 2, "grade": ["A", "B"], "loans": [1000, 1000],
    ...                   "defaults": [5, 45], "pd": [0.004, 0.02]})
    >>> segment_verdicts(calibration_table(c))[["segment", "defaults", "expected_defaults", "light"]]
      segment  defaults  expected_defaults light
    0    auto        50               24.0   red
    """
    o = options or BacktestOptions()
    rows = []
    for segment, group in table.groupby("segment", sort=False):
        loans = int(group["loans"].sum())
        defaults = int(group["defaults"].sum())
        expected = float(group["expected_defaults"].sum())
        p_value = poisson_binomial_p_value(defaults, group["loans"], group["pd"])
        lights = group["light"].tolist()
        worst = max(lights, key=LIGHTS.index) if lights else "green"
        rows.append({
            "segment": segment, "loans": loans, "defaults": defaults, "expected_defaults": expected,
            "default_rate": defaults / loans if loans else np.nan,
            "pd": expected / loans if loans else np.nan, "p_value": p_value,
            "light": str(traffic_light(p_value, o)), "grades_red": lights.count("red"),
            "grades_yellow": lights.count("yellow"), "worst_grade_light": worst,
        })
    return pd.DataFrame(rows)
