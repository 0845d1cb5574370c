"""A book computed where it is read: a Parquet tape part by part, the loan detail written by the parts.

For a book larger than one machine's memory. The process that runs the command never holds
the tape nor the loan detail: each part of the tape (a row group) is read, validated
(:func:`allowance.intake.read_part`, the tape's one validation path), computed
(:func:`allowance.engine.run_part`) and written as one Parquet file of the loan detail by
whichever worker the ``map`` sends it to; what comes back is small and additive:

1. the loan ids the whole tape repeats (:func:`allowance.intake.parts.repeated_ids`);
2. each part's intake (rejected rows, findings, counts), the balance it accepted, its
   longest horizon and oldest loan (the book-level tables cover every loan of the book:
   :func:`allowance.engine.prepare` runs once, here, on those maxima);
3. each part's sums in whole cents by segment, stage, POCI flag and measurement, its
   overlays' effects, its findings, its balance on each PD curve key (the PD paths' weights)
   and the cells of its disclosure tables.

Each loan's figures are those of a run of the whole book in one process, to the cent: the
chunks are pure functions of their loans and the book's tables, and money is rounded per
loan. The totals are sums of those rounded figures, exact in cents. The parts are read
twice (step 2 and step 3): holding them between steps would need the whole accepted tape
in the cluster's memory, and reading a row group again costs less than computing it.

An overlay of an ``amount`` is allocated over every loan in its scope at once: the parts
send its weights (8 bytes per loan in scope and framework), it is allocated here as over
a whole book, and each part, written with its modelled figures, is finished with its
share (:func:`finish_part`). What needs the whole loan frame at once is not done here, and
the run says so: the reserve workbook (its loan sheet; the summary workbook is made from
the sums), a what-if, the one-scenario sensitivities and the schedules sample. The movement
from a prior run is made after the parts, from the loan detail read back a column at a time
(:func:`allowance.intake.read_detail_figures`, in the API); as next quarter's prior run, the
folder's run.json names the loan detail (:func:`allowance.intake.read_prior_figures`).

Implements
----------
BOOK_KEYS       the columns the loan sums are grouped by
loan_sums       a loan frame's money in whole cents by segment, stage, POCI flag and measurement
PartFacts       what a part tells before the book's tables are built
PartSums        what a computed part sends back
part_facts      read and validate a part -> PartFacts
compute_part    read, validate, compute and write a part -> PartSums
finish_part     a part's amount overlays, once the book's allocation is known -> PartSums
BookRun         the whole run's small results
run_book        the steps above through a ``map``
"""

from __future__ import annotations

import builtins
import dataclasses
import functools
import math
import os
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from allowance import disclosure, engine, intake, overlays, staging
from allowance.exceptions import OutputError
from allowance.intake.files import refuse_url_output
from allowance.intake.parts import TapeLayout, TapePart, combine, read_part, repeated_ids, tape_layout
from allowance.engine.views import pd_path_from, pd_path_weights
from allowance.intake.tape import Validated
from allowance.schemas import LOAN_COUNT, RunConfig

__all__ = ["BOOK_KEYS", "BookRun", "PartFacts", "PartSums", "compute_part", "finish_part", "loan_sums", "part_facts",
           "run_book"]

Map = Callable[[Callable, Iterable], Iterable]

#: the loan sums' grouping: every table of the run is a sum over these groups
BOOK_KEYS = ("segment", "stage", "stage_class", "poci", "measurement")
#: the count of loans in a group of :func:`loan_sums`
COUNT = LOAN_COUNT


def _money_columns(loans: pd.DataFrame) -> list[str]:
    return [c for c in loans.columns
            if c == "balance" or c == "pcd_gross_up" or c.startswith(("ecl_", "ead", "gross_loss_", "purchase_ecl_",
                                                                       "overlay_", "provision_"))]


