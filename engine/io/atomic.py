"""Write a group of files so that the group is replaced whole or not at all.

1. Each new file is written to a temporary file beside its target
   (``.NAME.<pid>-<random>.part``) and flushed to disk (``fsync``). A failure
   or an interruption here leaves the previous files untouched.
2. The old files are kept under temporary names (hard links, or copies where
   the file system has none), for a roll-back if a rename fails.
3. With a ``journal`` (as :func:`engine.io.save_result` passes for a result's
   mask, table, sidecar and SEG), a small file listing the renames to come is
   written and flushed: from here on the new group is complete on disk and
   the save counts as done.
4. Every temporary file is renamed over its target (``os.replace``, atomic per
   file on POSIX and Windows), files to delete are deleted, the folder is
   flushed, and the journal and the kept old files are removed.

Ctrl-C (and SIGTERM) is held back during steps 3 and 4 and delivered right
after them. A kill that cannot be held (SIGKILL, power loss) can stop the
renames half-way; the journal is then still there, and the next call that
touches the same group (:func:`finish_interrupted`, which
:func:`engine.io.save_result`, :func:`engine.io.save_sidecar` and
:func:`engine.io.verify` call first) completes the renames, so the group
read back is always either the whole previous one or the whole new one.
Temporary files left by a process that was killed are removed by the next
save to the same place (:func:`remove_leftovers`).

References
----------
POSIX.1-2017, ``rename()`` (atomic replacement of one name) and ``fsync()``;
write-ahead logging as in C. Mohan et al., "ARIES", ACM TODS 17(1) (1992)
94-162 (the journal is written and flushed before the changes it lists).
"""

from __future__ import annotations

import json
import os
import secrets
import shutil
import signal
import threading
import time
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from pathlib import Path

from engine.io.errors import SaveError

__all__ = ["commit_files", "finish_interrupted", "remove_leftovers", "held_signals"]

#: Signals held back while the renames run.
_HELD = tuple(s for s in (getattr(signal, "SIGINT", None), getattr(signal, "SIGTERM", None)) if s is not None)
#: Kind recorded in a journal file.
_JOURNAL_KIND = "Isotide save journal"
#: On systems without ``os.kill(pid, 0)``: temporary files older than this (s) are leftovers.
_STALE_S = 3600.0


def _file_mode(target: Path) -> int:
    """Permissions for ``target``: those of the file it replaces, else 0o666 less the umask (as ``open`` does)."""
    try:
        return target.stat().st_mode & 0o7777
    except OSError:
        mask = os.umask(0)
        os.umask(mask)
        return 0o666 & ~mask


def _temp_name(target: Path, suffix: str) -> Path:
    return target.with_name(f".{target.name}.{os.getpid()}-{secrets.token_hex(4)}{suffix}")


