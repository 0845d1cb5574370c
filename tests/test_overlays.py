"""Overlays: scope, expiry, percent and amount adjustments, exact cent allocation."""

from __future__ import annotations

from datetime import date

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from allowance.overlays import TABLE_COLUMNS, OverlayResult, allocate_cents, apply_overlays
from allowance.schemas import Overlay
from tests.strategies import ecl_vectors

AS_OF = date(2026, 9, 30)


def _overlay(**fields) -> Overlay:
    terms = dict(name="test", kind="percent", value=0.1, rationale="a reason", owner="risk committee")
    return Overlay(**{**terms, **fields})


def _loans() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "segment": ["auto", "auto", "auto", "card", "card"],
            "stage": np.array([1, 2, 3, 1, 2], dtype=np.int8),
            "ecl_ifrs9_modelled": [100.0, 250.55, 1000.0, 40.0, 0.0],
            "ecl_cecl_modelled": [300.0, 400.0, 1100.0, 90.0, 10.0],
        }
    )


def _cents(values) -> np.ndarray:
    return np.rint(np.asarray(values) * 100).astype(np.int64)


def test_percent_overlay_rounds_per_loan():
    res = apply_overlays(_loans(), [_overlay(segment="auto", value=0.033)], AS_OF, ["ifrs9", "cecl"])
    # by hand: 3.3 % of 100, 250.55, 1000 -> 3.30, 8.268 -> 8.27, 33.00
    assert res.adjustments["ifrs9"].tolist() == [3.3, 8.27, 33.0, 0.0, 0.0]
    assert res.adjustments["cecl"].tolist() == pytest.approx([9.9, 13.2, 36.3, 0.0, 0.0])
    row = res.table.iloc[0]
    assert row["status"] == "applied" and row["loans_in_scope"] == 3
    assert row["effect_ifrs9"] == pytest.approx(44.57) and row["effect_cecl"] == pytest.approx(59.4)


def test_amount_overlay_foots_to_the_cent():
    res = apply_overlays(_loans(), [_overlay(kind="amount", value=1000.01)], AS_OF, ["ifrs9"])
    adj = res.adjustments["ifrs9"]
    assert _cents(adj).sum() == 100001
    # pro rata to modelled ECL: the zero-ECL loan gets nothing
    assert adj[4] == 0.0 and adj[2] == pytest.approx(1000.01 * 1000.0 / 1390.55, abs=0.01)
    assert res.table["effect_ifrs9"][0] == 1000.01


def test_amount_overlay_on_zero_ecl_splits_equally():
    loans = pd.DataFrame({"segment": ["auto"] * 3, "stage": [1, 1, 1], "ecl_ifrs9_modelled": [0.0, 0.0, 0.0]})
    res = apply_overlays(loans, [_overlay(kind="amount", value=1.0)], AS_OF, ["ifrs9"])
    assert _cents(res.adjustments["ifrs9"]).tolist() == [34, 33, 33]  # largest remainder, by hand


@settings(max_examples=50)
@given(modelled=ecl_vectors(), amount_cents=st.integers(-10**10, 10**10))
def test_allocation_sums_exactly(modelled, amount_cents):
    # largest-remainder apportionment: the shares always sum to the total (common practice, no source)
    shares = allocate_cents(amount_cents, modelled * 100)
    assert shares.dtype == np.int64 and int(shares.sum()) == amount_cents
    assert np.all(np.sign(shares) * np.sign(amount_cents) >= 0)
    if modelled.sum() > 0:
        exact = amount_cents * modelled / modelled.sum()
        assert np.all(np.abs(shares - exact) < 1.0 + 1e-6 * abs(amount_cents))  # within a cent of pro rata


@settings(max_examples=50)
@given(modelled=ecl_vectors(), amount=st.decimals(0, 10**7, places=2))
def test_amount_overlay_allocation_sums_exactly(modelled, amount):
    loans = pd.DataFrame({"segment": "auto", "stage": 1, "ecl_ifrs9_modelled": modelled})
    res = apply_overlays(loans, [_overlay(kind="amount", value=float(amount))], AS_OF, ["ifrs9"])
    assert _cents(res.adjustments["ifrs9"]).sum() == int(amount * 100)


