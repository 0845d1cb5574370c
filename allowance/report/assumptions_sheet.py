"""The assumptions a run used, laid out as grids, and the PD term structures it computed.

Implements
----------
assumptions_sheet      run settings, segments, grades, PD curves, prepayment, collateral LGD,
                       roll-rate matrices, staging rules, CECL period, scenario paths, reversion,
                       roll-rate analytics, ledger accounts; file names, never full paths
CurveGrid, curve_grid  the run's PD term structures, one row per curve, months across (built once
                       for both workbooks)
term_structure_sheet   cumulative PD at 1, 2, 3, 5 and 10 years, in the assumptions' order
monthly_curves_frame   the monthly curves in the same order, marginal and cumulative rows, months
                       across, for their own (unprinted) sheet
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from allowance.report.xlsx import Sheet

if TYPE_CHECKING:
    from allowance.report.record import RunReport

__all__ = ["CURVE_MEASURES", "PD_MONTHS", "CurveGrid", "assumptions_sheet", "curve_grid", "monthly_curves_frame",
           "term_structure_sheet"]

#: months at which the term-structure sheet shows cumulative PD
PD_MONTHS: tuple[int, ...] = (12, 24, 36, 60, 120)
_FW_LABEL = {"ifrs9": "IFRS 9", "cecl": "CECL"}
_TOP = 4
_PD_SOURCE = {
    "pd_12m": "12-month PD", "pd_12m_by_grade": "12-month PD by grade", "pd_curve": "Cumulative PD curve",
    "pd_curve_by_grade": "Cumulative PD curve by grade", "pd_curve_by_age": "PD curve by loan age",
    "transition_matrix": "Roll-rate matrix",
    # loss-rate segments (allowance.loss_rates): no PD source; the method is the loss rate
    "lifetime_loss_rate": "Pool lifetime loss rate", "annual_loss_rate": "Remaining-life (WARM) annual loss rate",
    "vintage_loss_curve": "Vintage loss-rate curve",
}


_LABEL_WIDTH = 36
_VALUE_WIDTH = 15


def _grid(sheet: Sheet, row: int, frame: pd.DataFrame, title: str, kinds: dict[str, str] | None = None,
          note: str | None = None) -> int:
    if frame.empty:
        return row
    row = sheet.section(row, title)
    if note:
        row = sheet.note(row, note, span=max(len(frame.columns), 4))
    _, last = sheet.table(row, frame.reset_index(drop=True), kinds=kinds, headers={c: str(c) for c in frame.columns})
    return last + 2


def _key_values(sheet: Sheet, row: int, title: str, items: list[tuple[str, Any, str]]) -> int:
    """Label / value rows; values left-aligned under their label, text allowed to run on."""
    row = sheet.section(row, title)
    for label, value, kind in items:
        sheet.label(row, 1, label)
        sheet.put(row, 2, value, kind, align="left", fit=False)
        row += 1
    return row + 1


def _yes(flag: bool) -> str:
    return "yes" if flag else "no"


def _prepayment(seg: Any) -> str:
    if seg.cpr is not None:
        return f"CPR {seg.cpr:.2%} a year"
    if seg.psa is not None:
        return f"{seg.psa:g} % PSA"
    if seg.cpr_by_age:
        return "CPR by loan age (below)"
    return "none"


def _matrix_name(seg: Any) -> str:
    tm = seg.transition_matrix
    if tm is None:
        return ""
    source = tm if isinstance(tm, str) else (tm.source or "")
    return Path(str(source)).name


def _segment_rows(segments: dict) -> list[tuple[str, str, list[Any]]]:
    """One row per parameter, one column per segment: (label, kind, values)."""
    segs = list(segments.values())

    def source(seg: Any) -> str:
        text = _PD_SOURCE[seg.method]
        if seg.method == "transition_matrix":
            return f"{text}: {_matrix_name(seg)}, charge-off at {seg.charge_off_dpd} DPD"
        return text + ("" if seg.method == "pd_12m" else " (below)")

    rows = [
        ("PD source", "wrap", [source(s) for s in segs]),
        ("12-month PD", "rate", [s.pd_12m for s in segs]),
        ("LGD", "rate", [s.lgd for s in segs]),
        ("Collateral LGD", "text", ["yes (below)" if s.collateral_lgd else "no" for s in segs]),
        ("Cure rate", "rate", [s.cure_rate for s in segs]),
        ("Prepayment", "wrap", [_prepayment(s) for s in segs]),
        ("CCF (share of the undrawn limit)", "rate", [s.ccf for s in segs]),
        ("CCF by days past due (from ... days)", "wrap",
         [None if s.ccf_by_dpd is None else ", ".join(f"{k}: {v:.0%}" for k, v in sorted(
             s.ccf_by_dpd.items(), key=lambda kv: int(kv[0]))) for s in segs]),
        ("Behavioural life (months)", "count", [s.behavioural_life_months for s in segs]),
        ("Payment rate (monthly, CECL)", "rate", [s.payment_rate for s in segs]),
        ("Unconditionally cancellable", "text",
         [None if s.unconditionally_cancellable is None else _yes(s.unconditionally_cancellable) for s in segs]),
        ("Amortization (months)", "count", [s.amortization_months for s in segs]),
        ("Low credit risk (5.5.10), per loan", "wrap", [_low_credit_risk(s) for s in segs]),
        ("Retail class (Vasicek correlation)", "wrap", [(s.retail_class or "").replace("_", " ") or None for s in segs]),
        ("Asset correlation", "rate", [s.asset_correlation for s in segs]),
    ]
    return [(label, kind, values) for label, kind, values in rows
            if any(v is not None and v != "" for v in values)]


def _low_credit_risk(seg) -> str:
    """The per-loan low-credit-risk test as stated: a PD threshold, grades, both, or none."""
    parts = []
    if seg.low_credit_risk_pd is not None:
        parts.append(f"pd_12m_current <= {seg.low_credit_risk_pd:.4%}")
    if seg.low_credit_risk_grades:
        parts.append("grade " + ", ".join(seg.low_credit_risk_grades))
    return " and ".join(parts) or "no"


def _segments_table(sheet: Sheet, row: int, segments: dict) -> int:
    row = sheet.section(row, "Segments: PD source, LGD, prepayment, exposure")
    names = list(segments)
    sheet.header(row, 1, ["Parameter"] + names, ["text"] + ["text"] * len(names))
    row += 1
    for label, kind, values in _segment_rows(segments):
        sheet.label(row, 1, label)
        for j, value in enumerate(values, start=2):
            sheet.put(row, j, value, kind, align="left" if kind in ("rate", "count") else None, fit=False)
        row += 1
    return row + 1


def _by_grade(segments: dict) -> pd.DataFrame:
    rows = [{"Segment": name, **{str(g): v for g, v in seg.pd_12m_by_grade.items()}}
            for name, seg in segments.items() if seg.pd_12m_by_grade]
    return pd.DataFrame(rows)


def _curves(segments: dict) -> pd.DataFrame:
    """Cumulative PD curves with years down and one column per segment (and grade)."""
    columns: dict[str, list[float]] = {}
    for name, seg in segments.items():
        if seg.pd_curve:
            columns[name] = list(seg.pd_curve)
        for grade, curve in (seg.pd_curve_by_grade or {}).items():
            columns[f"{name} {grade}"] = list(curve)
    if not columns:
        return pd.DataFrame()
    years = max(len(c) for c in columns.values())
    frame = pd.DataFrame({"Year": [f"Year {i + 1}" for i in range(years)]})
    for label, curve in columns.items():
        frame[label] = curve + [np.nan] * (years - len(curve))
    return frame


def _runs(values: list[float]) -> list[tuple[int, int, float]]:
    """Runs of equal consecutive values: (first index, last index, value)."""
    out: list[tuple[int, int, float]] = []
    for i, v in enumerate(values):
        if out and out[-1][2] == v:
            out[-1] = (out[-1][0], i, v)
        else:
            out.append((i, i, v))
    return out


def _cpr_by_age(segments: dict) -> pd.DataFrame:
    rows = []
    for name, seg in segments.items():
        values = list(seg.cpr_by_age or [])
        runs = _runs(values)
        for k, (a, b, v) in enumerate(runs):
            last = k == len(runs) - 1
            ages = f"{a + 1}" if a == b and not last else f"{a + 1}-{b + 1}" if not last else f"{a + 1} and after"
            rows.append({"Segment": name, "Loan age (months)": ages, "CPR": v})
    return pd.DataFrame(rows)


def _collateral(segments: dict) -> pd.DataFrame:
    rows = [{"Segment": name, "Haircut": c.haircut, "Recovery cost": c.recovery_cost, "LGD floor": c.floor,
             "Months to recovery": c.months_to_recovery}
            for name, seg in segments.items() if (c := seg.collateral_lgd) is not None]
    return pd.DataFrame(rows)


def _rules(model: Any, labels: dict[str, tuple[str, str]]) -> list[tuple[str, Any, str]]:
    items = []
    for key, value in model.model_dump(mode="python").items():
        label, kind = labels.get(key, (key.replace("_", " ").capitalize(), "text"))
        if isinstance(value, bool):
            value, kind = _yes(value), "text"
        items.append((label, value, kind))
    return items


_IFRS9_LABELS = {
    "sicr_backstop_dpd": ("Stage 2 beyond days past due (5.5.11 backstop)", "count"),
    "default_dpd": ("Stage 3 at days past due (B5.5.37)", "count"),
    "sicr_pd_ratio": ("Stage 2 when PD now / PD at origination reaches", "multiplier"),
    "sicr_min_pd_increase": ("... and PD now - PD at origination is at least", "rate"),
    "watchlist_is_sicr": ("Watchlist is a significant increase", "text"),
    "forborne_is_sicr": ("Forbearance is a significant increase", "text"),
    "probation_months_stage3": ("Months performing before leaving stage 3", "count"),
    "probation_months_stage2": ("Months performing before leaving stage 2", "count"),
}
_CECL_LABELS = {
    "reasonable_supportable_months": ("Reasonable and supportable period (months)", "count"),
    "default_dpd": ("PD = 1 at days past due", "count"),
    "reversion_months": ("Reversion period (months)", "count"),
    "reversion": ("Reversion to long-run PDs", "text"),
    "discount": ("Discounted cash-flow method at the EIR", "text"),
}
_PATH_LABEL = {"pd_multiplier": "PD multiplier", "z": "Systematic factor z", "lgd_multiplier": "LGD multiplier",
               "collateral_index": "Collateral index"}
_QUARTER_LABEL = "Quarter"


def _scenario_paths(scenarios: dict) -> pd.DataFrame:
    rows = []
    for name, s in scenarios.items():
        kinds = [k for k in _PATH_LABEL if getattr(s, k, None)]
        if getattr(s, "macro", None):
            rows.append({"Scenario": name, "Weight": s.weight,
                         "Path": "Macro paths: " + ", ".join(s.macro) + " (by quarter, below)"})
        for kind in kinds or ([] if getattr(s, "macro", None) else [None]):
            values = getattr(s, kind) if kind else []
            rows.append({"Scenario": name, "Weight": s.weight, "Path": _PATH_LABEL[kind] if kind else "none (long-run PDs)",
                         **{f"Year {i + 1}": v for i, v in enumerate(values)}})
    return pd.DataFrame(rows)


def _quarter_label(start: str, offset: int) -> str:
    year, quarter = int(start[:4]), int(start[-1])
    n = year * 4 + quarter - 1 + offset
    return f"{n // 4}Q{n % 4 + 1}"


def _macro_grids(a: Any) -> list[tuple[str, pd.DataFrame]]:
    """Per macro variable: the baseline and each scenario's path, quarters down."""
    macro = getattr(a, "macro", None)
    if macro is None:
        return []
    out = []
    for variable, baseline in macro.baseline.items():
        paths = {"baseline": list(baseline)}
        for name, s in a.scenarios.items():
            if variable in (getattr(s, "macro", None) or {}):
                paths[name] = list(s.macro[variable])
        length = max(len(p) for p in paths.values())
        frame = pd.DataFrame({_QUARTER_LABEL: [_quarter_label(macro.start, i) for i in range(length)]})
        for name, path in paths.items():
            frame[name] = path + [np.nan] * (length - len(path))
        out.append((variable, frame))
    return out


