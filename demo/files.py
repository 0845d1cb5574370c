"""The demo's small hand-shaped files and the plain writers ``generate.py`` uses.

Implements
----------
write_csv            text columns to CSV (quoting only where needed; optional BOM / CRLF)
write_rolls          ``cards_rolls.csv``: the card segment's monthly roll-rate matrix
write_policy         ``policy_2026q3.toml`` / ``policy_2026q2.toml``: what history cannot estimate
write_what_if        ``downside_only.toml``: 100 % downside
write_outlook_what_if ``worse_unemployment.toml``: a worse unemployment outlook
write_bad_tape       ``bad_tape.csv``: good rows and one row per fault
write_messy          ``messy_extract.csv`` + ``messy_assumptions.toml``
write_manifest       ``manifest.toml``: the one list of the bundled sample data

Every name and figure is invented.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

ROLL_STATES = ("current", "dpd_1_29", "dpd_30_59", "dpd_60_89", "dpd_90_119",
               "dpd_120_149", "dpd_150_179", "charge_off", "paid_off")
#: Monthly roll rates of the card book in millionths; the paid_off column is the remainder,
#: so each row sums to exactly 1 as written.
ROLLS_PPM = (
    # cur     1-29    30-59   60-89   90-119  120-149 150-179 c-off
    (955000, 30000, 0, 0, 0, 0, 0, 0),
    (420000, 260000, 300000, 0, 0, 0, 0, 4000),
    (180000, 110000, 170000, 520000, 0, 0, 0, 6000),
    (70000, 40000, 60000, 120000, 700000, 0, 0, 8000),
    (30000, 20000, 20000, 40000, 70000, 810000, 0, 6000),
    (20000, 10000, 10000, 20000, 30000, 50000, 852000, 5000),
    (12000, 5000, 5000, 10000, 10000, 20000, 30000, 905000),
    (0, 0, 0, 0, 0, 0, 0, 1000000),
    (0, 0, 0, 0, 0, 0, 0, 0),
)

MESSY_HEADERS = {  # our column -> the extract's header, as the loan system prints it
    "loan_id": "Acct No", "segment": "Product", "repayment": "Repay Type",
    "origination_date": "Open Date", "maturity_date": "Maturity Dt", "balance": "Curr Bal ",
    "interest_rate": "Int Rate", "days_past_due": "Days Delinquent", "credit_limit": "Credit Line",
    "grade": "Risk Grade", "pd_12m_at_origination": "PD at Orig", "collateral_value": "Collateral Val",
    "watchlist": "WATCH LIST", "bankrupt": "Bankrupt Y/N",
}
MESSY_EXTRA = ("Loan Officer", "Branch Name")
OFFICERS = np.array(["T. Brannoch", "L. Okafor-Reyes", "M. Vellacott", "S. Iyengar-Holt", "P. Duvessa"])


# --------------------------------------------------------------------------------------
# writers
# --------------------------------------------------------------------------------------


def money(x):
    """Cents as text; blank for NaN."""
    return np.array(["" if np.isnan(v) else f"{v:.2f}" for v in np.asarray(x, float)], dtype=object)


def rate(x):
    """At most 6 decimals as text, trailing zeros dropped; blank for NaN."""
    return np.array(["" if np.isnan(v) else f"{v:.6f}".rstrip("0").rstrip(".")
                     for v in np.asarray(x, float)], dtype=object)


def whole(x, keep):
    """Integers as text where ``keep``, else blank."""
    return np.where(keep, np.asarray(x, np.int64).astype(str), "").astype(object)


def boolean(x):
    return np.where(np.asarray(x, bool), "true", "false").astype(object)


def _cell(value) -> str:
    text = str(value)
    return '"' + text.replace('"', '""') + '"' if any(c in text for c in ',"\n\r') else text


def write_csv(path: Path, header, columns, *, newline: str = "\n", bom: bool = False) -> Path:
    """Write text columns as CSV; quote cells that need it (RFC 4180)."""
    lines = [",".join(_cell(h) for h in header)]
    lines += [",".join(_cell(v) for v in row) for row in zip(*columns)]
    text = newline.join(lines) + newline
    path.write_bytes((b"\xef\xbb\xbf" if bom else b"") + text.encode("utf-8"))
    return path


def toml_value(value) -> str:
    """A Python value as a TOML value (strings, bools, ints, floats, lists)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    text = str(value).replace("\\", "\\\\").replace('"', '\\"')
    return f'"{text}"'


def _write_text(path: Path, text: str) -> Path:
    path.write_bytes(text.encode("utf-8"))
    return path


# --------------------------------------------------------------------------------------
# roll-rate matrix
# --------------------------------------------------------------------------------------


