"""Back-testing: a past run's forecast against what happened.

Implements
----------
statistics  PD calibration tests: Clopper-Pearson and Jeffreys intervals, the binomial and
            Jeffreys tests, the Poisson-binomial segment test, traffic lights
realised    what happened to each loan in the window after the as-of date (default, losses)
compare     the run's PDs and expected 12-month losses against what happened, with verdicts
"""

from allowance.backtest.compare import BacktestResult, backtest, event_dpd
from allowance.backtest.realised import realised_outcomes, window_months

from allowance.backtest.statistics import (
    BacktestOptions,
    binomial_p_value,
    calibration_table,
    clopper_pearson,
    jeffreys_interval,
    jeffreys_p_value,
    poisson_binomial_p_value,
    segment_verdicts,
    traffic_light,
)

__all__ = [
    "BacktestOptions",
    "BacktestResult",
    "backtest",
    "event_dpd",
    "realised_outcomes",
    "window_months",
    "binomial_p_value",
    "calibration_table",
    "clopper_pearson",
    "jeffreys_interval",
    "jeffreys_p_value",
    "poisson_binomial_p_value",
    "segment_verdicts",
    "traffic_light",
]
