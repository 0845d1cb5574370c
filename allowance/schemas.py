"""Pydantic models: the loan record, the assumptions file and the run configuration.

These models are the contract between the user's files and the engine. ``intake`` reads
files into them; every other module trusts them (validate at the edge, trust inside).

Implements
----------
LoanRecord          one tape row, its columns, types, bounds and meaning
Assumptions         the TOML assumptions file: run, tape, segments, ifrs9, cecl, scenarios, overlays
SegmentAssumptions  per-segment PD source, LGD, EAD/CCF, prepayment, revolving behaviour
Scenario            a weighted economic scenario (PD / LGD multipliers, collateral path, z path
                    or macroeconomic variable paths)
MacroSection        ``[macro]``: the baseline macro paths, their first quarter, quarter -> month
SatelliteModel      per segment: the link from macro variables to the monthly PD (and collateral)
Overlay             a documented post-model adjustment
GlAccounts          ledger account codes the journal books the provision to
RunConfig           a validated Assumptions plus the input files that made it (paths, SHA-256)
TransitionMatrix    a monthly roll-rate matrix over delinquency buckets, loaded from CSV
RunRecord           the run record written to run.json (and read back from a prior run)

Conventions
-----------
Rates are decimals (0.065, not 6.5). Months are the time step. Years in multiplier lists are
counted from the as-of date: element 0 applies to months 1-12, element 1 to months 13-24, and
1.0 applies after the list ends.
"""

from __future__ import annotations

import math
import re
from datetime import date
from pathlib import Path
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, StringConstraints, field_validator, model_validator

Framework = Literal["ifrs9", "cecl"]
#: Which loans carry their accrued interest (arrears included) in the EAD (``curves.ead``).
AccruedInterest = Literal["exclude", "delinquent", "all"]
Repayment = Literal["level", "interest_only", "balloon", "revolving", "heloc"]
#: What a tape row is: ``funded`` (a loan, or a line with its drawn balance; blank means this),
#: ``commitment`` (a standalone loan commitment, nothing drawn) or ``guarantee`` (a financial
#: guarantee or a letter of credit). The last two are off-balance-sheet: exposure = CCF x amount.
FacilityType = Literal["funded", "commitment", "guarantee"]
#: Facility types with no drawn balance: the whole exposure is CCF x the committed amount.
OFF_BALANCE_FACILITIES: tuple[str, ...] = ("commitment", "guarantee")
OverlayKind = Literal["percent", "amount"]
Reversion = Literal["straight_line", "immediate"]
#: CECL: which share of a revolving line's future payments retires the balance measured today
#: (the rest pays for draws after the reporting date, which are not measured).
PaymentAllocation = Literal["measured_balance_first", "pro_rata"]
RetailClass = Literal["residential_mortgage", "qualifying_revolving", "other_retail"]
Link = Literal["probit", "logit"]
Interpolation = Literal["step", "linear"]
CollateralForm = Literal["level", "annual_growth", "annual_growth_percent"]
CollateralReference = Literal["baseline", "as_of"]

FRAMEWORKS: tuple[Framework, ...] = ("ifrs9", "cecl")
REPAYMENTS: tuple[Repayment, ...] = ("level", "interest_only", "balloon", "revolving", "heloc")

#: The largest amount a tape row or an overlay may state, in currency units (ten trillion).
#: Amounts are summed in whole cents; at this ceiling a cent is still exact in float64
#: (1e15 cents < 2**53) and a million such loans still sum exactly in Python integers.
MAX_AMOUNT = 1e13
#: The largest days past due a row may state: 100 years (beyond it a value is a data error,
#: and 2**63 would overflow the whole-number column).
MAX_DAYS_PAST_DUE = 36_525
#: The longest horizon, term or period in months (100 years): remaining terms, behavioural
#: lives, amortization and interest-only terms, probation, reasonable and supportable periods.
MAX_MONTHS = 1_200

#: The largest percent overlay: ten times the modelled ECL added (a share of 10).
MAX_OVERLAY_SHARE = 10.0

Probability = Annotated[float, Field(ge=0.0, le=1.0)]
NonNegative = Annotated[float, Field(ge=0.0)]
Amount = Annotated[float, Field(ge=0.0, le=MAX_AMOUNT)]
Months = Annotated[int, Field(ge=0, le=MAX_MONTHS)]
PositiveMonths = Annotated[int, Field(ge=1, le=MAX_MONTHS)]
DaysPastDue = Annotated[int, Field(ge=0, le=MAX_DAYS_PAST_DUE)]
#: Text that must say something: surrounding spaces are dropped, and nothing left is an error.
NonBlank = Annotated[str, StringConstraints(strip_whitespace=True, min_length=1)]


class _Strict(BaseModel):
    """Base for the assumption models: unknown keys are an error (a typo must not pass)."""

    # inf and nan are TOML numbers; in an assumption they are always a mistake
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)


# --------------------------------------------------------------------------------------
# The tape
# --------------------------------------------------------------------------------------


