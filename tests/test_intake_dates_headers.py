"""How a tape's headers are matched and its dates read, and that the date format is reported.

Expected outcomes are the tape contract of the README ("headers are matched ignoring case,
spaces and underscores"; dates ISO, or day-first / month-first when the file shows which):
common practice, no source.
"""

from __future__ import annotations

from pathlib import Path

from openpyxl import load_workbook

from allowance.intake import check_table, read_tape
from allowance.report import run_record

HEADER = "loan_id,segment,repayment,origination_date,maturity_date,balance,interest_rate,days_past_due"


def _tape(tmp_path: Path, header: str, *lines: str) -> Path:
    path = tmp_path / "tape.csv"
    path.write_text("\n".join([header, *lines]) + "\n", encoding="utf-8")
    return path


def test_headers_ignore_case_spaces_and_underscores(tmp_path, intake_config):
    header = "Loan ID,SEGMENT,Repayment,Origination Date,maturity date,Balance,Interest_Rate,Days Past Due"
    result = read_tape(_tape(tmp_path, header, "L1,retail,level,2024-01-15,2030-01-15,1000,0.065,0"), intake_config)
    assert result.rows_accepted == 1 and result.headers["loan_id"] == "Loan ID"
    assert result.accepted["days_past_due"].tolist() == [0]


def test_an_iso_tape_says_so(tmp_path, intake_config):
    result = read_tape(_tape(tmp_path, HEADER, "L1,retail,level,2024-01-15,2030-01-15,1000,0.065,0"), intake_config)
    assert result.date_formats == {"origination_date": "year first (YYYY-MM-DD)",
                                   "maturity_date": "year first (YYYY-MM-DD)"}


def test_a_month_first_column_is_reported(tmp_path, intake_config):
    # 01/31/2024 can only be month first: there is no month 31
    path = _tape(tmp_path, HEADER, "L1,retail,level,01/31/2024,01/31/2030,1000,0.065,0",
                 "L2,retail,level,02/03/2024,02/03/2030,500,0.065,0")
    result = read_tape(path, intake_config)
    form = result.date_formats["origination_date"]
    assert form.startswith("month first (MM/DD/YYYY)") and "'01/31/2024'" in form and "row 2" in form
    assert str(result.accepted["origination_date"].iloc[1].date()) == "2024-02-03"
    table = check_table(result)
    dates = table[table["section"] == "dates"]
    assert set(dates["code"]) == {"month_first"} and set(dates["column"]) == {"origination_date", "maturity_date"}
    assert run_record(intake_config, result, result.accepted)["date_formats"] == result.date_formats


def test_the_intake_sheet_shows_the_date_formats(tmp_path, intake_config):
    import dataclasses

    from allowance.report import write_workbook
    from tests.strategies import example_report

    path = _tape(tmp_path, HEADER, "L1,retail,level,31/01/2024,31/01/2030,1000,0.065,0")
    result = read_tape(path, intake_config)
    report = example_report(20)
    report = dataclasses.replace(report, intake=dataclasses.replace(report.intake, date_formats=result.date_formats))
    write_workbook(tmp_path / "r.xlsx", report)
    texts = [c.value for row in load_workbook(tmp_path / "r.xlsx")["Intake"].iter_rows() for c in row
             if isinstance(c.value, str)]
    assert any(t.startswith("day first (DD/MM/YYYY), inferred from '31/01/2024'") for t in texts)


def test_a_clean_iso_column_reads_the_same_by_arrow_and_by_its_bytes():
    # A column of nothing but YYYY-MM-DD dates is read by Arrow's cast; any other value sends
    # the column through the byte-wise reader. Both must give the same days, blanks, bad
    # values and reported format for every value: each value below alone in a column (with a
    # blank), read both ways. Calendar rules: proleptic Gregorian (leap years by 4, 100, 400),
    # dates pandas' nanosecond timestamps hold (1678 to 2261); common practice, no source.
    import itertools

    import numpy as np
    import pyarrow as pa

    from allowance.intake import parse

    years = ["2026", "2024", "2023", "2000", "1900", "0999", "0000", "1000", "9999", "1678", "1677", "2261",
             "2262", "20a6", "+026"]
    months = ["01", "02", "12", "13", "00", "1-", "9 "]
    days = ["28", "29", "30", "31", "00", "01", "1 "]
    values = [f"{y}{sep}{m}{sep}{d}" for y, m, d in itertools.product(years, months, days) for sep in "-/"]
    arrow_read = 0
    for value in values:
        column = pa.chunked_array([pa.array([value, None])])
        arrow_read += parse._arrow_iso(column.combine_chunks()) is not None
        fast = parse.parse_dates({"d": column}, None, "t.csv", np.arange(2, 4))["d"]
        real = parse._arrow_iso
        parse._arrow_iso = lambda array: None
        try:
            slow = parse.parse_dates({"d": column}, None, "t.csv", np.arange(2, 4))["d"]
        finally:
            parse._arrow_iso = real
        assert fast.values.tolist() == slow.values.tolist(), value
        assert fast.blank.tolist() == slow.blank.tolist() and fast.bad.tolist() == slow.bad.tolist(), value
        assert fast.form == slow.form, value
    assert arrow_read > 100  # the calendar dates among them: the comparison covers Arrow's path
