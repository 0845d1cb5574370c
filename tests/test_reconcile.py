"""The allowance movement: opening + movements = closing, to the cent, at every line and cell.

The layout of the tables follows IFRS 7 35H-35I (reconciliation of the loss allowance by
stage, with transfers between stages) and ASC 326-20-50-13 (roll-forward by portfolio
segment: beginning, provision, charge-offs, recoveries, ending). The worked example is our
own, computed by hand (common practice, no source). All comparisons are in whole cents
(integers), so a one-cent break fails.
"""

from __future__ import annotations

from datetime import date

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from allowance.reconcile import (
    MovementError,
    check_movement,
    compare_runs,
    method_changes,
    movement,
    what_if_comparison,
)
from allowance.text import neutralise_text
from tests.strategies import run_pairs


def cents(x) -> np.ndarray:
    return np.rint(np.asarray(x, dtype=np.float64) * 100).astype(np.int64)


# --------------------------------------------------------------------------------------
# A worked example of our own, computed by hand
# --------------------------------------------------------------------------------------


def _hand_runs():
    prior = pd.DataFrame({
        "loan_id": ["a", "b", "c", "d", "e"],
        "segment": ["auto", "auto", "card", "card", "auto"],
        "stage": [1, 1, 2, 3, 2],
        "balance": [1000.0, 2000.0, 500.0, 300.0, 800.0],
        "ecl_ifrs9_modelled": [10.0, 18.0, 50.0, 150.0, 40.0],
        "overlay_ifrs9": [0.0, 2.0, 0.0, 0.0, 0.0],
        "ecl_ifrs9": [10.0, 20.0, 50.0, 150.0, 40.0],
    })
    current = pd.DataFrame({
        "loan_id": ["a", "b", "e", "f"],
        "segment": ["auto", "auto", "auto", "card"],
        "stage": [1, 2, 2, 1],
        "balance": [900.0, 1900.0, 650.0, 700.0],
        "ecl_ifrs9_modelled": [9.0, 55.0, 30.0, 7.0],
        "overlay_ifrs9": [0.0, 5.0, 0.0, 0.0],
        "ecl_ifrs9": [9.0, 60.0, 30.0, 7.0],
    })
    for frame in (prior, current):
        for col in ("ecl_cecl_modelled", "overlay_cecl", "ecl_cecl"):
            frame[col] = frame[col.replace("cecl", "ifrs9")]
    rerun = pd.DataFrame({"loan_id": ["a", "b", "e", "f"], "ecl_ifrs9_modelled": [8.5, 50.0, 32.0, 6.0]})
    rerun["ecl_cecl_modelled"] = rerun["ecl_ifrs9_modelled"]
    charge_offs = pd.DataFrame({"loan_id": ["d", "e"], "gross_charge_off": [280.0, 100.0], "recoveries": [10.0, None]})
    return prior, current, rerun, charge_offs


def test_hand_example_ifrs9_by_stage():
    prior, current, rerun, charge_offs = _hand_runs()
    m = movement(prior, current, rerun, charge_offs, "ifrs9")
    table = m.allowance.set_index("line")[["stage 1", "stage 2", "stage 3", "total"]]
    expected = {  # computed by hand: see the module docstring of allowance.reconcile
        "opening": [30.0, 90.0, 150.0, 270.0],
        "new": [7.0, 0.0, 0.0, 7.0],  # valued at the closing assumptions, overlays included
        "derecognised": [0.0, -50.0, 0.0, -50.0],
        "written_off": [0.0, -40.0, -150.0, -190.0],
        "transfer_to_stage_1": [0.0, 0.0, 0.0, 0.0],
        "transfer_to_stage_2": [-20.0, 20.0, 0.0, 0.0],
        "transfer_to_stage_3": [0.0, 0.0, 0.0, 0.0],
        "unwind": [0.0, 0.0, 0.0, 0.0],
        "remeasurement": [-1.5, 64.0, 0.0, 62.5],
        "modifications": [0.0, 0.0, 0.0, 0.0],
        "model_change": [0.0, 0.0, 0.0, 0.0],
        "assumptions": [0.5, 3.0, 0.0, 3.5],
        "overlays": [0.0, 3.0, 0.0, 3.0],
        "closing": [16.0, 90.0, 0.0, 106.0],
    }
    assert list(table.index) == list(expected)
    for line, row in expected.items():
        assert cents(table.loc[line]).tolist() == cents(row).tolist(), line
    gross = m.gross.set_index("line")[["stage 1", "stage 2", "stage 3", "total"]]
    expected_gross = {
        "opening": [3000.0, 1300.0, 300.0, 4600.0],
        "new": [700.0, 0.0, 0.0, 700.0],
        "derecognised": [0.0, -500.0, -20.0, -520.0],
        "written_off": [0.0, -100.0, -280.0, -380.0],
        "transfer_to_stage_2": [-2000.0, 2000.0, 0.0, 0.0],
        "other_changes": [-100.0, -150.0, 0.0, -250.0],
        "closing": [1600.0, 2550.0, 0.0, 4150.0],
    }
    for line, row in expected_gross.items():
        assert cents(gross.loc[line]).tolist() == cents(row).tolist(), line
    assert m.assumptions_isolated


