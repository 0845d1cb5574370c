"""Post-model adjustments (overlays): documented, scoped, dated, and allocated to loans.

Implements
----------
OverlayResult    per-loan adjustments per framework, the overlay table, warnings
apply_overlays   apply every live overlay to the loans in its scope
amount_weights   an amount overlay's weights on a part of a book (allocated over the whole book)
allocate_cents   split an amount in whole cents pro rata (largest remainder), footing exactly
TABLE_COLUMNS    the columns of the overlay table

All money is handled in whole cents (int64) so that every allocation foots exactly: an
amount overlay's loan shares sum to the stated amount to the cent.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from datetime import date

import numpy as np
import pandas as pd

from allowance.schemas import FRAMEWORKS, Framework, Overlay, OverlayKind
from allowance.exceptions import InvalidInputError

__all__ = ["TABLE_COLUMNS", "OverlayResult", "allocate_cents", "apply_overlays"]

TABLE_COLUMNS: tuple[str, ...] = (
    "name", "segment", "stage", "framework", "kind", "value", "rationale", "owner", "approved",
    "expires", "status", "effect_ifrs9", "effect_cecl", "loans_in_scope", "note",
)


@dataclass(frozen=True)
class OverlayResult:
    """The overlays of a run, applied.

    adjustments  framework -> per-loan adjustment (currency units, whole cents), in the order
                 of the loans frame; final ECL = modelled + adjustment, never below 0
    table        one row per overlay (``TABLE_COLUMNS``): its terms, ``status`` (``applied``,
                 ``expired``, ``no loans in scope``, ``not applicable``), its effect per
                 framework, the loans in scope and a ``note`` (why not applied, or clipping)
    warnings     one line per overlay not applied or applied only in part
    """

    adjustments: dict[Framework, np.ndarray]
    table: pd.DataFrame
    warnings: list[str]


def allocate_cents(total_cents: int, weights: np.ndarray) -> np.ndarray:
    """Split whole cents pro rata to ``weights`` so that the shares sum exactly to the total.

    Largest-remainder method: every share is first rounded down, and the cents still
    missing go one each to the shares with the largest remainders (ties: the earlier
    share). All-zero weights split equally.

    References
    ----------
    .. [1] Largest remainder method (Hamilton's method of apportionment); common practice
       for allocating a rounded total.

    Examples
    --------
    >>> allocate_cents(100, np.array([1.0, 1.0, 1.0])).tolist()
    [34, 33, 33]
    >>> allocate_cents(-1001, np.array([0.0, 3.0, 1.0])).tolist()
    [0, -751, -250]
    """
    w = np.clip(np.asarray(weights, dtype=float), 0.0, None)
    if w.size == 0:
        raise InvalidInputError("allocate_cents: nothing to allocate to")
    if not w.sum() > 0.0:
        w = np.ones_like(w)
    magnitude = abs(int(total_cents))
    exact = magnitude * (w / w.sum())
    shares = np.floor(exact).astype(np.int64)
    order = np.argsort(-(exact - shares), kind="stable")
    short = magnitude - int(shares.sum())
    # floating error can leave the floors one cent over; take it from the smallest remainders
    if short >= 0:
        shares[order[:short]] += 1
    else:
        shares[order[::-1][:-short]] -= 1
    return np.sign(total_cents) * shares


def _percent(modelled_cents: np.ndarray, scope: np.ndarray, value: float) -> np.ndarray:
    # a negative modelled figure (a POCI loan better than at purchase) is a gain, not a loss
    # to scale: the overlay leaves it alone
    return np.where(scope, np.rint(np.maximum(modelled_cents, 0) * value), 0.0).astype(np.int64)


def _amount(modelled_cents: np.ndarray, scope: np.ndarray, value: float) -> np.ndarray:
    out = np.zeros(len(modelled_cents), dtype=np.int64)
    out[scope] = allocate_cents(int(np.rint(value * 100.0)), np.maximum(modelled_cents[scope], 0).astype(float))
    return out


_KINDS: dict[OverlayKind, Callable[[np.ndarray, np.ndarray, float], np.ndarray]] = {
    "percent": _percent,
    "amount": _amount,
}


def amount_weights(loans: pd.DataFrame, overlays: list[Overlay], frameworks: list[Framework]) -> dict[tuple[int, str], np.ndarray]:
    """Each ``amount`` overlay's weights on these loans, per framework: the in-scope loans'
    modelled cents (floored at 0), in loan order, keyed ``(overlay position, framework)``.

    A book computed in parts concatenates every part's weights in tape order and allocates
    once (:func:`allocate_cents`), as :func:`apply_overlays` does over a whole book.
    """
    out: dict[tuple[int, str], np.ndarray] = {}
    for position, ov in enumerate(overlays):
        if ov.kind != "amount":
            continue
        scope = np.ones(len(loans), bool) if ov.segment == "*" else _matches(loans["segment"], ov.segment)
        if ov.stage is not None and "stage" in loans.columns:
            scope = scope & _matches(loans["stage"], ov.stage)
        for fw in frameworks:
            if ov.framework in (None, fw):
                out[(position, fw)] = np.maximum(_cents(loans, fw)[scope], 0)
    return out


def _matches(column: pd.Series, value: object) -> np.ndarray:
    return column.eq(value).to_numpy(dtype=bool, na_value=False)


def _cents(loans: pd.DataFrame, framework: Framework) -> np.ndarray:
    column = f"ecl_{framework}_modelled"
    if column not in loans.columns:
        raise InvalidInputError(f"apply_overlays: the loans frame has no {column} column")
    values = loans[column].to_numpy(dtype=float, na_value=np.nan)
    if not np.all(np.isfinite(values)):
        raise InvalidInputError(f"apply_overlays: {column} has missing or non-finite values")
    return np.rint(values * 100.0).astype(np.int64)


_FW_NAME = {"ifrs9": "IFRS 9", "cecl": "CECL"}


def _above_exposure(loans: pd.DataFrame, framework: Framework, final: np.ndarray, adjust: np.ndarray) -> list[str]:
    """A warning when overlays lift loans' ECL above their exposure at default.

    Modelled ECL never exceeds EAD (LGD and PD are at most 1); an overlay that lifts a loan
    above it reserves more than can be lost on that loan, which is almost always a wrong
    amount (a value in cents, a misplaced decimal). The overlay is applied as stated.
    """
    column = next((c for c in (f"ead_{framework}", "ead") if c in loans.columns), None)
    if column is None or not adjust.any():
        return []
    ead = np.rint(loans[column].to_numpy(dtype=float, na_value=np.nan) * 100.0)
    with np.errstate(invalid="ignore"):
        above = (adjust > 0) & np.isfinite(ead) & (final > ead + 1)
    if not above.any():
        return []
    worst = int(np.argmax(np.where(above, final - ead, -np.inf)))
    name = loans["loan_id"].iloc[worst] if "loan_id" in loans.columns else f"row {worst + 1}"
    return [
        f"after the overlays, the {_FW_NAME.get(framework, framework)} ECL of {int(above.sum()):,} loans is above "
        f"their exposure at default, by {(final - ead)[above].sum() / 100:,.2f} in all (most: loan {name}, "
        f"ECL {final[worst] / 100:,.2f} against EAD {ead[worst] / 100:,.2f}); check the overlay amounts"
    ]


def apply_overlays(
    loans: pd.DataFrame,
    overlays: list[Overlay],
    as_of: date,
    frameworks: list[Framework],
    allocated: Mapping[tuple[int, str], np.ndarray] | None = None,
) -> OverlayResult:
    """Apply the overlays, in order, to the modelled ECL of each framework.

    Parameters
    ----------
    loans : DataFrame
        ``segment``, ``stage`` (IFRS 9, when computed) and ``ecl_<framework>_modelled``
        (rounded to cents) for each framework in ``frameworks``.
    overlays : list of Overlay
        The ``[[overlays]]`` of the assumptions (after overlay files are merged).
    as_of : date
        Reporting date: an overlay whose ``expires`` is before it is not applied.
    frameworks : list of {"ifrs9", "cecl"}
        The frameworks of the run.
    allocated : mapping, optional
        For a part of a book: ``(overlay position, framework)`` -> the part's in-scope loans'
        cents of an ``amount`` overlay, allocated over the whole book's scope
        (:func:`amount_weights` of every part, then :func:`allocate_cents` once).

    Returns
    -------
    OverlayResult

    Notes
    -----
    Scope: the overlay's ``segment`` (``*`` for all) and, when given, its IFRS 9 ``stage``
    (CECL uses the same loan's IFRS 9 stage; without a ``stage`` column a staged overlay is
    not applicable). ``percent``: each loan's modelled ECL × value, rounded to cents.
    ``amount``: the amount in cents, allocated pro rata to modelled ECL (equally when all
    are 0) by :func:`allocate_cents`, so it foots exactly. A negative adjustment is clipped
    so that no loan's final ECL (after the overlays before it) falls below 0; the note and
    a warning say so, and the effect shown is what was applied.

    Examples
    --------
    >>> from datetime import date
    >>> from allowance.schemas import Overlay
    >>> loans = pd.DataFrame({"segment": ["auto", "auto", "card"], "stage": [1, 2, 1],
    ...                       "ecl_ifrs9_modelled": [100.0, 300.0, 50.0]})
    >>> ov = Overlay(name="used cars", segment="auto", kind="amount", value=40.01,
    ...              rationale="falling used-vehicle prices", owner="credit committee")
    >>> res = apply_overlays(loans, [ov], date(2026, 9, 30), ["ifrs9"])
    >>> res.adjustments["ifrs9"].tolist()
    [10.0, 30.01, 0.0]
    >>> res.table[["status", "effect_ifrs9", "loans_in_scope"]].to_dict("records")
    [{'status': 'applied', 'effect_ifrs9': 40.01, 'loans_in_scope': 2}]
    """
    n = len(loans)
    modelled = {fw: _cents(loans, fw) for fw in frameworks}
    running = {fw: modelled[fw].copy() for fw in frameworks}
    adjust = {fw: np.zeros(n, dtype=np.int64) for fw in frameworks}
    has_stage = "stage" in loans.columns
    rows: list[dict] = []
    warnings: list[str] = []

    for position, ov in enumerate(overlays):  # a loop over overlays (a handful), never over loans
        targets = [fw for fw in frameworks if ov.framework in (None, fw)]
        scope = np.ones(n, bool) if ov.segment == "*" else _matches(loans["segment"], ov.segment)
        staged_ok = ov.stage is None or has_stage
        if ov.stage is not None and has_stage:
            scope = scope & _matches(loans["stage"], ov.stage)
        effect = dict.fromkeys(FRAMEWORKS, 0.0)
        note = ""
        if ov.expires is not None and ov.expires < as_of:
            status = "expired"
            note = f"expired on {ov.expires.isoformat()}, before the as-of date {as_of.isoformat()}"
            warnings.append(f"overlay {ov.name!r} {note}: not applied (fix: renew its expires date or remove it)")
        elif not targets or not staged_ok:
            status = "not applicable"
            note = (
                f"for {ov.framework}, which this run does not compute"
                if not targets
                else "filters on IFRS 9 stage, which this run does not compute"
            )
            warnings.append(f"overlay {ov.name!r} is {note}: not applied")
        elif not scope.any():
            status = "no loans in scope"
            note = "no loan matches its segment and stage"
            warnings.append(f"overlay {ov.name!r}: {note}; not applied")
        else:
            status = "applied"
            clipped_by_fw = []
            for fw in targets:
                if allocated is not None and ov.kind == "amount":  # the book's allocation, this part's loans
                    cents = np.zeros(n, dtype=np.int64)
                    cents[scope] = allocated[(position, fw)]
                else:
                    cents = _KINDS[ov.kind](modelled[fw], scope, ov.value)
                # a release never takes a loan's ECL below 0 (nor further below, for POCI gains)
                floored = np.maximum(cents, np.minimum(0, -running[fw]))
                clipped = int(np.count_nonzero(floored != cents))
                if clipped:
                    clipped_by_fw.append(
                        f"{fw}: floored at zero ECL on {clipped} loans "
                        f"({(int(floored.sum()) - int(cents.sum())) / 100:.2f} not applied)"
                    )
                running[fw] += floored
                adjust[fw] += floored
                effect[fw] = int(floored.sum()) / 100.0
            if clipped_by_fw:
                note = "clipped: " + "; ".join(clipped_by_fw)
                warnings.append(f"overlay {ov.name!r} {note}")
        rows.append(
            {
                "name": ov.name,
                "segment": ov.segment,
                "stage": ov.stage,
                "framework": ov.framework or "both",
                "kind": ov.kind,
                "value": ov.value,
                "rationale": ov.rationale,
                "owner": ov.owner,
                "approved": ov.approved,
                "expires": ov.expires,
                "status": status,
                "effect_ifrs9": effect["ifrs9"],
                "effect_cecl": effect["cecl"],
                "loans_in_scope": int(scope.sum()) if staged_ok else 0,
                "note": note,
            }
        )

    for fw in frameworks:
        warnings.extend(_above_exposure(loans, fw, running[fw], adjust[fw]))

    table = pd.DataFrame(rows, columns=list(TABLE_COLUMNS))
    table["stage"] = table["stage"].astype("Int64")
    table["loans_in_scope"] = table["loans_in_scope"].astype(np.int64)
    table[["effect_ifrs9", "effect_cecl", "value"]] = table[["effect_ifrs9", "effect_cecl", "value"]].astype(float)
    return OverlayResult(
        adjustments={fw: adjust[fw] / 100.0 for fw in frameworks},
        table=table,
        warnings=warnings,
    )
