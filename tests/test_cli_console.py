"""The command line as a new user meets it: help, completion, progress, --quiet / --verbose /
--json, check --out, roll-rates --segment, the demo's closing hint, the what-if line.

Runs use the bad-input suite's fixed 24-loan book and mini assumptions (a run takes about a
second in-process); the demo is not rerun (its console output is kept by the ``demo_out``
fixture).
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

import allowance
from allowance import api
from allowance.cli import _demo_hint, _shown_path, app
from allowance.progress import Display
from tests import books
from tests.test_bad_inputs import BASE_TOML, TAPE, cell, workspace

runner = CliRunner()


def invoke(*args: object, **kwargs):
    return runner.invoke(app, [str(a) for a in args], catch_exceptions=False, **kwargs)


# ---- help and completion ---------------------------------------------------------------


def test_help_shows_the_usual_labels():
    for command in ("run", "check", "calibrate", "schedule", "roll-rates", "backtest", "compare", "init", "demo"):
        shown = invoke(command, "--help")
        assert shown.exit_code == 0, shown.output
        for odd in ("{", "<path>", "<bool>", "<list[", "<float>", "<str>", "<int>"):
            assert odd not in shown.output, (command, odd, shown.output)
    text = invoke("run", "--help", env={"COLUMNS": "200"}).output
    assert "TAPE" in text and "FILE" in text and "DIR" in text and "--quiet" in text and "--json" in text
    assert "[run] ledger_balance" in text  # square brackets are text, not markup


def test_shell_completion_completes_commands_and_options(monkeypatch):
    # the shell named, not detected: with shellingham installed Typer finds the shell among the
    # process's ancestors, and a test run with no shell above it (setsid, a scheduler) has none
    monkeypatch.setenv("_TYPER_COMPLETE_TEST_DISABLE_SHELL_DETECTION", "1")
    script = runner.invoke(app, ["--show-completion", "bash"], prog_name="allowance")
    assert script.exit_code == 0 and "complete" in script.output and "allowance" in script.output
    # what the shell asks for at 'allowance ro<TAB>' and 'allowance run --ov<TAB>' (Click's protocol)
    for words, cword, expected in (("allowance ro", "1", "roll-rates"), ("allowance run --ov", "2", "--overlay")):
        done = runner.invoke(app, [], prog_name="allowance",
                             env={"_ALLOWANCE_COMPLETE": "complete_bash", "COMP_WORDS": words, "COMP_CWORD": cword})
        assert expected in done.output, done.output


def test_a_usage_error_off_a_terminal_is_plain_lines():
    done = invoke("run", "tape.csv")
    assert done.exit_code == 2
    assert "Missing option" in done.output and "╭" not in done.output


# ---- progress ------------------------------------------------------------------------


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_shows_on_a_terminal_and_nothing_elsewhere():
    screen = _Terminal()
    with Display(stream=screen) as shown:
        for done in range(0, 101, 20):
            shown("loans", done, 100)
        shown("write", 0, 1)
    assert shown.enabled and shown.seen == ["loans", "write"]
    assert "computing the allowance" in screen.getvalue()
    piped = io.StringIO()
    with Display(stream=piped) as quiet:
        quiet("loans", 1, 2)
    assert not quiet.enabled and piped.getvalue() == ""


# ---- check --out, --quiet, --json -----------------------------------------------------


def _bad_book(tmp_path: Path, bad_rows: int) -> Path:
    lines = TAPE
    for row in range(1, bad_rows + 1):
        lines = cell(lines, row, "balance", "-1")
    return workspace(tmp_path / "ws", lines).tape


def test_check_out_writes_every_rejected_row_and_lists_twenty(tmp_path):
    tape = _bad_book(tmp_path, 23)
    toml, out = tape.parent / "assumptions.toml", tmp_path / "check-out"
    done = invoke("check", tape, "-a", toml, "--out", out)
    assert done.exit_code == 1, done.output
    rejected = pd.read_csv(out / "rejected.csv")
    assert len(rejected) == 23 and set(rejected["reason_codes"]) == {"out_of_range"}
    assert (out / "warnings.csv").is_file()
    listed = [line for line in done.output.splitlines() if ": line " in line]
    assert len(listed) == 20 and "... and 3 more" in done.output
    assert str(out / "rejected.csv") in done.output
    # without --out the console says how to get the file, and nothing is written
    plain = invoke("check", tape, "-a", toml)
    assert plain.exit_code == 1 and "--out DIR" in plain.output


def test_check_quiet_and_json(tmp_path):
    tape = _bad_book(tmp_path, 2)
    toml = tape.parent / "assumptions.toml"
    quiet = invoke("check", tape, "-a", toml, "--quiet")
    assert quiet.exit_code == 1 and quiet.output == ""
    as_json = invoke("check", tape, "-a", toml, "--json")
    assert as_json.exit_code == 1
    summary = json.loads(as_json.output)
    assert summary["command"] == "check" and summary["ok"] is False
    assert summary["rows"] == {"read": 24, "accepted": 22, "rejected": 2}
    assert [r["line"] for r in summary["rejected"]] == [2, 3]
    both = invoke("check", tape, "-a", toml, "--quiet", "--json")
    assert both.exit_code == 2


# ---- run: --json, --verbose, the what-if line, the run record's arguments -------------


@pytest.fixture()
def book(tmp_path):
    ws = workspace(tmp_path / "ws")
    overlay = ws.folder / "downside.toml"
    overlay.write_text("[scenarios.base]\nweight = 0.0\n[scenarios.downside]\nweight = 1.0\n", encoding="utf-8")
    return ws, overlay


@pytest.mark.slow
def test_run_json_is_the_whole_summary(book):
    ws, _ = book
    done = invoke("run", ws.tape, "-a", ws.toml, "--out", ws.out, "--json", "--no-sensitivities")
    assert done.exit_code == 0, done.output
    summary = json.loads(done.output)  # nothing but the JSON on stdout
    record = json.loads((ws.out / "run.json").read_text())
    assert summary["command"] == "run" and summary["ok"] is True
    assert summary["allowance"] == record["total_allowance"] and summary["rows"]["read"] == 24
    assert sum(summary["by_stage"]["ifrs9"].values()) == pytest.approx(record["total_allowance"]["ifrs9"], abs=0.01)
    # the stages as the library's totals table has them over all segments (tested against a
    # sum over the loans in tests/test_library_api.py): labels, order and cents; CECL has no stages
    totals = allowance.run(ws.tape, ws.toml, sensitivities=False).totals
    over_all = totals[(totals["segment"] == "Total") & (totals["stage"] != "Total")]
    for fw in ("ifrs9", "cecl"):
        mine = over_all[over_all["framework"] == fw]
        assert summary["by_stage"][fw] == dict(zip(mine["stage"], mine["allowance"].astype(float)))
    assert summary["by_stage"]["ifrs9"] and summary["by_stage"]["cecl"] == {}
    assert "run.json" in summary["files"] and summary["out"] == str(ws.out)
    arguments = record["arguments"]
    assert arguments["command"] == "run" and arguments["as_json"] is True
    assert arguments["command_line"].startswith("allowance run ") and "--json" in arguments["command_line"]
    assert arguments["api"]["function"] == "allowance.run" and arguments["api"]["tape"] == str(ws.tape)


@pytest.mark.slow
def test_what_if_prints_base_to_what_if_and_verbose_says_more(book):
    ws, overlay = book
    done = invoke("run", ws.tape, "-a", ws.toml, "--overlay", overlay, "--out", ws.out, "--verbose",
                  "--no-sensitivities")
    assert done.exit_code == 0, done.output
    total = pd.read_csv(ws.out / "what_if.csv").query("view == 'total'").set_index("framework")
    for fw in ("ifrs9", "cecl"):
        base, after = total.loc[fw, "base"], total.loc[fw, "what_if"]
        assert f"what-if {fw.upper()}: base {base:,.2f} -> what-if {after:,.2f} ({after - base:+,.2f}" in done.output
    record = json.loads((ws.out / "run.json").read_text())
    assert f"sha256 {record['inputs'][0]['sha256']}" in done.output and f"wrote {ws.out / 'run.json'}" in done.output


def test_the_library_call_is_in_the_run_record(tmp_path):
    import tomllib

    tape = pd.read_csv(io.StringIO("\n".join(TAPE) + "\n"), dtype=str, keep_default_na=False)
    result = api.run(tape, tomllib.loads(BASE_TOML), sensitivities=False, label="notebook")
    call = result.record["arguments"]["api"]
    assert call["function"] == "allowance.run" and call["label"] == "notebook" and call["sensitivities"] is False
    assert call["tape"] == "a DataFrame of 24 rows and 27 columns" and call["assumptions"].startswith("a mapping")
    assert "command" not in result.record["arguments"]  # not run from the command line
    # the writers report each file to the progress display, the workbooks weighing more
    told = []
    files = result.write(tmp_path / "out", progress=lambda *step: told.append(step))
    assert {phase for phase, _, _ in told} == {"write"} and told[-1][1] == told[-1][2]
    assert [done for _, done, _ in told] == sorted(done for _, done, _ in told) and len(told) > len(files) // 2
    assert files.notes == ()


# ---- roll-rates --segment ------------------------------------------------------------


def test_roll_rates_for_a_segment_without_a_matrix_names_those_with_one():
    done = invoke("roll-rates", "-a", books.DEMO_ASSUMPTIONS, "--segment", "auto")
    assert done.exit_code == 0, done.output
    assert "segment 'auto' does not use a transition_matrix; these segments do: cards" in done.output
    cards = invoke("roll-rates", "-a", books.DEMO_ASSUMPTIONS, "--segment", "cards")
    assert cards.exit_code == 0 and "dpd_150_179" in cards.output
    unknown = invoke("roll-rates", "-a", books.DEMO_ASSUMPTIONS, "--segment", "boats")
    assert unknown.exit_code == 1 and "boats" in unknown.output


# ---- the demo's closing hint ------------------------------------------------------------


def test_demo_hint_paths_are_the_readme_s_in_a_clone(monkeypatch):
    repo = Path(__file__).resolve().parents[1]
    monkeypatch.chdir(repo)
    assert _shown_path(books.DEMO_TAPE) == "demo/tape_2026q3.csv"


def test_demo_hint_elsewhere_copies_the_inputs_beside_the_outputs(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    folder, manifest = api._demo_manifest()
    done = api.Demo(lender="x", prior=None, current=None, prior_out=tmp_path / "demo-out" / "prior_quarter",
                    out=tmp_path / "demo-out", what_if={"tape": folder / manifest["current"]["tape"],
                                                         "assumptions": folder / manifest["current"]["assumptions"],
                                                         "overlay": folder / manifest["what_if"]["overlay"]})
    hint = _demo_hint(done, Path("demo-out"))
    assert "site-packages" not in hint and str(folder) not in hint
    words = hint.split()
    for flag in ("run", "--assumptions", "--overlay"):
        typed = words[words.index(flag) + 1]
        assert typed.startswith("demo-out/inputs/") and Path(typed).is_file(), hint
    # the assumptions name a roll-rate matrix beside them: it was copied too
    assert (tmp_path / "demo-out" / "inputs" / "rolls_cards.csv").is_file()


@pytest.mark.slow
def test_the_demo_speaks_in_paths_the_user_can_type(demo_out):
    said = (demo_out.parent / "console.txt").read_text(encoding="utf-8")
    assert "site-packages" not in said and "_demo" not in said
    hint = said.strip().splitlines()[-1]
    assert hint.startswith("next: what does 100 % downside do?  allowance run ")
    for word in hint.split():
        if word.endswith((".csv", ".toml")):
            assert Path(word).is_file(), word


# ---- calibrate and compare speak JSON too ---------------------------------------------


@pytest.mark.slow
def test_calibrate_json_and_quiet(tmp_path):
    from tests.histories import constant_hazard_history, write_csv

    history = write_csv(constant_hazard_history(0.004, 0.02, vintages=2, per_vintage=15, months=30, seed=3),
                        tmp_path / "history.csv")
    done = invoke("calibrate", history, "--out", tmp_path / "cal", "--json")
    assert done.exit_code == 0, done.output
    summary = json.loads(done.output)
    assert summary["command"] == "calibrate" and summary["rows"]["read"] > 0
    assert [s["segment"] for s in summary["segments"]] == ["book"] and "assumptions.toml" in summary["files"]
    quiet = invoke("calibrate", history, "--out", tmp_path / "cal2", "--quiet")
    assert quiet.exit_code == 0 and quiet.output == "" and (tmp_path / "cal2" / "assumptions.toml").is_file()


@pytest.mark.slow
def test_compare_json_equals_the_run_records(demo_out):
    done = invoke("compare", demo_out / "prior_quarter", demo_out, "--json")
    assert done.exit_code == 0, done.output
    summary = json.loads(done.output)
    record = json.loads((demo_out / "run.json").read_text())
    for fw, lines in summary["movement"].items():
        by_line = {row["line"]: row["total"] for row in lines}
        assert by_line["closing"] == pytest.approx(record["total_allowance"][fw], abs=0.01)


_WRAPPED_INTERRUPT = """
import sys

