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
                loss_given_default_array, undrawn_exposure, revolving_ead
ead             accrued_exposure, ccf_buckets, ccf_by_days_past_due (the CCF by delinquency bucket)
"""

from importlib import import_module

#: Each name's submodule: a submodule is loaded when one of its names is first asked for (PEP 562),
#: so ``allowance.curves.lgd``, which the compiled loop needs, loads without pandas or the schemas.
_WHERE = {
    "CHARGE_OFF": "roll_rates",
    "DELINQUENCY_BUCKETS": "roll_rates",
    "PAID_OFF": "roll_rates",
    "PD_SOURCES": "pd_sources",
    "PdSource": "pd_sources",
    "PdTermStructure": "term_structure",
    "RollForecast": "roll_forecast",
    "bucket_balances": "roll_forecast",
    "bucket_index": "roll_rates",
    "ccf_buckets": "ead",
    "ccf_by_days_past_due": "ead",
    "check_one_prepayment_source": "pd_sources",
    "collateral_lgd": "lgd",
    "cumulative_pd": "term_structure",
    "delinquency_buckets": "roll_rates",
    "effective_lgd": "lgd",
    "expected_states": "roll_rates",
    "hazard_from_pd_12m": "pd_sources",
    "loan_pd_scale": "term_structure",
    "loss_given_default": "lgd",
    "loss_given_default_array": "lgd",
    "marginal_by_age": "pd_sources",
    "marginal_from_curve": "pd_sources",
    "matrix_term_structure": "roll_rates",
    "pd_over": "term_structure",
    "pd_term_structure": "pd_sources",
    "recovery_discount_factor": "lgd",
    "revolving_ead": "lgd",
    "roll_forecast": "roll_forecast",
    "roll_forecast_check": "roll_forecast",
    "roll_rate_summary": "roll_rates",
    "segment_roll_forecasts": "roll_forecast",
    "survival": "term_structure",
    "unconditional_marginal": "term_structure",
    "undrawn_exposure": "lgd",
    "validate_matrix": "roll_rates",
}


def __getattr__(name: str):
    if name not in _WHERE:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    module = import_module(f"allowance.curves.{_WHERE[name]}")
    # every name of the submodule at once: importing it bound its own name here to the module,
    # and ``roll_forecast`` names both the submodule and its function (the function keeps the name)
    globals().update({n: getattr(module, n) for n, sub in _WHERE.items() if sub == _WHERE[name]})
    return globals()[name]


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_WHERE))


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
    "loss_given_default_array",
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
