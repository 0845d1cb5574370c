"""Tape intake: each row rule on a small tape of our own, column mapping, whole-file errors.

The expected outcomes are the rules of the tape contract (DESIGN.md, "the tape") and the
bounds of ``schemas.LoanRecord``: common practice, no source, except where a line names one.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from allowance.exceptions import InputFileError, TapeError
from allowance.intake import check_table, load_assumptions, read_tape
from allowance.schemas import OPTIONAL_COLUMNS, REQUIRED_COLUMNS
from tests.strategies import INTAKE_ASSUMPTIONS

HEADER = "loan_id,segment,repayment,origination_date,maturity_date,balance,interest_rate,days_past_due,credit_limit,grade"
GOOD = "L1,retail,level,2024-01-15,2030-01-15,1000.50,0.065,0,,"
CARD = "C1,cards,revolving,2020-03-01,,500,0.2,0,2000,"


@pytest.fixture()
def config(intake_config):
    return intake_config


def tape(tmp_path: Path, *lines: str, header: str = HEADER, name: str = "tape.csv") -> Path:
    path = tmp_path / name
    path.write_text("\n".join([header, *lines]) + "\n", encoding="utf-8")
    return path


def codes(result, line: int) -> set[str]:
    row = result.rejected.loc[result.rejected["source_row"] == line]
    assert len(row) == 1, f"line {line} not rejected"
    return set(row.iloc[0]["reason_codes"].split(";"))


def with_field(line: str, column: str, value: str, header: str = HEADER) -> str:
    cells = line.split(",")
    cells[header.split(",").index(column)] = value
    return ",".join(cells)


# --------------------------------------------------------------------------------------
# The accepted frame
# --------------------------------------------------------------------------------------


def test_accepted_frame_has_the_contract_columns_and_dtypes(tmp_path, config):
    result = read_tape(tape(tmp_path, GOOD, CARD), config)
    frame = result.accepted
    assert list(frame.columns[: len(REQUIRED_COLUMNS) + len(OPTIONAL_COLUMNS)]) == [*REQUIRED_COLUMNS, *OPTIONAL_COLUMNS]
    assert "source_row" in frame.columns
    assert frame["source_row"].tolist() == [2, 3]
    assert frame["origination_date"].dtype == "datetime64[ns]"
    assert frame["days_past_due"].dtype == np.int64
    assert frame["balance"].dtype == np.float64 and frame["prior_stage"].dtype == np.float64
    assert frame["watchlist"].dtype == bool and not frame["watchlist"].any()
    assert pd.api.types.is_string_dtype(frame["loan_id"]) and pd.api.types.is_string_dtype(frame["grade"])
    assert frame["maturity_date"].isna().tolist() == [False, True]
    assert frame.loc[0, "origination_date"] == pd.Timestamp("2024-01-15")
    assert frame["balance"].tolist() == [1000.5, 500.0]
    assert result.rows_read == 2 and result.rows_rejected == 0


def test_missing_optional_columns_are_filled(tmp_path, config):
    header = "loan_id,segment,repayment,origination_date,maturity_date,balance,interest_rate,days_past_due"
    result = read_tape(tape(tmp_path, "L1,retail,level,2024-01-15,2030-01-15,10,0.05,0", header=header), config)
    frame = result.accepted
    assert np.isnan(frame.loc[0, "credit_limit"]) and frame.loc[0, "bankrupt"] is np.False_
    assert pd.isna(frame.loc[0, "grade"])


def test_formula_like_loan_id_is_plain_text(tmp_path, config):
    line = '"=HYPERLINK(""x"")",retail,level,2024-01-15,2030-01-15,10,0.05,0,,'
    result = read_tape(tape(tmp_path, line), config)
    assert result.accepted["loan_id"].tolist() == ['=HYPERLINK("x")']


# --------------------------------------------------------------------------------------
# Row rules, one by one
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("column", "value", "code"),
    [
        ("loan_id", "", "missing_value"),
        ("segment", "", "missing_value"),
        ("segment", "autos", "unknown_segment"),
        ("repayment", "weekly", "bad_choice"),
        ("repayment", "", "missing_value"),
        ("origination_date", "2024-13-01", "bad_date"),
        ("origination_date", "2023-02-29", "bad_date"),  # not a leap year
        ("origination_date", "9999-12-31", "bad_date"),  # beyond a datetime64[ns]
        ("origination_date", "", "missing_value"),
        ("origination_date", "2026-10-01", "origination_after_as_of"),
        ("maturity_date", "", "missing_value"),
        ("maturity_date", "2023-01-01", "maturity_before_origination"),
        ("balance", "-0.01", "out_of_range"),
        ("balance", "\"1,000.50\"", "bad_number"),
        ("balance", "inf", "bad_number"),
        ("balance", "", "missing_value"),
        ("interest_rate", "1.01", "out_of_range"),
        ("interest_rate", "-0.01", "out_of_range"),
        ("interest_rate", "6.5%", "bad_number"),
        ("days_past_due", "1.5", "not_whole_number"),
        ("days_past_due", "-3", "out_of_range"),
        ("days_past_due", "thirty", "bad_number"),
        ("credit_limit", "-1", "out_of_range"),
    ],
)
def test_each_rule_rejects_with_its_code(tmp_path, config, column, value, code):
    result = read_tape(tape(tmp_path, GOOD, with_field(GOOD.replace("L1", "L2"), column, value)), config)
    assert result.rows_accepted == 1 and result.rows_rejected == 1
    assert code in codes(result, 3)
    finding = result.findings[(result.findings["source_row"] == 3) & (result.findings["code"] == code)]
    assert finding.iloc[0]["column"] == column and finding.iloc[0]["severity"] == "reject"


def test_formula_and_percent_values_get_a_hint(tmp_path, config):
    lines = [with_field(GOOD, "balance", "=B2*2"), with_field(GOOD.replace("L1", "L2"), "interest_rate", "6.5%")]
    reasons = read_tape(tape(tmp_path, *lines), config).rejected["reasons"].tolist()
    assert "a formula" in reasons[0] and "6.5% as 0.065" in reasons[1]


def test_a_row_collects_every_failure(tmp_path, config):
    line = "L2,retail,weekly,2024-13-01,2030-01-15,-5,2,1.5,,"
    result = read_tape(tape(tmp_path, line), config)
    assert codes(result, 2) == {"bad_choice", "bad_date", "out_of_range", "not_whole_number"}
    reasons = result.rejected.iloc[0]["reasons"]
    assert "repayment 'weekly'" in reasons and "balance '-5'" in reasons and "interest_rate '2'" in reasons


def test_duplicates_reject_every_copy_naming_the_others(tmp_path, config):
    result = read_tape(tape(tmp_path, GOOD, GOOD.replace("L1", "L2"), GOOD, GOOD), config)
    assert result.rows_accepted == 1
    assert sorted(result.rejected["source_row"]) == [2, 4, 5]
    messages = result.findings.set_index("source_row")["message"]
    assert messages[2] == "loan_id 'L1' is also on rows 4, 5"
    assert messages[4] == "loan_id 'L1' is also on rows 2, 5"


def test_loan_ids_are_compared_after_trimming(tmp_path, config):
    result = read_tape(tape(tmp_path, GOOD, GOOD.replace("L1", " L1 ")), config)
    assert result.rows_rejected == 2


def test_matured_term_loan_with_balance_is_accepted_with_a_warning(tmp_path, config):
    matured = with_field(GOOD, "maturity_date", "2026-09-30")
    paid = with_field(with_field(GOOD.replace("L1", "L2"), "maturity_date", "2025-01-01"), "balance", "0")
    live = GOOD.replace("L1", "L3")  # a book of matured loans only is an as-of error (test_bad_inputs)
    result = read_tape(tape(tmp_path, matured, paid, live), config)
    assert result.accepted["loan_id"].tolist() == ["L1", "L3"]
    warning = result.warnings.iloc[0]
    assert (warning["code"], warning["source_row"], warning["column"]) == ("matured_with_balance", 2, "maturity_date")
    assert codes(result, 3) == {"matured"}


def test_revolving_needs_a_limit_and_over_limit_is_a_warning(tmp_path, config):
    no_limit = with_field(CARD, "credit_limit", "")
    over = with_field(CARD.replace("C1", "C2"), "balance", "2500")
    result = read_tape(tape(tmp_path, no_limit, over), config)
    assert codes(result, 2) == {"missing_value"}
    assert result.accepted["loan_id"].tolist() == ["C2"]
    assert result.warnings["code"].tolist() == ["over_limit"]


def test_grade_required_and_known_for_a_graded_segment(tmp_path, config):
    base = GOOD.replace("retail", "graded")
    result = read_tape(
        tape(tmp_path, with_field(base, "grade", "A"), with_field(base.replace("L1", "L2"), "grade", ""),
             with_field(base.replace("L1", "L3"), "grade", "Q")),
        config,
    )
    assert result.accepted["loan_id"].tolist() == ["L1"]
    assert codes(result, 3) == {"missing_grade"} and codes(result, 4) == {"unknown_grade"}
    assert "(A, B)" in result.findings.iloc[-1]["message"]


def test_unknown_segment_suggests_the_close_one(tmp_path, config):
    result = read_tape(tape(tmp_path, GOOD.replace("retail", "retial")), config)
    assert "did you mean 'retail'?" in result.rejected.iloc[0]["reasons"]


def test_percent_rates_get_a_hint(tmp_path, config):
    lines = [with_field(GOOD.replace("L1", f"L{i}"), "interest_rate", v) for i, v in enumerate(["6.5", "7.25", "0.05"])]
    result = read_tape(tape(tmp_path, *lines), config)
    assert result.rows_rejected == 2
    assert "looks like percents (67% of its values are above 1)" in result.rejected.iloc[0]["reasons"]
    one = read_tape(tape(tmp_path, GOOD, with_field(GOOD.replace("L1", "L2"), "interest_rate", "5.39")), config)
    assert one.rejected.iloc[0]["reasons"].endswith("; if it is a percent, write it as 0.0539")


@pytest.mark.parametrize(
    ("text", "value"),
    [("true", True), ("FALSE", False), ("Yes", True), ("no", False), ("Y", True), ("n", False),
     ("1", True), ("0", False), ("T", True), ("f", False), ("", False), (" yes ", True)],
)
def test_boolean_spellings(tmp_path, config, text, value):
    header = HEADER + ",watchlist"
    result = read_tape(tape(tmp_path, GOOD + "," + text, header=header), config)
    assert result.accepted["watchlist"].tolist() == [value]


def test_bad_boolean_and_prior_stage(tmp_path, config):
    header = HEADER + ",bankrupt,prior_stage"
    result = read_tape(tape(tmp_path, GOOD + ",maybe,2", GOOD.replace("L1", "L2") + ",no,4",
                            GOOD.replace("L1", "L3") + ",no,2.0", header=header), config)
    assert codes(result, 2) == {"bad_boolean"} and codes(result, 3) == {"out_of_range"}
    assert result.accepted["prior_stage"].tolist() == [2.0]


def test_repayment_is_case_insensitive_and_trimmed(tmp_path, config):
    result = read_tape(tape(tmp_path, with_field(GOOD, "repayment", " Interest_Only ")), config)
    assert result.accepted["repayment"].tolist() == ["interest_only"]


# --------------------------------------------------------------------------------------
# Dates
# --------------------------------------------------------------------------------------


def test_unambiguous_day_first_file_is_read(tmp_path, config):
    lines = [GOOD.replace("2024-01-15", "15/01/2024").replace("2030-01-15", "03/02/2030")]
    result = read_tape(tape(tmp_path, *lines), config)
    assert result.accepted["maturity_date"].tolist() == [pd.Timestamp("2030-02-03")]


def test_unambiguous_month_first_file_is_read(tmp_path, config):
    lines = [GOOD.replace("2024-01-15", "01/15/2024").replace("2030-01-15", "03/02/2030")]
    result = read_tape(tape(tmp_path, *lines), config)
    assert result.accepted["maturity_date"].tolist() == [pd.Timestamp("2030-03-02")]


def test_ambiguous_dates_ask_for_the_format(tmp_path, config):
    lines = [GOOD.replace("2024-01-15", "03/04/2024").replace("2030-01-15", "05/06/2030")]
    with pytest.raises(TapeError, match=r"date_format") as err:
        read_tape(tape(tmp_path, *lines), config)
    assert err.value.row == 2 and err.value.column == "origination_date"


def test_date_format_setting_resolves_the_ambiguity(tmp_path):
    path = tmp_path / "a.toml"
    path.write_text(INTAKE_ASSUMPTIONS.replace("[segments.retail]", '[tape]\ndate_format = "month_first"\n\n[segments.retail]'))
    config = load_assumptions(path)
    lines = [GOOD.replace("2024-01-15", "03/04/2024").replace("2030-01-15", "05/06/2030")]
    result = read_tape(tape(tmp_path, *lines), config)
    assert result.accepted["origination_date"].tolist() == [pd.Timestamp("2024-03-04")]


def test_mixed_day_and_month_first_is_an_error(tmp_path, config):
    lines = [GOOD.replace("2024-01-15", "15/01/2024").replace("2030-01-15", "01/31/2030")]
    with pytest.raises(TapeError, match="both day-first"):
        read_tape(tape(tmp_path, *lines), config)


def test_iso_variants_are_read(tmp_path, config):
    lines = [
        GOOD.replace("2024-01-15", "2024-1-5"),
        GOOD.replace("L1", "L2").replace("2024-01-15", "2024-01-15 00:00:00"),
        GOOD.replace("L1", "L3").replace("2024-01-15", " 2024-01-15 "),
    ]
    result = read_tape(tape(tmp_path, *lines), config)
    assert result.accepted["origination_date"].tolist() == [pd.Timestamp("2024-01-05")] + [pd.Timestamp("2024-01-15")] * 2


# --------------------------------------------------------------------------------------
# Columns
# --------------------------------------------------------------------------------------


def test_mapped_headers_and_extras(tmp_path):
    path = tmp_path / "a.toml"
    path.write_text(INTAKE_ASSUMPTIONS.replace(
        "[segments.retail]", '[tape.columns]\nloan_id = "Account No"\nbalance = "Cur Bal"\n\n[segments.retail]'))
    config = load_assumptions(path)
    header = " ACCOUNT NO ,Segment,REPAYMENT,origination_date,maturity_date,cur bal,interest_rate,days_past_due,Branch,Balance"
    result = read_tape(tape(tmp_path, "A9,retail,level,2024-01-15,2030-01-15,12.5,0.05,0,=east, 7 ", header=header), config)
    frame = result.accepted
    assert frame.loc[0, "loan_id"] == "A9" and frame.loc[0, "balance"] == 12.5
    assert frame.loc[0, "Branch"] == "=east"
    assert frame.loc[0, "extract_Balance"] == " 7 "  # carried through untouched, renamed apart
    assert result.headers["balance"] == "cur bal"


def test_missing_required_column_names_it_and_close_matches(tmp_path, config):
    header = HEADER.replace("interest_rate", "interest rt").replace("balance", "balanse")
    with pytest.raises(TapeError) as err:
        read_tape(tape(tmp_path, GOOD, header=header), config)
    message = str(err.value)
    assert "missing required columns: 'balance' (close: 'balanse'), 'interest_rate' (close: 'interest rt')" in message


def test_duplicate_header_for_a_column_is_an_error(tmp_path, config):
    with pytest.raises(TapeError, match="appears 2 times"):
        read_tape(tape(tmp_path, GOOD + ",9", header=HEADER + ",Balance"), config)


# --------------------------------------------------------------------------------------
# Whole-file problems and line numbers
# --------------------------------------------------------------------------------------


def test_header_only_and_empty_files(tmp_path, config):
    with pytest.raises(TapeError, match="no data rows"):
        read_tape(tape(tmp_path), config)
    empty = tmp_path / "empty.csv"
    empty.write_bytes(b"")
    with pytest.raises(InputFileError, match="empty"):
        read_tape(empty, config)


def test_binary_junk_is_refused(tmp_path, config):
    junk = tmp_path / "junk.csv"
    junk.write_bytes(bytes(range(256)) * 10)
    with pytest.raises(InputFileError, match="not UTF-8|not a text file"):
        read_tape(junk, config)


def test_other_encodings_name_the_byte_offset(tmp_path, config):
    path = tmp_path / "latin1.csv"
    text = "\n".join([HEADER, GOOD, GOOD.replace("L1", "L2").replace("retail", "retail")]) + "\n"
    data = text.encode("utf-8") + "L3,caf\u00e9,level,2024-01-15,2030-01-15,1,0.05,0,,\n".encode("latin-1")
    path.write_bytes(data)
    offset = data.index(bytes([0xE9]))
    with pytest.raises(InputFileError, match=rf"byte offset {offset} holds 0xe9") as err:
        read_tape(path, config)
    # where a person finds it: line 4 of the file, the segment column, and what the byte is in
    # the usual other encoding (0xE9 is 'é' in Windows-1252: from memory, checked with Python's codec)
    assert "(line 4, column segment, 'é' in Windows-1252)" in str(err.value)


def test_a_utf16_tape_is_named_as_such(tmp_path, config):
    """A spreadsheet's "Unicode text" export is UTF-16 with a byte-order mark: said so, with the fix."""
    path = tmp_path / "wide.csv"
    path.write_bytes("\n".join([HEADER, GOOD]).encode("utf-16"))
    with pytest.raises(InputFileError, match="is UTF-16 text, not UTF-8") as err:
        read_tape(path, config)
    assert "save the file as UTF-8 CSV" in str(err.value.hint)
    for order in ("utf-16-le", "utf-16-be"):  # without the mark: every other byte is NUL
        path.write_bytes("\n".join([HEADER, GOOD]).encode(order))
        with pytest.raises(InputFileError, match="is UTF-16 text, not UTF-8 \\(every other byte is NUL"):
            read_tape(path, config)


