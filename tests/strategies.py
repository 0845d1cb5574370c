"""Shared hypothesis strategies (each module adds its own section)."""

from __future__ import annotations


# --------------------------------------------------------------------------------------
# curves: PD sources, roll-rate matrices, marginal PD arrays
# --------------------------------------------------------------------------------------

import numpy as _np
from hypothesis import strategies as _st
from hypothesis.extra import numpy as _hnp

from allowance.curves import DELINQUENCY_BUCKETS as _BUCKETS
from allowance.curves import expected_states as _expected_states
from allowance.schemas import SegmentAssumptions as _SegmentAssumptions
from allowance.schemas import TransitionMatrix as _TransitionMatrix

#: a probability, including the edges 0 and 1
curve_probabilities = _st.floats(min_value=0.0, max_value=1.0, allow_nan=False)
#: a 12-month PD as lenders give them (the edges are tested separately)
pd_12m_values = _st.floats(min_value=1e-6, max_value=0.6, allow_nan=False)
#: cumulative PD curves by year: non-decreasing, in [0, 1], 1 to 6 years
pd_curves = _st.lists(_st.floats(min_value=0.0, max_value=0.95, allow_nan=False), min_size=1, max_size=6).map(sorted)


def marginal_arrays(max_keys: int = 3, max_months: int = 48) -> _st.SearchStrategy:
    """Monthly marginal PDs (or SMMs), shape (keys, months), values in [0, 1]."""
    shapes = _st.tuples(_st.integers(1, max_keys), _st.integers(1, max_months))
    return _hnp.arrays(_np.float64, shapes, elements=_st.floats(0.0, 1.0, allow_nan=False))


@_st.composite
def transition_matrices(draw, charge_off_dpd: int | None = None, paid_off: bool | None = None) -> _TransitionMatrix:
    """A valid monthly roll-rate matrix: random rows over the states, absorbing rows unit."""
    dpd = draw(_st.sampled_from(sorted(_BUCKETS))) if charge_off_dpd is None else charge_off_dpd
    payoff = draw(_st.booleans()) if paid_off is None else paid_off
    states = _expected_states(dpd, payoff)
    nb = len(_BUCKETS[dpd])
    rows = []
    for _ in range(nb):
        weights = _np.array(draw(_st.lists(_st.floats(0.0, 1.0), min_size=len(states), max_size=len(states))))
        weights[nb] += 1e-3  # every bucket can charge off, so lifetime PDs are defined
        rows.append((weights / weights.sum()).tolist())
    for a in range(nb, len(states)):
        rows.append([1.0 if j == a else 0.0 for j in range(len(states))])
    return _TransitionMatrix(states=list(states), probabilities=rows, source="rolls.csv")


@_st.composite
def segment_assumptions(draw) -> _SegmentAssumptions:
    """Segment assumptions with any of the PD sources (roll-rate matrices given inline)."""
    source = draw(_st.sampled_from(["pd_12m", "pd_12m_by_grade", "pd_curve", "pd_curve_by_grade", "transition_matrix"]))
    grades = _st.lists(_st.sampled_from("ABCDE"), min_size=1, max_size=3, unique=True)
    if source == "pd_12m":
        value = draw(curve_probabilities)
    elif source == "pd_12m_by_grade":
        value = {g: draw(curve_probabilities) for g in draw(grades)}
    elif source == "pd_curve":
        value = draw(pd_curves)
    elif source == "pd_curve_by_grade":
        value = {g: draw(pd_curves) for g in draw(grades)}
    else:
        matrix = draw(transition_matrices())
        dpd = 180 if "dpd_150_179" in matrix.states else 120
        return _SegmentAssumptions(transition_matrix=matrix, charge_off_dpd=dpd, lgd=0.5)
    return _SegmentAssumptions(**{source: value}, lgd=0.5)


#: an invented card-style roll-rate matrix (charge-off at 180 dpd), rows sum to 1
_ROLLS_180 = [
    [0.940, 0.035, 0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 0.025],
    [0.450, 0.250, 0.280, 0.000, 0.000, 0.000, 0.000, 0.000, 0.020],
    [0.150, 0.100, 0.150, 0.600, 0.000, 0.000, 0.000, 0.000, 0.000],
    [0.060, 0.020, 0.040, 0.100, 0.780, 0.000, 0.000, 0.000, 0.000],
    [0.030, 0.000, 0.010, 0.020, 0.090, 0.850, 0.000, 0.000, 0.000],
    [0.020, 0.000, 0.000, 0.000, 0.010, 0.070, 0.900, 0.000, 0.000],
    [0.010, 0.000, 0.000, 0.000, 0.000, 0.010, 0.050, 0.930, 0.000],
    [0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 1.000, 0.000],
    [0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 1.000],
]
#: an invented auto-style roll-rate matrix (charge-off at 120 dpd)
_ROLLS_120 = [
    [0.955, 0.030, 0.000, 0.000, 0.000, 0.000, 0.015],
    [0.500, 0.200, 0.290, 0.000, 0.000, 0.000, 0.010],
    [0.200, 0.100, 0.100, 0.600, 0.000, 0.000, 0.000],
    [0.080, 0.020, 0.050, 0.100, 0.750, 0.000, 0.000],
    [0.040, 0.000, 0.010, 0.030, 0.070, 0.850, 0.000],
    [0.000, 0.000, 0.000, 0.000, 0.000, 1.000, 0.000],
    [0.000, 0.000, 0.000, 0.000, 0.000, 0.000, 1.000],
]


