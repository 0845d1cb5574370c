"""Benchmark: ``calibrate`` on a 10-million-row performance history, time and peak memory.

Run:  python tests/bench/bench_calibrate.py [rows] [--csv] [--memory-rows N]

Writes an invented history of ``rows`` loan-months (default 10,000,000: 250,000 accounts over
40 months in three segments, following a monthly roll-rate matrix with write-offs, payoffs and
recoveries) as Parquet (and CSV with ``--csv``), then, each in a fresh process:

- the baseline: read the whole file into memory with pyarrow (``pyarrow.parquet.read_table``
  or ``pyarrow.csv.read_csv``), the least any reader must do;
- ``allowance.calibrate.calibrate`` on it, writing nothing;

and prints the time, rows per second, the peak resident memory of each process (Linux
``ru_maxrss``) and the ratios calibrate / baseline. The history is spilled to disk in
partitions above ``--memory-rows`` rows (default: the library's 3,000,000), so calibrate's
peak stays well below the baseline's, which holds the whole table.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROLLS = np.array([  # monthly roll rates (invented): current, 1-29, 30-59, 60-89, 90-119, charge-off, paid-off
    [0.960, 0.022, 0.000, 0.000, 0.000, 0.002, 0.016],
    [0.420, 0.260, 0.300, 0.000, 0.000, 0.004, 0.016],
    [0.180, 0.110, 0.170, 0.530, 0.000, 0.000, 0.010],
    [0.080, 0.040, 0.060, 0.120, 0.700, 0.000, 0.000],
    [0.040, 0.010, 0.020, 0.040, 0.080, 0.810, 0.000],
])


def make_history(path: Path, rows: int, seed: int = 20260930, csv: Path | None = None) -> int:
    """Write an invented history of about ``rows`` loan-months; return the rows written."""
    import pyarrow as pa
    import pyarrow.csv as pacsv
    import pyarrow.parquet as pq

    rng = np.random.default_rng(seed)
    months = 40
    accounts = rows // months + rows // (months * 2)  # leavers shorten histories; start a few more
    first = np.datetime64("2022-01", "M")
    segment_of = rng.choice(np.array(["auto", "personal", "cards"]), accounts, p=[0.4, 0.3, 0.3])
    grade = rng.choice(np.array(list("ABCDE")), accounts)
    limit = np.where(segment_of == "cards", np.round(rng.lognormal(np.log(6000), 0.5, accounts), -2), np.nan)
    original = np.round(rng.lognormal(np.log(20000), 0.5, accounts), -2)
    age0 = rng.integers(0, 60, accounts)
    ids = np.char.add("L", np.char.zfill(np.arange(accounts).astype(str), 9))
    state = np.zeros(accounts, np.int64)
    balance = np.where(segment_of == "cards", 0.4 * limit, original)
    active = np.arange(accounts)
    cum = np.cumsum(ROLLS, axis=1)
    schema = pa.schema([
        ("loan_id", pa.string()), ("segment", pa.dictionary(pa.int8(), pa.string())), ("month", pa.date32()),
        ("balance", pa.float64()), ("days_past_due", pa.int32()), ("grade", pa.dictionary(pa.int8(), pa.string())),
        ("origination_date", pa.date32()), ("original_balance", pa.float64()), ("credit_limit", pa.float64()),
        ("interest_rate", pa.float64()), ("charge_off", pa.float64()), ("recoveries", pa.float64()),
        ("paid_off", pa.bool_()),
    ])
    written = 0
    owed = np.zeros(accounts)
    charged_at = np.full(accounts, -1)
    with pq.ParquetWriter(path, schema, compression="zstd") as writer:
        csv_writer = pacsv.CSVWriter(csv, schema) if csv is not None else None
        for m in range(months):
            if written >= rows:
                break
            u = rng.random(len(active))
            nxt = np.minimum((u[:, None] > cum[state[active]]).sum(axis=1), 6)
            state[active] = nxt
            written_off, repaid = nxt == 5, nxt == 6
            owed[active[written_off]] = balance[active[written_off]]
            charged_at[active[written_off]] = m
            balance[active] = np.where(written_off | repaid, 0.0, balance[active] * 0.985)
            # recoveries on earlier write-offs: 5 % of what was owed, 3 months later
            recovering = np.flatnonzero(charged_at == m - 3)
            idx = np.concatenate([active, recovering])
            n = len(idx)
            st = state[idx]
            dpd = np.where(st == 0, 0, np.where(st < 5, 30 * (st - 1) + 15, 125))
            month_end = ((first + m + 1).astype("datetime64[D]") - 1)
            cash = np.r_[np.zeros(len(active)), 0.05 * owed[recovering]]
            charge = np.r_[np.where(written_off, owed[active], 0.0), np.zeros(len(recovering))]
            table = pa.table({
                "loan_id": pa.array(ids[idx]), "segment": pa.array(segment_of[idx]).dictionary_encode(),
                "month": pa.array(np.full(n, month_end), pa.date32()), "balance": pa.array(balance[idx]),
                "days_past_due": pa.array(dpd, pa.int32()), "grade": pa.array(grade[idx]).dictionary_encode(),
                "origination_date": pa.array(((first - age0[idx]).astype("datetime64[D]")), pa.date32()),
                "original_balance": pa.array(original[idx]), "credit_limit": pa.array(limit[idx], from_pandas=True),
                "interest_rate": pa.array(np.full(n, 0.12)),
                "charge_off": pa.array(np.where(charge > 0, charge, np.nan), from_pandas=True),
                "recoveries": pa.array(np.where(cash > 0, cash, np.nan), from_pandas=True),
                "paid_off": pa.array(np.r_[repaid, np.zeros(len(recovering), bool)]),
            }).cast(schema)
            writer.write_table(table, row_group_size=1 << 20)
            if csv_writer is not None:
                csv_writer.write_table(table)
            written += n
            active = active[nxt < 5]
        if csv_writer is not None:
            csv_writer.close()
    return written


_CHILD = r"""
import json, resource, sys, time
from pathlib import Path
kind, path, memory_rows = sys.argv[1], Path(sys.argv[2]), int(sys.argv[3])
started = time.perf_counter()
if kind == "baseline":
    import pyarrow.parquet as pq, pyarrow.csv as pacsv
    table = pq.read_table(path) if path.suffix == ".parquet" else pacsv.read_csv(path)
    rows = table.num_rows