class Interrupting:
    # a descriptor whose __set_name__ is interrupted, as pydantic's are when Ctrl-C lands
    # while the models' class statements run: Python wraps it in a RuntimeError (3.11)
    def __set_name__(self, owner, name):
        raise KeyboardInterrupt

class InterruptWhenLoading:
    def find_spec(self, name, path=None, target=None):
        if name == "allowance.cli":
            sys.meta_path.remove(self)
            type("Model", (), {"field": Interrupting()})
        return None

sys.meta_path.insert(0, InterruptWhenLoading())
from allowance.console import main
sys.argv = ["allowance", "version"]
main()
"""


def test_ctrl_c_wrapped_by_a_class_statement_is_still_an_interruption():
    """A KeyboardInterrupt that Python re-raises as another error (its cause) exits 130 with one line.

    Seen in CI: Ctrl-C while pydantic built a model gave "RuntimeError: Error calling
    __set_name__" and exit 1 with a traceback. Exit 130 for SIGINT is the shell's convention
    (128 + signal 2; common practice, no source).
    """
    import subprocess
    import sys

    child = subprocess.run([sys.executable, "-c", _WRAPPED_INTERRUPT], capture_output=True, text=True, timeout=120)
    assert child.returncode == 130, child.stderr
    assert "Traceback" not in child.stderr and child.stderr.strip().startswith("interrupted")
    assert child.stdout == ""


# ---- ending the process ------------------------------------------------------------------

_LEAVING = r"""
import atexit, sys, threading, time
from allowance.console import leave

