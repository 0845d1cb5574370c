"""From estimates to an assumptions file that ``allowance run`` accepts, every figure explained.

The draft is a list of tables of entries; every entry carries the value written and a comment
saying how it was estimated (window, weighting, counts) or where it came from. The segment
tables are estimated; ``[run]``, ``[ifrs9]``, ``[cecl]``, ``[scenarios.*]`` and
``[[overlays]]`` cannot be estimated from history and come from the policy file, or, without
one, get stated placeholders marked POLICY for the reviewer to set. A policy file may also
override an estimated segment key (its ``lgd``, say); the comment then says so and keeps the
estimate beside it. The whole draft is validated against the assumptions schema before it is
returned, so what is written is what ``run`` reads.

Implements
----------
Entry, Table, AssumptionsDraft   the draft
build_assumptions                estimates + policy -> draft (validated)
rolls_file                       the default file name of a segment's roll-rate matrix
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path
from typing import Any, Mapping

import numpy as np
from pydantic import ValidationError

from allowance.calibrate.frame import Frame, month_label
from allowance.calibrate.settings import Choice
from allowance.exceptions import AssumptionsError, HistoryError
from allowance.schemas import Assumptions, SegmentAssumptions

PD_KEYS = ("pd_12m", "pd_12m_by_grade", "pd_curve", "pd_curve_by_grade", "transition_matrix", "pd_curve_by_age")
LOSS_RATE_KEYS = ("annual_loss_rate", "lifetime_loss_rate", "vintage_loss_curve")
PREPAY_KEYS = ("cpr", "psa", "cpr_by_age")
#: Tables a policy file may give (the assumptions file's, but segments, which are estimated).
POLICY_TABLES = tuple(name for name in Assumptions.model_fields if name != "segments")


@dataclass(frozen=True)
class Entry:
    """One key: its value, an end-of-line comment, and one comment per item of a list or table value."""

    key: str
    value: Any
    comment: str = ""
    item_comments: tuple[str, ...] = ()
    per_line: int = 1  # list items per line when the list is written over several lines


@dataclass(frozen=True)
class Table:
    """A TOML table (``[name]``) or one entry of an array of tables (``[[name]]``)."""

    name: str
    entries: tuple[Entry, ...]
    notes: tuple[str, ...] = ()
    array: bool = False


@dataclass(frozen=True)
class AssumptionsDraft:
    """The assumptions file to write.

    ``tables`` in file order; ``data`` the same content as a mapping (transition matrices as
    file names: ``rolls_<segment>.csv``); ``matrices`` the segments written as roll-rate
    matrices; ``header`` the comment lines at the top.
    """

    header: tuple[str, ...]
    tables: tuple[Table, ...]
    data: dict[str, Any]
    matrices: tuple[str, ...]
    choices: list[Choice] = field(default_factory=list)


def rolls_file(segment: str) -> str:
    """The default file name of a segment's roll-rate matrix.

    Examples
    --------
    >>> rolls_file("cards")
    'rolls_cards.csv'
    """
    safe = "".join(c if c.isalnum() or c in "-_" else "_" for c in segment)
    return f"rolls_{safe}.csv"


def _sig(value: float, digits: int = 6) -> float:
    """A float kept to ``digits`` significant digits (what the file shows is what is used)."""
    return float(f"{value:.{digits}g}")


def _count(n: float) -> str:
    return f"{int(round(n)):,}"


def _pct(x: float, digits: int = 2) -> str:
    return f"{100 * x:.{digits}f} %"


def _month_end(month: int) -> date:
    return (np.datetime64(month + 1, "M").astype("datetime64[D]") - 1).astype(date)


# --------------------------------------------------------------------------------------
# Segment tables
# --------------------------------------------------------------------------------------


def _loss_rate_entries(name: str, s: int, frame: Frame, results: dict) -> list[Entry]:
    """The segment's loss-rate method (chosen in the settings), estimated from the history."""
    method = frame.pd_source[s]
    start, end = frame.window
    if method == "annual_loss_rate":
        averages = results["loss_rates"].averages
        row = averages[averages["segment"] == name]
        if not len(row) or not math.isfinite(row.iloc[0]["ncl_rate_annualised"]) or row.iloc[0]["opening_balance"] <= 0:
            raise HistoryError(f"segment {name!r}: no balance on the book in the window {start} to {end}",
                               hint="widen the window, or choose another method for the segment")
        row = row.iloc[0]
        return [Entry("annual_loss_rate", _sig(max(0.0, float(row["ncl_rate_annualised"])), 4),
                      f"remaining-life (WARM) method: 12 x net credit loss / opening balance, {start} to {end}: "
                      f"{_count(row['net_credit_loss'])} net loss over {_count(row['opening_balance'])} of "
                      f"month-opening balances ({_count(row['months'])} months)")]
    found = results["loss_methods"]
    if method == "lifetime_loss_rate":
        row = found.pool[found.pool["segment"] == name].iloc[0]
        if not row["start_balance"] > 0:
            raise HistoryError(f"segment {name!r} had no balance on the book in the history's first month, "
                               "so it has no closed pool to follow",
                               hint="choose annual_loss_rate or vintage_loss_curve for it")
        return [Entry("lifetime_loss_rate", _sig(min(1.0, max(0.0, float(row["lifetime_loss_rate"]))), 4),
                      f"pool method: net credit loss of the {_count(row['loans'])} loans on the book at the end of "
                      f"{row['start_month']} to {end}, over their balance then ({_count(row['start_balance'])}); "
                      f"{100 * row['run_off']:.1f} % of that balance is still on the book (a rate for a pool "
                      "not run off understates the lifetime loss: review)")]
    curve = found.curves.get(name) or []
    if not curve:
        raise HistoryError(
            f"segment {name!r}: no year of age was reached by {frame.settings.min_vintage_loans} loans seen from "
            "origination with an original_balance, so no vintage loss curve can be drawn",
            hint="lower min_vintage_loans, add original_balance and origination_date, or choose another method",
        )
    table = found.vintage[found.vintage["segment"] == name].set_index("age")
    comments = tuple(f"age {12 * k} months: {_count(table.loc[12 * k, 'loans_reached'])} loans reached it"
                     for k in range(1, len(curve) + 1))
    return [Entry("vintage_loss_curve", [_sig(c, 4) for c in curve],
                  f"vintage method: cumulative net credit loss / original balance by year of age, every vintage "
                  f"seen from origination pooled (loss at age a over the original balance of the loans that "
                  f"reached a), {month_label(frame.first_month)} to {end}; flat after the last year", comments)]