def example_roll_matrix(charge_off_dpd: int = 180, paid_off: bool = True) -> _TransitionMatrix:
    """A fixed, invented roll-rate matrix; without ``paid_off`` its payoffs stay current."""
    rows = _np.array(_ROLLS_180 if charge_off_dpd == 180 else _ROLLS_120)
    if not paid_off:
        rows[:, 0] += rows[:, -1]
        rows = rows[:-1, :-1]
    return _TransitionMatrix(
        states=list(_expected_states(charge_off_dpd, paid_off)), probabilities=rows.tolist(), source="rolls.csv"
    )


# --------------------------------------------------------------------------------------
# scenarios, staging, overlays
# --------------------------------------------------------------------------------------

import numpy as _np_sso  # noqa: E402  (own imports: this section stands alone)
import pandas as _pd_sso  # noqa: E402
from hypothesis import strategies as _st_sso  # noqa: E402
from hypothesis.extra import numpy as _hnp_sso  # noqa: E402

#: an interior PD, one the Vasicek transform moves
interior_pds = _st_sso.floats(min_value=1e-6, max_value=0.999, allow_nan=False)
#: a systematic factor, within the range a scenario file would use
z_values = _st_sso.floats(min_value=-6.0, max_value=6.0, allow_nan=False)
#: an asset correlation
asset_correlations = _st_sso.floats(min_value=0.01, max_value=0.6, allow_nan=False)


@_st_sso.composite
def monthly_pd_tables(draw, max_keys: int = 4, max_months: int = 48) -> _np_sso.ndarray:
    """A (keys, months) table of monthly marginal PDs, with exact zeros and ones now and then."""
    shape = (draw(_st_sso.integers(1, max_keys)), draw(_st_sso.integers(1, max_months)))
    element = _st_sso.one_of(_st_sso.floats(0.0, 0.2, allow_nan=False), _st_sso.sampled_from([0.0, 1.0]))
    return draw(_hnp_sso.arrays(_np_sso.float64, shape, elements=element))


@_st_sso.composite
def staging_tapes(draw, max_loans: int = 40) -> tuple[_pd_sso.DataFrame, _np_sso.ndarray]:
    """A tape with the staging columns (segments ``a`` and ``b``, own PDs with blanks) and each
    loan's remaining months."""
    n = draw(_st_sso.integers(1, max_loans))

    def ints(lo: int, hi: int) -> _np_sso.ndarray:
        return draw(_hnp_sso.arrays(_np_sso.int64, n, elements=_st_sso.integers(lo, hi)))

    def flags() -> _np_sso.ndarray:
        return draw(_hnp_sso.arrays(_np_sso.bool_, n))

    def pds() -> _np_sso.ndarray:
        return draw(_hnp_sso.arrays(_np_sso.float64, n, elements=_st_sso.floats(0.0, 0.5, allow_nan=False)))

    prior = ints(0, 3).astype(float)
    tape = _pd_sso.DataFrame(
        {
            "segment": _np_sso.where(flags(), "a", "b"),
            "grade": _np_sso.where(flags(), "A", "B"),
            "days_past_due": ints(0, 200),
            "defaulted": flags(),
            "bankrupt": flags() & flags(),
            "watchlist": flags(),
            "forborne": flags(),
            "credit_impaired_at_purchase": flags() & flags(),
            "pd_12m_at_origination": _np_sso.where(flags(), pds(), _np_sso.nan),
            "pd_12m_current": _np_sso.where(flags(), pds(), _np_sso.nan),
            "prior_stage": _np_sso.where(prior == 0, _np_sso.nan, prior),
            "months_performing": ints(0, 12).astype(float),
        }
    )
    return tape, ints(1, 360)


@_st_sso.composite
def ecl_vectors(draw, max_loans: int = 30) -> _np_sso.ndarray:
    """Modelled ECL per loan, already in whole cents (zeros common)."""
    n = draw(_st_sso.integers(1, max_loans))
    element = _st_sso.one_of(_st_sso.just(0), _st_sso.integers(0, 10**9))
    return draw(_hnp_sso.arrays(_np_sso.int64, n, elements=element)) / 100.0


# --------------------------------------------------------------------------------------
# report and reconcile: example runs, pairs of runs for the movement
# --------------------------------------------------------------------------------------

import numpy as _np_rr  # noqa: E402  (own imports: this section stands alone)
import pandas as _pd_rr  # noqa: E402
from hypothesis import strategies as _st_rr  # noqa: E402

#: scenario names and weights of the example runs
EXAMPLE_SCENARIOS = {"base": 0.6, "upside": 0.15, "downside": 0.25}
EXAMPLE_SEGMENTS = ("auto", "card", "cre", "mortgage", "personal")


def example_assumptions(frameworks=("ifrs9", "cecl"), loan_detail_sheet_limit: int = 200_000, overlays=()):
    """A small valid Assumptions model (invented figures)."""
    from allowance.schemas import Assumptions

    return Assumptions.model_validate(
        {
            "run": {"as_of": "2026-09-30", "frameworks": list(frameworks), "currency": "USD",
                    "label": "2026 Q3 example", "loan_detail_sheet_limit": loan_detail_sheet_limit,
                    "ledger_balance": 1000.0},
            "segments": {s: {"pd_12m": 0.01 + 0.01 * i, "lgd": 0.3 + 0.05 * i, "cpr": 0.08}
                         for i, s in enumerate(EXAMPLE_SEGMENTS)},
            "ifrs9": {"sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month"},
            "cecl": {"reasonable_supportable_months": 24, "reversion_months": 12},
            "scenarios": {
                "base": {"weight": 0.6, "pd_multiplier": [1.0, 1.0]},
                "upside": {"weight": 0.15, "pd_multiplier": [0.8, 0.9]},
                "downside": {"weight": 0.25, "z": [-1.0, -0.5], "description": "a sharp, short recession"},
            },
            "overlays": list(overlays),
        }
    )


