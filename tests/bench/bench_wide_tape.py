"""Benchmark: a tape carrying thousands of extra columns, stage by stage.

Run from the repository root (not collected by pytest)::

    python tests/bench/bench_wide_tape.py                  # 10,000 extra columns, 24 loans
    python tests/bench/bench_wide_tape.py --columns 2000

An extract often carries every column of the source system; the extra columns are carried
through to loans.csv untouched. Each stage should cost little per column: the figures show
seconds of CPU per stage for the wide tape and for the same 24 loans without the extra
columns, and their ratio (the per-column cost). Stages: read and validate (``read_tape``),
the engine (``engine.run``), the CSV outputs (loans, rejected, warnings) and the workbook.

Measured on the shared 2-core development machine (CPU seconds, 10,000 extra columns):
before the fix read 50 s, engine 31 s, CSV files 35 s, workbook 103 s (under cProfile);
after: read about 1 s, engine about 1 s, CSV files about 3 s; the workbook is its writer's.
"""

from __future__ import annotations

import argparse
import re
import shutil
import sys
import tempfile
import time
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from allowance import engine, intake  # noqa: E402
from allowance.report import files  # noqa: E402
from allowance.report.workbook import write_workbook  # noqa: E402


def _cpu() -> float:
    return time.process_time()


def _book(folder: Path, extra: int) -> tuple[Path, Path]:
    demo = intake.bundled_path("demo")
    manifest = tomllib.loads((demo / "manifest.toml").read_text())
    lines = (demo / manifest["current"]["tape"]).read_text().splitlines()[:25]
    if extra:
        lines = [lines[0] + "," + ",".join(f"x{i}" for i in range(extra))] + [
            line + "," + ",".join(str(i) for i in range(extra)) for line in lines[1:]]
    folder.mkdir(parents=True, exist_ok=True)
    tape = folder / "tape.csv"
    tape.write_text("\n".join(lines) + "\n")
    text = (demo / manifest["current"]["assumptions"]).read_text().split("[[overlays]]")[0]
    toml = folder / "assumptions.toml"
    toml.write_text(re.sub(r"(?m)^ledger_balance.*\n", "", text))
    for matrix in ("cards_rolls.csv", "rolls_cards.csv"):  # the simulated and the calibrated matrix
        shutil.copyfile(demo / matrix, folder / matrix)
    return tape, toml


def _stages(tape: Path, toml: Path, out: Path, workbook: bool) -> dict[str, float]:
    from allowance.report import RunReport

    times = {}
    config = intake.load_assumptions(toml)
    t = _cpu()
    taken = intake.read_tape(tape, config)
    times["read"] = _cpu() - t
    t = _cpu()
    result = engine.run(taken.accepted, config)
    times["engine"] = _cpu() - t
    report = RunReport(config=config, intake=taken, tie_out=None, loans=result.loans)
    out.mkdir(parents=True, exist_ok=True)
    t = _cpu()
    files._csv(result.loans, out / "loans.csv")
    files._csv(taken.rejected, out / "rejected.csv")
    files._csv(files.warnings_frame(report), out / "warnings.csv")
    times["csv files"] = _cpu() - t
    if workbook:
        t = _cpu()
        write_workbook(out / "reserve.xlsx", report)
        times["workbook"] = _cpu() - t
    return times


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--columns", type=int, default=10_000)
    parser.add_argument("--no-workbook", action="store_true", help="skip the workbook (slow when wide)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        narrow = _stages(*_book(folder / "narrow-in", 0), folder / "narrow", not args.no_workbook)
        narrow = _stages(*_book(folder / "narrow-in", 0), folder / "narrow", not args.no_workbook)  # warm
        wide = _stages(*_book(folder / "wide-in", args.columns), folder / "wide", not args.no_workbook)
    print(f"24 loans, {args.columns:,} extra columns: CPU seconds per stage")
    print(f"{'stage':12s} {'narrow':>8s} {'wide':>8s} {'ms/column':>10s}")
    for stage in wide:
        per = (wide[stage] - narrow[stage]) / args.columns * 1000
        print(f"{stage:12s} {narrow[stage]:8.2f} {wide[stage]:8.2f} {per:10.3f}")
    print(f"{'total':12s} {sum(narrow.values()):8.2f} {sum(wide.values()):8.2f}")


if __name__ == "__main__":
    main()
