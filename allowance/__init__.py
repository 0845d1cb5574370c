"""allowance: a CECL / IFRS 9 lifetime credit-loss allowance calculator.

The library API (frames in, frames out; see the README's notebook example)::

    import allowance
    result = allowance.run("loan_tape.csv", "assumptions.toml")
    result.totals            # allowance per framework, by stage and segment
    result.write("q3")       # loans.csv, reserve.xlsx, run.json, ...

``run``, ``check``, ``schedule``, ``roll_rates``, ``compare``, ``copy_templates`` and ``demo``
are :mod:`allowance.api`'s; ``Result`` and ``CheckResult`` are what they return. They are
imported on first use, so ``import allowance`` (and the command line's help) stays quick.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

#: the public names and the module each lives in
_EXPORTS: dict[str, str] = {
    "run": "allowance.api",
    "check": "allowance.api",
    "schedule": "allowance.api",
    "roll_rates": "allowance.api",
    "compare": "allowance.api",
    "copy_templates": "allowance.api",
    "demo": "allowance.api",
    "Result": "allowance.result",
    "CheckResult": "allowance.result",
    "AllowanceError": "allowance.exceptions",
}

__all__ = [
    "AllowanceError", "CheckResult", "Result", "__version__", "check", "compare", "copy_templates", "demo",
    "roll_rates", "run", "schedule",
]

if TYPE_CHECKING:  # pragma: no cover
    from allowance.api import check, compare, copy_templates, demo, roll_rates, run, schedule
    from allowance.exceptions import AllowanceError
    from allowance.result import CheckResult, Result


def __getattr__(name: str) -> Any:
    if name in _EXPORTS:
        value = getattr(importlib.import_module(_EXPORTS[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'allowance' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_EXPORTS))
