"""The library API: a whole reserve run from a tape and assumptions, frames in and frames out.

``import allowance`` gives these functions; the command line calls them and nothing deeper.

Implements
----------
run             read, validate, tie out, compute, explain the movement and the what-if -> Result
check           read and validate a tape only -> CheckResult
schedule        one loan's month-by-month schedule on the engine's own terms and curves
roll_rates      what each roll-rate matrix implies from every delinquency bucket
compare         the allowance movement between two finished runs
copy_templates  the blank input templates into a folder
copy_demo_inputs  the demo quarter's input files into a folder
demo            the shipped demo quarter end: last quarter, then this quarter with its movement

Inputs
------
A tape is a path (CSV, XLSX, Parquet) or a pandas DataFrame with the tape's columns; it goes
through the same rules either way. Assumptions are a path (TOML) or a mapping in the file's
shape, where a segment's ``transition_matrix`` may be a DataFrame. Overlays are paths or
mappings, merged over the assumptions in order.
"""

from __future__ import annotations

import dataclasses
import functools
import os
import shutil
import time
import tomllib
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from datetime import date
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from allowance import intake  # the rest is imported where used: a check needs only intake
from allowance.exceptions import AllowanceError, AssumptionsError, InputFileError, TieOutError
from allowance.result import CheckResult, Result
from allowance.schemas import Assumptions, Framework, InputFile, RunConfig

if TYPE_CHECKING:
    from allowance import engine, reconcile

__all__ = ["Demo", "Schedule", "check", "compare", "copy_demo_inputs", "copy_templates", "demo", "roll_rates", "run",
           "schedule"]

Tape = str | os.PathLike | pd.DataFrame
Source = str | os.PathLike | Mapping[str, Any]
#: the assumptions as a file, a mapping, or an object :func:`allowance.intake.load_assumptions` made
AssumptionsSource = Source | Assumptions | RunConfig
Progress = Callable[[str, int, int], Any]


def _config(assumptions: AssumptionsSource, overlays: Sequence[Source] = ()) -> RunConfig:
    if isinstance(assumptions, RunConfig):
        assumptions = assumptions.assumptions
    if isinstance(assumptions, Assumptions):  # validated already: its fields as given, checked again
        assumptions = assumptions.model_dump(mode="json", by_alias=True, exclude_unset=True)
    if not isinstance(assumptions, (Mapping, str, os.PathLike)):
        raise TypeError(f"assumptions: a path to a TOML file, a mapping in its shape, or an Assumptions or "
                        f"RunConfig object (allowance.intake.load_assumptions), not {type(assumptions).__name__}")
    source = assumptions if isinstance(assumptions, Mapping) else Path(assumptions)
    return intake.load_assumptions(source, [o if isinstance(o, Mapping) else Path(o) for o in overlays])


def _tape(tape: Tape) -> Path | pd.DataFrame:
    return tape if isinstance(tape, pd.DataFrame) else Path(tape)


def _read_tape(tape: Path | pd.DataFrame, config: RunConfig, map: Callable | None = None, *,
               accepted_later: bool = False) -> intake.IntakeResult:
    """The tape through intake: a folder of Parquet files always part by part, a Parquet file
    part by part when the engine has a ``map`` (its row groups validated where they run).
    ``accepted_later``: the accepted frame built only when read (a check needs its count and total)."""
    if isinstance(tape, pd.DataFrame) or not (tape.is_dir() or (map is not None and intake.is_partitioned(tape))):
        return intake.read_tape(tape, config, accepted_later=accepted_later)
    return intake.read_parts(tape, config, **({"map": map} if map is not None else {}))


def _relabel(config: RunConfig, label: str) -> RunConfig:
    run_section = config.assumptions.run.model_copy(update={"label": label})
    return config.model_copy(update={"assumptions": config.assumptions.model_copy(update={"run": run_section})})


def _described(value: Any) -> Any:
    """A parameter as the run record keeps it: paths as text, frames and objects by what they are."""
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    if isinstance(value, pd.DataFrame):
        return f"a DataFrame of {len(value):,} rows and {len(value.columns):,} columns"
    if isinstance(value, Result):
        run_section = value.config.assumptions.run
        return f"a Result as of {run_section.as_of.isoformat()}" + (f" ({run_section.label})" if run_section.label else "")
    if isinstance(value, Mapping):
        return "a mapping (the merged assumptions are in the record's assumptions)"
    if isinstance(value, (list, tuple)):
        return [_described(v) for v in value]
    if callable(value):
        return getattr(value, "__qualname__", type(value).__name__)
    return type(value).__name__


def _call(function: str, **parameters: Any) -> dict[str, Any]:
    """A library call's parameters, for the run record: ``{"function": ..., name: value, ...}``."""
    return {"function": function, **{name: _described(v) for name, v in parameters.items()}}


def _tie_out(taken: intake.IntakeResult, config: RunConfig, ledger_balance: float | None,
             accept: bool = False, accepted_balance: float | None = None) -> intake.TieOut:
    run_section = config.assumptions.run
    ledger = ledger_balance if ledger_balance is not None else run_section.ledger_balance
    return intake.tie_out(taken, ledger, run_section.ledger_tolerance, accept, accepted_balance=accepted_balance)


def _require_tie(tie: intake.TieOut, taken: intake.IntakeResult) -> None:
    if not tie.within_tolerance and not tie.accepted_by_user:
        raise TieOutError(
            tie.explanation, file=taken.file.path,
            hint="correct the tape or the ledger figure, or accept the difference "
                 "(--accept-ledger-difference) to record it and go on",
        )


# --------------------------------------------------------------------------------------
# check
# --------------------------------------------------------------------------------------


def _same_model(one: RunConfig, other: RunConfig) -> bool:
    """Whether two configurations differ at most in their overlays (post-model adjustments)."""
    return one.assumptions.model_dump(exclude={"overlays"}) == other.assumptions.model_dump(exclude={"overlays"})