def roll_matrix() -> np.ndarray:
    """The card roll-rate matrix as floats (rows sum to 1)."""
    ppm = np.array([row + (1_000_000 - sum(row),) for row in ROLLS_PPM], dtype=np.int64)
    return ppm / 1_000_000


def write_rolls(out_dir: Path) -> Path:
    rows = []
    for state, row in zip(ROLL_STATES, ROLLS_PPM):
        cells = list(row) + [1_000_000 - sum(row)]
        rows.append([state] + [f"{c / 1_000_000:.6f}".rstrip("0").rstrip(".") for c in cells])
    return write_csv(out_dir / "cards_rolls.csv", ("from",) + ROLL_STATES, list(zip(*rows)))


# --------------------------------------------------------------------------------------
# assumptions
# --------------------------------------------------------------------------------------

QUARTERS = {
    "q3": dict(as_of="2026-09-30", weights=(0.6, 0.15, 0.25), downside=[1.6, 1.4, 1.2],
               cre_overlay=0.10),
    "q2": dict(as_of="2026-06-30", weights=(0.6, 0.2, 0.2), downside=[1.5, 1.3, 1.15],
               cre_overlay=0.08),
}


def segments_toml(pd_by_grade, names=("mortgage", "auto", "personal", "cards", "cre", "heloc")) -> str:
    auto, personal = ({g: float(p) for g, p in zip("ABCDE", pd_by_grade[s])} for s in ("auto", "personal"))
    tables = {
        "mortgage": """
[segments.mortgage]
# Residential first-lien mortgages, 30-year level pay. Cumulative PD by year from the as-of date.
pd_curve = [0.006, 0.013, 0.02, 0.026, 0.031, 0.035, 0.039, 0.042, 0.045, 0.048]
lgd = 0.2                          # used where a loan has no collateral value
psa = 150
retail_class = "residential_mortgage"

[segments.mortgage.collateral_lgd]
haircut = 0.2                      # forced-sale discount on the appraised value
recovery_cost = 0.08
floor = 0.05
months_to_recovery = 18
""",
        "auto": f"""
[segments.auto]
# New and used vehicle loans, 5-6-year level pay.
pd_12m_by_grade = {{ {", ".join(f"{g} = {p!r}" for g, p in auto.items())} }}
lgd = 0.45
cpr = 0.15
retail_class = "other_retail"
""",
        "personal": f"""
[segments.personal]
# Unsecured personal loans, 3-year level pay.
pd_12m_by_grade = {{ {", ".join(f"{g} = {p!r}" for g, p in personal.items())} }}
lgd = 0.8
cpr = 0.2
retail_class = "other_retail"
""",
        "cards": """
[segments.cards]
# Credit cards (open-end revolving): monthly roll rates between delinquency buckets.
transition_matrix = "cards_rolls.csv"
charge_off_dpd = 180
lgd = 0.87
ccf = 0.45                         # IFRS 9: share of the undrawn limit drawn by default
behavioural_life_months = 36
payment_rate = 0.06                # CECL: monthly share of the drawn balance repaid
unconditionally_cancellable = true
retail_class = "qualifying_revolving"
""",
        "cre": """
[segments.cre]
# Commercial real estate: 5-10-year balloon loans on 25-30-year amortization.
pd_12m = 0.02
lgd = 0.35
cpr = 0.05
asset_correlation = 0.2            # not a retail class: set explicitly

[segments.cre.collateral_lgd]
haircut = 0.25
recovery_cost = 0.1
floor = 0.1
months_to_recovery = 24
""",
        "heloc": """
[segments.heloc]
# Home-equity lines: a 10-year draw period (interest only), then 15 years level pay.
pd_12m = 0.007
lgd = 0.4
cpr = 0.1
ccf = 0.5
unconditionally_cancellable = false
retail_class = "residential_mortgage"
""",
    }
    return "".join(tables[n] + SATELLITES[n] for n in names)


# --------------------------------------------------------------------------------------
# scenarios as macro paths: the regional outlook and each segment's satellite model
# --------------------------------------------------------------------------------------

