"""The package imports one way: no module imports a later stage of the pipeline.

The layers, earliest first. A module may import its own layer's modules and earlier layers'
(never a later one), and the whole graph has no cycle. The leaves and contracts come first,
then the maths of each concept, the framework rules, the reading edge (which validates with
the rules above it), the engine that composes them, the movement, the writing edge, and the
API and command line on top. A new top-level module must be placed here.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import allowance

LAYERS: list[tuple[str, ...]] = [
    ("exceptions", "text", "money", "jit", "jitable", "jitcache", "memory", "aside"),  # leaves: the domain errors, text safety,
    # cents, compile cache, the scalar maths compiled loops may call, freed memory handed back,
    # work forked beside the command line's process
    ("schemas",),  # the contracts: tape, assumptions, run configuration, run record
    ("links", "discounting", "cashflows", "shortfall"),  # maths with no other concept beneath it
    # term structures, stages, POCI, macro links and their fit, individually measured loans
    ("macro", "satellite_fit", "curves", "staging", "poci", "loss_rates", "loss_rates_compiled", "individual"),
    ("scenarios",),  # scenario paths over the term structures
    ("frameworks",),  # what differs between IFRS 9 and CECL
    ("intake",),  # the reading edge: files into contracts, validated
    ("ecl", "ecl_compiled", "overlays", "backtest", "calibrate"),  # the ECL sums (numpy, compiled), adjustments, back-testing, calibration
    ("engine",),  # chunks of loans through the loop
    ("cluster",),  # the engine's chunks on a Dask cluster
    ("reconcile", "disclosure"),  # movement, what-if, sensitivities between runs; disclosure tables
    ("report",),  # the writing edge: loans.csv, reserve.xlsx, run.json
    ("partitioned",),  # a book read, computed and its loan detail written part by part
    ("result",),  # what the API hands back
    ("api",),  # the library API
    ("cli", "__main__", "console", "progress"),  # the command line and what it shows while it works
]
RANK = {name: i for i, layer in enumerate(LAYERS) for name in layer}
ROOT = Path(allowance.__file__).parent


def _unit(path: Path) -> str:
    """The top-level module (or subpackage) a file belongs to."""
    parts = path.relative_to(ROOT).with_suffix("").parts
    return "allowance" if parts == ("__init__",) else parts[0]


def _runtime_imports(tree: ast.Module) -> list[tuple[str, int]]:
    """Every ``allowance.X`` imported when the module runs (not under ``if TYPE_CHECKING``)."""
    skip: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
            skip.update(id(n) for child in node.body for n in ast.walk(child))
    found = []
    for node in ast.walk(tree):
        if id(node) in skip:
            continue
        if isinstance(node, ast.ImportFrom) and node.module and node.module.split(".")[0] == "allowance":
            parts = node.module.split(".")
            targets = [parts[1]] if len(parts) > 1 else [a.name for a in node.names]
            found += [(t, node.lineno) for t in targets]
        elif isinstance(node, ast.Import):
            found += [(a.name.split(".")[1], node.lineno) for a in node.names
                      if a.name.startswith("allowance.")]
    return found


def _graph() -> dict[str, set[str]]:
    graph: dict[str, set[str]] = {}
    for path in ROOT.rglob("*.py"):
        unit = _unit(path)
        for target, _ in _runtime_imports(ast.parse(path.read_text(encoding="utf-8"))):
            if target != unit and target in RANK:
                graph.setdefault(unit, set()).add(target)
    return graph


def test_every_module_has_a_layer():
    units = {_unit(p) for p in ROOT.rglob("*.py")} - {"allowance"}
    assert not units - set(RANK), f"place these modules in LAYERS: {sorted(units - set(RANK))}"


def test_no_import_runs_back_up_the_pipeline():
    backwards = []
    for path in ROOT.rglob("*.py"):
        unit = _unit(path)
        if unit == "allowance":
            continue
        for target, line in _runtime_imports(ast.parse(path.read_text(encoding="utf-8"))):
            if target in RANK and RANK[target] > RANK[unit]:
                backwards.append(f"{path.relative_to(ROOT)}:{line} imports {target} (a later stage than {unit})")
    assert not backwards, "\n".join(backwards)


def test_the_package_root_imports_nothing_when_it_loads():
    # its names are resolved on first use (allowance.__getattr__), so any stage may read
    # allowance.__version__ without pulling the API in
    tree = ast.parse((ROOT / "__init__.py").read_text(encoding="utf-8"))
    assert [t for t, _ in _runtime_imports(tree)] == []


def test_no_cycle_between_modules():
    graph = _graph()
    state: dict[str, int] = {}
    path: list[str] = []

    def visit(node: str) -> None:
        state[node] = 1
        path.append(node)
        for nxt in sorted(graph.get(node, ())):
            if state.get(nxt) == 1:
                raise AssertionError("import cycle: " + " -> ".join(path[path.index(nxt):] + [nxt]))
            if nxt not in state:
                visit(nxt)
        path.pop()
        state[node] = 2

    for node in sorted(graph):
        if node not in state:
            visit(node)


def test_check_loads_no_compiler_and_no_rich_formatting():
    # `allowance check` validates a tape against the assumptions and compiles nothing: the
    # scalar maths it reads (discounting, LGD) is handed to numba only when a loop is compiled
    # (allowance.jitable), so numba and llvmlite (about a second with their first call) stay
    # out; rich (Typer's help and error frames) is loaded only to show help or a framed error
    import subprocess
    import sys

    from tests import books

    code = ("import sys\nfrom allowance.cli import app\n"
            f"try:\n    app(['check', {str(books.DEMO_BAD_TAPE)!r}, '-a', {str(books.DEMO_ASSUMPTIONS)!r}, '--quiet'])\n"
            "except SystemExit as done:\n    print('exit', done.code)\n"
            "print('|' + ','.join(m for m in ('pandas', 'numba', 'llvmlite', 'scipy', 'rich') if m in sys.modules))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=180)
    assert done.returncode == 0, done.stderr
    exit_line, loaded = done.stdout.strip().splitlines()[-2:]
    assert exit_line == "exit 1"  # the bad demo tape has rejected rows: the check really ran
    assert loaded == "|pandas", loaded


def test_the_curves_package_hands_out_each_name_of_its_submodules_loaded_on_first_use():
    # allowance.curves loads a submodule when one of its names is first asked for, so the
    # compiled loop's LGD maths loads without pandas; each name is the submodule's own object,
    # roll_forecast the function (it also names its submodule), whatever was asked first
    code = ("import sys, inspect\nimport allowance.curves.lgd\nprint('pandas' in sys.modules)\n"
            "import allowance.curves as c\nfrom allowance.curves import segment_roll_forecasts\n"
            "import importlib\nbad = [n for n in c.__all__ if getattr(c, n) is not getattr(importlib.import_module("
            "'allowance.curves.' + c._WHERE[n]), n)]\nprint(bad, inspect.isfunction(c.roll_forecast))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split("\n")[:2] == ["False", "[] True"], done.stdout
