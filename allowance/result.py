"""What the library API hands back: a run's result and a tape check, readable in a notebook.

Implements
----------
Result        a reserve run: loans, rejected rows, totals, movement, what-if; writes its outputs
CheckResult   a tape checked against the assumptions: counts by reason, rejected rows, tie-out
totals_table  allowance per framework by stage and segment (the ``totals`` of a Result)
"""

from __future__ import annotations

import html
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from allowance.disclosure import sorted_categorical
from allowance.exceptions import AllowanceError
from allowance.frameworks import rules_for
from allowance.intake import IntakeResult, TieOut, check_table
from allowance.money import cents_by_group, money_total
from allowance.schemas import LOAN_COUNT

if TYPE_CHECKING:  # the writers are imported where they write: a check that writes nothing needs none
    from allowance.report import RunReport
    from allowance.report.files import OutputPaths
    from allowance.reconcile import Movement, WhatIf
    from allowance.schemas import RunConfig

__all__ = ["CheckResult", "Result", "totals_table"]

TOTAL = "Total"


def totals_table(loans: pd.DataFrame, frameworks: list[str], counts: str | None = None) -> pd.DataFrame:
    """Allowance per framework, by stage (where the framework stages loans) and segment.

    One row per framework, stage and segment, then one per framework and stage over all
    segments, then the framework's total (``segment`` and ``stage`` "Total"). Columns
    ``framework, stage, segment, loans, balance, allowance, coverage``; money is the sum of
    the rounded loan figures in whole cents (``counts``: the column holding each row's number
    of loans, when the rows are sums of loans). ``stage`` is "1", "2", "3" or "POCI" for IFRS 9
    (the one stage vocabulary: purchased or originated credit-impaired loans are their own
    class, IFRS 7 35H(c), whatever their stage) and "Total" for a framework without stages.

    Examples
    --------
    >>> loans = pd.DataFrame({"segment": ["auto", "auto", "card", "card"], "stage": [1, 2, 1, 2],
    ...                       "poci": [False, False, False, True],
    ...                       "balance": [100.0, 50.0, 10.0, 8.0], "ecl_ifrs9": [1.0, 5.0, 0.5, -0.25]})
    >>> totals_table(loans, ["ifrs9"])[["stage", "segment", "allowance"]].values.tolist()
    [['1', 'auto', 1.0], ['1', 'card', 0.5], ['2', 'auto', 5.0], ['POCI', 'card', -0.25], ['1', 'Total', 1.5], ['2', 'Total', 5.0], ['POCI', 'Total', -0.25], ['Total', 'Total', 6.25]]
    """
    rows = []
    # segments and stages as sorted codes, the money in whole cents per loan, the sums per
    # (stage, segment) cell counted on the codes: no text per loan (a million loans' stage
    # labels took a second) and no group-by (its index building took 0.1 s a framework)
    segments = sorted_categorical(*pd.factorize(loans["segment"]))
    balance = np.rint(loans["balance"].to_numpy(dtype=np.float64) * 100.0).astype(np.int64)
    n = loans[counts].to_numpy(dtype=np.int64) if counts else np.ones(len(loans), np.int64)
    for fw in frameworks:
        column = f"ecl_{fw}"
        if column not in loans.columns:
            continue
        staged = rules_for(fw).staged and "stage" in loans.columns
        if staged:  # "1", "2", "3"; POCI apart from stages 2 and 3, as run.json and the workbook
            stage = loans["stage"]
            # an integer column's own values label as its Int64 ones do; the factorised
            # distinct values are a handful, the Int64 copy of a million loans is not made
            codes, values = pd.factorize(stage if stage.dtype.kind in "iu" else stage.astype("Int64"))
            labels = [str(v) for v in values.tolist()] + ["POCI"]
            if "poci" in loans.columns:
                codes = np.where(loans["poci"].to_numpy(dtype=bool), len(labels) - 1, codes)
            stages = sorted_categorical(codes, labels)
        else:
            stages = sorted_categorical(np.zeros(len(loans), np.int64), [TOTAL])
        allowance = np.rint(loans[column].to_numpy(dtype=np.float64) * 100.0).astype(np.int64)
        cells = _cell_sums(stages, segments, [n, balance, allowance])
        for (s, g), (count, bal, allow) in cells.items():
            if g >= 0:  # a loan without a segment is in its stage's total only, as a group-by leaves it
                rows.append({"framework": fw, "stage": stages.categories[s], "segment": segments.categories[g],
                             "loans": count, "balance": bal / 100, "allowance": allow / 100})
        if staged:
            by_stage: dict[int, list[int]] = {}
            for (s, _), sums in cells.items():
                by_stage[s] = [a + b for a, b in zip(by_stage.get(s, [0, 0, 0]), sums)]
            for s, (count, bal, allow) in by_stage.items():
                rows.append({"framework": fw, "stage": stages.categories[s], "segment": TOTAL,
                             "loans": count, "balance": bal / 100, "allowance": allow / 100})
        rows.append({"framework": fw, "stage": TOTAL, "segment": TOTAL, "loans": int(n.sum()),
                     "balance": int(balance.sum()) / 100, "allowance": int(allowance.sum()) / 100})
    out = pd.DataFrame(rows, columns=["framework", "stage", "segment", "loans", "balance", "allowance"])
    with np.errstate(divide="ignore", invalid="ignore"):
        out["coverage"] = np.where(out["balance"] > 0, out["allowance"] / out["balance"], 0.0)
    return out



