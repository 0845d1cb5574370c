"""Chunked orchestration: accepted tape + run configuration -> loan results.

The engine composes the concept modules in one direction: loan terms (cash flows) -> PD
term structures (curves) -> scenario paths per framework (scenarios) -> stages and horizons
(staging) -> the fused ECL loop (ecl) -> rounding to cents -> overlays. What differs between
the frameworks comes from their rules (:mod:`allowance.frameworks`). Book-level tables (term
structures, scenario paths, prepayment curves, segment parameters) are built once by
:func:`prepare`; :func:`run_chunk` is a pure function of a chunk of loans and those tables,
returning a frozen :class:`ChunkResult`, and :func:`run` hands the chunks to any
executor-style ``map`` (the builtin, ``ProcessPoolExecutor.map``, a cluster's), so the same
function runs in-process, on several cores or on several machines. The book-wide steps
(rounding to cents, overlays, summaries) run after the map, in the calling process.

Implements
----------
Prepared      the book-level tables a chunk needs
ChunkResult   a chunk's modelled loan results and findings
EngineResult  loan results plus the tables the workbook shows
prepare       build the tables for a tape
run_chunk     loan results (modelled, unrounded) for a chunk of loans
run           the whole book: chunks through a map, rounding to cents, overlays, summaries
modelled      the whole book's modelled ECL per framework alone (a second pass's figures)
PartResult    a part of a book computed where it was read: its loans and overlays
run_part      a part of a book: chunks, rounding, its overlays (or its amount overlays' weights)
overlay_part  a part's overlays once the book's amount overlays are allocated
book_wide_overlays  the overlays that need the whole book at once (an amount to allocate)
overlaid      a result with other overlays (no second pass through the loop)
only_weights_differ, same_model  whether two configurations give the loop the same inputs
              (but the weights; weights too): then no second pass is needed
Progress      the progress callback: ``progress(phase, done, total)``
"""

from __future__ import annotations

import builtins
import collections
import dataclasses
import functools
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
import pandas as pd

from allowance import overlays, scenarios, staging
from allowance.memory import give_back
from allowance.engine.chunk import ChunkResult, LoanTerms, loan_terms, modelled_chunk, run_chunk
from allowance.engine.tables import Prepared, SegmentTable, age_months, prepare, segment_table, tape_months
from allowance.engine.views import (
    loan_schedule,
    pd_path_view,
    roll_rate_table,
    scenario_summary,
    term_structure_table,
)
from allowance.engine.views import schedule_sample as _schedule_sample
from allowance.money import CENT_DECIMALS
from allowance.exceptions import AllowanceError
from allowance.schemas import LoanRecord, RunConfig

__all__ = [
    "CHUNK_SIZE", "IN_PROCESS_CHUNK_SIZE", "MODELLED_CHUNK_SIZE", "ChunkResult", "EngineResult", "LoanTerms", "Map", "PartResult", "Prepared", "Progress",
    "SegmentTable", "book_wide_overlays", "loan_schedule", "loan_terms", "overlaid", "prepare", "roll_rate_table",
    "max_age", "modelled", "modelled_with", "two_at_a_time", "only_weights_differ", "same_model", "same_stages", "overlay_part", "reversion_view", "run", "run_chunk", "run_part", "scenario_summary", "segment_table", "tape_months",
]

CHUNK_SIZE = 250_000
#: Loans per chunk when no ``map`` is given: this process then computes two chunks at a time
#: (:func:`two_at_a_time`), which hold about what one chunk of :data:`CHUNK_SIZE` held.
IN_PROCESS_CHUNK_SIZE = CHUNK_SIZE // 2
#: Loans per chunk of :func:`modelled` when no ``map`` is given (two at a time, as :func:`run`).
MODELLED_CHUNK_SIZE = IN_PROCESS_CHUNK_SIZE // 2

#: an executor-style map: ``map(function, chunks)`` yields the results in the chunks' order
Map = Callable[[Callable[[pd.DataFrame], ChunkResult], Iterable[pd.DataFrame]], Iterable[ChunkResult]]


class Progress(Protocol):
    """Told how far a run is: ``phase`` names the step, ``done`` of ``total`` units are done.

    The engine reports ``"loans"`` (loans computed, of the tape's loans) after each chunk.
    """

    def __call__(self, phase: str, done: int, total: int) -> Any: ...


@dataclass(frozen=True)
class EngineResult:
    """Everything a run computes. ``loans`` is the loan-results contract (rounded to cents)."""

    loans: pd.DataFrame
    overlays: pd.DataFrame
    scenarios: pd.DataFrame
    term_structures: pd.DataFrame
    roll_rates: pd.DataFrame
    reversion: pd.DataFrame
    schedules: pd.DataFrame
    findings: pd.DataFrame
    warnings: list[str]
    pd_paths: pd.DataFrame = field(default_factory=pd.DataFrame)  # PD path by segment, scenario, month
    overlay_warnings: tuple[str, ...] = ()  # the part of ``warnings`` the overlays raised
    months: int | None = None  # the months the book's tables cover (tape_months), None when not computed here
    #: the same book under the other configurations :func:`run` was asked for (``reweighted``), in order
    reweighted: tuple[EngineResult, ...] = ()
    #: scenario name -> the loans with that scenario alone at weight 1 (:func:`run`'s ``alone``):
    #: ``ecl_<fw>_modelled``, ``overlay_<fw>``, ``ecl_<fw>``, ``poci`` and (IFRS 9) ``stage``
    alone: dict[str, pd.DataFrame] = field(default_factory=dict)
    #: the modelled ECL under each configuration :func:`run` was asked for (``modelled_under``),
    #: in order: ``loan_id, ecl_<fw>_modelled``, as :func:`modelled` gives them; None where
    #: that configuration's assumptions could not be applied to the tape
    modelled_under: tuple[pd.DataFrame | None, ...] = ()
    #: why, for each None in ``modelled_under`` (the error its assumptions gave); "" elsewhere
    modelled_under_why: tuple[str, ...] = ()


