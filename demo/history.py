"""The invented lender's monthly performance history, simulated from known parameters.

Corrandale Mutual Savings Bank (invented) keeps one row per loan per month for a sample of its
accounts: five years, October 2021 to September 2026. ``allowance calibrate`` turns it into
the demo's assumptions. Every figure is invented; the parameters below are what a calibration
should find again (within sampling error), which is the point of simulating rather than
making numbers up.

The simulation, month by month and vectorised over loans:

- **Delinquency** is a monthly Markov chain over payments missed (bucket b = b payments
  behind: 1-29, 30-59, ... days past due). Cards follow :data:`files.ROLLS_PPM` exactly (the
  matrix of ``cards_rolls.csv``). Closed-end loans start missing payments at a monthly rate
  that depends on the grade (auto, personal) or on the loan's age (the seasoning curve
  :func:`seasoning`, for mortgages, CRE and home-equity lines); once behind they cure, stay
  or roll one bucket further by :data:`DELINQUENT_120` or :data:`DELINQUENT_180`.
- **The economy**: a closed-end loan's chance of a first missed payment moves with the region's
  macro history (:data:`MACRO_QUARTERS`, also written as ``macro_history.csv``): a probit shift
  Φ(Φ⁻¹(chance) + Σ_j β_j (x_j(t − L_j) − r_j)) with the books' own :data:`MACRO_SENSITIVITY`,
  so that ``allowance calibrate --macro`` has a macro dependence to find (cards follow their
  matrix exactly and have none).
- **Charge-off** when the next missed payment would reach the segment's charge-off point
  (120 days past due for auto and personal loans, 180 for cards and the secured real-estate
  books); personal loans and cards are also written off on a bankruptcy (a bankruptcy loss).
  The loan leaves the history with balance 0 and its write-off in ``charge_off`` or
  ``bankruptcy_loss``; later rows carry its recoveries and debt-sale proceeds.
- **Repayment**: current loans prepay in full at the segment's SMM (PSA 150 for mortgages),
  term loans pay off at maturity, cards close by the matrix.
- **Balances**: level-pay schedule at the payments actually made (balloon and interest-only
  variants for CRE and home-equity lines); a card's drawn share of its limit mean-reverts.

Implements
----------
SEGMENTS         the known parameters of each book
MACRO_QUARTERS   the region's unemployment rate and price indices by quarter, 2019Q4 to 2026Q3
MACRO_SENSITIVITY each closed-end book's probit shift of the first-missed-payment chance
write_macro_history ``macro_history.csv``
simulate_history the history as columns (numpy arrays)
write_history    ``history.parquet``
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from scipy.stats import norm

try:
    from demo import files
except ImportError:  # run as a script
    import files  # type: ignore[no-redef]

FIRST_MONTH = int(np.datetime64("2021-10", "M").astype(np.int64))
LAST_MONTH = int(np.datetime64("2026-09", "M").astype(np.int64))
#: Seed offset: the history has its own random stream, so the tapes stay as they are.
STREAM = 14

GRADES = ("A", "B", "C", "D", "E")
#: Closed-end loans behind on payments (120-day charge-off): cure, stay, roll by payments missed.
DELINQUENT_120 = ((0.45, 0.25, 0.30), (0.20, 0.20, 0.60), (0.12, 0.13, 0.75), (0.06, 0.08, 0.86))
#: The same for 180-day charge-off (secured real estate): more cure, slower roll.
DELINQUENT_180 = ((0.55, 0.25, 0.20), (0.30, 0.25, 0.45), (0.18, 0.22, 0.60), (0.12, 0.18, 0.70),
                  (0.08, 0.14, 0.78), (0.05, 0.10, 0.85))

# Books: start = loans on the book at 2021-09-30; new = originations a month (Poisson);
# miss = monthly chance a current loan misses a payment (by grade A-E, or times the seasoning
# curve); smm = full prepayment of a current loan a month (psa = PSA multiple instead);
# recovery = (share of charge-offs with a recovery sale, months after from/to, proceeds from/to).
SEGMENTS = {
    "mortgage": dict(prefix="MTG", start=1400, new=20, terms=(360,), term_p=(1.0,), age_span=120, age_power=1.8,
                     miss=0.0035, seasoned=True, psa=150, charge_off=180, rate=(0.03, 0.07),
                     amount=(265_000, 0.45), recovery=(1.0, 6, 15, 0.60, 0.85)),
    "auto": dict(prefix="AUT", start=2400, new=55, terms=(60, 72), term_p=(0.55, 0.45), age_span=None,
                 age_power=1.67, miss=(0.0014, 0.0031, 0.0070, 0.0148, 0.0305), smm=0.0134, charge_off=120,
                 rate=(0.049, 0.112), amount=(31_000, 0.4), recovery=(0.85, 2, 4, 0.40, 0.60)),
    "personal": dict(prefix="PER", start=2000, new=50, terms=(36,), term_p=(1.0,), age_span=None, age_power=2.0,
                     miss=(0.0028, 0.0063, 0.0123, 0.0231, 0.0438), smm=0.0184, charge_off=120,
                     rate=(0.089, 0.182), amount=(11_000, 0.55), bankruptcy=0.0003),
    "cards": dict(prefix="CRD", start=1500, new=30, age_span=160, age_power=1.5, charge_off=180,
                  rate=(0.18, 0.27), limit=(6_000, 0.6)),
    "cre": dict(prefix="CRE", start=320, new=6, terms=(60, 84, 120), term_p=(0.35, 0.4, 0.25), amortization=(300, 360),
                age_span=None, age_power=1.0, miss=0.0110, seasoned=True, smm=0.0043, charge_off=180,
                rate=(0.048, 0.082), amount=(1_150_000, 0.7), recovery=(1.0, 9, 18, 0.55, 0.80)),
    "heloc": dict(prefix="HEL", start=500, new=8, terms=(300,), term_p=(1.0,), interest_only=120, age_span=150,
                  age_power=1.6, miss=0.0050, seasoned=True, smm=0.0087, charge_off=180, rate=(0.06, 0.095),
                  amount=(60_000, 0.6), recovery=(0.5, 6, 15, 0.20, 0.60)),
}
#: Unsecured books: recoveries trickle in (chance a month, share of the write-off from/to)
#: for 24 months; a share of the accounts is sold (month after charge-off, price as a share
#: of what is left).
TRICKLE = {"personal": (0.25, 0.003, 0.010, 0.40, 6, 0.07), "cards": (0.20, 0.003, 0.010, 0.50, 12, 0.05)}
GRADE_MIX = (0.24, 0.30, 0.25, 0.13, 0.08)

#: The region's macro history by calendar quarter, 2019Q4 to 2026Q3 (invented): unemployment in
#: percent, price indices at 100 in 2026Q3. The last five quarters are the scenarios' history.
MACRO_FIRST_QUARTER = "2019Q4"
MACRO_QUARTERS = {
    "unemployment_rate": [3.9, 4.0, 6.8, 7.9, 7.2, 6.6, 6.0, 5.5, 5.0, 4.6, 4.2, 3.9, 3.8, 3.7, 3.7, 3.8, 4.0,
                          4.2, 4.5, 4.8, 4.9, 4.8, 4.7, 4.5, 4.4, 4.3, 4.2, 4.1],
    "house_price_index": [78.0, 78.6, 78.2, 79.5, 81.5, 83.6, 86.0, 88.2, 90.0, 91.6, 92.4, 91.8, 90.8, 90.0,
                          89.6, 90.2, 91.0, 92.0, 93.0, 93.9, 94.8, 95.4, 96.1, 96.8, 97.6, 98.4, 99.2, 100.0],
    "commercial_property_index": [108.0, 107.5, 101.0, 99.5, 100.0, 101.5, 103.0, 104.5, 105.5, 106.5, 107.0,
                                  106.8, 106.0, 105.0, 104.2, 103.6, 103.0, 102.8, 102.6, 102.4, 102.2, 102.2,
                                  102.1, 102.0, 101.5, 101.0, 100.5, 100.0],
}
#: Probit shift of the monthly chance of a first missed payment per unit of each variable away
#: from its reference level, with the lag in months (the charge-off follows months later).
MACRO_SENSITIVITY = {
    "mortgage": {"unemployment_rate": (0.45, 2), "house_price_index": (-0.02, 0)},
    "auto": {"unemployment_rate": (0.55, 0)},
    "personal": {"unemployment_rate": (0.55, 0)},
    "cre": {"unemployment_rate": (0.12, 2), "commercial_property_index": (-0.030, 0)},
    "heloc": {"unemployment_rate": (0.20, 2), "house_price_index": (-0.010, 0)},
}
MACRO_REFERENCE = {"unemployment_rate": 4.5, "house_price_index": 90.0, "commercial_property_index": 104.0}


def macro_monthly(variable: str) -> np.ndarray:
    """The variable by month from the first month of :data:`MACRO_FIRST_QUARTER` (each month takes its quarter's value)."""
    return np.repeat(np.asarray(MACRO_QUARTERS[variable], float), 3)


def macro_shift(name: str, month: int) -> float:
    """The probit shift of a book's first-missed-payment chance in a month (0 for a book without one)."""
    first = int(np.datetime64("2019-10", "M").astype(np.int64))
    shift = 0.0
    for variable, (beta, lag) in MACRO_SENSITIVITY.get(name, {}).items():
        shift += beta * (macro_monthly(variable)[month - lag - first] - MACRO_REFERENCE[variable])
    return shift


def write_macro_history(out_dir: Path) -> Path:
    """``macro_history.csv``: one row per quarter, one column per variable."""
    start = int(MACRO_FIRST_QUARTER[:4]) * 4 + int(MACRO_FIRST_QUARTER[-1]) - 1
    n = len(MACRO_QUARTERS["unemployment_rate"])
    lines = ["quarter," + ",".join(MACRO_QUARTERS)]
    for k in range(n):
        q = start + k
        lines.append(f"{q // 4}Q{q % 4 + 1}," + ",".join(f"{MACRO_QUARTERS[v][k]:.1f}" for v in MACRO_QUARTERS))
    path = Path(out_dir) / "macro_history.csv"
    path.write_bytes(("\n".join(lines) + "\n").encode("utf-8"))
    return path


def seasoning(age_months: np.ndarray) -> np.ndarray:
    """Relative chance of a first missed payment by loan age: rises to 1.65 at 42 months, then fades to 0.35.

    Examples
    --------
    >>> seasoning(np.array([0, 42, 150, 300])).round(2).tolist()
    [0.35, 1.65, 0.7, 0.37]
    """
    x = np.asarray(age_months, float) / 42.0
    return 0.35 + 1.3 * x * np.exp(1.0 - x)


def _smm(spec: dict, age: np.ndarray) -> np.ndarray:
    if "psa" in spec:
        cpr = np.minimum(1.0, spec["psa"] / 100 * 0.06 * np.minimum(np.maximum(age, 0), 30) / 30)
        return 1.0 - (1.0 - cpr) ** (1.0 / 12.0)
    return np.full(len(age), spec.get("smm", 0.0))


def _level_balance(amount, monthly_rate, n, paid):
    growth = (1.0 + monthly_rate) ** paid
    payment = amount * monthly_rate / (1.0 - (1.0 + monthly_rate) ** -np.maximum(n, 1))
    return np.maximum(amount * growth - payment * (growth - 1.0) / monthly_rate, 0.0)


def _book(rng, name: str, spec: dict) -> dict:
    """Every loan of one book: on the book at the start, or originated during the five years."""
    months = LAST_MONTH - FIRST_MONTH + 1
    new = rng.poisson(spec["new"], months)
    n_start, n = spec["start"], spec["start"] + int(new.sum())
    span = spec["age_span"]
    terms = np.asarray(spec.get("terms", (0,)))
    term = rng.choice(terms, size=n, p=spec.get("term_p", (1.0,)))
    cap = term[:n_start] - 1 if span is None else span
    age0 = np.floor(rng.random(n_start) ** spec["age_power"] * cap).astype(np.int64)
    orig = np.concatenate([FIRST_MONTH - 1 - age0, np.repeat(FIRST_MONTH + np.arange(months), new)])
    order = np.argsort(orig, kind="stable")
    orig, term = orig[order], term[order]
    book = dict(orig=orig, term=term, segment=np.full(n, name, dtype=object))
    low, high = spec["rate"]
    book["rate"] = np.round(rng.uniform(low, high, n), 4)
    if name == "cards":
        mu, sigma = spec["limit"]
        book["limit"] = np.clip(np.round(rng.lognormal(np.log(mu), sigma, n), -2), 1_000, 25_000)
        book["util"] = rng.beta(1.6, 2.2, n)
        book["target"] = book["util"].copy()
        book["amount"] = np.full(n, np.nan)
    else:
        mu, sigma = spec["amount"]
        book["amount"] = np.round(rng.lognormal(np.log(mu), sigma, n), -2)
        book["limit"] = np.full(n, np.nan)
    book["grade"] = rng.choice(5, size=n, p=GRADE_MIX) if isinstance(spec.get("miss"), tuple) else np.full(n, -1)
    book["amort"] = rng.choice(np.asarray(spec.get("amortization", (0,))), size=n)
    book["lag"] = rng.integers(2, 30, n)  # days from the due date to the month end
    serial = 1_000_000 + np.cumsum(rng.integers(1, 4, n))
    book["loan_id"] = np.array([f"{spec['prefix']}-{s:07d}" for s in serial], dtype=object)
    return book


def _scheduled(book: dict, spec: dict, age: np.ndarray, missed: np.ndarray) -> np.ndarray:
    r = book["rate"] / 12
    paid = np.clip(age - missed, 0, book["term"])
    if "amortization" in spec:
        return _level_balance(book["amount"], r, book["amort"], paid)
    if "interest_only" in spec:
        io = spec["interest_only"]
        return np.where(paid <= io, book["amount"],
                        _level_balance(book["amount"], r, book["term"] - io, np.maximum(paid - io, 0)))
    return _level_balance(book["amount"], r, book["term"], paid)


def _dpd(missed: np.ndarray, lag: np.ndarray) -> np.ndarray:
    return np.where(missed > 0, 30 * (missed - 1) + lag, 0)


def _card_matrix() -> np.ndarray:
    return files.roll_matrix()


def _simulate_book(rng, name: str, spec: dict) -> dict[str, np.ndarray]:
    """One book's rows: (loan, month, balance, dpd, write-offs, cash, payoff)."""
    book = _book(rng, name, spec)
    n = len(book["orig"])
    cards = name == "cards"
    point = spec["charge_off"] // 30  # payments missed at the charge-off point (4 at 120: the 5th write off)
    missed = np.zeros(n, np.int64)
    left = np.zeros(n, bool)
    balance = np.zeros(n)
    rows: list[dict[str, np.ndarray]] = []
    cash_rows: list[dict[str, np.ndarray]] = []
    roll = _card_matrix() if cards else None
    delinquent = np.array(DELINQUENT_120 if spec["charge_off"] == 120 else DELINQUENT_180)
    for month in range(FIRST_MONTH, LAST_MONTH + 1):
        on = ~left & (book["orig"] < month)
        age = month - book["orig"]
        idx = np.flatnonzero(on)
        if not idx.size:
            continue
        u = rng.random(idx.size)
        m = missed[idx]
        written = np.zeros(idx.size, bool)
        bankrupt = np.zeros(idx.size, bool)
        paid_off = np.zeros(idx.size, bool)
        if cards:
            cum = np.cumsum(roll[m], axis=1)
            nxt = (u[:, None] > cum).sum(axis=1)
            written = nxt == 7
            bankrupt = written & (m < 6)
            paid_off = nxt == 8
            m_new = np.where(written | paid_off, m, np.minimum(nxt, 6))
        else:
            miss = spec["miss"]
            chance = (np.asarray(miss)[book["grade"][idx]] if isinstance(miss, tuple)
                      else miss * seasoning(age[idx] - 1))
            shift = macro_shift(name, month)
            if shift:  # the economy moves the chance of a first missed payment (probit shift)
                chance = norm.cdf(norm.ppf(chance) + shift)
            behind = m > 0
            row = delinquent[np.maximum(m - 1, 0)]
            cure = behind & (u < row[:, 0])
            stay = behind & (u >= row[:, 0]) & (u < row[:, 0] + row[:, 1])
            m_new = np.where(behind, np.where(cure, 0, np.where(stay, m, m + 1)), (u < chance).astype(np.int64))
            written = m_new > point
            if "bankruptcy" in spec:
                bankrupt = ~written & (rng.random(idx.size) < spec["bankruptcy"])
                written |= bankrupt
            current = ~behind & (m_new == 0)
            matured = current & (age[idx] >= book["term"][idx])
            paid_off = ~written & (matured | (current & (rng.random(idx.size) < _smm(spec, age[idx]))))
        # balances at the month end
        if cards:
            util = book["util"][idx]
            util = np.clip(util + 0.3 * (book["target"][idx] - util) + rng.normal(0, 0.06, idx.size), 0.0, 0.98)
            book["util"][idx] = util
            grown = balance[idx] * (1 + book["rate"][idx] / 12) + 25.0
            bal = np.where(m_new > 0, np.maximum(grown, util * book["limit"][idx]), util * book["limit"][idx])
        else:
            bal = _scheduled({k: v[idx] for k, v in book.items()}, spec, age[idx], m_new)
        bal = np.round(bal, 2)
        exposure = np.where(written, np.round(np.where(cards, balance[idx] * (1 + book["rate"][idx] / 12), bal), 2), 0.0)
        dpd = _dpd(np.where(written & ~bankrupt, np.maximum(m_new, point + 1), m_new), book["lag"][idx])
        rows.append(dict(
            loan=idx, month=np.full(idx.size, month), balance=np.where(written | paid_off, 0.0, bal), dpd=dpd,
            charge_off=np.where(written & ~bankrupt, exposure, 0.0), bankruptcy_loss=np.where(bankrupt, exposure, 0.0),
            paid_off=paid_off,
        ))
        missed[idx] = np.where(written | paid_off, m, m_new)
        balance[idx] = bal
        left[idx[written | paid_off]] = True
        gone = idx[written]
        if gone.size:
            cash_rows.append(_recoveries(rng, name, spec, gone, exposure[written], month, dpd[written]))
    out = {k: np.concatenate([r[k] for r in rows]) for k in rows[0]}
    cash = {k: np.concatenate([c[k] for c in cash_rows]) for k in cash_rows[0]} if cash_rows else None
    return _assemble(book, out, cash, name)


def _recoveries(rng, name: str, spec: dict, loans: np.ndarray, amount: np.ndarray, month: int,
                dpd: np.ndarray) -> dict[str, np.ndarray]:
    """Recovery and debt-sale rows after each write-off (within the five years)."""
    parts = []
    if name in TRICKLE:
        chance, low, high, sold_share, sold_at, price = TRICKLE[name]
        sold = rng.random(len(loans)) < sold_share
        left = amount.copy()
        for k in range(1, 25):
            if month + k > LAST_MONTH:
                break
            gets = (rng.random(len(loans)) < chance) & ~(sold & (k > sold_at))
            paid = np.round(np.where(gets, amount * rng.uniform(low, high, len(loans)), 0.0), 2)
            sale = np.round(np.where(sold & (k == sold_at), np.maximum(left - paid, 0) * price, 0.0), 2)
            left = left - paid
            hit = (paid > 0) | (sale > 0)
            if hit.any():
                parts.append(dict(loan=loans[hit], month=np.full(hit.sum(), month + k), recoveries=paid[hit],
                                  asset_sales=sale[hit], dpd=dpd[hit]))
    else:
        share, first, last, low, high = spec["recovery"]
        gets = rng.random(len(loans)) < share
        k = rng.integers(first, last + 1, len(loans))
        paid = np.round(amount * rng.uniform(low, high, len(loans)), 2)
        hit = gets & (month + k <= LAST_MONTH) & (paid > 0)
        if hit.any():
            parts.append(dict(loan=loans[hit], month=month + k[hit], recoveries=paid[hit],
                              asset_sales=np.zeros(hit.sum()), dpd=dpd[hit]))
    if not parts:
        return dict(loan=np.zeros(0, np.int64), month=np.zeros(0, np.int64), recoveries=np.zeros(0),
                    asset_sales=np.zeros(0), dpd=np.zeros(0, np.int64))
    return {key: np.concatenate([p[key] for p in parts]) for key in parts[0]}


def _assemble(book: dict, rows: dict, cash: dict | None, name: str) -> dict[str, np.ndarray]:
    if cash is not None and len(cash["loan"]):
        # a loan can receive cash in a month it already has a row (never: it has left) -> separate rows
        zeros = np.zeros(len(cash["loan"]))
        rows = {k: np.concatenate([rows[k], v]) for k, v in {
            "loan": cash["loan"], "month": cash["month"], "balance": zeros, "dpd": cash["dpd"],
            "charge_off": zeros, "bankruptcy_loss": zeros, "paid_off": np.zeros(len(zeros), bool)}.items()}
        rows["recoveries"] = np.concatenate([np.zeros(len(rows["loan"]) - len(zeros)), cash["recoveries"]])
        rows["asset_sales"] = np.concatenate([np.zeros(len(rows["loan"]) - len(zeros)), cash["asset_sales"]])
    else:
        rows["recoveries"] = np.zeros(len(rows["loan"]))
        rows["asset_sales"] = np.zeros(len(rows["loan"]))
    # a recovery in the same month as another recovery of the same loan: add them up
    key = rows["loan"] * 10_000 + (rows["month"] - FIRST_MONTH)
    order = np.lexsort((-rows["balance"], key))
    rows = {k: v[order] for k, v in rows.items()}
    key = key[order]
    first = np.r_[True, key[1:] != key[:-1]]
    if not first.all():
        group = np.cumsum(first) - 1
        for money in ("recoveries", "asset_sales"):
            rows[money] = np.bincount(group, weights=rows[money])
        rows = {k: (v[first] if k not in ("recoveries", "asset_sales") else v) for k, v in rows.items()}
    loan = rows["loan"]
    out = dict(
        loan_id=book["loan_id"][loan], segment=book["segment"][loan], month=rows["month"],
        balance=rows["balance"], days_past_due=rows["dpd"].astype(np.int64),
        grade=np.where(book["grade"][loan] >= 0, np.array(GRADES, dtype=object)[np.maximum(book["grade"][loan], 0)],
                       None),
        origination_month=book["orig"][loan], original_balance=book["amount"][loan],
        credit_limit=book["limit"][loan], interest_rate=book["rate"][loan],
        charge_off=rows["charge_off"], bankruptcy_loss=rows["bankruptcy_loss"], recoveries=np.round(rows["recoveries"], 2),
        asset_sales=np.round(rows["asset_sales"], 2), paid_off=rows["paid_off"], day=book["lag"][loan],
        term=book["term"][loan], amort=book["amort"][loan],  # for the back-test's tape (not in the file)
    )
    return out


def simulate_history(seed: int) -> dict[str, np.ndarray]:
    """Every row of the history, sorted by loan and month (columns as arrays)."""
    rng = np.random.default_rng([seed, STREAM])
    parts = [_simulate_book(rng, name, spec) for name, spec in SEGMENTS.items()]
    return {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}


def write_history(out_dir: Path, seed: int) -> tuple[Path, dict, dict[str, np.ndarray]]:
    """Write ``history.parquet``; return its path, the counts for the manifest and the rows simulated."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    h = simulate_history(seed)
    month_end = (h["month"] + 1).astype("datetime64[M]").astype("datetime64[D]") - 1
    day = np.minimum(28, 30 - h["day"] + 1)
    origination = h["origination_month"].astype("datetime64[M]").astype("datetime64[D]") + (day - 1)

    def money(values):
        return pa.array(np.where(values > 0, values, np.nan), pa.float64(), from_pandas=True)

    table = pa.table({
        "loan_id": pa.array(h["loan_id"].astype(str)),
        "segment": pa.array(h["segment"].astype(str)).dictionary_encode(),
        "month": pa.array(month_end, pa.date32()),
        "balance": pa.array(h["balance"]),
        "days_past_due": pa.array(h["days_past_due"], pa.int32()),
        "grade": pa.array(list(h["grade"]), pa.string()).dictionary_encode(),
        "origination_date": pa.array(origination, pa.date32()),
        "original_balance": pa.array(h["original_balance"], pa.float64(), from_pandas=True),
        "credit_limit": pa.array(h["credit_limit"], pa.float64(), from_pandas=True),
        "interest_rate": pa.array(h["interest_rate"]),
        "charge_off": money(h["charge_off"]),
        "bankruptcy_loss": money(h["bankruptcy_loss"]),
        "recoveries": money(h["recoveries"]),
        "asset_sales": money(h["asset_sales"]),
        "paid_off": pa.array(h["paid_off"]),
    })
    path = Path(out_dir) / "history.parquet"
    pq.write_table(table, path, compression="zstd", compression_level=9, row_group_size=250_000,
                   use_dictionary=True, write_statistics=False)
    info = dict(file="history.parquet", first_month="2021-10", last_month="2026-09", rows=table.num_rows,
                loans=len(np.unique(h["loan_id"])), segments=list(SEGMENTS))
    return path, info, h
