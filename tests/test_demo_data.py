"""The bundled demo data: reproducible, valid, and shaped like the book it claims to be.

The manifest (``demo/manifest.toml``) is the one list of the sample files; these tests read it
rather than naming files of their own.
"""

from __future__ import annotations

import csv
import sys
import tomllib
from datetime import date, datetime
from pathlib import Path

import numpy as np
import numpy_financial as npf
import pandas as pd
import pytest

from allowance.schemas import REPAYMENTS, Assumptions

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo"
try:
    from demo import files
    from demo.generate import SEED, SEGMENTS, generate
except ImportError:  # plain `pytest` from elsewhere: the repository root is not on sys.path
    sys.path.insert(0, str(ROOT))
    from demo import files
    from demo.generate import SEED, SEGMENTS, generate

MANIFEST = tomllib.loads((DEMO / "manifest.toml").read_text(encoding="utf-8"))
BUCKETS = [(1, 29), (30, 59), (60, 89), (90, 119), (120, 10_000)]


def _tape(name: str) -> pd.DataFrame:
    tape = pd.read_csv(DEMO / name, dtype={"loan_id": str, "grade": str, "branch": str},
                       parse_dates=["origination_date", "maturity_date"], keep_default_na=False,
                       na_values=[""])
    return tape.assign(grade=tape["grade"].fillna(""))


def _assumptions(name: str) -> dict:
    return tomllib.loads((DEMO / name).read_text(encoding="utf-8"))


def _merge(base: dict, overlay: dict) -> dict:
    """Tables merge key by key (the overlay-file rule of the design)."""
    out = dict(base)
    for key, value in overlay.items():
        out[key] = _merge(out[key], value) if isinstance(value, dict) and isinstance(out.get(key), dict) else value
    return out


def _months(later: pd.Series, earlier: pd.Series) -> pd.Series:
    return (later.dt.year - earlier.dt.year) * 12 + later.dt.month - earlier.dt.month


@pytest.fixture(scope="module")
def q3() -> pd.DataFrame:
    return _tape(MANIFEST["current"]["tape"])


@pytest.fixture(scope="module")
def q2() -> pd.DataFrame:
    return _tape(MANIFEST["prior"]["tape"])


@pytest.fixture(scope="module")
def charge_offs() -> pd.DataFrame:
    return pd.read_csv(DEMO / MANIFEST["current"]["charge_offs"], dtype={"loan_id": str})


# --------------------------------------------------------------------------------------
# reproducible
# --------------------------------------------------------------------------------------


def test_regenerating_reproduces_the_committed_files_byte_for_byte(tmp_path):
    written = generate(tmp_path, seed=MANIFEST["seed"])
    names = {p.name for p in written}
    assert names == {f["name"] for f in MANIFEST["files"]} | {"manifest.toml"}
    for name in sorted(names):
        if name.endswith(".parquet"):  # the bytes carry the writer's version; the content must match
            import pyarrow.parquet as pq

            assert pq.read_table(tmp_path / name).equals(pq.read_table(DEMO / name)), (
                f"demo/{name} is not what demo/generate.py writes; run `python demo/generate.py`")
            continue
        assert (tmp_path / name).read_bytes() == (DEMO / name).read_bytes(), (
            f"demo/{name} is not what demo/generate.py writes; run `python demo/generate.py`")


def test_manifest_names_the_lender_seed_and_every_role():
    assert MANIFEST["seed"] == SEED
    assert MANIFEST["lender"] and MANIFEST["invented"] is True
    for f in MANIFEST["files"]:
        assert (DEMO / f["name"]).is_file() and f["description"]
        assert f["role"] in {"tape", "assumptions", "overlay", "transition_matrix", "charge_offs", "history", "policy",
                             "macro_history"}
    for section in ("current", "prior", "messy"):
        assert (DEMO / MANIFEST[section]["tape"]).is_file()
        assert (DEMO / MANIFEST[section]["assumptions"]).is_file()
    assert (DEMO / MANIFEST["what_if"]["overlay"]).is_file()