def _cell_sums(stages: pd.Categorical, segments: pd.Categorical, columns: list[np.ndarray]) -> dict[tuple[int, int], list[int]]:
    """Exact sums of the integer ``columns`` per (stage, segment) cell present, in the order of
    the categories (stage first): ``groupby(["stage", "segment"], sort=True, observed=True).sum()``
    on the codes. A loan without a stage is left out; one without a segment is summed under
    segment -1 (ordered first), so its stage's total still counts it as a group-by on the stage
    alone does."""
    s_codes, g_codes = np.asarray(stages.codes, np.int64), np.asarray(segments.codes, np.int64)
    kept = s_codes >= 0
    width = len(segments.categories) + 1
    combo = s_codes[kept] * width + (g_codes[kept] + 1)
    space = len(stages.categories) * width
    present = np.flatnonzero(np.bincount(combo, minlength=space))
    where = np.zeros(space, dtype=np.int64)
    where[present] = np.arange(len(present))
    row = where[combo]
    sums = [cents_by_group(c[kept], row, len(present)) for c in columns]
    return {(int(p) // width, int(p) % width - 1): [col[i] for col in sums] for i, p in enumerate(present.tolist())}

def _html_table(frame: pd.DataFrame, money: list[str], rates: list[str]) -> str:
    formats = {c: "{:,.2f}".format for c in money} | {c: "{:.2%}".format for c in rates}
    return frame.to_html(index=False, formatters=formats, border=0)


@dataclass(frozen=True)
class Result:
    """A reserve run. Nothing is written until :meth:`write` or :meth:`workbook` is called.

    Attributes
    ----------
    report : RunReport
        Everything the outputs are written from (the workbook's sheets read it).
    seconds : float
        Wall time of the run.
    """

    report: RunReport
    seconds: float = 0.0

    # -- what people look at ----------------------------------------------------------

    @property
    def loans(self) -> pd.DataFrame:
        """One row per accepted loan: the ``loans.csv`` columns, rounded to cents.

        A book computed part by part (``loans_parquet``) has its loan detail in that folder
        only: read it with ``pandas.read_parquet(folder)``; asking for it here is an error."""
        if self.report.loan_detail is not None:
            raise AllowanceError("the loan detail was written part by part, not kept in this process",
                                 file=self.report.loan_detail, hint="read it with pandas.read_parquet(folder)")
        return self.report.loans

    @property
    def loan_detail(self) -> str | None:
        """The folder of the Parquet loan detail written part by part (None: ``loans`` holds it)."""
        return self.report.loan_detail

    def _loans_or_sums(self) -> tuple[pd.DataFrame, str | None]:
        """The loan frame, or for a book computed part by part its loan sums and their count column."""
        if self.report.loan_detail is not None:
            return self.report.loans, LOAN_COUNT
        return self.report.loans, None

    @property
    def rejected(self) -> pd.DataFrame:
        """Every rejected row as read, with its line number and every reason."""
        return self.report.intake.rejected

    @property
    def findings(self) -> pd.DataFrame:
        """Every finding on the tape (rejections and warnings), one row each."""
        return self.report.intake.findings

    @property
    def warnings(self) -> list[str]:
        """Run-level warnings (expired overlays, assumption changes not isolated, ...)."""
        return list(self.report.warnings)

    @property
    def totals(self) -> pd.DataFrame:
        """Allowance per framework, by stage and segment (:func:`totals_table`)."""
        loans, counts = self._loans_or_sums()
        return totals_table(loans, self.frameworks, counts=counts)

    @property
    def summary(self) -> pd.DataFrame:
        """One row per framework: loans, balance, modelled allowance, overlays, allowance, coverage."""
        rows = []
        loans, counts = self._loans_or_sums()
        for fw in self.frameworks:
            rows.append({
                "framework": rules_for(fw).label, "loans": int(loans[counts].sum()) if counts else len(loans),
                "balance": money_total(loans["balance"]),
                "modelled": money_total(loans.get(f"ecl_{fw}_modelled", pd.Series(dtype=float))),
                "overlays": money_total(loans.get(f"overlay_{fw}", pd.Series(dtype=float))),
                "allowance": money_total(loans[f"ecl_{fw}"]),
            })
        out = pd.DataFrame(rows, columns=["framework", "loans", "balance", "modelled", "overlays", "allowance"])
        with np.errstate(divide="ignore", invalid="ignore"):
            out["coverage"] = np.where(out["balance"] > 0, out["allowance"] / out["balance"], 0.0)
        return out

    @property
    def movement(self) -> dict[str, Movement]:
        """The movement from the prior run, per framework (empty without ``prior``)."""
        return {m.framework: m for m in self.report.movements}

    @property
    def what_if(self) -> WhatIf | None:
        """The what-if comparison against the base run (with ``overlays``), else None."""
        return self.report.what_if_parts

    @property
    def sensitivity(self) -> pd.DataFrame:
        """Each scenario alone at 100 % weight, restaged, beside the weighted run."""
        return self.report.sensitivity

    @property
    def scenarios(self) -> pd.DataFrame:
        """Each scenario's allowance at 100 % weight on the run's stages, and the weighted result."""
        return self.report.scenarios

    @property
    def config(self) -> RunConfig:
        return self.report.config

    @property
    def record(self) -> dict:
        """The run record (``run.json``)."""
        return self.report.record

    @property
    def frameworks(self) -> list[str]:
        return list(self.report.config.frameworks)

    @property
    def intake(self) -> IntakeResult:
        return self.report.intake

    @property
    def tie_out(self) -> TieOut | None:
        return self.report.tie_out

    # -- writers -----------------------------------------------------------------------

    def write(self, out_dir: str | Path, *, parquet: bool = False,
              progress: Callable[[str, int, int], object] | None = None) -> OutputPaths:
        """Write every output (``loans.csv``, ``reserve.xlsx``, ``run.json``, ...) into ``out_dir``,
        all or nothing; return the files written.

        The list returned has ``notes``: what the folder swap could not clean up, e.g. where
        the previous outputs were kept when one of their files could not be deleted. Show
        them to the user (the command line prints each as a warning). ``progress`` is told
        ``("write", done, total)`` as the files are written.
        """
        from allowance.report import write_outputs

        return write_outputs(Path(out_dir), self.report, parquet=parquet, progress=progress)

    def workbook(self, path: str | Path) -> Path:
        """Write the reserve workbook alone to ``path`` (its folder must exist); return the path.
        A book computed part by part has no reserve workbook (an :class:`AllowanceError` says
        so): :meth:`write` makes its ``summary.xlsx`` from the sums."""
        path = Path(path)
        from allowance.report import write_workbook

        write_workbook(path, self.report)
        return path

    # -- display -----------------------------------------------------------------------

    def _heading(self) -> tuple[str, str]:
        run = self.config.assumptions.run
        rows = self.report.intake
        label = f" · {run.label}" if run.label else ""
        title = f"Allowance as of {run.as_of.isoformat()} ({', '.join(self.frameworks)}, {run.currency}){label}"
        counts = (f"rows read {rows.rows_read:,}, accepted {rows.rows_accepted:,}, rejected {rows.rows_rejected:,}; "
                  f"{len(self.warnings)} warning(s)")
        return title, counts

    def __repr__(self) -> str:
        title, counts = self._heading()
        table = self.summary.to_string(index=False, formatters={
            "balance": "{:,.2f}".format, "modelled": "{:,.2f}".format, "overlays": "{:,.2f}".format,
            "allowance": "{:,.2f}".format, "coverage": "{:.2%}".format})
        return f"<Result {title}\n{counts}\n{table}>"

    def _repr_html_(self) -> str:
        title, counts = self._heading()
        summary = _html_table(self.summary, ["balance", "modelled", "overlays", "allowance"], ["coverage"])
        by_stage = self.totals[self.totals["segment"] == TOTAL]
        stages = _html_table(by_stage.drop(columns="segment"), ["balance", "allowance"], ["coverage"])
        warnings = "".join(f"<li>{html.escape(w)}</li>" for w in self.warnings)
        return (f"<div><strong>{html.escape(title)}</strong><p>{html.escape(counts)}</p>{summary}"
                f"<p>By stage:</p>{stages}" + (f"<p>Warnings:</p><ul>{warnings}</ul>" if warnings else "") + "</div>")


@dataclass(frozen=True)
class CheckResult:
    """A tape checked against the assumptions: what ``allowance check`` prints.

    ``ok`` is true when no row is rejected and the tape ties to the ledger.
    """

    intake: IntakeResult
    tie_out: TieOut

    @property
    def ok(self) -> bool:
        return not self.intake.rows_rejected and self.tie_out.within_tolerance

    @property
    def accepted(self) -> pd.DataFrame:
        return self.intake.accepted

    @property
    def rejected(self) -> pd.DataFrame:
        return self.intake.rejected

    @property
    def findings(self) -> pd.DataFrame:
        return self.intake.findings

    @property
    def table(self) -> pd.DataFrame:
        """Rows read / accepted / rejected, then rejections and warnings by reason."""
        return check_table(self.intake)

    def write(self, out_dir: str | Path) -> OutputPaths:
        """Write ``rejected.csv`` (every rejected row as read, with its line number and reasons)
        and ``warnings.csv`` (findings on accepted rows, then the tape's notes) into
        ``out_dir``, as a run writes them; other files there are kept."""
        from allowance.report.files import write_check_outputs

        return write_check_outputs(Path(out_dir), self.intake)

    def __repr__(self) -> str:
        verdict = "ok" if self.ok else "problems"
        return (f"<CheckResult {verdict}: {self.table.to_string(index=False)}\n"
                f"ledger tie-out: {self.tie_out.explanation}>")

    def _repr_html_(self) -> str:
        verdict = "ok" if self.ok else "problems found"
        return (f"<div><strong>Tape check: {verdict}</strong>{self.table.to_html(index=False, border=0)}"
                f"<p>Ledger tie-out: {html.escape(self.tie_out.explanation)}</p></div>")
