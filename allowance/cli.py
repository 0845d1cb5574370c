"""The command line: thin wiring of intake -> engine -> reconcile -> report.

Exit codes: 0 done, 1 the inputs have problems (reported plainly, one line each), 2 usage
error. No traceback reaches a user for a bad input.
"""

from __future__ import annotations

import dataclasses
import shutil
import sys
import time
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated

import pandas as pd
import typer

from allowance import __version__, cashflows, engine, intake, macro, reconcile, report
from allowance.report import clock
from allowance.exceptions import AllowanceError, AssumptionsError, InputFileError, TieOutError
from allowance.frameworks import FRAMEWORK_RULES
from allowance.schemas import Assumptions, RunConfig

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    rich_markup_mode=None,
    pretty_exceptions_enable=False,
    help=(
        "Quarter-end credit-loss allowance (CECL and IFRS 9) from a loan tape and an "
        "assumptions file. Start with 'allowance demo --out demo-out', or "
        "'allowance init my-quarter' for blank input templates."
    ),
)

OutOption = Annotated[Path, typer.Option("--out", help="Folder for the outputs (created; replaced when complete).")]
AssumptionsOption = Annotated[
    Path, typer.Option("--assumptions", "-a", help="Assumptions file (TOML): segments, scenarios, rules, overlays.")
]


def _say(text: str = "") -> None:
    typer.echo(text)


@dataclass(frozen=True)
class Quarter:
    """What one run produced (for the summary printed at the end)."""

    out: Path
    report: report.RunReport
    seconds: float


def run_quarter(
    tape: Path,
    assumptions: Path,
    out: Path,
    *,
    overlays: tuple[Path, ...] = (),
    prior: Path | None = None,
    charge_offs: Path | None = None,
    ledger_balance: float | None = None,
    accept_ledger_difference: bool = False,
    label: str | None = None,
    parquet: bool = False,
    sensitivities: bool = True,
) -> Quarter:
    """A whole reserve run: read, validate, tie out, compute, explain the movement, write.

    ``sensitivities``: rerun the book once per scenario, that scenario alone at weight 1
    (restaged), for the sensitivity table.
    """
    started = time.perf_counter()
    started_at = clock.now()
    config = intake.load_assumptions(assumptions, overlays)
    if label is not None:
        config = _relabel(config, label)
    taken = intake.read_tape(tape, config)
    run_section = config.assumptions.run
    ledger = ledger_balance if ledger_balance is not None else run_section.ledger_balance
    tie = intake.tie_out(taken, ledger, run_section.ledger_tolerance, accept_ledger_difference)
    if not tie.within_tolerance and not tie.accepted_by_user:
        raise TieOutError(
            tie.explanation,
            file=tape,
            hint="correct the tape or the ledger figure, or pass --accept-ledger-difference to record it and go on",
        )
    result = engine.run(taken.accepted, config)
    inputs = list(config.inputs)
    sensitivity = pd.DataFrame()
    if sensitivities and len(config.assumptions.scenarios) > 1:
        alone = {name: engine.run(taken.accepted, reconcile.single_scenario(config, name), schedule_sample=0).loans
                 for name in config.assumptions.scenarios}
        sensitivity = reconcile.sensitivity_table(result.loans, alone, config)
    macro_paths = macro.macro_path_table(config.assumptions, engine.tape_months(taken.accepted, config))

    what_if = None
    what_if_paths = pd.DataFrame()
    if overlays:
        base_config = intake.load_assumptions(assumptions)
        base = engine.run(taken.accepted, base_config)
        what_if = reconcile.what_if_comparison(base.loans, result.loans, config.frameworks)
        what_if_paths = macro.path_changes(base_config.assumptions, config.assumptions,
                                           engine.tape_months(taken.accepted, config))

    movements = None
    if prior is not None:
        previous = intake.read_prior_run(prior)
        cos = intake.read_charge_offs(charge_offs) if charge_offs is not None else None
        if charge_offs is not None:
            inputs.append(intake.file_record(charge_offs, "charge_offs"))
        inputs.append(intake.file_record(prior / "loans.csv", "prior"))
        at_prior = _rerun_at_prior_assumptions(taken.accepted, config, previous.record)
        movements = reconcile.compare_runs(
            previous.loans, result.loans, charge_offs=cos,
            current_at_prior_assumptions=None if at_prior is None else at_prior.loans,
            frameworks=[fw for fw in config.frameworks if fw in _prior_frameworks(previous.record)],
            sources={"prior": str(prior / "loans.csv"), "current": "this run",
                     **({"charge_offs": str(charge_offs)} if charge_offs else {})},
        )

    config = config.model_copy(update={"inputs": inputs})
    warnings = list(result.warnings)
    if movements is not None and at_prior is None:
        warnings.append("the prior run's assumptions could not be applied to this tape; "
                        "assumption changes are included in remeasurement")
    findings = pd.concat([taken.findings, result.findings], ignore_index=True)
    taken = dataclasses.replace(taken, findings=findings)
    record = report.run_record(config, taken, result.loans, tie_out=tie, warnings=warnings,
                               movements=tuple((movements or {}).values()), started=started_at)
    run_report = report.RunReport(
        config=config, intake=taken, tie_out=tie, loans=result.loans, overlays=result.overlays,
        scenarios=result.scenarios, term_structures=result.term_structures,
        roll_rates=result.roll_rates, reversion=result.reversion, schedules=result.schedules,
        sensitivity=sensitivity, macro_paths=macro_paths, what_if_paths=what_if_paths, movement=movements, what_if=what_if, record=record, warnings=warnings,
    )
    report.write_outputs(out, run_report, parquet=parquet)
    return Quarter(out=out, report=run_report, seconds=time.perf_counter() - started)


