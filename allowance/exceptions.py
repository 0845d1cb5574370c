"""The domain errors, each with a message that says what is wrong and how to fix it.

Every error a user can cause with a bad input is an :class:`AllowanceError`. The command
line prints ``str(error)`` as one line and exits with code 1; no traceback reaches the user.
The message names the file, and the row and column where they apply, so the user can go
straight to the cell.

Implements
----------
AllowanceError      base class: ``file``, ``row``, ``column``, ``reason``, ``hint``
InputFileError      a file is missing, unreadable, too large, or of the wrong kind
TapeError           a whole-tape problem (missing required column, no rows, ambiguous dates)
HistoryError        a whole-history problem (missing required column, no rows, nothing to estimate)
AssumptionsError    the assumptions or an overlay file is malformed or inconsistent
TieOutError         the accepted tape does not tie to the ledger control total
OutputError         an output folder cannot be written
MovementError       two runs cannot be reconciled, or a movement table does not foot
InvalidInputError   a library function was given values outside its contract (also a ValueError)
"""

from __future__ import annotations

from pathlib import Path


class AllowanceError(Exception):
    """A problem with the user's inputs, worded so that the user can fix it.

    Examples
    --------
    >>> str(TapeError("missing required column 'balance'", file="tape.csv",
    ...               hint="add the column or map it in [tape.columns]"))
    "tape.csv: missing required column 'balance' (fix: add the column or map it in [tape.columns])"
    >>> str(AssumptionsError("weights sum to 0.9, not 1", file="a.toml", column="scenarios"))
    'a.toml: key scenarios: weights sum to 0.9, not 1'
    >>> str(InputFileError("cannot be opened (entity 'lol'" + chr(10) + "  forbidden)", file="t.xlsx"))
    "t.xlsx: cannot be opened (entity 'lol' forbidden)"
    """

    def __init__(
        self,
        reason: str,
        *,
        file: str | Path | None = None,
        row: int | None = None,
        column: str | None = None,
        hint: str | None = None,
    ) -> None:
        self.reason = reason
        self.file = None if file is None else str(file)
        self.row = row
        self.column = column
        self.hint = hint
        super().__init__(str(self))

    def _column_word(self) -> str:
        return "column"

    def __str__(self) -> str:
        where = []
        if self.row is not None:
            where.append(f"row {self.row}")
        if self.column is not None:
            where.append(f"{self._column_word()} {self.column}")
        text = ", ".join(where) + ": " + self.reason if where else self.reason
        if self.file is not None:
            text = f"{self.file}: {text}"
        if self.hint:
            text = f"{text} (fix: {self.hint})"
        # one line, always: a reason quoting a library's message may hold line breaks
        return " ".join(text.split()) if "\n" in text or "\r" in text else text


class InputFileError(AllowanceError):
    """An input file is missing, unreadable, too large, or not of a kind we read."""


class TapeError(AllowanceError):
    """The tape as a whole cannot be read (not a single bad row: those are rejected)."""


class HistoryError(AllowanceError):
    """A performance history as a whole cannot be used (not a single bad row: those are rejected)."""


class AssumptionsError(AllowanceError):
    """The assumptions file, an overlay file or a file they name is malformed.

    ``column`` carries the dotted key path (``segments.auto.lgd``) where one applies: named a
    key in a TOML file (or where no file is named), a column in a CSV or workbook it names.

    >>> str(AssumptionsError("unknown key 'lgdd'", file="a.toml", column="segments.auto.lgdd"))
    "a.toml: key segments.auto.lgdd: unknown key 'lgdd'"
    >>> str(AssumptionsError("'x' is not a probability", file="rolls.csv", row=2, column="current"))
    "rolls.csv: row 2, column current: 'x' is not a probability"

    Assumptions given as a mapping (from Python) are labelled ``<assumptions mapping>``: keys too.

    >>> str(AssumptionsError("required key 'segments' is missing", file="<assumptions mapping>", column="segments"))
    "<assumptions mapping>: key segments: required key 'segments' is missing"
    """

    def _column_word(self) -> str:
        in_a_table = self.file is not None and not self.file.lower().endswith((".toml", " mapping>"))
        return "column" if in_a_table else "key"


class TieOutError(AllowanceError):
    """The accepted tape balance differs from the ledger control total beyond tolerance."""


class OutputError(AllowanceError):
    """The output folder cannot be created or written."""


class MovementError(AllowanceError):
    """Two runs cannot be reconciled, or a movement table does not foot."""


class InvalidInputError(AllowanceError, ValueError):
    """A function of the library was given values outside its documented contract.

    A shape that does not match, a probability outside [0, 1], NaN where a number is needed:
    intake refuses such values in the user's files first, so a run meets this only when a
    function is called directly. It is also a ``ValueError``, for callers that catch that.
    """