class LoanRecord(BaseModel):
    """One row of the loan tape as the engine sees it after intake.

    The field descriptions are the data dictionary (templates and README read them);
    the bounds are the row rules that intake applies column-wise.
    """

    model_config = ConfigDict(extra="allow", frozen=True)

    loan_id: str = Field(min_length=1, description="Unique loan or account identifier.")
    segment: str = Field(min_length=1, description="Portfolio segment; must have a [segments.<name>] table.")
    repayment: Repayment = Field(
        description="level, interest_only, balloon, revolving or heloc (a home-equity line: a draw period, "
        "interest only, then level amortisation to maturity)."
    )
    origination_date: date = Field(description="Date the loan was originated or purchased.")
    maturity_date: date | None = Field(
        default=None, description="Contractual maturity; blank for revolving lines."
    )
    balance: Amount = Field(description="Outstanding principal (drawn balance) at the as-of date.")
    interest_rate: Probability = Field(description="Nominal annual contract rate, decimal (0.065).")
    days_past_due: DaysPastDue = Field(description="Whole days past due at the as-of date.")
    credit_limit: Amount | None = Field(
        default=None,
        description="Revolving lines and HELOCs: the committed limit (required for them); commitments and "
        "guarantees: the committed or guaranteed amount.",
    )
    payment: Amount | None = Field(
        default=None, description="Scheduled monthly payment; recomputed from balance, rate and term when blank."
    )
    eir: Probability | None = Field(
        default=None, description="Effective interest rate, nominal annual; defaults to interest_rate."
    )
    grade: str | None = Field(default=None, description="Risk grade, for PDs given by grade.")
    pd_12m_at_origination: Probability | None = Field(
        default=None,
        description="12-month PD at initial recognition (the purchase, for POCI loans), on the scale of "
        "pd_12m_current: the IFRS 9 PD-ratio test compares the two.",
    )
    pd_12m_current: Probability | None = Field(
        default=None,
        description="The loan's own 12-month PD at the as-of date (e.g. from a behavioural score), on the "
        "scale of pd_12m_at_origination: stages the loan and sets its PD level in the ECL.",
    )
    collateral_value: Amount | None = Field(
        default=None, description="Current collateral value, for collateral-based LGD."
    )
    watchlist: bool = Field(default=False, description="On the credit watchlist (IFRS 9 stage 2 indicator).")
    forborne: bool = Field(default=False, description="Forbearance granted (IFRS 9 stage 2 indicator).")
    bankrupt: bool = Field(default=False, description="Borrower in bankruptcy (credit-impaired).")
    defaulted: bool = Field(default=False, description="In default under the lender's definition (credit-impaired).")
    credit_impaired_at_purchase: bool = Field(
        default=False, description="Purchased or originated credit-impaired (IFRS 9 5.5.13)."
    )
    prior_stage: Annotated[int, Field(ge=1, le=3)] | None = Field(
        default=None, description="IFRS 9 stage at the previous reporting date, for probation."
    )
    months_performing: Months | None = Field(
        default=None,
        description="Consecutive months performing since the loan entered its prior_stage (the count "
        "restarts when the stage changes), for probation out of stage 3 and stage 2.",
    )
    balloon_amount: Amount | None = Field(
        default=None, description="Balloon loans: the amount due at maturity; computed when blank."
    )
    amortization_months: PositiveMonths | None = Field(
        default=None, description="Balloon loans: amortization term from origination, longer than the maturity."
    )
    interest_only_months: Months | None = Field(
        default=None, description="Interest-only loans: months of interest only from origination, then level pay."
    )
    draw_period_months: PositiveMonths | None = Field(
        default=None,
        description="HELOCs (required for them): months of the draw period from origination (interest only, the "
        "undrawn limit available), shorter than the term; the repayment period runs from its end to maturity.",
    )
    lifetime_ecl_at_purchase: Amount | None = Field(
        default=None,
        description="POCI assets: lifetime ECL at purchase (the allowance is the change since); required "
        "unless purchased in the reporting period, when it is measured at the purchase date.",
    )
    credit_adjusted_eir: Probability | None = Field(
        default=None,
        description="POCI assets: the credit-adjusted effective interest rate, nominal annual, that "
        "discounts their expected credit losses (IFRS 9 B5.5.45); required for POCI loans under IFRS 9.",
    )
    modified: bool = Field(
        default=False,
        description="Contractual cash flows renegotiated or modified in the period without "
        "derecognition (IFRS 9 5.4.3): the loan's remeasurement is shown on its own movement line.",
    )
    original_balance: NonNegative | None = Field(
        default=None, description="Amount lent at origination; needed where the segment uses a vintage loss curve."
    )
    collateral_dependent: bool = Field(
        default=False,
        description="Collateral dependent (ASC 326-20-35-4/35-5): ECL = amortised cost less the collateral_value "
        "less the segment's costs to sell ([segments.<name>.collateral_dependent]).",
    )
    accrued_interest: Amount | None = Field(
        default=None,
        description="Interest accrued and unpaid at the as-of date, arrears included; in the EAD where the "
        "framework's accrued_interest option says so (blank: none).",
    )
    debt_service_coverage: NonNegative | None = Field(
        default=None,
        description="Debt-service coverage ratio (net operating income / debt service), for refinance risk at "
        "maturity by coverage band ([segments.<name>.refinance_risk] dscr_bands).",
    )
    individual_ecl: Amount | None = Field(
        default=None,
        description="ECL from the lender's own individual assessment of this loan; replaces the model in every "
        "framework (loans.csv measurement = individual).",
    )
    facility_type: FacilityType | None = Field(
        default=None,
        description="funded (blank: a loan, or a line with its drawn balance), commitment (a standalone loan "
        "commitment, nothing drawn) or guarantee (a financial guarantee or letter of credit): the last two carry "
        "no balance and an exposure of CCF x credit_limit until commitment_end_date (IFRS 9 5.5.19, B5.5.31; "
        "ASC 326-20-30-11).",
    )
    commitment_end_date: date | None = Field(
        default=None,
        description="Last day the lender is committed to lend or to pay under a guarantee; required for "
        "commitments and guarantees. CECL measures a commitment the lender cannot unconditionally cancel over "
        "this period (ASC 326-20-30-11).",
    )


#: The columns a tape must have (after column mapping). ``maturity_date`` must be present
#: as a column but is blank for revolving lines.
REQUIRED_COLUMNS: tuple[str, ...] = tuple(
    name
    for name, field in LoanRecord.model_fields.items()
    if field.is_required() or name == "maturity_date"
)
#: The columns a tape may have; anything else is carried through untouched.
OPTIONAL_COLUMNS: tuple[str, ...] = tuple(
    name for name in LoanRecord.model_fields if name not in REQUIRED_COLUMNS
)

#: Names of the computed loan results (``loans.csv``) besides the tape's own columns, and the
#: prefixes of the per-framework and per-scenario ones. A tape column named like one of them
#: is carried through as ``tape_<name>``: it must never stand in for the computed figure.
RESULT_COLUMNS: frozenset[str] = frozenset({
    "stage", "stage_reason", "poci", "horizon_months", "remaining_months", "ead", "pd_12m",
    "pd_lifetime", "lgd", "ecl_12m", "ecl_lifetime", "source_row", "measurement",
})
RESULT_PREFIXES: tuple[str, ...] = (
    "ecl_", "ead_", "overlay_", "horizon_", "stage_", "pd_", "lgd_", "gross_loss_", "provision_",
)


#: The loans a row of a book's loan sums stands for (a book computed part by part sends back
#: its loans summed by group: :func:`allowance.partitioned.loan_sums`)
LOAN_COUNT = "loan_count"


def is_result_column(name: str) -> bool:
    """Whether ``name`` (lower case) is, or could be, a computed loan-result column.

    Examples
    --------
    >>> [is_result_column(n) for n in ("stage", "ecl_cecl", "lgd", "branch", "original_amount")]
    [True, True, True, False, False]
    """
    return name in RESULT_COLUMNS or name.startswith(RESULT_PREFIXES)


# --------------------------------------------------------------------------------------
# The performance history (calibration input)
# --------------------------------------------------------------------------------------