class Torn:
    def __del__(self):  # runs only when the interpreter tears its modules down
        sys.stderr.write("torn down\n")

kept = Torn()
atexit.register(lambda: sys.stdout.write("atexit ran\n"))
sys.stdout.write("unflushed")  # no newline: still in the buffer
how = sys.argv[1]
if how == "thread":  # a thread Python would wait for
    threading.Thread(target=lambda: (time.sleep(0.3), sys.stdout.write("thread done\n"))).start()
if how == "python":  # Python's own exit, the contrast
    sys.exit(0)
leave({"zero": 0, "three": 3, "none": None, "text": "no such file", "thread": 4}[how])
"""


def _buffered() -> dict[str, str]:
    """The environment with Python's standard streams buffered, as they are by default."""
    import os

    return {k: v for k, v in os.environ.items() if k != "PYTHONUNBUFFERED"}


def _leaving(how: str):
    import subprocess
    import sys

    return subprocess.run([sys.executable, "-c", _LEAVING, how], capture_output=True, text=True, timeout=120,
                          env=_buffered())


@pytest.mark.parametrize("how, status", [("zero", 0), ("three", 3), ("none", 0), ("text", 1)])
def test_leave_exits_as_system_exit_would_without_the_teardown(how, status):
    """``leave(code)`` gives ``SystemExit(code)``'s status (None 0, a number itself, a text
    printed and 1: the Python documentation of SystemExit), flushes what was written, runs the
    atexit handlers, and skips the teardown (no module object is finalised)."""
    done = _leaving(how)
    assert done.returncode == status, done.stderr
    assert done.stdout == "unflushedatexit ran\n"
    assert "torn down" not in done.stderr
    assert done.stderr == ("no such file\n" if how == "text" else "")


