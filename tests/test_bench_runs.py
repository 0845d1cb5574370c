"""The engine benchmark still runs against the engine as it is.

``tests/bench/bench_engine.py`` times the loop on the inputs ``engine.run_chunk`` builds, by
intercepting its call into :mod:`allowance.ecl`; a rename there once broke the benchmark
unseen. A small book through its loop-only line keeps it honest (not a timing: the figures
are not checked, only that each line is printed).
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).parents[1]


@pytest.mark.slow
def test_the_engine_benchmark_runs_on_a_small_book():
    done = subprocess.run(
        [sys.executable, str(ROOT / "tests" / "bench" / "bench_engine.py"), "--loans", "3000", "--repeat", "1",
         "--loop-only"], capture_output=True, text=True, timeout=600, cwd=ROOT)
    assert done.returncode == 0, done.stderr[-2000:]
    for line in ("materialise", "loop, both frameworks", "loop, IFRS 9 only", "against materialising"):
        assert line in done.stdout, (line, done.stdout)
