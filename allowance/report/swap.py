"""Replace a finished output folder in one step, so that a folder never mixes two runs.

Implements
----------
replace_folder  write a new folder beside the old one and swap them with renames
FolderSwap      the same in steps: open (lock, partial folder), fill (files, swap), close
recover         finish off what a killed run left beside an output folder
FolderLock      one writer per output folder at a time

How a folder is replaced
------------------------
For an output folder ``out``, in its parent folder:

1. ``.out.lock`` is locked (``flock``), so two runs never write one folder at once; what an
   earlier, killed run left behind is cleaned up first (:func:`recover`).
2. Every file of the run is written into a fresh ``.out.partial-XXXX``.
3. Entries of the old ``out`` that are not run outputs (a user's notes, the demo's
   ``prior_quarter`` folder) are moved into the partial folder, so they survive the swap.
4. ``out`` is renamed to ``.out.backup-<UTC date and time>-XXXX`` and the partial folder to
   ``out``: two renames, each atomic. Between them ``out`` is briefly missing; it never
   holds files of two runs.
5. The dated backup is deleted. If it cannot be (a file in it is immutable), it is kept and
   the caller is told where.

A kill at any step leaves the previous complete run either in ``out`` or in the dated
backup; the next run's :func:`recover` puts it back (an interrupted swap is rolled back, not
forward: the killed run never reported success), returns carried entries to ``out`` and
deletes the partial folder. Cleaning never deletes an entry that is not a run output.
"""

from __future__ import annotations

import os
import shutil
import signal
import tempfile
import threading
from collections.abc import Callable, Collection
from datetime import datetime, timezone
from pathlib import Path

from allowance.exceptions import OutputError

try:  # POSIX; elsewhere runs are trusted not to write one folder at once
    import fcntl
except ImportError:  # pragma: no cover
    fcntl = None  # type: ignore[assignment]

__all__ = ["FolderLock", "FolderSwap", "recover", "replace_folder"]

_PARTIAL = ".partial-"
_BACKUP = ".backup-"


def _sibling(out_dir: Path, kind: str) -> str:
    return f".{out_dir.name}{kind}"


class FolderLock:
    """An exclusive lock on ``.<out>.lock`` beside the output folder, held while writing it.

    The lock is released when the process ends, however it ends (a killed run leaves no
    stale lock). The lock file is removed on release; a run that opened it just before then
    notices the file was replaced and locks the new one.
    """

    def __init__(self, out_dir: Path) -> None:
        self.path = out_dir.parent / f".{out_dir.name}.lock"
        self._fd: int | None = None

    def __enter__(self) -> "FolderLock":
        self.acquire()
        return self

    def __exit__(self, *exc: object) -> None:
        self.release()

    def acquire(self) -> "FolderLock":
        """Take the lock; :class:`OutputError` when another run holds it."""
        if fcntl is None:  # pragma: no cover
            return self
        for _ in range(100):
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o666)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                os.close(fd)
                raise OutputError(
                    "another run is writing this output folder right now",
                    file=self.path.parent / self.path.name[1:-5],
                    hint="wait for it to finish, or choose another --out folder",
                ) from None
            try:
                same = os.fstat(fd).st_ino == os.stat(self.path).st_ino
            except FileNotFoundError:
                same = False
            if same:
                self._fd = fd
                return self
            os.close(fd)  # the file was removed and made again meanwhile: lock the new one
        raise OutputError("cannot lock the output folder", file=self.path)  # pragma: no cover

    def release(self) -> None:
        """Remove the lock file and release the lock."""
        if self._fd is not None:
            try:
                os.unlink(self.path)
            except OSError:
                pass
            os.close(self._fd)
            self._fd = None


def _leftovers(out_dir: Path, kind: str) -> list[Path]:
    prefix = _sibling(out_dir, kind)
    try:
        return sorted(p for p in out_dir.parent.iterdir() if p.name.startswith(prefix) and p.is_dir())
    except OSError:
        return []


def _return_entries(source: Path, target: Path, owned: Collection[str]) -> bool:
    """Move the entries of ``source`` that are not run outputs back into ``target``.

    Returns True when ``source`` holds nothing else of the user's afterwards.
    """
    clean = True
    for entry in sorted(source.iterdir()):
        if entry.name in owned:
            continue
        destination = target / entry.name
        if destination.exists() or destination.is_symlink():
            clean = False  # the same name was made again meanwhile: keep both, touch neither
            continue
        try:
            os.rename(entry, destination)
        except OSError:
            clean = False
    return clean


