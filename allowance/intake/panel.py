"""The loan-month panel: a performance history held compactly, in loan partitions.

Every estimate made from a performance history (roll rates, default rates, vintages, LGD,
prepayment) follows each loan month by month, so the rows must be grouped by loan and ordered
by month. A history of tens of millions of loan-months does not fit in memory as a frame of
text; here each accepted row becomes a few numbers (about 40 bytes) and the rows are split
into partitions by loan (loan code modulo the number of partitions). A small history stays in
memory as one partition; a large one is spilled to Arrow IPC files in a temporary folder, one
per partition, so the memory needed is one partition at a time whatever the file's size.

Implements
----------
PANEL_COLUMNS    the per-row columns and their types
EVENT_COLUMNS    the per-row money movements kept only for rows that have one
LoanMonths       one partition, sorted by loan then month: numpy arrays, with the row's events
LoanMonthPanel   the partitions: add batches, settle (sort, find repeated loan-months), iterate
LoanCodes        loan identifiers -> dense codes, across batches (exact: no hashing)
SegmentProfile   per segment: rows, and rows with a limit, a grade, an origination date, a rate

Flags
-----
``flags`` is a bit set per row: :data:`WRITTEN_OFF` (a charge-off or bankruptcy loss that
month), :data:`PAID_OFF` (the ``paid_off`` flag), :data:`CASH_IN` (recoveries or asset sales
that month).
"""

from __future__ import annotations

import shutil
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

WRITTEN_OFF = np.uint8(1)
PAID_OFF = np.uint8(2)
CASH_IN = np.uint8(4)

#: Per-row columns: name -> dtype. Optional columns are stored only when the file has them.
PANEL_COLUMNS: dict[str, np.dtype] = {
    "loan": np.dtype(np.int32),
    "month": np.dtype(np.int32),  # months since 1970-01
    "segment": np.dtype(np.int16),  # index into LoanMonthPanel.segments
    "dpd": np.dtype(np.int32),
    "balance": np.dtype(np.float64),
    "flags": np.dtype(np.uint8),
    "source_row": np.dtype(np.int64),
    # optional
    "grade": np.dtype(np.int16),  # index into LoanMonthPanel.grades; -1 blank
    "origination": np.dtype(np.int32),  # month of origination; NO_MONTH blank
    "original_balance": np.dtype(np.float64),
    "credit_limit": np.dtype(np.float64),
    "interest_rate": np.dtype(np.float32),
    "collateral_value": np.dtype(np.float64),
}
REQUIRED_PANEL = ("loan", "month", "segment", "dpd", "balance", "flags", "source_row")
#: Money movements, kept only for the rows that have one (most rows have none).
EVENT_COLUMNS: dict[str, np.dtype] = {
    "loan": np.dtype(np.int32),
    "month": np.dtype(np.int32),
    "segment": np.dtype(np.int16),
    "charge_off": np.dtype(np.float64),
    "bankruptcy_loss": np.dtype(np.float64),
    "recoveries": np.dtype(np.float64),
    "asset_sales": np.dtype(np.float64),
    "source_row": np.dtype(np.int64),
}
NO_MONTH = np.iinfo(np.int32).min
_MONTH_BITS = 14  # months since 1970 of years 1678-2261, offset below, fit in 14 bits
_MONTH_OFFSET = 1 << 13


def sort_key(loan: np.ndarray, month: np.ndarray) -> np.ndarray:
    """One int64 that orders rows by loan, then month.

    Examples
    --------
    >>> sort_key(np.array([1, 0, 1]), np.array([5, 9, 4])).argsort().tolist()
    [1, 2, 0]
    """
    return (np.asarray(loan, np.int64) << _MONTH_BITS) + (np.asarray(month, np.int64) + _MONTH_OFFSET)