class HistoryRecord(BaseModel):
    """One row of the monthly performance history: one loan in one month.

    A loan leaves the history in the month it is written off (``charge_off`` or
    ``bankruptcy_loss``) or paid off (``paid_off``); later rows of a written-off loan carry
    only the ``recoveries`` and ``asset_sales`` of that month. The field descriptions are the
    data dictionary of the history; the bounds are the row rules intake applies.
    """

    model_config = ConfigDict(extra="allow", frozen=True)

    loan_id: str = Field(min_length=1, description="Loan or account identifier, the same in every month.")
    segment: str = Field(min_length=1, description="Portfolio segment of the loan that month.")
    month: date = Field(description="The month: its month-end date (2026-09-30) or YYYY-MM.")
    balance: NonNegative = Field(description="Outstanding balance at the month end (0 once written off or paid off).")
    days_past_due: Annotated[int, Field(ge=0, le=36_525)] = Field(
        description="Whole days past due at the month end (at most 100 years)."
    )
    grade: str | None = Field(default=None, description="Risk grade that month.")
    origination_date: date | None = Field(default=None, description="Date the loan was originated.")
    original_balance: NonNegative | None = Field(default=None, description="Amount lent at origination.")
    credit_limit: NonNegative | None = Field(default=None, description="Revolving lines: the limit that month.")
    interest_rate: Probability | None = Field(
        default=None, description="Nominal annual contract rate that month, decimal (0.065)."
    )
    charge_off: NonNegative | None = Field(
        default=None, description="Amount charged off that month (blank = 0)."
    )
    bankruptcy_loss: NonNegative | None = Field(
        default=None, description="Amount written off on a bankruptcy that month (blank = 0)."
    )
    recoveries: NonNegative | None = Field(
        default=None, description="Cash recovered that month on an amount charged off earlier (blank = 0)."
    )
    asset_sales: NonNegative | None = Field(
        default=None, description="Proceeds that month of charged-off debt sold (blank = 0)."
    )
    paid_off: bool = Field(default=False, description="The loan was repaid in full that month.")
    collateral_value: NonNegative | None = Field(default=None, description="Collateral value that month.")


#: The columns a performance history must have.
HISTORY_REQUIRED_COLUMNS: tuple[str, ...] = tuple(
    name for name, field in HistoryRecord.model_fields.items() if field.is_required()
)
#: The columns a performance history may have; anything else is ignored (and listed).
HISTORY_OPTIONAL_COLUMNS: tuple[str, ...] = tuple(
    name for name in HistoryRecord.model_fields if name not in HISTORY_REQUIRED_COLUMNS
)


# --------------------------------------------------------------------------------------
# The assumptions file
# --------------------------------------------------------------------------------------


class RunSection(_Strict):
    """``[run]``: what the run is for."""

    as_of: date
    frameworks: list[Framework] = Field(min_length=1)
    currency: str = "USD"
    label: str | None = None
    ledger_balance: float | None = Field(default=None, description="Control total from the general ledger.")
    ledger_tolerance: NonNegative = Field(
        default=0.01, description="Largest acceptable |tape - ledger| difference, in currency units."
    )
    max_input_mb: float = Field(default=2048.0, gt=0, description="Largest input file read, in MiB.")
    loan_detail_sheet_limit: int = Field(
        default=200_000, ge=0, description="Above this many loans, loan detail goes to CSV/Parquet only."
    )
    period_months: Annotated[int, Field(ge=1, le=12)] = Field(
        default=3,
        description="Length in months of the reporting period that ends at as_of (3: a quarter). Loans "
        "purchased within it are the period's purchases (POCI / PCD measured at the purchase date).",
    )

    @field_validator("frameworks")
    @classmethod
    def _unique_frameworks(cls, value: list[Framework]) -> list[Framework]:
        if len(set(value)) != len(value):
            raise ValueError("each framework may be listed once")
        return value


class TapeSection(_Strict):
    """``[tape]``: how to read the extract."""

    columns: dict[str, str] = Field(
        default_factory=dict, description="Our column name -> the extract's header."
    )
    date_format: Literal["iso", "day_first", "month_first"] | None = Field(
        default=None, description="Only needed when the file's dates are ambiguous."
    )
    sheet: str | None = Field(default=None, description="XLSX: sheet to read (default the first).")


class TransitionMatrix(_Strict):
    """A monthly roll-rate matrix: ``probabilities[i][j]`` = P(state j next month | state i now).

    ``states`` name the delinquency buckets in order, then the absorbing states
    ``charge_off`` and (optionally) ``paid_off``. Loaded by intake from the CSV named in the
    segment's ``transition_matrix`` key; validated by ``curves``.
    """

    states: list[str] = Field(min_length=2)
    probabilities: list[list[float]]
    source: str | None = Field(default=None, description="The file it was read from.")


class CollateralLgd(_Strict):
    """Collateral-based LGD for secured loans (``curves.lgd.collateral_lgd``).

    Net proceeds NP = collateral × index_t × (1 - haircut) × (1 - recovery_cost); the claim
    accrues interest at the EIR through the ``months_to_recovery`` of the workout and the
    recovery is min(claim at recovery, NP); LGD_t = 1 - PV(recovery) / EAD_t, then cures and
    the scenario's multiplier, then the floor. Where the framework does not discount (CECL
    without the discounted cash-flow method) nothing is discounted and the claim does not accrue.
    """

    haircut: Probability = Field(description="Forced-sale discount on the collateral value.")
    recovery_cost: Probability = Field(default=0.0, description="Costs to recover and sell, share of the sale proceeds.")
    floor: Probability = Field(default=0.0, description="Lowest final LGD (after cures and multipliers).")
    months_to_recovery: Months = 12


class RefinanceRisk(_Strict):
    """``[segments.<name>.refinance_risk]``: failure to repay a balloon or interest-only loan at maturity.

    ``pd`` is the probability that a loan still outstanding at maturity does not repay, by
    loan-to-value at maturity (balance due / collateral_value): one value per band, the bands
    closed above by ``ltv_bands`` and the last open. With ``dscr_bands`` (tape column
    ``debt_service_coverage``), ``pd`` is one such row per coverage band, lowest coverage first.
    A loan without a collateral value is in the highest LTV band, one without a coverage in the
    lowest coverage band (each reported as a warning).
    """

    ltv_bands: list[Annotated[float, Field(gt=0.0)]] = Field(min_length=1, description="Upper LTV edges, increasing.")
    pd: list[Probability] | list[list[Probability]] = Field(
        description="By LTV band (one more value than ltv_bands), or one such row per coverage band."
    )
    dscr_bands: list[NonNegative] | None = Field(
        default=None, description="Upper coverage edges, increasing; a loan at an edge is in the band above it."
    )

    @model_validator(mode="after")
    def _shape(self) -> RefinanceRisk:
        for name, edges in (("ltv_bands", self.ltv_bands), ("dscr_bands", self.dscr_bands or [])):
            if any(b <= a for a, b in zip(edges, edges[1:])):
                raise ValueError(f"{name} must increase")
        width = len(self.ltv_bands) + 1
        nested = bool(self.pd) and isinstance(self.pd[0], list)
        if self.dscr_bands is None:
            if nested or len(self.pd) != width:
                raise ValueError(f"pd needs {width} values, one per LTV band (len(ltv_bands) + 1)")
        else:
            rows = len(self.dscr_bands) + 1
            if not nested or len(self.pd) != rows or any(len(r) != width for r in self.pd):
                raise ValueError(
                    f"with dscr_bands, pd needs {rows} rows (one per coverage band, lowest first) of {width} "
                    "values (one per LTV band)"
                )
        return self


