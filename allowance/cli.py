"""The command line: thin wiring over the library API (:mod:`allowance.api`).

Exit codes: 0 done, 1 the inputs have problems (reported plainly, one line each), 2 usage
error. No traceback reaches a user for a bad input.

What a command prints: a short summary on standard output; a transient progress display on
standard error while it works, only when that is a terminal (:mod:`allowance.progress`);
``--quiet`` prints nothing but errors, ``--verbose`` adds each input's SHA-256, the time of
each phase and every file written, and ``--json`` prints one machine-readable summary
(JSON) on standard output instead of the text.

The heavy libraries (numpy, pandas, numba) are imported by the command that runs, never at
start-up, so ``allowance --help`` answers at once.
"""

from __future__ import annotations

import contextlib
import json
import shlex
import sys
import time
from collections.abc import Callable, Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, Literal, NoReturn

import typer
from typer.core import TyperGroup

from allowance import __version__

if TYPE_CHECKING:
    from allowance.exceptions import AllowanceError
    from allowance.result import CheckResult, Result

#: rows of a list printed on the console before "and N more" (the files hold them all)
SHOWN_ROWS = 20
#: rejected rows a run or a calibration names on screen (``check`` names SHOWN_ROWS)
SHOWN_AFTER_RUN = 3


def _usual_help_labels() -> None:
    """Help in the usual form: ``TAPE`` (``[TAPE]`` when optional), ``FILE``, ``NUMBER``.

    Typer 0.2x labels a required argument ``{tape}`` and every value by its Python type
    (``<path>``, ``<bool>`` beside a flag, ``<list[Path]>``). These are display methods only:
    parsing, completion and errors are untouched, and a Typer without them is left alone.
    """
    try:
        from typer.core import TyperArgument, TyperOption
    except ImportError:  # pragma: no cover - another Typer layout: its own labels
        return
    if getattr(TyperArgument, "_allowance_labels", False):
        return
    words = {"str": "TEXT", "int": "INTEGER", "float": "NUMBER", "path": "PATH", "bool": None}

    def argument_usage(self) -> str:
        name = self.metavar or self.name.upper()
        return (name if self.required else f"[{name}]") + ("..." if self.nargs != 1 else "")

    def option_type(self, ctx) -> str | None:
        if getattr(self, "is_flag", False):
            return None
        if self.metavar is not None:
            return self.metavar
        shown = self.display_type(ctx)
        if shown and shown.startswith("<") and shown.endswith(">"):
            shown = shown[1:-1]
            shown = words.get(shown.lower(), shown)
        return shown

    if hasattr(TyperArgument, "_usage_display_name"):
        TyperArgument._usage_display_name = argument_usage
    if hasattr(TyperArgument, "display_type_rich"):
        TyperArgument.display_type_rich = lambda self, ctx: None  # its name (TAPE, DIR) says what it is
    if hasattr(TyperOption, "display_type_rich"):
        TyperOption.display_type_rich = option_type
    TyperArgument._allowance_labels = True


_usual_help_labels()


#: click's error for a bad command line (Typer's own copy of click or click itself: Typer
#: exports only its subclass BadParameter)
_CLICK_ERROR: type[Exception] = next(c for c in typer.BadParameter.__mro__ if c.__name__ == "ClickException")


class _Commands(TyperGroup):
    """The command group: a usage error is framed on a terminal only; a log or a pipe gets
    click's plain lines, unwrapped, without loading Typer's rich formatting (about 0.15 s of
    every command's start when it was patched in up front)."""

    def make_context(self, info_name, args, parent=None, **extra):
        try:
            return super().make_context(info_name, args, parent=parent, **extra)
        except _CLICK_ERROR as error:
            _plain_unless_terminal(error)
            raise

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except _CLICK_ERROR as error:
            _plain_unless_terminal(error)
            raise


def _plain_unless_terminal(error) -> None:
    """Show a usage error plainly and exit with its code, unless standard error is a terminal
    (then Typer frames it)."""
    from allowance.progress import is_terminal

    if not is_terminal():
        error.show()
        sys.exit(error.exit_code)


def _show_version(value: bool) -> None:
    if value:
        typer.echo(__version__)
        raise typer.Exit()


app = typer.Typer(
    cls=_Commands,
    add_completion=True,
    no_args_is_help=True,
    rich_markup_mode="markdown",
    pretty_exceptions_enable=False,
    context_settings={"help_option_names": ["-h", "--help"]},
    help=(
        "Quarter-end credit-loss allowance (CECL and IFRS 9) from a loan tape and an "
        "assumptions file. Start with `allowance demo --out demo-out`, or "
        "`allowance init my-quarter` for blank input templates."
    ),
)


@app.callback()
def _main(
    version: Annotated[
        bool, typer.Option("--version", "-V", callback=_show_version, is_eager=True, help="Print the version and exit.")
    ] = False,
) -> None:
    """Quarter-end credit-loss allowance (CECL and IFRS 9) from a loan tape and an assumptions file."""
    _mode("")  # each command starts from the plain output; the commands that compute take --quiet and --json


# ---- options shared by several commands -----------------------------------------------

OutOption = Annotated[
    Path, typer.Option("--out", metavar="DIR", help="Folder for the outputs (created; replaced when complete).")
]
AssumptionsOption = Annotated[
    Path, typer.Option("--assumptions", "-a", metavar="FILE",
                       help="Assumptions file (TOML): segments, scenarios, rules, overlays.")
]
TapeArgument = Annotated[
    Path, typer.Argument(metavar="TAPE", help="The loan tape (CSV, XLSX, Parquet, or a folder of Parquet files).")
]
QuietOption = Annotated[bool, typer.Option("--quiet", "-q", help="Print nothing but errors.")]
VerboseOption = Annotated[
    bool, typer.Option("--verbose", "-v", help="Also print each input file's SHA-256, the time of each phase, "
                                               "every file written and every rejected row.")
]
JsonOption = Annotated[
    bool, typer.Option("--json", help="Print one machine-readable summary (JSON) on standard output, nothing else.")
]


