"""Reading a performance history: every row accepted or rejected with its line and reason,
the same in CSV and Parquet, the same in memory and spilled to disk."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from allowance.calibrate import estimate
from allowance.exceptions import HistoryError, InputFileError
from allowance.intake.performance import HISTORY_CODES, read_history
from tests.histories import markov_history, write_csv, write_parquet
from tests.test_calibrate_roll_rates import TRUE

GOOD = "loan_id,segment,month,balance,days_past_due,charge_off,paid_off,origination_date\n"


def _read(tmp_path, text: str, name: str = "h.csv", **options):
    path = tmp_path / name
    path.write_text(text)
    return read_history(path, **options)


def test_each_bad_row_is_rejected_with_its_line_and_reason(tmp_path):
    text = GOOD + "\n".join([
        "A,auto,2026-01,100,0,,,2025-01-01",           # 2 good
        "A,auto,2026-13,100,0,,,2025-01-01",           # 3 month 13
        ",auto,2026-02,100,0,,,2025-01-01",            # 4 blank loan_id
        "B,auto,2026-01,-5,0,,,2025-01-01",            # 5 negative balance
        "B,auto,2026-02,5,2.5,,,2025-01-01",           # 6 fractional days past due
        "B,auto,2026-03,5,x,,,2025-01-01",             # 7 not a number
        "C,auto,2026-01,0,0,100,yes,2025-01-01",       # 8 paid off and written off
        "C,auto,2026-02,10,0,,maybe,2025-01-01",       # 9 not a boolean
        "D,auto,2026-01,10,0,,,2026-03-01",            # 10 originated after the month
        "E,auto,2026-01,10,0,,true,2025-01-01",        # 11 paid off with a balance: a warning only
        "F,auto,2026-01,10,99999,,,2025-01-01",        # 12 days past due above 100 years
    ]) + "\n"
    with _read(tmp_path, text) as h:
        assert h.rows_read == 11 == h.rows_accepted + h.rows_rejected
        codes = dict(zip(h.rejected["source_row"], h.rejected["reason_codes"]))
        assert codes == {
            3: "bad_date", 4: "missing_value", 5: "out_of_range", 6: "not_whole_number", 7: "bad_number",
            8: "paid_off_and_written_off", 9: "bad_boolean", 10: "origination_after_month", 12: "out_of_range",
        }
        assert set(h.findings["code"]) <= set(HISTORY_CODES)
        warning = h.findings[h.findings["severity"] == "warning"]
        assert warning["source_row"].tolist() == [11] and warning["code"].tolist() == ["paid_off_with_balance"]
        assert h.rejected.loc[h.rejected["source_row"] == 3, "month"].iloc[0] == "2026-13"  # as written
        assert "2026-13" in h.rejected.loc[h.rejected["source_row"] == 3, "reasons"].iloc[0]


def test_malformed_lines_blank_lines_and_line_breaks_in_quotes_keep_exact_line_numbers(tmp_path):
    text = GOOD + 'A,auto,2026-01,100,0,,,\n\n"B\nB",auto,2026-01,100,0,,,\nC,auto,2026-01\nD,auto,2026-01,1,0,,,\n'
    with _read(tmp_path, text) as h:
        assert h.rows_read == 4 and h.blank_rows == 1
        assert h.rejected["source_row"].tolist() == [6]
        assert h.rejected["reason_codes"].tolist() == ["wrong_field_count"]
        assert h.rows_accepted == 3


def test_a_loan_month_given_twice_is_rejected_in_every_copy_as_written(tmp_path):
    text = GOOD + "\n".join([
        "A,auto,2026-01,100,0,,,", "A,auto,2026-02,90,0,,,", "A,auto,2026-01-31,101,0,,,", "B,auto,2026-01,5,0,,,",
    ]) + "\n"
    with _read(tmp_path, text) as h:
        assert h.rows_read == 4 and h.rows_accepted == 2 and h.rows_rejected == 2
        rejected = h.rejected.sort_values("source_row")
        assert rejected["source_row"].tolist() == [2, 4]
        assert rejected["reason_codes"].tolist() == ["repeated_loan_month"] * 2
        assert rejected["month"].tolist() == ["2026-01", "2026-01-31"]  # exactly as read
        assert "row 4" in rejected["reasons"].iloc[0] and "row 2" in rejected["reasons"].iloc[1]


@pytest.mark.parametrize("month", ["2026-09", "2026-09-30", "2026-09-15", "30/09/2026"])
def test_a_month_is_read_from_its_month_end_date_or_year_and_month(tmp_path, month):
    with _read(tmp_path, GOOD + f"A,auto,{month},1,0,,,\n") as h:
        assert (h.first_month, h.last_month) == ("2026-09", "2026-09")


def test_required_columns_are_named_when_missing(tmp_path):
    with pytest.raises(HistoryError, match="days_past_due"):
        _read(tmp_path, "loan_id,segment,month,balance,dpd\nA,a,2026-01,1,0\n")
    with _read(tmp_path, "loan_id,segment,month,balance,dpd\nA,a,2026-01,1,0\n",
               columns={"days_past_due": "DPD"}) as h:
        assert h.rows_accepted == 1 and h.columns["days_past_due"] == "dpd"
    with pytest.raises(HistoryError, match="no data rows"):
        _read(tmp_path, GOOD)


def test_a_workbook_is_refused_with_the_way_out(tmp_path):
    import openpyxl

    book = openpyxl.Workbook()
    book.active.append(["loan_id"])
    book.save(tmp_path / "h.xlsx")
    with pytest.raises(InputFileError, match="CSV or Parquet"):
        read_history(tmp_path / "h.xlsx")


def test_typed_parquet_reads_like_its_csv(tmp_path):
    truth = markov_history(TRUE, 120, 400, 8, seed=3)
    frame = truth.frame.assign(origination_date="2021-06-30")
    csv_path = write_csv(frame, tmp_path / "h.csv")
    typed = pa.table({
        "loan_id": pa.array(frame["loan_id"]).dictionary_encode(),
        "segment": pa.array(frame["segment"]).dictionary_encode(),
        "month": pa.array(pd.to_datetime(frame["month"]).dt.date, pa.date32()),
        "balance": pa.array(frame["balance"]),
        "days_past_due": pa.array(frame["days_past_due"], pa.int16()),
        "charge_off": pa.array(frame["charge_off"], from_pandas=True),
        "paid_off": pa.array(frame["paid_off"]),
        "origination_date": pa.array(pd.to_datetime(frame["origination_date"]), pa.timestamp("ms")),
    })
    pq.write_table(typed, tmp_path / "h.parquet", row_group_size=500)
    a = estimate(csv_path, {"charge_off_dpd": {"book": 120}})
    b = estimate(tmp_path / "h.parquet", {"charge_off_dpd": {"book": 120}})
    assert a.intake.rows_read == b.intake.rows_read == len(frame)
    assert np.array_equal(a.roll_rates.segments["book"].counts, b.roll_rates.segments["book"].counts)
    pd.testing.assert_frame_equal(a.loss_rates.table, b.loss_rates.table)


def test_a_spilled_history_gives_the_same_estimates_as_one_in_memory(tmp_path):
    truth = markov_history(TRUE, 120, 3_000, 12, seed=5)
    path = write_parquet(truth.frame, tmp_path / "h.parquet")
    settings = {"charge_off_dpd": {"book": 120}}
    whole = estimate(path, settings)
    spilled = estimate(path, settings, memory_rows=1_000, spill_dir=tmp_path)
    assert spilled.intake.panel.partitions > 1 and whole.intake.panel.partitions == 1
    assert np.array_equal(whole.roll_rates.segments["book"].counts, spilled.roll_rates.segments["book"].counts)
    pd.testing.assert_frame_equal(whole.loss_rates.table, spilled.loss_rates.table)
    pd.testing.assert_frame_equal(whole.cohorts.by_bucket, spilled.cohorts.by_bucket)
    assert not any(p.name.startswith("allowance-panel-") for p in tmp_path.iterdir())  # spill files removed
