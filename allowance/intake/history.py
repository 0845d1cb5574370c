"""Read the period's charge-off file and a prior run's output folder."""

from __future__ import annotations

import json
from collections.abc import Collection, Mapping
from dataclasses import dataclass
from datetime import date
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
import pandas as pd
from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from allowance.exceptions import InputFileError
from allowance.intake.fields import FIELDS
from allowance.intake.files import check_size, file_kind, not_found, refuse_other_separators
from allowance.intake.parse import NUMBER_PATTERN
from allowance.intake.readers import read_raw
from allowance.schemas import Framework

if TYPE_CHECKING:  # pragma: no cover
    import pyarrow as pa

CHARGE_OFF_COLUMNS = ("loan_id", "gross_charge_off", "recoveries")


def read_charge_offs(path: Path, max_mb: float = 2048.0) -> pd.DataFrame:
    """Read the period's charge-offs: one row per loan charged off or recovering this period.

    Columns (headers matched ignoring case and surrounding spaces): ``loan_id``,
    ``gross_charge_off`` (amount written off in the period, ≥ 0) and ``recoveries``
    (amounts recovered in the period, ≥ 0; blank = 0); optionally ``segment``, which places
    recoveries on loans written off in earlier periods (in neither run) in the roll-forward.
    CSV, XLSX or Parquet.

    Returns
    -------
    pandas.DataFrame
        ``loan_id`` (text), ``gross_charge_off`` and ``recoveries`` (float64), and
        ``segment`` (text) when the file has it.

    Raises
    ------
    InputFileError
        A missing column, or the first bad cell, naming its row and column.
    """
    path = Path(path)
    check_size(path, max_mb)
    raw = read_raw(path, file_kind(path))
    if raw.malformed:
        bad = raw.malformed[0]
        raise InputFileError(
            f"the line has {len(bad.fields)} fields but the header has {len(raw.headers)}",
            file=path, row=bad.source_row,
        )
    where = {h.strip().casefold(): i for i, h in enumerate(raw.headers)}
    missing = [c for c in CHARGE_OFF_COLUMNS if c not in where]
    if missing:
        refuse_other_separators(list(raw.headers), {*CHARGE_OFF_COLUMNS, "segment"}, lambda h: h.strip().casefold(),
                                path, what="charge-off file", instead="XLSX or Parquet")
        raise InputFileError(
            f"missing column{'s' if len(missing) > 1 else ''}: {', '.join(missing)}",
            file=path,
            hint="the header must be loan_id,gross_charge_off,recoveries",
        )
    text = {c: raw.table.column(where[c]).to_pylist() for c in CHARGE_OFF_COLUMNS}
    rows = raw.source_row
    ids = [(v or "").strip() for v in text["loan_id"]]
    for line, loan_id in zip(rows, ids):
        if not loan_id:
            raise InputFileError("loan_id is blank", file=path, row=int(line), column="loan_id")
    series = pd.Series(ids, dtype="str")
    dup = np.flatnonzero(series.duplicated(keep=False).to_numpy())
    if dup.size:
        first = ids[dup[0]]
        lines = [str(rows[i]) for i in dup if ids[i] == first]
        raise InputFileError(
            f"loan_id {first!r} appears on rows {', '.join(lines)}",
            file=path, row=int(rows[dup[0]]), column="loan_id",
            hint="give one row per loan (add partial charge-offs together)",
        )
    out = {"loan_id": series}
    for column in CHARGE_OFF_COLUMNS[1:]:
        values = pd.Series(text[column], dtype="str").str.strip()
        blank = values.isna() | (values == "")
        if column == "gross_charge_off" and blank.any():
            line = int(rows[np.flatnonzero(blank.to_numpy())[0]])
            raise InputFileError(f"{column} is blank", file=path, row=line, column=column, hint="write 0 if nothing")
        good = values.str.fullmatch(NUMBER_PATTERN).fillna(False).astype(bool) | blank
        numbers = pd.to_numeric(values.where(~blank, "0").where(good, "nan"), errors="coerce").to_numpy(np.float64)
        bad = ~good.to_numpy() | (numbers < 0) | ~np.isfinite(numbers)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputFileError(
                f"{column} {text[column][i]!r} is not an amount of at least 0",
                file=path, row=int(rows[i]), column=column, hint="write plain decimals such as 1234.56",
            )
        out[column] = numbers
    if "segment" in where:
        seg = pd.Series(raw.table.column(where["segment"]).to_pylist(), dtype="str").str.strip()
        out["segment"] = seg.where(seg != "")
    return pd.DataFrame(out)


