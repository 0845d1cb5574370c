"""The bad-input suite: one row per class of bad input or fault, so that none comes back.

Each row of :data:`CASES` names the class, the input in words, the command, the exit code,
the key words of the message and, where the run gets that far, rows read / accepted /
rejected. Most rows run in-process on a 24-loan slice of the demo book (fast); the rows
that need a real process (a kill, Ctrl-C, another user) run one and are marked ``slow``.
The README's reliability section lists the same classes.

Exit codes are the command-line contract: 0 done, 1 the inputs have problems, 2 usage
error, 130 interrupted (128 + SIGINT, the shell convention).
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import textwrap
import time
import zipfile
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
import xlsxwriter
from typer.testing import CliRunner

from allowance.cli import app
from allowance.intake import bundled_path
from allowance.report import swap
from tests.test_report_workbook import _recalculating_profile

PYTHON = sys.executable
REPO = Path(__file__).resolve().parents[1]
EPOCH = "1790812800"  # 2026-10-01T00:00:00Z (computed with Python's datetime)


# --------------------------------------------------------------------------------------
# The workspace: a fixed 24-loan book (four loans of each of six segments) and a small fixed
# assumptions file, both kept here so that no change to the demo can change what a row tests
# (invented data: the loans are a frozen slice of the demo's invented lender)
# --------------------------------------------------------------------------------------

TAPE_CSV = """\
loan_id,segment,repayment,origination_date,maturity_date,balance,interest_rate,days_past_due,credit_limit,payment,eir,grade,pd_12m_at_origination,collateral_value,watchlist,forborne,bankrupt,defaulted,credit_impaired_at_purchase,prior_stage,months_performing,balloon_amount,amortization_months,interest_only_months,lifetime_ecl_at_purchase,original_amount,branch
AUT-100048,auto,level,2020-10-04,2026-10-04,407.01,0.0795,0,,409.71,,C,0.020238,8800.00,false,false,false,false,false,,,,,,,23400.00,Larrow Hill
AUT-100051,auto,level,2020-10-06,2026-10-06,574.17,0.083,0,,578.14,,C,0.019039,11900.00,false,false,false,false,false,,,,,,,32700.00,Southmere
AUT-100054,auto,level,2020-10-08,2026-10-08,1983.99,0.0587,22,,,0.061333,C,0.004415,21500.00,false,false,false,false,false,,,,,,,60520.00,Larrow Hill
AUT-100055,auto,level,2020-10-09,2026-10-09,432.56,0.0736,0,,435.21,,B,0.008162,9600.00,false,false,false,false,false,,,,,,,25270.00,Fennick Cross
CRD-100001,cards,revolving,2008-06-04,,16713.56,0.1899,0,17400.00,,,,0.018721,,false,false,false,false,false,,,,,,,,Online
CRD-100002,cards,revolving,2008-06-06,,4809.58,0.2649,0,16100.00,,,,0.042276,,false,false,false,false,false,,,,,,,,Fennick Cross
CRD-100005,cards,revolving,2008-06-08,,3947.69,0.2399,0,4300.00,,,,0.03892,,false,false,false,false,false,,,,,,,,Corrandale Central
CRD-100008,cards,revolving,2008-06-19,,3898.76,0.2149,0,8200.00,,,,0.032158,,false,false,false,false,false,,,,,,,,Corrandale Central
CRE-100005,cre,balloon,2016-10-01,2026-10-01,398718.80,0.048,0,,3099.91,,,0.013609,831900.00,false,false,false,false,false,,,,300,,,541000.00,Millwater Quay
CRE-100008,cre,balloon,2016-10-19,2026-10-19,1305128.19,0.0505,0,,10316.62,0.051373,,0.021827,3999500.00,false,false,false,false,false,,,,300,,,1756000.00,Fennick Cross
CRE-100009,cre,balloon,2016-11-11,2026-11-11,1964682.32,0.0501,0,,12914.51,0.051342,,0.008894,3112700.00,false,false,false,false,false,,,,360,,,2403000.00,Hetherby
CRE-100010,cre,balloon,2017-01-05,2027-01-05,842404.03,0.0539,0,,6737.57,0.054712,,0.013893,2025400.00,false,false,false,false,false,,,,300,,,1109000.00,Hetherby
HEL-100003,heloc,interest_only,2011-07-01,2036-07-01,97253.76,0.0654,0,,,,,0.008336,,false,false,false,false,false,,,,,120,,128200.00,Online
HEL-100004,heloc,interest_only,2011-07-05,2036-07-05,43308.42,0.0653,0,,,,,0.004697,,false,false,false,false,false,,,,,120,,57100.00,Online
HEL-100006,heloc,interest_only,2011-07-15,2036-07-15,57786.44,0.0738,0,,,,,0.006216,,false,false,false,false,false,,,,,120,,75000.00,Millwater Quay
HEL-100009,heloc,interest_only,2011-07-26,2036-07-26,115340.98,0.0673,0,,,,,0.00628,,true,false,false,false,false,2,18,,,120,,151500.00,Southmere
MTG-100002,mortgage,level,2012-04-04,2042-04-04,165896.00,0.0445,0,,1231.59,0.045347,,0.007288,528600.00,false,false,false,false,false,,,,,,,244500.00,Corrandale Central
MTG-100003,mortgage,level,2012-04-04,2042-04-04,132879.77,0.0436,0,,980.35,,,0.004874,438200.00,false,false,false,false,false,,,,,,,196700.00,Larrow Hill
MTG-100005,mortgage,level,2012-04-04,2042-04-04,106545.09,0.0448,0,,792.62,0.046054,,0.005702,479200.00,false,false,false,false,false,,,,,,,156800.00,Corrandale Central
MTG-100006,mortgage,level,2012-04-07,2042-04-07,260096.24,0.0408,0,,1881.88,0.0418,,0.007932,1009400.00,false,false,false,false,false,,,,,,,390400.00,Ashgrove
PER-100140,personal,level,2023-10-03,2026-10-03,427.08,0.1557,0,,432.62,0.167325,E,0.069392,,false,false,false,false,false,,,,,,,12380.00,Hetherby
PER-100142,personal,level,2023-10-04,2026-10-04,245.49,0.0926,0,,247.39,0.105009,A,0.007713,,false,false,false,false,false,,,,,,,7750.00,Online
PER-100145,personal,level,2023-10-06,2026-10-06,712.22,0.1098,0,,718.73,,B,0.017441,,false,false,false,false,false,,,,,,,21960.00,Ashgrove
PER-100149,personal,level,2023-10-08,2026-10-08,271.66,0.1121,0,,274.20,,B,0.017355,,false,false,false,false,false,,,,,,,8350.00,Southmere
"""

#: The mini assumptions: every PD source kind a row needs, both frameworks, two scenarios of
#: PD multipliers (figures invented for the tests, not calibrated).
BASE_TOML = """\
[run]
as_of = 2026-09-30
frameworks = ["ifrs9", "cecl"]
currency = "USD"
label = "bad-input suite"

[segments.auto]
pd_12m = 0.02
lgd = 0.5
cpr = 0.12

[segments.cards]
pd_12m = 0.04
lgd = 0.9
ccf = 0.3
unconditionally_cancellable = true
behavioural_life_months = 36
payment_rate = 0.08

[segments.cre]
pd_12m = 0.015
lgd = 0.35

[segments.heloc]
pd_12m = 0.008
lgd = 0.6

[segments.mortgage]
pd_curve = [0.003, 0.007, 0.012]
lgd = 0.25
cpr = 0.06

[segments.personal]
pd_12m_by_grade = { A = 0.01, B = 0.02, C = 0.04, D = 0.07, E = 0.11 }
lgd = 0.9
cpr = 0.2

[ifrs9]
sicr_backstop_dpd = 30
default_dpd = 90
sicr_pd_ratio = 2.0
sicr_pd_measure = "12_month"

[cecl]
reasonable_supportable_months = 24
reversion_months = 12
reversion = "straight_line"
discount = false
payment_allocation = "measured_balance_first"

[scenarios.base]
weight = 0.6
pd_multiplier = [1.0, 1.0, 1.0]

