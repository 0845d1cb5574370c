"""Movement tables from the loan-by-loan bridge: ledgers, wide and long tables, the footing check,
the roll-forward and the journal.

Implements
----------
MOVEMENT_LINES   line codes and their labels
check_movement   opening + movements = closing in every column, or a named error
rollforward      beginning + provision + charge-offs + recoveries = ending, by segment
journal          the provision (or release) as debit and credit lines
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from allowance.frameworks import FRAMEWORK_RULES, LedgerRules, rules_for
from allowance.exceptions import MovementError
from allowance.schemas import Framework

if TYPE_CHECKING:
    from allowance.reconcile.runs import Bridge

__all__ = ["LEDGER", "MOVEMENT_LINES", "LedgerRules", "check_movement", "journal", "rollforward", "write_off_bridge"]

#: line code -> label, in the order the tables show them (transfer lines are added per class)
MOVEMENT_LINES: dict[str, str] = {
    "opening": "Opening",
    "new": "New loans (at the closing assumptions)",
    "pcd_gross_up": "Initial allowance on PCD assets bought (gross-up of amortised cost)",
    "derecognised": "Derecognised (repaid, sold, or released on write-off)",
    "written_off": "Written off (allowance used)",
    "change_of_segment": "Moved between segments",
    "unwind": "Unwind of the discount",
    "remeasurement": "Remeasurement at prior assumptions",
    "modifications": "Modifications not derecognised",
    "model_change": "Changes in models or methods",
    "assumptions": "Changes in assumptions or scenarios",
    "overlays": "Overlay changes",
    "other_changes": "Other changes (repayments, amortisation, drawings)",
    "closing": "Closing",
}
_ALLOWANCE_BODY = ("unwind", "remeasurement", "modifications", "model_change", "assumptions", "overlays")
_GROSS_BODY = ("other_changes",)
_ROLLFORWARD = ("beginning", "initial_allowance_pcd", "provision", "charge_offs", "recoveries", "ending")


#: framework -> how it books write-offs and recoveries (the ``ledger`` of its FrameworkRules)
LEDGER: dict[Framework, LedgerRules] = {name: rules.ledger for name, rules in FRAMEWORK_RULES.items()}
_GROSS_UP_ACCOUNT = "Loans at amortised cost (PCD gross-up, ASC 326-20-30-13)"



def _slug(label: str) -> str:
    return label.lower().replace(" ", "_").replace("-", "_")


def _ledger(bridge: Bridge, dims: tuple[str, ...], body: tuple[str, ...], prefix: str,
            transfer: tuple[np.ndarray, list[str]]) -> pd.DataFrame:
    """Entries ``dims..., line, cents`` summed per cell and line: each amount in the cell its loan sits in.

    Opening, write-offs, derecognition and the transfer out sit in the prior cell; the rest
    in the current cell. Each loan's cell is one integer (its dimensions' codes in mixed
    radix), so every line is one exact int64 sum per cell over the loans' codes; a cell and
    line appears when any loan the line applies to sits in that cell (its amount may be 0).
    ``transfer`` is each loan's transfer line (-1: it stays in its cell) and the lines' names.
    """
    sizes = [len(bridge.names(d)) for d in dims]
    n_cells = int(np.prod(sizes))
    outside = n_cells  # the cell of a loan not in that run

    def cells(side: str) -> np.ndarray:
        cell = np.zeros(len(bridge), dtype=np.int64)
        missing = np.zeros(len(bridge), dtype=bool)
        for d, size in zip(dims, sizes):
            codes = bridge.codes(d, side)
            cell = cell * size + codes
            missing |= codes < 0
        return np.where(missing, outside, cell)

    cell = {"prior": cells("prior"), "current": cells("current")}
    rows: list[tuple[np.ndarray, str, np.ndarray]] = []

    def add(mask: np.ndarray, side: str, lines: tuple[str, ...]) -> None:
        where = np.where(mask, cell[side], outside)
        present = np.flatnonzero(np.bincount(where, minlength=outside + 1)[:outside])
        for line in lines:
            # every amount is 0 where its line does not apply (Bridge), so a sum over all loans is exact
            sums = _sums(cell[side], bridge.amounts[prefix + line], outside + 1)
            rows.append((present, line, sums[present]))

    in_p, in_c = bridge.in_prior, bridge.in_current
    add(in_p, "prior", ("opening", "written_off"))
    new = in_c & ~in_p
    add(new, "current", ("new", "pcd_gross_up") if prefix + "pcd_gross_up" in bridge.amounts else ("new",))
    add(in_p & ~in_c, "prior", ("derecognised",))
    line_codes, line_names = transfer
    moved = np.flatnonzero(line_codes >= 0)
    amount = bridge.amounts[prefix + "transfer"][moved]
    for side, sign in (("prior", -1), ("current", 1)):
        key = cell[side][moved] * len(line_names) + line_codes[moved]
        size = (outside + 1) * len(line_names)
        present = np.flatnonzero(np.bincount(key, minlength=size))
        sums = _sums(key, sign * amount, size)[present]
        for code, name in enumerate(line_names):
            pick = present % len(line_names) == code
            rows.append((present[pick] // len(line_names), name, sums[pick]))
    add(in_c, "current", (*body, "closing"))
    found = np.concatenate([r[0] for r in rows]) if rows else np.zeros(0, dtype=np.int64)
    out = {}
    for d, codes in zip(dims, np.unravel_index(found, sizes) if n_cells else [found] * len(dims)):
        out[d] = np.asarray(bridge.names(d), dtype=object)[codes]
    out["line"] = np.repeat(np.array([r[1] for r in rows], dtype=object), [len(r[0]) for r in rows])
    out["cents"] = np.concatenate([r[2] for r in rows]).astype(np.int64) if rows else np.zeros(0, dtype=np.int64)
    return pd.DataFrame(out)


def _sums(codes: np.ndarray, values: np.ndarray, size: int) -> np.ndarray:
    """Exact int64 sums of ``values`` per code 0..size-1."""
    out = np.zeros(size, dtype=np.int64)
    np.add.at(out, codes, values)
    return out


def _transfer_lines(bridge: Bridge, dims: tuple[str, ...], class_dim: str | None) -> tuple[np.ndarray, list[str]]:
    """Per loan, the code of the transfer line it moves on (-1 when it stays in its cell), and the lines' names."""
    cont = bridge.in_prior & bridge.in_current
    line = np.full(len(bridge), -1, dtype=np.int64)
    names = []
    if class_dim is not None and class_dim in dims:
        # one line per class, never a label per loan: the class it moves into
        changed = cont & (bridge.class_prior != bridge.klass)
        line = np.where(changed, bridge.klass, line)
        names = ["transfer_to_" + _slug(str(k)) for k in bridge.classes]
    if "segment" in dims:
        seg_changed = cont & (bridge.segment_prior != bridge.segment)
        line = np.where(seg_changed & (line < 0), len(names), line)
        names = [*names, "change_of_segment"]
    return line, names