# --------------------------------------------------------------------------------------
# assumptions
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["assumptions_2026q3.toml", "assumptions_2026q2.toml", "messy_assumptions.toml"])
def test_assumptions_validate_against_the_schema(name):
    Assumptions.model_validate(_assumptions(name))


def test_current_assumptions_use_every_kind_of_pd_source_and_both_frameworks():
    a = Assumptions.model_validate(_assumptions(MANIFEST["current"]["assumptions"]))
    sources = {name: seg.pd_source for name, seg in a.segments.items()}
    # calibrated from the history: PD by loan age, by grade, pooled, and roll rates
    assert set(sources.values()) == {"pd_12m", "pd_12m_by_grade", "pd_curve_by_age", "transition_matrix"}
    assert sources["mortgage"] == "pd_curve_by_age" and sources["cre"] == "pd_12m"
    assert sources["cards"] == "transition_matrix" and a.segments["cards"].charge_off_dpd == 180
    assert a.segments["mortgage"].collateral_lgd and a.segments["cre"].collateral_lgd  # from the policy
    assert len(a.segments["mortgage"].cpr_by_age) >= 24 and a.segments["cards"].cpr is None
    assert a.run.frameworks == ["ifrs9", "cecl"]
    assert (a.cecl.reasonable_supportable_months, a.cecl.reversion_months, a.cecl.reversion) == (
        24, 12, "straight_line")
    assert a.scenario_names == ["base", "upside", "downside"]
    assert sum(a.weights) == 1.0
    assert sorted(o.kind for o in a.overlays) == ["amount", "percent"]
    assert all(o.rationale and o.owner and o.approved and o.expires for o in a.overlays)


def test_prior_assumptions_differ_in_scenarios_and_overlays():
    now = Assumptions.model_validate(_assumptions(MANIFEST["current"]["assumptions"]))
    before = Assumptions.model_validate(_assumptions(MANIFEST["prior"]["assumptions"]))
    assert now.segments.keys() == before.segments.keys()
    assert now.weights != before.weights
    assert {o.name: o.value for o in now.overlays} != {o.name: o.value for o in before.overlays}
    assert before.run.as_of == date(2026, 6, 30) and now.run.as_of == date(2026, 9, 30)


def test_downside_what_if_merges_to_a_valid_100_percent_downside():
    merged = _merge(_assumptions(MANIFEST["current"]["assumptions"]), _assumptions(MANIFEST["what_if"]["overlay"]))
    a = Assumptions.model_validate(merged)
    assert dict(zip(a.scenario_names, a.weights)) == {"base": 0.0, "upside": 0.0, "downside": 1.0}
    assert a.scenarios["downside"].macro["unemployment_rate"]  # the path itself comes from the base file


def test_worse_unemployment_what_if_changes_only_two_unemployment_paths():
    base = Assumptions.model_validate(_assumptions(MANIFEST["current"]["assumptions"]))
    merged = Assumptions.model_validate(
        _merge(_assumptions(MANIFEST["current"]["assumptions"]), _assumptions(MANIFEST["what_if"]["outlook"])))
    for name, scenario in merged.scenarios.items():
        before = base.scenarios[name]
        assert scenario.weight == before.weight
        for variable, path in scenario.macro.items():
            changed = name in ("base", "downside") and variable == "unemployment_rate"
            assert (path != before.macro[variable]) == changed, (name, variable)
            assert path[:4] == before.macro[variable][:4]  # the history quarters are not changed
    worse = merged.scenarios["downside"].macro["unemployment_rate"]
    assert max(worse) == 8.5 and all(w >= b for w, b in zip(worse, base.scenarios["downside"].macro["unemployment_rate"]))