[scenarios.downside]
weight = 0.4
pd_multiplier = [1.6, 1.3, 1.1]
lgd_multiplier = [1.1]
"""

TAPE = TAPE_CSV.splitlines()
HEADER = TAPE[0].split(",")
OVERLAY = """
[[overlays]]
name = "test"
segment = "auto"
kind = "{kind}"
value = {value}
rationale = "{rationale}"
owner = "Credit Risk Committee"
"""


@dataclass
class Workspace:
    folder: Path

    @property
    def tape(self) -> Path:
        return self.folder / "tape.csv"

    @property
    def toml(self) -> Path:
        return self.folder / "assumptions.toml"

    @property
    def out(self) -> Path:
        return self.folder / "out"


def workspace(folder: Path, tape: list[str] = TAPE, toml: str = BASE_TOML) -> Workspace:
    folder.mkdir(parents=True, exist_ok=True)
    ws = Workspace(folder)
    ws.tape.write_text("\n".join(tape) + "\n", encoding="utf-8")
    ws.toml.write_text(toml, encoding="utf-8")
    return ws


def cell(lines: list[str], row: int, column: str, value: str) -> list[str]:
    """The tape with data row ``row`` (1 = first loan) holding ``value`` in ``column``."""
    out = list(lines)
    cells = out[row].split(",")
    cells[HEADER.index(column)] = value
    out[row] = ",".join(cells)
    return out


def heloc(limit: str, draw: str) -> Callable[[list[str]], list[str]]:
    """Loan HEL-100003 (2011-07-01 to 2036-07-01, 300 months) as a HELOC with this credit limit
    and draw period, in a draw_period_months column added to the tape."""
    def edit(lines: list[str]) -> list[str]:
        row = next(i for i, line in enumerate(lines) if line.startswith("HEL-100003,"))
        out = cell(cell(lines, row, "repayment", "heloc"), row, "credit_limit", limit)
        return [out[0] + ",draw_period_months", *(line + (f",{draw}" if i == row else ",")
                                                  for i, line in enumerate(out[1:], start=1))]
    return edit


def heloc_segment(text: str) -> str:
    """The HELOC segment stating its CCF and that its lines are not unconditionally cancellable."""
    return text.replace("[segments.heloc]\n", "[segments.heloc]\nccf = 0.5\nunconditionally_cancellable = false\n", 1)


def copies(lines: list[str], n: int) -> list[str]:
    """The book ``n`` times over, each copy's loan_ids made unique with a suffix."""
    return [lines[0], *(line.replace(",", f"-{i},", 1) for i in range(n) for line in lines[1:])]


def charge_offs(ws: Workspace) -> Path:
    """A write-off file for one loan of the book."""
    path = ws.folder / "charge_offs.csv"
    path.write_text("loan_id,gross_charge_off,recoveries\nAUT-100048,400.00,0.00\n", encoding="utf-8")
    return path


def quote_last_field(line: str) -> str:
    """Open a quote at the start of the line's last field (a free-text column) and leave it open."""
    head, last = line.rsplit(",", 1)
    return f'{head},"{last}'


def column_named(name: str) -> Callable[[list[str]], list[str]]:
    """Add a column ``name`` holding text to every row."""
    return lambda lines: [lines[0] + f",{name}"] + [line + ",from the extract" for line in lines[1:]]


def toml_set(key: str, value: str) -> Callable[[str], str]:
    """Set ``key = value`` in its table (the first line starting with ``key =``)."""
    def edit(text: str) -> str:
        changed, n = re.subn(rf"(?m)^{re.escape(key)} *=.*$", f"{key} = {value}", text, count=1)
        assert n == 1, key
        return changed
    return edit


def toml_drop(key: str) -> Callable[[str], str]:
    """Remove the line ``key = ...`` (the first one)."""
    def edit(text: str) -> str:
        changed, n = re.subn(rf"(?m)^{re.escape(key)} *=.*\n", "", text, count=1)
        assert n == 1, key
        return changed
    return edit


def commitment(row: int, facility: str, end: str, balance: str | None = None) -> Callable[[list[str]], list[str]]:
    """The tape with the columns facility_type and commitment_end_date, set on data row ``row``
    (blank elsewhere), and that row's balance replaced when given."""
    def edit(lines: list[str]) -> list[str]:
        if balance is not None:
            lines = cell(lines, row, "balance", balance)
        out = [lines[0] + ",facility_type,commitment_end_date"]
        out += [line + (f",{facility},{end}" if i == row else ",,") for i, line in enumerate(lines[1:], start=1)]
        return out
    return edit


def toml_add(extra: str) -> Callable[[str], str]:
    return lambda text: text + "\n" + extra


def overlay(kind: str, value: str, rationale: str = "used-vehicle prices falling") -> Callable[[str], str]:
    return toml_add(OVERLAY.format(kind=kind, value=value, rationale=rationale))


# --------------------------------------------------------------------------------------
# The table
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Case:
    """One class of bad input: what is given, and what the user gets."""

    name: str
    given: str
    command: str  # run | check | custom
    exit: int
    words: tuple[str, ...]
    rows: tuple[int, int, int] | None = None  # read, accepted, rejected
    tape: Callable[[list[str]], list[str]] | None = None
    toml: Callable[[str], str] | None = None
    args: Callable[[Workspace], list[str]] | None = None  # replaces the default arguments
    then: Callable[[Workspace, str], None] | None = None  # further checks on the outcome
    custom: Callable[[Path, "Case"], None] | None = None  # runs the whole row itself
    marks: tuple = field(default=())


def invoke(args: list[str], env: dict[str, str] | None = None) -> tuple[int, str]:
    if args and args[0] == "run" and "--no-sensitivities" not in args:
        args = [*args, "--no-sensitivities"]  # the per-scenario reruns add nothing here but time
    result = CliRunner().invoke(app, [str(a) for a in args], env=env, catch_exceptions=False)
    return result.exit_code, result.output


def default_args(ws: Workspace, command: str) -> list[str]:
    if command == "run":
        return ["run", ws.tape, "-a", ws.toml, "--out", ws.out, "--no-sensitivities"]
    return ["check", ws.tape, "-a", ws.toml]


def counts(ws: Workspace, command: str, output: str) -> tuple[int, int, int] | None:
    """Rows read / accepted / rejected: from run.json after a run, from the table after a check."""
    if command == "run":
        if not (ws.out / "run.json").is_file():
            return None
        rows = json.loads((ws.out / "run.json").read_text())["rows"]
        return rows["read"], rows["accepted"], rows["rejected"]
    found = dict(re.findall(r"(?m)^\s*rows\s+(read|accepted|rejected)\s+(\d+)", output))
    return (int(found["read"]), int(found["accepted"]), int(found["rejected"])) if len(found) == 3 else None


def run_case(tmp_path: Path, case: Case) -> None:
    if case.custom is not None:
        case.custom(tmp_path, case)
        return
    ws = workspace(tmp_path / "ws", case.tape(TAPE) if case.tape else TAPE, case.toml(BASE_TOML) if case.toml else BASE_TOML)
    args = case.args(ws) if case.args else default_args(ws, case.command)
    code, output = invoke(args)
    assert code == case.exit, output
    seen = output
    if (ws.out / "rejected.csv").is_file():  # a run lists each rejected row's reasons there
        seen += "\n" + (ws.out / "rejected.csv").read_text(encoding="utf-8")
    text = " ".join(seen.split())
    for word in case.words:
        assert word in text, f"{word!r} not in: {output}"
    assert "Traceback" not in output
    errors = [line for line in output.splitlines() if line.startswith("error:")]
    assert len(errors) <= 1  # one line, always
    if case.rows is not None:
        assert counts(ws, case.command, output) == case.rows, output
        read, accepted, rejected = case.rows
        assert read == accepted + rejected
    if case.then is not None:
        case.then(ws, output)


# ---- checks used by several rows ------------------------------------------------------