def _remove(folder: Path) -> bool:
    """Delete a folder of run outputs; a symlink is unlinked. True when it is gone."""
    try:
        if folder.is_symlink():
            folder.unlink()
        else:
            shutil.rmtree(folder)
    except OSError:
        return False
    return True


def _foreign(folder: Path, owned: Collection[str]) -> bool:
    try:
        return any(entry.name not in owned for entry in folder.iterdir())
    except OSError:
        return True


def _discard(folder: Path, out_dir: Path, owned: Collection[str]) -> bool:
    """Return the user's entries in ``folder`` to ``out_dir``, then delete it; keep it if they cannot go back."""
    if not folder.is_dir():
        return True  # already swapped into place, or never made
    if out_dir.is_dir():
        if not _return_entries(folder, out_dir, owned):
            return False
    elif _foreign(folder, owned):
        return False
    return _remove(folder)


def recover(out_dir: Path, owned: Collection[str]) -> list[str]:
    """Clean up after runs killed while writing ``out_dir``; call it holding :class:`FolderLock`.

    An interrupted swap (``out_dir`` missing, a dated backup present) is rolled back: the
    newest backup becomes ``out_dir`` again. Partial folders are deleted after the user's
    entries carried into them are returned; backups left after a finished swap are
    deleted likewise. Returns notes about anything that could not be cleaned.
    """
    notes: list[str] = []
    backups = _leftovers(out_dir, _BACKUP)
    if backups and not (out_dir.exists() or out_dir.is_symlink()):
        newest = backups.pop()  # names sort by their UTC date and time
        os.rename(newest, out_dir)
    for folder in (*_leftovers(out_dir, _PARTIAL), *backups):
        if not _discard(folder, out_dir, owned):
            notes.append(f"{folder} was left by an interrupted run and could not be cleaned up; "
                         "check it and delete it by hand")
    return notes


def _make_partial(out_dir: Path) -> Path:
    partial = Path(tempfile.mkdtemp(prefix=_sibling(out_dir, _PARTIAL), dir=out_dir.parent))
    # mkdtemp makes the folder private; the finished folder gets the user's usual mode
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(partial, 0o777 & ~umask)
    return partial


def _backup_name(out_dir: Path) -> Path:
    stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%SZ")
    for n in range(1000):
        candidate = out_dir.parent / f"{_sibling(out_dir, _BACKUP)}{stamp}-{os.getpid()}-{n}"
        if not (candidate.exists() or candidate.is_symlink()):
            return candidate
    raise OutputError("cannot name a backup of the previous outputs", file=out_dir)  # pragma: no cover


class _SignalsDeferred:
    """Hold SIGINT and SIGTERM back while the folders are swapped; act on them right after.

    Only in the main thread (where Python runs signal handlers); elsewhere nothing changes
    and :func:`recover` is what makes an interruption safe.
    """

    _SIGNALS = (signal.SIGINT, signal.SIGTERM)

    def __enter__(self) -> "_SignalsDeferred":
        self.received: list[int] = []
        self.previous: dict[int, object] = {}
        if threading.current_thread() is threading.main_thread():
            for sig in self._SIGNALS:
                self.previous[sig] = signal.signal(sig, lambda number, frame: self.received.append(number))
        return self

    def __exit__(self, *exc: object) -> None:
        for sig, handler in self.previous.items():
            signal.signal(sig, handler)  # type: ignore[arg-type]
        for sig in dict.fromkeys(self.received):
            handler = self.previous.get(sig)
            if callable(handler):
                handler(sig, None)
            elif handler == signal.SIG_DFL:
                os.kill(os.getpid(), sig)


def _swap(partial: Path, out_dir: Path, owned: Collection[str]) -> list[str]:
    """Steps 3 to 5 of the module notes. On failure the old folder is as it was."""
    if not (out_dir.exists() or out_dir.is_symlink()):
        os.rename(partial, out_dir)
        return []
    with _SignalsDeferred():
        for entry in sorted(out_dir.iterdir()):
            if entry.name not in owned:
                os.rename(entry, partial / entry.name)
        backup = _backup_name(out_dir)
        os.rename(out_dir, backup)
        try:
            os.rename(partial, out_dir)
        except OSError:
            os.rename(backup, out_dir)
            raise
        if not _remove(backup):
            return [f"the previous outputs could not all be deleted and are kept in {backup}; delete it by hand"]
    return []


