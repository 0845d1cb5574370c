"""Shared test set-up: the Hypothesis profiles and the fixtures several modules use.

Hypothesis profiles
-------------------
``ci``       derandomised: the same examples on every run, so CI is reproducible. Chosen when
             the environment sets ``CI`` (``.ci/run`` does), or by ``HYPOTHESIS_PROFILE=ci``.
``dev``      the default elsewhere: random examples, replayed from the local example
             database when one fails, so a developer's runs keep exploring.

Every profile drops Hypothesis's per-example deadline: the first example of a test may
compile a numba loop, and speed lives in ``tests/bench/``, never in timed tests.

Slow tests
----------
End-to-end tests through the command line and the demo carry ``@pytest.mark.slow``.
CI runs everything; ``pytest -m "not slow"`` skips them locally.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest
from hypothesis import HealthCheck, settings

from allowance.intake import load_assumptions
from tests.strategies import INTAKE_ASSUMPTIONS

settings.register_profile(
    "ci", derandomize=True, deadline=None, print_blob=True, suppress_health_check=[HealthCheck.too_slow]
)
settings.register_profile("dev", deadline=None)


def _profile() -> str:
    chosen = os.environ.get("HYPOTHESIS_PROFILE")
    if chosen:
        return chosen
    return "ci" if os.environ.get("CI", "").strip().lower() not in ("", "0", "false", "no") else "dev"


settings.load_profile(_profile())


@pytest.fixture()
def intake_config(tmp_path: Path):
    """The small intake assumptions (three segments, CECL only) as a validated RunConfig."""
    path = tmp_path / "assumptions.toml"
    path.write_text(INTAKE_ASSUMPTIONS, encoding="utf-8")
    return load_assumptions(path)


@pytest.fixture(scope="session")
def demo_out(tmp_path_factory) -> Path:
    """The shipped demo quarter end, run once through the command line for the whole session."""
    from typer.testing import CliRunner

    from allowance.cli import app

    out = tmp_path_factory.mktemp("demo") / "demo-out"
    result = CliRunner().invoke(app, ["demo", "--out", str(out)], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    (out.parent / "console.txt").write_text(result.output, encoding="utf-8")  # what the user saw
    return out