def _one_of(*choices: str) -> Callable[[str | None], str | None]:
    """An option's check: one of ``choices``, else a usage error that names them (the
    command line's own wording, not a validation library's).

    >>> _one_of("binomial", "jeffreys")("jeffreys")
    'jeffreys'
    >>> try:
    ...     _one_of("binomial", "jeffreys")("exact")
    ... except typer.BadParameter as err:
    ...     print(err)
    'exact' is not one of binomial, jeffreys
    """
    def check(value: str | None) -> str | None:
        if value is not None and value not in choices:
            raise typer.BadParameter(f"{value!r} is not one of {', '.join(choices)}")
        return value

    return check
Mode = Literal["normal", "quiet", "verbose", "json"]


# ---- what the commands print -----------------------------------------------------------


@dataclass
class _Output:
    """How much a command prints (``--quiet``, ``--verbose``, ``--json``) and where."""

    mode: Mode = "normal"
    command: str = ""
    started: float = field(default_factory=time.perf_counter)
    phases: dict[str, float] = field(default_factory=dict)

    @property
    def text(self) -> bool:
        return self.mode in ("normal", "verbose")

    def say(self, text: str = "") -> None:
        if self.text:
            typer.echo(text)

    def detail(self, text: str) -> None:
        if self.mode == "verbose":
            typer.echo(text)

    def data(self, summary: Mapping[str, Any]) -> None:
        if self.mode == "json":
            typer.echo(json.dumps({"command": self.command, **summary}, indent=2, allow_nan=False, default=str))

    def display(self):
        """The progress display: on a terminal, unless quiet or JSON (see :mod:`allowance.progress`)."""
        from allowance.progress import Display

        return Display(enabled=None if self.text else False)


_out = _Output()


def _mode(command: str, quiet: bool = False, verbose: bool = False, as_json: bool = False) -> _Output:
    """Set how much this command prints; two of --quiet, --verbose and --json is a usage error."""
    global _out
    chosen = [name for name, on in (("--quiet", quiet), ("--verbose", verbose), ("--json", as_json)) if on]
    if len(chosen) > 1:
        raise typer.BadParameter(f"choose one of {' and '.join(chosen)}", param_hint=chosen[1])
    mode: Mode = "quiet" if quiet else "verbose" if verbose else "json" if as_json else "normal"
    _out = _Output(mode=mode, command=command)
    return _out


def _say(text: str = "") -> None:
    _out.say(text)


def _fail(err: AllowanceError) -> NoReturn:
    typer.echo(f"error: {err}", err=True)
    _out.data({"ok": False, "exit_code": 1, "error": str(err)})
    raise typer.Exit(1)


def _invocation(ctx: typer.Context) -> dict[str, Any]:
    """The command and its options as given, for the run record (``run.json`` ``arguments``).

    ``command_line`` is the command written out again from the parsed options (paths as
    given, defaults left out), so a reader can repeat the run.
    """
    words = ["allowance", ctx.info_name or ""]
    options: dict[str, Any] = {}
    for param in ctx.command.params:
        if param.name is None or param.name == "help" or param.expose_value is False:
            continue
        value = ctx.params.get(param.name)
        options[param.name] = [str(v) for v in value] if isinstance(value, (list, tuple)) else (
            str(value) if isinstance(value, Path) else value)
        if param.param_type_name == "argument":
            words.append(str(value))
            continue
        if value is None or value == param.default or (isinstance(value, (list, tuple)) and not value):
            continue
        if getattr(param, "is_flag", False):
            flag = param.opts[0] if value else (param.secondary_opts or [param.opts[0]])[0]
            words.append(flag)
        else:
            for v in value if isinstance(value, (list, tuple)) else [value]:
                words += [param.opts[0], str(v)]
    return {"command": ctx.info_name, "command_line": shlex.join(words), **options}


@contextmanager
def _phase(name: str) -> Iterator[None]:
    """Time a phase for --verbose."""
    began = time.perf_counter()
    try:
        yield
    finally:
        _out.phases[name] = _out.phases.get(name, 0.0) + time.perf_counter() - began


def _table(frame, float_format: str | None = None) -> str:
    """A frame as console text: text columns left-aligned (pandas right-aligns everything),
    numbers right-aligned, money with thousands separators when ``float_format`` says so."""
    import pandas as pd

    formatters, names = {}, {}
    for column in frame.columns:
        values = frame[column]
        if pd.api.types.is_object_dtype(values) or pd.api.types.is_string_dtype(values):
            width = max([len(str(column)), *(len(str(v)) for v in values)])
            names[column] = str(column).ljust(width)  # a header as wide as its column sits on the left
            formatters[names[column]] = lambda v, w=width: f"{'' if v is None else str(v):<{w}}"
        elif float_format and pd.api.types.is_float_dtype(values):
            formatters[column] = float_format.format
    text = frame.rename(columns=names).to_string(index=False, formatters=formatters)
    return "\n".join(line.rstrip() for line in text.splitlines())


def _records(frame) -> list[dict[str, Any]]:
    """A frame as JSON records (missing values as null, dates as ISO text)."""
    return json.loads(frame.to_json(orient="records", date_format="iso"))


def _money(value: float) -> str:
    return f"{value:,.2f}"


def _change(before: str, base: float, after_name: str, after: float) -> str:
    """``base 1,000.00 -> what-if 1,100.00 (+100.00, +10.0%)``."""
    diff = after - base
    share = f", {diff / base:+.1%}" if base else ""
    return f"{before} {_money(base)} -> {after_name} {_money(after)} ({diff:+,.2f}{share})"