def _cannot(what: str, err: OSError, where: Path, hint: str) -> OutputError:
    return OutputError(f"cannot {what} ({err.strerror or err})", file=err.filename or where, hint=hint)


class FolderSwap:
    """:func:`replace_folder` in three steps, for a caller that starts writing before it knows
    every file: :meth:`open` (the lock, clean-up, a fresh partial folder), :meth:`fill` (the
    files, then the swap) and :meth:`close` (the lock released; a folder never filled is
    discarded). A context manager: ``with FolderSwap(out, owned) as partial: ...``.

    Between :meth:`open` and :meth:`close` the output folder is locked (another run writing
    it is refused) and the previous outputs are untouched.
    """

    def __init__(self, out_dir: Path, owned: Collection[str]) -> None:
        out_dir = Path(out_dir)
        if out_dir.is_symlink() and out_dir.is_dir():
            out_dir = out_dir.resolve()
        self.out_dir = out_dir.absolute()
        self.owned = owned
        self.partial: Path | None = None
        self.notes: list[str] = []
        self._lock: FolderLock | None = None
        self._filled = False

    def open(self) -> Path:
        """Lock the folder, clean up after killed runs, and make the partial folder (returned).

        Raises
        ------
        OutputError
            The folder cannot be created or locked (another run is writing it).
        """
        create = "check the path and that you may write there"
        try:
            self.out_dir.parent.mkdir(parents=True, exist_ok=True)
            lock = FolderLock(self.out_dir)
            lock.acquire()
        except OSError as err:
            raise _cannot("create the output folder", err, self.out_dir, create) from err
        self._lock = lock
        try:
            self.notes = recover(self.out_dir, self.owned)
            self.partial = _make_partial(self.out_dir)
        except BaseException as err:
            self.close()
            if isinstance(err, OSError):
                raise _cannot("create the output folder", err, self.out_dir, create) from err
            raise
        return self.partial

    def fill(self, write: Callable[[Path], object]) -> object:
        """``write(partial)``, then the swap; returns what ``write`` returned. On any error the
        partial folder is discarded and the previous outputs are as they were.

        Raises
        ------
        OutputError
            A file cannot be written or the folders cannot be swapped (an :class:`OSError`).
        """
        if self.partial is None or self._filled:
            raise RuntimeError("FolderSwap.fill: open it first, and fill it once")
        try:
            done = write(self.partial)
            self.notes += _swap(self.partial, self.out_dir, self.owned)
        except BaseException as err:
            self._discard()
            if isinstance(err, OSError):
                raise _cannot("write the outputs", err, self.out_dir,
                              "check free space and permissions; the previous outputs are unchanged") from err
            raise
        self._filled = True
        return done

    def _discard(self) -> None:
        if self.partial is not None and not self._filled:
            if not _discard(self.partial, self.out_dir, self.owned):
                recover(self.out_dir, self.owned)  # the swap was cut between its two renames: roll it back
            self.partial = None

    def close(self) -> None:
        """Discard the partial folder if it was never filled, and release the lock."""
        try:
            self._discard()
        finally:
            if self._lock is not None:
                self._lock.release()
                self._lock = None

    def __enter__(self) -> Path:
        return self.open()

    def __exit__(self, *exc: object) -> None:
        self.close()


def replace_folder(out_dir: Path, write: Callable[[Path], object], owned: Collection[str]) -> list[str]:
    """Write a run's files with ``write(folder)`` and put the folder in place of ``out_dir``.

    Parameters
    ----------
    out_dir
        The output folder; created (its parent too) when missing. A symlink to a folder is
        followed: the folder it points to is the one replaced.
    write
        Writes every output file into the folder it is given (a fresh partial folder).
    owned
        The names of run outputs. Other entries of an existing ``out_dir`` are kept.

    Returns
    -------
    list of str
        Notes about leftovers that could not be cleaned (for the run's warnings).

    Raises
    ------
    OutputError
        The folder cannot be created, written or swapped; the previous outputs are intact.
    """
    swap = FolderSwap(out_dir, owned)
    swap.open()
    try:
        swap.fill(write)
        return swap.notes
    finally:
        swap.close()
