"""The engine on a Dask cluster gives the in-process answer, to the cent and byte for byte.

Reference: the in-process run (the builtin ``map``) of the same book; the chunks are pure, so
where they run must not change a figure.
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

from allowance import api
from allowance.exceptions import AllowanceError
from tests.books import DEMO_ASSUMPTIONS, DEMO_TAPE

distributed = pytest.importorskip("distributed")
from allowance.cluster import DaskMap, dask_map  # noqa: E402


@pytest.mark.slow
def test_run_on_a_cluster_writes_the_in_process_loan_detail_byte_for_byte(tmp_path):
    """``allowance run --engine dask --scheduler ADDRESS`` against the library's in-process run.

    The cluster lives in this test's process (worker threads, already warm) and the command
    line joins it over TCP, so every chunk and result crosses a real serialisation boundary;
    a local cluster of worker processes (``--workers``) is timed in tests/bench/bench_cluster.py.
    """
    lines = DEMO_TAPE.read_text(encoding="utf-8").splitlines()
    tape = tmp_path / "tape.csv"
    tape.write_text("\n".join(lines[:301]) + "\n", encoding="utf-8")  # 300 loans, six chunks of 50
    args = [str(tape), "-a", str(DEMO_ASSUMPTIONS), "--accept-ledger-difference", "--no-sensitivities"]
    alone = api.run(tape, DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False, chunk_size=50)
    alone.write(tmp_path / "alone")
    with distributed.LocalCluster(processes=False, n_workers=2, threads_per_worker=1, dashboard_address=None,
                                  protocol="tcp://", host="127.0.0.1") as cluster:
        done = subprocess.run([sys.executable, "-m", "allowance", "run", *args, "--out", str(tmp_path / "spread"),
                               "--engine", "dask", "--scheduler", cluster.scheduler_address, "--chunk-size", "50"],
                              capture_output=True, text=True, timeout=600,
                              env={**os.environ, "SOURCE_DATE_EPOCH": "0"})
        assert done.returncode == 0, done.stderr
        # the chunks ran on the cluster: its scheduler has seen tasks of the chunk function
        assert "run_chunk" in cluster.scheduler.task_prefixes
    assert (tmp_path / "spread" / "loans.csv").read_bytes() == (tmp_path / "alone" / "loans.csv").read_bytes()


def test_results_come_back_in_the_chunks_order_with_shared_arguments_sent_once():
    """A threaded in-process cluster: order kept however the tasks finish; the bound keyword
    arrives as its value, not as a future."""
    import functools
    import time

    def slow_first(item, *, offset):
        time.sleep(0.05 if item == 0 else 0.0)
        return item + offset

    with distributed.Client(processes=False, n_workers=1, threads_per_worker=3, dashboard_address=None) as client:
        out = list(DaskMap(client)(functools.partial(slow_first, offset=100), range(6)))
        assert list(DaskMap(client)(functools.partial(slow_first, offset=1), [])) == []
    assert out == [100, 101, 102, 103, 104, 105]


def test_workers_and_scheduler_together_are_refused():
    with pytest.raises(AllowanceError, match="not both"):
        with dask_map(workers=2, scheduler="tcp://127.0.0.1:1"):
            pass
    with pytest.raises(AllowanceError, match="at least 1"):
        with dask_map(workers=0):
            pass
