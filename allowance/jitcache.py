"""Where compiled loops are cached, and compiling the ECL loop in a second process ahead of need.

Implements
----------
cache_dir       the folder compiled code is cached in, or None when it is not cached
loop_cached     whether the cache holds the ECL loop compiled from the installed source
compile_ahead   start compiling the ECL loop in a second process, when the cache lacks it
wait_for_ahead  wait for that process (the first call of the loop does, before it compiles)

numba caches compiled kernels beside the source (``__pycache__``) or in the user's home; on
a shared, read-only install run by a user without a writable home neither exists, and
``cache=True`` then fails at import ("cannot cache function ...: no locator available"), so
every command, even ``allowance version``, would fail. Here the cache goes to the first
writable of ``NUMBA_CACHE_DIR`` (when the user set it) and the user cache folder
(``$XDG_CACHE_HOME/allowance/numba``, ``~/.cache/allowance/numba``; ``~/Library/Caches`` on
macOS, ``%LOCALAPPDATA%`` on Windows); when neither is writable the kernels are compiled
without caching (a few seconds at each start, the same results).

The first run after an install or an upgrade that computes a large book compiles the ECL
loop (:mod:`allowance.ecl_compiled`), some 3-4 s on a 2-core machine, all of it before a
single loan is measured (a small book is computed in numpy and needs no compiled loop:
:func:`allowance.engine.tables.choose_loop`). The commands that
run the loop therefore start a second Python process at once that compiles the loop into the
cache while the first imports pandas and the schemas, reads and checks the tape and builds the
tables (``allowance demo`` calibrates first): on two cores the two overlap. The second process
loads only numpy, numba and the loop's own maths (``allowance.curves`` loads its submodules on
first use, and the loop's modules load pandas only in the functions that use it). The first
call of the loop waits for that process and then loads the loop from the cache, as every
later run does. Nothing about the figures changes: the cached code is
the code a compile in the first process would make (the same compiler, flags and signature),
and when the second process fails or the cache is not writable the first compiles as before.
Only the command line does this (:func:`compile_ahead` is called from ``allowance.console``);
a library user's process compiles on first use.

This module imports neither numba nor numpy: the command line calls it before it loads them.
"""

from __future__ import annotations

import atexit
import hashlib
import os
import subprocess
import sys
import tempfile
import threading
from pathlib import Path

__all__ = ["ARRAYS_UP_TO", "LOOPS", "cache_dir", "compile_ahead", "loop_cached", "tape_loans", "wait_for_ahead"]

#: How a book's sums can be computed: the compiled loop, or numpy with no compiler loaded
#: (:func:`allowance.ecl.expected_losses`, :func:`allowance.loss_rates.loss_rate_losses`).
LOOPS: tuple[str, ...] = ("compiled", "arrays")

#: A book of at most this many loans is computed in numpy, with no compiled loop
#: (:func:`allowance.engine.tables.choose_loop`): there, loading numba would cost more than
#: the compiled loop saves (``tests/bench/bench_engine.py`` prints both). On the demo's book
#: copied the warm costs meet near 60,000 loans (README, "Large books"), a first run's (which
#: would compile the loop) far above that; the bound sits a little under both.
ARRAYS_UP_TO = 50_000

#: The second process: the smallest book through the loop, which compiles (and caches) the
#: one signature every run uses (``allowance.ecl._checked_arrays`` makes the dtypes one set).
#: It ends at once when the cache is written (numba writes its files as it compiles, each
#: closed): the interpreter's teardown of numba and numpy, some 0.2-0.3 s, would otherwise be
#: waited for by the first run (:func:`allowance.console.leave` says more). An error ends it
#: as usual, with its status, and the first process compiles the loop itself.
_CHILD = ("from allowance import jitable; jitable.COMMAND_LINE = True; import allowance.ecl as e; e.compile_loop(); "
          "import os; os._exit(0)")

#: Longest wait for the second process before the first compiles the loop itself.
_PATIENCE_SECONDS = 600.0


def _user_cache_root() -> Path | None:
    """The platform's per-user cache folder, or None when there is no home to put it in."""
    xdg = os.environ.get("XDG_CACHE_HOME", "")
    if xdg and os.path.isabs(xdg):
        return Path(xdg)
    if sys.platform == "win32" and os.environ.get("LOCALAPPDATA"):  # pragma: no cover
        return Path(os.environ["LOCALAPPDATA"])
    try:
        home = Path.home()
    except (RuntimeError, KeyError, OSError):  # no HOME and no password entry
        return None
    return home / "Library" / "Caches" if sys.platform == "darwin" else home / ".cache"


def _writable(folder: Path) -> bool:
    """Whether files can be made in ``folder`` (created when missing), tested as numba tests it."""
    try:
        folder.mkdir(parents=True, exist_ok=True)
        tempfile.TemporaryFile(dir=folder).close()
    except OSError:
        return False
    return True