@pytest.mark.parametrize("section", ["current", "prior"])
def test_ledger_balance_ties_to_the_tape_to_the_cent(section):
    tape = _tape(MANIFEST[section]["tape"])
    ledger = _assumptions(MANIFEST[section]["assumptions"])["run"]["ledger_balance"]
    cents = sum(round(float(b) * 100) for b in tape["balance"])
    assert round(ledger * 100) == cents
    assert round(MANIFEST[section]["balance"] * 100) == cents and MANIFEST[section]["loans"] == len(tape)


# --------------------------------------------------------------------------------------
# the roll-rate matrix
# --------------------------------------------------------------------------------------


def test_cards_matrix_is_a_valid_monthly_roll_rate_matrix():
    m = pd.read_csv(DEMO / "cards_rolls.csv", index_col="from")
    states = ["current", "dpd_1_29", "dpd_30_59", "dpd_60_89", "dpd_90_119", "dpd_120_149",
              "dpd_150_179", "charge_off", "paid_off"]
    assert list(m.columns) == states and list(m.index) == states
    p = m.to_numpy()
    assert np.all(p >= 0)
    np.testing.assert_allclose(p.sum(axis=1), 1.0, rtol=0, atol=1e-12)
    assert p[7, 7] == 1.0 and p[8, 8] == 1.0  # absorbing states absorbing
    forward = [p[i, i + 1] for i in range(6)] + [p[6, 7]]
    assert forward == sorted(forward)  # roll rates rise with delinquency (common practice, no source)
    assert all(p[i, 0] > 0 for i in range(1, 7))  # cures back to current
    assert p[0, 0] == pytest.approx(0.955, abs=0.01) and p[0, 8] == pytest.approx(0.015, abs=0.005)
    # Absorbing chain: from every bucket the loan ends charged off or paid off with
    # probability 1, N = (I - Q)^-1 (Kemeny & Snell, Finite Markov Chains, thm 3.3.7).
    n = np.linalg.inv(np.eye(7) - p[:7, :7])
    np.testing.assert_allclose((n @ p[:7, 7:]).sum(axis=1), 1.0, atol=1e-12)
    # A 12-month PD from current in the range of a prime card book (from memory: 2-6 %).
    assert 0.02 < np.linalg.matrix_power(p, 12)[0, 7] < 0.06


# --------------------------------------------------------------------------------------
# the tapes
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("section", ["current", "prior"])
def test_tapes_have_unique_ids_valid_codes_and_an_extra_column(section):
    tape = _tape(MANIFEST[section]["tape"])
    assert tape["loan_id"].is_unique
    assert set(tape["repayment"]) <= set(REPAYMENTS)
    assert set(tape["segment"]) <= set(_assumptions(MANIFEST[section]["assumptions"])["segments"])
    assert "branch" in tape.columns and tape["branch"].ne("").all()
    as_of = pd.Timestamp(MANIFEST[section]["as_of"])
    assert (tape["origination_date"] <= as_of).all()
    term = tape["repayment"] != "revolving"
    assert (tape.loc[term, "maturity_date"] > as_of).all()  # no term loan has matured
    assert tape.loc[~term, "maturity_date"].isna().all() and tape.loc[~term, "credit_limit"].gt(0).all()
    assert (tape["balance"] >= 0).all()
    assert tape["days_past_due"].dtype.kind == "i" and (tape["days_past_due"] >= 0).all()


