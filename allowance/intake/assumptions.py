"""Read the assumptions file and its overlay files into a validated :class:`RunConfig`.

The files are TOML. Overlay files are merged into the base file in the order given: tables
merge key by key, any other value (arrays included) replaces the one before, and
``[[overlays]]`` entries are appended, an entry with the same ``name`` as an earlier one
replacing it. A segment table that gives a method key (a PD source or a loss rate) replaces
the segment's method: the base file's other method keys are dropped. A segment's ``transition_matrix`` names a CSV file, relative to the file that
named it, which is read here. Every problem is one :class:`AssumptionsError` naming the file
and the key (``segments.auto.lgd``; list positions count from 1, ``overlays[2].kind``).
"""

from __future__ import annotations

import copy
import csv
import difflib
import hashlib
import json
import re
import tomllib
import types
import typing
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ValidationError

from allowance import curves, scenarios
from allowance.exceptions import AssumptionsError
from allowance.intake.fields import FIELDS, lower_first
from allowance.intake.files import file_record, in_windows_1252, not_found
from allowance.schemas import Assumptions, InputFile, RunConfig

Key = tuple[str | int, ...]
_ORDINAL_ERROR = re.compile(r"\(at line (\d+), column (\d+)\)")


def dotted(path: Key) -> str:
    """A key path as the user writes it.

    Examples
    --------
    >>> dotted(("segments", "auto", "lgd")), dotted(("overlays", 1, "kind")), dotted(())
    ('segments.auto.lgd', 'overlays[2].kind', '')
    """
    out = ""
    for part in path:
        out += f"[{part + 1}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out


#: The largest assumptions or overlay file read, in bytes. Assumptions are a few kilobytes; the
#: cap stops a wrong path (``/dev/zero``, a tape given as ``-a``) from reading until memory runs out.
MAX_ASSUMPTIONS_BYTES = 16 * 1024 * 1024


def _read_capped(path: Path, cap: int) -> bytes:
    """At most ``cap`` bytes of a file; more is an :class:`AssumptionsError` (works for devices and pipes)."""
    with path.open("rb") as handle:
        data = handle.read(cap + 1)
    if len(data) > cap:
        raise AssumptionsError(
            f"is larger than {cap // (1024 * 1024)} MiB, too large for an assumptions file",
            file=path,
            hint="give the TOML assumptions file (check the -a/--assumptions and --overlay paths)",
        )
    return data


def _read_toml(path: Path) -> dict[str, Any]:
    try:
        data = _read_capped(path, MAX_ASSUMPTIONS_BYTES)
    except FileNotFoundError as err:
        raise not_found(path, error=AssumptionsError) from err
    except OSError as err:
        raise AssumptionsError(f"cannot be read ({err.strerror or err})", file=path) from err
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        byte, line = data[err.start], data.count(b"\n", 0, err.start) + 1
        where = [f"line {line}"] + ([seen] if (seen := in_windows_1252(byte)) else [])
        raise AssumptionsError(
            f"is not UTF-8 text: byte offset {err.start} holds 0x{byte:02x} ({', '.join(where)})",
            file=path,
            hint="save it as UTF-8",
        ) from err
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        message = str(err)
        where = _ORDINAL_ERROR.search(message)
        reason = lower_first(_ORDINAL_ERROR.sub("", message).strip().rstrip("."))
        if where:
            line, column = where.groups()
            raise AssumptionsError(
                f"line {line}, column {column}: invalid TOML ({reason})",
                file=path,
                hint="see the commented template from 'allowance init'",
            ) from err
        reason = reason.replace("(at end of document)", "").strip()
        raise AssumptionsError(f"invalid TOML ({reason} at the end of the file)", file=path) from err


# --------------------------------------------------------------------------------------
# Merging, with the file each key came from
# --------------------------------------------------------------------------------------


#: The keys that carry a segment's method (a PD source or a loss rate): an overlay that gives
#: one replaces the base file's.
_METHOD_KEYS = ("pd_12m", "pd_12m_by_grade", "pd_curve", "pd_curve_by_grade", "transition_matrix",
                "lifetime_loss_rate", "annual_loss_rate", "vintage_loss_curve")


