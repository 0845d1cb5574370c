"""What counts as a change of model or method between two runs' assumptions.

Implements
----------
method_changes   per segment (``"*"``: every segment), the method keys that changed

A *method* is the choice of how a figure is computed, not its parameters: the PD source
(``pd_12m``, ``pd_curve``, a roll-rate matrix...) or loss-rate method, collateral-based or flat LGD, the
prepayment source, how scenarios move PDs (multipliers or a z path), CECL discounting and
reversion, the IFRS 9 PD-ratio measure. A change of parameters (a PD of 2 % becoming 2.5 %)
is a change in assumptions. IFRS 7 35I(a)/B8D and ASC 326-20-50-11(c) ask for changes in
models or methods to be shown apart; the movement puts their effect on its own line.
"""

from __future__ import annotations

from collections.abc import Mapping

from allowance.schemas import PD_SOURCE_KEYS

__all__ = ["method_changes"]

#: the keys that carry a segment's credit-loss estimate: a PD source, or a loss rate (ASC 326-20-30-3)
_PD_SOURCES = (*PD_SOURCE_KEYS, "lifetime_loss_rate", "annual_loss_rate", "vintage_loss_curve")
_PREPAYMENT = ("cpr", "psa", "cpr_by_age")


def _given(table: Mapping, keys: tuple[str, ...]) -> str:
    found = [k for k in keys if table.get(k) is not None]
    return "+".join(found) or "none"


def _segment_methods(seg: Mapping) -> dict[str, str]:
    return {
        "PD source": _given(seg, _PD_SOURCES),
        "LGD": "collateral" if seg.get("collateral_lgd") else "flat",
        "prepayment": _given(seg, _PREPAYMENT),
    }


def _run_methods(a: Mapping) -> dict[str, str]:
    cecl, ifrs9 = a.get("cecl") or {}, a.get("ifrs9") or {}
    scenarios = a.get("scenarios") or {}
    paths = sorted({("z" if s.get("z") else "pd_multiplier") for s in scenarios.values()})
    return {
        "CECL discounting": str(cecl.get("discount")),
        "CECL reversion": str(cecl.get("reversion")),
        "IFRS 9 PD-ratio measure": str(ifrs9.get("sicr_pd_measure")),
        "scenario PD paths": "+".join(paths),
    }


def method_changes(prior: Mapping, current: Mapping) -> dict[str, tuple[str, ...]]:
    """Segment -> the method keys whose choice changed (``"*"`` for run-wide methods).

    ``prior`` and ``current`` are assumptions in the shape of the file (``run.json``'s
    ``assumptions``, or ``Assumptions.model_dump(mode="json")``). A segment in only one of
    them is not a method change (it has no prior figure to compare).

    Examples
    --------
    >>> p = {"segments": {"auto": {"pd_12m": 0.02, "lgd": 0.4}, "card": {"pd_12m": 0.05, "lgd": 0.8}},
    ...      "cecl": {"discount": False, "reversion": "straight_line"}}
    >>> c = {"segments": {"auto": {"pd_curve": [0.02, 0.04], "lgd": 0.4}, "card": {"pd_12m": 0.06, "lgd": 0.8}},
    ...      "cecl": {"discount": True, "reversion": "straight_line"}}
    >>> method_changes(p, c)
    {'*': ('CECL discounting: False -> True',), 'auto': ('PD source: pd_12m -> pd_curve',)}
    """
    out: dict[str, tuple[str, ...]] = {}
    before, after = _run_methods(prior), _run_methods(current)
    run_wide = tuple(f"{k}: {before[k]} -> {after[k]}" for k in after if before[k] != after[k])
    if run_wide:
        out["*"] = run_wide
    p_seg, c_seg = prior.get("segments") or {}, current.get("segments") or {}
    for name in sorted(set(p_seg) & set(c_seg)):
        b, a = _segment_methods(p_seg[name]), _segment_methods(c_seg[name])
        changed = tuple(f"{k}: {b[k]} -> {a[k]}" for k in a if b[k] != a[k])
        if changed:
            out[name] = changed
    return out
