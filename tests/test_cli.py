"""End to end through the command line: the demo, bad inputs, check, init, schedule, what-if."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
from typer.testing import CliRunner

from allowance.cli import app
from tests import books

DEMO, MANIFEST, TAPE, ASSUMPTIONS = books.DEMO, books.MANIFEST, books.DEMO_TAPE, books.DEMO_ASSUMPTIONS
runner = CliRunner()


def invoke(*args: str):
    return runner.invoke(app, [str(a) for a in args], catch_exceptions=False)


@pytest.mark.slow
def test_demo_writes_the_four_files(demo_out):
    for name in ("loans.csv", "reserve.xlsx", "run.json", "rejected.csv"):
        assert (demo_out / name).is_file(), name
    assert (demo_out / "prior_quarter" / "loans.csv").is_file()


@pytest.mark.slow
def test_demo_writes_the_disclosure_tables_that_foot_to_the_book(demo_out):
    # IFRS 7 35M and ASC 326-20-50-6 (with the period's gross write-offs by vintage, ASU 2022-02)
    loans = pd.read_csv(demo_out / "loans.csv", low_memory=False)
    book = int(np.rint(loans["balance"] * 100).sum())
    by_stage = pd.read_csv(demo_out / "disclosure_ifrs7_35m.csv")
    assert round(by_stage.iloc[-1]["total"] * 100) == book
    assert round(by_stage.iloc[-1]["POCI"] * 100) == int(np.rint(loans.loc[loans["poci"], "balance"] * 100).sum())
    vintage = pd.read_csv(demo_out / "disclosure_asc326_vintage.csv")
    assert round(vintage.loc[vintage["row"] == "amortised cost", "total"].sum() * 100) == book
    assert vintage.loc[vintage["row"] == "gross write-offs", "total"].sum() > 0


@pytest.mark.slow
def test_demo_back_tests_a_run_of_a_year_ago_against_the_history(demo_out):
    """demo/README: the history's accounts at 2025-09-30, run, then judged on the twelve months since."""
    import json

    record = json.loads((demo_out / "backtest" / "backtest.json").read_text())
    assert record["as_of"] == "2025-09-30" and record["window_end"] == "2026-09-30"
    assert set(record["verdicts"]) == {"mortgage", "auto", "personal", "cards", "cre", "heloc"}
    assert set(record["verdicts"].values()) <= {"green", "yellow", "red"}
    segments = pd.read_csv(demo_out / "backtest" / "backtest_segments.csv")
    assert (segments["not_in_history"] == 0).all()  # every loan of the run is in the history
    assert (demo_out / "backtest" / "run" / "loans.csv").is_file() and (demo_out / "backtest" / "backtest.xlsx").is_file()


@pytest.mark.slow
def test_rows_read_equal_accepted_plus_rejected(demo_out):
    record = json.loads((demo_out / "run.json").read_text())
    rows = record["rows"]
    assert rows["read"] == rows["accepted"] + rows["rejected"]
    loans = pd.read_csv(demo_out / "loans.csv")
    rejected = pd.read_csv(demo_out / "rejected.csv")
    assert len(loans) == rows["accepted"] and len(rejected) == rows["rejected"]


@pytest.mark.slow
def test_run_record_totals_equal_the_loan_detail(demo_out):
    record = json.loads((demo_out / "run.json").read_text())
    loans = pd.read_csv(demo_out / "loans.csv")
    for fw in record["frameworks"]:
        cents = int(np.rint(loans[f"ecl_{fw}"].to_numpy() * 100).sum())
        assert round(record["total_allowance"][fw] * 100) == cents
    assert round(record["total_balance"] * 100) == int(np.rint(loans["balance"].to_numpy() * 100).sum())
    assert {i["role"] for i in record["inputs"]} >= {"tape", "assumptions"}
    assert all(len(i["sha256"]) == 64 for i in record["inputs"])