class _Merged:
    """The merged data and, for each key path, the file that last set it."""

    def __init__(self, data: dict[str, Any], file: Path, folder: Path | None = None) -> None:
        self.data = data
        self.origin: dict[Key, Path] = {(): file}
        self.overlay_files: list[Path] = []
        # the folder a file's relative paths resolve against (a mapping has no file of its own)
        self.folders: dict[Path, Path] = {file: folder if folder is not None else file.parent}

    def folder_of(self, file: Path) -> Path:
        return self.folders.get(file, file.parent)

    def file_of(self, path: Key) -> Path:
        """The file that set ``path`` (the longest prefix on record)."""
        for end in range(len(path), -1, -1):
            if path[:end] in self.origin:
                return self.origin[path[:end]]
        return self.origin[()]  # pragma: no cover

    def _set(self, path: Key, file: Path) -> None:
        for key in [k for k in self.origin if k[: len(path)] == path]:
            del self.origin[key]
        self.origin[path] = file

    def merge(self, overlay: dict[str, Any], file: Path, folder: Path | None = None) -> None:
        new = overlay.get("overlays")
        if isinstance(new, list):  # within one file a name is given once (a later file replaces it)
            names = [e.get("name") for e in new if isinstance(e, dict) and e.get("name") is not None]
            twice = sorted({n for n in names if names.count(n) > 1})
            if twice:
                raise AssumptionsError(
                    f"overlay names must be unique within a file: {', '.join(map(repr, twice))}",
                    file=file, column="overlays",
                )
        self.overlay_files.append(file)
        self.folders[file] = folder if folder is not None else file.parent
        self._merge(self.data, overlay, (), file)

    def _merge(self, base: dict[str, Any], overlay: dict[str, Any], path: Key, file: Path) -> None:
        for key, value in overlay.items():
            here = (*path, key)
            if here == ("overlays",) and isinstance(value, list) and isinstance(base.get(key), list):
                self._merge_overlays(base[key], value, file)
            elif isinstance(value, dict) and isinstance(base.get(key), dict):
                if path == ("segments",) and any(k in value for k in _METHOD_KEYS):
                    # a segment's method is replaced whole: a what-if may move it to a loss rate
                    for old in _METHOD_KEYS:
                        if old not in value and base[key].pop(old, None) is not None:
                            self._set((*here, old), file)
                self._merge(base[key], value, here, file)
            else:
                base[key] = copy.deepcopy(value)
                self._set(here, file)

    def _merge_overlays(self, entries: list[Any], new: list[Any], file: Path) -> None:
        for entry in new:
            name = entry.get("name") if isinstance(entry, dict) else None
            same = [i for i, old in enumerate(entries) if isinstance(old, dict) and name is not None and old.get("name") == name]
            if same:
                entries[same[0]] = copy.deepcopy(entry)
                self._set(("overlays", same[0]), file)
            else:
                entries.append(copy.deepcopy(entry))
                self._set(("overlays", len(entries) - 1), file)


# --------------------------------------------------------------------------------------
# Transition matrices
# --------------------------------------------------------------------------------------


def read_transition_matrix(path: Path) -> dict[str, Any]:
    """Read a roll-rate matrix CSV: header ``from,<state>,...``, one row per from-state in that order.

    Returns the fields of :class:`allowance.schemas.TransitionMatrix`. The shape, the row
    labels and each probability's range are checked here; the rows' sums and the state
    names are checked where the matrix is used.
    """
    try:
        with path.open("r", encoding="utf-8-sig", newline="") as handle:
            rows = [r for r in csv.reader(handle)]
    except FileNotFoundError as err:
        raise AssumptionsError("transition matrix file not found", file=path, hint="check the path in transition_matrix") from err
    except (OSError, UnicodeDecodeError, csv.Error) as err:
        raise AssumptionsError(f"cannot be read as a UTF-8 CSV ({err})", file=path) from err
    lines = [(i + 1, r) for i, r in enumerate(rows) if any(c.strip() for c in r)]
    if not lines or lines[0][1][0].strip().lower() != "from":
        raise AssumptionsError(
            "the header must be 'from' followed by the state names",
            file=path,
            row=1,
            hint="e.g. from,current,dpd_1_29,dpd_30_59,dpd_60_89,dpd_90_119,charge_off,paid_off",
        )
    states = [s.strip() for s in lines[0][1][1:]]
    body = lines[1:]
    if len(body) != len(states):
        raise AssumptionsError(
            f"has {len(body)} from-state rows for {len(states)} states in the header",
            file=path,
            hint="give one row per state, in the header's order",
        )
    probabilities: list[list[float]] = []
    for (line, row), state in zip(body, states):
        label = row[0].strip()
        if label != state:
            raise AssumptionsError(
                f"the from-state is {label!r}, but the header's state in this position is {state!r}",
                file=path, row=line, column="from", hint="list the rows in the header's order",
            )
        if len(row) - 1 != len(states):
            raise AssumptionsError(
                f"has {len(row) - 1} probabilities for {len(states)} states", file=path, row=line
            )
        values = []
        for to_state, cell in zip(states, row[1:]):
            try:
                value = float(cell)
            except ValueError:
                value = float("nan")
            if not 0.0 <= value <= 1.0:
                raise AssumptionsError(
                    f"{cell.strip()!r} is not a probability between 0 and 1", file=path, row=line, column=to_state
                )
            values.append(value)
        probabilities.append(values)
    return {"states": states, "probabilities": probabilities, "source": str(path)}