def check(tape: Tape, assumptions: AssumptionsSource, *, overlays: Sequence[Source] = (),
          ledger_balance: float | None = None) -> CheckResult:
    """Validate a tape against the assumptions without computing anything.

    Every rule :func:`run` applies is applied here (the same intake), so a tape that passes
    ``check`` is one ``run`` can compute, and a row ``check`` rejects is the row ``run``
    rejects.

    Parameters
    ----------
    tape
        A path (CSV, XLSX, Parquet, or a folder of Parquet files) or a DataFrame with the tape's columns.
    assumptions
        A path (TOML), a mapping in the assumptions file's shape, or the ``Assumptions`` /
        ``RunConfig`` that :func:`allowance.intake.load_assumptions` returns.
    overlays
        Overlay files or mappings merged over the assumptions.
    ledger_balance
        The ledger control total (overrides ``[run] ledger_balance``).

    Returns
    -------
    CheckResult
        ``ok``, ``table`` (counts by reason), ``rejected``, ``findings``, ``tie_out``.

    Raises
    ------
    AllowanceError
        A file cannot be read, or the assumptions are invalid (naming the file and key).
    """
    config = _config(assumptions, overlays)
    taken = _read_tape(_tape(tape), config, accepted_later=True)
    return CheckResult(intake=taken, tie_out=_tie_out(taken, config, ledger_balance))


# --------------------------------------------------------------------------------------
# run
# --------------------------------------------------------------------------------------


def _prior_frameworks(record: Mapping) -> list[str]:
    return list(record.get("frameworks") or record.get("assumptions", {}).get("run", {}).get("frameworks", []))


def _record_currency(record: Mapping | None) -> str | None:
    record = record or {}
    return record.get("currency") or record.get("assumptions", {}).get("run", {}).get("currency")


def _early_record(folder: Path) -> dict | None:
    """A prior run's record read before the run computes, to refuse a mismatch at once; None
    when it cannot be read (the prior run is read again later by the same reader,
    :func:`allowance.intake.history.read_run_record`, and its errors are raised there)."""
    from allowance.intake.history import read_run_record

    try:
        return read_run_record(folder / "run.json")
    except (AllowanceError, OSError, ValueError):
        return None


def _same_currency(prior: Mapping | None, current: str | None, source: str) -> None:
    """Refuse a movement between runs in two currencies: the opening and closing allowance would
    be added in different units (a run records its currency; an older record without it passes).

    >>> _same_currency({"currency": "USD"}, "USD", "q2")
    >>> _same_currency({"currency": "EUR"}, "USD", "q2")
    Traceback (most recent call last):
    ...
    allowance.exceptions.MovementError: q2: the prior run's amounts are in EUR and this run's in USD: a movement needs both in one currency (fix: run the prior quarter again in USD, or this one in EUR)
    """
    from allowance.exceptions import MovementError

    before = _record_currency(prior)
    if before and current and before != current:
        raise MovementError(f"the prior run's amounts are in {before} and this run's in {current}: a movement needs "
                            "both in one currency", file=source,
                            hint=f"run the prior quarter again in {current}, or this one in {before}")


def _prior_config(record: Mapping | None, config: RunConfig) -> RunConfig | None:
    """Last quarter's assumptions (from its run record) at this quarter's date, for the
    frameworks both runs compute; None when the record has none or they no longer validate."""
    data = (record or {}).get("assumptions")
    if not data:
        return None
    try:
        data = dict(data)
        data["run"] = {**data["run"], "as_of": config.as_of.isoformat(),
                       "frameworks": [fw for fw in config.frameworks if fw in data["run"]["frameworks"]]}
        return RunConfig(assumptions=Assumptions.model_validate(data), base_dir=config.base_dir)
    except (AllowanceError, ValueError):
        # pydantic's ValidationError is a ValueError: the prior assumptions no longer validate
        return None


#: With a prior run whose model differs from this run's, this tape at the prior assumptions is
#: computed in the run's own pass (each chunk at the prior tables right after it:
#: :func:`allowance.engine.run`'s ``modelled_under``) rather than in a second pass over the
#: tape (:func:`allowance.engine.modelled`); the same figures to the bit. False: the second
#: pass (the tests' reference).
_PRIOR_IN_THE_SAME_PASS = True


def _rerun_at_prior_assumptions(tape: pd.DataFrame, prior_config: RunConfig | None,
                                compute: Callable[..., pd.DataFrame]) -> pd.DataFrame | None:
    """This quarter's tape under last quarter's assumptions (:func:`_prior_config`): isolates
    assumption changes. Only the modelled ECL per framework is computed
    (:func:`allowance.engine.modelled`): the movement's remeasurement reads nothing else of it."""
    if prior_config is None:
        return None
    try:
        return compute(tape, prior_config)
    except (AllowanceError, ValueError):
        return None


def _same_model_recorded(prior: Mapping | None, current: Mapping | None) -> bool:
    """Whether two finished runs' records hold assumptions that give the loop the same inputs,
    weights included (:func:`allowance.engine.same_model`), for the same frameworks."""
    from allowance import engine

    try:
        data = (current or {}).get("assumptions")
        config = RunConfig(assumptions=Assumptions.model_validate(data)) if data else None
    except (AllowanceError, ValueError):
        return False
    before = _prior_config(prior, config) if config is not None else None
    return before is not None and before.frameworks == config.frameworks and engine.same_model(before, config)


def _modelled_of(loans: pd.DataFrame, frameworks: Sequence[str]) -> pd.DataFrame:
    """The columns :func:`allowance.engine.modelled` gives (``loan_id, ecl_<framework>_modelled``),
    taken from a run whose configuration gives the loop the same inputs (the columns shared,
    not copied)."""
    return pd.DataFrame({"loan_id": loans["loan_id"].array,
                         **{f"ecl_{fw}_modelled": loans[f"ecl_{fw}_modelled"].array for fw in frameworks}}, copy=False)


@dataclass(frozen=True)
class _Prior:
    loans: pd.DataFrame | intake.LoanFigures
    record: Mapping
    source: str