def _choose() -> Path | None:
    candidates = []
    if os.environ.get("NUMBA_CACHE_DIR"):
        candidates.append(Path(os.environ["NUMBA_CACHE_DIR"]))
    root = _user_cache_root()
    if root is not None:
        candidates.append(root / "allowance" / "numba")
    return next((c for c in candidates if _writable(c)), None)


_CACHE_DIR = _choose()


def cache_dir() -> Path | None:
    """The folder compiled kernels are cached in (None: compiled at each start, not cached)."""
    return _CACHE_DIR


def loop_cached(folder: Path | None = None) -> bool:
    """Whether ``folder`` (default :func:`cache_dir`) holds the ECL loop compiled from the
    installed ``ecl_compiled.py``: numba's index of it exists and is not older than the source.

    numba files a function's cache under ``<folder>/<package>_<sha1 of the source's folder>/``
    as ``<module>.<function>-<line>.py<XY>.nbi`` and recompiles when the source's time stamp
    differs from the one the index records; an index older than the source is such a one.
    Read without numba, so it may err only towards compiling ahead when nothing was needed
    (a later numba that files its cache elsewhere): never towards a wrong result.
    """
    folder = _CACHE_DIR if folder is None else folder
    if folder is None:
        return False
    source = Path(os.path.abspath(Path(__file__).with_name("ecl_compiled.py")))  # as numba's locator names it
    sub = folder / f"{source.parent.name}_{hashlib.sha1(str(source.parent).encode()).hexdigest()}"
    try:
        stamp = source.stat().st_mtime
        tag = f"py{sys.version_info.major}{sys.version_info.minor}"
        return any(index.stat().st_mtime >= stamp for index in sub.glob(f"ecl_compiled._kernel-*.{tag}.nbi"))
    except OSError:
        return False


def tape_loans(path: str | os.PathLike) -> int | None:
    """About how many loans the tape file at ``path`` holds, found cheaply; None when unknown.

    A CSV file: its lines in the first 256 KiB, scaled to its size (exact when it is no
    larger); a Parquet file: the row count in its footer. Anything else (a workbook, a
    folder, a file that cannot be read): None. Only for deciding whether compiling the loop
    ahead is worth it (:func:`compile_ahead`): a wrong guess costs time, never a figure.
    """
    sample = 256 * 1024
    try:
        size = os.path.getsize(path)
        with open(path, "rb") as handle:
            head = handle.read(sample)
    except OSError:
        return None
    # the first bytes as intake.files.file_kind tells them apart (that module loads numpy and
    # the schemas; this one runs before either is imported)
    if head.startswith(b"PAR1"):
        try:
            import pyarrow.parquet as pq

            return int(pq.read_metadata(path).num_rows)
        except Exception:  # noqa: BLE001 - not a Parquet file after all: intake will say so
            return None
    if head.startswith(b"PK") or not head:  # a workbook (zip), or empty
        return None
    lines = head.count(b"\n") + (not head.endswith(b"\n"))
    if size <= len(head):
        return max(lines - 1, 0)  # less the header
    return int(size * lines / len(head))


_lock = threading.Lock()
_child: subprocess.Popen | None = None


def compile_ahead() -> bool:
    """Start compiling the ECL loop into the cache in a second process; True when started.

    Nothing starts when the cache is not writable (the compiled loop would not outlive the
    process), when it already holds the loop, when numba's compiler is switched off
    (``NUMBA_DISABLE_JIT``), or when a process is already running. The process is stopped
    when this one exits without having needed the loop (a ``--help``, a tape refused).
    """
    global _child
    with _lock:
        if _child is not None or _CACHE_DIR is None or os.environ.get("NUMBA_DISABLE_JIT", "0") not in ("", "0"):
            return False
        if loop_cached():
            return False
        env = {**os.environ, "NUMBA_CACHE_DIR": str(_CACHE_DIR)}  # the folder this process chose
        try:
            _child = subprocess.Popen([sys.executable, "-c", _CHILD], stdin=subprocess.DEVNULL,
                                      stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
        except OSError:
            return False
        atexit.register(_stop_child)
        return True


def wait_for_ahead() -> None:
    """Wait until the process :func:`compile_ahead` started has finished (at most
    :data:`_PATIENCE_SECONDS`); at once when none was started. Thread-safe: the engine's two
    chunk threads may both reach the loop first."""
    global _child
    with _lock:
        child, _child = _child, None
        if child is None:
            return
        try:
            child.wait(timeout=_PATIENCE_SECONDS)
        except subprocess.TimeoutExpired:  # pragma: no cover - a stuck compiler: compile here instead
            child.kill()
            child.wait()


def _stop_child() -> None:
    child = _child
    if child is not None and child.poll() is None:
        child.kill()
        child.wait()
