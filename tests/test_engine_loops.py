"""The two ways the engine sums a book (numpy for a small one, the compiled loop for a large
one): chosen once per book, and the same figures either way."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from allowance import api, engine, jitcache
from allowance.engine.tables import choose_loop
from tests.books import DEMO_ASSUMPTIONS, DEMO_TAPE

ROOT = Path(__file__).resolve().parents[1]


def test_the_loop_is_chosen_by_the_size_of_the_book():
    assert choose_loop(10_022) == "arrays" and choose_loop(jitcache.ARRAYS_UP_TO) == "arrays"
    assert choose_loop(jitcache.ARRAYS_UP_TO + 1) == "compiled"
    assert choose_loop(None) == "compiled"  # a size not known: the compiled loop, as before
    assert choose_loop(5, "compiled") == "compiled" and choose_loop(10**7, "arrays") == "arrays"
    with pytest.raises(ValueError, match="loop must be one of compiled, arrays"):
        choose_loop(5, "fast")


@pytest.fixture(scope="module")
def demo_book():
    config = api._config(DEMO_ASSUMPTIONS)
    return api._read_tape(api._tape(DEMO_TAPE), config).accepted, config


def test_the_demo_book_is_the_same_to_the_cent_either_way(demo_book):
    # every money column of every loan (rounded to cents once per loan) and every total the
    # same; the PDs and LGDs, unrounded, to the last bits (the two order a sum's terms apart)
    tape, config = demo_book
    arrays, compiled = engine.run(tape, config, loop="arrays"), engine.run(tape, config, loop="compiled")
    a, c = arrays.loans, compiled.loans
    assert list(a.columns) == list(c.columns) and len(a) == len(c) == 10_022
    money = [name for name in a.columns if engine._is_money(name) or name.startswith(("overlay_", "provision_"))]
    assert len(money) > 20
    for name in money:
        np.testing.assert_array_equal(a[name].to_numpy(float), c[name].to_numpy(float), err_msg=name)
    for name in (n for n in a.columns if n.startswith(("pd_", "lgd")) and a[n].dtype.kind == "f"):
        np.testing.assert_allclose(a[name], c[name], rtol=1e-12, atol=1e-15, err_msg=name)
    for name in a.columns.difference(money):
        if a[name].dtype.kind not in "f":
            assert a[name].equals(c[name]), name
    assert arrays.scenarios.equals(compiled.scenarios)


def test_a_demo_run_through_the_command_line_loads_no_compiler(tmp_path):
    # the demo quarter (10,022 loans) through the command line: its published totals, and
    # numba never imported (no compile on a first run, no 0.7-0.9 s load on a warm one)
    code = ("import sys\nfrom allowance import console\n"
            f"sys.argv = ['allowance', 'run', {str(DEMO_TAPE)!r}, '-a', {str(DEMO_ASSUMPTIONS)!r}, "
            f"'--no-sensitivities', '--out', {str(tmp_path / 'out')!r}, '--quiet']\n"
            "try:\n    console.main()\nexcept SystemExit as done:\n    print('exit', done.code)\n"
            "print('numba' in sys.modules)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300, cwd=ROOT)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split()[-3:] == ["exit", "0", "False"], done.stdout + done.stderr
    record = json.loads((tmp_path / "out" / "run.json").read_text(encoding="utf-8"))
    # the demo's allowance as the README states it (IFRS 9 and CECL, after overlays)
    assert record["total_allowance"] == {"ifrs9": 5733245.57, "cecl": 11701518.31}