def _prior(prior: str | os.PathLike | Result, role: str = "prior", *,
           vintages: bool = False, recorded: bool = True) -> tuple[_Prior, list]:
    """A finished run's loans and record: from a folder, only the loans.csv columns the movement
    reads, each kept as the movement reads it (:func:`allowance.intake.read_prior_figures`; a
    frame of them when a value needs its message, or, with ``vintages``, with the columns
    that date a write-off for the vintage disclosure), and (``recorded``) the two files'
    records for the run record, each file hashed."""
    if isinstance(prior, Result):
        return _Prior(prior.loans, prior.record, f"the {role} result"), []
    from allowance.reconcile import movement_columns, movement_kinds

    folder = Path(prior)
    previous = (None if vintages else intake.read_prior_figures(folder, movement_kinds(), role)) or \
        intake.read_prior_run(folder, role, columns=movement_columns(vintages=vintages))
    # a book computed part by part: its loan detail is the Parquet folder its run.json names
    detail = previous.source if previous.source is not None and previous.source.is_dir() else None
    loans = intake.detail_files(detail) if detail is not None else [folder / "loans.csv"]
    return _Prior(previous.loans, previous.record, str(detail or folder / "loans.csv")), [
        *(intake.file_record(p, "prior") for p in loans), intake.file_record(folder / "run.json", "prior")
    ] if recorded else []


def _read_again_when_asked(taken: intake.IntakeResult, source: Path, config: RunConfig) -> intake.IntakeResult:
    """``taken`` with its accepted rows let go, read again from ``source`` the first time they
    are asked for (:class:`allowance.intake.results.Later`); the row count and balance total
    are kept. A run with a prior run holds the movement's loan lines through the writing, where
    the accepted rows were held for nothing (a million loans: some 330 MB)."""
    from allowance.intake.results import Later

    accepted = taken.accepted
    rows, balance = len(accepted), float(accepted["balance"].to_numpy(dtype=np.float64).sum())
    return taken.replaced(accepted=Later(functools.partial(_accepted_again, source, config, taken.file), rows, balance))


def _accepted_again(source: Path, config: RunConfig, file: InputFile) -> pd.DataFrame:
    """The accepted rows of a tape read again: the same file (its SHA-256 and size), or an error."""
    again = _read_tape(source, config)
    if (again.file.sha256, again.file.bytes) != (file.sha256, file.bytes):
        raise InputFileError("the tape has changed since the run read it, so its accepted rows cannot be read "
                             "again", file=source, hint="keep the tape a run read, or rerun it")
    return again.accepted


def _record_as_of(record: Mapping[str, Any] | None) -> date | None:
    """A finished run's as-of date from its run record (None when it has none)."""
    try:
        return date.fromisoformat(str((record or {})["as_of"])[:10])
    except (KeyError, ValueError):
        return None


def _method_changes(prior_record: Mapping[str, Any] | None, current: Mapping[str, Any] | None):
    """The models or methods that changed between two runs' assumptions (None: not known)."""
    from allowance import reconcile
    before = (prior_record or {}).get("assumptions")
    if not before or current is None:
        return None
    return reconcile.method_changes(before, current)


def _charge_offs(charge_offs: str | os.PathLike | pd.DataFrame | None) -> tuple[pd.DataFrame | None, list, str | None]:
    if charge_offs is None:
        return None, [], None
    if isinstance(charge_offs, pd.DataFrame):
        return charge_offs, [], "the charge-off frame"
    path = Path(charge_offs)
    return intake.read_charge_offs(path), [intake.file_record(path, "charge_offs")], str(path)


