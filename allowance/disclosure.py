"""The disclosure tables: credit quality by stage (IFRS 7 35M) and by vintage (ASC 326-20-50-6).

Implements
----------
credit_quality    each loan's credit quality indicator: its grade, else a days-past-due band
ifrs7_35m         gross carrying amount by credit grade and stage (stage 1/2/3, POCI)
asc326_vintage    amortised cost by credit quality indicator and year of origination, with the
                  period's gross write-offs by year of origination (ASU 2022-02)
disclosure_tables the tables a run's frameworks ask for, by name (``ifrs7_35m``, ``asc326_vintage``)
disclosure_cents  the same tables' cells in whole cents, before their totals (a part of a book's)
add_cents         the cells of several parts of a book added up
tables_from_cents the tables from their cells
sorted_categorical codes over labels as a categorical sorted by the labels' text (grouping, here and in the totals)

Both are sums of the rounded loan figures in whole cents, so each foots to the run's total
balance. Each is made in two steps: its cells (cents by label, :func:`disclosure_cents`),
then its totals and layout (:func:`tables_from_cents`); the cells of the parts of a book
computed part by part add up to the whole book's (:func:`add_cents`), so its tables are
those of the book read at once. The gross carrying amount and the amortised cost are the tape's outstanding
principal (``balance``); deferred fees, premiums and accrued interest are not on the tape.
Where a segment carries no grade, the credit quality indicator is delinquency (IFRS 7 B8I
allows a past-due analysis where that is the only borrower-specific information; ASC
326-20-55-79 lists delinquency status among the indicators).

References
----------
.. [1] IFRS 7 Financial Instruments: Disclosures, paragraphs 35M, 35N and B8I.
.. [2] FASB ASC 326-20-50-6 (amortised cost by credit quality indicator and year of
   origination, five annual periods and prior; revolving loans apart) and ASU 2022-02
   (current-period gross write-offs by year of origination).
"""

from __future__ import annotations

from datetime import date

import numpy as np
import pandas as pd

from allowance.frameworks import rules_for
from allowance.money import cents_by_group
from allowance.staging import STAGE_CLASSES, stage_class_codes

__all__ = ["DPD_BANDS", "add_cents", "asc326_vintage", "credit_quality", "disclosure_cents", "disclosure_tables",
           "ifrs7_35m", "sorted_categorical", "tables_from_cents"]

#: Days-past-due bands used as the credit quality indicator where there is no grade.
DPD_BANDS: tuple[tuple[int, str], ...] = (
    (0, "current"), (1, "1-29 days past due"), (30, "30-59 days past due"), (60, "60-89 days past due"),
    (90, "90 or more days past due"),
)


#: a column as integer codes (-1: none) and the labels they index: a million loans carry a
#: handful of segments, grades and classes, so every table here groups codes, never text per loan
Coded = tuple[np.ndarray, np.ndarray]


def _coded(values) -> Coded:
    """Integer codes and labels of a column, factorised once (fast on Arrow strings)."""
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    return np.asarray(codes, dtype=np.int64), np.array([str(u) for u in uniques], dtype=object)


def _sorted_codes(codes, labels) -> tuple[np.ndarray, list[str]]:
    """:func:`sorted_categorical` as plain arrays: codes into the sorted distinct labels (-1: none)."""
    names = np.array([str(v) for v in list(labels)], dtype=object)
    codes = np.asarray(codes, dtype=np.int64)
    if not len(names):
        return np.full(len(codes), -1, dtype=np.int64), []
    distinct, where = np.unique(names.astype(str), return_inverse=True)
    if len(codes) and codes.min() < -1:
        codes = np.maximum(codes, -1)
    # one look-up per loan: code -1 (none) takes the appended last entry, -1
    return np.append(where.reshape(-1), -1)[codes], distinct.tolist()