def example_loans(n: int, seed: int = 7, frameworks=("ifrs9", "cecl"), poci: bool = True) -> _pd_rr.DataFrame:
    """A loan-results frame of the contract's shape, money in whole cents (invented figures)."""
    rng = _np_rr.random.default_rng(seed)
    seg = _np_rr.array(EXAMPLE_SEGMENTS, dtype=object)[rng.integers(0, len(EXAMPLE_SEGMENTS), n)]
    stage = rng.choice([1, 2, 3], size=n, p=[0.85, 0.11, 0.04]).astype(_np_rr.int64)
    balance = _np_rr.round(rng.lognormal(10, 1, n), 2)
    pd12 = _np_rr.clip(rng.lognormal(-4, 0.6, n), 0, 1)
    lgd = rng.uniform(0.2, 0.6, n)
    frame = {
        "loan_id": [f"L{i:07d}" for i in range(n)],
        "segment": seg,
        "repayment": _np_rr.where(seg == "card", "revolving", "level").astype(object),
        "grade": _np_rr.array(list("ABCD"), dtype=object)[rng.integers(0, 4, n)],
        "stage": stage,
        "stage_reason": _np_rr.where(stage == 1, "performing", _np_rr.where(stage == 2, "30 dpd backstop", "90 dpd")).astype(object),
        "poci": (rng.random(n) < 0.01) if poci else _np_rr.zeros(n, dtype=bool),
        "horizon_months": _np_rr.where(stage == 1, 12, 60),
        "horizon_months_cecl": _np_rr.full(n, 60),
        "remaining_months": _np_rr.full(n, 60),
        "balance": balance,
        "ead": balance,
        "pd_12m": pd12,
        "pd_lifetime": _np_rr.clip(pd12 * 3, 0, 1),
        "lgd": lgd,
    }
    loss = balance * pd12 * lgd
    frame["ecl_12m"] = _np_rr.round(loss, 2)
    frame["ecl_lifetime"] = _np_rr.round(loss * 3, 2)
    mult = {"base": 1.0, "upside": 0.8, "downside": 1.6}
    for f in frameworks:
        scen = {s: _np_rr.round(loss * (1 if f == "ifrs9" else 2.5) * m * _np_rr.where(stage == 1, 1, 3), 2)
                for s, m in mult.items()}
        modelled = _np_rr.round(sum(EXAMPLE_SCENARIOS[s] * v for s, v in scen.items()), 2)
        overlay = _np_rr.where(seg == "auto", _np_rr.round(modelled * 0.05, 2), 0.0)
        frame[f"ecl_{f}_modelled"] = modelled
        frame[f"overlay_{f}"] = overlay
        frame[f"ecl_{f}"] = _np_rr.round(modelled + overlay, 2)
        for s, v in scen.items():
            frame[f"ecl_{f}_{s}"] = v
    frame["source_row"] = _np_rr.arange(2, n + 2, dtype=_np_rr.int64)
    frame["branch"] = _np_rr.array(["north", "south", "=1+1"], dtype=object)[rng.integers(0, 3, n)]
    out = _pd_rr.DataFrame(frame)
    for text in ("loan_id", "segment", "repayment", "grade", "stage_reason", "branch"):
        out[text] = out[text].astype("str")
    return out


