"""Prove the tape to finance: the ledger tie-out and the intake count table."""

from __future__ import annotations

import numpy as np
import pandas as pd

from allowance.intake.results import IntakeResult, TieOut, column_list
from allowance.intake.rules import CODES


def _money(value: float) -> str:
    return f"{value:,.2f}"


#: The largest balance a rejected row may carry into the tie-out's explanation: 2**53 cents
#: over 100, where float64 still holds every cent (a rejected '1e308' summed with the rest
#: would make the explanation's total infinite; one beyond this is counted as unreadable).
_SUMMABLE = 2.0**53 / 100


def _rejected_balance(result: IntakeResult) -> tuple[float, int]:
    """The balance on rejected rows that can be read as a number no larger than
    :data:`_SUMMABLE`, and how many could not."""
    rejected = result.rejected
    column = _balance_header(result)
    if column is None or rejected.empty:
        return 0.0, len(rejected)
    text = rejected[column].astype("str").str.strip()
    values = pd.to_numeric(text, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    with np.errstate(invalid="ignore"):  # NaN compares False: unreadable
        readable = np.abs(values) <= _SUMMABLE
    return float(np.round(values[readable].sum(), 2)), int((~readable).sum())


def _balance_header(result: IntakeResult) -> str | None:
    """The rejected frame's column that holds the balance as read."""
    name = result.headers.get("balance", "balance")
    return name if name in result.rejected.columns else None


def tie_out(
    result: IntakeResult,
    ledger_balance: float | None,
    tolerance: float,
    accept_difference: bool = False,
    accepted_balance: float | None = None,
) -> TieOut:
    """Compare the accepted tape's balance with the ledger control total.

    Parameters
    ----------
    result
        The intake result.
    ledger_balance
        The general ledger's balance for the portfolio; ``None`` when none was given.
    tolerance
        The largest acceptable ``|accepted - ledger|``, in currency units.
    accept_difference
        The user's explicit acceptance of a difference beyond the tolerance (recorded).
    accepted_balance
        Σ accepted balance, when the accepted rows are not in ``result`` (a tape computed
        where its parts were read: the parts' sums).

    Notes
    -----
    difference = Σ accepted balance − ledger. The explanation splits it into the balance on
    rejected rows (what the tape would add if they were fixed) and the rest; a rest within a
    cent per loan is reported as rounding of the extract.

    Examples
    --------
    >>> import pandas as pd
    >>> from allowance.schemas import InputFile
    >>> f = InputFile(role="tape", path="t.csv", sha256="0" * 64, bytes=1)
    >>> r = IntakeResult(pd.DataFrame({"balance": [100.0, 50.0]}), pd.DataFrame({"balance": ["25"]}),
    ...                  pd.DataFrame(), 3, f)
    >>> t = tie_out(r, 175.0, 0.01)
    >>> t.difference, t.rejected_balance, t.within_tolerance
    (-25.0, 25.0, False)
    """
    if accepted_balance is None:
        accepted_balance = result.accepted_balance()
    accepted = float(np.round(accepted_balance, 2))
    rejected, unreadable = _rejected_balance(result)
    if ledger_balance is None:
        return TieOut(
            ledger_balance=None,
            accepted_balance=accepted,
            rejected_balance=rejected,
            difference=0.0,
            tolerance=tolerance,
            within_tolerance=True,
            accepted_by_user=accept_difference,
            explanation=f"no ledger control total given; the accepted tape balance is {_money(accepted)}",
        )
    difference = round(accepted - ledger_balance, 2)
    within = abs(difference) <= tolerance + 1e-9
    parts = [
        f"accepted tape balance {_money(accepted)} against ledger {_money(ledger_balance)}: "
        f"difference {_money(difference)} ({'within' if within else 'beyond'} the tolerance {_money(tolerance)})"
    ]
    if difference != 0:
        if result.rows_rejected:
            unread = (f"; {unreadable} rejected row(s) have no readable balance (blank, not a number, "
                      "or too large to add to the cent)" if unreadable else "")
            parts.append(f"{result.rows_rejected} rejected row(s) carry {_money(rejected)}{unread}")
        rest = round(difference + rejected, 2)
        cents = 0.01 * max(result.rows_read, 1)
        if rest == 0:
            parts.append("the rejected rows explain the whole difference")
        elif abs(rest) <= cents:
            parts.append(f"the remaining {_money(rest)} is within a cent per loan: rounding in the extract or ledger")
        else:
            parts.append(
                f"{_money(rest)} is not explained by rejected rows or rounding: "
                "check the extract's date and scope against the ledger"
            )
    if not within and accept_difference:
        parts.append("the difference was accepted by the user")
    return TieOut(
        ledger_balance=float(ledger_balance),
        accepted_balance=accepted,
        rejected_balance=rejected,
        difference=difference,
        tolerance=tolerance,
        within_tolerance=within,
        accepted_by_user=accept_difference,
        explanation="; ".join(parts),
    )


def check_table(result: IntakeResult) -> pd.DataFrame:
    """The counts ``allowance check`` prints: rows, then rejections and warnings by reason.

    Columns ``section`` (rows / dates / rejected / warning), ``code``, ``column``, ``rows``
    and ``message``; a ``dates`` line says how each date column was read (code
    ``month_first`` when month-first, so it stands out). A rejected row counts once under each distinct reason it has, so the
    Columns ``section`` (rows / lines / rejected / warning), ``code``, ``column``, ``rows`` and
    ``message``. For a CSV tape the ``lines`` section reconciles the file's physical lines
    with the records read, so a stray quote that joins lines cannot pass unnoticed. A rejected row counts once under each distinct reason it has, so the
    rejection lines may add up to more than the rejected rows.
    """
    lines = [
        ("rows", "read", "", result.rows_read, "data rows in the file"),
        ("rows", "accepted", "", result.rows_accepted, "rows that passed every rule"),
        ("rows", "rejected", "", result.rows_rejected, "rows that failed at least one rule (see rejected.csv)"),
    ]
    if result.blank_rows:
        lines.append(("rows", "blank", "", result.blank_rows, "empty lines skipped (not counted as read)"))
    for column, form in result.date_formats.items():
        flag = "month_first" if "month first" in form else "date_format"
        lines.append(("dates", flag, column, result.rows_read, f"read as {form}"))
    if result.lines >= 0:
        lines.append(("lines", "physical", "", result.lines,
                      "lines of the file = 1 header + rows read + blank + line breaks inside quoted values"))
        if result.lines_in_values:
            lines.append(("lines", "in_values", "", result.lines_in_values,
                          "line breaks inside quoted values (see the rows with code line_break_in_value "
                          "or records_in_value)"))
    if result.extra_columns:
        lines.append(("columns", "not_in_dictionary", "", len(result.extra_columns),
                      f"columns not in the data dictionary, carried through untouched: {column_list(result.extra_columns)}"))
    findings = result.findings
    if len(findings):
        for section, severity in (("rejected", "reject"), ("warning", "warning")):
            part = findings[findings["severity"] == severity]
            counts = part.groupby(["code", "column"], sort=True)["source_row"].nunique()
            for (code, column), rows in counts.items():
                summary = CODES.get(code, code).format(column=column or "line")
                lines.append((section, code, column, int(rows), summary))
    return pd.DataFrame(lines, columns=["section", "code", "column", "rows", "message"]).astype(
        {"section": "str", "code": "str", "column": "str", "rows": np.int64, "message": "str"}
    )