def _satellites(segments: dict) -> pd.DataFrame:
    rows = []
    for name, seg in segments.items():
        model = getattr(seg, "satellite", None)
        if model is None:
            continue
        for variable, beta in model.coefficients.items():
            rows.append({"Segment": name, "Link": model.link, "Variable": variable, "Coefficient": beta,
                         "Lag (months)": model.lag_months.get(variable, 0),
                         "Collateral follows": "", "Source": model.source or None})
        if model.collateral is not None:
            c = model.collateral
            rows.append({"Segment": name, "Link": model.link, "Variable": c.variable, "Coefficient": None,
                         "Lag (months)": None,
                         "Collateral follows": f"{c.form.replace('_', ' ')}, relative to {c.relative_to.replace('_', '-')}",
                         "Source": model.source or None})
    return pd.DataFrame(rows)


def assumptions_sheet(sheet: Sheet, report: "RunReport") -> None:
    """The assumptions the run used, as the engine saw them after every overlay file was merged."""
    a = report.config.assumptions
    run = a.run
    files = [f"{Path(i.path).name} ({i.role})" for i in report.config.inputs if i.role in ("assumptions", "overlay")]
    row = _key_values(sheet, _TOP, "Run", [
        ("As-of date", run.as_of, "date"), ("Frameworks", ", ".join(_FW_LABEL[f] for f in run.frameworks), "text"),
        ("Currency", run.currency, "text"), ("Label", run.label, "text"),
        ("Ledger balance", run.ledger_balance, "money"), ("Ledger tolerance", run.ledger_tolerance, "money"),
        ("Largest input file (MiB)", run.max_input_mb, "count"),
        ("Loan detail sheet limit (loans)", run.loan_detail_sheet_limit, "count"),
        ("Assumptions files", "; ".join(files) or None, "text"),
    ])
    if a.tape.columns or a.tape.date_format or a.tape.sheet:
        mapping = pd.DataFrame([{"Tape column": k, "Header in the extract": v} for k, v in a.tape.columns.items()])
        if a.tape.date_format or a.tape.sheet:
            row = _key_values(sheet, row, "Reading the tape", [("Date format", a.tape.date_format, "text"),
                                                                 ("Sheet", a.tape.sheet, "text")])
        row = _grid(sheet, row, mapping, "Column mapping")
    segs = a.segments
    row = _segments_table(sheet, row, segs)
    grades = _by_grade(segs)
    row = _grid(sheet, row, grades, "12-month PD by grade", {c: "rate" for c in grades.columns[1:]})
    curves = _curves(segs)
    row = _grid(sheet, row, curves, "Cumulative PD curves by year from the as-of date",
                {c: "rate" for c in curves.columns[1:]})
    row = _grid(sheet, row, _cpr_by_age(segs), "CPR by loan age (annual rate)", {"CPR": "rate"})
    coll = _collateral(segs)
    row = _grid(sheet, row, coll, "Collateral LGD", {"Haircut": "rate", "Recovery cost": "rate", "LGD floor": "rate",
                                                     "Months to recovery": "count"})
    for name, seg in segs.items():
        tm = seg.transition_matrix
        if tm is None or isinstance(tm, str):
            continue
        grid = pd.DataFrame(tm.probabilities, columns=tm.states)
        grid.insert(0, "From \\ to", tm.states)
        row = _grid(sheet, row, grid, f"Monthly roll-rate matrix: {name} ({_matrix_name(seg)})",
                    {c: "rate" for c in tm.states})
    if a.ifrs9 is not None:
        row = _key_values(sheet, row, "IFRS 9 staging rules", _rules(a.ifrs9, _IFRS9_LABELS))
    if a.cecl is not None:
        row = _key_values(sheet, row, "CECL: reasonable and supportable period and reversion (ASC 326-20-30-9)",
                          _rules(a.cecl, _CECL_LABELS))
    paths = _scenario_paths(a.scenarios)
    row = _grid(sheet, row, paths, "Scenario paths by year from the as-of date",
                {"Weight": "rate", **{c: "multiplier" for c in paths.columns[3:]}})
    macro = getattr(a, "macro", None)
    for variable, frame in _macro_grids(a):
        row = _grid(sheet, row, frame, f"Macro path: {variable} by quarter" + (
            f" ({macro.interpolation} within the quarter; {macro.source})" if macro.source
            else f" ({macro.interpolation} within the quarter)"), {c: "factor" for c in frame.columns[1:]})
    row = _grid(sheet, row, _satellites(segs), "Satellite models: macro variables to the monthly PD",
                {"Coefficient": "factor", "Lag (months)": "count", "Source": "wrap", "Collateral follows": "wrap"})
    descriptions = [(n, s.description) for n, s in a.scenarios.items() if s.description]
    if descriptions:
        row = sheet.section(row, "Scenario descriptions")
        for name, text in descriptions:
            sheet.label(row, 1, name)
            row = sheet.note(row, text, col=2, span=6, style="paragraph")
        row += 1
    reversion = report.reversion
    if reversion is not None and not reversion.empty:
        row = _grid(sheet, row, _reversion(reversion, list(a.scenarios)),
                    "CECL reversion: weight on the scenario path by month (1 = the scenario, 0 = long-run PDs)",
                    {c: "rate" for c in a.scenarios})
    rolls = report.roll_rates
    if rolls is not None and not rolls.empty:
        shown = rolls.rename(columns=lambda c: {"segment": "Segment", "bucket": "Bucket", "pd_12m": "12-month PD",
                                                "pd_lifetime": "Lifetime PD",
                                                "expected_months_to_charge_off": "Expected months to charge-off"}
                             .get(c, c))
        row = _grid(sheet, row, shown, "Roll-rate analytics: PD from each delinquency bucket",
                    {"12-month PD": "rate", "Lifetime PD": "rate", "Expected months to charge-off": "multiplier"})
    accounts = getattr(a, "gl_accounts", None) or {}
    if accounts:
        rows = []
        for fw, acc in accounts.items():
            rows.append({"Framework": _FW_LABEL.get(fw, fw), "Segment": "all", "Expense account": acc.expense,
                         "Allowance account": acc.allowance})
            for seg, pair in (acc.segments or {}).items():
                rows.append({"Framework": _FW_LABEL.get(fw, fw), "Segment": seg, "Expense account": pair.expense,
                             "Allowance account": pair.allowance})
        row = _grid(sheet, row, pd.DataFrame(rows), "General-ledger accounts for the journal")
    # one width for every value column: the grids share the columns, none may set them alone
    sheet.width(1, _LABEL_WIDTH)
    for col in range(2, max(sheet.last_col, 2) + 1):
        sheet.width(col, _VALUE_WIDTH)


