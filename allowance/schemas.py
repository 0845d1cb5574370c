"""Pydantic models: the loan record, the assumptions file and the run configuration.

These models are the contract between the user's files and the engine. ``intake`` reads
files into them; every other module trusts them (validate at the edge, trust inside).

Implements
----------
LoanRecord          one tape row, its columns, types, bounds and meaning
Assumptions         the TOML assumptions file: run, tape, segments, ifrs9, cecl, scenarios, overlays
SegmentAssumptions  per-segment PD source, LGD, EAD/CCF, prepayment, revolving behaviour
Scenario            a weighted economic scenario (PD / LGD multipliers, collateral path or z path)
Overlay             a documented post-model adjustment
RunConfig           a validated Assumptions plus the input files that made it (paths, SHA-256)
TransitionMatrix    a monthly roll-rate matrix over delinquency buckets, loaded from CSV

Conventions
-----------
Rates are decimals (0.065, not 6.5). Months are the time step. Years in multiplier lists are
counted from the as-of date: element 0 applies to months 1-12, element 1 to months 13-24, and
1.0 applies after the list ends.
"""

from __future__ import annotations

from datetime import date
from pathlib import Path
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

Framework = Literal["ifrs9", "cecl"]
Repayment = Literal["level", "interest_only", "balloon", "revolving"]
OverlayKind = Literal["percent", "amount"]
Reversion = Literal["straight_line", "immediate"]
RetailClass = Literal["residential_mortgage", "qualifying_revolving", "other_retail"]

FRAMEWORKS: tuple[Framework, ...] = ("ifrs9", "cecl")
REPAYMENTS: tuple[Repayment, ...] = ("level", "interest_only", "balloon", "revolving")

Probability = Annotated[float, Field(ge=0.0, le=1.0)]
NonNegative = Annotated[float, Field(ge=0.0)]