class LoanCodes:
    """Dense codes for loan identifiers, stable across batches (the first seen gets 0).

    The identifiers seen so far are one Arrow string array; each batch's distinct ids are
    looked up in it with Arrow's hash kernels, and new ones appended. Exact: two loans never
    share a code.

    Examples
    --------
    >>> codes = LoanCodes()
    >>> codes.encode(pa.array(["B", "A", "B"])).tolist(), codes.encode(pa.array(["C", "A"])).tolist()
    ([0, 1, 0], [2, 1])
    >>> codes.ids.to_pylist()
    ['B', 'A', 'C']
    """

    def __init__(self) -> None:
        self._ids: list[pa.Array] = []
        self._all: pa.Array = pa.array([], pa.string())
        self.count = 0

    @property
    def ids(self) -> pa.Array:
        """Identifier of each code, in code order."""
        if self._ids:
            self._all = pa.concat_arrays([self._all, *self._ids])
            self._ids = []
        return self._all

    def encode(self, values: pa.Array | pa.ChunkedArray) -> np.ndarray:
        if isinstance(values, pa.ChunkedArray):
            values = values.combine_chunks()
        encoded = pc.dictionary_encode(values)
        distinct = encoded.dictionary
        known = self.ids
        position = np.array(pc.fill_null(pc.index_in(distinct, value_set=known), -1), dtype=np.int64)
        new = position < 0
        if new.any():
            position[new] = self.count + np.arange(int(new.sum()))
            self._ids.append(distinct.filter(pa.array(new)))
            self.count += int(new.sum())
        return position[np.asarray(encoded.indices, dtype=np.int64)].astype(np.int32)


@dataclass(frozen=True)
class LoanMonths:
    """One partition of the panel: every row of its loans, sorted by loan then month.

    ``columns`` holds the arrays of :data:`PANEL_COLUMNS` that the history has (read-only);
    ``events`` the :data:`EVENT_COLUMNS` of the rows with a money movement, sorted the same
    way. Attribute access reads a column: ``part.balance``; a column the history lacks is
    ``None`` (``part.get("grade")``).
    """

    columns: dict[str, np.ndarray]
    events: dict[str, np.ndarray]

    def __getattr__(self, name: str) -> np.ndarray:
        try:
            return self.__dict__["columns"][name]
        except KeyError:
            raise AttributeError(name) from None

    def get(self, name: str) -> np.ndarray | None:
        return self.columns.get(name)

    @property
    def rows(self) -> int:
        return len(self.columns["loan"])

    @property
    def new_loan(self) -> np.ndarray:
        """True on the first row of each loan."""
        loan = self.columns["loan"]
        out = np.ones(len(loan), dtype=bool)
        out[1:] = loan[1:] != loan[:-1]
        return out

    @property
    def follows(self) -> np.ndarray:
        """True where the row is the month right after the row before it, for the same loan."""
        loan, month = self.columns["loan"], self.columns["month"]
        out = np.zeros(len(loan), dtype=bool)
        out[1:] = (loan[1:] == loan[:-1]) & (month[1:] == month[:-1] + 1)
        return out

    def event_rows(self) -> np.ndarray:
        """Position in the partition of each event's row."""
        key = sort_key(self.columns["loan"], self.columns["month"])
        return np.searchsorted(key, sort_key(self.events["loan"], self.events["month"]))

    def event_sums(self, name: str) -> np.ndarray:
        """An event column spread over the partition's rows (0 where a row has none)."""
        out = np.zeros(self.rows)
        if len(self.events["loan"]):
            np.add.at(out, self.event_rows(), self.events[name])
        return out


@dataclass
class SegmentProfile:
    """What each segment's rows carry (counts by segment code), gathered as rows are added.

    A calibration reads it before the first partition: a segment whose rows carry a
    ``credit_limit`` is revolving; grades and origination dates decide the PD sources.
    """

    rows: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    with_limit: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    with_grade: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    with_origination: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    with_rate: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))

    def add(self, rows: dict[str, np.ndarray], segments: int) -> None:
        seg = rows["segment"].astype(np.int64)

        def count(mask: np.ndarray | None) -> np.ndarray:
            return np.bincount(seg if mask is None else seg[mask], minlength=segments)

        def grown(old: np.ndarray, new: np.ndarray) -> np.ndarray:
            out = np.zeros(segments, np.int64)
            out[: len(old)] += old
            return out + new

        self.rows = grown(self.rows, count(None))
        self.with_limit = grown(self.with_limit, count(~np.isnan(rows["credit_limit"])) if "credit_limit" in rows
                                else np.zeros(segments, np.int64))
        self.with_grade = grown(self.with_grade, count(rows["grade"] >= 0) if "grade" in rows
                                else np.zeros(segments, np.int64))
        self.with_origination = grown(self.with_origination, count(rows["origination"] != NO_MONTH)
                                      if "origination" in rows else np.zeros(segments, np.int64))
        self.with_rate = grown(self.with_rate, count(~np.isnan(rows["interest_rate"])) if "interest_rate" in rows
                               else np.zeros(segments, np.int64))


