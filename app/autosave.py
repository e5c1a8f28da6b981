"""Autosave to a recovery file, and recovery of another run's work after a crash.

While a case has unsaved changes, :class:`Autosaver` writes it to
``<recovery folder>/session-<pid>.tide`` (a working session,
:mod:`engine.session.working`) three seconds after the last change, and at
the latest :data:`INTERVAL_S` seconds after the first unsaved one, so no
more than that is ever lost. The write runs in a helper thread from an
immutable copy of the session. A lock file held for the life of the process
tells a running window's file from one left behind by a crash;
:func:`orphaned` lists those, and the next start offers to recover them.
"""

from __future__ import annotations

import os
import threading
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from PySide6.QtCore import QLockFile, QObject, QStandardPaths, QTimer, Signal

from app.controller import SessionController
from engine.session.working import WorkingSummary, capture, read_summary, write_working

__all__ = ["Autosaver", "recovery_folder", "orphaned", "forget", "INTERVAL_S"]

#: Longest time unsaved work waits for an autosave (s).
INTERVAL_S = 30.0
#: Quiet time after a change before it is autosaved (s).
IDLE_S = 3.0


def recovery_folder() -> Path:
    """Where recovery files live (the user's application data folder)."""
    base = QStandardPaths.writableLocation(QStandardPaths.StandardLocation.AppDataLocation)
    folder = Path(base or Path.home() / ".isotide") / "recovery"
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def _lock(folder: Path, pid: int) -> QLockFile:
    lock = QLockFile(str(folder / f"session-{pid}.lock"))
    lock.setStaleLockTime(0)  # stale only when its process is gone
    return lock


def orphaned(folder: Path | None = None) -> list[WorkingSummary]:
    """Recovery files whose window is no longer running, newest first (unreadable ones are skipped)."""
    folder = folder or recovery_folder()
    found = []
    for path in folder.glob("session-*.tide"):
        try:
            pid = int(path.stem.split("-", 1)[1])
        except (IndexError, ValueError):
            continue
        if pid == os.getpid():
            continue
        lock = _lock(folder, pid)
        if not lock.tryLock(0):
            continue  # its window is running
        lock.unlock()
        try:
            found.append(read_summary(path))
        except ValueError:
            continue
    return sorted(found, key=lambda s: s.saved, reverse=True)


def forget(path: Path) -> None:
    """Delete a recovery file (recovered or discarded) and its lock."""
    path = Path(path)
    path.unlink(missing_ok=True)
    path.with_suffix(".lock").unlink(missing_ok=True)


class Autosaver(QObject):
    """Writes the case to this window's recovery file while it has unsaved changes."""

    saved = Signal(str)  # path written
    failed = Signal(str)
    _written = Signal(str, str)  # path, error (from the writer thread)

    def __init__(self, controller: SessionController, meta: Callable[[], dict[str, Any]], *,
                 folder: Path | None = None, interval_s: float = INTERVAL_S, idle_s: float = IDLE_S) -> None:
        super().__init__(controller)
        self.controller = controller
        self.meta = meta
        self.folder = folder or recovery_folder()
        self.interval_s = float(interval_s)
        self.idle_s = float(min(idle_s, interval_s))
        self.path = self.folder / f"session-{os.getpid()}.tide"
        self.lock = _lock(self.folder, os.getpid())
        self.lock.tryLock(0)
        self._seen: Any = None
        self._written_key: Any = None
        self._first_change: float | None = None
        self._last_change = 0.0
        self._writer: threading.Thread | None = None
        self.last_saved: float | None = None
        self._written.connect(self._after_write)
        self.timer = QTimer(self)
        self.timer.setInterval(int(min(1000, 250 * self.idle_s + 100)))
        self.timer.timeout.connect(self.tick)
        self.timer.start()

    def _key(self) -> Any:
        s = self.controller.session
        return None if s is None else (id(s), s.state)  # every change makes a new (immutable) state

    def tick(self) -> None:
        """Check for changes and autosave when one is due."""
        session = self.controller.session
        now = time.monotonic()
        key = self._key()
        if key != self._seen:
            self._seen = key
            self._last_change = now
            if self._first_change is None:
                self._first_change = now
        if session is None or not session.modified:
            self._first_change = None
            if self.path.exists() and self._writer is None:
                self.path.unlink(missing_ok=True)
            return
        if key == self._written_key or self._writer is not None:
            return
        if self._first_change is None:
            self._first_change = now
        tick = self.timer.interval() / 1000.0  # start early enough that the write begins within the interval
        due = now - self._last_change >= self.idle_s or now - self._first_change >= self.interval_s - tick
        if due:
            self.save_now()

    def save_now(self) -> bool:
        """Start an autosave now; False when the session is busy for a moment (tried again next tick)."""
        session = self.controller.session
        if session is None or self._writer is not None:
            return False
        copy = capture(session, meta=self.meta(), blocking=False)
        if copy is None:
            return False
        key = self._key()

        def write() -> None:
            try:
                write_working(copy, self.path)
                self._written.emit(str(self.path), "")
            except Exception as exc:  # noqa: BLE001 - reported; autosave tries again
                self._written.emit(str(self.path), str(exc))

        self._pending_key = key
        self._writer = threading.Thread(target=write, name="isotide-autosave", daemon=True)
        self._writer.start()
        return True

    def _after_write(self, path: str, error: str) -> None:
        self._writer = None
        if error:
            self.failed.emit(error)
            return
        self._written_key = self._pending_key
        self._first_change = None
        self.last_saved = time.monotonic()
        self.saved.emit(path)

    def discard(self) -> None:
        """Forget this window's recovery file (the work was saved or deliberately closed)."""
        if self._writer is not None:
            self._writer.join(timeout=10.0)
            self._writer = None
        self.path.unlink(missing_ok=True)
        self._written_key = self._key()

    def close(self) -> None:
        """Stop autosaving and release the lock (a clean exit: nothing to recover)."""
        self.timer.stop()
        self.discard()
        self.lock.unlock()