def _pd_entries(name: str, s: int, frame: Frame, results: dict, choices: list[Choice]) -> list[Entry]:
    source = frame.pd_source[s]
    start, end = frame.window
    if source in LOSS_RATE_KEYS:
        return _loss_rate_entries(name, s, frame, results)
    hz = results["hazards"]
    if source == "pd_curve_by_age" and not hz.pd_curve_by_age.get(name):
        choices.append(Choice(f"segments.{name}.pd_source", "pd_12m", "derived",
                              "pd_curve_by_age chosen but no year of age reached min_exposure_months: "
                              "one 12-month PD instead"))
        source = "pd_12m"
    if source == "transition_matrix":
        rolls = results["roll_rates"].segments[name]
        observed = int(rolls.counts[:-2].sum())
        other = rolls_file(name).replace(".csv", f"_by_{rolls.other_weighting}.csv")
        comment = (f"monthly roll rates, {rolls.weighting}-weighted"
                   + (" (maximum likelihood n_ij / n_i, Anderson & Goodman 1957)" if rolls.weighting == "count" else
                      " (share of the balance at the start of the month)")
                   + f", {start} to {end}: {_count(observed)} transitions; {other} is "
                   f"{rolls.other_weighting}-weighted; the counts are in {rolls_file(name).replace('.csv', '_counts.csv')}")
        if rolls.unobserved:
            comment += f"; no observation from {', '.join(rolls.unobserved)}: contractual roll (one bucket a month)"
        return [Entry("transition_matrix", rolls_file(name), comment),
                Entry("charge_off_dpd", rolls.charge_off_dpd,
                      f"charge-off at {rolls.charge_off_dpd} days past due "
                      f"({'revolving line' if rolls.charge_off_dpd == 180 else 'closed-end loan'})")]
    if source == "pd_12m_by_grade":
        table = hz.by_grade[(hz.by_grade["segment"] == name) & (hz.by_grade["grade"] != "(blank)")]
        values = {g: _sig(p) for g, p in hz.pd_12m_by_grade[name].items()}
        if not values:
            raise HistoryError(f"segment {name!r}: no graded loan-month in the window {start} to {end}",
                               hint="widen the window, or choose another PD source for the segment")
        comments = tuple(
            f"{_count(r.defaults)} charge-offs in {_count(r.loan_months)} loan-months"
            + (" (none: Jeffreys mean 0.5 / (n + 1))" if r.defaults == 0 and frame.settings.zero_default_rule ==
               "jeffreys_mean" else "")
            for r in table.itertuples()
        )
        return [Entry("pd_12m_by_grade", values,
                      f"12-month PD = 1 - (1 - h)^12, h = charge-offs / loan-months on the book at the start of "
                      f"the month, by grade at that month, {start} to {end}", comments)]
    if source == "pd_curve_by_age":
        curve = [_sig(c) for c in hz.pd_curve_by_age[name]]
        ages = hz.by_age[(hz.by_age["segment"] == name) & hz.by_age["in_curve"]]
        comments = tuple(f"year {r.year_of_age} of age: {_count(r.defaults)} charge-offs in "
                         f"{_count(r.loan_months)} loan-months" for r in ages.itertuples())
        first = month_label(frame.first_month)
        return [Entry("pd_curve_by_age", curve,
                      f"cumulative PD by year of loan age (life table: charge-offs / loan-months by year of age, "
                      f"constant hazard within the year, payoffs censored), {first} to {end}; the last year's "
                      f"hazard carries on", comments)]
    pooled = hz.pooled[hz.pooled["segment"] == name].iloc[0]
    value = _sig(float(pooled["pd_12m"]))
    if not math.isfinite(value):
        raise HistoryError(f"segment {name!r}: no loan-month on the book in the window {start} to {end}",
                           hint="widen the window or check the segment's rows")
    return [Entry("pd_12m", value,
                  f"1 - (1 - h)^12, h = {_count(pooled['defaults'])} charge-offs / "
                  f"{_count(pooled['loan_months'])} loan-months, {start} to {end}")]


