"""Reading the runs for the movement: each column converted once, the loans joined on integer codes.

Implements
----------
RunLoans        one run's loan results (or the charge-off file) as the movement reads them: each
                column checked once, whichever frameworks use it; ids and segments stay Arrow text
Book            the prior run, the current run, the rerun at prior assumptions and the charge-offs,
                joined once for every framework: each loan's place among the loans of any of them
                (one hash pass over the ids), the segments factorised once
FigureLoans     :class:`RunLoans` of a run read as figures (:func:`allowance.intake.read_prior_figures`)
run_loans       a frame or figures as :class:`RunLoans`
LoanIds         the joined loans' ids, taken a slice at a time from the runs' own ids
Bridge          one framework's movement loan by loan: arrays over the joined loans, segments and
                classes as integer codes, every line's amount in cents (kept as :class:`Blocks`)
bridge          build it for one framework
movement_columns    the columns of a run's loans.csv the movement (and the vintage disclosure) reads
movement_kinds  how the movement reads each of them (what a run read as figures keeps)

The join never walks text in Python: ids are neutralised and dictionary-encoded by Arrow, and
every later step works on the codes (a million loans' ids as Python strings cost seconds
each time they were converted, set-compared or grouped). The lines are made a block of
joined loans at a time (:data:`allowance.reconcile.blocks.BLOCK`), each run's figures taken
to cents for the block's loans only, and kept as :class:`Blocks`: the whole-book int64 arrays
of every line and of every run's figures were most of the memory of a run with ``--prior``.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from allowance.exceptions import MovementError
from allowance.frameworks import rules_for
from allowance.intake.history import FigureKind, LoanFigures
from allowance.memory import give_back
from allowance.reconcile.blocks import BLOCK, Blocks
from allowance.schemas import FRAMEWORKS, Framework
from allowance.text import neutralise_table

__all__ = ["UNASSIGNED_SEGMENT", "Book", "Bridge", "LoanIds", "RunLoans", "bridge", "movement_columns", "movement_kinds",
           "run_loans"]


#: the roll-forward segment of charge-offs for loans in neither run, when the file gives none
UNASSIGNED_SEGMENT = "(in neither run)"

#: the movement's status of a joined loan, by code (see :attr:`Bridge.status`)
STATUSES = ("continuing", "new", "written off", "derecognised", "charged off outside both runs")


def movement_columns(frameworks: tuple[Framework, ...] | list[Framework] = FRAMEWORKS, *,
                 vintages: bool = False) -> frozenset[str]:
    """The columns of a run's ``loans.csv`` that the movement of ``frameworks`` reads (and, with
    ``vintages``, that place a write-off in its vintage year for the ASC 326-20-50-6 disclosure).

    Examples
    --------
    >>> sorted(movement_columns(["cecl"]))  # doctest: +NORMALIZE_WHITESPACE
    ['balance', 'discount_rate_cecl', 'ecl_cecl', 'ecl_cecl_modelled', 'loan_id', 'modified', 'pcd_gross_up',
     'poci', 'provision_cecl', 'segment', 'stage']
    """
    names = {"loan_id", "segment", "balance", "stage", "poci", "modified", "pcd_gross_up"}
    for f in frameworks:
        names |= {f"ecl_{f}", f"ecl_{f}_modelled", f"discount_rate_{f}", f"provision_{f}"}
    if vintages:
        names |= {"origination_date", "repayment"}
    return frozenset(names)


def movement_kinds(frameworks: tuple[Framework, ...] | list[Framework] = FRAMEWORKS) -> dict[str, FigureKind]:
    """How the movement of ``frameworks`` reads each column of :func:`movement_columns` (without
    the vintages'): what :func:`allowance.intake.read_prior_figures` keeps of a run's loans.

    Examples
    --------
    >>> movement_kinds(["cecl"])["provision_cecl"], set(movement_kinds()) == movement_columns()
    ('segment_sums', True)
    """
    kinds: dict[str, FigureKind] = {"loan_id": "ids", "segment": "codes", "balance": "cents", "stage": "stage",
                                    "poci": "flag", "modified": "flag", "pcd_gross_up": "cents_or_zero"}
    for f in frameworks:
        kinds |= {f"ecl_{f}": "cents", f"ecl_{f}_modelled": "cents", f"discount_rate_{f}": "rate",
                  f"provision_{f}": "segment_sums"}
    return kinds


def _show(value: object) -> str:
    """A cell value as a message shows it: text quoted, numbers plain, blanks as 'blank'."""
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return "blank"
    return repr(value) if isinstance(value, str) else str(value)


def _text(values: pd.Series) -> pa.ChunkedArray:
    """A column as Arrow text, as ``astype(str)`` gives it (missing stays missing): pandas' own
    Arrow-backed text is handed over without a copy, its chunks as they are."""
    if not (isinstance(values.dtype, pd.StringDtype) and values.dtype.storage == "pyarrow"):
        values = values.astype(str)
    array = pa.array(values, from_pandas=True)
    if isinstance(array, pa.Array):
        array = pa.chunked_array([array])
    return array.cast(pa.large_string())


def _neutralised(values: pa.ChunkedArray) -> pa.ChunkedArray:
    """Ids as a spreadsheet-safe file carries them (``=x`` -> ``'=x``): the join key of both runs."""
    return neutralise_table(pa.table({"id": values})).column(0)


def _first_null(values: pa.ChunkedArray) -> int:
    """The place of the first missing value (there is one)."""
    return int(np.flatnonzero(values.is_null().to_numpy())[0])


def _codes(encoded: pa.ChunkedArray) -> np.ndarray:
    """The indices of a dictionary-encoded column as int32, a missing value -1."""
    if not encoded.num_chunks:
        return np.zeros(0, dtype=np.int32)
    return np.concatenate([pc.fill_null(chunk.indices, -1).to_numpy(zero_copy_only=False).astype(np.int32, copy=False)
                           for chunk in encoded.chunks])


def _dictionary(encoded: pa.ChunkedArray) -> pa.Array:
    """The values a dictionary-encoded column's codes point to (shared by its chunks)."""
    return encoded.chunk(0).dictionary if encoded.num_chunks else pa.array([], pa.large_string())


def _add(codes: np.ndarray, values: np.ndarray, size: int) -> np.ndarray:
    """Exact int64 sums of ``values`` per code 0..size-1."""
    out = np.zeros(size, dtype=np.int64)
    np.add.at(out, codes, values)
    return out


def _spread(rows: np.ndarray, values: np.ndarray, size: int, fill=0) -> np.ndarray:
    """Values of one run's loans placed at their rows of the joined loans; ``fill`` elsewhere."""
    out = np.full(size, fill, dtype=values.dtype)
    out[rows] = values
    return out


def _places(rows: np.ndarray, size: int) -> np.ndarray:
    """For each joined loan, its row in one run (int32; -1: not in that run)."""
    out = np.full(size, -1, dtype=np.int32)
    out[rows] = np.arange(len(rows), dtype=np.int32)
    return out


class Cents:
    """:class:`Figures` of a column already in whole cents (a run read as
    :class:`~allowance.intake.LoanFigures`)."""

    __slots__ = ("values",)

    def __init__(self, values: np.ndarray) -> None:
        self.values = values

    def at(self, places: np.ndarray) -> np.ndarray:
        out = np.zeros(len(places), dtype=np.int64)
        there = places >= 0
        out[there] = self.values[places[there]]
        return out


class Figures:
    """One run's money column, checked, as the movement reads it: cents taken per block of
    joined loans (:meth:`at`), ``rint(x * 100)`` of each loan's figure as the whole column's
    conversion gave it, never a whole-book array of cents."""

    __slots__ = ("values",)

    def __init__(self, values: np.ndarray) -> None:
        self.values = values  # float64, every value finite

    def at(self, places: np.ndarray) -> np.ndarray:
        """Cents (int64) of the loans at ``places`` in the run; 0 where a place is -1."""
        out = np.zeros(len(places), dtype=np.int64)
        there = places >= 0
        out[there] = np.rint(self.values[places[there]] * 100.0).astype(np.int64)
        return out


class RunLoans:
    """One run's loan results (or the period's charge-offs) as the movement reads them.

    Each column is converted once, when first asked for, and kept for every framework: the
    movement of IFRS 9 and of CECL read the same ids, segments, balances and flags.
    """

    def __init__(self, frame: pd.DataFrame, source: str) -> None:
        self.frame, self.source = frame, source
        self._converted: dict[str, object] = {}

    def __len__(self) -> int:
        return len(self.frame)

    def has(self, column: str) -> bool:
        return column in self.frame.columns

    def _once(self, name: str, make):
        if name not in self._converted:
            self._converted[name] = make()
        return self._converted[name]

    @property
    def ids(self) -> pa.ChunkedArray:
        """``loan_id`` as text, as the run wrote it (the frame's own Arrow chunks where it has them)."""
        return self._once("ids", lambda: _text(self.frame["loan_id"]))

    @property
    def keys(self) -> pa.ChunkedArray:
        """The join key: the id neutralised as a spreadsheet-safe file carries it (made when asked:
        the join takes it once, a message about one loan again)."""
        return _neutralised(self.ids)

    def id_at(self, i: int) -> str | None:
        return self.ids[i].as_py()

    @property
    def segment(self) -> pa.ChunkedArray:
        """``segment`` as text (a missing one stays missing)."""
        return self._once("segment", lambda: _text(self.frame["segment"]))

    def segment_codes(self) -> tuple[list[str], np.ndarray]:
        """The run's distinct segments in order of first appearance, and each loan's code into
        them (-1: blank)."""
        encoded = self.segment.dictionary_encode()
        return _dictionary(encoded).to_pylist(), _codes(encoded)

    def require_segment(self) -> None:
        """Every loan of a run sits in a segment; a blank one is a named error."""
        if self.segment.null_count:
            i = _first_null(self.segment)
            raise MovementError(f"loan {self.id_at(i)!r}: segment is blank", file=self.source, column="segment",
                                hint="use the loans.csv the run wrote")

    def cents(self, column: str, *, keep: bool = False) -> np.ndarray:
        """Money in currency units -> whole cents; a blank or non-number is a named error.
        ``keep``: kept for the next framework (a column every framework reads)."""
        if keep:
            return self._once("cents:" + column, lambda: self._cents(self.frame[column], column))
        kept = self._converted.get("cents:" + column)
        return kept if kept is not None else self._cents(self.frame[column], column)

    def figures(self, column: str) -> Figures:
        """A money column checked as :meth:`cents` checks it, its cents taken a block at a time."""
        return self._once("figures:" + column, lambda: Figures(self._numbers(self.frame[column], column)))

    def optional_figures(self, column: str) -> Figures | None:
        """:meth:`figures` of a money column a run may not carry (older runs), blanks as 0; None
        when absent (the figures :meth:`optional_cents` converts)."""
        if not self.has(column):
            return None
        return Figures(self._numbers(pd.to_numeric(self.frame[column], errors="coerce").fillna(0.0), column))

    def optional_cents(self, column: str) -> np.ndarray | None:
        """A money column a run may not carry (older runs): cents, blanks as 0; None when absent."""
        if not self.has(column):
            return None
        return self._cents(pd.to_numeric(self.frame[column], errors="coerce").fillna(0.0), column)

    def _numbers(self, values: pd.Series, column: str) -> np.ndarray:
        """The column as float64 (the frame's own array when it is one); a blank or non-number is
        a named error."""
        if values.dtype == np.float64:
            numbers = values.to_numpy()  # NaN already where blank: no copy
        else:
            numbers = pd.to_numeric(values, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
        bad = ~np.isfinite(numbers)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise MovementError(
                f"loan {self.id_at(i)!r}: {column} is blank or not a number ({_show(values.iloc[i])})",
                file=self.source, column=column, hint="rerun that run so every loan carries its figures",
            )
        return numbers

    def _cents(self, values: pd.Series, column: str) -> np.ndarray:
        return np.rint(self._numbers(values, column) * 100.0).astype(np.int64)

    def segment_sums(self, column: str, names: list[str], codes: np.ndarray) -> pd.Series | None:
        """A money column (blanks as 0) in integer cents summed per segment (labels as the index;
        ``codes``: this run's loans' codes into ``names``), over the segments its loans are in;
        None when the run has no such column."""
        if not self.has(column) or len(self) == 0:
            return None
        cents = np.rint(pd.to_numeric(self.frame[column]).fillna(0.0).to_numpy(np.float64) * 100.0).astype(np.int64)
        present = np.flatnonzero(np.bincount(codes, minlength=len(names)))
        sums = np.zeros(len(names), dtype=np.int64)
        np.add.at(sums, codes, cents)
        return pd.Series(sums[present], index=pd.Index([names[i] for i in present], dtype=object))

    def rate(self, column: str) -> np.ndarray:
        """A discount rate per loan, blanks as 0; NaN for every loan when the run has no such column."""
        if not self.has(column):
            return np.full(len(self), np.nan)
        return pd.to_numeric(self.frame[column], errors="coerce").fillna(0.0).to_numpy(np.float64)

    def flags(self, column: str) -> np.ndarray:
        """A true/false column (``true``, ``1``, ``yes`` ... as text); False when the run has none."""
        if not self.has(column):
            return np.zeros(len(self), dtype=bool)
        return self._once("flags:" + column, lambda: _flags(self.frame[column]))

    @property
    def stage(self) -> np.ndarray:
        """The IFRS 9 stage of every loan (int8); one that is not 1, 2 or 3 is a named error."""
        return self._once("stage", self._stage)

    def _stage(self) -> np.ndarray:
        stage = pd.to_numeric(self.frame["stage"], errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
        bad = ~np.isin(stage, (1.0, 2.0, 3.0))
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise MovementError(
                f"loan {self.id_at(i)!r}: stage {_show(self.frame['stage'].iloc[i])} is not 1, 2 or 3",
                file=self.source, column="stage", hint="use the loans.csv the run wrote",
            )
        return stage.astype(np.int8)


def _flags(values: pd.Series) -> np.ndarray:
    if pd.api.types.is_bool_dtype(values.dtype):
        return values.to_numpy(dtype=bool)
    text = values.astype(str).str.strip().str.lower()
    return text.isin(["true", "1", "1.0", "y", "yes"]).to_numpy(dtype=bool, na_value=False)


class FigureLoans(RunLoans):
    """:class:`RunLoans` of a run read as :class:`~allowance.intake.LoanFigures` (its columns
    already checked and converted as they were read): the same answers, from the figures."""

    def __init__(self, figures: LoanFigures, source: str) -> None:
        super().__init__(pd.DataFrame(), source)
        self.figures_read = figures

    def __len__(self) -> int:
        return self.figures_read.rows

    def has(self, column: str) -> bool:
        return column in self.figures_read.columns

    @property
    def ids(self) -> pa.ChunkedArray:
        return self.figures_read.ids["loan_id"]

    @property
    def segment(self) -> pa.ChunkedArray:
        names, codes = self.figures_read.codes["segment"]
        return self._once("segment", lambda: pa.chunked_array(
            [pa.array(names, pa.large_string()).take(pa.array(codes))], type=pa.large_string()))

    def segment_codes(self) -> tuple[list[str], np.ndarray]:
        return self.figures_read.codes["segment"]

    def require_segment(self) -> None:
        pass  # a blank segment is not read as figures (the frame names it)

    def figures(self, column: str) -> Cents:
        return Cents(self.figures_read.cents[column])

    def optional_figures(self, column: str) -> Cents | None:
        return self.figures(column) if self.has(column) else None

    def cents(self, column: str, *, keep: bool = False) -> np.ndarray:
        return self.figures_read.cents[column].astype(np.int64)

    def optional_cents(self, column: str) -> np.ndarray | None:
        return self.cents(column) if self.has(column) else None

    def segment_sums(self, column: str, names: list[str], codes: np.ndarray) -> pd.Series | None:
        if not self.has(column) or len(self) == 0:
            return None
        sums = self.figures_read.sums[column]
        present = [name for name in names if name in sums]  # the book's order of the segments
        return pd.Series([sums[name] for name in present], index=pd.Index(present, dtype=object), dtype=np.int64)

    def rate(self, column: str) -> np.ndarray:
        if not self.has(column):
            return np.full(len(self), np.nan)
        return self.figures_read.rate(column)

    def flags(self, column: str) -> np.ndarray:
        if not self.has(column):
            return np.zeros(len(self), dtype=bool)
        return self.figures_read.flags[column]

    @property
    def stage(self) -> np.ndarray:
        return self.figures_read.stages["stage"]


def run_loans(loans: pd.DataFrame | LoanFigures, source: str) -> RunLoans:
    """A run's loans as the movement reads them: a frame, or figures read compactly."""
    return FigureLoans(loans, source) if isinstance(loans, LoanFigures) else RunLoans(loans, source)


class Book:
    """The runs of one movement joined once, for every framework.

    ``prior`` and ``current`` are the two runs' loans, ``rerun`` the current tape at the prior
    run's assumptions (or None), ``charge_offs`` the period's charge-off rows (or None). The
    joined loans are numbered in order of first appearance over the prior run, the current run
    and the charge-offs: the prior run's loans, then the new ones, then loans only charged off.
    """

    def __init__(self, prior: pd.DataFrame | LoanFigures, current: pd.DataFrame | LoanFigures,
                 rerun: pd.DataFrame | LoanFigures | None,
                 charge_offs: pd.DataFrame | None, sources: dict) -> None:
        self.sources = sources
        self.prior = run_loans(prior, sources["prior"])
        self.current = run_loans(current, sources["current"])
        # the rerun may be the current run's own figures (the prior model is this run's): read
        # as the current run is, its rows the current run's (the same ids, in the same order)
        self.rerun = None if rerun is None else run_loans(rerun, sources["current_at_prior_assumptions"])
        empty = charge_offs is None or len(charge_offs) == 0
        self.charge_offs = None if empty else RunLoans(charge_offs, sources["charge_offs"])
        self.joined = None  # what every framework's bridge shares (made by the first)
        #: the shared code arrays of the joined loans as the movements keep them (see
        #: movement._LoanRows.of): made once for every framework
        self.narrowed: dict[int, np.ndarray] = {}

    def _parts(self) -> list[RunLoans]:
        """The runs whose ids take part in the join, in the order their loans are numbered."""
        # a run without ids is refused when its turn comes (the columns it lacks are named then)
        return [r for r in (self.prior, self.current, self.charge_offs, self.rerun) if r is not None and r.has("loan_id")]

    @cached_property
    def _join(self) -> tuple[dict[int, np.ndarray], int, pa.Array]:
        """Every run's rows among the joined loans, their number, and the keys of the joined
        loans in neither run (charged off only), in their order."""
        parts = self._parts()
        # the rerun of this quarter's tape gives the current run's ids in the current run's
        # order (it is the same tape): its rows are the current run's, not hashed again
        same = self.rerun in parts and self.current in parts and self.rerun.ids.equals(self.current.ids)
        hashed = [r for r in parts if not (same and r is self.rerun)]
        # the runs' keys hashed as their chunks come (one dictionary for all): no whole copy of them
        keys = pa.chunked_array([chunk for r in hashed for chunk in r.keys.chunks], type=pa.large_string())
        if keys.null_count:
            self._blank_ids(hashed)
        encoded = keys.dictionary_encode()
        codes = _codes(encoded)
        rows, start = {}, 0
        for r in hashed:
            rows[id(r)] = codes[start:start + len(r)]
            start += len(r)
        if same:
            rows[id(self.rerun)] = rows[id(self.current)]
        # the rerun's ids come last: one it has beyond the two runs and the charge-offs is not joined
        joined = sum(len(r) for r in parts if r is not self.rerun)
        n = int(codes[:joined].max()) + 1 if joined else 0
        # codes count in order of first appearance: those of the two runs' loans come first
        runs = sum(len(r) for r in hashed if r is self.prior or r is self.current)
        in_runs = int(codes[:runs].max()) + 1 if runs else 0
        orphans = _dictionary(encoded).take(pa.array(np.arange(in_runs, n))) if n > in_runs else pa.array([], pa.large_string())
        del keys, encoded
        give_back()  # the hash table and the dictionary: most of the join's memory, freed here
        return rows, n, orphans.cast(pa.large_string())

    def _blank_ids(self, parts: list[RunLoans]) -> None:
        for r in parts:
            if r.keys.null_count:
                i = _first_null(r.keys)
                raise MovementError(f"row {i + 1}: loan_id is blank", file=r.source, column="loan_id",
                                    hint="every loan of a run carries its id")

    @property
    def size(self) -> int:
        """How many loans are joined (in either run, or charged off)."""
        return self._join[1]

    def rows(self, run: RunLoans) -> np.ndarray:
        """Each loan of ``run`` as its row among the joined loans (int32)."""
        return self._join[0][id(run)]

    def require_unique(self, run: RunLoans) -> None:
        """A loan appears once in a run: the first repeated id is a named error."""
        rows = self.rows(run)
        if len(rows) and np.bincount(rows).max() > 1:
            first = np.full(int(rows.max()) + 1, len(rows))
            np.minimum.at(first, rows, np.arange(len(rows)))
            i = int(np.flatnonzero(first[rows] != np.arange(len(rows)))[0])
            raise MovementError(f"loan {run.keys[i].as_py()!r} appears more than once", file=run.source,
                                column="loan_id", hint="each loan must appear once in a run")

    @cached_property
    def segments(self) -> tuple[list[str], dict[int, np.ndarray]]:
        """The segment names of every run (and of the charge-off file), factorised once, and each
        run's loans as codes into them (int32; -1: none given). The names are numbered in order
        of first appearance over the runs, as one factorisation of their segments in turn would:
        each run's own distinct names, in its order, numbered where the earlier runs left off."""
        parts = [self.prior, self.current]
        co = self.charge_offs if self.charge_offs is not None and self.charge_offs.has("segment") else None
        parts += [co] if co is not None else []
        index: dict[str, int] = {}
        out = {}
        for r in parts:
            names, codes = r.segment_codes()
            where = np.array([index.setdefault(name, len(index)) for name in names] + [-1], dtype=np.int32)
            out[id(r)] = where[codes]  # -1 (none given) takes the last entry
        if self.charge_offs is not None and co is None:
            out[id(self.charge_offs)] = np.full(len(self.charge_offs), -1, dtype=np.int32)
        return list(index), out

    @cached_property
    def loan_ids(self) -> LoanIds:
        """The id of each joined loan as the current run gives it, else the prior run, else the key."""
        n = self.size
        if self.joined is not None:  # each joined loan's row in either run, made already
            at_c, at_p = self.joined.at_current, self.joined.at_prior
        else:
            at_c, at_p = _places(self.rows(self.current), n), _places(self.rows(self.prior), n)
        # the prior run's loans not in the current run, in their joined order: their ids taken
        # out of the prior run's (the current run's are the ones it has, not copied)
        gone = np.flatnonzero((at_p >= 0) & (at_c < 0))
        gone_ids = self.prior.ids.take(pa.array(at_p[gone])) if len(gone) else pa.chunked_array([], pa.large_string())
        kind = np.int32 if len(self.current) + len(gone) + n < 2**31 else np.int64
        where = at_c.astype(kind)
        where[gone] = len(self.current) + np.arange(len(gone))
        neither = np.flatnonzero((at_c < 0) & (at_p < 0))
        where[neither] = len(self.current) + len(gone) + np.arange(len(neither))
        texts = pa.chunked_array([*self.current.ids.chunks, *gone_ids.chunks, self._join[2]], type=pa.large_string())
        return LoanIds(texts, where)


class LoanIds:
    """The ids of the joined loans (Arrow text), each taken when a slice of them is asked for
    from the runs' own ids: ``texts`` (the current run's ids, the prior run's loans that left,
    the charged-off loans in neither run) and each joined loan's place among them."""

    __slots__ = ("texts", "where")

    def __init__(self, texts: pa.ChunkedArray, where: np.ndarray) -> None:
        self.texts, self.where = texts, where

    def __len__(self) -> int:
        return len(self.where)

    def __getitem__(self, cut: slice) -> pa.Array:
        """The ids of loans ``cut`` (a slice), as one Arrow array."""
        picked = self.where[cut]
        if not len(picked):
            return pa.array([], pa.large_string())
        return self.texts.take(pa.array(picked)).combine_chunks()


@dataclass(frozen=True)
class _Prepared:
    """One run's figures for one framework, checked, in the run's own row order (cents taken
    per block of joined loans)."""

    ecl: Figures | None
    mod: Figures
    gross_up: Figures | None = None
    rate: np.ndarray | None = None
    klass: np.ndarray | None = None  # codes into the framework's classes (int8)


def _class_names(framework: Framework) -> tuple[list[str], np.ndarray]:
    """The framework's classes and, for each (stage, POCI) pair coded ``2 (stage - 1) + poci``, its
    class code: the labels made once per pair, never per loan."""
    stage = np.repeat(np.arange(1, 4, dtype=np.int64), 2)
    poci = np.tile(np.array([False, True]), 3)
    labels = [str(x) for x in rules_for(framework).class_labels(stage, poci)]
    names = list(dict.fromkeys(labels))
    return names, np.array([names.index(x) for x in labels], dtype=np.int64)


def _prepare(book: Book, run: RunLoans, framework: Framework, *, modelled_only: bool = False) -> _Prepared:
    """The columns the movement needs from one run, checked, in the run's own order."""
    rules = rules_for(framework)
    final = f"ecl_{framework}"
    modelled = f"ecl_{framework}_modelled"
    need = ["loan_id", modelled if modelled_only else final]
    if not modelled_only:
        need += ["segment", "balance"] + (["stage"] if rules.staged else [])
    missing = [c for c in need if not run.has(c)]
    if modelled_only and missing == [modelled] and run.has(final):
        missing, modelled = [], final
    if missing:
        raise MovementError(
            f"the loans lack column(s) {', '.join(missing)} needed for the {framework} movement",
            file=run.source, column=missing[0], hint=f"use a run that included {framework}",
        )
    book.require_unique(run)
    if modelled_only:
        return _Prepared(ecl=None, mod=run.figures(modelled))
    run.require_segment()
    ecl = run.figures(final)
    mod = run.figures(modelled) if run.has(modelled) else ecl
    run.figures("balance")  # every framework's gross carrying amount (Book's _Joined)
    # CECL: the allowance at purchase of a PCD asset bought in the period (a gross-up)
    gross_up = run.optional_figures("pcd_gross_up")
    rate = run.rate(f"discount_rate_{framework}")
    run.flags("modified")  # checked in turn, read by _Joined
    poci = run.flags("poci")
    stage = run.stage if rules.staged else np.ones(len(run), dtype=np.int8)
    _, of_pair = _class_names(framework)
    return _Prepared(ecl=ecl, mod=mod, gross_up=gross_up, rate=rate,
                     klass=of_pair.astype(np.int8)[2 * (stage - 1) + poci])


def _charge_off_sums(book: Book) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None, np.ndarray]:
    """The period's charge-offs summed per joined loan: whether charged off, gross charge-off and
    recoveries in cents (None for both when there are no charge-offs), and the segment code
    the file gives (its first given; -1: none)."""
    n = book.size
    co = book.charge_offs
    if co is None:
        return np.zeros(n, dtype=bool), None, None, np.full(n, -1, dtype=np.int32)
    missing = [c for c in ("loan_id", "gross_charge_off") if not co.has(c)]
    if missing:
        raise MovementError(
            f"the charge-off file lacks column {missing[0]}", file=co.source, column=missing[0],
            hint="give loan_id, gross_charge_off and (optionally) recoveries and segment",
        )
    gco = co.cents("gross_charge_off")
    if co.has("recoveries"):
        raw = co.frame["recoveries"].astype(object)
        blank = raw.isna().to_numpy() | (raw.astype(str).str.strip() == "").to_numpy()
        rec = co._cents(raw.where(~blank, 0.0), "recoveries")
    else:
        rec = np.zeros(len(co), dtype=np.int64)
    for name, values in (("gross_charge_off", gco), ("recoveries", rec)):
        if (values < 0).any():
            i = int(np.flatnonzero(values < 0)[0])
            raise MovementError(
                f"loan {co.id_at(i)!r}: {name} is negative", file=co.source, column=name,
                hint="give charge-offs and recoveries as positive amounts",
            )
    rows = book.rows(co)
    in_co = np.bincount(rows, minlength=n)[:n] > 0
    seg_rows = book.segments[1][id(co)]
    given = np.flatnonzero(seg_rows >= 0)
    segment = np.full(n, -1, dtype=np.int32)
    if len(given):
        _, first = np.unique(rows[given], return_index=True)  # each loan's first row that names a segment
        segment[rows[given[first]]] = seg_rows[given[first]]
    return in_co, _add(rows, gco, n), _add(rows, rec, n), segment


class Lines(Mapping):
    """Every line's cents over the joined loans (:class:`Blocks`), each read as a whole int64
    array when asked for (``lines[name]``): a table takes one line at a time."""

    def __init__(self, blocks: dict[str, Blocks]) -> None:
        self.blocks = blocks

    def __getitem__(self, line: str) -> np.ndarray:
        return self.blocks[line].dense()

    def __contains__(self, line: object) -> bool:
        return line in self.blocks

    def __iter__(self):
        return iter(self.blocks)

    def __len__(self) -> int:
        return len(self.blocks)


@dataclass(frozen=True)
class Bridge:
    """One framework's movement loan by loan, over the joined loans (see :class:`Book`).

    ``segments`` and ``classes`` are the names the codes point into (-1: the loan is not in
    that run); ``amounts`` every line's amount in cents, zero wherever the line does not apply
    (so a sum over any loans is that line's total over them), each made whole when read from
    ``lines`` (the :class:`Blocks` the line is kept in); ``loan_ids`` the ids (:class:`LoanIds`).
    """

    in_prior: np.ndarray
    in_current: np.ndarray
    status: np.ndarray  # codes into STATUSES
    segment_prior: np.ndarray
    segment: np.ndarray
    segment_any: np.ndarray
    class_prior: np.ndarray
    klass: np.ndarray
    segments: list[str]
    classes: list[str]
    lines: dict[str, Blocks]
    loan_ids: LoanIds

    def __len__(self) -> int:
        return len(self.in_prior)

    @property
    def amounts(self) -> Lines:
        return Lines(self.lines)

    def codes(self, dim: str, side: str) -> np.ndarray:
        """A dimension's codes (``segment`` or ``class``) on one side (``prior`` or ``current``)."""
        if dim == "segment":
            return self.segment_prior if side == "prior" else self.segment
        return self.class_prior if side == "prior" else self.klass

    def names(self, dim: str) -> list[str]:
        return self.segments if dim == "segment" else self.classes


@dataclass(frozen=True)
class _Joined:
    """What every framework's bridge shares: who is where, the segments, and the gross carrying
    amount's lines (the balance moves the same whichever allowance is measured)."""

    at_prior: np.ndarray  # each joined loan's row in the prior run (-1: not there)
    at_current: np.ndarray
    in_prior: np.ndarray
    in_current: np.ndarray
    continuing: np.ndarray
    charged: np.ndarray  # the joined loans in the prior run with a charge-off, as row numbers
    gross_charge_off: np.ndarray | None  # cents per joined loan (None: no charge-offs)
    status: np.ndarray
    segment_prior: np.ndarray
    segment: np.ndarray
    segment_any: np.ndarray
    segments: list[str]
    modified: np.ndarray  # continuing loans flagged modified
    gross: dict[str, Blocks]


def _blocks(n: int):
    """The joined loans block by block: slices of :data:`BLOCK` loans."""
    return (slice(lo, min(lo + BLOCK, n)) for lo in range(0, n, BLOCK))


def _within(rows: np.ndarray, cut: slice) -> np.ndarray:
    """The rows (sorted) that fall in the block ``cut``, as places in it."""
    return rows[np.searchsorted(rows, cut.start): np.searchsorted(rows, cut.stop)] - cut.start


def _made(n: int, names: tuple[str, ...], block) -> dict[str, Blocks]:
    """Each of ``names``' lines as :class:`Blocks`, from ``block(cut) -> {name: int64 amounts}``
    called once per block of joined loans, each block kept as it comes (never a whole line in int64)."""
    made = {name: Blocks.building() for name in names}
    for cut in _blocks(n):
        for name, values in block(cut).items():
            made[name].add(values)
    return {name: made[name].done() for name in names}


def _joined(book: Book) -> _Joined:
    """:class:`_Joined` of the book, made once (after both runs and the charge-offs were checked)."""
    if book.joined is not None:
        return book.joined
    in_co, gco, rec, seg_co = _charge_off_sums(book)
    n = book.size
    rows_p, rows_c = book.rows(book.prior), book.rows(book.current)
    at_p, at_c = _places(rows_p, n), _places(rows_c, n)
    in_p, in_c = at_p >= 0, at_c >= 0
    cont, new = in_p & in_c, in_c & ~in_p
    gone = in_p & ~in_c
    written, derec = gone & in_co, gone & ~in_co
    charged = np.flatnonzero(in_p & in_co)
    balance_p, balance_c = book.prior.figures("balance"), book.current.figures("balance")

    def block(cut: slice) -> dict[str, np.ndarray]:
        Bp, Bc = balance_p.at(at_p[cut]), balance_c.at(at_c[cut])
        # the gross carrying amount written off: never more than the charge-off
        wg = np.zeros(len(Bp), dtype=np.int64)
        if gco is not None:
            there = _within(charged, cut)
            wg[there] = np.minimum(Bp[there], gco[cut][there])
        g_new = np.where(new[cut], Bc, 0)
        g_derecognised = wg - Bp
        g_derecognised[~gone[cut]] = 0
        g_transfer = Bp - wg
        g_other = Bc - g_transfer
        g_transfer[~cont[cut]] = 0
        g_other[~cont[cut]] = 0
        zero = np.zeros(len(Bp), dtype=np.int64)
        return {"g_opening": Bp, "g_new": g_new, "g_derecognised": g_derecognised, "g_written_off": -wg,
                "g_transfer": g_transfer, "g_other_changes": g_other, "g_closing": Bc,
                "gross_charge_off": zero if gco is None else gco[cut], "recoveries": zero if rec is None else rec[cut]}

    gross = _made(n, ("g_opening", "g_new", "g_derecognised", "g_written_off", "g_transfer", "g_other_changes",
                      "g_closing", "gross_charge_off", "recoveries"), block)
    segments, seg_codes = book.segments
    segments = list(segments)
    seg_p = _spread(rows_p, seg_codes[id(book.prior)], n, -1)
    seg_c = _spread(rows_c, seg_codes[id(book.current)], n, -1)
    seg_any = np.where(in_p, seg_p, np.where(in_c, seg_c, seg_co))
    # a loan opened and charged off within the period is in neither run: its segment comes
    # from the charge-off file when it has one, else it is shown apart
    orphan = seg_any < 0
    if orphan.any():
        if UNASSIGNED_SEGMENT not in segments:
            segments.append(UNASSIGNED_SEGMENT)
        seg_any[orphan] = segments.index(UNASSIGNED_SEGMENT)
    book.joined = _Joined(
        at_prior=at_p, at_current=at_c, in_prior=in_p, in_current=in_c, continuing=cont, charged=charged,
        gross_charge_off=gco,
        status=np.select([cont, new, written, derec], [0, 1, 2, 3], 4).astype(np.int8),
        segment_prior=seg_p, segment=seg_c, segment_any=seg_any, segments=segments,
        modified=cont & _spread(rows_c, book.current.flags("modified"), n, False),
        gross=gross,
    )
    return book.joined


#: the allowance's lines a bridge makes (the gross carrying amount's come from _Joined)
_ALLOWANCE_LINES = ("opening", "new", "pcd_gross_up", "derecognised", "written_off", "transfer", "unwind",
                    "remeasurement", "modifications", "model_change", "assumptions", "overlays", "closing")


def bridge(book: Book, framework: Framework, *, months: int | None = None,
           method_changed: frozenset[str] = frozenset(), gross_up: bool = False) -> Bridge:
    """One framework's movement loan by loan: every line's amount in cents.

    ``months`` is the length of the period (for the unwind of the discount; None: not
    isolated); ``method_changed`` the segments whose model or method changed (``"*"``: all);
    ``gross_up`` whether the framework grosses up a PCD asset's purchase-date allowance.
    """
    p = _prepare(book, book.prior, framework)
    c = _prepare(book, book.current, framework)
    a = None if book.rerun is None else _prepare(book, book.rerun, framework, modelled_only=True)
    j = _joined(book)
    n = book.size
    at_p, at_c = j.at_prior, j.at_current
    at_a = None
    if a is not None:
        rows_a = book.rows(book.rerun)
        in_a = np.zeros(max(n, int(rows_a.max()) + 1 if len(rows_a) else 0), dtype=bool)
        in_a[rows_a] = True
        rows_c = book.rows(book.current)
        lacking = np.flatnonzero(~in_a[rows_c])
        if len(lacking):
            # the first missing loan in the order of its key
            keys = book.current.keys.take(pa.array(lacking))
            first = int(lacking[pc.array_sort_indices(keys)[0].as_py()])
            raise MovementError(
                f"loan {book.current.id_at(first)!r} of the current run is missing from the rerun at prior "
                "assumptions", file=book.sources["current_at_prior_assumptions"],
                hint="rerun the whole current tape with the prior run's assumptions",
            )
        del in_a
        # the rerun in the current run's order has the current run's rows (Book._join)
        same = rows_a is rows_c
        inside = np.flatnonzero(rows_a < n)
        at_a = at_c if same else np.full(n, -1, dtype=np.int32)
        if not same:
            at_a[rows_a[inside]] = inside
    class_prior = _spread(book.rows(book.prior), p.klass, n, -1)
    klass = _spread(book.rows(book.current), c.klass, n, -1)
    if "*" in method_changed or not method_changed:
        changed = None
    else:
        changed = np.isin(j.segment, [i for i, s in enumerate(j.segments) if s in method_changed])
    gco = j.gross_charge_off
    bought = c.gross_up if gross_up else None

    def block(cut: slice) -> dict[str, np.ndarray]:
        cont = j.continuing[cut]
        not_cont = ~cont
        new = j.in_current[cut] & ~j.in_prior[cut]
        pp, cc = at_p[cut], at_c[cut]
        P, Pm = p.ecl.at(pp), (p.mod.at(pp) if p.mod is not p.ecl else None)
        Pm = P if Pm is None else Pm
        C = c.ecl.at(cc)
        Cm = C if c.mod is c.ecl else c.mod.at(cc)
        A = Cm if a is None else a.mod.at(at_a[cut])
        # the allowance used by a charge-off: never more than the charge-off, never a negative
        # allowance (a POCI gain is not "written off"); what is left of a leaving loan's
        # allowance is released on derecognition
        w = np.zeros(len(P), dtype=np.int64)
        if gco is not None:
            there = _within(j.charged, cut)
            w[there] = np.minimum(np.maximum(P[there], 0), gco[cut][there])
        # CECL: a PCD asset bought in the period enters with its purchase-date allowance as a
        # gross-up of amortised cost (ASC 326-20-30-13), not through the provision
        G = np.zeros(len(P), dtype=np.int64)
        if bought is not None:
            G[new] = bought.at(cc)[new]
        # unwind of the discount on the opening (modelled) allowance of continuing loans, at the
        # rate that discounted it: P_m ((1 + r/12)^months - 1)
        unwind = np.zeros(len(P), dtype=np.int64)
        if months is not None and p.rate is not None:
            rate = np.full(len(P), np.nan)
            rate[pp >= 0] = p.rate[pp[pp >= 0]]
            at = np.flatnonzero(cont & ~np.isnan(rate))
            unwind[at] = np.rint(Pm[at] * np.expm1(np.log1p(rate[at] / 12.0) * months)).astype(np.int64)
        # at prior assumptions (remeasurement, or modifications for a loan flagged modified)
        rest = A - Pm
        rest += w
        rest -= unwind
        rest[not_cont] = 0
        modified = np.flatnonzero(j.modified[cut])
        modifications = np.zeros(len(P), dtype=np.int64)
        modifications[modified] = rest[modified]
        rest[modified] = 0
        # the assumptions' effect: new loans are valued at the closing assumptions
        change = Cm - A
        change[not_cont] = 0
        if "*" in method_changed:
            model_change, assumptions = change, np.zeros(len(P), dtype=np.int64)
        elif changed is not None:
            model_change, assumptions = np.where(changed[cut], change, 0), np.where(changed[cut], 0, change)
        else:
            model_change, assumptions = np.zeros(len(P), dtype=np.int64), change
        overlays = C - Cm
        overlays -= P
        overlays += Pm
        overlays[not_cont] = 0
        new_amount = C - G
        new_amount[~new] = 0
        derecognised = w - P
        derecognised[cont | ~j.in_prior[cut]] = 0
        transfer = P - w
        transfer[not_cont] = 0
        return {"opening": P, "new": new_amount, "pcd_gross_up": G, "derecognised": derecognised,
                "written_off": -w, "transfer": transfer, "unwind": unwind, "remeasurement": rest,
                "modifications": modifications, "model_change": model_change, "assumptions": assumptions,
                "overlays": overlays, "closing": C}

    lines = _made(n, _ALLOWANCE_LINES, block)
    classes, _ = _class_names(framework)
    return Bridge(
        in_prior=j.in_prior, in_current=j.in_current, status=j.status, segment_prior=j.segment_prior,
        segment=j.segment, segment_any=j.segment_any,
        class_prior=class_prior, klass=klass,
        segments=j.segments, classes=classes,
        lines={**lines, **j.gross},  # the gross carrying amount's: the same Blocks for every framework
        loan_ids=book.loan_ids,
    )
