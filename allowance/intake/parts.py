"""A Parquet tape read part by part: a file's row groups, or the files of a dataset folder.

A tape too large for one process is read where it is computed: each part (one row group)
goes through the tape's own rules (:func:`allowance.intake.tape.validate`, the one
validation path), on whatever ``map`` the caller hands over (the builtin, a process pool, a
Dask cluster). Only the book-level facts a part cannot see alone are found first, from the
metadata and one column:

* the parts and their first rows, from the Parquet footers (no data read);
* the loan ids the whole tape repeats, with their rows: every part hashes its ids (one
  column), the caller's process keeps the hashes seen twice, and the parts return the ids
  behind those hashes, compared exactly;
* whether the as-of date leaves a loan on the book (each part's :class:`DateEvidence`,
  combined) and that there is a data row at all.

A row's number is its row in the whole tape plus 1, as if a header were line 1 (the
single-file Parquet numbering), so a rejected row is named by file, row, column and reason
as in a tape read whole; ``rows read = accepted + rejected`` holds for every part and so for
the book.

Implements
----------
TapePart     one row group of one file, and the number of its first row in the whole tape
partition_values  the columns a dataset partitioned into ``column=value`` folders keeps in their names
TapeLayout   a tape's parts, headers and fingerprint, from the footers alone
tape_layout  a Parquet file or a folder of Parquet files -> TapeLayout
repeated_ids the ids on more than one row of the whole tape -> their rows
read_part    one part through the tape's rules -> Validated (the split rows, date evidence)
combine      the parts' results as one IntakeResult, after the book-wide checks
read_parts   all of it: a Parquet tape read part by part through ``map`` -> IntakeResult
"""

from __future__ import annotations

import builtins
import dataclasses
import functools
import hashlib
import os
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from allowance.exceptions import InputFileError, TapeError
from allowance.intake.fields import FIELDS
from allowance.intake.files import Scan, check_size, not_found, scan
from allowance.intake.parse import PARSERS
from allowance.intake.readers import arrow_tape, as_text, supported_column
from allowance.intake.results import IntakeResult
from allowance.intake.rules import id_hashes
from allowance.intake.tape import (
    DateEvidence,
    Validated,
    check_as_of_leaves_loans,
    map_columns,
    validate,
)
from allowance.schemas import InputFile, RunConfig

if TYPE_CHECKING:  # loaded where a part is read
    import pyarrow.parquet as pq

__all__ = ["TapeLayout", "TapePart", "combine", "is_partitioned", "read_part", "read_parts", "repeated_ids",
           "tape_layout"]

Map = Callable[[Callable, Iterable], Iterable]


@dataclass(frozen=True)
class TapePart:
    """One row group of one Parquet file; ``first_row`` rows of the whole tape come before it.

    ``file`` is an absolute path: a part may be read by a worker of a cluster, whose working
    folder is its own (a tape given as ``tape.parquet`` would be looked for there).
    ``partition``: the ``(column, value)`` pairs of the folders the file is in, for a folder
    written partitioned (``segment=auto/...``): columns of every row of the file, after its own.
    """

    file: str
    row_group: int
    first_row: int
    rows: int
    partition: tuple[tuple[str, str], ...] = ()
    #: rows of the row group before this part: a row group longer than :data:`PART_ROWS` is
    #: read as several parts (``rows`` of it from ``offset``)
    offset: int = 0


@dataclass(frozen=True)
class TapeLayout:
    """A Parquet tape as parts, read from the footers alone.

    ``record`` is the tape's run-record entry: a file's SHA-256, or for a folder the SHA-256
    of its files' ``name<TAB>sha256`` lines (in name order) and their total size.
    """

    path: str
    parts: tuple[TapePart, ...]
    headers: list[str]
    rows: int
    record: InputFile


def is_partitioned(path: str | Path) -> bool:
    """Whether a tape path is read part by part: a folder, or a Parquet file."""
    path = Path(path)
    return path.is_dir() or path.suffix.lower() in (".parquet", ".pq")


def _files(path: Path) -> list[Path]:
    if path.is_dir():
        files = sorted(p for p in path.rglob("*") if p.is_file() and p.suffix.lower() in (".parquet", ".pq"))
        if not files:
            raise InputFileError("is a folder with no .parquet files", file=path,
                                 hint="give a Parquet file, or a folder of the tape's Parquet files")
        return files
    return [path]


