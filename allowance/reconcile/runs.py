"""Reading the runs for the movement: each column converted once, the loans joined on integer codes.

Implements
----------
RunLoans        one run's loan results (or the charge-off file) as the movement reads them: each
                column converted once, whichever frameworks use it; ids and segments stay Arrow text
Book            the prior run, the current run, the rerun at prior assumptions and the charge-offs,
                joined once for every framework: each loan's place among the loans of any of them
                (one hash pass over the ids), the segments factorised once
Bridge          one framework's movement loan by loan: arrays over the joined loans, segments and
                classes as integer codes, every line's amount in cents
bridge          build it for one framework
movement_columns    the columns of a run's loans.csv the movement (and the vintage disclosure) reads

The join never walks text in Python: ids are neutralised and dictionary-encoded by Arrow, and
every later step works on the codes (a million loans' ids as Python strings cost seconds
each time they were converted, set-compared or grouped).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from allowance.exceptions import MovementError
from allowance.frameworks import rules_for
from allowance.schemas import FRAMEWORKS, Framework
from allowance.text import neutralise_table

__all__ = ["UNASSIGNED_SEGMENT", "Book", "Bridge", "RunLoans", "bridge", "movement_columns"]


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


def _show(value: object) -> str:
    """A cell value as a message shows it: text quoted, numbers plain, blanks as 'blank'."""
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return "blank"
    return repr(value) if isinstance(value, str) else str(value)


def _text(values: pd.Series) -> pa.Array:
    """A column as Arrow text, as ``astype(str)`` gives it (missing stays missing): pandas' own
    Arrow-backed text is handed over without a copy."""
    if not (isinstance(values.dtype, pd.StringDtype) and values.dtype.storage == "pyarrow"):
        values = values.astype(str)
    array = pa.array(values, from_pandas=True)
    if isinstance(array, pa.ChunkedArray):
        array = array.combine_chunks()
    return array.cast(pa.large_string())


def _neutralised(values: pa.Array) -> pa.Array:
    """Ids as a spreadsheet-safe file carries them (``=x`` -> ``'=x``): the join key of both runs."""
    return neutralise_table(pa.table({"id": values})).column(0).combine_chunks()


def _codes(encoded: pa.Array) -> np.ndarray:
    """The indices of a dictionary array as int64, a missing value -1."""
    return pc.fill_null(encoded.indices, -1).to_numpy(zero_copy_only=False).astype(np.int64)


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
    def ids(self) -> pa.Array:
        """``loan_id`` as text, as the run wrote it."""
        return self._once("ids", lambda: _text(self.frame["loan_id"]))

    @property
    def keys(self) -> pa.Array:
        """The join key: the id neutralised as a spreadsheet-safe file carries it (made when asked:
        the join takes it once, a message about one loan again)."""
        return _neutralised(self.ids)

    def id_at(self, i: int) -> str | None:
        return self.ids[i].as_py()

    @property
    def segment(self) -> pa.Array:
        """``segment`` as text (a missing one stays missing)."""
        return self._once("segment", lambda: _text(self.frame["segment"]))

    def require_segment(self) -> None:
        """Every loan of a run sits in a segment; a blank one is a named error."""
        blank = self.segment.null_count
        if blank:
            i = int(np.flatnonzero(self.segment.is_null().to_numpy(zero_copy_only=False))[0])
            raise MovementError(f"loan {self.id_at(i)!r}: segment is blank", file=self.source, column="segment",
                                hint="use the loans.csv the run wrote")

    def cents(self, column: str, *, keep: bool = False) -> np.ndarray:
        """Money in currency units -> whole cents; a blank or non-number is a named error.
        ``keep``: kept for the next framework (a column every framework reads)."""
        if keep:
            return self._once("cents:" + column, lambda: self._cents(self.frame[column], column))
        kept = self._converted.get("cents:" + column)
        return kept if kept is not None else self._cents(self.frame[column], column)

    def optional_cents(self, column: str) -> np.ndarray | None:
        """A money column a run may not carry (older runs): cents, blanks as 0; None when absent."""
        if not self.has(column):
            return None
        return self._cents(pd.to_numeric(self.frame[column], errors="coerce").fillna(0.0), column)

    def _cents(self, values: pd.Series, column: str) -> np.ndarray:
        numbers = pd.to_numeric(values, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
        bad = ~np.isfinite(numbers)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise MovementError(
                f"loan {self.id_at(i)!r}: {column} is blank or not a number ({_show(values.iloc[i])})",
                file=self.source, column=column, hint="rerun that run so every loan carries its figures",
            )
        return np.rint(numbers * 100.0).astype(np.int64)

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
        """The IFRS 9 stage of every loan (int64); one that is not 1, 2 or 3 is a named error."""
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
        return stage.astype(np.int64)


def _flags(values: pd.Series) -> np.ndarray:
    if pd.api.types.is_bool_dtype(values.dtype):
        return values.to_numpy(dtype=bool)
    text = values.astype(str).str.strip().str.lower()
    return text.isin(["true", "1", "1.0", "y", "yes"]).to_numpy(dtype=bool, na_value=False)


class Book:
    """The runs of one movement joined once, for every framework.

    ``prior`` and ``current`` are the two runs' loans, ``rerun`` the current tape at the prior
    run's assumptions (or None), ``charge_offs`` the period's charge-off rows (or None). The
    joined loans are numbered in order of first appearance over the prior run, the current run
    and the charge-offs: the prior run's loans, then the new ones, then loans only charged off.
    """

    def __init__(self, prior: pd.DataFrame, current: pd.DataFrame, rerun: pd.DataFrame | None,
                 charge_offs: pd.DataFrame | None, sources: dict) -> None:
        self.sources = sources
        self.prior = RunLoans(prior, sources["prior"])
        self.current = RunLoans(current, sources["current"])
        self.rerun = None if rerun is None else RunLoans(rerun, sources["current_at_prior_assumptions"])
        empty = charge_offs is None or len(charge_offs) == 0
        self.charge_offs = None if empty else RunLoans(charge_offs, sources["charge_offs"])
        self.joined = None  # what every framework's bridge shares (made by the first)
        #: the movement's loan lines every framework shares (the gross carrying amount's), as
        #: compacted for the loan table once: line -> (the shared array, its compacted copy)
        self.compacted: dict[str, tuple[np.ndarray, np.ndarray]] = {}

    def _parts(self) -> list[RunLoans]:
        """The runs whose ids take part in the join, in the order their loans are numbered."""
        # a run without ids is refused when its turn comes (the columns it lacks are named then)
        return [r for r in (self.prior, self.current, self.charge_offs, self.rerun) if r is not None and r.has("loan_id")]

    @cached_property
    def _join(self) -> tuple[dict[int, np.ndarray], int, pa.Array]:
        """Every run's rows among the joined loans, their number, and the keys of them all."""
        parts = self._parts()
        # the rerun of this quarter's tape gives the current run's ids in the current run's
        # order (it is the same tape): its rows are the current run's, not hashed again
        same = self.rerun in parts and self.current in parts and self.rerun.ids.equals(self.current.ids)
        hashed = [r for r in parts if not (same and r is self.rerun)]
        keys = pa.chunked_array([r.keys for r in hashed], type=pa.large_string()).combine_chunks()
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
        return rows, n, encoded.dictionary

    def _blank_ids(self, parts: list[RunLoans]) -> None:
        for r in parts:
            if r.keys.null_count:
                i = int(np.flatnonzero(r.keys.is_null().to_numpy(zero_copy_only=False))[0])
                raise MovementError(f"row {i + 1}: loan_id is blank", file=r.source, column="loan_id",
                                    hint="every loan of a run carries its id")

    @property
    def size(self) -> int:
        """How many loans are joined (in either run, or charged off)."""
        return self._join[1]

    def rows(self, run: RunLoans) -> np.ndarray:
        """Each loan of ``run`` as its row among the joined loans."""
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

    def key_of(self, row: int) -> str:
        return self._join[2][row].as_py()

    @cached_property
    def segments(self) -> tuple[list[str], dict[int, np.ndarray]]:
        """The segment names of every run (and of the charge-off file), factorised once, and each
        run's loans as codes into them (-1: none given)."""
        parts = [self.prior, self.current]
        co = self.charge_offs if self.charge_offs is not None and self.charge_offs.has("segment") else None
        parts += [co] if co is not None else []
        encoded = pa.chunked_array([r.segment for r in parts], type=pa.large_string()).combine_chunks().dictionary_encode()
        codes = _codes(encoded)
        out, start = {}, 0
        for r in parts:
            out[id(r)] = codes[start:start + len(r)]
            start += len(r)
        if self.charge_offs is not None and co is None:
            out[id(self.charge_offs)] = np.full(len(self.charge_offs), -1, dtype=np.int64)
        return encoded.dictionary.to_pylist(), out

    @cached_property
    def loan_ids(self) -> pa.Array:
        """The id of each joined loan as the current run gives it, else the prior run, else the key."""
        n = self.size
        in_c = _spread(self.rows(self.current), np.ones(len(self.current), dtype=bool), n, False)
        in_p = _spread(self.rows(self.prior), np.ones(len(self.prior), dtype=bool), n, False)
        at_c = _spread(self.rows(self.current), np.arange(len(self.current)), n, -1)
        at_p = _spread(self.rows(self.prior), np.arange(len(self.prior)), n, -1)
        neither = np.flatnonzero(~in_c & ~in_p)
        orphans = self._join[2].take(pa.array(neither)) if len(neither) else pa.array([], pa.large_string())
        at_o = np.full(n, -1)
        at_o[neither] = np.arange(len(neither))
        base_p, base_o = len(self.current), len(self.current) + len(self.prior)
        where = np.where(in_c, at_c, np.where(in_p, base_p + at_p, base_o + at_o))
        texts = pa.chunked_array([self.current.ids, self.prior.ids, orphans.cast(pa.large_string())],
                                 type=pa.large_string()).combine_chunks()
        return texts.take(pa.array(where))


@dataclass(frozen=True)
class _Prepared:
    """One run's figures for one framework, in cents, in the run's own row order."""

    ecl: np.ndarray | None
    mod: np.ndarray
    gross_up: np.ndarray | None = None
    rate: np.ndarray | None = None
    klass: np.ndarray | None = None  # codes into the framework's classes


def _class_names(framework: Framework) -> tuple[list[str], np.ndarray]:
    """The framework's classes and, for each (stage, POCI) pair coded ``2 (stage - 1) + poci``, its
    class code: the labels made once per pair, never per loan."""
    stage = np.repeat(np.arange(1, 4, dtype=np.int64), 2)
    poci = np.tile(np.array([False, True]), 3)
    labels = [str(x) for x in rules_for(framework).class_labels(stage, poci)]
    names = list(dict.fromkeys(labels))
    return names, np.array([names.index(x) for x in labels], dtype=np.int64)


def _prepare(book: Book, run: RunLoans, framework: Framework, *, modelled_only: bool = False) -> _Prepared:
    """The columns the movement needs from one run, in cents, each loan placed among the joined loans."""
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
        return _Prepared(ecl=None, mod=run.cents(modelled))
    run.require_segment()
    ecl = run.cents(final)
    mod = run.cents(modelled) if run.has(modelled) else ecl
    run.cents("balance", keep=True)  # every framework's gross carrying amount (Book's _Joined)
    # CECL: the allowance at purchase of a PCD asset bought in the period (a gross-up)
    gross_up = run.optional_cents("pcd_gross_up")
    rate = run.rate(f"discount_rate_{framework}")
    run.flags("modified")  # checked in turn, read by _Joined
    poci = run.flags("poci")
    stage = run.stage if rules.staged else np.ones(len(run), dtype=np.int64)
    _, of_pair = _class_names(framework)
    return _Prepared(ecl=ecl, mod=mod, gross_up=gross_up, rate=rate,
                     klass=of_pair[2 * (stage - 1) + poci])


def _charge_off_sums(book: Book) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The period's charge-offs summed per joined loan: whether charged off, gross charge-off and
    recoveries in cents, and the segment code the file gives (its first given; -1: none)."""
    n = book.size
    co = book.charge_offs
    if co is None:
        return np.zeros(n, dtype=bool), np.zeros(n, dtype=np.int64), np.zeros(n, dtype=np.int64), np.full(n, -1)
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
    segment = np.full(n, -1, dtype=np.int64)
    if len(given):
        _, first = np.unique(rows[given], return_index=True)  # each loan's first row that names a segment
        segment[rows[given[first]]] = seg_rows[given[first]]
    return in_co, _add(rows, gco, n), _add(rows, rec, n), segment


@dataclass(frozen=True)
class Bridge:
    """One framework's movement loan by loan, over the joined loans (see :class:`Book`).

    ``segments`` and ``classes`` are the names the codes point into (-1: the loan is not in
    that run); ``amounts`` every line's amount in cents, zero wherever the line does not apply
    (so a sum over any loans is that line's total over them); ``loan_ids`` the ids, Arrow text.
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
    amounts: dict[str, np.ndarray]
    loan_ids: pa.Array

    def __len__(self) -> int:
        return len(self.in_prior)

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

    in_prior: np.ndarray
    in_current: np.ndarray
    continuing: np.ndarray
    charged: np.ndarray  # the joined loans in the prior run with a charge-off, as row numbers
    status: np.ndarray
    segment_prior: np.ndarray
    segment: np.ndarray
    segment_any: np.ndarray
    segments: list[str]
    modified: np.ndarray  # continuing loans flagged modified
    gross: dict[str, np.ndarray]


def _joined(book: Book) -> _Joined:
    """:class:`_Joined` of the book, made once (after both runs and the charge-offs were checked)."""
    if book.joined is not None:
        return book.joined
    in_co, gco, rec, seg_co = _charge_off_sums(book)
    n = book.size
    rows_p, rows_c = book.rows(book.prior), book.rows(book.current)
    in_p = _spread(rows_p, np.ones(len(rows_p), dtype=bool), n, False)
    in_c = _spread(rows_c, np.ones(len(rows_c), dtype=bool), n, False)
    cont, new = in_p & in_c, in_c & ~in_p
    gone = in_p & ~in_c
    written, derec = gone & in_co, gone & ~in_co
    charged = np.flatnonzero(in_p & in_co)
    Bp = _spread(rows_p, book.prior.cents("balance", keep=True), n)
    Bc = _spread(rows_c, book.current.cents("balance", keep=True), n)
    # the gross carrying amount written off: never more than the charge-off
    wg = np.zeros(n, dtype=np.int64)
    wg[charged] = np.minimum(Bp[charged], gco[charged])
    g_new = np.where(new, Bc, 0)
    g_derecognised = wg - Bp
    g_derecognised[~gone] = 0
    g_transfer = Bp - wg
    g_other = Bc - g_transfer
    g_transfer[~cont] = 0
    g_other[~cont] = 0

    segments, seg_codes = book.segments
    segments = list(segments)
    seg_p = _spread(rows_p, seg_codes[id(book.prior)].astype(np.int32), n, -1)
    seg_c = _spread(rows_c, seg_codes[id(book.current)].astype(np.int32), n, -1)
    seg_any = np.where(in_p, seg_p, np.where(in_c, seg_c, seg_co.astype(np.int32)))
    # a loan opened and charged off within the period is in neither run: its segment comes
    # from the charge-off file when it has one, else it is shown apart
    orphan = seg_any < 0
    if orphan.any():
        if UNASSIGNED_SEGMENT not in segments:
            segments.append(UNASSIGNED_SEGMENT)
        seg_any[orphan] = segments.index(UNASSIGNED_SEGMENT)
    book.joined = _Joined(
        in_prior=in_p, in_current=in_c, continuing=cont, charged=charged,
        status=np.select([cont, new, written, derec], [0, 1, 2, 3], 4).astype(np.int8),
        segment_prior=seg_p, segment=seg_c, segment_any=seg_any, segments=segments,
        modified=cont & _spread(rows_c, book.current.flags("modified"), n, False),
        gross={"g_opening": Bp, "g_new": g_new, "g_derecognised": g_derecognised, "g_written_off": -wg,
               "g_transfer": g_transfer, "g_other_changes": g_other, "g_closing": Bc,
               "gross_charge_off": gco, "recoveries": rec},
    )
    return book.joined


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
    rows_p, rows_c = book.rows(book.prior), book.rows(book.current)
    cont, not_cont = j.continuing, ~j.continuing
    new = j.in_current & ~j.in_prior

    P, Pm = _spread(rows_p, p.ecl, n), _spread(rows_p, p.mod, n)
    C, Cm = _spread(rows_c, c.ecl, n), _spread(rows_c, c.mod, n)
    if a is not None:
        rows_a = book.rows(book.rerun)
        in_a = np.zeros(max(n, int(rows_a.max()) + 1 if len(rows_a) else 0), dtype=bool)
        in_a[rows_a] = True
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
        inside = rows_a < n
        A = _spread(rows_a[inside], a.mod[inside], n)
    else:
        A = Cm
    # each run's figures are placed among the joined loans here; their own arrays go before the
    # lines are made (a million loans: some 60 MB less at the movement's peak)
    class_prior = _spread(rows_p, p.klass.astype(np.int32), n, -1)
    klass = _spread(rows_c, c.klass.astype(np.int32), n, -1)
    rate = _spread(rows_p, p.rate, n, np.nan) if months is not None else None
    bought = _spread(rows_c, c.gross_up, n) if gross_up and c.gross_up is not None else None
    del p, c, a

    # the allowance used by a charge-off: never more than the charge-off, never a negative
    # allowance (a POCI gain is not "written off"); what is left of a leaving loan's
    # allowance is released on derecognition
    w = np.zeros(n, dtype=np.int64)
    w[j.charged] = np.minimum(np.maximum(P[j.charged], 0), j.gross["gross_charge_off"][j.charged])
    # CECL: a PCD asset bought in the period enters with its purchase-date allowance as a
    # gross-up of amortised cost (ASC 326-20-30-13), not through the provision
    G = np.zeros(n, dtype=np.int64)
    if bought is not None:
        G[new] = bought[new]
        del bought
    # unwind of the discount on the opening (modelled) allowance of continuing loans, at the
    # rate that discounted it: P_m ((1 + r/12)^months - 1)
    unwind = np.zeros(n, dtype=np.int64)
    if rate is not None:
        at = np.flatnonzero(cont & ~np.isnan(rate))
        unwind[at] = np.rint(Pm[at] * np.expm1(np.log1p(rate[at] / 12.0) * months)).astype(np.int64)
    del rate
    # at prior assumptions (remeasurement, or modifications for a loan flagged modified)
    rest = A - Pm
    rest += w
    rest -= unwind
    rest[not_cont] = 0
    modified = np.flatnonzero(j.modified)
    modifications = np.zeros(n, dtype=np.int64)
    modifications[modified] = rest[modified]
    rest[modified] = 0
    # the assumptions' effect: new loans are valued at the closing assumptions
    change = Cm - A
    change[not_cont] = 0
    if "*" in method_changed:
        model_change, assumptions = change, np.zeros(n, dtype=np.int64)
    elif method_changed:
        changed = np.isin(j.segment, [i for i, s in enumerate(j.segments) if s in method_changed])
        model_change, assumptions = np.where(changed, change, 0), np.where(changed, 0, change)
    else:
        model_change, assumptions = np.zeros(n, dtype=np.int64), change
    overlays = C - Cm
    overlays -= P
    overlays += Pm
    overlays[not_cont] = 0
    del A, Cm, Pm
    new_amount = C - G
    new_amount[~new] = 0
    derecognised = w - P
    derecognised[cont | ~j.in_prior] = 0
    transfer = P - w
    transfer[not_cont] = 0
    w = np.negative(w, out=w)
    classes, _ = _class_names(framework)
    amounts = {
        # allowance, cents
        "opening": P, "new": new_amount, "pcd_gross_up": G, "derecognised": derecognised, "written_off": w,
        "transfer": transfer, "unwind": unwind, "remeasurement": rest, "modifications": modifications,
        "model_change": model_change, "assumptions": assumptions, "overlays": overlays, "closing": C,
        # gross carrying amount, cents (the same for every framework)
        **j.gross,
    }
    return Bridge(
        in_prior=j.in_prior, in_current=j.in_current, status=j.status, segment_prior=j.segment_prior,
        segment=j.segment, segment_any=j.segment_any,
        class_prior=class_prior, klass=klass,
        segments=j.segments, classes=classes, amounts=amounts, loan_ids=book.loan_ids,
    )
