"""The calibration's files: a TOML file that reads back to the draft, policy rules, safe writing."""

from __future__ import annotations

import tomllib

import pytest

from allowance.calibrate import calibrate
from allowance.exceptions import AssumptionsError
from allowance.intake import load_assumptions
from allowance.report import calibration as writer
from tests.histories import markov_history, write_csv
from tests.test_calibrate_roll_rates import TRUE

SETTINGS = {"charge_off_dpd": {"book": 120}, "lgd_workout_months": 1}


@pytest.fixture(scope="module")
def history(tmp_path_factory):
    truth = markov_history(TRUE, 120, 1_500, 10, seed=9)
    return write_csv(truth.frame, tmp_path_factory.mktemp("h") / "history.csv")


def test_the_toml_reads_back_to_the_draft_and_explains_every_estimate(history, tmp_path):
    cal = calibrate(history, SETTINGS)
    text = writer.render_assumptions(cal)
    parsed = tomllib.loads(text)
    assert parsed["segments"] == cal.assumptions.data["segments"]
    lines = text.splitlines()
    for key in cal.assumptions.data["segments"]["book"]:
        at = next(i for i, line in enumerate(lines) if line.startswith(f"{key} ") or line.startswith(f"[segments.book.{key}]"))
        assert "#" in lines[at] or lines[at - 1].startswith("#") or lines[at + 1].startswith("#"), key
    paths = writer.write_calibration(tmp_path / "out", cal)
    assert paths[-1].name == "calibration.json"
    assert load_assumptions(tmp_path / "out" / "assumptions.toml").assumptions.segments["book"].pd_source == "pd_12m"


def test_a_policy_value_overrides_the_estimate_and_says_so(history):
    cal = calibrate(history, SETTINGS, {"segments": {"book": {"lgd": 0.5, "retail_class": "other_retail"}}})
    assert cal.assumptions.data["segments"]["book"]["lgd"] == 0.5
    text = writer.render_assumptions(cal)
    line = next(line for line in text.splitlines() if line.startswith("lgd = 0.5") or "estimated" in line)
    assert "policy" in text and "estimated" in text, line
    assert any(c.source == "policy" and c.topic == "segments.book.lgd" for c in cal.choices)


@pytest.mark.parametrize(("policy", "where"), [
    ({"segments": {"book": {"pd_12m": 0.02}}}, "segments.book.pd_12m"),
    ({"segments": {"boats": {"lgd": 0.2}}}, "segments.boats"),
    ({"senarios": {}}, "senarios"),
    ({"scenarios": {"base": {"weight": 0.5}}}, None),
    ({"calibration": {"window_months": 0}}, "calibration.window_months"),
])
def test_a_bad_policy_is_named(history, policy, where):
    with pytest.raises(AssumptionsError) as caught:
        calibrate(history, SETTINGS if "calibration" not in policy else {}, policy)
    if where:
        assert where in str(caught.value)


def test_writing_is_all_or_nothing(history, tmp_path, monkeypatch):
    cal = calibrate(history, SETTINGS)
    out = tmp_path / "out"
    writer.write_calibration(out, cal)
    (out / "notes.txt").write_text("mine")
    before = (out / "assumptions.toml").read_bytes()

    def broken(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr("allowance.report.calibration_workbook.write_calibration_workbook", broken)
    with pytest.raises(Exception, match="cannot write the outputs"):
        writer.write_calibration(out, cal)
    assert (out / "assumptions.toml").read_bytes() == before and (out / "notes.txt").read_text() == "mine"
    assert not [p for p in tmp_path.iterdir() if ".partial-" in p.name]
