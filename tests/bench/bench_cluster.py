"""Benchmark: the engine in one process against a local Dask cluster of worker processes.

Run from the repository root (not collected by pytest; needs the ``dask`` extra)::

    python tests/bench/bench_cluster.py                        # 1,000,000 loans, 1 and 2 workers
    python tests/bench/bench_cluster.py --loans 200000 --quick # quicker
    python tests/bench/bench_cluster.py --loans 10000000 --workers 2 --chunk-size 250000

    python tests/bench/bench_cluster.py --book 1000000 2000000 --workers 2   # a partitioned book
    python tests/bench/bench_cluster.py --book 10000000 --workers 2           # (10M: ~5 min on both cores)

The book is ``bench_engine``'s mixed book (mortgages, auto loans, cards; three scenarios).
Figures printed, each the best of ``--repeat`` after one warm-up run (which pays the cluster's
start-up and each worker's kernel load from the compile cache):

* ``engine.run`` in this process (the builtin ``map``);
* ``engine.run`` with ``map`` = a local cluster of N worker processes, one thread each, for
  every N in ``--workers``; the ratio to in-process, and loans per second;
* the cluster's start-up alone (paid once per command);
* peak resident memory of this process and of each worker (``psutil`` through distributed);
* that the loan detail is the same to the byte as in-process (it must be: chunks are pure).

``--book N ...`` times the whole run of a book too large for one process instead
(``allowance.run(FOLDER, ..., map=DaskMap, loans_parquet=DIR)``): the demo tape multiplied
(:func:`parquet_book`, loan ids suffixed ``-k``) and written as a folder of Parquet files of
1,000,000 loans in row groups of ``--row-group`` loans, read, validated, computed and written
part by part on a local cluster of ``--workers`` processes, each warmed first (kernels loaded, as by a first chunk; the
cluster's start-up and warm-up are printed apart). Each size runs in a fresh process
(so each peak is its own), on a fresh cluster; printed: wall time, loans per second, the
driver's peak and each worker's peak resident memory, and the time per loan against the
smallest size (1.00 = linear scaling).

The machine is shared and its timings are noisy: read the ratios, not the seconds.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests" / "bench"))

import bench_engine  # noqa: E402
import distributed  # noqa: E402

from allowance import engine  # noqa: E402
from allowance.cluster import DaskMap  # noqa: E402


def best(fn, repeat: int) -> tuple[float, object]:
    out, times = None, []
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return min(times), out


DEMO = ROOT / "demo"
ROWS_PER_FILE = 1_000_000


def parquet_book(folder: Path, loans: int, row_group: int) -> int:
    """The demo tape copied until it holds ``loans`` loans (ids suffixed ``-k``), written as a
    folder of Parquet files of ``ROWS_PER_FILE`` loans in row groups of ``row_group``; the
    columns typed as a warehouse export would type them (pyarrow's CSV inference)."""
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.csv as pcsv
    import pyarrow.parquet as pq

    demo = pcsv.read_csv(DEMO / "tape_2026q3.csv")
    folder.mkdir(parents=True, exist_ok=True)
    written, copy, file = 0, 0, 0
    pending: list[pa.Table] = []
    pending_rows = 0
    while written < loans:
        take = min(demo.num_rows, loans - written - pending_rows)
        piece = demo.slice(0, take)
        ids = pc.binary_join_element_wise(piece.column("loan_id"), f"-{copy}", "")
        pending.append(piece.set_column(piece.schema.get_field_index("loan_id"), "loan_id", ids))
        pending_rows += take
        copy += 1
        if pending_rows >= ROWS_PER_FILE or written + pending_rows >= loans:
            table = pa.concat_tables(pending)
            pq.write_table(table, folder / f"tape-{file:04d}.parquet", row_group_size=row_group)
            written += table.num_rows
            file += 1
            pending, pending_rows = [], 0
    return written


def _warm() -> None:
    """A worker loads the compiled kernels (from the compile cache) before it is timed."""
    from allowance import api

    api.run(DEMO / "tape_2026q3.csv", DEMO / "assumptions_2026q3.toml", accept_ledger_difference=True,
            sensitivities=False)


def run_book_once(folder: Path, workers: int, chunk_size: int) -> dict:
    """One timed run of the partitioned book on a fresh local cluster (this process: the driver)."""
    from allowance import api

    t = time.perf_counter()
    with distributed.LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                  dashboard_address=None, silence_logs=40) as cluster, \
            distributed.Client(cluster) as client:
        client.run(_warm)  # each worker once, as the command's first chunk would
        started = time.perf_counter() - t
        with tempfile.TemporaryDirectory() as out:
            t = time.perf_counter()
            result = api.run(folder, DEMO / "assumptions_2026q3.toml", accept_ledger_difference=True,
                             sensitivities=False, map=DaskMap(client), chunk_size=chunk_size,
                             loans_parquet=Path(out) / "loans")
            seconds = time.perf_counter() - t
            peaks = client.run(lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024)
    return {"loans": int(result.intake.rows_accepted), "seconds": seconds, "start_up": started,
            "workers_peak_mb": sorted(peaks.values()),
            "driver_peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
            "allowance": {r["framework"]: r["allowance"] for r in result.summary.to_dict("records")}}