def _is_frame(value: object) -> bool:
    return type(value).__name__ == "DataFrame" and hasattr(value, "to_numpy")


def _matrix_from_frame(frame: Any, named_in: Path, key: Key) -> dict[str, Any]:
    """A roll-rate matrix given inline as a DataFrame: one column per state, one row per
    from-state in the same order, the from-states in a ``from`` column or in the index."""
    table = frame.set_index("from") if "from" in frame.columns else frame
    states = [str(c).strip() for c in table.columns]
    rows = [str(i).strip() for i in table.index]
    if rows != states:
        raise AssumptionsError(
            f"the matrix's rows ({', '.join(rows)}) are not its columns' states ({', '.join(states)}) in order",
            file=named_in, column=dotted(key), hint="one row per state, in the columns' order (index or a 'from' column)",
        )
    try:
        values = table.to_numpy(dtype=float)
    except (TypeError, ValueError) as err:
        raise AssumptionsError(f"holds a value that is not a number ({err})", file=named_in, column=dotted(key)) from err
    return {"states": states, "probabilities": values.tolist(), "source": f"{named_in} ({dotted(key)})"}


def _resolve_matrices(merged: _Merged) -> list[InputFile]:
    records = []
    segments = merged.data.get("segments")
    if not isinstance(segments, dict):
        return records
    for name, table in segments.items():
        key: Key = ("segments", name, "transition_matrix")
        if isinstance(table, dict) and _is_frame(table.get("transition_matrix")):
            table["transition_matrix"] = _matrix_from_frame(table["transition_matrix"], merged.file_of(key), key)
        elif isinstance(table, dict) and isinstance(table.get("transition_matrix"), str):
            named_in = merged.file_of(key)
            path = (merged.folder_of(named_in) / table["transition_matrix"]).resolve()
            if not path.is_file():
                raise AssumptionsError(
                    f"the transition matrix file {str(path)!r} was not found",
                    file=named_in,
                    column=dotted(key),
                    hint=f"the path is relative to {named_in.name}",
                )
            table["transition_matrix"] = read_transition_matrix(path)
            records.append(file_record(path, "transition_matrix"))
    return records


# --------------------------------------------------------------------------------------
# Validation messages in plain words
# --------------------------------------------------------------------------------------


def _model_at(path: Key) -> type[BaseModel] | None:
    """The assumptions model that holds the keys at ``path``."""
    annotation: object = Assumptions
    for part in path:
        model = _as_model(annotation)
        if model is not None and isinstance(part, str):
            field = model.model_fields.get(part)
            if field is None:
                return None
            annotation = field.annotation
            continue
        annotation = _container_item(annotation)
        if annotation is None:
            return None
    return _as_model(annotation)


def _members(annotation: object) -> list[object]:
    if typing.get_origin(annotation) in (typing.Union, types.UnionType):
        return list(typing.get_args(annotation))
    if typing.get_origin(annotation) is typing.Annotated:
        return [typing.get_args(annotation)[0]]
    return [annotation]


def _as_model(annotation: object) -> type[BaseModel] | None:
    for member in _members(annotation):
        if isinstance(member, type) and issubclass(member, BaseModel):
            return member
    return None


def _container_item(annotation: object) -> object | None:
    for member in _members(annotation):
        origin = typing.get_origin(member)
        if origin is dict:
            return typing.get_args(member)[1]
        if origin is list:
            return typing.get_args(member)[0]
    return None


def _clean_loc(loc: tuple[Any, ...], data: Any) -> Key:
    """Keep the parts of a pydantic location that are keys of the data (drop union tags)."""
    out: list[str | int] = []
    node = data
    for i, part in enumerate(loc):
        if isinstance(node, dict) and part in node:
            out.append(part)
            node = node[part]
        elif isinstance(node, list) and isinstance(part, int) and 0 <= part < len(node):
            out.append(part)
            node = node[part]
        elif i == len(loc) - 1 and isinstance(part, str) and isinstance(node, dict):
            out.append(part)  # a missing or unknown key
            node = None
    return tuple(out)


