"""The run record's clock: SOURCE_DATE_EPOCH pins every timestamp; a malformed value is refused."""

from __future__ import annotations

import json
from datetime import datetime, timezone

import pytest

from allowance.exceptions import AllowanceError
from allowance.report import clock, write_outputs
from tests.strategies import example_report

# 1790812800 s after 1970-01-01 UTC is 2026-10-01T00:00:00Z (computed with Python's datetime).
PINNED = "1790812800"


def test_source_date_epoch_is_the_reproducible_builds_convention():
    assert clock.now({"SOURCE_DATE_EPOCH": PINNED}) == datetime(2026, 10, 1, tzinfo=timezone.utc)
    assert clock.source_date_epoch({"SOURCE_DATE_EPOCH": ""}) is None
    for bad in ("-1", "1.5", "1e9", " 12", "soon", "999999999999999"):
        with pytest.raises(AllowanceError, match="SOURCE_DATE_EPOCH"):
            clock.now({"SOURCE_DATE_EPOCH": bad})


def test_unpinned_clock_is_utc_to_the_second():
    before = datetime.now(timezone.utc).replace(microsecond=0)
    t = clock.now({})
    assert t.tzinfo is timezone.utc and t.microsecond == 0 and t >= before


def test_run_json_timestamps_come_from_source_date_epoch(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", PINNED)
    write_outputs(tmp_path / "out", example_report())
    record = json.loads((tmp_path / "out" / "run.json").read_text())
    assert record["timestamp"] == record["started"] == "2026-10-01T00:00:00+00:00"


def test_the_run_record_is_a_pydantic_model():
    import pytest
    from pydantic import ValidationError

    from allowance.report import run_record
    from allowance.schemas import RunRecord

    report = example_report(20)
    record = run_record(report.config, report.intake, report.loans)
    model = RunRecord.model_validate(record)
    assert model.rows.read == model.rows.accepted + model.rows.rejected
    broken = dict(record, rows={"read": 5, "accepted": 3, "rejected": 1})
    with pytest.raises(ValidationError, match="must equal accepted"):
        RunRecord.model_validate(broken)
    # a CSV tape's lines: 1 header + rows read + blank + line breaks inside quoted values
    RunRecord.model_validate(dict(record, rows={"read": 5, "accepted": 5, "rejected": 0, "blank": 1, "lines": 9,
                                                "lines_in_values": 2}))
    with pytest.raises(ValidationError, match="1 header"):
        RunRecord.model_validate(dict(record, rows={"read": 5, "accepted": 5, "rejected": 0, "lines": 9}))
