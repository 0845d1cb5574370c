"""A book computed part by part still hands finance its summary workbook and disclosure tables,
and is a prior run for next quarter's movement.

Reference: the in-process run of the same rows read whole (``allowance run`` without
``--loans-parquet``). The parts send back sums by segment, stage, POCI flag and measurement,
and the disclosure tables' cells; every figure of ``summary.xlsx`` and every disclosure table
made from those sums must be the one the loans give, to the cent. As a prior run (``run
--prior``, ``allowance compare``) its loan detail is read from the Parquet folder its
run.json names, and the movement must be the one the same run with a loans.csv gives.
"""

from __future__ import annotations

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from openpyxl import load_workbook
from typer.testing import CliRunner

from allowance import api
from allowance.cli import app
from allowance.report.workbook import write_summary_workbook
from tests.books import DEMO_ASSUMPTIONS, DEMO_TAPE


@pytest.fixture(scope="module")
def book(tmp_path_factory):
    """Every third loan of the demo (all its segments, POCI, individually assessed and revolving
    loans among them) as a Parquet tape of text columns in row groups of 400: nine parts."""
    folder = tmp_path_factory.mktemp("book")
    frame = pd.read_csv(DEMO_TAPE, dtype=str, keep_default_na=False).iloc[::3]
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), folder / "tape.parquet", row_group_size=400)
    alone = api.run(folder / "tape.parquet", DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False)
    alone.write(folder / "alone")
    ledger = write_summary_workbook(folder / "alone-summary.xlsx", alone.report)
    done = CliRunner().invoke(app, ["run", str(folder / "tape.parquet"), "-a", str(DEMO_ASSUMPTIONS),
                                    "--accept-ledger-difference", "--no-sensitivities", "--out", str(folder / "out"),
                                    "--loans-parquet", str(folder / "detail")], catch_exceptions=False)
    assert done.exit_code == 0, done.output
    return folder, alone, ledger


def test_the_summary_workbook_of_a_book_computed_part_by_part_is_the_in_process_one(book):
    folder, alone, ledger = book
    assert len(list((folder / "detail").iterdir())) == 9
    assert not (folder / "out" / "reserve.xlsx").exists() and not (folder / "out" / "loans.csv").exists()
    made = load_workbook(folder / "out" / "summary.xlsx", data_only=True)
    reference = load_workbook(folder / "alone" / "summary.xlsx", data_only=True)
    assert made.sheetnames == reference.sheetnames
    assert "Disclosures" in made.sheetnames and "By segment and stage" in made.sheetnames
    assert alone.report.loans["measurement"].nunique() > 1 and alone.report.loans["poci"].any()
    for ref, value in ledger.values.items():  # every figure the workbook holds, as written
        sheet, cell = ref.split("!")
        assert made[sheet.strip("'")][cell].value == value, ref
    assert len(ledger.values) > 500
    # the notes name where the loan detail is, not a loans.csv the run did not write
    notes = [c.value for row in made["By segment and stage"].iter_rows(max_row=8) for c in row if isinstance(c.value, str)]
    assert any(str(folder / "detail") in n for n in notes), notes


def test_the_disclosure_tables_of_a_book_computed_part_by_part_are_the_in_process_ones(book):
    folder, _, _ = book
    names = sorted(p.name for p in (folder / "alone").glob("disclosure_*.csv"))
    assert names == ["disclosure_asc326_vintage.csv", "disclosure_ifrs7_35m.csv"]
    for name in names:
        assert (folder / "out" / name).read_bytes() == (folder / "alone" / name).read_bytes(), name


def test_the_reserve_workbook_of_a_book_computed_part_by_part_is_refused_by_name(tmp_path):
    """Its rows are sums by group, not loans: a loan sheet of them would be wrong, so the API
    says why and what to write instead."""
    from allowance.exceptions import AllowanceError

    tape = tmp_path / "tape.parquet"
    frame = pd.read_csv(DEMO_TAPE, dtype=str, keep_default_na=False, nrows=60)
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), tape, row_group_size=25)
    book = api.run(tape, DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False,
                   loans_parquet=tmp_path / "detail")
    with pytest.raises(AllowanceError, match="reserve workbook needs the loans") as err:
        book.workbook(tmp_path / "reserve.xlsx")
    assert "summary.xlsx" in str(err.value.hint) and not (tmp_path / "reserve.xlsx").exists()


@pytest.fixture(scope="module")
def prior_book(tmp_path_factory):
    """The demo's prior quarter as a Parquet tape computed part by part (four parts), and the
    same rows run in one process (with a loans.csv): two prior runs of the same loans."""
    from tests.books import DEMO, MANIFEST

    folder = tmp_path_factory.mktemp("prior")
    frame = pd.read_csv(DEMO / MANIFEST["prior"]["tape"], dtype=str, keep_default_na=False)
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), folder / "tape.parquet", row_group_size=3000)
    assumptions = DEMO / MANIFEST["prior"]["assumptions"]
    for name, more in (("book", {"loans_parquet": folder / "detail"}), ("alone", {})):
        api.run(folder / "tape.parquet", assumptions, accept_ledger_difference=True, sensitivities=False,
                **more).write(folder / name)
    assert not (folder / "book" / "loans.csv").exists()
    return folder


