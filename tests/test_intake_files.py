"""Input files beyond the tape: fingerprints, templates, the ledger tie-out, charge-offs, prior runs."""

from __future__ import annotations

import csv
import json
import warnings
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

import allowance.intake as intake
from allowance.exceptions import InputFileError
from allowance.intake import (
    bundled_path,
    data_dictionary,
    file_record,
    load_assumptions,
    read_charge_offs,
    read_prior_run,
    read_tape,
    tie_out,
)
from allowance.schemas import OPTIONAL_COLUMNS, REQUIRED_COLUMNS
from tests.strategies import INTAKE_ASSUMPTIONS

HEADER = "loan_id,segment,repayment,origination_date,maturity_date,balance,interest_rate,days_past_due"


def test_public_api_is_pinned():
    assert set(intake.__all__) >= {
        "load_assumptions", "file_record", "read_tape", "tie_out", "check_table", "read_charge_offs",
        "read_prior_run", "bundled_path", "IntakeResult", "TieOut", "PriorRun",
    }


def test_file_record_sha256(tmp_path):
    path = tmp_path / "abc.txt"
    path.write_bytes(b"abc")
    record = file_record(path, "tape")
    # FIPS 180-2, appendix B.1: SHA-256("abc")
    assert record.sha256 == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    assert (record.bytes, record.role, record.path) == (3, "tape", str(path))
    with pytest.raises(InputFileError, match="file not found"):
        file_record(tmp_path / "none", "tape")


# --------------------------------------------------------------------------------------
# Templates
# --------------------------------------------------------------------------------------


def test_template_columns_equal_the_schema():
    folder = bundled_path("templates")
    with (folder / "loan_tape.csv").open(encoding="utf-8", newline="") as handle:
        header, *rows = list(csv.reader(handle))
    assert header == [*REQUIRED_COLUMNS, *OPTIONAL_COLUMNS] and len(rows) == 3
    book = openpyxl.load_workbook(folder / "loan_tape.xlsx", read_only=True)
    tape = list(book["tape"].iter_rows(values_only=True))
    dictionary = list(book["data dictionary"].iter_rows(values_only=True))
    book.close()
    assert list(tape[0]) == header and len(tape) == 4
    assert list(dictionary[0]) == ["column", "type", "required", "meaning"]
    assert [list(r) for r in dictionary[1:]] == [list(d.values()) for d in data_dictionary()]


