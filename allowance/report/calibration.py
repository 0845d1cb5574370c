"""The outputs of a calibration: the assumptions file, the roll-rate and loss-rate files, the evidence.

Implements
----------
CALIBRATION_CAUTION   the caution on the workbook and at the top of the assumptions file
CALIBRATION_FILES     the files a calibration writes (besides one roll-rate set per segment)
render_assumptions    the assumptions draft as TOML text, every figure with its comment
matrix_csv            a roll-rate matrix (or its counts) in the form ``transition_matrix`` reads
calibration_record    ``calibration.json``: version, the history's SHA-256, counts, choices, files
write_calibration     the whole folder, written safely (all or nothing)

Files
-----
``assumptions.toml``               a complete assumptions file ``allowance run`` accepts as it is
``rolls_<segment>.csv``            the chosen roll-rate matrix (count- or balance-weighted)
``rolls_<segment>_by_<other>.csv`` the other weighting, in the same form
``rolls_<segment>_counts.csv``     the observations behind them
``loss_rates.csv``                 segment, month, opening balance, GCL, NCL and their rates
``loss_rate_methods.csv``          per segment the WARM, pool and vintage inputs estimated
``vintage_losses.csv``             net loss by segment and month of age over original balance
``satellite_models.csv``           with ``--macro``: each segment's fitted coefficients, standard errors
                                   and fit statistics (``satellite_fitted.csv``: observed and fitted rates)
``calibration.xlsx``               the evidence a validator asks for
``rejected.csv``, ``warnings.csv`` history rows rejected (with line and reasons) and flagged
``calibration.json``               the calibration record (written last: it marks a complete folder)
"""

from __future__ import annotations

import json
import math
import os
import re
import shutil
import tempfile
from collections.abc import Callable
from datetime import date, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

import allowance
from allowance.calibrate.assumptions import Entry, Table, rolls_file
from allowance.exceptions import OutputError
from allowance.report.clock import now
from allowance.text import neutralise_frame

if TYPE_CHECKING:
    from allowance.calibrate import Calibration

__all__ = ["CALIBRATION_CAUTION", "CALIBRATION_FILES", "calibration_record", "matrix_csv", "render_assumptions",
           "write_calibration"]

#: The caution of a calibration (workbook, assumptions file, README).
CALIBRATION_CAUTION = (
    "These assumptions are estimated from the history named here, under the choices listed with "
    "them; the past is not the future, and forward-looking information (IFRS 9 5.5.17, ASC "
    "326-20-30-9) enters through the scenarios and overlays, not through this calibration. Before "
    "they are used, the estimates, the choices and the policy figures must be reviewed and "
    "approved under the entity's own governance and model-risk policy. Where this output and the "
    "applicable accounting standard (ASC 326 or IFRS 9), the entity's auditors or its regulators "
    "differ, they prevail over this tool."
)

CALIBRATION_FILES: tuple[str, ...] = (
    "assumptions.toml", "loss_rates.csv", "loss_rate_methods.csv", "vintage_losses.csv", "satellite_models.csv",
    "satellite_fitted.csv", "rejected.csv",
    "warnings.csv", "calibration.xlsx", "calibration.json",
)
_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")
_WIDTH = 100


# --------------------------------------------------------------------------------------
# TOML
# --------------------------------------------------------------------------------------


def _key(key: str) -> str:
    return key if _BARE_KEY.match(key) else json.dumps(key, ensure_ascii=False)


def _dotted(name: str) -> str:
    return ".".join(_key(part) for part in name.split("."))


def toml_value(value: Any) -> str:
    """A value as TOML: strings, booleans, integers, floats, dates, lists and inline tables.

    Examples
    --------
    >>> [toml_value(v) for v in ("a\\"b", True, 3, 0.25, 1e-05, date(2026, 9, 30), [1, 2.5], {"A": 0.1})]
    ['"a\\\\"b"', 'true', '3', '0.25', '1e-05', '2026-09-30', '[1, 2.5]', '{ A = 0.1 }']
    """
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        if not math.isfinite(value):
            raise ValueError(f"{value!r} cannot be written to TOML")
        return repr(float(value))
    if isinstance(value, datetime):
        return value.isoformat()
    if isinstance(value, date):
        return value.isoformat()
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{_key(str(k))} = {toml_value(v)}" for k, v in value.items()) + " }" if value else "{}"
    return json.dumps(str(value), ensure_ascii=False)


