"""What a run hands to the report writers, and the run record (``run.json``).

Implements
----------
CAUTION         the caution printed in the workbook and quoted in the README
RunReport       everything the outputs are written from (frozen)
run_record      the run record: version, inputs and their hashes, counts, totals, assumptions
money_total     the sum of rounded loan figures, in whole cents (from allowance.money)
"""

from __future__ import annotations

import dataclasses
import getpass
import os
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from datetime import datetime, timezone
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

import allowance
from allowance.frameworks import FRAMEWORK_RULES
from allowance.intake import IntakeResult, TieOut
from allowance.money import money_total, money_totals
from allowance.report import clock
from allowance.report.environment import environment
from allowance.schemas import LOAN_COUNT, Framework, InputFile, RunConfig, RunRecord
from allowance.staging import STAGE_CLASSES, stage_class_codes

if TYPE_CHECKING:
    from allowance.reconcile import Movement, WhatIf

__all__ = ["CAUTION", "RunReport", "money_total", "run_record"]

#: The caution shown on the workbook's summary sheet (the README quotes it word for word).
CAUTION = (
    "These figures are only as good as the assumptions fed into them: every PD, LGD, "
    "prepayment rate, scenario, weight and overlay came from the assumptions file of this "
    "run. Before any figure is booked or disclosed, the assumptions and the results must be "
    "reviewed and approved under the entity's own governance and model-risk policy. Where "
    "this output and the applicable accounting standard (ASC 326 or IFRS 9), the entity's "
    "auditors or its regulators differ, they prevail over this tool."
)


@dataclass(frozen=True)
class RunReport:
    """Everything a run's outputs are written from. Built by the engine; never changed.

    ``movement`` takes one :class:`~allowance.reconcile.Movement`, a sequence of them or a
    framework -> Movement mapping; :attr:`movements` always gives a tuple.
    ``what_if`` is a :class:`~allowance.reconcile.WhatIf` (or None). Frames documented as
    "may be empty" may also be passed empty with no columns.
    """

    config: RunConfig
    intake: IntakeResult
    tie_out: TieOut | None
    loans: pd.DataFrame
    overlays: pd.DataFrame = field(default_factory=pd.DataFrame)
    scenarios: pd.DataFrame = field(default_factory=pd.DataFrame)
    term_structures: pd.DataFrame = field(default_factory=pd.DataFrame)
    roll_rates: pd.DataFrame = field(default_factory=pd.DataFrame)
    reversion: pd.DataFrame = field(default_factory=pd.DataFrame)
    schedules: pd.DataFrame = field(default_factory=pd.DataFrame)
    sensitivity: pd.DataFrame = field(default_factory=pd.DataFrame)
    #: disclosure tables by name (``ifrs7_35m``, ``asc326_vintage``): see allowance.disclosure
    disclosures: Mapping[str, pd.DataFrame] = field(default_factory=dict)
    macro_paths: pd.DataFrame = field(default_factory=pd.DataFrame)
    what_if_paths: pd.DataFrame = field(default_factory=pd.DataFrame)
    pd_paths: pd.DataFrame = field(default_factory=pd.DataFrame)
    roll_forecast: pd.DataFrame = field(default_factory=pd.DataFrame)
    roll_forecast_check: pd.DataFrame = field(default_factory=pd.DataFrame)
    movement: "Movement | tuple[Movement, ...] | Mapping[Framework, Movement] | None" = None
    what_if: "WhatIf | pd.DataFrame | None" = None
    record: dict = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    #: the folder of the loan detail written part by part (:mod:`allowance.partitioned`); then
    #: ``loans`` holds the loan sums by segment, stage, POCI flag and measurement (``loan_count`` loans each)
    loan_detail: str | None = None

    @property
    def movements(self) -> "tuple[Movement, ...]":
        """The movement of each framework, in the order given."""
        m = self.movement
        if m is None:
            return ()
        if isinstance(m, Mapping):
            return tuple(m.values())
        if isinstance(m, (list, tuple)):
            return tuple(m)
        return (m,)

    @property
    def frameworks(self) -> list[Framework]:
        return self.config.frameworks

    @property
    def loan_counts(self) -> str | None:
        """The column of ``loans`` counting the loans of each row: ``loan_count`` for a book
        computed part by part (its rows are sums by group), None when a row is a loan."""
        return LOAN_COUNT if self.loan_detail is not None else None

    @property
    def what_if_parts(self) -> "WhatIf | None":
        """The what-if comparison; a bare summary frame is taken as one with no stage changes."""
        if self.what_if is None or not isinstance(self.what_if, pd.DataFrame):
            return self.what_if
        from allowance.reconcile import WhatIf

        return WhatIf(summary=self.what_if, stage_changes=pd.DataFrame())


