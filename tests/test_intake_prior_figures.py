"""A prior run's loans.csv read as figures (allowance.intake.read_prior_figures), column by column
against pandas.read_csv of the same file (the reference), and the values it leaves to the frame."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings

from allowance.exceptions import InputFileError
from allowance.intake import read_prior_figures, read_prior_run
from allowance.reconcile import compare_runs, movement_columns, movement_kinds
from tests.strategies import run_pairs


def _folder(tmp_path, loans: pd.DataFrame, name: str = "prior"):
    folder = tmp_path / name
    folder.mkdir()
    loans.to_csv(folder / "loans.csv", index=False)
    (folder / "run.json").write_text(json.dumps({"package": "allowance", "as_of": "2026-06-30",
                                                 "frameworks": ["ifrs9", "cecl"]}))
    return folder


def _with_movement_columns(frame: pd.DataFrame, seed: int) -> pd.DataFrame:
    """A run's loans with every column the movement reads (rates, provisions, flags, gross-ups)."""
    rng = np.random.default_rng(seed)
    n = len(frame)
    out = frame.drop(columns=[c for c in frame.columns if c.startswith("overlay_")])
    for f in ("ifrs9", "cecl"):
        rate = rng.integers(0, 1200, n) / 10_000
        out[f"discount_rate_{f}"] = np.where(rng.random(n) < 0.1, np.nan, rate)  # some blank
        out[f"provision_{f}"] = np.where(rng.random(n) < 0.5, np.nan, rng.integers(0, 10**6, n) / 100)
    out["modified"] = rng.random(n) < 0.1
    out["pcd_gross_up"] = np.where(rng.random(n) < 0.9, np.nan, rng.integers(0, 10**6, n) / 100)
    out["other"] = "not read"
    return out


