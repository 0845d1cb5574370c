"""The demo's back-test inputs: the history's accounts a year before the quarter-end, as a tape.

``allowance demo`` back-tests a run made a year ago against what the history shows since:
the accounts of ``history.parquet`` on the book at 2025-09-30 (the tape ``tape_2025q3.csv``,
with the terms the history was simulated with), the assumptions a calibration to September
2025 writes (``policy_2025q3.toml``: the September 2026 policy with the earlier date, and no
overlays), then ``allowance backtest`` over the twelve months to 2026-09-30. Every figure is
invented.

Implements
----------
AS_OF              the back-tested run's as-of date
write_year_ago_tape    ``tape_2025q3.csv`` from the simulated history
write_year_ago_policy  ``policy_2025q3.toml`` from the September 2026 policy
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

try:
    from demo import files, history
except ImportError:  # run as a script
    import files  # type: ignore[no-redef]
    import history  # type: ignore[no-redef]

AS_OF = "2025-09-30"
MONTH = int(np.datetime64("2025-09", "M").astype(np.int64))
COLUMNS = ("loan_id", "segment", "repayment", "origination_date", "maturity_date", "balance", "interest_rate",
           "days_past_due", "credit_limit", "grade", "amortization_months", "interest_only_months",
           "original_amount")
#: Repayment type of each book of the history (demo/history.py simulates these schedules).
REPAYMENT = {"mortgage": "level", "auto": "level", "personal": "level", "cards": "revolving", "cre": "balloon",
             "heloc": "interest_only"}
INTEREST_ONLY_MONTHS = 120


def _date(months: np.ndarray, day: np.ndarray) -> np.ndarray:
    return (np.asarray(months, np.int64).astype("datetime64[M]").astype("datetime64[D]")
            + (np.asarray(day, np.int64) - 1)).astype(str).astype(object)


def write_year_ago_tape(out_dir: Path, h: dict[str, np.ndarray]) -> tuple[Path, int]:
    """The history's accounts on the book at the end of September 2025; returns the path and the balance in cents."""
    on = ((h["month"] == MONTH) & (h["balance"] > 0) & (h["charge_off"] == 0) & (h["bankruptcy_loss"] == 0)
          & ~h["paid_off"])
    idx = np.flatnonzero(on)
    idx = idx[np.argsort(h["loan_id"][idx], kind="stable")]
    seg = h["segment"][idx].astype(str)
    day = np.minimum(28, 30 - h["day"][idx] + 1)
    revolving = seg == "cards"
    origination = h["origination_month"][idx]
    maturity = np.where(revolving, "", _date(origination + h["term"][idx], day)).astype(object)
    grade = np.array(["" if g is None else g for g in h["grade"][idx]], dtype=object)
    balance = np.round(h["balance"][idx], 2)
    cols = [
        h["loan_id"][idx].astype(object), seg.astype(object), np.array([REPAYMENT[s] for s in seg], dtype=object),
        _date(origination, day), maturity, files.money(balance), files.rate(h["interest_rate"][idx]),
        h["days_past_due"][idx].astype(str).astype(object), files.money(h["credit_limit"][idx]), grade,
        files.whole(h["amort"][idx], seg == "cre"), files.whole(np.full(len(idx), INTEREST_ONLY_MONTHS), seg == "heloc"),
        files.money(np.where(revolving, np.nan, h["original_balance"][idx])),
    ]
    path = files.write_csv(Path(out_dir) / "tape_2025q3.csv", COLUMNS, cols)
    cents = int(sum(int(round(float(b) * 100)) for b in balance))
    return path, cents


def write_year_ago_policy(out_dir: Path, policy_2026q3: Path, ledger_cents: int) -> Path:
    """The September 2026 policy moved to 2025-09-30: its dates and ledger balance, no overlays."""
    text = Path(policy_2026q3).read_text(encoding="utf-8")
    text = text.split("\n[[overlays]]", 1)[0].rstrip("\n") + "\n"
    text = text.replace("2026-09-30", AS_OF)
    # the paths start at the run's own quarter (a price level is measured from the as-of month):
    # each path gains the 2025Q3 value of the macro history in front
    first = history.MACRO_FIRST_QUARTER
    k = (2025 * 4 + 2) - (int(first[:4]) * 4 + int(first[-1]) - 1)
    text = text.replace('start = "2025Q4"', 'start = "2025Q3"')
    for variable, values in history.MACRO_QUARTERS.items():
        text = re.sub(rf"^{variable} = \[", f"{variable} = [{values[k]}, ", text, flags=re.M)
    text = re.sub(r"^ledger_balance = .*$", f"ledger_balance = {ledger_cents / 100:.2f}", text, count=1, flags=re.M)
    head = ("# The back-test's policy (written by demo/generate.py from policy_2026q3.toml): the same tables\n"
            f"# a year earlier, at {AS_OF} (the macro paths from 2025Q3), for the accounts of the history on\n"
            "# the book then (tape_2025q3.csv), without overlays: the back-test judges the model.\n")
    path = Path(out_dir) / "policy_2025q3.toml"
    path.write_bytes((head + text).encode("utf-8"))
    return path