def sorted_categorical(codes, labels) -> pd.Categorical:
    """Codes over ``labels`` as a categorical whose categories are the distinct labels as text,
    sorted: a group-by on it orders as one on the text would (two codes may name one label);
    code -1 stays missing.

    Examples
    --------
    >>> sorted_categorical(np.array([0, 1, -1, 2]), ["b", "a", "b"]).tolist()
    ['b', 'a', nan, 'b']
    """
    mapped, distinct = _sorted_codes(codes, labels)
    return pd.Categorical.from_codes(mapped, categories=pd.Index(distinct, dtype=object))


def _constant(label: str, n: int) -> Coded:
    return np.zeros(n, dtype=np.int64), np.array([label], dtype=object)


def _quality(loans: pd.DataFrame) -> tuple[Coded, Coded]:
    """Each loan's credit quality indicator and its basis, coded (see :func:`credit_quality`)."""
    n = len(loans)
    grade = loans["grade"] if "grade" in loans.columns else pd.Series(None, index=loans.index, dtype=object)
    codes, texts = _coded(grade)
    graded = np.array([t.strip() != "" for t in texts] + [False], dtype=bool)[codes]  # -1 (blank): the last
    dpd = pd.to_numeric(loans.get("days_past_due", pd.Series(0, index=loans.index)), errors="coerce").fillna(0)
    edges = np.array([b for b, _ in DPD_BANDS])
    band = np.searchsorted(edges, dpd.to_numpy(), side="right") - 1 if n else np.zeros(0, np.int64)
    labels = np.array([*texts, *(name for _, name in DPD_BANDS)], dtype=object)
    quality = np.where(graded, codes, len(texts) + band).astype(np.int64)
    basis = np.where(graded, 0, 1).astype(np.int64)
    return (quality, labels), (basis, np.array(["grade", "days past due"], dtype=object))


def credit_quality(loans: pd.DataFrame) -> pd.DataFrame:
    """Each loan's indicator and its basis: ``grade`` where given, else a days-past-due band.

    Examples
    --------
    >>> credit_quality(pd.DataFrame({"grade": ["B", "", None], "days_past_due": [0, 45, 0]})).values.tolist()
    [['B', 'grade'], ['30-59 days past due', 'days past due'], ['current', 'days past due']]
    """
    (quality, q_labels), (basis, b_labels) = _quality(loans)
    return pd.DataFrame({"credit_quality": q_labels[quality], "basis": b_labels[basis]}, index=loans.index)


def _cents(values) -> np.ndarray:
    return np.rint(np.asarray(values, dtype=np.float64) * 100.0).astype(np.int64)


def _concat(parts: list[Coded]) -> Coded:
    """Coded columns of several frames, one after the other (labels joined, codes shifted)."""
    if len(parts) == 1:  # one frame (no write-offs): its codes as they are, not copied twice
        c, lab = parts[0]
        c = np.asarray(c, dtype=np.int64)
        return (c if not len(c) or c.min() >= -1 else np.maximum(c, -1)), np.asarray(lab)
    codes, labels, offset = [], [], 0
    for c, lab in parts:
        codes.append(np.where(c >= 0, c + offset, -1))
        labels.append(lab)
        offset += len(lab)
    return np.concatenate(codes), np.concatenate(labels)


