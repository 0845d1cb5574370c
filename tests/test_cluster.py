"""The engine on a Dask cluster gives the in-process answer, to the cent and byte for byte.

Reference: the in-process run (the builtin ``map``) of the same book; the chunks are pure, so
where they run must not change a figure.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

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
    # with the one-scenario sensitivities: each chunk also sends back its loans' modelled ECL
    # under each scenario alone
    args = [str(tape), "-a", str(DEMO_ASSUMPTIONS), "--accept-ledger-difference"]
    alone = api.run(tape, DEMO_ASSUMPTIONS, accept_ledger_difference=True, chunk_size=50)
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
    for name in ("loans.csv", "sensitivity.csv"):
        assert (tmp_path / "spread" / name).read_bytes() == (tmp_path / "alone" / name).read_bytes()


@pytest.mark.slow
def test_run_prior_on_a_cluster_computes_the_prior_assumptions_in_the_same_chunks(tmp_path):
    """``allowance run --prior --engine dask`` with last quarter's run under another model (the
    demo's quarters): each chunk is computed at the prior run's assumptions too, on the worker
    that computes it, and the movement files are the in-process run's byte for byte
    (reference: the library's run in this process)."""
    from tests.books import DEMO, MANIFEST

    def head(name: str) -> Path:
        lines = (DEMO / name).read_text(encoding="utf-8").splitlines()
        path = tmp_path / name
        path.write_text("\n".join(lines[:241]) + "\n", encoding="utf-8")  # 240 loans, chunks of 60
        return path

    api.run(head(MANIFEST["prior"]["tape"]), DEMO / MANIFEST["prior"]["assumptions"], sensitivities=False,
            accept_ledger_difference=True).write(tmp_path / "prior")
    tape = head(DEMO_TAPE.name)
    alone = api.run(tape, DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False, chunk_size=60,
                    prior=tmp_path / "prior")
    assert alone.record["at_prior_assumptions"].startswith("this run's pass, each chunk computed at the prior")
    alone.write(tmp_path / "alone")
    with distributed.LocalCluster(processes=False, n_workers=2, threads_per_worker=1, dashboard_address=None,
                                  protocol="tcp://", host="127.0.0.1") as cluster:
        done = subprocess.run([sys.executable, "-m", "allowance", "run", str(tape), "-a", str(DEMO_ASSUMPTIONS),
                               "--accept-ledger-difference", "--no-sensitivities", "--prior", str(tmp_path / "prior"),
                               "--out", str(tmp_path / "spread"), "--engine", "dask", "--scheduler",
                               cluster.scheduler_address, "--chunk-size", "60"],
                              capture_output=True, text=True, timeout=600, env={**os.environ, "SOURCE_DATE_EPOCH": "0"})
        assert done.returncode == 0, done.stderr
        assert "run_chunk_under" in cluster.scheduler.task_prefixes  # the chunks and their prior figures ran there
    for name in ("loans.csv", "movement.csv", "movement_loans.csv"):
        assert (tmp_path / "spread" / name).read_bytes() == (tmp_path / "alone" / name).read_bytes()


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


def test_passes_one_after_another_sharing_an_argument_keep_their_data():
    """Pass after pass binding the same value (a Parquet folder's passes all take the id
    column's name): each scatter has a key of its own, so one pass letting go of its argument
    never takes the next pass's data with it ("lost dependencies" when the key was the value's
    hash, seen on a loaded machine)."""
    import functools

    def plus(item, *, header):
        return f"{header}{item}"

    with distributed.Client(processes=False, n_workers=1, threads_per_worker=2, dashboard_address=None) as client:
        for n in range(30):
            assert list(DaskMap(client)(functools.partial(plus, header="loan_id"), range(n % 4 + 1))) == [
                f"loan_id{i}" for i in range(n % 4 + 1)]


def test_workers_and_scheduler_together_are_refused():
    with pytest.raises(AllowanceError, match="not both"):
        with dask_map(workers=2, scheduler="tcp://127.0.0.1:1"):
            pass
    with pytest.raises(AllowanceError, match="at least 1"):
        with dask_map(workers=0):
            pass



@pytest.mark.parametrize("address, says", [
    ("nonsense", "no port in 'nonsense'"),
    ("tcp://scheduler-host", "no port in 'tcp://scheduler-host'"),
    ("tcp://:8786", "no host in 'tcp://:8786'"),
    ("tcp://host:port", "'tcp://host:port' is not HOST:PORT"),
    ("xyz://host:8786", "unknown address scheme 'xyz'"),
])
def test_a_scheduler_address_that_cannot_be_one_is_named_before_any_connection(address, says):
    """Found by hand: ``--scheduler nonsense`` ended in a traceback from inside distributed's
    connect. The address's form is checked first (distributed's own parser; the addresses
    ``dask scheduler`` prints pass, common practice, no source), by the library and by the
    command line, which exits 2 (a usage error) naming the option."""
    from typer.testing import CliRunner

    from allowance.cli import app
    from allowance.cluster import scheduler_address_problem

    assert says in scheduler_address_problem(address)
    assert scheduler_address_problem("tcp://10.0.0.5:8786") is None and scheduler_address_problem("tls://h:1") is None
    with pytest.raises(AllowanceError, match="--scheduler: " + says.replace("(", r"\(")):
        with dask_map(scheduler=address):
            pass
    result = CliRunner().invoke(app, ["run", str(DEMO_TAPE), "-a", str(DEMO_ASSUMPTIONS), "--engine", "dask",
                                      "--scheduler", address, "--out", "unused"])
    assert result.exit_code == 2, result.output
    said = " ".join(result.output.translate({ord(c): " " for c in "│╭╮╰╯─"}).split())  # a framed, wrapped message
    assert "--scheduler" in said and says in said
    assert not Path("unused").exists()


def test_an_address_nobody_answers_at_is_named_after_the_wait(monkeypatch):
    """A scheduler address where nothing listens: the run stops after the connection wait
    (30 s; 1 s here), naming the address."""
    import socket

    import allowance.cluster as cluster_module

    monkeypatch.setattr(cluster_module, "_CONNECT_WAIT", 1.0)
    with socket.socket() as probe:  # a port that was free a moment ago, so nobody answers there
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    with pytest.raises(AllowanceError, match=f"cannot reach the Dask scheduler at tcp://127.0.0.1:{port}"):
        with dask_map(scheduler=f"tcp://127.0.0.1:{port}"):
            pass

def test_a_scheduler_with_no_workers_is_named_not_waited_on_forever(monkeypatch):
    """Found by hand against ``dask scheduler`` with no ``dask worker``: the run ended in a
    traceback from inside distributed ("No valid workers found"). The run waits a bounded
    time for a first worker, then names the scheduler and how to start one."""
    import allowance.cluster as cluster_module

    monkeypatch.setattr(cluster_module, "_WORKER_WAIT", 0.5)
    with distributed.LocalCluster(n_workers=0, processes=False, dashboard_address=None, protocol="tcp://",
                                  host="127.0.0.1") as empty:
        with pytest.raises(AllowanceError, match="has no workers") as refused:
            with dask_map(scheduler=empty.scheduler_address):
                pass
    assert f"dask worker {empty.scheduler_address}" in str(refused.value)


def _die(chunk):  # a task that takes its worker process down with it (as running out of memory does)
    os._exit(9)


@pytest.mark.slow
def test_a_task_whose_workers_die_is_named_with_what_to_change():
    """A worker that dies (killed for its memory, most often) takes its task along; once the
    scheduler gives up on it, distributed raised ``KilledWorker`` through the run. The run's
    error names the part and what to change. No retry here (distributed allows 3 by default),
    so the test takes seconds."""
    import dask

    with dask.config.set({"distributed.scheduler.allowed-failures": 0}), \
            distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=None,
                                     silence_logs=50) as cluster, distributed.Client(cluster) as client:
        with pytest.raises(AllowanceError, match="workers died computing part 1 of 2") as died:
            list(DaskMap(client)(_die, [1, 2]))
    assert "--chunk-size" in str(died.value)


