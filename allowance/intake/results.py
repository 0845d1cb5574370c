"""The result types of intake: the split tape and the ledger tie-out."""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from allowance.schemas import InputFile


class Later:
    """A frame handed over before it is built: its row count, its balance total, and the
    function that builds it on first read (then kept). Pickled as the frame it builds."""

    __slots__ = ("rows", "balance", "_build", "_frame")

    def __init__(self, build: Callable[[], pd.DataFrame], rows: int, balance: float) -> None:
        self.rows, self.balance, self._build, self._frame = rows, balance, build, None

    def frame(self) -> pd.DataFrame:
        if self._frame is None:
            self._frame, self._build = self._build(), None
        return self._frame

    def __reduce__(self) -> tuple[Any, ...]:
        return (_same, (self.frame(),))


def _same(value: Any) -> Any:
    return value


class _MaybeLater:
    """A dataclass field that may be given as a :class:`Later`: built when first read."""

    def __set_name__(self, owner: type, name: str) -> None:
        self.slot = f"_{name}_held"

    def __get__(self, obj: Any, owner: type | None = None) -> Any:
        if obj is None:
            raise AttributeError(self.slot)  # no default: the field is required
        value = obj.__dict__[self.slot]
        if isinstance(value, Later):
            value = value.frame()
            obj.__dict__[self.slot] = value
        return value

    def __set__(self, obj: Any, value: Any) -> None:
        obj.__dict__[self.slot] = value


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

    ``accepted`` may be handed over as a :class:`Later` (``allowance check`` reads only its
    row count and balance total): it is built the first time it is read.
    """

    accepted: pd.DataFrame = _MaybeLater()  # type: ignore[assignment]
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

    def replaced(self, **changes: Any) -> IntakeResult:
        """:func:`dataclasses.replace`, an accepted frame not yet built (:class:`Later`) handed
        over as it is, not built for the copy."""
        return dataclasses.replace(self, **{"accepted": self.__dict__["_accepted_held"], **changes})

    @property
    def rows_accepted(self) -> int:
        if self.accepted_rows is not None:
            return self.accepted_rows
        held = self.__dict__["_accepted_held"]
        return held.rows if isinstance(held, Later) else len(held)

    def accepted_balance(self) -> float:
        """Σ balance of the accepted rows (a :class:`Later` frame is not built for it)."""
        held = self.__dict__["_accepted_held"]
        if isinstance(held, Later):
            return held.balance
        return float(held["balance"].to_numpy(dtype=np.float64).sum())

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


def extra_columns_note(columns: tuple[str, ...], shown: int = 10, into: str = "loans.csv") -> str:
    """One line naming the columns that are not in the data dictionary (the first ``shown``),
    carried through ``into`` the loan detail (a book computed part by part: its Parquet files).

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
            f"through to {into} untouched: {names}")


def column_list(columns: tuple[str, ...], shown: int = 10) -> str:
    """The first ``shown`` column names, quoted, and how many more."""
    count = len(columns)
    return ", ".join(map(repr, columns[:shown])) + (f" and {count - shown:,} more" if count > shown else "")