@dataclass(frozen=True)
class PriorRun:
    """A previous run's output: its loan results and its run record (checked by :class:`PriorRecord`);
    ``source`` the loan detail read (``loans.csv``, or the Parquet folder of a book computed part by part)."""

    loans: pd.DataFrame
    record: dict
    source: Path | None = None


#: The largest run.json read, in bytes. A run record holds the assumptions and a few counts;
#: anything larger is not one of ours.
MAX_RECORD_BYTES = 64 * 1024 * 1024


class PriorRecord(BaseModel):
    """The part of a prior run's ``run.json`` that a later run relies on; other keys are kept.

    ``assumptions`` is that run's merged assumptions (to rerun this tape under them); one
    without a ``[run]`` table listing its frameworks is dropped, not trusted.
    """

    model_config = ConfigDict(extra="allow", frozen=True, allow_inf_nan=False)

    package: Literal["allowance"] = "allowance"
    as_of: date | None = None
    frameworks: list[Framework] = Field(default_factory=list)
    assumptions: dict[str, Any] | None = None

    @field_validator("assumptions")
    @classmethod
    def _runnable(cls, value: dict[str, Any] | None) -> dict[str, Any] | None:
        run = value.get("run") if isinstance(value, dict) else None
        if not isinstance(run, dict) or not isinstance(run.get("frameworks"), list):
            return None
        return value