def _slow(chunk):
    import time

    time.sleep(3)
    return chunk


@pytest.mark.slow
def test_a_cluster_lost_mid_run_is_named_with_the_part_it_was_computing():
    """Found by hand: a scheduler stopped while a run waited for its chunks ended the run in
    distributed's traceback (a cancelled future, or a closed connection while fetching a
    result), with its client's reconnection tracebacks logged besides. The run's error names
    the part and what to check."""
    import threading

    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None,
                                  protocol="tcp://", host="127.0.0.1", silence_logs=50) as cluster:
        with dask_map(scheduler=cluster.scheduler_address) as chunk_map:
            threading.Timer(1.0, cluster.close).start()  # the scheduler goes while part 1 runs
            with pytest.raises(AllowanceError, match="lost the Dask cluster while computing part 1 of 2"):
                list(chunk_map(_slow, [1, 2]))


def test_a_large_chunk_travels_with_its_task_without_a_warning_to_the_user():
    """A CSV tape's chunks are read here and sent with their tasks: a chunk of 250,000 loans
    is some 70 MB, over distributed's 10 MB mark, and every run on a joined cluster printed
    its "Sending large graph" advice (found by hand). The chunk arrives whole."""
    import warnings

    import numpy as np

    chunk = np.arange(2_000_000, dtype=np.float64)  # 16 MB
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None,
                                  protocol="tcp://", host="127.0.0.1") as cluster, \
            distributed.Client(cluster) as client, warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        assert list(DaskMap(client)(np.sum, [chunk])) == [chunk.sum()]
    assert not [w for w in seen if "large graph" in str(w.message)], [str(w.message) for w in seen]


