"""End to end through the command line: calibrate a history, review what it wrote, then run on it."""

from __future__ import annotations

import json
import tomllib

import numpy as np
import openpyxl
import pandas as pd
import pytest
from typer.testing import CliRunner

from allowance.cli import app
from allowance.intake import bundled_path, load_assumptions
from allowance.report.calibration import CALIBRATION_CAUTION

DEMO = bundled_path("demo")
MANIFEST = tomllib.loads((DEMO / "manifest.toml").read_text())
HISTORY = DEMO / MANIFEST["history"]["file"]
TAPE = DEMO / MANIFEST["current"]["tape"]
runner = CliRunner()


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args], catch_exceptions=False)


@pytest.fixture(scope="module")
def calibrated(tmp_path_factory):
    out = tmp_path_factory.mktemp("cal") / "calibration"
    result = invoke("calibrate", HISTORY, "--out", out)
    assert result.exit_code == 0, result.output
    return out, result.output


@pytest.mark.slow
def test_calibrate_then_run_on_the_demo_tape_exits_0(calibrated, tmp_path):
    out, _ = calibrated
    # the history holds no HELOC limits, so their CCF cannot be estimated: it is stated, as the
    # demo's policy file states it (a segment with undrawn amounts must, ASC 326-20-30-11)
    draft = (out / "assumptions.toml").read_text(encoding="utf-8")
    stated = tmp_path / "assumptions.toml"
    stated.write_text(draft.replace("[segments.heloc]\n", "[segments.heloc]\nccf = 0.5\nunconditionally_cancellable = false\n",
                                    1), encoding="utf-8")
    for name in out.glob("*.csv"):  # the roll-rate files the draft names
        (tmp_path / name.name).write_bytes(name.read_bytes())
    result = invoke("run", TAPE, "--assumptions", stated, "--out", tmp_path / "run")
    assert result.exit_code == 0, result.output
    loans = pd.read_csv(tmp_path / "run" / "loans.csv")
    assert len(loans) == MANIFEST["current"]["loans"] and (loans["ecl_cecl"] >= 0).all()


@pytest.mark.slow
def test_calibrate_writes_every_file_and_counts_every_row(calibrated):
    out, output = calibrated
    for name in ("assumptions.toml", "loss_rates.csv", "calibration.xlsx", "calibration.json", "rejected.csv",
                 "rolls_cards.csv", "rolls_cards_by_balance.csv", "rolls_cards_counts.csv"):
        assert (out / name).is_file(), name
    record = json.loads((out / "calibration.json").read_text())
    rows = record["rows"]
    assert rows["read"] == rows["accepted"] + rows["rejected"] == MANIFEST["history"]["rows"]
    assert f"rows read {rows['read']:,}" in output
    config = load_assumptions(out / "assumptions.toml")  # what run reads, as it is
    assert set(config.assumptions.segments) == set(MANIFEST["history"]["segments"])
    assert "POLICY" in (out / "assumptions.toml").read_text()  # no policy given: placeholders, marked


@pytest.mark.slow
def test_the_workbook_holds_the_evidence_and_the_caution(calibrated):
    out, _ = calibrated
    book = openpyxl.load_workbook(out / "calibration.xlsx")
    assert {"Summary", "Choices", "Roll rates", "Loss rates", "Vintages", "LGD and recoveries", "Intake"} <= set(
        book.sheetnames)
    summary = " ".join(str(c.value) for row in book["Summary"].iter_rows() for c in row if c.value)
    assert CALIBRATION_CAUTION in summary
    choices = [r[0] for r in book["Choices"].iter_rows(min_row=4, values_only=True) if r[0]]
    assert "window_months" in choices and "segments.cards.charge_off_dpd" in choices
    charts = sum(len(ws._charts) for ws in book.worksheets)  # noqa: SLF001 - openpyxl keeps charts here
    assert charts >= 5


@pytest.mark.slow
def test_the_demo_policy_reproduces_the_demo_assumptions(tmp_path):
    # demo/README: the shipped assumptions are what calibrate writes from the history and policy
    out = tmp_path / "cal"
    result = invoke("calibrate", HISTORY, "--policy", DEMO / MANIFEST["current"]["policy"],
                    "--macro", DEMO / MANIFEST["history"]["macro"], "--out", out)
    assert result.exit_code == 0, result.output
    assert (out / "assumptions.toml").read_bytes() == (DEMO / MANIFEST["current"]["assumptions"]).read_bytes()
    for matrix in MANIFEST["current"]["transition_matrices"]:
        assert (out / matrix).read_bytes() == (DEMO / matrix).read_bytes()