@settings(max_examples=40, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(pair=run_pairs())
def test_figures_are_the_file_as_pandas_reads_it(tmp_path_factory, pair):
    prior = _with_movement_columns(pair[0], len(pair[0]))
    folder = _folder(tmp_path_factory.mktemp("run"), prior)
    read = read_prior_figures(folder, movement_kinds())
    assert read is not None
    got = read.loans
    ref = pd.read_csv(folder / "loans.csv", dtype={"loan_id": str, "segment": str})  # the reference
    assert got.rows == len(ref)
    assert list(got.columns) == [c for c in ref.columns if c in movement_columns()]
    assert got.ids["loan_id"].to_pylist() == ref["loan_id"].tolist()
    names, codes = got.codes["segment"]
    assert [names[c] for c in codes] == ref["segment"].tolist()
    assert names == list(pd.unique(ref["segment"]))  # in order of first appearance, as pandas.unique
    cents = lambda s: np.rint(s.to_numpy(np.float64) * 100).astype(np.int64)  # noqa: E731
    for column in ("balance", "ecl_ifrs9", "ecl_ifrs9_modelled", "ecl_cecl", "ecl_cecl_modelled"):
        np.testing.assert_array_equal(got.cents[column], cents(ref[column]))
    np.testing.assert_array_equal(got.cents["pcd_gross_up"], cents(ref["pcd_gross_up"].fillna(0.0)))
    for f in ("ifrs9", "cecl"):
        # bit for bit the float pandas reads (a rate kept as millionths reads back as the same float)
        rate = ref[f"discount_rate_{f}"].fillna(0.0).to_numpy(np.float64)
        np.testing.assert_array_equal(got.rate(f"discount_rate_{f}").view(np.int64), rate.view(np.int64))
        by_pandas = (ref.assign(c=cents(ref[f"provision_{f}"].fillna(0.0))).groupby("segment", sort=False)["c"].sum())
        assert got.sums[f"provision_{f}"] == {k: int(v) for k, v in by_pandas.items()}
    np.testing.assert_array_equal(got.flags["poci"], ref["poci"].to_numpy(bool))
    np.testing.assert_array_equal(got.flags["modified"], ref["modified"].to_numpy(bool))
    np.testing.assert_array_equal(got.stages["stage"], ref["stage"].to_numpy(np.int8))


@settings(max_examples=30, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(pair=run_pairs())
def test_the_movement_from_figures_is_the_movement_from_the_frame(tmp_path_factory, pair):
    # the frame read_prior_run gives is the reference: every table and the loan table the same
    prior, current, rerun, charge_offs = pair
    base = tmp_path_factory.mktemp("runs")
    folders = [_folder(base, _with_movement_columns(run, 7), name) for run, name in ((prior, "p"), (current, "c"))]
    frames = [read_prior_run(f, columns=movement_columns()).loans for f in folders]
    figures = [read_prior_figures(f, movement_kinds()).loans for f in folders]
    for fw in ("ifrs9", "cecl"):
        a = compare_runs(*frames, current_at_prior_assumptions=rerun, charge_offs=charge_offs, frameworks=[fw])[fw]
        b = compare_runs(*figures, current_at_prior_assumptions=rerun, charge_offs=charge_offs, frameworks=[fw])[fw]
        for table in ("allowance", "gross", "allowance_detail", "gross_detail", "rollforward", "journal", "write_offs",
                      "loans"):
            pd.testing.assert_frame_equal(getattr(a, table), getattr(b, table))


def test_rates_of_more_than_six_decimals_are_kept_as_read(tmp_path):
    # 0.1234567 is not a whole number of millionths: kept as the float pandas.read_csv gives
    frame = pd.DataFrame({"loan_id": ["a", "b"], "segment": "auto", "balance": [1.0, 2.0], "ecl_ifrs9": [0.1, 0.2],
                          "discount_rate_ifrs9": [0.1234567, 0.05], "discount_rate_cecl": [0.0525, -0.0]})
    folder = _folder(tmp_path, frame)
    got = read_prior_figures(folder, movement_kinds()).loans
    ref = pd.read_csv(folder / "loans.csv")
    assert got.rates["discount_rate_ifrs9"].dtype == np.float64
    assert got.rates["discount_rate_cecl"].dtype == np.float64  # -0.0 is not the 0.0 that 0 / 1e6 gives
    for column in ("discount_rate_ifrs9", "discount_rate_cecl"):
        np.testing.assert_array_equal(got.rate(column).view(np.int64), ref[column].to_numpy(np.float64).view(np.int64))


@pytest.mark.parametrize("spoil, why", [
    (lambda f: f.assign(ecl_ifrs9=f["ecl_ifrs9"].where(f.index != 1)), "a blank figure"),
    (lambda f: f.assign(stage=f["stage"].where(f.index != 1, 4)), "a stage that is not 1, 2 or 3"),
    (lambda f: f.assign(balance=f["balance"].astype(object).where(f.index != 1, "n/a")), "text for a number"),
    (lambda f: f.assign(segment=f["segment"].where(f.index != 1)), "a blank segment"),
    (lambda f: f.assign(loan_id=f["loan_id"].where(f.index != 1)), "a blank id"),
    (lambda f: f.drop(columns="loan_id"), "no loan_id"),
])
def test_a_value_that_needs_its_message_is_left_to_the_frame(tmp_path, spoil, why):
    frame = pd.DataFrame({"loan_id": ["a", "b", "c"], "segment": "auto", "stage": [1, 2, 3], "poci": False,
                          "balance": [1.0, 2.0, 3.0], "ecl_ifrs9": [0.1, 0.2, 0.3]})
    folder = _folder(tmp_path, spoil(frame))
    assert read_prior_figures(folder, movement_kinds()) is None, why


def test_a_missing_folder_is_named_as_read_prior_run_names_it(tmp_path):
    with pytest.raises(InputFileError, match="prior run folder was not found"):
        read_prior_figures(tmp_path / "nowhere", movement_kinds())