def run(
    tape: Tape,
    assumptions: AssumptionsSource,
    *,
    overlays: Sequence[Source] = (),
    prior: str | os.PathLike | Result | None = None,
    charge_offs: str | os.PathLike | pd.DataFrame | None = None,
    ledger_balance: float | None = None,
    accept_ledger_difference: bool = False,
    label: str | None = None,
    sensitivities: bool = True,
    map: Callable | None = None,  # the executor's word for it
    chunk_size: int | None = None,
    progress: Progress | None = None,
    invocation: Mapping[str, Any] | None = None,
    loans_parquet: str | os.PathLike | None = None,
    loans_ready: Callable[[pd.DataFrame], object] | None = None,
) -> Result:
    """A whole reserve run: read, validate, tie out, compute, explain the movement and the what-if.

    Parameters
    ----------
    tape
        A path (CSV, XLSX, Parquet, or a folder of Parquet files) or a DataFrame with the tape's columns.
    assumptions
        A path (TOML), a mapping in the assumptions file's shape, or the ``Assumptions`` /
        ``RunConfig`` that :func:`allowance.intake.load_assumptions` returns (checked again,
        and fingerprinted as a mapping).
    overlays
        What-if files or mappings merged over the assumptions; the base run (without them) is
        computed too and compared (``Result.what_if``).
    prior
        Last quarter's output folder, or its :class:`Result`: the movement is explained loan
        by loan (``Result.movement``).
    charge_offs
        The period's write-offs (a path or a frame: ``loan_id, gross_charge_off,
        recoveries``), for the movement.
    ledger_balance
        The ledger control total (overrides ``[run] ledger_balance``).
    accept_ledger_difference
        Go on when the tape does not tie to the ledger (recorded in the run record).
    label
        A name for the run, kept in the run record.
    sensitivities
        Also each scenario alone at 100 % weight (``Result.sensitivity``): computed in the same
        pass through the loop, equal to a rerun with that scenario alone
        (:func:`allowance.engine.run`'s ``alone``).
    map
        An executor-style map the engine hands its chunks to (``ProcessPoolExecutor().map``);
        the builtin ``map`` when None. A Parquet tape is then read and validated part by part
        (row group by row group) through it too (:func:`allowance.intake.read_parts`).
    chunk_size
        Loans per chunk (default :data:`allowance.engine.CHUNK_SIZE`; without a ``map``
        :data:`allowance.engine.IN_PROCESS_CHUNK_SIZE`, two chunks computed at a time).
    progress
        Called as ``progress(phase, done, total)``: ``"read"`` (the tape), ``"loans"`` (loans
        computed, of all loans), ``"sensitivities"`` (scenarios tabled alone), ``"what-if"`` and
        ``"prior"`` (the extra runs, 0 of 1 then 1 of 1).
    invocation
        How the run was asked for, kept in the run record's ``arguments`` beside this
        call's parameters (the command line passes its command and options).
    loans_parquet
        A folder (absent or empty, reachable at this path from every worker) for the loan
        detail of a Parquet tape computed part by part (:mod:`allowance.partitioned`): each
        row group is read, validated, computed and written there as one Parquet file by
        whichever worker ``map`` sends it to, and only sums come back. The result's
        ``loans`` is then not available (read the folder); ``summary``, ``totals``, the run
        record and the counts are exact. Not with ``prior`` or ``overlays`` (loan by loan
        comparisons), nor an ``amount`` overlay; no sensitivities and no workbook.
    loans_ready
        With ``prior``: called with the run's loan frame (``Result.loans``) once it is final,
        before the movement is made, so that a caller may start writing it meanwhile (the
        command line begins ``loans.csv``: :class:`allowance.report.files.OutputFolder`).
        Not called without ``prior``.

    Returns
    -------
    Result
        ``loans``, ``rejected``, ``totals``, ``summary``, ``movement``, ``what_if``; write
        the outputs with ``write(out_dir)`` or the workbook alone with ``workbook(path)``.

    Raises
    ------
    AllowanceError
        A file cannot be read, the assumptions are invalid, or the tape does not tie to the
        ledger (:class:`TieOutError`) and the difference was not accepted.
    """
    # reconcile (the sensitivities, the what-if and the movement) is imported where it is used:
    # a plain run has none of them and does not load it
    from allowance import disclosure, engine, macro, report
    from allowance.memory import give_back, given_back
    from allowance.report import clock
    started = time.perf_counter()
    started_at = clock.now()
    arguments = {
        "api": _call("allowance.run", tape=tape, assumptions=assumptions, overlays=list(overlays), prior=prior,
                     charge_offs=charge_offs, ledger_balance=ledger_balance,
                     accept_ledger_difference=accept_ledger_difference, label=label, sensitivities=sensitivities,
                     map=map, chunk_size=chunk_size, **({"loans_parquet": loans_parquet} if loans_parquet else {})),
        **dict(invocation or {}),
    }
    told = progress or (lambda phase, done, total: None)
    options: dict[str, Any] = {"progress": progress}
    if map is not None:
        options["map"] = map
    if chunk_size is not None:
        options["chunk_size"] = chunk_size

    def compute(frame: pd.DataFrame, config: RunConfig, **more) -> engine.EngineResult:
        return engine.run(frame, config, **{**options, **more})

    config = _config(assumptions, overlays)
    if label is not None:
        config = _relabel(config, label)
    source = _tape(tape)
    if loans_parquet is not None:
        if overlays:
            raise AllowanceError("a what-if overlay needs the whole loan frame in one process (the base run is "
                                 "compared loan by loan); run it without the Parquet loan detail")
        if charge_offs is not None and prior is None:
            raise AllowanceError("a charge-off file is read with a prior run (the movement's write-offs); give --prior")
        return _run_book(source, config, Path(loans_parquet), map=map, chunk_size=chunk_size, progress=progress,
                         ledger_balance=ledger_balance, accept=accept_ledger_difference, sensitivities=sensitivities,
                         arguments=arguments, started=(started, started_at), prior=prior, charge_offs=charge_offs)
    # the prior run's folder is read (its loans.csv parsed, its files hashed) on a thread of its
    # own while the tape is read and computed: Arrow parses and hashlib hashes outside the GIL, on
    # the core the single-threaded steps leave idle. Its errors are raised where it is used.
    reading_prior = None
    early = None  # the prior run's record, read before anything is computed
    if isinstance(prior, Result):  # refused before anything is computed
        early = prior.record
        _same_currency(early, config.assumptions.run.currency, "the prior result")
    elif prior is not None:
        early = _early_record(Path(prior))
        _same_currency(early, config.assumptions.run.currency, str(Path(prior) / "run.json"))
        reader = ThreadPoolExecutor(1, thread_name_prefix="allowance-prior")
        reading_prior = reader.submit(given_back, _prior, prior, vintages=charge_offs is not None)
        reader.shutdown(wait=False)  # the thread ends with its one task
    told("read", 0, 1)
    taken = _read_tape(source, config, map)
    taken.require_accepted()  # a run of no loans is not a run: exit 1 with the commonest reasons
    told("read", 1, 1)
    tie = _tie_out(taken, config, ledger_balance, accept_ledger_difference)
    _require_tie(tie, taken)
    # the what-if's base: the same loop's figures when only [[overlays]] differ (reapplied after
    # it), or when the scenario weights differ too (weighted again in the same pass)
    base_config = _config(assumptions) if overlays else None
    reweighted = ([base_config] if base_config is not None and not _same_model(base_config, config)
                  and engine.only_weights_differ(base_config, config) else [])
    # this tape at the prior run's assumptions (the movement's remeasurement): a second pass,
    # unless they give the loop this run's inputs ("run": its own modelled figures) or those
    # but for the scenario weights ("weights": its modelled figures weighted again in this pass)
    prior_config = _prior_config(early, config) if early is not None else None
    prior_model = None
    if prior_config is not None and prior_config.frameworks == config.frameworks:
        if engine.same_model(prior_config, config):
            prior_model = "run"
        elif engine.only_weights_differ(prior_config, config):
            prior_model = "weights"
    if prior_config is not None and prior_model is None and _PRIOR_IN_THE_SAME_PASS:
        prior_model = "beside"  # each chunk computed at the prior tables too, right after it
    # the one-scenario sensitivities: each scenario alone at weight 1, weighted again in the same
    # pass (the loop's per-scenario losses and the stages do not depend on the weights)
    names = list(config.assumptions.scenarios)
    alone = names if sensitivities and len(names) > 1 else []
    result = compute(taken.accepted, config, **({"reweighted": reweighted} if reweighted else {}),
                     **({"alone": alone} if alone else {}),
                     **({"modelled_under": [prior_config]} if prior_model in ("weights", "beside") else {}))
    inputs = list(config.inputs)

    sensitivity = pd.DataFrame()
    if alone:
        from allowance import reconcile

        told("sensitivities", 0, len(names))
        sensitivity = reconcile.sensitivity_table(result.loans, result.alone, config)
        told("sensitivities", len(names), len(names))
        result = dataclasses.replace(result, alone={})  # the per-scenario loan figures go once tabled
    # the months the engine's tables cover (a second tape_months costs seconds on a large book)
    months = result.months if result.months is not None else engine.tape_months(taken.accepted, config)
    macro_paths = macro.macro_path_table(config.assumptions, months)
    from allowance.curves import segment_roll_forecasts  # the balance roll-rate forecast, for the workbook

    roll_by_month, roll_check = segment_roll_forecasts(taken.accepted, config.assumptions.segments, result.loans)

    what_if = None
    what_if_paths = pd.DataFrame()
    if overlays:
        from allowance import reconcile

        told("what-if", 0, 1)
        if _same_model(base_config, config):  # only [[overlays]] differ: the loop's figures are the same
            base = engine.overlaid(result, base_config)
        elif reweighted:
            base = result.reweighted[0]
        else:
            base = compute(taken.accepted, base_config, progress=None)
        what_if = reconcile.what_if_comparison(base.loans, result.loans, config.frameworks)
        what_if_paths = macro.path_changes(base_config.assumptions, config.assumptions, months)
        told("what-if", 1, 1)

    movements = None
    rerun = False  # whether this tape was rerun at the prior run's assumptions
    rerun_why = ""  # why not, when the engine said
    prior_loans = None  # the prior run's loans the vintage disclosure reads (with charge-offs)
    cos = None
    if prior is not None:
        from allowance import reconcile

        told("prior", 0, 1)
        # what the steps since the engine freed stays in this thread's heap, where the second
        # pass's chunk threads cannot reuse it: handed back before they make their own
        give_back()
        previous, prior_inputs = (reading_prior.result() if reading_prior is not None
                                  else _prior(prior, vintages=charge_offs is not None))
        reading_prior = None
        prior_frameworks = _prior_frameworks(previous.record)
        cos, co_inputs, co_source = _charge_offs(charge_offs)
        inputs += co_inputs + prior_inputs
        if prior_model is None:
            # the record read again with the loans (an early read that failed gives no config)
            at_prior = _rerun_at_prior_assumptions(taken.accepted, _prior_config(previous.record, config),
                                                   lambda frame, at: engine.modelled(
                                                       frame, at, stages_from=(config, result.loans),
                                                       **{k: v for k, v in options.items() if k != "progress"}))
        elif prior_model == "run":  # the figures a second pass would give, without it
            at_prior = _modelled_of(result.loans, prior_config.frameworks)
        else:  # weighted again in this run's pass, or computed in it at the prior tables
            at_prior, rerun_why = result.modelled_under[0], result.modelled_under_why[0]
            result = dataclasses.replace(result, modelled_under=(), modelled_under_why=())
        if isinstance(source, Path):
            # nothing after the second pass reads the tape's accepted rows: they go before the
            # movement is made and the outputs are written, read again from the file if asked for
            taken = _read_again_when_asked(taken, source, config)
        if loans_ready is not None:  # the loans are final: their file may be written beside the movement
            loans_ready(result.loans)
        movements = reconcile.compare_runs(
            previous.loans, result.loans, charge_offs=cos,
            current_at_prior_assumptions=at_prior,
            frameworks=[fw for fw in config.frameworks if fw in prior_frameworks],
            sources={"prior": previous.source, "current": "this run", **({"charge_offs": co_source} if co_source else {})},
            prior_as_of=_record_as_of(previous.record), current_as_of=config.as_of,
            method_changes=_method_changes(previous.record, config.assumptions.model_dump(mode="json")),
        )
        rerun = at_prior is not None
        if cos is not None:  # the write-offs' vintages: the prior run's dates of its loans
            prior_loans = previous.loans[[c for c in ("loan_id", "origination_date", "repayment")
                                          if c in previous.loans.columns]]
        # the prior run's other columns and the rerun are not read again: their memory (and what
        # the movement's working arrays left with the allocators) goes before the report is made
        previous = at_prior = None
        give_back()
        told("prior", 1, 1)

    config = config.model_copy(update={"inputs": inputs})
    warnings = [*taken.notes, *result.warnings]  # tape-level notes: renamed columns, lines in values
    if movements is not None:
        unmatched = [fw for fw in config.frameworks if fw not in movements]
        if unmatched:
            from allowance.frameworks import FRAMEWORK_RULES

            warnings.append(f"no {' or '.join(FRAMEWORK_RULES[fw].label for fw in unmatched)} movement: the "
                            f"prior run did not compute {' or '.join(unmatched)} (it computed "
                            f"{', '.join(prior_frameworks) or 'no framework it records'})")
    if movements is not None and not rerun:
        because = f" ({rerun_why})" if rerun_why else ""
        warnings.append(f"the prior run's assumptions could not be applied to this tape{because}; "
                        "assumption changes are included in remeasurement")
    findings = pd.concat([taken.findings, result.findings], ignore_index=True)
    taken = taken.replaced(findings=findings)  # accepted rows let go (a prior run's) stay so
    # how the movement's figures at the prior assumptions were made, for whoever reviews it
    how = None if not rerun else ("a second pass at the prior run's assumptions" if prior_model is None else
                                  "this run's pass, each chunk computed at the prior run's assumptions too (their "
                                  "own tables; this run's stages where the staging rules are the same)"
                                  if prior_model == "beside" else
                                  "this run's own modelled figures: the prior run's assumptions differ from this "
                                  "run's only in what reaches no modelled figure" if prior_model == "run" else
                                  "this run's pass weighted again: the prior run's assumptions differ from this "
                                  "run's only in the scenario weights and what reaches no modelled figure")
    record = report.run_record(config, taken, result.loans, tie_out=tie, warnings=warnings,
                               movements=tuple((movements or {}).values()), started=started_at,
                               extra={"arguments": arguments, **({"at_prior_assumptions": how} if how else {})})
    disclosures = disclosure.disclosure_tables(result.loans, config.as_of, config.frameworks, charge_offs=cos,
                                               prior_loans=prior_loans)
    run_report = report.RunReport(
        config=config, intake=taken, tie_out=tie, loans=result.loans, overlays=result.overlays, disclosures=disclosures,
        scenarios=result.scenarios, term_structures=result.term_structures,
        roll_rates=result.roll_rates, reversion=result.reversion, schedules=result.schedules,
        sensitivity=sensitivity, macro_paths=macro_paths, what_if_paths=what_if_paths, pd_paths=result.pd_paths,
        roll_forecast=roll_by_month, roll_forecast_check=roll_check, movement=movements,
        what_if=what_if, record=record, warnings=warnings,
    )
    return Result(report=run_report, seconds=time.perf_counter() - started)


