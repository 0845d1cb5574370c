"""Refinance risk at maturity: the band lookup, the table's shape and the maturity default."""

from __future__ import annotations

import numba
import numpy as np
import pytest

from allowance.curves.refinance import maturity_ltv, refinance_default, refinance_pd


def test_ltv_bands_are_closed_above():
    # by hand, common practice, no source: bands <= 60 %, (60, 80], (80, 100], above 100 %
    ltv = maturity_ltv(np.array([540_000.0, 600_000.0, 600_001.0, 1_000_000.0, 1_200_000.0]), 1_000_000.0)
    q = refinance_pd(ltv, [0.6, 0.8, 1.0], [0.02, 0.05, 0.15, 0.40])
    assert q.tolist() == [0.02, 0.02, 0.05, 0.15, 0.40]


def test_missing_collateral_and_coverage_take_the_riskiest_band():
    # documented conservative reading: no collateral value -> the highest LTV band; no
    # coverage -> the lowest coverage band
    ltv = maturity_ltv(np.array([500_000.0, 500_000.0]), np.array([np.nan, 0.0]))
    assert np.isinf(ltv).all()
    table = [[0.10, 0.20, 0.50], [0.02, 0.05, 0.25]]
    q = refinance_pd(np.array([0.5, 0.5, 0.5, np.inf]), [0.6, 0.9], table,
                     dscr=np.array([1.0, 1.25, np.nan, 2.0]), dscr_bands=[1.25])
    assert q.tolist() == [0.10, 0.02, 0.10, 0.25]


def test_maturity_default_is_survival_times_q_and_compiles():
    assert refinance_default(0.8, 0.25) == pytest.approx(0.2, abs=1e-15)
    assert numba.njit(refinance_default)(0.8, 0.25) == refinance_default(0.8, 0.25)