def _reversion(reversion: pd.DataFrame, scenarios: list[str]) -> pd.DataFrame:
    """The reversion weights by month, months with the same weights in every scenario joined."""
    grid = reversion.pivot_table(index="month", columns="scenario", values="weight_on_scenario", aggfunc="first")
    grid = grid.reindex(columns=[s for s in scenarios if s in grid.columns])
    rows, start = [], 0
    values = [tuple(r) for r in grid.to_numpy().tolist()]
    months = grid.index.tolist()
    for i in range(1, len(values) + 1):
        if i == len(values) or values[i] != values[start]:
            a, b = months[start], months[i - 1]
            label = (f"{a}" if a == b else f"{a}-{b}") if i < len(values) else f"{a} and after"
            rows.append({"Months": label, **dict(zip(grid.columns, values[start]))})
            start = i
    return pd.DataFrame(rows)


# --------------------------------------------------------------------------------------
# Term structures
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CurveGrid:
    """The term structures a run recorded, one row per curve, months across.

    ``curves`` names each curve (segment, key, framework, scenario: the key ``*`` shown as
    ``all``, the framework by its label), in the assumptions' order: segments as listed,
    keys as first met except grades in their natural order, frameworks as run, scenarios as
    listed. ``marginal`` and ``cumulative`` are ``[curve, month]`` (NaN where a curve has no
    such month), ``months`` the month of each column, ascending. Its size is keys x frameworks
    x scenarios x months: set by the assumptions and the longest loan, never by the number of
    loans.
    """

    curves: pd.DataFrame
    months: np.ndarray
    marginal: np.ndarray
    cumulative: np.ndarray
    present: np.ndarray

    @property
    def empty(self) -> bool:
        return len(self.curves) == 0