#: The most rows a part holds: a longer row group (pandas and pyarrow write up to 1,048,576
#: rows in one, Spark about 128 MB) is read as parts of this size, so that a cluster spreads
#: it over its workers and a worker holds a part, not the row group, while computing. The
#: engine's chunk (:data:`allowance.engine.CHUNK_SIZE`) is the same size.
PART_ROWS = 250_000


def partition_values(file: Path, folder: Path) -> tuple[tuple[str, str], ...]:
    """The ``(column, value)`` pairs of the ``column=value`` folders between ``folder`` and
    ``file``: how pandas (``to_parquet(partition_cols=...)``), Arrow and Spark
    (``partitionBy``) write a dataset partitioned by a column, which then lives in the folder
    names and not in the files. Values are unquoted as those writers quote them (``%20``).

    >>> partition_values(Path("tapes/segment=auto/grade=B%201/part-0.parquet"), Path("tapes"))
    (('segment', 'auto'), ('grade', 'B 1'))
    >>> partition_values(Path("tapes/2026/part-0.parquet"), Path("tapes"))
    ()
    """
    from urllib.parse import unquote

    pairs = []
    for name in file.relative_to(folder).parts[:-1]:
        key, sep, value = name.partition("=")
        if sep and key:
            pairs.append((unquote(key), unquote(value)))
    return tuple(pairs)


def tape_layout(path: str | Path, max_mb: float, part_rows: int | None = None) -> TapeLayout:
    """The parts of a Parquet tape (a file, or a folder of files read in name order).

    Every file must have the same columns in the same order; each is at most ``max_mb``
    MiB (``[run] max_input_mb`` applies per file). Files are fingerprinted as they are (a
    streamed SHA-256), never loaded. A part is a row group, or ``part_rows`` rows of a longer
    one (default :data:`PART_ROWS`).
    """
    import pyarrow.parquet as pq

    path = Path(path)
    if not path.exists():
        raise not_found(path)
    part_rows = part_rows or PART_ROWS
    parts: list[TapePart] = []
    headers: list[str] | None = None
    rows = 0
    hashes: list[tuple[str, Scan]] = []
    for file in _files(path):
        check_size(file, max_mb)
        try:
            meta = pq.ParquetFile(file).metadata
        except (pa.ArrowException, OSError) as err:
            raise InputFileError(f"cannot be read as Parquet ({err})", file=file) from err
        partition = partition_values(file, path) if path.is_dir() else ()
        own = list(meta.schema.to_arrow_schema().names)
        if any(key in own for key, _ in partition):
            raise TapeError(f"has a column named like a folder it is in ({', '.join(k for k, _ in partition)}=...)",
                            file=file, hint="keep the column in the files or in the folder names, not both")
        names = own + [key for key, _ in partition]
        if headers is None:
            headers = names
        elif names != headers:
            raise TapeError(f"has the columns {names} (its own, then those of its folders' names) but "
                            f"{_files(path)[0].relative_to(path)} has {headers}", file=file,
                            hint="write every file of the tape with the same columns in the same order, "
                                 "partitioned by the same columns")
        for group in range(meta.num_row_groups):
            n = meta.row_group(group).num_rows
            for offset in range(0, n, part_rows):
                taken = min(part_rows, n - offset)
                parts.append(TapePart(file=os.path.abspath(file), row_group=group, first_row=rows, rows=taken,
                                      partition=partition, offset=offset))
                rows += taken
        hashes.append((str(file.relative_to(path)) if path.is_dir() else file.name, scan(file, "tape")))
    if rows == 0:
        raise TapeError("has a header but no data rows", file=path, hint="export the tape again with its loans")
    if path.is_dir():
        digest = hashlib.sha256("".join(f"{name}\t{s.record.sha256}\n" for name, s in hashes).encode())
        record = InputFile(role="tape", path=str(path), sha256=digest.hexdigest(),
                           bytes=sum(s.record.bytes for _, s in hashes))
    else:
        record = hashes[0][1].record
    return TapeLayout(path=str(path), parts=tuple(parts), headers=headers or [], rows=rows, record=record)


