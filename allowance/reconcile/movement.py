"""The movement of one framework from the prior run to the current run, tied to the cent.

Implements
----------
Movement       one framework's movement tables (frozen)
movement       prior + current (+ rerun at prior assumptions, + charge-offs)
compare_runs   the movement of every framework two runs share

How a loan moves
----------------
All arithmetic is in whole cents (int64) on the rounded loan figures of the two runs, so
every line is an exact sum and every table foots exactly. For one loan, with P / C the
prior / current allowance, P_m / C_m their modelled parts and A_m the modelled allowance of
the current tape at the prior run's assumptions (A_m = C_m when that rerun is absent):

=========================  ==========================================================
new loans                  C - G (current only): valued at the closing assumptions,
                           overlays included
PCD gross-up (CECL)        G: the purchase-date allowance of a PCD asset bought in the
                           period, added to amortised cost (ASC 326-20-30-13), not provision
written off                -W, W = min(max(P, 0), charge-off): the allowance used, never
                           more than the charge-off and never a negative (POCI) allowance
derecognised               -(P - W) for a loan that left (repaid, sold, or the part of its
                           allowance released when it was written off)
transfer to stage k        P - W, out of the prior stage, into stage k
unwind of the discount     U = P_m ((1 + r/12)^months - 1), r the rate that discounted P
                           (the prior run's ``discount_rate_<framework>``); 0 where
                           undiscounted
remeasurement              A_m - P_m + W - U (continuing loans, at prior assumptions)
modifications              the same amount instead, for a loan flagged ``modified``
models or methods          C_m - A_m where the segment's method keys changed
assumptions or scenarios   C_m - A_m for the other continuing loans
overlay changes            (C - C_m) - (P - P_m) (continuing loans)
closing                    C
=========================  ==========================================================

Per loan the lines sum to C - P, so opening + movements = closing in every stage, segment
and their crossing. The gross carrying amount moves the same way, with "other changes"
(repayments, amortisation, drawings) taking the part of remeasurement. Lines that cannot be
isolated from the inputs given (no rerun at prior assumptions, no discount rates, no
``modified`` flag) stay in remeasurement, and :attr:`Movement.not_isolated` says which and why.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from functools import cached_property
from datetime import date

import numpy as np
import pandas as pd
import pyarrow as pa

from allowance.frameworks import rules_for
from allowance.exceptions import MovementError
from allowance.memory import give_back, given_back
from allowance.reconcile.blocks import Blocks
from allowance.reconcile.runs import STATUSES, Book, Bridge, LoanIds, RunLoans, bridge
from allowance.reconcile.tables import (
    _ALLOWANCE_BODY, _GROSS_BODY, LEDGER, _check_long, _ledger, _line_order, _long, _slug, _transfer_lines, _wide,
    MOVEMENT_LINES, check_movement, journal, rollforward, write_off_bridge,
)
from allowance.schemas import FRAMEWORKS, Framework

__all__ = ["LoanColumns", "Movement", "compare_runs", "movement", "remeasurement_label"]


@dataclass(frozen=True)
class Movement:
    """One framework's movement from the prior run to the current run.

    allowance         wide: ``line, label``, one column per class (IFRS 9: ``stage 1``,
                      ``stage 2``, ``stage 3``, ``POCI``; CECL: each segment), ``total``
    gross             the same lines for the gross carrying amount (balance)
    allowance_detail  long: ``segment, class, line, label, amount`` (segment x class)
    gross_detail      long, the same for the gross carrying amount
    rollforward       per segment and ``Total``: ``beginning, initial_allowance_pcd,
                      provision, charge_offs, recoveries, ending`` (charge-offs negative; the
                      provision the balancing figure; see :func:`rollforward`)
    journal           the allowance entries: ``segment, entry, account, debit, credit``
    loans             per loan: status, prior and current class, every line's amount (made
                      when first read; :meth:`loan_table` gives a slice of it)
    assumptions_isolated  whether a rerun at prior assumptions separated that line
    notes             things a reviewer should know (charge-offs of loans in neither run)
    write_offs        from the allowance written off to gross charge-offs and recoveries
    not_isolated      the lines that could not be told apart, each with the reason
    """

    framework: Framework
    allowance: pd.DataFrame
    gross: pd.DataFrame
    allowance_detail: pd.DataFrame
    gross_detail: pd.DataFrame
    rollforward: pd.DataFrame
    journal: pd.DataFrame
    assumptions_isolated: bool
    notes: tuple[str, ...] = ()
    write_offs: pd.DataFrame = field(default_factory=pd.DataFrame)
    not_isolated: tuple[str, ...] = ()
    _loan_rows: _LoanRows | None = field(default=None, repr=False, compare=False)

    @cached_property
    def loans(self) -> pd.DataFrame:
        """Per loan: status, prior and current segment and class, every line's amount."""
        return self.loan_table()

    @property
    def loan_count(self) -> int:
        """How many rows :attr:`loans` has (loans in either run, or charged off)."""
        return 0 if self._loan_rows is None else len(self._loan_rows.status)

    def loan_table(self, start: int = 0, stop: int | None = None) -> pd.DataFrame:
        """Rows ``start:stop`` of :attr:`loans`, made from the movement's codes and cents: a writer
        takes a large book's loan table slice by slice, never all of it at once."""
        return _loan_table(self._loan_rows, start, stop)

    def loan_columns(self, start: int = 0, stop: int | None = None) -> LoanColumns | None:
        """Rows ``start:stop`` of :attr:`loans` as codes into their labels and whole cents
        (:class:`LoanColumns`); None when the movement keeps no loans."""
        return None if self._loan_rows is None else _loan_columns(self._loan_rows, start, stop)

    @property
    def net_provision(self) -> float:
        """The period's provision charge (negative: a release), all segments."""
        return float(self.rollforward.loc[self.rollforward["segment"] == "Total", "provision"].iloc[0])

    def to_long(self) -> pd.DataFrame:
        """Every table in one long frame (``movement.csv``): framework, table, segment, class, line."""
        parts = []
        for table, detail in (("allowance", self.allowance_detail), ("gross_carrying_amount", self.gross_detail)):
            parts.append(detail.assign(table=table))
        roll = self.rollforward.melt(id_vars="segment", var_name="line", value_name="amount")
        roll = roll.assign(table="rollforward", **{"class": ""}, label=roll["line"].str.replace("_", " ").str.capitalize())
        parts.append(roll)
        if not self.write_offs.empty:
            bridge_long = self.write_offs.drop(columns="recoveries_treatment").melt(
                id_vars="segment", var_name="line", value_name="amount")
            parts.append(bridge_long.assign(table="write_off_bridge", **{"class": ""},
                                            label=bridge_long["line"].str.replace("_", " ").str.capitalize()))
        out = pd.concat(parts, ignore_index=True)
        out.insert(0, "framework", self.framework)
        return out[["framework", "table", "segment", "class", "line", "label", "amount"]]