def _run_book(source: Path | pd.DataFrame, config: RunConfig, folder: Path, *, map: Callable | None,
              chunk_size: int | None, progress: Progress | None, ledger_balance: float | None, accept: bool,
              sensitivities: bool, arguments: dict, started: tuple[float, Any],
              prior: str | os.PathLike | Result | None = None,
              charge_offs: str | os.PathLike | pd.DataFrame | None = None) -> Result:
    """:func:`run` for a Parquet tape computed part by part, its loan detail written to ``folder``.

    With a ``prior`` run, the movement is made here, in this process, once the parts are
    written: this run's loans read back from its Parquet detail (only the movement's columns,
    as a prior run's are read), the prior run's from its folder. This tape at the prior run's
    assumptions: when they give the loop this run's inputs (:func:`allowance.engine.same_model`)
    this run's own modelled figures; otherwise each part computed at them too where it is
    computed (:func:`allowance.partitioned.compute_part`), 8 bytes a loan and framework back."""
    from allowance import disclosure, engine, macro, partitioned, report

    if isinstance(source, pd.DataFrame) or not intake.is_partitioned(source):
        raise InputFileError("the Parquet loan detail is written part by part from a Parquet tape",
                             file=str(source) if not isinstance(source, pd.DataFrame) else "<DataFrame>",
                             hint="give a Parquet file or a folder of Parquet files")
    early = None  # the prior run's record
    if isinstance(prior, Result):
        early = prior.record
        _same_currency(early, config.assumptions.run.currency, "the prior result")
    elif prior is not None:  # the prior run's folder checked before any part is computed
        _, early = intake.locate_prior_run(Path(prior))
        _same_currency(early, config.assumptions.run.currency, str(Path(prior) / "run.json"))
    # the book at the prior run's assumptions, once its parts are written, unless those are this
    # run's model (then its own modelled figures are that rerun)
    prior_config = _prior_config(early, config) if early is not None else None
    if prior_config is not None and (prior_config.frameworks != config.frameworks
                                     or engine.same_model(prior_config, config)):
        prior_config = None
    ties: list[intake.TieOut] = []

    def tied(taken: intake.IntakeResult, balance: float) -> None:
        ties.append(_tie_out(taken, config, ledger_balance, accept, accepted_balance=balance))
        _require_tie(ties[0], taken)

    book = partitioned.run_book(source, config, folder, check_tape=tied, progress=progress, prior_config=prior_config,
                                **({"map": map} if map is not None else {}),
                                **({"chunk_size": chunk_size} if chunk_size is not None else {}))
    # the columns the data dictionary does not know go to the Parquet detail, not to a loans.csv
    from allowance.intake.results import extra_columns_note

    extra = extra_columns_note(book.intake.extra_columns) if book.intake.extra_columns else None
    notes = [extra_columns_note(book.intake.extra_columns, into="the loan detail's Parquet files")
             if note == extra else note for note in book.intake.notes]
    warnings = [*notes, *book.warnings,
                f"the loan detail is in {folder} (Parquet, one file per part of the tape); summary.xlsx is made "
                "from the sums the parts sent back, and no reserve.xlsx is written for a book computed part by part "
                "(its loan sheet and schedules need the loans themselves)"]
    if sensitivities and len(config.assumptions.scenarios) > 1:
        warnings.append("the one-scenario sensitivities are not computed for a book computed part by part")
    movements, inputs, how = None, list(config.inputs), None
    if prior is not None:
        movements, more, how = _book_movement(folder, config, prior, charge_offs, warnings, progress, book.at_prior)
        inputs += more
        config = config.model_copy(update={"inputs": inputs})
    taken = dataclasses.replace(book.intake, findings=pd.concat([book.intake.findings, book.findings], ignore_index=True))
    count = int(book.loans[partitioned.COUNT].sum())
    # the folder as an absolute path: a later run reads the detail from wherever it runs (run --prior, compare)
    detail = os.path.abspath(folder)
    record = report.run_record(config, taken, book.loans, tie_out=ties[0], warnings=warnings, started=started[1],
                               movements=tuple((movements or {}).values()),
                               extra={"arguments": arguments, "loans": count, "loan_detail": detail,
                                      "loan_detail_files": len(book.files),
                                      **({"at_prior_assumptions": how} if how else {})})
    prep = book.prep
    run_report = report.RunReport(
        config=config, intake=taken, tie_out=ties[0], loans=book.loans, overlays=book.overlays,
        disclosures=disclosure.tables_from_cents(book.disclosures), scenarios=engine.scenario_summary(book.loans, config), term_structures=engine.views.term_structure_table(prep),
        roll_rates=engine.roll_rate_table(config), reversion=engine.reversion_view(prep),
        macro_paths=macro.macro_path_table(config.assumptions, prep.months), pd_paths=book.pd_paths, record=record,
        warnings=warnings, loan_detail=detail, movement=movements,
    )
    return Result(report=run_report, seconds=time.perf_counter() - started[0])