def _lgd_entry(name: str, frame: Frame, results: dict, choices: list[Choice]) -> Entry:
    lgd = results["lgd"]
    row = lgd.by_segment[lgd.by_segment["segment"] == name].iloc[0]
    workout = frame.settings.lgd_workout_months
    discount = ("discounted at the loan's contract rate" if frame.settings.recovery_discount == "contract_rate"
                else "undiscounted")
    if row["charge_offs"] > 0 and math.isfinite(row["lgd"]):
        last = month_label(frame.as_of - workout)
        return Entry("lgd", _sig(float(row["lgd"]), 4),
                     f"workout LGD: (write-offs - recoveries and debt-sale proceeds {discount}) / exposure at "
                     f"charge-off, {_count(row['charge_offs'])} charge-offs to {last} with {workout} months of "
                     f"recoveries; undiscounted {row['lgd_undiscounted']:.4f}")
    losses = results["loss_rates"].averages
    avg = losses[losses["segment"] == name]
    if len(avg) and avg.iloc[0]["gross_credit_loss"] > 0:
        proxy = float(np.clip(avg.iloc[0]["net_credit_loss"] / avg.iloc[0]["gross_credit_loss"], 0.0, 1.0))
        choices.append(Choice(f"segments.{name}.lgd", f"{proxy:.4f}", "derived",
                              "no charge-off with a complete workout: net / gross credit loss over the window"))
        start, end = frame.window
        return Entry("lgd", _sig(proxy, 4),
                     f"no charge-off with {workout} months of recoveries observed: net / gross credit loss "
                     f"{start} to {end} (a proxy; review)")
    raise HistoryError(
        f"segment {name!r} has no amount written off (charge_off or bankruptcy_loss) in the history, "
        "so its LGD cannot be estimated",
        hint=f"give segments.{name}.lgd in the policy file",
    )


