"""The command line: thin wiring over the library API (:mod:`allowance.api`).

Exit codes: 0 done, 1 the inputs have problems (reported plainly, one line each), 2 usage
error. No traceback reaches a user for a bad input.

The heavy libraries (numpy, pandas, numba) are imported by the command that runs, never at
start-up, so ``allowance --help`` answers at once.
"""

from __future__ import annotations

import contextlib
import time
from dataclasses import dataclass
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
Engine = Literal["in-process", "dask"]  # where the chunks run (allowance.cluster)


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


def _executor(engine: str, workers: int | None, scheduler: str | None):
    """The chunk map for ``--engine``: None (the engine's own loop) or a Dask cluster's."""
    if engine == "dask":
        from allowance.cluster import dask_map

        return dask_map(workers=workers, scheduler=scheduler)
    return contextlib.nullcontext(None)


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
    engine: Annotated[
        Engine, typer.Option("--engine", help="Where the loans are computed: this process, or a Dask cluster (same answer).")
    ] = "in-process",
    workers: Annotated[
        int | None, typer.Option("--workers", min=1, help="--engine dask: worker processes of a local cluster.")
    ] = None,
    scheduler: Annotated[
        str | None, typer.Option("--scheduler", help="--engine dask: join the cluster at this address instead.")
    ] = None,
    chunk_size: Annotated[
        int | None, typer.Option("--chunk-size", min=1,
                                 help="Loans per unit of work (default 250,000); smaller spreads a book over more workers.")
    ] = None,
) -> None:
    """Compute the allowance for a tape and write the workbook, loan detail and run record."""
    from allowance import api
    from allowance.exceptions import AllowanceError

    if engine != "dask" and (workers is not None or scheduler is not None):
        raise typer.BadParameter("needs --engine dask", param_hint="'--workers' / '--scheduler'")

    if charge_offs is not None and prior is None:
        raise typer.BadParameter("needs --prior: the write-offs explain the movement from the prior run",
                                 param_hint="'--charge-offs'")
    _check_out(out, tape, assumptions, *(overlay or ()), charge_offs, prior / "loans.csv" if prior else None)
    started = time.perf_counter()
    try:
        with _executor(engine, workers, scheduler) as chunk_map:
            result = api.run(
                tape, assumptions, overlays=tuple(overlay or ()), prior=prior, charge_offs=charge_offs,
                ledger_balance=ledger_balance, accept_ledger_difference=accept_ledger_difference,
                label=label, sensitivities=sensitivities, map=chunk_map, chunk_size=chunk_size,
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
        _demo_calibration(out)
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


def _demo_calibration(out: Path) -> None:
    """The demo's first step: calibrate the lender's history into ``out/calibration``."""
    import tomllib

    from allowance.intake import bundled_path

    folder = bundled_path("demo")
    manifest = tomllib.loads((folder / "manifest.toml").read_text(encoding="utf-8"))
    target = out / "calibration"
    _say(f"-- calibration from the lender's history -> {target}")
    _print_calibration(_calibrate_and_write(folder / manifest["history"]["file"], target,
                                            policy=folder / manifest["current"]["policy"]))
    _say(f"   {folder / manifest['current']['assumptions']} is what it wrote as assumptions.toml")


@dataclass(frozen=True)
class Calibrated:
    """What one calibration produced (for the summary printed at the end)."""

    out: Path
    calibration: object
    files: list[Path]
    seconds: float


def _calibrate_and_write(history: Path, out: Path, *, policy: Path | None = None,
                         settings: dict | None = None, macro: Path | None = None) -> Calibrated:
    from allowance.calibrate import calibrate as run_calibration
    from allowance.report.calibration import write_calibration

    started = time.perf_counter()
    cal = run_calibration(history, settings or {}, policy, macro=macro)
    files = write_calibration(out, cal)
    return Calibrated(out=out, calibration=cal, files=files, seconds=time.perf_counter() - started)


def _print_calibration(done: Calibrated) -> None:
    import pandas as pd

    from allowance.report.calibration_summary import segment_summary

    cal = done.calibration
    intake = cal.intake
    _say(f"rows read {intake.rows_read:,}  accepted {intake.rows_accepted:,}  rejected {intake.rows_rejected:,}"
         + (f"  (after the as-of month, not used: {cal.rows_after_as_of:,})" if cal.rows_after_as_of else ""))
    start, end = cal.frame.window
    _say(f"as of {end}; window {start} to {end}; history {intake.first_month} to {intake.last_month}")
    table = segment_summary(cal)[["segment", "pd_source", "pd_detail", "lgd", "ccf", "payment_rate", "prepayment"]]
    with pd.option_context("display.width", 200, "display.max_colwidth", 60):
        _say(table.to_string(index=False, na_rep="", float_format="{:.4f}".format))
    _say(f"wrote {done.out}  ({done.seconds:.1f} s): assumptions.toml, rolls_<segment>.csv, loss_rates.csv, "
         "calibration.xlsx, calibration.json")


def _month(value: str | None) -> str | None:
    """``--as-of``: a date (YYYY-MM-DD) or a month (YYYY-MM), as the month's last day."""
    if value is None:
        return None
    import datetime as dt

    text = value.strip()
    try:
        if len(text) == 7:
            year, month = int(text[:4]), int(text[5:7])
            if text[4] != "-":
                raise ValueError(text)
            nxt = dt.date(year + month // 12, month % 12 + 1, 1)
            return (nxt - dt.timedelta(days=1)).isoformat()
        return dt.date.fromisoformat(text).isoformat()
    except ValueError:
        raise typer.BadParameter(f"{value!r} is not a date (YYYY-MM-DD) or a month (YYYY-MM)",
                                 param_hint="--as-of") from None


@app.command("calibrate")
def calibrate_command(
    history: Annotated[
        Path, typer.Argument(help="The monthly performance history (CSV or Parquet): one row per loan per month.")
    ],
    out: OutOption,
    as_of: Annotated[
        str | None, typer.Option("--as-of", help="Calibration date (YYYY-MM-DD or YYYY-MM): later months are not used. "
                                                 "Default: the history's last month.")
    ] = None,
    window: Annotated[
        int | None, typer.Option("--window", min=1, max=600, help="Months pooled for roll rates, PD by grade and "
                                                                 "payment rates (default 24).")
    ] = None,
    policy: Annotated[
        Path | None, typer.Option("--policy", help="Policy file (TOML): the run, rules, scenarios and overlays history "
                                                   "cannot estimate, and [calibration] settings.")
    ] = None,
    weighting: Annotated[
        str | None, typer.Option("--weighting", help="Roll-rate matrix written for the run: count (maximum "
                                                     "likelihood) or balance; the other is written beside it.")
    ] = None,
    macro: Annotated[
        Path | None, typer.Option("--macro", help="Macro history (CSV/XLSX/Parquet, a month or quarter column and "
                                                  "one column per variable): fits the satellite models the policy "
                                                  "names and writes their coefficients.")
    ] = None,
) -> None:
    """Estimate the assumptions from a performance history: roll rates, default and loss rates,
    vintage curves, LGD, CCF, payment and prepayment rates; write them with the evidence.

    Writes OUT/assumptions.toml (a complete file 'allowance run' reads, every figure with how it
    was estimated), rolls_<segment>.csv, loss_rates.csv and calibration.xlsx for review.
    """
    settings: dict = {}
    if as_of is not None:
        settings["as_of"] = _month(as_of)
    if window is not None:
        settings["window_months"] = window
    if weighting is not None:
        if weighting not in ("count", "balance"):
            raise typer.BadParameter(f"{weighting!r} is not count or balance", param_hint="--weighting")
        settings["weighting"] = weighting
    from allowance.exceptions import AllowanceError

    try:
        done = _calibrate_and_write(history, out, policy=policy, settings=settings, macro=macro)
    except AllowanceError as err:
        _fail(err)
    _print_calibration(done)
    _say(f"next: review {done.out / 'calibration.xlsx'}, then  allowance run TAPE --assumptions "
         f"{done.out / 'assumptions.toml'} --out OUT")


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
    tape: Annotated[Path | None, typer.Option("--tape", help="Also roll this tape's bucket balances forward.")] = None,
    months: Annotated[int, typer.Option("--months", min=1, help="Months of the balance forecast.")] = 12,
) -> None:
    """Print what each roll-rate matrix implies from every delinquency bucket.

    12-month and lifetime PD (absorption into charge-off) and expected months to charge-off.
    With --tape: the tape's delinquency-bucket balances rolled forward month by month (the
    charge-off forecast) beside the loan-level allowance of the same segment.
    """
    from allowance import api
    from allowance.exceptions import AllowanceError

    try:
        table = api.roll_rates(assumptions, segment=segment)
        if tape is not None:
            by_month, check = api.roll_forecast(tape, assumptions, segment=segment, months=months)
    except AllowanceError as err:
        _fail(err)
    if table.empty:
        _say("no segment in these assumptions uses a transition_matrix")
        return
    import pandas as pd

    with pd.option_context("display.width", 200, "display.float_format", "{:,.4f}".format):
        _say(table.to_string(index=False))
    if tape is not None:
        with pd.option_context("display.width", 250, "display.max_columns", 30, "display.float_format", "{:,.2f}".format):
            _say("\n-- balance roll-rate forecast: charge-offs by month")
            _say(by_month.to_string(index=False))
            _say("\n-- the forecast (charge-offs x LGD) beside the loan-level allowance")
            _say(check.to_string(index=False))


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
def backtest(
    run_dir: Annotated[Path, typer.Argument(help="A finished run's output folder (loans.csv, run.json).")],
    history: Annotated[Path, typer.Argument(help="Monthly performance history since that run (CSV or Parquet).")],
    out: OutOption,
    confidence: Annotated[float, typer.Option(help="Two-sided confidence of the default-rate intervals.")] = 0.95,
    yellow_p: Annotated[float, typer.Option(help="Yellow light below this p-value.")] = 0.05,
    red_p: Annotated[float, typer.Option(help="Red light below this p-value.")] = 0.001,
    test: Annotated[str, typer.Option(help="Test behind a grade's light: binomial or jeffreys.")] = "binomial",
) -> None:
    """Compare a past run's 12-month PDs and expected losses with what happened since."""
    import pandas as pd
    from pydantic import ValidationError

    from allowance.backtest import BacktestOptions
    from allowance.exceptions import AllowanceError
    from allowance.backtest.run import backtest_files
    from allowance.report.backtest import write_backtest

    try:
        options = BacktestOptions(confidence=confidence, yellow_p=yellow_p, red_p=red_p, test=test)
    except ValidationError as err:
        typer.echo(f"usage: {err.errors()[0]['msg']}", err=True)
        raise typer.Exit(2) from err
    try:
        result, record = backtest_files(run_dir, history, options)
        write_backtest(out, result, record)
    except AllowanceError as err:
        _fail(err)
    with pd.option_context("display.width", 200, "display.max_columns", 20, "display.float_format", "{:,.4f}".format):
        shown = ["segment", "method", "verdict", "pd_light", "loss_light", "defaults", "expected_defaults",
                 "expected_loss_12m", "realised_ncl"]
        _say(result.segments[[c for c in shown if c in result.segments]].to_string(index=False))
    _say(f"wrote {out}")


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


# the console entry point is allowance.console:main (it guards the start-up against Ctrl-C)
