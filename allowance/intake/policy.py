"""Read a calibration policy file: the tables of the assumptions file that history cannot estimate.

A policy file has the shape of an assumptions file (``[run]``, ``[ifrs9]``, ``[cecl]``,
``[scenarios.*]``, ``[[overlays]]``, and segment keys that override an estimate), plus a
``[calibration]`` table of :class:`allowance.calibrate.settings.CalibrationSettings`. It is
checked when the calibrated assumptions are validated as a whole; here it is only read.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from allowance.intake.assumptions import _read_toml


def read_policy(path: Path) -> dict[str, Any]:
    """The policy file as a mapping.

    Raises
    ------
    AssumptionsError
        Missing, not UTF-8, or not valid TOML (naming the line and column).
    """
    return _read_toml(Path(path))