def test_python_s_own_exit_tears_down():
    """The contrast that makes the test above meaningful: an ordinary exit finalises the object."""
    done = _leaving("python")
    assert done.returncode == 0 and "torn down" in done.stderr


def test_leave_takes_python_s_exit_under_a_profiler():
    """A profiler writes its report as Python exits (``python -m cProfile -m allowance ...``):
    under one the interpreter's own exit is taken, teardown included."""
    import subprocess
    import sys

    done = subprocess.run([sys.executable, "-c", "import cProfile, sys; sys.argv = ['x', 'three']; "
                           f"cProfile.run({_LEAVING!r})"], capture_output=True, text=True, timeout=120, env=_buffered())
    # cProfile.run takes the SystemExit itself to print its report (its status is then 0)
    assert done.returncode == 0, done.stderr
    assert "torn down" in done.stderr and "function calls" in done.stdout and "atexit ran" in done.stdout


def test_leave_takes_python_s_exit_while_a_thread_runs():
    """A thread Python waits for at exit is waited for: its output is there, with the status."""
    done = _leaving("thread")
    assert done.returncode == 4, done.stderr
    assert "thread done" in done.stdout and "atexit ran" in done.stdout


def test_leave_onto_a_closed_pipe_exits_as_python_does():
    """Flushing into a pipe nobody reads fails; Python reports that and exits 120 (its status
    when flushing the standard streams at exit fails: "What's New In Python 3.6", from
    memory), and so does ``leave``."""
    import subprocess
    import sys

    child = subprocess.Popen([sys.executable, "-c", _LEAVING, "zero"], stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, env=_buffered())
    child.stdout.close()  # before the child can write: its flush meets a broken pipe
    _, err = child.communicate(timeout=120)
    assert child.returncode == 120, err