#: Each segment's satellite model (stated coefficients: probit shifts of the monthly PD per
#: point of unemployment and per index point of property prices, with their lags).
SATELLITES = {
    "mortgage": """
[segments.mortgage.satellite]
link = "probit"
coefficients = { unemployment_rate = 0.08, house_price_index = -0.006 }
lag_months = { unemployment_rate = 6, house_price_index = 3 }
source = "stated for the demo: Corrandale model inventory SAT-MTG-02"

[segments.mortgage.satellite.collateral]
variable = "house_price_index"     # collateral values follow the regional house-price index
form = "level"
relative_to = "as_of"              # the scenario's own price change since the as-of date
""",
    "auto": """
[segments.auto.satellite]
link = "probit"
coefficients = { unemployment_rate = 0.06 }
lag_months = { unemployment_rate = 3 }
source = "stated for the demo: Corrandale model inventory SAT-AUT-01"
""",
    "personal": """
[segments.personal.satellite]
link = "probit"
coefficients = { unemployment_rate = 0.07 }
lag_months = { unemployment_rate = 3 }
source = "stated for the demo: Corrandale model inventory SAT-PER-01"
""",
    "cards": """
[segments.cards.satellite]
link = "logit"
coefficients = { unemployment_rate = 0.09 }
lag_months = { unemployment_rate = 3 }
source = "stated for the demo: Corrandale model inventory SAT-CRD-03"
""",
    "cre": """
[segments.cre.satellite]
link = "probit"
coefficients = { unemployment_rate = 0.03, commercial_property_index = -0.012 }
lag_months = { unemployment_rate = 6, commercial_property_index = 3 }
source = "stated for the demo: Corrandale model inventory SAT-CRE-01"

[segments.cre.satellite.collateral]
variable = "commercial_property_index"
form = "level"
relative_to = "as_of"
""",
    "heloc": """
[segments.heloc.satellite]
link = "probit"
coefficients = { unemployment_rate = 0.07, house_price_index = -0.005 }
lag_months = { unemployment_rate = 6, house_price_index = 3 }
source = "stated for the demo: Corrandale model inventory SAT-HEL-01"
""",
}

#: The satellite models a calibration fits (``allowance calibrate --macro macro_history.csv``):
#: the link, every variable with its lag, and the collateral link; the coefficients are estimated.
#: The thin books keep stated coefficients (the calibration shows its estimate beside them):
#: mortgages, CRE and home-equity lines see a few charge-offs a year (too few to estimate a
#: slope), and the card history follows its roll-rate matrix exactly, with no macro dependence.
FITTED_SATELLITES = ("auto", "personal")
POLICY_SATELLITES = {
    name: "\n".join(line for line in text.split("\n")
                    if not (name in FITTED_SATELLITES and line.startswith(("coefficients", "source"))))
    for name, text in SATELLITES.items()
}
for _name, _why in (("cards", "the card history has no macro dependence to fit"),
                    ("mortgage", "too few charge-offs in the history to estimate"),
                    ("cre", "too few charge-offs in the history to estimate"),
                    ("heloc", "too few charge-offs in the history to estimate")):
    POLICY_SATELLITES[_name] = re.sub(r'source = "stated for the demo: ([^"]*)"', rf'source = "stated: \1 ({_why})"',
                                      POLICY_SATELLITES[_name])

#: The regional outlook by quarter: four quarters of history up to the as-of quarter, then
#: twelve forecast quarters. Unemployment in percent; price indices 2026Q3 = 100.
OUTLOOK = {
    "unemployment_rate": {
        "history": [4.5, 4.4, 4.3, 4.2, 4.1],
        "base": [4.1] * 12,
        "upside": [4.0, 3.9, 3.8, 3.7, 3.7, 3.7, 3.8, 3.8, 3.9, 3.9, 4.0, 4.0],
        "downside": [4.6, 5.4, 6.2, 6.8, 7.0, 6.9, 6.6, 6.2, 5.8, 5.4, 5.0, 4.7],
    },
    "house_price_index": {
        "history": [96.8, 97.6, 98.4, 99.2, 100.0],
        "base": [round(100.0 + 0.8 * q, 1) for q in range(1, 13)],
        "upside": [101.2, 102.3, 103.0, 103.6, 104.4, 105.2, 106.0, 106.8, 107.6, 108.4, 109.2, 110.0],
        "downside": [98.5, 96.0, 93.0, 90.5, 88.5, 87.2, 87.0, 87.4, 88.0, 88.8, 89.6, 90.5],
    },
    "commercial_property_index": {
        "history": [102.0, 101.5, 101.0, 100.5, 100.0],
        "base": [100.0, 100.2, 100.4, 100.6, 100.8, 101.0, 101.2, 101.4, 101.6, 101.8, 102.0, 102.2],
        "upside": [100.5, 101.2, 101.9, 102.5, 103.0, 103.5, 104.0, 104.4, 104.8, 105.2, 105.6, 106.0],
        "downside": [97.0, 93.0, 89.0, 86.0, 84.0, 83.0, 83.5, 84.5, 86.0, 87.5, 89.0, 90.0],
    },
}
#: The first quarter of the paths for each quarter-end (four quarters of history before it).
MACRO_START = {"q3": "2025Q4", "q2": "2025Q3"}