def movement(
    prior: pd.DataFrame,
    current: pd.DataFrame,
    current_at_prior_assumptions: pd.DataFrame | None,
    charge_offs: pd.DataFrame | None,
    framework: Framework,
    *,
    sources: Mapping[str, str] | None = None,
    prior_as_of: date | None = None,
    current_as_of: date | None = None,
    method_changes: Mapping[str, Sequence[str]] | None = None,
) -> Movement:
    """The allowance movement of one framework, prior run to current run, loan by loan.

    Parameters
    ----------
    prior, current : DataFrame
        Loan results of the two runs (``loans.csv``): ``loan_id, segment, balance,
        ecl_<framework>`` and, where present, ``ecl_<framework>_modelled``, ``stage``
        (required for IFRS 9) and ``poci``.
    current_at_prior_assumptions : DataFrame or None
        The current tape rerun with the prior run's assumptions (``loan_id`` and
        ``ecl_<framework>_modelled``; ``current`` itself when the prior model is the current
        one's). None puts all of the change into remeasurement.
    charge_offs : DataFrame or None
        The period's charge-offs: ``loan_id, gross_charge_off`` and optionally
        ``recoveries`` and ``segment`` (several rows per loan are summed).
    framework : {"ifrs9", "cecl"}
        IFRS 9 tables are by stage (POCI its own column); CECL tables by segment.
    sources : mapping, optional
        File names for messages, keys ``prior``, ``current``, ``current_at_prior_assumptions``,
        ``charge_offs``.
    prior_as_of, current_as_of : date, optional
        The two reporting dates: a prior later than the current run is refused; with both,
        the unwind of the discount is isolated over the months between them.
    method_changes : mapping, optional
        Segment (``"*"``: every segment) -> what changed in its model or method
        (:func:`allowance.reconcile.method_changes`); their assumption effect goes to
        "changes in models or methods". None: not known.

    Returns
    -------
    Movement

    Raises
    ------
    MovementError
        A loan appears twice, a figure is blank, a column is missing, or (a bug) a table
        does not foot.

    Notes
    -----
    Per loan the lines add to C - P exactly (see the module docstring); tables are sums of
    those cents, and :func:`check_movement` proves each one foots before it is returned.
    The roll-forward is ASC 326-20-50-13's: beginning + provision - charge-offs +
    recoveries = ending, provision the balancing figure.

    References
    ----------
    .. [1] IFRS 7 Financial Instruments: Disclosures, paragraphs 35H and 35I.
    .. [2] FASB ASC 326-20-50-13 (allowance roll-forward by portfolio segment).

    Examples
    --------
    >>> prior = pd.DataFrame({"loan_id": ["a", "b"], "segment": "auto", "stage": [1, 1],
    ...                       "balance": [100.0, 50.0], "ecl_ifrs9": [1.0, 0.5]})
    >>> current = pd.DataFrame({"loan_id": ["a", "c"], "segment": "auto", "stage": [2, 1],
    ...                         "balance": [90.0, 70.0], "ecl_ifrs9": [4.0, 0.7]})
    >>> m = movement(prior, current, None, None, "ifrs9")
    >>> m.allowance.set_index("line")["total"].to_dict()  # doctest: +NORMALIZE_WHITESPACE
    {'opening': 1.5, 'new': 0.7, 'derecognised': -0.5, 'written_off': 0.0, 'transfer_to_stage_1': 0.0,
     'transfer_to_stage_2': 0.0, 'transfer_to_stage_3': 0.0, 'unwind': 0.0, 'remeasurement': 3.0,
     'modifications': 0.0, 'model_change': 0.0, 'assumptions': 0.0, 'overlays': 0.0, 'closing': 4.7}
    >>> m.allowance.set_index("line").loc["transfer_to_stage_2", ["stage 1", "stage 2"]].tolist()
    [-1.0, 1.0]
    """
    names = _sources(sources)
    if framework not in FRAMEWORKS:
        raise MovementError(f"unknown framework {framework!r}", hint=f"use one of {', '.join(FRAMEWORKS)}")
    months = _period_months(prior_as_of, current_as_of, names)
    book = Book(prior, current, current_at_prior_assumptions, charge_offs, names)
    return _movement(book, framework, months, method_changes)


