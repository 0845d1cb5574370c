"""Invent the year after the demo quarter, for the back-test (fixed seed; every figure invented).

After ``allowance demo --out demo-out`` (or ``allowance run`` on the demo quarter), this writes
a monthly performance history of the twelve months after 2026-09-30 for the run's loans:

    python demo/next_year.py demo-out/loans.csv demo-out-next-year.csv
    allowance backtest demo-out demo-out-next-year.csv --out demo-backtest

Each loan defaults within the year with its own 12-month PD from the run (``pd_12m``) times the
segment's factor below; a loss-rate loan (no PD) with the probability that its expected
12-month loss implies at an 80 % severity. A defaulting loan is 90 days past due in a month
drawn uniformly over the year and is charged off three months later (when that falls in the
year) at its LGD (80 % where the run has none); loans in default at the as-of date are charged
off in the first three months. The commercial real-estate segment's defaults run at twice its
PDs, so the back-test has something to find. Loans that do not default stay current at their
balance. The history follows the performance-history contract (DESIGN.md).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20270930
AS_OF = "2026-09-30"
#: defaults run at this multiple of the run's PDs (1 for every segment not named)
FACTOR = {"cre": 2.0}
SEVERITY = 0.8


def next_year(loans: pd.DataFrame, seed: int = SEED) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = len(loans)
    balance = loans["balance"].to_numpy(float)
    pd_12m = loans["pd_12m"].to_numpy(float)
    implied = np.divide(loans["ecl_12m"].to_numpy(float), balance * SEVERITY, out=np.zeros(n), where=balance > 0)
    p = np.where(np.isnan(pd_12m), implied, pd_12m)
    factor = loans["segment"].map(FACTOR).fillna(1.0).to_numpy()
    in_default = p >= 1.0
    defaults = in_default | (rng.random(n) < np.minimum(1.0, p * factor))
    month = np.where(in_default, -3, rng.integers(0, 12, n))
    lgd = np.nan_to_num(loans["lgd"].to_numpy(float), nan=SEVERITY)
    ends = pd.period_range(pd.Timestamp(AS_OF).to_period("M") + 1, periods=12, freq="M").to_timestamp(how="end")
    frames = []
    for t, end in enumerate(ends.normalize()):
        written = defaults & (t == month + 3)
        alive = ~defaults | (t <= month + 3)
        dpd = np.where(defaults & (t >= month), 90 + 30 * (t - month), 0)
        frames.append(pd.DataFrame({
            "loan_id": loans["loan_id"].to_numpy()[alive], "segment": loans["segment"].to_numpy()[alive],
            "month": end.strftime("%Y-%m"), "balance": np.where(written, 0.0, balance)[alive].round(2),
            "days_past_due": dpd[alive], "charge_off": np.where(written, balance * lgd, 0.0)[alive].round(2),
            "bankruptcy_loss": 0.0, "recoveries": 0.0, "asset_sales": 0.0, "paid_off": "false",
        }))
    return pd.concat(frames, ignore_index=True)


def main(argv: list[str] | None = None) -> None:
    args = sys.argv[1:] if argv is None else argv
    if len(args) != 2:
        raise SystemExit("usage: python demo/next_year.py RUN_DIR/loans.csv HISTORY.csv")
    loans = pd.read_csv(args[0], dtype={"loan_id": str, "segment": str})
    history = next_year(loans)
    history.to_csv(Path(args[1]), index=False)
    print(f"wrote {args[1]}: {len(history):,} loan-months of {history['loan_id'].nunique():,} loans")


if __name__ == "__main__":
    main()