def test_xlsx_template_is_what_the_generator_makes(tmp_path):
    import importlib.util

    folder = bundled_path("templates")
    spec = importlib.util.spec_from_file_location("make_templates", folder / "make_templates.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    module.build(folder / "loan_tape.csv", tmp_path / "fresh.xlsx")
    for sheet in ("tape", "data dictionary"):
        fresh = list(openpyxl.load_workbook(tmp_path / "fresh.xlsx")[sheet].iter_rows(values_only=True))
        committed = list(openpyxl.load_workbook(folder / "loan_tape.xlsx")[sheet].iter_rows(values_only=True))
        assert fresh == committed, f"run templates/make_templates.py: sheet {sheet!r} is stale"


def test_assumptions_template_mentions_every_key():
    from allowance.schemas import Assumptions

    text = (bundled_path("templates") / "assumptions.toml").read_text(encoding="utf-8")
    for section, model in Assumptions.model_fields.items():
        assert section in text
        annotation = model.annotation
        fields = getattr(annotation, "model_fields", None)
        for key in fields or ():
            assert key in text, f"[{section}] {key} is not in the template"
    from allowance.schemas import (
        CollateralLgd,
        CollateralLink,
        GlAccounts,
        MacroSection,
        Overlay,
        SatelliteModel,
        Scenario,
        SegmentAssumptions,
    )

    for model in (SegmentAssumptions, Scenario, Overlay, CollateralLgd, SatelliteModel, CollateralLink, MacroSection,
                  GlAccounts):
        for key in model.model_fields:
            assert key in text, f"{model.__name__}.{key} is not in the template"


def test_bundled_path_finds_the_source_checkout():
    assert bundled_path("templates") == Path(intake.__file__).resolve().parents[2] / "templates"


# --------------------------------------------------------------------------------------
# Ledger tie-out
# --------------------------------------------------------------------------------------


@pytest.fixture()
def result(tmp_path):
    path = tmp_path / "a.toml"
    path.write_text(INTAKE_ASSUMPTIONS, encoding="utf-8")
    config = load_assumptions(path)
    tape = tmp_path / "t.csv"
    tape.write_text("\n".join([
        HEADER,
        "L1,retail,level,2024-01-15,2030-01-15,1000.10,0.05,0",
        "L2,retail,level,2024-01-15,2030-01-15,2000.20,0.05,0",
        "L3,retail,level,2024-13-15,2030-01-15,300.30,0.05,0",  # rejected: bad date
        "L4,retail,level,2024-01-15,2030-01-15,n/a,0.05,0",  # rejected: no readable balance
    ]) + "\n", encoding="utf-8")
    return read_tape(tape, config)


def test_tie_out_explains_the_rejected_balance(result):
    tie = tie_out(result, 3300.60, 0.01)
    assert tie.accepted_balance == 3000.30 and tie.rejected_balance == 300.30
    assert tie.difference == -300.30 and not tie.within_tolerance and not tie.accepted_by_user
    assert "2 rejected row(s) carry 300.30" in tie.explanation
    assert "1 rejected row(s) have no readable balance" in tie.explanation
    assert "the rejected rows explain the whole difference" in tie.explanation


def test_tie_out_counts_a_huge_rejected_balance_as_unreadable(tmp_path):
    """A rejected balance of 1e308 or 1e20 cannot be added to the cent (float64 holds every
    cent only up to 2**53 cents, IEEE 754 binary64); the explanation counts it as unreadable
    instead of carrying an infinite total, and numpy warns of no overflow."""
    path = tmp_path / "a.toml"
    path.write_text(INTAKE_ASSUMPTIONS, encoding="utf-8")
    tape = tmp_path / "t.csv"
    tape.write_text("\n".join([
        HEADER,
        "L1,retail,level,2024-01-15,2030-01-15,1000.10,0.05,0",
        "L2,retail,level,2024-01-15,2030-01-15,1e308,0.05,0",
        "L3,retail,level,2024-01-15,2030-01-15,1e20,0.05,0",
        "L4,retail,level,2024-01-15,2030-01-15,-300.30,0.05,0",
    ]) + "\n", encoding="utf-8")
    taken = read_tape(tape, load_assumptions(path))
    assert taken.rows_rejected == 3
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        tie = tie_out(taken, 700.0, 0.01)
    assert tie.rejected_balance == -300.30
    assert "inf" not in tie.explanation
    assert "3 rejected row(s) carry -300.30; 2 rejected row(s) have no readable balance" in tie.explanation


def test_tie_out_within_tolerance_and_rounding(result):
    tie = tie_out(result, 3000.31, 0.05)
    assert tie.within_tolerance and tie.difference == -0.01
    assert "rounding" in tie.explanation


def test_tie_out_accepted_by_the_user_and_no_ledger(result):
    tie = tie_out(result, 5000.0, 0.01, accept_difference=True)
    assert not tie.within_tolerance and tie.accepted_by_user and "accepted by the user" in tie.explanation
    assert "not explained by rejected rows or rounding" in tie.explanation
    none = tie_out(result, None, 0.01)
    assert none.within_tolerance and none.difference == 0.0 and "no ledger control total" in none.explanation


# --------------------------------------------------------------------------------------
# Charge-offs and prior runs
# --------------------------------------------------------------------------------------


def test_read_charge_offs(tmp_path):
    path = tmp_path / "co.csv"
    path.write_text("Loan_ID, Gross_Charge_Off ,recoveries\nL1,100.5,\nL2,0,25\n", encoding="utf-8")
    frame = read_charge_offs(path)
    assert list(frame.columns) == ["loan_id", "gross_charge_off", "recoveries"]
    assert frame["loan_id"].tolist() == ["L1", "L2"]
    assert frame["gross_charge_off"].tolist() == [100.5, 0.0] and frame["recoveries"].tolist() == [0.0, 25.0]
    assert frame["gross_charge_off"].dtype == np.float64


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("loan_id,gross_charge_off\nL1,1\n", "missing column: recoveries"),
        ("loan_id,gross_charge_off,recoveries\nL1,-1,0\n", "row 2, column gross_charge_off: gross_charge_off '-1'"),
        ("loan_id,gross_charge_off,recoveries\nL1,1,0\nL2,1,abc\n", "row 3, column recoveries"),
        ("loan_id,gross_charge_off,recoveries\nL1,1,0\nL1,2,0\n", "loan_id 'L1' appears on rows 2, 3"),
        ("loan_id,gross_charge_off,recoveries\n,1,0\n", "row 2, column loan_id: loan_id is blank"),
        ("loan_id,gross_charge_off,recoveries\nL1,,0\n", "row 2, column gross_charge_off: gross_charge_off is blank"),
    ],
)
def test_charge_off_errors_name_row_and_column(tmp_path, text, message):
    path = tmp_path / "co.csv"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputFileError, match=message):
        read_charge_offs(path)