def _sources(sources: Mapping[str, str] | None) -> dict[str, str]:
    names = {"prior": "prior run", "current": "current run",
             "current_at_prior_assumptions": "current tape at prior assumptions", "charge_offs": "charge-off file"}
    names.update(sources or {})
    return names


def _bridge(book: Book, framework: Framework, months: int | None,
            method_changes: Mapping[str, Sequence[str]] | None) -> Bridge:
    """The loan-by-loan bridge :func:`_movement` makes its tables from."""
    has_rates = book.prior.has(f"discount_rate_{framework}")
    made = bridge(book, framework, months=months if has_rates else None, method_changed=frozenset(method_changes or {}),
                  gross_up=LEDGER[framework].pcd_gross_up)
    give_back()  # the blocks' working arrays, before the tables make theirs
    return made


def _movement(book: Book, framework: Framework, months: int | None,
              method_changes: Mapping[str, Sequence[str]] | None, loans: Bridge | None = None) -> Movement:
    """:func:`movement` of one framework over runs already joined (shared by every framework);
    ``loans``: its bridge, when made already."""
    changed = frozenset(method_changes or {})
    has_rates = book.prior.has(f"discount_rate_{framework}")
    if loans is None:
        loans = _bridge(book, framework, months, method_changes)

    # the class dimension of the detail is the framework's class (IFRS 9: stage or POCI;
    # CECL: PCD or not); its main table is by class (IFRS 7 35H) or by segment (ASC 326-20-50-13)
    rules = rules_for(framework)
    detail_dims = ("segment", "class")
    classes = sorted(_present(loans.classes, loans.class_prior, loans.klass))
    by_class = rules.class_order is not None
    if by_class:
        classes = [k for k in rules.class_order if k in classes or k != rules.credit_impaired]
        main_dim, main_cols = "class", classes
    else:
        main_dim = "segment"
        main_cols = sorted(_present(loans.segments, loans.segment_prior, loans.segment), key=str)
    rerun, modified = book.rerun is not None, book.current.has("modified")
    # what the inputs could not isolate stays in remeasurement, and its label says so
    labels = {f"transfer_to_{_slug(k)}": k for k in classes} | {
        "remeasurement": remeasurement_label(rerun, has_rates and months is not None, modified)}

    main_lines = _transfer_lines(loans, (main_dim,), "class" if by_class else None)
    detail_lines = _transfer_lines(loans, detail_dims, "class")
    main_transfers = classes if by_class else []
    tables = {}
    gross_up = LEDGER[framework].pcd_gross_up
    for kind, body, prefix in (("allowance", _ALLOWANCE_BODY, ""), ("gross", _GROSS_BODY, "g_")):
        order = _line_order(main_transfers, body, not by_class, gross_up and kind == "allowance")
        wide = _wide(_ledger(loans, (main_dim,), body, prefix, main_lines), main_dim, main_cols, order, labels)
        check_movement(wide, what=f"{framework} {kind} movement")
        detail_order = _line_order(classes, body, True, gross_up and kind == "allowance")
        detail = _long(_ledger(loans, detail_dims, body, prefix, detail_lines), detail_order, labels, classes)
        _check_long(detail, detail_order, f"{framework} {kind} movement by segment and class")
        tables[kind] = (wide, detail)

    opening_total, closing_total = int(loans.amounts["opening"].sum()), int(loans.amounts["closing"].sum())
    allowance = tables["allowance"][0].set_index("line")["total"]
    if round(allowance["opening"] * 100) != opening_total or round(allowance["closing"] * 100) != closing_total:
        raise MovementError(f"{framework} movement: opening or closing differs from the runs' totals")
    roll = rollforward(loans, framework)
    notes = []
    if changed:
        notes.append("models or methods changed since the prior run: " + "; ".join(
            f"{'every segment' if k == '*' else 'segment ' + k}: {', '.join(v)}" for k, v in sorted(method_changes.items())))
    outside = ~loans.in_prior & ~loans.in_current
    if outside.any():
        where = ", ".join(sorted({str(loans.segments[i]) for i in np.unique(loans.segment_any[outside])}))
        notes.append(
            f"{int(outside.sum())} row(s) of the charge-off file (charge-offs "
            f"{int(loans.amounts['gross_charge_off'][outside].sum()) / 100:,.2f}, "
            f"recoveries {int(loans.amounts['recoveries'][outside].sum()) / 100:,.2f}) are for loans in neither run "
            f"(written off before the prior run, or opened and closed within the period); the roll-forward shows "
            f"them under {where}"
        )
    write_offs = write_off_bridge(loans, framework)
    return Movement(
        framework=framework,
        allowance=tables["allowance"][0],
        gross=tables["gross"][0],
        allowance_detail=tables["allowance"][1],
        gross_detail=tables["gross"][1],
        rollforward=roll,
        journal=journal(roll, framework, _presented(book, framework)),
        _loan_rows=_LoanRows.of(loans, book.narrowed),
        assumptions_isolated=book.rerun is not None,
        notes=tuple(notes),
        write_offs=write_offs,
        not_isolated=_not_isolated(framework, rerun, method_changes is not None, has_rates, months, modified),
    )