@pytest.mark.slow
def test_every_loan_respects_the_bounds(demo_out):
    loans = pd.read_csv(demo_out / "loans.csv")
    # IFRS 9 12-month ECL <= lifetime ECL, and ECL <= EAD, loan by loan
    assert (loans["ecl_12m"] <= loans["ecl_lifetime"]).all()
    assert (loans["ecl_lifetime"] <= loans["ead"]).all()
    assert (loans["ecl_cecl_modelled"] <= loans["ead_cecl"]).all()
    # the gross loss (before recoveries) never falls below the net; the demo's defaulted secured
    # loans are measured on their collateral (its policy's collateral_dependent tables)
    for fw in ("ifrs9", "cecl"):
        priced = loans[f"gross_loss_{fw}"].notna()
        assert (loans.loc[priced, f"gross_loss_{fw}"] >= loans.loc[priced, f"ecl_{fw}_modelled"] - 0.01).all()
    assert (loans["measurement"] == "collateral_dependent_defaulted").sum() > 0


@pytest.mark.slow
def test_workbook_opens_and_carries_the_caution(demo_out):
    from allowance.report import CAUTION

    # the caution sits on the summary sheet (its first rows); reading only that sheet keeps
    # this test from scanning the loan detail
    book = openpyxl.load_workbook(demo_out / "reserve.xlsx", read_only=True)
    try:
        rows = list(book["Summary"].iter_rows(max_row=10, values_only=True))
    finally:
        book.close()
    text = " ".join(v for row in rows for v in row if isinstance(v, str))
    assert CAUTION in text
    readme = (Path(__file__).parents[1] / "README.md").read_text()
    assert CAUTION in readme.replace("\n> ", " ").replace("\n", " ")


@pytest.mark.slow
def test_demo_movement_ties(demo_out):
    record = json.loads((demo_out / "run.json").read_text())
    prior = json.loads((demo_out / "prior_quarter" / "run.json").read_text())
    for fw, mv in record["movement"].items():
        assert mv["opening"] == pytest.approx(prior["total_allowance"][fw], abs=0.001)
        assert mv["closing"] == pytest.approx(record["total_allowance"][fw], abs=0.001)


@pytest.mark.slow
def test_what_if_downside_in_one_command(tmp_path):
    out = tmp_path / "what-if"
    result = invoke("run", TAPE, "--assumptions", ASSUMPTIONS, "--overlay", DEMO / MANIFEST["what_if"]["overlay"],
                    "--out", out)
    assert result.exit_code == 0, result.output
    assert (out / "what_if.csv").is_file()
    loans = pd.read_csv(out / "loans.csv")
    # 100 % downside: the weighted result is the downside scenario's
    assert np.allclose(loans["ecl_ifrs9_modelled"], loans["ecl_ifrs9_downside"], atol=0.011)


@pytest.mark.slow
def test_a_worse_unemployment_outlook_in_one_command(tmp_path):
    out = tmp_path / "outlook"
    result = invoke("run", TAPE, "--assumptions", ASSUMPTIONS, "--overlay", DEMO / MANIFEST["what_if"]["outlook"],
                    "--no-sensitivities", "--out", out)
    assert result.exit_code == 0, result.output
    summary = pd.read_csv(out / "what_if.csv")
    total = summary[summary.view == "total"].set_index("framework")
    # a positive unemployment coefficient and a higher path: a higher allowance in both frameworks
    assert (total["what_if"] > total["base"]).all()
    scenario = summary[summary.view == "scenario"].set_index(["framework", "scenario"])
    for fw in ("ifrs9", "cecl"):
        assert scenario.loc[(fw, "downside"), "difference"] > 0
    # the upside's paths did not change: under CECL (no stages) neither did its allowance; under
    # IFRS 9 its column moves only with the loans the weighted PD moved between stages
    assert scenario.loc[("cecl", "upside"), "difference"] == 0
    paths = pd.read_csv(out / "what_if_macro_paths.csv")
    assert set(zip(paths.scenario, paths.variable)) == {("base", "unemployment_rate"), ("downside", "unemployment_rate")}
    assert (paths["change"] >= 0).all() and paths["what_if"].max() == 8.5