def _label(line: str, labels: Mapping[str, str]) -> str:
    """A line's label: ``labels`` names each transfer's class and may restate any other line
    (remeasurement that holds what the inputs could not isolate); else :data:`MOVEMENT_LINES`."""
    if line.startswith("transfer_to_"):
        return f"Transfer to {labels.get(line, line[len('transfer_to_'):])}"
    return labels.get(line, MOVEMENT_LINES[line])


def _line_order(classes: list[str], body: tuple[str, ...], segment_moves: bool, gross_up: bool = False) -> list[str]:
    transfers = [f"transfer_to_{_slug(c)}" for c in classes]
    moves = ["change_of_segment"] if segment_moves else []
    first = ["opening", "new", "pcd_gross_up"] if gross_up else ["opening", "new"]
    return [*first, "derecognised", "written_off", *transfers, *moves, *body, "closing"]


def check_movement(table: pd.DataFrame, *, what: str = "movement") -> None:
    """Raise :class:`MovementError` unless every column foots and every transfer line nets to zero.

    ``table`` is a wide movement table (``line`` column, one column per class, ``total``) in
    currency units or cents; amounts are compared in whole cents, so a one-cent break fails.

    Examples
    --------
    >>> t = pd.DataFrame({"line": ["opening", "new", "closing"], "stage 1": [10.0, 2.5, 12.5],
    ...                   "total": [10.0, 2.5, 12.5]})
    >>> check_movement(t)
    >>> check_movement(t.assign(**{"stage 1": [10.0, 2.5, 12.51]}))
    Traceback (most recent call last):
    ...
    allowance.exceptions.MovementError: movement: column stage 1: opening + movements = 12.50 but closing = 12.51 (a break of 0.01)
    """
    value_cols = [c for c in table.columns if c not in ("line", "label")]
    cents = np.rint(table[value_cols].to_numpy(dtype=np.float64) * 100.0).astype(np.int64)
    lines = table["line"].tolist()
    if "opening" not in lines or "closing" not in lines:
        raise MovementError(f"{what}: the table has no opening or closing line")
    close = lines.index("closing")
    body = [i for i, line in enumerate(lines) if line != "closing"]
    for j, name in enumerate(value_cols):
        total, closing = int(cents[body, j].sum()), int(cents[close, j])
        if total != closing:
            raise MovementError(
                f"{what}: column {name}: opening + movements = {total / 100:.2f} but closing = "
                f"{closing / 100:.2f} (a break of {(closing - total) / 100:.2f})"
            )
    inner = [j for j, name in enumerate(value_cols) if name != "total"]
    for i, line in enumerate(lines):
        if (line.startswith("transfer_to_") or line == "change_of_segment") and cents[i, inner].sum() != 0:
            raise MovementError(f"{what}: line {line} does not net to zero across the columns "
                                f"({cents[i, inner].sum() / 100:.2f})")
    if "total" in value_cols and inner:
        t = value_cols.index("total")
        off = np.flatnonzero(cents[:, inner].sum(axis=1) != cents[:, t])
        if len(off):
            raise MovementError(f"{what}: line {lines[off[0]]}: the columns do not add to the total")