def test_a_book_computed_part_by_part_is_a_prior_run_for_the_movement(prior_book):
    """``run --prior BOOK`` and ``allowance compare BOOK CURRENT``: the same movement, loan by
    loan, as with the same prior quarter run in one process; the run record hashes the
    Parquet files read (the loan detail of the prior run) beside its run.json."""
    from tests.books import DEMO, MANIFEST

    charge_offs = DEMO / MANIFEST["current"]["charge_offs"]
    runs = {name: api.run(DEMO_TAPE, DEMO_ASSUMPTIONS, sensitivities=False, prior=prior_book / name,
                          charge_offs=charge_offs) for name in ("book", "alone")}
    for fw, moved in runs["alone"].movement.items():
        pd.testing.assert_frame_equal(runs["book"].movement[fw].to_long(), moved.to_long())
        pd.testing.assert_frame_equal(runs["book"].movement[fw].loans, moved.loans)
    for name, table in runs["alone"].report.disclosures.items():  # write-offs by vintage: the prior's dates
        pd.testing.assert_frame_equal(runs["book"].report.disclosures[name], table)
    read = [i["path"] for i in runs["book"].record["inputs"] if i["role"] == "prior"]
    assert read == [*(str(p) for p in sorted((prior_book / "detail").glob("part-*.parquet"))),
                    str(prior_book / "book" / "run.json")] and len(read) == 5
    runs["alone"].write(prior_book / "now")
    done = CliRunner().invoke(app, ["compare", str(prior_book / "book"), str(prior_book / "now"),
                                    "--out", str(prior_book / "moved-book")], catch_exceptions=False)
    assert done.exit_code == 0, done.output
    CliRunner().invoke(app, ["compare", str(prior_book / "alone"), str(prior_book / "now"),
                             "--out", str(prior_book / "moved-alone")], catch_exceptions=False)
    for name in sorted(p.name for p in (prior_book / "moved-alone").glob("*.csv")):
        assert (prior_book / "moved-book" / name).read_bytes() == (prior_book / "moved-alone" / name).read_bytes(), name


def test_a_book_whose_loan_detail_has_moved_is_named_with_its_folder(prior_book, tmp_path):
    import shutil

    from allowance.exceptions import InputFileError

    shutil.copytree(prior_book / "book", tmp_path / "book")
    record = (tmp_path / "book" / "run.json").read_text(encoding="utf-8")
    (tmp_path / "book" / "run.json").write_text(record.replace(str(prior_book / "detail"), str(tmp_path / "gone")),
                                                encoding="utf-8")
    with pytest.raises(InputFileError, match="loan detail of the prior run .* was not found") as err:
        api.run(DEMO_TAPE, DEMO_ASSUMPTIONS, sensitivities=False, prior=tmp_path / "book")
    assert str(tmp_path / "gone") in str(err.value) and "run.json names this folder" in str(err.value.hint)


@pytest.mark.parametrize("harm", ["a part deleted", "a part spoilt", "another run's part added"])
def test_a_book_whose_loan_detail_is_not_whole_is_refused_naming_the_file(prior_book, tmp_path, harm):
    """Nothing is silently dropped: the Parquet files of a prior book are checked against its
    run record (as many files and loans as it wrote) before the movement reads them, and a
    file that is not Parquet is named (common practice, no source)."""
    import shutil

    from allowance.exceptions import InputFileError

    shutil.copytree(prior_book / "book", tmp_path / "book")
    shutil.copytree(prior_book / "detail", tmp_path / "detail")
    record = (tmp_path / "book" / "run.json").read_text(encoding="utf-8")
    (tmp_path / "book" / "run.json").write_text(record.replace(str(prior_book / "detail"), str(tmp_path / "detail")),
                                                encoding="utf-8")
    parts = sorted((tmp_path / "detail").glob("part-*.parquet"))
    if harm == "a part deleted":
        parts[1].unlink()
        match, named = "holds 3 files and [0-9,]+ loans; the run wrote 4 files and 9,826 loans", tmp_path / "detail"
    elif harm == "a part spoilt":
        parts[2].write_bytes(b"not parquet")
        match, named = "cannot be read as Parquet", parts[2]
    else:
        shutil.copy(parts[0], tmp_path / "detail" / "part-000000999999.parquet")
        match, named = "holds 5 files", tmp_path / "detail"
    with pytest.raises(InputFileError, match=match) as err:
        api.compare(tmp_path / "book", prior_book / "alone")
    assert err.value.file == str(named) or str(named) in str(err.value)


