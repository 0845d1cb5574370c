"""A Parquet tape read part by part is the tape read whole: the same accepted frame, rejected
rows, findings and counts, however it is cut into row groups and files (an invariant of the
reader, common practice, no source)."""

from __future__ import annotations

import subprocess
import sys

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from allowance import intake
from tests.books import DEMO_ASSUMPTIONS, DEMO_TAPE

ROWS = 120
FRAME = pd.read_csv(DEMO_TAPE, dtype=str, keep_default_na=False, nrows=ROWS)
CONFIG = intake.load_assumptions(DEMO_ASSUMPTIONS)


@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(row_group=st.integers(5, ROWS), cut=st.integers(1, ROWS - 1), spoiled=st.sets(st.integers(0, ROWS - 1),
                                                                                      max_size=4),
       repeat=st.tuples(st.integers(0, ROWS - 1), st.integers(0, ROWS - 1)))
def test_parts_read_as_the_whole_tape(tmp_path_factory, row_group, cut, spoiled, repeat):
    folder = tmp_path_factory.mktemp("tape")
    frame = FRAME.copy()
    for row in spoiled:
        frame.loc[row, "days_past_due"] = "-3"
    frame.loc[repeat[1], "loan_id"] = frame.loc[repeat[0], "loan_id"]
    table = pa.Table.from_pandas(frame, preserve_index=False)
    pq.write_table(table, folder / "whole.parquet", row_group_size=row_group)
    (folder / "cut").mkdir()
    pq.write_table(table.slice(0, cut), folder / "cut" / "a.parquet", row_group_size=row_group)
    pq.write_table(table.slice(cut), folder / "cut" / "b.parquet", row_group_size=row_group)
    whole = intake.read_tape(folder / "whole.parquet", CONFIG)
    for source in (folder / "whole.parquet", folder / "cut"):
        parts = intake.read_parts(source, CONFIG)
        assert parts.rows_read == parts.rows_accepted + parts.rows_rejected == ROWS
        pd.testing.assert_frame_equal(parts.accepted, whole.accepted)
        named = [c for c in ("source_file", "file_row") if c in parts.rejected.columns]
        pd.testing.assert_frame_equal(parts.rejected.drop(columns=named), whole.rejected)
        pd.testing.assert_frame_equal(parts.findings.drop(columns=named), whole.findings)