# --------------------------------------------------------------------------------------
# The whole book
# --------------------------------------------------------------------------------------


def _is_money(column: str) -> bool:
    return column.startswith(("ecl_", "ead", "gross_loss_", "purchase_ecl_")) or column in ("balance", "pcd_gross_up")


def _round_money(columns: dict[str, Any]) -> dict[str, Any]:
    """A chunk's columns with its money rounded to cents (new arrays: a column may be a view of
    the tape or of the loop's arrays, never written to); the other columns as they are."""
    return {name: np.round(np.asarray(values, dtype=np.float64), CENT_DECIMALS) if _is_money(name) else values
            for name, values in columns.items()}


def _joined(pieces: list) -> np.ndarray | pd.api.extensions.ExtensionArray:
    """One column from its chunks' pieces (numpy arrays joined; Arrow text as chunks of one array)."""
    if isinstance(pieces[0], np.ndarray):
        return np.concatenate(pieces)
    return type(pieces[0])._concat_same_type(pieces)


def _split_drawn_undrawn(loans: dict[str, Any], prep: Prepared) -> None:
    """Set ``ecl_<fw>_drawn``, ``ecl_<fw>_undrawn`` and ``provision_<fw>`` in the book's columns, in cents.

    The undrawn part is rounded once; the drawn part is the rounded modelled ECL less it, so
    drawn + undrawn = modelled to the cent. ``provision_<fw>`` is the part presented apart from
    the loss allowance, as the framework's rules say (IFRS 9 5.5.20, IFRS 7 B8E; ASC
    326-20-30-11): in integer cents, so it foots with the rest.
    """
    if not len(loans["balance"]):
        return
    balance = _cents(loans["balance"])
    for rules in prep.rules:
        fw = rules.name
        modelled = _cents(loans[f"ecl_{fw}_modelled"])
        undrawn = _cents(loans[f"ecl_{fw}_undrawn"])
        drawn = modelled - undrawn
        loans[f"ecl_{fw}_drawn"] = drawn / 100.0
        loans[f"ecl_{fw}_undrawn"] = undrawn / 100.0
        loans[f"provision_{fw}"] = rules.provision(drawn, undrawn, balance) / 100.0


def _cents(column: np.ndarray) -> np.ndarray:
    return np.rint(np.asarray(column, dtype=np.float64) * 100.0).astype(np.int64)


def _chunks(tape: pd.DataFrame, chunk_size: int) -> Iterator[pd.DataFrame]:
    for start in range(0, max(len(tape), 1), chunk_size):
        yield tape.iloc[start: start + chunk_size]


def two_at_a_time(work: Callable[[pd.DataFrame], ChunkResult], chunks: Iterable[pd.DataFrame]) -> Iterator[ChunkResult]:
    """The map of a run in this process: ``work`` over the chunks, the results in the chunks'
    order, the next chunk computed on a second thread while this one is computed or taken.

    A chunk's own Python and pandas steps (loan terms, stages, loan results) hold the GIL; its
    compiled loop does not (:func:`allowance.jit.in_threads`). Two chunks in flight keep both
    cores busy: one chunk's steps run beside the other's loop. Each chunk is computed by the
    same code on its own, so the results are the builtin ``map``'s to the bit. At most two
    chunks are in flight (a third waits until the first is taken), and the memory their
    threads freed is handed back as each is taken (:func:`allowance.memory.give_back`): the
    C heap keeps a thread's freed blocks, which would otherwise add up over the chunks.
    """
    chunks = list(chunks)
    if len(chunks) <= 1:  # nothing to run beside it (a small book: numba need not even load)
        yield from builtins.map(work, chunks)
        return
    import numba

    threads = numba.get_num_threads()  # the caller's setting (numba's is per thread), in both threads
    if threads <= 1:  # one core: nothing to run beside the loop
        yield from builtins.map(work, chunks)
        return
    pool = ThreadPoolExecutor(2, thread_name_prefix="allowance-chunk", initializer=numba.set_num_threads,
                              initargs=(threads,))
    pending: collections.deque[Future] = collections.deque()
    try:
        for chunk in chunks:
            pending.append(pool.submit(work, chunk))
            if len(pending) == 2:
                yield pending.popleft().result()
                give_back()
        while pending:
            yield pending.popleft().result()
    finally:
        pool.shutdown(wait=True, cancel_futures=True)  # a chunk that failed: the other one is let finish
        give_back()  # what the threads freed, before the book is built from the chunks