def read_run_record(path: Path) -> dict:
    """Read and check a run's ``run.json``: size, JSON, nesting and shape (:class:`PriorRecord`).

    Raises
    ------
    InputFileError
        Naming the file and, for a wrong shape, the key and what it should be.
    """
    path = Path(path)
    try:
        with path.open("rb") as handle:
            data = handle.read(MAX_RECORD_BYTES + 1)
    except OSError as err:
        raise InputFileError(f"cannot be read ({err.strerror or err})", file=path) from err
    if len(data) > MAX_RECORD_BYTES:
        raise InputFileError(f"is larger than {MAX_RECORD_BYTES // 2**20} MiB: not a run record", file=path,
                             hint="give the --out folder of a completed run")
    try:
        record = json.loads(data.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as err:
        raise InputFileError(f"cannot be read as JSON ({err})", file=path) from err
    except RecursionError as err:
        raise InputFileError("is nested too deeply to be a run record", file=path,
                             hint="give the --out folder of a completed run") from err
    if not isinstance(record, dict):
        raise InputFileError("is not a run record (expected a JSON object)", file=path)
    try:
        checked = PriorRecord.model_validate(record)
    except ValidationError as err:
        first = err.errors()[0]
        key = ".".join(str(part) for part in first["loc"]) or "the record"
        raise InputFileError(
            f"is not a run record of this tool: {key}: {first['msg'].lower()}",
            file=path,
            column=None,
            hint="give the --out folder of a completed 'allowance run'",
        ) from err
    except RecursionError as err:
        raise InputFileError("is nested too deeply to be a run record", file=path) from err
    if "assumptions" in record:
        record["assumptions"] = checked.assumptions
    return record


_TEXT_COLUMNS = {n for n, f in FIELDS.items() if f.kind in ("text", "choice")} | {"stage_reason"}
#: read as text too when only some columns are read (pandas leaves dates as text; Arrow would type them)
_DATE_COLUMNS = {n for n, f in FIELDS.items() if f.kind == "date"}
#: true/false columns: the tape's flags and the POCI flag a run writes
_FLAG_COLUMNS = {n for n, f in FIELDS.items() if f.kind == "boolean"} | {"poci"}


def _prior_files(folder: Path, role: str) -> tuple[Path, dict]:
    """A previous run's loan detail (the path of its ``loans.csv``, or of the folder of Parquet
    files a book computed part by part wrote, which its ``run.json`` names) and its
    ``run.json`` (read and checked)."""
    folder = Path(folder)
    if not folder.is_dir():
        raise not_found(folder, f"the {role} run folder was not found", hint="give the --out folder of that run")
    loans_path, record_path = folder / "loans.csv", folder / "run.json"
    if not loans_path.is_file() and record_path.is_file():
        record = read_run_record(record_path)
        if record.get("loan_detail"):
            return _loan_detail(str(record["loan_detail"]), folder, role, record), record
    for needed in (loans_path, record_path):
        if not needed.is_file():
            raise InputFileError(
                f"not found in the {role} run folder", file=needed, hint="give the --out folder of a completed run"
            )
    return loans_path, read_run_record(record_path)


def locate_prior_run(folder: Path, role: str = "prior") -> tuple[Path, dict]:
    """A previous run's loan detail (``loans.csv``, or a book's Parquet folder, checked whole)
    and its record, without reading the loans: the errors :func:`read_prior_run` would give
    about the folder, given before anything is computed."""
    return _prior_files(folder, role)


def _loan_detail(named: str, folder: Path, role: str, record: Mapping) -> Path:
    """The Parquet folder of a book computed part by part, as its run.json names it (absolute
    since it is written so; a relative name, from an older record or a moved pair of folders,
    from where this command runs, else from the run's folder), checked whole against its
    record: as many files as the run wrote, as many loans (every file's footer read), so that
    no part is silently missing from the movement."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    path = Path(named)
    found = next((c for c in ([path] if path.is_absolute() else [path, folder / path])
                  if c.is_dir() and detail_files(c)), None)
    if found is None:
        raise InputFileError(f"the loan detail of the {role} run (a book computed part by part) was not found",
                             file=path, hint="its run.json names this folder of Parquet files: keep it there, or give "
                                             "a run with a loans.csv")
    files = detail_files(found)
    rows = 0
    for part in files:
        try:
            rows += pq.ParquetFile(part).metadata.num_rows
        except (OSError, ValueError, pa.ArrowException) as err:
            raise InputFileError(f"cannot be read as Parquet ({err})", file=part,
                                 hint=f"a file of the {role} run's loan detail: run that quarter again") from err
    wrote, loans = record.get("loan_detail_files"), record.get("loans")
    if (wrote is not None and len(files) != wrote) or (loans is not None and rows != loans):
        wrote_text = " and ".join(f"{n:,} {what}" for n, what in ((wrote, "files"), (loans, "loans")) if n is not None)
        raise InputFileError(f"the loan detail of the {role} run holds {len(files):,} files and {rows:,} loans; the "
                             f"run wrote {wrote_text}", file=found,
                             hint="a part is missing or another run's is mixed in: run that quarter again")
    return found


def detail_files(folder: Path) -> list[Path]:
    """The Parquet files of a book's loan detail, in tape order (``part-<first row>.parquet``)."""
    return sorted(folder.glob("part-*.parquet"))


def _detail_dataset(folder: Path):
    import pyarrow.dataset as ds

    return ds.dataset([str(f) for f in detail_files(folder)], format="parquet")


def read_prior_run(folder: Path, role: str = "prior", columns: Collection[str] | None = None) -> PriorRun:
    """Read ``loans.csv`` and ``run.json`` from a previous run's output folder (for a book
    computed part by part, the Parquet loan detail its run.json names, in place of loans.csv).

    ``role`` names the folder in messages (``prior``, or ``current`` for the later run of
    ``allowance compare``). ``columns``: read only those of them the file has (``loan_id``
    always), typed by Arrow as the file is parsed (flags as booleans, the rest of the
    non-text columns as float64); None reads every column.

    ``loan_id`` and the other text columns are read as text; every numeric column as float64.

    Raises
    ------
    InputFileError
        The folder or either file is missing or unreadable.
    """
    loans_path, record = _prior_files(folder, role)
    if loans_path.is_dir():
        return PriorRun(loans=_detail_frame(loans_path, columns), record=record, source=loans_path)
    try:
        header = _header(loans_path) if columns is not None else []
        if "loan_id" in header and len(set(header)) == len(header):
            loans = _some_columns(loans_path, [c for c in header if c in set(columns) | {"loan_id"}])
        else:
            header = pd.read_csv(loans_path, nrows=0).columns
            loans = pd.read_csv(
                loans_path, dtype={c: "str" for c in header if c in _TEXT_COLUMNS}, keep_default_na=False,
                na_values=[""],
            )
    except (OSError, ValueError, pd.errors.ParserError) as err:
        raise InputFileError(f"cannot be read as CSV ({err})", file=loans_path) from err
    if "loan_id" not in loans.columns:
        raise InputFileError("has no loan_id column", file=loans_path)
    return PriorRun(loans=_numbers_as_float(loans), record=record, source=loans_path)


def _numbers_as_float(loans: pd.DataFrame) -> pd.DataFrame:
    """Every numeric column of a run's loans as float64 (in place), as :func:`read_prior_run` gives them."""
    for name in loans.columns:
        if pd.api.types.is_integer_dtype(loans[name]) or pd.api.types.is_float_dtype(loans[name]):
            loans[name] = loans[name].astype(np.float64)
    return loans


def _detail_frame(folder: Path, columns: Collection[str] | None) -> pd.DataFrame:
    """A book's Parquet loan detail as :func:`read_prior_run` reads ``loans.csv``: ``columns``
    (those it has, ``loan_id`` always; None: all), numbers as float64, dates as ISO text."""
    import pyarrow as pa

    try:
        dataset = _detail_dataset(folder)
        names = [c for c in dataset.schema.names if columns is None or c in set(columns) | {"loan_id"}]
        table = dataset.to_table(columns=names)
    except (OSError, ValueError, pa.ArrowException) as err:
        raise InputFileError(f"cannot be read as Parquet ({err})", file=folder) from err
    if "loan_id" not in table.column_names:
        raise InputFileError("has no loan_id column", file=folder)
    # text as the CSV gives it: dates as their ISO text, as a loans.csv holds them
    table = pa.table({c: table[c].cast(pa.large_string()) if pa.types.is_temporal(table[c].type) else table[c]
                      for c in table.column_names})
    return _numbers_as_float(table.to_pandas())


#: how :func:`read_prior_figures` keeps a column: ``ids`` Arrow text as read; ``codes`` text as
#: codes into its distinct values; ``cents`` money in whole cents, every value a number;
#: ``cents_or_zero`` the same with blanks as 0; ``segment_sums`` that, summed per ``segment``;
#: ``rate`` float64, blanks as 0; ``flag`` true/false, blanks false; ``stage`` 1, 2 or 3 (int8)
FigureKind = Literal["ids", "codes", "cents", "cents_or_zero", "segment_sums", "rate", "flag", "stage"]


@dataclass(frozen=True)
class LoanFigures:
    """The columns of a run's ``loans.csv`` a later step reads, each kept in what it needs
    (:data:`FigureKind`): a million loans' figures as whole cents (int32 where every value
    fits) and codes, not a frame of float64 and text, and never the file's whole table.

    ``columns`` are those read, in the file's order; ``codes`` text column -> (its distinct
    values in order of first appearance, a code per loan); ``cents`` in the fewest bytes that
    hold them; ``sums`` column -> {segment: cents} over the segments the loans are in;
    ``rates`` float64 (:meth:`rate`), kept as millionths where every rate is a whole number of
    them (a rate read back as ``k / 1e6`` is the same float, division being correctly rounded).
    """

    rows: int
    columns: tuple[str, ...]
    ids: dict[str, pa.ChunkedArray]
    codes: dict[str, tuple[list[str], np.ndarray]]
    cents: dict[str, np.ndarray]
    sums: dict[str, dict[str, int]]
    rates: dict[str, np.ndarray]
    flags: dict[str, np.ndarray]
    stages: dict[str, np.ndarray]

    def rate(self, column: str) -> np.ndarray:
        """A ``rate`` column as float64 (blanks 0)."""
        kept = self.rates[column]
        return kept if kept.dtype == np.float64 else kept / 1e6


@dataclass(frozen=True)
class PriorFigures:
    """A previous run's output read for a later step: its loans as :class:`LoanFigures` and its run record."""

    loans: LoanFigures
    record: dict
    source: Path | None = None  # as PriorRun's


def read_prior_figures(folder: Path, kinds: Mapping[str, FigureKind], role: str = "prior") -> PriorFigures | None:
    """:func:`read_prior_run` for the columns of ``kinds`` (those the file has; ``loan_id`` as
    ``ids`` always), each kept as its kind says, the file read a block at a time.

    None when a value is not what its kind takes (a blank figure or stage, a stage that is not
    1, 2 or 3, a blank id or ``segment``, text where a number belongs) or the header is not one
    this reads (no ``loan_id``, a name twice): :func:`read_prior_run` then reads the file, and
    whoever reads its frame names the value.

    Raises
    ------
    InputFileError
        The folder or either file is missing, as :func:`read_prior_run`.
    """
    import pyarrow as pa
    import pyarrow.csv as pacsv

    loans_path, record = _prior_files(folder, role)
    if loans_path.is_dir():
        return _detail_figures(loans_path, kinds, record)
    try:
        header = _header(loans_path)
    except (OSError, ValueError, pa.ArrowException):
        return None
    columns = _figure_columns(header, kinds)
    if columns is None:
        return None
    kinds, names, typed = columns
    options = pacsv.ConvertOptions(include_columns=names, column_types=typed, null_values=[""],
                                   strings_can_be_null=True, quoted_strings_can_be_null=True,
                                   true_values=["true", "True", "TRUE"], false_values=["false", "False", "FALSE"])
    taken = _Taken(kinds)
    try:
        # one thread, 1 MB blocks: this runs beside the tape's reading and the engine, and the
        # reader keeps several blocks ahead (4 MB blocks on Arrow's threads: some 100 MB more
        # held while reading a million loans, and slower there)
        with pacsv.open_csv(loans_path, read_options=pacsv.ReadOptions(block_size=1 << 20, use_threads=False),
                            convert_options=options) as reader:
            for batch in reader:
                if not taken.add(batch):
                    return None
    except (OSError, ValueError, pa.ArrowException):
        return None  # read_prior_run reads it again, and names what is wrong
    return PriorFigures(loans=taken.figures(tuple(names)), record=record, source=loans_path)


def _figure_columns(header: list[str], kinds: Mapping[str, FigureKind]) -> tuple[dict, list[str], dict] | None:
    """The columns of ``kinds`` a run's loans have (``loan_id`` always, as ``ids``), in the
    file's order, and the Arrow type each is read as (text for ids and codes, booleans for
    flags, float64 for the rest); None when the header is not one this reads (no
    ``loan_id``, a name twice)."""
    import pyarrow as pa

    if "loan_id" not in header or len(set(header)) != len(header):
        return None
    kinds = {**{c: k for c, k in kinds.items() if c in header}, "loan_id": "ids"}
    names = [c for c in header if c in kinds]
    typed = {c: pa.large_string() if kinds[c] in ("ids", "codes") else pa.bool_() if kinds[c] == "flag" else pa.float64()
             for c in names}
    return kinds, names, typed


def read_detail_figures(folder: Path, kinds: Mapping[str, FigureKind]) -> LoanFigures | pd.DataFrame:
    """A book's Parquet loan detail (this run's own, just written) as the movement reads a run:
    :class:`LoanFigures` of the columns of ``kinds``, or, when a value is not what its kind
    takes, the frame of those columns (whoever reads it names the value)."""
    figures = _detail_figures(folder, kinds, {})
    return figures.loans if figures is not None else _detail_frame(folder, list(kinds))


def _detail_figures(folder: Path, kinds: Mapping[str, FigureKind], record: dict) -> PriorFigures | None:
    """:func:`read_prior_figures` of a book's Parquet loan detail: its row groups in tape order,
    each column cast to what the CSV reader types it as, then kept by its kind alike."""
    import pyarrow as pa

    try:
        dataset = _detail_dataset(folder)
        header = dataset.schema.names
    except (OSError, ValueError, pa.ArrowException):
        return None
    columns = _figure_columns(header, kinds)
    if columns is None:
        return None
    kinds, names, typed = columns
    taken = _Taken(kinds)
    try:
        for batch in dataset.to_batches(columns=names, use_threads=False):
            if not taken.add(pa.record_batch([batch.column(c).cast(typed[c]) for c in names], names=names)):
                return None
    except (OSError, ValueError, pa.ArrowException):
        return None
    return PriorFigures(loans=taken.figures(tuple(names)), record=record, source=folder)


class _Taken:
    """The columns of :func:`read_prior_figures` as the blocks come: each block's values
    converted and kept, the text codes numbered over the whole file."""

    def __init__(self, kinds: Mapping[str, FigureKind]) -> None:
        self.kinds = kinds
        self.rows = 0
        self.pieces: dict[str, list] = {c: [] for c in kinds}
        self.distinct: dict[str, dict[str, int]] = {c: {} for c, k in kinds.items() if k == "codes"}
        self.summed: dict[str, dict[str, int]] = {c: {} for c, k in kinds.items() if k == "segment_sums"}

    def add(self, batch) -> bool:
        """Keep one block; False when a value is not what its kind takes."""
        import pyarrow.compute as pc

        columns = dict(zip(batch.schema.names, batch.columns))
        kept: dict[str, object] = {}
        for name, values in columns.items():
            kind = self.kinds[name]
            if kind in ("ids", "codes"):
                if values.null_count:
                    return False
                if kind == "ids":
                    kept[name] = values
                    continue
                encoded = pc.dictionary_encode(values)
                known = self.distinct[name]
                where = np.array([known.setdefault(v, len(known)) for v in encoded.dictionary.to_pylist()] or [0],
                                 dtype=np.int64)
                kept[name] = where[encoded.indices.to_numpy(zero_copy_only=False)]
            elif kind == "flag":
                kept[name] = pc.fill_null(values, False).to_numpy(zero_copy_only=False)
            else:
                numbers = values.to_numpy(zero_copy_only=False)  # float64, NaN where blank
                if kind == "rate":
                    kept[name] = np.where(np.isnan(numbers), 0.0, numbers)
                    continue
                if kind in ("cents_or_zero", "segment_sums"):
                    numbers = np.where(np.isnan(numbers), 0.0, numbers)
                if kind == "stage":
                    if not np.isin(numbers, (1.0, 2.0, 3.0)).all():
                        return False
                    kept[name] = numbers.astype(np.int8)
                    continue
                if not np.isfinite(numbers).all():
                    return False
                cents = np.rint(numbers * 100.0).astype(np.int64)
                kept[name] = cents if kind == "segment_sums" else _narrow_cents(cents)
        for name, values in kept.items():
            if self.kinds[name] != "segment_sums":
                self.pieces[name].append(values)
        for name in self.summed:  # per segment (the file's codes of this block): exact int64 sums
            if "segment" not in kept or self.kinds.get("segment") != "codes":
                return False
            codes = kept["segment"]
            sums = np.zeros(len(self.distinct["segment"]), dtype=np.int64)
            np.add.at(sums, codes, kept[name])
            counts = np.bincount(codes, minlength=len(sums))
            into = self.summed[name]
            for k, segment in enumerate(self.distinct["segment"]):
                if counts[k]:
                    into[segment] = into.get(segment, 0) + int(sums[k])
        self.rows += batch.num_rows
        return True

    def figures(self, columns: tuple[str, ...]) -> LoanFigures:
        import pyarrow as pa

        def joined(name: str, kind=None) -> np.ndarray:
            parts = self.pieces.pop(name)
            return np.concatenate(parts) if parts else np.zeros(0, dtype=kind or np.int64)

        out = {"ids": {}, "codes": {}, "cents": {}, "rates": {}, "flags": {}, "stages": {}}
        for name, kind in self.kinds.items():
            if name not in columns or kind == "segment_sums":
                continue
            if kind == "ids":
                out["ids"][name] = pa.chunked_array(self.pieces.pop(name), type=pa.large_string())
            elif kind == "codes":
                names = list(self.distinct[name])
                out["codes"][name] = (names, _narrowest(joined(name)))
            elif kind in ("cents", "cents_or_zero"):
                parts = self.pieces.pop(name)
                out["cents"][name] = _narrowest(np.concatenate(parts)) if parts else np.zeros(0, np.int8)
            elif kind == "rate":
                rates = joined(name, np.float64)
                millionths = np.rint(rates * 1e6)
                whole = (np.abs(millionths).max() < 2**31 if len(rates) else True) and \
                    np.array_equal((millionths.astype(np.int64) / 1e6).view(np.int64), rates.view(np.int64))  # bit for bit
                out["rates"][name] = _narrowest(millionths.astype(np.int64)) if whole else rates
            elif kind == "flag":
                out["flags"][name] = joined(name, bool)
            else:
                out["stages"][name] = joined(name, np.int8)
        return LoanFigures(rows=self.rows, columns=columns, sums={c: v for c, v in self.summed.items() if c in columns},
                           **out)


def _narrow_cents(cents: np.ndarray) -> np.ndarray:
    """Cents as int32 where every one fits (``|x| < 2**31 - 1``), else as they are (int64)."""
    return cents.astype(np.int32) if not len(cents) or np.abs(cents).max() < 2**31 - 1 else cents


def _narrowest(values: np.ndarray) -> np.ndarray:
    """Whole numbers in the fewest bytes that hold them."""
    if not len(values):
        return values.astype(np.int8)
    low, high = int(values.min()), int(values.max())
    for kind in (np.int8, np.int16, np.int32):
        if np.iinfo(kind).min <= low and high <= np.iinfo(kind).max:
            return values.astype(kind)
    return values


def _header(path: Path) -> list[str]:
    """The column names of a CSV file as written (Arrow reads its first block)."""
    import pyarrow.csv as pacsv

    with pacsv.open_csv(path) as reader:
        return list(reader.schema.names)


def _some_columns(path: Path, names: list[str]) -> pd.DataFrame:
    """Only ``names`` of a loans.csv, parsed and typed by Arrow block by block (4 MB at a time:
    Arrow's whole-file reader held several times the table while it read ahead): text and dates
    as text, flags as booleans, every other column as float64, blanks missing (as pandas reads
    the whole file). A value that is not of its column's type reads every column as text, for
    the reader of each column to name the bad value."""
    import pyarrow as pa
    import pyarrow.csv as pacsv

    text = _TEXT_COLUMNS | _DATE_COLUMNS
    typed = {c: pa.large_string() if c in text else pa.bool_() if c in _FLAG_COLUMNS else pa.float64() for c in names}

    def read(types: dict) -> pa.Table:
        with pacsv.open_csv(path, read_options=pacsv.ReadOptions(block_size=4 << 20),
                            convert_options=pacsv.ConvertOptions(
                                include_columns=names, column_types=types, null_values=[""], strings_can_be_null=True,
                                quoted_strings_can_be_null=True, true_values=["true", "True", "TRUE"],
                                false_values=["false", "False", "FALSE"])) as reader:
            return reader.read_all()

    try:
        table = read(typed)
    except pa.ArrowInvalid:
        table = read({c: pa.large_string() for c in names})
    return table.to_pandas(split_blocks=True, self_destruct=True)
