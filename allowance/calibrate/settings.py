"""The choices a calibration makes, stated: each has a default that is written down, never silent.

Every estimate depends on choices a validator will ask about: which months are averaged, how
observations are weighted, what counts as default, when a loan is charged off, how recoveries
are discounted. They are the fields of :class:`CalibrationSettings` (the ``[calibration]``
table of a policy file, or the command line's options). The calibration lists every choice
it made, with the value used and why, in :class:`Choice` rows that the evidence workbook and
the comments of the written assumptions file repeat.

Implements
----------
CalibrationSettings  the options, validated
Choice               one choice made: what, the value used, and where it came from
PdSourceChoice       the PD sources a calibration can write
LossRateChoice       the loss-rate methods a calibration can write instead of a PD source
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field

PdSourceChoice = Literal["transition_matrix", "pd_12m_by_grade", "pd_curve_by_age", "pd_12m"]
LossRateChoice = Literal["annual_loss_rate", "lifetime_loss_rate", "vintage_loss_curve"]
Weighting = Literal["count", "balance"]
ZeroDefaultRule = Literal["jeffreys_mean", "zero"]
RecoveryDiscount = Literal["contract_rate", "none"]
SatelliteErrors = Literal["binomial", "overdispersed", "hac"]


class CalibrationSettings(BaseModel):
    """How a performance history is turned into assumptions.

    Every field has a stated default; the calibration records each one it used (with
    ``"default"`` or ``"given"`` as its source) in the evidence workbook.
    """

    model_config = ConfigDict(extra="forbid", frozen=True)

    as_of: date | None = Field(
        default=None, description="Calibration date: rows after its month are not used. Default: the history's last month."
    )
    window_months: Annotated[int, Field(ge=1, le=600)] = Field(
        default=24,
        description="Months up to the as-of month over which roll rates, default hazards by grade, "
                    "payment rates and the average loss rates are pooled.",
    )
    weighting: Weighting = Field(
        default="count",
        description="Roll-rate matrix written for the run: 'count' (the maximum-likelihood "
                    "estimate, Anderson and Goodman 1957) or 'balance' (weighted by the balance "
                    "at the start of the month). The other is written beside it.",
    )
    charge_off_dpd: dict[str, Literal[120, 180]] = Field(
        default_factory=dict,
        description="Charge-off point by segment (days past due). Default: 180 for revolving "
                    "segments (rows with a credit_limit), 120 otherwise.",
    )
    pd_source: dict[str, PdSourceChoice] = Field(
        default_factory=dict,
        description="PD source written for each segment. Default: transition_matrix for "
                    "revolving segments, pd_12m_by_grade where the history has grades, "
                    "pd_curve_by_age where it has origination dates, pd_12m otherwise.",
    )
    loss_rate_method: dict[str, LossRateChoice] = Field(
        default_factory=dict,
        description="Segments written with a loss-rate method instead of a PD source: "
                    "'annual_loss_rate' (remaining-life / WARM: the window's annualised net credit-loss "
                    "rate), 'lifetime_loss_rate' (pool: the closed pool's net loss over its starting "
                    "balance) or 'vintage_loss_curve' (cumulative net loss / original balance by year of "
                    "age). Default: none (every segment takes its PD source). The evidence shows all three.",
    )
    min_vintage_loans: Annotated[int, Field(ge=1)] = Field(
        default=100,
        description="Loans seen from origination that must have reached the end of a year of age for "
                    "that year to enter a vintage loss curve; the curve is flat after its last year.",
    )
    zero_default_rule: ZeroDefaultRule = Field(
        default="jeffreys_mean",
        description="A grade or year of age with no defaults: 'jeffreys_mean' uses the "
                    "posterior mean under the Jeffreys prior, (0 + 1/2) / (n + 1); 'zero' keeps 0.",
    )
    min_exposure_months: Annotated[int, Field(ge=1)] = Field(
        default=600,
        description="Loan-months at risk a year of loan age needs to enter a curve by age "
                    "(PD and CPR); the curve's last year then carries on.",
    )
    lgd_workout_months: Annotated[int, Field(ge=1, le=240)] = Field(
        default=24,
        description="Months of recoveries counted after a charge-off; only charge-offs at least "
                    "this long before the as-of month enter the workout LGD.",
    )
    recovery_discount: RecoveryDiscount = Field(
        default="contract_rate",
        description="Recoveries discounted to the charge-off month at the loan's contract rate "
                    "(the EIR proxy, IFRS 9 B5.5.44) or not discounted.",
    )
    ccf_horizon_months: Annotated[int, Field(ge=1, le=60)] = Field(
        default=12,
        description="Revolving lines: the CCF compares the exposure at charge-off with the "
                    "drawn balance and limit this many months before (fixed-horizon approach).",
    )
    satellite_standard_errors: SatelliteErrors = Field(
        default="overdispersed",
        description="Standard errors of the satellite coefficients fitted with a macro history: "
                    "'overdispersed' (quasi-binomial, scaled by the Pearson dispersion: a book's default "
                    "rates move together beyond binomial noise), 'binomial' or 'hac' (Newey-West).",
    )
    macro_interpolation: Literal["step", "linear"] = Field(
        default="step",
        description="A quarterly macro history becomes monthly by this rule (the policy's "
                    "[macro] interpolation, when it has one, is used instead).",
    )
    columns: dict[str, str] = Field(
        default_factory=dict, description="Our history column -> the file's header, where they differ."
    )
    date_format: Literal["iso", "day_first", "month_first"] | None = Field(
        default=None, description="Only needed when the history's dates are ambiguous."
    )


@dataclass(frozen=True)
class Choice:
    """One choice made in a calibration: what it is, the value used, its source and the reason."""

    topic: str
    value: str
    source: Literal["given", "default", "derived", "policy"]
    why: str


def settings_choices(settings: CalibrationSettings, given: set[str]) -> list[Choice]:
    """The settings as choices: the value used and whether it was given or the default."""
    out = []
    for name, info in CalibrationSettings.model_fields.items():
        if name in ("columns", "date_format", "as_of", "charge_off_dpd", "pd_source", "loss_rate_method"):
            continue
        value = getattr(settings, name)
        out.append(Choice(name, str(value), "given" if name in given else "default", info.description or ""))
    return out