def _user() -> str:
    user = os.environ.get("ALLOWANCE_USER")
    if user:
        return user
    try:
        return getpass.getuser()
    except (OSError, KeyError):  # no login name (containers, services)
        return "unknown"


def _jsonable(value: Any) -> Any:
    """Numbers, dates and containers into what ``json`` writes; NaN becomes None."""
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, set)):
        return [_jsonable(v) for v in value]
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return None if not np.isfinite(value) else float(value)
    if hasattr(value, "isoformat"):
        return value.isoformat()
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return _jsonable(dataclasses.asdict(value))
    return value


def _stage_codes(loans: pd.DataFrame) -> np.ndarray:
    """Each loan's class as its position in ``STAGE_CLASSES`` (-1: none): the run's
    ``stage_class`` column (factorised: no text per loan), or stage and POCI flag for older frames."""
    if "stage_class" in loans.columns:
        codes, names = pd.factorize(loans["stage_class"])
        where = np.array([STAGE_CLASSES.index(n) if n in STAGE_CLASSES else -1 for n in names.tolist()] + [-1])
        return where[codes]
    poci = loans["poci"].astype(bool).to_numpy() if "poci" in loans.columns else np.zeros(len(loans), bool)
    return stage_class_codes(loans["stage"].to_numpy(), poci)


def _segment_codes(segment: pd.Series) -> tuple[np.ndarray, list[str]]:
    """Each loan's segment as a code into the segments' names in sorted order (-1: none), as
    ``groupby("segment")`` orders and drops its groups; the names as text."""
    codes, uniques = pd.factorize(segment, use_na_sentinel=True)
    order = np.argsort(np.asarray(uniques, dtype=object), kind="stable")
    rank = np.empty(len(order) + 1, dtype=np.int64)
    rank[order] = np.arange(len(order))
    rank[-1] = -1
    return rank[codes], [str(uniques[i]) for i in order]