def example_report(n: int = 50, seed: int = 7, *, frameworks=("ifrs9", "cecl"), loans=None, movement=None,
                   what_if=None, loan_detail_sheet_limit: int = 200_000, warnings=("an example run warning",)):
    """A RunReport built from example parts (no engine involved)."""
    from allowance.intake import IntakeResult, TieOut
    from allowance.engine import scenario_summary
    from allowance.report import RunReport, run_record
    from allowance.schemas import InputFile, RunConfig

    assumptions = example_assumptions(frameworks, loan_detail_sheet_limit)
    config = RunConfig(assumptions=assumptions, inputs=[
        InputFile(role="assumptions", path="assumptions.toml", sha256="0" * 64, bytes=1234)])
    loans = example_loans(n, seed, frameworks) if loans is None else loans
    rejected = _pd_rr.DataFrame({"source_row": [5, 9], "reason_codes": ["balance_negative;date_unparsed", "duplicate_id"],
                                 "reasons": ["balance is negative; origination_date unreadable", "loan_id repeats row 3"],
                                 "loan_id": ["=cmd|' /C calc'!A0", "L0000001"], "balance": ["-5", "10"]})
    findings = _pd_rr.DataFrame({"source_row": [3, 4, 5], "loan_id": ["L0000001", "L0000002", "=cmd|' /C calc'!A0"],
                                 "column": ["maturity_date", "balance", "balance"],
                                 "code": ["matured_with_balance", "over_limit", "balance_negative"],
                                 "severity": ["warning", "warning", "reject"],
                                 "message": ["matured, still carries a balance", "over its limit", "negative"]})
    intake = IntakeResult(accepted=_pd_rr.DataFrame({"loan_id": loans["loan_id"]}), rejected=rejected, findings=findings,
                          rows_read=len(loans) + 2,
                          file=InputFile(role="tape", path="tape.csv", sha256="a" * 64, bytes=99999))
    accepted = float(_np_rr.round(loans["balance"].sum(), 2))
    tie = TieOut(ledger_balance=accepted + 10.0, accepted_balance=accepted, rejected_balance=10.0, difference=-10.0,
                 tolerance=0.01, within_tolerance=False, accepted_by_user=True,
                 explanation="the rejected rows carry 10.00")
    term = _pd_rr.DataFrame(
        [{"segment": s, "key": s, "framework": f, "scenario": sc, "month": m,
          "marginal_pd": 0.001, "cumulative_pd": 1 - 0.999 ** m}
         for s in EXAMPLE_SEGMENTS[:2] for f in frameworks for sc in EXAMPLE_SCENARIOS for m in range(1, 121)])
    reversion = _pd_rr.DataFrame([{"scenario": sc, "month": m, "weight_on_scenario": max(0.0, min(1.0, (36 - m) / 12))}
                                  for sc in EXAMPLE_SCENARIOS for m in range(1, 41)])
    overlays = _pd_rr.DataFrame([{"name": "used-car prices", "segment": "auto", "stage": None, "framework": None,
                                  "kind": "percent", "value": 0.05, "rationale": "=prices falling faster",
                                  "owner": "credit committee", "approved": "2026-09-15", "expires": "2027-03-31",
                                  "status": "applied", "effect_ifrs9": float(loans.get("overlay_ifrs9", _pd_rr.Series([0.0])).sum()),
                                  "effect_cecl": float(loans.get("overlay_cecl", _pd_rr.Series([0.0])).sum()),
                                  "loans_in_scope": int((loans["segment"] == "auto").sum())}])
    rolls = _pd_rr.DataFrame({"segment": ["card"] * 2, "bucket": ["current", "dpd_30_59"], "pd_12m": [0.02, 0.3],
                              "pd_lifetime": [0.05, 0.6], "expected_months_to_charge_off": [40.0, 5.5]})
    schedules = _pd_rr.DataFrame({"loan_id": ["L0000000"] * 3, "month": [1, 2, 3], "opening_balance": [100.0, 90.0, 80.0],
                                  "interest": [1.0, 0.9, 0.8], "scheduled_principal": [9.0, 9.0, 9.0],
                                  "prepayment": [1.0, 1.0, 1.0], "closing_balance": [90.0, 80.0, 70.0],
                                  "survival": [0.99, 0.98, 0.97], "expected_balance": [89.1, 78.4, 67.9]})
    parts = dict(config=config, intake=intake, tie_out=tie, loans=loans, overlays=overlays,
                 scenarios=scenario_summary(loans, config), term_structures=term, roll_rates=rolls,
                 reversion=reversion, schedules=schedules, movement=movement, what_if=what_if,
                 warnings=list(warnings))
    movements = RunReport(**parts).movements
    record = run_record(config, intake, loans, tie_out=tie, warnings=warnings, movements=movements)
    return RunReport(**parts, record=record)


@_st_rr.composite
def run_pairs(draw, max_loans: int = 40, with_rerun: bool | None = None, with_charge_offs: bool | None = None):
    """A prior run and a current run with payoffs, originations, migrations, write-offs and overlays.

    Returns ``(prior, current, current_at_prior_assumptions or None, charge_offs or None)``;
    money in whole cents, loan ids unique within each run.
    """
    n = draw(_st_rr.integers(0, max_loans))
    seed = draw(_st_rr.integers(0, 2**32 - 1))
    rng = _np_rr.random.default_rng(seed)
    fate = rng.choice(["continuing", "paid_off", "written_off", "new"], size=n, p=[0.55, 0.15, 0.12, 0.18])
    segs = _np_rr.array(["auto", "card", "=hack"], dtype=object)

    def cents(size: int, high: int) -> _np_rr.ndarray:
        values = rng.integers(0, high, size) / 100.0
        values[rng.random(size) < 0.15] = 0.0
        return values

    def run(mask: _np_rr.ndarray, ids: _np_rr.ndarray, stage_p) -> _pd_rr.DataFrame:
        k = int(mask.sum())
        modelled = {f: cents(k, 10**7) for f in ("ifrs9", "cecl")}
        overlay = {f: _np_rr.where(rng.random(k) < 0.3, cents(k, 10**5), 0.0) for f in ("ifrs9", "cecl")}
        poci = rng.random(k) < 0.2
        # a POCI loan's IFRS 9 allowance is a change since purchase: often negative (5.5.14)
        modelled["ifrs9"] = _np_rr.where(poci & (rng.random(k) < 0.6), -modelled["ifrs9"], modelled["ifrs9"])
        frame = {"loan_id": ids[mask], "segment": segs[rng.integers(0, 2 + (rng.random() < 0.3), k)],
                 "stage": stage_p[mask], "poci": poci, "balance": cents(k, 10**9)}
        for f in ("ifrs9", "cecl"):
            frame[f"ecl_{f}_modelled"] = modelled[f]
            frame[f"overlay_{f}"] = overlay[f]
            frame[f"ecl_{f}"] = _np_rr.round(modelled[f] + overlay[f], 2)
        return _pd_rr.DataFrame(frame)

    ids = _np_rr.array([f"=L{i}" if i % 7 == 3 else f"L{i}" for i in range(n)], dtype=object)
    stage_prior = rng.integers(1, 4, n)
    migrate = rng.random(n) < 0.3
    stage_current = _np_rr.where(migrate, rng.integers(1, 4, n), stage_prior)
    prior = run(fate != "new", ids, stage_prior)
    current = run(_np_rr.isin(fate, ["continuing", "new"]), ids, stage_current)
    # some continuing loans keep their prior segment, some move
    keep = prior.set_index("loan_id")["segment"]
    same = current["loan_id"].isin(keep.index) & (rng.random(len(current)) < 0.8)
    current.loc[same, "segment"] = keep.reindex(current.loc[same, "loan_id"]).to_numpy()
    rerun = draw(_st_rr.booleans()) if with_rerun is None else with_rerun
    cap = None
    if rerun:
        cap = _pd_rr.DataFrame({"loan_id": current["loan_id"],
                                "ecl_ifrs9_modelled": cents(len(current), 10**7),
                                "ecl_cecl_modelled": cents(len(current), 10**7)})
    charge = draw(_st_rr.booleans()) if with_charge_offs is None else with_charge_offs
    charge_offs = None
    if charge:
        wo = ids[fate == "written_off"]
        partial = ids[(fate == "continuing") & (rng.random(n) < 0.2)]
        co_ids = _np_rr.concatenate([wo, partial, _np_rr.array(["ORPHAN"], dtype=object)])
        charge_offs = _pd_rr.DataFrame({"loan_id": co_ids, "gross_charge_off": cents(len(co_ids), 10**8),
                                        "recoveries": cents(len(co_ids), 10**5),
                                        "segment": ["auto"] * len(co_ids)})
    return prior, current, cap, charge_offs