def test_segment_mix_and_terms(q3):
    assert 9_500 <= len(q3) <= 10_500
    share = q3["segment"].value_counts(normalize=True)
    assert set(share.index) == {"mortgage", "auto", "personal", "cards", "cre", "heloc"}
    assert share.min() > 0.03
    term = _months(q3["maturity_date"], q3["origination_date"])
    assert set(term[q3.segment == "mortgage"]) == {360}
    assert set(term[q3.segment == "auto"]) == {60, 72}
    assert set(term[q3.segment == "personal"]) == {36}
    cre = q3[q3.segment == "cre"]
    assert set(cre["repayment"]) == {"balloon"} and set(term[q3.segment == "cre"]) <= {60, 84, 120}
    assert set(cre["amortization_months"]) <= {300, 360}
    assert set(q3.loc[q3.segment == "cards", "repayment"]) == {"revolving"}
    helocs = q3[q3.segment == "heloc"]
    assert set(helocs["repayment"]) == {"heloc"} and set(term[q3.segment == "heloc"]) == {300}
    # a 10-year draw period, then 15 years of repayment; every line has its limit
    assert set(helocs["draw_period_months"]) == {120} and (helocs["credit_limit"] >= helocs["original_amount"]).all()
    seasoned = q3["origination_date"].dt.year
    assert seasoned[q3.segment == "mortgage"].nunique() >= 10  # seasoning spread over years


def test_rates_by_segment(q3):
    ranges = {"mortgage": (0.025, 0.075), "auto": (0.045, 0.115), "personal": (0.085, 0.185),
              "cards": (0.18, 0.27), "cre": (0.045, 0.085), "heloc": (0.06, 0.095)}
    for segment, (low, high) in ranges.items():
        rates = q3.loc[q3.segment == segment, "interest_rate"]
        assert rates.between(low, high).all(), segment
    eir = q3[q3["eir"].notna()]
    assert 0.2 < len(eir) / len(q3) < 0.6
    gap = eir["eir"] - eir["interest_rate"]
    assert (gap > 0).all() and (gap < 0.03).all()  # fees lift the EIR a little


def test_delinquency_is_mostly_current_with_a_tail(q3):
    dpd = q3["days_past_due"]
    assert (dpd == 0).mean() > 0.9
    for low, high in BUCKETS:
        assert dpd.between(low, high).sum() >= 10, (low, high)
    # Charge-off policy: closed-end consumer loans go at 120 days, cards at 180.
    assert dpd[q3.segment.isin(["auto", "personal"])].max() < 120
    assert dpd[q3.segment == "cards"].max() < 180
    for flag in ("defaulted", "bankrupt", "watchlist", "forborne", "credit_impaired_at_purchase"):
        assert 3 <= q3[flag].sum() < 0.02 * len(q3), flag


def test_staging_inputs_are_present(q3):
    graded = q3.segment.isin(["auto", "personal"])
    assert set(q3.loc[graded, "grade"]) == set("ABCDE")
    assert (q3.loc[~graded, "grade"] == "").all()
    poci = q3["credit_impaired_at_purchase"]
    assert q3["pd_12m_at_origination"].between(0, 1, inclusive="neither").all()
    # the PDs by grade are calibrated from the history, one per grade
    a = _assumptions(MANIFEST["current"]["assumptions"])["segments"]
    assert all(set(a[s]["pd_12m_by_grade"]) == set("ABCDE") for s in ("auto", "personal"))
    # the loan's own current PD (a behavioural score) for the scored segments (graded: auto and
    # personal), none for the segments on a curve by age or bucket, nor for CRE
    scored = q3.segment.isin(["auto", "personal"])
    assert q3.loc[scored, "pd_12m_current"].between(0, 1, inclusive="neither").all()
    assert q3.loc[~scored & ~poci, "pd_12m_current"].isna().all()
    assert q3.loc[poci, "pd_12m_current"].notna().all()  # a purchased credit-impaired loan is scored
    booked = pd.to_datetime(q3["origination_date"]) > "2026-06-30"
    same = q3.loc[booked & scored]
    assert (same["pd_12m_current"] == same["pd_12m_at_origination"]).all()  # booked this quarter: unchanged
    doubled = (q3["pd_12m_current"] >= 2 * q3["pd_12m_at_origination"]) & (q3["days_past_due"] <= 30)
    assert 0.01 < doubled[scored & ~poci].mean() < 0.2  # the IFRS 9 PD-ratio test bites for some
    # POCI: a credit-adjusted EIR each; a purchase ECL unless bought this quarter (then measured)
    assert q3.loc[poci, "credit_adjusted_eir"].notna().all()
    assert q3.loc[poci & ~booked, "lifetime_ecl_at_purchase"].notna().all()
    assert (poci & booked).sum() >= 2 and q3.loc[poci & booked, "lifetime_ecl_at_purchase"].isna().all()
    assert q3["modified"].any() and (q3.loc[q3["modified"], "forborne"]).all()
    probation = q3["prior_stage"].notna()
    assert probation.any() and q3.loc[probation, "months_performing"].notna().all()
    assert set(q3.loc[probation, "prior_stage"]) <= {2.0, 3.0}
    collateral = q3["collateral_value"].notna()
    assert set(q3.loc[collateral, "segment"]) == {"mortgage", "auto", "cre"}
    assert collateral[q3.segment.isin(["mortgage", "auto", "cre"])].all()