def _book_movement(folder: Path, config: RunConfig, prior: str | os.PathLike | Result,
                   charge_offs: str | os.PathLike | pd.DataFrame | None, warnings: list[str],
                   progress: Progress | None, at_prior: Mapping[str, np.ndarray]) -> tuple[dict, list, str | None]:
    """The movement of a book computed part by part from a prior run (:func:`_run_book`): the
    movements, the input records read for it, and how its figures at the prior assumptions
    were made (None: not made; ``warnings`` says so). ``at_prior``: the book's modelled ECL per
    framework at the prior assumptions, in tape order, when its parts were computed at them
    too (:func:`allowance.partitioned.compute_part`)."""
    from allowance import engine, reconcile
    from allowance.reconcile import movement_kinds

    told = progress or (lambda phase, done, total: None)
    told("prior", 0, 1)
    previous, prior_inputs = _prior(prior)
    cos, co_inputs, co_source = _charge_offs(charge_offs)
    current = intake.read_detail_figures(folder, movement_kinds())
    prior_config = _prior_config(previous.record, config)
    same = (prior_config is not None and prior_config.frameworks == config.frameworks
            and engine.same_model(prior_config, config))
    rerun = current if same else None
    if at_prior:  # the parts computed again: their figures beside this run's ids, in the same order
        ids = (pd.arrays.ArrowExtensionArray(current.ids["loan_id"]) if isinstance(current, intake.LoanFigures)
               else current["loan_id"].array)
        rerun = pd.DataFrame({"loan_id": ids, **at_prior}, copy=False)
    prior_frameworks = _prior_frameworks(previous.record)
    movements = reconcile.compare_runs(
        previous.loans, current, charge_offs=cos, current_at_prior_assumptions=rerun,
        frameworks=[fw for fw in config.frameworks if fw in prior_frameworks],
        sources={"prior": previous.source, "current": str(folder), **({"charge_offs": co_source} if co_source else {})},
        prior_as_of=_record_as_of(previous.record), current_as_of=config.as_of,
        method_changes=_method_changes(previous.record, config.assumptions.model_dump(mode="json")),
    )
    if rerun is None:
        warnings.append("the prior run's assumptions could not be applied to this book: assumption changes are "
                        "included in remeasurement")
    if cos is not None:
        warnings.append("the period's write-offs are in the movement but not in the vintage disclosure of a book "
                        "computed part by part (their origination dates are in the loan detail)")
    told("prior", 1, 1)
    how = ("this run's own modelled figures: the prior run's assumptions differ from this run's only in what "
           "reaches no modelled figure" if same else
           "each part of the book computed at the prior run's assumptions too" if rerun is not None else None)
    return movements, co_inputs + prior_inputs, how


