"""The compile cache's folder and the ECL loop compiled ahead in a second process.

The cache naming checked here is numba's own (``numba.core.caching``: a function's index
``<module>.<function>-<line>.py<XY>.nbi`` under ``<package>_<sha1 of the source folder>``),
read by the test that compiles into an empty folder and asks numba's dispatcher whether the
next process loaded the loop from it.
"""

from __future__ import annotations

import hashlib
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

import allowance
from allowance import aside, console, jitable, jitcache
from tests import books

ECL = Path(os.path.abspath(Path(allowance.__file__).with_name("ecl_compiled.py")))
TAG = f"py{sys.version_info.major}{sys.version_info.minor}"


def _index(folder: Path, age: float) -> Path:
    """A stand-in for numba's index of the loop, ``age`` seconds older than ecl_compiled.py (negative: newer)."""
    sub = folder / f"{ECL.parent.name}_{hashlib.sha1(str(ECL.parent).encode()).hexdigest()}"
    sub.mkdir(parents=True)
    index = sub / f"ecl_compiled._kernel-999.{TAG}.nbi"
    index.write_bytes(b"")
    stamp = ECL.stat().st_mtime - age
    os.utime(index, (stamp, stamp))
    return index


def test_an_empty_or_missing_folder_does_not_hold_the_loop(tmp_path):
    assert not jitcache.loop_cached(tmp_path)
    assert not jitcache.loop_cached(tmp_path / "nowhere")


def test_an_index_older_than_the_source_is_stale_and_a_newer_one_is_not(tmp_path):
    # numba recompiles when the source's time stamp differs from the one its index records
    # (numba.core.caching.IndexDataCacheFile): an index written before the source changed
    _index(tmp_path / "old", age=60.0)
    _index(tmp_path / "new", age=-60.0)
    assert not jitcache.loop_cached(tmp_path / "old")
    assert jitcache.loop_cached(tmp_path / "new")


def test_another_python_s_index_is_not_this_one_s(tmp_path):
    index = _index(tmp_path, age=-60.0)
    index.rename(index.with_name("ecl_compiled._kernel-999.py27.nbi"))
    assert not jitcache.loop_cached(tmp_path)


def _child(code: str, cache: Path, **env: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=600,
                          env={**os.environ, "NUMBA_CACHE_DIR": str(cache), **env})


@pytest.mark.slow
def test_the_loop_compiled_ahead_is_loaded_by_the_next_process_not_compiled_again(tmp_path):
    cache = tmp_path / "cache"
    started = _child("from allowance import jitcache\nprint(jitcache.compile_ahead())\n"
                     "jitcache.wait_for_ahead()\nprint(jitcache.loop_cached())", cache)
    assert started.returncode == 0, started.stderr
    assert started.stdout.split() == ["True", "True"]
    # a second call finds the loop cached and starts nothing
    again = _child("from allowance import jitcache\nprint(jitcache.compile_ahead())", cache)
    assert again.stdout.split() == ["False"], again.stderr
    # numba's own record: the loop was a cache hit, with no compile, in the next process
    used = _child("import sys\nimport allowance.ecl as e\nassert 'pandas' not in sys.modules\ne.compile_loop()\nimport allowance.ecl_compiled as c\ns = c._kernel.stats\n"
                  "print(sum(s.cache_hits.values()), sum(s.cache_misses.values()))", cache)
    assert used.returncode == 0, used.stderr
    assert used.stdout.split() == ["1", "0"]


def test_nothing_is_started_where_the_cache_cannot_be_kept_or_numba_does_not_compile(tmp_path):
    code = "from allowance import jitcache\nprint(jitcache.cache_dir(), jitcache.compile_ahead())"
    blocked = tmp_path / "a-file"  # no folder can be made under a file, not even by root
    blocked.write_text("")
    unwritable = _child(code, blocked / "numba", XDG_CACHE_HOME=str(blocked))
    assert unwritable.stdout.split() == ["None", "False"], unwritable.stderr
    off = _child(code, tmp_path, NUMBA_DISABLE_JIT="1")
    assert off.stdout.split() == [str(tmp_path), "False"], off.stderr


def test_waiting_with_nothing_started_returns_at_once():
    t = time.perf_counter()
    jitcache.wait_for_ahead()
    assert time.perf_counter() - t < 1.0


def _lines(path: Path, rows: int) -> Path:
    path.write_text("loan_id,balance\n" + "".join(f"L{i:07d},100\n" for i in range(rows)))
    return path


@pytest.mark.parametrize(("args", "ahead"), [(["demo", "--help"], False), (["run", "--help"], True),
                                              (["backtest", "--help"], False), (["check", "--help"], False),
                                              (["compare", "--help"], False), (["version"], False)])
def test_the_command_line_compiles_ahead_for_the_commands_that_run_the_loop(monkeypatch, capsys, args, ahead):
    asked = []
    monkeypatch.setattr(jitcache, "compile_ahead", lambda: asked.append(True) or False)
    # console.main sets these for its own process; this one must get them back as they were
    monkeypatch.setattr(jitable, "COMMAND_LINE", jitable.COMMAND_LINE)
    monkeypatch.setattr(aside, "ALLOWED", aside.ALLOWED)
    monkeypatch.setattr(sys, "argv", ["allowance", *args])
    with pytest.raises(SystemExit) as done:
        console.main()
    assert done.value.code in (0, None)
    assert asked == ([True] if ahead else [])


def test_a_tape_within_the_numpy_bound_is_not_compiled_for_ahead(monkeypatch, tmp_path):
    # the demo's 10,022 loans are computed in numpy (allowance.engine.tables.choose_loop): no
    # second process compiles a loop the run will not load; a larger tape, or one whose size
    # cannot be told, still gets one
    assert not console._large_book([str(books.DEMO_TAPE)])
    assert console._large_book([str(_lines(tmp_path / "big.csv", jitcache.ARRAYS_UP_TO + 1000))])
    assert console._large_book([str(tmp_path / "missing.csv")]) and console._large_book([])
    asked = []
    monkeypatch.setattr(jitcache, "compile_ahead", lambda: asked.append(True) or False)
    monkeypatch.setattr(jitable, "COMMAND_LINE", jitable.COMMAND_LINE)
    monkeypatch.setattr(aside, "ALLOWED", aside.ALLOWED)
    monkeypatch.setattr(sys, "argv", ["allowance", "run", str(books.DEMO_TAPE), "--help"])
    with pytest.raises(SystemExit):
        console.main()
    assert asked == []


def test_the_loans_of_a_tape_are_counted_or_estimated_cheaply(tmp_path):
    assert jitcache.tape_loans(_lines(tmp_path / "small.csv", 1234)) == 1234  # read whole: exact
    big = jitcache.tape_loans(_lines(tmp_path / "big.csv", 200_000))  # 2.6 MB: estimated from its first 256 KiB
    assert abs(big - 200_000) < 0.02 * 200_000
    demo = jitcache.tape_loans(books.DEMO_TAPE)
    assert abs(demo - 10_022) < 0.1 * 10_022, demo  # its first rows run a little longer than the rest
    pa, pq = pytest.importorskip("pyarrow"), pytest.importorskip("pyarrow.parquet")
    pq.write_table(pa.table({"loan_id": [f"L{i}" for i in range(777)]}), tmp_path / "t.parquet")
    assert jitcache.tape_loans(tmp_path / "t.parquet") == 777  # the footer's row count
    (tmp_path / "empty.csv").write_bytes(b"")
    assert jitcache.tape_loans(tmp_path / "empty.csv") is None and jitcache.tape_loans(tmp_path) is None