def _relabel(config: RunConfig, label: str) -> RunConfig:
    run = config.assumptions.run.model_copy(update={"label": label})
    return config.model_copy(update={"assumptions": config.assumptions.model_copy(update={"run": run})})


def _prior_frameworks(record: dict) -> list[str]:
    return list(record.get("frameworks") or record.get("assumptions", {}).get("run", {}).get("frameworks", []))


def _rerun_at_prior_assumptions(tape: pd.DataFrame, config: RunConfig, record: dict):
    """This quarter's tape under last quarter's assumptions: isolates assumption changes."""
    data = record.get("assumptions")
    if not data:
        return None
    try:
        data = dict(data)
        data["run"] = {**data["run"], "as_of": config.as_of.isoformat(),
                       "frameworks": [fw for fw in config.frameworks if fw in data["run"]["frameworks"]]}
        prior_config = RunConfig(assumptions=Assumptions.model_validate(data), base_dir=config.base_dir)
        return engine.run(tape, prior_config, schedule_sample=0)
    except (AllowanceError, ValueError):
        return None


def _print_summary(q: Quarter) -> None:
    r = q.report
    rec = r.record
    _say(f"as of {rec['as_of']}  ({', '.join(rec['frameworks'])}, {rec['currency']})")
    rows = rec["rows"]
    _say(f"rows read {rows['read']:,}  accepted {rows['accepted']:,}  rejected {rows['rejected']:,}")
    loans = r.loans
    _say(f"balance {loans['balance'].sum():,.2f}")
    for fw in rec["frameworks"]:
        col = f"ecl_{fw}"
        total = loans[col].sum()
        line = f"allowance {fw.upper():6s} {total:>18,.2f}"
        if FRAMEWORK_RULES[fw].staged and "stage" in loans:
            by = loans.groupby("stage")[col].sum()
            line += "   " + "  ".join(f"stage {int(s)} {v:,.2f}" for s, v in by.items())
        _say(line)
    sens = r.sensitivity
    if sens is not None and not sens.empty:
        for fw in rec["frameworks"]:
            alone = sens[(sens["framework"] == fw) & (sens["scenario"] != "weighted")]
            parts = "  ".join(f"{s} {v:,.2f}" for s, v in zip(alone["scenario"], alone["allowance"]))
            _say(f"  {fw.upper()} with each scenario at 100 %: {parts}")
    for w in r.warnings:
        _say(f"warning: {w}")
    _say(f"wrote {q.out}  ({q.seconds:.1f} s)")


def _fail(err: AllowanceError) -> None:
    typer.echo(f"error: {err}", err=True)
    raise typer.Exit(1)


@app.command()
def run(
    tape: Annotated[Path, typer.Argument(help="The quarter-end loan tape (CSV, XLSX or Parquet).")],
    assumptions: AssumptionsOption,
    out: OutOption,
    overlay: Annotated[
        list[Path] | None,
        typer.Option("--overlay", help="What-if file(s) merged over the assumptions; the base run is compared."),
    ] = None,
    prior: Annotated[Path | None, typer.Option("--prior", help="Last quarter's output folder: explain the movement.")] = None,
    charge_offs: Annotated[
        Path | None, typer.Option("--charge-offs", help="The period's write-offs: loan_id, gross_charge_off, recoveries.")
    ] = None,
    ledger_balance: Annotated[
        float | None, typer.Option("--ledger-balance", help="Ledger control total (overrides [run] ledger_balance).")
    ] = None,
    accept_ledger_difference: Annotated[
        bool, typer.Option("--accept-ledger-difference", help="Go on when the tape does not tie to the ledger (recorded).")
    ] = False,
    label: Annotated[str | None, typer.Option("--label", help="A name for this run, kept in the run record.")] = None,
    parquet: Annotated[bool, typer.Option("--parquet", help="Also write loans.parquet.")] = False,
    sensitivities: Annotated[
        bool, typer.Option("--sensitivities/--no-sensitivities",
                           help="Also rerun with each scenario alone at 100 % weight (restaged).")
    ] = True,
) -> None:
    """Compute the allowance for a tape and write the workbook, loan detail and run record."""
    try:
        q = run_quarter(
            tape, assumptions, out, overlays=tuple(overlay or ()), prior=prior, charge_offs=charge_offs,
            ledger_balance=ledger_balance, accept_ledger_difference=accept_ledger_difference,
            label=label, parquet=parquet, sensitivities=sensitivities,
        )
    except AllowanceError as err:
        _fail(err)
    _print_summary(q)


