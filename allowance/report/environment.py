"""The software a run ran on, for the run record: Python and every installed dependency version.

Implements
----------
environment   Python, the platform, and the version of every package ``allowance`` depends
              on, directly or through another package (its installed requirement closure)

A figure can change with a library version (pandas rounding, numba's compiled maths), so
repeating a run exactly needs the same versions; the record pins them.
"""

from __future__ import annotations

import functools
import importlib.metadata as metadata
import platform
import re

__all__ = ["environment"]

_NAME = re.compile(r"^\s*([A-Za-z0-9][A-Za-z0-9._-]*)")


def _canonical(name: str) -> str:
    """PEP 503 normalised name: ``Typing_Extensions`` -> ``typing-extensions``."""
    return re.sub(r"[-_.]+", "-", name).lower()


def _requirements(distribution: str) -> list[str]:
    """Names a distribution requires outside its optional extras (installed or not)."""
    try:
        listed = metadata.requires(distribution) or []
    except metadata.PackageNotFoundError:
        return []
    names = []
    for line in listed:
        requirement, _, marker = line.partition(";")
        if "extra" in marker:
            continue  # an optional extra: not part of what a run needs
        match = _NAME.match(requirement)
        if match:
            names.append(match.group(1))
    return names


@functools.lru_cache(maxsize=1)
def _packages() -> tuple[tuple[str, str], ...]:
    found: dict[str, str] = {}
    queue = _requirements("allowance")
    while queue:
        name = _canonical(queue.pop())
        if name in found:
            continue
        try:
            found[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            continue  # a requirement whose marker excludes this platform
        queue.extend(_requirements(name))
    return tuple(sorted(found.items()))


def environment() -> dict[str, object]:
    """Python, the platform and the installed version of every dependency, for ``run.json``.

    Returns
    -------
    dict
        ``python`` (``3.11.9``), ``implementation`` (``CPython``), ``platform``
        (``Linux-6.1-x86_64``...), and ``packages``: name -> version for every package in
        the installed requirement closure of ``allowance`` (extras excluded), sorted by name.

    Examples
    --------
    >>> env = environment()
    >>> sorted(env) == ["implementation", "packages", "platform", "python"]
    True
    >>> "numpy" in env["packages"] or env["packages"] == {}
    True
    """
    return {
        "python": platform.python_version(),
        "implementation": platform.python_implementation(),
        "platform": platform.platform(),
        "packages": dict(_packages()),
    }