def _what_if_totals(result: Result) -> dict[str, dict[str, float]]:
    """Base and what-if allowance per framework (from the what-if comparison), else empty."""
    parts = result.what_if
    if parts is None:
        return {}
    total = parts.summary[parts.summary["view"] == "total"]
    return {str(row.framework): {"base": float(row.base), "what_if": float(row.what_if),
                                 "difference": float(row.difference)} for row in total.itertuples(index=False)}


def _run_summary(result: Result, out: Path, files: list[Path], notes: list[str], seconds: float) -> dict[str, Any]:
    """The run as --json prints it (and as the text summary reads it)."""
    rec = result.record
    # the allowance by stage as run.json records it ("stage 1" ... "POCI", the stages present):
    # the rows of Result.totals over all segments, without summing a million loans again
    by_stage = {fw: {str(s).removeprefix("stage "): float(v) for s, v in rec["totals"][fw].get("by_stage", {}).items()}
                for fw in rec["frameworks"]}
    sens = result.sensitivity
    alone: dict[str, dict[str, float]] = {}
    if sens is not None and not sens.empty:
        for fw in rec["frameworks"]:
            part = sens[(sens["framework"] == fw) & (sens["scenario"] != "weighted")]
            alone[fw] = {str(s): float(v) for s, v in zip(part["scenario"], part["allowance"])}
    return {
        "ok": True, "out": str(out), "as_of": rec["as_of"], "label": rec.get("run_label"),
        "frameworks": rec["frameworks"], "currency": rec["currency"], "rows": rec["rows"],
        "balance": rec["total_balance"], "allowance": rec["total_allowance"], "by_stage": by_stage,
        "each_scenario_at_100_percent": alone, "what_if": _what_if_totals(result),
        "movement": rec.get("movement") or {}, "warnings": [*result.warnings, *notes],
        "files": [p.name for p in files], "seconds": round(seconds, 3),
    }


def _input_path(record: Mapping[str, Any], role: str) -> Path | None:
    """The path of a run's input of ``role`` (as its run record names it), if it is a file or folder."""
    for item in record.get("inputs", []):
        if item.get("role") == role and item.get("path") and not str(item["path"]).startswith("<"):
            return Path(item["path"])
    return None


def _print_summary(result: Result, out: Path, seconds: float, files: list[Path] = (), notes: list[str] = ()) -> None:
    summary = _run_summary(result, out, list(files), list(notes), seconds)
    _out.data(summary)
    rows = summary["rows"]
    _say(f"as of {summary['as_of']}  ({', '.join(summary['frameworks'])}, {summary['currency']})")
    _say(f"rows read {rows['read']:,}  accepted {rows['accepted']:,}  rejected {rows['rejected']:,}")
    _say_rejected(_input_path(result.record, "tape"), result.rejected, out)
    _say(f"balance {_money(summary['balance'])}")
    for fw in summary["frameworks"]:
        line = f"allowance {fw.upper():6s} {summary['allowance'][fw]:>18,.2f}"
        stages = summary["by_stage"][fw]
        if stages:
            line += "   " + "  ".join(f"{s if s == 'POCI' else 'stage ' + s} {_money(v)}" for s, v in stages.items())
        _say(line)
    for fw, alone in summary["each_scenario_at_100_percent"].items():
        _say(f"  {fw.upper()} with each scenario at 100 %: " + "  ".join(f"{s} {_money(v)}" for s, v in alone.items()))
    for fw, moved in summary["what_if"].items():
        _say(f"what-if {fw.upper()}: {_change('base', moved['base'], 'what-if', moved['what_if'])}")
    for fw, moved in summary["movement"].items():
        _say(f"movement {fw.upper()}: {_change('opening', moved['opening'], 'closing', moved['closing'])}")
    for w in summary["warnings"]:
        _say(f"warning: {w}")
    if _out.mode == "verbose":
        for item in result.record.get("inputs", []):
            _out.detail(f"input {item['role']:<12s} {item['path']}  sha256 {item['sha256']}")
        for name, spent in _out.phases.items():
            _out.detail(f"time {name:<12s} {spent:.1f} s")
        for path in files:
            _out.detail(f"wrote {path}")
    _say(f"wrote {out}  ({seconds:.1f} s)")


@contextlib.contextmanager
def _executor(engine: str, workers: int | None, scheduler: str | None, shown=None):
    """The chunk map for ``--engine``: None (the engine's own loop) or a Dask cluster's; the
    display (``shown``) says the cluster is being started or joined, which takes seconds (up
    to 30 waiting for a joined scheduler's first worker)."""
    if engine != "dask":
        yield None
        return
    from allowance.cluster import dask_map

    if shown is not None:
        shown("cluster", 0, 1)
    with dask_map(workers=workers, scheduler=scheduler) as chunk_map:
        if shown is not None:
            shown("cluster", 1, 1)
        yield chunk_map


def _early_folder(out: Path, prior: Path | None):
    """For a run with a movement, its output folder opened before the run is computed
    (:class:`allowance.report.files.OutputFolder`: locked, ``loans.csv`` begun while the
    movement is made); otherwise nothing (the folder is written once the run is done)."""
    if prior is None:
        return contextlib.nullcontext(None)
    from allowance.report.files import OutputFolder

    return OutputFolder(out)


def _write(result: Result, out, shown, *, parquet: bool = False) -> tuple[list[Path], list[str]]:
    """Write a run's outputs (into ``out``, a folder path or an open
    :class:`~allowance.report.files.OutputFolder`); return the files and the swap's notes
    (leftovers kept, where)."""
    shown("write", 0, 1)
    with _phase("write"):
        if isinstance(out, Path):
            files = result.write(out, parquet=parquet, progress=shown)
        else:
            files = out.write(result.report, parquet=parquet, progress=shown)
    return list(files), list(getattr(files, "notes", ()))


# ---- commands ------------------------------------------------------------------------