@pytest.mark.slow
def test_each_scenario_at_100_percent_beside_the_weighted_run(demo_out):
    table = pd.read_csv(demo_out / "sensitivity.csv")
    record = json.loads((demo_out / "run.json").read_text())
    for fw in record["frameworks"]:
        rows = table[table.framework == fw].set_index("scenario")
        assert rows.loc["weighted", "allowance"] == pytest.approx(record["total_allowance"][fw], abs=0.005)
        assert rows.loc["downside", "allowance"] > rows.loc["weighted", "allowance"] > rows.loc["upside", "allowance"]


@pytest.mark.slow
def test_no_sensitivities_skips_the_reruns(tmp_path):
    out = tmp_path / "plain"
    result = invoke("run", TAPE, "--assumptions", ASSUMPTIONS, "--no-sensitivities", "--out", out)
    assert result.exit_code == 0, result.output
    assert not (out / "sensitivity.csv").exists() and "at 100 %" not in result.output


def _one_line_error(result, *needles: str) -> None:
    assert result.exit_code == 1, result.output
    err = result.stderr if hasattr(result, "stderr") else result.output
    assert "Traceback" not in result.output
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    for needle in needles:
        assert needle in lines[0], lines[0]


def test_missing_tape_is_one_clear_line(tmp_path):
    out = tmp_path / "out"
    result = invoke("run", tmp_path / "nope.csv", "--assumptions", ASSUMPTIONS, "--out", out)
    _one_line_error(result, "nope.csv")
    assert not out.exists()


def test_malformed_assumptions_name_the_file(tmp_path):
    bad = tmp_path / "a.toml"
    bad.write_text("[run\nas_of = 2026-09-30\n")
    result = invoke("run", TAPE, "--assumptions", bad, "--out", tmp_path / "out")
    _one_line_error(result, "a.toml")
    assert not (tmp_path / "out").exists()


def test_weights_that_do_not_sum_to_one(tmp_path):
    text = ASSUMPTIONS.read_text().replace("weight = 0.6", "weight = 0.5", 1)
    bad = tmp_path / "weights.toml"
    bad.write_text(text)
    for matrix in MANIFEST["current"]["transition_matrices"]:
        shutil.copy(DEMO / matrix, tmp_path / matrix)
    result = invoke("run", TAPE, "--assumptions", bad, "--out", tmp_path / "out")
    _one_line_error(result, "weights.toml", "sum to 1")
    assert not (tmp_path / "out").exists()


def test_segment_without_assumptions_is_rejected_by_row(tmp_path):
    tape = pd.read_csv(TAPE, dtype=str, keep_default_na=False)
    tape.loc[0, "segment"] = "boats"
    path = tmp_path / "tape.csv"
    tape.to_csv(path, index=False)
    result = invoke("check", path, "--assumptions", ASSUMPTIONS)
    assert result.exit_code == 1
    assert "boats" in result.output and "line 2" in result.output


