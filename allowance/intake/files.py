"""Input files as files: fingerprints, size limits, kinds, encodings and the bundled folders."""

from __future__ import annotations

import codecs
import hashlib
import importlib.resources
import re
import zipfile
from collections.abc import Callable, Collection
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np

import allowance
from allowance.exceptions import AllowanceError, InputFileError, OutputError
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
    """One pass over a file: its run-record entry and, for text, its line endings and quotes.

    ``newlines`` counts line endings as CSV readers do (``\\n``, ``\\r\\n`` and a lone ``\\r``
    each end one line); ``quotes`` counts double quotes. Both are -1 for a file not scanned
    as text.
    """

    record: InputFile
    newlines: int
    ends_with_newline: bool
    quotes: int = -1

    @property
    def lines(self) -> int:
        """Physical lines in a text file: line endings, plus a last line without one."""
        if self.newlines < 0:
            return -1
        return self.newlines + (0 if self.ends_with_newline or self.record.bytes == 0 else 1)


_SCHEME = re.compile(r"[A-Za-z][A-Za-z0-9+.-]+:")


def url_given(path: str | Path) -> str | None:
    """The URL a path was given as, or None: ``s3://bucket/tape.parquet`` parsed as a path is
    ``s3:/bucket/tape.parquet`` (a folder ``s3:`` here), so a run would look for it, or write
    its outputs, on this machine. This tool reads and writes files on a file system (a
    cluster's workers mount the same one), never an object store's URL.

    >>> url_given("s3://bucket/q3/tape.parquet"), url_given(Path("gs://b/detail"))
    ('s3://bucket/q3/tape.parquet', 'gs://b/detail')
    >>> url_given("tapes/q3.parquet") is None and url_given("/data/s3:/x") is None
    True
    """
    parts = Path(path).parts
    if not parts or not _SCHEME.fullmatch(parts[0]):
        return None
    return parts[0] + "//" + "/".join(parts[1:])


def not_found(path: str | Path, reason: str = "file not found", *, hint: str = "check the path",
              error: type[AllowanceError] = InputFileError) -> AllowanceError:
    """The error of a missing input (``error(reason, file=path, hint=hint)``), or, for a path
    given as a URL (:func:`url_given`), one that names the URL and says what to do."""
    url = url_given(path)
    if url is not None:
        return error(f"{reason}: a URL, and inputs are read from a file system", file=url,
                     hint="copy it to a local or mounted folder, or mount the bucket, and give that path")
    return error(reason, file=path, hint=hint)


def refuse_url_output(path: str | Path, what: str) -> None:
    """Raise :class:`OutputError` when an output folder was given as a URL: parsed as a path it
    is a folder ``s3:`` on this machine, where ``what`` would be written without a word."""
    url = url_given(path)
    if url is not None:
        raise OutputError(f"is a URL, and {what} is written to a folder on a file system", file=url,
                          hint="give a local or mounted folder")


def _count(block: np.ndarray, byte: int) -> int:
    return int(np.count_nonzero(block == byte))