#: assumptions that reach neither the loop nor the stages: the overlays (applied to the rounded
#: modelled figures), how the tape is read ([tape]) and tied to the ledger, the run's name,
#: the limits of reading and of the workbook, the journal's account codes
_AFTER_THE_MODEL = {"overlays": True, "tape": True, "gl_accounts": True,
                    "run": {"label", "ledger_balance", "ledger_tolerance", "max_input_mb", "loan_detail_sheet_limit"}}


def _model(config: RunConfig, *, weights: bool) -> dict:
    """What of a configuration the modelled figures depend on (the scenarios in order, with or
    without their weights)."""
    a = config.assumptions
    dumped = a.model_dump(exclude={**_AFTER_THE_MODEL, "scenarios": True})
    dumped["scenarios"] = [(name, s.model_dump(exclude=None if weights else {"weight"})) for name, s in a.scenarios.items()]
    return _without_sources(dumped)


def _without_sources(value: Any) -> Any:
    """``value`` without its ``source`` entries: where a roll-rate matrix was read from, where a
    satellite model's coefficients or the macro paths come from, text that names the values
    without changing them (the same matrix from a file or a mapping is the same model)."""
    if isinstance(value, dict):
        return {k: _without_sources(v) for k, v in value.items() if k != "source"}
    if isinstance(value, (list, tuple)):
        return [_without_sources(v) for v in value]
    return value


def only_weights_differ(one: RunConfig, other: RunConfig) -> bool:
    """Whether two configurations give the loop the same inputs: their assumptions are equal
    but for the scenarios' weights and what reaches no modelled figure (the overlays, applied
    after the loop; the [tape] section, the ledger balance and the run's label and limits),
    with the same scenarios in the same order."""
    return _model(one, weights=False) == _model(other, weights=False)


def same_model(one: RunConfig, other: RunConfig) -> bool:
    """Whether two configurations give every loan the same modelled figures: as
    :func:`only_weights_differ`, the weights equal too. A tape computed under one has, under
    the other, the modelled ECL it already has (no second pass is needed)."""
    return _model(one, weights=True) == _model(other, weights=True)


