r"""A finished run's 12-month forecast against what happened in the 12 months after it.

Two comparisons, by segment and grade:

- **default rates**: the loans performing at the as-of date (PD below 1), grouped by grade,
  their realised 12-month default rate against the mean 12-month PD the run used (the
  probability-weighted ``pd_12m`` of ``loans.csv``), with intervals, tests and lights from
  :mod:`allowance.backtest.statistics`; a segment's light tests its total defaults;
- **losses**: the run's expected 12-month loss (``ecl_12m``, modelled, before overlays; IFRS 9
  discounts it, so it sits slightly below an undiscounted figure) against the realised net
  credit loss of the same loans over the window. Loss-rate segments (no PD) are judged on this
  alone: yellow when realised exceeds expected by ``loss_yellow``, red by ``loss_red``.

A segment's verdict is the worse of its two lights. Loans of the run that the history does not
show in the window are counted and left out of both comparisons (a gap in the data, not a
repayment: a loan that pays off appears in the month it pays off).

Implements
----------
BacktestResult  the tables of a back-test
event_dpd       the days past due that count as default, per segment, from a run's assumptions
backtest        run loans + assumptions + history rows -> BacktestResult
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from datetime import date
from typing import Any

import numpy as np
import pandas as pd

from allowance.frameworks import rules_for
from allowance.backtest.realised import realised_outcomes, window_months
from allowance.backtest.statistics import LIGHTS, BacktestOptions, calibration_table, segment_verdicts

NO_GRADE = "(no grade)"


@dataclass(frozen=True)
class BacktestResult:
    """A back-test's tables.

    segments  one row per segment: coverage, default test, loss comparison, lights, verdict
    grades    one row per segment and grade: the calibration table and the loss comparison
    loans     one row per loan of the run: its PD and expected loss, what happened to it
    options   the statistical choices used
    as_of, window_end  the run's as-of date and the last month end of the window
    """

    segments: pd.DataFrame
    grades: pd.DataFrame
    loans: pd.DataFrame
    options: BacktestOptions
    as_of: date
    window_end: date

    def options_table(self) -> pd.DataFrame:
        """The choices of this back-test, one per row, for the outputs."""
        o = self.options
        rows = [
            ("as-of date of the run", self.as_of.isoformat()),
            ("window", f"month ends after the as-of date up to {self.window_end.isoformat()}"),
            ("interval confidence (two-sided)", o.confidence),
            ("test behind a grade's light", o.test),
            ("yellow below p-value", o.yellow_p),
            ("red below p-value", o.red_p),
            ("loss-rate light: yellow at realised / expected", o.loss_yellow),
            ("loss-rate light: red at realised / expected", o.loss_red),
        ]
        return pd.DataFrame(rows, columns=["setting", "value"])


def event_dpd(assumptions: Mapping[str, Any]) -> dict[str, int]:
    """Days past due that count as the PD's event, per segment of a run's assumptions.

    Roll-rate segments model charge-off (their ``charge_off_dpd``); other segments default at
    the ``default_dpd`` of the framework whose PD ``loans.csv`` reports (IFRS 9 when run, else
    CECL; 90 when unstated).

    Examples
    --------
    >>> event_dpd({"run": {"frameworks": ["cecl"]}, "cecl": {"default_dpd": 90},
    ...            "segments": {"auto": {"pd_12m": 0.02},
    ...                         "cards": {"transition_matrix": "r.csv", "charge_off_dpd": 180}}})
    {'auto': 90, 'cards': 180}
    """
    frameworks = assumptions.get("run", {}).get("frameworks", [])
    # the staged framework (IFRS 9) leads loans.csv's shared PD columns when it is run
    lead = next((f for f in frameworks if rules_for(f).staged), frameworks[0] if frameworks else None)
    rules = assumptions.get(lead) if lead else None
    default = int((rules or {}).get("default_dpd") or 90)
    out = {}
    for name, seg in assumptions.get("segments", {}).items():
        matrix = seg.get("transition_matrix")
        out[name] = int(seg["charge_off_dpd"]) if matrix is not None and seg.get("charge_off_dpd") else default
    return out


def _loss_light(expected: np.ndarray, realised: np.ndarray, o: BacktestOptions) -> np.ndarray:
    ratio = np.divide(realised, expected, out=np.full(expected.shape, np.inf), where=expected > 0)
    ratio = np.where((expected <= 0) & (realised <= 0), 0.0, ratio)
    return np.where(ratio >= o.loss_red, "red", np.where(ratio >= o.loss_yellow, "yellow", "green")).astype(object)


def _worst(*lights: pd.Series) -> pd.Series:
    rank = pd.concat([s.map({k: i for i, k in enumerate(LIGHTS)}) for s in lights], axis=1).max(axis=1)
    return rank.map(dict(enumerate(LIGHTS)))


def backtest(run_loans: pd.DataFrame, assumptions: Mapping[str, Any], history: pd.DataFrame, as_of: date,
             options: BacktestOptions | None = None, months: int = 12) -> BacktestResult:
    """Compare a run's 12-month PDs and expected losses with what the history shows.

    Parameters
    ----------
    run_loans : DataFrame
        The run's ``loans.csv``: ``loan_id, segment, grade, balance, pd_12m, ecl_12m``.
    assumptions : mapping
        The run's merged assumptions (``run.json``'s ``assumptions``): the default thresholds.
    history : DataFrame
        Performance-history rows covering at least the window
        (:data:`allowance.backtest.realised.WINDOW_COLUMNS`).
    as_of : date
        The run's as-of date.
    options : BacktestOptions
    months : int
        Window length; the PDs tested are 12-month PDs, so 12 unless testing something else.

    Returns
    -------
    BacktestResult
    """
    o = options or BacktestOptions()
    thresholds = event_dpd(assumptions)
    for seg in pd.unique(history["segment"].astype(str)):
        thresholds.setdefault(seg, max(thresholds.values(), default=90))  # segments the run did not have
    outcomes = realised_outcomes(history, as_of, thresholds, months)

    loans = run_loans[["loan_id", "segment"]].copy()
    loans["loan_id"] = loans["loan_id"].astype(str)
    grade = run_loans["grade"] if "grade" in run_loans else pd.Series(np.nan, index=run_loans.index)
    loans["grade"] = grade.astype(object).where(grade.notna(), NO_GRADE).astype(str)
    loans["balance"] = run_loans["balance"].to_numpy(float)
    loans["pd_12m"] = pd.to_numeric(run_loans["pd_12m"], errors="coerce").to_numpy(float)
    loans["ecl_12m"] = pd.to_numeric(run_loans["ecl_12m"], errors="coerce").fillna(0.0).to_numpy(float)
    found = outcomes.set_index("loan_id").drop(columns="segment")
    loans = loans.join(found, on="loan_id")
    loans["found"] = loans["months_observed"].notna()
    for name in ("charge_offs", "bankruptcy_losses", "gross_credit_loss", "recoveries", "asset_sales",
                 "net_credit_loss"):
        loans[name] = loans[name].fillna(0.0)
    loans["defaulted"] = loans["defaulted"].fillna(False).astype(bool)
    loans["paid_off"] = loans["paid_off"].fillna(False).astype(bool)
    loans["months_observed"] = loans["months_observed"].fillna(0).astype(np.int64)
    loans["tested"] = loans["found"] & np.isfinite(loans["pd_12m"]) & (loans["pd_12m"] < 1.0)

    keys = ["segment", "grade"]
    tested = loans[loans["tested"]]
    counts = tested.groupby(keys, sort=True).agg(loans=("loan_id", "size"), defaults=("defaulted", "sum"),
                                                 pd=("pd_12m", "mean")).reset_index()
    calibration = calibration_table(counts, o) if len(counts) else counts
    seen = loans[loans["found"]]
    losses = seen.groupby(keys, sort=True).agg(expected_loss_12m=("ecl_12m", "sum"),
                                              realised_gcl=("gross_credit_loss", "sum"),
                                              realised_ncl=("net_credit_loss", "sum")).reset_index()
    grades = losses.merge(calibration, on=keys, how="outer") if len(calibration) else losses
    grades["loss_ratio"] = np.divide(grades["realised_ncl"], grades["expected_loss_12m"],
                                     out=np.full(len(grades), np.nan), where=grades["expected_loss_12m"] > 0)

    by_segment = loans.groupby("segment", sort=True)
    segments = pd.DataFrame({
        "loans_in_run": by_segment.size(),
        "not_in_history": by_segment["found"].apply(lambda s: int((~s).sum())),
        "loans_tested": by_segment["tested"].sum(),
        "expected_loss_12m": by_segment.apply(lambda g: g.loc[g["found"], "ecl_12m"].sum(), include_groups=False),
        "realised_gcl": by_segment["gross_credit_loss"].sum(),
        "realised_ncl": by_segment["net_credit_loss"].sum(),
    }).reset_index()
    segments["loss_ratio"] = np.divide(segments["realised_ncl"], segments["expected_loss_12m"],
                                       out=np.full(len(segments), np.nan), where=segments["expected_loss_12m"] > 0)
    segments["loss_light"] = _loss_light(segments["expected_loss_12m"].to_numpy(float),
                                         segments["realised_ncl"].to_numpy(float), o)
    if len(calibration):
        verdicts = segment_verdicts(calibration, o).rename(columns={"light": "pd_light", "loans": "loans_tested_pd"})
        segments = segments.merge(verdicts.drop(columns="loans_tested_pd"), on="segment", how="left")
    else:
        segments["pd_light"] = np.nan
    segments["method"] = np.where(segments["loans_tested"] > 0, "PD", "loss rate")
    pd_light = segments["pd_light"].fillna("green")
    segments["verdict"] = _worst(pd_light, segments["loss_light"])
    # PD segments are judged on both; loss-rate segments on the loss comparison alone
    segments.loc[segments["method"] == "loss rate", "pd_light"] = "n/a"
    ordered = ["segment", "method", "verdict", "pd_light", "loss_light", "loans_in_run", "not_in_history",
               "loans_tested", "defaults", "expected_defaults", "default_rate", "pd", "p_value", "grades_red",
               "grades_yellow", "worst_grade_light", "expected_loss_12m", "realised_gcl", "realised_ncl", "loss_ratio"]
    segments = segments[[c for c in ordered if c in segments.columns]]
    return BacktestResult(segments=segments, grades=grades, loans=loans, options=o, as_of=as_of,
                          window_end=window_months(as_of, months)[-1].date())
