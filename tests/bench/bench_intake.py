"""Benchmark: intake of a 1,000,000-row CSV tape against ``pandas.read_csv`` of the same file.

Run:  python tests/bench/bench_intake.py [rows] [bad_share]

Prints the time of ``pandas.read_csv`` alone (default options), the time of
``allowance.intake.read_tape`` (read, parse, validate, split), rows per second, the ratio
(target <= 2.5) and the peak memory of each (a fresh process doing one read; Linux). Both are timed in the same process, alternately, best
of five after a warm-up read, so the file is in the page cache for both.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from allowance.intake import load_assumptions, read_tape

ASSUMPTIONS = """
[run]
as_of = 2026-09-30
frameworks = ["cecl"]
max_input_mb = 4096

[segments.mortgage]
pd_12m = 0.01
lgd = 0.2
[segments.auto]
pd_12m_by_grade = { A = 0.01, B = 0.02, C = 0.05 }
lgd = 0.45
[segments.card]
pd_12m = 0.04
lgd = 0.8
[segments.personal]
pd_12m = 0.03
lgd = 0.7
[segments.cre]
pd_12m = 0.015
lgd = 0.35

[cecl]
reasonable_supportable_months = 24

[scenarios.base]
weight = 1.0
"""


def make_tape(path: Path, rows: int, bad_share: float, seed: int = 20260930) -> None:
    """Write an invented tape of ``rows`` loans (a ``bad_share`` of them with one bad cell)."""
    rng = np.random.default_rng(seed)
    segment = rng.choice(np.array(["mortgage", "auto", "card", "personal", "cre"]), rows)
    repayment = np.where(segment == "card", "revolving", np.where(segment == "cre", "balloon", "level"))
    origination = np.datetime64("2018-01-01") + rng.integers(0, 3000, rows).astype("timedelta64[D]")
    maturity = np.datetime64("2026-11-01") + rng.integers(0, 9000, rows).astype("timedelta64[D]")
    limit = np.where(segment == "card", np.round(rng.uniform(1000, 30000, rows), 2), np.nan)
    balance = np.round(rng.uniform(0, 1, rows) * np.where(segment == "card", limit, 400_000), 2)
    frame = pd.DataFrame({
        "loan_id": np.char.add("BN", np.arange(rows).astype(str)),
        "segment": segment,
        "repayment": repayment,
        "origination_date": pd.Series(origination).dt.strftime("%Y-%m-%d"),
        "maturity_date": pd.Series(maturity).dt.strftime("%Y-%m-%d").where(segment != "card", ""),
        "balance": balance,
        "interest_rate": np.round(rng.uniform(0.02, 0.25, rows), 4),
        "days_past_due": rng.choice([0, 0, 0, 0, 0, 0, 15, 45, 75, 100], rows),
        "credit_limit": limit,
        "grade": rng.choice(np.array(["A", "B", "C"]), rows),
        "pd_12m_at_origination": np.round(rng.uniform(0.001, 0.08, rows), 5),
        "collateral_value": np.round(rng.uniform(0, 600_000, rows), 2),
        "watchlist": rng.choice(np.array(["N", "N", "N", "Y"]), rows),
        "forborne": rng.choice(np.array(["false", "true"]), rows, p=[0.97, 0.03]),
        "bankrupt": rng.choice(np.array(["0", "1"]), rows, p=[0.99, 0.01]),
        "defaulted": rng.choice(np.array(["no", "yes"]), rows, p=[0.98, 0.02]),
        "prior_stage": rng.choice([1, 1, 1, 2, 3], rows),
        "branch": rng.choice(np.array(["north", "south", "east", "west"]), rows),
    })
    if bad_share > 0:
        bad = rng.random(rows) < bad_share
        frame["balance"] = frame["balance"].astype("str").where(~bad, "n/a")
    frame.to_csv(path, index=False)


_PEAK = """
import sys
from pathlib import Path
import pandas as pd
from allowance.intake import load_assumptions, read_tape

def high_water():  # VmHWM: this process's peak resident memory, KiB (Linux)
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            return int(line.split()[1])

base = high_water()
tape, assumptions, which = Path(sys.argv[1]), Path(sys.argv[2]), sys.argv[3]
if which == "pandas":
    pd.read_csv(tape)
else:
    read_tape(tape, load_assumptions(assumptions))
print(base, high_water())
"""


def peak_mib(tape: Path, assumptions: Path, which: str) -> tuple[float, float]:
    """Peak resident memory of a fresh process doing one read: (after imports, peak), MiB."""
    out = subprocess.run([sys.executable, "-c", _PEAK, str(tape), str(assumptions), which],
                         check=True, capture_output=True, text=True).stdout.split()
    return int(out[0]) / 1024, int(out[1]) / 1024


def timed(func) -> float:
    start = time.perf_counter()
    func()
    return time.perf_counter() - start


def main(rows: int = 1_000_000, bad_share: float = 0.0) -> None:
    with tempfile.TemporaryDirectory() as folder:
        tape = Path(folder) / "tape.csv"
        assumptions = Path(folder) / "assumptions.toml"
        assumptions.write_text(ASSUMPTIONS, encoding="utf-8")
        make_tape(tape, rows, bad_share)
        config = load_assumptions(assumptions)
        pd.read_csv(tape)  # warm the page cache
        result = read_tape(tape, config)
        # Alternate the two, best of five each: a busy machine slows both alike.
        pandas_times, intake_times = [], []
        for _ in range(5):
            pandas_times.append(timed(lambda: pd.read_csv(tape)))
            intake_times.append(timed(lambda: read_tape(tape, config)))
        pandas_seconds, intake_seconds = min(pandas_times), min(intake_times)
        size_mb = tape.stat().st_size / 1024 / 1024
        pandas_base, pandas_peak = peak_mib(tape, assumptions, "pandas")
        intake_base, intake_peak = peak_mib(tape, assumptions, "intake")
    ratio = intake_seconds / pandas_seconds
    print(f"tape: {rows:,} rows, {size_mb:,.1f} MiB, bad share {bad_share:g}")
    print(f"rows read / accepted / rejected: {result.rows_read:,} / {result.rows_accepted:,} / {result.rows_rejected:,}")
    print(f"pandas.read_csv alone : {pandas_seconds:6.3f} s  ({rows / pandas_seconds:,.0f} rows/s)")
    print(f"read_tape (validated) : {intake_seconds:6.3f} s  ({rows / intake_seconds:,.0f} rows/s)")
    print(f"ratio read_tape / read_csv: {ratio:.2f}x (target <= 2.5x) -> {'met' if ratio <= 2.5 else 'NOT met'}")
    print(f"peak memory, fresh process, one read: read_csv {pandas_peak:,.0f} MiB, read_tape {intake_peak:,.0f} MiB "
          f"(after imports: {pandas_base:,.0f} / {intake_base:,.0f} MiB)")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000, float(sys.argv[2]) if len(sys.argv) > 2 else 0.0)