# --------------------------------------------------------------------------------------
# intake: valid loan tapes as text, and the faults that spoil a cell
# --------------------------------------------------------------------------------------

from hypothesis import strategies as _st_in  # noqa: E402  (own imports: this section stands alone)

#: the assumptions the intake tapes are valid against (invented figures)
INTAKE_ASSUMPTIONS = """
[run]
as_of = 2026-09-30
frameworks = ["cecl"]

[segments.retail]
pd_12m = 0.02
lgd = 0.4
amortization_months = 360       # balloon loans without the tape column amortize over this

[segments.cards]
pd_12m = 0.05
lgd = 0.8
amortization_months = 360
behavioural_life_months = 36       # revolving lines need it, and CECL the payment rate
payment_rate = 0.05
ccf = 0.0                          # lines with undrawn amounts need both stated
unconditionally_cancellable = true

[segments.graded]
pd_12m_by_grade = { A = 0.01, B = 0.04 }
lgd = 0.3
amortization_months = 360

[cecl]
reasonable_supportable_months = 12
payment_allocation = "measured_balance_first"

[scenarios.base]
weight = 1.0
"""

INTAKE_COLUMNS = (
    "loan_id", "segment", "repayment", "origination_date", "maturity_date", "balance", "interest_rate",
    "days_past_due", "credit_limit", "grade", "watchlist", "defaulted", "prior_stage", "branch",
)

_TRUE_SPELLINGS = ("true", "TRUE", "True", "yes", "Y", "y", "1", "t", " true ")
_FALSE_SPELLINGS = ("false", "False", "no", "N", "n", "0", "f", "", " No")


def _iso(day: int) -> str:
    """Days after 2000-01-01 as an ISO date."""
    import datetime as _dt

    return (_dt.date(2000, 1, 1) + _dt.timedelta(days=day)).isoformat()


@_st_in.composite
def intake_rows(draw, loan_number: int) -> dict[str, str]:
    """One valid tape row as text (against :data:`INTAKE_ASSUMPTIONS`, as of 2026-09-30)."""
    segment = draw(_st_in.sampled_from(["retail", "cards", "graded"]))
    as_of = 9770  # 2026-09-30 is day 9769 after 2000-01-01; maturities start the day after
    origination = draw(_st_in.integers(0, 9769))
    cents = draw(_st_in.integers(0, 50_000_000))
    row = {
        "loan_id": f"T{loan_number:05d}",
        "segment": segment,
        "origination_date": _iso(origination),
        "balance": f"{cents / 100:.2f}",
        "interest_rate": f"{draw(_st_in.integers(0, 3000)) / 10_000:g}",
        "days_past_due": str(draw(_st_in.integers(0, 400))),
        "grade": draw(_st_in.sampled_from(["A", "B"])) if segment == "graded" else draw(_st_in.sampled_from(["", "X"])),
        "watchlist": draw(_st_in.sampled_from(_TRUE_SPELLINGS + _FALSE_SPELLINGS)),
        "defaulted": draw(_st_in.sampled_from(_FALSE_SPELLINGS)),
        "prior_stage": draw(_st_in.sampled_from(["", "1", "2", "3", "2.0"])),
        "branch": draw(_st_in.sampled_from(["north", "=1+1", " padded ", ""])),
    }
    if segment == "cards":
        row["repayment"] = draw(_st_in.sampled_from(["revolving", "Revolving", " REVOLVING "]))
        row["maturity_date"] = ""
        row["credit_limit"] = f"{(cents + draw(_st_in.integers(0, 10_000_000))) / 100:.2f}"
    else:
        row["repayment"] = draw(_st_in.sampled_from(["level", "interest_only", "balloon", "Level"]))
        row["maturity_date"] = _iso(as_of + draw(_st_in.integers(0, 12_000)))
        row["credit_limit"] = ""
    if draw(_st_in.booleans()):
        row["balance"] = f" {row['balance']} "  # padded numbers are read too
    return row


