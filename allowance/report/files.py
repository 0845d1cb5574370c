"""The output folder: every file of a run, written safely (all or nothing, never mixed).

Implements
----------
OUTPUT_FILES       the files a run can write, in the order they are listed
OutputPaths        the files written, and notes about leftovers that could not be cleaned
write_outputs      write every output into a sibling folder, then swap it into place
OutputFolder       the same, opened before the run is finished (loans.csv begun early)
write_check_outputs  what ``allowance check --out`` writes: rejected.csv and warnings.csv
check_output_path  refuse an output folder that would overwrite or move an input
write_table_csv    one table to one CSV file (``allowance schedule --csv``), through a temporary file

Safe writing
------------
Everything is written into ``.<out>.partial-XXXX`` beside the output folder; only when
every file is complete does the folder take the place of the old one, by renames
(:mod:`allowance.report.swap`): the old folder is kept as a dated backup until the swap is
done. A failure or a kill at any point leaves the previous complete run; a folder never mixes
two runs. Entries of the output folder that are not run outputs are kept.
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable, Iterable
from contextlib import nullcontext
from concurrent.futures import Future, ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pa_csv

from allowance.exceptions import OutputError
from allowance.intake import IntakeResult
from allowance.intake.files import refuse_url_output
from allowance import aside
from allowance.memory import give_back, given_back
from allowance.report.record import RunReport, run_record
from allowance.report.sheets import warnings_frame
from allowance.report.swap import FolderSwap, replace_folder
from allowance.report.workbook import write_summary_workbook, write_workbook, write_workbooks
from allowance.text import neutralise_frame, neutralise_table

__all__ = [
    "CHECK_FILES", "OUTPUT_FILES", "OutputPaths", "check_output_path", "write_check_outputs", "write_movement",
    "write_outputs", "write_table_csv",
]

OUTPUT_FILES: tuple[str, ...] = (
    "loans.csv", "loans.parquet", "rejected.csv", "warnings.csv", "movement.csv", "movement_loans.csv",
    "what_if.csv", "what_if_stage_changes.csv", "what_if_macro_paths.csv", "sensitivity.csv", "macro_paths.csv",
    "pd_paths.csv", "roll_forecast.csv", "disclosure_ifrs7_35m.csv", "disclosure_asc326_vintage.csv",
    "reserve.xlsx", "summary.xlsx", "run.json",
)

#: the files of a tape check (``allowance check --out``), named and laid out as a run's
CHECK_FILES: tuple[str, ...] = ("rejected.csv", "warnings.csv")


def _date_columns(frame: pd.DataFrame) -> list[int]:
    """Positions of the datetime columns with no time of day anywhere (written as dates)."""
    dated = []
    for i, dtype in enumerate(frame.dtypes):  # by dtype: a column each costs seconds on wide tapes
        if pd.api.types.is_datetime64_any_dtype(dtype) and not getattr(dtype, "tz", None):
            stamps = frame.iloc[:, i].to_numpy(dtype="datetime64[ns]")
            if (np.isnat(stamps) | (stamps == stamps.astype("datetime64[D]"))).all():
                dated.append(i)
    return dated


def _arrow_ready(frame: pd.DataFrame, dated: list[int]) -> pd.DataFrame:
    """Those columns as dates (``2026-09-30``, not a timestamp)."""
    if not dated:
        return frame
    out = frame.copy(deep=False)
    for position in dated:
        days = frame.iloc[:, position].to_numpy(dtype="datetime64[ns]").astype("datetime64[D]")
        out.isetitem(position, pd.Series(days, index=frame.index).dt.date)
    return out


#: Rows converted to Arrow and written at a time: a million loans' detail is never held
#: twice (as a frame and as a whole Arrow table, some 500 MB more at the peak)
_CSV_SLICE_ROWS = 32_768
_ARROW_ERRORS = (pa.ArrowInvalid, pa.ArrowTypeError, pa.ArrowNotImplementedError, TypeError, ValueError)


def _arrow_schema(frame: pd.DataFrame, dated: list[int]) -> pa.Schema | None:
    """The Arrow types of the whole frame (a text column typed from all its values, not the
    first slice's), or None when Arrow cannot write it (duplicate names, mixed, nested or
    all-blank columns)."""
    if frame.columns.duplicated().any():  # Arrow needs unique names
        return None
    try:
        schema = pa.Schema.from_pandas(_arrow_ready(frame.iloc[:1], dated), preserve_index=False)
        for i, dtype in enumerate(frame.dtypes):
            if pd.api.types.is_object_dtype(dtype) and i not in dated:
                schema = schema.set(i, schema.field(i).with_type(pa.array(frame.iloc[:, i], from_pandas=True).type))
    except _ARROW_ERRORS:
        return None
    if any(pa.types.is_null(t) or pa.types.is_nested(t) for t in schema.types):
        return None
    return schema


def _csv(frame: pd.DataFrame, path: Path, threads: int = 4) -> None:
    """Text neutralised; written by Arrow (fast) slice by slice, or by pandas for columns Arrow
    cannot type. The bytes do not depend on the slicing (Arrow's writer has no state but the
    header) nor on the ``threads`` formatting the slices (at most 4)."""
    dated = _date_columns(frame)
    schema = _arrow_schema(frame, dated)
    if schema is not None:
        try:
            # the frame's columns as Arrow's without a copy (numbers, flags and Arrow-backed text
            # are shared; only dates are made), neutralised once, written slice by slice
            table = pa.Table.from_pandas(_arrow_ready(frame, dated), schema=schema, preserve_index=False)
            table = neutralise_table(table.replace_schema_metadata(None))
            if len(frame) < _COMPILED_FROM_ROWS:
                _write_slices(path, lambda start: table.slice(start, _CSV_SLICE_ROWS), len(frame), threads)
                return
            _compiled_csv(path, table, threads)
            return
        except _ARROW_ERRORS:  # a column Arrow cannot type after all: pandas writes the whole file
            pass
    neutralise_frame(frame).to_csv(path, index=False, lineterminator="\n")


def _compiled_csv(path: Path, table: pa.Table, threads: int = 4) -> None:
    """A large table written slice by slice, each slice's rows formatted by a compiled loop
    (:func:`allowance.report.csv_lines.table_lines`: Arrow's bytes; the amounts in whole cents,
    most of a loan's figures, from their cents rather than Arrow's shortest-float search, which
    was most of the time of writing a million loans' detail); a slice the loop does not take,
    and the header, as Arrow writes them."""
    from allowance.report.csv_lines import table_lines  # here: a small table does not compile the loop

    def text(start: int | None) -> object:
        if start is None:  # the header, as Arrow writes it with the first slice
            return _arrow_text(table.slice(0, 0), header=True)
        part = table.slice(start, _CSV_SLICE_ROWS)
        made = table_lines(part)
        return _arrow_text(part, header=False) if made is None else made

    _write_texts(path, text, [None, *range(0, table.num_rows, _CSV_SLICE_ROWS)], threads)


def _write_slices(path: Path, part: Callable[[int], pa.Table], rows: int, threads: int = 4) -> None:
    """Slices ``part(start)`` as CSV text, formatted on up to four threads (Arrow formats
    outside the GIL; a million loans' detail took 4-5 s on one core), written in order, at
    most two slices a thread in memory. The bytes are those of one pass: Arrow's writer
    keeps no state between slices but the header, written with the first."""
    def text(start: int) -> pa.Buffer:
        return _arrow_text(part(start), header=start == 0)

    _write_texts(path, text, list(range(0, max(rows, 1), _CSV_SLICE_ROWS)), threads)


def _arrow_text(table: pa.Table, *, header: bool) -> pa.Buffer:
    sink = pa.BufferOutputStream()
    pa_csv.write_csv(table, sink, write_options=pa_csv.WriteOptions(quoting_style="needed", include_header=header))
    return sink.getvalue()


def _write_texts(path: Path, text: Callable[[object], object], slices: list, threads: int = 4) -> None:
    """``text(s)`` of every slice ``s``, made on up to ``threads`` (at most four) threads,
    written in order (at most two slices a thread in memory)."""
    threads = max(1, min(os.cpu_count() or 1, threads, 4, len(slices)))
    with open(path, "wb") as out, ThreadPoolExecutor(threads, thread_name_prefix="allowance-csv") as pool:
        pending = [pool.submit(text, s) for s in slices[: 2 * threads]]
        for following in slices[2 * threads:] + [None] * min(len(slices), 2 * threads):
            out.write(pending.pop(0).result())
            if following is not None:
                pending.append(pool.submit(text, following))


#: From this many rows the movement's loan table is formatted from its cents by a compiled
#: loop (:mod:`allowance.report.csv_lines`, the same bytes); a smaller one, by Arrow, is not
#: worth compiling the loop for in a fresh process
_COMPILED_FROM_ROWS = 100_000


def _movement_loans_csv(movements, path: Path) -> None:
    """Every framework's movement loan by loan (``framework`` first), one framework after another.

    Each slice is made from the movement's codes and cents as it is written (Movement.loan_table):
    a million loans' table for each framework, and their concatenation, are never held whole.
    The bytes are those :func:`_csv` writes for the concatenated tables. A large table is
    formatted from the codes and cents themselves (:func:`allowance.report.csv_lines.csv_lines`,
    Arrow's bytes; a slice with an amount beyond what it formats goes through Arrow): Arrow's
    formatting of the floats was most of the time of writing the file.
    """
    moves = list(movements)
    if not moves:
        raise ValueError("no movement to write")
    sizes = [m.loan_count for m in moves]

    def framed(m, start: int, stop: int) -> pd.DataFrame:
        table = m.loan_table(start, stop)
        table.insert(0, "framework", pd.array([m.framework] * len(table), dtype="str"))
        return table

    def rows(start: int, stop: int) -> pd.DataFrame:
        pieces, offset = [], 0
        for m, n in zip(moves, sizes):
            lo, hi = max(start - offset, 0), min(stop - offset, n)
            if lo < hi:
                pieces.append(framed(m, lo, hi))
            offset += n
        if not pieces:
            return framed(moves[0], 0, 0)
        return pieces[0] if len(pieces) == 1 else pd.concat(pieces, ignore_index=True)

    total = sum(sizes)
    schema = _arrow_schema(rows(0, min(total, 1)), []) if total else None
    if schema is None:
        _csv(rows(0, total), path)  # an empty movement: what _csv makes of it
        return

    def table(frame: pd.DataFrame) -> pa.Table:
        return neutralise_table(pa.Table.from_pandas(frame, schema=schema, preserve_index=False)
                                .replace_schema_metadata(None))

    if total < _COMPILED_FROM_ROWS:
        _write_slices(path, lambda start: table(rows(start, min(start + _CSV_SLICE_ROWS, total))), total)
        return

    from allowance.report.csv_lines import csv_lines  # here: numba is not imported by a run without it

    def neutralised(labels: pa.Array) -> pa.Array:
        return neutralise_table(pa.table({"text": labels})).column(0).combine_chunks()

    def text(piece: tuple[int, int, int] | None) -> object:
        if piece is None:  # the header, as Arrow writes it with the first slice
            return _arrow_text(table(rows(0, 0)), header=True)
        i, start, stop = piece
        columns = moves[i].loan_columns(start, stop)
        framework = (neutralised(pa.array([moves[i].framework], pa.large_string())),
                     np.zeros(stop - start, dtype=np.int64))
        made = csv_lines([framework, *((neutralised(labels), codes) for labels, codes in columns.text.values())],
                         list(columns.cents.values()))
        if made is None:  # an amount beyond what csv_lines formats: this slice as Arrow writes it
            offset = sum(sizes[:i])
            return _arrow_text(table(rows(offset + start, offset + stop)), header=False)
        return made

    _write_texts(path, text, [None] + [(i, start, min(start + _CSV_SLICE_ROWS, n)) for i, n in enumerate(sizes)
                                       for start in range(0, n, _CSV_SLICE_ROWS)])


def write_table_csv(path: Path, frame: pd.DataFrame) -> Path:
    """Write one table to ``path`` as CSV (text neutralised), through a temporary file, so a
    failure never leaves half a file."""
    path = Path(path)
    partial = path.with_name(f".{path.name}.partial")
    try:
        _csv(frame, partial)
        partial.replace(path)
    except OSError as err:
        partial.unlink(missing_ok=True)
        raise OutputError(f"cannot write {path}: {err.strerror or err}", file=path) from err
    return path


class OutputPaths(list):
    """The files written (a list of paths), and ``notes``: leftovers that could not be cleaned."""

    def __init__(self, paths: Iterable[Path], notes: Iterable[str] = ()) -> None:
        super().__init__(paths)
        self.notes: tuple[str, ...] = tuple(notes)


def _write_book(folder: Path, report: RunReport, done: Callable[[str], None],
                progress: Callable[[str, int, int], object] | None, total: int) -> list[str]:
    """A book computed part by part: its loan detail is already in ``report.loan_detail``; here
    the rejected rows, warnings, the disclosure tables, the macro paths, the summary workbook
    and the run record (whose totals by framework, stage and segment are the loan sums').
    The summary's figures are the loan sums' (``report.loans``: one row per segment, stage,
    POCI flag and measurement, with its loan count), the same as the loans give; there is no
    reserve workbook, whose loan sheet and schedules need the loans themselves."""
    written: list[str] = []

    def did(name: str) -> None:
        written.append(name)
        done(name)

    _csv(report.intake.rejected, folder / "rejected.csv")
    did("rejected.csv")
    _csv(warnings_frame(report), folder / "warnings.csv")
    did("warnings.csv")
    for name, table in (report.disclosures or {}).items():
        _csv(table, folder / f"disclosure_{name}.csv")
        did(f"disclosure_{name}.csv")
    if report.movements:  # made from the loan detail read back (allowance.api._book_movement)
        _csv(pd.concat([m.to_long() for m in report.movements], ignore_index=True), folder / "movement.csv")
        did("movement.csv")
        _movement_loans_csv(report.movements, folder / "movement_loans.csv")
        did("movement_loans.csv")
    if report.macro_paths is not None and not report.macro_paths.empty:
        _csv(report.macro_paths, folder / "macro_paths.csv")
        did("macro_paths.csv")
        if report.pd_paths is not None and not report.pd_paths.empty:
            _csv(report.pd_paths, folder / "pd_paths.csv")
            did("pd_paths.csv")
    write_summary_workbook(folder / "summary.xlsx", report)
    did("summary.xlsx")
    (folder / "run.json").write_text(json.dumps(report.record, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    did("run.json")
    if progress is not None:
        progress("write", total, total)
    return written


def _write_rest(folder: Path, report: RunReport, parquet: bool, done: Callable[[str], None],
                detail: ThreadPoolExecutor | None = None, *, reserve: bool = True) -> Future | None:
    """Every output but loans.csv and run.json: the other tables, then the workbooks
    (``reserve=False``: the summary alone, the reserve workbook being made elsewhere).

    ``detail``: the thread writing loans.csv; movement_loans.csv is queued on it (written
    once loans.csv is, its future returned) rather than written here beside loans.csv: the
    two large files' slices in flight at once, and the workbooks beside them, were the peak
    of writing a run with a movement."""
    if parquet:
        # typed data, not a spreadsheet: text is kept exactly as the tape gave it
        report.loans.to_parquet(folder / "loans.parquet", index=False)
        done("loans.parquet")
    _csv(report.intake.rejected, folder / "rejected.csv")
    done("rejected.csv")
    _csv(warnings_frame(report), folder / "warnings.csv")
    done("warnings.csv")
    moving = None
    if report.movements:
        _csv(pd.concat([m.to_long() for m in report.movements], ignore_index=True), folder / "movement.csv")
        done("movement.csv")
        if detail is None:
            _movement_loans_csv(report.movements, folder / "movement_loans.csv")
            done("movement_loans.csv")
        else:
            moving = detail.submit(given_back, _movement_loans_csv, report.movements, folder / "movement_loans.csv")
    if report.what_if_parts is not None:
        _csv(report.what_if_parts.summary, folder / "what_if.csv")
        done("what_if.csv")
        _csv(report.what_if_parts.stage_changes, folder / "what_if_stage_changes.csv")
        done("what_if_stage_changes.csv")
    if report.what_if_paths is not None and not report.what_if_paths.empty:
        _csv(report.what_if_paths, folder / "what_if_macro_paths.csv")
        done("what_if_macro_paths.csv")
    if report.sensitivity is not None and not report.sensitivity.empty:
        _csv(report.sensitivity, folder / "sensitivity.csv")
        done("sensitivity.csv")
    for name, table in (report.disclosures or {}).items():
        _csv(table, folder / f"disclosure_{name}.csv")
        done(f"disclosure_{name}.csv")
    if report.macro_paths is not None and not report.macro_paths.empty:
        _csv(report.macro_paths, folder / "macro_paths.csv")
        done("macro_paths.csv")
        if report.pd_paths is not None and not report.pd_paths.empty:  # the PDs those paths produce
            _csv(report.pd_paths, folder / "pd_paths.csv")
            done("pd_paths.csv")
    if report.roll_forecast is not None and not report.roll_forecast.empty:  # roll-rate segments only
        _csv(report.roll_forecast, folder / "roll_forecast.csv")
        done("roll_forecast.csv")
    if reserve:
        write_workbooks(folder / "reserve.xlsx", folder / "summary.xlsx", report)
        done("reserve.xlsx")
    else:
        write_summary_workbook(folder / "summary.xlsx", report)
    done("summary.xlsx")
    return moving


def _write_all(folder: Path, report: RunReport, parquet: bool,
               progress: Callable[[str, int, int], object] | None = None,
               loans: Future | None = None) -> list[str]:
    """Every output into ``folder``; ``loans``: loans.csv already being written there
    (:meth:`OutputFolder.begin_loans`), waited for first."""
    written: list[str] = []
    # the bar counts files; the workbooks are most of the time, so they count for more
    weight = {"reserve.xlsx": 6, "summary.xlsx": 2, "loans.csv": 2}
    total = sum(weight.get(n, 1) for n in OUTPUT_FILES)
    told = [0]

    def done(name: str) -> None:
        # only run outputs may be written: the swap keeps every other name as the user's
        assert name in OUTPUT_FILES, name
        written.append(name)
        told[0] += weight.get(name, 1)
        if progress is not None:
            progress("write", min(told[0], total), total)

    if report.loan_detail is not None:  # the loan detail is in its Parquet folder, written part by part
        return _write_book(folder, report, done, progress, total)
    if loans is not None:
        # begun while the run was finished: done before the reserve workbook's process is
        # forked, since a process forked while a thread writes can inherit a lock it holds
        loans.result()
    # what computing the run freed goes back to the system before writing takes its own: the
    # peak of a run is in writing, over the tape and the loan frame
    give_back()
    # The reserve workbook, laid out in Python like the summary, is made by a forked copy of
    # this process where the command line allows it (allowance.aside): forked first,
    # while no thread of this process is busy. A million loans on the project's 2-core
    # machine: 10.77 -> 10.57 s a run quiet (4 pairs), 17.2 -> 16.0 s with another job on the
    # machine; the demo quarter 3.51 -> 3.31 s (8 pairs); the same bytes.
    with aside.start(write_workbook, folder / "reserve.xlsx", report) or nullcontext() as apart:
        # loans.csv is formatted by Arrow outside the GIL: written on a thread of its own while the
        # other files and the workbooks (Python: one core) are made, so both cores work
        with ThreadPoolExecutor(1, thread_name_prefix="allowance-loans") as detail:
            # its own frame over the same columns: nothing the workbooks do to theirs reaches it
            loans_csv = loans or detail.submit(given_back, _csv, report.loans.copy(deep=False), folder / "loans.csv")
            # on an error the block still waits for loans.csv (and movement_loans.csv, queued after it)
            moving = _write_rest(folder, report, parquet, done, detail, reserve=apart is None)
        loans_csv.result()  # its own error, once the rest went through
        if apart is not None:
            apart.result()
            done("reserve.xlsx")
    done("loans.csv")
    if moving is not None:
        moving.result()
        done("movement_loans.csv")
    record = report.record or run_record(
        report.config, report.intake, report.loans, tie_out=report.tie_out, warnings=report.warnings,
        movements=report.movements,
    )
    (folder / "run.json").write_text(json.dumps(record, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    done("run.json")
    if progress is not None:
        progress("write", total, total)
    return sorted(written, key=OUTPUT_FILES.index)  # listed in one order, whichever finished first


def check_output_path(out_dir: Path, inputs: Iterable[str | Path] = ()) -> None:
    """Refuse an output folder that a run must not replace.

    Replacing the folder moves it aside, so it must not be the current folder or hold it, and
    no input file may sit directly in it (a tape there named ``loans.csv`` would be
    overwritten, and a tape beside its outputs is easily mistaken for one). An input in a
    subfolder of it (the demo's ``prior_quarter/``) is carried over untouched.

    Raises
    ------
    OutputError
        Naming the folder and what is wrong.
    """
    out_dir = Path(out_dir)
    if str(out_dir).strip() == "":
        raise OutputError("the output folder is empty text", hint="give --out a folder name, e.g. --out q3-out")
    refuse_url_output(out_dir, "the run's output")
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputError("the output path exists and is not a folder", file=out_dir,
                          hint="choose a folder name for --out")
    target = out_dir.resolve()
    here = Path.cwd().resolve()
    if target == here or target in here.parents:
        raise OutputError("the output folder is the current folder or holds it", file=out_dir,
                          hint="write the outputs to a folder of their own, e.g. --out q3-out")
    for item in inputs:
        path = Path(item)
        if path.resolve().parent == target:
            raise OutputError(f"the input file {path.name!r} is in the output folder, which a run replaces",
                              file=out_dir, hint="write the outputs to a folder of their own, e.g. --out q3-out")


def write_movement(out_dir: Path, movements) -> list[Path]:
    """Write the movement between two finished runs (``allowance compare --out``).

    ``movement.csv`` and ``movement_loans.csv`` as a run writes them, and
    ``movement_not_isolated.csv``: each line the inputs could not isolate, and why.
    """
    out_dir = Path(out_dir)
    check_output_path(out_dir, [])
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
        moves = list(movements)
        paths = [out_dir / "movement.csv", out_dir / "movement_loans.csv", out_dir / "movement_not_isolated.csv"]
        _csv(pd.concat([m.to_long() for m in moves], ignore_index=True), paths[0])
        _movement_loans_csv(moves, paths[1])
        _csv(pd.DataFrame([{"framework": m.framework, "not_isolated": text} for m in moves for text in m.not_isolated],
                          columns=["framework", "not_isolated"]), paths[2])
    except OSError as err:
        raise OutputError(f"cannot be written ({err.strerror or err})", file=out_dir) from err
    return paths


class OutputFolder:
    """A run's output folder opened before the run is finished, so that its loan detail can be
    written while the rest of the run is computed.

    ``with OutputFolder(out) as folder:`` locks ``out`` and makes the fresh partial folder
    (:class:`~allowance.report.swap.FolderSwap`); :meth:`begin_loans` starts writing
    ``loans.csv`` there on a thread of its own once the loan frame is final;
    :meth:`write` writes the rest as :func:`write_outputs` does and swaps the folder in.
    Leaving the block without :meth:`write` (an error, Ctrl-C) waits for that thread and
    discards the partial folder: the previous outputs stay as they were.

    The command line opens one for a run with a movement (``run --prior``), where the
    movement leaves a core partly idle that ``loans.csv`` can use.
    """

    def __init__(self, out_dir: Path) -> None:
        self.out_dir = Path(out_dir)
        self._swap = FolderSwap(self.out_dir, OUTPUT_FILES)
        self._pool: ThreadPoolExecutor | None = None
        self._loans: Future | None = None

    def __enter__(self) -> OutputFolder:
        self._swap.open()
        return self

    def __exit__(self, *exc: object) -> None:
        try:
            self._settle()
        finally:
            self._swap.close()

    def _settle(self) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True)
            self._pool = None

    def begin_loans(self, loans: pd.DataFrame) -> None:
        """Start writing ``loans.csv`` from ``loans`` (the run's final loan frame; its own
        frame over the same columns is written, so nothing done to ``loans`` later reaches it)."""
        if self._loans is not None or self._swap.partial is None:
            return
        self._pool = ThreadPoolExecutor(1, thread_name_prefix="allowance-loans")
        # two formatting threads, not four: beside the movement (its core partly idle) four
        # were no faster, and held eight slices in memory with the movement's (a million loans:
        # the peak 1,341-1,345 MiB against 1,311-1,312 before; two threads 1,337 against 1,326)
        self._loans = self._pool.submit(given_back, _csv, loans.copy(deep=False), self._swap.partial / "loans.csv", 2)

    def write(self, report: RunReport, *, parquet: bool = False,
              progress: Callable[[str, int, int], object] | None = None) -> OutputPaths:
        """Write every other output of ``report`` and swap the folder in; as :func:`write_outputs`."""
        check_output_path(self.out_dir, [i.path for i in report.config.inputs])
        loans = self._loans
        if loans is not None and report.loan_detail is not None:  # pragma: no cover - the CLI never asks
            raise ValueError("OutputFolder.write: loans.csv was begun for a run whose loans are written part by part")
        def write(folder: Path) -> list[str]:
            try:
                return _write_all(folder, report, parquet, progress, loans=loans)
            except BaseException:
                self._settle()  # the loans thread is done with the folder before it is discarded
                raise

        try:
            names = self._swap.fill(write)
        finally:
            self._settle()
        return OutputPaths([self.out_dir / name for name in names], self._swap.notes)


def write_outputs(out_dir: Path, report: RunReport, *, parquet: bool = False,
                  progress: Callable[[str, int, int], object] | None = None) -> list[Path]:
    """Write every output of a run into ``out_dir``, all or nothing.

    Parameters
    ----------
    out_dir : Path
        The output folder; created (with its parents) if missing. An earlier run's folder is
        replaced as a whole; entries in it that are not run outputs are kept.
    report : RunReport
        The run. When ``report.record`` is empty the run record is built here.
    parquet : bool
        Also write ``loans.parquet`` (text as read, not neutralised: it is not a spreadsheet).
    progress : callable, optional
        ``progress("write", done, total)`` after each file (the workbooks weigh more).

    Returns
    -------
    OutputPaths
        The files written, in :data:`OUTPUT_FILES` order; ``.notes`` for the run's warnings.

    Raises
    ------
    OutputError
        The folder is refused (:func:`check_output_path`), cannot be created or a file cannot
        be written; the previous outputs are left complete and nothing is half written.

    Notes
    -----
    ``loans.csv``, ``rejected.csv``, ``warnings.csv``, ``movement*.csv``, ``what_if*.csv``
    and the workbook neutralise text that a spreadsheet would read as a formula
    (:func:`~allowance.text.neutralise_text`).
    """
    out_dir = Path(out_dir)
    check_output_path(out_dir, [i.path for i in report.config.inputs])  # refused before the folder is locked
    with OutputFolder(out_dir) as folder:
        return folder.write(report, parquet=parquet, progress=progress)


def write_check_outputs(out_dir: Path, intake: IntakeResult) -> OutputPaths:
    """Write a tape check's ``rejected.csv`` and ``warnings.csv`` into ``out_dir``, all or nothing.

    The same files a run writes (text neutralised likewise), the tape-level notes (renamed
    columns, line breaks in values) as ``tape`` warnings; other entries of ``out_dir`` are kept.
    """
    out_dir = Path(out_dir)
    check_output_path(out_dir, [intake.file.path])
    cols = ["source_row", "loan_id", "column", "code", "message"]
    parts = [intake.warnings.reindex(columns=cols)] if len(intake.warnings) else []
    if intake.notes:
        parts.append(pd.DataFrame({"code": "tape", "message": list(intake.notes)}).reindex(columns=cols))
    warnings = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=cols)
    if len(warnings):
        warnings["source_row"] = pd.to_numeric(warnings["source_row"], errors="coerce").astype("Int64")

    def write(folder: Path) -> None:
        _csv(intake.rejected, folder / "rejected.csv")
        _csv(warnings, folder / "warnings.csv")

    notes = replace_folder(out_dir, write, CHECK_FILES)
    return OutputPaths([out_dir / name for name in CHECK_FILES], notes)