def test_far_bad_byte_is_found_beyond_the_first_block(tmp_path, config):
    path = tmp_path / "late.csv"
    body = "\n".join(GOOD.replace("L1", f"L{i}") for i in range(60_000)) + "\n"
    data = (HEADER + "\n" + body).encode() + b"L0x,retail,level,2024-01-15,2030-01-15,1,0.05,0,,\xff\n"
    path.write_bytes(data)
    with pytest.raises(InputFileError, match=rf"byte offset {len(data) - 2} holds 0xff") as err:
        read_tape(path, config)
    # the header, 60,000 good rows, then the bad row: line 60,002, its tenth field; 0xFF is
    # 'ÿ' in Windows-1252 (Python's cp1252 codec)
    assert f"(line 60002, column {HEADER.split(',')[9]}, 'ÿ' in Windows-1252)" in str(err.value)


def test_bom_is_allowed(tmp_path, config):
    path = tmp_path / "bom.csv"
    path.write_bytes(("\ufeff" + HEADER + "\n" + GOOD + "\n").encode("utf-8"))
    assert read_tape(path, config).rows_accepted == 1


def test_size_limit(tmp_path, config):
    path = tape(tmp_path, GOOD)
    with pytest.raises(InputFileError, match="above the 1e-06 MiB input limit"):
        read_tape(path, config, max_mb=1e-6)