@_st_in.composite
def intake_tapes(draw, min_rows: int = 1, max_rows: int = 25) -> list[dict[str, str]]:
    """A valid tape (list of text rows) with unique loan ids."""
    n = draw(_st_in.integers(min_rows, max_rows))
    return [draw(intake_rows(i)) for i in range(n)]


#: faults that spoil one cell: name -> (column, bad text, expected reason code, rows it applies to)
#: ``applies`` is "any", "term" (non-revolving), "revolving" or "graded".
TAPE_FAULTS: dict[str, tuple[str, str, str, str]] = {
    "balance_text": ("balance", "12,5x", "bad_number", "any"),
    "balance_negative": ("balance", "-5", "out_of_range", "any"),
    "balance_blank": ("balance", "", "missing_value", "any"),
    "rate_percent": ("interest_rate", "6.5", "out_of_range", "any"),
    "rate_nan": ("interest_rate", "nan", "bad_number", "any"),
    "dpd_fraction": ("days_past_due", "2.5", "not_whole_number", "any"),
    "dpd_negative": ("days_past_due", "-1", "out_of_range", "any"),
    "repayment_unknown": ("repayment", "weekly", "bad_choice", "any"),
    "repayment_blank": ("repayment", "", "missing_value", "any"),
    "segment_unknown": ("segment", "retial", "unknown_segment", "any"),
    "origination_bad": ("origination_date", "2026-02-30", "bad_date", "any"),
    "origination_future": ("origination_date", "2026-10-01", "origination_after_as_of", "any"),
    "boolean_bad": ("watchlist", "maybe", "bad_boolean", "any"),
    "prior_stage_4": ("prior_stage", "4", "out_of_range", "any"),
    "loan_id_blank": ("loan_id", "  ", "missing_value", "any"),
    "maturity_blank": ("maturity_date", "", "missing_value", "term"),
    "limit_blank": ("credit_limit", "", "missing_value", "revolving"),
    "grade_blank": ("grade", "", "missing_grade", "graded"),
    "grade_unknown": ("grade", "Z", "unknown_grade", "graded"),
    "duplicate_id": ("loan_id", "<copy>", "duplicate_loan_id", "any"),
}


def fault_applies(fault: str, row: dict[str, str]) -> bool:
    """Whether a fault of :data:`TAPE_FAULTS` makes sense on this row."""
    applies = TAPE_FAULTS[fault][3]
    revolving = row["segment"] == "cards"
    return {
        "any": True,
        "term": not revolving,
        "revolving": revolving,
        "graded": row["segment"] == "graded",
    }[applies]


# --------------------------------------------------------------------------------------
# cash flows and the ECL loop: single loans on every repayment type, small books
# --------------------------------------------------------------------------------------

from hypothesis import strategies as _st_cf  # noqa: E402  (own imports: this section stands alone)

#: repayment types of the tape
repayment_types = _st_cf.sampled_from(["level", "interest_only", "balloon", "revolving", "heloc"])
#: annual contract rates, zero included (a zero rate has its own formulas)
annual_rates = _st_cf.one_of(_st_cf.just(0.0), _st_cf.floats(min_value=0.0005, max_value=0.30))


@_st_cf.composite
def contract_loans(draw, repayment: str | None = None, zero_rate: bool = False) -> dict:
    """Keyword arguments of ``cashflows.schedule`` for one loan of any repayment type.

    Interest-only loans carry an interest-only period shorter than the term, or the whole
    term; HELOCs a draw period shorter than the term; balloon loans a residual of at most the
    balance; revolving lines a paydown share.
    """
    kind = draw(repayment_types) if repayment is None else repayment
    months = draw(_st_cf.integers(1, 360))
    loan = {
        "repayment": kind,
        "balance": draw(_st_cf.floats(min_value=0.0, max_value=2e6)),
        "interest_rate": 0.0 if zero_rate else draw(annual_rates),
        "months": months,
    }
    if kind == "interest_only":
        loan["interest_only_months_left"] = draw(_st_cf.integers(0, months))
    if kind == "heloc":
        loan["interest_only_months_left"] = draw(_st_cf.integers(0, months - 1))
    if kind == "balloon":
        loan["residual"] = loan["balance"] * draw(_st_cf.floats(min_value=0.0, max_value=1.0))
    if kind == "revolving":
        loan["paydown"] = draw(_st_cf.floats(min_value=0.0, max_value=0.5))
    return loan


@_st_cf.composite
def runoff_lines(draw) -> dict:
    """A revolving line's measured balance, its monthly paydown share (0 to 1) and a run-off
    floor (0: to the end), as ``cashflows.runoff_months`` takes them."""
    return {"balance": draw(_st_cf.floats(min_value=0.0, max_value=1e7)),
            "paydown": draw(_st_cf.floats(min_value=0.0, max_value=1.0)),
            "floor": draw(_st_cf.one_of(_st_cf.just(0.0), _st_cf.floats(min_value=0.0, max_value=0.5)))}


#: monthly prepayment (SMM) or marginal default rates: none, or up to 10 % a month
monthly_rates = _st_cf.one_of(_st_cf.just(0.0), _st_cf.floats(min_value=0.0, max_value=0.1))


