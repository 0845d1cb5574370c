"""Generate the demo portfolio of Corrandale Mutual Savings Bank, an invented lender.

Every name, loan and figure here is invented. The generator is deterministic: the same seed
writes the same bytes, and ``tests/test_demo_data.py`` checks that the committed files are
exactly what this script writes.

Run from the repository root::

    python demo/generate.py              # rewrites the files in demo/
    python demo/generate.py --out DIR    # writes them somewhere else

or import it: ``generate(out_dir, seed=20260930)``.

How the book is built
---------------------
1. Static loan terms per segment (origination month, term, rate, amount, grade, fees,
   collateral), drawn with one ``numpy.random.default_rng(seed)``.
2. Arrears are simulated month by month from 2026-03-31 to 2026-09-30, vectorised over loans:
   each month a payment falls due; a loan ``m`` payments behind cures, pays one (stays) or
   misses one (rolls to ``m + 1``). A loan that reaches its segment's charge-off point is
   written off; in the third quarter current loans also prepay in full, and loans reaching
   maturity pay off.
3. The tapes are snapshots at 2026-06-30 and 2026-09-30. Balances are the level-pay schedule
   at the number of payments actually made (payments due minus payments missed); days past
   due are the days since the oldest unpaid due date.
4. A five-year monthly performance history of a sample of the lender's accounts is simulated
   from known parameters (``history.py``), and both quarters' assumptions are calibrated from
   it by ``allowance calibrate`` under each quarter's policy file.
"""

from __future__ import annotations

import argparse
import hashlib
from pathlib import Path

import numpy as np
import numpy_financial as npf

try:
    from demo import files, history, year_ago
except ImportError:  # run as a script: python demo/generate.py puts demo/ on sys.path
    import files  # type: ignore[no-redef]
    import history  # type: ignore[no-redef]
    import year_ago  # type: ignore[no-redef]

SEED = 20260930
LENDER = "Corrandale Mutual Savings Bank"

AS_OF_Q2 = np.datetime64("2026-06-30")
AS_OF_Q3 = np.datetime64("2026-09-30")
MONTH_Q1 = np.datetime64("2026-03", "M").astype(np.int64)
MONTH_Q2 = MONTH_Q1 + 3
MONTH_Q3 = MONTH_Q1 + 6

GRADES = np.array(["A", "B", "C", "D", "E"])
#: 12-month PD by grade, the same figures as the assumptions files (the PD-ratio test needs them).
PD_BY_GRADE = {
    "auto": np.array([0.004, 0.009, 0.02, 0.042, 0.085]),
    "personal": np.array([0.008, 0.018, 0.035, 0.065, 0.12]),
}
BRANCHES = np.array(
    ["Corrandale Central", "Millwater Quay", "Hetherby", "Fennick Cross",
     "Ashgrove", "Southmere", "Larrow Hill", "Online"]
)

TAPE_COLUMNS = (
    "loan_id", "segment", "repayment", "origination_date", "maturity_date", "balance",
    "interest_rate", "days_past_due", "credit_limit", "payment", "eir", "grade",
    "pd_12m_at_origination", "pd_12m_current", "collateral_value", "watchlist", "forborne", "bankrupt",
    "defaulted", "credit_impaired_at_purchase", "prior_stage", "months_performing",
    "balloon_amount", "amortization_months", "interest_only_months", "draw_period_months",
    "lifetime_ecl_at_purchase", "credit_adjusted_eir", "modified", "original_amount", "branch",
)
#: Segments whose loans carry a behavioural score (a 12-month PD of their own) each quarter, on
#: the scale of their grade's PD. Commercial real estate is rated by committee; mortgages and
#: home-equity lines are modelled on a seasoning curve by age and cards by delinquency bucket,
#: which the lender's scores are not calibrated to: none of these carries one on the tape, so
#: the run stages them without the PD-ratio test (and says so) and prices them at the curve.
SCORED = ("auto", "personal")

# Segment shapes. n: loans on the book at 2026-06-30; new: originations in the third quarter;
# terms / term_p: contractual terms in months and their shares (0: revolving, no term);
# span / age_power: age at 2026-06-30 is floor(u ** age_power * span) months, u uniform
# (span blank: the term, so every term loan has a payment left); r0: monthly chance a current
# loan misses a payment; chargeoff_dpd: days past due at write-off (120 closed-end consumer,
# 180 open-end revolving, secured loans after foreclosure); smm: monthly full prepayment.
SEGMENTS = {
    "mortgage": dict(prefix="MTG", n=2450, new=95, repayment="level", terms=(360,), term_p=(1.0,),
                     span=171, age_power=1.8, r0=0.006, chargeoff_dpd=270, smm=0.006,
                     delinquent_q1=0.030),
    "auto": dict(prefix="AUT", n=2150, new=190, repayment="level", terms=(60, 72), term_p=(0.55, 0.45),
                 span=None, age_power=1.67, r0=0.012, chargeoff_dpd=120, smm=0.012, delinquent_q1=0.050),
    "personal": dict(prefix="PER", n=1550, new=170, repayment="level", terms=(36,), term_p=(1.0,),
                     span=None, age_power=2.0, r0=0.026, chargeoff_dpd=120, smm=0.016,
                     delinquent_q1=0.070),
    "cards": dict(prefix="CRD", n=2750, new=150, repayment="revolving", terms=(0,), term_p=(1.0,),
                  span=217, age_power=1.5, r0=0.022, chargeoff_dpd=180, smm=0.004, delinquent_q1=0.060),
    "cre": dict(prefix="CRE", n=380, new=12, repayment="balloon", terms=(60, 84, 120),
                term_p=(0.35, 0.4, 0.25), amortization=(300, 360), span=None, age_power=1.0, r0=0.004,
                chargeoff_dpd=270, smm=0.004, delinquent_q1=0.012),
    "heloc": dict(prefix="HEL", n=620, new=30, repayment="heloc", terms=(300,), term_p=(1.0,),
                  interest_only=120, span=180, age_power=1.6, r0=0.006, chargeoff_dpd=270, smm=0.009,
                  delinquent_q1=0.025),
}
# Monthly behaviour of a loan m payments behind (index m; m >= 7 uses the last entry).
CURE = np.array([0.0, 0.50, 0.25, 0.15, 0.10, 0.06, 0.05, 0.04])
STAY = np.array([0.0, 0.28, 0.25, 0.22, 0.18, 0.16, 0.15, 0.15])
# Share of the delinquent loans at 2026-03-31 by payments missed (1..8).
TAIL_Q1 = np.array([0.55, 0.18, 0.10, 0.07, 0.05, 0.03, 0.015, 0.005])