class CollateralDependent(_Strict):
    """``[segments.<name>.collateral_dependent]``: collateral-dependent loans of a segment.

    Such a loan's ECL is max(0, amortised cost - fair value × (1 - costs_to_sell)), fair value =
    collateral_value × (1 - appraisal_discount), the same in every scenario (ASC
    326-20-35-4/35-5; IFRS 9 B5.5.55), in the frameworks listed. A loan is collateral
    dependent when the tape flags it (``collateral_dependent``), or, with ``defaulted_secured``,
    when it is in default (``default_dpd`` days past due, or flagged defaulted or bankrupt) and
    has a collateral value. Which loans are collateral dependent is the lender's judgement: the
    options state it.
    """

    costs_to_sell: Probability = Field(
        description="Costs to sell, share of the collateral's fair value (0 when repayment comes from operating it)."
    )
    appraisal_discount: Probability = Field(
        default=0.0,
        description="Discount from the tape's collateral_value to the collateral's fair value at the reporting "
        "date (an old or as-completed appraisal); 0: the tape's value is the fair value.",
    )
    defaulted_secured: bool = Field(
        default=False,
        description="Treat every loan in default with a collateral value as collateral dependent, not only the "
        "loans flagged collateral_dependent on the tape.",
    )
    default_dpd: DaysPastDue = Field(
        default=90, description="With defaulted_secured: days past due from which a loan is in default."
    )
    frameworks: list[Framework] = Field(
        default_factory=lambda: ["ifrs9", "cecl"], min_length=1,
        description="Frameworks that measure these loans on the collateral (the model measures them in the others).",
    )


_QUARTER = re.compile(r"^(\d{4})\s*-?\s*Q([1-4])$", re.IGNORECASE)


def quarter_number(label: str) -> int:
    """A calendar quarter label (``2026Q4``, ``2026-Q4``) as a running number: 4 × year + q − 1.

    Examples
    --------
    >>> quarter_number("2026Q4") - quarter_number("2025Q4")
    4
    """
    match = _QUARTER.match(str(label).strip())
    if match is None:
        raise ValueError(f"{label!r} is not a calendar quarter such as 2026Q4")
    return 4 * int(match.group(1)) + int(match.group(2)) - 1


class CollateralLink(_Strict):
    """``[segments.<name>.satellite.collateral]``: the collateral value follows a price variable.

    The collateral index (collateral value relative to today's, which scales the tape's
    ``collateral_value`` in the collateral LGD) is computed from the named macro variable
    instead of the scenario's by-year ``collateral_index`` list.
    """

    variable: str = Field(min_length=1, description="The macro variable: a house-price or property-price series.")
    form: CollateralForm = Field(
        description="level: a price index; annual_growth: growth at an annual rate, decimal (0.03); "
        "annual_growth_percent: the same in percent (3.0)."
    )
    relative_to: CollateralReference = Field(
        description="baseline: the scenario's prices relative to the baseline path's (the baseline "
        "leaves collateral at today's value); as_of: the scenario's own price change since the as-of date."
    )


class SatelliteModel(_Strict):
    r"""``[segments.<name>.satellite]``: macro variables -> the segment's monthly PD.

    pd_t = F(F^-1(pd_t^long-run) + sum_j beta_j (x_j(t - L_j) - baseline_j(t - L_j))), F the
    standard normal CDF (probit) or the logistic function (logit); see :mod:`allowance.macro`.
    """

    link: Link
    coefficients: dict[str, float] = Field(
        description="beta per macro variable, on the link scale of the monthly PD, per unit of the variable."
    )
    lag_months: dict[str, Annotated[int, Field(ge=0, le=120)]] = Field(
        default_factory=dict, description="Months by which the PD lags each variable; 0 when not listed."
    )
    collateral: CollateralLink | None = None
    source: str = Field(default="", description="Where the coefficients come from (calibration run, model document).")

    @model_validator(mode="after")
    def _lags_name_coefficients(self) -> SatelliteModel:
        extra = sorted(set(self.lag_months) - set(self.coefficients))
        if extra:
            raise ValueError(f"lag_months names {', '.join(map(repr, extra))}, which has no coefficient")
        bad = [k for k, v in self.coefficients.items() if not math.isfinite(v)]
        if bad:
            raise ValueError(f"coefficient {bad[0]!r} must be a finite number")
        return self

    @property
    def variables(self) -> list[str]:
        """Every macro variable the model reads (coefficients, then the collateral link)."""
        names = list(self.coefficients)
        if self.collateral is not None and self.collateral.variable not in names:
            names.append(self.collateral.variable)
        return names


#: The keys that carry a segment's PD; a segment gives exactly one PD source or one loss rate.
PD_SOURCE_KEYS: tuple[str, ...] = (
    "pd_12m", "pd_12m_by_grade", "pd_curve", "pd_curve_by_grade", "pd_curve_by_age", "transition_matrix",
)
_PD_KEYS = PD_SOURCE_KEYS
_LOSS_RATE_KEYS = ("lifetime_loss_rate", "annual_loss_rate", "vintage_loss_curve")