def _sum_cents(keys: dict[str, Coded], across: Coded, columns: list[str], cents: np.ndarray) -> pd.DataFrame:
    """Cents summed by the ``keys`` (one row per combination present, in sorted order) and by
    ``across`` (the ``columns``, in that order, 0 where none): the table of
    ``pivot_table(aggfunc="sum")`` over the labels, grouped on integer codes.

    A loan whose key or ``across`` label is missing (or not among ``columns``) is left out, as
    a group-by leaves out missing keys. The combinations are one integer each (mixed radix
    over the sorted labels), summed exactly (:func:`allowance.money.cents_by_group`)."""
    coded = [_sorted_codes(codes, labels) for codes, labels in keys.values()]
    a_codes, a_labels = across
    place = np.array([columns.index(x) if x in columns else -1 for x in a_labels.tolist()] + [-1], dtype=np.int64)
    column = place[np.asarray(a_codes, dtype=np.int64)]
    kept = column >= 0
    for codes, _ in coded:
        kept &= codes >= 0
    every = bool(kept.all())  # no loan left out (the usual book): the arrays as they are, not masked

    def of(values):
        return values if every else values[kept]

    dims = [max(len(names), 1) for _, names in coded]
    combo = np.ravel_multi_index([of(codes) for codes, _ in coded], dims) if coded else np.zeros(kept.sum(), np.int64)
    space = int(np.prod(dims, dtype=np.int64))
    if space <= 1 << 22:  # the combinations present counted over every possible one: no sort of the loans
        present = np.flatnonzero(np.bincount(combo, minlength=space))
        where = np.zeros(space, dtype=np.int64)
        where[present] = np.arange(len(present))
        row = where[combo]
    else:
        present, row = np.unique(combo, return_inverse=True)
    cell = row.reshape(-1) * len(columns) + of(column)
    grid = np.array(cents_by_group(of(np.asarray(cents, dtype=np.int64)), cell, len(present) * len(columns)),
                    dtype=np.int64)
    levels = np.unravel_index(present, dims) if coded else []
    index = pd.MultiIndex.from_arrays(
        [pd.Index([names[i] for i in level.tolist()]) for level, (_, names) in zip(levels, coded)], names=list(keys))
    return pd.DataFrame(grid.reshape(len(present), len(columns)), index=index, columns=pd.Index(list(columns)))


def _classes(loans: pd.DataFrame) -> Coded:
    if "stage_class" in loans.columns:
        return _coded(loans["stage_class"])
    poci = loans["poci"].astype(bool).to_numpy() if "poci" in loans.columns else np.zeros(len(loans), bool)
    return stage_class_codes(loans["stage"].to_numpy(), poci), np.array(STAGE_CLASSES, dtype=object)


def _loan_codes(loans: pd.DataFrame) -> tuple[Coded, tuple[Coded, Coded]]:
    """The loans' segment codes and their credit quality and basis codes (:func:`_quality`):
    made once by :func:`disclosure_tables` for both its tables."""
    return _coded(loans["segment"]), _quality(loans)


def ifrs7_35m(loans: pd.DataFrame, *, coded: tuple[Coded, tuple[Coded, Coded]] | None = None) -> pd.DataFrame:
    """IFRS 7 35M: gross carrying amount by segment, credit grade and stage (POCI apart).

    Columns ``segment, credit_quality, basis, stage 1, stage 2, stage 3, POCI, total``;
    a ``Total`` row per segment and one for the book. ``coded``: the loans' segment, credit
    quality and basis codes when already made (:func:`disclosure_tables`, once for both tables).

    Examples
    --------
    >>> loans = pd.DataFrame({"segment": "auto", "grade": ["A", "A", "B"], "days_past_due": 0,
    ...                       "stage": [1, 2, 3], "poci": [False, False, True], "balance": [100.0, 50.0, 20.0]})
    >>> ifrs7_35m(loans)[["segment", "credit_quality", "stage 1", "stage 2", "POCI", "total"]].values.tolist()
    [['auto', 'A', 100.0, 50.0, 0.0, 150.0], ['auto', 'B', 0.0, 0.0, 20.0, 20.0], ['auto', 'Total', 100.0, 50.0, 20.0, 170.0], ['Total', '', 100.0, 50.0, 20.0, 170.0]]
    """
    return _ifrs7_35m_table(_ifrs7_35m_cells(loans, coded=coded))


def _ifrs7_35m_cells(loans: pd.DataFrame, *, coded: tuple[Coded, tuple[Coded, Coded]] | None = None) -> pd.DataFrame:
    """IFRS 7 35M's cells: the gross carrying amount in whole cents by segment, credit quality
    and basis (the index, sorted) and class (the columns, :data:`STAGE_CLASSES`)."""
    segment, (quality, basis) = coded or _loan_codes(loans)
    return _sum_cents({"segment": segment, "credit_quality": quality, "basis": basis},
                      _classes(loans), list(STAGE_CLASSES), _cents(loans["balance"]))


