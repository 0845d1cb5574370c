"""The command line: thin wiring over the library API (:mod:`allowance.api`).

Exit codes: 0 done, 1 the inputs have problems (reported plainly, one line each), 2 usage
error. No traceback reaches a user for a bad input.

The heavy libraries (numpy, pandas, numba) are imported by the command that runs, never at
start-up, so ``allowance --help`` answers at once.
"""

from __future__ import annotations

import time
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Literal, NoReturn

import typer

from allowance import __version__

if TYPE_CHECKING:
    from allowance.exceptions import AllowanceError
    from allowance.result import Result


def _show_version(value: bool) -> None:
    if value:
        typer.echo(__version__)
        raise typer.Exit()


app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    rich_markup_mode=None,
    pretty_exceptions_enable=False,
    context_settings={"help_option_names": ["-h", "--help"]},
    help=(
        "Quarter-end credit-loss allowance (CECL and IFRS 9) from a loan tape and an "
        "assumptions file. Start with 'allowance demo --out demo-out', or "
        "'allowance init my-quarter' for blank input templates."
    ),
)


@app.callback()
def _main(
    version: Annotated[
        bool, typer.Option("--version", "-V", callback=_show_version, is_eager=True, help="Print the version and exit.")
    ] = False,
) -> None:
    """Quarter-end credit-loss allowance (CECL and IFRS 9) from a loan tape and an assumptions file."""


OutOption = Annotated[Path, typer.Option("--out", help="Folder for the outputs (created; replaced when complete).")]
AssumptionsOption = Annotated[
    Path, typer.Option("--assumptions", "-a", help="Assumptions file (TOML): segments, scenarios, rules, overlays.")
]
Framework = Literal["ifrs9", "cecl"]


def _say(text: str = "") -> None:
    typer.echo(text)


def _fail(err: AllowanceError) -> NoReturn:
    typer.echo(f"error: {err}", err=True)
    raise typer.Exit(1)


def _print_summary(result: Result, out: Path, seconds: float) -> None:
    rec = result.record
    _say(f"as of {rec['as_of']}  ({', '.join(rec['frameworks'])}, {rec['currency']})")
    rows = rec["rows"]
    _say(f"rows read {rows['read']:,}  accepted {rows['accepted']:,}  rejected {rows['rejected']:,}")
    _say(f"balance {result.loans['balance'].sum():,.2f}")
    totals = result.totals
    for fw in rec["frameworks"]:
        mine = totals[(totals["framework"] == fw) & (totals["segment"] == "Total")]
        line = f"allowance {fw.upper():6s} {result.loans[f'ecl_{fw}'].sum():>18,.2f}"
        stages = mine[mine["stage"] != "Total"]
        if len(stages):
            line += "   " + "  ".join(f"stage {s} {v:,.2f}" for s, v in zip(stages["stage"], stages["allowance"]))
        _say(line)
    sens = result.sensitivity
    if sens is not None and not sens.empty:
        for fw in rec["frameworks"]:
            alone = sens[(sens["framework"] == fw) & (sens["scenario"] != "weighted")]
            parts = "  ".join(f"{s} {v:,.2f}" for s, v in zip(alone["scenario"], alone["allowance"]))
            _say(f"  {fw.upper()} with each scenario at 100 %: {parts}")
    for w in result.warnings:
        _say(f"warning: {w}")
    _say(f"wrote {out}  ({seconds:.1f} s)")


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
    from allowance import api
    from allowance.exceptions import AllowanceError

    if charge_offs is not None and prior is None:
        raise typer.BadParameter("needs --prior: the write-offs explain the movement from the prior run",
                                 param_hint="'--charge-offs'")
    _check_out(out, tape, assumptions, *(overlay or ()), charge_offs, prior / "loans.csv" if prior else None)
    started = time.perf_counter()
    try:
        result = api.run(
            tape, assumptions, overlays=tuple(overlay or ()), prior=prior, charge_offs=charge_offs,
            ledger_balance=ledger_balance, accept_ledger_difference=accept_ledger_difference,
            label=label, sensitivities=sensitivities,
        )
        result.write(out, parquet=parquet)
    except AllowanceError as err:
        _fail(err)
    _print_summary(result, out, time.perf_counter() - started)


@app.command()
def demo(
    out: OutOption,
    parquet: Annotated[bool, typer.Option("--parquet", help="Also write loans.parquet.")] = False,
) -> None:
    """Run the shipped demo quarter end: last quarter, then this quarter with its movement."""
    from allowance import api
    from allowance.exceptions import AllowanceError

    clock = [time.perf_counter()]

    def started(lender: str, prior_out: Path) -> None:
        _say(f"demo lender: {lender} (all data invented)")
        _say(f"-- prior quarter -> {prior_out}")

    def prior_done(result, folder: Path) -> None:
        _print_summary(result, folder, time.perf_counter() - clock[0])
        _say(f"-- this quarter -> {out}")
        clock[0] = time.perf_counter()

    try:
        done = api.demo(out, parquet=parquet, on_start=started, on_prior=prior_done)
    except AllowanceError as err:
        _fail(err)
    _print_summary(done.current, out, time.perf_counter() - clock[0])
    w = done.what_if
    _say(f"next: what does 100 % downside do?  allowance run {w['tape']} "
         f"--assumptions {w['assumptions']} --overlay {w['overlay']} --out what-if-out")