@pytest.mark.slow
def test_as_of_and_window_are_options(tmp_path):
    out = tmp_path / "cal"
    result = invoke("calibrate", HISTORY, "--out", out, "--as-of", "2025-12", "--window", "12")
    assert result.exit_code == 0, result.output
    record = json.loads((out / "calibration.json").read_text())
    assert record["window"] == ["2025-01", "2025-12"] and record["rows"]["after_as_of"] > 0
    rates = pd.read_csv(out / "loss_rates.csv")
    assert rates["month"].max() == "2025-12"


def test_a_history_without_a_required_column_is_one_line_and_exit_1(tmp_path):
    path = tmp_path / "h.csv"
    path.write_text("loan_id,segment,month,balance\nA,auto,2026-01,5\n")
    result = invoke("calibrate", path, "--out", tmp_path / "out")
    assert result.exit_code == 1
    assert "missing required column" in result.output and "days_past_due" in result.output
    assert "Traceback" not in result.output
    assert not (tmp_path / "out").exists()


def _two_cards(tmp_path, *more_rows: str):
    """A small history of our own (16 lines with the header): two cards, one rolls to
    charge-off, one pays off, then ``more_rows``; and a policy for it. Returns both paths."""
    rows = ["loan_id,segment,month,balance,days_past_due,credit_limit,charge_off,paid_off"]
    for i, d in enumerate([0, 15, 45, 75, 105, 135, 165]):
        rows.append(f"C1,cards,2025-{i + 1:02d},900,{d},1000,,")
        rows.append(f"C2,cards,2025-{i + 1:02d},{'0' if i == 6 else '500'},0,1000,,{'true' if i == 6 else ''}")
    rows += ["C1,cards,2025-08,0,195,1000,980,", *more_rows]
    path = tmp_path / "h.csv"
    path.write_text("\n".join(rows) + "\n")
    policy = tmp_path / "policy.toml"
    policy.write_text("[segments.cards]\nccf = 0.5\n\n[calibration]\nlgd_workout_months = 1\n")
    return path, policy


def test_a_rejected_history_row_is_named_with_its_line_and_reason(tmp_path):
    """rows read = accepted + rejected, and the one bad row (line 17: a negative balance, counted
    by hand) is named on screen with the file that holds every rejected row."""
    path, policy = _two_cards(tmp_path, "C3,cards,2025-01,-5,0,1000,,")
    result = invoke("calibrate", path, "--policy", policy, "--out", tmp_path / "out")
    assert result.exit_code == 0, result.output
    assert "rows read 16  accepted 15  rejected 1" in result.output
    assert f"1 row(s) rejected; all of them, with every reason, are in {tmp_path / 'out' / 'rejected.csv'}" in result.output
    assert f"{path}: line 17: balance '-5' is outside its range" in result.output
    assert pd.read_csv(tmp_path / "out" / "rejected.csv")["source_row"].tolist() == [17]


def test_a_history_separated_by_semicolons_is_one_line_saying_so(tmp_path):
    path = tmp_path / "h.csv"
    path.write_text("loan_id;segment;month;balance;days_past_due\nA;auto;2026-01;5;0\n")
    result = invoke("calibrate", path, "--out", tmp_path / "out")
    assert result.exit_code == 1
    assert "joined by semicolons: the file is separated by semicolons, not commas" in result.output
    assert "or as Parquet" in result.output and "missing required" not in result.output
    assert not (tmp_path / "out").exists()


def test_a_bad_as_of_is_a_usage_error(tmp_path):
    result = invoke("calibrate", HISTORY, "--out", tmp_path / "out", "--as-of", "Sept 2026")
    assert result.exit_code == 2


def test_rows_of_the_rolls_file_sum_to_one(tmp_path):
    path, policy = _two_cards(tmp_path)
    result = invoke("calibrate", path, "--policy", policy, "--out", tmp_path / "out")
    assert result.exit_code == 0, result.output
    matrix = pd.read_csv(tmp_path / "out" / "rolls_cards.csv", index_col="from")
    np.testing.assert_allclose(matrix.sum(axis=1), 1.0, atol=1e-12)
    assert matrix.loc["dpd_150_179", "charge_off"] == 1.0
    text = (tmp_path / "out" / "assumptions.toml").read_text()
    assert "ccf = 0.5" in text and "from the policy file" in text


def test_the_readme_quotes_the_calibration_caution():
    from pathlib import Path

    readme = (Path(__file__).parents[1] / "README.md").read_text()
    assert CALIBRATION_CAUTION in readme.replace("\n> ", " ").replace("\n", " ")