def run(
    tape: pd.DataFrame,
    config: RunConfig,
    *,
    chunk_size: int | None = None,
    schedule_sample: int = 2,
    map: Map | None = None,  # the executor's word for it
    progress: Progress | None = None,
    reweighted: Iterable[RunConfig] = (),
    alone: Iterable[str] = (),
    modelled_under: Iterable[RunConfig] = (),
    loop: str | None = None,
) -> EngineResult:
    """Compute the allowance for an accepted tape.

    Parameters
    ----------
    tape : DataFrame
        The accepted tape, as intake hands it over.
    config : RunConfig
        The validated assumptions.
    chunk_size : int, optional
        Loans per chunk (the unit of work a ``map`` hands out): :data:`CHUNK_SIZE` by
        default, :data:`IN_PROCESS_CHUNK_SIZE` when no ``map`` is given.
    schedule_sample : int
        Performing loans per segment whose schedules the workbook shows.
    map : callable, optional
        Runs :func:`run_chunk` over the chunks: ``concurrent.futures.ProcessPoolExecutor(...).map``,
        the builtin ``map`` (one chunk after another) or any map with the same contract
        (results in the chunks' order). None (the default): in this process, two chunks at a
        time (:func:`two_at_a_time`), the same results.
    progress : callable, optional
        ``progress("loans", done, total)`` after each chunk.
    reweighted : configurations
        Other configurations that differ from ``config`` only in the scenario weights and
        the overlays (:func:`only_weights_differ`): the book under each is computed in the
        same pass, the loop run once (:func:`~allowance.engine.chunk.run_chunk`), and comes
        back in ``EngineResult.reweighted`` (without schedule samples; the book-level tables
        are this run's, which the weights do not enter). Each equals ``run(tape, other)``.
    alone : scenario names
        Scenarios whose one-scenario sensitivity is computed in the same pass: the book with
        that scenario alone at weight 1 and this run's overlays, in ``EngineResult.alone``
        (only what a sensitivity table reads: the modelled ECL, overlays and ECL per
        framework, the stages). The loop runs once and each scenario's figures are weighted
        again with one-hot weights (1 for it, 0 for the others), which give its own losses to
        the bit; the stages, horizons and every scenario's losses do not depend on the
        weights, and a POCI loan's benchmark is weighted again (IFRS 9 5.5.17(a), B5.5.42,
        5.5.13; ASC 326-20-30-9). Each equals ``run(tape, single_scenario(config, name))``'s
        columns to the cent (:func:`allowance.reconcile.single_scenario`).
    modelled_under : configurations
        Other configurations whose modelled ECL per framework alone comes back in
        ``EngineResult.modelled_under``: the figures :func:`modelled` gives under each, this
        run's stages taken where it stages alike (:func:`same_stages`; what the movement's
        remeasurement reads of this tape at the prior run's assumptions), at 8 bytes per loan
        and framework, not a second book. One that differs from ``config`` only in the
        scenario weights and what reaches no modelled figure (:func:`only_weights_differ`) is
        weighted again in the same pass, as ``alone`` is; any other is computed in the same
        pass too, each chunk at its own tables right after the chunk itself (no second pass
        over the tape: its chunks, their slicing and the pass's start and end are shared).
        Where its assumptions cannot be applied to the tape (an error of the assumptions or
        of a value), its entry is None and ``EngineResult.modelled_under_why`` says why; this
        run's own figures are made all the same.
    loop : {"arrays", "compiled"}, optional
        How the ECL sums are computed (:func:`~allowance.engine.tables.choose_loop`): None
        (the default) chooses by the book's size, numpy for a small book and the compiled
        loop for a large one; the two give the same figures to rounding.

    Notes
    -----
    Money is computed unrounded and rounded to cents once per loan; overlays are applied to
    the rounded modelled figures; every total is the sum of rounded loan figures. Each chunk
    is rounded as it comes back; overlays and summaries are book-wide and run after the map.
    """
    give_back()  # what reading the tape freed, before the book's arrays are made
    prep = prepare(config, tape_months(tape, config), max_age(tape, config), loans=len(tape), loop=loop)
    others = tuple(reweighted)
    for other in others:
        if not only_weights_differ(config, other):
            raise ValueError("engine.run: a reweighted configuration differs from the run's in more than "
                             "the scenario weights and the overlays")
    weights = tuple(np.asarray(other.assumptions.weights, float) for other in others)
    singles = _one_hot(config, alone)
    under = tuple(modelled_under)
    # those weighted again in this pass, and those computed at their own tables beside it
    # (prepared here, as a second pass would: their errors are theirs, not this run's)
    again = [i for i, other in enumerate(under) if only_weights_differ(config, other)]
    apart: list[int] = []
    beside: list[_Beside] = []
    why = [""] * len(under)
    for i, other in enumerate(under):
        if i in again:
            continue
        try:
            beside.append(_Beside(prepare(other, tape_months(tape, other), max_age(tape, other), loans=len(tape),
                                          loop=prep.loop), same_stages(config, other)))
            apart.append(i)
        except (AllowanceError, ValueError) as error:
            why[i] = str(error)
    # the one-hot weights of the sensitivities, then those of each modelled_under configuration
    # weighted again
    extra = (*singles.values(), *(np.asarray(under[i].assumptions.weights, float) for i in again))
    work = functools.partial(run_chunk, prep=prep, **({"reweighted": weights} if weights else {}),
                             **({"alone": extra} if extra else {}))
    if beside:
        work = functools.partial(_run_chunk_under, work=work, beside=tuple(beside))

    if map is None:
        map, chunk_size = two_at_a_time, chunk_size or IN_PROCESS_CHUNK_SIZE
    chunks = list(_chunks(tape, chunk_size or CHUNK_SIZE))
    columns: list[list[dict[str, Any]]] = [[] for _ in range(1 + len(others))]  # this run's, then each other's
    alone_columns: list[list[dict[str, Any]]] = [[] for _ in extra]  # each weight set's modelled ECL
    beside_columns: list[list[dict[str, Any]]] = [[] for _ in beside]  # each configuration's beside it
    findings: list[pd.DataFrame] = []
    done = 0
    for chunk, part in zip(chunks, map(work, chunks)):
        # rounded as each chunk comes back (rounding is per loan): its unrounded money goes at once
        own = _round_money(part.columns)
        columns[0].append(own)
        for i, one in enumerate(part.reweighted, start=1):
            # a column the weights leave as it is (ids, stages, balances, each scenario's ECL) is
            # this run's own object: the other book shares it, not a copy (_book)
            columns[i].append(_as_own(_round_money(one), own))
        for i, one in enumerate(part.alone):
            alone_columns[i].append(_round_money(one))
        for i, one in enumerate(part.under):
            if isinstance(one, str):  # its assumptions failed on this chunk: the configuration has no figures
                why[apart[i]] = why[apart[i]] or one
            elif not why[apart[i]]:
                beside_columns[i].append(one)  # rounded to cents already (modelled_with)
        findings.append(part.findings)
        done += len(chunk)
        if progress is not None:
            progress("loans", done, len(tape))
    part = None  # the last chunk's unrounded columns go too
    findings = pd.concat(findings, ignore_index=True) if findings else pd.DataFrame()
    model_warnings = staging.pd_ratio_warnings(tape) if prep.staged is not None else []
    results = []
    joined: dict[str, tuple[tuple[int, ...], Any]] = {}  # this run's columns as joined, by their pieces
    for i, one in enumerate((config, *others)):
        loans, applied = _book(columns[i], tape, prep, one, joined=joined if others else None)
        columns[i] = []
        results.append(EngineResult(
            loans=loans, overlays=applied.table, scenarios=scenario_summary(loans, one),
            term_structures=pd.DataFrame(), roll_rates=pd.DataFrame(), reversion=pd.DataFrame(),
            schedules=pd.DataFrame(), findings=findings, warnings=model_warnings + list(applied.warnings),
            overlay_warnings=tuple(applied.warnings), months=prep.months,
        ))
    joined = {}  # its hold on the first book's joined columns goes now, not when run returns
    main, rest = results[0], results[1:]
    made: list[pd.DataFrame | None] = [None] * len(under)
    for i, pieces in zip(again, alone_columns[len(singles):]):
        made[i] = _modelled_frame(pieces, tape)
    for i, pieces in zip(apart, beside_columns):
        made[i] = None if why[i] else _modelled_frame(pieces, tape)
    main = dataclasses.replace(
        main, alone={name: _alone(pieces, main.loans, config) for name, pieces in zip(singles, alone_columns)},
        modelled_under=tuple(made), modelled_under_why=tuple(why))
    alone_columns = beside_columns = made = []
    give_back()  # the chunks' pieces the book was joined from (those made on the chunk threads stay in their heaps)
    tables = {"term_structures": term_structure_table(prep), "roll_rates": roll_rate_table(config),
              "reversion": reversion_view(prep), "pd_paths": pd_path_view(tape, prep)}
    return dataclasses.replace(
        main, **tables,
        # the tape's own columns only: slicing thousands of carried-through columns costs seconds
        schedules=_schedule_sample(tape[[c for c in tape.columns if c in LoanRecord.model_fields or c == "source_row"]],
                                   main.loans, prep, schedule_sample),
        reweighted=tuple(dataclasses.replace(r, **tables) for r in rest),
    )


