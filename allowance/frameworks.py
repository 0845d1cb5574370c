"""What differs between IFRS 9 and CECL, in one place: one rules object per framework.

The engine, the movement and the reports ask the framework's :class:`FrameworkRules` instead
of testing its name. Adding a framework (or a policy variant of one) is a new entry in
:data:`FRAMEWORK_RULES`; the maths each rule names lives in its concept module
(:mod:`~allowance.staging`, :mod:`~allowance.scenarios`, :mod:`~allowance.curves`,
:mod:`~allowance.discounting`).

=======================  ======================================  ===============================
rule                     IFRS 9                                  CECL
=======================  ======================================  ===============================
stages                   1 / 2 / 3 and POCI (5.5.3-5.5.5, 5.5.13) none: lifetime for every loan
horizon reported         12 months in stage 1, else the life     the life (ASC 326-20-30-6)
PD = 1 now               stage 3 (default or probation)          ``[cecl] default_dpd``, flags
default test             ``[ifrs9] default_dpd``, flags          ``[cecl] default_dpd``, flags
accrued interest in EAD  ``[ifrs9] accrued_interest``           ``[cecl] accrued_interest``
                         (gross carrying amount, Appendix A)     (the 30-5A election: exclude)
undrawn limit            CCF × undrawn (B5.5.31, B5.5.40)        none when unconditionally
                         (a line's; a HELOC's in its draw        cancellable (326-20-30-11)
                         period)
line in default          drawn only (the line is blocked)        drawn only (the line is blocked)
commitment period        a line: its behavioural life (5.5.20);  a non-cancellable line with a
                         a commitment: to its end (5.5.19)       commitment_end_date: to that date
                                                                 (326-20-30-11)
undrawn part shown as    a provision, with any ECL above the     a liability for off-balance-sheet
                         drawn balance (5.5.20, IFRS 7 B8E)      credit exposure (326-20-30-11)
revolving lines          drawn balance at the behavioural life   drawn balance run off to its end
                         (paid_off / cpr remove accounts)        (or ``runoff_floor``) at the
                                                                 payment_rate x the allocation
                                                                 policy's share (326-20-30-6);
                                                                 no payoff SMM on top
discounting              at the EIR (B5.5.44)                    only with ``discount = true``
                                                                 (the DCF method, 326-20-30-4)
loss of a default        LGD × EAD, or with ``measure =          LGD × EAD; with ``discount =
                         "cash_shortfall"`` the cash shortfall   true`` the cash shortfall (the
                         (LGD + EIR/12) × EAD (Appendix A)       DCF method, 326-20-30-4)
collateral recoveries    discounted at the EIR, the claim        undiscounted, no accrual, unless
                         accruing through the workout (B5.5.55)  ``discount = true``
scenario paths           the whole life                          reverting to the long-run PDs
                                                                 after the reasonable and
                                                                 supportable period (30-9)
allowance per loan       12-month ECL in stage 1, lifetime in    lifetime ECL
                         2 and 3; POCI: the change since
                         purchase (5.5.13)
movement columns         by class: stage 1-3, POCI (IFRS 7 35H)  by segment (ASC 326-20-50-13)
journal accounts         impairment losses / loss allowance      provision / allowance
write-offs (ledger)      the allowance used (35H); any charge    every gross charge-off
                         beyond it a direct loss                 (326-20-35-8)
recoveries (ledger)      profit or loss (5.4.4)                  credited to the allowance
PCD / POCI at purchase   no allowance (5.5.13)                   gross-up of amortised cost
                                                                 (326-20-30-13)
=======================  ======================================  ===============================

Implements
----------
Runoff            how a framework runs a revolving line's measured balance off
FrameworkRules    the rules of one framework (frozen)
LedgerRules       how a framework books write-offs, recoveries and purchases against the allowance
FRAMEWORK_RULES   framework name -> its rules
rules_for         the rules of a framework, or a domain error naming the known ones
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from allowance import staging
from allowance.curves.lgd import recovery_discount_factor, undrawn_exposure
from allowance.discounting import monthly_discount
from allowance.exceptions import AssumptionsError
from allowance.schemas import FRAMEWORKS, AccruedInterest, Assumptions, CeclRules, Framework

__all__ = ["FRAMEWORK_RULES", "FrameworkRules", "LedgerRules", "Runoff", "rules_for"]


@dataclass(frozen=True)
class LedgerRules:
    """How a framework books write-offs and recoveries against the allowance.

    ``charge_offs``: ``"allowance_used"`` (IFRS 9: the allowance written off, 35H; any charge
    beyond it is a direct loss in profit or loss) or ``"gross"`` (CECL: every charge-off is
    deducted from the allowance, ASC 326-20-35-8). ``recoveries_to_allowance``: CECL credits
    recoveries to the allowance (326-20-35-8, 50-13); under IFRS 9 a write-off derecognises
    the asset (5.4.4), so a later recovery is a gain in profit or loss, not allowance.
    ``pcd_gross_up``: CECL adds a PCD asset's purchase-date allowance to its amortised cost
    (ASC 326-20-30-13); IFRS 9 books no allowance at purchase (5.5.13).
    """

    charge_offs: str
    pcd_gross_up: bool
    recoveries_to_allowance: bool
    recoveries_treatment: str
    charge_off_label: str


@dataclass(frozen=True)
class Runoff:
    """How a framework runs the drawn balance of a revolving line off (CECL, ASC 326-20-30-6).

    measured_share  the share of each expected payment that retires the balance measured today
                    (``[cecl] payment_allocation``): 1 under ``measured_balance_first``, the
                    stated ``measured_payment_share`` under ``pro_rata``; the measured balance
                    then falls by payment_rate x measured_share a month
    floor           the run-off stops once the balance is below this share of today's
                    (``[cecl] runoff_floor``; 0: it runs to its end)
    """

    measured_share: float
    floor: float


@dataclass(frozen=True)
class FrameworkRules:
    """The rules of one framework (see the table in the module docstring).

    Every rule is a module-level function, so the rules pickle (by reference) with the
    book-level tables a process pool or a cluster ships to its workers.

    name                 ``ifrs9`` or ``cecl``: the suffix of its loans.csv columns
    label                how people write it (workbook, messages)
    staged               loans carry IFRS 9 stages and the allowance is reported by stage
    horizon              ``(stage, life) -> months``: the horizon reported per loan
    in_default           ``(tape, stage or None, assumptions) -> bool``: PD = 1 now, before the
                         one default definition (:func:`allowance.staging.loss_event_now`)
    default_test         ``(tape, assumptions) -> bool``: in default now (days past due at the
                         framework's ``default_dpd``, or the flags); stage 3 without it is
                         probation
    exposure_add_on      ``(drawn, limit, ccf, unconditionally_cancellable) -> add-on`` to EAD
    revolving_paydown    revolving lines pay down at the segment's ``payment_rate``
    runoff               ``assumptions -> Runoff or None``: how the drawn balance of a line that
                         pays down runs off (None: it does not; it is held to the behavioural life)
    discounted           ``assumptions -> bool``: discount at the EIR
    accrued_interest     ``assumptions -> policy``: which loans carry the tape's accrued interest
                         in their EAD (:mod:`allowance.curves.ead`)
    cash_shortfall       ``assumptions -> bool``: the loss of a default is the cash shortfall,
                         (LGD + EIR/12) × EAD (:func:`allowance.shortfall.default_loss`)
    reversion            ``assumptions -> CeclRules or None``: revert the scenario paths after
                         the reasonable and supportable period (None: whole life)
    allowance            ``(ecl_12m, ecl_lifetime, stage, poci, ecl_at_purchase) -> ecl``, per
                         loan and scenario (arrays ``[n, S]``)
    credit_impaired      the label of purchased credit-impaired / credit-deteriorated assets
    class_labels         ``(stage, poci) -> labels``: each loan's class in the movement
    class_order          the classes in the order the movement's columns show them (None:
                         the movement's columns are the segments)
    journal_accounts     (expense account, allowance account) of the provision
    ledger               how write-offs, recoveries and purchases meet the allowance
    commitment_period    a commitment the lender cannot unconditionally cancel is measured to its
                         ``commitment_end_date`` (CECL, ASC 326-20-30-11); False: a revolving
                         line over its behavioural life (IFRS 9 5.5.20)
    provision            ``(drawn_ecl, undrawn_ecl, balance) -> amount`` (integer cents, per loan):
                         the part of the ECL presented apart from the loss allowance
    provision_account    the balance-sheet account that holds it (workbook, journal)
    """

    name: Framework
    label: str
    staged: bool
    horizon: Callable[[np.ndarray, np.ndarray], np.ndarray]
    in_default: Callable[[pd.DataFrame, np.ndarray | None, Assumptions], np.ndarray]
    default_test: Callable[[pd.DataFrame, Assumptions], np.ndarray]
    exposure_add_on: Callable[[np.ndarray, np.ndarray, np.ndarray, np.ndarray], np.ndarray]
    revolving_paydown: bool
    runoff: Callable[[Assumptions], Runoff | None]
    discounted: Callable[[Assumptions], bool]
    cash_shortfall: Callable[[Assumptions], bool]
    accrued_interest: Callable[[Assumptions], AccruedInterest]
    reversion: Callable[[Assumptions], CeclRules | None]
    allowance: Callable[[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray], np.ndarray]
    credit_impaired: str
    class_labels: Callable[[np.ndarray, np.ndarray], np.ndarray]
    class_order: tuple[str, ...] | None
    journal_accounts: tuple[str, str]
    ledger: LedgerRules
    commitment_period: bool
    provision: Callable[[np.ndarray, np.ndarray, np.ndarray], np.ndarray]
    provision_account: str

    def discount(self, assumptions: Assumptions, eir: np.ndarray) -> np.ndarray:
        """The monthly discount multiplier of every loan: v = 1/(1 + EIR/12), or 1."""
        if self.discounted(assumptions):
            return monthly_discount(eir)
        return np.ones(len(eir))

    def shortfall_interest(self, assumptions: Assumptions, eir: np.ndarray) -> np.ndarray:
        """The default month's lost interest per loan, EIR/12, where the framework measures the cash
        shortfall; 0 under PD × LGD × EAD (:func:`allowance.shortfall.default_loss`)."""
        if self.cash_shortfall(assumptions):
            return np.asarray(eir, float) / 12.0
        return np.zeros(len(eir))

    def recovery_discount(self, assumptions: Assumptions, eir: np.ndarray, months_to_recovery: np.ndarray) -> np.ndarray:
        """The present value factor of a collateral recovery, per loan: (1 + EIR/12)^-m where
        the framework discounts (the claim accrues at the EIR through the workout, IFRS 9
        B5.5.44 and B5.5.55), 1 where it does not (CECL without the discounted cash-flow method:
        nothing is discounted, recoveries included, ASC 326-20-30-4).

        Examples
        --------
        >>> from types import SimpleNamespace
        >>> a = SimpleNamespace(cecl=SimpleNamespace(discount=False))  # CECL without the DCF method
        >>> [rules_for(f).recovery_discount(a, np.array([0.06]), np.array([12.0])).round(6).tolist()
        ...  for f in ("ifrs9", "cecl")]
        [[0.941905], [1.0]]
        """
        if self.discounted(assumptions):
            return np.asarray(recovery_discount_factor(np.asarray(eir, float), np.asarray(months_to_recovery, float)), float)
        return np.ones(len(eir))

    def horizon_months(self, stage, remaining_months, repayment, behavioural_life) -> np.ndarray:
        """Months of expected credit loss per loan (see :func:`allowance.staging.lifetime_months`).

        Examples
        --------
        >>> rules_for("ifrs9").horizon_months([1, 2], [200, 200], ["level", "level"], [0, 0]).tolist()
        [12, 200]
        >>> rules_for("cecl").horizon_months([1, 2], [200, 200], ["level", "level"], [0, 0]).tolist()
        [200, 200]
        """
        return self.horizon(np.asarray(stage), staging.lifetime_months(remaining_months, repayment, behavioural_life))


# --------------------------------------------------------------------------------------
# IFRS 9
# --------------------------------------------------------------------------------------


def _ifrs9_default(tape: pd.DataFrame, stage: np.ndarray | None, assumptions: Assumptions) -> np.ndarray:
    # stage 3 is the credit-impaired class: the default test plus probation (B5.5.37)
    return np.asarray(stage) == 3


def _ifrs9_default_test(tape: pd.DataFrame, assumptions: Assumptions) -> np.ndarray:
    # staging has already required the [ifrs9] table of a staged run
    return staging.in_default(tape, assumptions.ifrs9.default_dpd)


def _drawn_plus_ccf(drawn, limit, ccf, cancellable) -> np.ndarray:
    return undrawn_exposure(drawn, limit, ccf)


def _ifrs9_provision(drawn, undrawn, balance) -> np.ndarray:
    """IFRS 9: the ECL on the undrawn commitment, and any ECL above the drawn balance, is a
    provision (IFRS 9 5.5.20 and 4.2.1(c)-(d); IFRS 7 B8E); the rest reduces the loan's gross
    carrying amount. In integer cents.

    Examples
    --------
    >>> _ifrs9_provision(np.array([500, 1_200, 0]), np.array([300, 0, 90]), np.array([10_000, 1_000, 0])).tolist()
    [300, 200, 90]
    """
    drawn, undrawn, balance = (np.asarray(x, np.int64) for x in (drawn, undrawn, balance))
    return undrawn + np.maximum(drawn - balance, 0)


def _cecl_provision(drawn, undrawn, balance) -> np.ndarray:
    """CECL: the ECL on the undrawn part of a commitment the lender cannot unconditionally
    cancel is a liability for off-balance-sheet credit exposure (ASC 326-20-30-11); a
    cancellable line carries none (its undrawn ECL is 0: ``_cecl_add_on``). In integer cents.

    Examples
    --------
    >>> _cecl_provision(np.array([500, 0]), np.array([300, 0]), np.array([10_000, 0])).tolist()
    [300, 0]
    """
    return np.asarray(undrawn, np.int64).copy()


def _ifrs9_allowance(ecl_12m, ecl_lifetime, stage, poci, at_purchase) -> np.ndarray:
    twelve = (np.asarray(stage) == 1) & ~np.asarray(poci, dtype=bool)
    per_scenario = np.where(twelve[:, None], ecl_12m, ecl_lifetime)
    # POCI: the allowance is the change in lifetime ECL since purchase (IFRS 9 5.5.13)
    shift = np.where(np.asarray(poci, dtype=bool) & ~np.isnan(at_purchase), at_purchase, 0.0)
    return per_scenario - shift[:, None]


def _always(assumptions: Assumptions) -> bool:
    return True


def _ifrs9_accrued(assumptions: Assumptions) -> AccruedInterest:
    return assumptions.ifrs9.accrued_interest if assumptions.ifrs9 is not None else "exclude"


def _ifrs9_shortfall(assumptions: Assumptions) -> bool:
    return assumptions.ifrs9 is not None and assumptions.ifrs9.measure == "cash_shortfall"


def _whole_life(assumptions: Assumptions) -> None:
    return None


def _no_runoff(assumptions: Assumptions) -> None:
    return None


def _ifrs9_classes(stage, poci) -> np.ndarray:
    labels = np.char.add("stage ", np.asarray(stage).astype(str)).astype(object)
    return np.where(poci, "POCI", labels).astype(object)


IFRS9 = FrameworkRules(
    name="ifrs9",
    label="IFRS 9",
    staged=True,
    horizon=staging.stage_horizon,
    in_default=_ifrs9_default,
    default_test=_ifrs9_default_test,
    exposure_add_on=_drawn_plus_ccf,
    revolving_paydown=False,
    runoff=_no_runoff,
    discounted=_always,
    cash_shortfall=_ifrs9_shortfall,
    accrued_interest=_ifrs9_accrued,
    reversion=_whole_life,
    allowance=_ifrs9_allowance,
    credit_impaired="POCI",
    class_labels=_ifrs9_classes,
    class_order=("stage 1", "stage 2", "stage 3", "POCI"),
    journal_accounts=("Impairment losses on loans (profit or loss)", "Loss allowance (balance sheet)"),
    ledger=LedgerRules(
        charge_offs="allowance_used", pcd_gross_up=False, recoveries_to_allowance=False,
        recoveries_treatment="recognised in profit or loss (IFRS 9 5.4.4: a write-off derecognises the asset)",
        charge_off_label="Written off (allowance used)",
    ),
    commitment_period=False,
    provision=_ifrs9_provision,
    provision_account="Provision for loan commitments and financial guarantees (liability)",
)

# --------------------------------------------------------------------------------------
# CECL
# --------------------------------------------------------------------------------------


def _cecl_rules(assumptions: Assumptions) -> CeclRules:
    if assumptions.cecl is None:
        raise AssumptionsError(
            "CECL is asked for but there is no [cecl] table",
            column="cecl",
            hint="add [cecl] with reasonable_supportable_months, reversion_months and reversion",
        )
    return assumptions.cecl


def _cecl_discounts(assumptions: Assumptions) -> bool:
    return _cecl_rules(assumptions).discount


def _cecl_default(tape: pd.DataFrame, stage: np.ndarray | None, assumptions: Assumptions) -> np.ndarray:
    return staging.in_default(tape, _cecl_rules(assumptions).default_dpd)


def _cecl_default_test(tape: pd.DataFrame, assumptions: Assumptions) -> np.ndarray:
    return _cecl_default(tape, None, assumptions)


def _cecl_accrued(assumptions: Assumptions) -> AccruedInterest:
    return _cecl_rules(assumptions).accrued_interest


def _cecl_runoff(assumptions: Assumptions) -> Runoff:
    """The measured balance of a card or other revolving line runs off under the stated payment
    allocation policy (ASC 326-20-30-6: the contractual term, with expected payments; the
    credit-card implementation guidance of ASC 326-20-55 and the 2017 transition resource
    group discussion treat which future payments retire the measured balance as a policy to
    state; from memory). Future draws are not measured (they are not yet an asset), so the
    payments only retire today's balance under ``measured_balance_first``, a stated share of
    them under ``pro_rata``."""
    rules = _cecl_rules(assumptions)
    if rules.payment_allocation is None:
        raise AssumptionsError(
            "CECL measures revolving lines but [cecl] states no payment_allocation",
            column="cecl.payment_allocation",
            hint='state payment_allocation = "measured_balance_first" (every payment retires the measured '
                 'balance) or "pro_rata" with measured_payment_share (ASC 326-20-30-6)',
        )
    share = 1.0 if rules.payment_allocation == "measured_balance_first" else float(rules.measured_payment_share)
    return Runoff(measured_share=share, floor=float(rules.runoff_floor or 0.0))


def _cecl_add_on(drawn, limit, ccf, cancellable) -> np.ndarray:
    # an unconditionally cancellable commitment carries no allowance (ASC 326-20-30-11)
    return np.where(cancellable, 0.0, undrawn_exposure(drawn, limit, ccf))


def _lifetime_allowance(ecl_12m, ecl_lifetime, stage, poci, at_purchase) -> np.ndarray:
    return ecl_lifetime


def _cecl_classes(stage, poci) -> np.ndarray:
    return np.where(poci, "PCD", "non-PCD").astype(object)


CECL = FrameworkRules(
    name="cecl",
    label="CECL",
    staged=False,
    horizon=staging.lifetime_horizon,
    in_default=_cecl_default,
    default_test=_cecl_default_test,
    exposure_add_on=_cecl_add_on,
    revolving_paydown=True,
    runoff=_cecl_runoff,
    discounted=_cecl_discounts,
    cash_shortfall=_cecl_discounts,  # the DCF method is the cash shortfall at the EIR (326-20-30-4)
    accrued_interest=_cecl_accrued,
    reversion=_cecl_rules,
    allowance=_lifetime_allowance,
    credit_impaired="PCD",
    class_labels=_cecl_classes,
    class_order=None,
    journal_accounts=("Provision for credit losses (income statement)", "Allowance for credit losses (balance sheet)"),
    ledger=LedgerRules(
        charge_offs="gross", pcd_gross_up=True, recoveries_to_allowance=True,
        recoveries_treatment="credited to the allowance (ASC 326-20-35-8, 326-20-50-13)",
        charge_off_label="Charge-offs",
    ),
    commitment_period=True,
    provision=_cecl_provision,
    provision_account="Liability for off-balance-sheet credit exposures",
)

#: framework name -> its rules
FRAMEWORK_RULES: dict[Framework, FrameworkRules] = {"ifrs9": IFRS9, "cecl": CECL}
assert tuple(FRAMEWORK_RULES) == FRAMEWORKS  # one entry per framework the schemas accept


def rules_for(framework: str) -> FrameworkRules:
    """The rules of ``framework``.

    Raises
    ------
    AssumptionsError
        An unknown framework, naming the known ones.

    Examples
    --------
    >>> rules_for("cecl").label
    'CECL'
    """
    try:
        return FRAMEWORK_RULES[framework]  # type: ignore[index]
    except KeyError:
        raise AssumptionsError(f"unknown framework {framework!r}", column="run.frameworks",
                               hint=f"use one of {', '.join(FRAMEWORK_RULES)}") from None