def random_kernel_book(seed: int, n: int = 40, frameworks: int = 2, scenarios: int = 3, months: int = 72,
                       secured: bool = True, multipliers: bool = True):
    """A small random book as ``allowance.ecl.KernelInputs``: every repayment type, zero rates,
    interest-only periods, balloons, revolving lines with CCF add-ons and paydown, PSA-like SMM
    rows, some loans in default, collateral LGD (``secured``) and LGD / collateral-index paths
    (``multipliers``). Seeded: the same seed gives the same book."""
    from allowance.ecl import KernelInputs

    rng = _np.random.default_rng(seed)
    code = rng.integers(0, 4, n)
    months_left = rng.integers(1, months + 1, n)
    rate = _np.where(rng.random(n) < 0.2, 0.0, rng.uniform(0.0, 0.25, n) / 12)
    balance = _np.where(rng.random(n) < 0.05, 0.0, rng.uniform(100.0, 5e5, n))
    io_left = _np.where(code == 1, rng.integers(0, months_left + 1), 0)
    residual = _np.where(code == 2, balance * rng.uniform(0.0, 1.0, n), 0.0)
    n_keys, n_rows, ages = 3, 2, 24
    horizon = _np.stack([_np.where(rng.random(n) < 0.2, rng.integers(0, 13, n), months_left) for _ in range(frameworks)])
    revolving = code == 3
    ead_add = _np.where(revolving, rng.uniform(0.0, 2e4, (frameworks, n)), 0.0)
    paydown = _np.where(revolving, rng.choice([0.0, 0.03, 0.1], (frameworks, n)), 0.0)
    discount = _np.where(rng.random((frameworks, n)) < 0.3, 1.0, 1.0 / (1.0 + rng.uniform(0, 0.2, (frameworks, n)) / 12))
    collateral = _np.where(secured & (rng.random(n) < 0.3), balance * rng.uniform(0.5, 1.5, n), 0.0)
    shape = (frameworks, months, scenarios)
    return KernelInputs(
        code=code, balance=balance, rate=rate, months_left=months_left, io_left=io_left, residual=residual,
        payment=_np.full(n, _np.nan), curve=rng.integers(0, n_keys, (frameworks, n)), prepay=rng.integers(0, n_rows, n),
        prepay_offset=rng.integers(0, ages, n), in_default=rng.random((frameworks, n)) < 0.1,
        lgd=rng.uniform(0.05, 0.9, n), collateral=collateral, haircut=rng.uniform(0, 0.4, n),
        recovery_cost=rng.uniform(0, 0.15, n), lgd_floor=rng.uniform(0, 0.1, n),
        refinance_pd=_np.where((code == 1) | (code == 2), rng.choice([0.0, 0.05, 0.3], n), 0.0),
        recovery_discount=_np.where(discount < 1.0, rng.uniform(0.8, 1.0, (frameworks, n)), 1.0), cure=rng.uniform(0, 0.3, n), horizon=horizon,
        ead_add=ead_add, paydown=paydown, discount=discount,
        interest=_np.where((discount < 1.0) & (rng.random((frameworks, n)) < 0.5), 1.0 / discount - 1.0, 0.0),
        pd=rng.uniform(0.0, 0.03, (frameworks, n_keys, months, scenarios)),
        smm=rng.uniform(0.0, 0.02, (n_rows, ages + months)),
        lgd_multiplier=rng.uniform(0.8, 1.5, shape) if multipliers else _np.ones(shape),
        collateral_index=(rng.uniform(0.7, 1.1, (frameworks, n_keys, months, scenarios)) if multipliers
                          else _np.ones((frameworks, n_keys, months, scenarios))),
    )


# --------------------------------------------------------------------------------------
# loss-rate methods: a random book for the loss-rate loop
# --------------------------------------------------------------------------------------


def random_loss_rate_book(seed: int, n: int = 40, frameworks: int = 2, scenarios: int = 3, months: int = 72):
    """A small random book as ``allowance.loss_rates.LossRateInputs``: all three methods,
    every repayment type (vintage only on term loans), prepayment rows by age, loans in
    default with and without a stated LGD, scenario multipliers. Seeded."""
    from allowance.loss_rates import LossRateInputs

    k = random_kernel_book(seed, n=n, frameworks=frameworks, scenarios=scenarios, months=months,
                           secured=False, multipliers=True)
    rng = _np.random.default_rng(seed + 1)
    method = rng.integers(0, 3, n)
    method = _np.where((method == 2) & (k.code == 3), 1, method)  # no vintage curve for revolving lines
    ages = int(k.smm.shape[1] - months)
    n_curves = 2
    curves = _np.sort(rng.uniform(0.0, 0.08, (n_curves, 8)), axis=1)
    from allowance.loss_rates import vintage_curve_by_month

    table = _np.stack([vintage_curve_by_month(c, ages + months + 1) for c in curves])
    return LossRateInputs(
        method=method, loss_rate=_np.where(method == 0, rng.uniform(0.0, 0.1, n), rng.uniform(0.0, 0.05, n)),
        vintage=rng.integers(0, n_curves, n), original_balance=k.balance * rng.uniform(1.0, 2.0, n),
        age=k.prepay_offset.copy(), default_lgd=_np.where(rng.random(n) < 0.5, rng.uniform(0.2, 0.9, n), _np.nan),
        code=k.code, balance=k.balance, rate=k.rate, months_left=k.months_left, io_left=k.io_left,
        residual=k.residual, payment=k.payment, prepay=k.prepay, prepay_offset=k.prepay_offset,
        in_default=k.in_default, horizon=k.horizon, ead_add=k.ead_add, paydown=k.paydown, discount=k.discount,
        multiplier=rng.uniform(0.7, 2.0, (frameworks, months, scenarios)), lgd_multiplier=k.lgd_multiplier,
        vintage_curve=table, smm=k.smm,
    )