@dataclass(frozen=True)
class _Beside:
    """A configuration each chunk is also computed under (:func:`run`'s ``modelled_under``):
    its own tables, and whether this run's stages are its stages (:func:`same_stages`)."""

    prep: Prepared
    stages: bool


def _run_chunk_under(chunk: pd.DataFrame, work: Callable[[pd.DataFrame], ChunkResult],
                     beside: tuple[_Beside, ...]) -> ChunkResult:
    """``work(chunk)``, then the chunk's modelled ECL under each configuration of ``beside``
    (:func:`modelled_with`: in slices of MODELLED_CHUNK_SIZE loans as a second pass takes
    them, rounded to cents, this chunk's stages where they are that configuration's) into
    ``ChunkResult.under``: what a second pass would compute of these loans, computed while
    they are at hand. An error of those assumptions on these loans is kept as its text (the
    run's own figures stand; :func:`run` says why)."""
    part = work(chunk)
    stages = None
    if "stage" in part.columns and any(b.stages for b in beside):
        stages = pd.DataFrame({"stage": part.columns["stage"], "poci": part.columns["poci"]}, index=chunk.index,
                              copy=False)
    under: list[dict[str, np.ndarray] | str] = []
    for b in beside:
        try:
            under.append(modelled_with(chunk, b.prep, stages if b.stages else None))
        except (AllowanceError, ValueError) as error:
            under.append(str(error))
    return dataclasses.replace(part, under=tuple(under))


def _one_hot(config: RunConfig, names: Iterable[str]) -> dict[str, np.ndarray]:
    """Scenario name -> weights of 1 on it and 0 on the run's other scenarios, in their order."""
    listed = list(config.assumptions.scenarios)
    out = {}
    for name in names:
        if name not in listed:
            raise KeyError(f"no scenario {name!r}")
        out[name] = (np.arange(len(listed)) == listed.index(name)).astype(float)
    return out


def _modelled_frame(pieces: list[dict[str, Any]], tape: pd.DataFrame) -> pd.DataFrame:
    """``loan_id, ecl_<fw>_modelled`` in tape order from the chunks' rounded pieces (as :func:`modelled`)."""
    columns = {c: np.concatenate([p[c] for p in pieces]) if pieces else np.empty(0) for c in (pieces or [{}])[0]}
    return pd.DataFrame({"loan_id": tape["loan_id"].array, **columns}, copy=False)


def _alone(pieces: list[dict[str, Any]], loans: pd.DataFrame, config: RunConfig) -> pd.DataFrame:
    """A scenario alone's loans from its chunks' rounded modelled ECL: this run's overlays
    applied to them as :func:`_book` applies them (a percentage scales with the scenario's
    modelled figure; an amount is allocated pro rata to it), beside the run's stages, which
    the scenario weights do not enter (:func:`allowance.staging.assign_stages`)."""
    modelled = {name: _joined([c.pop(name) for c in pieces]) for name in (list(pieces[0]) if pieces else [])}
    shared = [c for c in ("segment", "stage") if c in loans.columns]
    scratch = pd.DataFrame({**{c: loans[c] for c in shared}, **modelled}, copy=False)
    applied = overlays.apply_overlays(scratch, list(config.assumptions.overlays), config.as_of, list(config.frameworks))
    out: dict[str, Any] = {}
    for fw in config.frameworks:
        adj = np.asarray(applied.adjustments[fw], float)
        out[f"ecl_{fw}_modelled"] = scratch[f"ecl_{fw}_modelled"]
        out[f"overlay_{fw}"] = adj
        out[f"ecl_{fw}"] = np.round(modelled[f"ecl_{fw}_modelled"] + adj, CENT_DECIMALS)
    out.update({c: loans[c] for c in ("stage", "poci") if c in loans.columns})
    return pd.DataFrame(out, copy=False)


def same_stages(one: RunConfig, other: RunConfig) -> bool:
    """Whether two configurations stage a tape alike: the inputs of
    :func:`allowance.staging.assign_stages` besides the tape are the same (the ``[ifrs9]``
    rules, the segments and each one's low-credit-risk tests, and where the PD-ratio test is
    on lifetime PDs the behavioural life that sets a line's remaining life; IFRS 9 5.5.9-5.5.11,
    B5.5.13), at the same as-of date. The scenario paths and weights, the PD curves and the
    LGDs do not enter."""
    a, b = one.assumptions, other.assumptions
    lifetime = a.ifrs9 is not None and a.ifrs9.sicr_pd_measure == "lifetime"

    def staging_inputs(assumptions) -> dict:
        return {name: (s.low_credit_risk_pd, s.low_credit_risk_grades, s.behavioural_life_months if lifetime else None)
                for name, s in assumptions.segments.items()}

    return (a.ifrs9 is not None and a.ifrs9 == b.ifrs9 and one.as_of == other.as_of
            and staging_inputs(a) == staging_inputs(b))