else:
    from allowance.calibrate import estimate
    found = estimate(path, {"charge_off_dpd": {"auto": 120, "personal": 120, "cards": 180}},
                     memory_rows=memory_rows or None)
    rows = found.intake.rows_read
    assert rows == found.intake.rows_accepted + found.intake.rows_rejected
seconds = time.perf_counter() - started
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
print(json.dumps({"rows": rows, "seconds": seconds, "peak_mb": peak}))
"""


def measure(kind: str, path: Path, memory_rows: int = 0) -> dict:
    out = subprocess.run([sys.executable, "-c", _CHILD, kind, str(path), str(memory_rows)],
                         capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("rows", nargs="?", type=int, default=10_000_000)
    parser.add_argument("--csv", action="store_true", help="also time the same history as CSV")
    parser.add_argument("--memory-rows", type=int, default=0, help="spill above this many rows (0: default)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        parquet = Path(folder) / "history.parquet"
        csv = Path(folder) / "history.csv" if args.csv else None
        started = time.perf_counter()
        rows = make_history(parquet, args.rows, csv=csv)
        print(f"history: {rows:,} rows written in {time.perf_counter() - started:.1f} s "
              f"(Parquet {parquet.stat().st_size / 1e6:,.0f} MB"
              + (f", CSV {csv.stat().st_size / 1e6:,.0f} MB" if csv else "") + ")")
        for path in [parquet] + ([csv] if csv else []):
            base = measure("baseline", path)
            cal = measure("calibrate", path, args.memory_rows)
            print(f"\n{path.suffix[1:].upper()}")
            print(f"  read whole file (pyarrow)   {base['seconds']:8.1f} s  peak {base['peak_mb']:8,.0f} MB")
            print(f"  allowance calibrate         {cal['seconds']:8.1f} s  peak {cal['peak_mb']:8,.0f} MB  "
                  f"({cal['rows'] / cal['seconds']:,.0f} rows/s)")
            print(f"  ratio calibrate / read      {cal['seconds'] / base['seconds']:8.2f} x time   "
                  f"{cal['peak_mb'] / base['peak_mb']:6.2f} x peak memory")


if __name__ == "__main__":
    main()