@app.command()
def run(
    ctx: typer.Context,
    tape: Annotated[Path, typer.Argument(metavar="TAPE", help="The quarter-end loan tape (CSV, XLSX, Parquet, or a folder of Parquet files).")],
    assumptions: AssumptionsOption,
    out: OutOption,
    overlay: Annotated[
        list[Path] | None,
        typer.Option("--overlay", metavar="FILE",
                     help="What-if file merged over the assumptions (repeat for several); the base run is compared."),
    ] = None,
    prior: Annotated[
        Path | None, typer.Option("--prior", metavar="DIR", help="Last quarter's output folder: explain the movement.")
    ] = None,
    charge_offs: Annotated[
        Path | None, typer.Option("--charge-offs", metavar="FILE",
                                  help="The period's write-offs: loan_id, gross_charge_off, recoveries.")
    ] = None,
    ledger_balance: Annotated[
        float | None, typer.Option("--ledger-balance", metavar="AMOUNT",
                                   help="Ledger control total (overrides [run] ledger_balance).")
    ] = None,
    accept_ledger_difference: Annotated[
        bool, typer.Option("--accept-ledger-difference", help="Go on when the tape does not tie to the ledger (recorded).")
    ] = False,
    label: Annotated[
        str | None, typer.Option("--label", metavar="TEXT", help="A name for this run, kept in the run record.")
    ] = None,
    parquet: Annotated[bool, typer.Option("--parquet", help="Also write loans.parquet.")] = False,
    sensitivities: Annotated[
        bool, typer.Option("--sensitivities/--no-sensitivities",
                           help="Also each scenario alone at 100 % weight, restaged (in the same pass).")
    ] = True,
    engine: Annotated[
        str, typer.Option("--engine", metavar="in-process|dask", callback=_one_of("in-process", "dask"),
                          help="Where the loans are computed: this process, or a Dask cluster (same answer).")
    ] = "in-process",
    workers: Annotated[
        int | None, typer.Option("--workers", min=1, metavar="N",
                                 help="--engine dask: worker processes of a local cluster.")
    ] = None,
    scheduler: Annotated[
        str | None, typer.Option("--scheduler", metavar="ADDRESS",
                                 help="--engine dask: join the cluster at this address instead.")
    ] = None,
    chunk_size: Annotated[
        int | None, typer.Option("--chunk-size", min=1, metavar="LOANS",
                                 help="Loans per unit of work (default 250,000; in this process 125,000, two at a time); "
                                      "smaller spreads a book over more workers.")
    ] = None,
    loans_parquet: Annotated[
        Path | None, typer.Option("--loans-parquet", metavar="DIR",
                                  help="Parquet tape: compute it part by part and write the loan detail to DIR "
                                       "(absent or empty) from where each part runs; summary.xlsx from the parts' sums (and "
                                       "the movement, with --prior), no loans.csv or reserve.xlsx.")
    ] = None,
    quiet: QuietOption = False,
    verbose: VerboseOption = False,
    as_json: JsonOption = False,
) -> None:
    """Compute the allowance for a tape and write the workbook, loan detail and run record."""
    _mode("run", quiet, verbose, as_json)
    from allowance import api
    from allowance.exceptions import AllowanceError

    if engine != "dask" and (workers is not None or scheduler is not None):
        raise typer.BadParameter("needs --engine dask", param_hint="'--workers' / '--scheduler'")
    if scheduler is not None:
        from allowance.cluster import scheduler_address_problem

        problem = scheduler_address_problem(scheduler)
        if problem is not None:
            raise typer.BadParameter(problem, param_hint="'--scheduler'")

    if charge_offs is not None and prior is None:
        raise typer.BadParameter("needs --prior: the write-offs explain the movement from the prior run",
                                 param_hint="'--charge-offs'")
    if loans_parquet is not None and (overlay or parquet):
        raise typer.BadParameter("the loan detail written part by part is not compared with a what-if (--overlay) "
                                 "nor written again (--parquet)", param_hint="'--loans-parquet'")
    _check_out(out, tape, assumptions, *(overlay or ()), charge_offs, prior / "loans.csv" if prior else None)
    started = time.perf_counter()
    try:
        with _out.display() as shown, _early_folder(out, prior) as folder:
            with _phase("compute"), _executor(engine, workers, scheduler, shown) as chunk_map:
                result = api.run(
                    tape, assumptions, overlays=tuple(overlay or ()), prior=prior, charge_offs=charge_offs,
                    ledger_balance=ledger_balance, accept_ledger_difference=accept_ledger_difference,
                    label=label, sensitivities=sensitivities, map=chunk_map, chunk_size=chunk_size,
                    progress=shown, invocation=_invocation(ctx), loans_parquet=loans_parquet,
                    loans_ready=None if folder is None else folder.begin_loans,
                )
            files, notes = _write(result, folder or out, shown, parquet=parquet)
    except AllowanceError as err:
        _fail(err)
    _print_summary(result, out, time.perf_counter() - started, files, notes)


def _shown_path(path: Path, here: Path | None = None) -> str:
    """A shipped demo file as the user can type it from the current folder.

    In a clone (the README's quick start) the same file sits in ``demo/`` here: that path.
    Otherwise the path relative to here when the file is below it, else the full path.
    """
    here = (here or Path.cwd()).resolve()
    clone = here / "demo" / path.name
    try:
        if clone.is_file() and clone.resolve() != path.resolve() and clone.read_bytes() == path.read_bytes():
            return str(Path("demo") / path.name)
    except OSError:
        pass
    try:
        return str(path.resolve().relative_to(here))
    except ValueError:
        return str(path)


def _demo_hint(done, out: Path) -> str:
    """The closing hint: the what-if in one command, with paths the user can type from here.

    Outside a clone the demo's what-if inputs are copied to ``OUT/inputs`` first, so the
    command never names a file inside the installed package.
    """
    from allowance import api

    files = done.what_if
    if all(_shown_path(p) == str(Path("demo") / p.name) for p in files.values()):
        shown = {k: _shown_path(p) for k, p in files.items()}
    else:
        copied = api.copy_demo_inputs(out / "inputs")
        shown = {k: _shown_path(copied[p.name]) for k, p in files.items()}
    return (f"next: what does 100 % downside do?  allowance run {shown['tape']} "
            f"--assumptions {shown['assumptions']} --overlay {shown['overlay']} --out what-if-out")