def loan_sums(loans: pd.DataFrame) -> pd.DataFrame:
    """The loans' money in whole cents (int64) by :data:`BOOK_KEYS`, with ``loan_count``.

    Sums of the parts' tables, by the same keys, are the whole book's table exactly (the
    groups in order of first appearance; :func:`_book_frame` sorts the book's).
    """
    keys = [k for k in BOOK_KEYS if k in loans.columns]
    # one integer code per group (factorised keys): grouping on it is a numpy step, not a Python one per row
    code = np.zeros(len(loans), dtype=np.int64)
    for k in keys:
        codes, uniques = pd.factorize(loans[k], use_na_sentinel=False)
        code = code * (len(uniques) + 1) + codes
    group, inverse = np.unique(code, return_inverse=True)
    first = np.zeros(len(group), dtype=np.int64)
    first[inverse[::-1]] = np.arange(len(code))[::-1]  # each group's first row
    out = pd.DataFrame({k: loans[k].to_numpy(dtype=object)[first] for k in keys})
    for column in _money_columns(loans):
        values = np.nan_to_num(loans[column].to_numpy(dtype=np.float64))  # blank (not POCI, no purchase ECL): 0
        cents = np.rint(values * 100.0)
        if np.abs(cents).sum() < 2.0**52:  # every partial sum a whole number float64 holds exactly
            out[column] = np.rint(np.bincount(inverse, weights=cents, minlength=len(group))).astype(np.int64)
        else:
            summed = np.zeros(len(group), dtype=np.int64)
            np.add.at(summed, inverse, cents.astype(np.int64))
            out[column] = summed
    out[COUNT] = np.bincount(inverse, minlength=len(group)).astype(np.int64)
    return out


def _book_frame(sums: Sequence[pd.DataFrame]) -> pd.DataFrame:
    """The parts' :func:`loan_sums` added up, money back in currency units (whole cents)."""
    frame = pd.concat([s for s in sums if len(s)], ignore_index=True)
    keys = [k for k in BOOK_KEYS if k in frame.columns]
    frame = frame.groupby(keys, sort=True, dropna=False).sum().reset_index()
    for column in _money_columns(frame):
        frame[column] = frame[column].to_numpy(dtype=np.int64) / 100.0
    if "stage" in frame.columns:
        frame["stage"] = frame["stage"].astype("Int64")
    if "poci" in frame.columns:
        frame["poci"] = frame["poci"].astype(bool)
    return frame


@dataclass(frozen=True)
class PartFacts:
    """A part, validated: its intake (accepted rows not kept), what it accepted in balance,
    and how far the book's tables must reach for its loans."""

    validated: Validated
    accepted_rows: int
    accepted_balance: float
    months: int
    max_age: int
    prior_months: int = 0  # the months its loans need under the prior run's assumptions (run --prior)


@dataclass(frozen=True)
class PartSums:
    """A computed part: its loan sums, its overlays (table and warnings), its findings, its
    PD-ratio coverage, and the Parquet file it wrote (or, waiting for the book's ``amount``
    overlays, the file of its modelled figures and its weights, then its allocation)."""

    sums: pd.DataFrame
    overlays: pd.DataFrame
    overlay_warnings: tuple[str, ...]
    findings: pd.DataFrame
    coverage: pd.DataFrame
    file: str
    pd_path_weights: np.ndarray | None = None  # balance on each curve key (engine.views.pd_path_weights)
    waiting: str | None = None  # written before the book's amount overlays were allocated
    weights: dict[tuple[int, str], np.ndarray] = dataclasses.field(default_factory=dict)
    #: the disclosure tables' cells of its loans (:func:`allowance.disclosure.disclosure_cents`)
    disclosures: dict[str, pd.DataFrame] = dataclasses.field(default_factory=dict)
    #: its loans' modelled ECL per framework at the prior run's assumptions (compute_part's ``prior``)
    at_prior: dict[str, np.ndarray] = dataclasses.field(default_factory=dict)


def part_facts(part: TapePart, *, config: RunConfig, repeated: dict[str, list[int]],
               headers: Sequence[str], prior_config: RunConfig | None = None) -> PartFacts:
    """Read and validate a part; keep only what the book's tables and the tie-out need (and,
    given the prior run's configuration, what its tables need)."""
    validated = read_part(part, config, repeated, headers=headers)
    accepted = validated.intake.accepted
    balance = math.fsum(accepted["balance"].to_numpy(dtype=np.float64)) if len(accepted) else 0.0
    months = engine.tape_months(accepted, config) if len(accepted) else 12
    prior_months = engine.tape_months(accepted, prior_config) if prior_config is not None and len(accepted) else 12
    # a copy: an empty slice is a view that keeps the part's whole frame alive wherever the
    # result is held (a Dask worker keeps it until the caller has it: 2 GB per worker at 10M loans)
    empty = pd.DataFrame({c: pd.Series([], dtype=t) for c, t in accepted.dtypes.items()})  # new, empty arrays
    slim = dataclasses.replace(validated.intake, accepted=empty)
    return PartFacts(validated=dataclasses.replace(validated, intake=slim), accepted_rows=len(accepted),
                     accepted_balance=balance, months=months, max_age=engine.max_age(accepted, config),
                     prior_months=prior_months)