def _wide(ledger: pd.DataFrame, dim: str, columns: list[str], order: list[str], labels: Mapping[str, str]) -> pd.DataFrame:
    sums = ledger.groupby([dim, "line"], sort=False)["cents"].sum()
    grid = sums.unstack(dim).reindex(index=order, columns=columns).fillna(0).astype(np.int64)
    grid["total"] = grid.sum(axis=1)
    out = (grid / 100.0).reset_index().rename(columns={"index": "line"})
    out.columns.name = None
    out.insert(1, "label", [_label(line, labels) for line in out["line"]])
    return out


def _long(ledger: pd.DataFrame, order: list[str], labels: Mapping[str, str], classes: list[str]) -> pd.DataFrame:
    sums = ledger.groupby(["segment", "class", "line"], sort=True)["cents"].sum().reset_index()
    rank = {line: i for i, line in enumerate(order)}
    class_rank = {k: i for i, k in enumerate(classes)}
    sums = sums.assign(_rank=sums["line"].map(rank), _class=sums["class"].map(class_rank))
    sums = sums.sort_values(["segment", "_class", "_rank"], kind="stable")
    out = sums.drop(columns=["_rank", "_class"]).reset_index(drop=True)
    out["label"] = [_label(line, labels) for line in out["line"]]
    out["amount"] = out.pop("cents") / 100.0
    return out[["segment", "class", "line", "label", "amount"]]