# --------------------------------------------------------------------------------------
# One loan, the matrices, two finished runs
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Schedule:
    """One loan's schedule: ``loan`` (its accepted tape row) and ``table`` (month by month)."""

    loan: pd.Series
    table: pd.DataFrame

    def __repr__(self) -> str:
        return f"<Schedule of loan {self.loan['loan_id']} ({len(self.table)} months)>\n{self.table.to_string(index=False)}"

    @property
    def ecl(self) -> float:
        """The expected credit loss the engine books for the loan in this framework and scenario:
        the sum of the ``ecl`` column (loans.csv's ``ecl_<framework>_<scenario>`` before
        rounding; POCI before the ECL at purchase is taken off)."""
        return float(self.table["ecl"].sum())

    def write_csv(self, path: str | Path) -> Path:
        """Write the table to ``path`` as CSV (``allowance schedule --csv``)."""
        from allowance.report import write_table_csv

        return write_table_csv(Path(path), self.table)


def schedule(tape: Tape, assumptions: AssumptionsSource, loan: str, *, framework: Framework | None = None,
             scenario: str | None = None) -> Schedule:
    """One loan's projected schedule, contractual and expected, on the engine's own terms.

    ``table`` has the columns ``loan_id, framework, scenario, month, measurement,
    opening_balance, interest, scheduled_principal, closing_balance, expected_prepayment,
    expected_default, survival, expected_balance``, then what the engine booked month by month
    over the allowance's horizon: ``ead, marginal_pd, refinance_pd, default_share, lgd,
    discount_factor, gross_loss, ecl`` (:func:`allowance.engine.loan_schedule`; a loan whose
    loss is booked now, in default or measured one by one, has one row, month 0). The ``ecl``
    column sums to the loan's ``ecl_<framework>_<scenario>`` in loans.csv (:attr:`Schedule.ecl`).
    ``framework`` defaults to the first listed, ``scenario`` to the first.

    Raises
    ------
    AllowanceError
        The loan is not among the accepted rows, or the framework or scenario is not run.
    """
    from allowance import cashflows, engine
    config = _config(assumptions)
    taken = _read_tape(_tape(tape), config)
    row = taken.accepted[taken.accepted["loan_id"] == loan]
    if row.empty:
        raise InputFileError(f"loan {loan!r} is not among the accepted rows", file=taken.file.path,
                             hint="check the loan_id, or run 'allowance check' to see rejected rows")
    as_of = pd.Timestamp(config.as_of)
    prep = engine.prepare(config, engine.tape_months(row, config),
                          int(cashflows.age_months(row["origination_date"], as_of).max()))
    if framework is not None and framework not in prep.frameworks:
        raise AssumptionsError(f"framework {framework!r} is not run", column="run.frameworks",
                               hint=f"use one of {', '.join(prep.frameworks)}")
    names = list(prep.scenario_names)
    if scenario is not None and scenario not in names:
        raise AssumptionsError(f"no scenario {scenario!r}", column="scenarios", hint=f"use one of {', '.join(names)}")
    table = engine.loan_schedule(row, prep, framework, names.index(scenario) if scenario else 0)
    return Schedule(loan=row.iloc[0], table=table)


def roll_rates(assumptions: AssumptionsSource, *, segment: str | None = None) -> pd.DataFrame:
    """What each roll-rate matrix implies from every delinquency bucket: 12-month and lifetime
    PD (absorption into charge-off) and expected months to charge-off (empty without matrices)."""
    from allowance import engine
    config = _config(assumptions)
    if segment is not None and segment not in config.assumptions.segments:
        raise AssumptionsError(f"no segment {segment!r}", column="segments",
                               hint=f"use one of {', '.join(config.assumptions.segments)}")
    table = engine.roll_rate_table(config)
    if segment is not None and not table.empty:
        table = table[table["segment"] == segment]
    return table


