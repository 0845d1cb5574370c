"""Back-testing: a past run's forecast against what happened.

Implements
----------
statistics  PD calibration tests: Clopper-Pearson and Jeffreys intervals, the binomial and
            Jeffreys tests, the Poisson-binomial segment test, traffic lights
"""

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
    "binomial_p_value",
    "calibration_table",
    "clopper_pearson",
    "jeffreys_interval",
    "jeffreys_p_value",
    "poisson_binomial_p_value",
    "segment_verdicts",
    "traffic_light",
]
