"""The run's clock: the one place that decides what time a run's outputs record.

Implements
----------
now                 the run's "now" (UTC): ``SOURCE_DATE_EPOCH`` when set, else the system clock
source_date_epoch   the pinned time from ``SOURCE_DATE_EPOCH``, or None when it is not set

Every timestamp a run writes (``run.json``'s ``started`` and ``timestamp``, the workbook's
document properties, its timestamp cells and its ZIP entry times) comes from :func:`now`, so
that two runs of the same inputs with ``SOURCE_DATE_EPOCH`` set are byte-identical.

References
----------
.. [1] Reproducible Builds, "SOURCE_DATE_EPOCH specification", version 1.1,
   https://reproducible-builds.org/specs/source-date-epoch/ : the variable holds a whole
   number of seconds since 1970-01-01 00:00:00 UTC, written in ASCII digits; a malformed
   value should stop the process with an error rather than be ignored.
"""

from __future__ import annotations

import os
import re
from collections.abc import Mapping
from datetime import datetime, timezone

from allowance.exceptions import AllowanceError

__all__ = ["ENVIRONMENT_VARIABLE", "now", "source_date_epoch"]

#: The environment variable of the reproducible-builds convention.
ENVIRONMENT_VARIABLE = "SOURCE_DATE_EPOCH"

_DIGITS = re.compile(r"[0-9]+")
# datetime cannot hold years past 9999: 253402300799 is 9999-12-31T23:59:59Z.
_LAST_SECOND = 253_402_300_799


def source_date_epoch(environ: Mapping[str, str] | None = None) -> datetime | None:
    """The time pinned by ``SOURCE_DATE_EPOCH`` (UTC, whole seconds), or None when unset or empty.

    ``environ`` defaults to the process environment.

    Raises
    ------
    AllowanceError
        The variable is set but is not a whole number of seconds from 0 to 253402300799
        (the specification asks a malformed value to be an error, not ignored).

    Examples
    --------
    >>> source_date_epoch({"SOURCE_DATE_EPOCH": "1790812800"}).isoformat()
    '2026-10-01T00:00:00+00:00'
    >>> source_date_epoch({}) is None
    True
    """
    text = (os.environ if environ is None else environ).get(ENVIRONMENT_VARIABLE, "")
    if text == "":
        return None
    if not _DIGITS.fullmatch(text) or int(text) > _LAST_SECOND:
        raise AllowanceError(
            f"the environment variable {ENVIRONMENT_VARIABLE}={text!r} is not a whole number of seconds since 1970",
            hint=f"set it to digits only, e.g. {ENVIRONMENT_VARIABLE}=$(date +%s), or unset it",
        )
    return datetime.fromtimestamp(int(text), tz=timezone.utc)


def now(environ: Mapping[str, str] | None = None) -> datetime:
    """The run's current time, timezone-aware in UTC, to the second.

    ``SOURCE_DATE_EPOCH`` when it is set (reproducible outputs), otherwise the system clock
    with the microseconds dropped (a run record states seconds).

    Examples
    --------
    >>> now({"SOURCE_DATE_EPOCH": "0"}).isoformat()
    '1970-01-01T00:00:00+00:00'
    >>> t = now({})
    >>> t.tzinfo is timezone.utc and t.microsecond == 0
    True
    """
    pinned = source_date_epoch(environ)
    if pinned is not None:
        return pinned
    return datetime.now(timezone.utc).replace(microsecond=0)