def test_missing_file(tmp_path, config):
    with pytest.raises(InputFileError, match="file not found"):
        read_tape(tmp_path / "nope.csv", config)


def test_blank_lines_keep_line_numbers_and_are_not_rows(tmp_path, config):
    path = tape(tmp_path, GOOD, "", ",,,,,,,,,", with_field(GOOD.replace("L1", "L2"), "balance", "x"), "")
    result = read_tape(path, config)
    assert result.rows_read == 2 and result.blank_rows == 3
    assert result.rejected["source_row"].tolist() == [5]


def test_quoted_line_breaks_keep_line_numbers(tmp_path, config):
    header = HEADER + ",note"
    lines = [GOOD + ',"two\nlines"', GOOD.replace("L1", "L2") + ",plain", with_field(GOOD.replace("L1", "L3"), "balance", "x") + ",z"]
    result = read_tape(tape(tmp_path, *lines, header=header), config)
    assert result.accepted["source_row"].tolist() == [2, 4]
    assert result.accepted["note"].tolist()[0] == "two\nlines"
    assert result.rejected["source_row"].tolist() == [5]


def test_lines_with_the_wrong_number_of_fields_are_rejected_not_lost(tmp_path, config):
    path = tape(tmp_path, GOOD, "L2,retail,level", GOOD.replace("L1", "L3") + ",extra,more", GOOD.replace("L1", "L4"))
    result = read_tape(path, config)
    assert result.rows_read == 4 and result.rows_accepted == 2
    assert result.rejected["source_row"].tolist() == [3, 4]
    assert set(result.rejected["reason_codes"]) == {"wrong_field_count"}
    assert result.rejected.iloc[1]["extra_fields"] == "extra,more"
    assert result.accepted["source_row"].tolist() == [2, 5]