def _prepay_entries(name: str, s: int, frame: Frame, results: dict) -> list[Entry]:
    pp = results["prepayment"]
    start, end = frame.window
    curve = pp.cpr_by_age.get(name) or []
    if curve and frame.pd_source[s] != "transition_matrix":
        ages = pp.by_age[(pp.by_age["segment"] == name) & pp.by_age["in_curve"]]
        comments = tuple(f"year {r.year_of_age} of age: SMM {r.smm:.5f} over {_count(r.loan_months)} loan-months"
                         for r in ages.itertuples())
        return [Entry("cpr_by_age", curve,
                      f"annual CPR by month of loan age = 1 - (1 - SMM)^12, SMM = repaid balance / balance on the "
                      f"book (not charged off), pooled by year of age, {month_label(frame.first_month)} to {end}; "
                      f"the last value carries on", comments, per_line=12)]
    if frame.pd_source[s] == "transition_matrix":
        return []
    row = pp.pooled[pp.pooled["segment"] == name].iloc[0]
    if not math.isfinite(row["cpr"]):
        return []
    return [Entry("cpr", _sig(float(row["cpr"]), 4),
                  f"1 - (1 - SMM)^12, SMM = repaid balance / balance on the book, {start} to {end}")]


def _revolving_entries(name: str, frame: Frame, results: dict, given: Mapping[str, Any]) -> list[Entry]:
    """ccf, behavioural_life_months, payment_rate and unconditionally_cancellable, except those the policy gives."""
    start, end = frame.window
    entries = []
    if "ccf" not in given:
        ccf = results["ccf"].by_segment
        row = ccf[ccf["segment"] == name]
        if not len(row) or not math.isfinite(row.iloc[0]["ccf"]):
            raise HistoryError(
                f"segment {name!r}: no charged-off line was on the book {frame.settings.ccf_horizon_months} months "
                "before, so its CCF cannot be estimated",
                hint=f"give segments.{name}.ccf in the policy file, or a shorter ccf_horizon_months",
            )
        row = row.iloc[0]
        entries.append(Entry("ccf", _sig(float(row["ccf"]), 4),
                             f"IFRS 9: (exposure at charge-off - drawn) / (limit - drawn) "
                             f"{frame.settings.ccf_horizon_months} months before, {_count(row['lines'])} charged-off "
                             f"lines to {end}"))
    life, exits, exposure = results["prepayment"].life[name]
    if "behavioural_life_months" not in given and math.isfinite(life):
        entries.append(Entry("behavioural_life_months", max(1, int(round(life))),
                             f"1 / monthly rate of lines leaving the book: {_count(exits)} closures and charge-offs "
                             f"in {_count(exposure)} line-months, {start} to {end} (IFRS 9 B5.5.40: a judgement "
                             "to review)"))
    pay = results["payment_rates"].payment_rate[name]
    if "payment_rate" not in given and math.isfinite(pay):
        entries.append(Entry("payment_rate", _sig(pay, 4),
                             f"CECL: net repayments / balance at the start of the month, {start} to {end} "
                             "(a lower bound: purchases net out)"))
    if "unconditionally_cancellable" not in given:
        entries.append(Entry("unconditionally_cancellable", True,
                             "POLICY (not estimated): no CECL reserve on undrawn amounts, ASC 326-20-30-11; "
                             "confirm from the agreements"))
    return entries


