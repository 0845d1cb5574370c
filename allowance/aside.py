"""One piece of writing done in a forked copy of the process, beside the rest.

Implements
----------
ALLOWED   set by the console entry point: the command line's own process may fork
usable    whether :class:`Aside` forks here (else the caller does the work itself)
Aside     ``work(*args)`` started in a child process; ``result()`` waits and re-raises
start     an :class:`Aside` where usable and the system allows the fork, else ``None``

Laying out a workbook is Python, one core under the GIL; a run writes two of them plus its
CSV files, and the machine has more cores. A forked child starts with the run already in
memory (pages shared until written), so one workbook can be made there while this process
makes the other and the CSV files: the bytes of each file are those of writing them one
after the other. Fork, not a fresh interpreter: a new process would import pandas and numba
again and take the run over a pipe, which costs more than the workbook.

Only the command line forks (:data:`ALLOWED`), and only on Linux. A notebook's kernel or a
caller's program has threads and sockets of its own whose state a fork copies mid-flight;
macOS forbids some system libraries after a fork; Windows has no fork. There the work is done
in this process as before.
"""

from __future__ import annotations

import gc
import os
import pickle
import signal
import sys
import traceback
import warnings
from collections.abc import Callable
from typing import Any

__all__ = ["ALLOWED", "Aside", "start", "usable"]

#: Set by :func:`allowance.console.main`: this process is the command line's, whose threads
#: are all this package's (idle when a fork is made) and whose output is a terminal or a file.
ALLOWED = False


def usable() -> bool:
    """Whether :class:`Aside` may fork here: the command line's process on Linux."""
    return ALLOWED and sys.platform.startswith("linux") and hasattr(os, "fork")


class Aside:
    """``work(*args)`` run in a forked child; :meth:`result` waits for it and re-raises its error.

    The child reports an exception by pickling it down a pipe (an ``OSError`` keeps its
    errno and file name, so the output folder's error message names the file); one that does
    not pickle comes back as a ``RuntimeError`` with its traceback text. The child ends with
    ``os._exit``: no ``atexit`` handler, buffered output or ``finally`` of the parent's runs
    twice. Use it as a context manager: leaving the block on an error (a Ctrl-C too) stops
    the child and waits for it, so nothing writes into a folder being discarded.
    """

    def __init__(self, work: Callable[..., Any], *args: Any) -> None:
        read, write = os.pipe()
        self._done = False
        # the child's garbage collector would write to every object this process holds (their
        # GC headers), copying the pages the two share: the objects made so far are set aside
        gc.freeze()
        try:
            with warnings.catch_warnings():
                # Python 3.12+ warns of forking with other threads alive: here those are idle
                # pool threads (this package's, Arrow's, BLAS's), and Arrow and the allocators
                # reset their state in the child with at-fork handlers of their own
                warnings.simplefilter("ignore", DeprecationWarning)
                self.pid = os.fork()
        except BaseException:
            gc.unfreeze()
            os.close(read)
            os.close(write)
            raise
        if self.pid == 0:  # pragma: no cover - the child; its effects are tested from the parent
            _child(read, write, work, args)
        gc.unfreeze()
        os.close(write)
        self._read = read

    def result(self) -> None:
        """Wait for the child; raise what it raised (``RuntimeError`` if it died otherwise)."""
        if self._done:
            return
        chunks = []
        try:
            while chunk := os.read(self._read, 1 << 16):
                chunks.append(chunk)
        except BaseException:  # interrupted while waiting (Ctrl-C): the child's work is not wanted
            self.stop()
            raise
        code = os.waitstatus_to_exitcode(self._reap())
        if code == 0:
            return
        if chunks:
            error = pickle.loads(b"".join(chunks))
            raise error
        raise RuntimeError(f"the process writing beside this one ended with {_ending(code)}")

    def stop(self) -> None:
        """Stop the child if it still runs, and wait for it (nothing raised)."""
        if self._done:
            return
        try:
            os.kill(self.pid, signal.SIGTERM)
        except ProcessLookupError:
            pass
        self._reap()

    def _reap(self) -> int:
        """Close the pipe (once) and wait for the child; its wait status. A wait cut short (a
        Ctrl-C during it) leaves the child to :meth:`stop`, which waits again."""
        if self._read >= 0:
            os.close(self._read)
            self._read = -1
        _, status = os.waitpid(self.pid, 0)
        self._done = True
        return status

    def __enter__(self) -> "Aside":
        return self

    def __exit__(self, kind, error, trace) -> None:
        if kind is not None:
            self.stop()


def start(work: Callable[..., Any], *args: Any) -> Aside | None:
    """``Aside(work, *args)`` where :func:`usable`; ``None`` (the caller does the work) where
    not, or where the system refuses the fork (no memory or process slots left)."""
    if not usable():
        return None
    try:
        return Aside(work, *args)
    except OSError:
        return None


def _ending(code: int) -> str:
    return f"signal {-code}" if code < 0 else f"exit code {code}"


def _child(read: int, write: int, work: Callable[..., Any], args: tuple) -> None:  # pragma: no cover
    """Run the work and leave with ``os._exit``, whatever happens: 0 done, 1 with the error sent."""
    code = 1
    try:
        os.close(read)
        try:
            work(*args)
            code = 0
        except BaseException as err:  # a Ctrl-C too: the parent decides what it means
            try:
                payload = pickle.dumps(err)
                pickle.loads(payload)  # an exception whose constructor takes other arguments
            except Exception:
                text = "".join(traceback.format_exception(err))
                payload = pickle.dumps(RuntimeError(f"the process writing beside this one failed:\n{text}"))
            view = memoryview(payload)
            while view:
                view = view[os.write(write, view):]
    finally:
        os._exit(code)
