"""The case's controller: every change the window makes goes through here to the worker thread.

:class:`SessionController` owns the Session of the case in view, its
:class:`~app.worker.WorkerThread`, and the Qt undo stack mirroring the
Session's. Each user action becomes a :class:`~app.worker.Request`; the
worker runs requests one after another, so they take effect in the order
they were made. A change while a front evolves first pauses it (its cancel
token is set; the run stops within one step and becomes one command), and
edits of that very front resume it afterwards. Settings of the running front
go to the Session at once from a helper thread, so they reach the front at
its next step. The GUI thread never waits for the engine.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from typing import Any

from PySide6.QtCore import QObject, QTimer, Signal
from PySide6.QtGui import QUndoStack

from app.undo_mirror import UndoMirror
from app.worker import Outcome, Request, WorkerThread
from engine.session import Session

__all__ = ["SessionController"]

log = logging.getLogger("isotide.app")

Done = Callable[[Outcome], None]


class SessionController(QObject):
    """Runs Session calls for the window (see the module docstring)."""

    caseChanged = Signal()  # a new Session (or none)
    changed = Signal()  # a request finished: labels, outlines or the live front may differ
    frameReady = Signal()  # a new live frame: read controller.session.frame()
    runningChanged = Signal(bool)  # a front started or stopped evolving
    idleChanged = Signal(bool)  # no request left to run
    failed = Signal(str, str)  # one-line message, what was being done
    runFinished = Signal(object)  # the last Frame of an evolve run
    _settingsResult = Signal(str)  # from the settings helper thread (queued to the GUI thread)

    def __init__(self, parent: QObject | None = None) -> None:
        super().__init__(parent)
        self.session: Session | None = None
        self.undo_stack = QUndoStack(self)
        self.mirror = UndoMirror(self.undo_stack, self.undo, self.redo)
        self._thread: WorkerThread | None = None
        self._retiring: list[WorkerThread] = []
        self._pending: dict[int, Request] = {}
        self._callbacks: dict[int, Done] = {}
        self._settings_pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="isotide-settings")
        self._was_running = False
        self._was_idle = True
        self.requests_done = 0
        self._catching_up = False
        self._seen_index = 0
        self._settingsResult.connect(self._settings_reported)
        #: Asked before each request (by its ``what``); False drops it (an approved result asks before an edit).
        self.guard: Callable[[str], bool] | None = None

    # ------------------------------------------------------------- the case
    def set_session(self, session: Session | None) -> None:
        """Show ``session`` (None: no case); the previous case's worker stops cleanly."""
        self._retire()
        self.session = session
        self.mirror.clear()
        if session is not None:
            self._thread = WorkerThread(session)
            self._thread.worker.done.connect(self._on_done)
            self._thread.worker.frame.connect(self._on_frame)
            self.mirror.reconcile(session)
            self._seen_index = session.undo_index
        self._update_flags()
        self.caseChanged.emit()
        self.changed.emit()

    def _retire(self) -> None:
        for request in self._pending.values():
            request.cancel.set()
        self._pending.clear()
        self._callbacks.clear()
        thread = self._thread
        self._thread = None
        if thread is None:
            return
        thread.worker.done.disconnect(self._on_done)
        thread.worker.frame.disconnect(self._on_frame)
        if not thread.stop():
            self._retiring.append(thread)
            thread.thread.finished.connect(self._prune_retired)  # a bound method: runs in the GUI thread

    def _prune_retired(self) -> None:
        self._retiring = [t for t in self._retiring if not t.thread.isFinished()]

    def shutdown(self, *, wait_ms: int = 10000) -> bool:
        """Stop every worker (a running front stops within one step); True when all have finished."""
        self._retire()
        self.session = None
        ok = all(t.stop(wait_ms=wait_ms) for t in list(self._retiring))
        self._retiring.clear()
        self._settings_pool.shutdown(wait=True)
        return ok

    # ------------------------------------------------------------ state
    @property
    def evolving(self) -> bool:
        """A front is evolving or about to (an evolve run not paused)."""
        return any(r.kind == "evolve" and not r.cancel.is_set() for r in self._pending.values())

    @property
    def idle(self) -> bool:
        """Nothing left for the worker to do."""
        return not self._pending

    @property
    def retiring(self) -> int:
        """Workers of earlier cases still finishing their last step."""
        return len(self._retiring)

    def _update_flags(self) -> None:
        running, idle = self.evolving, self.idle
        if running != self._was_running:
            self._was_running = running
            self.runningChanged.emit(running)
        if idle != self._was_idle:
            self._was_idle = idle
            self.idleChanged.emit(idle)

    # ------------------------------------------------------------ requests
    def submit(self, what: str, call: Callable[[Session], Any] | None = None, *, kind: str = "call",
               steps: int | None = None, pause: bool = True, resume: bool = False,
               on_done: Done | None = None) -> Request | None:
        """Queue a Session call (``kind="evolve"``: then evolve); returns the request, None without a case.

        ``pause``: a running front is paused first. ``resume``: it evolves
        again after the call (only when it was running).
        """
        if self.session is None or self._thread is None:
            return None
        if self.guard is not None and not self.guard(what):
            return None
        was_running = self.evolving
        if pause and was_running:
            self.pause()
        request = Request(kind, what, call, steps)
        self._send(request, on_done)
        if resume and was_running and kind == "call":
            self._send(Request("evolve", "Evolve"), None)
        return request

    def _send(self, request: Request, on_done: Done | None) -> None:
        self._pending[request.id] = request
        if on_done is not None:
            self._callbacks[request.id] = on_done
        self._update_flags()
        self._thread.submit.emit(request)

    def _on_done(self, outcome: Outcome) -> None:
        request = outcome.request
        if self._pending.pop(request.id, None) is None:
            return  # a request of a case no longer in view
        self.requests_done += 1
        callback = self._callbacks.pop(request.id, None)
        if outcome.error:
            if outcome.detail:
                log.error("%s failed: %s\n%s", request.what, outcome.error, outcome.detail)
            self.failed.emit(outcome.error, request.what)
        if self.session is not None and all(r.kind == "evolve" for r in self._pending.values()):
            self.mirror.reconcile(self.session)
            self._seen_index = self.session.undo_index
        self._update_flags()
        if callback is not None:
            callback(outcome)
        self.changed.emit()
        self._on_frame()
        if request.kind == "evolve" and self.session is not None:
            self.runFinished.emit(self.session.frame())

    def _on_frame(self) -> None:
        if self.session is None:
            return
        if self.session.undo_index != self._seen_index and all(r.kind == "evolve" for r in self._pending.values()):
            # a running request changed the case before it started evolving (a seed that first committed
            # another label's front): show that now, not when the run ends
            self._seen_index = self.session.undo_index
            self.mirror.reconcile(self.session)
            self.changed.emit()
        drawn = self.session.frame().revision
        self.frameReady.emit()
        if self._thread is not None:
            self._thread.worker.frame_taken()
        if self.session.frame().revision != drawn and not self._catching_up:
            # a frame came while this one was drawn (its signal was held back): draw it next
            self._catching_up = True
            QTimer.singleShot(0, self._catch_up)

    def _catch_up(self) -> None:
        self._catching_up = False
        self._on_frame()

    # ----------------------------------------------------------- evolution
    def evolve(self, steps: int | None = None, *, before: Callable[[Session], Any] | None = None,
               what: str = "Evolve", on_done: Done | None = None) -> Request | None:
        """Evolve the live front (``steps`` steps, or until it converges); ``before`` runs first."""
        return self.submit(what, before, kind="evolve", steps=steps, on_done=on_done)

    def pause(self) -> None:
        """Stop every evolve run (the front stops within one step and keeps its place)."""
        for request in self._pending.values():
            if request.kind == "evolve":
                request.cancel.set()
        self._update_flags()

    def toggle_evolve(self) -> None:
        """Evolve when paused, pause when evolving."""
        if self.evolving:
            self.pause()
        elif self.session is not None and self.session.live is not None:
            self.evolve()

    def set_params(self, label: int | None, **changes: Any) -> None:
        """Change a label's settings; the running front of that label takes them at its next step."""
        session = self.session
        if session is None:
            return
        live = session.live
        if self.evolving and live is not None and label == live.label:
            future = self._settings_pool.submit(session.set_params, label, **changes)
            future.add_done_callback(self._settings_done)
            return
        self.submit("Settings", lambda s: s.set_params(label, **changes), pause=False)

    def _settings_done(self, future: Any) -> None:
        # runs in the helper thread: hand the outcome to the GUI thread through a queued signal
        error = future.exception()
        self._settingsResult.emit("" if error is None else str(error))

    def _settings_reported(self, error: str) -> None:
        if error:
            self.failed.emit(error.splitlines()[0], "Settings")
        self.changed.emit()

    # -------------------------------------------------------------- undo
    def undo(self) -> None:
        self.submit("Undo", lambda s: s.undo())

    def redo(self) -> None:
        self.submit("Redo", lambda s: s.redo())

    # ------------------------------------------------------------ helpers
    def live_is(self, label: int, slice_index: int) -> bool:
        """True when the live front belongs to ``label`` on ``slice_index``."""
        live = self.session.live if self.session is not None else None
        return live is not None and (live.label, live.slice) == (label, slice_index)

    def edit(self, what: str, call: Callable[[Session], Any], *, label: int, slice_index: int,
             on_done: Done | None = None) -> None:
        """An edit of (label, slice): a running front of that very label and slice evolves on afterwards."""
        self.submit(what, call, resume=self.live_is(label, slice_index), on_done=on_done)

    def seed(self, row: float, col: float, radius_px: float, *, label: int, slice_index: int,
             evolve: bool) -> None:
        """Place a seed disk; with ``evolve`` (or when its front was evolving) the front evolves at once."""
        call = lambda s: s.seed(row, col, radius_px, label=label, slice=slice_index)  # noqa: E731
        if evolve or (self.evolving and self.live_is(label, slice_index)):
            self.evolve(before=call, what="Seed")
        else:
            self.submit("Seed", call)

    def stroke(self, tool: str, points: Sequence[Sequence[float]], radius_mm: float, *, label: int,
               slice_index: int) -> None:
        """A brush stroke (``tool``: extend, trim or pin) as one edit."""
        method = {"extend": "extend", "trim": "trim", "pin": "pin"}[tool]
        pts = [tuple(map(float, p)) for p in points]
        self.edit(tool.capitalize(), lambda s: getattr(s, method)(pts, radius_mm, label=label, slice=slice_index),
                  label=label, slice_index=slice_index)

    def carry(self, to_slice: int, *, label: int, from_slice: int | None = None, on_done: Done | None = None) -> None:
        """Carry the label's outline (from ``from_slice``: None lets the Session choose) to ``to_slice``
        and evolve it at once."""
        self.evolve(before=lambda s: s.carry(to_slice, label=label, from_slice=from_slice), what="Carry",
                    on_done=on_done)