def test_a_rejected_row_is_named_in_its_files_own_terms(tmp_path):
    """The same bad row (the demo's third loan, data row 3) as each format names it: a CSV's
    line 4 (the header is line 1), an XLSX sheet's row 4, a Parquet file's row 3 with
    ``source_row`` 4 (counted by hand); and the other copy of a repeated id (data rows 5 and
    9) likewise, the Parquet file's by ``source_row``."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    tape = pd.read_csv(TAPE, dtype=str, keep_default_na=False, nrows=40)
    tape.loc[2, "balance"] = "-5"
    tape.loc[8, "loan_id"] = tape.loc[4, "loan_id"]
    tape.to_csv(tmp_path / "tape.csv", index=False)
    tape.to_excel(tmp_path / "tape.xlsx", index=False)
    pq.write_table(pa.Table.from_pandas(tape, preserve_index=False), tmp_path / "tape.parquet")
    said = {}
    for name in ("tape.csv", "tape.xlsx", "tape.parquet"):
        result = invoke("check", tmp_path / name, "--assumptions", ASSUMPTIONS)
        assert result.exit_code == 1
        said[name] = [line.strip() for line in result.output.splitlines() if "balance '-5'" in line or "is also" in line]
    repeated = tape.loc[4, "loan_id"]
    assert said["tape.csv"][0].startswith(f"{tmp_path / 'tape.csv'}: line 4: ")
    assert said["tape.csv"][1] == f"{tmp_path / 'tape.csv'}: line 6: loan_id {repeated!r} is also on row 10"
    assert said["tape.xlsx"][0].startswith(f"{tmp_path / 'tape.xlsx'}: row 4: ")
    assert said["tape.xlsx"][1] == f"{tmp_path / 'tape.xlsx'}: row 6: loan_id {repeated!r} is also on row 10"
    assert said["tape.parquet"][0].startswith(f"{tmp_path / 'tape.parquet'}: row 3 (source_row 4 in rejected.csv): ")
    assert said["tape.parquet"][1] == (f"{tmp_path / 'tape.parquet'}: row 5 (source_row 6 in rejected.csv): "
                                       f"loan_id {repeated!r} is also at source_row 10")


@pytest.mark.parametrize("args, said", [
    (("run", TAPE, "--assumptions", ASSUMPTIONS, "--out", "o", "--engine", "threads"),
     "Invalid value for '--engine': 'threads' is not one of in-process, dask"),
    (("schedule", TAPE, "--assumptions", ASSUMPTIONS, "--loan", "X", "--framework", "ifrs17"),
     "Invalid value for '--framework': 'ifrs17' is not one of ifrs9, cecl"),
    (("backtest", "run", "history.csv", "--out", "o", "--test", "exact"),
     "Invalid value for '--test': 'exact' is not one of binomial, jeffreys"),
    (("backtest", "run", "history.csv", "--out", "o", "--confidence", "1.5"),
     "Invalid value for '--confidence': Input should be less than 1, not 1.5"),
    (("backtest", "run", "history.csv", "--out", "o", "--red-p", "0.1"),
     "Invalid value for '--yellow-p' / '--red-p': red_p must be below yellow_p"),
])
def test_an_option_out_of_its_choices_is_a_usage_error_naming_it(tmp_path, args, said):
    """Exit 2 with the option and its choices or range in the command line's own words (no
    validation library's prefix), before any file is read."""
    result = runner.invoke(app, [str(a) for a in args])
    assert result.exit_code == 2
    assert said in " ".join(result.output.split())
    assert "Value error" not in result.output and "Traceback" not in result.output


def test_check_passes_the_demo_and_fails_the_bad_tape():
    good = invoke("check", TAPE, "--assumptions", ASSUMPTIONS)
    assert good.exit_code == 0, good.output
    bad = invoke("check", DEMO / MANIFEST["bad"]["tape"], "--assumptions", ASSUMPTIONS)
    assert bad.exit_code == 1
    assert "rejected" in bad.output


@pytest.mark.slow
def test_bad_tape_run_keeps_every_row(tmp_path):
    out = tmp_path / "bad"
    bad_tape = DEMO / MANIFEST["bad"]["tape"]
    result = invoke("run", bad_tape, "--assumptions", ASSUMPTIONS, "--out", out, "--accept-ledger-difference")
    assert result.exit_code == 0, result.output
    read = len(pd.read_csv(bad_tape, dtype=str))
    assert len(pd.read_csv(out / "loans.csv")) + len(pd.read_csv(out / "rejected.csv")) == read
    # the run says where the rejected rows are and names the first ones (lines 3 and 4 of the
    # file share a loan id: read by hand)
    assert f"10 row(s) rejected; all of them, with every reason, are in {out / 'rejected.csv'}" in result.output
    assert f"{bad_tape}: line 3: loan_id 'MTG-100718' is also on row 4" in result.output
    assert "  ... and 7 more" in result.output