def _bound(word: str) -> Callable[[dict[str, Any]], str]:
    key = {"at least": "ge", "above": "gt", "at most": "le", "below": "lt"}[word]
    return lambda e: f"must be {word} {e['ctx'][key]} (it is {e['input']!r})"


_MESSAGES: dict[str, Callable[[dict[str, Any]], str]] = {
    "greater_than_equal": _bound("at least"),
    "greater_than": _bound("above"),
    "less_than_equal": _bound("at most"),
    "less_than": _bound("below"),
    "float_parsing": lambda e: f"must be a number (it is {e['input']!r})",
    "float_type": lambda e: f"must be a number (it is {e['input']!r})",
    "int_parsing": lambda e: f"must be a whole number (it is {e['input']!r})",
    "int_type": lambda e: f"must be a whole number (it is {e['input']!r})",
    "int_from_float": lambda e: f"must be a whole number (it is {e['input']!r})",
    "bool_parsing": lambda e: f"must be true or false (it is {e['input']!r})",
    "bool_type": lambda e: f"must be true or false (it is {e['input']!r})",
    "literal_error": lambda e: f"must be {e['ctx']['expected']} (it is {e['input']!r})",
    "date_parsing": lambda e: f"must be a date such as 2026-09-30 (it is {e['input']!r})",
    "date_type": lambda e: f"must be a date such as 2026-09-30 (it is {e['input']!r})",
    "date_from_datetime_parsing": lambda e: f"must be a date such as 2026-09-30 (it is {e['input']!r})",
    "date_from_datetime_inexact": lambda e: f"must be a date without a time (it is {e['input']!r})",
    "string_type": lambda e: f"must be text in quotes (it is {e['input']!r})",
    "string_too_short": lambda e: "must not be empty or blank",
    "finite_number": lambda e: f"must be a finite number (it is {e['input']!r})",
    "too_short": lambda e: f"must have at least {e['ctx']['min_length']} entr{'y' if e['ctx']['min_length'] == 1 else 'ies'}",
    "list_type": lambda e: f"must be a list such as [1.0, 1.2] (it is {e['input']!r})",
    "dict_type": lambda e: "must be a table",
    "model_type": lambda e: "must be a table",
    "model_attributes_type": lambda e: "must be a table",
    "value_error": lambda e: str(e["ctx"].get("error", e["msg"])) if "ctx" in e else e["msg"],
}


def _reason(error: dict[str, Any], path: Key) -> str:
    kind = error["type"]
    if kind == "extra_forbidden":
        key = str(path[-1]) if path else "?"
        model = _model_at(path[:-1])
        close = difflib.get_close_matches(key, list(model.model_fields), n=1) if model else []
        return f"unknown key {key!r}" + (f" (did you mean {close[0]!r}?)" if close else "")
    if kind == "missing":
        return f"required key {str(path[-1])!r} is missing" if path else "a required key is missing"
    if kind in _MESSAGES:
        try:
            return _MESSAGES[kind](error)
        except (KeyError, TypeError):
            pass
    return lower_first(str(error.get("msg", kind)))


def _raise_validation(err: ValidationError, merged: _Merged) -> typing.NoReturn:
    seen: dict[Key, tuple[Key, str]] = {}
    # An unknown key first: a misspelt key also shows as the right one missing.
    errors = sorted(err.errors(), key=lambda e: e["type"] != "extra_forbidden")
    for error in errors:
        path = _clean_loc(error["loc"], merged.data)
        if path not in seen:
            seen[path] = (path, _reason(error, path))
    (path, reason), *rest = seen.values()
    if rest:
        others = "; ".join(f"{dotted(p) or 'file'}: {r}" for p, r in rest[:5])
        more = f" and {len(rest) - 5} more" if len(rest) > 5 else ""
        reason = f"{reason} (also {others}{more})"
    if not path and merged.overlay_files:
        reason = f"{reason} (after merging {', '.join(str(f) for f in merged.overlay_files)})"
    raise AssumptionsError(reason, file=merged.file_of(path), column=dotted(path) or None) from err