class SegmentAssumptions(_Strict):
    """``[segments.<name>]``: the risk parameters of one portfolio segment.

    Exactly one method: a PD source (``pd_12m``, ``pd_12m_by_grade``, ``pd_curve``,
    ``pd_curve_by_grade``, ``pd_curve_by_age`` or ``transition_matrix``, with ``lgd``), or a loss rate
    (``lifetime_loss_rate``, ``annual_loss_rate`` or ``vintage_loss_curve``; see
    :mod:`allowance.loss_rates`). At most one prepayment source: ``cpr``, ``psa`` or
    ``cpr_by_age`` (none means no prepayment).
    """

    pd_12m: Probability | None = None
    pd_12m_by_grade: dict[str, Probability] | None = None
    pd_curve: list[Probability] | None = Field(default=None, description="Cumulative PD by year.")
    pd_curve_by_grade: dict[str, list[Probability]] | None = None
    pd_curve_by_age: list[Probability] | None = Field(
        default=None,
        description="Cumulative PD by year of loan age (from origination, not from the as-of date).",
    )
    transition_matrix: str | TransitionMatrix | None = Field(
        default=None, description="CSV path (relative to the assumptions file) of a monthly roll-rate matrix."
    )
    charge_off_dpd: Literal[120, 180] | None = Field(
        default=None, description="Roll-rate segments: 120 closed-end, 180 open-end revolving."
    )
    lifetime_loss_rate: Probability | None = Field(
        default=None, description="Pool method: expected lifetime net loss as a share of amortised cost."
    )
    annual_loss_rate: Probability | None = Field(
        default=None, description="Remaining-life (WARM) method: annual net loss rate on the projected balance."
    )
    vintage_loss_curve: list[Probability] | None = Field(
        default=None, description="Vintage method: cumulative net loss / original balance at ages 1, 2, ... years."
    )
    lgd: Probability | None = Field(
        default=None,
        description="Required with a PD source. With a loss rate: the LGD of loans already in default "
        "(blank: they stay in the pool at the loss rate).",
    )
    collateral_lgd: CollateralLgd | None = None
    collateral_dependent: CollateralDependent | None = None
    refinance_risk: RefinanceRisk | None = None
    cure_rate: Probability = Field(default=0.0, description="Share of defaults that cure with no loss.")
    cpr: Probability | None = None
    psa: NonNegative | None = Field(default=None, description="PSA multiple in percent: 100, 150, ...")
    cpr_by_age: list[Probability] | None = Field(
        default=None, description="Annual CPR by month of loan age (month 1 first); last value after."
    )
    ccf: Probability | None = Field(
        default=None,
        description="Credit conversion factor: share of the undrawn limit (of the committed or guaranteed amount) "
        "drawn by default (IFRS 9 B5.5.31; CECL for commitments the lender cannot unconditionally cancel). "
        "Required, or ccf_by_dpd, for a segment holding undrawn amounts.",
    )
    ccf_by_dpd: dict[str, Probability] | None = Field(
        default=None,
        description="CCF by days-past-due bucket instead of one ccf: keys are each bucket's lowest days past due "
        "(\"0\" required), e.g. {\"0\" = 0.3, \"30\" = 0.5}; a line takes the bucket its days past due fall in.",
    )
    behavioural_life_months: PositiveMonths | None = None
    payment_rate: Probability | None = Field(
        default=None, description="Revolving, CECL: monthly share of the drawn balance repaid."
    )
    unconditionally_cancellable: bool | None = Field(
        default=None,
        description="Whether the lender can cancel the undrawn commitment unconditionally. Required (no default) "
        "for a segment holding undrawn amounts: true, CECL books nothing on them; false, CECL books a liability "
        "for the off-balance-sheet exposure over the commitment period (ASC 326-20-30-11).",
    )
    amortization_months: PositiveMonths | None = Field(
        default=None, description="Balloon loans without the tape column: amortization term from origination."
    )
    low_credit_risk: bool = Field(
        default=False,
        description="Not accepted as true: IFRS 9 5.5.10 is tested loan by loan at the reporting date "
        "(low_credit_risk_pd or low_credit_risk_grades).",
    )
    low_credit_risk_pd: Probability | None = Field(
        default=None,
        description="IFRS 9 5.5.10 / B5.5.22: a loan whose pd_12m_current is at or below this at the "
        "reporting date has low credit risk (the PD-ratio test is not applied to it).",
    )
    low_credit_risk_grades: list[str] = Field(
        default_factory=list,
        description="IFRS 9 5.5.10 / B5.5.23: a loan whose grade at the reporting date is one of these has "
        "low credit risk. With low_credit_risk_pd too, a loan must meet both.",
    )
    retail_class: RetailClass | None = Field(
        default=None, description="Basel II retail class, for the Vasicek asset correlation."
    )
    asset_correlation: Annotated[float, Field(gt=0.0, lt=1.0)] | None = None
    satellite: SatelliteModel | None = Field(
        default=None, description="Link from macro variables to the monthly PD, for scenarios given as macro paths."
    )

    @model_validator(mode="after")
    def _one_source_each(self) -> SegmentAssumptions:
        pd_sources = [k for k in _PD_KEYS if getattr(self, k) is not None]
        loss_rates = [k for k in _LOSS_RATE_KEYS if getattr(self, k) is not None]
        if len(pd_sources) + len(loss_rates) != 1:
            found = ", ".join(pd_sources + loss_rates) or "none"
            raise ValueError(
                "give exactly one PD source (pd_12m, pd_12m_by_grade, pd_curve, pd_curve_by_grade, "
                "pd_curve_by_age or transition_matrix) or one loss rate (lifetime_loss_rate, annual_loss_rate or "
                f"vintage_loss_curve); found {found}"
            )
        if pd_sources and self.lgd is None:
            raise ValueError(f"{pd_sources[0]} needs lgd (the loss given default, a decimal such as 0.45)")
        if loss_rates and self.collateral_lgd is not None:
            raise ValueError(f"{loss_rates[0]} is a loss rate; collateral_lgd applies only with a PD source")
        curve = self.vintage_loss_curve
        if curve is not None:
            if not curve:
                raise ValueError("vintage_loss_curve is empty: give the cumulative loss rate at age 1, 2, ... years")
            falls = next((y for y in range(1, len(curve)) if curve[y] < curve[y - 1]), None)
            if falls is not None:
                raise ValueError(
                    f"vintage_loss_curve falls at year {falls + 1} ({curve[falls]:g} after {curve[falls - 1]:g}); "
                    "give cumulative loss rates, each at least the one before"
                )
        prepay = [k for k in ("cpr", "psa", "cpr_by_age") if getattr(self, k) is not None]
        if len(prepay) > 1:
            raise ValueError(f"give at most one prepayment source; found {', '.join(prepay)}")
        if self.transition_matrix is not None and self.charge_off_dpd is None:
            raise ValueError("a transition_matrix needs charge_off_dpd (120 closed-end, 180 revolving)")
        if self.ccf is not None and self.ccf_by_dpd is not None:
            raise ValueError("give ccf or ccf_by_dpd, not both")
        if self.ccf_by_dpd is not None:
            bad = [k for k in self.ccf_by_dpd if not k.isdigit()]
            if bad or "0" not in {str(int(k)) for k in self.ccf_by_dpd if k.isdigit()}:
                raise ValueError(
                    "ccf_by_dpd keys are the lowest days past due of each bucket, whole numbers starting with "
                    f"\"0\" (e.g. {{\"0\" = 0.3, \"30\" = 0.5}}){'; not a number: ' + ', '.join(bad) if bad else ''}"
                )
        if self.low_credit_risk:
            raise ValueError(
                "low_credit_risk = true would exempt every loan of the segment without testing it; IFRS 9 "
                "5.5.10 is tested per loan at the reporting date: state low_credit_risk_pd (a 12-month PD "
                "threshold for pd_12m_current) or low_credit_risk_grades"
            )
        return self

    @property
    def pd_source(self) -> str | None:
        """The name of the key that carries this segment's PD (None for a loss-rate segment)."""
        return next((key for key in _PD_KEYS if getattr(self, key) is not None), None)

    @property
    def loss_rate_method(self) -> str | None:
        """The loss-rate key of a loss-rate segment (None for a PD segment)."""
        return next((key for key in _LOSS_RATE_KEYS if getattr(self, key) is not None), None)

    @property
    def method(self) -> str:
        """The key that carries this segment's credit-loss estimate: PD source or loss rate."""
        return self.pd_source or self.loss_rate_method  # type: ignore[return-value]