def _check_long(detail: pd.DataFrame, order: list[str], what: str) -> None:
    """Pivot the long detail to one column per segment x class and check it as a whole."""
    cell = detail["segment"].astype(str) + " / " + detail["class"].astype(str)
    wide = detail.assign(cell=cell).pivot_table(index="line", columns="cell", values="amount", aggfunc="sum")
    wide = wide.reindex(order).fillna(0.0).reset_index()
    wide.columns.name = None
    check_movement(wide, what=what)


# --------------------------------------------------------------------------------------
# Roll-forward and journal
# --------------------------------------------------------------------------------------


def _by_segment(bridge: Bridge, codes: np.ndarray, mask: np.ndarray, values: np.ndarray) -> pd.Series:
    """Sums per segment (labels as the index) of the loans in ``mask``: a segment appears when any
    of them sits in it."""
    names = bridge.segments
    where = np.where(mask, codes, len(names))
    present = np.flatnonzero(np.bincount(where, minlength=len(names) + 1)[:len(names)])
    sums = _sums(where, np.where(mask, values, 0), len(names) + 1)
    return pd.Series(sums[present], index=pd.Index([names[i] for i in present], dtype=object), dtype=np.int64)


def rollforward(bridge: Bridge, framework: Framework) -> pd.DataFrame:
    """Per segment: beginning + initial PCD allowance + provision + charge-offs + recoveries = ending.

    ASC 326-20-50-13's roll-forward. Charge-offs are the gross charge-offs under CECL and
    the allowance used under IFRS 9 (:data:`LEDGER`); recoveries enter the allowance under
    CECL only; the PCD gross-up (CECL) is its own column, not provision. The provision is
    the balancing figure: the period's charge to profit or loss through the allowance.
    """
    rules = LEDGER[framework]
    col = bridge.amounts.__getitem__
    in_p, in_c = bridge.in_prior, bridge.in_current
    everyone = np.ones(len(bridge), dtype=bool)
    begin = _by_segment(bridge, bridge.segment_prior, in_p, col("opening"))
    end = _by_segment(bridge, bridge.segment, in_c, col("closing"))
    initial = _by_segment(bridge, bridge.segment, in_c, col("pcd_gross_up"))
    if rules.charge_offs == "gross":
        chg = -_by_segment(bridge, bridge.segment_any, everyone, col("gross_charge_off"))
    else:
        chg = _by_segment(bridge, bridge.segment_prior, in_p, col("written_off"))
    rec = (_by_segment(bridge, bridge.segment_any, everyone, col("recoveries")) if rules.recoveries_to_allowance
           else pd.Series(dtype=np.int64))
    segments = sorted(set(begin.index) | set(end.index) | set(chg.index) | set(rec.index), key=str)
    roll = pd.DataFrame({"beginning": begin, "initial_allowance_pcd": initial, "charge_offs": chg,
                         "recoveries": rec, "ending": end}).reindex(segments)
    roll = roll.fillna(0).astype(np.int64)
    roll["provision"] = (roll["ending"] - roll["beginning"] - roll["initial_allowance_pcd"] - roll["charge_offs"]
                         - roll["recoveries"])
    roll.loc["Total"] = roll.sum(axis=0)
    return (roll[list(_ROLLFORWARD)] / 100.0).rename_axis("segment").reset_index()