def _satellite_entry(name: str, given: Mapping[str, Any], results: dict, frame: Frame, policy_file: Path | None,
                     files: tuple[Path, Path | None], choices: list[Choice]) -> Entry:
    """The segment's satellite model: fitted to the history when a macro history was given."""
    fit = results.get("satellites", {}).get(name)
    stated = "coefficients" in given
    if fit is None:
        if not stated:
            raise AssumptionsError(
                f"the satellite model of segment {name!r} has no coefficients, and no macro history was given to "
                "estimate them", file=policy_file, column=f"segments.{name}.satellite.coefficients",
                hint="give the macro history (allowance calibrate ... --macro FILE), or state the coefficients",
            )
        return Entry("satellite", dict(given), "from the policy file")
    slopes = fit.coefficients[fit.coefficients["term"] != "intercept"]
    estimated = {r.variable: _sig(float(r.coefficient), 4) for r in slopes.itertuples()}
    errors = "; ".join(f"{r.variable} {r.coefficient:.4g} (standard error {r.std_error:.2g}, z {r.z:.1f})"
                       for r in slopes.itertuples())
    months = fit.fitted["month"]
    history, macro = files
    summary = (f"{fit.link} GLM of monthly charge-offs on the lagged macro variables, {len(months)} months "
               f"{months.iloc[0]} to {months.iloc[-1]}, {int(fit.statistic('defaults')):,} charge-offs; "
               f"standard errors {fit.standard_errors}; McFadden pseudo R2 {fit.statistic('pseudo_r2_mcfadden'):.3f}, "
               f"dispersion {fit.statistic('dispersion'):.2f}")
    value = {"link": fit.link}
    if stated:
        value["coefficients"] = dict(given["coefficients"])
        choices.append(Choice(f"segments.{name}.satellite.coefficients", repr(value["coefficients"]), "policy",
                              f"estimated {estimated!r}"))
    else:
        value["coefficients"] = estimated
    lags = {v: int(lag) for v, lag in (given.get("lag_months", {}) or {}).items() if int(lag)}
    value["lag_months"] = lags
    value["source"] = (str(given["source"]) if stated and given.get("source") else
                       f"estimated by allowance calibrate from {history.name}"
                       + (f" and {macro.name}" if macro else "") + " (calibration.xlsx, Satellite models)")
    if given.get("collateral"):
        value["collateral"] = dict(given["collateral"])
    comment = ((f"coefficients from the policy file (estimated: {errors}); " if stated else
                f"estimated: {errors}; ") + summary)
    notes = ("", "standard errors: " + ", ".join(f"{r.variable} {r.std_error:.2g}" for r in slopes.itertuples()),
             "", "", "")
    return Entry("satellite", value, comment, notes[:len(value)])


def _segment_table(name: str, s: int, frame: Frame, results: dict, policy: Mapping[str, Any],
                   policy_file: Path | None, choices: list[Choice],
                   files: tuple[Path, Path | None]) -> tuple[Table, dict[str, Any]]:
    entries = _pd_entries(name, s, frame, results, choices)
    own = dict(policy.get(name, {}) or {})
    given_pd = [k for k in (*PD_KEYS, *LOSS_RATE_KEYS) if k in own]
    if given_pd:
        what = "loss rate" if given_pd[0] in LOSS_RATE_KEYS else "PD"
        setting = "loss_rate_method" if given_pd[0] in LOSS_RATE_KEYS else "pd_source"
        raise AssumptionsError(
            f"the policy file gives {given_pd[0]} for segment {name!r}; the {what} is what calibration estimates",
            file=policy_file, column=f"segments.{name}.{given_pd[0]}",
            hint=f'choose it in [calibration] {setting} = {{ {name} = "..." }} instead',
        )
    lgd = _lgd_entry(name, frame, results, choices) if "lgd" not in own else None
    if lgd is not None:
        entries.append(lgd)
    if not any(k in own for k in PREPAY_KEYS):
        entries += _prepay_entries(name, s, frame, results)
    if frame.revolving[s]:
        entries += _revolving_entries(name, frame, results, own)
    notes: list[str] = []
    for key, value in own.items():
        if key == "satellite":
            entries.append(_satellite_entry(name, value or {}, results, frame, policy_file, files, choices))
            continue
        estimate = next((e for e in entries if e.key == key), None)
        if key == "lgd" and estimate is None:
            estimate = _lgd_entry(name, frame, results, [])
        comment = "from the policy file"
        if estimate is not None:
            comment += f" (estimated {estimate.value!r}: {estimate.comment})"
            entries = [e for e in entries if e.key != key]
            choices.append(Choice(f"segments.{name}.{key}", repr(value), "policy", f"estimate {estimate.value!r}"))
        entries.append(Entry(key, value, comment))
    data = {e.key: e.value for e in entries}
    return Table(f"segments.{name}", tuple(entries), tuple(notes)), data


# --------------------------------------------------------------------------------------
# The tables history cannot give
# --------------------------------------------------------------------------------------