def _path(variable: str, scenario: str, quarter: str) -> list[float]:
    """History up to the as-of quarter, then the forecast (the prior quarter's history is one quarter earlier)."""
    table = OUTLOOK[variable]
    history = table["history"][1:] if quarter == "q3" else table["history"][:-1]
    forecast = table[scenario] if quarter == "q3" else [table["history"][-1], *table[scenario][:-1]]
    return history + forecast


def macro_toml(quarter: str) -> str:
    rows = "\n".join(f"{v} = {toml_value(_path(v, 'base', quarter))}" for v in OUTLOOK)
    return f"""
# Scenarios are stated as macro paths: the regional outlook by calendar quarter, from
# {MACRO_START[quarter]} (four quarters of history, then twelve of forecast). The baseline is the
# consensus path the long-run PDs were set at: every satellite model gives the long-run PD on it.
[macro]
start = "{MACRO_START[quarter]}"
interpolation = "step"             # each month takes its quarter's value
source = "Corrandale regional outlook (invented for the demo)"

[macro.baseline]
{rows}
"""


def _scenario_macro(name: str, quarter: str) -> str:
    rows = "\n".join(f"{v} = {toml_value(_path(v, name, quarter))}" for v in OUTLOOK)
    return f"\n[scenarios.{name}.macro]\n{rows}\n"


def rules_and_scenarios_toml(quarter: str) -> str:
    q = QUARTERS[quarter]
    base, up, down = q["weights"]
    return """
[ifrs9]
sicr_backstop_dpd = 30             # stage 2 beyond 30 days past due (IFRS 9 5.5.11)
default_dpd = 90                   # stage 3 at 90 days past due (IFRS 9 B5.5.37)
sicr_pd_ratio = 2.0                # the loan's own PD now / its PD at origination (pd_12m_current)
sicr_pd_measure = "12_month"       # 12-month PDs compared (IFRS 9 B5.5.13), not lifetime (5.5.9)
sicr_min_pd_increase = 0.001
watchlist_is_sicr = true
forborne_is_sicr = true
probation_months_stage3 = 6
probation_months_stage2 = 3
probation_pd_12m = 0.12            # loans cured from default: 12-month re-default rate, credit policy CP-14

[cecl]
reasonable_supportable_months = 24
reversion_months = 12
reversion = "straight_line"
discount = false
payment_allocation = "measured_balance_first" # every card payment retires the balance measured today first

""" + macro_toml(quarter) + f"""
[scenarios.base]
weight = {base!r}
description = "Growth near trend; unemployment in the region steady at 4.1 %, house prices up 3 % a year."
""" + _scenario_macro("base", quarter) + f"""
[scenarios.upside]
weight = {up!r}
description = "Faster growth; unemployment to 3.7 %, house prices up 3.6 % in the first year."
""" + _scenario_macro("upside", quarter) + f"""
[scenarios.downside]
weight = {down!r}
lgd_multiplier = [1.15, 1.1, 1.05]
description = "Regional recession; unemployment to 7 %, house prices down 13 % by year two."
""" + _scenario_macro("downside", quarter)


def overlays_toml(quarter: str) -> str:
    q = QUARTERS[quarter]
    text = f"""
[[overlays]]
name = "cre-office-vacancy"
segment = "cre"
kind = "percent"
value = {q["cre_overlay"]!r}
rationale = "Office vacancy in the Corrandale business district is rising faster than the scenarios capture."
owner = "Credit Risk Committee"
approved = {"2026-09-18" if quarter == "q3" else "2026-06-19"}
expires = 2027-03-31
"""
    if quarter == "q3":
        text += """
[[overlays]]
name = "auto-hail-storm"
segment = "auto"
kind = "amount"
value = 250000.0
rationale = "The August 2026 hail storm in the northern counties damaged many vehicles; losses are not yet in delinquency."
owner = "Chief Credit Officer"
approved = 2026-09-25
expires = 2026-12-31
"""
    else:
        text += """
[[overlays]]
name = "personal-payment-holiday"
segment = "personal"
kind = "amount"
value = 150000.0
rationale = "Borrowers leaving the spring 2026 payment-holiday programme may not resume payments."
owner = "Chief Credit Officer"
approved = 2026-06-19
expires = 2026-09-30
"""
    return text