@app.command()
def demo(
    ctx: typer.Context,
    out: OutOption,
    parquet: Annotated[bool, typer.Option("--parquet", help="Also write loans.parquet.")] = False,
    quiet: QuietOption = False,
    verbose: VerboseOption = False,
    as_json: JsonOption = False,
) -> None:
    """Run the shipped demo quarter end: last quarter, then this quarter with its movement."""
    _mode("demo", quiet, verbose, as_json)
    from allowance import api
    from allowance.exceptions import AllowanceError

    clock = [time.perf_counter()]
    summaries: dict[str, Any] = {}

    def started(lender: str, prior_out: Path) -> None:
        _say(f"demo lender: {lender} (all data invented)")
        _demo_calibration(out)
        _say(f"-- prior quarter -> {_shown_path(prior_out)}")

    def prior_done(result, folder: Path) -> None:
        summaries["prior_quarter"] = _run_summary(result, folder, [], [], time.perf_counter() - clock[0])
        if _out.text:
            _print_summary(result, folder, time.perf_counter() - clock[0])
        _say(f"-- this quarter -> {_shown_path(out)}")
        clock[0] = time.perf_counter()

    try:
        with _out.display() as shown:
            done = api.demo(out, parquet=parquet, progress=shown, on_start=started, on_prior=prior_done,
                            invocation=_invocation(ctx))
        hint = _demo_hint(done, out)
    except AllowanceError as err:
        _fail(err)
    seconds = time.perf_counter() - clock[0]
    if _out.text:  # this quarter's summary right under its heading, then the back-test
        _print_summary(done.current, out, seconds)
    try:
        _demo_backtest(out)
    except AllowanceError as err:
        _fail(err)
    _out.data({**_run_summary(done.current, out, [], [], seconds), "prior_quarter": summaries.get("prior_quarter"),
               "next": hint.removeprefix("next: what does 100 % downside do?  ")})
    _say(hint)


def _demo_backtest(out: Path) -> None:
    """The demo's last step: a run made a year ago on the history's accounts, back-tested against the history since."""
    import tomllib

    from allowance import api
    from allowance.backtest.run import backtest_files
    from allowance.intake import bundled_path
    from allowance.report.backtest import write_backtest

    folder = bundled_path("demo")
    manifest = tomllib.loads((folder / "manifest.toml").read_text(encoding="utf-8"))
    plan = manifest.get("backtest")
    if not plan:
        return
    target = out / "backtest"
    _say(f"-- back-test: the run at {plan['as_of']} against the history since -> {_shown_path(target)}")
    api.run(folder / plan["tape"], folder / plan["assumptions"], sensitivities=False).write(target / "run")
    result, record = backtest_files(target / "run", folder / manifest["history"]["file"])
    write_backtest(target, result, record)
    _say("   verdicts: " + ", ".join(f"{segment} {light}" for segment, light in record["verdicts"].items()))


def _demo_calibration(out: Path) -> None:
    """The demo's first step: calibrate the lender's history into ``out/calibration``."""
    import tomllib

    from allowance.intake import bundled_path

    folder = bundled_path("demo")
    manifest = tomllib.loads((folder / "manifest.toml").read_text(encoding="utf-8"))
    target = out / "calibration"
    _say(f"-- calibration from the lender's history -> {_shown_path(target)}")
    macro = manifest["history"].get("macro")
    done = _calibrate_and_write(folder / manifest["history"]["file"], target,
                                policy=folder / manifest["current"]["policy"],
                                macro=folder / macro if macro else None)
    if _out.text:
        _print_calibration(done)
    _say(f"   the demo's {manifest['current']['assumptions']} is the assumptions.toml it wrote")


@dataclass(frozen=True)
class Calibrated:
    """What one calibration produced (for the summary printed at the end)."""

    out: Path
    calibration: object
    files: list[Path]
    seconds: float
    history: Path | None = None


def _calibrate_and_write(history: Path, out: Path, *, policy: Path | None = None,
                         settings: dict | None = None, macro: Path | None = None) -> Calibrated:
    from allowance.calibrate import calibrate as run_calibration
    from allowance.report.calibration import write_calibration

    started = time.perf_counter()
    cal = run_calibration(history, settings or {}, policy, macro=macro)
    files = write_calibration(out, cal)
    return Calibrated(out=out, calibration=cal, files=files, seconds=time.perf_counter() - started, history=Path(history))


def _print_calibration(done: Calibrated) -> None:
    import pandas as pd

    from allowance.report.calibration_summary import segment_summary

    cal = done.calibration
    intake = cal.intake
    _say(f"rows read {intake.rows_read:,}  accepted {intake.rows_accepted:,}  rejected {intake.rows_rejected:,}"
         + (f"  (after the as-of month, not used: {cal.rows_after_as_of:,})" if cal.rows_after_as_of else ""))
    _say_rejected(done.history, intake.rejected, done.out)
    start, end = cal.frame.window
    _say(f"as of {end}; window {start} to {end}; history {intake.first_month} to {intake.last_month}")
    table = segment_summary(cal)[["segment", "pd_source", "pd_detail", "lgd", "ccf", "payment_rate", "prepayment"]]
    with pd.option_context("display.width", 200, "display.max_colwidth", 60):
        _say(table.to_string(index=False, na_rep="", float_format="{:.4f}".format))
    _say(f"wrote {done.out}  ({done.seconds:.1f} s): assumptions.toml, rolls_<segment>.csv, loss_rates.csv, "
         "calibration.xlsx, calibration.json")