def remeasurement_label(rerun: bool, unwind: bool, modified: bool) -> str:
    """The remeasurement line's label, naming what the inputs could not take out of it.

    With a rerun of the current tape at the prior run's assumptions, the unwind of the
    discount and the ``modified`` flag, remeasurement is the change at prior assumptions
    (IFRS 7 35H-35I and ASC 326-20-50-13 ask for the changes by cause); each one missing
    leaves its amount in the line, and the label says so (the notes say why).

    >>> remeasurement_label(True, True, True)
    'Remeasurement at prior assumptions'
    >>> remeasurement_label(False, True, True)
    'Remeasurement (incl. assumption and model changes: not isolated)'
    >>> remeasurement_label(True, False, False)
    'Remeasurement at prior assumptions (incl. the discount unwind and modifications: not isolated)'
    """
    held = ([] if rerun else ["assumption and model changes"]) + ([] if unwind else ["the discount unwind"]) + \
        ([] if modified else ["modifications"])
    base = MOVEMENT_LINES["remeasurement"] if rerun else "Remeasurement"
    if not held:
        return base
    listed = held[0] if len(held) == 1 else ", ".join(held[:-1]) + " and " + held[-1]
    return f"{base} (incl. {listed}: not isolated)"


def _present(names: list[str], *codes: np.ndarray) -> set[str]:
    """The names any of the code arrays points to (-1: none)."""
    found = np.zeros(len(names) + 1, dtype=bool)
    for c in codes:
        found[np.where(c < 0, len(names), c)] = True
    return {names[i] for i in np.flatnonzero(found[:-1])}