POLICY_SEGMENTS = {  # per segment: the keys that are judgement, not history
    "mortgage": """
[segments.mortgage]
retail_class = "residential_mortgage"

[segments.mortgage.collateral_lgd]
haircut = 0.2                      # forced-sale discount on the appraised value
recovery_cost = 0.08
floor = 0.05
months_to_recovery = 18

[segments.mortgage.collateral_dependent]
costs_to_sell = 0.08               # agents, legal and transfer costs, share of the fair value
appraisal_discount = 0.2           # the tape's values are indexed appraisals; a repossessed home's fair value is lower
defaulted_secured = true           # credit policy CP-14: foreclosure is probable once a mortgage is in default
""",
    "auto": """
[segments.auto]
retail_class = "other_retail"
""",
    "personal": """
[segments.personal]
retail_class = "other_retail"
""",
    "cards": """
[segments.cards]
retail_class = "qualifying_revolving"
""",
    "cre": """
[segments.cre]
asset_correlation = 0.2            # not a retail class: set explicitly

[segments.cre.collateral_lgd]
haircut = 0.25
recovery_cost = 0.1
floor = 0.1
months_to_recovery = 24

[segments.cre.collateral_dependent]
costs_to_sell = 0.08
appraisal_discount = 0.1           # appraisals of defaulted properties are up to a year old
defaulted_secured = true           # repayment of a defaulted CRE loan depends on the property

[segments.cre.refinance_risk]
# a balloon still outstanding at maturity that cannot be refinanced, by loan-to-value at maturity
# (balance due / appraised value): Corrandale's CRE maturity study CRE-MAT-03 (invented)
ltv_bands = [0.5, 0.65, 0.8]
pd = [0.01, 0.03, 0.08, 0.2]
""",
    "heloc": """
[segments.heloc]
retail_class = "residential_mortgage"
ccf = 0.5                          # share of the undrawn line drawn by default in the draw period (credit policy CP-21)
unconditionally_cancellable = false # the line can be frozen only on the conditions of the agreement
""",
}


def write_policy(out_dir: Path, quarter: str, ledger_cents: int, lender: str) -> Path:
    """The policy file of a quarter: the tables a calibration cannot estimate from history."""
    q = QUARTERS[quarter]
    head = f"""# {lender} (an invented lender): the calibration policy for the quarter-end at {q["as_of"]}.
# `allowance calibrate history.parquet --policy policy_2026{quarter}.toml --macro macro_history.csv`
# estimates every segment's PD, LGD, prepayment and revolving behaviour from the history, and the
# satellite models' coefficients from the history and the macro history; it takes the rest from here: the run,
# the staging rules, the scenarios, the overlays, and the keys below that are judgement, not
# history (collateral haircuts, Basel classes). Every figure is invented. Written by demo/generate.py.

[run]
as_of = {q["as_of"]}
frameworks = ["ifrs9", "cecl"]
currency = "USD"
label = "{lender} - quarter-end {q["as_of"]}"
ledger_balance = {ledger_cents // 100}.{ledger_cents % 100:02d}

[calibration]
as_of = {q["as_of"]}                # history after this month is not used
window_months = 24
# the secured real-estate books are written down at 180 days past due, after the valuation
charge_off_dpd = {{ mortgage = 180, cre = 180, heloc = 180 }}
pd_source = {{ cre = "pd_12m" }}     # a small book: one pooled PD rather than a thin curve by age
"""
    segments = "".join(POLICY_SEGMENTS[name] + POLICY_SATELLITES[name] for name in POLICY_SEGMENTS)
    text = head + segments + rules_and_scenarios_toml(quarter) + overlays_toml(quarter)
    return _write_text(out_dir / f"policy_2026{quarter}.toml", text)


def write_outlook_what_if(out_dir: Path) -> Path:
    """``worse_unemployment.toml``: the outlook changed; the what-if an analyst runs in one command."""
    base = _path("unemployment_rate", "base", "q3")[:4] + [4.2, 4.4, 4.6, 4.8, 4.9, 5.0, 5.0, 4.9, 4.8, 4.7, 4.6, 4.5]
    down = _path("unemployment_rate", "downside", "q3")[:4] + [4.9, 6.0, 7.1, 8.0, 8.5, 8.4, 8.0, 7.4, 6.8, 6.2, 5.6, 5.1]
    text = f"""# What if the outlook for regional unemployment worsens? The October outlook moves the
# consensus up half a point and deepens the recession path to 8.5 %. Apply with --overlay:
# tables merge key by key, so only these two unemployment paths change; house prices, the
# weights and every other assumption stay the base file's.

[scenarios.base.macro]
unemployment_rate = {toml_value(base)}

[scenarios.downside.macro]
unemployment_rate = {toml_value(down)}
"""
    return _write_text(out_dir / "worse_unemployment.toml", text)


def write_what_if(out_dir: Path) -> Path:
    text = """# What if the downside comes true? Apply with --overlay: tables merge key by key, so only
# the scenario weights change and every other assumption is the base file's.

[scenarios.base]
weight = 0.0

[scenarios.upside]
weight = 0.0

[scenarios.downside]
weight = 1.0
"""
    return _write_text(out_dir / "downside_only.toml", text)