def test_rejected_rows_are_kept_exactly_as_read(tmp_path, config):
    bad = "L2,retail,level,2024-01-15,2030-01-15,  -5.50 ,0.0650,0,,"
    result = read_tape(tape(tmp_path, GOOD, bad), config)
    row = result.rejected.iloc[0]
    assert row["balance"] == "  -5.50 " and row["interest_rate"] == "0.0650" and pd.isna(row["grade"])
    assert list(result.rejected.columns[:3]) == ["source_row", "reason_codes", "reasons"]


def test_rejected_rows_as_read_when_numbers_were_read_as_numbers(tmp_path, config):
    # The balance column is clean, so it is read as numbers; the row fails on its date.
    bad = "L2,retail,level,2024-13-01,2030-01-15,5.50,0.0650,0,,"
    result = read_tape(tape(tmp_path, GOOD, bad), config)
    row = result.rejected.iloc[0]
    assert row["balance"] == "5.50" and row["interest_rate"] == "0.0650"


def test_check_table_counts(tmp_path, config):
    lines = [GOOD, with_field(GOOD.replace("L1", "L2"), "balance", "-1"), with_field(CARD, "balance", "9000")]
    table = check_table(read_tape(tape(tmp_path, *lines), config))
    rows = {(r.section, r.code): r.rows for r in table.itertuples()}
    assert rows[("rows", "read")] == 3 and rows[("rows", "accepted")] == 2 and rows[("rows", "rejected")] == 1
    assert rows[("rejected", "out_of_range")] == 1 and rows[("warning", "over_limit")] == 1
    assert list(table.columns) == ["section", "code", "column", "rows", "message"]