def _presented(book: Book, framework: Framework) -> pd.Series:
    """Per segment, in integer cents: the change in ``provision_<framework>`` (the ECL presented
    apart from the loss allowance), closing less opening; a run without the column has none."""
    column = f"provision_{framework}"
    names, codes = book.segments

    def by_segment(run: RunLoans) -> pd.Series:
        sums = run.segment_sums(column, names, codes[id(run)])
        return pd.Series(dtype=np.int64) if sums is None else sums

    return by_segment(book.current).sub(by_segment(book.prior), fill_value=0).astype(np.int64)


def _period_months(prior_as_of: date | None, current_as_of: date | None, names: Mapping[str, str]) -> int | None:
    """Whole months from the prior reporting date to the current one; a later prior is refused."""
    if prior_as_of is None or current_as_of is None:
        return None
    if prior_as_of > current_as_of:
        raise MovementError(
            f"the prior run ({names['prior']}, as of {prior_as_of.isoformat()}) is later than the current run "
            f"({names['current']}, as of {current_as_of.isoformat()})",
            hint="give the earlier run first: allowance compare PRIOR CURRENT",
        )
    return (current_as_of.year - prior_as_of.year) * 12 + current_as_of.month - prior_as_of.month


def _not_isolated(framework: Framework, rerun: bool, methods_known: bool, has_rates: bool, months: int | None,
                  has_modified: bool) -> tuple[str, ...]:
    """The movement lines the inputs could not separate, each with the reason (they sit in remeasurement)."""
    out = []
    if not rerun:
        out.append("changes in assumptions or scenarios and in models or methods: the current tape was not rerun "
                   "at the prior run's assumptions (only the two runs' loan results were given), so they are in "
                   "remeasurement; 'allowance run --prior' isolates them")
    elif not methods_known:
        out.append("changes in models or methods: the prior run's assumptions were not compared, so any are in "
                   "changes in assumptions or scenarios")
    if not has_rates:
        out.append(f"unwind of the discount: the prior run's loans carry no discount_rate_{framework} column, so "
                   "it is in remeasurement")
    elif months is None:
        out.append("unwind of the discount: the two reporting dates were not given, so it is in remeasurement")
    if not has_modified:
        out.append("modifications: the current run's loans carry no modified flag, so they are in remeasurement")
    return tuple(out)


#: the loan table's money columns: the bridge's line -> the column's name
_LOAN_MONEY = {name: name for name in (
    "opening", "new", "pcd_gross_up", "derecognised", "written_off", "transfer", "unwind", "remeasurement",
    "modifications", "model_change", "assumptions", "overlays", "closing")} | {
    "g_opening": "balance_prior", "g_closing": "balance", "gross_charge_off": "gross_charge_off",
    "recoveries": "recoveries"}


#: the loan table's lines not kept but made again for each slice from the others (see the
#: module docstring): the transfer out of a continuing loan's prior cell is its opening
#: allowance less the allowance written off, and per loan the lines sum to closing less opening
_MADE_AGAIN = ("transfer", "closing")
_TO_CLOSING = ("opening", "new", "pcd_gross_up", "derecognised", "written_off", "unwind", "remeasurement",
               "modifications", "model_change", "assumptions", "overlays")