@pytest.mark.parametrize("section", ["current", "prior"])
def test_balances_follow_the_level_pay_schedule(section):
    tape = _tape(MANIFEST[section]["tape"])
    as_of = pd.Timestamp(MANIFEST[section]["as_of"])
    term = tape["repayment"] != "revolving"
    assert (tape.loc[term, "balance"] <= tape.loc[term, "original_amount"]).all()
    over = tape.loc[~term, "balance"] > tape.loc[~term, "credit_limit"]
    assert over.sum() <= 5  # a few cards over their limit, flagged by intake
    # Current level-pay loans: balance after k payments equals the schedule (numpy_financial.fv, .pmt).
    for repayment, n_col in (("level", None), ("balloon", "amortization_months")):
        loans = tape[(tape.repayment == repayment) & (tape.days_past_due == 0)]
        k = _months(pd.Series(as_of, index=loans.index), loans["origination_date"])
        n = _months(loans["maturity_date"], loans["origination_date"]) if n_col is None else loans[n_col]
        r = loans["interest_rate"] / 12
        payment = npf.pmt(r, n, -loans["original_amount"])
        expected = npf.fv(r, k, payment, -loans["original_amount"])
        np.testing.assert_allclose(loans["balance"], expected, atol=0.006)
        np.testing.assert_allclose(loans["payment"], payment, atol=0.006)
    # HELOCs: the balance is the original amount through the draw period (interest only), then
    # the level-pay schedule over the repayment period (numpy_financial.fv, .pmt).
    io = tape[(tape.repayment == "heloc")]
    age = _months(pd.Series(as_of, index=io.index), io["origination_date"])
    young = age <= io["draw_period_months"]
    assert (io.loc[young, "balance"] == io.loc[young, "original_amount"]).all()
    repaying = io[~young & (io.days_past_due == 0)]
    assert len(repaying) > 10
    r = repaying["interest_rate"] / 12
    left = _months(repaying["maturity_date"], repaying["origination_date"]) - repaying["draw_period_months"]
    payment = npf.pmt(r, left, -repaying["original_amount"])
    paid = age[repaying.index] - repaying["draw_period_months"]
    np.testing.assert_allclose(repaying["balance"], npf.fv(r, paid, payment, -repaying["original_amount"]), atol=0.006)


# --------------------------------------------------------------------------------------
# the quarter between the tapes
# --------------------------------------------------------------------------------------