def scan(path: Path, role: str, *, text: bool = False, utf8: bool = False) -> Scan:
    """Hash the file in one pass; ``text=True`` also checks its start is UTF-8 and counts line
    endings and quotes; ``utf8=True`` (with ``text``) checks that the whole file is UTF-8 and
    raises :func:`check_text`'s error (naming the first bad byte's offset) when it is not."""
    path = Path(path)
    digest = hashlib.sha256()
    newlines = quotes = 0
    last = b""
    decoder = codecs.getincrementaldecoder("utf-8")() if text and utf8 else None
    try:
        with path.open("rb") as handle:
            first = True
            while block := handle.read(_CHUNK):
                if first and text:
                    check_text_block(block, path)
                first = False
                digest.update(block)
                # ASCII is UTF-8: only a block with other bytes (or one that must finish a
                # character the block before began) goes through the decoder
                if decoder is not None and (decoder.getstate()[0] or not block.isascii()):
                    try:
                        decoder.decode(block, final=False)
                    except UnicodeDecodeError:
                        check_text(path)
                if text:
                    array = np.frombuffer(block, dtype=np.uint8)
                    newlines += _count(array, 10)
                    if b"\r" in block:
                        # a lone CR ends a line too (old Mac files); a CR LF pair is one ending
                        pairs = int(np.count_nonzero((array[:-1] == 13) & (array[1:] == 10)))
                        pairs += int(last == b"\r" and block[:1] == b"\n")
                        newlines += _count(array, 13) - pairs
                    elif last == b"\r" and block[:1] == b"\n":
                        newlines -= 1  # counted as a lone CR at the end of the previous block
                    if b'"' in block:
                        quotes += _count(array, 34)
                last = block[-1:]
            if decoder is not None and decoder.getstate()[0]:
                check_text(path)  # the file ends inside a character
    except FileNotFoundError as err:
        raise not_found(path) from err
    except IsADirectoryError as err:
        raise InputFileError("is a folder, not a file", file=path, hint="give the file inside it") from err
    except OSError as err:
        raise InputFileError(f"cannot be read ({err.strerror or err})", file=path) from err
    record = InputFile(role=role, path=str(path), sha256=digest.hexdigest(), bytes=path.stat().st_size)
    return Scan(
        record=record,
        newlines=newlines if text else -1,
        ends_with_newline=last in (b"\n", b"\r"),
        quotes=quotes if text else -1,
    )


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
        raise not_found(path)
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
    with path.open("rb") as handle:
        magic = handle.read(4)
    if magic == b"PK\x03\x04":
        check_archive(path, max_mb)
    elif magic == b"PAR1":
        check_parquet(path, max_mb)
    return size


def check_parquet(path: Path, max_mb: float) -> None:
    """Refuse a Parquet file whose row groups, uncompressed, add up to more than ``max_mb`` MiB."""
    import pyarrow.parquet as pq

    try:
        meta = pq.ParquetFile(path).metadata
    except Exception as err:  # pyarrow raises several kinds for a damaged footer
        raise InputFileError(f"cannot be read as Parquet ({err})", file=path) from err
    total = sum(meta.row_group(i).total_byte_size for i in range(meta.num_row_groups))
    if total > max_mb * 1024 * 1024:
        raise InputFileError(
            f"expands to {total / 2**20:,.1f} MiB of data, above the {max_mb:g} MiB input limit",
            file=path,
            hint="raise [run] max_input_mb if the file is genuine",
        )


#: A workbook part that expands more than this many times is refused (Apache POI's default
#: minimum inflate ratio is 0.01, the same 100 to 1; ordinary sheets expand 5 to 15 times).
MAX_EXPANSION = 100
#: Parts smaller than this are not held to the ratio (tiny parts compress oddly).
_RATIO_GRACE = 1 << 20
#: A workbook with more parts than this is not a tape.
MAX_PARTS = 10_000


def _size(count: int) -> str:
    """Bytes in words: ``'57 KiB'``, ``'50.0 MiB'``."""
    return f"{count / 2**20:,.1f} MiB" if count >= 2**20 else f"{max(count, 1) / 1024:,.0f} KiB"