def test_expired_overlay_is_warned_and_not_applied():
    expired = _overlay(name="old", expires=date(2026, 6, 30))
    today = _overlay(name="today", expires=AS_OF)  # expires on the as-of date: still live
    res = apply_overlays(_loans(), [expired, today], AS_OF, ["ifrs9"])
    assert res.table["status"].tolist() == ["expired", "applied"]
    assert res.table["effect_ifrs9"][0] == 0.0
    assert len(res.warnings) == 1 and "'old'" in res.warnings[0] and "2026-06-30" in res.warnings[0]
    np.testing.assert_allclose(res.adjustments["ifrs9"], _cents(_loans()["ecl_ifrs9_modelled"] * 0.1) / 100)


def test_stage_filter_uses_the_ifrs9_stage_for_both_frameworks():
    res = apply_overlays(_loans(), [_overlay(stage=2, value=0.5)], AS_OF, ["ifrs9", "cecl"])
    assert res.adjustments["ifrs9"].tolist() == [0.0, 125.28, 0.0, 0.0, 0.0]  # by hand: 250.55 / 2 = 125.275, tie to even cent
    assert res.adjustments["cecl"].tolist() == [0.0, 200.0, 0.0, 0.0, 5.0]
    assert res.table["loans_in_scope"][0] == 2


def test_stage_filter_without_stages_is_not_applicable():
    loans = _loans().drop(columns=["stage", "ecl_ifrs9_modelled"])
    res = apply_overlays(loans, [_overlay(stage=3), _overlay(name="all")], AS_OF, ["cecl"])
    assert res.table["status"].tolist() == ["not applicable", "applied"]
    assert "stage" in res.warnings[0]
    assert res.adjustments["cecl"].tolist() == pytest.approx([30.0, 40.0, 110.0, 9.0, 1.0])


def test_framework_specific_overlay():
    res = apply_overlays(_loans(), [_overlay(framework="cecl"), _overlay(name="x", framework="ifrs9")],
                         AS_OF, ["cecl"])
    assert res.table["status"].tolist() == ["applied", "not applicable"]
    assert set(res.adjustments) == {"cecl"}
    assert res.table["effect_ifrs9"].tolist() == [0.0, 0.0]


def test_no_loans_in_scope():
    res = apply_overlays(_loans(), [_overlay(segment="card", stage=3)], AS_OF, ["ifrs9"])
    assert res.table["status"][0] == "no loans in scope" and res.table["loans_in_scope"][0] == 0
    assert res.adjustments["ifrs9"].tolist() == [0.0] * 5 and len(res.warnings) == 1


def test_negative_adjustment_never_takes_ecl_below_zero():
    release = _overlay(name="release", kind="amount", value=-2000.0, segment="auto")
    res = apply_overlays(_loans(), [_overlay(name="cut", value=-0.5), release], AS_OF, ["ifrs9"])
    final = _loans()["ecl_ifrs9_modelled"].to_numpy() + res.adjustments["ifrs9"]
    assert np.all(final >= 0.0)
    np.testing.assert_allclose(final[:3], 0.0, atol=1e-9)  # auto loans floored at zero
    row = res.table.set_index("name").loc["release"]
    assert "clipped" in row["note"] and row["effect_ifrs9"] == pytest.approx(-675.27)  # what was left: 50 + 125.27 + 500, by hand
    assert any("release" in w and "clipped" in w for w in res.warnings)


def test_table_columns_and_result_type():
    ov = _overlay(approved=date(2026, 9, 1), expires=date(2026, 12, 31), stage=1)
    res = apply_overlays(_loans(), [ov], AS_OF, ["ifrs9", "cecl"])
    assert isinstance(res, OverlayResult)
    assert tuple(res.table.columns) == TABLE_COLUMNS
    row = res.table.iloc[0]
    assert row["framework"] == "both" and row["approved"] == date(2026, 9, 1) and row["stage"] == 1
    empty = apply_overlays(_loans(), [], AS_OF, ["ifrs9"])
    assert tuple(empty.table.columns) == TABLE_COLUMNS and len(empty.table) == 0
    assert empty.adjustments["ifrs9"].tolist() == [0.0] * 5
