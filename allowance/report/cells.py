"""What goes into a workbook cell: safe text, the number kind of a column, human headers.

Implements
----------
clean_text     text a workbook can always hold: neutralised, XML-legal, within the cell limit
number_kind    the display kind of a column (money, count, rate, ...) from its name and dtype
human          a column name as a reader would write it (``ecl_12m`` -> ``12-month ECL``)
TEXT_LIMIT     the most characters a cell holds (32,767)

Why text is cleaned here
------------------------
XML 1.0 cannot carry most C0 control characters, the non-characters U+FFFE / U+FFFF, or lone
surrogates; a single one makes the whole workbook unreadable. They are replaced by U+FFFD
(the Unicode replacement character), so a reader sees that something was there. A cell holds
at most 32,767 characters: longer text is cut, *before* any XML escaping (cutting escaped
text can split ``&amp;`` and break the file), and ends with a visible mark.
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np
import pandas as pd

from allowance.text import neutralise_text

__all__ = ["TEXT_LIMIT", "TRUNCATED", "clean_text", "human", "number_kind"]

#: The most characters one cell holds (Excel's specification and limits).
TEXT_LIMIT = 32_767
#: The end of a cut text, so the cut is visible.
TRUNCATED = " [... cut at the cell limit]"
# XML 1.0 Char excludes C0 controls other than tab, LF and CR, the surrogate block, U+FFFE and
# U+FFFF (W3C, Extensible Markup Language 1.0, 5th ed., production [2] Char).
_XML_ILLEGAL = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ud800-\udfff\ufffe\uffff]")
_REPLACEMENT = "\ufffd"


def clean_text(value: Any) -> str:
    """Text for a cell: formula-neutralised, XML-legal, at most :data:`TEXT_LIMIT` characters.

    Examples
    --------
    >>> clean_text("=1+1"), clean_text("a\\x00b\\ufffe")
    ("'=1+1", 'a\\ufffdb\\ufffd')
    >>> cut = clean_text("&" * 40_000)
    >>> len(cut) == TEXT_LIMIT and cut.endswith(TRUNCATED)
    True
    """
    text = neutralise_text(value if isinstance(value, str) else str(value))
    if _XML_ILLEGAL.search(text):
        text = _XML_ILLEGAL.sub(_REPLACEMENT, text)
    if len(text) > TEXT_LIMIT:
        text = text[: TEXT_LIMIT - len(TRUNCATED)] + TRUNCATED
    return text


# --------------------------------------------------------------------------------------
# Number kinds: every number in the workbook is shown in one of these
# --------------------------------------------------------------------------------------

_MONEY_NAMES = {
    "balance", "ead", "credit_limit", "payment", "collateral_value", "balloon_amount",
    "lifetime_ecl_at_purchase", "opening_balance", "interest", "scheduled_principal", "prepayment",
    "closing_balance", "expected_balance", "expected_prepayment", "expected_default", "amount", "debit",
    "credit", "base", "what_if", "difference", "ledger_balance", "accepted_balance", "rejected_balance",
    "tolerance", "ledger_tolerance", "beginning", "provision", "charge_offs", "recoveries", "ending",
    "gross_charge_off", "opening", "closing", "total", "base_ecl_ifrs9", "what_if_ecl_ifrs9",
}
_RATE_NAMES = {
    "pd_12m", "pd_lifetime", "lgd", "interest_rate", "eir", "coverage", "weight", "cpr", "ccf", "cure_rate",
    "pd_12m_at_origination", "weight_on_scenario", "pd_lifetime_cecl", "payment_rate", "haircut",
    "recovery_cost", "floor", "sicr_min_pd_increase", "asset_correlation", "percent",
}
_FINE_RATE_NAMES = {"marginal_pd", "cumulative_pd", "survival", "survival_opening"}
_CODE_NAMES = {
    "stage", "prior_stage", "base_stage", "what_if_stage", "month", "source_row", "line", "year", "age_month",
    "charge_off_dpd", "days_past_due",
}
_COUNT_NAMES = {"rows", "loans", "loans_in_scope", "bytes", "count"}


def number_kind(name: Any, dtype: Any) -> str:
    """The display kind of a column: ``money``, ``rate``, ``fine_rate``, ``count``, ``code``,
    ``decimal``, ``date``, ``bool`` or ``text``.

    Examples
    --------
    >>> number_kind("ecl_ifrs9_base", np.float64), number_kind("pd_12m", np.float64)
    ('money', 'rate')
    >>> number_kind("stage", np.int64), number_kind("loans", np.int64), number_kind("loan_id", object)
    ('code', 'count', 'text')
    """
    lowered = str(name).lower()
    if pd.api.types.is_datetime64_any_dtype(dtype):
        return "date"
    if pd.api.types.is_bool_dtype(dtype):
        return "bool"
    if not pd.api.types.is_numeric_dtype(dtype):
        return "text"
    if lowered in _CODE_NAMES:
        return "code"
    if lowered in _FINE_RATE_NAMES or lowered.startswith("cumulative_pd_"):
        return "fine_rate"
    if lowered in _RATE_NAMES or lowered.startswith(("pd_", "coverage", "weight")):
        return "rate"
    if lowered in _MONEY_NAMES or lowered.startswith(("ecl_", "overlay_", "effect_", "balance_", "ead_")):
        return "money"
    if lowered in _COUNT_NAMES or lowered.endswith(("_months", "_mb", "_limit", "_dpd")):
        return "count"
    if pd.api.types.is_integer_dtype(dtype):
        return "count"
    return "decimal"


# --------------------------------------------------------------------------------------
# Human headers
# --------------------------------------------------------------------------------------

_HEADERS = {
    "loan_id": "Loan ID", "segment": "Segment", "stage": "Stage", "stage_reason": "Stage reason",
    "framework": "Framework", "scenario": "Scenario", "month": "Month", "key": "Grade or bucket",
    "marginal_pd": "Marginal PD", "cumulative_pd": "Cumulative PD", "horizon_months": "Horizon (months)",
    "cumulative_pd_horizon": "Cumulative PD to the horizon", "name": "Name", "kind": "Kind",
    "rationale": "Rationale", "owner": "Owner", "approved": "Approved", "expires": "Expires", "status": "Status",
    "effect_ifrs9": "Effect, IFRS 9", "effect_cecl": "Effect, CECL", "loans_in_scope": "Loans in scope",
    "view": "View", "base": "Base", "what_if": "What-if", "difference": "Difference",
    "base_stage": "Base stage", "what_if_stage": "What-if stage", "base_reason": "Base stage reason",
    "what_if_reason": "What-if stage reason", "base_ecl_ifrs9": "Base IFRS 9 allowance",
    "what_if_ecl_ifrs9": "What-if IFRS 9 allowance", "source_row": "Tape line", "column": "Column",
    "code": "Code", "message": "Message", "reason": "Reason", "rows": "Rows", "warning": "Warning",
    "opening_balance": "Opening balance", "interest": "Interest", "scheduled_principal": "Scheduled principal",
    "closing_balance": "Contractual closing balance", "expected_prepayment": "Expected prepayment",
    "expected_default": "Expected default", "survival": "Survival", "survival_opening": "Survival at month start", "expected_balance": "Expected balance",
    "bucket": "Bucket", "expected_months_to_charge_off": "Expected months to charge-off",
    "pd_12m": "12-month PD", "pd_lifetime": "Lifetime PD", "lgd": "LGD", "ead": "EAD", "ecl_12m": "12-month ECL",
    "ecl_lifetime": "Lifetime ECL", "balance": "Balance", "weight_on_scenario": "Weight on the scenario path",
    "role": "Role", "path": "Path", "file": "File", "folder": "Folder", "sha256": "SHA-256", "bytes": "Bytes",
    "chosen": "Why this loan", "remaining_months": "Remaining months", "repayment": "Repayment",
    "grade": "Grade",
}
_TOKENS = {
    "pd": "PD", "lgd": "LGD", "ead": "EAD", "ecl": "ECL", "ifrs9": "IFRS 9", "cecl": "CECL", "12m": "12-month",
    "dpd": "DPD", "id": "ID", "eir": "EIR", "cpr": "CPR", "ccf": "CCF", "psa": "PSA", "poci": "POCI",
    "sicr": "SICR", "mb": "MiB", "gl": "GL", "z": "z",
}


def human(name: Any) -> str:
    """A column name as a reader would write it.

    Examples
    --------
    >>> human("ecl_12m"), human("loans_in_scope"), human("sicr_backstop_dpd"), human("Already fine")
    ('12-month ECL', 'Loans in scope', 'SICR backstop DPD', 'Already fine')
    """
    text = str(name)
    if text in _HEADERS:
        return _HEADERS[text]
    if "_" not in text and text[:1].isupper():
        return text
    words = [_TOKENS.get(w.lower(), w) for w in text.split("_") if w]
    if not words:
        return text
    first = words[0]
    if first == first.lower():
        words[0] = first[:1].upper() + first[1:]
    return " ".join(words)


def is_missing(value: Any) -> bool:
    """None, NaN, NaT and pandas NA (and not a container)."""
    if value is None:
        return True
    if isinstance(value, (str, int, np.integer)):  # the common cells, answered without pandas
        return False
    if isinstance(value, (float, np.floating)):
        return not np.isfinite(value)
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False