def test_hand_example_rollforward_and_journal():
    prior, current, rerun, charge_offs = _hand_runs()
    m = movement(prior, current, rerun, charge_offs, "cecl")
    roll = m.rollforward.set_index("segment")
    # beginning + PCD gross-up + provision - charge-offs + recoveries = ending (ASC 326-20-50-13),
    # by hand; CECL deducts every charge-off from the allowance and credits recoveries to it
    assert cents(roll.loc["auto"]).tolist() == cents([70.0, 0.0, 129.0, -100.0, 0.0, 99.0]).tolist()
    assert cents(roll.loc["card"]).tolist() == cents([200.0, 0.0, 77.0, -280.0, 10.0, 7.0]).tolist()
    assert cents(roll.loc["Total"]).tolist() == cents([270.0, 0.0, 206.0, -380.0, 10.0, 106.0]).tolist()
    assert m.net_provision == 206.0
    journal = m.journal
    total = journal[journal["segment"] == "Total"].iloc[0]
    assert total["debit"] == total["credit"] == 206.0
    auto = journal[journal["segment"] == "auto"]
    assert auto["debit"].sum() == auto["credit"].sum() == 129.0
    assert auto.iloc[0]["account"].startswith("Provision for credit losses")  # the debit is the expense
    # CECL's own table is by segment
    table = m.allowance.set_index("line")[["auto", "card", "total"]]
    assert cents(table.loc["remeasurement"]).tolist() == cents([62.5, 0.0, 62.5]).tolist()
    assert cents(table.loc["assumptions"]).tolist() == cents([3.5, 0.0, 3.5]).tolist()
    assert cents(table.loc["closing"]).tolist() == cents([99.0, 7.0, 106.0]).tolist()


def test_ifrs9_rollforward_uses_the_allowance_and_recoveries_go_to_profit_or_loss():
    # IFRS 7 35H: the allowance written off is what the roll-forward deducts; a charge-off
    # beyond it is a direct loss, and a recovery after write-off is a gain in profit or loss
    # (IFRS 9 5.4.4), not allowance. By hand: auto 70 + 69 - 40 = 99; card 200 - 43 - 150 = 7.
    prior, current, rerun, charge_offs = _hand_runs()
    m = movement(prior, current, rerun, charge_offs, "ifrs9")
    roll = m.rollforward.set_index("segment")
    assert cents(roll.loc["auto"]).tolist() == cents([70.0, 0.0, 69.0, -40.0, 0.0, 99.0]).tolist()
    assert cents(roll.loc["card"]).tolist() == cents([200.0, 0.0, -43.0, -150.0, 0.0, 7.0]).tolist()
    assert cents(roll.loc["Total", "charge_offs"]) == cents(m.allowance.set_index("line").loc["written_off", "total"])
    # the bridge: allowance written off 190 + charged off beyond it 190 = gross charge-offs 380;
    # the expense in profit or loss is the same under both frameworks: 106 - 270 + 380 - 10 = 206
    for framework in ("ifrs9", "cecl"):
        bridge = movement(prior, current, rerun, charge_offs, framework).write_offs.set_index("segment")
        row = bridge.loc["Total"]
        assert cents(row[["allowance_written_off", "charged_off_beyond_allowance", "gross_charge_offs",
                          "recoveries", "credit_loss_expense"]]).tolist() == cents([190, 190, 380, 10, 206]).tolist()
    assert "profit or loss" in m.write_offs["recoveries_treatment"].iloc[0]
    assert "credited to the allowance" in bridge["recoveries_treatment"].iloc[0]


