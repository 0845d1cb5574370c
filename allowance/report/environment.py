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


def _requirements(listed: list[str] | None) -> list[str]:
    """Names a distribution requires (its ``Requires-Dist`` lines) outside its optional extras,
    installed or not."""
    names = []
    for line in listed or []:
        requirement, _, marker = line.partition(";")
        if "extra" in marker:
            continue  # an optional extra: not part of what a run needs
        match = _NAME.match(requirement)
        if match:
            names.append(match.group(1))
    return names


def _installed(name: str) -> tuple[str, list[str]] | None:
    """A distribution's version and the names it requires, from its metadata file's header
    lines (the core metadata format: ``Version:`` once, ``Requires-Dist:`` per requirement,
    before the first blank line). Read as lines: parsing each file as a mail message, as
    ``metadata.metadata`` does, took 12-15 ms of a run for some thirty packages, this 3 ms."""
    try:
        found = metadata.distribution(name)
    except metadata.PackageNotFoundError:
        return None
    text = found.read_text("METADATA") or found.read_text("PKG-INFO") or ""
    version, listed = None, []
    for line in text.split("\n\n", 1)[0].splitlines():  # the header block
        key, colon, value = line.partition(":")
        if not colon or line[:1].isspace():  # a continued line (a long description's)
            continue
        key = key.strip().lower()
        if key == "version" and version is None:
            version = value.strip()
        elif key == "requires-dist":
            listed.append(value.strip())
    if version is None:  # not in the usual layout: the standard library's own reading
        return found.metadata["Version"], _requirements(found.metadata.get_all("Requires-Dist"))
    return version, _requirements(listed)


@functools.lru_cache(maxsize=1)
def _packages() -> tuple[tuple[str, str], ...]:
    found: dict[str, str] = {}
    own = _installed("allowance")
    queue = own[1] if own is not None else []
    while queue:
        name = _canonical(queue.pop())
        if name in found:
            continue
        installed = _installed(name)
        if installed is None:
            continue  # a requirement whose marker excludes this platform
        found[name], needs = installed
        queue.extend(needs)
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
