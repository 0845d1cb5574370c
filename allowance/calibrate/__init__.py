"""Calibration: from the lender's monthly performance history to a reviewed assumptions file.

The history is read by :func:`allowance.intake.read_history` into a loan-month panel
(streamed, partitioned by loan, spilled to disk when large). Each estimator passes over the
partitions once, collecting additive statistics, and turns their sum into estimates; the
estimates and the policy file make the assumptions draft. The writers are in
:mod:`allowance.report.calibration`.

Implements
----------
settings       CalibrationSettings (every choice, with its stated default), Choice
states         the delinquency state of every loan-month; the month a loan leaves
frame          the calibration frame (as-of month, window, per-segment policy) and MonthView
roll_rates     monthly roll-rate matrices by count and by balance (Markov chain MLE)
loss_rates     gross and net credit-loss rates by segment and month
loss_methods   the loss-rate methods' inputs: closed-pool lifetime rate, vintage loss curves
cohorts        cohort 12-month default rates by starting bucket and by grade
hazards        default hazards by grade and by loan age; PD by grade, PD curve by age
vintages       cumulative default curves by vintage and age (life table)
lgd            workout LGD and the recovery timing curve
ccf            credit conversion factor of revolving lines
payment_rates  monthly payment rates
prepayment     CPR by age, pooled CPR, expected life of revolving lines
assumptions    the assumptions draft, every figure with how it was made
pipeline       estimate (history -> estimates), calibrate (-> assumptions too), the ESTIMATORS registry

To add an estimate, see :mod:`allowance.calibrate.pipeline`.
"""

from allowance.calibrate.pipeline import ESTIMATORS, Calibration, Estimates, Estimator, calibrate, estimate
from allowance.calibrate.settings import CalibrationSettings, Choice

__all__ = ["ESTIMATORS", "Calibration", "CalibrationSettings", "Choice", "Estimates", "Estimator", "calibrate",
           "estimate"]
