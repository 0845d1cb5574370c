"""The console entry point, kept light so that Ctrl-C at any moment ends the program cleanly.

The command line imports pandas, pyarrow and numba before it can do anything; a Ctrl-C while
they load used to print a traceback. Here the import itself is guarded: an interruption at
any point prints one line and exits with 130 (128 + SIGINT, the shell convention).
"""

from __future__ import annotations

import atexit
import os
import sys
import threading

INTERRUPTED = "interrupted; the output folder holds a complete run or nothing new, never a mix"


def interrupted() -> None:
    """Say so on one line and exit 130, whatever the interpreter recorded about the signal.

    ``os._exit``, not ``SystemExit``: once a KeyboardInterrupt has escaped any code the
    interpreter ran as a script (some libraries evaluate code that way while they load), it
    ends the process by re-raising SIGINT at shutdown even after the exception was handled,
    and the shell then sees "killed by SIGINT" (-2), not 130. Every ``with`` block and
    ``finally`` has already run by the time the interruption reaches here (it propagated
    up through them), so nothing is left to clean that exiting at once would skip.
    """
    try:
        sys.stderr.write(INTERRUPTED + "\n")
        _flush()
    finally:
        os._exit(130)


def _from_interrupt(error: BaseException) -> bool:
    """Whether an exception was raised while handling a Ctrl-C (Typer turns one into exit 130)."""
    seen: set[int] = set()
    link: BaseException | None = error
    while link is not None and id(link) not in seen:
        if isinstance(link, KeyboardInterrupt):
            return True
        seen.add(id(link))
        link = link.__cause__ or link.__context__
    return False


#: The command whose first run may compile the ECL loop: in a second process
#: (:func:`allowance.jitcache.compile_ahead`) while this one loads its libraries and reads the
#: tape, when the tape holds more loans than are computed in numpy (or its size is unknown).
#: A first run of a million loans then pays the compile beside its start-up, not after it.
#: ``demo`` computes small books, and ``backtest`` and ``compare`` read finished runs: none
#: of them needs the compiled loop.
_COMPUTING = frozenset({"run"})
#: The commands that read no file with Arrow (and load no numpy): the others leave Ctrl-C to
#: this module, not to Arrow (:func:`_ctrl_c_is_ours`).
_NO_ARROW = frozenset({"init", "version"})


def _ctrl_c_is_ours() -> None:
    """Switch off Arrow's own Ctrl-C handling, so that an interruption reaches :func:`main`.

    Arrow sets a signal handler of its own for the length of a long read and stops the read
    from a helper thread; a Ctrl-C that arrived as such a read began now and then left the
    process waiting for ever (the tests' Ctrl-C at start-up hung about once in 60 tries on a
    loaded machine, a thread of the process blocked on Arrow's signal pipe). Without it the
    signal is Python's: the read in progress finishes (a block of a streamed file, a row
    group) and the interruption is raised then, one line and exit 130."""
    import pyarrow.lib

    pyarrow.lib.enable_signal_handlers(False)


def _large_book(args: list[str]) -> bool:
    """Whether the tape the command line names (its first argument after the command) may
    hold more loans than numpy computes (:data:`allowance.jitcache.ARRAYS_UP_TO`)."""
    from allowance import jitcache

    loans = jitcache.tape_loans(args[0]) if args and not args[0].startswith("-") else None
    return loans is None or loans > jitcache.ARRAYS_UP_TO


def main() -> None:
    """Run the command line; Ctrl-C during start-up or a run exits 130 with one line."""
    try:
        from allowance import jitable

        jitable.COMMAND_LINE = True  # numba may skip its BLAS probe here (allowance.jit)
        from allowance import aside

        aside.ALLOWED = True  # a workbook may be written by a forked copy (allowance.aside)
        if sys.argv[1:2] and sys.argv[1] not in _NO_ARROW and not sys.argv[1].startswith("-"):
            _ctrl_c_is_ours()
        if sys.argv[1:2] and sys.argv[1] in _COMPUTING and _large_book(sys.argv[2:3]):
            from allowance import jitcache

            jitcache.compile_ahead()  # on a first run, the loop compiles beside the start-up
        from allowance.cli import app

        app()
    except KeyboardInterrupt:
        interrupted()
    except SystemExit as done:
        if done.code == 130 and _from_interrupt(done):
            interrupted()  # Typer exits 130 silently on Ctrl-C: say what happened
        raise
    except Exception as error:
        # A Ctrl-C can arrive inside code whose errors Python wraps: a ``__set_name__`` that a
        # class statement calls (pydantic's field descriptors, as the models load) turns it into
        # "RuntimeError: Error calling __set_name__", caused by the KeyboardInterrupt. Still an
        # interruption, not a fault of ours.
        if _from_interrupt(error):
            interrupted()
        raise


def command() -> None:
    """The program (the ``allowance`` script, ``python -m allowance``): :func:`main`, then the
    process ends at once (:func:`leave`). An error that escapes :func:`main` ends it as Python
    ends any program, with its traceback."""
    code: object = 0
    try:
        main()
    except SystemExit as done:
        code = done.code
    try:
        leave(code)
    except KeyboardInterrupt:  # a Ctrl-C as the process ends: the outputs are already complete
        interrupted()


def _status(code: object) -> int:
    """The exit status Python gives ``SystemExit(code)``: None is 0, a number itself, anything
    else is printed on standard error and is 1."""
    if code is None:
        return 0
    if isinstance(code, int):
        return code
    sys.stderr.write(f"{code}\n")
    return 1


def _watched() -> bool:
    """Whether a profiler, tracer or monitoring tool (``sys.monitoring``, Python 3.12+) is set."""
    if sys.getprofile() is not None or sys.gettrace() is not None:
        return True
    monitoring = getattr(sys, "monitoring", None)
    return monitoring is not None and any(monitoring.get_tool(tool) is not None for tool in range(6))


def leave(code: object) -> None:
    """End the process as ``SystemExit(code)`` would, without the interpreter's teardown.

    At exit Python clears every module and frees every object one by one: some 0.1 s once
    pandas is loaded, 0.2 s with numba, 0.3-0.45 s after a run of the demo quarter, a sixth of
    the whole run (measured on the project's 2-core machine; the demo run 2.66 -> 2.35 s,
    median of 10 pairs). None of it is needed here: every output is written and closed by its
    ``with`` block before a command returns, and the folder swap has finished. What an exit
    must still do is done first: the ``atexit`` handlers run (they stop a compile process
    not needed, flush logging), and standard output and error are flushed. Python's own exit
    is taken instead when a thread it would wait for is still running, when flushing fails (a
    closed pipe: Python then reports it and exits 120, as it always has), or when a profiler,
    a debugger or a coverage tool watches the process (they report as Python exits).
    """
    ordinary = _watched() or any(t is not threading.main_thread() and not t.daemon and t.is_alive()
                                 for t in threading.enumerate())
    try:
        _flush()
    except (OSError, ValueError):
        ordinary = True
    if ordinary:
        sys.exit(code)
    status = _status(code)
    # the handlers Python would run at exit, in its order (atexit's own runner: underscored,
    # but in CPython's atexit module since Python 2)
    atexit._run_exitfuncs()
    try:  # what a handler printed
        _flush()
    finally:
        os._exit(status)


def _flush() -> None:
    for stream in (sys.stdout, sys.stderr):
        if stream is not None:  # none without a console (pythonw)
            stream.flush()


if __name__ == "__main__":  # pragma: no cover
    command()
