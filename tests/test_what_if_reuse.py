"""A what-if that changes only overlays reuses the modelled figures instead of a second loop;
one that changes the scenario weights too reuses the loop's per-scenario figures and weights
them again in the same pass.

Reference: the engine run on the other assumptions from scratch; the reuse must equal it
column for column (overlays are applied after the loop, to the rounded modelled ECL; the
weights apply to each scenario's loss, IFRS 9 5.5.17(a) and B5.5.42, never to the PDs or the
stages).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from allowance import api, engine, intake
from tests.books import DEMO_ASSUMPTIONS, DEMO_TAPE, DEMO_WHAT_IF, engine_config, engine_tape

_OVERLAYS = [
    {"name": "auto uplift", "segment": "auto", "kind": "percent", "value": 0.1, "rationale": "used-car prices",
     "owner": "credit risk"},
    {"name": "cards amount", "segment": "cards", "kind": "amount", "value": 1234.56, "rationale": "fraud wave",
     "owner": "credit risk"},
]


def test_overlaid_equals_a_fresh_run_with_the_other_overlays():
    tape = engine_tape(n=200)
    plain, uplifted = engine_config(), engine_config(overlays=_OVERLAYS)
    fresh = engine.run(tape, uplifted)
    base = engine.run(tape, plain)
    kept = base.loans.copy(deep=True)
    reused = engine.overlaid(base, uplifted)
    pd.testing.assert_frame_equal(reused.loans, fresh.loans)
    pd.testing.assert_frame_equal(base.loans, kept)  # the base keeps its own figures (not shared)
    pd.testing.assert_frame_equal(reused.overlays, fresh.overlays)
    pd.testing.assert_frame_equal(reused.scenarios, fresh.scenarios)
    assert reused.warnings == fresh.warnings
    back = engine.overlaid(fresh, plain)  # and back again: no overlay left
    pd.testing.assert_frame_equal(back.loans, engine.run(tape, plain).loans)


def test_an_overlay_only_what_if_runs_the_loop_once(monkeypatch):
    tape = engine_tape(n=120)
    assumptions = engine_config().assumptions.model_dump(mode="json", exclude_none=True)
    calls = []
    real = engine.run
    monkeypatch.setattr(engine, "run", lambda *a, **k: calls.append(1) or real(*a, **k))
    done = api.run(tape, assumptions, overlays=[{"overlays": _OVERLAYS}], sensitivities=False,
                   accept_ledger_difference=True)
    assert len(calls) == 1
    base = api.run(tape, assumptions, sensitivities=False, accept_ledger_difference=True)
    # the comparison's base column is the base run's allowance, to the cent
    totals = done.what_if.summary[done.what_if.summary["view"] == "total"].set_index("framework")
    for fw in ("ifrs9", "cecl"):
        assert round(float(totals.loc[fw, "base"]), 2) == round(float(base.loans[f"ecl_{fw}"].sum()), 2)
        assert round(float(totals.loc[fw, "what_if"]), 2) == round(float(done.loans[f"ecl_{fw}"].sum()), 2)
        assert totals.loc[fw, "difference"] != 0  # the overlays moved it
    weather = {"scenarios": {"down": {"weight": 0.5}, "base": {"weight": 0.5}}}
    calls.clear()
    weighed = api.run(tape, assumptions, overlays=[weather], sensitivities=False, accept_ledger_difference=True)
    assert len(calls) == 1  # only the weights differ: the base is weighted again in the same pass
    totals = weighed.what_if.summary[weighed.what_if.summary["view"] == "total"].set_index("framework")
    for fw in ("ifrs9", "cecl"):
        assert round(float(totals.loc[fw, "base"]), 2) == round(float(base.loans[f"ecl_{fw}"].sum()), 2)
    worse = {"scenarios": {"down": {"pd_multiplier": [3.0, 2.0, 1.5]}}}
    calls.clear()
    api.run(tape, assumptions, overlays=[worse], sensitivities=False, accept_ledger_difference=True)
    assert len(calls) == 2  # a scenario's path changes the loop's inputs: the base is computed again


_POCI = {"credit_impaired_at_purchase": True, "pd_12m_at_origination": 0.25, "pd_12m_current": 0.3,
         "credit_adjusted_eir": 0.12}


def _book_with_poci(n: int = 240) -> pd.DataFrame:
    """The engine book with some purchased credit-impaired loans (their benchmark is a weighted ECL)."""
    tape = engine_tape(n=n)
    poci = np.flatnonzero((tape["segment"] == "auto").to_numpy())[:12]
    for key, value in _POCI.items():
        tape.loc[poci, key] = value
    tape.loc[poci[::2], "lifetime_ecl_at_purchase"] = 900.0  # given for half, measured for the rest
    tape.loc[poci[:3], "origination_date"] = pd.Timestamp("2026-08-15")  # bought in the period
    return tape


def _assert_same_run(reused: engine.EngineResult, fresh: engine.EngineResult) -> None:
    pd.testing.assert_frame_equal(reused.loans, fresh.loans)
    pd.testing.assert_frame_equal(reused.overlays, fresh.overlays)
    pd.testing.assert_frame_equal(reused.scenarios, fresh.scenarios)
    pd.testing.assert_frame_equal(reused.findings, fresh.findings)
    assert reused.warnings == fresh.warnings


def test_reweighted_equals_a_fresh_run_at_the_other_weights():
    tape = _book_with_poci()
    base = engine_config()
    downside = engine_config(
        scenarios={"base": {"weight": 0.1, "pd_multiplier": [1.0, 1.0, 1.0]},
                   "down": {"weight": 0.9, "pd_multiplier": [2.0, 1.5, 1.2], "lgd_multiplier": [1.1]}},
        overlays=_OVERLAYS)
    assert engine.only_weights_differ(base, downside)
    both = engine.run(tape, base, reweighted=[downside], chunk_size=70)  # several chunks
    assert len(both.reweighted) == 1
    _assert_same_run(both.reweighted[0], engine.run(tape, downside))
    _assert_same_run(dataclasses_free(both), engine.run(tape, base, chunk_size=70))
    assert both.reweighted[0].schedules.empty  # the base's sample only
    # no POCI loan: each scenario's loss is the same under either weights (the weights never
    # enter a scenario's loss or a stage); the modelled ECL is their probability-weighted sum
    # (IFRS 9 5.5.17(a), B5.5.42; ASC 326-20-30-9), a dot product by numpy, to the cent of each
    # rounded scenario figure
    one, other = both.loans, both.reweighted[0].loans
    plain = ~one["poci"].to_numpy(bool)
    assert plain.sum() < len(one) and plain.any()
    for fw in ("ifrs9", "cecl"):
        cols = [f"ecl_{fw}_base", f"ecl_{fw}_down"]
        assert np.array_equal(one.loc[plain, cols].to_numpy(), other.loc[plain, cols].to_numpy())
        assert (one["stage"].to_numpy() == other["stage"].to_numpy()).all()
        weighted = other.loc[plain, cols].to_numpy() @ np.array([0.1, 0.9])
        assert np.abs(other.loc[plain, f"ecl_{fw}_modelled"].to_numpy() - weighted).max() <= 0.01 + 1e-9
    # a POCI loan's IFRS 9 figures move with the weights through its weighted purchase benchmark
    poci = ~plain
    assert not np.array_equal(one.loc[poci, "purchase_ecl_carried_ifrs9"].to_numpy(),
                              other.loc[poci, "purchase_ecl_carried_ifrs9"].to_numpy())
    # what the weights leave as it is is held once: the two books share those columns' memory
    # (a million loans: the what-if with other weights peaked at 1,626 MiB holding copies, 1,508 sharing)
    for same in ("balance", "stage", "ead", "remaining_months", "lgd", "ecl_cecl_base", "ecl_cecl_down"):
        assert np.shares_memory(one[same].to_numpy(), other[same].to_numpy()), same
    for moved in ("ecl_ifrs9_modelled", "ecl_cecl_modelled", "ecl_ifrs9"):
        assert not np.shares_memory(one[moved].to_numpy(), other[moved].to_numpy()), moved


def dataclasses_free(result: engine.EngineResult) -> engine.EngineResult:
    """``result`` as a run without reweighting returns it (no reweighted results attached)."""
    import dataclasses

    return dataclasses.replace(result, reweighted=())


def test_reweighting_refuses_a_configuration_that_changes_the_loop():
    tape = engine_tape(n=40)
    other = engine_config(scenarios={"base": {"weight": 0.6, "pd_multiplier": [1.0, 1.0, 1.0]},
                                     "down": {"weight": 0.4, "pd_multiplier": [3.0, 1.5, 1.2]}})
    assert not engine.only_weights_differ(engine_config(), other)
    with pytest.raises(ValueError, match="more than the scenario weights"):
        engine.run(tape, engine_config(), reweighted=[other])


@pytest.mark.slow
def test_the_demo_downside_what_if_reweighted_equals_a_fresh_run():
    # the demo's own what-if (only the weights move) on its tape, POCI loans included
    plain = intake.load_assumptions(DEMO_ASSUMPTIONS)
    downside = intake.load_assumptions(DEMO_ASSUMPTIONS, [DEMO_WHAT_IF])
    tape = intake.read_tape(DEMO_TAPE, plain).accepted
    assert engine.only_weights_differ(plain, downside)
    both = engine.run(tape, downside, reweighted=[plain], schedule_sample=0)
    _assert_same_run(both.reweighted[0], engine.run(tape, plain, schedule_sample=0))


@pytest.mark.parametrize("auto", [None, {"annual_loss_rate": 0.03, "lgd": 0.4, "cpr": 0.1}],
                         ids=["pd", "loss-rate"])
def test_the_modelled_pass_gives_the_full_runs_modelled_figures(auto):
    # the second pass of a movement (this tape at other assumptions) computes only the modelled
    # ECL; the reference is the full run's own columns, to the cent, over several chunks (POCI
    # loans, revolving lines with undrawn limits, loans in default, loans assessed one by one,
    # and a segment on a loss rate)
    tape = _book_with_poci()
    if auto is not None:
        tape = tape[~tape["credit_impaired_at_purchase"].astype(bool)].reset_index(drop=True)
        tape["original_balance"] = (tape["balance"] * 1.1).round(2)
    tape.loc[[5, 17], "individual_ecl"] = [1234.5, 0.0]
    segments = engine_config().assumptions.model_dump(mode="json", exclude_none=True)["segments"]
    config = engine_config(overlays=_OVERLAYS, segments={**segments, **({"auto": auto} if auto else {})})
    full = engine.run(tape, config).loans
    alone = engine.modelled(tape, config, chunk_size=70)
    columns = ["loan_id", "ecl_ifrs9_modelled", "ecl_cecl_modelled"]
    assert alone.columns.tolist() == columns
    assert (full.loc[[5, 17], "ecl_cecl_modelled"] == [1234.5, 0.0]).all()
    pd.testing.assert_frame_equal(alone, full[columns])
    # one chunk after another (the builtin map) gives the same figures as two at a time
    pd.testing.assert_frame_equal(engine.modelled(tape, config, chunk_size=70, map=map), alone)


def test_the_modelled_pass_takes_the_runs_stages_only_where_they_are_staged_alike(monkeypatch):
    # last quarter's assumptions with other PDs, LGDs and scenario weights but the same [ifrs9]
    # rules stage the tape as this run did (the stages read the tape, the rules and the
    # low-credit-risk tests, IFRS 9 5.5.9-5.5.11): they are taken from this run's loans, and
    # the figures equal a pass that assigns them itself; a changed backstop is staged afresh
    from allowance import staging

    tape = _book_with_poci()
    now = engine_config()
    run = engine.run(tape, now).loans
    segments = now.assumptions.model_dump(mode="json", exclude_none=True)["segments"]
    before = engine_config(segments={**segments, "auto": {"pd_12m": 0.03, "lgd": 0.45, "cpr": 0.1}},
                           scenarios={"base": {"weight": 0.5, "pd_multiplier": [1.0, 1.0, 1.0]},
                                      "down": {"weight": 0.5, "pd_multiplier": [2.5, 1.5, 1.2]}})
    stricter = engine_config(ifrs9={"sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month", "sicr_backstop_dpd": 10})
    assert engine.same_stages(now, before) and not engine.same_stages(now, stricter)
    assert set(run["stage"]) == {1, 2, 3}
    fresh = {name: engine.modelled(tape, c, chunk_size=70) for name, c in (("before", before), ("stricter", stricter))}
    calls = []
    real = staging.assign_stages
    monkeypatch.setattr(staging, "assign_stages", lambda *a, **k: calls.append(1) or real(*a, **k))
    reused = engine.modelled(tape, before, chunk_size=70, stages_from=(now, run))
    assert not calls
    pd.testing.assert_frame_equal(reused, fresh["before"])
    again = engine.modelled(tape, stricter, chunk_size=70, stages_from=(now, run))
    assert len(calls) == 4  # one per chunk
    pd.testing.assert_frame_equal(again, fresh["stricter"])
    assert not again.equals(engine.modelled(tape, stricter, stages_from=(stricter, run)))  # other stages, other figures


def test_what_reaches_no_modelled_figure_leaves_the_model_the_same():
    """The run's label, ledger balance and limits, how the tape is read, the journal's
    accounts, the overlays and where a matrix or macro paths come from change no modelled
    figure (they are read before the loop or applied after it): the same model; a weight
    changes the weighted figures but not the loop's inputs; an LGD changes the loop's inputs
    (common practice, no source: what each assumption feeds)."""
    plain = intake.load_assumptions(DEMO_ASSUMPTIONS)
    data = plain.assumptions.model_dump()
    data["run"] |= {"label": "another name", "ledger_balance": 1.0, "ledger_tolerance": 5.0, "max_input_mb": 10.0,
                    "loan_detail_sheet_limit": 7}
    data["tape"] = {"date_format": "day_first"}
    data["gl_accounts"] = {}
    data["overlays"] = []
    data["segments"]["cards"]["transition_matrix"]["source"] = "typed in by hand"
    same = plain.model_copy(update={"assumptions": type(plain.assumptions).model_validate(data)})
    assert engine.same_model(plain, same) and engine.only_weights_differ(plain, same)
    weights = dict(data, scenarios={n: dict(s, weight=w) for (n, s), w in
                                    zip(data["scenarios"].items(), (0.2, 0.3, 0.5))})
    reweighted = plain.model_copy(update={"assumptions": type(plain.assumptions).model_validate(weights)})
    assert not engine.same_model(plain, reweighted) and engine.only_weights_differ(plain, reweighted)
    data["segments"]["personal"]["lgd"] = 0.5
    other = plain.model_copy(update={"assumptions": type(plain.assumptions).model_validate(data)})
    assert not engine.same_model(plain, other) and not engine.only_weights_differ(plain, other)


@pytest.mark.parametrize("loop", ["arrays", "compiled"])
def test_the_modelled_figures_under_other_weights_in_the_same_pass_are_a_second_passs(loop):
    """``run(..., modelled_under=[other])``: the modelled ECL under another configuration's
    weights, weighted again in this run's pass, equals the second pass :func:`engine.modelled`
    makes under it (this run's stages), to the bit. Reference: the second pass itself."""
    tape = engine_tape(n=120)
    config = engine_config()
    data = config.assumptions.model_dump()
    names = list(data["scenarios"])
    data["scenarios"][names[0]]["weight"] += 0.25
    data["scenarios"][names[-1]]["weight"] -= 0.25
    other = config.model_copy(update={"assumptions": type(config.assumptions).model_validate(data)})
    assert engine.only_weights_differ(config, other) and not engine.same_model(config, other)
    result = engine.run(tape, config, modelled_under=[other], loop=loop, schedule_sample=0)
    second = engine.modelled(tape, other, stages_from=(config, result.loans), loop=loop)
    pd.testing.assert_frame_equal(result.modelled_under[0], second, check_index_type=False)
    plain = engine.run(tape, config, loop=loop, schedule_sample=0)
    pd.testing.assert_frame_equal(result.loans, plain.loans)  # this run's own figures are untouched
    assert not result.modelled_under[0]["ecl_cecl_modelled"].equals(plain.loans["ecl_cecl_modelled"])
    assert result.modelled_under_why == ("",)


def _other_model(config, **changes):
    """``config`` with assumptions changed as ``changes`` says (dotted keys)."""
    data = config.assumptions.model_dump()
    for key, value in changes.items():
        *path, last = key.split(".")
        target = data
        for part in path:
            target = target[part]
        target[last] = value
    return config.model_copy(update={"assumptions": type(config.assumptions).model_validate(data)})


@pytest.mark.parametrize("loop", ["arrays", "compiled"])
def test_the_modelled_figures_under_another_model_in_the_same_pass_are_a_second_passs(loop):
    """``run(..., modelled_under=[...])`` with configurations whose model differs (another
    scenario path and LGD; stricter staging, so the stages are its own; one whose assumptions
    do not cover the tape's segments): each chunk is computed at each configuration's own
    tables right after it, and the figures equal the second pass :func:`engine.modelled`
    makes under each (this run's stages where it stages alike), to the bit, chunk size and
    map whatever they are; the one that cannot be applied gives None and its reason, and
    this run's own figures are untouched. Reference: the second pass itself."""
    from concurrent.futures import ThreadPoolExecutor

    tape = engine_tape(n=150)
    config = engine_config()
    model = _other_model(config, **{"scenarios.down.pd_multiplier": [3.0, 1.5, 1.2], "segments.auto.lgd": 0.5})
    stricter = _other_model(config, **{"ifrs9.sicr_backstop_dpd": 10})
    narrower = _other_model(config, segments={k: v for k, v in config.assumptions.model_dump()["segments"].items()
                                              if k != "cards"})
    assert not engine.only_weights_differ(config, model) and engine.same_stages(config, model)
    assert not engine.same_stages(config, stricter)
    plain = engine.run(tape, config, loop=loop, schedule_sample=0)
    with ThreadPoolExecutor(2) as pool:
        for chunk_size, chunk_map in ((None, None), (40, None), (40, pool.map)):
            result = engine.run(tape, config, modelled_under=[model, stricter, narrower], loop=loop, schedule_sample=0,
                                chunk_size=chunk_size, map=chunk_map)
            pd.testing.assert_frame_equal(result.loans, plain.loans)
            for other, got in zip((model, stricter), result.modelled_under):
                second = engine.modelled(tape, other, stages_from=(config, result.loans), loop=loop)
                pd.testing.assert_frame_equal(got, second, check_index_type=False)
            assert result.modelled_under[2] is None and "cards" in result.modelled_under_why[2]
            assert result.modelled_under_why[:2] == ("", "")
    # the figures move with the model and with the stages
    assert not result.modelled_under[0]["ecl_ifrs9_modelled"].equals(plain.loans["ecl_ifrs9_modelled"])
    assert not result.modelled_under[1]["ecl_ifrs9_modelled"].equals(plain.loans["ecl_ifrs9_modelled"])
    empty = engine.run(tape.iloc[:0], config, modelled_under=[model], loop=loop, schedule_sample=0)
    assert empty.modelled_under[0].empty and list(empty.modelled_under[0].columns) == list(second.columns)
