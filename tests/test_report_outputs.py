"""The output folder: every file, totals that tie, safe text, and all-or-nothing writing."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from openpyxl import load_workbook

import allowance
import allowance.report.files as files
from allowance.exceptions import OutputError
from allowance.reconcile import compare_runs
from allowance.report import write_outputs
from tests.strategies import example_loans, example_report


def cents(x) -> int:
    return int(np.rint(np.asarray(x, dtype=np.float64) * 100).astype(np.int64).sum())


def _no_partials(parent: Path) -> bool:
    return not [p for p in parent.iterdir() if ".partial-" in p.name]


def test_writes_every_file_and_totals_tie(tmp_path):
    loans = example_loans(60, seed=5)
    loans.loc[0, "loan_id"] = '=HYPERLINK("x")'
    movements = compare_runs(example_loans(60, seed=6), loans)
    report = example_report(loans=loans, movement=movements)
    out = tmp_path / "q3"
    written = write_outputs(out, report, parquet=True)
    names = [p.name for p in written]
    assert names == ["loans.csv", "loans.parquet", "rejected.csv", "warnings.csv", "movement.csv",
                     "movement_loans.csv", "reserve.xlsx", "summary.xlsx", "run.json"]
    assert all(p.exists() for p in written) and _no_partials(tmp_path)

    csv = pd.read_csv(out / "loans.csv", dtype={"loan_id": str})
    record = json.loads((out / "run.json").read_text())
    for f in ("ifrs9", "cecl"):
        assert cents(record["total_allowance"][f]) == cents(csv[f"ecl_{f}"]) == cents(loans[f"ecl_{f}"])
        assert cents(record["totals"][f]["modelled"]) == cents(csv[f"ecl_{f}_modelled"])
    assert cents(record["total_balance"]) == cents(csv["balance"])
    assert {k: record["rows"][k] for k in ("read", "accepted", "rejected", "blank")} == {"read": 62, "accepted": 60, "rejected": 2, "blank": 0}
    assert record["version"] == allowance.__version__
    assert record["assumptions"]["run"]["as_of"] == "2026-09-30"
    assert {i["role"] for i in record["inputs"]} == {"tape", "assumptions"}
    assert record["movement"]["ifrs9"]["closing"] == record["total_allowance"]["ifrs9"]

    # the hostile id: neutralised text in loans.csv and in the workbook; raw in Parquet
    assert csv.loc[0, "loan_id"] == "'=HYPERLINK(\"x\")"
    cell = load_workbook(out / "reserve.xlsx")["Loans"]["A5"]  # title rows, note, header, then loans
    assert cell.data_type == "s" and cell.value == "'=HYPERLINK(\"x\")"
    assert pd.read_parquet(out / "loans.parquet")["loan_id"].iloc[0] == '=HYPERLINK("x")'

    rejected = pd.read_csv(out / "rejected.csv", dtype=str)
    assert rejected["loan_id"].iloc[0].startswith("'=") and "reasons" in rejected.columns
    warnings = pd.read_csv(out / "warnings.csv", dtype=str)
    assert "an example run warning" in warnings["message"].tolist()
    assert "matured_with_balance" in warnings["code"].tolist() and "balance_negative" not in warnings["code"].tolist()
    move = pd.read_csv(out / "movement.csv")
    closing = move[(move["table"] == "allowance") & (move["line"] == "closing") & (move["framework"] == "cecl")]
    assert cents(closing["amount"]) == cents(loans["ecl_cecl"])


def test_failure_mid_write_leaves_nothing(tmp_path, monkeypatch):
    def broken(*args, **kwargs):
        raise RuntimeError("injected failure while writing the workbook")

    monkeypatch.setattr(files, "write_workbooks", broken)
    with pytest.raises(RuntimeError, match="injected"):
        write_outputs(tmp_path / "out", example_report(10))
    assert not (tmp_path / "out").exists()
    assert _no_partials(tmp_path)


def test_os_error_becomes_output_error(tmp_path, monkeypatch):
    def full(*args, **kwargs):
        raise OSError(28, "No space left on device", str(tmp_path / "x"))

    monkeypatch.setattr(files, "write_workbooks", full)
    with pytest.raises(OutputError, match="No space left"):
        write_outputs(tmp_path / "out", example_report(10))
    assert not (tmp_path / "out").exists() and _no_partials(tmp_path)


def test_failure_keeps_the_previous_outputs(tmp_path, monkeypatch):
    out = tmp_path / "out"
    write_outputs(out, example_report(10))
    before = (out / "run.json").read_text()
    monkeypatch.setattr(files, "write_workbooks", lambda *a, **k: (_ for _ in ()).throw(RuntimeError("boom")))
    with pytest.raises(RuntimeError):
        write_outputs(out, example_report(12))
    assert (out / "run.json").read_text() == before and _no_partials(tmp_path)


def test_rerun_replaces_our_files_and_keeps_others(tmp_path):
    out = tmp_path / "out"
    movements = compare_runs(example_loans(20, seed=1), example_loans(20, seed=2))
    write_outputs(out, example_report(20, movement=movements), parquet=True)
    (out / "notes.txt").write_text("mine")
    write_outputs(out, example_report(20))
    assert (out / "notes.txt").read_text() == "mine"
    assert not (out / "movement.csv").exists() and not (out / "loans.parquet").exists()
    assert json.loads((out / "run.json").read_text())["movement"] == {}
    assert _no_partials(tmp_path)


def test_output_path_that_is_a_file(tmp_path):
    target = tmp_path / "taken"
    target.write_text("x")
    with pytest.raises(OutputError, match="not a folder"):
        write_outputs(target, example_report(5))


def test_empty_existing_folder_is_used(tmp_path):
    out = tmp_path / "empty"
    out.mkdir()
    write_outputs(out, example_report(5))
    assert (out / "run.json").exists() and _no_partials(tmp_path)


def test_record_is_built_when_missing(tmp_path, monkeypatch):
    import dataclasses

    monkeypatch.setenv("ALLOWANCE_USER", "analyst-7")
    report = dataclasses.replace(example_report(8), record={})
    write_outputs(tmp_path / "o", report)
    record = json.loads((tmp_path / "o" / "run.json").read_text())
    assert record["run_by"] == "analyst-7" and record["loans"] == 8
    assert record["tie_out"]["accepted_by_user"] is True


def test_what_if_files(tmp_path):
    from allowance.reconcile import what_if_comparison

    base = example_loans(30, seed=8)
    alt = base.assign(stage=np.where(base.index < 5, 3, base["stage"]), ecl_ifrs9=base["ecl_ifrs9"] * 2)
    report = example_report(loans=alt, what_if=what_if_comparison(base, alt, ["ifrs9", "cecl"]))
    names = [p.name for p in write_outputs(tmp_path / "w", report)]
    assert "what_if.csv" in names and "what_if_stage_changes.csv" in names
    summary = pd.read_csv(tmp_path / "w" / "what_if.csv")
    total = summary[(summary["view"] == "total") & (summary["framework"] == "ifrs9")].iloc[0]
    assert cents(total["what_if"]) == cents(alt["ecl_ifrs9"]) and cents(total["base"]) == cents(base["ecl_ifrs9"])
    changes = pd.read_csv(tmp_path / "w" / "what_if_stage_changes.csv")
    assert set(changes["loan_id"]) == set(base.loc[(base.index < 5) & (base["stage"] != 3), "loan_id"])


def test_run_record_lists_inputs_once_and_the_tie_out():
    from allowance.report import run_record

    report = example_report(12)
    record = run_record(report.config, report.intake, report.loans, tie_out=report.tie_out)
    assert [i["role"] for i in record["inputs"]] == ["tape", "assumptions"]
    assert record["inputs"][0]["sha256"] == "a" * 64
    assert record["tie_out"]["difference"] == -10.0
    assert set(record["totals"]["ifrs9"]) >= {"allowance", "modelled", "overlays", "by_stage", "by_segment"}
    by_stage = record["totals"]["ifrs9"]["by_stage"]
    assert cents(list(by_stage.values())) == cents(report.loans["ecl_ifrs9"])
    # one stage vocabulary: POCI apart from stages 2 and 3, as the workbook and movement show it
    assert set(by_stage) <= {"stage 1", "stage 2", "stage 3", "POCI"}
    loans = report.loans
    if loans["poci"].any():
        assert cents([by_stage["POCI"]]) == cents(loans.loc[loans["poci"], "ecl_ifrs9"])
    assert json.dumps(record, allow_nan=False)  # JSON-ready, no NaN


def test_a_long_table_is_written_slice_by_slice_to_the_same_bytes(tmp_path, monkeypatch):
    # the loan detail goes to Arrow a slice at a time (memory); the file must not depend on
    # the slicing, even where a column's type shows only in a later slice (dates with a time
    # of day, text that is blank at first) or a would-be formula comes late
    import pandas as pd

    from allowance.report import files

    frame = pd.DataFrame({
        "loan_id": [f"L{i}" for i in range(10)],
        "when": pd.to_datetime(["2026-01-01"] * 9 + ["2026-01-01 10:30"], format="ISO8601"),
        "day": pd.to_datetime(["2026-02-03"] * 10),
        "note": [None] * 7 + ["=cmd", "x", None],
        "amount": [0.1 * i for i in range(10)],
    })
    files._csv(frame, tmp_path / "whole.csv")
    monkeypatch.setattr(files, "_CSV_SLICE_ROWS", 3)
    files._csv(frame, tmp_path / "sliced.csv")
    whole = (tmp_path / "whole.csv").read_bytes()
    assert (tmp_path / "sliced.csv").read_bytes() == whole
    assert b"'=cmd" in whole and b"2026-02-03," in whole and b"10:30" in whole


# ---- an output folder opened before the run is finished (run --prior) -------------------


def _report_with_movement(n: int = 60):
    loans = example_loans(n, seed=5)
    return example_report(loans=loans, movement=compare_runs(example_loans(n, seed=6), loans))


def test_an_output_folder_opened_early_writes_what_write_outputs_writes(tmp_path):
    report = _report_with_movement()
    once = write_outputs(tmp_path / "once", report)
    with files.OutputFolder(tmp_path / "early") as folder:
        assert not (tmp_path / "early").exists()  # nothing is in place until the swap
        folder.begin_loans(report.loans)
        early = folder.write(report)
    assert [p.name for p in early] == [p.name for p in once]
    for name in ("loans.csv", "rejected.csv", "warnings.csv", "movement.csv", "movement_loans.csv"):
        assert (tmp_path / "early" / name).read_bytes() == (tmp_path / "once" / name).read_bytes(), name
    assert _no_partials(tmp_path)


def test_an_early_output_folder_left_unwritten_keeps_the_previous_outputs(tmp_path):
    out = tmp_path / "out"
    write_outputs(out, example_report(10))
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    with pytest.raises(RuntimeError, match="the movement failed"):
        with files.OutputFolder(out) as folder:
            folder.begin_loans(example_loans(30, seed=3))  # begun, then the run fails
            raise RuntimeError("the movement failed")
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before and _no_partials(tmp_path)


def test_an_early_loans_csv_that_fails_is_reported_when_the_outputs_are_written(tmp_path, monkeypatch):
    out = tmp_path / "out"
    write_outputs(out, example_report(10))
    before = (out / "run.json").read_text()
    real = files._csv

    def full(frame, path, *args, **kwargs):
        if path.name == "loans.csv":
            raise OSError(28, "No space left on device", str(path))
        return real(frame, path, *args, **kwargs)

    monkeypatch.setattr(files, "_csv", full)
    report = _report_with_movement()
    with files.OutputFolder(out) as folder:
        folder.begin_loans(report.loans)
        with pytest.raises(OutputError, match="No space left"):
            folder.write(report)
    assert (out / "run.json").read_text() == before and _no_partials(tmp_path)


def test_a_second_run_on_an_open_output_folder_is_refused_at_once(tmp_path):
    with files.OutputFolder(tmp_path / "out"):
        with pytest.raises(OutputError, match="another run is writing"):
            with files.OutputFolder(tmp_path / "out"):
                pass
    with files.OutputFolder(tmp_path / "out"):  # free again once the first is left
        pass
    assert _no_partials(tmp_path) and not (tmp_path / "out").exists()
