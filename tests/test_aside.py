"""Work forked beside the command line's process (allowance.aside): the reserve workbook.

The child's effects are checked from the parent: what it writes, what it raises (an
``OSError`` keeps its errno and file name, so the output folder's message names the file),
how it ends, and that a command line run writes the same bytes as the library, which makes
both workbooks in one process.
"""

from __future__ import annotations

import errno
import os
import signal
import subprocess
import sys
import time
import zipfile
from pathlib import Path

import pytest

from allowance import aside, api
from allowance.aside import Aside
from tests.test_bad_inputs import EPOCH, workspace

pytestmark = pytest.mark.skipif(not hasattr(os, "fork"), reason="no fork on this system")


def _write(path: Path, text: str) -> None:
    path.write_text(text, encoding="utf-8")


def test_the_child_does_the_work_and_its_memory_is_its_own(tmp_path):
    seen = {"n": 0}

    def work(path: Path) -> None:
        seen["n"] += 1  # the child's copy
        _write(path, "written beside")

    with Aside(work, tmp_path / "a.txt") as child:
        child.result()
    assert (tmp_path / "a.txt").read_text(encoding="utf-8") == "written beside"
    assert seen["n"] == 0
    child.result()  # a second wait returns at once


def test_an_os_error_comes_back_with_its_errno_and_file(tmp_path):
    def work() -> None:
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(tmp_path / "reserve.xlsx"))

    with pytest.raises(OSError) as raised, Aside(work) as child:
        child.result()
    assert raised.value.errno == errno.ENOSPC and raised.value.filename == str(tmp_path / "reserve.xlsx")


class _Unpicklable(Exception):
    """An error holding what pickle cannot carry (a local function): with or without the
    traceback pickling some libraries install (distributed installs tblib's), it does not pickle."""


def test_an_exception_that_does_not_pickle_comes_back_as_text():
    def work() -> None:
        raise _Unpicklable("broken at 3", lambda: 3)

    with pytest.raises(RuntimeError, match=r"(?s)failed:.*_Unpicklable: \('broken at 3'"), Aside(work) as child:
        child.result()


def test_a_child_killed_by_a_signal_is_an_error():
    def work() -> None:
        os.kill(os.getpid(), signal.SIGKILL)

    with pytest.raises(RuntimeError, match="ended with signal 9"), Aside(work) as child:
        child.result()


def test_leaving_the_block_on_an_error_stops_the_child(tmp_path):
    def work(path: Path) -> None:
        time.sleep(30)
        _write(path, "too late")

    t = time.perf_counter()
    with pytest.raises(KeyError), Aside(work, tmp_path / "late.txt") as child:
        raise KeyError("the parent failed")
    assert time.perf_counter() - t < 10
    with pytest.raises(ChildProcessError):  # reaped: no zombie left
        os.waitpid(child.pid, os.WNOHANG)
    assert not (tmp_path / "late.txt").exists()


def test_an_interrupted_wait_stops_the_child():
    """A Ctrl-C (here an alarm's exception) while waiting ends the child at once, not when done."""
    def work() -> None:
        time.sleep(30)

    def ring(*_):
        raise TimeoutError("rang")

    old = signal.signal(signal.SIGALRM, ring)
    try:
        child = Aside(work)
        t = time.perf_counter()
        signal.setitimer(signal.ITIMER_REAL, 0.3)
        with pytest.raises(TimeoutError):
            child.result()
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)
    assert time.perf_counter() - t < 10
    with pytest.raises(ChildProcessError):
        os.waitpid(child.pid, os.WNOHANG)


def test_only_the_command_line_forks(monkeypatch):
    monkeypatch.setattr(aside, "ALLOWED", False)
    assert not aside.usable() and aside.start(print, "never") is None
    monkeypatch.setattr(aside, "ALLOWED", True)
    assert aside.usable() == sys.platform.startswith("linux")