def computed_column_kept(name: str) -> Callable[[Workspace, str], None]:
    def then(ws: Workspace, output: str) -> None:
        loans = pd.read_csv(ws.out / "loans.csv", dtype=str)
        assert (loans[f"tape_{name}"] == "from the extract").all()
        if name in loans.columns:  # the computed figure, not the tape's text
            assert not (loans[name] == "from the extract").any()
    return then


def no_output(ws: Workspace, output: str) -> None:
    assert not ws.out.exists()


def _nothing_named_like_a_scheme(ws: Workspace) -> None:
    assert not Path("s3:").exists() and not (ws.folder / "s3:").exists()


def rejected_reason(code: str) -> Callable[[Workspace, str], None]:
    def then(ws: Workspace, output: str) -> None:
        rejected = pd.read_csv(ws.out / "rejected.csv", dtype=str)
        assert rejected["reason_codes"].str.contains(code).any(), rejected["reason_codes"].tolist()
    return then


def each(*checks: Callable[[Workspace, str], None]) -> Callable[[Workspace, str], None]:
    def then(ws: Workspace, output: str) -> None:
        for check in checks:
            check(ws, output)
    return then


def lines_reconciled(in_values: int) -> Callable[[Workspace, str], None]:
    """run.json and the workbook's Intake sheet state lines = 1 header + rows read + blank +
    line breaks inside quoted values, and the sheet's check cell is 0."""
    def then(ws: Workspace, output: str) -> None:
        rows = json.loads((ws.out / "run.json").read_text())["rows"]
        physical = len(ws.tape.read_text(encoding="utf-8").splitlines())
        assert rows["lines"] == physical == 1 + rows["read"] + rows["blank"] + rows["lines_in_values"]
        assert rows["lines_in_values"] == in_values
        book = openpyxl.load_workbook(ws.out / "reserve.xlsx", data_only=True, read_only=True)
        shown = {r[0]: r[1] for r in book["Intake"].iter_rows(values_only=True) if r and isinstance(r[0], str)}
        book.close()
        assert shown["Lines of the file"] == physical and shown["Line breaks inside quoted values"] == in_values
        assert shown["Lines - header - rows read - blank - line breaks (must be 0)"] == 0
        assert shown["Rows read - accepted - rejected (must be 0)"] == 0
    return then


def workbook_opens(ws: Workspace, output: str) -> None:
    book = openpyxl.load_workbook(ws.out / "reserve.xlsx", read_only=True)
    for sheet in book.worksheets:
        for _ in sheet.iter_rows(values_only=True):
            pass
    book.close()


def prior_folder(record: str) -> Callable[[Workspace], list[str]]:
    """A --prior folder whose loans.csv is real and whose run.json is ``record``."""
    def args(ws: Workspace) -> list[str]:
        prior = ws.folder / "prior"
        prior.mkdir()
        pd.DataFrame({"loan_id": ["X1"], "segment": ["auto"], "ecl_ifrs9": [1.0], "ecl_cecl": [1.0]}).to_csv(
            prior / "loans.csv", index=False)
        (prior / "run.json").write_text(record, encoding="utf-8")
        return ["run", ws.tape, "-a", ws.toml, "--prior", prior, "--out", ws.out]
    return args


def workbook_tape(make: Callable[[Path], None]) -> Callable[[Workspace], list[str]]:
    def args(ws: Workspace) -> list[str]:
        path = ws.folder / "tape.xlsx"
        make(path)
        return ["check", path, "-a", ws.toml]
    return args


def _template_parts() -> dict[str, bytes]:
    with zipfile.ZipFile(bundled_path("templates") / "loan_tape.xlsx") as z:
        return {i.filename: z.read(i.filename) for i in z.infolist()}


def zip_bomb(path: Path) -> None:
    """A workbook whose first sheet is 50 MiB of blanks, 50 KiB compressed."""
    parts = _template_parts()
    sheet = parts["xl/worksheets/sheet1.xml"]
    head = sheet[: sheet.index(b"<sheetData>") + len(b"<sheetData>")]
    parts["xl/worksheets/sheet1.xml"] = head + b" " * (50 << 20) + b"</sheetData></worksheet>"
    _write_zip(path, parts)


def big_workbook(path: Path) -> None:
    """A workbook of ordinary compressibility whose sheet expands to 3 MiB (the row sets a 1 MiB cap)."""
    parts = _template_parts()
    sheet = parts["xl/worksheets/sheet1.xml"]
    head = sheet[: sheet.index(b"<sheetData>") + len(b"<sheetData>")]
    letters = np.frombuffer(b"acgt", dtype=np.uint8)[np.random.default_rng(7).integers(0, 4, 3 << 20)]
    noise = b"<!-- " + letters.tobytes() + b" -->"  # two bits a byte: compresses about 4 to 1
    parts["xl/worksheets/sheet1.xml"] = head + noise + b"</sheetData></worksheet>"
    _write_zip(path, parts)


def xml_bomb(path: Path) -> None:
    """A workbook whose sheet declares nested entities (billion laughs)."""
    parts = _template_parts()
    parts["xl/worksheets/sheet1.xml"] = (
        b'<?xml version="1.0"?><!DOCTYPE lolz [<!ENTITY lol "lol">'
        b'<!ENTITY lol2 "&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;">]>'
        b'<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main"><sheetData>'
        b'<row r="1"><c r="A1" t="inlineStr"><is><t>&lol2;</t></is></c></row></sheetData></worksheet>'
    )
    _write_zip(path, parts)


def _write_zip(path: Path, parts: dict[str, bytes]) -> None:
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as out:
        for name, data in parts.items():
            out.writestr(name, data)


def one_line_error(ws: Workspace, output: str) -> None:
    errors = [line for line in output.splitlines() if line.startswith("error:")]
    assert len(errors) == 1 and output.strip().count("\n") == 0, output


# ---- rows that need a process or more than one run -----------------------------------


def _env(**extra: str) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if k != "SOURCE_DATE_EPOCH"}
    env.update(extra)
    return env


_PAUSING_CHILD = textwrap.dedent(
    """
    import os, sys, time
    from pathlib import Path
    marker, stage = Path(sys.argv[1]), sys.argv[2]
    real_rename = os.rename
    count = {"n": 0}

    def rename(src, dst, *a, **k):
        real_rename(src, dst, *a, **k)
        name = Path(dst).name
        if stage == "carry" and Path(src).parent.name == "out":
            hit = True          # one of the user's entries moved into the partial folder
        elif stage == "backup" and ".backup-" in name:
            hit = True          # the old folder moved aside, the new one not yet in place
        elif stage == "swapped" and name == "out" and ".partial-" in Path(src).name:
            hit = True          # the new folder in place, the dated backup not yet deleted
        else:
            hit = False
        if hit:
            marker.write_text("paused")
            time.sleep(600)

    os.rename = rename
    from allowance.console import main
    sys.argv = ["allowance", *sys.argv[3:]]
    main()
    """
)


def _digests(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in folder.iterdir() if p.is_file()}


def _leftovers(parent: Path) -> list[str]:
    return [p.name for p in parent.iterdir() if ".partial-" in p.name or ".backup-" in p.name or p.name.endswith(".lock")]


