"""The calibration: history in, estimates and a reviewed-assumptions draft out.

:func:`calibrate` reads the history (streaming, into the loan-month panel), decides the frame,
then passes over the panel's partitions once: every registered estimator collects additive
statistics from each partition (:class:`MonthView`), and turns their sum into its estimates
at the end. The assumptions draft is built from the estimates and the policy file.

Adding an estimate
------------------
An estimator is a pair of pure functions registered in :data:`ESTIMATORS`:

- ``collect(view: MonthView) -> dict[str, ndarray]``: statistics of one partition. Every
  array must be additive across partitions (counts and sums over a fixed shape that depends
  only on the frame, such as ``[segment, month]``), because partitions hold disjoint loans;
- ``estimate(stats: dict[str, ndarray], frame: Frame) -> result``: the estimate from the
  summed statistics (a frozen dataclass of frames).

``calibrate(..., estimators=[...])`` runs extra ones beside the built-in set; their results
are in ``Calibration.results`` under their names. Nothing else has to change.

Implements
----------
Estimator    a named (collect, estimate) pair
ESTIMATORS   the built-in estimators, by name
Estimates    the estimates of a history (no assumptions drafted)
estimate     history -> Estimates
Calibration  everything a calibration produced
calibrate    the library entry point: history (+ policy) -> Calibration
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from allowance.calibrate import (
    ccf,
    cohorts,
    hazards,
    lgd,
    loss_methods,
    loss_rates,
    payment_rates,
    prepayment,
    roll_rates,
    vintages,
)
from allowance.calibrate.assumptions import AssumptionsDraft, build_assumptions
from allowance.calibrate.frame import Frame, MonthView, build_frame, month_view
from allowance.calibrate.settings import CalibrationSettings, Choice, settings_choices
from allowance.exceptions import AssumptionsError, HistoryError
from allowance.intake.performance import HistoryIntake, read_history


@dataclass(frozen=True)
class Estimator:
    """An estimate made from the panel: additive statistics per partition, then the estimate."""

    name: str
    collect: Callable[[MonthView], dict[str, np.ndarray]]
    estimate: Callable[[dict[str, np.ndarray], Frame], Any]


#: The built-in estimators, in the order the evidence workbook shows them.
ESTIMATORS: dict[str, Estimator] = {
    e.name: e
    for e in (
        Estimator("roll_rates", roll_rates.collect, roll_rates.estimate),
        Estimator("loss_rates", loss_rates.collect, loss_rates.estimate),
        Estimator("loss_methods", loss_methods.collect, loss_methods.estimate),
        Estimator("cohorts", cohorts.collect, cohorts.estimate),
        Estimator("hazards", hazards.collect, hazards.estimate),
        Estimator("vintages", vintages.collect, vintages.estimate),
        Estimator("lgd", lgd.collect, lgd.estimate),
        Estimator("ccf", ccf.collect, ccf.estimate),
        Estimator("payment_rates", payment_rates.collect, payment_rates.estimate),
        Estimator("prepayment", prepayment.collect, prepayment.estimate),
    )
}


@dataclass(frozen=True)
class Calibration:
    """What a calibration produced.

    Attributes
    ----------
    intake : HistoryIntake
        Rows read, accepted and rejected (with reasons), findings, the file's SHA-256. Its
        panel is closed: the rows are no longer held.
    frame : Frame
        The as-of month, the window, and each segment's charge-off point and PD source.
    results : dict
        Each estimator's result by name (``roll_rates``, ``loss_rates``, ``loss_methods``, ``cohorts``,
        ``hazards``, ``vintages``, ``lgd``, ``ccf``, ``payment_rates``, ``prepayment``, and
        any extra estimators).
    assumptions : AssumptionsDraft
        The assumptions file to write: every value with the comment saying how it was made.
    choices : list of Choice
        Every choice made, its value and where it came from.
    rows_after_as_of : int
        Accepted rows after the as-of month (read, not used).
    policy_file : Path or None
        The policy file the non-estimated tables came from.
    """

    intake: HistoryIntake
    frame: Frame
    results: dict[str, Any]
    assumptions: AssumptionsDraft
    choices: list[Choice]
    settings: CalibrationSettings
    rows_after_as_of: int = 0
    policy_file: Path | None = None
    history_file: Path | None = None
    macro_file: Path | None = None

    def __getattr__(self, name: str) -> Any:
        results = self.__dict__.get("results", {})
        if name in results:
            return results[name]
        raise AttributeError(name)


def _load_policy(policy: Mapping[str, Any] | Path | str | None) -> tuple[dict[str, Any], Path | None]:
    if policy is None:
        return {}, None
    if isinstance(policy, Mapping):
        return {k: v for k, v in policy.items()}, None
    path = Path(policy)
    from allowance.intake.policy import read_policy

    return read_policy(path), path


def _settings(settings: CalibrationSettings | Mapping[str, Any] | None, table: Mapping[str, Any],
              policy_file: Path | None) -> tuple[CalibrationSettings, set[str]]:
    given = dict(table)
    if isinstance(settings, CalibrationSettings):
        given.update(settings.model_dump(exclude_unset=True))
    elif settings is not None:
        given.update(settings)
    try:
        return CalibrationSettings.model_validate(given), set(given)
    except Exception as err:  # pydantic ValidationError: name the key in plain words
        errors = getattr(err, "errors", lambda: [])()
        where = ".".join(str(p) for p in errors[0]["loc"]) if errors else ""
        reason = errors[0]["msg"] if errors else str(err)
        raise AssumptionsError(
            reason[:1].lower() + reason[1:], file=policy_file, column=f"calibration.{where}" if where else "calibration",
            hint="see 'allowance calibrate --help' for the settings and their allowed values",
        ) from err


@dataclass(frozen=True)
class Estimates:
    """The estimates of a history, before any assumptions are drafted from them.

    ``intake`` (its panel closed), ``frame``, ``results`` by estimator name, the rows after
    the as-of month, and the settings with the names of those that were given.
    """

    intake: HistoryIntake
    frame: Frame
    results: dict[str, Any]
    settings: CalibrationSettings
    given: frozenset[str]
    rows_after_as_of: int
    history_file: Path

    def __getattr__(self, name: str) -> Any:
        results = self.__dict__.get("results", {})
        if name in results:
            return results[name]
        raise AttributeError(name)


def estimate(
    history: Path | str,
    settings: CalibrationSettings | Mapping[str, Any] | None = None,
    *,
    estimators: Iterable[Estimator] = (),
    spill_dir: Path | None = None,
    memory_rows: int | None = None,
    policy_file: Path | None = None,
    policy_settings: Mapping[str, Any] | None = None,
) -> Estimates:
    """Read a history and run every estimator over it (no assumptions drafted).

    Parameters are those of :func:`calibrate`; ``policy_settings`` is a ``[calibration]``
    table that ``settings`` overrides.
    """
    settings, given = _settings(settings, policy_settings or {}, policy_file)
    history = Path(history)
    run = dict(ESTIMATORS)
    for extra in estimators:
        run[extra.name] = extra
    options = {} if memory_rows is None else {"memory_rows": memory_rows}
    with read_history(history, columns=settings.columns, date_format=settings.date_format,
                      spill_dir=spill_dir, **options) as intake:
        if intake.rows_accepted == 0:
            raise HistoryError("no row was accepted, so nothing can be estimated", file=history,
                               hint="see the rejected rows: every one is listed with its line and reason")
        frame = build_frame(intake.panel, intake.first_month, intake.last_month, settings, given)
        stats: dict[str, dict[str, np.ndarray]] = {}
        dropped = 0
        for part in intake.panel.parts():
            view, cut = month_view(part, frame)
            dropped += cut
            for name, estimator in run.items():
                found = estimator.collect(view)
                stats[name] = found if name not in stats else {k: stats[name][k] + v for k, v in found.items()}
        results = {name: estimator.estimate(stats[name], frame) for name, estimator in run.items()}
    return Estimates(intake=intake, frame=frame, results=results, settings=settings, given=frozenset(given),
                     rows_after_as_of=dropped, history_file=history)


def calibrate(
    history: Path | str,
    settings: CalibrationSettings | Mapping[str, Any] | None = None,
    policy: Mapping[str, Any] | Path | str | None = None,
    *,
    estimators: Iterable[Estimator] = (),
    spill_dir: Path | None = None,
    memory_rows: int | None = None,
    macro: Path | str | None = None,
) -> Calibration:
    """Calibrate assumptions from a monthly performance history.

    Parameters
    ----------
    history
        The history file (CSV or Parquet; see :class:`allowance.schemas.HistoryRecord`).
    settings
        :class:`CalibrationSettings` or a mapping of its fields; these override the policy
        file's ``[calibration]`` table.
    policy
        A policy file (TOML, the assumptions-file shape) or mapping: the tables that are not
        estimated from history (``[run]``, ``[ifrs9]``, ``[cecl]``, ``[scenarios.*]``,
        ``[[overlays]]``) and segment keys that override an estimate (``lgd``,
        ``collateral_lgd``, ``psa``, ``retail_class``, ...), plus ``[calibration]`` settings.
        Without one, the non-estimated tables get stated placeholders to review.
    estimators
        Extra estimators run beside :data:`ESTIMATORS`.
    spill_dir, memory_rows
        Where a large history is spilled, and above how many rows (see :func:`read_history`).
    macro
        A macro history (:func:`allowance.intake.read_macro_history`): the satellite model the
        policy names for a segment is then fitted to the segment's monthly charge-offs
        (:mod:`allowance.calibrate.satellites`) and its coefficients written.

    Returns
    -------
    Calibration
        The estimates, the draft assumptions and every choice made;
        :func:`allowance.report.calibration.write_calibration` writes the files.

    Raises
    ------
    InputFileError, HistoryError, AssumptionsError
        A bad file, a history with nothing to estimate from, or a bad policy or setting.
    """
    table, policy_file = _load_policy(policy)
    raw_settings = table.pop("calibration", {}) or {}
    if not isinstance(raw_settings, Mapping):
        raise AssumptionsError("[calibration] must be a table", file=policy_file, column="calibration")
    found = estimate(history, settings, estimators=estimators, spill_dir=spill_dir, memory_rows=memory_rows,
                     policy_file=policy_file, policy_settings=raw_settings)
    choices = [*found.frame.choices, *settings_choices(found.settings, set(found.given))]
    results = dict(found.results)
    results["satellites"] = {}
    macro_file = None if macro is None else Path(macro)
    if macro_file is not None:
        from allowance.calibrate.satellites import fit_satellites
        from allowance.intake.macro_series import read_macro_history

        rule = (table.get("macro", {}) or {}).get("interpolation") or found.settings.macro_interpolation
        series = read_macro_history(macro_file)
        results["satellites"] = fit_satellites(results["hazards"].monthly, found.frame, series.monthly(rule),
                                               table.get("segments", {}) or {}, policy_file)
        choices.append(Choice("macro_interpolation", rule, "policy" if "macro" in table else "default",
                              f"{series.frequency} macro history {macro_file.name}"
                              + (": quarters to months by this rule" if series.frequency == "quarterly" else "")))
    draft = build_assumptions(results, found.frame, table, policy_file, found.intake, found.history_file,
                              macro_file)
    choices += draft.choices
    return Calibration(intake=found.intake, frame=found.frame, results=results, assumptions=draft,
                       choices=choices, settings=found.settings, rows_after_as_of=found.rows_after_as_of,
                       policy_file=policy_file, history_file=found.history_file, macro_file=macro_file)