def _read(part: TapePart, columns: Sequence[str] | None = None) -> pa.Table:
    """The part's rows (``columns`` of them, in that order, or all): the file's own columns,
    then the columns of its folders' names (:func:`partition_values`), as text on every row."""
    import pyarrow.parquet as pq

    given = dict(part.partition)
    own = None if columns is None else [c for c in columns if c not in given]
    try:
        source = pq.ParquetFile(part.file)
        if part.offset == 0 and part.rows == source.metadata.row_group(part.row_group).num_rows:
            table = source.read_row_group(part.row_group, columns=own)
        else:  # a slice of a long row group: its batches streamed, the part's rows kept
            table = _rows_of(source, part, own)
    except (pa.ArrowException, OSError) as err:
        raise InputFileError(f"row group {part.row_group} cannot be read as Parquet ({err})", file=part.file) from err
    for key, value in part.partition:
        table = table.append_column(key, pa.array([value] * table.num_rows, pa.string()))
    return table if columns is None or not given else table.select(list(columns))


def _rows_of(source: "pq.ParquetFile", part: TapePart, columns: Sequence[str] | None) -> pa.Table:
    """Rows ``offset .. offset + rows`` of the part's row group, read batch by batch (the rows
    before are decoded and let go: a part never holds the whole row group)."""
    kept, seen = [], 0
    stop = part.offset + part.rows
    for batch in source.iter_batches(batch_size=65_536, row_groups=[part.row_group], columns=columns,
                                     use_threads=False):
        start, end = seen, seen + batch.num_rows
        seen = end
        if end <= part.offset:
            continue
        kept.append(batch.slice(max(part.offset - start, 0), min(end, stop) - max(start, part.offset)))
        if end >= stop:
            break
    return pa.Table.from_batches(kept)


def _ids(part: TapePart, header: str) -> pa.ChunkedArray:
    """The part's loan ids as the rules read them (text, trimmed as the parser trims)."""
    column = as_text(supported_column(_read(part, [header]).column(0), header, Path(part.file)))
    return PARSERS[FIELDS["loan_id"].kind](column, FIELDS["loan_id"]).values


def part_id_hashes(part: TapePart, header: str) -> np.ndarray:
    """The 64-bit hash of each of the part's loan ids (:func:`allowance.intake.rules.id_hashes`)."""
    return id_hashes(_ids(part, header))


def part_ids_among(part: TapePart, header: str, hashes: np.ndarray) -> pd.DataFrame:
    """The part's ids whose hash is among ``hashes``, with their rows (``loan_id, source_row``)."""
    ids = _ids(part, header)
    rows = np.flatnonzero(np.isin(id_hashes(ids), hashes) & np.asarray(pc.is_valid(ids)))
    return pd.DataFrame({"loan_id": pc.take(ids, pa.array(rows, pa.int64())).to_pylist(),
                         "source_row": part.first_row + rows + 2})


def repeated_ids(layout: TapeLayout, config: RunConfig, map: Map = builtins.map) -> dict[str, list[int]]:
    """The loan ids on more than one row of the whole tape, each with all its rows (ascending).

    Two light passes over the ids (one column): the hashes of every part, then the ids
    behind the hashes seen more than once, compared exactly. The caller's process holds
    8 bytes per loan for a moment, never the tape.
    """
    header = layout.headers[map_columns(layout.headers, config.assumptions.tape.columns, layout.path).ours["loan_id"]]
    hashes = np.concatenate(list(map(functools.partial(part_id_hashes, header=header), layout.parts)))
    values, counts = np.unique(hashes, return_counts=True)
    seen_twice = values[counts > 1]
    del hashes, values, counts
    if not seen_twice.size:
        return {}
    found = pd.concat(list(map(functools.partial(part_ids_among, header=header, hashes=seen_twice), layout.parts)),
                      ignore_index=True)
    found = found[found.duplicated("loan_id", keep=False)].sort_values("source_row", kind="stable")
    return {str(k): [int(r) for r in rows] for k, rows in found.groupby("loan_id", sort=False)["source_row"]}


def read_part(part: TapePart, config: RunConfig, repeated: dict[str, list[int]], *,
              headers: Sequence[str] | None = None) -> Validated:
    """One part of the tape through the tape's rules (:func:`allowance.intake.tape.validate`).

    Its rows are numbered in the whole tape; ``repeated`` is :func:`repeated_ids` of the whole
    tape. The part's file record names the file the part is in.
    """
    source = _read(part)
    names = list(source.column_names)
    if headers is not None and names != list(headers):
        raise TapeError(f"row group {part.row_group} has the columns {names}, not {list(headers)}", file=part.file)
    path = Path(part.file)
    record = InputFile(role="tape", path=str(path), sha256="0" * 64, bytes=0)  # the layout fingerprints the tape
    # typed columns checked in their own type, as in a tape read whole (readers.arrow_tape)
    raw = arrow_tape(source, path, Scan(record=record, newlines=-1, ends_with_newline=False), part.first_row + 2)
    return validate(raw, path, config, repeated=repeated)