def _modelled_part(part: tuple[pd.DataFrame, pd.DataFrame | None], prep: Prepared) -> pd.DataFrame:
    return modelled_chunk(part[0], prep, part[1])


def modelled(tape: pd.DataFrame, config: RunConfig, *, chunk_size: int | None = None, map: Map | None = None,
             stages_from: tuple[RunConfig, pd.DataFrame] | None = None, loop: str | None = None) -> pd.DataFrame:
    """Each loan's modelled ECL per framework, rounded to cents: ``loan_id,
    ecl_<framework>_modelled`` in tape order, the figures :func:`run` gives those columns.

    Nothing else is made: no drawn and undrawn split, overlays, findings, summaries or book
    tables. What the movement's remeasurement needs from this quarter's tape at last
    quarter's assumptions (the change in the modelled allowance that the assumptions made).
    ``stages_from``: a configuration and the loans (``stage``, ``poci`` in tape order) a run of
    this tape under it gave; where it stages alike (:func:`same_stages`), the stages are
    taken from those loans instead of being assigned again. ``map`` and ``chunk_size`` as for
    :func:`run` (no map: two chunks of :data:`MODELLED_CHUNK_SIZE` loans at a time in this
    process, :func:`two_at_a_time`); ``loop`` as for :func:`run` (by the book's size).
    """
    if map is None:
        # half the first pass's chunks: this pass runs while that pass's loan results (and the
        # prior run's) are held, so two chunks in flight of 62,500 loans, not of 125,000
        map, chunk_size = two_at_a_time, chunk_size or MODELLED_CHUNK_SIZE
    chunk_size = chunk_size or CHUNK_SIZE
    prep = prepare(config, tape_months(tape, config), max_age(tape, config), loans=len(tape), loop=loop)
    # what the whole-tape steps above freed stays in this thread's heap, where the chunk threads
    # cannot reuse it: handed back before they make their own (a million loans: some 90 MB)
    give_back()
    known = stages_from[1] if stages_from is not None and same_stages(stages_from[0], config) else None
    return pd.DataFrame({"loan_id": tape["loan_id"].array, **modelled_with(tape, prep, known, chunk_size=chunk_size,
                                                                          map=map)}, copy=False)


def modelled_with(tape: pd.DataFrame, prep: Prepared, stages: pd.DataFrame | None = None, *,
                  chunk_size: int = MODELLED_CHUNK_SIZE, map: Map = builtins.map) -> dict[str, np.ndarray]:
    """:func:`modelled`'s figures from tables already prepared (a part of a book computed part
    by part, with the book's tables): ``ecl_<framework>_modelled`` rounded to cents, in tape
    order; ``stages`` (``stage``, ``poci`` in tape order) taken instead of staging again."""
    chunks = list(_chunks(tape, chunk_size))
    given = [None] * len(chunks)
    if stages is not None and prep.staged is not None:
        known = stages[["stage", "poci"]]
        given = [known.iloc[i * chunk_size: i * chunk_size + len(chunk)].set_axis(chunk.index)
                 for i, chunk in enumerate(chunks)]
    # each chunk's figures rounded into the book's columns as the chunk comes back, the ids
    # the tape's own (the same text, not a copy): no list of chunk frames joined at the end
    figures: dict[str, np.ndarray] = {}
    start = 0
    for part in map(functools.partial(_modelled_part, prep=prep), zip(chunks, given)):
        for c in part.columns.drop("loan_id"):
            into = figures.setdefault(c, np.empty(len(tape), dtype=np.float64))
            np.round(part[c].to_numpy(dtype=np.float64), CENT_DECIMALS, out=into[start: start + len(part)])
        start += len(part)
    return figures


@dataclass(frozen=True)
class PartResult:
    """A part of a book computed where it was read (:func:`run_part`).

    ``overlays`` is None when the part's overlays wait for the book: an ``amount`` is
    allocated over every part at once; ``weights`` are then this part's
    (:func:`allowance.overlays.amount_weights`), and ``loans`` carry the modelled figures
    as final (``overlay_<fw>`` 0) until :func:`overlay_part` sets them.
    """

    loans: pd.DataFrame  # the loans.csv columns of the part's loans, in tape order
    overlays: overlays.OverlayResult | None
    findings: pd.DataFrame
    weights: dict[tuple[int, str], np.ndarray] = field(default_factory=dict)


def book_wide_overlays(config: RunConfig) -> list[str]:
    """The names of the overlays a part of a book cannot apply alone: an ``amount`` is
    allocated over every loan in its scope at once (:func:`allowance.overlays.allocate_cents`)."""
    return [ov.name for ov in config.assumptions.overlays if ov.kind != "percent"]


