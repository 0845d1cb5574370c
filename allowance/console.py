"""The console entry point, kept light so that Ctrl-C at any moment ends the program cleanly.

The command line imports pandas, pyarrow and numba before it can do anything; a Ctrl-C while
they load used to print a traceback. Here the import itself is guarded: an interruption at
any point prints one line and exits with 130 (128 + SIGINT, the shell convention).
"""

from __future__ import annotations

import os
import sys

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
        sys.stdout.flush()
        sys.stderr.flush()
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


#: The commands whose first run compiles the ECL loop in a second process
#: (:func:`allowance.jitcache.compile_ahead`) while this one loads its libraries and reads the
#: tape. First run of the demo tape on the project's 2-core machine, paired, empty compile
#: cache: 6.8 -> 4.7 s quiet, 5.76 -> 5.74 s with another job on the machine; the demo
#: command (which calibrates first) 14.1 -> 12.1 s. ``backtest`` reads a history and a tape
#: before its first loop, as ``run`` does.
_COMPUTING = frozenset({"run", "demo", "backtest"})


def main() -> None:
    """Run the command line; Ctrl-C during start-up or a run exits 130 with one line."""
    try:
        from allowance import jitable

        jitable.COMMAND_LINE = True  # numba may skip its BLAS probe here (allowance.jit)
        from allowance import aside

        aside.ALLOWED = True  # a workbook may be written by a forked copy (allowance.aside)
        if sys.argv[1:2] and sys.argv[1] in _COMPUTING:
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


if __name__ == "__main__":  # pragma: no cover
    main()