#: Contract rates are kept inside these ranges (annual, decimal).
RATE_RANGE = {"mortgage": (0.0275, 0.0725), "auto": (0.049, 0.112), "personal": (0.089, 0.182),
              "cards": (0.18, 0.27), "cre": (0.048, 0.082), "heloc": (0.06, 0.095)}
# An invented, stylised market history of the Corrandale valley: mortgage and CRE rates by
# origination year, house and commercial property price growth by year.
YEARS = np.arange(2008, 2027)
MORTGAGE_RATE = np.array([5.6, 5.2, 4.9, 4.6, 4.1, 4.3, 4.4, 4.1, 3.9, 4.2, 4.7, 4.3, 3.5,
                          3.3, 4.9, 6.4, 6.6, 6.2, 6.0]) / 100
CRE_RATE = np.array([6.5, 6.0, 5.8, 5.5, 5.0, 5.1, 5.2, 5.0, 5.0, 5.2, 5.6, 5.3, 5.0, 5.0,
                     6.2, 7.4, 7.6, 7.2, 7.0]) / 100
HOUSE_GROWTH = np.array([-0.06, -0.03, -0.02, 0.0, 0.03, 0.05, 0.045, 0.05, 0.05, 0.055,
                         0.05, 0.04, 0.055, 0.11, 0.08, 0.03, 0.04, 0.03, 0.02])
CRE_GROWTH = np.array([-0.10, -0.06, 0.0, 0.02, 0.03, 0.04, 0.04, 0.04, 0.03, 0.03, 0.03,
                       0.02, -0.02, 0.03, 0.0, -0.04, -0.05, -0.03, -0.01])


# --------------------------------------------------------------------------------------
# small pure helpers
# --------------------------------------------------------------------------------------


def scheduled_balance(amount, monthly_rate, n_payments, paid):
    """Level-pay balance after ``paid`` payments of a loan amortizing over ``n_payments``.

    B_j = A (1 + r)^j - P ((1 + r)^j - 1) / r with P = A r / (1 - (1 + r)^-n).
    """
    growth = (1.0 + monthly_rate) ** paid
    payment = level_payment(amount, monthly_rate, n_payments)
    return np.maximum(amount * growth - payment * (growth - 1.0) / monthly_rate, 0.0)


def level_payment(amount, monthly_rate, n_payments):
    """P = A r / (1 - (1 + r)^-n); n < 1 (revolving lines, no term) gives NaN."""
    n = np.asarray(n_payments, float)
    payment = amount * monthly_rate / (1.0 - (1.0 + monthly_rate) ** -np.maximum(n, 1.0))
    return np.where(n >= 1, payment, np.nan)


def month_to_date(month, day):
    """Month index (months since 1970-01) and day of month -> datetime64[D]."""
    return np.asarray(month).astype("datetime64[M]").astype("datetime64[D]") + (np.asarray(day) - 1)


def price_index(growth_by_year, month):
    """Index (1.0 at 2008-01) at each month index, compounding each year's growth monthly."""
    months = np.arange(np.datetime64("2008-01", "M").astype(np.int64), MONTH_Q3 + 1)
    year = months // 12 + 1970 - YEARS[0]
    monthly = (1.0 + growth_by_year[year]) ** (1.0 / 12.0)
    index = np.cumprod(monthly) / monthly[0]
    return index[np.asarray(month) - months[0]]


# --------------------------------------------------------------------------------------
# the book: static terms of every loan
# --------------------------------------------------------------------------------------


def _mortgage(rng, n, year):
    amount = np.clip(np.round(rng.lognormal(np.log(265_000), 0.45, n), -2), 60_000, 1_250_000)
    low_pd = rng.random(n) < 0.04  # scored very low at origination: the PD-ratio test bites
    return dict(rate=MORTGAGE_RATE[year] + rng.normal(0, 0.0025, n), amount=amount,
                value=amount / rng.uniform(0.55, 0.95, n),
                pd_orig=np.where(low_pd, rng.uniform(0.0015, 0.0028, n), 0.006 * rng.lognormal(0, 0.2, n)))


def _graded(segment, base_rate, rate_step, median, sigma, ltv):
    """Graded consumer loans: rate and PD at origination by grade; ``ltv`` range when secured."""
    def terms(rng, n, year):
        grade = rng.choice(5, size=n, p=[0.24, 0.30, 0.25, 0.13, 0.08])
        amount = np.clip(np.round(rng.lognormal(np.log(median), sigma, n), -1), 2_000, 95_000)
        pd_table = PD_BY_GRADE[segment]
        return dict(rate=base_rate + rate_step * grade + rng.normal(0, 0.003, n), amount=amount,
                    grade_idx=grade, pd_orig=pd_table[grade] * rng.uniform(0.85, 1.15, n),
                    value=amount / rng.uniform(*ltv, n) if ltv else np.full(n, np.nan))
    return terms