SicrPdMeasure = Literal["12_month", "lifetime"]


class Ifrs9Rules(_Strict):
    """``[ifrs9]``: staging rules. The DPD defaults are the standard's presumptions.

    ``sicr_pd_measure`` is a policy choice the standard leaves to the entity, so it has no
    default: ``lifetime`` compares the risk of default over the remaining life now with the
    same at initial recognition (IFRS 9 5.5.9); ``12_month`` uses the change in 12-month PD
    as its approximation (B5.5.13).
    """

    sicr_backstop_dpd: DaysPastDue = Field(
        default=30, description="Stage 2 when days past due exceed this (IFRS 9 5.5.11)."
    )
    default_dpd: Annotated[int, Field(ge=1, le=MAX_DAYS_PAST_DUE)] = Field(
        default=90, description="Stage 3 at or beyond this (IFRS 9 B5.5.37)."
    )
    sicr_pd_ratio: Annotated[float, Field(gt=1.0)] = Field(
        description="Stage 2 when the loan's PD now / its PD at initial recognition reaches this."
    )
    sicr_pd_measure: SicrPdMeasure = Field(
        description="The PD the ratio compares: 'lifetime' (IFRS 9 5.5.9, over the remaining life, "
        "the same months at both dates) or '12_month' (the B5.5.13 approximation)."
    )
    sicr_min_pd_increase: Probability = Field(
        default=0.0, description="...and PD now - PD at initial recognition is at least this."
    )
    watchlist_is_sicr: bool = True
    forborne_is_sicr: bool = True
    probation_months_stage3: Months = Field(
        default=0, description="Months performing in stage 3 before a loan leaves it (for stage 2: the cure "
        "path is 3 -> 2 -> 1)."
    )
    probation_months_stage2: Months = Field(
        default=0, description="Months performing in stage 2 before a loan leaves it for stage 1."
    )
    accrued_interest: AccruedInterest = Field(
        default="exclude",
        description="Tape accrued_interest in the EAD: exclude, delinquent (loans past due: their arrears) or all "
        "(the gross carrying amount, IFRS 9 Appendix A).",
    )
    measure: Literal["pd_lgd_ead", "cash_shortfall"] = Field(
        default="pd_lgd_ead",
        description="pd_lgd_ead: PD x LGD x EAD discounted at the EIR; cash_shortfall: contractual less expected "
        "cash flows at the EIR (IFRS 9 Appendix A, credit loss), which adds the default month's lost interest.",
    )
    probation_pd_12m: Probability | None = Field(
        default=None,
        description="12-month PD of a loan on probation out of stage 3 (no longer in default): lifetime ECL on this "
        "PD, moved by the scenarios like any PD. Blank: such a loan takes its segment's own PD (its grade, age or "
        "delinquency bucket).",
    )

    @model_validator(mode="after")
    def _ordered(self) -> Ifrs9Rules:
        if self.default_dpd <= self.sicr_backstop_dpd:
            raise ValueError("default_dpd must be greater than sicr_backstop_dpd")
        return self


class CeclRules(_Strict):
    """``[cecl]``: the reasonable and supportable period and reversion (ASC 326-20-30-9)."""

    reasonable_supportable_months: Months
    default_dpd: Annotated[int, Field(ge=1, le=MAX_DAYS_PAST_DUE)] = Field(
        default=90, description="Loans at or beyond this (or flagged defaulted/bankrupt) take PD = 1 now."
    )
    reversion_months: Months = 0
    reversion: Reversion = "straight_line"
    accrued_interest: AccruedInterest = Field(
        default="exclude",
        description="Tape accrued_interest in the EAD: exclude (the ASC 326-20-30-5A election), delinquent (loans "
        "past due) or all.",
    )
    discount: bool = Field(
        default=False,
        description="true: the discounted cash-flow method (ASC 326-20-30-4): amortised cost less the present value "
        "at the EIR of the expected cash flows (the cash shortfall); false: undiscounted PD x LGD x EAD, recoveries "
        "included.",
    )
    payment_allocation: PaymentAllocation | None = Field(
        default=None,
        description="Revolving lines: which share of each expected payment retires the balance measured today "
        "(ASC 326-20-30-6; a stated policy): measured_balance_first (every payment, until it is repaid) or "
        "pro_rata (measured_payment_share of each payment). Required when CECL measures revolving lines.",
    )
    measured_payment_share: Annotated[float, Field(gt=0.0, le=1.0)] | None = Field(
        default=None, description="pro_rata: the share of each payment that retires the measured balance."
    )
    runoff_floor: Annotated[float, Field(ge=0.0, lt=1.0)] | None = Field(
        default=None,
        description="Revolving lines: the run-off stops once the measured balance is below this share of today's "
        "(the rest taken as repaid); blank: it runs to its end (below half a cent).",
    )

    @model_validator(mode="after")
    def _allocation_share(self) -> CeclRules:
        if self.payment_allocation == "pro_rata" and self.measured_payment_share is None:
            raise ValueError("payment_allocation = \"pro_rata\" needs measured_payment_share (0 < share <= 1)")
        if self.payment_allocation != "pro_rata" and self.measured_payment_share is not None:
            raise ValueError("measured_payment_share is read only with payment_allocation = \"pro_rata\"")
        return self


#: The kinds of PD path a scenario may state (at most one of them).
PD_PATH_KEYS: tuple[str, ...] = ("pd_multiplier", "z", "macro")


