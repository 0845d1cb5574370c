"""IFRS 9 staging, the default test and horizons."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings

from allowance.exceptions import AssumptionsError
from allowance.schemas import Ifrs9Rules, SegmentAssumptions
from allowance.frameworks import rules_for
from allowance.staging import assign_stages, in_default, lifetime_months
from tests.strategies import staging_tapes

RULES = Ifrs9Rules(sicr_pd_ratio=2.0)
SEGMENTS = {"auto": SegmentAssumptions(pd_12m=0.02, lgd=0.4)}


def _tape(n: int = 1, **columns) -> pd.DataFrame:
    """A tape of ``n`` performing loans in segment ``auto``; keyword columns override."""
    frame = pd.DataFrame(
        {
            "segment": ["auto"] * n,
            "grade": ["B"] * n,
            "days_past_due": np.zeros(n, dtype=np.int64),
            "defaulted": False,
            "bankrupt": False,
            "watchlist": False,
            "forborne": False,
            "credit_impaired_at_purchase": False,
            "pd_12m_at_origination": np.nan,
            "prior_stage": np.nan,
            "months_performing": np.nan,
            "source_row": np.arange(2, n + 2),
        }
    )
    for name, value in columns.items():
        frame[name] = value
    return frame


def _stage(tape, pd_now=0.02, rules=RULES, segments=SEGMENTS) -> pd.DataFrame:
    return assign_stages(tape, np.broadcast_to(np.asarray(pd_now, float), len(tape)).copy(), rules, segments)


# --------------------------------------------------------------------------------------
# Boundaries and each trigger
# --------------------------------------------------------------------------------------


def test_days_past_due_boundaries():
    # IFRS 9 5.5.11 (more than 30 days past due) and B5.5.37 (90 days past due)
    out = _stage(_tape(5, days_past_due=[0, 30, 31, 89, 90]))
    assert out["stage"].tolist() == [1, 1, 2, 2, 3]
    assert out["stage_reason"].tolist() == ["performing", "performing", "dpd>30", "dpd>30", "dpd>=90"]


def test_thresholds_are_configurable():
    rules = Ifrs9Rules(sicr_pd_ratio=2.0, sicr_backstop_dpd=15, default_dpd=60)
    out = _stage(_tape(4, days_past_due=[15, 16, 59, 60]), rules=rules)
    assert out["stage"].tolist() == [1, 2, 2, 3]
    assert out["stage_reason"].tolist()[1:] == ["dpd>15", "dpd>15", "dpd>=60"]


def test_defaulted_flag_is_stage_3():
    out = _stage(_tape(2, defaulted=[True, False]))
    assert out["stage"].tolist() == [3, 1] and out["stage_reason"][0] == "defaulted"


def test_bankrupt_flag_is_stage_3():
    out = _stage(_tape(2, bankrupt=[True, False], days_past_due=[95, 0]))
    assert out["stage"].tolist() == [3, 1] and out["stage_reason"][0] == "dpd>=90;bankrupt"


def test_watchlist_flag():
    tape = _tape(2, watchlist=[True, False])
    assert _stage(tape)["stage"].tolist() == [2, 1]
    assert _stage(tape)["stage_reason"][0] == "watchlist"
    off = Ifrs9Rules(sicr_pd_ratio=2.0, watchlist_is_sicr=False)
    assert _stage(tape, rules=off)["stage"].tolist() == [1, 1]


def test_forborne_flag():
    tape = _tape(2, forborne=[True, False], days_past_due=[40, 0])
    assert _stage(tape)["stage_reason"].tolist() == ["dpd>30;forborne", "performing"]
    off = Ifrs9Rules(sicr_pd_ratio=2.0, forborne_is_sicr=False)
    assert _stage(tape, rules=off)["stage_reason"].tolist() == ["dpd>30", "performing"]


def test_pd_ratio_test():
    # PD at origination 1 %: 2.0 % meets the ratio 2; 1.9 % does not; blank origination PD: no test
    tape = _tape(4, pd_12m_at_origination=[0.01, 0.01, np.nan, 0.0])
    out = _stage(tape, pd_now=[0.02, 0.019, 0.5, 0.0])
    assert out["stage"].tolist() == [2, 1, 1, 1]
    assert out["stage_reason"][0] == "pd_ratio"
    # with a minimum absolute increase of 2 points, a rise from 1 % to 2.5 % is not enough
    rules = Ifrs9Rules(sicr_pd_ratio=2.0, sicr_min_pd_increase=0.02)
    out = _stage(_tape(2, pd_12m_at_origination=0.01), pd_now=[0.025, 0.03], rules=rules)
    assert out["stage"].tolist() == [1, 2]


# --------------------------------------------------------------------------------------
# Low credit risk, probation, POCI
# --------------------------------------------------------------------------------------


def test_low_credit_risk_exemption():
    # IFRS 9 5.5.10: only the PD-ratio test is waived
    tape = _tape(3, pd_12m_at_origination=0.01, days_past_due=[0, 31, 0], watchlist=[False, False, True])
    exempt = {"auto": SegmentAssumptions(pd_12m=0.02, lgd=0.4, low_credit_risk=True)}
    out = _stage(tape, pd_now=0.03, segments=exempt)
    assert out["stage"].tolist() == [1, 2, 2]
    assert out["stage_reason"].tolist() == ["low_credit_risk", "dpd>30", "watchlist"]
    assert _stage(tape, pd_now=0.03)["stage"].tolist() == [2, 2, 2]  # off by default


def test_low_credit_risk_by_grade():
    tape = _tape(2, grade=["AAA", "B"], pd_12m_at_origination=0.01)
    segments = {"auto": SegmentAssumptions(pd_12m=0.02, lgd=0.4, low_credit_risk_grades=["AAA"])}
    out = _stage(tape, pd_now=0.05, segments=segments)
    assert out["stage"].tolist() == [1, 2]
    assert out["stage_reason"].tolist() == ["low_credit_risk", "pd_ratio"]


def test_probation_out_of_stage_3():
    rules = Ifrs9Rules(sicr_pd_ratio=2.0, probation_months_stage3=3)
    tape = _tape(4, prior_stage=[3.0, 3.0, 3.0, 3.0], months_performing=[2.0, 3.0, np.nan, 1.0],
                 days_past_due=[0, 0, 0, 45])
    out = _stage(tape, rules=rules)
    assert out["stage"].tolist() == [3, 1, 3, 3]
    assert out["stage_reason"].tolist() == ["probation_from_3", "performing", "probation_from_3", "probation_from_3"]


def test_probation_out_of_stage_2():
    rules = Ifrs9Rules(sicr_pd_ratio=2.0, probation_months_stage2=6)
    tape = _tape(3, prior_stage=[2.0, 2.0, 1.0], months_performing=[5.0, 6.0, 0.0])
    out = _stage(tape, rules=rules)
    assert out["stage"].tolist() == [2, 1, 1]
    assert out["stage_reason"][0] == "probation_from_2"
    # no probation by default: the cure is immediate
    assert _stage(tape)["stage"].tolist() == [1, 1, 1]


def test_poci_is_always_lifetime():
    # IFRS 9 5.5.13: purchased or originated credit-impaired
    tape = _tape(3, credit_impaired_at_purchase=True, days_past_due=[0, 40, 120])
    out = _stage(tape)
    assert out["poci"].tolist() == [True, True, True]
    assert out["stage"].tolist() == [2, 2, 3]
    assert out["stage_reason"].tolist() == ["poci", "poci;dpd>30", "poci;dpd>=90"]


# --------------------------------------------------------------------------------------
# Shape of the result and errors
# --------------------------------------------------------------------------------------


def test_result_frame_shape_and_index():
    tape = _tape(3, days_past_due=[0, 40, 100]).set_axis([10, 20, 30])
    out = _stage(tape)
    assert list(out.columns) == ["stage", "stage_reason", "poci"]
    assert out.index.tolist() == [10, 20, 30]
    assert out["stage"].dtype == np.int8 and out["poci"].dtype == bool
    assert out.loc[30, "stage"] == 3


def test_unknown_segment_names_row_and_segment():
    tape = _tape(2, segment=["auto", "boat"])
    with pytest.raises(AssumptionsError, match="boat") as err:
        _stage(tape)
    assert err.value.row == 3 and err.value.column == "segment"


def test_pd_now_must_be_one_finite_pd_per_loan():
    with pytest.raises(ValueError):
        assign_stages(_tape(2), np.array([0.01, np.nan]), RULES, SEGMENTS)
    with pytest.raises(ValueError):
        assign_stages(_tape(2), np.array([0.01]), RULES, SEGMENTS)


def test_in_default():
    tape = _tape(4, days_past_due=[89, 90, 0, 0], defaulted=[False, False, True, False],
                 bankrupt=[False, False, False, True])
    assert in_default(tape, 90).tolist() == [False, True, True, True]


@settings(max_examples=50)
@given(staging_tapes())
def test_stage_invariants(case):
    tape, pd_now = case
    segments = {"a": SegmentAssumptions(pd_12m=0.02, lgd=0.4, low_credit_risk_grades=["A"]),
                "b": SegmentAssumptions(pd_12m=0.02, lgd=0.4)}
    rules = Ifrs9Rules(sicr_pd_ratio=2.0, probation_months_stage3=3, probation_months_stage2=2)
    out = assign_stages(tape, pd_now, rules, segments)
    stage = out["stage"].to_numpy()
    assert set(np.unique(stage)) <= {1, 2, 3}
    assert np.all(stage[in_default(tape, rules.default_dpd)] == 3)
    assert np.all(stage[out["poci"].to_numpy()] >= 2)
    assert np.all(stage[tape["days_past_due"].to_numpy() > 30] >= 2)
    assert out["stage_reason"].str.len().min() > 0
    stage1 = out["stage_reason"][stage == 1]
    assert stage1.isin(["performing", "low_credit_risk"]).all()


# --------------------------------------------------------------------------------------
# Horizons
# --------------------------------------------------------------------------------------


def test_ifrs9_horizons():
    # IFRS 9 5.5.5 (12 months for stage 1), 5.5.3 (lifetime), B5.5.40 (revolving: behavioural life)
    out = rules_for("ifrs9").horizon_months(
        stage=[1, 1, 2, 3, 1, 2],
        remaining_months=[300, 7, 300, 300, 1, 1],
        repayment=np.array(["level", "level", "balloon", "level", "revolving", "revolving"], dtype=object),
        behavioural_life=[0, 0, 0, 0, 36, 36],
    )
    assert out.tolist() == [12, 7, 300, 300, 12, 36]
    assert out.dtype == np.int64
    short = rules_for("ifrs9").horizon_months([1], [1], pd.Series(["revolving"]), [6])
    assert short.tolist() == [6]


def test_cecl_horizons_are_lifetime_for_every_loan():
    # ASC 326-20-30-6: the contractual term (prepayments through survival, no extensions)
    out = rules_for("cecl").horizon_months([1, 2, 3, 1], [300, 300, 5, 1], ["level", "level", "level", "revolving"],
                                           [0, 0, 0, 24])
    assert out.tolist() == [300, 300, 5, 24]


def test_revolving_without_behavioural_life_is_an_error():
    with pytest.raises(AssumptionsError, match="behavioural"):
        lifetime_months([1], ["revolving"], [0])