def write_loss_rate_what_if(out_dir: Path, calibration) -> Path:
    """The personal loans on the remaining-life (WARM) method, at the rate calibrated from the history."""
    from allowance.calibrate.loss_methods import method_table

    table = method_table(calibration.results, calibration.frame).set_index("segment")
    rate = float(f"{max(0.0, table.loc['personal', 'annual_loss_rate']):.4g}")
    lgd = calibration.assumptions.data["segments"]["personal"]["lgd"]
    start, end = calibration.frame.window
    text = f"""# What-if for Corrandale Mutual Savings Bank (invented): the personal-loan segment measured
# with the remaining-life (WARM) loss-rate method instead of its PDs by grade.
#
#   allowance run demo/tape_2026q3.csv -a demo/assumptions_2026q3.toml \\
#       --overlay demo/personal_on_loss_rates.toml --out lr-out
#
# what_if.csv then sets the segment's allowance under each method side by side. The rate is
# the one `allowance calibrate history.parquet --policy policy_2026q3.toml` estimates for the
# segment (loss_rate_methods.csv: 12 x net credit loss / month-opening balance, {start} to {end});
# with [calibration] loss_rate_method = {{ personal = "annual_loss_rate" }} it writes it into the
# assumptions itself. Written by demo/generate.py.

[segments.personal]
annual_loss_rate = {rate!r}          # annualised net credit loss rate (replaces pd_12m_by_grade)
lgd = {lgd!r}                      # loans already in default: LGD x EAD, as in the PD method
"""
    return _write_text(out_dir / "personal_on_loss_rates.toml", text)


# --------------------------------------------------------------------------------------
# the bad tape and the messy extract
# --------------------------------------------------------------------------------------


def _pick(rng, cols, columns, segment, count):
    seg = cols[columns.index("segment")]
    bal = cols[columns.index("balance")]
    dpd = cols[columns.index("days_past_due")]
    pool = np.flatnonzero((seg == segment) & (dpd == "0") & (bal != "0.00"))
    return list(rng.choice(pool, size=count, replace=False))


def write_bad_tape(out_dir: Path, rng, cols, columns) -> tuple[Path, dict]:
    """Twelve good rows and one row per fault; returns the counts and faults for the manifest."""
    idx = {c: i for i, c in enumerate(columns)}
    good = (_pick(rng, cols, columns, "mortgage", 3) + _pick(rng, cols, columns, "auto", 3)
            + _pick(rng, cols, columns, "personal", 2) + _pick(rng, cols, columns, "cards", 3)
            + _pick(rng, cols, columns, "cre", 1))
    rows = [[str(c[i]) for c in cols] for i in good]
    spare = {s: _pick(rng, cols, columns, s, 3) for s in ("auto", "personal", "cards", "mortgage")}
    faults = [  # (segment of the source row, column, new value, what is wrong)
        ("auto", "loan_id", rows[1][idx["loan_id"]], "duplicate loan_id (both copies are rejected)"),
        ("personal", "origination_date", "2021-02-30", "unparseable date (there is no 30 February)"),
        ("mortgage", "balance", "-1250.00", "negative balance"),
        ("auto", "interest_rate", "6.5", "interest rate given in percent (6.5 for 0.065)"),
        ("personal", "segment", "boat", "segment with no assumptions"),
        ("mortgage", "repayment", "monthly", "repayment not one of level, interest_only, balloon, revolving, heloc"),
        ("cards", "days_past_due", "12.5", "fractional days past due"),
        ("cards", "credit_limit", "", "revolving line without a credit limit"),
        ("auto", "origination_date", "2026-11-15", "originated after the as-of date"),
    ]
    used = {s: 0 for s in spare}
    bad_rows = []
    for segment, column, value, what in faults:
        row = [str(c[spare[segment][used[segment]]]) for c in cols]
        used[segment] += 1
        row[idx[column]] = value
        bad_rows.append((row, column, what))
    # Interleave: a bad row after each good row from the second on.
    lines, listed = [], []
    for k, row in enumerate(rows):
        lines.append(row)
        if 1 <= k <= len(bad_rows):
            row, column, what = bad_rows[k - 1]
            lines.append(row)
            listed.append(dict(line=len(lines) + 1, loan_id=row[idx["loan_id"]], column=column, fault=what))
    for row, column, what in bad_rows[len(rows) - 1:]:
        lines.append(row)
        listed.append(dict(line=len(lines) + 1, loan_id=row[idx["loan_id"]], column=column, fault=what))
    dup_id = faults[0][2]
    first = next(n for n, r in enumerate(lines, start=2) if r[idx["loan_id"]] == dup_id)
    listed.append(dict(line=first, loan_id=dup_id, column="loan_id",
                       fault="duplicate loan_id (the first copy; also rejected)"))
    listed.sort(key=lambda f: f["line"])
    path = write_csv(out_dir / "bad_tape.csv", columns, list(zip(*lines)))
    return path, dict(rows=len(lines), rejected=len(listed), faults=listed)