def _write(frame: pd.DataFrame, target: Path) -> None:
    partial = target.with_name(f".{target.name}.partial")
    try:
        frame.to_parquet(partial, index=False)  # typed data, as loans.parquet: text as the tape gave it
        partial.replace(target)
    except OSError as err:
        partial.unlink(missing_ok=True)
        raise OutputError(f"cannot write {target}: {err.strerror or err}", file=target) from err


def compute_part(part: TapePart, *, prep: engine.Prepared, repeated: dict[str, list[int]], headers: Sequence[str],
                 folder: str, chunk_size: int, prior: engine.Prepared | None = None) -> PartSums:
    """Read, validate and compute a part; write its loan detail to ``folder`` as
    ``part-<first row, 12 digits>.parquet`` (names sort in tape order); return its sums.

    With an ``amount`` overlay the part is written as ``.part-<...>.modelled.parquet`` and
    returns its weights; :func:`finish_part` applies the book's allocation to it.
    ``prior``: the book's tables at the prior run's assumptions: the part's loans are computed
    at them too (:func:`allowance.engine.modelled_with`, staged as this run staged them where
    the two stage alike): what a movement isolates assumption changes with, and
    their modelled ECL per framework comes back in ``at_prior`` (8 bytes a loan and framework).
    """
    validated = read_part(part, prep.config, repeated, headers=headers)
    accepted = validated.intake.accepted
    done = engine.run_part(accepted, prep, chunk_size=chunk_size)
    at_prior: dict[str, np.ndarray] = {}
    if prior is not None and len(accepted):
        stages = done.loans[["stage", "poci"]] if engine.same_stages(prep.config, prior.config) and \
            "stage" in done.loans.columns else None
        at_prior = engine.modelled_with(accepted, prior, stages, chunk_size=chunk_size)
    target = Path(folder) / f"part-{part.first_row:012d}.parquet"
    coverage = staging.pd_ratio_coverage(accepted) if prep.staged is not None else pd.DataFrame()
    weights = pd_path_weights(accepted, prep) if len(accepted) else np.zeros(prep.pd.shape[1])
    # by balance, stage and labels, none of which an overlay changes: made before the overlays
    cells = disclosure.disclosure_cents(done.loans, prep.config.as_of, prep.config.frameworks)
    if done.overlays is None:
        waiting = target.with_name(f".{target.stem}.modelled.parquet")
        _write(done.loans, waiting)
        return PartSums(sums=pd.DataFrame(), overlays=pd.DataFrame(), overlay_warnings=(), findings=done.findings,
                        coverage=coverage, file=str(target), pd_path_weights=weights, waiting=str(waiting),
                        weights=done.weights, disclosures=cells, at_prior=at_prior)
    _write(done.loans, target)
    return PartSums(sums=loan_sums(done.loans), overlays=done.overlays.table,
                    overlay_warnings=tuple(done.overlays.warnings), findings=done.findings, coverage=coverage,
                    file=str(target), pd_path_weights=weights, disclosures=cells, at_prior=at_prior)


def finish_part(computed: PartSums, *, config: RunConfig) -> PartSums:
    """A part written before the book's ``amount`` overlays were allocated, finished: its
    overlays applied (``computed.weights`` now holds its share of each allocation), the
    loan detail rewritten in place, its sums."""
    waiting = Path(computed.waiting)
    # run again (a worker lost after it finished): the finished file holds the same modelled
    # figures, and the overlays are applied from those alone
    source = waiting if waiting.exists() else Path(computed.file)
    loans, applied = engine.overlay_part(pd.read_parquet(source), config, computed.weights)
    _write(loans, Path(computed.file))
    waiting.unlink(missing_ok=True)
    return dataclasses.replace(computed, sums=loan_sums(loans), overlays=applied.table,
                               overlay_warnings=tuple(applied.warnings), waiting=None, weights={})