@pytest.mark.slow
def test_a_local_cluster_beside_another_dask_process_starts_without_a_warning():
    """A scheduler keeps an HTTP server (health checks) with the dashboard off, on port 8787
    by default; with another Dask process holding that port, every ``--workers`` run printed
    distributed's "Port 8787 is already in use" (found by hand beside a ``dask scheduler``)."""
    import socket
    import warnings

    holder = socket.socket()
    try:
        holder.bind(("", 8787))
        holder.listen()
    except OSError:
        pass  # another process holds it already: the case itself
    try:
        with warnings.catch_warnings(record=True) as seen:
            warnings.simplefilter("always")
            with dask_map(workers=1) as chunk_map:
                assert list(chunk_map(abs, [-1, -2])) == [1, 2]
    finally:
        holder.close()
    assert not [w for w in seen if "already in use" in str(w.message)], [str(w.message) for w in seen]

# --------------------------------------------------------------------------------------
# A Parquet tape read part by part where it is computed
# --------------------------------------------------------------------------------------


def _parquet_book(folder, rows: int = 300, spoil: dict | None = None):
    """The demo tape's first ``rows`` loans as text columns: one Parquet file (row groups of 70)
    and the same rows as a folder of two files (row groups of 50), ``spoil`` = {row: {col: text}}."""
    import pandas as pd
    import pyarrow as pa
    import pyarrow.parquet as pq

    frame = pd.read_csv(DEMO_TAPE, dtype=str, keep_default_na=False, nrows=rows)
    for row, cells in (spoil or {}).items():
        for column, text in cells.items():
            frame.loc[row, column] = text
    table = pa.Table.from_pandas(frame, preserve_index=False)
    folder.mkdir()
    pq.write_table(table, folder / "whole.parquet", row_group_size=70)
    (folder / "tape").mkdir()
    half = rows // 2
    pq.write_table(table.slice(0, half), folder / "tape" / "part-0.parquet", row_group_size=50)
    pq.write_table(table.slice(half), folder / "tape" / "part-1.parquet", row_group_size=50)
    return folder / "whole.parquet", folder / "tape"


def test_a_parquet_folder_read_by_the_workers_gives_the_in_process_run_to_the_cent(tmp_path):
    """Reference: the in-process run of the same rows read whole from one Parquet file
    (``intake.read_tape``); the folder is read row group by row group on a local cluster
    (worker threads), each group validated there, and the loan detail must be the same bytes."""
    whole, folder = _parquet_book(tmp_path / "book")
    alone = api.run(whole, DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False, chunk_size=50)
    alone.write(tmp_path / "alone")
    with distributed.Client(processes=False, n_workers=2, threads_per_worker=1, dashboard_address=None) as client:
        spread = api.run(folder, DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False, chunk_size=50,
                         map=DaskMap(client))
        assert "read_part" in client.cluster.scheduler.task_prefixes  # the parts were read on the workers
    spread.write(tmp_path / "spread")
    assert (tmp_path / "spread" / "loans.csv").read_bytes() == (tmp_path / "alone" / "loans.csv").read_bytes()
    assert spread.summary.equals(alone.summary)
    assert spread.intake.rows_read == alone.intake.rows_read == 300


