"""The run record's package list read as the standard library reads it.

External check: ``importlib.metadata`` (Python standard library), which parses each
distribution's metadata as a mail message; the record reads the header lines itself.
"""

from __future__ import annotations

import importlib.metadata as metadata

from allowance.report import environment


def test_every_version_and_requirement_is_the_standard_librarys():
    packages = dict(environment._packages())
    assert "numpy" in packages and "pandas" in packages
    for name, version in packages.items():
        assert version == metadata.version(name), name
        _, needs = environment._installed(name)
        assert needs == environment._requirements(metadata.requires(name)), name


def test_the_closure_holds_each_requirement_that_is_installed():
    packages = dict(environment._packages())
    for name in packages:
        for need in environment._requirements(metadata.requires(name)):
            try:
                metadata.version(need)
            except metadata.PackageNotFoundError:
                continue  # a requirement for another platform
            assert environment._canonical(need) in packages, (name, need)


def test_a_package_not_installed_is_none():
    assert environment._installed("no-such-package-anywhere") is None