def test_as_of_is_the_boundary(tmp_path, config):
    on = with_field(GOOD, "origination_date", dt.date(2026, 9, 30).isoformat())
    result = read_tape(tape(tmp_path, on), config)
    assert result.rows_accepted == 1


def test_a_character_across_the_scan_blocks_is_text(tmp_path, config):
    # The scan checks UTF-8 4 MiB at a time, ASCII blocks in one pass: a two-byte character
    # cut by a block boundary is finished by the next block, not refused.
    from allowance.intake.files import _CHUNK

    lines = [GOOD.replace("L1", f"L{i}") for i in range((_CHUNK - 1000) // (len(GOOD) + 8))]
    prefix = ("\n".join([HEADER, *lines]) + "\n").encode()
    first = with_field(GOOD.replace("L1", "Lz"), "grade", "\u00e9").encode().index(b"\xc3")
    pad = _CHUNK - 1 - len(prefix) - first  # the character's first byte ends the first block
    assert pad > 0
    last = with_field(GOOD.replace("L1", "Lz" + "x" * pad), "grade", "\u00e9").encode()
    data = prefix + last + b"\n"
    assert data[_CHUNK - 1:_CHUNK + 1] == "\u00e9".encode()
    path = tmp_path / "across.csv"
    path.write_bytes(data)
    result = read_tape(path, config)
    assert result.rows_read == len(lines) + 1
    grades = set(result.accepted["grade"].dropna()) | set(result.rejected.get("grade", pd.Series()).dropna())
    assert "\u00e9" in grades


def test_a_file_ending_inside_a_character_is_refused(tmp_path, config):
    path = tmp_path / "cut.csv"
    data = "\n".join([HEADER, GOOD]).encode() + "\n".encode() + with_field(GOOD, "grade", "\u00e9").encode()[:-1]
    path.write_bytes(data[:-1] + b"\xc3")
    with pytest.raises(InputFileError, match="ends inside a character"):
        read_tape(path, config)


def test_an_accepted_frame_built_later_is_the_same_frame(tmp_path, config):
    # ``allowance check`` reads only the accepted rows' count and balance total; the frame is
    # built when first read and must be the one read_tape builds at once.
    import pickle

    from allowance.intake import tie_out
    from allowance.intake.results import Later

    path = tape(tmp_path, GOOD, CARD, with_field(GOOD.replace("L1", "L2"), "balance", "x"),
                with_field(GOOD.replace("L1", "L3"), "balance", "2500.25"))
    now = read_tape(path, config)
    later = read_tape(path, config, accepted_later=True)
    assert isinstance(later.__dict__["_accepted_held"], Later)
    assert later.rows_accepted == now.rows_accepted == 3 and later.rows_rejected == 1
    assert later.accepted_balance() == now.accepted_balance() == 1000.50 + 500 + 2500.25
    assert tie_out(later, 4000.0, 0.01) == tie_out(now, 4000.0, 0.01)
    assert isinstance(later.__dict__["_accepted_held"], Later)  # still not built
    copy = pickle.loads(pickle.dumps(later))  # pickled as the frame it builds
    pd.testing.assert_frame_equal(later.accepted, now.accepted)
    pd.testing.assert_frame_equal(copy.accepted, now.accepted)
    assert later.rows_accepted == 3