def check_archive(path: Path, max_mb: float) -> None:
    """Refuse a workbook (a ZIP archive) that would expand beyond the input limit, before parsing it.

    The ZIP directory states each part's size before and after compression; the reader never
    reads past the stated size, so checking the directory is enough. A part is refused when
    it expands more than :data:`MAX_EXPANSION` times, and the workbook when its parts add up
    to more than ``max_mb`` MiB (the same limit as the file itself) or it has more than
    :data:`MAX_PARTS` parts.

    Raises
    ------
    InputFileError
        One line naming the workbook, the part and the sizes.
    """
    limit = max_mb * 1024 * 1024
    try:
        with zipfile.ZipFile(path) as archive:
            parts = archive.infolist()
    except (zipfile.BadZipFile, OSError, ValueError) as err:
        raise InputFileError(f"cannot be opened as a workbook (not a valid ZIP archive: {err})", file=path,
                             hint="save it again from the spreadsheet program, or export it as CSV") from err
    if len(parts) > MAX_PARTS:
        raise InputFileError(f"holds {len(parts):,} parts, more than a workbook tape has ({MAX_PARTS:,})", file=path,
                             hint="export the tape as CSV")
    total = 0
    for part in parts:
        total += part.file_size
        if part.file_size > _RATIO_GRACE and part.file_size > MAX_EXPANSION * max(part.compress_size, 1):
            raise InputFileError(
                f"its part {part.filename} expands {part.file_size / max(part.compress_size, 1):,.0f} times "
                f"({_size(part.compress_size)} to {_size(part.file_size)}), more than the "
                f"{MAX_EXPANSION} a workbook tape can (a ZIP bomb?)",
                file=path,
                hint="export the tape as CSV; if the workbook is genuine, remove its empty formatted rows",
            )
    if total > limit:
        raise InputFileError(
            f"expands to {_size(total)}, above the {max_mb:g} MiB input limit",
            file=path,
            hint="raise [run] max_input_mb if the workbook is genuine, or export the tape as CSV",
        )


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
        head = block[:400]
        # every other byte NUL: UTF-16 text without its byte-order mark (ASCII letters, each
        # followed or preceded by a zero byte)
        if len(head) >= 8 and (head[1::2].count(0) >= 0.9 * len(head[1::2]) or head[0::2].count(0) >= 0.9 * len(head[0::2])):
            raise InputFileError(
                f"is UTF-16 text, not UTF-8 (every other byte is NUL, from byte offset {nul})",
                file=path,
                hint=_SAVE_AS_UTF8,
            )
        raise InputFileError(
            f"is not a text file (a NUL byte at byte offset {nul})",
            file=path,
            hint="give a CSV, XLSX or Parquet tape",
        )


#: The fix every "not UTF-8" error of a CSV gives.
_SAVE_AS_UTF8 = "save the file as UTF-8 CSV (e.g. 'CSV UTF-8' in a spreadsheet program)"

#: The byte-order marks of UTF-16 and UTF-32 (a spreadsheet's "Unicode text" export).
_WIDE_MARKS = {b"\xff\xfe\x00\x00": "UTF-32", b"\x00\x00\xfe\xff": "UTF-32", b"\xff\xfe": "UTF-16",
               b"\xfe\xff": "UTF-16"}


def _not_utf8(path: Path, offset: int, byte: int) -> InputFileError:
    """The error for the first byte that is not UTF-8, saying where it is as a person finds it:
    the file's line and, for a CSV line read as far as that byte, the column; and the
    character the byte is in Windows-1252 (the usual other encoding of a spreadsheet's CSV).
    A UTF-16 or UTF-32 file (its byte-order mark first) is named as such."""
    hint = _SAVE_AS_UTF8
    try:
        with Path(path).open("rb") as handle:
            head = handle.read(4)
            if offset < 4:
                for mark, name in _WIDE_MARKS.items():
                    if head.startswith(mark):
                        return InputFileError(f"is {name} text, not UTF-8 (it begins with a {name} byte-order mark)",
                                              file=path, hint=hint)
            line, before, header = _line_of(handle, offset)
    except OSError:
        return InputFileError(f"is not UTF-8 text: byte offset {offset} holds 0x{byte:02x}", file=path, hint=hint)
    where = [f"line {line}"]
    column = _column_at(header, before)
    if column:
        where.append(f"column {column}")
    where += [seen] if (seen := in_windows_1252(byte)) else []
    return InputFileError(f"is not UTF-8 text: byte offset {offset} holds 0x{byte:02x} ({', '.join(where)})",
                          file=path, hint=hint)