def _calibration_summary(done: Calibrated) -> dict[str, Any]:
    """A calibration as --json prints it: counts, window, each segment's estimates, files."""
    from allowance.report.calibration_summary import segment_summary

    cal, intake = done.calibration, done.calibration.intake
    start, end = cal.frame.window
    table = segment_summary(cal)
    return {
        "ok": True, "out": str(done.out), "as_of": str(end), "window": [str(start), str(end)],
        "rows": {"read": intake.rows_read, "accepted": intake.rows_accepted, "rejected": intake.rows_rejected},
        "segments": json.loads(table.to_json(orient="records")), "files": [p.name for p in done.files],
        "seconds": round(done.seconds, 3),
    }


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
        Path, typer.Argument(metavar="HISTORY",
                             help="The monthly performance history (CSV or Parquet): one row per loan per month.")
    ],
    out: OutOption,
    as_of: Annotated[
        str | None, typer.Option("--as-of", metavar="DATE", help="Calibration date (YYYY-MM-DD or YYYY-MM): later months are not used. "
                                                 "Default: the history's last month.")
    ] = None,
    window: Annotated[
        int | None, typer.Option("--window", min=1, max=600, metavar="MONTHS", help="Months pooled for roll rates, PD by grade and "
                                                                 "payment rates (default 24).")
    ] = None,
    policy: Annotated[
        Path | None, typer.Option("--policy", metavar="FILE", help="Policy file (TOML): the run, rules, scenarios and overlays history "
                                                   "cannot estimate, and [calibration] settings.")
    ] = None,
    weighting: Annotated[
        str | None, typer.Option("--weighting", metavar="count|balance", help="Roll-rate matrix written for the run: count (maximum "
                                                     "likelihood) or balance; the other is written beside it.")
    ] = None,
    macro: Annotated[
        Path | None, typer.Option("--macro", help="Macro history (CSV/XLSX/Parquet, a month or quarter column and "
                                                  "one column per variable): fits the satellite models the policy "
                                                  "names and writes their coefficients.")
    ] = None,
    quiet: QuietOption = False,
    verbose: VerboseOption = False,
    as_json: JsonOption = False,
) -> None:
    """Estimate the assumptions from a performance history and write them with the evidence.

    Roll rates, default and loss rates, vintage curves, LGD, CCF, payment and prepayment rates.

    Writes OUT/assumptions.toml (a complete file 'allowance run' reads, every figure with how it
    was estimated), rolls_SEGMENT.csv (one per roll-rate segment), loss_rates.csv and calibration.xlsx for review.
    """
    _mode("calibrate", quiet, verbose, as_json)
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
    if _out.mode == "json":
        _out.data(_calibration_summary(done))
    for path in done.files:
        _out.detail(f"wrote {path}")
    _say(f"next: review {done.out / 'calibration.xlsx'}, then  allowance run TAPE --assumptions "
         f"{done.out / 'assumptions.toml'} --out OUT")




def _check_summary(checked: CheckResult, tape: Path, out: Path | None, files: list[Path]) -> dict[str, Any]:
    intake = checked.intake
    rejected = checked.rejected
    # two columns only: a row tuple of every column costs seconds on a wide tape
    listed = [{"line": int(line), "reasons": str(reasons)}
              for line, reasons in zip(rejected["source_row"].tolist(), rejected["reasons"].tolist())]
    return {
        "ok": bool(checked.ok), "exit_code": 0 if checked.ok else 1, "tape": str(tape),
        "rows": {"read": intake.rows_read, "accepted": intake.rows_accepted, "rejected": intake.rows_rejected},
        "warnings": int(len(intake.warnings)), "date_formats": dict(intake.date_formats),
        "table": checked.table.to_dict(orient="records"),
        "tie_out": {"within_tolerance": bool(checked.tie_out.within_tolerance),
                    "explanation": checked.tie_out.explanation},
        "rejected": listed, "out": None if out is None else str(out), "files": [p.name for p in files],
    }


@app.command()
def check(
    tape: Annotated[Path, typer.Argument(metavar="TAPE", help="The loan tape to validate.")],
    assumptions: AssumptionsOption,
    ledger_balance: Annotated[
        float | None, typer.Option("--ledger-balance", metavar="AMOUNT", help="Ledger control total.")
    ] = None,
    out: Annotated[
        Path | None, typer.Option("--out", metavar="DIR", help="Also write rejected.csv and warnings.csv (every "
                                                               "row, with its line number and reasons) here.")
    ] = None,
    quiet: QuietOption = False,
    verbose: VerboseOption = False,
    as_json: JsonOption = False,
) -> None:
    """Validate a tape only: rows read / accepted / rejected by reason, and the ledger tie-out.

    Exits 1 when any row is rejected or the tape does not tie to the ledger.
    """
    _mode("check", quiet, verbose, as_json)
    from allowance import api
    from allowance.exceptions import AllowanceError

    if out is not None:
        _check_out(out, tape, assumptions)
    try:
        checked = api.check(tape, assumptions, ledger_balance=ledger_balance)
        files = list(checked.write(out)) if out is not None else []
    except AllowanceError as err:
        _fail(err)
    _out.data(_check_summary(checked, tape, out, files))
    _say(_table(checked.table))
    _say(f"ledger tie-out: {checked.tie_out.explanation}")
    rejected = checked.rejected
    if len(rejected):
        where = (f"all of them are in {out / 'rejected.csv'}" if out is not None
                 else "write them all to a file with --out DIR")
        _say(f"{len(rejected):,} row(s) rejected; {where}")
        shown = rejected if _out.mode == "verbose" else rejected.head(SHOWN_ROWS)
        _name_rejected(tape, shown, len(rejected))
    for path in files:
        _out.detail(f"wrote {path}")
    if not checked.ok:
        raise typer.Exit(1)