class _Strict(BaseModel):
    """Base for the assumption models: unknown keys are an error (a typo must not pass)."""

    model_config = ConfigDict(extra="forbid", frozen=True)


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
    repayment: Repayment = Field(description="level, interest_only, balloon or revolving.")
    origination_date: date = Field(description="Date the loan was originated or purchased.")
    maturity_date: date | None = Field(
        default=None, description="Contractual maturity; blank for revolving lines."
    )
    balance: NonNegative = Field(description="Outstanding principal (drawn balance) at the as-of date.")
    interest_rate: Probability = Field(description="Nominal annual contract rate, decimal (0.065).")
    days_past_due: Annotated[int, Field(ge=0)] = Field(description="Whole days past due at the as-of date.")
    credit_limit: NonNegative | None = Field(default=None, description="Revolving lines: the committed limit.")
    payment: NonNegative | None = Field(
        default=None, description="Scheduled monthly payment; recomputed from balance, rate and term when blank."
    )
    eir: Probability | None = Field(
        default=None, description="Effective interest rate, nominal annual; defaults to interest_rate."
    )
    grade: str | None = Field(default=None, description="Risk grade, for PDs given by grade.")
    pd_12m_at_origination: Probability | None = Field(
        default=None, description="12-month PD at initial recognition, for the IFRS 9 PD-ratio test."
    )
    collateral_value: NonNegative | None = Field(
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
    months_performing: Annotated[int, Field(ge=0)] | None = Field(
        default=None, description="Consecutive months current, for probation out of stage 2 or 3."
    )
    balloon_amount: NonNegative | None = Field(
        default=None, description="Balloon loans: the amount due at maturity; computed when blank."
    )
    amortization_months: Annotated[int, Field(ge=1)] | None = Field(
        default=None, description="Balloon loans: amortization term from origination, longer than the maturity."
    )
    interest_only_months: Annotated[int, Field(ge=0)] | None = Field(
        default=None, description="Interest-only loans: months of interest only from origination, then level pay."
    )
    lifetime_ecl_at_purchase: NonNegative | None = Field(
        default=None, description="POCI assets: lifetime ECL at purchase (allowance is the change since)."
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
    """Collateral-based LGD for secured loans.

    LGD_t = max(floor, 1 - PV(recovery) / EAD_t), recovery = min(EAD_t,
    collateral × index_t × (1 - haircut)) × (1 - recovery_cost), discounted at the EIR over
    ``months_to_recovery``.
    """

    haircut: Probability = Field(description="Forced-sale discount on the collateral value.")
    recovery_cost: Probability = Field(default=0.0, description="Costs to recover, share of proceeds.")
    floor: Probability = Field(default=0.0, description="Lowest LGD allowed.")
    months_to_recovery: Annotated[int, Field(ge=0)] = 12


class SegmentAssumptions(_Strict):
    """``[segments.<name>]``: the risk parameters of one portfolio segment.

    Exactly one PD source: ``pd_12m``, ``pd_12m_by_grade``, ``pd_curve``, ``pd_curve_by_grade``
    or ``transition_matrix``. At most one prepayment source: ``cpr``, ``psa`` or
    ``cpr_by_age`` (none means no prepayment).
    """

    pd_12m: Probability | None = None
    pd_12m_by_grade: dict[str, Probability] | None = None
    pd_curve: list[Probability] | None = Field(default=None, description="Cumulative PD by year.")
    pd_curve_by_grade: dict[str, list[Probability]] | None = None
    transition_matrix: str | TransitionMatrix | None = Field(
        default=None, description="CSV path (relative to the assumptions file) of a monthly roll-rate matrix."
    )
    charge_off_dpd: Literal[120, 180] | None = Field(
        default=None, description="Roll-rate segments: 120 closed-end, 180 open-end revolving."
    )
    lgd: Probability
    collateral_lgd: CollateralLgd | None = None
    cure_rate: Probability = Field(default=0.0, description="Share of defaults that cure with no loss.")
    cpr: Probability | None = None
    psa: NonNegative | None = Field(default=None, description="PSA multiple in percent: 100, 150, ...")
    cpr_by_age: list[Probability] | None = Field(
        default=None, description="Annual CPR by month of loan age (month 1 first); last value after."
    )
    ccf: Probability = Field(default=0.0, description="Share of the undrawn limit drawn by default (IFRS 9).")
    behavioural_life_months: Annotated[int, Field(ge=1)] | None = None
    payment_rate: Probability | None = Field(
        default=None, description="Revolving, CECL: monthly share of the drawn balance repaid."
    )
    unconditionally_cancellable: bool = Field(
        default=True, description="Revolving, CECL: no reserve on undrawn amounts (ASC 326-20-30-11)."
    )
    amortization_months: Annotated[int, Field(ge=1)] | None = Field(
        default=None, description="Balloon loans without the tape column: amortization term from origination."
    )
    low_credit_risk: bool = Field(default=False, description="IFRS 9 5.5.10 exemption for the whole segment.")
    low_credit_risk_grades: list[str] = Field(default_factory=list)
    retail_class: RetailClass | None = Field(
        default=None, description="Basel II retail class, for the Vasicek asset correlation."
    )
    asset_correlation: Annotated[float, Field(gt=0.0, lt=1.0)] | None = None

    @model_validator(mode="after")
    def _one_source_each(self) -> SegmentAssumptions:
        pd_sources = [
            k
            for k in ("pd_12m", "pd_12m_by_grade", "pd_curve", "pd_curve_by_grade", "transition_matrix")
            if getattr(self, k) is not None
        ]
        if len(pd_sources) != 1:
            found = ", ".join(pd_sources) or "none"
            raise ValueError(
                "give exactly one PD source (pd_12m, pd_12m_by_grade, pd_curve, pd_curve_by_grade "
                f"or transition_matrix); found {found}"
            )
        prepay = [k for k in ("cpr", "psa", "cpr_by_age") if getattr(self, k) is not None]
        if len(prepay) > 1:
            raise ValueError(f"give at most one prepayment source; found {', '.join(prepay)}")
        if self.transition_matrix is not None and self.charge_off_dpd is None:
            raise ValueError("a transition_matrix needs charge_off_dpd (120 closed-end, 180 revolving)")
        return self

    @property
    def pd_source(self) -> str:
        """The name of the key that carries this segment's PD."""
        for key in ("pd_12m", "pd_12m_by_grade", "pd_curve", "pd_curve_by_grade", "transition_matrix"):
            if getattr(self, key) is not None:
                return key
        raise AssertionError("validated: exactly one PD source")  # pragma: no cover


class Ifrs9Rules(_Strict):
    """``[ifrs9]``: staging rules. The DPD defaults are the standard's presumptions."""

    sicr_backstop_dpd: Annotated[int, Field(ge=0)] = Field(
        default=30, description="Stage 2 when days past due exceed this (IFRS 9 5.5.11)."
    )
    default_dpd: Annotated[int, Field(ge=1)] = Field(
        default=90, description="Stage 3 at or beyond this (IFRS 9 B5.5.37)."
    )
    sicr_pd_ratio: Annotated[float, Field(gt=1.0)] = Field(
        description="Stage 2 when 12-month PD now / PD at origination reaches this."
    )
    sicr_min_pd_increase: Probability = Field(
        default=0.0, description="...and PD now - PD at origination is at least this."
    )
    watchlist_is_sicr: bool = True
    forborne_is_sicr: bool = True
    probation_months_stage3: Annotated[int, Field(ge=0)] = Field(
        default=0, description="Months performing before a loan leaves stage 3."
    )
    probation_months_stage2: Annotated[int, Field(ge=0)] = Field(
        default=0, description="Months performing before a loan leaves stage 2."
    )

    @model_validator(mode="after")
    def _ordered(self) -> Ifrs9Rules:
        if self.default_dpd <= self.sicr_backstop_dpd:
            raise ValueError("default_dpd must be greater than sicr_backstop_dpd")
        return self


class CeclRules(_Strict):
    """``[cecl]``: the reasonable and supportable period and reversion (ASC 326-20-30-9)."""

    reasonable_supportable_months: Annotated[int, Field(ge=0)]
    default_dpd: Annotated[int, Field(ge=1)] = Field(
        default=90, description="Loans at or beyond this (or flagged defaulted/bankrupt) take PD = 1 now."
    )
    reversion_months: Annotated[int, Field(ge=0)] = 0
    reversion: Reversion = "straight_line"
    discount: bool = Field(default=False, description="true: discounted cash-flow method at the EIR.")


class Scenario(_Strict):
    """``[scenarios.<name>]``: one weighted economic scenario.

    Give ``pd_multiplier`` (by year, scaling the monthly marginal PD, capped at 1) or ``z``
    (systematic factor by year, through the Vasicek conditional PD), not both.
    """

    weight: Probability
    pd_multiplier: list[NonNegative] = Field(default_factory=list)
    z: list[float] = Field(default_factory=list, description="Systematic factor by year; 0 = median economy.")
    lgd_multiplier: list[NonNegative] = Field(default_factory=list)
    collateral_index: list[NonNegative] = Field(
        default_factory=list, description="Collateral value by year relative to today (1.0 = today)."
    )
    description: str = ""

    @model_validator(mode="after")
    def _one_pd_path(self) -> Scenario:
        if self.pd_multiplier and self.z:
            raise ValueError("give pd_multiplier or z, not both")
        return self


class Overlay(_Strict):
    """``[[overlays]]``: a post-model adjustment, documented."""

    name: str = Field(min_length=1, description="Unique name; an overlay file's entry replaces the same name.")
    segment: str = Field(default="*", description="Segment it applies to; * for all.")
    stage: Annotated[int, Field(ge=1, le=3)] | None = Field(default=None, description="IFRS 9 stage; blank for all.")
    framework: Framework | None = Field(default=None, description="Blank for both frameworks.")
    kind: OverlayKind
    value: float = Field(description="percent: share of modelled ECL (0.05); amount: currency units.")
    rationale: str = Field(min_length=1)
    owner: str = Field(min_length=1)
    approved: date | None = None
    expires: date | None = None


class Assumptions(_Strict):
    """The whole assumptions file (after any overlay files are merged into it)."""

    run: RunSection
    tape: TapeSection = Field(default_factory=TapeSection)
    segments: dict[str, SegmentAssumptions] = Field(min_length=1)
    ifrs9: Ifrs9Rules | None = None
    cecl: CeclRules | None = None
    scenarios: dict[str, Scenario] = Field(min_length=1)
    overlays: list[Overlay] = Field(default_factory=list)

    @model_validator(mode="after")
    def _consistent(self) -> Assumptions:
        if "ifrs9" in self.run.frameworks and self.ifrs9 is None:
            raise ValueError("frameworks lists ifrs9 but there is no [ifrs9] table")
        if "cecl" in self.run.frameworks and self.cecl is None:
            raise ValueError("frameworks lists cecl but there is no [cecl] table")
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
        for name, seg in self.segments.items():
            if seg.behavioural_life_months is None and seg.payment_rate is not None:
                raise ValueError(f"segment {name!r}: payment_rate needs behavioural_life_months")
        return self

    @property
    def scenario_names(self) -> list[str]:
        return list(self.scenarios)

    @property
    def weights(self) -> list[float]:
        return [s.weight for s in self.scenarios.values()]


class InputFile(BaseModel):
    """One input file of a run, as recorded in ``run.json``."""

    model_config = ConfigDict(frozen=True)

    role: Literal["tape", "assumptions", "overlay", "transition_matrix", "charge_offs", "prior"]
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