def _narrow(codes: np.ndarray) -> np.ndarray:
    """Codes (-1 and up) in the fewest bytes that hold them."""
    top = int(codes.max()) if len(codes) else 0
    for kind in (np.int8, np.int16):
        if top <= np.iinfo(kind).max:
            return codes.astype(kind)
    return codes


@dataclass(frozen=True)
class _LoanRows:
    """What the loan table is made of: ids (:class:`LoanIds`), status, segments and classes as
    codes into their names (-1: not in that run; each in the fewest bytes), every money
    column's cents as the bridge keeps them (:class:`Blocks`: the gross carrying amount's
    shared by every framework), but for the lines made again from the others for each slice
    (``transfer`` and ``closing``, of which only whether the whole line needs int64 is kept).
    The bridge's other arrays are let go once the tables are made."""

    loan_ids: LoanIds
    status: np.ndarray
    segment_prior: np.ndarray
    segment: np.ndarray
    class_prior: np.ndarray
    klass: np.ndarray
    segments: list[str]
    classes: list[str]
    cents: dict[str, Blocks]
    wide: dict[str, bool]  # the lines made again: whether each needs int64 (Blocks.wide)

    @classmethod
    def of(cls, bridge: Bridge, narrowed: dict[int, np.ndarray] | None = None) -> _LoanRows:
        """``narrowed``: id of a bridge's code array -> its narrowed copy, made once for every
        framework's bridge that shares the array (the segments); the array must stay alive
        while the dictionary is used (the caller's bridges keep it)."""
        narrowed = {} if narrowed is None else narrowed

        def narrow(codes: np.ndarray) -> np.ndarray:
            if id(codes) not in narrowed:
                narrowed[id(codes)] = _narrow(codes)
            return narrowed[id(codes)]

        return cls(loan_ids=bridge.loan_ids, status=bridge.status, segment_prior=narrow(bridge.segment_prior),
                   segment=narrow(bridge.segment), class_prior=_narrow(bridge.class_prior),
                   klass=_narrow(bridge.klass), segments=bridge.segments, classes=bridge.classes,
                   cents={line: bridge.lines[line] for line in _LOAN_MONEY if line not in _MADE_AGAIN},
                   wide={line: bridge.lines[line].wide for line in _MADE_AGAIN})

    def compact(self, line: str, start: int = 0, stop: int | None = None) -> np.ndarray:
        """A money line's cents of loans ``start:stop``, int32 where every amount of the whole
        line fits (else int64), as the bridge made it."""
        kept = self.cents.get(line)
        if kept is not None:
            return kept.compact(start, stop)
        if line == "transfer":
            values = self.cents["opening"].dense(start, stop) + self.cents["written_off"].dense(start, stop)
            values[self.status[start:stop] != 0] = 0  # continuing loans only (STATUSES)
        else:
            values = self.cents["opening"].dense(start, stop)
            for part in _TO_CLOSING[1:]:
                values += self.cents[part].dense(start, stop)
        return values if self.wide[line] else values.astype(np.int32)


@dataclass(frozen=True)
class LoanColumns:
    """Rows of a movement's loan table as it is kept: each text column as Arrow text labels and
    a code per row into them (-1: blank), each money column in whole cents, in the table's
    column order (text first). What :attr:`Movement.loans` shows, without a label or a float
    per loan; a writer formats it directly (:mod:`allowance.report.csv_lines`)."""

    text: dict[str, tuple[pa.Array, np.ndarray]]
    cents: dict[str, np.ndarray]

    def __len__(self) -> int:
        return len(next(iter(self.cents.values())))


def _loan_columns(rows: _LoanRows, start: int = 0, stop: int | None = None) -> LoanColumns:
    cut = slice(start, stop)
    ids = rows.loan_ids[cut]
    text = {"loan_id": (ids, np.arange(len(ids), dtype=np.int64))}
    for name, labels, codes in (("status", STATUSES, rows.status), ("segment_prior", rows.segments, rows.segment_prior),
                                ("segment", rows.segments, rows.segment), ("class_prior", rows.classes, rows.class_prior),
                                ("class", rows.classes, rows.klass)):
        # a segment or class code read as 4 bytes (status as its one byte), whatever it is kept in
        text[name] = (pa.array(labels, pa.large_string()), codes[cut] if name == "status" else codes[cut].astype(np.int32))
    # each money column in cents, int32 where every amount of the whole column fits (else int64)
    return LoanColumns(text=text, cents={name: rows.compact(line, start, stop) for line, name in _LOAN_MONEY.items()})


