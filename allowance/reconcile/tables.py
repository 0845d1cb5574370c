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

import numpy as np
import pandas as pd

from allowance.frameworks import FRAMEWORK_RULES, LedgerRules, rules_for
from allowance.exceptions import MovementError
from allowance.schemas import Framework

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


def _ledger(bridge: pd.DataFrame, dims: tuple[str, ...], body: tuple[str, ...], prefix: str,
            transfer_line: np.ndarray) -> pd.DataFrame:
    """Entries ``dims..., line, cents`` summed per cell and line: each amount in the cell its loan sits in.

    Opening, write-offs, derecognition and the transfer out sit in the prior cell; the rest
    in the current cell. The loan-level entries are kept as integer codes (each dimension
    factorised once over both sides) and summed in exact int64 before any text is attached:
    a row of text per loan and line cost seconds to build on a large book.
    """
    side_codes: dict[str, dict[str, np.ndarray]] = {}
    dim_names: dict[str, np.ndarray] = {}
    for d in dims:
        prior, current = bridge[d + "_prior"].to_numpy(dtype=object), bridge[d].to_numpy(dtype=object)
        codes, names = pd.factorize(np.concatenate([prior, current]), use_na_sentinel=False)
        side_codes[d] = {"prior": codes[:len(prior)], "current": codes[len(prior):]}
        dim_names[d] = np.asarray(names, dtype=object)
    line_names: list[str] = []
    parts: list[tuple[np.ndarray, str, np.ndarray, np.ndarray]] = []

    def add(mask: np.ndarray, side: str, line: str | np.ndarray, values: np.ndarray) -> None:
        if isinstance(line, np.ndarray):
            codes, names = pd.factorize(line[mask])
            line_codes = np.asarray(codes, dtype=np.int64) + len(line_names)
            line_names.extend(str(n) for n in names)
        else:
            line_codes = np.full(int(mask.sum()), len(line_names), dtype=np.int64)
            line_names.append(line)
        parts.append((mask, side, line_codes, values[mask]))

    in_p, in_c = bridge["in_prior"].to_numpy(), bridge["in_current"].to_numpy()
    col = lambda name: bridge[prefix + name].to_numpy(dtype=np.int64)  # noqa: E731
    add(in_p, "prior", "opening", col("opening"))
    add(in_c & ~in_p, "current", "new", col("new"))
    if prefix + "pcd_gross_up" in bridge.columns:
        add(in_c & ~in_p, "current", "pcd_gross_up", col("pcd_gross_up"))
    add(in_p & ~in_c, "prior", "derecognised", col("derecognised"))
    add(in_p, "prior", "written_off", col("written_off"))
    moved = transfer_line != ""
    add(moved, "prior", transfer_line, -col("transfer"))
    add(moved, "current", transfer_line, col("transfer"))
    for line in body:
        add(in_c, "current", line, col(line))
    add(in_c, "current", "closing", col("closing"))
    # each entry's cell and line as one int64 key (mixed radix); every add() numbered its lines
    # afresh, so no key is shared between parts, and the cells come out in order of first
    # appearance, part after part (the order a group-by of the entries without sorting gives)
    radix = [len(dim_names[d]) for d in dims] + [len(line_names)]
    found: list[np.ndarray] = []
    sums: list[np.ndarray] = []
    for mask, side, line_codes, values in parts:
        key = np.ravel_multi_index([*(side_codes[d][side][mask] for d in dims), line_codes], radix)
        codes, keys = pd.factorize(key)
        order = np.argsort(codes, kind="stable")
        starts = np.flatnonzero(np.r_[True, np.diff(codes[order]) != 0])
        found.append(np.asarray(keys, dtype=np.int64))
        sums.append(np.add.reduceat(values[order], starts) if len(order) else np.zeros(0, dtype=np.int64))
    key = np.concatenate(found) if found else np.zeros(0, dtype=np.int64)
    *cells, line = np.unravel_index(key, radix)
    out = {d: dim_names[d][cell] for d, cell in zip(dims, cells)}
    out["line"] = np.asarray(line_names, dtype=object)[line]
    out["cents"] = (np.concatenate(sums) if sums else np.zeros(0)).astype(np.int64)  # exact: int64 sums
    return pd.DataFrame(out)


