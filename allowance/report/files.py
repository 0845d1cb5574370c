"""The output folder: every file of a run, written safely (all or nothing).

Implements
----------
OUTPUT_FILES   the files a run can write, in the order they are written
write_outputs  write every output into a temporary sibling folder, then move it into place

Safe writing
------------
Everything is written into ``.<out>.partial-XXXX`` beside the output folder. Only when every
file is complete does it move into place: a rename of the whole folder when the output folder
does not exist yet (atomic), otherwise file by file with ``os.replace`` (each atomic), the old
``run.json`` removed first and the new one moved last. ``run.json`` therefore marks a complete
folder. Any failure removes the partial folder and leaves the previous outputs as they were.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pa_csv

from allowance.exceptions import OutputError
from allowance.report.record import RunReport, run_record
from allowance.report.sheets import warnings_frame
from allowance.report.workbook import write_summary_workbook, write_workbook
from allowance.text import neutralise_frame

__all__ = ["OUTPUT_FILES", "write_outputs"]

OUTPUT_FILES: tuple[str, ...] = (
    "loans.csv", "loans.parquet", "rejected.csv", "warnings.csv", "movement.csv", "movement_loans.csv",
    "what_if.csv", "what_if_stage_changes.csv", "what_if_macro_paths.csv", "sensitivity.csv", "macro_paths.csv",
    "reserve.xlsx", "summary.xlsx", "run.json",
)


def _arrow_ready(frame: pd.DataFrame) -> pd.DataFrame:
    """Dates without a time of day as dates (``2026-09-30``, not a timestamp)."""
    out = frame
    for position in range(frame.shape[1]):
        column = frame.iloc[:, position]
        if pd.api.types.is_datetime64_any_dtype(column.dtype) and not getattr(column.dtype, "tz", None):
            stamps = column.to_numpy(dtype="datetime64[ns]")
            days = stamps.astype("datetime64[D]")
            if (np.isnat(stamps) | (stamps == days)).all():
                out = out.copy() if out is frame else out
                out.isetitem(position, pd.Series(days, index=frame.index).dt.date)
    return out


def _csv(frame: pd.DataFrame, path: Path) -> None:
    """Text neutralised; written by Arrow (fast), or by pandas for columns Arrow cannot type."""
    safe = neutralise_frame(frame)
    if safe.columns.duplicated().any():  # Arrow needs unique names
        safe.to_csv(path, index=False, lineterminator="\n")
        return
    try:
        table = pa.Table.from_pandas(_arrow_ready(safe), preserve_index=False)
    except (pa.ArrowInvalid, pa.ArrowTypeError, pa.ArrowNotImplementedError, TypeError, ValueError):
        safe.to_csv(path, index=False, lineterminator="\n")
        return
    pa_csv.write_csv(table, path, write_options=pa_csv.WriteOptions(quoting_style="needed"))


def _write_all(folder: Path, report: RunReport, parquet: bool) -> list[str]:
    written: list[str] = []

    def done(name: str) -> None:
        written.append(name)

    _csv(report.loans, folder / "loans.csv")
    done("loans.csv")
    if parquet:
        # typed data, not a spreadsheet: text is kept exactly as the tape gave it
        report.loans.to_parquet(folder / "loans.parquet", index=False)
        done("loans.parquet")
    _csv(report.intake.rejected, folder / "rejected.csv")
    done("rejected.csv")
    _csv(warnings_frame(report), folder / "warnings.csv")
    done("warnings.csv")
    if report.movements:
        _csv(pd.concat([m.to_long() for m in report.movements], ignore_index=True), folder / "movement.csv")
        done("movement.csv")
        loans = [m.loans.assign(framework=m.framework)[["framework", *m.loans.columns]] for m in report.movements]
        _csv(pd.concat(loans, ignore_index=True), folder / "movement_loans.csv")
        done("movement_loans.csv")
    if report.what_if_parts is not None:
        _csv(report.what_if_parts.summary, folder / "what_if.csv")
        done("what_if.csv")
        _csv(report.what_if_parts.stage_changes, folder / "what_if_stage_changes.csv")
        done("what_if_stage_changes.csv")
    if report.what_if_paths is not None and not report.what_if_paths.empty:
        _csv(report.what_if_paths, folder / "what_if_macro_paths.csv")
        done("what_if_macro_paths.csv")
    if report.sensitivity is not None and not report.sensitivity.empty:
        _csv(report.sensitivity, folder / "sensitivity.csv")
        done("sensitivity.csv")
    if report.macro_paths is not None and not report.macro_paths.empty:
        _csv(report.macro_paths, folder / "macro_paths.csv")
        done("macro_paths.csv")
    write_workbook(folder / "reserve.xlsx", report)
    done("reserve.xlsx")
    write_summary_workbook(folder / "summary.xlsx", report)
    done("summary.xlsx")
    record = report.record or run_record(
        report.config, report.intake, report.loans, tie_out=report.tie_out, warnings=report.warnings,
        movements=report.movements,
    )
    (folder / "run.json").write_text(json.dumps(record, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    done("run.json")
    return written


def _move_into_place(partial: Path, out_dir: Path, names: list[str]) -> None:
    if not out_dir.exists():
        os.replace(partial, out_dir)
        return
    if not any(out_dir.iterdir()):
        out_dir.rmdir()
        os.replace(partial, out_dir)
        return
    # an earlier run's folder: its run.json goes first, so a mixed folder never looks finished
    (out_dir / "run.json").unlink(missing_ok=True)
    for stale in OUTPUT_FILES:
        if stale not in names:
            (out_dir / stale).unlink(missing_ok=True)
    for name in names:
        if name != "run.json":
            os.replace(partial / name, out_dir / name)
    os.replace(partial / "run.json", out_dir / "run.json")
    partial.rmdir()


def write_outputs(out_dir: Path, report: RunReport, *, parquet: bool = False) -> list[Path]:
    """Write every output of a run into ``out_dir``, all or nothing.

    Parameters
    ----------
    out_dir : Path
        The output folder; created (with its parents) if missing. Files of ours from an
        earlier run are replaced; other files in it are left alone.
    report : RunReport
        The run. When ``report.record`` is empty the run record is built here.
    parquet : bool
        Also write ``loans.parquet`` (text as read, not neutralised: it is not a spreadsheet).

    Returns
    -------
    list of Path
        The files written, in :data:`OUTPUT_FILES` order.

    Raises
    ------
    OutputError
        The folder cannot be created or a file cannot be written; nothing is left half written.

    Notes
    -----
    ``loans.csv``, ``rejected.csv``, ``warnings.csv``, ``movement*.csv``, ``what_if*.csv``
    and the workbook neutralise text that a spreadsheet would read as a formula
    (:func:`~allowance.text.neutralise_text`).
    """
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputError("the output path exists and is not a folder", file=out_dir,
                          hint="choose a folder name for --out")
    parent = out_dir.absolute().parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
        partial = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.partial-", dir=parent))
        # mkdtemp makes the folder private; the finished folder gets the user's usual mode
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(partial, 0o777 & ~umask)
    except OSError as err:
        raise OutputError(f"cannot create the output folder ({err.strerror or err})", file=out_dir,
                          hint="check the path and that you may write there") from err
    try:
        names = _write_all(partial, report, parquet)
        _move_into_place(partial, out_dir, names)
    except OSError as err:
        shutil.rmtree(partial, ignore_errors=True)
        where = err.filename or out_dir
        raise OutputError(f"cannot write the outputs ({err.strerror or err})", file=where,
                          hint="check free space and permissions, and close the files if a program has them open") from err
    except BaseException:
        shutil.rmtree(partial, ignore_errors=True)
        raise
    return [out_dir / name for name in names]
