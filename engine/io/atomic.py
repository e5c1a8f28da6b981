"""Write a group of files so that a failure leaves the previous group intact.

Each new file is written to a temporary file in the target folder and
flushed to disk (``fsync``); only when all are written are they renamed over
the targets (``os.replace``, atomic per file on POSIX and Windows), the last
one last. Before a target is replaced, the old file is kept under a
temporary name (a hard link when the file system allows, a copy otherwise);
if any rename fails, the old files are put back. Finally the folder entry is
flushed (POSIX).
"""

from __future__ import annotations

import os
import shutil
import tempfile
from collections.abc import Mapping, Sequence
from pathlib import Path

from engine.io.errors import SaveError

__all__ = ["commit_files"]


def _file_mode(target: Path) -> int:
    """Permissions for ``target``: those of the file it replaces, else 0o666 less the umask (as ``open`` does)."""
    try:
        return target.stat().st_mode & 0o7777
    except OSError:
        mask = os.umask(0)
        os.umask(mask)
        return 0o666 & ~mask


def _write_temp(target: Path, data: bytes) -> Path:
    fd, name = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.", suffix=".part")
    try:
        if hasattr(os, "fchmod"):  # mkstemp makes 0600 files; give the usual permissions
            os.fchmod(fd, _file_mode(target))
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
    except BaseException:
        Path(name).unlink(missing_ok=True)
        raise
    return Path(name)


def _keep_old(target: Path) -> Path | None:
    if not target.exists():
        return None
    fd, name = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.", suffix=".old")
    os.close(fd)
    backup = Path(name)
    backup.unlink()
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


def commit_files(files: Mapping[Path, bytes], *, remove: Sequence[Path] = ()) -> None:
    """Write ``files`` (target -> bytes, in order) and delete ``remove``, all or nothing.

    Raises
    ------
    SaveError
        Something could not be written; the previous files are back in place.
    """
    temps: dict[Path, Path] = {}
    try:
        for target, data in files.items():
            target.parent.mkdir(parents=True, exist_ok=True)
            temps[target] = _write_temp(target, data)
    except OSError as exc:
        for temp in temps.values():
            temp.unlink(missing_ok=True)
        raise SaveError(f"{exc.filename or target}: cannot write ({exc.strerror or exc}); nothing changed") from exc
    backups: dict[Path, Path | None] = {}
    done: list[Path] = []
    try:
        for target in [*temps, *remove]:
            backups[target] = _keep_old(target)
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
        for temp in temps.values():
            temp.unlink(missing_ok=True)
        for backup in backups.values():
            if backup is not None:
                backup.unlink(missing_ok=True)
        raise SaveError(f"{exc.filename}: cannot replace ({exc.strerror or exc}); previous result restored") from exc
    for backup in backups.values():
        if backup is not None:
            backup.unlink(missing_ok=True)
    for folder in {t.parent for t in [*temps, *remove]}:
        _fsync_folder(folder)