def test_read_prior_run(tmp_path):
    pd.DataFrame({"loan_id": ["007", "L2"], "segment": ["auto", "card"], "stage": [1, 2],
                  "ecl_cecl": [1.5, 2.0]}).to_csv(tmp_path / "loans.csv", index=False)
    (tmp_path / "run.json").write_text(json.dumps({"as_of": "2026-06-30"}), encoding="utf-8")
    prior = read_prior_run(tmp_path)
    assert prior.loans["loan_id"].tolist() == ["007", "L2"]
    assert prior.loans["stage"].dtype == np.float64 and prior.record == {"as_of": "2026-06-30"}


def _prior_folder(tmp_path, **changes):
    frame = {"loan_id": ["007", "'=L2", "L3"], "segment": ["auto", "card", "auto"], "grade": ["A", "B", "C"],
             "origination_date": ["2020-01-05", "2021-02-03", "2019-12-31"], "stage": [1, 2, 3],
             "poci": [False, True, False], "balance": [10.0, 20.0, 30.0], "ecl_cecl": [1.5, 2.0, 0.0],
             "pcd_gross_up": [None, None, None]}
    frame.update(changes)
    pd.DataFrame(frame).to_csv(tmp_path / "loans.csv", index=False)
    (tmp_path / "run.json").write_text(json.dumps({"as_of": "2026-06-30"}), encoding="utf-8")
    return tmp_path


def test_read_prior_run_only_the_columns_asked(tmp_path):
    """Read typed by Arrow, the columns asked for hold what reading every column gives (the
    reader's own contract: common practice, no source)."""
    folder = _prior_folder(tmp_path)
    asked = {"segment", "stage", "poci", "ecl_cecl", "origination_date", "pcd_gross_up", "not_there"}
    some = read_prior_run(folder, columns=asked).loans
    assert list(some.columns) == ["loan_id", "segment", "origination_date", "stage", "poci", "ecl_cecl",
                                  "pcd_gross_up"]
    every = read_prior_run(folder).loans
    pd.testing.assert_frame_equal(some, every[some.columns])
    assert some["origination_date"].tolist() == ["2020-01-05", "2021-02-03", "2019-12-31"]  # dates stay text


def test_a_bad_value_in_a_prior_column_is_named_by_the_movement(tmp_path):
    from allowance.exceptions import MovementError
    from allowance.reconcile import movement, movement_columns

    folder = _prior_folder(tmp_path, ecl_cecl=["1.5", "x", "0"])
    prior = read_prior_run(folder, columns=movement_columns()).loans
    with pytest.raises(MovementError, match=r"loan \"'=L2\": ecl_cecl is blank or not a number \('x'\)"):
        movement(prior, prior, None, None, "cecl", sources={"prior": "q2/loans.csv"})


def test_read_prior_run_missing_parts(tmp_path):
    with pytest.raises(InputFileError, match="prior run folder was not found"):
        read_prior_run(tmp_path / "none")
    (tmp_path / "loans.csv").write_text("loan_id\nL1\n", encoding="utf-8")
    with pytest.raises(InputFileError, match=r"run\.json: not found"):
        read_prior_run(tmp_path)