def _loan_table(rows: _LoanRows | None, start: int = 0, stop: int | None = None) -> pd.DataFrame:
    """Per loan: status, prior and current segment and class, every line's amount. The text is
    Arrow's, one label per code taken in one call: no Python string per loan."""
    names = ["loan_id", "status", "segment_prior", "segment", "class_prior", "class", *_LOAN_MONEY.values()]
    if rows is None:
        return pd.DataFrame(columns=names)
    columns = _loan_columns(rows, start, stop)
    out = {}
    for name, (labels, codes) in columns.text.items():
        picked = labels if name == "loan_id" else labels.take(pa.array(codes, mask=codes < 0))
        out[name] = pd.array(picked, dtype="str")
    for name, cents in columns.cents.items():
        out[name] = cents / 100.0
    return pd.DataFrame(out)


def compare_runs(
    prior_loans: pd.DataFrame,
    current_loans: pd.DataFrame,
    *,
    charge_offs: pd.DataFrame | None = None,
    current_at_prior_assumptions: pd.DataFrame | None = None,
    frameworks: list[Framework] | None = None,
    sources: Mapping[str, str] | None = None,
    prior_as_of: date | None = None,
    current_as_of: date | None = None,
    method_changes: Mapping[str, Sequence[str]] | None = None,
) -> dict[Framework, Movement]:
    """The movement of every framework both runs carry (``allowance compare PRIOR CURRENT``).

    ``frameworks`` defaults to those with an ``ecl_<framework>`` column in both runs; a
    framework asked for but absent from a run is a :class:`MovementError`.

    Examples
    --------
    >>> prior = pd.DataFrame({"loan_id": ["a"], "segment": "card", "balance": [10.0], "ecl_cecl": [1.0]})
    >>> current = prior.assign(ecl_cecl=[1.25])
    >>> compare_runs(prior, current)["cecl"].rollforward.iloc[-1].to_dict()  # doctest: +NORMALIZE_WHITESPACE
    {'segment': 'Total', 'beginning': 1.0, 'initial_allowance_pcd': 0.0, 'provision': 0.25, 'charge_offs': 0.0,
     'recoveries': 0.0, 'ending': 1.25}
    """
    if frameworks is None:
        frameworks = [f for f in FRAMEWORKS if f"ecl_{f}" in prior_loans.columns and f"ecl_{f}" in current_loans.columns]
        if not frameworks:
            raise MovementError("the two runs share no framework (no ecl_ifrs9 or ecl_cecl column in both)",
                                hint="compare two runs of the same frameworks")
    for f in frameworks:
        if f not in FRAMEWORKS:
            raise MovementError(f"unknown framework {f!r}", hint=f"use one of {', '.join(FRAMEWORKS)}")
    names = _sources(sources)
    months = _period_months(prior_as_of, current_as_of, names)
    # the runs joined once: ids, segments, balances and flags converted once for every framework
    book = Book(prior_loans, current_loans, current_at_prior_assumptions, charge_offs, names)
    if len(frameworks) < 2:
        return {f: _movement(book, f, months, method_changes) for f in frameworks}
    # the first framework's bridge joins the runs and checks them (its errors come first, as
    # one framework after the other gave them); then the others are made on a second thread
    # while its tables are made here: numpy lets go of the lock for each block's arithmetic,
    # and this step otherwise left the second core idle. Each framework's figures are its own
    # (the book's shared parts are made before the second thread starts and only read after).
    first = frameworks[0]
    loans = _bridge(book, first, months, method_changes)
    with ThreadPoolExecutor(1, thread_name_prefix="allowance-movement") as pool:
        others = [pool.submit(given_back, _movement, book, f, months, method_changes) for f in frameworks[1:]]
        out = {first: _movement(book, first, months, method_changes, loans)}
        del loans
        give_back()  # what making this framework's tables freed
    for f, made in zip(frameworks[1:], others):
        out[f] = made.result()  # a later framework's error, once the first one went through
    return out