def _cards(rng, n, year):
    tier = rng.choice(4, size=n, p=[0.3, 0.35, 0.25, 0.1])
    low_pd = rng.random(n) < 0.05
    pd_orig = np.array([0.02, 0.028, 0.036, 0.05])[tier] * rng.uniform(0.8, 1.2, n)
    return dict(rate=np.array([0.1899, 0.2149, 0.2399, 0.2649])[tier],
                limit=np.clip(np.round(rng.lognormal(np.log(6_000), 0.6, n), -2), 1_000, 25_000),
                pd_orig=np.where(low_pd, rng.uniform(0.008, 0.013, n), pd_orig))


def _cre(rng, n, year):
    amount = np.clip(np.round(rng.lognormal(np.log(1_150_000), 0.7, n), -3), 250_000, 12_000_000)
    low_pd = rng.random(n) < 0.05
    return dict(rate=CRE_RATE[year] + rng.normal(0, 0.002, n), amount=amount,
                value=amount / rng.uniform(0.5, 0.75, n),
                pd_orig=np.where(low_pd, rng.uniform(0.006, 0.0095, n), rng.uniform(0.012, 0.024, n)))


def _heloc(rng, n, year):
    amount = np.clip(np.round(rng.lognormal(np.log(60_000), 0.6, n), -2), 10_000, 250_000)
    return dict(rate=0.065 + 0.01 * rng.random(n) + np.where(YEARS[year] >= 2023, 0.01, 0.0),
                amount=amount, pd_orig=0.006 * rng.lognormal(0, 0.25, n))


#: Segment -> its rates, amounts, limits, collateral and PD at origination.
PRICING = {"mortgage": _mortgage, "auto": _graded("auto", 0.055, 0.013, 31_000, 0.4, (0.85, 1.10)),
           "personal": _graded("personal", 0.095, 0.02, 11_000, 0.55, None), "cards": _cards, "cre": _cre,
           "heloc": _heloc}
#: Segment -> (share of loans with fees, lowest and highest fee as a share of the amount).
FEES = {"mortgage": (0.5, 0.005, 0.015), "auto": (0.4, 0.005, 0.01), "personal": (0.6, 0.01, 0.04),
        "cre": (0.7, 0.005, 0.01)}


def effective_rate(amount, rate, term, amortization, fee):
    """Annual EIR: the rate that discounts the contractual payments to ``amount * (1 - fee)``.

    Balloon loans pay the level payment over ``amortization`` months and the balance left at
    ``term``; level loans have ``amortization == term``. Solved with ``numpy_financial.rate``.
    """
    r = rate / 12
    payment = level_payment(amount, r, amortization)
    balloon = np.where(amortization > term, scheduled_balance(amount, r, amortization, term), 0.0)
    return npf.rate(term, -payment, amount * (1 - fee), -balloon, guess=r) * 12


