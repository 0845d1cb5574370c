"""The tape's columns as intake sees them, derived from :class:`allowance.schemas.LoanRecord`.

The pydantic model stays the one definition of a tape row: its annotations give each column's
kind, its ``Field`` metadata the bounds, ``is_required()`` whether a blank is allowed, and the
descriptions word the messages and the data dictionary.
"""

from __future__ import annotations

import types
import typing
from dataclasses import dataclass
from datetime import date
from typing import Literal

import annotated_types
from pydantic.fields import FieldInfo

from allowance.schemas import OPTIONAL_COLUMNS, REQUIRED_COLUMNS, LoanRecord

Kind = Literal["text", "choice", "date", "number", "whole", "boolean"]

_KINDS: dict[type, Kind] = {str: "text", date: "date", float: "number", int: "whole", bool: "boolean"}
_TYPE_WORDS: dict[Kind, str] = {
    "text": "text",
    "choice": "one of the listed words",
    "date": "date (YYYY-MM-DD)",
    "number": "number",
    "whole": "whole number",
    "boolean": "true / false",
}


@dataclass(frozen=True)
class FieldSpec:
    """One tape column: kind, whether a value is required, bounds, allowed words, meaning."""

    name: str
    kind: Kind
    required: bool
    description: str
    ge: float | None = None
    gt: float | None = None
    le: float | None = None
    lt: float | None = None
    choices: tuple[str, ...] = ()

    @property
    def type_word(self) -> str:
        """The column's type in plain words, for the data dictionary."""
        return _TYPE_WORDS[self.kind]

    @property
    def bounds_text(self) -> str:
        """The bounds in words: ``'at least 0 and at most 1'`` (empty when unbounded).

        Examples
        --------
        >>> FIELDS["interest_rate"].bounds_text
        'at least 0 and at most 1'
        >>> FIELDS["loan_id"].bounds_text
        ''
        >>> FIELDS["balance"].bounds_text
        'at least 0 and at most 10,000,000,000,000'
        """
        parts = []
        if self.ge is not None:
            parts.append(f"at least {_number(self.ge)}")
        if self.gt is not None:
            parts.append(f"above {_number(self.gt)}")
        if self.le is not None:
            parts.append(f"at most {_number(self.le)}")
        if self.lt is not None:
            parts.append(f"below {_number(self.lt)}")
        return " and ".join(parts)

    @property
    def is_probability(self) -> bool:
        """A decimal share in [0, 1] (where a column of percents is a common mistake)."""
        return self.kind == "number" and self.ge == 0 and self.le == 1


def lower_first(text: str) -> str:
    """Lower-case the first letter to continue a sentence, unless it starts a capitalised word.

    Examples
    --------
    >>> lower_first("Input should be a number"), lower_first("IFRS 9 needs [ifrs9]")
    ('input should be a number', 'IFRS 9 needs [ifrs9]')
    """
    if len(text) > 1 and text[1].isupper():
        return text  # an acronym or code (IFRS 9, ASC 326, PD): keep its capitals
    return text[:1].lower() + text[1:]


def _number(value: float) -> str:
    """A bound as a person writes it: ``1``, ``0.5``, ``36,525``, ``10,000,000,000,000``."""
    if value.is_integer() and abs(value) >= 1000:
        return f"{value:,.0f}"
    return f"{value:g}"


def _unwrap(annotation: object) -> tuple[object, list[object]]:
    """Strip ``Optional`` and ``Annotated``; return the bare type and the collected metadata."""
    metadata: list[object] = []
    while True:
        origin = typing.get_origin(annotation)
        if origin is typing.Annotated:
            inner, *extra = typing.get_args(annotation)
            for item in extra:
                metadata.extend(item.metadata if isinstance(item, FieldInfo) else [item])
            annotation = inner
        elif origin in (typing.Union, types.UnionType):
            members = [a for a in typing.get_args(annotation) if a is not type(None)]
            annotation = members[0]
        else:
            return annotation, metadata


def _spec(name: str, info: FieldInfo) -> FieldSpec:
    bare, metadata = _unwrap(info.annotation)
    metadata = [*metadata, *info.metadata]
    choices: tuple[str, ...] = ()
    if typing.get_origin(bare) is Literal:
        kind: Kind = "choice"
        choices = tuple(str(a) for a in typing.get_args(bare))
    else:
        kind = _KINDS[bare]  # type: ignore[index]
    bounds: dict[str, float] = {}
    for item in metadata:
        for attr, cls in (("ge", annotated_types.Ge), ("gt", annotated_types.Gt),
                          ("le", annotated_types.Le), ("lt", annotated_types.Lt)):
            if isinstance(item, cls):
                bounds[attr] = float(getattr(item, attr))
    return FieldSpec(
        name=name,
        kind=kind,
        required=info.is_required(),
        description=info.description or "",
        choices=choices,
        **bounds,
    )


#: Every tape column of :class:`LoanRecord`, in the contract's order.
FIELDS: dict[str, FieldSpec] = {
    name: _spec(name, LoanRecord.model_fields[name]) for name in (*REQUIRED_COLUMNS, *OPTIONAL_COLUMNS)
}

#: Whole-number columns that the accepted tape holds as int64 (the rest: float64 with NaN).
INT_COLUMNS: tuple[str, ...] = tuple(n for n, f in FIELDS.items() if f.kind == "whole" and f.required)


def data_dictionary() -> list[dict[str, str]]:
    """The data dictionary of the tape: column, type, required, meaning (one dict per column).

    Examples
    --------
    >>> data_dictionary()[0]
    {'column': 'loan_id', 'type': 'text', 'required': 'yes', 'meaning': 'Unique loan or account identifier.'}
    """
    rows = []
    for spec in FIELDS.values():
        meaning = spec.description
        if spec.choices and not all(c in meaning for c in spec.choices):
            meaning = f"{meaning} One of: {', '.join(spec.choices)}."
        if spec.bounds_text:
            meaning = f"{meaning} Must be {spec.bounds_text}."
        required = "yes" if spec.required else "no"
        if spec.name == "maturity_date":
            required = "yes, except revolving"
        elif spec.name == "credit_limit":
            required = "revolving only"
        rows.append({"column": spec.name, "type": spec.type_word, "required": required, "meaning": meaning})
    return rows