def kill_mid_swap(tmp_path: Path, case: Case) -> None:
    """SIGKILL at each step of the swap; the previous run survives and the next run restores or finishes.

    One earlier run is made and copied for the three steps, and the three runs to be killed
    start together (each in its own folder): the row costs one start-up, not three.
    """
    first = workspace(tmp_path / "first")
    assert invoke(["run", first.tape, "-a", first.toml, "--out", first.out, "--label", "old"])[0] == 0
    (first.out / "notes.txt").write_text("the user's own file")
    stages = ("carry", "backup", "swapped")
    spaces, children = {}, {}
    for stage in stages:
        ws = spaces[stage] = workspace(tmp_path / stage)
        shutil.copytree(first.out, ws.out)
        smaller = ws.folder / "smaller.csv"
        smaller.write_text("\n".join(TAPE[:13]) + "\n", encoding="utf-8")
        children[stage] = subprocess.Popen(
            [PYTHON, "-c", _PAUSING_CHILD, str(ws.folder / "paused"), stage, "run", str(smaller), "-a", str(ws.toml),
             "--out", str(ws.out), "--label", "new", "--no-sensitivities"],
            cwd=ws.folder, env=_env(), stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
        )
    old = _digests(first.out)
    try:
        deadline = time.time() + 300
        for stage in stages:
            marker, child = spaces[stage].folder / "paused", children[stage]
            while not marker.exists() and child.poll() is None and time.time() < deadline:
                time.sleep(0.05)
            assert marker.exists(), child.communicate()[1].decode()[-2000:]
            child.send_signal(signal.SIGKILL)
            child.wait()
    finally:
        for child in children.values():
            if child.poll() is None:
                child.kill()
                child.wait()
    for stage in stages:
        ws = spaces[stage]
        # never a mix: what is in out is wholly the old run or wholly the new one
        if ws.out.exists():
            now = _digests(ws.out)
            telling = ("loans.csv", "reserve.xlsx", "run.json")  # they differ between the two runs
            same = [k for k in telling if old[k] == now.get(k)]
            assert len(same) in (0, len(telling)) and all(k in now for k in telling), (stage, same, list(now))
        else:
            assert stage == "backup"  # the previous run waits in the dated backup
            backups = [p for p in ws.folder.iterdir() if ".backup-" in p.name]
            assert len(backups) == 1 and (backups[0] / "run.json").is_file()
        # the next run cleans up, keeps the user's file and writes a complete folder
        code, output = invoke(["run", ws.tape, "-a", ws.toml, "--out", ws.out, "--label", "next"])
        assert code == case.exit, output
        assert _leftovers(ws.folder) == [], (stage, _leftovers(ws.folder))
        assert (ws.out / "notes.txt").read_text() == "the user's own file"
        record = json.loads((ws.out / "run.json").read_text())
        assert record["run_label"] == "next" and record["rows"]["read"] == 24
        assert len(pd.read_csv(ws.out / "loans.csv")) == 24


def sigint_mid_swap(tmp_path: Path, case: Case) -> None:
    """Ctrl-C while the folders are swapped: the swap finishes first, then exit 130 with one line."""
    ws = workspace(tmp_path / "ws")
    assert invoke(["run", ws.tape, "-a", ws.toml, "--out", ws.out])[0] == 0
    marker = ws.folder / "paused"
    # Ctrl-C handled as at a terminal: a shell that runs this suite in the background (no job
    # control) starts it with SIGINT ignored, and the child would inherit that
    script = _PAUSING_CHILD.replace("time.sleep(600)", "os.kill(os.getpid(), signal.SIGINT)").replace(
        "import os, sys, time", "import os, signal, sys, time\nsignal.signal(signal.SIGINT, signal.default_int_handler)")
    child = subprocess.run(
        [PYTHON, "-c", script, str(marker), "backup", "run", str(ws.tape), "-a", str(ws.toml), "--out", str(ws.out),
         "--label", "new", "--no-sensitivities"], cwd=ws.folder, env=_env(), capture_output=True, text=True, timeout=600,
    )
    assert child.returncode == case.exit, child.stderr[-2000:]
    assert all(word in child.stderr for word in case.words) and "Traceback" not in child.stderr
    assert json.loads((ws.out / "run.json").read_text())["run_label"] == "new"
    assert _leftovers(ws.folder) == []


def partial_leftovers(tmp_path: Path, case: Case) -> None:
    """Partial and backup folders from killed runs are cleaned by the next run; the user's files come back."""
    ws = workspace(tmp_path / "ws")
    assert invoke(["run", ws.tape, "-a", ws.toml, "--out", ws.out])[0] == 0
    partial = ws.folder / ".out.partial-k1ll3d"
    partial.mkdir()
    (partial / "loans.csv").write_text("half a file")
    (partial / "mine.txt").write_text("carried in before the kill")
    backup = ws.folder / ".out.backup-20260101T000000Z-1-0"
    backup.mkdir()
    (backup / "run.json").write_text("{}")
    code, output = invoke(["run", ws.tape, "-a", ws.toml, "--out", ws.out])
    assert code == case.exit, output
    assert _leftovers(ws.folder) == []
    assert (ws.out / "mine.txt").read_text() == "carried in before the kill"


def _chattr(flag: str, path: Path) -> bool:
    if shutil.which("chattr") is None or os.geteuid() != 0:
        return False
    return subprocess.run(["chattr", flag, str(path)], capture_output=True).returncode == 0


def unreplaceable(tmp_path: Path, case: Case) -> None:
    """A file held open or immutable in the old folder, and an immutable folder: never a mixed folder."""
    ws = workspace(tmp_path / "ws")
    assert invoke(["run", ws.tape, "-a", ws.toml, "--out", ws.out, "--label", "old"])[0] == 0
    smaller = ws.folder / "smaller.csv"
    smaller.write_text("\n".join(TAPE[:13]) + "\n", encoding="utf-8")
    new_run = ["run", smaller, "-a", ws.toml, "--out", ws.out, "--label", "new"]
    # held open by another program: the folder is swapped around it
    with (ws.out / "reserve.xlsx").open("rb"):
        code, output = invoke(new_run)
    assert code == 0, output
    assert json.loads((ws.out / "run.json").read_text())["rows"]["read"] == 12
    if not _chattr("+i", ws.out / "loans.csv"):
        pytest.skip("chattr +i needs root and a file system that supports it")
    try:
        # an immutable file in the old folder: the new run is complete; the old one is kept aside
        code, output = invoke(["run", ws.tape, "-a", ws.toml, "--out", ws.out, "--label", "third"])
        assert code == case.exit, output
        assert json.loads((ws.out / "run.json").read_text())["rows"]["read"] == 24
        assert len(pd.read_csv(ws.out / "loans.csv")) == 24
        assert "kept in" in output and ".out.backup-" in output
    finally:
        for p in ws.folder.rglob("loans.csv"):
            _chattr("-i", p)
    before = _digests(ws.out)
    assert _chattr("+i", ws.out)
    try:
        # an immutable folder cannot be moved: an error, and the previous run untouched
        code, output = invoke(new_run)
        assert code == 1 and "cannot write the outputs" in output, output
        assert _digests(ws.out) == before
        assert not [p for p in ws.folder.iterdir() if ".partial-" in p.name]
    finally:
        _chattr("-i", ws.out)


def another_writer(tmp_path: Path, case: Case) -> None:
    """A second run on the same --out while one is writing: refused, nothing touched."""
    ws = workspace(tmp_path / "ws")
    with swap.FolderLock(ws.out.absolute()):
        code, output = invoke(["run", ws.tape, "-a", ws.toml, "--out", ws.out])
    assert code == case.exit and all(w in " ".join(output.split()) for w in case.words), output
    assert not ws.out.exists()


def saved_in(encoding: str) -> Callable[[Path, Case], None]:
    """The tape saved in another encoding than UTF-8, a segment name with an accent on data row 2."""
    def case_run(tmp_path: Path, case: Case) -> None:
        ws = workspace(tmp_path / "ws")
        lines = ws.tape.read_text(encoding="utf-8").splitlines()
        lines = cell(lines, 2, "segment", "caf\u00e9")
        ws.tape.write_bytes(("\n".join(lines) + "\n").encode(encoding))
        code, output = invoke(["check", ws.tape, "-a", ws.toml])
        text = " ".join(output.split())
        assert code == case.exit and all(w in text for w in case.words), output
        assert "Traceback" not in output
    return case_run


_INTERRUPTED_AT_START = textwrap.dedent(
    """
    import os, signal, sys

    signal.signal(signal.SIGINT, signal.default_int_handler)  # as at a terminal (see sigint_mid_swap)

    class InterruptWhenLoading:
        # SIGINT as the command line starts loading its modules: at a known point, where a
        # fixed delay raced a start-up that now takes a few tens of milliseconds
        def find_spec(self, name, path=None, target=None):
            if name == "allowance.cli":
                sys.meta_path.remove(self)
                os.kill(os.getpid(), signal.SIGINT)
            return None

    sys.meta_path.insert(0, InterruptWhenLoading())
    from allowance.console import main
    sys.argv = ["allowance", "version"]
    main()
    """
)