def test_init_copies_the_templates(tmp_path):
    result = invoke("init", tmp_path / "q")
    assert result.exit_code == 0, result.output
    names = {p.name for p in (tmp_path / "q").iterdir()}
    assert {"loan_tape.csv", "loan_tape.xlsx", "assumptions.toml"} <= names
    again = invoke("init", tmp_path / "q")
    assert again.exit_code == 1


def test_schedule_prints_a_loan_to_zero(tmp_path):
    tape = pd.read_csv(TAPE, dtype=str)
    loan = tape.loc[(tape["repayment"] == "level") & (tape["days_past_due"] == "0"), "loan_id"].iloc[0]
    result = invoke("schedule", TAPE, "--assumptions", ASSUMPTIONS, "--loan", loan, "--csv", tmp_path / "s.csv")
    assert result.exit_code == 0, result.output
    lines = result.output.strip().splitlines()
    assert lines[-3].split()[4] == "0.00"  # closing balance at maturity
    assert lines[-2].startswith("ECL booked (model): ") and lines[-1].startswith("wrote ")
    saved = pd.read_csv(tmp_path / "s.csv")
    assert f"{saved['ecl'].sum():,.2f}" in lines[-2]  # the total printed is the saved column's


def test_schedule_json_is_the_table_and_quiet_prints_nothing(tmp_path):
    loan = pd.read_csv(TAPE, dtype=str).loc[lambda t: t["repayment"] == "level", "loan_id"].iloc[0]
    done = invoke("schedule", TAPE, "--assumptions", ASSUMPTIONS, "--loan", loan, "--json")
    assert done.exit_code == 0, done.output
    summary = json.loads(done.output)
    months = pd.DataFrame(summary["months"])
    assert summary["command"] == "schedule" and summary["ok"] and summary["loan_id"] == loan
    # the ECL booked is the sum of the months' ECL (the engine's own check, loan_months)
    assert summary["ecl"] == pytest.approx(months["ecl"].sum(), abs=1e-9)
    # the schedule's survival (no prepayment, no default) and the engine's (no default before the
    # month) sit side by side under their own names, not as a merge's _x/_y
    assert {"survival", "survival_opening"} <= set(months.columns)
    assert not [c for c in months.columns if c.endswith(("_x", "_y"))]
    assert (months["survival"] <= months["survival_opening"] + 1e-12).all()  # prepayment only removes more
    quiet = invoke("schedule", TAPE, "--assumptions", ASSUMPTIONS, "--loan", loan, "--quiet", "--csv",
                   tmp_path / "s.csv")
    assert quiet.exit_code == 0 and quiet.output == "" and (tmp_path / "s.csv").exists()
    missing = invoke("schedule", TAPE, "--assumptions", ASSUMPTIONS, "--loan", "no-such-loan", "--json")
    assert missing.exit_code == 1 and json.loads(missing.stdout)["ok"] is False


def test_roll_rates_json_and_quiet():
    done = invoke("roll-rates", "--assumptions", ASSUMPTIONS, "--json")
    assert done.exit_code == 0, done.output
    matrices = pd.DataFrame(json.loads(done.output)["matrices"])
    assert "dpd_150_179" in set(matrices["bucket"])
    # an absorbing Markov chain ends in one of its absorbing states: charge-off or payoff
    # (Kemeny and Snell, Finite Markov Chains, absorption probabilities; from memory)
    total = matrices["pd_lifetime"] + matrices["pd_lifetime_payoff"]
    assert total.to_numpy() == pytest.approx(1.0, abs=1e-9)
    assert invoke("roll-rates", "--assumptions", ASSUMPTIONS, "--quiet").output == ""


def test_usage_error_exits_2():
    result = runner.invoke(app, ["run"])
    assert result.exit_code == 2