def in_windows_1252(byte: int) -> str | None:
    """What a byte that is not UTF-8 reads as in Windows-1252, the usual other encoding of a
    spreadsheet's export (``"'é' in Windows-1252"``), or None where that code page has no
    character for it.

    >>> in_windows_1252(0xE9), in_windows_1252(0x81)
    ("'é' in Windows-1252", None)
    """
    try:
        return f"{bytes([byte]).decode('cp1252')!r} in Windows-1252"
    except UnicodeDecodeError:
        return None


def kind_or_csv(path: Path) -> FileKind:
    """:func:`file_kind`, or ``"csv"`` when it cannot be told (the file gone or unreadable, or
    its content not what its suffix says): for naming a file's rows in a message, never for
    choosing its reader."""
    try:
        return file_kind(path)
    except (OSError, AllowanceError):
        return "csv"


def _line_of(handle, offset: int) -> tuple[int, bytes, bytes]:
    """The 1-based line holding byte ``offset``, the bytes of that line before it, and the
    file's first line (its header), read from the start of ``handle``."""
    handle.seek(0)
    line, start, done, header = 1, 0, 0, b""
    while done < offset:
        block = handle.read(min(_CHUNK, offset - done))
        if not block:
            break
        if done == 0 and b"\n" in block:  # the header: the first line, when the first block holds it whole
            header = block.split(b"\n", 1)[0]
        breaks = block.count(b"\n")
        if breaks:
            line += breaks
            start = done + block.rindex(b"\n") + 1
        done += len(block)
    handle.seek(start)
    before = handle.read(offset - start)
    if line == 1:
        header = b""
    return line, before, header


def _column_at(header: bytes, before: bytes) -> str | None:
    """The header's name of the CSV field that ``before`` (a line's bytes up to a byte) ends
    in, when both read as plain comma-separated fields (no quotes: a quoted field may hold
    commas or span lines, and then no column is named)."""
    if not header or b'"' in header or b'"' in before:
        return None
    names = header.decode("utf-8-sig", errors="replace").rstrip("\r").split(",")
    index = before.count(b",")
    return names[index] if index < len(names) else None


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
            hint=_SAVE_AS_UTF8,
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


#: separators other than the comma a spreadsheet's CSV export may use (a locale with decimal commas)
_OTHER_SEPARATORS = {";": "semicolons", "\t": "tabs", "|": "vertical bars"}


def refuse_other_separators(headers: list[str], known: Collection[str], norm: Callable[[str], str], file: str | Path,
                            error: type[AllowanceError] = InputFileError, what: str = "file",
                            instead: str = "XLSX", least: int = 2) -> None:
    """Raise ``error`` when a header holds ``least`` or more of the ``known`` column names (as
    ``norm`` matches them) joined by ``;``, a tab or ``|``: a file separated by something other
    than commas. One clear error, rather than every required column reported missing;
    ``instead`` names the other format the reader takes.

    >>> refuse_other_separators(["loan_id;segment;balance"], {"loan_id", "segment"}, str.strip, "t.csv", what="tape")
    Traceback (most recent call last):
    ...
    allowance.exceptions.InputFileError: t.csv: the header 'loan_id;segment;balance' holds the column names joined by semicolons: the file is separated by semicolons, not commas (fix: save the tape as CSV with commas between values (in a spreadsheet: CSV, comma delimited), or as XLSX)
    >>> refuse_other_separators(["loan_id", "segment"], {"loan_id", "segment"}, str.strip, "t.csv")
    """
    for header in headers:
        for mark, word in _OTHER_SEPARATORS.items():
            names = [norm(part) for part in header.split(mark)]
            if len(names) > 1 and sum(n in known for n in names) >= least:
                shown = header if len(header) <= 60 else header[:57] + "..."
                raise error(
                    f"the header {shown!r} holds the column names joined by {word}: the file is separated by "
                    f"{word}, not commas", file=file,
                    hint=f"save the {what} as CSV with commas between values (in a spreadsheet: CSV, comma "
                         f"delimited), or as {instead}",
                )
