"""The workbook's loan figures (counts and money sums over segment, stage, POCI and
measurement) taken from sums by group on integer codes, against the pandas group-by they
replace and against loan-by-loan matching.

External check: pandas ``DataFrame.groupby(...).sum()`` / ``.size()`` over the same loans
(``dropna=True``: a loan with a missing label is in no group, as a criterion matches no
missing label), amounts added in whole cents.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from allowance.report import figures
from allowance.report.figures import LoanRefs


def _book(text_dtype: str) -> pd.DataFrame:
    rng = np.random.default_rng(7)
    n = 400
    segments = np.array(["auto", "card", "", "<5", "Auto", None], dtype=object)
    measurements = np.array(["model", "individual", None], dtype=object)
    stage = rng.integers(1, 4, n).astype(float)
    stage[rng.random(n) < 0.05] = np.nan  # a loan with no stage
    return pd.DataFrame({
        "loan_id": [f"L{i}" for i in range(n)],
        "segment": pd.array(segments[rng.integers(0, len(segments), n)], dtype=text_dtype),
        "stage": stage,
        "poci": rng.random(n) < 0.1,
        "measurement": pd.array(measurements[rng.integers(0, len(measurements), n)], dtype=text_dtype),
        "balance": np.round(rng.uniform(-50, 5e5, n), 2),
        "ecl_ifrs9": np.where(rng.random(n) < 0.05, np.nan, np.round(rng.uniform(0, 1e4, n), 2)),
    })


def _grouped(loans: pd.DataFrame, keys: list[str]) -> tuple[pd.Series, pd.DataFrame]:
    cents = loans[["balance", "ecl_ifrs9"]].fillna(0.0).mul(100.0).round().astype("int64")
    frame = pd.concat([loans[keys].astype(object), cents], axis=1)
    groups = frame.groupby(keys, dropna=True)
    return groups.size(), groups[["balance", "ecl_ifrs9"]].sum()


@pytest.mark.parametrize("text_dtype", ["str", "object"])
def test_figures_by_group_match_a_pandas_group_by(text_dtype):
    loans = _book(text_dtype)
    refs = LoanRefs(loans, live=False)
    keys = ["segment", "stage", "poci"]
    size, sums = _grouped(loans, keys)
    # every combination asked, including labels no loan has ('zzz', stage 9)
    for segment, stage, poci in itertools.product(["auto", "card", "", "<5", "Auto", "zzz"], [1, 2, 3, 9],
                                                  [False, True]):
        crit = [("segment", "", segment), ("stage", "", stage), ("poci", "", poci)]
        at = (segment, float(stage), poci)
        assert refs.count(crit).value == (size.get(at, 0))
        for column in ("balance", "ecl_ifrs9"):
            expected = int(sums[column].get(at, 0)) / 100.0
            assert refs.total(column, crit).value == expected, (crit, column)
    # one label at a time, and none: the whole book, missing labels included
    size, sums = _grouped(loans, ["measurement"])
    for code in ("model", "individual", "collateral_dependent"):
        assert refs.count([("measurement", "", code)]).value == size.get(code, 0)
        assert refs.total("balance", [("measurement", "", code)]).value == int(sums["balance"].get(code, 0)) / 100.0
    assert refs.count().value == len(loans)
    whole = int(loans["ecl_ifrs9"].fillna(0.0).mul(100.0).round().astype("int64").sum()) / 100.0
    assert refs.total("ecl_ifrs9").value == whole


def test_figures_by_group_equal_those_matched_loan_by_loan(monkeypatch):
    loans = _book("str")
    grouped = LoanRefs(loans, live=False)
    monkeypatch.setattr(figures, "_MAX_GROUPS", 0)  # too many combinations: every figure matched loan by loan
    matched = LoanRefs(loans, live=False)
    assert matched._grouping() is None
    for segment, stage in itertools.product(["auto", "", "Auto", "zzz"], [1, 2, 9]):
        for crit in ([("segment", "", segment)], [("segment", "", segment), ("stage", "", stage)],
                     [("stage", "", stage), ("poci", "", True)], []):
            assert grouped.count(crit).value == matched.count(crit).value
            assert grouped.total("ecl_ifrs9", crit).value == matched.total("ecl_ifrs9", crit).value


def test_a_criterion_on_another_column_is_matched_loan_by_loan():
    loans = _book("str")
    refs = LoanRefs(loans, live=False)
    crit = [("loan_id", "", "L3"), ("segment", "", loans.loc[3, "segment"])]
    expected = 0.0 if pd.isna(loans.loc[3, "ecl_ifrs9"]) else loans.loc[3, "ecl_ifrs9"]
    assert refs.total("ecl_ifrs9", crit).value == (expected if pd.notna(loans.loc[3, "segment"]) else 0.0)


@pytest.mark.parametrize("text_dtype", ["str", "object"])
def test_labels_are_those_pandas_finds(text_dtype):
    """Source: pandas ``Series.dropna().unique()`` and ``Series.isna().any()``."""
    loans = _book(text_dtype)
    refs = LoanRefs(loans, live=False)
    for column in ("segment", "measurement", "loan_id"):
        labels, missing = refs.labels(column)
        assert labels == list(loans[column].dropna().unique())
        assert missing == bool(loans[column].isna().any())
    assert LoanRefs(loans.iloc[:0], live=False).labels("segment") == ([], False)


@settings(max_examples=25, deadline=None, derandomize=True)
@given(cuts=st.lists(st.integers(0, 400), max_size=6), text_dtype=st.sampled_from(["str", "object"]))
def test_a_book_summed_part_by_part_gives_the_figures_of_its_loans(cuts, text_dtype):
    """The loans cut into parts anywhere, each part summed by group as a part of a book
    computed part by part sends it back (:func:`allowance.partitioned.loan_sums`), the parts
    added up (``_book_frame``) and read with their loan counts: every count and money figure
    is the one the loans give, over any criteria (reference: the loans themselves, through
    the same figures and through a pandas group-by in the tests above)."""
    from allowance.partitioned import COUNT, _book_frame, loan_sums

    loans = _book(text_dtype)
    edges = [0, *sorted(cuts), len(loans)]
    parts = [loans.iloc[a:b] for a, b in zip(edges, edges[1:])]
    sums = _book_frame([loan_sums(p) for p in parts])
    assert int(sums[COUNT].sum()) == len(loans)
    by_loan, by_sum = LoanRefs(loans, live=True), LoanRefs(sums, live=True, count=COUNT)
    assert not by_sum.live  # rows that stand for many loans are never a loan sheet: values, not formulas
    for segment, stage, poci, measurement in itertools.product(["auto", "", "Auto", "<5", "zzz"], [1, 2, 3, 9],
                                                               [False, True], ["model", "individual"]):
        for crit in ([("segment", "", segment)], [("segment", "", segment), ("stage", "", stage)],
                     [("stage", "", stage), ("poci", "", poci)], [("measurement", "", measurement)],
                     [("segment", "", segment), ("stage", "", stage), ("poci", "", poci),
                      ("measurement", "", measurement)], []):
            assert by_sum.count(crit).value == by_loan.count(crit).value, crit
            for column in ("balance", "ecl_ifrs9"):
                assert by_sum.total(column, crit).value == by_loan.total(column, crit).value, (crit, column)
    assert sorted(by_sum.labels("segment")[0]) == sorted(by_loan.labels("segment")[0])