def test_release_reverses_the_journal():
    prior = pd.DataFrame({"loan_id": ["a"], "segment": "card", "balance": [100.0], "ecl_cecl": [30.0]})
    current = prior.assign(ecl_cecl=[12.5])
    m = movement(prior, current, None, None, "cecl")
    rows = m.journal[m.journal["segment"] == "card"]
    assert rows["entry"].tolist() == ["release", "release"]
    assert rows.iloc[0]["account"].startswith("Allowance") and rows.iloc[0]["debit"] == 17.5
    assert m.net_provision == -17.5


def test_without_rerun_all_change_is_remeasurement():
    prior, current, _, charge_offs = _hand_runs()
    m = movement(prior, current, None, charge_offs, "ifrs9")
    table = m.allowance.set_index("line")
    assert (cents(table.loc["assumptions", ["stage 1", "stage 2", "stage 3", "total"]]) == 0).all()
    assert not m.assumptions_isolated
    # the new loan enters at its modelled allowance when there is no rerun
    assert cents(table.loc["new", "total"]) == 700


# --------------------------------------------------------------------------------------
# Generated pairs of runs
# --------------------------------------------------------------------------------------


def _foot(table: pd.DataFrame) -> None:
    """Every column: lines before closing sum to closing, exactly in cents."""
    values = table.drop(columns=["line", "label"])
    body = cents(values[table["line"] != "closing"]).sum(axis=0)
    closing = cents(values[table["line"] == "closing"]).sum(axis=0)
    assert body.tolist() == closing.tolist()
    for line in table["line"]:
        if line.startswith("transfer_to_") or line == "change_of_segment":
            row = values[table["line"] == line].drop(columns="total")
            assert cents(row).sum() == 0, line


def _class(frame: pd.DataFrame, framework: str) -> pd.Series:
    if framework == "ifrs9":
        return np.where(frame["poci"], "POCI", "stage " + frame["stage"].astype(str))
    return np.where(frame["poci"], "PCD", "non-PCD")