# --------------------------------------------------------------------------------------
# commitments: books of revolving lines, standalone commitments and guarantees, term loans
# --------------------------------------------------------------------------------------

import pandas as _pd_cm  # noqa: E402  (own imports: this section stands alone)
from hypothesis import strategies as _st_cm  # noqa: E402
  # noqa: E402
from allowance.schemas import OPTIONAL_COLUMNS as _OPTIONAL_CM  # noqa: E402
from allowance.schemas import Assumptions as _Assumptions_cm  # noqa: E402
from allowance.schemas import LoanRecord as _LoanRecord_cm  # noqa: E402
from allowance.schemas import RunConfig as _RunConfig_cm  # noqa: E402


@_st_cm.composite
def commitment_books(draw, max_loans: int = 30):
    """An accepted-tape frame and its run configuration: revolving lines drawn from nothing to
    over their limit (some in default, some with a commitment end date), standalone commitments
    and guarantees (nothing drawn), term loans; segments cancellable or not, one CCF or a CCF
    by days-past-due bucket, a flat or a collateral LGD. Seeded from the draw (invented data)."""
    n = draw(_st_cm.integers(1, max_loans))
    rng = _np.random.default_rng(draw(_st_cm.integers(0, 2**32 - 1)))
    kind = rng.choice(["line", "commitment", "guarantee", "term"], n, p=[0.55, 0.15, 0.1, 0.2])
    off = _np.isin(kind, ["commitment", "guarantee"])
    segment = _np.where(kind == "term", "term", rng.choice(["lines", "secured"], n))
    limit = rng.uniform(500, 50_000, n).round(2)
    drawn = _np.where(rng.random(n) < 0.2, 0.0, limit * rng.uniform(0.0, 1.2, n)).round(2)
    balance = _np.where(off, 0.0, _np.where(kind == "term", rng.uniform(1_000, 90_000, n).round(2), drawn))
    end = _pd_cm.Timestamp("2026-09-30") + _pd_cm.to_timedelta(rng.integers(31, 2_000, n), unit="D")
    frame = _pd_cm.DataFrame({
        "loan_id": [f"C{i:04d}" for i in range(n)], "segment": segment,
        "repayment": _np.where(kind == "term", "level", "revolving"),
        "origination_date": _pd_cm.Timestamp("2023-03-15"),
        "maturity_date": _pd_cm.to_datetime(_np.where(kind == "term", "2031-03-15", None)),
        "balance": balance, "interest_rate": rng.choice([0.0, 0.06, 0.19], n),
        "days_past_due": rng.choice([0, 0, 0, 10, 45, 75, 120, 200], n),
    })
    for c in _OPTIONAL_CM:
        frame[c] = False if _LoanRecord_cm.model_fields[c].annotation is bool else _np.nan
    frame["facility_type"] = _np.where(off, kind, _np.where(rng.random(n) < 0.5, "funded", None)).astype(object)
    frame["credit_limit"] = _np.where(kind == "term", _np.nan, limit)
    frame["commitment_end_date"] = _pd_cm.Series(end).where(off | (rng.random(n) < 0.4))
    frame["defaulted"] = rng.random(n) < 0.1
    frame["collateral_value"] = _np.where(segment == "secured", rng.uniform(0, 40_000, n).round(2), _np.nan)
    frame["accrued_interest"] = _np.where(rng.random(n) < 0.3, (balance * 0.01).round(2), _np.nan)
    frame["source_row"] = _np.arange(n) + 2

    def line_segment(collateral: bool) -> dict:
        seg = {"pd_12m": draw(_st_cm.floats(0.001, 0.4)), "lgd": draw(_st_cm.floats(0.05, 1.0)),
               "behavioural_life_months": draw(_st_cm.integers(1, 60)), "payment_rate": draw(_st_cm.floats(0.01, 0.3)),
               "unconditionally_cancellable": draw(_st_cm.booleans())}
        if draw(_st_cm.booleans()):
            seg["ccf"] = draw(_st_cm.floats(0.0, 1.0))
        else:
            seg["ccf_by_dpd"] = {"0": draw(_st_cm.floats(0.0, 1.0)), "30": draw(_st_cm.floats(0.0, 1.0)),
                                 "90": draw(_st_cm.floats(0.0, 1.0))}
        if collateral:
            seg["collateral_lgd"] = {"haircut": 0.2, "recovery_cost": 0.05, "months_to_recovery": 6}
        return seg

    data = {
        "run": {"as_of": "2026-09-30", "frameworks": ["ifrs9", "cecl"]},
        "segments": {"lines": line_segment(False), "secured": line_segment(True),
                     "term": {"pd_12m": 0.03, "lgd": 0.4, "cpr": 0.05}},
        "ifrs9": {"accrued_interest": "all", "sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month"}, "cecl": {"reasonable_supportable_months": 12, "reversion_months": 6,
                 "payment_allocation": "measured_balance_first",
                              "discount": draw(_st_cm.booleans())},
        "scenarios": {"base": {"weight": 0.7}, "down": {"weight": 0.3, "pd_multiplier": [1.8, 1.3],
                                                         "lgd_multiplier": [1.2]}},
    }
    return frame, _RunConfig_cm(assumptions=_Assumptions_cm.model_validate(data))
