"""Delinquency states and the charge-off point.

A loan that rolls one bucket a month from current charges off in its fifth month past due as a
closed-end loan (120 days past due) and in its seventh as a revolving line (180 days) (common
practice for US retail credit, no source).
"""

from __future__ import annotations

import numpy as np
import pytest

from allowance.calibrate import estimate
from allowance.calibrate.states import AFTER_EXIT, CHARGE_OFF, PAID_OFF, STATES, first_exit, month_states
from allowance.intake.panel import PAID_OFF as PAID_FLAG
from allowance.intake.panel import WRITTEN_OFF

# Days past due at each month end of a loan that misses every payment from February on: the
# oldest unpaid due date is the 15th, so the month ends are 13, 41, 72, 102, 133, 163, 194 days.
ROLLING = [0, 13, 41, 72, 102, 133, 163, 194, 224]


def _states(dpd, charge_off_dpd, flags=None):
    dpd = np.asarray(dpd)
    flags = np.zeros(len(dpd), np.uint8) if flags is None else np.asarray(flags, np.uint8)
    return [STATES[s] if s < len(STATES) else "after_exit"
            for s in month_states(np.zeros(len(dpd), np.int32), dpd, flags, charge_off_dpd)]


@pytest.mark.parametrize(("point", "months_past_due"), [(120, 5), (180, 7)])
def test_rolling_a_bucket_a_month_charges_off_in_the_right_month(point, months_past_due):
    states = _states(ROLLING, point)
    first = states.index("charge_off")
    assert first == months_past_due  # month 0 current, month 1 the first past due
    assert states[:first] == ["current", "dpd_1_29", "dpd_30_59", "dpd_60_89", "dpd_90_119",
                              "dpd_120_149", "dpd_150_179"][:first]
    assert set(states[first + 1:]) == {"after_exit"}


def test_a_write_off_or_a_payoff_leaves_whatever_the_days_past_due():
    flags = [0, 0, WRITTEN_OFF, 0]
    assert _states([0, 45, 45, 0], 120, flags) == ["current", "dpd_30_59", "charge_off", "after_exit"]
    flags = [0, PAID_FLAG, 0]
    assert _states([0, 0, 0], 180, flags) == ["current", "paid_off", "after_exit"]


def test_first_exit_is_per_loan():
    loan = np.array([0, 0, 0, 1, 1, 2])
    state = np.array([0, CHARGE_OFF, AFTER_EXIT, 0, PAID_OFF, 3])
    position, kind = first_exit(loan, state)
    assert position.tolist() == [1, 1, 1, 4, 4, -1]
    assert kind.tolist() == [CHARGE_OFF] * 3 + [PAID_OFF] * 2 + [-1]


def _history(path, point_flag: bool):
    lines = ["loan_id,segment,month,balance,days_past_due,credit_limit"]
    for i, dpd in enumerate(ROLLING):
        lines.append(f"T1,term,2025-{i + 1:02d},1000,{dpd},")
        lines.append(f"R1,line,2025-{i + 1:02d},1000,{dpd},2000")
    path.write_text("\n".join(lines) + "\n")
    return path


def test_the_calibration_sees_the_charge_off_in_the_fifth_and_seventh_month(tmp_path):
    # the closed-end loan (no limit) and the revolving line (a limit) follow the same days past due
    cal = estimate(_history(tmp_path / "h.csv", True))
    assert cal.frame.charge_off_dpd.tolist() == [120, 180]  # by default, from the credit limit
    term = cal.roll_rates.segments["term"]
    line = cal.roll_rates.segments["line"]
    # one transition each step of the way, the last into charge-off from the last bucket
    assert np.diag(term.counts, 1)[:5].tolist() == [1, 1, 1, 1, 1]
    assert term.counts[:, term.states.index("charge_off")].sum() == 1
    assert term.counts[term.states.index("dpd_90_119"), term.states.index("charge_off")] == 1
    assert np.diag(line.counts, 1)[:7].tolist() == [1] * 7
    assert line.counts[line.states.index("dpd_150_179"), line.states.index("charge_off")] == 1