def _check_columns(merged: _Merged) -> None:
    tape = merged.data.get("tape")
    columns = tape.get("columns") if isinstance(tape, dict) else None
    if not isinstance(columns, dict):
        return
    for ours in columns:
        if ours not in FIELDS:
            close = difflib.get_close_matches(ours, list(FIELDS), n=1)
            key: Key = ("tape", "columns", ours)
            raise AssumptionsError(
                f"unknown tape column {ours!r}" + (f" (did you mean {close[0]!r}?)" if close else ""),
                file=merged.file_of(key),
                column=dotted(key),
                hint="the keys of [tape.columns] are our column names; the values the extract's headers",
            )
    targets = [str(h).strip().casefold() for h in columns.values()]
    for ours, header in columns.items():
        if targets.count(str(header).strip().casefold()) > 1:
            key = ("tape", "columns", ours)
            raise AssumptionsError(
                f"header {header!r} is mapped to more than one column",
                file=merged.file_of(key),
                column=dotted(key),
            )


def _check_what_segments_need(assumptions: Assumptions, merged: _Merged) -> None:
    """What the engine needs of every segment, checked now by the concept modules' own rules,
    so that ``check`` refuses what ``run`` could not compute: each PD source builds (a curve
    that falls, a matrix whose rows do not sum to 1), prepayment is modelled once, and a z
    path finds an asset correlation for every segment."""
    uses_z = any(s.z for s in assumptions.scenarios.values())
    for name, segment in assumptions.segments.items():
        key: Key = ("segments", name)
        try:
            if segment.pd_source is not None:  # a loss-rate segment's rates are checked by the schema
                structure = curves.pd_term_structure(name, segment, 12)
                curves.check_one_prepayment_source(name, segment, structure)
            if uses_z:
                scenarios.asset_correlation(segment, 0.01, name=name)
        except AssumptionsError as err:
            if err.file is not None:
                raise
            raise AssumptionsError(err.reason, file=merged.file_of(key), row=err.row, column=err.column,
                                   hint=err.hint) from err


#: A source of assumptions: a TOML file, or a mapping in the file's shape.
Source = str | Path | Mapping[str, Any]


def _read_source(source: Source, role: str) -> tuple[dict[str, Any], Path, Path | None, InputFile]:
    """The data of a file or a mapping, the name its errors carry, its folder and its record."""
    if isinstance(source, Mapping):
        label = Path(f"<{role} mapping>")
        data = _plain(source)
        text = json.dumps(data, sort_keys=True, default=_json_value).encode("utf-8")
        record = InputFile(role=role, path=str(label), sha256=hashlib.sha256(text).hexdigest(), bytes=len(text))
        return data, label, Path.cwd(), record
    path = Path(source)
    return _read_toml(path), path, None, file_record(path, role)


def _json_value(value: Any) -> Any:
    if _is_frame(value):  # an inline matrix: its labels and every value
        return json.loads(value.to_json(orient="split"))
    return value.isoformat() if hasattr(value, "isoformat") else str(value)


def _plain(value: Any) -> Any:
    """A deep copy of a mapping in the file's shape (inline DataFrames kept as they are)."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return value if _is_frame(value) else copy.deepcopy(value)


def load_assumptions(path: Source, overlays: Sequence[Source] = ()) -> RunConfig:
    """Read, merge and validate the assumptions file and any overlay files.

    Parameters
    ----------
    path
        The assumptions file (TOML), or a mapping in the same shape (``{"run": {...},
        "segments": {...}, ...}``; dates as ``datetime.date`` or ISO text). In a mapping a
        segment's ``transition_matrix`` may be a DataFrame (one column per state, the
        from-states in its index or a ``from`` column) or a CSV path relative to the working
        folder.
    overlays
        Overlay files or mappings, merged in order (see the module notes for the merge rules).

    Returns
    -------
    RunConfig
        The validated assumptions, every file read (assumptions, overlays, transition
        matrices, with SHA-256; a mapping is fingerprinted as its canonical JSON) and the base
        folder (the assumptions file's, or the working folder for a mapping).

    Raises
    ------
    AssumptionsError
        Naming the file, the key (``segments.auto.lgd``) and the reason in plain words.
    """
    data, label, folder, record = _read_source(path, "assumptions")
    merged = _Merged(data, label, folder)
    inputs = [record]
    for overlay in overlays:
        data, overlay_label, overlay_folder, overlay_record = _read_source(overlay, "overlay")
        merged.merge(data, overlay_label, overlay_folder)
        inputs.append(overlay_record)
    _check_columns(merged)
    inputs.extend(_resolve_matrices(merged))
    try:
        assumptions = Assumptions.model_validate(merged.data)
    except ValidationError as err:
        _raise_validation(err, merged)
    _check_what_segments_need(assumptions, merged)
    base = folder if folder is not None else label.resolve().parent
    return RunConfig(assumptions=assumptions, inputs=inputs, base_dir=base)