def _day_first(iso: str) -> str:
    return "" if not iso else f"{iso[8:10]}/{iso[5:7]}/{iso[0:4]}"


def write_messy(out_dir: Path, rng, cols, columns, lender, pd_by_grade) -> tuple[list[Path], dict]:
    """A loan-system extract as it comes: odd headers, day-first dates, Y/N flags, a BOM, CRLF."""
    idx = {c: i for i, c in enumerate(columns)}
    seg = cols[idx["segment"]]
    chosen = np.concatenate([rng.choice(np.flatnonzero(seg == s), size=k, replace=False)
                             for s, k in (("mortgage", 50), ("auto", 55), ("personal", 44), ("cards", 50))])
    chosen = chosen[rng.permutation(len(chosen))]
    n = len(chosen)
    ids = np.array([f"{v:08d}" for v in 310_000 + np.cumsum(rng.integers(1, 40, n))], dtype=object)
    get = {c: np.asarray(cols[idx[c]])[chosen].astype(object) for c in MESSY_HEADERS if c != "loan_id"}
    get["loan_id"] = ids
    for c in ("origination_date", "maturity_date"):
        get[c] = np.array([_day_first(v) for v in get[c]], dtype=object)
    for c in ("watchlist", "bankrupt"):
        get[c] = np.where(get[c] == "true", "Y", "N").astype(object)
    officer = OFFICERS[rng.integers(0, len(OFFICERS), n)]
    branch = np.asarray(cols[idx["branch"]])[chosen]
    # The faults.
    auto_rows = np.flatnonzero(get["segment"] == "auto")
    percent_rows = auto_rows[:1].tolist() + np.flatnonzero(get["segment"] == "mortgage")[:1].tolist()
    for r in percent_rows:
        get["interest_rate"][r] = f"{float(get['interest_rate'][r]) * 100:.2f}".rstrip("0").rstrip(".")
    formula_row = int(np.flatnonzero(get["segment"] == "personal")[0])
    get["loan_id"][formula_row] = '=HYPERLINK("x")'
    matured_row = int(auto_rows[1])
    get["origination_date"][matured_row], get["maturity_date"][matured_row] = "14/05/2020", "14/05/2026"
    get["balance"][matured_row], get["days_past_due"][matured_row] = "812.40", "139"
    order = [c for c in MESSY_HEADERS]
    columns_out = [get[c] for c in order] + [officer, branch]
    rows = [list(r) for r in zip(*columns_out)]
    dup_at = int(n // 2)
    rows.insert(dup_at + 1, list(rows[dup_at]))
    header = [MESSY_HEADERS[c] for c in order] + list(MESSY_EXTRA)
    tape = write_csv(out_dir / "messy_extract.csv", header, list(zip(*rows)), newline="\r\n", bom=True)
    # The control total the loan system prints under the extract: every row, as printed.
    cents = sum(int(round(float(r[order.index("balance")]) * 100)) for r in rows)
    mapping = "\n".join(f"{ours} = {toml_value(theirs.strip().lower())}" for ours, theirs in MESSY_HEADERS.items())
    text = f"""# {lender} (an invented lender): a raw loan-system extract, read as it comes.
# Headers are matched ignoring case and surrounding spaces; dates are day-first throughout.
# The ledger balance is the extract's control total (every row as printed), so the tie-out
# difference is the balance of the rejected rows. Written by demo/generate.py; all invented.

[run]
as_of = 2026-09-30
frameworks = ["ifrs9", "cecl"]
currency = "USD"
label = "{lender} - raw extract check 2026-09-30"
ledger_balance = {cents // 100}.{cents % 100:02d}

[tape.columns]
{mapping}
""" + segments_toml(pd_by_grade, ("mortgage", "auto", "personal", "cards")) + rules_and_scenarios_toml("q3")
    assumptions = _write_text(out_dir / "messy_assumptions.toml", text)

    def line(r: int) -> int:  # file line of extract row r: the header is line 1, the copy shifts
        return r + 2 + (1 if r > dup_at else 0)

    faults = [dict(line=line(r), loan_id=str(get["loan_id"][r]), column="interest_rate",
                   fault="interest rate in percent") for r in percent_rows]
    faults += [dict(line=dup_at + 2, loan_id=str(rows[dup_at][0]), column="loan_id", fault="duplicate loan_id"),
               dict(line=dup_at + 3, loan_id=str(rows[dup_at][0]), column="loan_id", fault="duplicate loan_id")]
    info = dict(rows=len(rows), rejected=len(faults), formula_id=str(get["loan_id"][formula_row]),
                formula_line=line(formula_row), matured_loan=str(get["loan_id"][matured_row]),
                matured_line=line(matured_row), faults=sorted(faults, key=lambda f: f["line"]),
                ledger_cents=cents)
    return [tape, assumptions], info


# --------------------------------------------------------------------------------------
# the manifest
# --------------------------------------------------------------------------------------

DESCRIPTIONS = {
    "tape_2026q3.csv": ("tape", "The loan tape at 2026-09-30: about 10,000 loans in six segments."),
    "tape_2026q2.csv": ("tape", "The same book a quarter earlier, at 2026-06-30."),
    "charge_offs_2026q3.csv": ("charge_offs", "Write-offs and recoveries booked in the third quarter of 2026."),
    "history.parquet": ("history", "Five years of monthly performance of a sample of accounts, 2021-10 to 2026-09."),
    "policy_2026q3.toml": ("policy", "What the 2026-09-30 calibration cannot estimate: run, rules, scenarios, overlays."),
    "policy_2026q2.toml": ("policy", "The same for 2026-06-30 (other scenario weights and overlays)."),
    "assumptions_2026q3.toml": ("assumptions", "Assumptions for the 2026-09-30 run, calibrated from the history."),
    "assumptions_2026q2.toml": ("assumptions", "Assumptions for the 2026-06-30 run, calibrated from the history to June."),
    "rolls_cards.csv": ("transition_matrix", "The card book's roll rates, calibrated to 2026-09-30."),
    "rolls_cards_2026q2.csv": ("transition_matrix", "The card book's roll rates, calibrated to 2026-06-30."),
    "cards_rolls.csv": ("transition_matrix", "The roll rates the card history was simulated from (the raw extract's run uses them)."),
    "downside_only.toml": ("overlay", "What-if: 100 % weight on the downside scenario."),
    "worse_unemployment.toml": ("overlay", "What-if: a worse unemployment outlook (base and downside paths)."),
    "tape_2025q3.csv": ("tape", "The back-test's tape: the history's accounts on the book at 2025-09-30."),
    "policy_2025q3.toml": ("policy", "The back-test's policy: the September 2026 policy a year earlier, no overlays."),
    "assumptions_2025q3.toml": ("assumptions", "The back-test's assumptions, calibrated from the history to 2025-09."),
    "rolls_cards_2025q3.csv": ("transition_matrix", "The card roll rates calibrated to 2025-09 (back-test)."),
    "macro_history.csv": ("macro_history", "The region's unemployment and price indices by quarter, 2019Q4 to 2026Q3."),
    "personal_on_loss_rates.toml": ("overlay", "What-if: personal loans on the WARM method at the calibrated loss rate."),
    "bad_tape.csv": ("tape", "A small tape with one deliberately bad row per fault, among good rows."),
    "messy_extract.csv": ("tape", "A raw loan-system extract: odd headers, day-first dates, a BOM, faults."),
    "messy_assumptions.toml": ("assumptions", "Assumptions for the raw extract, with its column mapping."),
}


def _table(name: str, values: dict) -> str:
    body = "".join(f"{k} = {toml_value(v) if not k.startswith('as_of') else v}\n" for k, v in values.items())
    return f"\n[{name}]\n{body}"


def _array(name: str, items: list[dict]) -> str:
    return "".join(f"\n[[{name}]]\n" + "".join(f"{k} = {toml_value(v)}\n" for k, v in item.items())
                   for item in items)


def write_manifest(out_dir: Path, seed: int, lender: str, current: dict, prior: dict, movement: dict,
                   bad: dict, messy: dict, history: dict, backtest: dict) -> Path:
    text = f"""# The bundled demo data: the one list that the tests, the docs and `allowance demo` read.
# Written by demo/generate.py (python demo/generate.py). Every name and figure is invented.

lender = {toml_value(lender)}
seed = {seed}
generator = "generate.py"
invented = true
"""
    text += _table("current", current) + _table("prior", prior) + _table("movement", movement)
    text += _table("history", history) + _table("backtest", backtest)
    text += _table("what_if", {"overlay": "downside_only.toml", "outlook": "worse_unemployment.toml",
                               "applies_to": "current"})
    text += _table("bad", {k: v for k, v in bad.items() if k != "faults"}) + _array("bad.faults", bad["faults"])
    text += _table("messy", {k: v for k, v in messy.items() if k not in ("faults", "ledger_cents")})
    text += _array("messy.faults", messy["faults"])
    text += _array("files", [dict(name=k, role=r, description=d) for k, (r, d) in DESCRIPTIONS.items()])
    return _write_text(out_dir / "manifest.toml", text)
