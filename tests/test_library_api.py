"""The library API: allowance.run / allowance.check with frames and mappings in, frames out.

The command line is wiring over these functions, so the demo through them must give the
command line's figures to the cent (common practice, no source: the same computation).
"""

from __future__ import annotations

from collections.abc import Callable
import json
import tomllib

import numpy as np
import pandas as pd
import pytest

import allowance
from allowance.exceptions import InputFileError
from allowance.intake.results import Later
from tests import books

#: the public names of ``import allowance``; adding one is fine, removing or renaming one
#: breaks users' notebooks and must be a decision made here
PUBLIC = {"AllowanceError", "CheckResult", "Result", "__version__", "check", "compare", "copy_templates", "demo",
          "roll_rates", "run", "schedule"}


def test_the_public_api_is_pinned():
    assert PUBLIC <= set(allowance.__all__)
    for name in allowance.__all__:
        assert getattr(allowance, name) is not None


def test_import_allowance_loads_no_heavy_library():
    import subprocess
    import sys

    code = ("import sys, allowance; heavy = [m for m in ('numpy', 'pandas', 'numba') if m in sys.modules]; "
            "print(','.join(heavy))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, timeout=120)
    assert done.stdout.strip() == ""


def _tape_frame() -> pd.DataFrame:
    return pd.read_csv(books.DEMO_TAPE, dtype=str, keep_default_na=False)


def _assumptions_mapping() -> dict:
    data = tomllib.loads(books.DEMO_ASSUMPTIONS.read_text(encoding="utf-8"))
    # the roll-rate matrix inline, as a frame: from-states in a 'from' column
    data["segments"]["cards"]["transition_matrix"] = pd.read_csv(books.DEMO / data["segments"]["cards"]["transition_matrix"])
    return data


@pytest.fixture(scope="module")
def from_files():
    return allowance.run(books.DEMO_TAPE, books.DEMO_ASSUMPTIONS, sensitivities=False)


@pytest.mark.slow
def test_frames_and_mappings_give_the_files_result(from_files):
    from_frames = allowance.run(_tape_frame(), _assumptions_mapping(), sensitivities=False)
    shared = [c for c in from_files.loans.columns if c in from_frames.loans.columns]
    money = [c for c in shared if c.startswith(("ecl_", "ead", "overlay_")) or c == "balance"]
    pd.testing.assert_frame_equal(from_frames.loans[money], from_files.loans[money], check_exact=True)
    assert from_frames.record["inputs"][0]["path"] == "<DataFrame>"
    assert {i["path"] for i in from_frames.record["inputs"]} >= {"<DataFrame>", "<assumptions mapping>"}


@pytest.mark.slow
def test_assumptions_as_the_object_load_assumptions_returns(from_files):
    """A notebook user who loaded (and perhaps edited) the assumptions passes the object itself:
    the same figures as the file, checked again on the way in; anything else is named."""
    config = allowance.intake.load_assumptions(books.DEMO_ASSUMPTIONS)
    for given in (config, config.assumptions):
        again = allowance.run(books.DEMO_TAPE, given, sensitivities=False)
        assert again.totals.equals(from_files.totals)
    edited = config.assumptions.model_copy(update={"run": config.assumptions.run.model_copy(update={"label": "edited"})})
    assert allowance.check(books.DEMO_TAPE, edited).intake.rows_accepted == from_files.report.intake.rows_accepted
    with pytest.raises(TypeError, match="a path to a TOML file, a mapping in its shape, or an Assumptions"):
        allowance.run(books.DEMO_TAPE, 42)


def test_totals_by_framework_stage_and_segment(from_files):
    totals = from_files.totals
    loans = from_files.loans
    for fw in ("ifrs9", "cecl"):
        mine = totals[totals["framework"] == fw]
        whole = mine[(mine["stage"] == "Total") & (mine["segment"] == "Total")].iloc[0]
        # the sum of the rounded loan figures, in whole cents
        assert round(whole["allowance"] * 100) == int(np.rint(loans[f"ecl_{fw}"] * 100).sum())
        assert whole["loans"] == len(loans)
        cells = mine[(mine["stage"] != "Total") | (mine["segment"] != "Total")]
        detail = cells[cells["segment"] != "Total"]
        assert round(detail["allowance"].sum() * 100) == round(whole["allowance"] * 100)
    ifrs9 = totals[(totals["framework"] == "ifrs9") & (totals["segment"] == "Total") & (totals["stage"] != "Total")]
    assert list(ifrs9["stage"]) == ["1", "2", "3", "POCI"]  # POCI its own class (IFRS 7 35H(c))
    cecl = totals[totals["framework"] == "cecl"]
    assert set(cecl["stage"]) == {"Total"}  # CECL does not stage loans


def test_readable_in_a_notebook(from_files):
    text = repr(from_files)
    assert "as of 2026-09-30" in text and "IFRS 9" in text and "CECL" in text
    page = from_files._repr_html_()
    assert page.startswith("<div>") and "<table" in page and "Allowance as of 2026-09-30" in page


@pytest.mark.slow
def test_write_and_workbook(from_files, tmp_path):
    written = from_files.write(tmp_path / "q3")
    assert {p.name for p in written} >= {"loans.csv", "reserve.xlsx", "run.json", "rejected.csv"}
    record = json.loads((tmp_path / "q3" / "run.json").read_text())
    assert record["total_allowance"]["ifrs9"] == from_files.record["total_allowance"]["ifrs9"]
    book = from_files.workbook(tmp_path / "alone.xlsx")
    assert book.is_file() and book.stat().st_size > 0


def test_check_with_a_frame():
    frame = _tape_frame()
    frame.loc[3, "balance"] = "-5"
    checked = allowance.check(frame, books.DEMO_ASSUMPTIONS)
    assert not checked.ok
    assert list(checked.rejected["source_row"]) == [5]  # row n of a frame is line n + 1 after a header
    assert "balance" in checked.rejected["reasons"].iloc[0]
    assert "problems" in repr(checked) and "<table" in checked._repr_html_()


@pytest.mark.slow
def test_prior_and_charge_offs_as_objects(from_files, tmp_path):
    m = books.MANIFEST
    before = allowance.run(books.DEMO / m["prior"]["tape"], books.DEMO / m["prior"]["assumptions"], sensitivities=False)
    charge_offs = pd.read_csv(books.DEMO / m["current"]["charge_offs"], dtype={"loan_id": str})
    now = allowance.run(books.DEMO_TAPE, books.DEMO_ASSUMPTIONS, prior=before, charge_offs=charge_offs,
                        sensitivities=False)
    for fw, mv in now.movement.items():
        table = mv.allowance.set_index("line")["total"]
        assert round(table["opening"] * 100) == round(before.record["total_allowance"][fw] * 100)
        assert round(table["closing"] * 100) == round(now.record["total_allowance"][fw] * 100)


@pytest.mark.slow
def test_a_run_with_a_prior_reads_its_accepted_rows_again_when_asked(from_files, tmp_path):
    # the tape's accepted rows are let go before the movement is made (the movement's loan
    # lines are held through the writing instead) and read again from the file when asked for:
    # the frame a run without a prior keeps (pandas' assert_frame_equal), or a named error
    # when the file has changed since
    m = books.MANIFEST
    tape = tmp_path / "tape.csv"
    tape.write_bytes(books.DEMO_TAPE.read_bytes())
    before = allowance.run(books.DEMO / m["prior"]["tape"], books.DEMO / m["prior"]["assumptions"], sensitivities=False)
    now = allowance.run(tape, books.DEMO_ASSUMPTIONS, prior=before, sensitivities=False)
    assert isinstance(now.intake.__dict__["_accepted_held"], Later)  # let go, not yet read again
    assert now.intake.rows_accepted == len(from_files.intake.accepted)
    assert now.intake.accepted_balance() == from_files.intake.accepted_balance()
    pd.testing.assert_frame_equal(now.intake.accepted, from_files.intake.accepted)
    changed = allowance.run(tape, books.DEMO_ASSUMPTIONS, prior=before, sensitivities=False)
    tape.write_bytes(books.DEMO_TAPE.read_bytes() + b"\n")
    with pytest.raises(InputFileError, match="changed since the run read it"):
        _ = changed.intake.accepted


def test_a_prior_folder_read_beside_the_tape_reports_its_errors_in_turn(tmp_path):
    # the prior run's folder is read on a thread while the tape is read and computed: a tape
    # refused against the ledger is still the error a run reports first, and a missing prior
    # folder is then named as before
    part = _tape_frame().head(200)
    missing = tmp_path / "no-such-run"
    with pytest.raises(allowance.AllowanceError, match="ledger"):
        allowance.run(part, books.DEMO_ASSUMPTIONS, sensitivities=False, prior=missing)
    with pytest.raises(InputFileError, match="prior run folder was not found") as info:
        allowance.run(part, books.DEMO_ASSUMPTIONS, sensitivities=False, prior=missing,
                      accept_ledger_difference=True)
    assert "no-such-run" in str(info.value)


def test_progress_is_told_and_a_partial_tape_must_be_accepted_against_the_ledger():
    part = _tape_frame().head(200)
    with pytest.raises(allowance.AllowanceError, match="ledger"):
        allowance.run(part, books.DEMO_ASSUMPTIONS, sensitivities=False)
    calls = []
    allowance.run(part, books.DEMO_ASSUMPTIONS, sensitivities=False, accept_ledger_difference=True,
                  chunk_size=64, progress=lambda phase, done, total: calls.append((phase, done, total)))
    phases = [c[0] for c in calls]
    assert phases[0] == "read" and "loans" in phases
    assert [c for c in calls if c[0] == "loans"] == [("loans", d, 200) for d in (64, 128, 192, 200)]


def _totals_by_pandas(loans: pd.DataFrame, fw: str, staged: bool) -> list[tuple]:
    """The totals of one framework by a pandas group-by on the text labels (the reference)."""
    frame = loans.assign(
        stage_text=np.where(loans["poci"], "POCI", loans["stage"].astype("Int64").astype(str)) if staged else "Total",
        cents=np.rint(loans["balance"] * 100).astype(np.int64), allow=np.rint(loans[f"ecl_{fw}"] * 100).astype(np.int64),
        n=1)
    if staged:
        frame = frame[loans["stage"].notna() | loans["poci"]]
    rows = []
    cells = frame.dropna(subset=["segment"]).groupby(["stage_text", "segment"], sort=True)[["n", "cents", "allow"]].sum()
    rows += [(s, g, n, c / 100, a / 100) for (s, g), (n, c, a) in zip(cells.index, cells.to_numpy().tolist())]
    if staged:
        stages = frame.groupby("stage_text", sort=True)[["n", "cents", "allow"]].sum()
        rows += [(s, "Total", n, c / 100, a / 100) for s, (n, c, a) in zip(stages.index, stages.to_numpy().tolist())]
    all_cents = np.rint(loans["balance"] * 100).astype(np.int64)
    rows.append(("Total", "Total", len(loans), int(all_cents.sum()) / 100,
                 int(np.rint(loans[f"ecl_{fw}"] * 100).astype(np.int64).sum()) / 100))
    return rows


@pytest.mark.parametrize("stage_dtype", ["int8", "Int64", "float64"])
def test_totals_table_equals_a_group_by_on_the_labels(stage_dtype):
    """totals_table counts its cells on codes; a pandas group-by on the text labels (pandas's
    own sort and sums) gives the same rows, in the same order, to the cent, on a book with
    blank and odd segment names, a missing segment, POCI loans and (where the dtype allows) a
    missing stage."""
    from allowance.result import totals_table

    rng = np.random.default_rng(7)
    n = 4_000
    names = np.array(["auto", "", " card", "Zeta", "ärger", "10", "9", "auto "], dtype=object)
    segment = pd.Series(names[rng.integers(0, len(names), n)], dtype="str")
    segment[rng.random(n) < 0.01] = None
    stage = pd.Series(rng.integers(1, 4, n)).astype(stage_dtype)
    if stage_dtype != "int8":
        stage[rng.random(n) < 0.02] = None
    loans = pd.DataFrame({"segment": segment, "stage": stage, "poci": rng.random(n) < 0.05,
                          "balance": np.round(rng.random(n) * 1e5, 2),
                          "ecl_ifrs9": np.round(rng.random(n) * 1e3 - 10, 2), "ecl_cecl": np.round(rng.random(n) * 1e3, 2)})
    table = totals_table(loans, ["ifrs9", "cecl"])
    for fw, staged in (("ifrs9", True), ("cecl", False)):
        mine = table[table["framework"] == fw]
        got = list(zip(mine["stage"], mine["segment"], mine["loans"], mine["balance"], mine["allowance"]))
        assert got == _totals_by_pandas(loans, fw, staged)


def test_a_movement_between_two_currencies_is_refused_and_a_framework_the_prior_lacks_is_said(tmp_path):
    """Opening and closing in different currencies would be added as one number: refused (the
    prior folder's run.json is read before the run computes); a framework the prior run did not
    compute has no movement, and the run says so (common practice, no source)."""
    part = _tape_frame().head(200)
    euros = _assumptions_mapping()
    euros["run"] = {**euros["run"], "currency": "EUR", "frameworks": ["ifrs9"]}
    before = allowance.run(part, euros, sensitivities=False, accept_ledger_difference=True)
    before.write(tmp_path / "prior")
    with pytest.raises(allowance.AllowanceError, match=r"prior run's amounts are in EUR and this run's in USD") as info:
        allowance.run(part, books.DEMO_ASSUMPTIONS, sensitivities=False, accept_ledger_difference=True,
                      prior=tmp_path / "prior")
    assert str(tmp_path / "prior" / "run.json") in str(info.value)
    now = allowance.run(part, books.DEMO_ASSUMPTIONS, sensitivities=False, accept_ledger_difference=True)
    with pytest.raises(allowance.AllowanceError, match="a movement needs both in one currency"):
        allowance.compare(tmp_path / "prior", now)
    dollars = _assumptions_mapping()
    dollars["run"] = {**dollars["run"], "frameworks": ["ifrs9"]}
    then = allowance.run(part, dollars, sensitivities=False, accept_ledger_difference=True)
    moved = allowance.run(part, books.DEMO_ASSUMPTIONS, sensitivities=False, accept_ledger_difference=True, prior=then)
    assert list(moved.movement) == ["ifrs9"]
    assert any(w.startswith("no CECL movement: the prior run did not compute cecl") for w in moved.warnings)


def _prior_under(change: Callable[[dict], None] | None, part: pd.DataFrame) -> allowance.Result:
    """Last quarter's demo loans run under this quarter's assumptions at last quarter's date,
    with its own label and ledger balance, then ``change`` applied to them."""
    m = books.MANIFEST
    data = _assumptions_mapping()
    data["run"] = {**data["run"], "as_of": "2026-06-30", "label": "the quarter before", "ledger_balance": 1.0}
    if change is not None:
        change(data)
    prior_tape = pd.read_csv(books.DEMO / m["prior"]["tape"], dtype=str, keep_default_na=False)
    return allowance.run(prior_tape[prior_tape["loan_id"].isin(part["loan_id"])], data, sensitivities=False,
                         accept_ledger_difference=True)


def _reweigh(data: dict) -> None:
    names = list(data["scenarios"])
    data["scenarios"][names[0]]["weight"] += 0.1
    data["scenarios"][names[-1]]["weight"] -= 0.1


def _relgd(data: dict) -> None:
    data["segments"]["personal"]["lgd"] = 0.5


@pytest.mark.parametrize("change, how", [(None, "this run's own"), (_reweigh, "this run's pass weighted again"),
                                         (_relgd, "this run's pass, each chunk computed at the prior")],
                         ids=["same model", "other weights", "other LGD"])
def test_the_movement_at_prior_assumptions_needs_no_second_pass(change, how, monkeypatch):
    """The movement's split between remeasurement and assumption changes needs this tape at the
    prior run's assumptions. When those differ from this run's only in what reaches no
    modelled figure (label, ledger balance) the figures are this run's own; when only in the
    scenario weights, they are weighted again in the same pass; otherwise each chunk of the
    pass is computed at the prior tables too. Reference: the same run with the second pass
    forced (engine.modelled), whose movement must be the same to the cent, loan by loan; no
    run but the forced one makes a second pass."""
    from allowance import api, engine

    part = _tape_frame().iloc[::5]
    before = _prior_under(change, part)
    calls = []
    real = engine.modelled
    monkeypatch.setattr(engine, "modelled", lambda *a, **k: calls.append(1) or real(*a, **k))
    now = allowance.run(part, books.DEMO_ASSUMPTIONS, prior=before, sensitivities=False, accept_ledger_difference=True)
    assert not calls
    monkeypatch.setattr(engine, "same_model", lambda *a: False)
    monkeypatch.setattr(engine, "only_weights_differ", lambda *a: False)
    monkeypatch.setattr(api, "_PRIOR_IN_THE_SAME_PASS", False)
    forced = allowance.run(part, books.DEMO_ASSUMPTIONS, prior=before, sensitivities=False,
                           accept_ledger_difference=True)
    assert len(calls) == 1
    assert list(now.movement) == list(forced.movement) == ["ifrs9", "cecl"]
    for fw, moved in now.movement.items():
        pd.testing.assert_frame_equal(moved.to_long(), forced.movement[fw].to_long())
        pd.testing.assert_frame_equal(moved.loans, forced.movement[fw].loans)
    assert not any("could not be applied" in w for w in now.warnings)
    pd.testing.assert_frame_equal(now.loans, forced.loans)
    assert now.record["at_prior_assumptions"].startswith(how)  # the run record says how they were made
    assert forced.record["at_prior_assumptions"].startswith("a second pass")
    lines = now.movement["cecl"].to_long()
    changed = lines.loc[lines["line"].str.contains("assumption", case=False), "amount"].abs().sum()
    assert (changed > 0) == (change is not None)  # the same model moves nothing by its assumptions


@pytest.mark.parametrize("what_if", ["[scenarios.base]\nweight = 0.0\n[scenarios.upside]\nweight = 0.0\n"
                                     "[scenarios.downside]\nweight = 1.0\n",
                                     "[segments.personal]\nlgd = 0.5\n"], ids=["other weights", "other LGD"])
def test_a_what_if_and_a_prior_at_other_weights_each_get_their_own_figures(what_if, tmp_path, monkeypatch):
    """A what-if beside a prior run whose model differs from the what-if's only in its weights
    (weighted again in this run's pass): the what-if's base is weighted again in the same pass
    too (other weights) or computed again (other LGD). Each must get its own figures: the
    what-if's comparison that of a run without a prior, the movement that of the second pass
    forced."""
    from allowance import api, engine

    (tmp_path / "what_if.toml").write_text(what_if, encoding="utf-8")
    part = _tape_frame().iloc[::7]
    before = _prior_under(_reweigh if "weight" in what_if else (lambda d: (_reweigh(d), _relgd(d))), part)
    both = allowance.run(part, books.DEMO_ASSUMPTIONS, overlays=[tmp_path / "what_if.toml"], prior=before,
                         sensitivities=False, accept_ledger_difference=True)
    what_if_alone = allowance.run(part, books.DEMO_ASSUMPTIONS, overlays=[tmp_path / "what_if.toml"],
                                  sensitivities=False, accept_ledger_difference=True)
    pd.testing.assert_frame_equal(both.report.what_if_parts.summary, what_if_alone.report.what_if_parts.summary)
    monkeypatch.setattr(engine, "same_model", lambda *a: False)
    real = engine.only_weights_differ
    # the prior's shortcut only is switched off (its configuration carries the prior run's label)
    monkeypatch.setattr(engine, "only_weights_differ",
                        lambda one, other: real(one, other) and one.assumptions.run.label != "the quarter before")
    monkeypatch.setattr(api, "_PRIOR_IN_THE_SAME_PASS", False)
    forced = allowance.run(part, books.DEMO_ASSUMPTIONS, overlays=[tmp_path / "what_if.toml"], prior=before,
                           sensitivities=False, accept_ledger_difference=True)
    for fw, moved in both.movement.items():
        pd.testing.assert_frame_equal(moved.loans, forced.movement[fw].loans)


@pytest.mark.parametrize("change", [None, _relgd], ids=["same model", "other LGD"])
def test_compare_isolates_the_assumption_lines_when_the_prior_model_is_the_current_one(change):
    """``compare`` has no tape to rerun at the prior assumptions, so it puts assumption changes
    into remeasurement and says so. When the two runs' records hold the same model (weights
    included) the current run's own modelled figures are that rerun: the lines are isolated,
    and the movement is the one ``run --prior`` gives, loan by loan (reference: run --prior,
    whose shortcut the test above holds to the second pass). With another LGD nothing changes."""
    part = _tape_frame().iloc[::9]
    before = _prior_under(change, part)
    moved = allowance.run(part, books.DEMO_ASSUMPTIONS, prior=before, sensitivities=False,
                          accept_ledger_difference=True)
    now = allowance.run(part, books.DEMO_ASSUMPTIONS, sensitivities=False, accept_ledger_difference=True)
    compared = allowance.compare(before, now)
    for fw, movement in compared.items():
        labels = movement.to_long()["label"].drop_duplicates().tolist()
        if change is None:
            pd.testing.assert_frame_equal(movement.loans, moved.movement[fw].loans)
            assert not any("not isolated" in str(label) for label in labels)
        else:
            assert any("not isolated" in str(label) for label in labels)


def test_assumptions_given_as_a_mapping_name_their_keys_as_keys():
    """An assumptions mapping missing keys is named by its keys, as a TOML file's are (found by
    hand: the message said "column run.frameworks", the word for a CSV's columns)."""
    from allowance.exceptions import AssumptionsError

    with pytest.raises(AssumptionsError) as missing:
        allowance.run(books.DEMO_TAPE, {"run": {"as_of": "2026-09-30"}})
    said = str(missing.value)
    assert said.startswith("<assumptions mapping>: key run.frameworks: required key 'frameworks' is missing")
    assert "column" not in said