def _date_formats(parts: Sequence[IntakeResult], path: str) -> dict[str, str]:
    """Each date column's format over the parts: day-first in one part and month-first in
    another is the file-wide conflict a tape read whole reports."""
    out: dict[str, str] = {}
    for name in dict.fromkeys(k for p in parts for k in p.date_formats):
        forms = list(dict.fromkeys(p.date_formats[name] for p in parts if name in p.date_formats))
        if any("day first" in f for f in forms) and any("month first" in f for f in forms):
            raise TapeError(f"dates of {name} are written day-first in some files or row groups and month-first "
                            "in others", file=path, column=name, hint="export the dates as YYYY-MM-DD")
        written = [f for f in forms if f != "blank"]  # a part whose column is all blank says nothing
        out[name] = max(written, key=len) if written else "blank"
    return out


def _naming_file(result: IntakeResult, folder: str, file_first_row: int) -> IntakeResult:
    """A part's rejected rows and findings with ``source_file`` and ``file_row`` after
    ``source_row``: the file (relative to the folder) and the row's number in that file (its
    first data row is 1), where ``source_row`` numbers the row in the whole tape + 1.
    ``file_first_row`` rows of the tape come before the file."""
    name = Path(result.file.path).relative_to(os.path.abspath(folder)).as_posix()

    def named(frame: pd.DataFrame) -> pd.DataFrame:
        frame = frame.copy()
        frame.insert(1, "source_file", pd.Series([name] * len(frame), index=frame.index, dtype=object))
        if "source_row" in frame.columns:
            rows = pd.to_numeric(frame["source_row"], errors="coerce") - 1 - file_first_row
            frame.insert(2, "file_row", rows.astype("Int64"))
        return frame

    return dataclasses.replace(result, rejected=named(result.rejected), findings=named(result.findings))


def combine(layout: TapeLayout, parts: Sequence[Validated], config: RunConfig) -> IntakeResult:
    """The parts' results as the tape's one :class:`IntakeResult`, after the book-wide checks.

    ``accepted`` is the parts' accepted rows in tape order (empty frames when the parts were
    computed where they were read); rejected rows and findings are in row order; the counts
    are sums, so rows read = accepted + rejected for the book as for every part.
    """
    results = [p.intake for p in parts]
    if sum(r.rows_read for r in results) == 0:
        raise TapeError("has a header but no data rows", file=layout.path, hint="export the tape again with its loans")
    evidence = DateEvidence()
    for p in parts:
        evidence = evidence | p.dates
    check_as_of_leaves_loans(evidence, config.assumptions.run.as_of, layout.path)
    if Path(layout.path).is_dir():  # a folder: each row also names its file and its row there
        first_of_file: dict[str, int] = {}
        for part in layout.parts:
            first_of_file.setdefault(part.file, part.first_row)
        results = [_naming_file(r, layout.path, first_of_file[part.file]) for r, part in zip(results, layout.parts)]
    findings = [r.findings for r in results if len(r.findings)]
    return IntakeResult(
        accepted=pd.concat([r.accepted for r in results], ignore_index=True),
        # a part with no rejected row holds an empty frame of object columns (one block, cheap when wide)
        rejected=pd.concat([r.rejected for r in results if len(r.rejected)] or [results[0].rejected],
                           ignore_index=True),
        findings=pd.concat(findings, ignore_index=True) if findings else results[0].findings,
        rows_read=sum(r.rows_read for r in results),
        file=layout.record,
        blank_rows=sum(r.blank_rows for r in results),
        headers=results[0].headers,
        date_formats=_date_formats(results, layout.path),
        notes=tuple(dict.fromkeys(n for r in results for n in r.notes)),
        extra_columns=results[0].extra_columns,
    )


def read_parts(path: str | Path, config: RunConfig, map: Map = builtins.map) -> IntakeResult:
    """A Parquet tape (a file or a folder of files) read part by part through ``map``: the
    result :func:`allowance.intake.read_tape` gives for the same rows, the parts validated
    wherever ``map`` runs them."""
    layout = tape_layout(path, config.assumptions.run.max_input_mb)
    repeated = repeated_ids(layout, config, map)
    parts = list(map(functools.partial(read_part, config=config, repeated=repeated, headers=layout.headers),
                     layout.parts))
    return combine(layout, parts, config)