def _wait_until_loading(child: subprocess.Popen, library: str, limit: float = 120.0) -> bool:
    """Wait until the child maps ``library`` (Linux /proc); False if it ended or cannot be seen."""
    maps = Path(f"/proc/{child.pid}/maps")
    deadline = time.monotonic() + limit
    while time.monotonic() < deadline and child.poll() is None:
        try:
            if library in maps.read_text():
                return True
        except OSError:
            return False
        time.sleep(0.005)
    return False


def ctrl_c_at_start(tmp_path: Path, case: Case) -> None:
    """Ctrl-C while the libraries load: one line, exit 130, no traceback."""
    child = subprocess.run([PYTHON, "-c", _INTERRUPTED_AT_START], capture_output=True, text=True, env=_env(),
                           timeout=300)
    assert child.returncode == case.exit and "Traceback" not in child.stderr, child.stderr
    assert all(word in child.stderr for word in case.words) and child.stderr.strip().count("\n") == 0
    assert child.stdout == ""  # interrupted before 'version' printed anything
    # and a real signal from outside, through python -m allowance. The signal is sent once the
    # child is inside our code (numpy's extension is mapped: the command line is importing its
    # libraries); a fixed delay raced the interpreter's own start-up on a loaded machine, where
    # no program can catch a Ctrl-C.
    for extra in (0.0, 0.3):
        ws = workspace(tmp_path / f"ws-{extra}")  # 'check' loads numpy, pandas and numba; 'version' does not
        started = subprocess.Popen([PYTHON, "-m", "allowance", "check", str(ws.tape), "-a", str(ws.toml)],
                                   stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=_env())
        if not _wait_until_loading(started, "_multiarray_umath"):
            started.communicate(timeout=120)
            continue  # finished (or no /proc) before the libraries were seen loading
        time.sleep(extra)
        started.send_signal(signal.SIGINT)
        _, err = started.communicate(timeout=120)
        if started.returncode == 0:
            continue  # the command finished before the signal: nothing to interrupt
        assert started.returncode == case.exit and "Traceback" not in err, err


def _world_readable_copy(tmp_path: Path) -> tuple[Path, Path]:
    """A workspace another user can read and write (pytest's own temporary folders are private)."""
    shared = Path(tempfile.mkdtemp(prefix="allowance-other-user-"))
    os.chmod(shared, 0o777)
    ws = workspace(shared / "ws")
    for p in [shared, *shared.rglob("*")]:
        os.chmod(p, 0o777 if p.is_dir() else 0o666)
    return shared, ws.folder


def no_writable_home(tmp_path: Path, case: Case) -> None:
    """Every command for a user whose home does not exist and who may not write the install."""
    if os.geteuid() != 0 or shutil.which("setpriv") is None:
        env = _env(HOME="/nonexistent/home", NUMBA_CACHE_DIR="/proc/no-cache-here", XDG_CACHE_HOME="")
        prefix: list[str] = []
    else:  # as 'nobody': the checkout and the virtual environment are read-only to it
        env = {"PATH": os.environ.get("PATH", "/usr/bin:/bin"), "HOME": "/nonexistent"}
        prefix = ["setpriv", "--reuid=65534", "--regid=65534", "--clear-groups"]
    shared, folder = _world_readable_copy(tmp_path)
    try:
        # the two ends: a command that loads nothing, and one that compiles every kernel and writes
        for args, words in ((["version"], []),
                            (["run", "tape.csv", "-a", "assumptions.toml", "--out", "out", "--no-sensitivities"],
                             ["wrote"])):
            done = subprocess.run([*prefix, PYTHON, "-m", "allowance", *args], cwd=folder, env=env,
                                  capture_output=True, text=True, timeout=900)
            assert done.returncode == case.exit, done.stderr[-3000:]
            assert "Traceback" not in done.stderr and all(w in done.stdout for w in words), done.stdout
    finally:
        shutil.rmtree(shared, ignore_errors=True)


_RERUNS: dict[str, list[dict[str, bytes]]] = {}


def _two_runs(tmp_path: Path) -> list[dict[str, bytes]]:
    """Every output file of two runs of the same inputs with SOURCE_DATE_EPOCH set, a second
    apart (a writer that used the clock would differ); made once for the rows that compare them."""
    if "runs" not in _RERUNS:
        ws = workspace(tmp_path / "ws")
        runs = []
        for i in range(2):
            if i:
                time.sleep(1.1)
            code, output = invoke(["run", ws.tape, "-a", ws.toml, "--out", ws.out], env={"SOURCE_DATE_EPOCH": EPOCH})
            assert code == 0, output
            runs.append({p.name: p.read_bytes() for p in ws.out.iterdir() if p.is_file()})
        _RERUNS["runs"] = runs
    return _RERUNS["runs"]


def reproducible(tmp_path: Path, case: Case) -> None:
    """Same inputs, SOURCE_DATE_EPOCH set: loans.csv and run.json byte-identical on a rerun."""
    runs = _two_runs(tmp_path)
    for name in ("loans.csv", "run.json", "rejected.csv", "warnings.csv"):
        assert runs[0][name] == runs[1][name], name
    record = json.loads(runs[0]["run.json"])
    assert record["started"] == record["timestamp"] == "2026-10-01T00:00:00+00:00"


def reproducible_workbook(tmp_path: Path, case: Case) -> None:
    runs = _two_runs(tmp_path)
    for name in ("reserve.xlsx", "summary.xlsx"):
        assert runs[0][name] == runs[1][name], name


def run_record_pins(tmp_path: Path, case: Case) -> None:
    """run.json pins Python and every dependency, the arguments, the prior run.json's hash, started."""
    ws = workspace(tmp_path / "ws")
    prior = ws.folder / "prior"
    assert invoke(["run", ws.tape, "-a", ws.toml, "--out", prior])[0] == 0
    code, output = invoke(["run", ws.tape, "-a", ws.toml, "--prior", prior, "--out", ws.out, "--label", "q3"])
    assert code == case.exit, output
    record = json.loads((ws.out / "run.json").read_text())
    env = record["environment"]
    assert env["python"] == ".".join(map(str, sys.version_info[:3]))
    for package in ("numpy", "pandas", "pyarrow", "pydantic", "numba", "llvmlite", "openpyxl", "typer"):
        assert package in env["packages"], package
    import numpy

    assert env["packages"]["numpy"] == numpy.__version__
    arguments = record["arguments"]
    assert arguments["command"] == "run" and arguments["label"] == "q3" and arguments["prior"] == str(prior)
    prior_json = hashlib.sha256((prior / "run.json").read_bytes()).hexdigest()
    assert {"role": "prior", "path": str(prior / "run.json"), "sha256": prior_json,
            "bytes": (prior / "run.json").stat().st_size} in record["inputs"]
    assert record["started"] and record["started"] <= record["timestamp"]


def wide_tape(tmp_path: Path, case: Case) -> None:
    """2,000 extra columns are carried through, every one to loans.csv.

    Timing lives in ``tests/bench/bench_wide_tape.py`` (10,000 columns, seconds per phase); this
    row proves the path works end to end: at the issue's cost of 32 ms a column it would take a
    minute, now seconds.
    """
    extra = 2_000
    lines = [TAPE[0] + "," + ",".join(f"x{i}" for i in range(extra))]
    lines += [line + "," + ",".join(str(i) for i in range(extra)) for line in TAPE[1:]]
    ws = workspace(tmp_path / "ws", lines)
    code, output = invoke(["run", ws.tape, "-a", ws.toml, "--out", ws.out])
    assert code == case.exit, output
    header = (ws.out / "loans.csv").open().readline().rstrip("\n").split(",")
    assert header[-1].strip('"') == f"x{extra - 1}" and len(header) > extra