def test_a_bad_row_in_one_part_is_named_by_file_row_column_and_reason_and_the_counts_tie():
    """A balance that is not a number in the second file, and a loan id repeated across the two
    files: each row is named by its file, its row in the whole tape (as if one header were
    line 1) and the reason, as the whole tape read at once names it; rows read = accepted +
    rejected, and the balance ties to the tape (common practice, no source)."""
    import tempfile
    from pathlib import Path

    import pandas as pd

    with tempfile.TemporaryDirectory() as d:
        spoil = {200: {"balance": "12,5O0.00"}, 250: {"loan_id": pd.read_csv(DEMO_TAPE, nrows=4)["loan_id"][3]}}
        whole, folder = _parquet_book(Path(d) / "book", spoil=spoil)
        at_once = api.check(whole, DEMO_ASSUMPTIONS)
        with distributed.Client(processes=False, n_workers=1, threads_per_worker=2, dashboard_address=None) as client:
            by_parts = api.run(folder, DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False,
                               map=DaskMap(client))
        checked = api.check(folder, DEMO_ASSUMPTIONS)  # a folder is read part by part in-process too
    rejected = by_parts.rejected
    assert rejected["source_row"].tolist() == [5, 202, 252]  # data row n of the whole tape is row n + 1
    assert rejected["source_file"].tolist() == ["part-0.parquet", "part-1.parquet", "part-1.parquet"]
    # the row in its own file (150 rows in part-0.parquet): counted by hand, tape row - 150
    assert rejected["file_row"].tolist() == [4, 51, 101]
    assert rejected.drop(columns=["source_file", "file_row"]).equals(at_once.rejected)
    assert checked.rejected.equals(rejected)
    bad = by_parts.findings.set_index("source_row")
    assert (bad.loc[202, "column"], bad.loc[202, "code"]) == ("balance", "bad_number")
    assert "'12,5O0.00' is not a number" in bad.loc[202, "message"]
    # a Parquet file's rows are named by source_row, as rejected.csv holds them (its row 251 is source_row 252)
    assert bad.loc[5, "message"].endswith("is also at source_row 252")
    assert bad.loc[252, "source_file"] == "part-1.parquet"
    counts = by_parts.intake
    assert (counts.rows_read, counts.rows_accepted, counts.rows_rejected) == (300, 297, 3)
    tape = pd.read_csv(DEMO_TAPE, nrows=300)
    kept = tape.drop(index=[3, 200, 250])["balance"].sum()
    assert by_parts.tie_out.accepted_balance == pytest.approx(round(kept, 2), abs=0.005)
    assert by_parts.summary["balance"].iloc[0] == pytest.approx(round(kept, 2), abs=0.005)


# --------------------------------------------------------------------------------------
# The loan detail written where each part is computed
# --------------------------------------------------------------------------------------