@pytest.mark.slow
@settings(max_examples=50, suppress_health_check=[HealthCheck.too_slow])
@given(pair=run_pairs(), framework=st.sampled_from(["ifrs9", "cecl"]))
def test_movement_ties_to_the_cent(pair, framework):
    prior, current, rerun, charge_offs = pair
    m = movement(prior, current, rerun, charge_offs, framework)
    _foot(m.allowance)
    _foot(m.gross)
    ecl = f"ecl_{framework}"
    table = m.allowance.set_index("line")
    assert cents(table.loc["opening", "total"]) == cents(prior[ecl]).sum()
    assert cents(table.loc["closing", "total"]) == cents(current[ecl]).sum()
    # each column's closing and opening are the runs' own sums for that stage / segment
    dim_p = _class(prior, framework) if framework == "ifrs9" else prior["segment"]
    dim_c = _class(current, framework) if framework == "ifrs9" else current["segment"]
    for column in m.allowance.columns.drop(["line", "label", "total"]):
        assert cents(table.loc["closing", column]) == cents(current.loc[np.asarray(dim_c == column), ecl]).sum()
        assert cents(table.loc["opening", column]) == cents(prior.loc[np.asarray(dim_p == column), ecl]).sum()
    gross = m.gross.set_index("line")
    assert cents(gross.loc["closing", "total"]) == cents(current["balance"]).sum()

    # every segment x class cell foots, and its closing is the current run's sum
    detail = m.allowance_detail
    cell_c = pd.Series(_class(current, framework), index=current.index)
    for (segment, klass), part in detail.groupby(["segment", "class"]):
        lines = part.set_index("line")["amount"]
        body = cents(lines.drop("closing", errors="ignore")).sum()
        closing = cents(lines.get("closing", 0.0))
        assert body == closing, (segment, klass)
        mask = (current["segment"] == segment) & (cell_c == klass)
        assert closing == cents(current.loc[mask, ecl]).sum()

    # lines that do not depend on the decomposition
    co_ids = set() if charge_offs is None else set(neutralise_text(charge_offs["loan_id"].astype(str)))
    p_ids = neutralise_text(prior["loan_id"].astype(str))
    gone = ~p_ids.isin(set(neutralise_text(current["loan_id"].astype(str))))
    charged = p_ids.isin(co_ids)
    used = m.loans.set_index("loan_id")["written_off"]
    # a loan that left: its whole allowance goes, as write-off (the part its charge-off used)
    # or on derecognition (the rest)
    left_total = cents(prior.loc[gone.to_numpy(), ecl]).sum()
    used_gone = cents(used.reindex(prior.loc[(gone & charged).to_numpy(), "loan_id"].astype(str)).fillna(0)).sum()
    assert cents(table.loc["derecognised", "total"]) == -(left_total + used_gone)
    if rerun is None:
        assert (cents(m.allowance.set_index("line").loc["assumptions"].drop("label")) == 0).all()

    # roll-forward: beginning + gross-up + provision + charge-offs + recoveries = ending, each segment
    roll = m.rollforward
    parts = cents(roll[["beginning", "initial_allowance_pcd", "provision", "charge_offs", "recoveries"]]).sum(axis=1)
    assert parts.tolist() == cents(roll["ending"]).tolist()
    total = roll[roll["segment"] == "Total"].iloc[0]
    expected_co = 0 if charge_offs is None else cents(charge_offs["gross_charge_off"]).sum()
    if framework == "cecl":  # every charge-off against the allowance (ASC 326-20-35-8)
        assert cents(total["charge_offs"]) == -expected_co
    else:  # the allowance used (IFRS 7 35H), bridged to the gross charge-offs
        assert cents(total["charge_offs"]) == cents(table.loc["written_off", "total"])
        assert cents(total["recoveries"]) == 0
    bridge = m.write_offs.set_index("segment").loc["Total"]
    assert cents(bridge["allowance_written_off"]) + cents(bridge["charged_off_beyond_allowance"]) == expected_co
    assert cents(bridge["gross_charge_offs"]) == expected_co
    assert cents(total["ending"]) == cents(current[ecl]).sum()
    journal = m.journal
    assert cents(journal["debit"].iloc[:-1]).sum() == cents(journal["credit"].iloc[:-1]).sum()
    assert cents(journal["debit"].iloc[-1]) == cents(roll.loc[roll["segment"] != "Total", "provision"].abs()).sum()

    # the per-loan bridge adds up to the change of each loan
    loans = m.loans
    lines = ["opening", "new", "pcd_gross_up", "derecognised", "written_off", "unwind", "remeasurement",
             "modifications", "model_change", "assumptions", "overlays"]
    assert (cents(loans[lines]).sum(axis=1) == cents(loans["closing"])).all()
    # ... to each loan's own figures in the runs: closing is the current run's allowance (0 for a
    # loan not in it), opening the prior run's (module docstring: P, C)
    now = loans["status"].isin(["continuing", "new"]).to_numpy()
    mine = loans[now].set_index("loan_id")
    assert (cents(mine.loc[current["loan_id"].astype(str), "closing"]) == cents(current[ecl])).all()
    assert (cents(loans.loc[~now, "closing"]) == 0).all()
    was = loans[loans["status"].isin(["continuing", "written off", "derecognised"]).to_numpy()]
    assert cents(was["opening"]).sum() == cents(prior[ecl]).sum()
    # the transfer out of a continuing loan's prior cell is P - W (the module docstring), none for the others
    cont = (loans["status"] == "continuing").to_numpy()
    assert (cents(loans.loc[cont, "transfer"]) == cents(loans.loc[cont, "opening"])
            + cents(loans.loc[cont, "written_off"])).all()
    assert (cents(loans.loc[~cont, "transfer"]) == 0).all()


@pytest.mark.slow
@settings(max_examples=60)
@given(pair=run_pairs(with_charge_offs=True), framework=st.sampled_from(["ifrs9", "cecl"]))
def test_no_write_off_without_a_charge_off_even_on_a_negative_allowance(pair, framework):
    # IFRS 7 35H: the write-off line is the allowance used by a charge-off. A POCI loan can
    # carry a negative allowance (IFRS 9 5.5.14); none of it is "written off", and no loan
    # without a charge-off shows a write-off (the defect showed +410.68 on three such loans)
    prior, current, rerun, charge_offs = pair
    m = movement(prior, current, rerun, charge_offs, framework)
    loans = m.loans
    used = -cents(loans["written_off"])
    assert (used >= 0).all()
    assert (used <= cents(loans["gross_charge_off"])).all()
    assert (used <= np.maximum(cents(loans["opening"]), 0)).all()
    assert (used[cents(loans["gross_charge_off"]) == 0] == 0).all()


@settings(max_examples=30)
@given(pair=run_pairs(max_loans=25), data=st.data())
def test_a_one_cent_break_is_caught(pair, data):
    prior, current, rerun, charge_offs = pair
    m = movement(prior, current, rerun, charge_offs, "ifrs9")
    table = m.allowance
    row = data.draw(st.integers(0, len(table) - 1))
    column = data.draw(st.sampled_from(list(table.columns.drop(["line", "label"]))))
    broken = table.copy()
    broken.loc[row, column] = broken.loc[row, column] + 0.01
    with pytest.raises(MovementError):
        check_movement(broken)