def _ifrs7_35m_table(grid: pd.DataFrame) -> pd.DataFrame:
    """:func:`ifrs7_35m` from its cells: a total per segment and for the book, money in units."""
    grid = grid.copy()
    grid["total"] = grid.sum(axis=1)
    parts = []
    for segment, block in grid.groupby(level="segment", sort=True):
        block = block.reset_index()
        total = block[list(STAGE_CLASSES) + ["total"]].sum()
        parts += [block, pd.DataFrame([{"segment": segment, "credit_quality": "Total", "basis": "", **total}])]
    out = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(
        columns=["segment", "credit_quality", "basis", *STAGE_CLASSES, "total"])
    book = out.loc[out["credit_quality"] == "Total", list(STAGE_CLASSES) + ["total"]].sum()
    out = pd.concat([out, pd.DataFrame([{"segment": "Total", "credit_quality": "", "basis": "", **book}])],
                    ignore_index=True)
    money = list(STAGE_CLASSES) + ["total"]
    out[money] = out[money].astype(np.int64) / 100.0
    return out[["segment", "credit_quality", "basis", *money]]


def _vintage_columns(as_of: date) -> list[str]:
    return [str(as_of.year - k) for k in range(5)] + ["prior", "revolving"]


def _revolving(frame: pd.DataFrame) -> np.ndarray:
    """Revolving lines (a write-off whose loan is in neither run has no repayment type: not one)."""
    repayment = frame["repayment"] if "repayment" in frame.columns else pd.Series("", index=frame.index)
    return repayment.eq("revolving").fillna(False).to_numpy(dtype=bool)


def _vintage(origination: pd.Series, revolving: np.ndarray, as_of: date) -> Coded:
    # parsed once per distinct date (a few thousand), in the order of first appearance, so the
    # format inferred from the first date is the one a parse of the whole column infers
    codes, distinct_dates = pd.factorize(origination, use_na_sentinel=True)
    parsed = pd.to_datetime(pd.Series(distinct_dates), errors="coerce").dt.year.to_numpy(dtype=np.float64)
    years = np.nan_to_num(parsed, nan=-1.0).astype(np.int64)  # of each distinct date; -1: unknown
    if (codes < 0).any():
        years = np.append(years, -1)  # the blanks' year, last: their code -1 takes it
    # one label per distinct year (a few dozen), not a text per loan; the years of the dates
    # present are the years of the loans
    distinct, where = np.unique(years, return_inverse=True)
    names = np.array(["unknown" if y < 0 else str(y) if y >= as_of.year - 4 else "prior" for y in distinct.tolist()]
                     + ["revolving"], dtype=object)
    return np.where(revolving, len(names) - 1, where.reshape(-1)[codes]).astype(np.int64), names


def asc326_vintage(loans: pd.DataFrame, as_of: date, write_offs: pd.DataFrame | None = None, *,
                   coded: tuple[Coded, tuple[Coded, Coded]] | None = None) -> pd.DataFrame:
    """ASC 326-20-50-6: amortised cost by credit quality indicator and year of origination.

    Parameters
    ----------
    loans : DataFrame
        ``segment, balance, origination_date, repayment`` and ``grade`` / ``days_past_due``.
    as_of : date
        The reporting date: the columns are its year and the four before it (originations of
        the current year to date), ``prior``, and ``revolving`` (revolving lines apart,
        whatever their origination).
    write_offs : DataFrame, optional
        The period's gross write-offs: ``segment, gross_charge_off, origination_date`` and
        ``repayment`` (from the run the charged-off loan was last in); a write-off whose loan
        is in neither run is under ``unknown``.
    coded : optional
        The loans' segment, credit quality and basis codes when already made
        (:func:`disclosure_tables` makes them once for both tables).

    Returns
    -------
    DataFrame
        ``segment, row`` (``amortised cost`` or ``gross write-offs``), ``credit_quality, basis``,
        one column per vintage, ``total``.

    Examples
    --------
    >>> loans = pd.DataFrame({"segment": "auto", "grade": ["A", "B", "A"], "balance": [100.0, 50.0, 30.0],
    ...                       "origination_date": ["2026-02-01", "2019-05-01", "2023-07-01"],
    ...                       "repayment": "level"})
    >>> table = asc326_vintage(loans, date(2026, 9, 30))
    >>> table[["credit_quality", "2026", "2023", "prior", "total"]].values.tolist()
    [['A', 100.0, 30.0, 0.0, 130.0], ['B', 0.0, 0.0, 50.0, 50.0]]
    """
    return _vintage_table(_vintage_cells(loans, as_of, write_offs, coded=coded))


