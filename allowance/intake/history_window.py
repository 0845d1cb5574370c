"""Read the months of a performance history that follow a date (for back-testing).

The file follows the performance-history contract (DESIGN.md): one row per loan per month,
``loan_id, segment, month, balance, days_past_due`` required; ``charge_off, bankruptcy_loss,
recoveries, asset_sales`` (blank = 0) and ``paid_off`` optional. CSV or Parquet. Only the
rows whose month falls in the window are kept; every kept row is checked, and a bad value
stops the read naming the file, the line and the column.

Implements
----------
read_history_window  history file -> the window's rows, typed
"""

from __future__ import annotations

from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd

from allowance.exceptions import InputFileError
from allowance.intake.files import check_size, file_kind

REQUIRED = ("loan_id", "segment", "month", "balance", "days_past_due")
MONEY = ("charge_off", "bankruptcy_loss", "recoveries", "asset_sales")
_TRUE = {"true", "yes", "y", "1", "t"}
_FALSE = {"false", "no", "n", "0", "f", ""}


def _month_end(values: pd.Series) -> pd.Series:
    text = values.astype("string").str.strip()
    short = text.str.fullmatch(r"\d{4}-\d{2}").fillna(False).astype(bool)
    parsed = pd.to_datetime(text.where(~short, text + "-01"), errors="coerce", format="ISO8601")
    return parsed.dt.to_period("M").dt.to_timestamp(how="end").dt.normalize()


def read_history_window(path: Path, as_of: date, months: int = 12, max_mb: float = 2048.0) -> pd.DataFrame:
    """The history's rows for the ``months`` month ends after ``as_of``, typed.

    Returns
    -------
    DataFrame
        ``loan_id, segment`` (text), ``month`` (month-end timestamp), ``balance``,
        ``days_past_due``, the money columns (float, blank = 0), ``paid_off`` (bool) and
        ``source_row`` (line in the file; Parquet: row number + 1).

    Raises
    ------
    InputFileError
        Missing file or column, or the first bad value in the window (file, row, column).
    """
    path = Path(path)
    check_size(path, max_mb)
    kind = file_kind(path)
    try:
        if kind == "parquet":
            raw = pd.read_parquet(path)
            raw.columns = [str(c).strip().casefold() for c in raw.columns]
            raw = raw.astype({c: "string" for c in raw.columns})
            first_line = 2
        elif kind == "csv":
            raw = pd.read_csv(path, dtype="string", keep_default_na=False, skip_blank_lines=False)
            raw.columns = [str(c).strip().casefold() for c in raw.columns]
            first_line = 2
        else:
            raise InputFileError("a performance history must be CSV or Parquet", file=path)
    except (OSError, ValueError, pd.errors.ParserError) as err:
        raise InputFileError(f"cannot be read ({err})", file=path) from err
    missing = [c for c in REQUIRED if c not in raw.columns]
    if missing:
        raise InputFileError(f"missing column{'s' if len(missing) > 1 else ''}: {', '.join(missing)}", file=path,
                             hint="a history needs loan_id, segment, month, balance, days_past_due")
    raw["source_row"] = np.arange(len(raw)) + first_line
    month = _month_end(raw["month"])
    bad = month.isna().to_numpy()
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputFileError(f"month {raw['month'].iloc[i]!r} is not a month (YYYY-MM or a date)", file=path,
                             row=int(raw["source_row"].iloc[i]), column="month")
    first = pd.Timestamp(as_of).to_period("M") + 1
    ends = pd.period_range(first, periods=months, freq="M").to_timestamp(how="end").normalize()
    keep = month.between(ends[0], ends[-1]).to_numpy()
    rows = raw.loc[keep]
    out = pd.DataFrame({"loan_id": rows["loan_id"].str.strip(), "segment": rows["segment"].str.strip(),
                        "month": month[keep].to_numpy(), "source_row": rows["source_row"].to_numpy()})
    for name, whole in (("balance", False), ("days_past_due", True), *((m, False) for m in MONEY)):
        text = rows[name].str.strip() if name in rows else pd.Series("", index=rows.index, dtype="string")
        blank = text.isna() | (text == "")
        if name in REQUIRED and blank.any():
            i = int(np.flatnonzero(blank.to_numpy())[0])
            raise InputFileError(f"{name} is blank", file=path, row=int(rows["source_row"].iloc[i]), column=name)
        numbers = pd.to_numeric(text.where(~blank, "0"), errors="coerce").to_numpy(float)
        wrong = ~np.isfinite(numbers) | (numbers < 0) | (whole and (numbers != np.round(numbers)))
        if np.any(wrong):
            i = int(np.flatnonzero(wrong)[0])
            what = "a whole number of at least 0" if whole else "an amount of at least 0"
            raise InputFileError(f"{name} {rows[name].iloc[i]!r} is not {what}", file=path,
                                 row=int(rows["source_row"].iloc[i]), column=name)
        out[name] = numbers.astype(np.int64) if whole else numbers
    if "paid_off" in rows:
        flag = rows["paid_off"].str.strip().str.casefold().fillna("")
        unknown = ~flag.isin(_TRUE | _FALSE)
        if unknown.any():
            i = int(np.flatnonzero(unknown.to_numpy())[0])
            raise InputFileError(f"paid_off {rows['paid_off'].iloc[i]!r} is not true or false", file=path,
                                 row=int(rows["source_row"].iloc[i]), column="paid_off")
        out["paid_off"] = flag.isin(_TRUE).to_numpy()
    else:
        out["paid_off"] = False
    return out.reset_index(drop=True)