def test_check_movement_names_the_break():
    table = pd.DataFrame({"line": ["opening", "new", "closing"], "label": "", "stage 2": [1.0, 2.0, 3.01],
                          "total": [1.0, 2.0, 3.01]})
    with pytest.raises(MovementError, match="column stage 2: .* break of 0.01"):
        check_movement(table)


def test_prior_ids_as_written_to_csv_still_join():
    """loans.csv carries neutralised ids ('=L1 -> ''=L1'); the join must still match them."""
    current = pd.DataFrame({"loan_id": ["=L1"], "segment": "auto", "stage": [1], "balance": [10.0],
                            "ecl_ifrs9": [2.0]})
    prior = current.assign(loan_id=neutralise_text(current["loan_id"]), ecl_ifrs9=[1.0])
    m = movement(prior, current, None, None, "ifrs9")
    assert m.loans["status"].tolist() == ["continuing"]


# --------------------------------------------------------------------------------------
# Errors a user can cause
# --------------------------------------------------------------------------------------


def _one(**changes) -> pd.DataFrame:
    base = {"loan_id": ["a", "b"], "segment": "auto", "stage": [1, 2], "balance": [1.0, 2.0], "ecl_ifrs9": [0.1, 0.2]}
    base.update(changes)
    return pd.DataFrame(base)


@pytest.mark.parametrize(
    "prior, message",
    [
        (_one(loan_id=["a", "a"]), "appears more than once"),
        (_one(ecl_ifrs9=[0.1, None]), "ecl_ifrs9 is blank"),
        (_one(stage=[1, 4]), "stage 4"),
        (_one().drop(columns="stage"), "lack column"),
        (_one(segment=["auto", None]), "loan 'b': segment is blank"),
        (_one(loan_id=["a", None]), "row 2: loan_id is blank"),
    ],
)
def test_bad_runs_are_named_errors(prior, message):
    with pytest.raises(MovementError, match=message) as info:
        movement(prior, _one(), None, None, "ifrs9", sources={"prior": "q2/loans.csv"})
    assert "q2/loans.csv" in str(info.value)


def test_a_rerun_in_the_current_runs_order_gives_each_loan_its_own_figures():
    # the rerun of this quarter's tape lists the current run's loans in the current run's order,
    # so its rows are taken as the current run's without hashing its ids again; the movement,
    # loan by loan, is the one of the same rerun given in another order (joined by id), and
    # each loan's assumptions line is its own C_m - A_m (hand figures, the module docstring)
    prior, current, rerun, charge_offs = _hand_runs()
    rerun["ecl_ifrs9_modelled"] = [8.5, 50.0, 32.0, 6.0]  # as _hand_runs: a, b, e, f
    ordered = movement(prior, current, rerun, charge_offs, "ifrs9")
    shuffled = movement(prior, current, rerun.iloc[[2, 0, 3, 1]].reset_index(drop=True), charge_offs, "ifrs9")
    pd.testing.assert_frame_equal(ordered.loans, shuffled.loans)
    by_loan = ordered.loans.set_index("loan_id")["assumptions"]
    assert cents(by_loan[["a", "b", "e", "f"]]).tolist() == cents([9.0 - 8.5, 55.0 - 50.0, 30.0 - 32.0, 0.0]).tolist()
    assert cents(ordered.loans.set_index("loan_id").loc[["a", "b", "e"], "remeasurement"]).tolist() == cents(
        [8.5 - 10.0, 50.0 - 18.0, 32.0 - 40.0 + 40.0]).tolist()  # A_m - P_m + W (e: 40 of its charge-off used)


