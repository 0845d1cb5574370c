"""A what-if that changes only overlays reuses the modelled figures instead of a second loop.

Reference: the engine run on the base assumptions from scratch; the reuse must equal it
column for column (overlays are applied after the loop, to the rounded modelled ECL).
"""

from __future__ import annotations

import pandas as pd

from allowance import api, engine
from tests.books import engine_config, engine_tape

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
    reused = engine.overlaid(engine.run(tape, plain), uplifted)
    pd.testing.assert_frame_equal(reused.loans, fresh.loans)
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
    api.run(tape, assumptions, overlays=[weather], sensitivities=False, accept_ledger_difference=True)
    assert len(calls) == 2  # weights change the model: the base is computed again