_CURVE_KEYS = ("segment", "key", "framework", "scenario")


def _rank(values: list[Any], order: dict[Any, float], default: float) -> np.ndarray:
    return np.array([order.get(v, default) for v in values], dtype=float)


def curve_grid(report: "RunReport") -> CurveGrid:
    """The run's term structures as a :class:`CurveGrid` (long rows placed by curve and month,
    no per-row Python: the rows are millions only if the assumptions say so)."""
    ts = report.term_structures
    if ts is None or ts.empty:
        return CurveGrid(pd.DataFrame(columns=list(_CURVE_KEYS)), np.zeros(0, dtype=np.int64),
                         np.zeros((0, 0)), np.zeros((0, 0)), np.zeros((0, 0), dtype=bool))
    a = report.config.assumptions
    codes, uniques, combined = [], [], np.zeros(len(ts), dtype=np.int64)
    for name in _CURVE_KEYS:
        c, u = pd.factorize(ts[name])
        codes.append(c)
        uniques.append(u.tolist())
        combined = combined * (len(u) + 1) + c
    curve_of_row, _ = pd.factorize(combined)  # curves in order of first appearance
    _, first = np.unique(curve_of_row, return_index=True)
    labels = [[u[c] for c in code[first].tolist()] for code, u in zip(codes, uniques)]
    segment, key, framework, scenario = labels
    # a curve key's rank: first appearance of its (segment, key), except grades, in their natural order
    pairs = list(zip(segment, key))
    pair_rank: dict[tuple[Any, Any], float] = {}
    for pair in pairs:
        pair_rank.setdefault(pair, float(len(pair_rank)))
    for name, seg in a.segments.items():
        for i, grade in enumerate(sorted((seg.pd_12m_by_grade or seg.pd_curve_by_grade or {}).keys(), key=str)):
            if (name, grade) in pair_rank:
                pair_rank[(name, grade)] = float(i)
    order = np.lexsort([
        _rank(scenario, {s: i for i, s in enumerate(a.scenarios)}, len(a.scenarios)),
        _rank(framework, {f: i for i, f in enumerate(report.config.frameworks)}, 9),
        np.array([pair_rank[p] for p in pairs]),
        _rank(segment, {s: i for i, s in enumerate(a.segments)}, len(a.segments)),
    ])
    position = np.empty(len(order), dtype=np.int64)
    position[order] = np.arange(len(order))
    months = np.unique(ts["month"].to_numpy(dtype=np.int64))
    row = position[curve_of_row]
    col = np.searchsorted(months, ts["month"].to_numpy(dtype=np.int64))
    shape = (len(order), len(months))
    marginal, cumulative = np.full(shape, np.nan), np.full(shape, np.nan)
    present = np.zeros(shape, dtype=bool)
    marginal[row, col] = ts["marginal_pd"].to_numpy(dtype=float)
    cumulative[row, col] = ts["cumulative_pd"].to_numpy(dtype=float)
    present[row, col] = True
    curves = pd.DataFrame({
        "segment": [segment[i] for i in order],
        "key": ["all" if key[i] == "*" else key[i] for i in order],
        "framework": [_FW_LABEL.get(framework[i], framework[i]) for i in order],
        "scenario": [scenario[i] for i in order],
    })
    return CurveGrid(curves, months, marginal, cumulative, present)