def test_the_loan_detail_written_by_the_workers_is_the_in_process_loan_frame_to_the_cent(tmp_path):
    """Reference: the in-process run of the same rows read whole. The folder's parts are read,
    computed and written on a local cluster (worker threads); only sums come back. The demo's
    assumptions carry an amount overlay, allocated once over the whole book (largest
    remainder, common practice, no source), so the parts' shares must add up to the
    in-process allocation loan by loan."""
    import json

    import pandas as pd

    whole, folder = _parquet_book(tmp_path / "book")
    alone = api.run(whole, DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False)
    assert (alone.report.overlays["kind"] == "amount").any()
    alone.write(tmp_path / "alone")
    with distributed.Client(processes=False, n_workers=2, threads_per_worker=1, dashboard_address=None) as client:
        book = api.run(folder, DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False, chunk_size=40,
                       map=DaskMap(client), loans_parquet=tmp_path / "detail")
        assert "compute_part" in client.cluster.scheduler.task_prefixes
    detail = pd.read_parquet(tmp_path / "detail")
    assert sorted(p.name for p in (tmp_path / "detail").iterdir()) == [
        f"part-{first:012d}.parquet" for first in (0, 50, 100, 150, 200, 250)]
    pd.testing.assert_frame_equal(detail, alone.loans, check_dtype=False)
    assert book.summary.equals(alone.summary)
    assert book.totals.equals(alone.totals)
    assert book.report.scenarios.equals(alone.report.scenarios)
    assert book.report.overlays.equals(alone.report.overlays)
    assert list(book.report.disclosures) == list(alone.report.disclosures) == ["ifrs7_35m", "asc326_vintage"]
    for name, table in alone.report.disclosures.items():  # the parts' cells added up on the driver
        pd.testing.assert_frame_equal(book.report.disclosures[name], table)
    pd.testing.assert_frame_equal(book.report.pd_paths, alone.report.pd_paths, rtol=1e-12)  # balance sums: float order
    book.write(tmp_path / "out")
    written, reference = (json.loads((tmp_path / d / "run.json").read_text()) for d in ("out", "alone"))
    for key in ("rows", "loans", "total_balance", "total_allowance", "totals", "tie_out"):
        assert written[key] == reference[key], key
    assert not (tmp_path / "out" / "loans.csv").exists() and not (tmp_path / "out" / "reserve.xlsx").exists()
    assert (tmp_path / "out" / "summary.xlsx").exists()  # made from the sums (tests/test_book_workbook.py)
    with pytest.raises(AllowanceError, match="part by part"):
        _ = book.loans


def test_the_loan_detail_part_by_part_refuses_what_needs_the_whole_loan_frame(tmp_path):
    from tests.books import DEMO, DEMO_WHAT_IF, MANIFEST

    whole, _ = _parquet_book(tmp_path / "book", rows=40)
    with pytest.raises(AllowanceError, match="what-if overlay needs the whole loan frame"):
        api.run(whole, DEMO_ASSUMPTIONS, overlays=[DEMO_WHAT_IF], loans_parquet=tmp_path / "detail")
    with pytest.raises(AllowanceError, match="charge-off file is read with a prior run"):
        api.run(whole, DEMO_ASSUMPTIONS, charge_offs=DEMO / MANIFEST["current"]["charge_offs"],
                loans_parquet=tmp_path / "detail")
    # a prior folder that is not a run's is named before any part is computed
    with pytest.raises(AllowanceError, match="not found in the prior run folder"):
        api.run(whole, DEMO_ASSUMPTIONS, accept_ledger_difference=True, prior=tmp_path / "book",
                loans_parquet=tmp_path / "detail")
    assert not (tmp_path / "detail").exists()
    with pytest.raises(AllowanceError, match="from a Parquet tape"):
        api.run(DEMO_TAPE, DEMO_ASSUMPTIONS, loans_parquet=tmp_path / "detail")
    (tmp_path / "used").mkdir()
    (tmp_path / "used" / "old.parquet").write_bytes(b"")
    with pytest.raises(AllowanceError, match="not an empty folder"):
        api.run(whole, DEMO_ASSUMPTIONS, accept_ledger_difference=True, loans_parquet=tmp_path / "used")


@pytest.mark.slow
def test_run_loans_parquet_on_a_cluster_through_the_command_line(tmp_path):
    """``allowance run FOLDER --engine dask --scheduler ADDRESS --loans-parquet DIR`` against the
    in-process run of the same rows read whole: the same detail, the same totals in run.json."""
    import json

    import pandas as pd

    whole, folder = _parquet_book(tmp_path / "book")
    alone = api.run(whole, DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False)
    with distributed.LocalCluster(processes=False, n_workers=2, threads_per_worker=1, dashboard_address=None,
                                  protocol="tcp://", host="127.0.0.1") as cluster:
        done = subprocess.run([sys.executable, "-m", "allowance", "run", str(folder), "-a", str(DEMO_ASSUMPTIONS),
                               "--accept-ledger-difference", "--out", str(tmp_path / "out"), "--engine", "dask",
                               "--scheduler", cluster.scheduler_address, "--loans-parquet", str(tmp_path / "detail")],
                              capture_output=True, text=True, timeout=600)
        assert done.returncode == 0, done.stderr
    pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "detail"), alone.loans, check_dtype=False)
    record = json.loads((tmp_path / "out" / "run.json").read_text())
    assert record["total_allowance"] == {fw: float(alone.summary.set_index("framework").loc[label, "allowance"])
                                         for fw, label in (("ifrs9", "IFRS 9"), ("cecl", "CECL"))}
    assert record["loans"] == 300 and record["loan_detail"] == str(tmp_path / "detail")
    assert (tmp_path / "out" / "summary.xlsx").exists() and (tmp_path / "out" / "disclosure_ifrs7_35m.csv").exists()