def _allocate(config: RunConfig, parts: Sequence[PartSums]) -> list[dict[tuple[int, str], np.ndarray]]:
    """Each ``amount`` overlay allocated once over the whole book's scope (the parts' weights
    in tape order, :func:`allowance.overlays.allocate_cents`), then split back by part."""
    out: list[dict[tuple[int, str], np.ndarray]] = [{} for _ in parts]
    listed = list(config.assumptions.overlays)
    for key in dict.fromkeys(k for p in parts for k in p.weights):
        pieces = [p.weights.get(key, np.zeros(0, np.int64)) for p in parts]
        weights = np.concatenate(pieces)
        if not weights.size:
            continue
        shares = overlays.allocate_cents(int(np.rint(listed[key[0]].value * 100.0)), weights.astype(float))
        for i, piece in enumerate(np.split(shares, np.cumsum([len(p) for p in pieces])[:-1])):
            out[i][key] = piece
    return out


def _overlay_table(parts: Sequence[PartSums]) -> tuple[pd.DataFrame, list[str]]:
    """The overlays over the book: effects and loans in scope summed over the parts (cents);
    an overlay applied in any part is applied. Warnings once each; "no loans in scope" only
    when no part had one."""
    tables = [p.overlays for p in parts]
    if not tables or tables[0].empty:
        return (tables[0] if tables else pd.DataFrame()), list(dict.fromkeys(w for p in parts for w in p.overlay_warnings))
    table = tables[0].copy()
    for column in ("effect_ifrs9", "effect_cecl"):
        table[column] = np.sum([np.rint(t[column].to_numpy(dtype=np.float64) * 100.0) for t in tables], axis=0) / 100.0
    table["loans_in_scope"] = np.sum([t["loans_in_scope"].to_numpy() for t in tables], axis=0).astype(np.int64)
    statuses = np.array([t["status"].to_numpy(dtype=object) for t in tables])
    applied = (statuses == "applied").any(axis=0)
    table["status"] = np.where(applied, "applied", statuses[0])
    notes = np.array([t["note"].to_numpy(dtype=object) for t in tables])
    table["note"] = ["; ".join(dict.fromkeys(n for n, s in zip(notes[:, i], statuses[:, i]) if n and s == table["status"][i]))
                     for i in range(len(table))]
    idle = {f"overlay {name!r}: no loan matches its segment and stage; not applied"
            for name, was in zip(table["name"], applied) if was}
    warnings = [w for w in dict.fromkeys(w for p in parts for w in p.overlay_warnings) if w not in idle]
    return table, warnings


@dataclass(frozen=True)
class BookRun:
    """A book computed part by part: the tape's intake (no accepted rows kept), the tie-out
    inputs, the book's tables, the loan sums (``loans``: one row per segment, stage, POCI flag
    and measurement, money in units, ``loan_count``), the overlays, the findings and the
    disclosure tables' cells."""

    layout: TapeLayout
    intake: intake.IntakeResult
    accepted_balance: float
    prep: engine.Prepared
    loans: pd.DataFrame
    overlays: pd.DataFrame
    findings: pd.DataFrame
    warnings: list[str]
    files: tuple[str, ...]
    pd_paths: pd.DataFrame = dataclasses.field(default_factory=pd.DataFrame)
    #: the disclosure tables' cells of the whole book (:func:`allowance.disclosure.add_cents`)
    disclosures: dict[str, pd.DataFrame] = dataclasses.field(default_factory=dict)
    #: the book's modelled ECL per framework at the prior run's assumptions, in tape order
    #: (:func:`compute_part`'s ``prior``; empty when not asked for)
    at_prior: dict[str, np.ndarray] = dataclasses.field(default_factory=dict)


def _fresh_folder(folder: Path, create: bool = True) -> None:
    """The loan detail's folder: absent or empty (a dataset never mixes two runs); created."""
    try:
        if folder.exists() and (not folder.is_dir() or any(folder.iterdir())):
            raise OutputError("exists and is not an empty folder: the loan detail of two runs would mix", file=folder,
                              hint="give a new folder, or empty this one")
        if create:
            folder.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise OutputError(f"cannot create the folder: {err.strerror or err}", file=folder) from err


