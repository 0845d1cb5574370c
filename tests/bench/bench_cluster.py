"""Benchmark: the engine in one process against a local Dask cluster of worker processes.

Run from the repository root (not collected by pytest; needs the ``dask`` extra)::

    python tests/bench/bench_cluster.py                        # 1,000,000 loans, 1 and 2 workers
    python tests/bench/bench_cluster.py --loans 200000 --quick # quicker
    python tests/bench/bench_cluster.py --loans 10000000 --workers 2 --chunk-size 250000

The book is ``bench_engine``'s mixed book (mortgages, auto loans, cards; three scenarios).
Figures printed, each the best of ``--repeat`` after one warm-up run (which pays the cluster's
start-up and each worker's kernel load from the compile cache):

* ``engine.run`` in this process (the builtin ``map``);
* ``engine.run`` with ``map`` = a local cluster of N worker processes, one thread each, for
  every N in ``--workers``; the ratio to in-process, and loans per second;
* the cluster's start-up alone (paid once per command);
* peak resident memory of this process and of each worker (``psutil`` through distributed);
* that the loan detail is the same to the byte as in-process (it must be: chunks are pure).

The machine is shared and its timings are noisy: read the ratios, not the seconds.
"""

from __future__ import annotations

import argparse
import resource
import sys
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


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--loans", type=int, default=1_000_000)
    ap.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--chunk-size", type=int, default=100_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--quick", action="store_true", help="one timed run each, 200,000 loans unless --loans given")
    args = ap.parse_args()
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