def segment_criteria(tmp_path: Path, case: Case) -> None:
    """Segments named <auto, =cre, >mortgage: the recalculated figures equal those of plain names."""
    if shutil.which("soffice") is None:
        pytest.skip("LibreOffice (soffice) is not installed")
    names = {"auto": "<auto", "cards": "<cards", "cre": "=cre", "heloc": "=heloc", "mortgage": ">mortgage",
             "personal": ">personal"}  # the same order as the plain names: the layout does not move
    renamed_toml = BASE_TOML
    for plain, odd in names.items():
        renamed_toml = renamed_toml.replace(f"[segments.{plain}]", f'[segments."{odd}"]').replace(
            f"[segments.{plain}.", f'[segments."{odd}".')
    renamed_tape = [TAPE[0]]
    for line in TAPE[1:]:
        cells = line.split(",")
        cells[HEADER.index("segment")] = names[cells[HEADER.index("segment")]]
        renamed_tape.append(",".join(cells))
    books = {}
    for label, tape, toml in (("plain", TAPE, BASE_TOML), ("odd", renamed_tape, renamed_toml)):
        ws = workspace(tmp_path / label, tape, toml)
        code, output = invoke(["run", ws.tape, "-a", ws.toml, "--out", ws.out])
        assert code == case.exit, output
        books[label] = shutil.copyfile(ws.out / "reserve.xlsx", tmp_path / f"{label}.xlsx")
    # a canary whose cached value is wrong proves LibreOffice recalculated (it keeps cached values
    # unless told otherwise); one LibreOffice start converts the three books
    canary = tmp_path / "canary.xlsx"
    book = xlsxwriter.Workbook(str(canary))
    book.add_worksheet("S").write_formula("A1", "=1+1", None, 5)
    book.close()
    subprocess.run(["soffice", f"-env:UserInstallation={_recalculating_profile(tmp_path)}", "--headless",
                    "--convert-to", "xlsx", "--outdir", str(tmp_path / "recalc"), *map(str, books.values()), str(canary)],
                   check=True, capture_output=True, timeout=300)
    assert openpyxl.load_workbook(tmp_path / "recalc" / canary.name, data_only=True)["S"]["A1"].value == 2
    values = []
    for label in books:
        book = openpyxl.load_workbook(tmp_path / "recalc" / f"{label}.xlsx", data_only=True, read_only=True)
        values.append({(s.title, r, c): v for s in book.worksheets if s.title not in ("Run record", "Assumptions")
                       for r, row in enumerate(s.iter_rows(values_only=True)) for c, v in enumerate(row)
                       if isinstance(v, (int, float)) and not isinstance(v, bool)})
    differ = [(k, values[0][k], values[1].get(k)) for k in values[0] if values[1].get(k) != pytest.approx(values[0][k])]
    assert not differ, differ[:10]


def no_cache_true_left(tmp_path: Path, case: Case) -> None:
    """Every compiled kernel caches through allowance.jit (its folder: allowance.jitcache), so no module can fail a user without a home."""
    offenders = [str(p.relative_to(REPO)) for p in (REPO / "allowance").rglob("*.py")
                 if "cache=True" in p.read_text(encoding="utf-8") and p.name not in ("jit.py", "jitcache.py")]
    assert not offenders, offenders


def readme_documents(words: tuple[str, ...]) -> Callable[[Path, Case], None]:
    def check(tmp_path: Path, case: Case) -> None:
        text = " ".join((REPO / "README.md").read_text(encoding="utf-8").split())
        for word in words:
            assert word in text, word
    return check


# --------------------------------------------------------------------------------------


_SLOW = (pytest.mark.slow,)
_RESULT_NAMES = ("stage", "ead", "pd_12m", "lgd", "stage_reason", "horizon_months", "ecl_cecl", "ecl_ifrs9")
_DEFAULT_DPD = str(2**63)