def _default_tables(frame: Frame) -> dict[str, Table]:
    as_of = _month_end(frame.as_of)
    return {
        "run": Table("run", (
            Entry("as_of", as_of, "the calibration's as-of date; set the reporting date of the run"),
            Entry("frameworks", ["ifrs9", "cecl"], "POLICY: keep the frameworks you report under"),
            Entry("currency", "USD", "POLICY: the currency of the history's amounts"),
        )),
        "ifrs9": Table("ifrs9", (
            Entry("sicr_backstop_dpd", 30, "IFRS 9 5.5.11: the rebuttable 30-days-past-due presumption"),
            Entry("default_dpd", 90, "IFRS 9 B5.5.37: the rebuttable 90-days-past-due presumption"),
            Entry("sicr_pd_ratio", 2.0, "POLICY (not estimated): stage 2 when PD now / PD at origination reaches "
                                        "this; set it under your SICR policy (IFRS 9 5.5.9)"),
            Entry("sicr_pd_measure", "12_month", "POLICY (not estimated): the PDs the ratio compares, "
                                                 "12_month (B5.5.13) or lifetime (5.5.9); choose one"),
        )),
        "cecl": Table("cecl", (
            Entry("reasonable_supportable_months", 12, "POLICY (not estimated): ASC 326-20-30-9"),
            Entry("reversion_months", 12, "POLICY (not estimated)"),
            Entry("reversion", "straight_line", "POLICY (not estimated)"),
            Entry("payment_allocation", "measured_balance_first",
                  "POLICY (not estimated): the share of each revolving payment that retires the measured "
                  "balance (ASC 326-20-30-6): measured_balance_first or pro_rata"),
        )),
        "scenarios.base": Table("scenarios.base", (
            Entry("weight", 1.0, "POLICY: one scenario, the history's own experience"),
            Entry("description", "The calibration history's experience, unadjusted. Add forward-looking "
                                 "scenarios (IFRS 9 5.5.17, B5.5.42; ASC 326-20-30-9).", ""),
        )),
    }


def _policy_tables(policy: Mapping[str, Any], policy_file: Path | None, frame: Frame) -> tuple[list[Table], dict]:
    defaults = _default_tables(frame)
    tables: list[Table] = []
    data: dict[str, Any] = {}
    source = f"from the policy file {policy_file.name}" if policy_file else "from the policy"

    def plain(name: str, values: Mapping[str, Any]) -> Table:
        return Table(name, tuple(Entry(k, v) for k, v in values.items()), (source,))

    run = dict(policy.get("run", {}) or {})
    if run:
        base = {e.key: e for e in defaults["run"].entries}
        if "as_of" not in run:
            run = {"as_of": base["as_of"].value, **run}
        entries = [Entry(k, v, base[k].comment if k in base and k not in policy.get("run", {}) else "")
                   for k, v in run.items()]
        tables.append(Table("run", tuple(entries), (source,)))
        data["run"] = run
    else:
        tables.append(defaults["run"])
        data["run"] = {e.key: e.value for e in defaults["run"].entries}
    if policy.get("tape"):
        tables.append(plain("tape", policy["tape"]))
        data["tape"] = dict(policy["tape"])
    for name in POLICY_TABLES:
        if name in ("run", "tape", "ifrs9", "cecl", "scenarios", "overlays") or name not in policy:
            continue
        values = dict(policy[name])  # e.g. [macro]: passed through as given
        tables.append(plain(name, values))
        data[name] = values
    for name in ("ifrs9", "cecl"):
        if name in policy:
            tables.append(plain(name, policy[name]))
            data[name] = dict(policy[name])
        elif name in data["run"].get("frameworks", []):
            tables.append(defaults[name])
            data[name] = {e.key: e.value for e in defaults[name].entries}
    scenarios = policy.get("scenarios")
    if scenarios:
        data["scenarios"] = {}
        for name, values in scenarios.items():
            tables.append(plain(f"scenarios.{name}", values))
            data["scenarios"][name] = dict(values)
    else:
        tables.append(defaults["scenarios.base"])
        data["scenarios"] = {"base": {e.key: e.value for e in defaults["scenarios.base"].entries}}
    for overlay in policy.get("overlays", []) or []:
        tables.append(Table("overlays", tuple(Entry(k, v) for k, v in overlay.items()), (source,), array=True))
        data.setdefault("overlays", []).append(dict(overlay))
    return tables, data


