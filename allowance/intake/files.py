"""Input files as files: fingerprints, size limits, kinds, encodings and the bundled folders."""

from __future__ import annotations

import codecs
import hashlib
import importlib.resources
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np

import allowance
from allowance.exceptions import InputFileError
from allowance.schemas import InputFile

FileKind = Literal["csv", "xlsx", "parquet"]

_CHUNK = 1 << 22  # 4 MiB: large enough that hashing runs at memory speed
_MAGIC: dict[bytes, FileKind] = {b"PK\x03\x04": "xlsx", b"PAR1": "parquet"}
_SUFFIXES: dict[str, FileKind] = {
    ".csv": "csv",
    ".txt": "csv",
    ".xlsx": "xlsx",
    ".xlsm": "xlsx",
    ".parquet": "parquet",
    ".pq": "parquet",
}


@dataclass(frozen=True)
class Scan:
    """One pass over a file: its run-record entry and its count of line feeds."""

    record: InputFile
    newlines: int  # counted only when the file holds a double quote; else -1 (not needed)
    ends_with_newline: bool


def scan(path: Path, role: str, *, text: bool = False) -> Scan:
    """Hash the file and count its line feeds in one pass; ``text=True`` also checks its start is UTF-8."""
    path = Path(path)
    digest = hashlib.sha256()
    quoted = False
    newlines = 0
    last = b""
    try:
        with path.open("rb") as handle:
            first = True
            while block := handle.read(_CHUNK):
                if first and text:
                    check_text_block(block, path)
                first = False
                digest.update(block)
                if text and not quoted and b'"' in block:
                    quoted = True
                    newlines = _count_newlines(path, handle.tell() - len(block))
                if quoted:
                    # Line breaks inside quoted values shift line numbers: count them all.
                    newlines += int(np.count_nonzero(np.frombuffer(block, dtype=np.uint8) == 10))
                last = block[-1:]
    except FileNotFoundError as err:
        raise InputFileError("file not found", file=path, hint="check the path") from err
    except IsADirectoryError as err:
        raise InputFileError("is a folder, not a file", file=path, hint="give the file inside it") from err
    except OSError as err:
        raise InputFileError(f"cannot be read ({err.strerror or err})", file=path) from err
    if not quoted:
        newlines = -1
    record = InputFile(role=role, path=str(path), sha256=digest.hexdigest(), bytes=path.stat().st_size)
    return Scan(record=record, newlines=newlines, ends_with_newline=last == b"\n")


def _count_newlines(path: Path, end: int) -> int:
    """Line feeds in the first ``end`` bytes of the file."""
    count = 0
    with path.open("rb") as handle:
        while end > 0 and (block := handle.read(min(_CHUNK, end))):
            count += int(np.count_nonzero(np.frombuffer(block, dtype=np.uint8) == 10))
            end -= len(block)
    return count


def file_record(path: Path, role: str) -> InputFile:
    """Fingerprint an input file for the run record: SHA-256 and size in bytes.

    Parameters
    ----------
    path
        The file.
    role
        What the file is to the run: ``tape``, ``assumptions``, ``overlay``,
        ``transition_matrix``, ``charge_offs`` or ``prior``.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = Path(d) / "a.txt"
    ...     _ = p.write_bytes(b"abc")
    ...     rec = file_record(p, "tape")
    >>> rec.sha256[:16], rec.bytes
    ('ba7816bf8f01cfea', 3)
    """
    return scan(path, role).record


def check_size(path: Path, max_mb: float) -> int:
    """Return the file's size in bytes; raise :class:`InputFileError` if missing or above ``max_mb`` MiB."""
    path = Path(path)
    if not path.exists():
        raise InputFileError("file not found", file=path, hint="check the path")
    if not path.is_file():
        raise InputFileError("is not a file", file=path, hint="give the path of the file itself")
    size = path.stat().st_size
    if size > max_mb * 1024 * 1024:
        raise InputFileError(
            f"is {size / 1024 / 1024:,.1f} MiB, above the {max_mb:g} MiB input limit",
            file=path,
            hint="raise [run] max_input_mb if the file is genuine",
        )
    if size == 0:
        raise InputFileError("is empty (0 bytes)", file=path, hint="export the tape again")
    return size


def file_kind(path: Path) -> FileKind:
    """Tell a CSV, an XLSX workbook and a Parquet file apart by their first bytes, then the suffix.

    A file whose content contradicts its suffix (a workbook renamed ``.csv``) is read as what
    it is; a ``.xlsx`` or ``.parquet`` whose content is not one is an error.
    """
    path = Path(path)
    with path.open("rb") as handle:
        head = handle.read(4)
    for magic, kind in _MAGIC.items():
        if head.startswith(magic):
            return kind
    suffix_kind = _SUFFIXES.get(path.suffix.lower(), "csv")
    if suffix_kind != "csv":
        raise InputFileError(
            f"is named {path.suffix} but is not a valid {suffix_kind.upper()} file",
            file=path,
            hint="save it again from the program that made it, or export it as CSV",
        )
    return "csv"


def check_text_block(block: bytes, path: Path) -> None:
    """Raise :class:`InputFileError` if the first block of a file is binary or not UTF-8.

    A character cut at the end of the block is allowed (the next block completes it).
    """
    try:
        codecs.getincrementaldecoder("utf-8")().decode(block, final=False)
    except UnicodeDecodeError as err:
        raise _not_utf8(path, err.start, block[err.start]) from err
    nul = block.find(b"\x00")
    if nul >= 0:
        raise InputFileError(
            f"is not a text file (a NUL byte at byte offset {nul})",
            file=path,
            hint="give a CSV, XLSX or Parquet tape",
        )


def _not_utf8(path: Path, offset: int, byte: int) -> InputFileError:
    return InputFileError(
        f"is not UTF-8 text: byte offset {offset} holds 0x{byte:02x}",
        file=path,
        hint="save the file as UTF-8 CSV (e.g. 'CSV UTF-8' in a spreadsheet program)",
    )


def check_text(path: Path) -> None:
    """Raise :class:`InputFileError` naming the byte offset of the first byte that is not UTF-8."""
    decoder = codecs.getincrementaldecoder("utf-8")()
    offset = 0
    with Path(path).open("rb") as handle:
        while block := handle.read(_CHUNK):
            pending = decoder.getstate()[0]  # bytes held back from the previous block
            try:
                decoder.decode(block, final=False)
            except UnicodeDecodeError as err:
                raise _not_utf8(path, offset - len(pending) + err.start, (pending + block)[err.start]) from err
            offset += len(block)
    try:
        decoder.decode(b"", final=True)
    except UnicodeDecodeError as err:
        raise InputFileError(
            f"is not UTF-8 text: the file ends inside a character (byte offset {offset - 1})",
            file=path,
            hint="save the file as UTF-8 CSV",
        ) from err


def bundled_path(kind: Literal["demo", "templates"]) -> Path:
    """The shipped ``demo/`` or ``templates/`` folder.

    A source checkout has them beside the package; an installed wheel carries them inside it
    as ``allowance/_demo`` and ``allowance/_templates``.

    Examples
    --------
    >>> bundled_path("templates").name in {"templates", "_templates"}
    True
    """
    beside = Path(allowance.__file__).resolve().parent.parent / kind
    if beside.is_dir():
        return beside
    inside = importlib.resources.files("allowance") / f"_{kind}"
    if inside.is_dir():
        return Path(str(inside))
    raise InputFileError(
        f"the bundled {kind} folder is missing from this installation",
        file=str(beside),
        hint="reinstall the package",
    )
