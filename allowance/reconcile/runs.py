"""Reading the two runs for the movement: validated columns in cents, and the loan-by-loan bridge.

Implements
----------
prepare_run     the columns a movement needs, in whole cents, keyed by the neutralised loan id
prepare_charge_offs
bridge          one row per loan in either run: every line's amount in cents
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from allowance.exceptions import MovementError
from allowance.frameworks import rules_for
from allowance.text import neutralise_text
from allowance.schemas import Framework

__all__ = ["UNASSIGNED_SEGMENT", "bridge", "prepare_charge_offs", "prepare_run"]


#: the roll-forward segment of charge-offs for loans in neither run, when the file gives none
UNASSIGNED_SEGMENT = "(in neither run)"


def _show(value: object) -> str:
    """A cell value as a message shows it: text quoted, numbers plain, blanks as 'blank'."""
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return "blank"
    return repr(value) if isinstance(value, str) else str(value)


def _objects(values) -> pd.Series:
    """Text as a column of Python strings that stays one: the bridge joins and selects it as
    object arrays (``np.where`` over both runs), and a frame built from a bare object array
    would convert it to Arrow text and the bridge back again, a pass over the book each way."""
    return pd.Series(np.asarray(values, dtype=object), dtype=object, copy=False)


def _cents(values: pd.Series, *, column: str, source: str, ids: pd.Series) -> np.ndarray:
    """Money in currency units -> whole cents; a blank or non-number is a named error."""
    numbers = pd.to_numeric(values, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    bad = ~np.isfinite(numbers)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise MovementError(
            f"loan {ids.iloc[i]!r}: {column} is blank or not a number ({_show(values.iloc[i])})",
            file=source, column=column, hint="rerun that run so every loan carries its figures",
        )
    return np.rint(numbers * 100.0).astype(np.int64)


def _flags(values: pd.Series) -> np.ndarray:
    if pd.api.types.is_bool_dtype(values.dtype):
        return values.to_numpy(dtype=bool)
    text = values.astype(str).str.strip().str.lower()
    return text.isin(["true", "1", "1.0", "y", "yes"]).to_numpy()


def _optional_cents(frame: pd.DataFrame, column: str, source: str, ids: pd.Series) -> np.ndarray | None:
    """A money column a run may not carry (older runs): cents, blanks as 0; None when absent."""
    if column not in frame.columns:
        return None
    values = pd.to_numeric(frame[column], errors="coerce").fillna(0.0)
    return _cents(values, column=column, source=source, ids=ids)


def prepare_run(frame: pd.DataFrame, framework: Framework, source: str, *, modelled_only: bool = False) -> pd.DataFrame:
    """The columns the movement needs, in cents, keyed by the neutralised loan id."""
    rules = rules_for(framework)
    final = f"ecl_{framework}"
    modelled = f"ecl_{framework}_modelled"
    need = ["loan_id", modelled if modelled_only else final]
    if not modelled_only:
        need += ["segment", "balance"] + (["stage"] if rules.staged else [])
    missing = [c for c in need if c not in frame.columns]
    if modelled_only and missing == [modelled] and final in frame.columns:
        missing, modelled = [], final
    if missing:
        raise MovementError(
            f"the loans lack column(s) {', '.join(missing)} needed for the {framework} movement",
            file=source, column=missing[0], hint=f"use a run that included {framework}",
        )
    ids = frame["loan_id"].astype(str)
    out = pd.DataFrame({"key": _objects(neutralise_text(ids)), "loan_id": _objects(ids)})
    dupes = out["key"][out["key"].duplicated()]
    if len(dupes):
        raise MovementError(
            f"loan {dupes.iloc[0]!r} appears more than once", file=source, column="loan_id",
            hint="each loan must appear once in a run",
        )
    if modelled_only:
        out["mod"] = _cents(frame[modelled], column=modelled, source=source, ids=ids)
        return out.set_index("key")
    out["segment"] = _objects(frame["segment"].astype(str))
    out["ecl"] = _cents(frame[final], column=final, source=source, ids=ids)
    out["mod"] = (
        _cents(frame[modelled], column=modelled, source=source, ids=ids) if modelled in frame.columns else out["ecl"]
    )
    out["bal"] = _cents(frame["balance"], column="balance", source=source, ids=ids)
    # CECL: the allowance at purchase of a PCD asset bought in the period (a gross-up)
    gross_up = _optional_cents(frame, "pcd_gross_up", source, ids)
    out["gross_up"] = gross_up if gross_up is not None else np.zeros(len(frame), dtype=np.int64)
    rate = f"discount_rate_{framework}"
    out["rate"] = (pd.to_numeric(frame[rate], errors="coerce").fillna(0.0).to_numpy(np.float64)
                   if rate in frame.columns else np.full(len(frame), np.nan))
    out["modified"] = _flags(frame["modified"]) if "modified" in frame.columns else np.zeros(len(frame), dtype=bool)
    poci = _flags(frame["poci"]) if "poci" in frame.columns else np.zeros(len(frame), dtype=bool)
    if rules.staged:
        stage = pd.to_numeric(frame["stage"], errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
        bad = ~np.isin(stage, (1.0, 2.0, 3.0))
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise MovementError(
                f"loan {ids.iloc[i]!r}: stage {_show(frame['stage'].iloc[i])} is not 1, 2 or 3",
                file=source, column="stage", hint="use the loans.csv the run wrote",
            )
        out["klass"] = rules.class_labels(stage.astype(np.int64), poci)
    else:
        out["klass"] = rules.class_labels(np.ones(len(frame), dtype=np.int64), poci)
    return out.set_index("key")


def prepare_charge_offs(frame: pd.DataFrame | None, source: str) -> pd.DataFrame:
    """Charge-offs of the period, summed per loan: ``gco`` and ``rec`` in cents (+ ``segment``)."""
    cols = ["gco", "rec", "segment"]
    if frame is None or len(frame) == 0:
        return pd.DataFrame(columns=cols, index=pd.Index([], name="key"))
    missing = [c for c in ("loan_id", "gross_charge_off") if c not in frame.columns]
    if missing:
        raise MovementError(
            f"the charge-off file lacks column {missing[0]}", file=source, column=missing[0],
            hint="give loan_id, gross_charge_off and (optionally) recoveries and segment",
        )
    ids = frame["loan_id"].astype(str)
    gco = _cents(frame["gross_charge_off"], column="gross_charge_off", source=source, ids=ids)
    if "recoveries" in frame.columns:
        raw = frame["recoveries"].astype(object)
        blank = raw.isna().to_numpy() | (raw.astype(str).str.strip() == "").to_numpy()
        raw = raw.where(~blank, 0.0)
    rec = (
        _cents(raw, column="recoveries", source=source, ids=ids)
        if "recoveries" in frame.columns
        else np.zeros(len(frame), dtype=np.int64)
    )
    for name, values in (("gross_charge_off", gco), ("recoveries", rec)):
        if (values < 0).any():
            i = int(np.flatnonzero(values < 0)[0])
            raise MovementError(
                f"loan {ids.iloc[i]!r}: {name} is negative", file=source, column=name,
                hint="give charge-offs and recoveries as positive amounts",
            )
    segment = frame["segment"].astype(str) if "segment" in frame.columns else pd.Series(pd.NA, index=frame.index)
    parts = pd.DataFrame({"key": _objects(neutralise_text(ids)), "gco": gco, "rec": rec,
                          "segment": _objects(segment)})
    return parts.groupby("key", sort=False).agg(gco=("gco", "sum"), rec=("rec", "sum"), segment=("segment", "first"))


# --------------------------------------------------------------------------------------
# The loan-by-loan bridge
# --------------------------------------------------------------------------------------


def bridge(p: pd.DataFrame, c: pd.DataFrame, a: pd.DataFrame | None, co: pd.DataFrame, sources: dict,
           *, months: int | None = None, method_changed: frozenset[str] = frozenset(),
           gross_up: bool = False) -> pd.DataFrame:
    """One row per loan in either run (or charged off): every line's amount in cents.

    ``months`` is the length of the period (for the unwind of the discount; None: not
    isolated); ``method_changed`` the segments whose model or method changed (``"*"``: all);
    ``gross_up`` whether the framework grosses up a PCD asset's purchase-date allowance.
    """
    # integer keys from one hash pass over every run's ids: set operations and reindexing on
    # text keys (Arrow-backed strings) cost a Python step per element, minutes on a large book
    frames = [p, c, co] + ([a] if a is not None else [])
    ids = [f.index.to_numpy(dtype=object) for f in frames]
    codes, names = pd.factorize(np.concatenate(ids))
    bounds = np.cumsum([0, *map(len, ids)])
    p, c, co, *rerun = (f.set_axis(codes[bounds[i]:bounds[i + 1]]) for i, f in enumerate(frames))
    a = rerun[0] if rerun else None
    # codes are numbered in order of first appearance: the prior run's loans, then the new
    # ones, then loans only charged off (the order of the union of the text keys)
    n_keys = int(codes[:bounds[3]].max()) + 1 if bounds[3] else 0
    keys = np.arange(n_keys)
    pr, cu, ch = p.reindex(keys), c.reindex(keys), co.reindex(keys)
    in_p, in_c, in_co = (np.bincount(f.index.to_numpy(), minlength=n_keys) > 0 for f in (p, c, co))

    def ints(frame: pd.DataFrame, col: str) -> np.ndarray:
        return frame[col].fillna(0).to_numpy(dtype=np.int64)

    P, Pm, Bp = ints(pr, "ecl"), ints(pr, "mod"), ints(pr, "bal")
    C, Cm, Bc = ints(cu, "ecl"), ints(cu, "mod"), ints(cu, "bal")
    gco, rec = ints(ch, "gco"), ints(ch, "rec")
    if a is not None:
        lacking = c.index.difference(a.index)
        if len(lacking):
            raise MovementError(
                f"loan {c.loc[lacking[0], 'loan_id']!r} of the current run is missing from the rerun at prior "
                "assumptions", file=sources["current_at_prior_assumptions"],
                hint="rerun the whole current tape with the prior run's assumptions",
            )
        A = a["mod"].reindex(keys).fillna(0).to_numpy(dtype=np.int64)
    else:
        A = Cm

    cont, new = in_p & in_c, in_c & ~in_p
    gone = in_p & ~in_c
    written, derec = gone & in_co, gone & ~in_co
    # the allowance used by a charge-off: never more than the charge-off, never a negative
    # allowance (a POCI gain is not "written off"); what is left of a leaving loan's
    # allowance is released on derecognition
    w = np.where(in_p & in_co, np.minimum(np.maximum(P, 0), gco), 0)
    wg = np.where(in_p & in_co, np.minimum(Bp, gco), 0)
    # CECL: a PCD asset bought in the period enters with its purchase-date allowance as a
    # gross-up of amortised cost (ASC 326-20-30-13), not through the provision
    G = np.where(new & gross_up, ints(cu, "gross_up"), 0)
    # unwind of the discount on the opening (modelled) allowance of continuing loans, at the
    # rate that discounted it: P_m ((1 + r/12)^months - 1)
    rate = pr["rate"].to_numpy(dtype=np.float64)
    unwind = np.zeros(len(keys), dtype=np.int64)
    if months is not None:
        factor = np.expm1(np.log1p(np.nan_to_num(rate) / 12.0) * months)
        unwind = np.where(cont & ~np.isnan(rate), np.rint(Pm * factor), 0).astype(np.int64)
    rest = np.where(cont, A - Pm + w - unwind, 0)
    modified = cont & cu["modified"].fillna(False).to_numpy(dtype=bool)
    seg_c = cu["segment"].to_numpy(dtype=object)
    changed = np.isin(seg_c, list(method_changed)) | ("*" in method_changed)
    change = np.where(cont, Cm - A, 0)  # new loans are valued at the closing assumptions

    seg_p = pr["segment"].to_numpy(dtype=object)
    seg_any = np.where(in_p, seg_p, np.where(in_c, seg_c, ch["segment"].to_numpy(dtype=object)))
    # a loan opened and charged off within the period is in neither run: its segment comes
    # from the charge-off file when it has one, else it is shown apart
    orphan = ~(in_p | in_c) & pd.isna(pd.Series(seg_any)).to_numpy()
    seg_any = np.where(orphan, UNASSIGNED_SEGMENT, seg_any)
    loan_ids = np.where(in_c, cu["loan_id"].to_numpy(dtype=object), pr["loan_id"].to_numpy(dtype=object))
    loan_ids = np.where(pd.isna(pd.Series(loan_ids, dtype=object)).to_numpy(), names[:n_keys].astype(object), loan_ids)
    status = np.select([cont, new, written, derec], ["continuing", "new", "written off", "derecognised"],
                       "charged off outside both runs")
    return pd.DataFrame(
        {
            "loan_id": _objects(loan_ids),
            "status": status,
            "segment_prior": _objects(seg_p),
            "segment": _objects(seg_c),
            "segment_any": _objects(seg_any),
            "class_prior": _objects(pr["klass"].to_numpy(dtype=object)),
            "class": _objects(cu["klass"].to_numpy(dtype=object)),
            "in_prior": in_p,
            "in_current": in_c,
            # allowance, cents
            "opening": P,
            "new": np.where(new, C - G, 0),
            "pcd_gross_up": G,
            "derecognised": np.where(gone, -(P - w), 0),
            "written_off": -w,
            "transfer": np.where(cont, P - w, 0),
            "unwind": unwind,
            "remeasurement": np.where(modified, 0, rest),
            "modifications": np.where(modified, rest, 0),
            "model_change": np.where(changed, change, 0),
            "assumptions": np.where(changed, 0, change),
            "overlays": np.where(cont, (C - Cm) - (P - Pm), 0),
            "closing": C,
            # gross carrying amount, cents
            "g_opening": Bp,
            "g_new": np.where(new, Bc, 0),
            "g_derecognised": np.where(gone, -(Bp - wg), 0),
            "g_written_off": -wg,
            "g_transfer": np.where(cont, Bp - wg, 0),
            "g_other_changes": np.where(cont, Bc - (Bp - wg), 0),
            "g_closing": Bc,
            "gross_charge_off": gco,
            "recoveries": rec,
        }
    )