def _segment_terms(rng, name, spec):
    n_old, n_new = spec["n"], spec["new"]
    n = n_old + n_new
    term = rng.choice(np.array(spec["terms"]), size=n, p=spec["term_p"])
    amort = rng.choice(np.array(spec.get("amortization", (0,))), size=n)
    io = np.full(n, spec.get("interest_only", 0))
    span = term[:n_old] if spec["span"] is None else spec["span"]
    age = np.minimum(np.floor(rng.random(n_old) ** spec["age_power"] * span).astype(np.int64), span - 1)
    orig_month = np.concatenate([MONTH_Q2 - age, MONTH_Q2 + rng.integers(1, 4, n_new)])
    day = rng.integers(1, 29, n)  # payment day; 1-28 keeps every due date in its month
    year = np.clip(orig_month // 12 + 1970 - YEARS[0], 0, len(YEARS) - 1)
    blank = np.full(n, np.nan)
    terms = dict(amount=np.zeros(n), limit=blank, value=blank, grade_idx=np.zeros(n, np.int64))
    terms.update(PRICING[name](rng, n, year))
    rate = np.round(np.clip(terms.pop("rate"), *RATE_RANGE[name]), 4)
    eir = blank
    if name in FEES:
        share, low, high = FEES[name]
        has_fee, fee = rng.random(n) < share, rng.uniform(low, high, n)
        solved = effective_rate(terms["amount"], rate, term, np.maximum(amort, term), fee)
        eir = np.where(has_fee, np.round(solved, 6), np.nan)
    terms.update(term=term, amort=amort, io=io, orig_month=orig_month, day=day, rate=rate, eir=eir,
                 pd_orig=np.round(terms["pd_orig"], 6), new=np.arange(n) >= n_old)
    return terms


def build_book(rng, seed: int = SEED):
    """Every loan that is on the book at some point between 2026-03-31 and 2026-09-30."""
    parts = []
    for name, spec in SEGMENTS.items():
        terms = _segment_terms(rng, name, spec)
        n = len(terms["term"])
        order = np.lexsort((terms["day"], terms["orig_month"]))  # IDs rise with origination
        terms = {k: v[order] for k, v in terms.items()}
        serial = 100_000 + np.cumsum(rng.integers(1, 4, n))
        terms["loan_id"] = np.array([f"{spec['prefix']}-{s:06d}" for s in serial], dtype=object)
        terms["segment"] = np.full(n, name, dtype=object)
        terms["branch"] = BRANCHES[rng.choice(len(BRANCHES), size=n,
                                               p=[0.2, 0.14, 0.12, 0.1, 0.1, 0.1, 0.08, 0.16])]
        parts.append(terms)
    book = {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
    n = len(book["term"])
    seg = book["segment"]
    book["revolving"] = seg == "cards"
    book["unsecured"] = np.isin(seg, ["cards", "personal"])
    book["chargeoff_dpd"] = np.array([SEGMENTS[s]["chargeoff_dpd"] for s in seg])
    # Purchased credit-impaired: a handful of mortgage and auto loans bought from another
    # lender between late 2023 and early 2025 (origination date = purchase date). Their
    # lifetime ECL at purchase is set near what the demo assumptions give them now, so the
    # allowance (the change since purchase, IFRS 9 5.5.13) is small, as it usually is.
    bought = np.flatnonzero(np.isin(seg, ["mortgage", "auto"]) & (book["orig_month"] >= MONTH_Q2 - 30)
                            & (book["orig_month"] <= MONTH_Q2 - 15) & ~book["new"])
    poci = np.zeros(n, bool)
    poci[rng.choice(bought, size=10, replace=False)] = True
    rng.random(n)  # (a draw kept so that the rest of the book stays as it was)
    # Three more bought in the third quarter: their purchase ECL is left blank, for the tool
    # to measure at the purchase date (IFRS 9: no day-one allowance; CECL: the PCD gross-up).
    own = np.random.default_rng([seed, 13])  # draws of their own, so the book above is unchanged
    this_quarter = np.flatnonzero(np.isin(seg, ["mortgage", "auto"]) & book["new"])
    poci[own.choice(this_quarter, size=3, replace=False)] = True
    book["poci"] = poci
    # HELOC limits: the amount drawn at origination is 60-95 % of the line (draws of their own,
    # so the book above is unchanged); the rest can be drawn until the draw period ends
    lines = np.random.default_rng([seed, 17]).uniform(0.6, 0.95, n)
    book["limit"] = np.where(seg == "heloc", np.round(book["amount"] / lines, -3), book["limit"])
    # PD at purchase (the scale of pd_12m_current): credit-impaired, so high
    book["pd_orig"] = np.where(poci, np.round(own.uniform(0.12, 0.3, n), 6), book["pd_orig"])
    # Lifetime ECL at purchase: measured by the tool once the assumptions are calibrated
    # (purchase_ecls below); blank for the three bought this quarter, which the run measures
    book["ecl_at_purchase"] = np.full(n, np.nan)
    # Credit-adjusted EIR (IFRS 9 B5.5.45): the yield at which the buyer priced the cash flows
    # it expected to collect, above the contract rate of a credit-impaired loan
    book["ca_eir"] = np.where(poci, np.round(book["rate"] + own.uniform(0.01, 0.03, n), 6), np.nan)
    return book


# --------------------------------------------------------------------------------------
# arrears, write-offs and payoffs, month by month
# --------------------------------------------------------------------------------------


def simulate(rng, book):
    """Arrears state at 2026-03-31, -06-30 and -09-30, and the month each loan left the book."""
    n = len(book["term"])
    seg = book["segment"]
    orig, term = book["orig_month"], book["term"]
    revolving, unsecured, poci = book["revolving"], book["unsecured"], book["poci"]
    spec = {k: np.array([SEGMENTS[s][k] for s in seg]) for k in ("r0", "smm", "delinquent_q1")}
    grade_factor = np.array([0.4, 0.7, 1.0, 1.6, 2.4])[book["grade_idx"]]
    r0 = spec["r0"] * np.where(np.isin(seg, list(PD_BY_GRADE)), grade_factor, 1.0)
    r0 = np.where(poci, 0.08, r0)
    existed = orig < MONTH_Q1  # on the book at 2026-03-31: the only loans with flags then

    due_q1 = np.where(revolving, MONTH_Q1 - orig, np.minimum(MONTH_Q1 - orig, term))
    share = np.where(poci, 0.5, spec["delinquent_q1"])
    missed = np.where(rng.random(n) < share, 1 + rng.choice(8, size=n, p=TAIL_Q1), 0)
    missed = np.clip(np.minimum(missed, book["chargeoff_dpd"] // 30 - 1), 0, np.maximum(due_q1, 0))
    current_run = np.where(missed == 0, np.minimum(rng.integers(3, 37, n), np.maximum(due_q1, 0)), 0)
    bankrupt = existed & ((~poci & (rng.random(n) < 0.002)) | ((missed >= 2) & (rng.random(n) < 0.04)))
    covenant = existed & (seg == "cre") & (rng.random(n) < 0.008)
    forborne = existed & ((~revolving & (rng.random(n) < 0.008)) | ((missed >= 2) & (rng.random(n) < 0.1)))
    watch_share = np.where(seg == "cre", 0.08, np.where(np.isin(seg, ["mortgage", "heloc"]), 0.007, 0.0))
    watchlist = existed & (rng.random(n) < watch_share)
    left = np.zeros(n, np.int64)  # month the loan left the book (0: still on it)
    how = np.full(n, "", dtype=object)

    snapshots = {MONTH_Q1: _snap(missed, current_run, bankrupt, forborne, watchlist, covenant)}
    for month in range(MONTH_Q1 + 1, MONTH_Q3 + 1):
        on = (left == 0) & (orig < month)
        if month > MONTH_Q2:  # new flags and quarterly review only matter for the tapes
            bankrupt |= on & ~poci & (rng.random(n) < 0.0004)
        due = on & (revolving | (month - orig <= term))
        u = rng.random(n)
        m = np.minimum(missed, 7)
        cure = u < CURE[m]
        stay = (u >= CURE[m]) & (u < CURE[m] + STAY[m])
        new_missed = np.where(missed == 0, (u < r0).astype(np.int64),
                              np.where(cure, 0, np.where(stay, missed, missed + 1)))
        missed = np.where(due, new_missed, missed)
        current_run = np.where(due & (missed == 0), current_run + 1, np.where(due, 0, current_run))
        forborne |= due & (missed >= 3) & (rng.random(n) < 0.03)
        month_end = (np.datetime64(month + 1, "M").astype("datetime64[D]") - 1)
        dpd = days_past_due(month, book["day"], missed, month_end)
        charged = on & ((dpd >= book["chargeoff_dpd"]) | (bankrupt & unsecured & (rng.random(n) < 0.3)))
        left, how = np.where(charged, month, left), np.where(charged, "charged_off", how)
        if month > MONTH_Q2:
            paid = on & ~charged & (missed == 0) & (rng.random(n) < spec["smm"])
            matured = on & ~charged & ~revolving & (month - orig >= term)
            left = np.where(paid | matured, month, left)
            how = np.where(paid, "prepaid", np.where(matured, "matured", how))
        if month in (MONTH_Q2, MONTH_Q3):
            if month == MONTH_Q3:
                watchlist = np.where(rng.random(n) < 0.1, False, watchlist) | (
                    (seg == "cre") & (orig < MONTH_Q2) & (rng.random(n) < 0.015))
                forborne = np.where(rng.random(n) < 0.08, False, forborne)
            snapshots[month] = _snap(missed, current_run, bankrupt, forborne, watchlist, covenant)
    # A few performing loans are sold in the third quarter.
    sellable = np.flatnonzero((left == 0) & np.isin(seg, ["cre", "mortgage"]) & (orig <= MONTH_Q2)
                              & (snapshots[MONTH_Q3]["missed"] == 0))
    sold = rng.choice(sellable, size=14, replace=False)
    left[sold], how[sold] = MONTH_Q3, "sold"
    return snapshots, left, how


def _snap(missed, current_run, bankrupt, forborne, watchlist, covenant):
    return dict(missed=missed.copy(), current_run=current_run.copy(), bankrupt=bankrupt.copy(),
                forborne=forborne.copy(), watchlist=watchlist.copy(), covenant=covenant.copy())


def days_past_due(month, day, missed, as_of):
    """Days since the oldest unpaid due date (day ``day`` of the month ``missed - 1`` back)."""
    oldest = month_to_date(month - np.maximum(missed - 1, 0), day)
    return np.where(missed > 0, (as_of - oldest).astype(np.int64), 0)


def balances(book, month, missed, utilisation):
    """Outstanding principal at a month end: the schedule at payments made."""
    r = book["rate"] / 12
    due = np.clip(month - book["orig_month"], 0, book["term"])
    paid = np.maximum(due - missed, 0)
    level = scheduled_balance(book["amount"], r, book["term"], paid)
    balloon = scheduled_balance(book["amount"], r, np.maximum(book["amort"], 1), paid)
    after_io = scheduled_balance(book["amount"], r, np.maximum(book["term"] - book["io"], 1),
                                 np.maximum(paid - book["io"], 0))
    revolving = utilisation * book["limit"]
    rep = book["segment"]
    return np.round(np.select([rep == "cards", rep == "cre", rep == "heloc"],
                              [revolving, balloon, after_io], level), 2)


def utilisation_paths(rng, book, snapshots, left):
    """Drawn share of the card limit at 2026-06-30 and 2026-09-30."""
    n = len(book["term"])
    idle = rng.random(n) < 0.22
    q2 = np.where(idle, 0.0, rng.beta(1.6, 2.2, n))
    q3 = np.where(idle & (rng.random(n) < 0.9), 0.0, np.clip(q2 + rng.normal(0, 0.06, n), 0.01, 0.98))
    for util, snap in ((q2, snapshots[MONTH_Q2]), (q3, snapshots[MONTH_Q3])):
        late = snap["missed"] > 0
        util[late] = np.maximum(util[late], 0.55 + 0.4 * rng.random(late.sum()))
    over = np.flatnonzero(book["revolving"] & (left == 0) & (snapshots[MONTH_Q3]["missed"] >= 2))[:3]
    q3[over] = 1.0 + rng.uniform(0.01, 0.04, len(over))
    return {MONTH_Q2: q2, MONTH_Q3: q3}


def grades_at(rng, book, snapshots):
    """Current grade at each quarter end: mostly the origination grade, downgrades when late."""
    n = len(book["term"])
    shift = rng.choice([-1, 0, 1, 2], size=n, p=[0.06, 0.88, 0.045, 0.015])
    q2 = np.clip(book["grade_idx"] + shift + (snapshots[MONTH_Q2]["missed"] > 0), 0, 4)
    step = rng.choice([-1, 0, 1], size=n, p=[0.015, 0.955, 0.03])
    q3 = np.clip(q2 + step + (snapshots[MONTH_Q3]["missed"] > snapshots[MONTH_Q2]["missed"]), 0, 4)
    q2 = np.where(book["new"], book["grade_idx"], q2)
    q3 = np.where(book["new"], np.clip(book["grade_idx"] + (snapshots[MONTH_Q3]["missed"] > 0), 0, 4), q3)
    return {MONTH_Q2: q2, MONTH_Q3: q3}


def behavioural_pds(book, snapshots, grades, seed):
    """Each scored loan's own 12-month PD at 2026-06-30 and 2026-09-30 (a behavioural score).

    It starts from the PD at origination (at purchase, for POCI loans), drifts with the
    loan's seasoning and a random walk of its own, follows any grade migration, and jumps
    when the loan is behind or flagged. A loan booked in the quarter keeps its origination
    PD. Unscored segments (``SCORED``) are blank, except their POCI loans. Draws of its own, so
    the book is unchanged.
    """
    own = np.random.default_rng([seed, 14])
    n = len(book["term"])
    scored = np.isin(book["segment"], SCORED)
    graded = np.isin(book["segment"], list(PD_BY_GRADE))
    walk = {MONTH_Q2: own.normal(0.0, 0.3, n)}
    walk[MONTH_Q3] = walk[MONTH_Q2] + own.normal(0.0, 0.12, n)
    out = {}
    for month, quarter_start in ((MONTH_Q2, MONTH_Q2 - 2), (MONTH_Q3, MONTH_Q3 - 2)):
        snap = snapshots[month]
        years = np.maximum(month - book["orig_month"], 0) / 12
        grade_shift = np.ones(n)
        for name, table in PD_BY_GRADE.items():
            mine = book["segment"] == name
            grade_shift[mine] = table[grades[month][mine]] / table[book["grade_idx"][mine]]
        behind = 1.0 + 1.2 * np.minimum(snap["missed"], 4)
        flagged = np.where(snap["forborne"] | snap["watchlist"], 1.5, 1.0)
        drift = np.exp(walk[month] - 0.04 * years)  # seasoned loans that keep paying improve
        pd_now = book["pd_orig"] * drift * np.where(graded, grade_shift, 1.0) * behind * flagged
        booked_now = book["orig_month"] >= quarter_start
        pd_now = np.where(booked_now, book["pd_orig"], np.clip(pd_now, 0.0003, 0.6))
        # a purchased credit-impaired loan is scored whatever its segment (the buyer monitors it)
        out[month] = np.where(scored | book["poci"], np.round(pd_now, 6), np.nan)
    return out


def simple_stage(snap, dpd):
    """The lender's own record of the stage (DPD, flags); the engine restages every run."""
    three = (dpd >= 90) | snap["bankrupt"] | snap["covenant"] | (snap["missed"] >= 4)
    two = (dpd > 30) | snap["watchlist"] | snap["forborne"]
    return np.where(three, 3, np.where(two, 2, 1))


# --------------------------------------------------------------------------------------
# the tapes
# --------------------------------------------------------------------------------------

QUARTER_END = {MONTH_Q1: np.datetime64("2026-03-31"), MONTH_Q2: AS_OF_Q2, MONTH_Q3: AS_OF_Q3}


def tape_columns(book, snapshots, util, grades, scores, month, prior_month):
    """The tape at one quarter end, as text columns in ``TAPE_COLUMNS`` order, for all loans."""
    snap, prior = snapshots[month], snapshots[prior_month]
    # terms modified this quarter: forbearance granted since the last quarter end
    modified = snap["forborne"] & ~prior["forborne"]
    missed = snap["missed"]
    seg, rev = book["segment"], book["revolving"]
    dpd = days_past_due(month, book["day"], missed, QUARTER_END[month])
    prior_stage = simple_stage(prior, days_past_due(prior_month, book["day"], prior["missed"],
                                                    QUARTER_END[prior_month]))
    show_prior = (book["orig_month"] < prior_month) & (prior_stage >= 2)
    balance = balances(book, month, missed, util[month])
    maturity = month_to_date(book["orig_month"] + book["term"], book["day"]).astype(str)
    r = book["rate"] / 12
    level = np.isin(seg, ["mortgage", "auto", "personal"])
    payment = np.where(level, level_payment(book["amount"], r, book["term"]),
                       np.where(seg == "cre", level_payment(book["amount"], r, np.maximum(book["amort"], 1)),
                                np.nan))
    payment = np.where(missed == 0, np.round(payment, 2), np.nan)
    since = np.maximum(book["orig_month"], np.datetime64("2008-01", "M").astype(np.int64))
    house = price_index(HOUSE_GROWTH, month) / price_index(HOUSE_GROWTH, since)
    cre = price_index(CRE_GROWTH, month) / price_index(CRE_GROWTH, since)
    vehicle = 0.985 ** np.maximum(month - book["orig_month"], 0)
    collateral = np.select([seg == "mortgage", seg == "cre", seg == "auto"],
                           [book["value"] * house * book["house_noise"],
                            book["value"] * cre * book["cre_noise"], book["value"] * vehicle], np.nan)
    grade = np.where(np.isin(seg, list(PD_BY_GRADE)), GRADES[grades[month]], "").astype(object)
    defaulted = snap["covenant"] | (np.isin(seg, ["mortgage", "cre", "heloc"]) & (missed >= 4))
    repayment = np.array([SEGMENTS[s]["repayment"] for s in seg], dtype=object)
    blank = np.full(len(seg), np.nan)
    return [
        book["loan_id"], seg, repayment,
        month_to_date(book["orig_month"], book["day"]).astype(str).astype(object),
        np.where(rev, "", maturity).astype(object), files.money(balance), files.rate(book["rate"]),
        dpd.astype(str).astype(object), files.money(book["limit"]), files.money(payment),
        files.rate(book["eir"]), grade, files.rate(book["pd_orig"]), files.rate(scores[month]),
        files.money(np.round(collateral, -2)),
        files.boolean(snap["watchlist"]), files.boolean(snap["forborne"]), files.boolean(snap["bankrupt"]),
        files.boolean(defaulted), files.boolean(book["poci"]), files.whole(prior_stage, show_prior),
        files.whole(snap["current_run"], show_prior), files.money(blank),
        files.whole(book["amort"], seg == "cre"), files.whole(book["io"], np.zeros(len(seg), bool)),
        files.whole(book["io"], seg == "heloc"),  # a HELOC's draw period: 10 years, then 15 of repayment
        files.money(book["ecl_at_purchase"]), files.rate(book["ca_eir"]), files.boolean(modified),
        files.money(np.where(rev, np.nan, book["amount"])),
        book["branch"],
    ]


def _cents(text_column) -> int:
    return sum(int(round(float(v) * 100)) for v in text_column)


def generate(out_dir: Path, seed: int = SEED) -> list[Path]:
    """Write every demo file into ``out_dir``; return the paths written, sorted."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    book = build_book(rng, seed)
    n = len(book["term"])
    book["house_noise"] = rng.lognormal(0, 0.08, n)
    book["cre_noise"] = rng.lognormal(0, 0.10, n)
    snapshots, left, how = simulate(rng, book)
    util = utilisation_paths(rng, book, snapshots, left)
    grades = grades_at(rng, book, snapshots)
    scores = behavioural_pds(book, snapshots, grades, seed)

    # Write-offs of the quarter at the last reported balance (cards: or the balance run up since).
    bal_q2 = balances(book, MONTH_Q2, snapshots[MONTH_Q2]["missed"], util[MONTH_Q2])
    bal_q3 = balances(book, MONTH_Q3, snapshots[MONTH_Q3]["missed"], util[MONTH_Q3])
    gross = np.where(book["revolving"], np.maximum(bal_q2, bal_q3), bal_q2)
    on_q2 = (book["orig_month"] <= MONTH_Q2) & ((left == 0) | (left > MONTH_Q2))
    written_off = on_q2 & (how == "charged_off") & (gross > 0)
    how = np.where(on_q2 & (how == "charged_off") & ~written_off, "closed", how)
    on_q3 = left == 0

    written, tapes = [], {}
    for name, month, prior, on in (("tape_2026q2.csv", MONTH_Q2, MONTH_Q1, on_q2),
                                   ("tape_2026q3.csv", MONTH_Q3, MONTH_Q2, on_q3)):
        keep = np.flatnonzero(on)
        keep = keep[np.argsort(book["loan_id"][keep], kind="stable")]
        cols = [np.asarray(c)[keep] for c in tape_columns(book, snapshots, util, grades, scores, month, prior)]
        written.append(files.write_csv(out_dir / name, TAPE_COLUMNS, cols))
        tapes[name] = cols

    # Charge-offs: the quarter's write-offs with recoveries so far, then recoveries on loans
    # written off in the second quarter (gross 0).
    now = np.flatnonzero(written_off)
    now = now[np.argsort(book["loan_id"][now], kind="stable")]
    share = {"mortgage": (0.5, 0.75), "heloc": (0.05, 0.3), "cre": (0.45, 0.7), "auto": (0.35, 0.55),
             "personal": (0.0, 0.08), "cards": (0.0, 0.05)}
    low, high = (np.array([share[s][i] for s in book["segment"][now]]) for i in (0, 1))
    recovered = np.round(gross[now] * rng.uniform(low, high), 2)
    earlier = np.flatnonzero((how == "charged_off") & (left <= MONTH_Q2) & (left > 0))
    earlier = rng.choice(earlier, size=min(8, len(earlier)), replace=False)
    earlier = earlier[np.argsort(book["loan_id"][earlier], kind="stable")]
    late = np.round(rng.uniform(40, 1_500, len(earlier)), 2)
    written.append(files.write_csv(
        out_dir / "charge_offs_2026q3.csv", ("loan_id", "segment", "gross_charge_off", "recoveries"),
        [np.concatenate([book["loan_id"][now], book["loan_id"][earlier]]),
         np.concatenate([book["segment"][now], book["segment"][earlier]]),
         files.money(np.concatenate([gross[now], np.zeros(len(earlier))])),
         files.money(np.concatenate([recovered, late]))]))

    q3, q2 = tapes["tape_2026q3.csv"], tapes["tape_2026q2.csv"]
    balance_at = TAPE_COLUMNS.index("balance")
    cents = {k: _cents(t[balance_at]) for k, t in tapes.items()}
    written.append(files.write_rolls(out_dir))
    # The assumptions of both quarters are calibrated from the performance history.
    history_path, history_info, simulated = history.write_history(out_dir, seed)
    macro_path = history.write_macro_history(out_dir)
    history_info["macro"] = macro_path.name
    written += [history_path, macro_path]
    for quarter in ("q3", "q2"):
        policy = files.write_policy(out_dir, quarter, cents[f"tape_2026{quarter}.csv"], LENDER)
        written += [policy, *calibrated(out_dir, quarter, history_path, policy, macro_path)]
    # The POCI loans bought before this quarter carry the lifetime ECL the lender recorded at
    # purchase: what the tool measures at the purchase date under the June assumptions.
    at = TAPE_COLUMNS.index("lifetime_ecl_at_purchase")
    measured = purchase_ecls(out_dir / "tape_2026q2.csv", out_dir / "assumptions_2026q2.toml")
    for name in ("tape_2026q2.csv", "tape_2026q3.csv"):
        ids = tapes[name][0]
        tapes[name][at] = np.array([measured.get(i, v) for i, v in zip(ids, tapes[name][at])], dtype=object)
        files.write_csv(out_dir / name, TAPE_COLUMNS, tapes[name])
    # The back-test: the history's accounts a year earlier, calibrated to then, judged since.
    year_tape, year_cents = year_ago.write_year_ago_tape(out_dir, simulated)
    year_policy = year_ago.write_year_ago_policy(out_dir, out_dir / "policy_2026q3.toml", year_cents)
    written += [year_tape, year_policy, *calibrated(out_dir, "2025q3", history_path, year_policy, macro_path)]
    backtest = dict(as_of=year_ago.AS_OF, tape=year_tape.name, assumptions="assumptions_2025q3.toml",
                    policy=year_policy.name, loans=sum(1 for _ in open(year_tape, encoding="utf-8")) - 1,
                    balance=year_cents / 100)
    written.append(files.write_what_if(out_dir))
    written.append(files.write_outlook_what_if(out_dir))
    bad_path, bad = files.write_bad_tape(out_dir, rng, q3, TAPE_COLUMNS)
    messy_paths, messy = files.write_messy(out_dir, rng, q3, TAPE_COLUMNS, LENDER, PD_BY_GRADE)
    written += [bad_path, *messy_paths]

    left_q3 = on_q2 & ~on_q3
    movement = {k: int((left_q3 & (how == k)).sum()) for k in ("prepaid", "matured", "sold", "closed")}
    movement.update(written_off=int(written_off.sum()), earlier_write_off_recoveries=len(earlier),
                    new_loans=int((on_q3 & ~on_q2).sum()), in_both=int((on_q2 & on_q3).sum()))

    def quarter(tape, as_of, assumptions, cols, key):
        return dict(as_of=str(as_of), tape=tape, assumptions=assumptions, loans=len(cols[0]),
                    balance=cents[key] / 100)

    current = quarter("tape_2026q3.csv", AS_OF_Q3, "assumptions_2026q3.toml", q3, "tape_2026q3.csv")
    current.update(charge_offs="charge_offs_2026q3.csv", transition_matrices=["rolls_cards.csv"],
                   policy="policy_2026q3.toml")
    prior = quarter("tape_2026q2.csv", AS_OF_Q2, "assumptions_2026q2.toml", q2, "tape_2026q2.csv")
    prior.update(transition_matrices=["rolls_cards_2026q2.csv"], policy="policy_2026q2.toml")
    bad = dict(tape="bad_tape.csv", assumptions="assumptions_2026q3.toml", **bad)
    messy = dict(tape="messy_extract.csv", assumptions="messy_assumptions.toml", **messy)
    written.append(files.write_manifest(out_dir, seed, LENDER, current, prior, movement, bad, messy, history_info,
                                        backtest))
    return sorted(written)


def purchase_ecls(tape: Path, assumptions: Path) -> dict[str, str]:
    """The lifetime ECL at purchase of the POCI loans on ``tape`` (their loan_id -> amount text).

    The tool measures it at each loan's purchase date (``purchase_ecl_ifrs9`` of a run where
    the purchase ECL is blank: the purchase-date pass of ``allowance.poci``), with the June
    quarter's assumptions: what the lender's model would have recorded on purchase.
    """
    from allowance.engine import run
    from allowance.intake import load_assumptions, read_tape

    config = load_assumptions(assumptions)
    # read as CECL alone: IFRS 9 intake refuses a POCI row bought before the period with no purchase ECL
    run_cecl = config.assumptions.run.model_copy(update={"frameworks": ["cecl"]})
    cecl = config.model_copy(update={"assumptions": config.assumptions.model_copy(update={"run": run_cecl})})
    accepted = read_tape(tape, cecl).accepted
    poci = accepted[accepted["credit_impaired_at_purchase"].astype(bool)].copy()
    poci["lifetime_ecl_at_purchase"] = np.nan  # measured, not given
    loans = run(poci, config).loans
    return {str(i): f"{v:.2f}" for i, v in zip(loans["loan_id"], loans["purchase_ecl_ifrs9"])}


def calibrated(out_dir: Path, quarter: str, history_path: Path, policy: Path, macro: Path) -> list[Path]:
    """A quarter's assumptions, calibrated from the history under its policy, and its roll-rate files.

    What ``allowance calibrate history.parquet --policy policy_2026q3.toml --macro macro_history.csv
    --out DIR`` writes
    as ``DIR/assumptions.toml`` (the second quarter's roll-rate files are renamed
    ``rolls_<segment>_2026q2.csv`` so that both quarters live side by side here).
    """
    from allowance.calibrate import calibrate
    from allowance.report.calibration import matrix_csv, render_assumptions

    suffix = {"q3": "", "q2": "_2026q2", "2025q3": "_2025q3"}[quarter]

    def name(segment: str) -> str:
        return f"rolls_{segment}{suffix}.csv"

    cal = calibrate(history_path, policy=policy, macro=macro)
    target = out_dir / (f"assumptions_{quarter}.toml" if quarter[0] == "2" else f"assumptions_2026{quarter}.toml")
    target.write_bytes(render_assumptions(cal, name).encode("utf-8"))
    paths = [target]
    for segment in cal.assumptions.matrices:
        rolls = cal.results["roll_rates"].segments[segment]
        path = out_dir / name(segment)
        path.write_bytes(matrix_csv(rolls.states, rolls.matrix().probabilities).encode("utf-8"))
        paths.append(path)
    if quarter == "q3":  # the loss-rate what-if takes its rate from the same calibration
        paths.append(files.write_loss_rate_what_if(out_dir, cal))
    return paths


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=f"Write the demo portfolio of {LENDER} (invented).")
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parent,
                        help="folder to write into (default: the folder of this script)")
    parser.add_argument("--seed", type=int, default=SEED)
    args = parser.parse_args(argv)
    for path in generate(args.out, args.seed):
        digest = hashlib.sha256(path.read_bytes()).hexdigest()[:12]
        print(f"{digest}  {path.stat().st_size:>9,d}  {path.name}")


if __name__ == "__main__":
    main()