def test_each_frameworks_loan_lines_are_its_own_when_compared_together():
    # compared together, the frameworks share the gross carrying amount's lines (one compacted
    # copy kept for both); each framework's loan table is still the one it has compared alone
    prior, current, rerun, charge_offs = _hand_runs()
    for frame in (prior, current):
        frame["ecl_cecl"], frame["ecl_cecl_modelled"] = frame["ecl_ifrs9"] * 3, frame["ecl_ifrs9_modelled"] * 3
    rerun["ecl_cecl_modelled"] = rerun["ecl_ifrs9_modelled"] * 3
    together = compare_runs(prior, current, current_at_prior_assumptions=rerun, charge_offs=charge_offs)
    for fw in ("ifrs9", "cecl"):
        pd.testing.assert_frame_equal(together[fw].loans, movement(prior, current, rerun, charge_offs, fw).loans)
    ifrs9, cecl = together["ifrs9"].loans, together["cecl"].loans
    assert cents(cecl["opening"]).tolist() == (3 * cents(ifrs9["opening"])).tolist()
    assert cents(cecl["balance_prior"]).tolist() == cents(ifrs9["balance_prior"]).tolist() == cents(
        [1000.0, 2000.0, 500.0, 300.0, 800.0, 0.0]).tolist()  # a, b, c, d, e as _hand_runs; f new


def test_rerun_must_cover_the_current_tape():
    rerun = pd.DataFrame({"loan_id": ["a"], "ecl_ifrs9_modelled": [0.1]})
    with pytest.raises(MovementError, match="missing from the rerun"):
        movement(_one(), _one(), rerun, None, "ifrs9")


def test_charge_off_of_a_loan_in_neither_run():
    """Opened and charged off within the period: its segment from the file, else shown apart."""
    from allowance.reconcile.runs import UNASSIGNED_SEGMENT

    charge_offs = pd.DataFrame({"loan_id": ["zz"], "gross_charge_off": [5.0]})
    one = _one(ecl_cecl=[0.1, 0.2])
    m = movement(one, one, None, charge_offs, "cecl")
    roll = m.rollforward.set_index("segment")
    assert roll.loc[UNASSIGNED_SEGMENT, "charge_offs"] == -5.0 and roll.loc[UNASSIGNED_SEGMENT, "provision"] == 5.0
    assert m.notes and "neither run" in m.notes[0]
    m = movement(one, one, None, charge_offs.assign(segment="card"), "cecl")
    assert m.rollforward.set_index("segment").loc["card", "charge_offs"] == -5.0
    # IFRS 9: no allowance was used; the charge-off is beyond the allowance
    m = movement(_one(), _one(), None, charge_offs, "ifrs9")
    assert m.write_offs.set_index("segment").loc[UNASSIGNED_SEGMENT, "charged_off_beyond_allowance"] == 5.0


def test_negative_charge_off_is_an_error():
    with pytest.raises(MovementError, match="negative"):
        movement(_one(), _one(), None, pd.DataFrame({"loan_id": ["a"], "gross_charge_off": [-1.0]}), "ifrs9")


def test_compare_runs_finds_the_shared_frameworks():
    prior, current, _, _ = _hand_runs()
    out = compare_runs(prior, current.drop(columns=["ecl_cecl"]))
    assert list(out) == ["ifrs9"]
    with pytest.raises(MovementError, match="share no framework"):
        compare_runs(prior.drop(columns=["ecl_ifrs9", "ecl_cecl"]), current)


def test_long_form_sums_like_the_tables():
    prior, current, rerun, charge_offs = _hand_runs()
    m = movement(prior, current, rerun, charge_offs, "ifrs9")
    long = m.to_long()
    allowance = long[long["table"] == "allowance"]
    assert cents(allowance.loc[allowance["line"] == "closing", "amount"]).sum() == cents(current["ecl_ifrs9"]).sum()
    assert set(long["table"]) == {"allowance", "gross_carrying_amount", "rollforward", "write_off_bridge"}


# --------------------------------------------------------------------------------------
# What-if comparison
# --------------------------------------------------------------------------------------


def test_what_if_by_segment_stage_and_scenario():
    base = pd.DataFrame({"loan_id": ["a", "b", "c"], "segment": ["auto", "auto", "card"], "stage": [1, 1, 2],
                         "stage_reason": ["performing"] * 2 + ["30 dpd"], "ecl_ifrs9": [1.0, 2.0, 3.0],
                         "ecl_ifrs9_base": [1.0, 2.0, 3.0], "ecl_ifrs9_downside": [2.0, 4.0, 6.0]})
    alt = base.assign(stage=[1, 2, 2], stage_reason=["performing", "PD ratio", "30 dpd"],
                      ecl_ifrs9=[2.0, 9.0, 6.0], ecl_ifrs9_base=[1.0, 2.0, 3.0])
    w = what_if_comparison(base, alt, ["ifrs9"])
    s = w.summary
    total = s[s["view"] == "total"].iloc[0]
    assert (total["base"], total["what_if"], total["difference"]) == (6.0, 17.0, 11.0)
    by = s[s["view"] == "segment and stage"].set_index(["segment", "stage"])
    # the stage column is the one vocabulary's class: "1", "2", "3", or "POCI" apart
    assert by.loc[("auto", "1"), "base"] == 3.0 and by.loc[("auto", "1"), "what_if"] == 2.0
    assert by.loc[("auto", "2"), "base"] == 0.0 and by.loc[("auto", "2"), "what_if"] == 9.0
    poci = what_if_comparison(base.assign(poci=[False, False, True]), alt.assign(poci=[False, False, True]),
                              ["ifrs9"]).summary
    assert set(poci.loc[poci["view"] == "segment and stage", "stage"]) == {"1", "2", "POCI"}
    scen = s[s["view"] == "scenario"].set_index("scenario")
    assert scen.loc["downside", "difference"] == 0.0
    assert w.stage_changes["loan_id"].tolist() == ["b"]
    assert w.stage_changes.iloc[0]["difference"] == 7.0
    with pytest.raises(MovementError, match="same loans"):
        what_if_comparison(base, alt.iloc[:2], ["ifrs9"])