@dataclass(frozen=True)
class Repeated:
    """Rows that repeat a loan-month: every copy, with the loan and month it repeats."""

    source_row: np.ndarray
    loan: np.ndarray
    month: np.ndarray


def _empty(spec: dict[str, np.dtype], names) -> dict[str, np.ndarray]:
    return {n: np.zeros(0, dtype=spec[n]) for n in names}


def _schema(spec: dict[str, np.dtype], names) -> pa.Schema:
    return pa.schema([(n, pa.from_numpy_dtype(spec[n])) for n in names])


def _take(arrays: dict[str, np.ndarray], index: np.ndarray) -> dict[str, np.ndarray]:
    return {n: a[index] for n, a in arrays.items()}


@dataclass
class LoanMonthPanel:
    """The accepted rows of a history, partitioned by loan, in memory or spilled to disk.

    Use it as a context manager (the spill folder is removed on exit). Rows are added batch
    by batch with :meth:`add`; :meth:`settle` sorts each partition and removes every copy of
    a repeated loan-month (returned, to be rejected); :meth:`parts` then yields the sorted
    partitions one at a time.

    Attributes
    ----------
    names : tuple of str
        The panel columns stored (the required ones and the optional ones the file has).
    partitions : int
        Number of loan partitions (1: all in memory).
    segments, grades : list of str
        The texts behind the ``segment`` and ``grade`` codes.
    loans : LoanCodes
        The identifiers behind the ``loan`` codes.
    """

    names: tuple[str, ...]
    partitions: int = 1
    spill_dir: Path | None = None
    segments: list[str] = field(default_factory=list)
    grades: list[str] = field(default_factory=list)
    loans: LoanCodes = field(default_factory=LoanCodes)
    profile: SegmentProfile = field(default_factory=SegmentProfile)
    rows: int = 0
    _memory: list[list[tuple[dict, dict]]] = field(default_factory=list)
    _writers: list = field(default_factory=list)
    _folder: Path | None = None
    _settled: bool = False

    def __post_init__(self) -> None:
        self.partitions = max(1, int(self.partitions))
        if self.partitions == 1:
            self._memory = [[]]
            return
        self._folder = Path(tempfile.mkdtemp(prefix="allowance-panel-", dir=self.spill_dir))
        import pyarrow.ipc as ipc

        for p in range(self.partitions):
            rows = ipc.new_file(str(self._folder / f"rows-{p}.arrow"), _schema(PANEL_COLUMNS, self.names))
            events = ipc.new_file(str(self._folder / f"events-{p}.arrow"), _schema(EVENT_COLUMNS, EVENT_COLUMNS))
            self._writers.append((rows, events))

    # ----------------------------------------------------------------------------------
    def __enter__(self) -> "LoanMonthPanel":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        """Remove the spill files (nothing to do in memory)."""
        for rows, events in self._writers:
            for writer in (rows, events):
                try:
                    writer.close()
                except (OSError, pa.ArrowException):  # pragma: no cover - already closed
                    pass
        self._writers = []
        if self._folder is not None:
            shutil.rmtree(self._folder, ignore_errors=True)
            self._folder = None
        self._memory = [[] for _ in self._memory]

    @property
    def spilled(self) -> bool:
        return self.partitions > 1

    # ----------------------------------------------------------------------------------
    def add(self, rows: dict[str, np.ndarray], events: dict[str, np.ndarray]) -> None:
        """Add a batch of accepted rows and their money movements (arrays by column)."""
        if self._settled:
            raise RuntimeError("the panel is settled; no rows may be added")
        rows = {n: np.ascontiguousarray(rows[n], dtype=PANEL_COLUMNS[n]) for n in self.names}
        events = {n: np.ascontiguousarray(events[n], dtype=EVENT_COLUMNS[n]) for n in EVENT_COLUMNS}
        self.rows += len(rows["loan"])
        self.profile.add(rows, len(self.segments))
        if self.partitions == 1:
            self._memory[0].append((rows, events))
            return
        row_part = rows["loan"] % self.partitions
        event_part = events["loan"] % self.partitions
        row_schema, event_schema = _schema(PANEL_COLUMNS, self.names), _schema(EVENT_COLUMNS, EVENT_COLUMNS)
        for p, (row_writer, event_writer) in enumerate(self._writers):
            here = np.flatnonzero(row_part == p)
            if here.size:
                row_writer.write_batch(pa.record_batch([pa.array(rows[n][here]) for n in self.names],
                                                       schema=row_schema))
            here = np.flatnonzero(event_part == p)
            if here.size:
                event_writer.write_batch(pa.record_batch([pa.array(events[n][here]) for n in EVENT_COLUMNS],
                                                         schema=event_schema))

    # ----------------------------------------------------------------------------------
    def _load(self, p: int) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
        if self.partitions == 1:
            batches = self._memory[0]
            if not batches:
                return _empty(PANEL_COLUMNS, self.names), _empty(EVENT_COLUMNS, EVENT_COLUMNS)
            rows = {n: np.concatenate([b[0][n] for b in batches]) for n in self.names}
            events = {n: np.concatenate([b[1][n] for b in batches]) for n in EVENT_COLUMNS}
            return rows, events
        import pyarrow.ipc as ipc

        out = []
        for kind, spec, names in (("rows", PANEL_COLUMNS, self.names), ("events", EVENT_COLUMNS, tuple(EVENT_COLUMNS))):
            with pa.memory_map(str(self._folder / f"{kind}-{p}.arrow")) as source:
                table = ipc.open_file(source).read_all()
            out.append({n: table.column(n).to_numpy() if table.num_rows else np.zeros(0, spec[n]) for n in names})
        return out[0], out[1]

    def _store(self, p: int, rows: dict[str, np.ndarray], events: dict[str, np.ndarray]) -> None:
        if self.partitions == 1:
            self._memory[0] = [(rows, events)]
            return
        import pyarrow.ipc as ipc

        for kind, spec, names, arrays in (("rows", PANEL_COLUMNS, self.names, rows),
                                          ("events", EVENT_COLUMNS, tuple(EVENT_COLUMNS), events)):
            path = self._folder / f"{kind}-{p}.arrow"
            table = pa.table({n: pa.array(arrays[n]) for n in names}, schema=_schema(spec, names))
            with ipc.new_file(str(path) + ".sorted", table.schema) as writer:
                writer.write_table(table, max_chunksize=1 << 20)
            Path(str(path) + ".sorted").replace(path)

    def settle(self) -> Repeated:
        """Sort every partition by loan and month and take out repeated loan-months.

        Every copy of a loan-month given more than once is removed (the history cannot say
        which is right) and returned, to be rejected with its line. Their money movements go
        with them.
        """
        if self._settled:
            return Repeated(np.zeros(0, np.int64), np.zeros(0, np.int32), np.zeros(0, np.int32))
        for rows, events in self._writers:
            rows.close()
            events.close()
        self._writers = []
        found = []
        for p in range(self.partitions):
            rows, events = self._load(p)
            key = sort_key(rows["loan"], rows["month"])
            order = np.argsort(key, kind="stable")
            key = key[order]
            rows = _take(rows, order)
            same = np.zeros(len(key), dtype=bool)
            if len(key) > 1:
                repeat = key[1:] == key[:-1]
                same[1:] |= repeat
                same[:-1] |= repeat
            if same.any():
                found.append(Repeated(rows["source_row"][same], rows["loan"][same], rows["month"][same]))
                rejected = rows["source_row"][same]
                rows = _take(rows, np.flatnonzero(~same))
                events = _take(events, np.flatnonzero(~np.isin(events["source_row"], rejected)))
            event_order = np.argsort(sort_key(events["loan"], events["month"]), kind="stable")
            self._store(p, rows, _take(events, event_order))
            self.rows -= int(same.sum())
        self._settled = True
        if not found:
            return Repeated(np.zeros(0, np.int64), np.zeros(0, np.int32), np.zeros(0, np.int32))
        return Repeated(*(np.concatenate([getattr(r, a) for r in found]) for a in ("source_row", "loan", "month")))

    def parts(self) -> Iterator[LoanMonths]:
        """The sorted partitions, one at a time (settle first)."""
        if not self._settled:
            raise RuntimeError("settle the panel before reading its partitions")
        for p in range(self.partitions):
            rows, events = self._load(p)
            yield LoanMonths(columns=rows, events=events)