def test_a_book_computed_part_by_part_with_a_prior_run_explains_its_movement(book, prior_book):
    """``run TAPE.parquet --loans-parquet DIR --prior PRIOR``: the movement is made once the
    parts are written, this run's loans read back from its Parquet detail, each part computed at
    the prior run's assumptions too (the demo's last quarter: another model). Its
    ``movement.csv`` and ``movement_loans.csv`` are those of the same tape run in one process
    with ``--prior``, byte for byte, assumption changes isolated (reference: that run); the
    summary workbook carries the movement and the journal."""
    from tests.books import DEMO, MANIFEST

    folder, alone, _ = book
    charge_offs = DEMO / MANIFEST["current"]["charge_offs"]
    common = ["-a", str(DEMO_ASSUMPTIONS), "--accept-ledger-difference", "--no-sensitivities",
              "--prior", str(prior_book / "alone"), "--charge-offs", str(charge_offs)]
    for out, more in (("moved", ["--loans-parquet", str(folder / "moved-detail")]), ("in-process", [])):
        done = CliRunner().invoke(app, ["run", str(folder / "tape.parquet"), *common, "--out", str(folder / out),
                                        *more], catch_exceptions=False)
        assert done.exit_code == 0, done.output
        # the tape's columns the data dictionary does not know: said to go where they go
        into = "the loan detail's Parquet files" if more else "loans.csv"
        assert f"carried through to {into} untouched: 'original_amount', 'branch'" in done.output
    assert "could not be applied" not in done.output
    for name in ("movement.csv", "movement_loans.csv"):
        assert (folder / "moved" / name).read_bytes() == (folder / "in-process" / name).read_bytes(), name
    lines = pd.read_csv(folder / "moved" / "movement_loans.csv")
    assert len(lines) >= len(alone.loans) and set(lines["framework"]) == {"ifrs9", "cecl"}
    moved = pd.read_csv(folder / "moved" / "movement.csv")
    assert moved.loc[moved["line"] == "assumptions", "amount"].abs().sum() > 0  # isolated, and not nothing
    sheets = load_workbook(folder / "moved" / "summary.xlsx", read_only=True).sheetnames
    assert "Movement" in sheets and "Journal" in sheets
    import json

    record = json.loads((folder / "moved" / "run.json").read_text(encoding="utf-8"))
    assert record["at_prior_assumptions"].startswith("each part of the book computed at the prior run's")


def test_a_book_whose_prior_run_has_its_model_isolates_the_assumption_lines(book, tmp_path):
    """When the prior run's assumptions are this run's model (here: this quarter's file at last
    quarter's date, another label), the book's own modelled figures are its tape at the prior
    assumptions: the movement is the one the same quarter run in one process with ``--prior``
    gives, loan by loan, assumption lines isolated (reference: that in-process run)."""
    import tomllib

    from tests.books import DEMO, MANIFEST

    folder, _, _ = book
    data = tomllib.loads(DEMO_ASSUMPTIONS.read_text(encoding="utf-8"))
    data["run"] |= {"as_of": "2026-06-30", "label": "the quarter before, this quarter's model"}
    data["run"].pop("ledger_balance", None)
    for segment in data["segments"].values():  # the roll-rate matrix's file, from the demo's folder
        if "transition_matrix" in segment:
            segment["transition_matrix"] = str(DEMO / segment["transition_matrix"])
    prior_tape = pd.read_csv(DEMO / MANIFEST["prior"]["tape"], dtype=str, keep_default_na=False).iloc[::3]
    api.run(prior_tape, data, accept_ledger_difference=True, sensitivities=False).write(tmp_path / "prior")
    in_process = api.run(folder / "tape.parquet", DEMO_ASSUMPTIONS, accept_ledger_difference=True,
                         sensitivities=False, prior=tmp_path / "prior")
    by_parts = api.run(folder / "tape.parquet", DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False,
                       prior=tmp_path / "prior", loans_parquet=tmp_path / "detail")
    assert in_process.record["at_prior_assumptions"].startswith("this run's own")
    assert by_parts.record["at_prior_assumptions"].startswith("this run's own")
    assert not any("not computed again" in w for w in by_parts.warnings)
    for fw, moved in in_process.movement.items():
        pd.testing.assert_frame_equal(by_parts.movement[fw].loans, moved.loans)
        pd.testing.assert_frame_equal(by_parts.movement[fw].to_long(), moved.to_long())


def test_a_loan_detail_folder_given_as_a_url_is_refused_not_made_here(tmp_path, monkeypatch):
    """``--loans-parquet s3://bucket/detail`` parsed as a path is a folder ``s3:`` in the
    working folder: the run wrote the detail there and said nothing (found by hand). Refused
    now, naming the URL, before anything is read or written."""
    from allowance.exceptions import OutputError

    monkeypatch.chdir(tmp_path)
    frame = pd.read_csv(DEMO_TAPE, dtype=str, keep_default_na=False, nrows=20)
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), tmp_path / "tape.parquet")
    with pytest.raises(OutputError, match="s3://bucket/detail: is a URL"):
        api.run(tmp_path / "tape.parquet", DEMO_ASSUMPTIONS, loans_parquet="s3://bucket/detail",
                accept_ledger_difference=True)
    assert not (tmp_path / "s3:").exists()