def _comment_lines(text: str, indent: str = "") -> list[str]:
    """A comment wrapped to the width, each line starting ``# ``."""
    words, lines, line = text.split(), [], ""
    for word in words:
        if line and len(indent) + 2 + len(line) + 1 + len(word) > _WIDTH:
            lines.append(f"{indent}# {line}")
            line = word
        else:
            line = f"{line} {word}" if line else word
    if line:
        lines.append(f"{indent}# {line}")
    return lines


def _with_comment(code: str, comment: str) -> list[str]:
    if not comment:
        return [code]
    pad = max(34, len(code))
    if pad + 3 + len(comment) <= _WIDTH + 20:
        return [f"{code.ljust(pad)} # {comment}"]
    return [*_comment_lines(comment), code]


def _entry_lines(entry: Entry, value: Any) -> list[str]:
    key = _key(entry.key)
    if isinstance(value, (list, tuple)) and entry.item_comments:
        lines = _comment_lines(entry.comment) + [f"{key} = ["]
        step = max(1, entry.per_line)
        chunks = [value[i:i + step] for i in range(0, len(value), step)]
        for i, chunk in enumerate(chunks):
            code = "    " + ", ".join(toml_value(v) for v in chunk) + ","
            note = entry.item_comments[i] if i < len(entry.item_comments) else ""
            lines.append(f"{code.ljust(34)} # {note}" if note else code)
        lines.append("]")
        return lines
    return _with_comment(f"{key} = {toml_value(value)}", entry.comment)


def _table_lines(table: Table, rename: Callable[[str], str]) -> list[str]:
    head = f"[[{_dotted(table.name)}]]" if table.array else f"[{_dotted(table.name)}]"
    lines = ["", head] + [line for note in table.notes for line in _comment_lines(note)]
    subtables = []
    for entry in table.entries:
        value = rename(entry.value) if entry.key == "transition_matrix" else entry.value
        long_list = isinstance(value, dict) and any(isinstance(v, (list, tuple)) and len(v) > 6 for v in value.values())
        if isinstance(value, dict) and (entry.item_comments or any(isinstance(v, dict) for v in value.values())
                                        or len(value) > 3 or long_list):
            subtables.append((entry, value))
            continue
        lines += _entry_lines(entry, value)
    for entry, value in subtables:
        lines += ["", f"[{_dotted(table.name)}.{_key(entry.key)}]"] + _comment_lines(entry.comment)
        for i, (k, v) in enumerate(value.items()):
            note = entry.item_comments[i] if i < len(entry.item_comments) else ""
            if isinstance(v, dict):
                lines += [f"{_key(str(k))} = {toml_value(v)}"]
            else:
                lines += _with_comment(f"{_key(str(k))} = {toml_value(v)}", note)
    return lines


def render_assumptions(calibration: "Calibration", matrix_name: Callable[[str], str] | None = None) -> str:
    """The assumptions draft as TOML text: the header and caution, then every table.

    ``matrix_name`` maps a segment to the file its ``transition_matrix`` key names (default
    ``rolls_<segment>.csv``, beside the assumptions file).
    """
    draft = calibration.assumptions
    by_file = {rolls_file(s): s for s in draft.matrices}
    name_of = matrix_name or rolls_file

    def rename(value: str) -> str:
        return name_of(by_file[value]) if value in by_file else value

    lines = [line for text in draft.header for line in _comment_lines(text)]
    lines += ["#"] + _comment_lines("Caution: " + CALIBRATION_CAUTION)
    for table in draft.tables:
        lines += _table_lines(table, rename)
    return "\n".join(lines).rstrip() + "\n"


# --------------------------------------------------------------------------------------
# CSV
# --------------------------------------------------------------------------------------


def _decimal(value: float) -> str:
    text = f"{value:.8f}".rstrip("0").rstrip(".")
    return text if text not in ("", "-0") else "0"