def _write_temp(target: Path, data: bytes) -> Path:
    temp = _temp_name(target, ".part")
    fd = os.open(temp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_BINARY", 0), 0o600)
    try:
        if hasattr(os, "fchmod"):  # created 0600; give the usual permissions
            os.fchmod(fd, _file_mode(target))
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
    except BaseException:
        temp.unlink(missing_ok=True)
        raise
    return temp


def _keep_old(target: Path) -> Path | None:
    if not target.exists():
        return None
    backup = _temp_name(target, ".old")
    try:
        os.link(target, backup)
    except OSError:
        shutil.copy2(target, backup)
    return backup


def _fsync_folder(folder: Path) -> None:
    if os.name != "posix":
        return
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


@contextmanager
def held_signals() -> Iterator[None]:
    """Hold Ctrl-C and SIGTERM back for the block, then deliver them (main thread only).

    Elsewhere signals are not delivered to the running thread anyway, so
    the block runs as it is.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught: list[int] = []
    previous = {}
    for sig in _HELD:
        previous[sig] = signal.signal(sig, lambda signum, frame: caught.append(signum))
    try:
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler if handler is not None else signal.SIG_DFL)
        for sig in dict.fromkeys(caught):
            signal.raise_signal(sig)


def _pid_alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True
    return True


def remove_leftovers(targets: Sequence[Path]) -> list[Path]:
    """Delete temporary files of ``targets`` left by saves that were killed; return them.

    A temporary file ``.NAME.<pid>-<random>.part`` (or ``.old``) is left over
    when process ``<pid>`` no longer runs (on systems where that cannot be
    asked: when it is more than an hour old). Files of a save running in
    another process right now are left alone.
    """
    removed: list[Path] = []
    for target in targets:
        folder = target.parent
        if not folder.is_dir():
            continue
        prefix = f".{target.name}."
        for candidate in folder.iterdir():
            name = candidate.name
            if not (name.startswith(prefix) and name.endswith((".part", ".old"))):
                continue
            tag = name[len(prefix):].rsplit(".", 1)[0]
            pid_text = tag.split("-", 1)[0]
            if hasattr(os, "kill") and os.name == "posix" and pid_text.isdigit():
                stale = not _pid_alive(int(pid_text))
            else:
                try:
                    stale = time.time() - candidate.stat().st_mtime > _STALE_S
                except OSError:
                    continue
            if stale:
                candidate.unlink(missing_ok=True)
                removed.append(candidate)
    return removed


def _write_journal(journal: Path, renames: Mapping[Path, Path], remove: Sequence[Path],
                   backups: Mapping[Path, Path | None]) -> None:
    doc = {
        "Kind": _JOURNAL_KIND,
        "Pid": os.getpid(),
        "Replace": [{"Temp": temp.name, "Target": target.name} for target, temp in renames.items()],
        "Remove": [p.name for p in remove],
        "Backups": [b.name for b in backups.values() if b is not None],
    }
    temp = _write_temp(journal, (json.dumps(doc, indent=1) + "\n").encode("utf-8"))
    os.replace(temp, journal)
    _fsync_folder(journal.parent)


def finish_interrupted(journal: Path) -> bool:
    """Complete a save that was stopped after its journal was written; True when there was one.

    The journal lists temporary files that are complete on disk; each one
    still present is renamed over its target, the files listed for removal
    are deleted, then the journal and the kept old files go. Running it
    twice, or after a second interruption, gives the same files.

    Raises
    ------
    SaveError
        The journal cannot be read, or a rename fails (the message names the
        folder and the journal).
    """
    journal = Path(journal)
    if not journal.exists():
        return False
    folder = journal.parent
    try:
        doc = json.loads(journal.read_text(encoding="utf-8"))
        if doc.get("Kind") != _JOURNAL_KIND:
            raise ValueError("not a save journal")
        replace = [(folder / e["Temp"], folder / e["Target"]) for e in doc["Replace"]]
        remove = [folder / n for n in doc["Remove"]]
        backups = [folder / n for n in doc["Backups"]]
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise SaveError(
            f"{folder}: an interrupted save left {journal.name}, which cannot be read ({exc}); "
            "check the result's files and delete it"
        ) from None
    with held_signals():
        try:
            for temp, target in replace:
                if temp.exists():
                    os.replace(temp, target)
            for path in remove:
                path.unlink(missing_ok=True)
            _fsync_folder(folder)
        except OSError as exc:
            raise SaveError(
                f"{folder}: cannot finish an interrupted save ({exc.strerror or exc}); {journal.name} is kept"
            ) from None
        journal.unlink(missing_ok=True)
        for backup in backups:
            backup.unlink(missing_ok=True)
        _fsync_folder(folder)
    return True


def _folder_problem(target: Path) -> str | None:
    """Why ``target``'s folder cannot hold files: a regular file on its path, or ``None``."""
    for parent in [target.parent, *target.parent.parents]:
        if parent.exists():
            return None if parent.is_dir() else f"{parent} is a file, not a folder"
    return None


def _write_error(target: Path, exc: OSError) -> SaveError:
    """A :class:`SaveError` naming the folder and file the user asked for (never a temporary file)."""
    problem = _folder_problem(target)
    if problem is not None:
        return SaveError(f"{target.parent}: cannot write there: {problem}; nothing changed")
    return SaveError(f"{target.parent}: cannot write {target.name} ({exc.strerror or exc}); nothing changed")


def commit_files(files: Mapping[Path, bytes], *, remove: Sequence[Path] = (), journal: Path | None = None,
                 checkpoint: Callable[[], None] | None = None) -> None:
    """Write ``files`` (target -> bytes, in order) and delete ``remove``, all or nothing.

    Parameters
    ----------
    files : mapping of Path to bytes
        What to write where.
    remove : sequence of Path
        Files to delete as part of the same change.
    journal : Path, optional
        Where to record the renames before they start (all targets must then
        be in the journal's folder): a kill during the renames is finished
        by the next :func:`finish_interrupted` instead of leaving a mix of old
        and new files.
    checkpoint : callable, optional
        Called before each temporary file is written and once more before
        the renames; an exception raised from it stops the save with the
        previous files untouched and the temporary files removed (a command
        line's Ctrl-C, a window's Cancel).

    Raises
    ------
    SaveError
        Something could not be written; the previous files are back in place.
        The message names the target's folder, never a temporary file.
    """
    targets = [Path(t) for t in files]
    if journal is not None:
        journal = Path(journal)
        if any(t.parent != journal.parent for t in [*targets, *remove]):
            raise ValueError("journal: every target must be in the journal's folder")
        finish_interrupted(journal)
    temps: dict[Path, Path] = {}
    target = targets[0] if targets else Path(".")
    try:
        for target in targets:
            problem = _folder_problem(target)
            if problem is not None:
                raise NotADirectoryError(20, "Not a directory", str(target.parent))
            target.parent.mkdir(parents=True, exist_ok=True)
        remove_leftovers([*targets, *remove, *([journal] if journal is not None else [])])
        for target in targets:
            if checkpoint is not None:
                checkpoint()
            temps[target] = _write_temp(target, files[target])
        if checkpoint is not None:
            checkpoint()
    except OSError as exc:
        for temp in temps.values():
            temp.unlink(missing_ok=True)
        raise _write_error(target, exc) from exc
    except BaseException:
        for temp in temps.values():
            temp.unlink(missing_ok=True)
        raise
    backups: dict[Path, Path | None] = {}
    done: list[Path] = []
    with held_signals():
        try:
            for target in [*temps, *remove]:
                backups[target] = _keep_old(target)
            if journal is not None:
                _write_journal(journal, temps, remove, backups)
            for target, temp in temps.items():
                os.replace(temp, target)
                done.append(target)
            for target in remove:
                target.unlink(missing_ok=True)
                done.append(target)
        except OSError as exc:
            for target in done:
                backup = backups.get(target)
                if backup is not None:
                    os.replace(backup, target)
                else:
                    target.unlink(missing_ok=True)
            if journal is not None:
                journal.unlink(missing_ok=True)
            for temp in temps.values():
                temp.unlink(missing_ok=True)
            for backup in backups.values():
                if backup is not None:
                    backup.unlink(missing_ok=True)
            where = Path(exc.filename).parent if exc.filename else target.parent
            raise SaveError(f"{where}: cannot replace the result's files ({exc.strerror or exc}); "
                            "previous result restored") from exc
        for folder in {t.parent for t in [*temps, *remove]}:
            _fsync_folder(folder)
        if journal is not None:
            journal.unlink(missing_ok=True)
        for backup in backups.values():
            if backup is not None:
                backup.unlink(missing_ok=True)