def roll_forecast(tape: Tape, assumptions: AssumptionsSource, *, segment: str | None = None,
                  months: int = 12) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The tape's delinquency-bucket balances rolled forward through each roll-rate matrix.

    Returns ``(by_month, check)``: charge-offs, payoffs and bucket balances by month per
    roll-rate segment, and the forecast's losses (charge-offs × LGD, 12 months and lifetime)
    beside the segment's loan-level allowance (:func:`allowance.curves.segment_roll_forecasts`).
    """
    from allowance import curves, engine

    config = _config(assumptions)
    if segment is not None and segment not in config.assumptions.segments:
        raise AssumptionsError(f"no segment {segment!r}", column="segments",
                               hint=f"use one of {', '.join(config.assumptions.segments)}")
    taken = _read_tape(_tape(tape), config)
    loans = engine.run(taken.accepted, config).loans
    by_month, check = curves.segment_roll_forecasts(taken.accepted, config.assumptions.segments, loans, months)
    if segment is not None and not by_month.empty:
        by_month, check = by_month[by_month["segment"] == segment], check[check["segment"] == segment]
    return by_month, check


def compare(prior: str | os.PathLike | Result, current: str | os.PathLike | Result, *,
            charge_offs: str | os.PathLike | pd.DataFrame | None = None) -> dict[str, reconcile.Movement]:
    """The allowance movement between two finished runs (output folders or results), per framework."""
    from allowance import reconcile
    before, _ = _prior(prior, recorded=False)  # no run record is written: the files are not hashed
    after, _ = _prior(current, "current", recorded=False)
    cos, _, _ = _charge_offs(charge_offs)
    _same_currency(before.record, _record_currency(after.record),
                   str(Path(prior) / "run.json") if not isinstance(prior, Result) else "the prior result")
    frameworks = [fw for fw in _prior_frameworks(after.record) if fw in _prior_frameworks(before.record)]
    # the current run's own modelled figures are its tape at the prior assumptions when the
    # prior run's model is this one's (engine.same_model): the assumption lines are isolated then
    at_prior = after.loans if _same_model_recorded(before.record, after.record) else None
    return reconcile.compare_runs(before.loans, after.loans, charge_offs=cos, frameworks=frameworks,
                                  current_at_prior_assumptions=at_prior,
                                  sources={"prior": str(prior) if not isinstance(prior, Result) else "prior",
                                           "current": str(current) if not isinstance(current, Result) else "current"},
                                  prior_as_of=_record_as_of(before.record), current_as_of=_record_as_of(after.record),
                                  method_changes=_method_changes(before.record, (after.record or {}).get("assumptions")))


# --------------------------------------------------------------------------------------
# Templates and the demo
# --------------------------------------------------------------------------------------


def copy_templates(folder: str | os.PathLike) -> list[Path]:
    """Copy the blank input templates (tape CSV/XLSX, assumptions, what-if overlay) into
    ``folder`` (created); a file already there is an error, never overwritten."""
    folder = Path(folder)
    source = intake.bundled_path("templates")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        copied = []
        for f in sorted(source.iterdir()):
            if f.is_file() and f.suffix in {".csv", ".xlsx", ".toml"}:
                target = folder / f.name
                if target.exists():
                    raise InputFileError("exists already; not overwritten", file=target, hint="choose an empty folder")
                shutil.copyfile(f, target)
                copied.append(target)
    except OSError as err:
        raise InputFileError(str(err), file=folder) from err
    return copied


@dataclass(frozen=True)
class Demo:
    """The demo quarter end: the invented lender, last quarter's run, this quarter's run, and
    the files of the one-command what-if."""

    lender: str
    prior: Result
    current: Result
    prior_out: Path
    out: Path
    what_if: dict[str, Path]


def _demo_manifest() -> tuple[Path, dict]:
    folder = intake.bundled_path("demo")
    manifest = folder / "manifest.toml"
    try:
        with manifest.open("rb") as fh:
            return folder, tomllib.load(fh)
    except (OSError, tomllib.TOMLDecodeError) as err:
        raise InputFileError(f"cannot read the demo manifest: {err}", file=manifest) from err


def demo(out: str | os.PathLike, *, parquet: bool = False, progress: Progress | None = None,
         on_start: Callable[[str, Path], Any] | None = None,
         on_prior: Callable[[Result, Path], Any] | None = None,
         invocation: Mapping[str, Any] | None = None) -> Demo:
    """Run the shipped demo: last quarter into ``out/prior_quarter``, then this quarter into
    ``out`` with the movement from last quarter and its charge-offs.

    ``on_start(lender, prior_folder)`` is called before anything runs and
    ``on_prior(result, prior_folder)`` once last quarter is written (the command line prints
    as it goes). ``invocation`` goes into both run records (see :func:`run`).
    """
    out = Path(out)
    folder, m = _demo_manifest()
    prior_out = out / "prior_quarter"
    if on_start is not None:
        on_start(m.get("lender", "invented"), prior_out)
    before = run(folder / m["prior"]["tape"], folder / m["prior"]["assumptions"], progress=progress,
                 invocation=invocation)
    before.write(prior_out)
    if on_prior is not None:
        on_prior(before, prior_out)
    now = run(folder / m["current"]["tape"], folder / m["current"]["assumptions"], prior=prior_out,
              charge_offs=folder / m["current"]["charge_offs"], progress=progress, invocation=invocation)
    now.write(out, parquet=parquet)
    what_if = {"tape": folder / m["current"]["tape"], "assumptions": folder / m["current"]["assumptions"],
               "overlay": folder / m["what_if"]["overlay"]}
    return Demo(lender=m.get("lender", "invented"), prior=before, current=now, prior_out=prior_out, out=out,
                what_if=what_if)


def copy_demo_inputs(folder: str | os.PathLike) -> dict[str, Path]:
    """Copy the demo quarter's inputs (tape, assumptions, the matrices they name, the what-if
    files) into ``folder`` (created), so its commands can be typed without the installed
    package's paths; return them by file name. Files of the same name are replaced."""
    source, m = _demo_manifest()
    folder = Path(folder)
    names = [m["current"]["tape"], m["current"]["assumptions"], *m["current"].get("transition_matrices", []),
             m["current"]["charge_offs"], m["what_if"]["overlay"], *([m["what_if"]["outlook"]] if "outlook" in m["what_if"] else [])]
    copied: dict[str, Path] = {}
    try:
        folder.mkdir(parents=True, exist_ok=True)
        for name in dict.fromkeys(names):
            copied[name] = Path(shutil.copyfile(source / name, folder / name))
    except OSError as err:
        raise InputFileError(f"cannot copy the demo's inputs: {err.strerror or err}", file=folder) from err
    return copied