def matrix_csv(states: tuple[str, ...] | list[str], values: np.ndarray, integers: bool = False) -> str:
    """A matrix in the ``transition_matrix`` form: ``from,<state>,...`` then one row per state.

    Examples
    --------
    >>> print(matrix_csv(("current", "charge_off"), np.array([[0.75, 0.25], [0.0, 1.0]])), end="")
    from,current,charge_off
    current,0.75,0.25
    charge_off,0,1
    """
    lines = ["from," + ",".join(states)]
    for state, row in zip(states, np.asarray(values)):
        cells = [str(int(v)) if integers else _decimal(float(v)) for v in row]
        lines.append(f"{state}," + ",".join(cells))
    return "\n".join(lines) + "\n"


def _csv(frame: pd.DataFrame, path: Path) -> None:
    neutralise_frame(frame).to_csv(path, index=False, lineterminator="\n")


# --------------------------------------------------------------------------------------
# The record
# --------------------------------------------------------------------------------------


def _plain(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, (date, datetime)):
        return value.isoformat()
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    return value


def _macro_record(path: Path | None) -> dict[str, Any] | None:
    if path is None:
        return None
    import hashlib

    data = Path(path).read_bytes()
    return {"path": str(path), "sha256": hashlib.sha256(data).hexdigest(), "bytes": len(data)}


def satellite_tables(calibration: "Calibration") -> tuple[pd.DataFrame, pd.DataFrame]:
    """Every fitted satellite model: coefficients and statistics in one table, the monthly fit in another."""
    fits = calibration.results.get("satellites", {}) or {}
    models, fitted = [], []
    for name, fit in fits.items():
        coefficients = fit.coefficients.assign(segment=name, link=fit.link, standard_errors=fit.standard_errors)
        models.append(coefficients[["segment", "link", "standard_errors", *fit.coefficients.columns]])
        stats = fit.statistics.rename(columns={"statistic": "term", "value": "coefficient"})
        models.append(stats.assign(segment=name, link=fit.link, standard_errors=fit.standard_errors))
        fitted.append(fit.fitted.iloc[:, :5].assign(segment=name))
    model = pd.concat(models, ignore_index=True) if models else pd.DataFrame()
    monthly = pd.concat(fitted, ignore_index=True) if fitted else pd.DataFrame()
    if not monthly.empty:
        monthly = monthly[["segment", *[c for c in monthly.columns if c != "segment"]]]
    return model, monthly


def calibration_record(calibration: "Calibration", files: list[str]) -> dict[str, Any]:
    """The calibration record: what was read, what was chosen, what was written."""
    intake, frame = calibration.intake, calibration.frame
    return {
        "tool": "allowance calibrate",
        "version": allowance.__version__,
        "written": now().isoformat(),
        "history": {
            "path": str(calibration.history_file) if calibration.history_file else None,
            "sha256": intake.file.sha256, "bytes": intake.file.bytes,
            "first_month": intake.first_month, "last_month": intake.last_month,
            "columns": intake.columns, "ignored_columns": intake.ignored,
        },
        "policy": str(calibration.policy_file) if calibration.policy_file else None,
        "macro": _macro_record(calibration.macro_file),
        "rows": {"read": intake.rows_read, "accepted": intake.rows_accepted, "rejected": intake.rows_rejected,
                 "blank_lines": intake.blank_rows, "after_as_of": calibration.rows_after_as_of},
        "as_of": frame.window[1], "window": list(frame.window),
        "segments": {name: {"charge_off_dpd": int(frame.charge_off_dpd[s]), "revolving": bool(frame.revolving[s]),
                            "pd_source": frame.pd_source[s]} for s, name in enumerate(frame.segments)},
        "settings": _plain(calibration.settings.model_dump()),
        "choices": [{"topic": c.topic, "value": c.value, "source": c.source, "why": c.why}
                    for c in calibration.choices],
        "files": files,
    }


# --------------------------------------------------------------------------------------
# The folder
# --------------------------------------------------------------------------------------