@pytest.mark.slow
def test_the_console_entry_point_runs(tmp_path):
    done = subprocess.run([sys.executable, "-m", "allowance", "check", str(TAPE), "--assumptions", str(ASSUMPTIONS)],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr


def test_roll_rates_print_each_bucket():
    result = invoke("roll-rates", "--assumptions", ASSUMPTIONS)
    assert result.exit_code == 0, result.output
    assert "dpd_150_179" in result.output and "expected_months_to_charge_off" in result.output


@pytest.mark.slow
def test_compare_two_finished_runs(demo_out, tmp_path):
    result = invoke("compare", demo_out / "prior_quarter", demo_out, "--out", tmp_path / "moved")
    assert result.exit_code == 0, result.output
    assert "Opening" in result.output and "Closing" in result.output
    # it says which lines two finished runs cannot separate, and why, and writes --out
    assert "not isolated: changes in assumptions or scenarios" in result.output
    assert {p.name for p in (tmp_path / "moved").iterdir()} == {
        "movement.csv", "movement_loans.csv", "movement_not_isolated.csv"}
    # a prior later than the current run is refused; a missing current folder is named as such
    backwards = invoke("compare", demo_out, demo_out / "prior_quarter")
    assert backwards.exit_code == 1 and "later than the current run" in backwards.output
    missing = invoke("compare", demo_out / "prior_quarter", tmp_path / "nowhere")
    assert missing.exit_code == 1 and "the current run folder was not found" in missing.output


@pytest.mark.slow
def test_output_folders_take_the_users_usual_mode(demo_out):
    import os

    umask = os.umask(0)
    os.umask(umask)
    for folder in (demo_out, demo_out / "prior_quarter"):
        assert folder.stat().st_mode & 0o777 == 0o777 & ~umask


def test_version_and_short_help():
    from allowance import __version__

    for flag in ("--version", "-V"):
        result = runner.invoke(app, [flag])
        assert result.exit_code == 0 and result.output.strip() == __version__
    short = runner.invoke(app, ["run", "-h"])
    assert short.exit_code == 0 and "--assumptions" in short.output
    assert runner.invoke(app, ["-h"]).output == runner.invoke(app, ["--help"]).output


def test_a_fixed_choice_is_a_choice_in_the_help_and_a_bad_one_is_a_usage_error():
    assert "ifrs9|cecl" in runner.invoke(app, ["schedule", "-h"]).output
    result = runner.invoke(app, ["schedule", str(TAPE), "-a", str(ASSUMPTIONS), "--loan", "x", "--framework", "ifrs10"])
    assert result.exit_code == 2


def test_help_loads_no_heavy_library():
    # the command line answers --help before numpy, pandas or numba are imported
    code = ("import sys\nfrom allowance.cli import app\ntry:\n    app(['--help'])\nexcept SystemExit:\n    pass\n"
            "print('|' + ','.join(m for m in ('numpy', 'pandas', 'numba') if m in sys.modules))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().endswith("|"), done.stdout


def test_the_command_line_loads_numba_without_scipy_linalg_and_a_library_process_keeps_it():
    # the command line's numba skips its BLAS probe (allowance.jit._load_array_maths), which
    # imports scipy.linalg; scipy.linalg still imports afterwards, and np.dot still compiles
    # in a library user's process, where numba is left as it comes
    code = ("import sys\nfrom allowance import jitable\njitable.COMMAND_LINE = {flag}\nimport allowance.jit\n"
            "import numba.np.arraymath as am\nprint('scipy.linalg' in sys.modules, am._HAVE_BLAS)\n"
            "import scipy.linalg\nprint(float(scipy.linalg.det([[2.0, 0.0], [0.0, 3.0]])))")
    for flag, expected in ((True, "False False"), (False, "True True")):
        done = subprocess.run([sys.executable, "-c", code.format(flag=flag)], capture_output=True, text=True,
                              timeout=120)
        assert done.returncode == 0, done.stderr
        lines = done.stdout.split("\n")
        assert lines[0] == expected, (flag, done.stdout)
        assert lines[1] == "6.0"  # det of diag(2, 3): once loaded, scipy.linalg is whole


@pytest.mark.slow
def test_run_with_a_prior_writes_the_same_loan_detail_begun_while_the_movement_is_made(tmp_path):
    # run --prior opens its output folder first and begins loans.csv once the loans are final,
    # beside the movement (allowance.report.files.OutputFolder): the file is the one a run
    # without a movement writes, byte for byte, and nothing is left beside the folder
    prior = tmp_path / "q2"
    q2 = DEMO / MANIFEST["prior"]["tape"], DEMO / MANIFEST["prior"]["assumptions"]
    assert invoke("run", q2[0], "-a", q2[1], "--out", prior, "--no-sensitivities", "--quiet").exit_code == 0
    moved, plain = tmp_path / "moved", tmp_path / "plain"
    done = invoke("run", TAPE, "-a", ASSUMPTIONS, "--prior", prior, "--out", moved, "--no-sensitivities", "--quiet")
    assert done.exit_code == 0, done.output
    assert invoke("run", TAPE, "-a", ASSUMPTIONS, "--out", plain, "--no-sensitivities", "--quiet").exit_code == 0
    assert (moved / "loans.csv").read_bytes() == (plain / "loans.csv").read_bytes()
    assert (moved / "movement.csv").exists() and (moved / "movement_loans.csv").exists()
    assert not [p.name for p in tmp_path.iterdir() if p.name.startswith(".")]  # no partial folder, no lock


@pytest.mark.slow
def test_a_prior_run_whose_assumptions_do_not_cover_this_tape_says_why(tmp_path):
    """``run --prior`` where last quarter's assumptions lack a segment this quarter's tape holds
    (the demo's quarters, last quarter without its commercial real estate loans and their
    segment): the run goes on, its movement puts the assumption changes in remeasurement, and
    the warning says why, naming the segment and the tape's row (common practice, no source:
    an assumption change that cannot be isolated is disclosed as such, not dropped)."""
    import allowance

    prior_tape = pd.read_csv(DEMO / MANIFEST["prior"]["tape"], dtype=str)
    prior_tape = prior_tape[prior_tape["segment"] != "cre"].iloc[::20]
    shutil.copytree(DEMO, tmp_path / "demo")  # the assumptions name their matrix files beside them
    lines, keep = [], True
    for line in (DEMO / MANIFEST["prior"]["assumptions"]).read_text(encoding="utf-8").splitlines():
        if line.startswith("["):
            keep = not line.startswith("[segments.cre")
        if keep:
            lines.append(line)
    blocks = "\n".join(lines).split("[[overlays]]")  # and the overlay on that segment
    text = blocks[0] + "".join("[[overlays]]" + b for b in blocks[1:] if 'segment = "cre"' not in b)
    data = tmp_path / "demo" / "without_cre.toml"
    data.write_text(text + "\n", encoding="utf-8")
    allowance.run(prior_tape, data, sensitivities=False, accept_ledger_difference=True).write(tmp_path / "prior")
    tape = pd.read_csv(TAPE, dtype=str)
    tape = tape[tape["loan_id"].isin(prior_tape["loan_id"]) | (tape["segment"] == "cre")].iloc[:400]
    assert (tape["segment"] == "cre").any()
    tape.to_csv(tmp_path / "tape.csv", index=False)
    result = invoke("run", tmp_path / "tape.csv", "--assumptions", ASSUMPTIONS, "--prior", tmp_path / "prior",
                    "--no-sensitivities", "--accept-ledger-difference", "--out", tmp_path / "now")
    assert result.exit_code == 0, result.output
    assert "the prior run's assumptions could not be applied to this tape (" in result.output
    assert "segment 'cre'" in result.output and "assumption changes are included in remeasurement" in result.output
    record = json.loads((tmp_path / "now" / "run.json").read_text())
    assert "at_prior_assumptions" not in record and record["movement"]