def _name_rejected(source: Path, shown: Any, total: int) -> None:
    """Say each row of ``shown`` (rejected rows) with where it is and why, then how many more."""
    kind = _tape_kind(source)
    for row in shown.itertuples(index=False):
        _say(f"  {_where(source, kind, row)}: {row.reasons}")
    if total > len(shown):
        _say(f"  ... and {total - len(shown):,} more")


def _say_rejected(source: Path | None, rejected: Any, folder: Path) -> None:
    """After a run or a calibration: how many rows were rejected, the file that holds every one
    of them with its reasons, and the first few (all with --verbose)."""
    if rejected is None or not len(rejected) or source is None:
        return
    _say(f"{len(rejected):,} row(s) rejected; all of them, with every reason, are in {folder / 'rejected.csv'}")
    shown = rejected if _out.mode == "verbose" else rejected.head(SHOWN_AFTER_RUN)
    _name_rejected(source, shown, len(rejected))


def _tape_kind(tape: Path) -> str:
    """``"folder"``, or the tape file's kind (``csv``, ``xlsx``, ``parquet``) for naming its rows."""
    from allowance.intake.files import kind_or_csv

    return "folder" if tape.is_dir() else kind_or_csv(tape)


def _where(tape: Path, kind: str, row: Any) -> str:
    """Where a rejected row is, in its file's own terms (``source_row`` counts a header as line 1):
    a CSV's line; an XLSX sheet's row (the same number); a Parquet file's n-th row
    (``source_row`` n + 1); in a folder of Parquet files, the file and its row there, and the
    row in the whole tape.

    >>> from types import SimpleNamespace as R
    >>> _where(Path("t.csv"), "csv", R(source_row=7))
    't.csv: line 7'
    >>> _where(Path("t.parquet"), "parquet", R(source_row=7))
    't.parquet: row 6 (source_row 7 in rejected.csv)'
    >>> _where(Path("tapes"), "folder", R(source_row=202, source_file="b.parquet", file_row=51))
    'tapes/b.parquet: row 51 (row 201 of the tape, source_row 202 in rejected.csv)'
    """
    line = int(row.source_row)
    if kind == "folder":
        return (f"{tape / row.source_file}: row {int(row.file_row)} "
                f"(row {line - 1} of the tape, source_row {line} in rejected.csv)")
    if kind == "parquet":
        return f"{tape}: row {line - 1} (source_row {line} in rejected.csv)"
    if kind == "xlsx":
        return f"{tape}: row {line}"
    return f"{tape}: line {line}"


@app.command()
def init(folder: Annotated[Path, typer.Argument(metavar="DIR", help="Folder to create with blank input templates.")]) -> None:
    """Copy the blank input templates (tape CSV/XLSX, assumptions, what-if overlay)."""
    _mode("init")
    from allowance import api
    from allowance.exceptions import AllowanceError

    try:
        copied = api.copy_templates(folder)
    except AllowanceError as err:
        _fail(err)
    _say(f"wrote {', '.join(p.name for p in copied)} to {folder}")
    _say(f"next: fill in {folder / 'loan_tape.csv'} and {folder / 'assumptions.toml'}, then  "
         f"allowance check {folder / 'loan_tape.csv'} -a {folder / 'assumptions.toml'}")


@app.command()
def schedule(
    tape: TapeArgument,
    assumptions: AssumptionsOption,
    loan: Annotated[str, typer.Option("--loan", metavar="LOAN_ID", help="The loan_id to schedule.")],
    framework: Annotated[
        str | None, typer.Option("--framework", metavar="ifrs9|cecl", callback=_one_of("ifrs9", "cecl"),
                                 help="The framework (default: the first listed).")
    ] = None,
    scenario: Annotated[
        str | None, typer.Option("--scenario", metavar="NAME", help="Scenario whose PDs are shown (default: the first).")
    ] = None,
    csv: Annotated[Path | None, typer.Option("--csv", metavar="FILE", help="Also save the schedule to this CSV file.")] = None,
    quiet: QuietOption = False,
    as_json: JsonOption = False,
) -> None:
    """Print one loan's schedule and what the engine booked for it, month by month, to check by hand."""
    _mode("schedule", quiet, False, as_json)
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
    shown = frame.drop(columns=["loan_id", "framework", "scenario", "measurement"], errors="ignore")
    money = "{:,.2f}".format
    shares = {"survival", "survival_opening", "marginal_pd", "refinance_pd", "default_share", "lgd", "discount_factor"}
    formats = {c: ("{:.6f}".format if c in shares else money) for c in shown.columns if c != "month"}
    _say(shown.to_string(index=False, formatters=formats, na_rep=""))
    _say(f"ECL booked ({frame['measurement'].iloc[0]}): {scheduled.ecl:,.2f} = the loan's "
         f"ecl_{frame['framework'].iloc[0]}_{frame['scenario'].iloc[0]} in loans.csv")
    written = None
    if csv is not None:
        try:
            written = scheduled.write_csv(csv)
        except AllowanceError as err:
            _fail(err)
        _say(f"wrote {written}")
    _out.data({"ok": True, "loan_id": loan, "framework": str(frame["framework"].iloc[0]),
               "scenario": str(frame["scenario"].iloc[0]), "measurement": str(frame["measurement"].iloc[0]),
               "ecl": float(scheduled.ecl), "months": _records(frame.drop(columns=["loan_id"], errors="ignore")),
               "csv": None if written is None else str(written)})