@pytest.mark.slow
def test_relative_paths_reach_workers_whose_working_folder_is_another(tmp_path):
    """A Parquet tape and a loan-detail folder given relative to where the command runs: the
    workers (here threads of this test's process, whose working folder is not the command's)
    read the parts and write the detail at the command's paths. Found by hand on a cluster
    started apart (``dask scheduler``, ``dask worker``): the workers looked for
    ``tape.parquet`` in their own folder and the run stopped. Reference: the in-process run of
    the same rows."""
    import pandas as pd

    whole, folder = _parquet_book(tmp_path / "book")
    alone = api.run(whole, DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False)
    assert Path.cwd() != tmp_path
    with distributed.LocalCluster(processes=False, n_workers=2, threads_per_worker=1, dashboard_address=None,
                                  protocol="tcp://", host="127.0.0.1") as cluster:
        done = subprocess.run([sys.executable, "-m", "allowance", "run", "book/tape", "-a", str(DEMO_ASSUMPTIONS),
                               "--accept-ledger-difference", "--out", "out", "--engine", "dask",
                               "--scheduler", cluster.scheduler_address, "--loans-parquet", "detail"],
                              capture_output=True, text=True, timeout=600, cwd=tmp_path,
                              env={**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[1])})
        assert done.returncode == 0, done.stderr
    pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "detail"), alone.loans, check_dtype=False)
    assert not (Path.cwd() / "detail").exists()  # nothing written where the workers stand

def test_a_book_with_a_prior_run_computes_its_parts_at_the_prior_assumptions_on_the_workers(tmp_path):
    """``--loans-parquet`` with ``--prior`` on a local cluster: the parts are computed at the
    prior run's assumptions too where they are computed (the demo's last quarter, another model),
    and the movement is the in-process run's with ``--prior``, loan by loan (reference: that
    run)."""
    import pandas as pd

    from tests.books import DEMO, MANIFEST

    api.run(DEMO / MANIFEST["prior"]["tape"], DEMO / MANIFEST["prior"]["assumptions"],
            sensitivities=False).write(tmp_path / "prior")
    whole, _ = _parquet_book(tmp_path / "book")
    alone = api.run(whole, DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False,
                    prior=tmp_path / "prior")
    with distributed.Client(processes=False, n_workers=2, threads_per_worker=1, dashboard_address=None) as client:
        book = api.run(whole, DEMO_ASSUMPTIONS, accept_ledger_difference=True, sensitivities=False,
                       prior=tmp_path / "prior", map=DaskMap(client), loans_parquet=tmp_path / "detail")
        assert "compute_part" in client.cluster.scheduler.task_prefixes
    assert list(book.movement) == list(alone.movement) == ["ifrs9", "cecl"]
    for fw, moved in alone.movement.items():
        pd.testing.assert_frame_equal(book.movement[fw].loans, moved.loans)


@pytest.mark.slow
def test_the_display_says_the_cluster_is_being_started_or_joined():
    """Starting a local cluster takes seconds and joining one can wait 30 s for a worker: the
    command's display shows that phase (found by hand: a blank terminal meanwhile)."""
    from allowance.cli import _executor
    from allowance.progress import PHASES, Display

    with Display(enabled=False) as shown, _executor("dask", 1, None, shown) as chunk_map:
        assert shown.seen == ["cluster"] and list(chunk_map(abs, [-3])) == [3]
    assert PHASES["cluster"] == "starting or joining the Dask cluster"
    with Display(enabled=False) as shown, _executor("in-process", None, None, shown) as chunk_map:
        assert chunk_map is None and shown.seen == []
