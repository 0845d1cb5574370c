"""What a long command shows while it works: the phase, and a bar for the loans and the files.

Implements
----------
Display   a progress display on a terminal (rich), silent elsewhere; the library API's
          ``progress(phase, done, total)`` callback

The display writes to standard error and only when standard error is a terminal, so a pipe,
a log file or a scheduler's capture gets the command's plain output and nothing else. It is
transient: once the command ends the bars are gone and the summary stands alone.
"""

from __future__ import annotations

import sys
from types import TracebackType
from typing import IO, Any

#: what each phase of a run is called on the screen (the API's phase names)
PHASES: dict[str, str] = {
    "cluster": "starting or joining the Dask cluster",
    "read": "reading the tape",
    "loans": "computing the allowance",
    "sensitivities": "each scenario at 100 % weight",
    "what-if": "the base run for the what-if",
    "prior": "the movement from the prior run",
    "write": "writing the outputs",
}


def is_terminal(stream: IO[str] | None = None) -> bool:
    """Whether ``stream`` (standard error by default) is an interactive terminal."""
    stream = sys.stderr if stream is None else stream
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):  # a closed or replaced stream
        return False


class Display:
    """A transient progress display: one line per phase, with a bar where the total is known.

    Use it as a context manager and pass it as the API's ``progress`` callback; when
    ``enabled`` is false (not a terminal, ``--quiet``, ``--json``) every call does nothing
    and rich is never imported.

    Examples
    --------
    >>> with Display(enabled=False) as shown:
    ...     shown("loans", 500, 1000)
    >>> shown.seen
    ['loans']
    """

    def __init__(self, enabled: bool | None = None, *, stream: IO[str] | None = None) -> None:
        self.enabled = is_terminal(stream) if enabled is None else enabled
        self.stream = stream
        self.seen: list[str] = []  # the phases reported, in order
        self._progress: Any = None
        self._tasks: dict[str, Any] = {}

    def __enter__(self) -> "Display":
        if self.enabled:
            from rich.console import Console
            from rich.progress import (BarColumn, MofNCompleteColumn, Progress, SpinnerColumn, TextColumn,
                                       TimeElapsedColumn)

            console = Console(file=self.stream or sys.stderr)
            self._progress = Progress(SpinnerColumn(), TextColumn("{task.description:<34}"), BarColumn(),
                                      MofNCompleteColumn(), TimeElapsedColumn(), console=console, transient=True)
            self._progress.start()
        return self

    def __exit__(self, kind: type[BaseException] | None, error: BaseException | None,
                 trace: TracebackType | None) -> None:
        if self._progress is not None:
            self._progress.stop()
            self._progress = None

    def __call__(self, phase: str, done: int, total: int) -> None:
        """The API's progress callback: ``done`` of ``total`` in ``phase``."""
        if phase not in self.seen:
            self.seen.append(phase)
        if self._progress is None:
            return
        task = self._tasks.get(phase)
        if task is None:
            for other in self._tasks.values():  # a new phase: the earlier ones are finished
                self._progress.update(other, completed=self._progress.tasks[other].total)
            task = self._tasks[phase] = self._progress.add_task(PHASES.get(phase, phase), total=max(total, 1))
        self._progress.update(task, completed=done, total=max(total, 1))