def test_q2_to_q3_has_payoffs_new_loans_write_offs_and_migrations(q2, q3, charge_offs):
    in_q2, in_q3 = set(q2["loan_id"]), set(q3["loan_id"])
    both = in_q2 & in_q3
    assert len(both) > 0.9 * len(in_q2)
    written_off = set(charge_offs.loc[charge_offs["gross_charge_off"] > 0, "loan_id"])
    left = in_q2 - in_q3
    move = MANIFEST["movement"]
    assert len(left - written_off) == move["prepaid"] + move["matured"] + move["sold"] + move["closed"] > 0
    assert len(written_off) == move["written_off"] >= 10
    new = q3[~q3["loan_id"].isin(in_q2)]
    assert len(new) == move["new_loans"] > 0
    assert (new["origination_date"] > pd.Timestamp(MANIFEST["prior"]["as_of"])).all()
    pair = q2.merge(q3, on="loan_id", suffixes=("_q2", "_q3"))
    assert (pair["days_past_due_q3"] > pair["days_past_due_q2"]).sum() > 50  # worse
    assert (pair["days_past_due_q3"] < pair["days_past_due_q2"]).sum() > 50  # cured or better
    term = pair[pair["repayment_q2"] != "revolving"]
    assert (term["balance_q3"] <= term["balance_q2"]).all()  # amortized, never re-advanced
    assert (term["balance_q3"] < term["balance_q2"]).mean() > 0.9


def test_charge_offs_are_in_q2_only_and_recoveries_on_earlier_write_offs_in_neither(q2, q3, charge_offs):
    assert charge_offs["loan_id"].is_unique
    # the segment places recoveries on loans that are in neither tape
    assert list(charge_offs.columns) == ["loan_id", "segment", "gross_charge_off", "recoveries"]
    assert charge_offs["segment"].notna().all()
    now = charge_offs[charge_offs["gross_charge_off"] > 0]
    earlier = charge_offs[charge_offs["gross_charge_off"] == 0]
    assert now["loan_id"].isin(q2["loan_id"]).all() and not now["loan_id"].isin(q3["loan_id"]).any()
    assert len(earlier) == MANIFEST["movement"]["earlier_write_off_recoveries"] >= 3
    assert not earlier["loan_id"].isin(q2["loan_id"]).any() and not earlier["loan_id"].isin(q3["loan_id"]).any()
    assert (earlier["recoveries"] > 0).all()
    assert (charge_offs["recoveries"] >= 0).all() and (now["recoveries"] < now["gross_charge_off"]).all()
    last = now.merge(q2, on="loan_id")
    assert (last["days_past_due"] > 0).mean() > 0.8  # written off from arrears (or bankruptcy)


# --------------------------------------------------------------------------------------
# the bad inputs
# --------------------------------------------------------------------------------------


def _raw_rows(name: str, encoding: str = "utf-8") -> list[list[str]]:
    with open(DEMO / name, newline="", encoding=encoding) as f:
        return list(csv.reader(f))


def test_bad_tape_has_one_bad_row_per_fault_among_good_rows(q3):
    rows = _raw_rows(MANIFEST["bad"]["tape"])
    header, body = rows[0], rows[1:]
    assert header == list(q3.columns)
    bad = MANIFEST["bad"]
    assert len(body) == bad["rows"] and len(bad["faults"]) == bad["rejected"] < len(body)
    col = {c: i for i, c in enumerate(header)}
    for fault in bad["faults"]:
        row = rows[fault["line"] - 1]
        assert row[col["loan_id"]] == fault["loan_id"]
    value = {f["column"]: rows[f["line"] - 1][col[f["column"]]] for f in bad["faults"]}
    assert float(value["balance"]) < 0 and float(value["interest_rate"]) > 1
    assert value["segment"] not in _assumptions(bad["assumptions"])["segments"]
    assert value["repayment"] not in REPAYMENTS and value["credit_limit"] == ""
    assert not float(value["days_past_due"]).is_integer()
    ids = [r[col["loan_id"]] for r in body]
    assert len(ids) - len(set(ids)) == 1  # one duplicated loan_id
    good = [r for n, r in enumerate(body, start=2) if n not in {f["line"] for f in bad["faults"]}]
    assert len(good) == bad["rows"] - bad["rejected"]
    for r in good:
        assert r[col["segment"]] in _assumptions(bad["assumptions"])["segments"]
        date.fromisoformat(r[col["origination_date"]])


