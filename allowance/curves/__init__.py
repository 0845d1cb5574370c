"""PD and LGD term structures: from 12-month PDs, cumulative curves and roll-rate matrices.

Every PD source produces one primitive, the monthly marginal PD conditional on survival
(:class:`PdTermStructure`); survival, unconditional marginal PD, cumulative PD and the PD
over a horizon are derived from it in :mod:`allowance.curves.term_structure` only.

Implements
----------
term_structure  PdTermStructure, survival, unconditional_marginal, cumulative_pd, pd_over,
                loan_pd_scale
pd_sources      pd_term_structure and the PD_SOURCES registry (12-month PD, cumulative curve,
                by grade, transition matrix); hazard_from_pd_12m, marginal_from_curve, marginal_by_age
roll_rates      delinquency buckets, bucket_index, validate_matrix, matrix_term_structure,
                roll_rate_summary (Kemeny & Snell absorbing-chain analytics)
roll_forecast   bucket_balances, roll_forecast, roll_forecast_check, segment_roll_forecasts
                (the balance roll-rate forecast)
lgd             collateral_lgd, recovery_discount_factor, effective_lgd, loss_given_default,
                undrawn_exposure, revolving_ead
ead             accrued_exposure, ccf_buckets, ccf_by_days_past_due (the CCF by delinquency bucket)
"""

from allowance.curves.ead import ccf_buckets, ccf_by_days_past_due
from allowance.curves.lgd import (
    collateral_lgd,
    effective_lgd,
    loss_given_default,
    recovery_discount_factor,
    revolving_ead,
    undrawn_exposure,
)
from allowance.curves.pd_sources import (
    PD_SOURCES,
    check_one_prepayment_source,
    PdSource,
    hazard_from_pd_12m,
    marginal_by_age,
    marginal_from_curve,
    pd_term_structure,
)
from allowance.curves.roll_forecast import (
    RollForecast,
    bucket_balances,
    roll_forecast,
    roll_forecast_check,
    segment_roll_forecasts,
)
from allowance.curves.roll_rates import (
    CHARGE_OFF,
    DELINQUENCY_BUCKETS,
    PAID_OFF,
    bucket_index,
    delinquency_buckets,
    expected_states,
    matrix_term_structure,
    roll_rate_summary,
    validate_matrix,
)
from allowance.curves.term_structure import (
    PdTermStructure,
    cumulative_pd,
    loan_pd_scale,
    pd_over,
    survival,
    unconditional_marginal,
)

__all__ = [
    "CHARGE_OFF",
    "DELINQUENCY_BUCKETS",
    "PAID_OFF",
    "PD_SOURCES",
    "PdSource",
    "PdTermStructure",
    "RollForecast",
    "bucket_balances",
    "bucket_index",
    "ccf_buckets",
    "ccf_by_days_past_due",
    "check_one_prepayment_source",
    "collateral_lgd",
    "cumulative_pd",
    "loan_pd_scale",
    "delinquency_buckets",
    "effective_lgd",
    "expected_states",
    "hazard_from_pd_12m",
    "loss_given_default",
    "marginal_by_age",
    "marginal_from_curve",
    "matrix_term_structure",
    "pd_over",
    "pd_term_structure",
    "recovery_discount_factor",
    "revolving_ead",
    "roll_forecast",
    "roll_forecast_check",
    "roll_rate_summary",
    "segment_roll_forecasts",
    "survival",
    "unconditional_marginal",
    "undrawn_exposure",
    "validate_matrix",
]
