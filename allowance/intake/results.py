"""The result types of intake: the split tape and the ledger tie-out."""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd

from allowance.schemas import InputFile


@dataclass(frozen=True)
class IntakeResult:
    """A tape split into accepted and rejected rows; ``rows_read == accepted + rejected``.

    accepted  the validated tape (see the tape-frame contract), one row per accepted loan
    rejected  one row per rejected row: ``source_row``, ``reason_codes`` ("a;b"), ``reasons``
              (the messages, "; "-joined), then every column exactly as read (text)
    findings  long form, one row per finding: ``source_row, loan_id, column, code, severity``
              ("reject" or "warning"), ``message``; warnings are findings on accepted rows
    blank_rows  lines of the file in which every field was empty; skipped, not counted as read
    headers   our column name -> the header it was read from (a column of ``rejected``)
    date_formats  each date column of the file -> the format it was read in, and why
              (``year first (YYYY-MM-DD)``, ``day first (DD/MM/YYYY), inferred from ...``)
    lines     physical lines of a CSV tape (-1 for XLSX and Parquet); the count identity is
              lines = 1 header + rows_read + blank_rows + lines_in_values
    lines_in_values  line breaks inside quoted values (they join physical lines into one record)
    notes     tape-level warnings (not about one row), for the run's warnings
    accepted_rows  the number of accepted rows when ``accepted`` does not hold them (a tape
              computed where its parts were read keeps them there); None: ``len(accepted)``
    extra_columns  the file's columns that are not in the data dictionary (as written), carried
              through to loans.csv untouched
    """

    accepted: pd.DataFrame
    rejected: pd.DataFrame
    findings: pd.DataFrame
    rows_read: int
    file: InputFile
    blank_rows: int = 0
    headers: dict[str, str] = field(default_factory=dict)
    date_formats: dict[str, str] = field(default_factory=dict)
    lines: int = -1
    lines_in_values: int = 0
    notes: tuple[str, ...] = ()
    accepted_rows: int | None = None
    extra_columns: tuple[str, ...] = ()

    @property
    def rows_accepted(self) -> int:
        return len(self.accepted) if self.accepted_rows is None else self.accepted_rows

    @property
    def rows_rejected(self) -> int:
        return len(self.rejected)

    @property
    def warnings(self) -> pd.DataFrame:
        return self.findings[self.findings["severity"] == "warning"]

    def require_accepted(self) -> None:
        """Raise :class:`TapeError` when no row was accepted: a run of nothing is not a run.

        The message gives the most common reasons, so the user knows where to start.
        """
        if self.rows_accepted:
            return
        from allowance.exceptions import TapeError

        reasons = ""
        if len(self.rejected) and "reason_codes" in self.rejected.columns:
            codes = self.rejected["reason_codes"].astype("str").str.split(";").explode()
            top = codes[codes != ""].value_counts().head(3)
            reasons = " (" + ", ".join(f"{code} on {count:,}" for code, count in top.items()) + ")"
        raise TapeError(
            f"every one of the {self.rows_read:,} rows was rejected{reasons}",
            file=self.file.path,
            hint="run 'allowance check' on the tape to see each row's reasons",
        )


@dataclass(frozen=True)
class TieOut:
    """The accepted tape's balance against the ledger control total."""

    ledger_balance: float | None
    accepted_balance: float
    rejected_balance: float
    difference: float  # accepted - ledger (0 when no ledger figure was given)
    tolerance: float
    within_tolerance: bool
    accepted_by_user: bool  # the user passed the explicit acceptance flag
    explanation: str


def extra_columns_note(columns: tuple[str, ...], shown: int = 10) -> str:
    """One line naming the columns that are not in the data dictionary (the first ``shown``).

    Examples
    --------
    >>> extra_columns_note(("branch",))
    "1 column is not in the data dictionary and is carried through to loans.csv untouched: 'branch'"
    >>> extra_columns_note(tuple(f"x{i}" for i in range(10_000)), shown=2)
    "10,000 columns are not in the data dictionary and are carried through to loans.csv untouched: 'x0', 'x1' and 9,998 more"
    """
    count = len(columns)
    names = column_list(columns, shown)
    verb = "is" if count == 1 else "are"
    return (f"{count:,} column{'s' if count > 1 else ''} {verb} not in the data dictionary and {verb} carried "
            f"through to loans.csv untouched: {names}")


def column_list(columns: tuple[str, ...], shown: int = 10) -> str:
    """The first ``shown`` column names, quoted, and how many more."""
    count = len(columns)
    return ", ".join(map(repr, columns[:shown])) + (f" and {count - shown:,} more" if count > shown else "")