def book_mode(args) -> None:
    rows = []
    with tempfile.TemporaryDirectory() as scratch:
        for n in args.book:
            folder = Path(scratch) / f"book-{n}"
            t = time.perf_counter()
            subprocess.run([sys.executable, __file__, "--make", str(folder), str(n), str(args.row_group)], check=True)
            made = time.perf_counter() - t
            done = subprocess.run([sys.executable, __file__, "--book-once", str(folder), str(args.workers[0]),
                                   str(args.chunk_size)], check=True, capture_output=True, text=True)
            row = json.loads(done.stdout.strip().splitlines()[-1])
            rows.append(row)
            per = row["seconds"] / row["loans"]
            base = rows[0]["seconds"] / rows[0]["loans"]
            print(f"{row['loans']:>12,} loans  {args.workers[0]} workers  {row['seconds']:8.1f} s  "
                  f"{row['loans'] / row['seconds']:10,.0f} loans/s  time per loan x{per / base:4.2f}  "
                  f"worker peaks {', '.join(f'{m:,.0f}' for m in row['workers_peak_mb'])} MB  "
                  f"driver peak {row['driver_peak_mb']:,.0f} MB  (tape written in {made:.0f} s, cluster up in "
                  f"{row['start_up']:.1f} s)  allowance {row['allowance']}", flush=True)
            subprocess.run(["rm", "-rf", str(folder)], check=True)


def main() -> None:
    if sys.argv[1:2] == ["--make"]:
        print(parquet_book(Path(sys.argv[2]), int(sys.argv[3]), int(sys.argv[4])))
        return
    if sys.argv[1:2] == ["--book-once"]:
        print(json.dumps(run_book_once(Path(sys.argv[2]), int(sys.argv[3]), int(sys.argv[4]))))
        return
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--loans", type=int, default=1_000_000)
    ap.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--chunk-size", type=int, default=100_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--quick", action="store_true", help="one timed run each, 200,000 loans unless --loans given")
    ap.add_argument("--book", type=int, nargs="+", help="partitioned-book mode: these sizes, loan detail to Parquet")
    ap.add_argument("--row-group", type=int, default=250_000, help="--book: loans per row group (per part)")
    args = ap.parse_args()
    if args.book:
        book_mode(args)
        return
    if args.quick:
        args.repeat = 1
        if "--loans" not in sys.argv:
            args.loans = 200_000

    book, cfg = bench_engine.tape(args.loans), bench_engine.config()
    print(f"{args.loans:,} loans, chunks of {args.chunk_size:,}, best of {args.repeat}")

    engine.run(book.head(1000), cfg)  # compile or load the kernels in this process
    alone_s, alone = best(lambda: engine.run(book, cfg, chunk_size=args.chunk_size), args.repeat)
    print(f"in-process            {alone_s:8.2f} s   {args.loans / alone_s:12,.0f} loans/s   ratio 1.00")
    reference = alone.loans.to_csv(index=False)
    del alone

    for n in args.workers:
        t = time.perf_counter()
        with distributed.LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                      dashboard_address=None, silence_logs=40) as cluster, \
                distributed.Client(cluster) as client:
            started = time.perf_counter() - t
            on = DaskMap(client)
            engine.run(book.head(1000), cfg, map=on)  # each worker loads the kernels once
            spread_s, spread = best(lambda on=on: engine.run(book, cfg, chunk_size=args.chunk_size, map=on), args.repeat)
            peaks = client.run(lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024)
        same = spread.loans.to_csv(index=False) == reference
        print(f"dask, {n} worker(s)      {spread_s:8.2f} s   {args.loans / spread_s:12,.0f} loans/s   "
              f"ratio {spread_s / alone_s:4.2f}   start-up {started:5.1f} s   "
              f"worker peak {max(peaks.values()):,.0f} MB   same bytes: {same}")
        del spread
    print(f"this process peak {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:,.0f} MB")


if __name__ == "__main__":
    main()