@pytest.mark.slow
def test_check_names_a_bad_row_of_a_folder_by_its_file_and_its_row_in_the_tape(tmp_path):
    """``allowance check FOLDER``: exit 1, each rejected row named by its file, its row in that
    file and its row in the whole tape, and rejected.csv with ``source_file`` and ``file_row``.
    The row is data row 101 of the tape (index 100), the 41st of b.parquet (60 rows in a.parquet)."""
    frame = FRAME.copy()
    frame.loc[100, "balance"] = "n/a"
    table = pa.Table.from_pandas(frame, preserve_index=False)
    (tmp_path / "tape").mkdir()
    pq.write_table(table.slice(0, 60), tmp_path / "tape" / "a.parquet")
    pq.write_table(table.slice(60), tmp_path / "tape" / "b.parquet")
    done = subprocess.run([sys.executable, "-m", "allowance", "check", str(tmp_path / "tape"), "-a",
                           str(DEMO_ASSUMPTIONS), "--out", str(tmp_path / "out")],
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 1, done.stderr
    assert (f"{tmp_path / 'tape' / 'b.parquet'}: row 41 (row 101 of the tape, source_row 102 in rejected.csv): "
            "balance 'n/a' is not a number") in done.stdout
    rejected = pd.read_csv(tmp_path / "out" / "rejected.csv")
    assert rejected[["source_row", "source_file", "file_row"]].values.tolist() == [[102, "b.parquet", 41]]


def test_a_dataset_partitioned_into_column_folders_reads_as_the_tape_with_that_column(tmp_path):
    """A tape written partitioned by a column (pandas ``to_parquet(partition_cols=...)``, Arrow's
    and Spark's ``segment=auto/`` folders) keeps that column in the folder names, not in the
    files: read part by part, every row has it again, and the tape is the tape read whole,
    row for row (in the dataset's order), its counts and its rejected row (named by its file
    in the folder). Before, the run stopped with "missing required column: 'segment'" (found
    by hand). Folder names as pandas/Arrow write them: common practice, no source."""
    from allowance.exceptions import TapeError

    frame = FRAME.copy()
    frame.loc[7, "days_past_due"] = "-3"
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), tmp_path / "whole.parquet")
    frame.to_parquet(tmp_path / "by_segment", partition_cols=["segment"], index=False)
    whole = intake.read_tape(tmp_path / "whole.parquet", CONFIG)
    parts = intake.read_parts(tmp_path / "by_segment", CONFIG)
    assert (parts.rows_read, parts.rows_accepted, parts.rows_rejected) == (ROWS, whole.rows_accepted, 1)

    def by_id(accepted):
        return accepted.drop(columns="source_row").sort_values("loan_id").reset_index(drop=True)

    pd.testing.assert_frame_equal(by_id(parts.accepted)[list(by_id(whole.accepted).columns)], by_id(whole.accepted))
    bad = parts.rejected.iloc[0]
    assert bad["loan_id"] == FRAME.loc[7, "loan_id"] and "days_past_due" in bad["reasons"]
    assert bad["source_file"].startswith(f"segment={FRAME.loc[7, 'segment']}/")

    # the column both in a file and in its folder's name, or files partitioned unlike each other: refused, named
    frame.iloc[:10].to_parquet(tmp_path / "by_segment" / "segment=auto" / "extra.parquet", index=False)
    with pytest.raises(TapeError, match="named like a folder"):
        intake.read_parts(tmp_path / "by_segment", CONFIG)
    (tmp_path / "by_segment" / "segment=auto" / "extra.parquet").unlink()
    frame.drop(columns="segment").iloc[:10].to_parquet(tmp_path / "by_segment" / "loose.parquet", index=False)
    with pytest.raises(TapeError, match="partitioned by the same columns"):
        intake.read_parts(tmp_path / "by_segment", CONFIG)


@pytest.mark.parametrize("part_rows", [7, 50, 64])
def test_a_row_group_longer_than_a_part_is_read_as_several_the_same_rows(part_rows, tmp_path, monkeypatch):
    """pandas and pyarrow write up to 1,048,576 rows in one row group: such a group is read as
    parts of ``PART_ROWS`` rows (here a few, the tape's row groups 50 long), so that a cluster
    spreads it and a worker holds a part. Found by hand: a million loans in one row group were
    computed by one of two workers (1.6 GB peak; the other idle). The parts read the tape read
    whole, row for row, with the rows numbered in the tape."""
    from allowance.intake import parts as parts_module

    monkeypatch.setattr(parts_module, "PART_ROWS", part_rows)
    frame = FRAME.copy()
    frame.loc[57, "days_past_due"] = "-3"
    path = tmp_path / "tape.parquet"
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), path, row_group_size=50)
    layout = parts_module.tape_layout(path, 100)
    expected = [r for g in (50, 50, 20) for r in [part_rows] * (g // part_rows) + ([g % part_rows] if g % part_rows else [])]
    assert [p.rows for p in layout.parts] == expected
    assert [p.first_row for p in layout.parts] == [sum(expected[:i]) for i in range(len(expected))]
    whole = intake.read_tape(path, CONFIG)
    parts = intake.read_parts(path, CONFIG)
    assert (parts.rows_read, parts.rows_rejected) == (ROWS, 1)
    pd.testing.assert_frame_equal(parts.accepted, whole.accepted)
    pd.testing.assert_frame_equal(parts.rejected, whole.rejected)