CASES: list[Case] = [
    # ---- lose data or publish a wrong number ------------------------------------------
    Case("output swap: SIGKILL mid-swap", "a run killed at each step of replacing --out", "custom", 0,
         (), custom=kill_mid_swap, marks=_SLOW),
    Case("output swap: Ctrl-C mid-swap", "SIGINT while the folders are swapped", "custom", 130,
         ("interrupted",), custom=sigint_mid_swap, marks=_SLOW),
    Case("output swap: file that cannot be replaced", "reserve.xlsx held open; loans.csv or the folder immutable",
         "custom", 0, (), custom=unreplaceable, marks=_SLOW),
    Case("output swap: leftover partial folders", ".out.partial-* and .out.backup-* from killed runs",
         "custom", 0, (), custom=partial_leftovers, marks=_SLOW),
    Case("output swap: two runs on one --out", "a second run while the first holds the folder", "custom", 1,
         ("another run is writing this output folder",), custom=another_writer),
    Case("cents overflow: balance 1e20", "balance 1e20 on one row", "run", 0,
         ("balance '1e20' is outside its range", "at most 10,000,000,000,000"), (24, 23, 1),
         tape=lambda t: cell(t, 3, "balance", "1e20"), then=rejected_reason("out_of_range")),
    Case("cents overflow: balance 9.3e16", "balance 9.3e16 (beyond int64 cents)", "check", 1,
         ("balance '9.3e16'",), (24, 23, 1), tape=lambda t: cell(t, 3, "balance", "9.3e16")),
    Case("cents overflow: balance 1e308", "balance 1e308", "check", 1, ("balance '1e308'",), (24, 23, 1),
         tape=lambda t: cell(t, 3, "balance", "1e308")),
    Case("days past due 2^63", f"days_past_due {_DEFAULT_DPD}", "run", 0,
         (f"days_past_due '{_DEFAULT_DPD}' is outside its range", "at most 36,525"), (24, 23, 1),
         tape=lambda t: cell(t, 5, "days_past_due", _DEFAULT_DPD), marks=_SLOW),
    Case("unterminated quote", "a quote opened on line 6 and never closed", "check", 1,
         ("row 6", "a quoted value is never closed", "lines 6 to 25"),
         tape=lambda t: [*t[:5], t[5].replace(",", ',"', 1), *t[6:]]),
    Case("quote closed lines later", "a quote opened on line 6 closes on line 13, inside a free-text column",
         "run", 0, ("line breaks inside quoted values",), (17, 16, 1),
         tape=lambda t: [*t[:5], quote_last_field(t[5]), *t[6:12], t[12] + '"', *t[13:]],
         then=each(rejected_reason("records_in_value"), lines_reconciled(7)), marks=_SLOW),
    *[
        Case(f"tape column named like an output: {name}", f"an extra column '{name}' on the tape", "run", 0,
             (f"carried through as 'tape_{name}'",), (24, 24, 0), tape=column_named(name),
             then=computed_column_kept(name), marks=() if name == "stage" else _SLOW)
        for name in _RESULT_NAMES
    ],
    Case("segment names starting with <, >, =", "segments '<auto', '=cre', '>mortgage'", "custom", 0, (),
         custom=segment_criteria, marks=_SLOW),
    Case("overlay value NaN", "an overlay with value = nan", "check", 1,
         ("overlays[1].value", "must be a finite number"), toml=overlay("amount", "nan")),
    Case("overlay value inf", "an overlay with value = inf", "check", 1,
         ("overlays[1].value", "must be a finite number"), toml=overlay("percent", "inf")),
    Case("overlay value 1e300", "an amount overlay of 1e300", "check", 1,
         ("overlays[1]", "at most 10,000,000,000,000"), toml=overlay("amount", "1e300")),
    Case("overlay percent 1e300", "a percent overlay of 1e300", "check", 1,
         ("overlays[1]", "from -1", "to 10"), toml=overlay("percent", "1e300")),
    Case("blank overlay rationale", 'rationale = "   "', "check", 1,
         ("overlays[1].rationale", "must not be empty or blank"), toml=overlay("percent", "0.1", "   ")),
    Case("amount overlay far above exposure", "an amount overlay of 50,000,000 on four auto loans", "run", 0,
         ("above their exposure at default",), (24, 24, 0), toml=overlay("amount", "50000000.0"), marks=_SLOW),
    Case("ledger_tolerance = inf", "[run] ledger_tolerance = inf", "check", 1,
         ("run.ledger_tolerance", "must be a finite number"), toml=toml_set("currency", '"USD"\nledger_tolerance = inf')),
    Case("as_of far in the future", "as_of = 2099-12-31", "run", 1,
         ("the as-of date 2099-12-31 leaves no loan on the book",), toml=toml_set("as_of", "2099-12-31"),
         then=no_output),
    Case("as_of before every origination", "as_of = 1990-01-31", "run", 1,
         ("the as-of date 1990-01-31 leaves no loan on the book",), toml=toml_set("as_of", "1990-01-31"),
         then=no_output),
    Case("every row rejected", "every balance is -1", "run", 1, ("every one of the 24 rows was rejected", "out_of_range"),
         tape=lambda t: [t[0], *(cell([t[0], line], 1, "balance", "-1")[1] for line in t[1:])], then=no_output),
    Case("HELOC without a credit limit", "repayment heloc, credit_limit blank", "check", 1,
         ("credit_limit is blank but required for HELOCs",), (24, 23, 1), tape=heloc("", "120"), toml=heloc_segment),
    Case("HELOC without a draw period", "repayment heloc, draw_period_months blank", "check", 1,
         ("draw_period_months is blank but required for HELOCs",), (24, 23, 1), tape=heloc("150000", ""),
         toml=heloc_segment),
    Case("HELOC draw period to maturity", "a 300-month draw period on a 300-month HELOC", "check", 1,
         ("draw_period_months 300 reaches the maturity 2036-07-01", "no repayment period"), (24, 23, 1),
         tape=heloc("150000", "300"), toml=heloc_segment),
    Case("HELOC draw period not a whole number", "draw_period_months 12.5", "check", 1,
         ("draw_period_months",), (24, 23, 1), tape=heloc("150000", "12.5"), toml=heloc_segment),
    Case("HELOC segment without a CCF", "a HELOC in its draw period; [segments.heloc] states no ccf", "check", 1,
         ("key segments.heloc.ccf", "holds 1 row(s) with undrawn amounts (tape lines 14)"),
         tape=heloc("150000", "120")),
    Case("tape separated by semicolons", "the tape saved with ';' between values (a decimal-comma locale)", "check",
         1, ("the header 'loan_id;segment;repayment", "joined by semicolons", "not commas", "comma delimited"),
         tape=lambda t: [line.replace(",", ";") for line in t], then=no_output),
    Case("tape separated by tabs", "the tape saved with tabs between values", "run", 1,
         ("joined by tabs", "not commas"), tape=lambda t: [line.replace(",", "\t") for line in t], then=no_output),
    Case("tape saved as Latin-1", "a CSV saved in Windows-1252 / Latin-1 with an accented segment name", "custom",
         1, ("is not UTF-8 text", "(line 3, column segment, 'é' in Windows-1252)", "save the file as UTF-8 CSV"),
         custom=saved_in("latin-1")),
    Case("tape saved as UTF-16", "a spreadsheet's 'Unicode text' export (UTF-16 with its byte-order mark)", "custom",
         1, ("is UTF-16 text, not UTF-8", "save the file as UTF-8 CSV"), custom=saved_in("utf-16")),
    Case("a tape given as a URL", "the tape as s3://bucket/q3/tape.parquet (parsed as a path: s3:/bucket/...)", "run", 1,
         ("s3://bucket/q3/tape.parquet", "a URL", "file system"),
         args=lambda ws: ["run", "s3://bucket/q3/tape.parquet", "-a", ws.toml, "--out", ws.out], then=no_output),
    Case("a prior run given as a URL", "--prior s3://bucket/q2-out", "run", 1,
         ("s3://bucket/q2-out", "the prior run folder was not found", "a URL"),
         args=lambda ws: ["run", ws.tape, "-a", ws.toml, "--prior", "s3://bucket/q2-out", "--out", ws.out],
         then=no_output),
    Case("--out given as a URL", "--out s3://bucket/q3-out (it would be a local folder 's3:')", "run", 2,
         ("--out", "s3://bucket/q3-out", "is a URL"),
         args=lambda ws: ["run", ws.tape, "-a", ws.toml, "--out", "s3://bucket/q3-out"],
         then=lambda ws, output: _nothing_named_like_a_scheme(ws)),
    Case("a scheduler address that is not one", "--engine dask --scheduler nonsense (no port)", "run", 2,
         ("--scheduler", "no port", "tcp://10.0.0.5:8786"),
         args=lambda ws: ["run", ws.tape, "-a", ws.toml, "--engine", "dask", "--scheduler", "nonsense", "--out", ws.out],
         then=no_output, marks=(pytest.mark.skipif(importlib.util.find_spec("distributed") is None,
                                                   reason="the dask extra is not installed"),)),
    Case("--charge-offs without --prior", "--charge-offs given, no --prior", "run", 2,
         ("--charge-offs", "needs --prior"),
         args=lambda ws: ["run", ws.tape, "-a", ws.toml, "--charge-offs", charge_offs(ws), "--out", ws.out]),
    Case("--charge-offs missing, without --prior", "--charge-offs naming a missing file, no --prior", "run", 2,
         ("needs --prior",),
         args=lambda ws: ["run", ws.tape, "-a", ws.toml, "--charge-offs", ws.folder / "none.csv", "--out", ws.out]),
    Case("--out ''", "--out ''", "run", 2, ("--out", "current folder"),
         args=lambda ws: ["run", ws.tape, "-a", ws.toml, "--out", ""]),
    Case("--out holding the input tape", "--out is the folder of the tape", "run", 2,
         ("--out", "the input file 'tape.csv' is in the output folder"),
         args=lambda ws: ["run", ws.tape, "-a", ws.toml, "--out", ws.folder]),
    Case("--prior is --out", "the prior run's folder given as --out", "run", 2, ("--out", "'loans.csv' is in the output folder"),
         args=lambda ws: (invoke(["run", ws.tape, "-a", ws.toml, "--out", ws.out]),
                          ["run", ws.tape, "-a", ws.toml, "--prior", ws.out, "--out", ws.out])[1]),
    Case("XML-illegal characters", "loan_id and a free-text column with U+FFFE, U+FFFF and control characters",
         "run", 0, (), (24, 24, 0),
         tape=lambda t: [t[0] + ",note"] + [line + ",a\x01b\ufffec\uffffd\x1f" for line in t[1:]],
         then=workbook_opens, marks=_SLOW),
    Case("truncation inside an escape", "a free-text cell of 40,000 '&'", "run", 0, (), (24, 24, 0),
         tape=lambda t: [t[0] + ",note"] + [line + "," + "&" * 40_000 for line in t[1:]],
         then=workbook_opens, marks=_SLOW),
    # ---- tracebacks ---------------------------------------------------------------------
    Case("scenario z NaN", "z = [nan] in a scenario", "check", 1, ("scenarios.base.z", "finite number"),
         toml=lambda s: s.replace("pd_multiplier = [1.0, 1.0, 1.0]", "z = [nan]", 1)),
    Case("scenario z -inf", "z = [-inf] in a scenario", "check", 1, ("scenarios.base.z", "finite number"),
         toml=lambda s: s.replace("pd_multiplier = [1.0, 1.0, 1.0]", "z = [0.5, -inf]", 1)),
    Case("pd_multiplier inf", "pd_multiplier = [inf]", "check", 1, ("scenarios.base.pd_multiplier", "finite number"),
         toml=lambda s: s.replace("pd_multiplier = [1.0, 1.0, 1.0]", "pd_multiplier = [inf]", 1)),
    Case("-a /dev/zero", "the assumptions path is /dev/zero", "check", 1, ("/dev/zero", "larger than 16 MiB"),
         args=lambda ws: ["check", ws.tape, "-a", "/dev/zero"]),
    Case("behavioural_life_months 1e8", "behavioural_life_months = 100000000", "check", 1,
         ("segments.cards.behavioural_life_months", "at most 1200"),
         toml=toml_set("behavioural_life_months", "100000000")),
    Case("--prior run.json of the wrong shape", '{"frameworks": "ifrs9"}', "run", 1,
         ("run.json", "not a run record", "frameworks"), args=prior_folder('{"frameworks": "ifrs9"}'), marks=_SLOW),
    Case("--prior run.json nested 100,000 levels", "[[[...]]] 100,000 deep", "run", 1,
         ("run.json", "nested too deeply"), args=prior_folder("[" * 100_000 + "]" * 100_000), marks=_SLOW),
    Case("--prior run.json not JSON", "run.json holding text", "run", 1, ("run.json", "cannot be read as JSON"),
         args=prior_folder("not json"), marks=_SLOW),
    Case("Ctrl-C during start-up", "SIGINT as 'allowance version' loads the command line, and while 'allowance check' loads numpy", "custom", 130,
         ("interrupted",), custom=ctrl_c_at_start, marks=_SLOW),
    Case("no writable home, shared install", "version and run as 'nobody' with HOME=/nonexistent",
         "custom", 0, (), custom=no_writable_home, marks=_SLOW),
    Case("a kernel caching where a user may not write", "a module using numba.njit(cache=True)", "custom", 0, (),
         custom=no_cache_true_left),
    # ---- hostile workbooks --------------------------------------------------------------
    Case("ZIP bomb", "a 50 KiB workbook whose sheet expands to 50 MiB", "check", 1,
         ("xl/worksheets/sheet1.xml expands", "times", "ZIP bomb"), args=workbook_tape(zip_bomb), then=one_line_error),
    Case("workbook above the input cap", "a sheet that expands to 3 MiB with max_input_mb = 1", "check", 1,
         ("expands to", "above the 1 MiB input limit"), toml=toml_set("currency", '"USD"\nmax_input_mb = 1'),
         args=workbook_tape(big_workbook), then=one_line_error),
    Case("XML bomb", "a sheet declaring nested entities", "check", 1, ("XML bomb", "declares entities"),
         args=workbook_tape(xml_bomb), then=one_line_error),
    # ---- byte-identical reruns and the run record ----------------------------------------
    Case("reruns byte-identical", "the same inputs twice with SOURCE_DATE_EPOCH set", "custom", 0, (),
         custom=reproducible, marks=_SLOW),
    Case("workbook byte-identical", "reserve.xlsx of two runs with SOURCE_DATE_EPOCH set", "custom", 0, (),
         custom=reproducible_workbook, marks=_SLOW),
    Case("SOURCE_DATE_EPOCH malformed", "SOURCE_DATE_EPOCH=soon", "custom", 1, ("SOURCE_DATE_EPOCH",),
         custom=lambda tmp, case: _malformed_epoch(tmp, case)),
    Case("run record pins the run", "a run with --prior and --label", "custom", 0, (), custom=run_record_pins, marks=_SLOW),
    # ---- commitments and guarantees ----------------------------------------------------
    Case("facility_type not a known kind", "facility_type overdraft", "check", 1,
         ("facility_type 'overdraft' is not one of funded, commitment, guarantee",), (24, 23, 1),
         tape=commitment(5, "overdraft", "")),
    Case("commitment carries a balance", "facility_type commitment with a drawn balance", "check", 1,
         ("commitment_with_balance", "a commitment or guarantee carries no drawn balance"), (24, 23, 1),
         tape=commitment(5, "commitment", "2028-09-30")),
    Case("commitment without an end date", "facility_type guarantee, commitment_end_date blank", "check", 1,
         ("commitment_end_date is blank but required for a commitment or guarantee",), (24, 23, 1),
         tape=commitment(5, "guarantee", "", balance="0")),
    Case("commitment already ended", "commitment_end_date before the as-of date", "check", 1,
         ("commitment_end_date 2026-06-30 is on or before the as-of date 2026-09-30",), (24, 23, 1),
         tape=commitment(5, "commitment", "2026-06-30", balance="0")),
    Case("commitment end date not a date", "commitment_end_date 2027-13-40", "check", 1,
         ("commitment_end_date '2027-13-40' is not a date",), (24, 23, 1),
         tape=commitment(5, "commitment", "2027-13-40", balance="0")),
    Case("undrawn amounts, cancellable unstated", "cards segment without unconditionally_cancellable", "check", 1,
         ("segments.cards.unconditionally_cancellable", "holds 4 row(s) with undrawn amounts", "no default"),
         toml=toml_drop("unconditionally_cancellable")),
    Case("undrawn amounts, CCF unstated", "cards segment without ccf", "check", 1,
         ("segments.cards.ccf", "states no ccf"), toml=toml_drop("ccf")),
    Case("ccf and ccf_by_dpd both", "a segment states both", "check", 1,
         ("segments.cards", "give ccf or ccf_by_dpd, not both"), toml=toml_set("ccf", '0.3\nccf_by_dpd = { "0" = 0.3 }')),
    Case("ccf_by_dpd without a 0 bucket", 'ccf_by_dpd = { "30" = 0.5 }', "check", 1,
         ("segments.cards", "starting with \"0\""), toml=lambda text: re.sub(r"(?m)^ccf = .*$", 'ccf_by_dpd = { "30" = 0.5 }', text, count=1)),
    Case("scenario named like a loan column", "[scenarios.undrawn]", "check", 1,
         ("scenario name 'undrawn' is reserved",),
         toml=lambda text: text.replace("[scenarios.downside]", "[scenarios.undrawn]")),
    # ---- smaller ------------------------------------------------------------------------
    Case("message quotes the cell as written", "balance -100.50", "check", 1,
         ("balance '-100.50' is outside its range",), (24, 23, 1), tape=lambda t: cell(t, 2, "balance", "-100.50")),
    Case("rejected.csv: neutralised cells documented", "README on rejected.csv", "custom", 0, (),
         custom=readme_documents(("rejected.csv", "apostrophe"))),
    Case("IFRS 9 casing", "prior_stage 7 (its meaning starts 'IFRS 9')", "check", 1,
         ("(IFRS 9 stage at the previous reporting date",), (24, 23, 1), tape=lambda t: cell(t, 2, "prior_stage", "7")),
    Case("SIGINT exits 130 with a message", "Ctrl-C during a run", "custom", 130, ("interrupted",),
         custom=lambda tmp, case: _sigint_during_run(tmp, case), marks=_SLOW),
    Case("very wide tape", "24 loans with 2,000 extra columns (10,000 in tests/bench/bench_wide_tape.py)", "custom", 0,
         (), custom=wide_tape, marks=_SLOW),
]


