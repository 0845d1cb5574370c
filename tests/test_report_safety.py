"""Workbooks that always open and always add up: hostile text, long text, hostile segment
names, and byte-identical reruns.

External checks: every XML part is parsed by the standard library's parser and the book is
read by openpyxl; the XML 1.0 character rules are those of the W3C recommendation
(production [2] Char); the cell limit is Excel's published 32,767 characters; SUMIFS
criteria semantics are Excel's (a leading comparison operator, wildcards ``*`` ``?`` ``~``);
SOURCE_DATE_EPOCH follows the reproducible-builds specification.
"""

from __future__ import annotations

import zipfile
import xml.etree.ElementTree as ET

import pytest
from openpyxl import load_workbook

from allowance.report import write_workbook
from allowance.report.bulk import BULK_HEADER_ROW
from allowance.report.cells import TEXT_LIMIT, TRUNCATED, clean_text
from allowance.report.figures import LoanRefs, needs_exact_match
from tests.strategies import example_loans, example_report

ILLEGAL = ["\ufffe", "\uffff", "\x00", "\x01", "\x08", "\x0b", "\x1f"]


def _parses(path) -> None:
    with zipfile.ZipFile(path) as z:
        assert z.testzip() is None
        for name in z.namelist():
            if name.endswith((".xml", ".rels")):
                ET.fromstring(z.read(name))


@pytest.mark.parametrize("char", ILLEGAL, ids=[f"U+{ord(c):04X}" for c in ILLEGAL])
def test_characters_xml_cannot_hold_are_replaced(tmp_path, char):
    loans = example_loans(12, seed=1)
    loans.loc[0, "loan_id"] = f"L{char}1"
    loans.loc[1, "segment"] = f"seg{char}"
    loans["note"] = f"free text {char} here"
    report = example_report(loans=loans)
    path = tmp_path / "r.xlsx"
    write_workbook(path, report)
    _parses(path)
    ws = load_workbook(path)["Loans"]
    assert ws.cell(row=BULK_HEADER_ROW + 1, column=1).value == "L\ufffd1"
    summary = load_workbook(path)["Summary"]
    assert any(c.value == "seg\ufffd" for row in summary.iter_rows() for c in row)


def test_long_text_is_cut_before_escaping(tmp_path):
    loans = example_loans(6, seed=2)
    loans["note"] = "&" * 40_000
    loans.loc[0, "note"] = "<" * 33_000
    report = example_report(loans=loans)
    path = tmp_path / "r.xlsx"
    write_workbook(path, report)
    _parses(path)
    ws = load_workbook(path)["Loans"]
    header = [c.value for c in ws[BULK_HEADER_ROW]]
    col = header.index("note") + 1
    for r, char in ((BULK_HEADER_ROW + 1, "<"), (BULK_HEADER_ROW + 2, "&")):
        value = ws.cell(row=r, column=col).value
        assert len(value) == TEXT_LIMIT and value.endswith(TRUNCATED) and value[0] == char


def test_clean_text_keeps_ordinary_text_and_neutralises_formulas():
    assert clean_text("auto loans, tab\there\nand newline") == "auto loans, tab\there\nand newline"
    assert clean_text("=SUM(A1)") == "'=SUM(A1)"
    assert clean_text(12.5) == "12.5"
    assert clean_text("a\ud800b") == "a\ufffdb"  # a lone surrogate (cannot be written as UTF-8)


@pytest.mark.parametrize("label, exact", [
    ("auto", False), ("heloc 2", False), ("first-lien (US)", False),
    ("<5", True), (">x", True), ("=y", True), ("<>", True),        # comparison operators
    ("a*", True), ("a?", True), ("~a", True),                      # wildcards and their escape
    ("2026-01", True), ("12", True), ("TRUE", True), ("false", True),  # read as dates, numbers, logicals
    (" auto", True),                                               # a leading space
])
def test_which_labels_need_an_exact_match(label, exact):
    assert needs_exact_match(label) is exact


def test_hostile_segments_use_exact_matching_formulas():
    loans = example_loans(30, seed=5)
    loans.loc[:4, "segment"] = "<5"
    loans.loc[5:9, "segment"] = "Auto"
    loans.loc[10:14, "segment"] = "auto"
    refs = LoanRefs(loans, live=True, first_row=5)
    seg = refs.letters["segment"]
    lt = refs.total("ecl_ifrs9", [("segment", "$A7", "<5")])
    assert lt.formula.startswith("=SUMPRODUCT(EXACT(Loans!$" + seg) and "$A7" in lt.formula
    twin = refs.count([("segment", "$A8", "Auto"), ("stage", "$B8", 1)])
    assert twin.formula.startswith("=SUMPRODUCT(EXACT(") and "=$B8)" in twin.formula
    plain = refs.total("ecl_ifrs9", [("segment", "$A9", "card")])
    assert plain.formula.startswith("=SUMIFS(")
    assert lt.value == round(loans.loc[loans["segment"] == "<5", "ecl_ifrs9"].sum(), 2)
    assert twin.value == ((loans["segment"] == "Auto") & (loans["stage"] == 1)).sum()


def _bytes(tmp_path, name, monkeypatch, epoch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", epoch)
    loans = example_loans(40, seed=9)
    report = example_report(loans=loans)
    report = type(report)(**{**report.__dict__, "record": {**report.record, "timestamp": None}})
    path = tmp_path / name
    write_workbook(path, report)
    return path


def test_rerun_is_byte_identical_under_source_date_epoch(tmp_path, monkeypatch):
    first = _bytes(tmp_path, "a.xlsx", monkeypatch, "1790812800")  # 2026-10-01T00:00:00Z
    second = _bytes(tmp_path, "b.xlsx", monkeypatch, "1790812800")
    assert first.read_bytes() == second.read_bytes()
    with zipfile.ZipFile(first) as z:
        assert {i.date_time for i in z.infolist()} == {(2026, 10, 1, 0, 0, 0)}
        core = z.read("docProps/core.xml").decode()
    assert "2026-10-01T00:00:00Z" in core
    other = _bytes(tmp_path, "c.xlsx", monkeypatch, "1790899200")  # a day later
    assert other.read_bytes() != first.read_bytes()


def test_workbook_time_is_the_run_records(tmp_path, monkeypatch):
    monkeypatch.delenv("SOURCE_DATE_EPOCH", raising=False)
    report = example_report(10)
    report = type(report)(**{**report.__dict__, "record": {**report.record, "timestamp": "2027-01-02T03:04:06+00:00"}})
    write_workbook(tmp_path / "r.xlsx", report)
    with zipfile.ZipFile(tmp_path / "r.xlsx") as z:
        assert {i.date_time for i in z.infolist()} == {(2027, 1, 2, 3, 4, 6)}
        assert "2027-01-02T03:04:06Z" in z.read("docProps/core.xml").decode()
