"""Benchmark: balance paths and the lifetime ECL sum for a million mixed loans.

Run from the repository root (not collected by pytest)::

    python tests/bench/bench_engine.py                 # 1,000,000 loans
    python tests/bench/bench_engine.py --loans 100000  # quicker

The book: 30 % 360-month level-pay mortgages (150 PSA), 40 % 60-month level-pay auto loans
(constant CPR), 30 % revolving cards over a 36-month behavioural life (CCF on the undrawn
limit for IFRS 9, paydown for CECL); three scenarios, one with an LGD multiplier. The loop's
inputs are built by ``engine.run_chunk`` itself (its call to ``expected_losses_together`` is
intercepted), so the loop is timed on exactly what the engine feeds it, without intake.

Figures printed:

* the loop (``ecl.expected_losses``) for both frameworks and for IFRS 9 alone: first run in
  this process (compile or cache load) and warm (best of several), loan-months per second;
* a fresh process compiling with an empty cache, and a fresh process loading the cache;
* the plain numpy pass that writes one float64 per loan-month-scenario (``np.empty((1000, T,
  S))`` then ``fill``, chunk by chunk over the same loans and horizons: IFRS 9's cells, and
  both frameworks' cells for the loop over both) and the ratios to it; 1,000-loan chunks
  stay in the caches (the strict yardstick, a buffer rewritten in place); 10,000-loan
  chunks, which spill to memory as materialising a large book's cells does, are printed
  beside it;
* a straightforward per-loan loop over ``numpy_financial`` (the test suite's reference) on a
  sample, scaled to the book, and the ratio to it;
* peak memory: traced allocations of the loop pass (tracemalloc) and the process's peak RSS;
* optionally (``--engine-run``) the whole ``engine.run`` on the tape (staging, rounding,
  overlays and frames included).

The machine is shared and its timings are noisy: warm figures are the best of ``--repeat``.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import resource
import subprocess
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import numba  # noqa: E402

import allowance.engine.chunk as engine_chunk  # noqa: E402
from allowance import cashflows, ecl, engine, jitcache  # noqa: E402
from allowance.schemas import OPTIONAL_COLUMNS, Assumptions, LoanRecord, RunConfig  # noqa: E402

AS_OF = "2026-09-30"
#: the fields cut to one framework: the per-framework [F, n] arrays and the [F, ...] tables
PER_FRAMEWORK = (*ecl.PER_FRAMEWORK, "pd", "lgd_multiplier", "collateral_index")


def config(frameworks=("ifrs9", "cecl")) -> RunConfig:
    a = Assumptions.model_validate({
        "run": {"as_of": AS_OF, "frameworks": list(frameworks)},
        "segments": {
            "mortgage": {"pd_curve": [0.004, 0.009, 0.015, 0.02], "lgd": 0.2, "psa": 150},
            "auto": {"pd_12m": 0.02, "lgd": 0.45, "cpr": 0.12},
            "cards": {"pd_12m_by_grade": {"A": 0.02, "B": 0.07}, "lgd": 0.85, "ccf": 0.4,
                      "behavioural_life_months": 36, "payment_rate": 0.04, "unconditionally_cancellable": True},
        },
        "ifrs9": {"sicr_pd_ratio": 2.0, "sicr_pd_measure": "12_month"},
        # ASC 326-20-30-6 leaves the allocation of a line's payments a policy choice: stated here
        "cecl": {"reasonable_supportable_months": 24, "reversion_months": 12,
                 "payment_allocation": "measured_balance_first"},
        "scenarios": {
            "base": {"weight": 0.5, "pd_multiplier": [1.0]},
            "upside": {"weight": 0.2, "pd_multiplier": [0.8, 0.9]},
            "downside": {"weight": 0.3, "pd_multiplier": [1.8, 1.4, 1.1], "lgd_multiplier": [1.15, 1.05]},
        },
    })
    return RunConfig(assumptions=a)


def tape(n: int, seed: int = 2026) -> pd.DataFrame:
    """An accepted-tape frame (the intake contract) of invented loans."""
    rng = np.random.default_rng(seed)
    u = rng.random(n)
    seg = np.where(u < 0.3, "mortgage", np.where(u < 0.7, "auto", "cards"))
    age = rng.integers(0, 24, n)  # seasoning in months; the remaining term is held fixed
    as_of = pd.Timestamp(AS_OF)
    orig = as_of - pd.to_timedelta(age * 30, unit="D")
    term = np.where(seg == "mortgage", 360, 60)
    maturity = pd.to_datetime([as_of + pd.DateOffset(months=int(m)) for m in (360, 60)])
    frame = pd.DataFrame({
        "loan_id": np.char.add("L", np.arange(n).astype(str)),
        "segment": seg,
        "repayment": np.where(seg == "cards", "revolving", "level"),
        "origination_date": orig,
        "maturity_date": pd.Series(np.where(term == 360, maturity[0], maturity[1])).where(seg != "cards"),
        "balance": np.where(seg == "cards", rng.uniform(200, 15_000, n), rng.uniform(5_000, 600_000, n)),
        "interest_rate": np.where(seg == "cards", 0.22, rng.uniform(0.03, 0.09, n)),
        "days_past_due": rng.choice([0] * 40 + [15, 45, 100], n),
    })
    for c in OPTIONAL_COLUMNS:
        if c not in frame:
            frame[c] = False if LoanRecord.model_fields[c].annotation is bool else np.nan
    frame["grade"] = np.where(seg == "cards", rng.choice(["A", "B"], n), None)
    frame["credit_limit"] = np.where(seg == "cards", frame["balance"] * 1.6, np.nan)
    frame["source_row"] = np.arange(n) + 2
    return frame


def kernel_inputs(book: pd.DataFrame, cfg: RunConfig) -> list[ecl.KernelInputs]:
    """The KernelInputs engine.run_chunk builds for each chunk (its loop call intercepted)."""
    months = engine.tape_months(book, cfg)
    max_age = int(cashflows.age_months(book["origination_date"], pd.Timestamp(AS_OF)).max())
    prep = engine.prepare(cfg, months, max_age)
    captured = []

    def capture(batch, loop="compiled"):
        out = []
        for inputs in batch:
            if inputs is None:
                out.append(None)
                continue
            captured.append(inputs)
            n, f, s = len(inputs.balance), inputs.pd.shape[0], inputs.pd.shape[3]
            z = np.zeros((n, f, s))
            out.append(ecl.KernelResult(z, z, z, z, np.zeros((n, f)), np.zeros((n, f)), z, z))
        return out

    real = engine_chunk.expected_losses_together  # the name run_chunk calls (each set of its batch captured)
    engine_chunk.expected_losses_together = capture
    try:
        for start in range(0, len(book), engine.CHUNK_SIZE):
            engine.run_chunk(book.iloc[start: start + engine.CHUNK_SIZE], prep)
    finally:
        engine_chunk.expected_losses_together = real
    return captured


def one_framework(k: ecl.KernelInputs, f: int = 0) -> ecl.KernelInputs:
    return dataclasses.replace(k, **{name: getattr(k, name)[f: f + 1] for name in PER_FRAMEWORK
                                     if getattr(k, name) is not None and getattr(k, name).ndim > 1})


def loop_pass(chunks, cpu: dict | None = None, key: str = "") -> float:
    """Wall seconds of one pass; the CPU seconds of all threads go to ``cpu[key]`` (best)."""
    t, c = time.perf_counter(), time.process_time()
    for k in chunks:
        ecl.expected_losses(k)
    if cpu is not None:
        cpu[key] = min(cpu.get(key, np.inf), time.process_time() - c)
    return time.perf_counter() - t


def materialise_pass(horizons: np.ndarray, scenarios: int, chunk: int = 1000) -> float:
    """Write one float64 per loan-month-scenario, loans grouped by horizon, chunk by chunk."""
    months, counts = np.unique(horizons, return_counts=True)
    t = time.perf_counter()
    for m, c in zip(months, counts):
        for start in range(0, c, chunk):
            cells = np.empty((min(chunk, c - start), m, scenarios))
            cells.fill(1.0)
    return time.perf_counter() - t


def fresh_process_first_call(cache_dir: str) -> float:
    """Seconds for the first expected_losses call in a new process with this numba cache."""
    code = (
        f"import sys, time; sys.path.insert(0, {str(ROOT)!r})\n"
        "from tests.strategies import random_kernel_book\n"
        "from allowance.ecl import expected_losses\n"
        "k = random_kernel_book(1, n=1000, secured=True)\n"
        "t = time.perf_counter(); expected_losses(k); print(time.perf_counter() - t)\n"
    )
    env = dict(os.environ, NUMBA_CACHE_DIR=cache_dir)
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True)
    return float(out.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--loans", type=int, default=1_000_000)
    ap.add_argument("--sample", type=int, default=2_000, help="loans for the per-loan numpy_financial loop")
    ap.add_argument("--repeat", type=int, default=7)
    ap.add_argument("--engine-run", action="store_true", help="also time engine.run on the whole tape")
    ap.add_argument("--loop-only", action="store_true",
                    help="stop after the loop against the materialising pass (bench_scale.py's line)")
    args = ap.parse_args()

    print(f"numba {numba.__version__}, {numba.get_num_threads()} threads, loans {args.loans:,}")
    t = time.perf_counter()
    book = tape(args.loans)
    cfg = config()
    chunks_both = kernel_inputs(book, cfg)
    chunks_one = [one_framework(k) for k in chunks_both]
    print(f"tape and KernelInputs built by engine.run_chunk in {time.perf_counter() - t:.1f} s (not timed below)")

    n_sc = chunks_both[0].pd.shape[3]
    horizons = np.concatenate([k.horizon for k in chunks_both], axis=1)  # [F, n]
    loan_months = horizons.sum(axis=1)
    print(f"loan-months per framework: {', '.join(f'{m:,}' for m in loan_months)}; scenarios {n_sc}")

    first = loop_pass(chunks_both[:1])
    print(f"loop first run in this process (compile or cache load + chunk 1): {first:.3f} s")
    print(f"threading layer: {numba.threading_layer()}")

    best = {"both": np.inf, "one": np.inf, "cells": np.inf, "cells_10k": np.inf, "cells_both": np.inf,
            "cells_both_10k": np.inf}
    cpu: dict[str, float] = {}
    both_horizons = horizons.ravel()  # every (framework, loan) pair's months
    for _ in range(args.repeat):  # interleaved, so that noise from other work hits all alike
        best["both"] = min(best["both"], loop_pass(chunks_both, cpu, "both"))
        best["one"] = min(best["one"], loop_pass(chunks_one, cpu, "one"))
        best["cells"] = min(best["cells"], materialise_pass(horizons[0], n_sc))
        best["cells_10k"] = min(best["cells_10k"], materialise_pass(horizons[0], n_sc, chunk=10_000))
        best["cells_both"] = min(best["cells_both"], materialise_pass(both_horizons, n_sc))
        best["cells_both_10k"] = min(best["cells_both_10k"], materialise_pass(both_horizons, n_sc, chunk=10_000))

    tracemalloc.start()
    loop_pass(chunks_both)
    _, traced_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()

    lm_one, lm_both = loan_months[0], loan_months.sum()
    cells = lm_one * n_sc
    print()
    print(f"materialise {cells:,} cells (np.empty((1000, T, S)).fill): {best['cells']:.3f} s "
          f"({cells / best['cells'] / 1e9:.2f} G cells/s)")
    print(f"  (the same in chunks of 10,000 loans, {10_000 * 360 * n_sc * 8 / 2**20:.0f} MiB each, past the "
          f"caches: {best['cells_10k']:.3f} s; the loop for IFRS 9 alone is {best['one'] / best['cells_10k']:.2f} x that)")
    for label, key, lm in (("both frameworks", "both", lm_both), ("IFRS 9 only", "one", lm_one)):
        sec = best[key]
        print(f"loop, {label:15s}: warm {sec:.3f} s, {lm / sec / 1e6:,.0f} M loan-months/s "
              f"({lm * n_sc / sec / 1e6:,.0f} M loan-month-scenarios/s), "
              f"{sec / best['cells']:.2f} x the materialise pass; CPU {cpu[key]:.3f} s over all threads")
    print(f"both frameworks against materialising their {lm_both * n_sc:,} cells: "
          f"{best['both'] / best['cells_both']:.2f} x (in the caches: 1,000-loan chunks, "
          f"{best['cells_both']:.3f} s)")
    print(f"both frameworks against materialising their cells past the caches: "
          f"{best['both'] / best['cells_both_10k']:.2f} x (10,000-loan chunks, as an array of a large "
          f"book's cells is: {best['cells_both_10k']:.3f} s)")
    if args.loop_only:
        return

    # the straightforward per-loan loop over numpy_financial (the test suite's reference)
    from tests.test_ecl import reference

    rng = np.random.default_rng(0)
    pick = np.sort(rng.choice(len(chunks_both[0].balance), min(args.sample, len(chunks_both[0].balance)), replace=False))
    k0 = chunks_both[0]
    n0 = len(k0.balance)

    def pick_loans(name, a):  # per-loan arrays ([n], or [F, n] per framework) cut to the sample, tables whole
        per_loan = a is not None and (name in ecl.PER_FRAMEWORK or (a.ndim == 1 and len(a) == n0))
        return a[..., pick] if per_loan else a

    sample = dataclasses.replace(k0, **{f.name: pick_loans(f.name, getattr(k0, f.name))
                                        for f in dataclasses.fields(ecl.KernelInputs)})
    # the reference reads one prepayment row per loan (its timing is what is wanted here)
    sample = dataclasses.replace(sample, prepay=np.atleast_2d(sample.prepay)[0])
    t = time.perf_counter()
    reference(sample)
    per_loan = (time.perf_counter() - t) * args.loans / len(pick)
    print(f"per-loan numpy_financial loop, both frameworks, {len(pick):,} loans scaled to {args.loans:,}: "
          f"{per_loan:.1f} s, {per_loan / best['both']:,.0f} x the loop")

    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"peak memory: loop pass traced {traced_peak / 2**20:.1f} MiB (chunk of {engine.CHUNK_SIZE:,} "
          f"loans: outputs only, no loans x months array); process peak RSS {rss:,.0f} MiB "
          "(the tape and all chunks' inputs held for the benchmark)")

    with tempfile.TemporaryDirectory() as cache:
        cold = fresh_process_first_call(cache)
        cached = fresh_process_first_call(cache)
    print(f"fresh process, empty numba cache (compile): first call {cold:.2f} s; "
          f"fresh process, cache filled: first call {cached:.3f} s (numba's import and the loop's load)")

    # the numpy sums (loop="arrays"), which a book of up to jitcache.ARRAYS_UP_TO loans takes:
    # no compile and no numba, at a cost per loan; where the two costs cross sets the bound
    few = np.arange(min(10_000, n0))
    pick = few  # what pick_loans cuts to, now: the first loans of the chunk
    small = dataclasses.replace(k0, **{f.name: pick_loans(f.name, getattr(k0, f.name))
                                       for f in dataclasses.fields(ecl.KernelInputs)})
    timed = {}
    for loop in ("compiled", "arrays") * 3:
        t = time.perf_counter()
        ecl.expected_losses(small, loop)
        timed[loop] = min(timed.get(loop, np.inf), time.perf_counter() - t)
    per_loan = (timed["arrays"] - timed["compiled"]) / len(few)
    print(f"numpy sums (loop='arrays'), both frameworks, {len(few):,} loans: {timed['arrays']:.3f} s against the "
          f"compiled loop's {timed['compiled']:.3f} s ({timed['arrays'] / timed['compiled']:.1f} x); they cost "
          f"the same at about {cached / per_loan:,.0f} loans warm, {cold / per_loan:,.0f} on a first run "
          f"(numpy below jitcache.ARRAYS_UP_TO = {jitcache.ARRAYS_UP_TO:,})")

    if args.engine_run:
        t = time.perf_counter()
        engine.run(book, cfg, schedule_sample=0)
        print(f"engine.run on the whole tape (staging, loop, frames, rounding, overlays): {time.perf_counter() - t:.2f} s")


if __name__ == "__main__":
    main()
