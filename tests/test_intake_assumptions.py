"""Assumption files: overlay merge semantics, transition matrices, errors that name file and key.

The merge rules are our contract (DESIGN.md, "the assumptions file"); the TOML syntax is
the TOML 1.0 specification read by the standard library's tomllib.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest

from allowance.exceptions import AssumptionsError
from allowance.intake import load_assumptions, read_tape
from allowance.schemas import TransitionMatrix
from tests.strategies import INTAKE_ASSUMPTIONS

OVERLAY_ENTRY = """
[[overlays]]
name = "{name}"
segment = "retail"
kind = "percent"
value = {value}
rationale = "an invented reason"
owner = "credit committee"
"""


def write(folder: Path, name: str, text: str) -> Path:
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def test_overlays_merge_tables_replace_arrays_and_append_entries(tmp_path):
    base = write(tmp_path, "a.toml", INTAKE_ASSUMPTIONS.replace("weight = 1.0", "weight = 1.0\npd_multiplier = [1.0, 1.1]")
                 + OVERLAY_ENTRY.format(name="keep", value=0.01) + OVERLAY_ENTRY.format(name="swap", value=0.02))
    first = write(tmp_path, "o1.toml", """
[segments.retail]
lgd = 0.55

[scenarios.base]
pd_multiplier = [1.5]
""" + OVERLAY_ENTRY.format(name="swap", value=0.09) + OVERLAY_ENTRY.format(name="new", value=0.03))
    second = write(tmp_path, "o2.toml", "[segments.cards]\ncpr = 0.2\n")

    config = load_assumptions(base, [first, second])
    a = config.assumptions
    assert a.segments["retail"].lgd == 0.55 and a.segments["retail"].pd_12m == 0.02  # table merged key by key
    assert a.segments["cards"].cpr == 0.2 and a.segments["cards"].lgd == 0.8
    assert a.scenarios["base"].pd_multiplier == [1.5] and a.scenarios["base"].weight == 1.0  # array replaced
    assert [(o.name, o.value) for o in a.overlays] == [("keep", 0.01), ("swap", 0.09), ("new", 0.03)]
    assert [(i.role, Path(i.path).name) for i in config.inputs] == [
        ("assumptions", "a.toml"), ("overlay", "o1.toml"), ("overlay", "o2.toml")]
    assert config.inputs[0].sha256 == hashlib.sha256(base.read_bytes()).hexdigest()
    assert config.base_dir == tmp_path.resolve()


def test_a_whole_file_error_after_an_overlay_says_so(tmp_path):
    base = write(tmp_path, "a.toml", INTAKE_ASSUMPTIONS)
    overlay = write(tmp_path, "o.toml", "[scenarios.base]\nweight = 0.5\n")
    with pytest.raises(AssumptionsError, match=r"sum to 0\.5 \(base 0\.5\) \(after merging .*o\.toml\)"):
        load_assumptions(base, [overlay])


def test_an_overlay_file_may_not_name_an_entry_twice(tmp_path):
    base = write(tmp_path, "a.toml", INTAKE_ASSUMPTIONS)
    overlay = write(tmp_path, "o.toml", OVERLAY_ENTRY.format(name="x", value=0.1) + OVERLAY_ENTRY.format(name="x", value=0.2))
    with pytest.raises(AssumptionsError, match=r"o\.toml: key overlays: overlay names must be unique within a file: 'x'"):
        load_assumptions(base, [overlay])


def test_the_base_file_is_not_changed_by_loading_an_overlay(tmp_path):
    base = write(tmp_path, "a.toml", INTAKE_ASSUMPTIONS)
    overlay = write(tmp_path, "o.toml", "[segments.retail]\nlgd = 0.9\n")
    load_assumptions(base, [overlay])
    assert load_assumptions(base).assumptions.segments["retail"].lgd == 0.4


def test_unknown_key_names_file_key_and_suggestion(tmp_path):
    path = write(tmp_path, "a.toml", INTAKE_ASSUMPTIONS.replace("lgd = 0.4", "lgdd = 0.4"))
    with pytest.raises(AssumptionsError) as err:
        load_assumptions(path)
    assert err.value.column == "segments.retail.lgdd"
    assert str(err.value).startswith(f"{path}: key segments.retail.lgdd: unknown key 'lgdd' (did you mean 'lgd'?)")
    # lgd is optional for a loss-rate segment, so its absence shows once the typo is gone
    path = write(tmp_path, "b.toml", INTAKE_ASSUMPTIONS.replace("lgd = 0.4\n", ""))
    with pytest.raises(AssumptionsError, match=r"key segments\.retail: pd_\w+ needs lgd") as err:
        load_assumptions(path)


def test_error_in_an_overlay_names_the_overlay(tmp_path):
    base = write(tmp_path, "a.toml", INTAKE_ASSUMPTIONS)
    overlay = write(tmp_path, "what_if.toml", "[segments.cards]\nlgd = 1.5\n")
    with pytest.raises(AssumptionsError) as err:
        load_assumptions(base, [overlay])
    assert err.value.file == str(overlay) and err.value.column == "segments.cards.lgd"
    assert err.value.reason == "must be at most 1.0 (it is 1.5)"


@pytest.mark.parametrize(
    ("old", "new", "column", "reason"),
    [
        ('frameworks = ["cecl"]', 'frameworks = ["cecl", "gaap"]', "run.frameworks[2]", "must be 'ifrs9' or 'cecl' (it is 'gaap')"),
        ("as_of = 2026-09-30", 'as_of = "30/09/2026"', "run.as_of", "must be a date such as 2026-09-30"),
        ("weight = 1.0", "weight = 0.9", None, "scenario weights must sum to 1; they sum to 0.9"),
        ("pd_12m = 0.02\n", "pd_12m = 0.02\npd_curve = [0.1]\n", "segments.retail", "give exactly one PD source"),
        ("reasonable_supportable_months = 12", "reasonable_supportable_months = 12.5", "cecl.reasonable_supportable_months", "must be a whole number"),
        ("[segments.retail]", "[tape.columns]\nbalanse = \"Bal\"\n\n[segments.retail]", "tape.columns.balanse", "unknown tape column 'balanse' (did you mean 'balance'?)"),
    ],
)
def test_validation_messages_in_plain_words(tmp_path, old, new, column, reason):
    path = write(tmp_path, "a.toml", INTAKE_ASSUMPTIONS.replace(old, new))
    with pytest.raises(AssumptionsError) as err:
        load_assumptions(path)
    assert err.value.file == str(path)
    assert err.value.column == column
    assert err.value.reason.startswith(reason), err.value.reason


def test_toml_syntax_error_gives_line_and_column(tmp_path):
    path = write(tmp_path, "a.toml", "[run]\nas_of = 2026-09-30\nlabel = \n")
    with pytest.raises(AssumptionsError, match=r"a\.toml: line 3, column \d+: invalid TOML \(invalid value\)"):
        load_assumptions(path)
    path = write(tmp_path, "a.toml", "[run]\nframeworks = [\"cecl\"\n")
    with pytest.raises(AssumptionsError, match=r"invalid TOML \(unclosed array at the end of the file\)"):
        load_assumptions(path)


def test_missing_and_non_utf8_files(tmp_path):
    with pytest.raises(AssumptionsError, match="file not found"):
        load_assumptions(tmp_path / "none.toml")
    path = tmp_path / "latin.toml"
    path.write_bytes(b"[run]\nlabel = \"caf\xe9\"\n")
    with pytest.raises(AssumptionsError, match="byte offset 18 holds 0xe9") as err:
        load_assumptions(path)
    assert "(line 2, 'é' in Windows-1252)" in str(err.value)  # the label's line; 0xE9 is 'é' (Python's cp1252)
    base = write(tmp_path, "a.toml", INTAKE_ASSUMPTIONS)
    with pytest.raises(AssumptionsError, match="o.toml: file not found"):
        load_assumptions(base, [tmp_path / "o.toml"])


ROLLS = """from,current,dpd_1_29,dpd_30_59,dpd_60_89,dpd_90_119,charge_off,paid_off
current,0.95,0.03,0,0,0,0,0.02
dpd_1_29,0.4,0.3,0.28,0,0,0,0.02
dpd_30_59,0.2,0.1,0.1,0.6,0,0,0
dpd_60_89,0.1,0,0.05,0.1,0.75,0,0
dpd_90_119,0.05,0,0,0.05,0.1,0.8,0
charge_off,0,0,0,0,0,1,0
paid_off,0,0,0,0,0,0,1
"""


def _rolls_config(tmp_path: Path, matrix_text: str) -> Path:
    (tmp_path / "tables").mkdir(exist_ok=True)
    write(tmp_path / "tables", "rolls.csv", matrix_text)
    return write(tmp_path, "a.toml", INTAKE_ASSUMPTIONS.replace(
        "[segments.cards]\npd_12m = 0.05", '[segments.cards]\ntransition_matrix = "tables/rolls.csv"\ncharge_off_dpd = 120'))


def test_transition_matrix_is_read_relative_to_the_file(tmp_path):
    config = load_assumptions(_rolls_config(tmp_path, ROLLS))
    matrix = config.assumptions.segments["cards"].transition_matrix
    assert isinstance(matrix, TransitionMatrix)
    assert matrix.states[0] == "current" and matrix.states[-1] == "paid_off"
    assert matrix.probabilities[1] == [0.4, 0.3, 0.28, 0, 0, 0, 0.02]
    assert Path(matrix.source) == (tmp_path / "tables" / "rolls.csv").resolve()
    assert [i.role for i in config.inputs] == ["assumptions", "transition_matrix"]


def test_transition_matrix_named_in_an_overlay_is_relative_to_the_overlay(tmp_path):
    base = write(tmp_path, "a.toml", INTAKE_ASSUMPTIONS)
    (tmp_path / "what_if").mkdir()
    write(tmp_path / "what_if", "rolls.csv", ROLLS)
    overlay = write(tmp_path / "what_if", "o.toml",
                    '[segments.cards]\npd_12m = 0.05\ntransition_matrix = "rolls.csv"\ncharge_off_dpd = 120\n')
    with pytest.raises(AssumptionsError, match="exactly one PD source"):  # pd_12m is still there
        load_assumptions(base, [overlay])
    base = write(tmp_path, "a.toml", INTAKE_ASSUMPTIONS.replace("[segments.cards]\npd_12m = 0.05\n", "[segments.cards]\n"))
    overlay = write(tmp_path / "what_if", "o.toml", '[segments.cards]\ntransition_matrix = "rolls.csv"\ncharge_off_dpd = 120\n')
    matrix = load_assumptions(base, [overlay]).assumptions.segments["cards"].transition_matrix
    assert Path(matrix.source).parent == (tmp_path / "what_if").resolve()


@pytest.mark.parametrize(
    ("text", "message"),
    [
        (ROLLS.replace("current,0.95", "current,x"), r"rolls\.csv: row 2, column current: 'x' is not a probability"),
        (ROLLS.replace("dpd_1_29,0.4", "dpd_30_59,0.4"), r"row 3, column from: the from-state is 'dpd_30_59'"),
        (ROLLS.replace("from,", "state,"), r"row 1: the header must be 'from'"),
        ("\n".join(ROLLS.splitlines()[:-1]), "has 6 from-state rows for 7 states"),
    ],
)
def test_transition_matrix_errors_name_the_csv_row_and_column(tmp_path, text, message):
    with pytest.raises(AssumptionsError, match=message):
        load_assumptions(_rolls_config(tmp_path, text))


def test_missing_transition_matrix_file_names_the_key(tmp_path):
    path = write(tmp_path, "a.toml", INTAKE_ASSUMPTIONS.replace(
        "[segments.cards]\npd_12m = 0.05", '[segments.cards]\ntransition_matrix = "nope.csv"\ncharge_off_dpd = 120'))
    with pytest.raises(AssumptionsError) as err:
        load_assumptions(path)
    assert err.value.column == "segments.cards.transition_matrix" and "nope.csv" in err.value.reason


def test_templates_validate_and_the_template_tape_is_accepted():
    from allowance.intake import bundled_path

    folder = bundled_path("templates")
    config = load_assumptions(folder / "assumptions.toml")
    for tape in ("loan_tape.csv", "loan_tape.xlsx"):
        result = read_tape(folder / tape, config)
        assert result.rows_read == 3 and result.rows_rejected == 0, result.rejected
    with_overlay = load_assumptions(folder / "assumptions.toml", [folder / "overlay.toml"])
    assert abs(sum(with_overlay.assumptions.weights) - 1.0) < 1e-12
    assert [o.name for o in with_overlay.assumptions.overlays] == ["auto_used_car_prices"]


def test_an_overlay_giving_a_method_replaces_the_segments_method(tmp_path):
    # a what-if may move a segment from its PD source to a loss rate: the base's PD key goes
    base = write(tmp_path, "a.toml", INTAKE_ASSUMPTIONS)
    overlay = write(tmp_path, "o.toml", "[segments.retail]\nannual_loss_rate = 0.02\n")
    seg = load_assumptions(base, [overlay]).assumptions.segments["retail"]
    assert seg.method == "annual_loss_rate" and seg.pd_source is None and seg.lgd == 0.4