def run_part(tape: pd.DataFrame, prep: Prepared, *, chunk_size: int = CHUNK_SIZE) -> PartResult:
    """The loans of one part of a book, computed where the part was read.

    The same steps as :func:`run` on the part's loans: :func:`run_chunk` over chunks,
    rounding to cents once per loan, then the overlays when they are all percentages (per
    loan). ``prep`` is the whole book's (:func:`prepare` with the book's months and ages), so
    each loan's figures are those of a run of the whole book, to the cent. With an
    ``amount`` overlay the part returns its weights instead, and :func:`overlay_part`
    applies the overlays once the book's allocation is known.
    """
    config = prep.config
    columns, findings = [], []
    for chunk in _chunks(tape, chunk_size):
        part = run_chunk(chunk, prep)
        columns.append(_round_money(part.columns))
        findings.append(part.findings)
    part = None
    findings = pd.concat(findings, ignore_index=True) if findings else pd.DataFrame()
    if book_wide_overlays(config):
        loans, weights = _book(columns, tape, prep, wait=True)
        return PartResult(loans=loans, overlays=None, findings=findings, weights=weights)
    loans, applied = _book(columns, tape, prep)
    return PartResult(loans=loans, overlays=applied, findings=findings)


def overlay_part(loans: pd.DataFrame, config: RunConfig,
                 allocated: dict[tuple[int, str], np.ndarray]) -> tuple[pd.DataFrame, overlays.OverlayResult]:
    """A part's loans (from :func:`run_part`) with the overlays applied, the amounts' cents
    being this part's share of the book's allocation; a new frame and the overlays applied."""
    loans = loans.copy()
    return loans, _apply_overlays(loans, config, allocated)


def max_age(tape: pd.DataFrame, config: RunConfig) -> int:
    """The oldest loan's age in months at the as-of date (0 for no loans): how far the
    prepayment curves by age must reach."""
    return int(age_months(tape["origination_date"], pd.Timestamp(config.as_of)).max()) if len(tape) else 0


def reversion_view(prep: Prepared) -> pd.DataFrame:
    """The CECL reversion table of the framework that reverts (empty when none does)."""
    a = prep.config.assumptions
    reverting = next((r.name for r in prep.rules if r.reversion(a) is not None), None)
    return scenarios.reversion_table(prep.tables[reverting]) if reverting else pd.DataFrame()


def _apply_overlays(loans: pd.DataFrame, config: RunConfig,
                    allocated: dict[tuple[int, str], np.ndarray] | None = None) -> overlays.OverlayResult:
    """Set ``overlay_<fw>`` and ``ecl_<fw>`` = modelled + overlay (cents) in place; the overlays applied."""
    applied = overlays.apply_overlays(loans, list(config.assumptions.overlays), config.as_of, list(config.frameworks),
                                      allocated)
    for fw in config.frameworks:
        adj = np.asarray(applied.adjustments[fw], float)
        loans[f"overlay_{fw}"] = adj
        loans[f"ecl_{fw}"] = (loans[f"ecl_{fw}_modelled"] + adj).round(CENT_DECIMALS)
    return applied


def overlaid(result: EngineResult, config: RunConfig) -> EngineResult:
    """``result``'s modelled loans with ``config``'s overlays in place of the ones applied.

    Overlays are applied after the loop to the rounded modelled ECL, so a run whose
    assumptions differ only in ``[[overlays]]`` has the same modelled figures: a what-if that
    changes only overlays (or its base run) needs no second pass through the loop. The
    result equals ``run(tape, config)`` (tested column for column).
    """
    # a shallow copy: under pandas' copy-on-write the columns set here are this frame's own and
    # ``result`` keeps its figures (a deep copy of a million loans' columns took 1.4 s)
    loans = result.loans.copy(deep=False)
    applied = _apply_overlays(loans, config)
    model_warnings = [w for w in result.warnings if w not in result.overlay_warnings]
    return dataclasses.replace(
        result, loans=loans, overlays=applied.table, scenarios=scenario_summary(loans, config),
        warnings=model_warnings + list(applied.warnings), overlay_warnings=tuple(applied.warnings),
    )


def _same_bits(one: Any, other: Any) -> bool:
    """Whether two columns hold the same values to the bit (NaN where NaN, -0.0 apart from 0.0)."""
    if one is other:
        return True
    if isinstance(one, np.ndarray) and isinstance(other, np.ndarray):
        if one.dtype != other.dtype or one.shape != other.shape:
            return False
        if one.dtype.kind == "f":
            return bool(np.array_equal(one.view(f"u{one.dtype.itemsize}"), other.view(f"u{other.dtype.itemsize}")))
        return one.dtype.kind in "biu" and bool(np.array_equal(one, other))
    if isinstance(one, pd.api.extensions.ExtensionArray) and isinstance(other, pd.api.extensions.ExtensionArray):
        return one.dtype == other.dtype and bool(one.equals(other))
    return False


def _as_own(piece: dict[str, Any], own: dict[str, Any]) -> dict[str, Any]:
    """A chunk's columns under other weights, each that equals this run's own (to the bit)
    replaced by that column's object."""
    return {name: own[name] if name in own and _same_bits(values, own[name]) else values
            for name, values in piece.items()}