def write_off_bridge(bridge: Bridge, framework: Framework) -> pd.DataFrame:
    """From the allowance written off (IFRS 7 35H) to the gross charge-offs and recoveries.

    Per segment and ``Total``: ``allowance_written_off`` (the allowance used),
    ``charged_off_beyond_allowance`` (charge-offs not covered by the loan's own allowance,
    including loans in neither run), ``gross_charge_offs`` (their sum), ``recoveries``,
    ``recoveries_treatment`` (per framework, :data:`LEDGER`) and ``credit_loss_expense``:
    the period's charge to profit or loss, ending - beginning - PCD gross-up + gross
    charge-offs - recoveries, the same under both frameworks however it is presented.
    """
    rules = LEDGER[framework]
    col = bridge.amounts.__getitem__
    everyone = np.ones(len(bridge), dtype=bool)
    by = {
        "allowance_written_off": -col("written_off"),
        "gross_charge_offs": col("gross_charge_off"),
        "recoveries": col("recoveries"),
        "change": np.where(bridge.in_current, col("closing"), 0) - np.where(bridge.in_prior, col("opening"), 0)
        - col("pcd_gross_up"),
    }
    sums = pd.DataFrame({k: _by_segment(bridge, bridge.segment_any, everyone, v) for k, v in by.items()})
    sums = sums.sort_index().astype(np.int64) if len(sums) else sums.astype(np.int64)
    sums.loc["Total"] = sums.sum(axis=0)
    sums["charged_off_beyond_allowance"] = sums["gross_charge_offs"] - sums["allowance_written_off"]
    sums["credit_loss_expense"] = sums["change"] + sums["gross_charge_offs"] - sums["recoveries"]
    money = ["allowance_written_off", "charged_off_beyond_allowance", "gross_charge_offs", "recoveries",
             "credit_loss_expense"]
    out = (sums[money] / 100.0).rename_axis("segment").reset_index()
    out.insert(5, "recoveries_treatment", rules.recoveries_treatment)
    return out


def journal(roll: pd.DataFrame, framework: Framework, presented: pd.Series | None = None) -> pd.DataFrame:
    """The allowance entries: provision (or release) by segment, the CECL PCD gross-up, and the
    part of the allowance presented as a provision for commitments.

    ``presented`` (segment -> integer cents) is the change over the period in the ECL shown
    apart from the loss allowance: the IFRS 9 provision for loan commitments and financial
    guarantees (IFRS 9 5.5.20, IFRS 7 B8E), the CECL liability for off-balance-sheet credit
    exposure (ASC 326-20-30-11). It moves between the allowance and that account (an increase
    debits the allowance and credits the provision); the expense is already in the provision line.
    """
    rules = rules_for(framework)
    expense, allowance = rules.journal_accounts
    moved = presented if presented is not None else pd.Series(dtype=np.int64)
    rows = []
    for segment, provision, initial in zip(roll["segment"], roll["provision"], roll["initial_allowance_pcd"]):
        if segment == "Total":
            continue
        shift = int(moved.get(segment, 0)) / 100.0
        if round(provision, 2) != 0:
            amount = abs(provision)
            entry = "provision" if provision > 0 else "release"
            debit, credit = (expense, allowance) if provision > 0 else (allowance, expense)
            rows.append({"segment": segment, "entry": entry, "account": debit, "debit": amount, "credit": 0.0})
            rows.append({"segment": segment, "entry": entry, "account": credit, "debit": 0.0, "credit": amount})
        if round(initial, 2) != 0:
            rows.append({"segment": segment, "entry": "PCD gross-up", "account": _GROSS_UP_ACCOUNT,
                         "debit": initial, "credit": 0.0})
            rows.append({"segment": segment, "entry": "PCD gross-up", "account": allowance,
                         "debit": 0.0, "credit": initial})
        if shift != 0:
            amount = abs(shift)
            debit, credit = (allowance, rules.provision_account) if shift > 0 else (rules.provision_account, allowance)
            for account, dr, cr in ((debit, amount, 0.0), (credit, 0.0, amount)):
                rows.append({"segment": segment, "entry": "undrawn commitments presented as a provision",
                             "account": account, "debit": dr, "credit": cr})
    journal = pd.DataFrame(rows, columns=["segment", "entry", "account", "debit", "credit"])
    cents = np.rint(journal[["debit", "credit"]].to_numpy(dtype=np.float64) * 100).astype(np.int64).sum(axis=0)
    total = {"segment": "Total", "entry": "", "account": "", "debit": cents[0] / 100, "credit": cents[1] / 100}
    return pd.concat([journal, pd.DataFrame([total])], ignore_index=True)
