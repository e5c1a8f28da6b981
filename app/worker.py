"""The worker thread of a case: it runs every Session call and evolves the live front.

The window never changes the Session from the GUI thread: it sends a
:class:`Request` through a queued signal to the :class:`SessionWorker`
living in its own ``QThread``; the worker runs it (an edit, a commit, an
undo, or an evolve run that lasts until it converges or its cancel token is
set) and reports an :class:`Outcome`. While a front evolves, the worker
announces new frames (at most 30 a second, and never more than the GUI has
drawn: a new one is announced only once the last was taken); the GUI reads
the latest immutable frame with ``Session.frame()``.
"""

from __future__ import annotations

import itertools
import threading
import traceback
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from PySide6.QtCore import QObject, QThread, Signal, Slot

from engine.session import Session

__all__ = ["Request", "Outcome", "SessionWorker", "WorkerThread", "FRAME_INTERVAL"]

#: Shortest time between two frames of a running front (s): at most 30 a second.
FRAME_INTERVAL = 1.0 / 30.0

_ids = itertools.count(1)


@dataclass
class Request:
    """One job for the worker: a Session call, or an evolve run (``kind == "evolve"``).

    ``call(session)`` runs first for both kinds; an evolve run starts only
    when it succeeded and ``cancel`` is not set.
    """

    kind: str
    what: str
    call: Callable[[Session], Any] | None = None
    steps: int | None = None
    cancel: threading.Event = field(default_factory=threading.Event)
    id: int = field(default_factory=lambda: next(_ids))


@dataclass(frozen=True)
class Outcome:
    """What a request did: its result, or a one-line error (``detail``: a traceback for the unexpected)."""

    request: Request
    result: Any = None
    error: str | None = None
    detail: str = ""


class SessionWorker(QObject):
    """Runs requests on one Session, in the thread it is moved to."""

    done = Signal(object)  # Outcome
    frame = Signal()  # a new live frame can be read with Session.frame()

    def __init__(self, session: Session) -> None:
        super().__init__()
        self.session = session
        self._frame_taken = threading.Event()
        self._frame_taken.set()

    def frame_taken(self) -> None:
        """The GUI drew the last announced frame (called from the GUI thread)."""
        self._frame_taken.set()

    def _on_frame(self, _frame: Any) -> None:
        if self._frame_taken.is_set():
            self._frame_taken.clear()
            self.frame.emit()

    @Slot(object)
    def execute(self, request: Request) -> None:
        try:
            result = request.call(self.session) if request.call is not None else None
            if request.kind == "evolve" and request.call is not None:
                self._on_frame(None)  # show what the call did (a seed disk) before the front is built
            if request.kind == "evolve" and not request.cancel.is_set():
                result = self.session.evolve(request.steps, cancel=request.cancel, on_frame=self._on_frame,
                                             frame_interval=FRAME_INTERVAL)
            outcome = Outcome(request, result)
        except (ValueError, RuntimeError, OSError) as exc:
            detail = "" if isinstance(exc, ValueError) else traceback.format_exc()
            outcome = Outcome(request, None, _one_line(exc), detail)
        except Exception as exc:  # noqa: BLE001 - reported to the user, the window stays usable
            outcome = Outcome(request, None, f"{type(exc).__name__}: {_one_line(exc)}", traceback.format_exc())
        self.done.emit(outcome)


def _one_line(exc: BaseException) -> str:
    text = str(exc).strip() or type(exc).__name__
    return text.splitlines()[0]


class WorkerThread(QObject):
    """A :class:`SessionWorker` in its own ``QThread`` (started at once)."""

    submit = Signal(object)

    def __init__(self, session: Session) -> None:
        super().__init__()
        self.thread = QThread()
        self.thread.setObjectName("isotide-session-worker")
        self.worker = SessionWorker(session)
        self.worker.moveToThread(self.thread)
        self.submit.connect(self.worker.execute)
        self.thread.start()

    def stop(self, *, wait_ms: int = 0) -> bool:
        """Quit the thread's event loop after the request in hand; True once it has finished."""
        self.thread.quit()
        if wait_ms:
            return self.thread.wait(wait_ms)
        return self.thread.isFinished()