def test_a_refused_fork_leaves_the_work_to_the_caller(monkeypatch):
    def refused():
        raise OSError(errno.EAGAIN, os.strerror(errno.EAGAIN))

    monkeypatch.setattr(aside, "ALLOWED", True)
    monkeypatch.setattr(os, "fork", refused)
    assert aside.start(print, "never") is None


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="forks on Linux only")
def test_the_warning_of_newer_pythons_about_forking_with_threads_is_not_an_error(monkeypatch, tmp_path):
    """Python 3.12+ warns (DeprecationWarning) when a process with threads forks; with
    warnings turned into errors (``-W error``) the run must still write its workbook."""
    import warnings

    real = os.fork

    def warning_fork():
        warnings.warn("This process is multi-threaded, use of fork() may lead to deadlocks", DeprecationWarning,
                      stacklevel=2)
        return real()

    monkeypatch.setattr(aside, "ALLOWED", True)
    monkeypatch.setattr(os, "fork", warning_fork)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        child = aside.start(_write, tmp_path / "w.txt", "forked")
        assert child is not None
        with child:
            child.result()
    assert (tmp_path / "w.txt").read_text(encoding="utf-8") == "forked"


def _files(folder: Path) -> dict[str, bytes]:
    """Every output's bytes; a workbook's by member (the zip's own headers are not compared)."""
    out: dict[str, bytes] = {}
    for path in sorted(folder.iterdir()):
        if path.suffix == ".xlsx":
            with zipfile.ZipFile(path) as z:
                out.update({f"{path.name}/{m}": z.read(m) for m in z.namelist()})
        elif path.name != "run.json":  # it records the command line and the folder
            out[path.name] = path.read_bytes()
    return out


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the command line forks on Linux only")
def test_the_command_line_writes_what_the_library_writes(tmp_path):
    """`allowance run` (reserve workbook made by a forked child) and api.run(...).write (both
    workbooks in one process) give the same bytes in every output."""
    ws = workspace(tmp_path / "ws")
    env = {**os.environ, "SOURCE_DATE_EPOCH": EPOCH}
    done = subprocess.run([sys.executable, "-m", "allowance", "run", str(ws.tape), "-a", str(ws.toml),
                           "--out", str(tmp_path / "cli"), "-q"], capture_output=True, text=True, env=env,
                          timeout=300)
    assert done.returncode == 0, done.stderr
    os.environ["SOURCE_DATE_EPOCH"] = EPOCH
    try:
        api.run(ws.tape, ws.toml).write(tmp_path / "lib")
    finally:
        del os.environ["SOURCE_DATE_EPOCH"]
    cli, lib = _files(tmp_path / "cli"), _files(tmp_path / "lib")
    assert "reserve.xlsx/xl/workbook.xml" in cli and cli.keys() == lib.keys()
    assert [k for k in cli if cli[k] != lib[k]] == []


_FAILING_RESERVE = """
import errno, os, sys
from allowance.report import workbook

PARENT = os.getpid()

def fail(path, report):
    with open(os.environ["PIDS"], "w") as f:
        f.write(f"{PARENT} {os.getpid()}")
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))

workbook.write_workbook = fail
import allowance.report.files as files
files.write_workbook = fail
from allowance.console import main
sys.argv = ["allowance", *sys.argv[1:]]
main()
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the command line forks on Linux only")
def test_a_reserve_workbook_that_cannot_be_written_leaves_the_last_run(tmp_path):
    """The child's disk-full error is the run's: the output error's one line names reserve.xlsx
    and exits 1, and the previous outputs stay as they were."""
    ws = workspace(tmp_path / "ws")
    env = {**os.environ, "SOURCE_DATE_EPOCH": EPOCH}
    first = subprocess.run([sys.executable, "-m", "allowance", "run", str(ws.tape), "-a", str(ws.toml),
                            "--out", str(ws.out), "-q"], capture_output=True, text=True, env=env, timeout=300)
    assert first.returncode == 0, first.stderr
    before = _files(ws.out)
    failed = subprocess.run([sys.executable, "-c", _FAILING_RESERVE, "run", str(ws.tape), "-a", str(ws.toml),
                             "--out", str(ws.out), "-q"], capture_output=True, text=True,
                            env={**env, "PIDS": str(tmp_path / "pids")}, timeout=300)
    parent, writer = (tmp_path / "pids").read_text().split()
    assert parent != writer  # the reserve workbook was made by a forked child
    assert failed.returncode == 1 and "Traceback" not in failed.stderr, failed.stderr  # an AllowanceError
    assert "No space left on device" in failed.stderr and "reserve.xlsx" in failed.stderr, failed.stderr
    assert _files(ws.out) == before
    assert [p.name for p in ws.out.parent.iterdir() if ".partial-" in p.name] == []