@app.command("roll-rates")
def roll_rates(
    assumptions: AssumptionsOption,
    segment: Annotated[str | None, typer.Option("--segment", metavar="NAME", help="Only this segment.")] = None,
    tape: Annotated[
        Path | None, typer.Option("--tape", metavar="FILE", help="Also roll this tape's bucket balances forward.")
    ] = None,
    months: Annotated[int, typer.Option("--months", min=1, help="Months of the balance forecast.")] = 12,
    quiet: QuietOption = False,
    as_json: JsonOption = False,
) -> None:
    """Print what each roll-rate matrix implies from every delinquency bucket.

    12-month and lifetime PD (absorption into charge-off) and expected months to charge-off.
    With --tape: the tape's delinquency-bucket balances rolled forward month by month (the
    charge-off forecast) beside the loan-level allowance of the same segment.
    """
    _mode("roll-rates", quiet, False, as_json)
    from allowance import api
    from allowance.exceptions import AllowanceError

    try:
        table = api.roll_rates(assumptions, segment=segment)  # an unknown segment is an error naming the others
        others = api.roll_rates(assumptions) if table.empty and segment is not None else table
        if tape is not None and not table.empty:
            by_month, check = api.roll_forecast(tape, assumptions, segment=segment, months=months)
    except AllowanceError as err:
        _fail(err)
    if table.empty:
        if not others.empty:
            with_matrix = ", ".join(dict.fromkeys(others["segment"]))
            _say(f"segment {segment!r} does not use a transition_matrix; these segments do: {with_matrix}")
        else:
            _say("no segment in these assumptions uses a transition_matrix")
        _out.data({"ok": True, "segment": segment, "matrices": [],
                   "segments_with_a_matrix": list(dict.fromkeys(others["segment"])) if not others.empty else []})
        return
    import pandas as pd

    _out.data({"ok": True, "segment": segment, "matrices": _records(table),
               "forecast": None if tape is None else {"months": months, "by_month": _records(by_month),
                                                      "beside_the_allowance": _records(check)}})

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
    prior: Annotated[Path, typer.Argument(metavar="PRIOR_DIR", help="Last quarter's output folder.")],
    current: Annotated[Path, typer.Argument(metavar="CURRENT_DIR", help="This quarter's output folder.")],
    charge_offs: Annotated[
        Path | None, typer.Option("--charge-offs", metavar="FILE", help="The period's write-offs file.")
    ] = None,
    out: Annotated[
        Path | None, typer.Option("--out", metavar="DIR", help="Write movement.csv, movement_loans.csv and "
                                  "movement_not_isolated.csv to this folder.")
    ] = None,
    quiet: QuietOption = False,
    as_json: JsonOption = False,
) -> None:
    """Explain the allowance movement between two finished runs, loan by loan."""
    _mode("compare", quiet, False, as_json)
    from allowance import api, report
    from allowance.exceptions import AllowanceError

    try:
        moves = api.compare(prior, current, charge_offs=charge_offs)
        written = report.write_movement(out, moves.values()) if out is not None else []
    except AllowanceError as err:
        _fail(err)
    for fw, mv in moves.items():
        _say(f"-- {fw.upper()} allowance movement")
        _say(_table(mv.allowance, "{:,.2f}"))
        for text in mv.not_isolated:  # what two finished runs cannot separate, and why
            _say(f"not isolated: {text}")
    if written:
        _say(f"wrote {out}: {', '.join(p.name for p in written)}")
    _out.data({"ok": True, "movement": {fw: json.loads(mv.allowance.to_json(orient="records"))
                                        for fw, mv in moves.items()},
               "not_isolated": {fw: list(mv.not_isolated) for fw, mv in moves.items()},
               "out": None if out is None else str(out), "files": [p.name for p in written]})


@app.command()
def backtest(
    run_dir: Annotated[Path, typer.Argument(metavar="RUN_DIR", help="A finished run's output folder (loans.csv, run.json).")],
    history: Annotated[
        Path, typer.Argument(metavar="HISTORY", help="Monthly performance history since that run (CSV or Parquet).")
    ],
    out: OutOption,
    confidence: Annotated[float, typer.Option(metavar="LEVEL", help="Two-sided confidence of the default-rate intervals.")] = 0.95,
    yellow_p: Annotated[float, typer.Option(metavar="P", help="Yellow light below this p-value.")] = 0.05,
    red_p: Annotated[float, typer.Option(metavar="P", help="Red light below this p-value.")] = 0.001,
    test: Annotated[str, typer.Option(metavar="binomial|jeffreys", callback=_one_of("binomial", "jeffreys"),
                                      help="Test behind a grade's light: binomial or jeffreys.")] = "binomial",
    quiet: QuietOption = False,
    verbose: VerboseOption = False,
    as_json: JsonOption = False,
) -> None:
    """Compare a past run's 12-month PDs and expected losses with what happened since."""
    _mode("backtest", quiet, verbose, as_json)
    import pandas as pd
    from pydantic import ValidationError

    from allowance.backtest import BacktestOptions
    from allowance.exceptions import AllowanceError
    from allowance.backtest.run import backtest_files
    from allowance.report.backtest import write_backtest

    try:
        options = BacktestOptions(confidence=confidence, yellow_p=yellow_p, red_p=red_p, test=test)
    except ValidationError as err:  # a value out of its range, or the two p-values out of order
        first = err.errors()[0]
        name = str(first["loc"][0]) if first.get("loc") else ""
        reason = str(first["msg"]).removeprefix("Value error, ")
        hint = f"'--{name.replace('_', '-')}'" if name else "'--yellow-p' / '--red-p'"
        raise typer.BadParameter(f"{reason}, not {first['input']!r}" if name else reason, param_hint=hint) from None
    try:
        result, record = backtest_files(run_dir, history, options)
        written = write_backtest(out, result, record)
    except AllowanceError as err:
        _fail(err)
    _out.data({"ok": True, "run": str(run_dir), "history": str(history), "segments": _records(result.segments),
               "out": str(out), "files": [Path(p).name for p in written]})
    with pd.option_context("display.width", 200, "display.max_columns", 20, "display.float_format", "{:,.4f}".format):
        shown = ["segment", "method", "verdict", "pd_light", "loss_light", "defaults", "expected_defaults",
                 "expected_loss_12m", "realised_ncl"]
        _say(result.segments[[c for c in shown if c in result.segments]].to_string(index=False))
    _say(f"wrote {out}")
    for path in written:
        _out.detail(f"wrote {path}")


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