# --------------------------------------------------------------------------------------
# The lines that explain themselves: gross-up, unwind, modifications, models or methods
# --------------------------------------------------------------------------------------


def _pair():
    prior = pd.DataFrame({"loan_id": ["a", "b"], "segment": ["auto", "card"], "stage": [1, 2],
                          "balance": [1000.0, 500.0], "ecl_cecl": [100.0, 50.0], "ecl_ifrs9": [100.0, 50.0],
                          "discount_rate_ifrs9": [0.12, 0.06], "discount_rate_cecl": [0.0, 0.0]})
    current = pd.DataFrame({"loan_id": ["a", "b", "p"], "segment": ["auto", "card", "auto"], "stage": [1, 2, 3],
                            "poci": [False, False, True], "balance": [950.0, 480.0, 800.0],
                            "ecl_cecl": [110.0, 60.0, 150.0], "ecl_ifrs9": [110.0, 60.0, 0.0],
                            "pcd_gross_up": [0.0, 0.0, 150.0], "modified": [False, True, False]})
    return prior, current


def test_a_pcd_purchase_grosses_up_amortised_cost_not_the_provision():
    # ASC 326-20-30-13: the allowance at purchase of a PCD asset is added to its amortised
    # cost. A 150,000 purchase-date allowance once debited the provision 150,000.
    prior, current = _pair()
    m = movement(prior, current, None, None, "cecl")
    table = m.allowance.set_index("line")
    assert table.loc["pcd_gross_up", "auto"] == 150.0 and table.loc["new", "auto"] == 0.0
    roll = m.rollforward.set_index("segment").loc["Total"]
    assert roll["initial_allowance_pcd"] == 150.0 and roll["provision"] == 20.0  # 10 + 10, by hand
    entries = m.journal[m.journal["entry"] == "PCD gross-up"]
    assert entries["debit"].sum() == entries["credit"].sum() == 150.0
    assert entries.iloc[0]["account"].startswith("Loans at amortised cost")
    # IFRS 9 has no gross-up: the POCI purchase enters at its (zero) allowance
    assert "pcd_gross_up" not in movement(prior, current, None, None, "ifrs9").allowance["line"].tolist()


def test_unwind_of_the_discount_over_the_period():
    # the opening allowance discounted at 12 % a year accretes (1.01)^3 - 1 over a quarter:
    # 100 x 0.030301 = 3.03; at 6 %: 50 x ((1.005)^3 - 1) = 0.75 (computed by hand)
    prior, current = _pair()
    m = movement(prior, current, None, None, "ifrs9", prior_as_of=date(2026, 6, 30), current_as_of=date(2026, 9, 30))
    loans = m.loans.set_index("loan_id")
    assert loans.loc["a", "unwind"] == 3.03 and loans.loc["b", "unwind"] == 0.75
    assert loans.loc["a", "remeasurement"] == 6.97  # 10.00 - 3.03
    # loan b is flagged modified: its remeasurement is on the modifications line
    assert loans.loc["b", "modifications"] == 9.25 and loans.loc["b", "remeasurement"] == 0.0  # 10.00 - 0.75
    assert not any("unwind" in n for n in m.not_isolated)
    # CECL undiscounted: rate 0, no unwind
    cecl = movement(prior, current, None, None, "cecl", prior_as_of=date(2026, 6, 30), current_as_of=date(2026, 9, 30))
    assert (cecl.loans["unwind"] == 0).all()