# --------------------------------------------------------------------------------------
# The draft
# --------------------------------------------------------------------------------------


def _validate(data: dict[str, Any], matrices: dict[str, Any], policy_file: Path | None) -> None:
    check = copy.deepcopy(data)
    for name, matrix in matrices.items():
        check["segments"][name]["transition_matrix"] = matrix.model_dump()
    try:
        Assumptions.model_validate(check)
    except ValidationError as err:
        first = err.errors()[0]
        where = ".".join(str(p) for p in first["loc"] if not str(p).startswith("function-"))
        raise AssumptionsError(
            f"the calibrated assumptions are not valid: {first['msg']}", file=policy_file, column=where or None,
            hint="correct the policy file (its tables are copied into the assumptions)",
        ) from err


def build_assumptions(results: dict[str, Any], frame: Frame, policy: Mapping[str, Any],
                      policy_file: Path | None, intake: Any, history: Path,
                      macro: Path | None = None) -> AssumptionsDraft:
    """The assumptions draft: estimated segment tables, policy (or placeholder) tables, validated.

    Raises
    ------
    HistoryError
        A segment's PD, LGD or CCF cannot be estimated (the message says what to give instead).
    AssumptionsError
        The policy file gives what calibration estimates (a PD), names a segment the history
        lacks, or makes the whole file invalid (naming the key).
    """
    policy = dict(policy)
    unknown = [k for k in policy if k not in (*POLICY_TABLES, "segments")]
    if unknown:
        raise AssumptionsError(f"unknown table {unknown[0]!r} in the policy file", file=policy_file,
                               column=unknown[0], hint=f"a policy file holds {', '.join(POLICY_TABLES)}, "
                                                       "segments and calibration")
    seg_policy = dict(policy.get("segments", {}) or {})
    stray = [n for n in seg_policy if n not in frame.segments]
    if stray:
        raise AssumptionsError(f"the policy file has segment {stray[0]!r}, which the history does not have",
                               file=policy_file, column=f"segments.{stray[0]}",
                               hint=f"the history's segments are {', '.join(frame.segments)}")
    choices: list[Choice] = []
    tables, data = _policy_tables(policy, policy_file, frame)
    run_tables = [t for t in tables if t.name in ("run", "tape")]
    rule_tables = [t for t in tables if t.name not in ("run", "tape")]
    segments: dict[str, Any] = {}
    seg_tables = []
    matrices = {}
    for s, name in enumerate(frame.segments):
        table, values = _segment_table(name, s, frame, results, seg_policy, policy_file, choices, (history, macro))
        seg_tables.append(table)
        segments[name] = values
        if values.get("transition_matrix"):
            matrices[name] = results["roll_rates"].segments[name].matrix()
    data["segments"] = segments
    _validate(data, matrices, policy_file)
    start, end = frame.window
    header = (
        "Assumptions calibrated from a monthly performance history by `allowance calibrate`.",
        f"History: {history.name}, {intake.rows_read:,} rows read, {intake.rows_accepted:,} accepted, "
        f"{intake.rows_rejected:,} rejected; months {month_label(frame.first_month)} to "
        f"{month_label(frame.as_of)} used (its SHA-256 is in calibration.json).",
        f"Policy: {policy_file.name}." if policy_file else "Policy: none given; the POLICY figures are placeholders.",
        f"As of {month_label(frame.as_of)}; window {start} to {end} ({frame.settings.window_months} months). "
        "The evidence, and every choice made, is in calibration.xlsx.",
        "Each estimated figure says how it was made; figures marked POLICY are not estimated from history.",
    )
    ordered = {"run": data["run"], **({"tape": data["tape"]} if "tape" in data else {}), "segments": segments,
               **{k: v for k, v in data.items() if k not in ("run", "tape", "segments")}}
    return AssumptionsDraft(header=header, tables=(*run_tables, *seg_tables, *rule_tables), data=ordered,
                            matrices=tuple(matrices), choices=choices)


__all__ = ["AssumptionsDraft", "Entry", "SegmentAssumptions", "Table", "build_assumptions", "rolls_file"]