def test_messy_extract_is_mapped_day_first_and_holds_its_faults():
    raw = (DEMO / MANIFEST["messy"]["tape"]).read_bytes()
    assert raw.startswith(b"\xef\xbb\xbf") and b"\r\n" in raw
    rows = _raw_rows(MANIFEST["messy"]["tape"], encoding="utf-8-sig")
    header = rows[0]
    mapping = _assumptions(MANIFEST["messy"]["assumptions"])["tape"]["columns"]
    folded = {h.strip().lower(): i for i, h in enumerate(header)}
    assert all(theirs.strip().lower() in folded for theirs in mapping.values())
    assert any(h != h.strip() for h in header)  # headers matched ignoring surrounding spaces
    assert len(rows) - 1 == MANIFEST["messy"]["rows"]
    days = []
    for r in rows[1:]:
        for key in ("origination_date", "maturity_date"):
            text = r[folded[mapping[key]]]
            if text:
                datetime.strptime(text, "%d/%m/%Y")
                days.append(int(text[:2]))
    assert max(days) > 12  # day-first is unambiguous
    messy = MANIFEST["messy"]
    rate = folded[mapping["interest_rate"]]
    percent = [n for n, r in enumerate(rows[1:], start=2) if float(r[rate]) > 1]
    assert percent == [f["line"] for f in messy["faults"] if f["column"] == "interest_rate"]
    dupes = [f["line"] for f in messy["faults"] if f["column"] == "loan_id"]
    assert len(dupes) == 2 and rows[dupes[0] - 1] == rows[dupes[1] - 1]
    assert rows[messy["formula_line"] - 1][folded[mapping["loan_id"]]] == '=HYPERLINK("x")'
    matured = rows[messy["matured_line"] - 1]
    assert matured[folded[mapping["loan_id"]]] == messy["matured_loan"]
    assert datetime.strptime(matured[folded[mapping["maturity_date"]]], "%d/%m/%Y") < datetime(2026, 9, 30)
    assert float(matured[folded[mapping["balance"]]]) > 0


# --------------------------------------------------------------------------------------
# the performance history
# --------------------------------------------------------------------------------------


def test_history_is_five_years_of_the_six_books():
    import pyarrow.parquet as pq

    info = MANIFEST["history"]
    table = pq.read_table(DEMO / info["file"])
    assert table.num_rows == info["rows"] and len(set(table.column("loan_id").to_pylist())) == info["loans"]
    months = table.column("month").to_pandas()
    assert (str(months.min())[:7], str(months.max())[:7]) == (info["first_month"], info["last_month"]) == (
        "2021-10", "2026-09")
    assert set(table.column("segment").to_pylist()) == set(SEGMENTS)


@pytest.mark.slow
def test_history_cards_follow_the_known_matrix():
    # the card book was simulated from cards_rolls.csv: its count estimate over the whole
    # history lies within sampling error of it (Anderson and Goodman 1957: se = sqrt(p (1 - p) / n_i))
    from scipy import stats

    from allowance.calibrate import estimate

    found = estimate(DEMO / MANIFEST["history"]["file"], {"window_months": 60, "charge_off_dpd": {
        "mortgage": 180, "cre": 180, "heloc": 180}})
    rolls = found.roll_rates.segments["cards"]
    truth = np.array([[int(x) / 1e6 for x in row] for row in (files.ROLLS_PPM)])
    truth = np.c_[truth, 1 - truth.sum(axis=1)][:7]
    n_i = rolls.counts[:7].sum(axis=1)
    positive = truth > 0
    z = stats.norm.isf(0.001 / (2 * positive.sum()))
    bound = z * np.sqrt(truth * (1 - truth) / n_i[:, None])
    assert np.all(np.abs(rolls.by_count[:7] - truth)[positive] <= bound[positive])
    assert np.all(rolls.by_count[:7][~positive] == 0.0)