def _book(columns: list[dict[str, Any]], tape: pd.DataFrame, prep: Prepared, config: RunConfig | None = None, *,
          wait: bool = False, joined: dict[str, tuple[tuple[int, ...], Any]] | None = None):
    """The book's loan frame, built once from its chunks' rounded columns, and the overlays applied.

    Each column is joined from its chunks' pieces (and the pieces let go) as it is needed; the
    drawn and undrawn split and the overlays are computed on the joined arrays; the frame is
    made last, from the columns in their order, without copying them. Returns the frame and
    the overlays applied (:class:`allowance.overlays.OverlayResult`) of ``config`` (the run's
    by default; a reweighted one's, which differs only in weights and overlays), or with
    ``wait`` (a part of a book with an ``amount`` overlay, :func:`run_part`) the frame with
    the modelled figures as final and the part's amount weights.

    ``joined``: kept by :func:`run` across the books of one pass. The first book records each
    joined column under the ids of its pieces; a later book whose pieces of a column are all
    the first's (:func:`_as_own`) takes that column instead of joining a copy. The ids are
    sound: every piece of every book was alive at once, when the chunks came back.
    """
    config = config or prep.config
    loans = {}
    for name in list(columns[0]) if columns else []:
        pieces = [c.pop(name) for c in columns]
        ids = tuple(map(id, pieces))  # the pieces are alive (held here): their ids are theirs
        made = joined.get(name) if joined is not None else None
        if made is not None and made[0] == ids:  # every piece another book's: its joined column, shared
            loans[name] = made[1]
        else:
            loans[name] = _joined(pieces)
            if joined is not None and name not in joined:
                joined[name] = (ids, loans[name])
        del pieces
    if not loans:
        applied = _apply_overlays(frame := pd.DataFrame(), config)
        return _order_columns(frame, tape, prep), applied
    _split_drawn_undrawn(loans, prep)
    scratch = pd.DataFrame(loans, copy=False)  # what the overlays read: the columns as they are
    if wait:
        for fw in config.frameworks:  # placeholders in their columns' places, set by overlay_part
            loans[f"overlay_{fw}"] = np.zeros(len(scratch))
            loans[f"ecl_{fw}"] = loans[f"ecl_{fw}_modelled"].copy()
        weights = overlays.amount_weights(scratch, list(config.assumptions.overlays), list(config.frameworks))
        return _order_columns(loans, tape, prep), weights
    applied = overlays.apply_overlays(scratch, list(config.assumptions.overlays), config.as_of, list(config.frameworks))
    del scratch
    for fw in config.frameworks:
        adj = np.asarray(applied.adjustments[fw], float)
        loans[f"overlay_{fw}"] = adj
        loans[f"ecl_{fw}"] = np.round(loans[f"ecl_{fw}_modelled"] + adj, CENT_DECIMALS)
    return _order_columns(loans, tape, prep), applied


def _order_columns(loans: pd.DataFrame | dict[str, Any], tape: pd.DataFrame, prep: Prepared) -> pd.DataFrame:
    """The loans.csv columns in their order, then ``source_row`` and the tape's own extra
    columns; from a dict of columns the frame is made here, over their arrays (no copy)."""
    first = [
        "loan_id", "segment", "repayment", "grade", "origination_date", "days_past_due",
        "stage", "stage_class", "stage_reason", "poci", "measurement",
        "horizon_months", "horizon_months_cecl", "remaining_months", "balance", "ead",
        "pd_12m", "pd_lifetime", "lgd", "ecl_12m", "ecl_lifetime",
    ]
    for fw in prep.frameworks:
        first += [f"gross_loss_{fw}", f"ecl_{fw}_modelled", f"overlay_{fw}", f"ecl_{fw}"]
    for fw in prep.frameworks:
        first += [f"ecl_{fw}_drawn", f"ecl_{fw}_undrawn", f"provision_{fw}"]
    for fw in prep.frameworks:
        first += [f"ecl_{fw}_{s}" for s in prep.scenario_names]
    first += [f"ead_{fw}" for fw in prep.frameworks]
    first += [f"discount_rate_{fw}" for fw in prep.frameworks]
    first += [f"purchase_ecl_{fw}" for fw in prep.frameworks]
    first += [f"purchase_ecl_carried_{fw}" for fw in prep.frameworks] + ["pcd_gross_up", "modified"]
    source_row = np.array(tape["source_row"].to_numpy()) if "source_row" in tape else np.arange(len(tape)) + 2
    if isinstance(loans, dict):
        # the tape's own columns as the tape's Series (shared under copy-on-write, not copied)
        made = {"days_past_due": loans.get("days_past_due"), "source_row": source_row}
        own = {c: tape[c].reset_index(drop=True) for c, values in made.items()
               if c in tape and values is not None and tape[c].dtype == getattr(values, "dtype", None)}
        ordered = pd.DataFrame({**{c: own.get(c, loans[c]) for c in first if c in loans},
                                "source_row": own.get("source_row", source_row)}, copy=False)
    else:
        ordered = loans[[c for c in first if c in loans.columns]]  # copy-on-write: no copy of the columns
        ordered["source_row"] = source_row
        ordered = ordered.reset_index(drop=True)
    extras = [c for c in tape.columns if c not in LoanRecord.model_fields and c != "source_row"]
    if extras:  # joined in one step: column by column costs minutes on a 10,000-column tape
        ordered = pd.concat([ordered, tape[extras].reset_index(drop=True)], axis=1)
    return ordered