def _write_all(folder: Path, calibration: "Calibration", matrix_name: Callable[[str], str]) -> list[str]:
    from allowance.report.calibration_workbook import write_calibration_workbook

    written: list[str] = []

    def text(name: str, content: str) -> None:
        (folder / name).write_bytes(content.encode("utf-8"))
        written.append(name)

    text("assumptions.toml", render_assumptions(calibration, matrix_name))
    for name, rolls in calibration.results["roll_rates"].segments.items():
        chosen = matrix_name(name)
        stem = chosen[:-4] if chosen.endswith(".csv") else chosen
        text(chosen, matrix_csv(rolls.states, rolls.matrix().probabilities))
        text(f"{stem}_by_{rolls.other_weighting}.csv",
             matrix_csv(rolls.states, rolls.matrix(rolls.other_weighting).probabilities))
        text(f"{stem}_counts.csv", matrix_csv(rolls.states, rolls.counts, integers=True))
    _csv(calibration.results["loss_rates"].table, folder / "loss_rates.csv")
    written.append("loss_rates.csv")
    from allowance.calibrate.loss_methods import method_table

    _csv(method_table(calibration.results, calibration.frame), folder / "loss_rate_methods.csv")
    written.append("loss_rate_methods.csv")
    _csv(calibration.results["loss_methods"].vintage, folder / "vintage_losses.csv")
    written.append("vintage_losses.csv")
    models, monthly = satellite_tables(calibration)
    if not models.empty:
        _csv(models, folder / "satellite_models.csv")
        _csv(monthly, folder / "satellite_fitted.csv")
        written += ["satellite_models.csv", "satellite_fitted.csv"]
    _csv(calibration.intake.rejected, folder / "rejected.csv")
    written.append("rejected.csv")
    findings = calibration.intake.findings
    _csv(findings[findings["severity"] == "warning"], folder / "warnings.csv")
    written.append("warnings.csv")
    write_calibration_workbook(folder / "calibration.xlsx", calibration, matrix_name)
    written.append("calibration.xlsx")
    record = calibration_record(calibration, [*written, "calibration.json"])
    text("calibration.json", json.dumps(record, indent=2, allow_nan=False) + "\n")
    return written


def _move_into_place(partial: Path, out_dir: Path, names: list[str]) -> None:
    if not out_dir.exists() or (out_dir.is_dir() and not any(out_dir.iterdir())):
        if out_dir.exists():
            out_dir.rmdir()
        os.replace(partial, out_dir)
        return
    (out_dir / "calibration.json").unlink(missing_ok=True)  # a mixed folder never looks finished
    for old in out_dir.glob("rolls_*.csv"):
        if old.name not in names:
            old.unlink()
    for name in names:
        if name != "calibration.json":
            os.replace(partial / name, out_dir / name)
    os.replace(partial / "calibration.json", out_dir / "calibration.json")
    partial.rmdir()


def write_calibration(out_dir: Path, calibration: "Calibration", *,
                      matrix_name: Callable[[str], str] | None = None) -> list[Path]:
    """Write every output of a calibration into ``out_dir``, all or nothing.

    Parameters
    ----------
    out_dir : Path
        The folder; created if missing. Files of an earlier calibration are replaced (other
        files are left alone).
    calibration : Calibration
        What :func:`allowance.calibrate.calibrate` returned.
    matrix_name : callable, optional
        Segment -> the roll-rate file name (default ``rolls_<segment>.csv``); the assumptions
        file names the same.

    Returns
    -------
    list of Path
        The files written; ``calibration.json`` last.

    Raises
    ------
    OutputError
        The folder cannot be created or a file cannot be written; nothing is left half written.
    """
    out_dir = Path(out_dir)
    name_of = matrix_name or rolls_file
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputError("the output path exists and is not a folder", file=out_dir, hint="choose a folder for --out")
    parent = out_dir.absolute().parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
        partial = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.partial-", dir=parent))
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(partial, 0o777 & ~umask)
    except OSError as err:
        raise OutputError(f"cannot create the output folder ({err.strerror or err})", file=out_dir,
                          hint="check the path and that you may write there") from err
    try:
        names = _write_all(partial, calibration, name_of)
        _move_into_place(partial, out_dir, names)
    except OSError as err:
        shutil.rmtree(partial, ignore_errors=True)
        raise OutputError(f"cannot write the outputs ({err.strerror or err})", file=err.filename or out_dir,
                          hint="check free space and permissions, and close the files if a program has them open") from err
    except BaseException:
        shutil.rmtree(partial, ignore_errors=True)
        raise
    return [out_dir / name for name in names]