#: the measures of the monthly curves sheet, one row each per curve
CURVE_MEASURES = ("Marginal PD", "Cumulative PD")


def monthly_curves_frame(grid: CurveGrid) -> pd.DataFrame:
    """The monthly curves for their own (unprinted) sheet: per curve a row of marginal PDs
    (conditional on survival) and a row of cumulative PDs, one column per month from the
    as-of date (``month_1``, ...). Some 300 curves of 360 months make 600 rows, not the
    200,000 a row per curve and month would take."""
    if grid.empty:
        return pd.DataFrame()
    n = len(grid.curves)
    keys = grid.curves.loc[np.repeat(np.arange(n), len(CURVE_MEASURES))].reset_index(drop=True)
    keys["measure"] = np.tile(np.asarray(CURVE_MEASURES, dtype=object), n)
    values = np.stack([grid.marginal, grid.cumulative], axis=1).reshape(n * len(CURVE_MEASURES), len(grid.months))
    months = pd.DataFrame(values, columns=[f"month_{m}" for m in grid.months.tolist()])
    return pd.concat([keys, months], axis=1)


def term_structure_sheet(sheet: Sheet, report: "RunReport", grid: CurveGrid | None = None) -> None:
    """Cumulative PD at fixed months, one row per segment / grade / framework / scenario
    (``grid``: the run's :func:`curve_grid`, built here when not given)."""
    grid = curve_grid(report) if grid is None else grid
    if grid.empty:
        sheet.note(_TOP, "No term structures were recorded for this run.", span=4)
        return
    table = grid.curves.copy()
    for m in PD_MONTHS:
        at = np.flatnonzero(grid.months == m)
        table[f"{m // 12} year" + ("s" if m > 12 else "")] = (
            grid.cumulative[:, at[0]] if len(at) else np.full(len(table), np.nan))
    last = grid.present.shape[1] - 1 - np.argmax(grid.present[:, ::-1], axis=1)  # each curve's last month
    table["horizon_months"] = grid.months[last].astype(np.int64)
    table["cumulative_pd_horizon"] = grid.cumulative[np.arange(len(last)), last]
    row = sheet.note(_TOP, "Cumulative probability of default from the as-of date (before prepayment), by "
                     "segment, grade or delinquency bucket, framework and scenario, in the assumptions' order. The "
                     "month-by-month curves are on the Monthly PD curves sheet (not printed by default).", span=8)
    row += 1
    kinds = {c: "rate" for c in table.columns if c.endswith(("year", "years"))}
    kinds.update({"cumulative_pd_horizon": "rate", "horizon_months": "count"})
    sheet.table(row, table, kinds=kinds, headers={c: c.capitalize() for c in table.columns if c.endswith(("year", "years"))}
                | {"cumulative_pd_horizon": "To the horizon", "horizon_months": "Horizon (months)"}, autofilter=True)
    sheet.repeat_to = row
    sheet.ws.freeze_panes(row, 0)