def test_a_prior_later_than_the_current_run_is_refused():
    prior, current = _pair()
    with pytest.raises(MovementError, match="later than the current run"):
        movement(prior, current, None, None, "ifrs9", prior_as_of=date(2026, 12, 31), current_as_of=date(2026, 9, 30))


def test_the_lines_that_cannot_be_isolated_are_named_with_the_reason():
    prior, current = _pair()
    m = movement(prior.drop(columns="discount_rate_ifrs9"), current.drop(columns="modified"), None, None, "ifrs9")
    text = " | ".join(m.not_isolated)
    assert "not rerun at the prior run's assumptions" in text
    assert "no discount_rate_ifrs9" in text and "no modified flag" in text
    # the line says on its face what it holds, in the summary and the detail tables alike
    said = "Remeasurement (incl. assumption and model changes, the discount unwind and modifications: not isolated)"
    for table in (m.allowance, m.allowance_detail):
        assert set(table.loc[table["line"] == "remeasurement", "label"]) == {said}
    # with everything isolated (a rerun at prior assumptions, the rates, the two dates, the flag)
    rerun = pd.DataFrame({"loan_id": ["a", "b", "p"], "ecl_ifrs9_modelled": [104.0, 52.0, 140.0]})
    whole = movement(prior, current, rerun, None, "ifrs9", prior_as_of=date(2026, 6, 30), current_as_of=date(2026, 9, 30))
    assert set(whole.allowance.loc[whole.allowance["line"] == "remeasurement", "label"]) == {
        "Remeasurement at prior assumptions"}


def test_model_changes_have_their_own_line():
    # IFRS 7 35I / ASC 326-20-50-11: changes in models or methods apart from assumptions
    prior, current = _pair()
    rerun = pd.DataFrame({"loan_id": ["a", "b", "p"], "ecl_cecl_modelled": [104.0, 52.0, 140.0]})
    changes = method_changes({"segments": {"auto": {"pd_12m": 0.02}}}, {"segments": {"auto": {"pd_curve": [0.02]}}})
    m = movement(prior, current, rerun, None, "cecl", method_changes=changes)
    table = m.allowance.set_index("line")
    assert table.loc["model_change", "auto"] == 6.0 and table.loc["assumptions", "auto"] == 0.0
    assert table.loc["assumptions", "card"] == 8.0 and table.loc["model_change", "card"] == 0.0
    assert any("PD source: pd_12m -> pd_curve" in n for n in m.notes)


def test_what_if_matches_loans_by_id_in_any_order():
    # the same loans in another order, and ids a spreadsheet would read as formulas (neutralised
    # alike on both sides): each loan set against its own; the reference is pandas' merge on the ids
    base = pd.DataFrame({"loan_id": ["a", "=b", "c", "d"], "segment": ["auto", "auto", "card", "card"],
                         "stage": [1, 1, 2, 1], "stage_reason": ["", "", "dpd>30", ""],
                         "ecl_ifrs9": [1.0, 2.0, 3.0, 4.0]})
    alt = base.assign(stage=[2, 1, 2, 3], ecl_ifrs9=[1.5, 2.0, 3.5, 9.0]).iloc[[3, 1, 0, 2]]
    w = what_if_comparison(base, alt, ["ifrs9"])
    joined = base.merge(alt, on="loan_id", suffixes=("_b", "_w"))
    moved = joined[joined["stage_b"] != joined["stage_w"]]
    assert w.stage_changes["loan_id"].tolist() == moved["loan_id"].tolist() == ["a", "d"]
    assert w.stage_changes["what_if_stage"].tolist() == moved["stage_w"].tolist()
    assert w.stage_changes["difference"].tolist() == [0.5, 5.0]
    total = w.summary[w.summary["view"] == "total"].iloc[0]
    assert (total["base"], total["what_if"]) == (10.0, 16.0)
    for other in (alt.iloc[:3], alt.assign(loan_id=["a", "=b", "c", "e"]), pd.concat([alt.iloc[:3], alt.iloc[:1]])):
        with pytest.raises(MovementError, match="same loans"):
            what_if_comparison(base, other, ["ifrs9"])
    # the same ids in the same order on both sides, but one repeated or missing: not each loan once
    for ids in (["a", "b", "a", "d"], ["a", "b", None, "d"]):
        twice = base.assign(loan_id=pd.array(ids, dtype="str"))
        with pytest.raises(MovementError, match="same loans"):
            what_if_comparison(twice, twice.copy(), ["ifrs9"])