def _transfer_lines(bridge: pd.DataFrame, dims: tuple[str, ...], class_dim: str | None) -> np.ndarray:
    """Per loan, the transfer line it moves on ('' when it stays in its cell)."""
    cont = (bridge["in_prior"] & bridge["in_current"]).to_numpy()
    line = np.full(len(bridge), "", dtype=object)
    if class_dim is not None and class_dim in dims:
        changed = cont & (bridge[class_dim + "_prior"].to_numpy(dtype=object) != bridge[class_dim].to_numpy(dtype=object))
        # one label per distinct class, not per loan
        codes, kinds = pd.factorize(bridge[class_dim].to_numpy(dtype=object))
        labels = np.array(["transfer_to_" + _slug(str(k)) for k in kinds] + [""], dtype=object)
        dest = labels[codes]  # code -1 (no class: not in the current run) takes the last label, ""
        line = np.where(changed, dest, line)
    if "segment" in dims:
        seg_changed = cont & (bridge["segment_prior"].to_numpy(dtype=object) != bridge["segment"].to_numpy(dtype=object))
        line = np.where(seg_changed & (line == ""), "change_of_segment", line)
    return line


def _label(line: str, classes: Mapping[str, str]) -> str:
    if line.startswith("transfer_to_"):
        return f"Transfer to {classes.get(line, line[len('transfer_to_'):])}"
    return MOVEMENT_LINES[line]


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


def rollforward(bridge: pd.DataFrame, framework: Framework) -> pd.DataFrame:
    """Per segment: beginning + initial PCD allowance + provision + charge-offs + recoveries = ending.

    ASC 326-20-50-13's roll-forward. Charge-offs are the gross charge-offs under CECL and
    the allowance used under IFRS 9 (:data:`LEDGER`); recoveries enter the allowance under
    CECL only; the PCD gross-up (CECL) is its own column, not provision. The provision is
    the balancing figure: the period's charge to profit or loss through the allowance.
    """
    rules = LEDGER[framework]

    def by(seg_col: str, mask: np.ndarray, values: np.ndarray) -> pd.Series:
        # grouped by the labels as an array: a Series indexed by a million labels would build a
        # hash table of its index to check the grouping key first (0.4 s against 0.1 s)
        return pd.Series(values[mask]).groupby(bridge[seg_col].to_numpy(dtype=object)[mask]).sum()

    col = lambda name: bridge[name].to_numpy(dtype=np.int64)  # noqa: E731
    in_p, in_c = bridge["in_prior"].to_numpy(), bridge["in_current"].to_numpy()
    everyone = np.ones(len(bridge), dtype=bool)
    begin = by("segment_prior", in_p, col("opening"))
    end = by("segment", in_c, col("closing"))
    initial = by("segment", in_c, col("pcd_gross_up")) if "pcd_gross_up" in bridge else pd.Series(dtype=np.int64)
    if rules.charge_offs == "gross":
        chg = -by("segment_any", everyone, col("gross_charge_off"))
    else:
        chg = by("segment_prior", in_p, col("written_off"))
    rec = by("segment_any", everyone, col("recoveries")) if rules.recoveries_to_allowance else pd.Series(dtype=np.int64)
    segments = sorted(set(begin.index) | set(end.index) | set(chg.index) | set(rec.index), key=str)
    roll = pd.DataFrame({"beginning": begin, "initial_allowance_pcd": initial, "charge_offs": chg,
                         "recoveries": rec, "ending": end}).reindex(segments)
    roll = roll.fillna(0).astype(np.int64)
    roll["provision"] = (roll["ending"] - roll["beginning"] - roll["initial_allowance_pcd"] - roll["charge_offs"]
                         - roll["recoveries"])
    roll.loc["Total"] = roll.sum(axis=0)
    return (roll[list(_ROLLFORWARD)] / 100.0).rename_axis("segment").reset_index()


def write_off_bridge(bridge: pd.DataFrame, framework: Framework) -> pd.DataFrame:
    """From the allowance written off (IFRS 7 35H) to the gross charge-offs and recoveries.

    Per segment and ``Total``: ``allowance_written_off`` (the allowance used),
    ``charged_off_beyond_allowance`` (charge-offs not covered by the loan's own allowance,
    including loans in neither run), ``gross_charge_offs`` (their sum), ``recoveries``,
    ``recoveries_treatment`` (per framework, :data:`LEDGER`) and ``credit_loss_expense``:
    the period's charge to profit or loss, ending - beginning - PCD gross-up + gross
    charge-offs - recoveries, the same under both frameworks however it is presented.
    """
    rules = LEDGER[framework]
    col = lambda name: bridge[name].to_numpy(dtype=np.int64)  # noqa: E731
    seg = bridge["segment_any"].to_numpy(dtype=object)
    frame = pd.DataFrame({
        "segment": seg,
        "allowance_written_off": -col("written_off"),
        "gross_charge_offs": col("gross_charge_off"),
        "recoveries": col("recoveries"),
        "change": np.where(bridge["in_current"], col("closing"), 0) - np.where(bridge["in_prior"], col("opening"), 0)
        - col("pcd_gross_up"),
    })
    sums = frame.groupby("segment", sort=True).sum()
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
