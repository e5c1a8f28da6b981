"""A ``QUndoStack`` that mirrors the Session's undo stack, one ``QUndoCommand`` per Session command.

The Session is the truth: its commands are made in the worker thread, and
one Session call may make more than one (a seed on another label commits the
live front first). After each call :meth:`UndoMirror.reconcile` brings the Qt
stack in line: the commands both share stay, new ones are pushed (their
first ``redo`` skipped), and the index follows the Session's. Undoing from
the History list (Qt calls a command's ``undo``) asks the Session to undo,
through the worker; the next reconcile confirms it.
"""

from __future__ import annotations

from collections.abc import Callable

from PySide6.QtGui import QUndoCommand, QUndoStack

from engine.session import Command, Session

__all__ = ["MirrorCommand", "UndoMirror"]


class MirrorCommand(QUndoCommand):
    """One Session command on the Qt stack."""

    def __init__(self, command: Command, mirror: "UndoMirror") -> None:
        super().__init__(command.text)
        self.command = command
        self._mirror = mirror

    def undo(self) -> None:
        if not self._mirror.quiet:
            self._mirror.request_undo()

    def redo(self) -> None:
        if not self._mirror.quiet:
            self._mirror.request_redo()


class UndoMirror:
    """Keeps ``stack`` equal to a Session's commands and position."""

    def __init__(self, stack: QUndoStack, request_undo: Callable[[], None], request_redo: Callable[[], None],
                 *, limit: int = 500) -> None:
        self.stack = stack
        self.request_undo = request_undo
        self.request_redo = request_redo
        self.quiet = False
        self.stack.setUndoLimit(limit)

    def _commands(self) -> list[Command]:
        return [self.stack.command(i).command for i in range(self.stack.count())]

    def clear(self) -> None:
        self.quiet = True
        try:
            self.stack.clear()
        finally:
            self.quiet = False

    def reconcile(self, session: Session) -> None:
        """Make the Qt stack hold ``session.history`` with the Session's undo index."""
        history = session.history
        index = session.undo_index
        mine = self._commands()
        shared = 0
        while shared < min(len(mine), len(history)) and mine[shared] is history[shared]:
            shared += 1
        self.quiet = True
        try:
            if (shared < len(mine) and shared == len(history)) or (mine and shared == 0):
                self.stack.clear()  # the Session dropped commands the Qt stack still holds: start again
                shared = 0
            if shared < len(history):
                self.stack.setIndex(shared)
                for command in history[shared:]:
                    self.stack.push(MirrorCommand(command, self))
            if self.stack.index() != index:
                self.stack.setIndex(index)
        finally:
            self.quiet = False
