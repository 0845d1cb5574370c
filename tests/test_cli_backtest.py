"""`allowance backtest` end to end, and `allowance run` with a loss-rate segment."""

from __future__ import annotations

import json

import pandas as pd
import pytest
from openpyxl import load_workbook
from typer.testing import CliRunner

from allowance.cli import app
from tests.test_backtest import ASSUMPTIONS, AS_OF, history_from, run_loans

runner = CliRunner()


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args], catch_exceptions=False)


def _run_dir(tmp_path, loans: pd.DataFrame):
    folder = tmp_path / "run-2025q3"
    folder.mkdir()
    loans.to_csv(folder / "loans.csv", index=False)
    (folder / "run.json").write_text(json.dumps({"as_of": AS_OF.isoformat(), "assumptions": ASSUMPTIONS}))
    return folder


@pytest.mark.parametrize("factor,light", [(1.0, "green"), (2.0, "red")])
def test_backtest_from_the_command_line(tmp_path, factor, light):
    loans = run_loans(per_grade=5_000)
    folder = _run_dir(tmp_path, loans)
    history = tmp_path / "history.csv"
    frame = history_from(loans, factor, seed=4)
    frame["month"] = frame["month"].dt.strftime("%Y-%m")
    frame.to_csv(history, index=False)
    result = invoke("backtest", folder, history, "--out", tmp_path / "bt")
    assert result.exit_code == 0, result.output
    segments = pd.read_csv(tmp_path / "bt" / "backtest_segments.csv").set_index("segment")
    assert segments.loc["auto", "pd_light"] == light
    grades = pd.read_csv(tmp_path / "bt" / "backtest_grades.csv")
    assert set(grades.loc[grades["segment"] == "auto", "pd_position"]) == {"inside" if factor == 1 else "below"}
    record = json.loads((tmp_path / "bt" / "backtest.json").read_text())
    assert record["verdicts"]["auto"] == segments.loc["auto", "verdict"]
    book = load_workbook(tmp_path / "bt" / "backtest.xlsx")
    assert book.sheetnames == ["Back-test", "Grades"] and book["Grades"]._charts
    assert "auto" in result.output
    as_json = invoke("backtest", folder, history, "--out", tmp_path / "bt2", "--json")
    summary = json.loads(as_json.output)
    assert summary["ok"] and set(summary["files"]) == {p.name for p in (tmp_path / "bt2").iterdir()}
    assert {s["segment"]: s["verdict"] for s in summary["segments"]} == segments["verdict"].to_dict()
    assert invoke("backtest", folder, history, "--out", tmp_path / "bt3", "--quiet").output == ""


def test_backtest_needs_a_full_year_of_history(tmp_path):
    loans = run_loans(per_grade=50)
    folder = _run_dir(tmp_path, loans)
    history = tmp_path / "history.csv"
    short = history_from(loans, 1.0)
    short[short["month"] <= "2026-03-31"].to_csv(history, index=False)
    result = invoke("backtest", folder, history, "--out", tmp_path / "bt")
    assert result.exit_code == 1 and "needs every month end up to 2026-09-30" in result.output
    assert not (tmp_path / "bt").exists()


def test_a_bad_history_value_names_the_line(tmp_path):
    loans = run_loans(per_grade=10)
    folder = _run_dir(tmp_path, loans)
    history = tmp_path / "history.csv"
    frame = history_from(loans, 1.0)
    frame["days_past_due"] = frame["days_past_due"].astype(object)
    frame.loc[3, "days_past_due"] = "ninety"
    frame.to_csv(history, index=False)
    result = invoke("backtest", folder, history, "--out", tmp_path / "bt")
    assert result.exit_code == 1
    assert "row 5, column days_past_due: days_past_due 'ninety' is not a number" in result.output




@pytest.mark.slow
def test_run_with_a_loss_rate_segment_from_the_command_line(tmp_path):
    """The demo quarter with the shipped what-if moving personal loans to the WARM method."""
    from allowance.intake import bundled_path

    demo = bundled_path("demo")
    result = invoke("run", demo / "tape_2026q3.csv", "-a", demo / "assumptions_2026q3.toml",
                    "--overlay", demo / "personal_on_loss_rates.toml", "--out", tmp_path / "out")
    assert result.exit_code == 0, result.output
    loans = pd.read_csv(tmp_path / "out" / "loans.csv")
    personal = loans[loans["segment"] == "personal"]
    assert personal["pd_12m"].isna().all() and (personal["ecl_cecl"] > 0).all()
    performing = personal[personal["stage"] == 1]
    import tomllib

    rate = tomllib.loads((demo / "personal_on_loss_rates.toml").read_text())["segments"]["personal"]["annual_loss_rate"]
    # stage 1: 12 months of the annual rate on a balance that amortises and prepays: below the rate times it
    assert (performing["ecl_ifrs9"] < rate * performing["ead"] + 0.01).all()
    assert loans.loc[loans["segment"] != "personal", "pd_12m"].notna().all()
    what_if = pd.read_csv(tmp_path / "out" / "what_if.csv")
    moved = what_if[(what_if["difference"] != 0) & what_if["segment"].notna()]
    assert set(moved["segment"]) == {"personal"}  # only the segment that changed method moves

    # the demo's back-test: an invented year after the quarter, CRE defaulting at twice its PDs
    import importlib.util

    spec = importlib.util.spec_from_file_location("next_year", demo / "next_year.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    module.main([str(tmp_path / "out" / "loans.csv"), str(tmp_path / "next.csv")])
    result = invoke("backtest", tmp_path / "out", tmp_path / "next.csv", "--out", tmp_path / "bt")
    assert result.exit_code == 0, result.output
    verdicts = pd.read_csv(tmp_path / "bt" / "backtest_segments.csv").set_index("segment")
    assert verdicts.loc["cre", "verdict"] in ("yellow", "red") and verdicts.loc["cre", "pd_light"] != "green"
    assert verdicts.loc["personal", "method"] == "loss rate"


@pytest.mark.slow
def test_roll_rates_with_a_tape_prints_the_forecast_and_the_check():
    from allowance.intake import bundled_path

    demo = bundled_path("demo")
    result = invoke("roll-rates", "-a", demo / "assumptions_2026q3.toml", "--tape", demo / "tape_2026q3.csv",
                    "--months", "3")
    assert result.exit_code == 0, result.output
    assert "balance roll-rate forecast" in result.output and "loan_level_ecl" in result.output
    assert "12 months" in result.output and "lifetime" in result.output