@app.command()
def check(
    tape: Annotated[Path, typer.Argument(help="The loan tape to validate.")],
    assumptions: AssumptionsOption,
    ledger_balance: Annotated[float | None, typer.Option("--ledger-balance", help="Ledger control total.")] = None,
) -> None:
    """Validate a tape only: rows read / accepted / rejected by reason, and the ledger tie-out.

    Exits 1 when any row is rejected or the tape does not tie to the ledger.
    """
    from allowance import api
    from allowance.exceptions import AllowanceError

    try:
        checked = api.check(tape, assumptions, ledger_balance=ledger_balance)
    except AllowanceError as err:
        _fail(err)
    _say(checked.table.to_string(index=False))
    _say(f"ledger tie-out: {checked.tie_out.explanation}")
    rejected = checked.rejected
    if len(rejected):
        _say(f"{len(rejected)} row(s) rejected; each is listed with its line number and reason by "
             "'allowance run' in rejected.csv")
        for row in rejected.head(20).itertuples(index=False):
            _say(f"  {tape}: line {row.source_row}: {row.reasons}")
    if not checked.ok:
        raise typer.Exit(1)


@app.command()
def init(folder: Annotated[Path, typer.Argument(help="Folder to create with blank input templates.")]) -> None:
    """Copy the blank input templates (tape CSV/XLSX, assumptions, what-if overlay)."""
    from allowance import api
    from allowance.exceptions import AllowanceError

    try:
        copied = api.copy_templates(folder)
    except AllowanceError as err:
        _fail(err)
    _say(f"wrote {', '.join(p.name for p in copied)} to {folder}")


@app.command()
def schedule(
    tape: Annotated[Path, typer.Argument(help="The loan tape.")],
    assumptions: AssumptionsOption,
    loan: Annotated[str, typer.Option("--loan", help="The loan_id to schedule.")],
    framework: Annotated[
        Framework | None, typer.Option("--framework", help="The framework (default: the first listed).")
    ] = None,
    scenario: Annotated[str | None, typer.Option("--scenario", help="Scenario whose PDs are shown (default: the first).")] = None,
) -> None:
    """Print one loan's projected schedule, contractual and expected, to check by hand."""
    from allowance import api
    from allowance.exceptions import AllowanceError

    try:
        scheduled = api.schedule(tape, assumptions, loan, framework=framework, scenario=scenario)
    except AllowanceError as err:
        _fail(err)
    row, frame = scheduled.loan, scheduled.table
    _say(f"loan {loan}: {row['segment']}, {row['repayment']}, balance {row['balance']:,.2f}, "
         f"rate {row['interest_rate']:.4%}, {len(frame)} months; "
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
    from allowance import api
    from allowance.exceptions import AllowanceError

    try:
        table = api.roll_rates(assumptions, segment=segment)
    except AllowanceError as err:
        _fail(err)
    if table.empty:
        _say("no segment in these assumptions uses a transition_matrix")
        return
    import pandas as pd

    with pd.option_context("display.width", 200, "display.float_format", "{:,.4f}".format):
        _say(table.to_string(index=False))


@app.command()
def compare(
    prior: Annotated[Path, typer.Argument(help="Last quarter's output folder.")],
    current: Annotated[Path, typer.Argument(help="This quarter's output folder.")],
    charge_offs: Annotated[Path | None, typer.Option("--charge-offs", help="The period's write-offs file.")] = None,
) -> None:
    """Explain the allowance movement between two finished runs, loan by loan."""
    from allowance import api
    from allowance.exceptions import AllowanceError

    try:
        moves = api.compare(prior, current, charge_offs=charge_offs)
    except AllowanceError as err:
        _fail(err)
    import pandas as pd

    with pd.option_context("display.width", 200, "display.max_columns", 50, "display.float_format", "{:,.2f}".format):
        for fw, mv in moves.items():
            _say(f"-- {fw.upper()} allowance movement")
            _say(mv.allowance.to_string(index=False))


@app.command()
def version() -> None:
    """Print the version."""
    _say(__version__)


def _check_out(out: Path, *inputs: Path | None) -> None:
    """Refuse an --out that is empty, the current folder, or holds an input (a usage error, exit 2)."""
    from allowance.exceptions import AllowanceError
    from allowance.report.files import check_output_path

    try:
        check_output_path(out, [p for p in inputs if p is not None and p.is_file()])
    except AllowanceError as err:
        raise typer.BadParameter(str(err), param_hint="'--out'") from err


def main() -> None:
    """Console entry point (see :mod:`allowance.console`, which guards the start-up too)."""
    from allowance.console import main as console_main

    console_main()


if __name__ == "__main__":  # pragma: no cover
    main()