def _demo_manifest() -> tuple[Path, dict]:
    folder = intake.bundled_path("demo")
    manifest = folder / "manifest.toml"
    try:
        with manifest.open("rb") as fh:
            return folder, tomllib.load(fh)
    except (OSError, tomllib.TOMLDecodeError) as err:
        raise InputFileError(f"cannot read the demo manifest: {err}", file=manifest) from err


@app.command()
def demo(
    out: OutOption,
    parquet: Annotated[bool, typer.Option("--parquet", help="Also write loans.parquet.")] = False,
) -> None:
    """Run the shipped demo quarter end: last quarter, then this quarter with its movement."""
    try:
        folder, m = _demo_manifest()
        _say(f"demo lender: {m.get('lender', 'invented')} (all data invented)")
        prior_out = out / "prior_quarter"
        _say(f"-- prior quarter -> {prior_out}")
        _print_summary(run_quarter(folder / m["prior"]["tape"], folder / m["prior"]["assumptions"], prior_out))
        _say(f"-- this quarter -> {out}")
        q = run_quarter(
            folder / m["current"]["tape"], folder / m["current"]["assumptions"], out,
            prior=prior_out, charge_offs=folder / m["current"]["charge_offs"], parquet=parquet,
        )
    except AllowanceError as err:
        _fail(err)
    _print_summary(q)
    what_if = folder / m["what_if"]["overlay"]
    _say(f"next: what does 100 % downside do?  allowance run {folder / m['current']['tape']} "
         f"--assumptions {folder / m['current']['assumptions']} --overlay {what_if} --out what-if-out")


@app.command()
def check(
    tape: Annotated[Path, typer.Argument(help="The loan tape to validate.")],
    assumptions: AssumptionsOption,
    ledger_balance: Annotated[float | None, typer.Option("--ledger-balance", help="Ledger control total.")] = None,
) -> None:
    """Validate a tape only: rows read / accepted / rejected by reason, and the ledger tie-out.

    Exits 1 when any row is rejected or the tape does not tie to the ledger.
    """
    try:
        config = intake.load_assumptions(assumptions)
        taken = intake.read_tape(tape, config)
        run_section = config.assumptions.run
        ledger = ledger_balance if ledger_balance is not None else run_section.ledger_balance
        tie = intake.tie_out(taken, ledger, run_section.ledger_tolerance)
    except AllowanceError as err:
        _fail(err)
    table = intake.check_table(taken)
    _say(table.to_string(index=False))
    _say(f"ledger tie-out: {tie.explanation}")
    if taken.rows_rejected:
        _say(f"{taken.rows_rejected} row(s) rejected; each is listed with its line number and reason by "
             "'allowance run' in rejected.csv")
        for row in taken.rejected.head(20).itertuples(index=False):
            _say(f"  {tape}: line {row.source_row}: {row.reasons}")
    if taken.rows_rejected or not tie.within_tolerance:
        raise typer.Exit(1)


@app.command()
def init(folder: Annotated[Path, typer.Argument(help="Folder to create with blank input templates.")]) -> None:
    """Copy the blank input templates (tape CSV/XLSX, assumptions, what-if overlay)."""
    try:
        source = intake.bundled_path("templates")
        folder.mkdir(parents=True, exist_ok=True)
        copied = []
        for f in sorted(source.iterdir()):
            if f.is_file() and f.suffix in {".csv", ".xlsx", ".toml"}:
                target = folder / f.name
                if target.exists():
                    raise InputFileError("exists already; not overwritten", file=target,
                                         hint="choose an empty folder")
                shutil.copyfile(f, target)
                copied.append(target.name)
    except AllowanceError as err:
        _fail(err)
    except OSError as err:
        _fail(InputFileError(str(err), file=folder))
    _say(f"wrote {', '.join(copied)} to {folder}")