def run_book(path: str | os.PathLike, config: RunConfig, folder: str | os.PathLike, *,
             map: Map = builtins.map, chunk_size: int = engine.CHUNK_SIZE,
             check_tape: Callable[[intake.IntakeResult, float], None] | None = None,
             progress: Callable[[str, int, int], object] | None = None,
             prior_config: RunConfig | None = None) -> BookRun:
    """Read, validate and compute a Parquet tape part by part through ``map``; the loan detail
    goes to ``folder`` (absent or empty; reachable at this path from every worker).

    ``check_tape(intake, accepted_balance)`` runs once the tape is validated and before any
    loan is computed (the API's tie-out to the ledger, which may stop the run).
    ``prior_config``: the prior run's configuration, at which each part is computed too where
    it is computed (:func:`compute_part`'s ``prior``), into ``at_prior``.
    """
    told = progress or (lambda phase, done, total: None)
    refuse_url_output(folder, "the loan detail (every worker mounts it)")
    # absolute: the parts are written where they are computed, by workers whose working
    # folder is their own
    folder = Path(os.path.abspath(folder))
    _fresh_folder(folder, create=False)  # before the tape is read: refused early
    told("read", 0, 1)
    layout = tape_layout(path, config.assumptions.run.max_input_mb)
    repeated = repeated_ids(layout, config, map)
    facts = list(map(functools.partial(part_facts, config=config, repeated=repeated, headers=layout.headers,
                                       prior_config=prior_config), layout.parts))
    taken = dataclasses.replace(combine(layout, [f.validated for f in facts], config),
                                accepted_rows=sum(f.accepted_rows for f in facts))
    taken.require_accepted()
    told("read", 1, 1)
    balance = math.fsum(f.accepted_balance for f in facts)
    if check_tape is not None:
        check_tape(taken, balance)
    accepted = [f for f in facts if f.accepted_rows]
    prep = engine.prepare(config, max(f.months for f in accepted), max(f.max_age for f in accepted),
                          loans=taken.accepted_rows)  # the book's size chooses the loop, as in one process
    # the book's tables at the prior assumptions, as a rerun of the whole tape would make them
    prior = None if prior_config is None else engine.prepare(
        prior_config, max(f.prior_months for f in accepted), max(f.max_age for f in accepted), loans=taken.accepted_rows)
    _fresh_folder(folder)
    parts: list[PartSums] = []
    done = 0
    work = functools.partial(compute_part, prep=prep, repeated=repeated, headers=layout.headers, folder=str(folder),
                             chunk_size=chunk_size, prior=prior)
    for part, result in zip(layout.parts, map(work, layout.parts)):
        parts.append(result)
        done += part.rows
        told("loans", done, layout.rows)
    if any(p.waiting for p in parts):  # amount overlays: allocated over the book, then each part finished
        waiting = [dataclasses.replace(p, weights=a) for p, a in zip(parts, _allocate(config, parts))]
        parts = list(map(functools.partial(finish_part, config=config), waiting))
    overlays, overlay_warnings = _overlay_table(parts)
    warnings = list(overlay_warnings)
    if prep.staged is not None:
        covers = [p.coverage for p in parts if len(p.coverage)]
        if covers:
            cover = pd.concat(covers, ignore_index=True).groupby("segment", sort=True).sum().reset_index()
            warnings = staging.pd_ratio_lines(cover) + warnings
    findings = [p.findings for p in parts if len(p.findings)]
    pd_paths = pd_path_from(np.sum([p.pd_path_weights for p in parts], axis=0), prep)
    pieces = [p.at_prior for p in parts if p.at_prior]
    at_prior = {c: np.concatenate([p[c] for p in pieces]) for c in (pieces[0] if pieces else {})}
    return BookRun(layout=layout, intake=taken, accepted_balance=balance, prep=prep,
                   loans=_book_frame([p.sums for p in parts]), overlays=overlays,
                   findings=pd.concat(findings, ignore_index=True) if findings else pd.DataFrame(),
                   warnings=warnings, files=tuple(p.file for p in parts), pd_paths=pd_paths,
                   disclosures=disclosure.add_cents([p.disclosures for p in parts]), at_prior=at_prior)


