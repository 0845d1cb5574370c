"""Scalar maths the compiled loops call, made known to numba only once numba is loaded.

Implements
----------
jitable           mark a plain Python function as callable from compiled code
register_pending  hand every marked function to numba (``allowance.jit`` calls it on load)

numba's own ``register_jitable`` needs numba imported, about 0.3-0.6 s, and the modules that
use it (discounting, LGD, refinance, shortfall) are read by commands that never compile
anything (``allowance check`` validates a tape against the assumptions). :func:`jitable`
leaves the function exactly as written, a plain function on numbers or numpy arrays, and
only records it; :func:`register_pending` then registers each with
``numba.extending.register_jitable`` (which returns the function unchanged and adds an
overload numba resolves when it compiles a caller), and :mod:`allowance.jit`, which every
module compiling a loop imports first, calls it as it loads numba. A function marked once
numba is loaded is registered at once. Code that compiles these functions itself
(``numba.njit(f)``) after importing them before numba imports :mod:`allowance.jit` first.
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from typing import TypeVar

__all__ = ["jitable", "register_pending"]

F = TypeVar("F", bound=Callable)

#: Set by the console entry point: the command line's process compiles only this package's
#: kernels, none of which calls linear algebra, so :mod:`allowance.jit` may load numba without
#: its probe for scipy's BLAS (see ``allowance.jit._load_array_maths``). A library user's
#: process keeps numba as it comes.
COMMAND_LINE = False

_pending: list[Callable] = []
_registered = False


def jitable(fn: F) -> F:
    """Mark ``fn`` as callable from compiled code; returns ``fn`` itself, unchanged.

    Examples
    --------
    >>> @jitable
    ... def twice(x):
    ...     return 2.0 * x
    >>> twice(1.5)
    3.0
    """
    if _registered or "numba" in sys.modules:  # numba already here: nothing to save by waiting
        _register(fn)
    else:
        _pending.append(fn)
    return fn


def register_pending() -> None:
    """Register every marked function with numba, and any marked later at once."""
    global _registered
    _registered = True
    while _pending:
        _register(_pending.pop(0))


def _register(fn: Callable) -> None:
    from numba.extending import register_jitable

    register_jitable(fn)