@app.command()
def schedule(
    tape: Annotated[Path, typer.Argument(help="The loan tape.")],
    assumptions: AssumptionsOption,
    loan: Annotated[str, typer.Option("--loan", help="The loan_id to schedule.")],
    framework: Annotated[str | None, typer.Option("--framework", help="ifrs9 or cecl (default: the first listed).")] = None,
    scenario: Annotated[str | None, typer.Option("--scenario", help="Scenario whose PDs are shown (default: the first).")] = None,
) -> None:
    """Print one loan's projected schedule, contractual and expected, to check by hand."""
    try:
        config = intake.load_assumptions(assumptions)
        taken = intake.read_tape(tape, config)
        row = taken.accepted[taken.accepted["loan_id"] == loan]
        if row.empty:
            raise InputFileError(f"loan {loan!r} is not among the accepted rows", file=tape,
                                 hint="check the loan_id, or run 'allowance check' to see rejected rows")
        months = engine.tape_months(row, config)
        as_of = pd.Timestamp(config.as_of)
        prep = engine.prepare(config, months, int(cashflows.age_months(row["origination_date"], as_of).max()))
        if framework is not None and framework not in prep.frameworks:
            raise AssumptionsError(f"framework {framework!r} is not run", column="run.frameworks",
                                   hint=f"use one of {', '.join(prep.frameworks)}")
        names = list(prep.scenario_names)
        if scenario is not None and scenario not in names:
            raise AssumptionsError(f"no scenario {scenario!r}", column="scenarios", hint=f"use one of {', '.join(names)}")
        frame = engine.loan_schedule(row, prep, framework, names.index(scenario) if scenario else 0)
    except AllowanceError as err:
        _fail(err)
    r = row.iloc[0]
    _say(f"loan {loan}: {r['segment']}, {r['repayment']}, balance {r['balance']:,.2f}, "
         f"rate {r['interest_rate']:.4%}, {len(frame)} months; "
         f"{frame['framework'].iloc[0]} / scenario {frame['scenario'].iloc[0]}")
    shown = frame.drop(columns=["loan_id", "framework", "scenario"])
    money = "{:,.2f}".format
    formats = {c: ("{:.6f}".format if c == "survival" else money) for c in shown.columns if c != "month"}
    _say(shown.to_string(index=False, formatters=formats))


@app.command("roll-rates")
def roll_rates(
    assumptions: AssumptionsOption,
    segment: Annotated[str | None, typer.Option("--segment", help="Only this segment.")] = None,
) -> None:
    """Print what each roll-rate matrix implies from every delinquency bucket.

    12-month and lifetime PD (absorption into charge-off) and expected months to charge-off.
    """
    try:
        config = intake.load_assumptions(assumptions)
        table = engine.roll_rate_table(config)
        if segment is not None:
            if segment not in config.assumptions.segments:
                raise AssumptionsError(f"no segment {segment!r}", column="segments",
                                       hint=f"use one of {', '.join(config.assumptions.segments)}")
            table = table[table["segment"] == segment] if not table.empty else table
    except AllowanceError as err:
        _fail(err)
    if table.empty:
        _say("no segment in these assumptions uses a transition_matrix")
        return
    with pd.option_context("display.width", 200, "display.float_format", "{:,.4f}".format):
        _say(table.to_string(index=False))


@app.command()
def compare(
    prior: Annotated[Path, typer.Argument(help="Last quarter's output folder.")],
    current: Annotated[Path, typer.Argument(help="This quarter's output folder.")],
    charge_offs: Annotated[Path | None, typer.Option("--charge-offs", help="The period's write-offs file.")] = None,
) -> None:
    """Explain the allowance movement between two finished runs, loan by loan."""
    try:
        before, after = intake.read_prior_run(prior), intake.read_prior_run(current)
        cos = intake.read_charge_offs(charge_offs) if charge_offs is not None else None
        frameworks = [fw for fw in _prior_frameworks(after.record) if fw in _prior_frameworks(before.record)]
        moves = reconcile.compare_runs(before.loans, after.loans, charge_offs=cos, frameworks=frameworks,
                                       sources={"prior": str(prior), "current": str(current)})
    except AllowanceError as err:
        _fail(err)
    with pd.option_context("display.width", 200, "display.max_columns", 50, "display.float_format", "{:,.2f}".format):
        for fw, mv in moves.items():
            _say(f"-- {fw.upper()} allowance movement")
            _say(mv.allowance.to_string(index=False))


@app.command()
def version() -> None:
    """Print the version."""
    _say(__version__)


def main() -> None:
    """Console entry point."""
    try:
        app()
    except KeyboardInterrupt:  # pragma: no cover
        typer.echo("interrupted; no output folder was completed", err=True)
        sys.exit(1)


if __name__ == "__main__":  # pragma: no cover
    main()