class Scenario(_Strict):
    """``[scenarios.<name>]``: one weighted economic scenario.

    Give at most one kind of PD path: ``pd_multiplier`` (by year, scaling the monthly
    marginal PD, capped at 1), ``z`` (systematic factor by year, through the Vasicek
    conditional PD) or ``macro`` (macroeconomic variable paths by quarter, through each
    segment's satellite model). None leaves the long-run PDs.
    """

    weight: Probability
    pd_multiplier: list[NonNegative] = Field(default_factory=list)
    z: list[float] = Field(default_factory=list, description="Systematic factor by year; 0 = median economy.")
    lgd_multiplier: list[NonNegative] = Field(default_factory=list)
    collateral_index: list[NonNegative] = Field(
        default_factory=list, description="Collateral value by year relative to today (1.0 = today)."
    )
    macro: dict[str, list[float]] = Field(
        default_factory=dict,
        description="Macro variable paths by quarter from [macro] start, measured against [macro.baseline].",
    )
    description: str = ""

    @model_validator(mode="after")
    def _one_pd_path(self) -> Scenario:
        given = [k for k in PD_PATH_KEYS if getattr(self, k)]
        if len(given) > 1:
            raise ValueError(
                f"give one kind of PD path (pd_multiplier, z or macro), not {' and '.join(given)}: "
                "a scenario is stated either as multipliers, as a z path or as macro paths"
            )
        for name, path in self.macro.items():
            if not path:
                raise ValueError(f"macro.{name} is an empty path")
            if not all(math.isfinite(v) for v in path):
                raise ValueError(f"macro.{name} holds a value that is not a finite number")
        return self

    @property
    def pd_path_kind(self) -> str:
        """``pd_multiplier``, ``z``, ``macro`` or ``none``."""
        return next((k for k in PD_PATH_KEYS if getattr(self, k)), "none")


class MacroSection(_Strict):
    """``[macro]``: the baseline macro paths scenarios are measured against, and their calendar.

    Paths are by calendar quarter from ``start``; quarters up to the as-of date are history
    (they feed the lags). ``interpolation`` states how a quarter's value becomes monthly values.
    """

    start: str = Field(description="Calendar quarter of every path's first value, e.g. 2026Q1.")
    interpolation: Interpolation = Field(
        description="step: each month takes its quarter's value; linear: straight lines between "
        "quarter mid-months, the outer months of the first and last quarters held flat."
    )
    baseline: dict[str, list[float]] = Field(
        min_length=1,
        description="The path of each variable at which every satellite model gives the long-run PD.",
    )
    source: str = Field(default="", description="Where the paths come from (forecast vintage, provider).")

    @field_validator("start")
    @classmethod
    def _quarter(cls, value: str) -> str:
        quarter_number(value)
        return value.strip().upper().replace("-", "").replace(" ", "")

    @field_validator("baseline")
    @classmethod
    def _finite(cls, value: dict[str, list[float]]) -> dict[str, list[float]]:
        for name, path in value.items():
            if not path:
                raise ValueError(f"baseline.{name} is an empty path")
            if not all(math.isfinite(v) for v in path):
                raise ValueError(f"baseline.{name} holds a value that is not a finite number")
        return value


class Overlay(_Strict):
    """``[[overlays]]``: a post-model adjustment, documented."""

    name: NonBlank = Field(description="Unique name; an overlay file's entry replaces the same name.")
    segment: str = Field(default="*", description="Segment it applies to; * for all.")
    stage: Annotated[int, Field(ge=1, le=3)] | None = Field(default=None, description="IFRS 9 stage; blank for all.")
    framework: Framework | None = Field(default=None, description="Blank for both frameworks.")
    kind: OverlayKind
    value: float = Field(description="percent: share of modelled ECL (0.05); amount: currency units.")
    rationale: NonBlank
    owner: NonBlank
    approved: date | None = None
    expires: date | None = None

    @model_validator(mode="after")
    def _value_in_range(self) -> "Overlay":
        if self.kind == "percent" and not -1.0 <= self.value <= MAX_OVERLAY_SHARE:
            raise ValueError(
                f"a percent overlay's value must be from -1 (release all of the modelled ECL) to "
                f"{MAX_OVERLAY_SHARE:g} (add {MAX_OVERLAY_SHARE:.0%}); it is {self.value!r}"
            )
        if self.kind == "amount" and abs(self.value) > MAX_AMOUNT:
            raise ValueError(f"an amount overlay's value must be at most {MAX_AMOUNT:,.0f} either way; it is {self.value!r}")
        return self


class GlAccountPair(_Strict):
    """The two ledger accounts a provision is booked to."""

    expense: str | None = Field(
        default=None, min_length=1, description="Provision for credit losses / impairment expense (profit or loss)."
    )
    allowance: str | None = Field(
        default=None, min_length=1, description="Allowance for credit losses (contra-asset, balance sheet)."
    )


class GlAccounts(GlAccountPair):
    """``[gl_accounts.<framework>]``: the account codes the Journal sheet books the provision to.

    ``segments.<name>`` overrides either account for one segment (a ledger that keeps an
    allowance account per product).
    """

    segments: dict[str, GlAccountPair] = Field(default_factory=dict)


#: Names a scenario may not take: ``ecl_<framework>_<name>`` is already another loans.csv column.
RESERVED_SCENARIO_NAMES: tuple[str, ...] = ("modelled", "drawn", "undrawn")