def run_record(
    config: RunConfig,
    intake: IntakeResult,
    loans: pd.DataFrame,
    *,
    tie_out: TieOut | None = None,
    warnings: Iterable[str] = (),
    movements: "Iterable[Movement]" = (),
    started: datetime | None = None,
    extra: Mapping[str, Any] | None = None,
) -> dict:
    """The run record written to ``run.json``: enough to identify, repeat and tie out the run.

    Parameters
    ----------
    config : RunConfig
        The merged assumptions and the input files (role, path, SHA-256, bytes).
    intake : IntakeResult
        Rows read / accepted / rejected and the tape file.
    loans : DataFrame
        The loan results; totals are sums of its rounded loan figures.
    tie_out : TieOut, optional
        The ledger tie-out, recorded figure by figure.
    warnings : iterable of str
        Run-level warnings (counted; the lines go to ``warnings.csv``).
    movements : iterable of Movement
        When a prior run was given: each framework's opening, closing and provision.
    started : datetime, optional
        When the run started (from :func:`allowance.report.clock.now`); the record's
        ``timestamp`` is :func:`~allowance.report.clock.now` when the record is built. Both
        are ``SOURCE_DATE_EPOCH`` when that is set; ``started`` defaults to ``timestamp``.
    extra : mapping, optional
        Further keys, merged in last: ``"arguments"`` (the command and its options, as the
        command line gives them), ``"what_if": {...}``.

    Returns
    -------
    dict
        JSON-ready: numbers, strings, lists and dicts only. ``assumptions`` is
        ``config.assumptions.model_dump(mode="json")``, so a later run can rerun this one;
        ``environment`` pins Python and every dependency version
        (:func:`~allowance.report.environment.environment`); ``inputs`` carries the SHA-256
        of every file read, a prior run's ``run.json`` included. With ``SOURCE_DATE_EPOCH``
        set, the same inputs give the same record, byte for byte.
    """
    inputs: list[InputFile] = list(config.inputs)
    if not any(i.role == "tape" and i.path == intake.file.path for i in inputs):
        inputs.insert(0, intake.file)
    totals: dict[str, dict[str, float]] = {}
    classes = present = segments = None  # each loan's class and segment, coded once for every framework
    for f in config.frameworks:
        entry = {}
        # drawn + undrawn = modelled; provision: the part shown apart from the loss allowance
        # (IFRS 9 5.5.20, IFRS 7 B8E; ASC 326-20-30-11)
        for key, col in (("allowance", f"ecl_{f}"), ("modelled", f"ecl_{f}_modelled"), ("overlays", f"overlay_{f}"),
                         ("drawn", f"ecl_{f}_drawn"), ("undrawn", f"ecl_{f}_undrawn"),
                         ("provision", f"provision_{f}")):
            if col in loans.columns:
                entry[key] = money_total(loans[col])
        if "stage" in loans.columns and f"ecl_{f}" in loans.columns and FRAMEWORK_RULES[f].staged:
            # the one stage vocabulary: stage 1/2/3 and POCI apart (IFRS 7 35H(c))
            if classes is None:
                classes = _stage_codes(loans)
                present = np.bincount(classes[classes >= 0], minlength=len(STAGE_CLASSES)) > 0
            by_class = money_totals(loans[f"ecl_{f}"], classes, len(STAGE_CLASSES))
            entry["by_stage"] = {k: float(by_class[j]) for j, k in enumerate(STAGE_CLASSES) if present[j]}
        if f"ecl_{f}" in loans.columns and "segment" in loans.columns:
            if segments is None:
                segments = _segment_codes(loans["segment"])
            by_segment = money_totals(loans[f"ecl_{f}"], segments[0], len(segments[1]))
            entry["by_segment"] = {name: float(by_segment[j]) for j, name in enumerate(segments[1])}
        totals[f] = entry
    run = config.assumptions.run
    finished = clock.now()
    record: dict[str, Any] = {
        "package": "allowance",
        "version": allowance.__version__,
        "run_label": run.label,
        "as_of": run.as_of.isoformat(),
        "frameworks": list(config.frameworks),
        "currency": run.currency,
        "run_by": _user(),
        "arguments": None,
        "environment": environment(),
        "started": (started or finished).astimezone(timezone.utc).isoformat(timespec="seconds"),
        "timestamp": finished.isoformat(timespec="seconds"),
        "inputs": [i.model_dump(mode="json") for i in inputs],
        "rows": {"read": intake.rows_read, "accepted": intake.rows_accepted, "rejected": intake.rows_rejected,
                 "blank": intake.blank_rows,
                 **({"lines": intake.lines, "lines_in_values": intake.lines_in_values} if intake.lines >= 0 else {})},
        "date_formats": dict(getattr(intake, "date_formats", {}) or {}),
        "loans": len(loans),
        "total_balance": money_total(loans["balance"]) if "balance" in loans.columns else None,
        "total_allowance": {f: t.get("allowance") for f, t in totals.items()},
        "totals": totals,
        "warnings": len(list(warnings)) + len(intake.warnings),
        "tie_out": _jsonable(tie_out) if tie_out is not None else None,
        "movement": {
            m.framework: {
                "opening": float(m.allowance.set_index("line").loc["opening", "total"]),
                "closing": float(m.allowance.set_index("line").loc["closing", "total"]),
                "provision": m.net_provision,
                "assumptions_isolated": m.assumptions_isolated,
            }
            for m in movements
        },
        "assumptions": config.assumptions.model_dump(mode="json"),
    }
    if extra:
        record.update(_jsonable(dict(extra)))
    # the record's contract is a pydantic model: a field of the wrong type or a lost row fails here
    return RunRecord.model_validate(_jsonable(record)).model_dump(mode="json")