def _vintage_cells(loans: pd.DataFrame, as_of: date, write_offs: pd.DataFrame | None = None, *,
                   coded: tuple[Coded, tuple[Coded, Coded]] | None = None) -> pd.DataFrame:
    """ASC 326-20-50-6's cells: amortised cost (and gross write-offs) in whole cents by segment,
    row, credit quality and basis (the index, sorted) and vintage (the columns, ``unknown``
    last when a loan's year is not known)."""
    columns = _vintage_columns(as_of)
    segment, (quality, basis) = coded or _loan_codes(loans)
    n = len(loans)
    keys = {"segment": [segment], "row": [_constant("amortised cost", n)],
            "credit_quality": [quality], "basis": [basis]}
    vintage, cents = [_vintage(loans["origination_date"], _revolving(loans), as_of)], [_cents(loans["balance"])]
    if write_offs is not None and len(write_offs):
        m = len(write_offs)
        keys["segment"].append(_coded(write_offs["segment"]))
        keys["row"].append(_constant("gross write-offs", m))
        keys["credit_quality"].append(_constant("", m))
        keys["basis"].append(_constant("", m))
        vintage.append(_vintage(write_offs["origination_date"], _revolving(write_offs), as_of))
        cents.append(_cents(write_offs["gross_charge_off"]))
    vintage = _concat(vintage)
    if (vintage[1][np.unique(vintage[0])] == "unknown").any():
        columns = columns + ["unknown"]
    return _sum_cents({k: _concat(v) for k, v in keys.items()}, vintage, columns, np.concatenate(cents))


def _vintage_table(grid: pd.DataFrame) -> pd.DataFrame:
    """:func:`asc326_vintage` from its cells: a total per row, money in units."""
    columns = list(grid.columns)
    grid = grid.copy()
    grid["total"] = grid.sum(axis=1)
    out = grid.reset_index()
    out.columns.name = None
    money = [*columns, "total"]
    out[money] = out[money].astype(np.int64) / 100.0
    return out[["segment", "row", "credit_quality", "basis", *money]]


def disclosure_tables(loans: pd.DataFrame, as_of: date, frameworks, *, charge_offs: pd.DataFrame | None = None,
                      prior_loans: pd.DataFrame | None = None) -> dict[str, pd.DataFrame]:
    """The disclosure tables of a run: IFRS 7 35M where a framework stages loans, ASC 326-20-50-6
    where one measures lifetime losses without stages.

    Parameters
    ----------
    loans : DataFrame
        The run's loan results (``loans.csv``: ``segment, grade, days_past_due,
        origination_date, repayment, stage, poci, balance``).
    as_of : date
        The reporting date.
    frameworks : sequence of str
        The run's frameworks.
    charge_offs, prior_loans : DataFrame, optional
        The period's charge-offs (``loan_id, segment, gross_charge_off``) and the prior run's
        loans, whose ``origination_date`` and ``repayment`` place each write-off in its
        vintage (a loan in neither run is under ``unknown``).

    Examples
    --------
    >>> loans = pd.DataFrame({"segment": "auto", "grade": ["A", "B"], "days_past_due": 0, "stage": [1, 2],
    ...                       "poci": False, "balance": [100.0, 50.0], "repayment": "level",
    ...                       "origination_date": ["2026-02-01", "2024-05-01"]})
    >>> sorted(disclosure_tables(loans, date(2026, 9, 30), ["ifrs9", "cecl"]))
    ['asc326_vintage', 'ifrs7_35m']
    """
    return tables_from_cents(disclosure_cents(loans, as_of, frameworks, charge_offs=charge_offs,
                                              prior_loans=prior_loans))