def _malformed_epoch(tmp_path: Path, case: Case) -> None:
    ws = workspace(tmp_path / "ws")
    code, output = invoke(["run", ws.tape, "-a", ws.toml, "--out", ws.out], env={"SOURCE_DATE_EPOCH": "soon"})
    assert code == case.exit and all(w in output for w in case.words), output
    assert not ws.out.exists()


def _sigint_during_run(tmp_path: Path, case: Case) -> None:
    ws = workspace(tmp_path / "ws", copies(TAPE, 2000))  # 48,000 loans: seconds of work to interrupt
    child = subprocess.Popen([PYTHON, "-m", "allowance", "run", str(ws.tape), "-a", str(ws.toml), "--out", str(ws.out)],
                             cwd=ws.folder, env=_env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    # a run, not the interpreter's start-up (no program can catch a signal there): once the
    # libraries are loading, give it a moment to be reading or computing
    if _wait_until_loading(child, "_multiarray_umath"):
        # 1.5 s let a quick machine finish the run first (the test then skipped): numpy is
        # loaded, so any moment from here is one the program catches
        time.sleep(0.5)
    child.send_signal(signal.SIGINT)
    _, err = child.communicate(timeout=300)
    if child.returncode == 0:
        pytest.skip("the run finished before the signal")
    assert child.returncode == case.exit and "Traceback" not in err, err
    assert all(word in err for word in case.words) and err.strip().count("\n") == 0, err


@pytest.mark.parametrize("case", [
    pytest.param(c, id=c.name, marks=c.marks) for c in CASES
])
def test_bad_input(case: Case, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv("SOURCE_DATE_EPOCH", raising=False)
    run_case(tmp_path, case)


def test_every_class_is_listed_once():
    names = [c.name for c in CASES]
    assert len(names) == len(set(names))
    assert all(c.exit in (0, 1, 2, 130) for c in CASES)