class Assumptions(_Strict):
    """The whole assumptions file (after any overlay files are merged into it)."""

    run: RunSection
    tape: TapeSection = Field(default_factory=TapeSection)
    segments: dict[str, SegmentAssumptions] = Field(min_length=1)
    ifrs9: Ifrs9Rules | None = None
    cecl: CeclRules | None = None
    macro: MacroSection | None = None
    scenarios: dict[str, Scenario] = Field(min_length=1)
    overlays: list[Overlay] = Field(default_factory=list)
    gl_accounts: dict[Framework, GlAccounts] = Field(
        default_factory=dict, description="Ledger account codes for the journal, by framework."
    )

    @model_validator(mode="after")
    def _consistent(self) -> Assumptions:
        if "ifrs9" in self.run.frameworks and self.ifrs9 is None:
            raise ValueError("frameworks lists ifrs9 but there is no [ifrs9] table")
        if "cecl" in self.run.frameworks and self.cecl is None:
            raise ValueError("frameworks lists cecl but there is no [cecl] table")
        reserved = sorted(set(self.scenarios) & set(RESERVED_SCENARIO_NAMES))
        if reserved:
            raise ValueError(
                f"scenario name {reserved[0]!r} is reserved: loans.csv names ecl_<framework>_{reserved[0]} for "
                "another figure; rename the scenario"
            )
        total = sum(s.weight for s in self.scenarios.values())
        if abs(total - 1.0) > 1e-9:
            parts = ", ".join(f"{n} {s.weight:g}" for n, s in self.scenarios.items())
            raise ValueError(f"scenario weights must sum to 1; they sum to {total:.10g} ({parts})")
        names = [o.name for o in self.overlays]
        dupes = sorted({n for n in names if names.count(n) > 1})
        if dupes:
            raise ValueError(f"overlay names must be unique: {', '.join(dupes)}")
        for o in self.overlays:
            if o.segment != "*" and o.segment not in self.segments:
                raise ValueError(f"overlay {o.name!r} names segment {o.segment!r}, which has no [segments] table")
        for fw, accounts in self.gl_accounts.items():
            for name in accounts.segments:
                if name not in self.segments:
                    raise ValueError(f"gl_accounts.{fw} names segment {name!r}, which has no [segments] table")
        for name, seg in self.segments.items():
            if seg.behavioural_life_months is None and seg.payment_rate is not None:
                raise ValueError(f"segment {name!r}: payment_rate needs behavioural_life_months")
        self._macro_consistent()
        return self

    def _macro_consistent(self) -> None:
        """Macro paths, baseline and satellite models must name the same variables."""
        macro_scenarios = [n for n, s in self.scenarios.items() if s.macro]
        if not macro_scenarios:
            return
        if self.macro is None:
            raise ValueError(
                f"scenario {macro_scenarios[0]!r} gives macro paths but there is no [macro] table "
                "(start, interpolation and the baseline paths they are measured against)"
            )
        baseline = self.macro.baseline
        start = quarter_number(self.macro.start)
        first_month = self.run.as_of.year * 12 + self.run.as_of.month  # month 1 after the as-of month
        if 3 * start > first_month:
            raise ValueError(
                f"macro.start {self.macro.start} begins after the first projected month "
                f"({first_month // 12}-{first_month % 12 + 1:02d}); start the paths at the quarter "
                "after the as-of date or earlier"
            )
        for sname in macro_scenarios:
            for var, path in self.scenarios[sname].macro.items():
                if var not in baseline:
                    raise ValueError(f"scenarios.{sname}.macro.{var} has no baseline path in [macro.baseline]")
                if len(path) > len(baseline[var]):
                    raise ValueError(
                        f"scenarios.{sname}.macro.{var} has {len(path)} quarters but macro.baseline.{var} "
                        f"only {len(baseline[var])}: the baseline must cover every quarter of the scenario"
                    )
        as_of_month = first_month - 1
        history = [q for q in range(max(len(p) for p in baseline.values())) if 3 * (start + q) + 2 <= as_of_month]
        for var in baseline:
            given = [(n, self.scenarios[n].macro[var]) for n in macro_scenarios if var in self.scenarios[n].macro]
            for q in history:
                values = {n: p[q] for n, p in given if q < len(p)}
                if len(set(values.values())) > 1:
                    shown = ", ".join(f"{n} {v:g}" for n, v in values.items())
                    label = f"{(start + q) // 4}Q{(start + q) % 4 + 1}"
                    raise ValueError(
                        f"the scenarios' paths of {var!r} differ in {label}, which is history at the "
                        f"as-of date ({shown}); give every scenario the observed value"
                    )
        for name, seg in self.segments.items():
            if seg.satellite is None:
                raise ValueError(
                    f"scenario {macro_scenarios[0]!r} gives macro paths but segment {name!r} has no "
                    f"[segments.{name}.satellite] model (state one; zero coefficients keep the long-run PD)"
                )
            for var in seg.satellite.variables:
                if var not in baseline:
                    raise ValueError(
                        f"segments.{name}.satellite uses {var!r}, which has no path in [macro.baseline]"
                    )
                for sname in macro_scenarios:
                    if var not in self.scenarios[sname].macro:
                        raise ValueError(
                            f"scenarios.{sname}.macro gives no path for {var!r}, which segment "
                            f"{name!r}'s satellite model uses"
                        )

    @property
    def scenario_names(self) -> list[str]:
        return list(self.scenarios)

    @property
    def weights(self) -> list[float]:
        return [s.weight for s in self.scenarios.values()]


class InputFile(BaseModel):
    """One input file of a run, as recorded in ``run.json``."""

    model_config = ConfigDict(frozen=True)

    role: Literal["tape", "assumptions", "overlay", "transition_matrix", "charge_offs", "prior", "history", "policy"]
    path: str
    sha256: str
    bytes: int


class RunConfig(BaseModel):
    """Validated assumptions plus the files they came from. Passed down; never mutated."""

    model_config = ConfigDict(frozen=True)

    assumptions: Assumptions
    inputs: list[InputFile] = Field(default_factory=list)
    base_dir: Path = Field(default=Path("."), description="Folder relative paths in the file resolve against.")

    @property
    def as_of(self) -> date:
        return self.assumptions.run.as_of

    @property
    def frameworks(self) -> list[Framework]:
        return list(self.assumptions.run.frameworks)


# --------------------------------------------------------------------------------------
# The run record (run.json)
# --------------------------------------------------------------------------------------


class RowCounts(BaseModel):
    """Rows of the tape: read = accepted + rejected; for a CSV tape also its physical lines:
    lines = 1 header + read + blank + line breaks inside quoted values."""

    model_config = ConfigDict(frozen=True)

    read: Annotated[int, Field(ge=0)]
    accepted: Annotated[int, Field(ge=0)]
    rejected: Annotated[int, Field(ge=0)]
    blank: Annotated[int, Field(ge=0)] = 0
    lines: Annotated[int, Field(ge=0)] | None = None  # CSV only
    lines_in_values: Annotated[int, Field(ge=0)] = 0

    @model_validator(mode="after")
    def _nothing_lost(self) -> RowCounts:
        if self.read != self.accepted + self.rejected:
            raise ValueError(f"rows read ({self.read}) must equal accepted ({self.accepted}) + rejected ({self.rejected})")
        if self.lines is not None and self.lines != 1 + self.read + self.blank + self.lines_in_values:
            raise ValueError(f"lines of the file ({self.lines}) must equal 1 header + rows read ({self.read}) + blank "
                             f"({self.blank}) + line breaks inside quoted values ({self.lines_in_values})")
        return self


class MovementTotals(BaseModel):
    """One framework's movement from the prior run, as the record keeps it."""

    model_config = ConfigDict(frozen=True, extra="allow")

    opening: float
    closing: float
    provision: float
    assumptions_isolated: bool


class RunRecord(BaseModel):
    """``run.json``: enough to identify, repeat and tie out a run.

    Extra keys are kept (a later release may add some, and a prior run's record is read back
    with the model), but these are always there and always of these types.
    """

    model_config = ConfigDict(frozen=True, extra="allow")

    package: Literal["allowance"] = "allowance"
    version: str
    run_label: str | None = None
    as_of: date
    frameworks: list[Framework] = Field(min_length=1)
    currency: str
    run_by: str
    started: str | None = None
    timestamp: str
    inputs: list[InputFile]
    rows: RowCounts
    loans: Annotated[int, Field(ge=0)]
    total_balance: float | None
    total_allowance: dict[Framework, float | None]
    totals: dict[Framework, dict]
    warnings: Annotated[int, Field(ge=0)]
    tie_out: dict | None = None
    movement: dict[Framework, MovementTotals] = Field(default_factory=dict)
    assumptions: dict