def disclosure_cents(loans: pd.DataFrame, as_of: date, frameworks, *, charge_offs: pd.DataFrame | None = None,
                     prior_loans: pd.DataFrame | None = None) -> dict[str, pd.DataFrame]:
    """The cells of :func:`disclosure_tables` (same arguments): each table's whole cents by its
    labels (a sorted index) and its columns, before any total. Added over the parts of a book
    (:func:`add_cents`) they are the whole book's cells, exactly."""
    rules = [rules_for(f) for f in frameworks]
    out: dict[str, pd.DataFrame] = {}
    both = (any(r.staged for r in rules) and "stage" in loans.columns
            and any(not r.staged for r in rules) and "origination_date" in loans.columns)
    coded = _loan_codes(loans) if both else None  # the segments and grades coded once for both tables
    if any(r.staged for r in rules) and "stage" in loans.columns:
        out["ifrs7_35m"] = _ifrs7_35m_cells(loans, coded=coded)
    if any(not r.staged for r in rules) and "origination_date" in loans.columns:
        write_offs = None
        if charge_offs is not None and len(charge_offs):
            write_offs = charge_offs[["loan_id", "segment", "gross_charge_off"]].copy()
            known = [x for x in (prior_loans, loans) if x is not None and "origination_date" in x.columns]
            if known:
                where = pd.concat([x[["loan_id", "origination_date", "repayment"]] for x in known], ignore_index=True)
                where = where.drop_duplicates("loan_id", keep="first").astype({"loan_id": str})
                write_offs = write_offs.astype({"loan_id": str}).merge(where, on="loan_id", how="left")
            else:
                write_offs["origination_date"], write_offs["repayment"] = pd.NaT, ""
        out["asc326_vintage"] = _vintage_cells(loans, as_of, write_offs, coded=coded)
    return out


def add_cents(parts: list[dict[str, pd.DataFrame]]) -> dict[str, pd.DataFrame]:
    """The cells of several parts of a book (:func:`disclosure_cents`) added up, table by table:
    the labels of every part (sorted, as one part's are), each column in its place (a column
    only some parts have, ``unknown``, last and 0 elsewhere), exact in whole cents.

    Examples
    --------
    >>> a = disclosure_cents(pd.DataFrame({"segment": "auto", "grade": ["A"], "stage": [1], "poci": False,
    ...                                    "balance": [100.0]}), date(2026, 9, 30), ["ifrs9"])
    >>> b = disclosure_cents(pd.DataFrame({"segment": "auto", "grade": ["A", "B"], "stage": [2, 1], "poci": False,
    ...                                    "balance": [50.0, 20.0]}), date(2026, 9, 30), ["ifrs9"])
    >>> add_cents([a, b])["ifrs7_35m"].reset_index().values.tolist()
    [['auto', 'A', 'grade', 10000, 5000, 0, 0], ['auto', 'B', 'grade', 2000, 0, 0, 0]]
    """
    out: dict[str, pd.DataFrame] = {}
    for name in dict.fromkeys(n for part in parts for n in part):
        grids = [part[name] for part in parts if name in part]
        columns = list(dict.fromkeys(c for g in grids for c in g.columns))
        columns = [c for c in columns if c != "unknown"] + (["unknown"] if "unknown" in columns else [])
        grids = [g.reindex(columns=columns, fill_value=0) for g in grids]
        levels = list(grids[0].index.names)
        summed = pd.concat(grids).groupby(level=levels, sort=True).sum() if any(len(g) for g in grids) else grids[0]
        out[name] = summed.astype(np.int64)
    return out


def tables_from_cents(cells: dict[str, pd.DataFrame]) -> dict[str, pd.DataFrame]:
    """The disclosure tables from their cells (:func:`disclosure_cents`, :func:`add_cents`)."""
    finish = {"ifrs7_35m": _ifrs7_35m_table, "asc326_vintage": _vintage_table}
    return {name: finish[name](grid) for name, grid in cells.items()}
