"""Immutable values of a session: labels, the live front's state, the whole state, commands, frames.

Every change a user makes replaces the session's :class:`SessionState` with a
new one; the undo stack keeps the states between commands, so undo and redo
restore them exactly (the live front through its snapshot, bit for bit).
Unchanged parts are shared between states, so a command costs the front's
band arrays and little else.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from types import MappingProxyType
from typing import Any

import numpy as np
from numpy.typing import NDArray

from engine.front import FrontSnapshot
from engine.session.outline import Outline
from engine.session.settings import FrontSettings

__all__ = ["Label", "LiveState", "SessionState", "Command", "UndoStack", "Frame", "EMPTY_MAPPING"]

EMPTY_MAPPING: Mapping = MappingProxyType({})


@dataclass(frozen=True)
class Label:
    """A structure being outlined: its index in the saved mask, name, colour and lock.

    A locked label's outlines are barriers no other front enters, and they
    cannot be edited until it is unlocked.
    """

    index: int
    name: str
    colour: str
    locked: bool = False


@dataclass(frozen=True, eq=False)
class LiveState:
    """The front being grown for one label on one slice.

    ``snapshot`` is None before the first step (only seeds so far) and after
    the front vanished (``vanished`` True). Its settings are its label's
    (:attr:`SessionState.settings`).
    """

    label: int
    slice: int
    seeds: tuple[tuple[float, float, float], ...] = ()
    snapshot: FrontSnapshot | None = None
    vanished: bool = False
    origin: str = "seeds"  # "seeds", "outline" (correcting a committed outline), "carry" or "stroke"
    front_id: int | None = None  # the front object that took the snapshot (see engine.session.fronts)


@dataclass(frozen=True, eq=False)
class SessionState:
    """Everything undo restores: labels, committed outlines, per-label settings, the live front."""

    labels: tuple[Label, ...] = ()
    outlines: Mapping[tuple[int, int], Outline] = field(default_factory=lambda: EMPTY_MAPPING)  # (label, slice)
    settings: Mapping[int, FrontSettings] = field(default_factory=lambda: EMPTY_MAPPING)  # label -> its settings
    live: LiveState | None = None

    def label(self, index: int) -> Label:
        for lab in self.labels:
            if lab.index == index:
                return lab
        raise ValueError(f"label {index} does not exist")

    def with_outlines(self, changes: Mapping[tuple[int, int], Outline | None]) -> "SessionState":
        """A copy with outlines set (or removed, for None)."""
        out = dict(self.outlines)
        for key, value in changes.items():
            if value is None:
                out.pop(key, None)
            else:
                out[key] = value
        return replace(self, outlines=MappingProxyType(out))

    def with_settings(self, label: int, settings: FrontSettings) -> "SessionState":
        out = dict(self.settings)
        out[label] = settings
        return replace(self, settings=MappingProxyType(out))


@dataclass(frozen=True)
class Command:
    """One undoable change: what it was (for the History list and the sidecar) and the state after it."""

    text: str  # one line for the History list, e.g. "Trim (liver, slice 12)"
    action: str  # history action recorded in the sidecar, e.g. "trim"
    time: str  # ISO 8601 UTC when it was done
    label: int | None
    slice: int | None
    details: Mapping[str, Any]
    after: SessionState

    def history_entry(self, operator: str = "") -> dict[str, Any]:
        """The entry of the saved edit history (see :func:`engine.io.sidecar.build_sidecar`)."""
        entry: dict[str, Any] = {"action": self.action, "time": self.time, "details": dict(self.details)}
        if self.label is not None:
            entry["label"] = int(self.label)
        if self.slice is not None:
            entry["slice"] = int(self.slice)
        if operator:
            entry["operator"] = operator
        return entry


class UndoStack:
    """States between commands: ``states[i]`` is the state after the first ``i`` commands.

    Pushing after an undo drops the undone commands (as every undo stack
    does). At most ``limit`` commands are kept: the oldest are folded into the
    base state, so memory stays bounded; their history entries are kept.
    """

    def __init__(self, initial: SessionState, *, limit: int = 500) -> None:
        if limit < 1:
            raise ValueError(f"limit must be >= 1, got {limit}")
        self._base = initial
        self._commands: list[Command] = []
        self._index = 0
        self._folded: list[Command] = []
        self.limit = int(limit)

    @property
    def index(self) -> int:
        """Number of commands applied (the position in the stack)."""
        return self._index

    @property
    def commands(self) -> tuple[Command, ...]:
        """Every command in the stack, applied or undone, oldest first."""
        return tuple(self._commands)

    def applied(self) -> tuple[Command, ...]:
        """Commands in effect, including the ones folded out of the stack, oldest first."""
        return tuple(self._folded) + tuple(self._commands[:self._index])

    @property
    def state(self) -> SessionState:
        return self._commands[self._index - 1].after if self._index else self._base

    def push(self, command: Command) -> None:
        del self._commands[self._index:]
        self._commands.append(command)
        if len(self._commands) > self.limit:
            oldest = self._commands.pop(0)
            self._folded.append(oldest)
            self._base = oldest.after
        self._index = len(self._commands)

    def can_undo(self) -> bool:
        return self._index > 0

    def can_redo(self) -> bool:
        return self._index < len(self._commands)

    def undo(self) -> Command:
        if not self.can_undo():
            raise ValueError("nothing to undo")
        self._index -= 1
        return self._commands[self._index]

    def redo(self) -> Command:
        if not self.can_redo():
            raise ValueError("nothing to redo")
        self._index += 1
        return self._commands[self._index - 1]

    def reset(self, state: SessionState) -> None:
        """Start again from ``state`` with an empty stack (a new study)."""
        self._base = state
        self._commands.clear()
        self._folded.clear()
        self._index = 0


@dataclass(frozen=True, eq=False)
class Frame:
    """An immutable picture of the live front for a viewer (safe to read from any thread).

    Coordinates are full-resolution pixel ``(row, col)``; committed outlines
    are read with :meth:`engine.session.Session.outlines`.
    """

    revision: int
    label: int | None = None
    slice: int | None = None
    contours: tuple[NDArray[np.floating], ...] = ()
    curvature: tuple[NDArray[np.floating], ...] | None = None  # 1/mm at every vertex, when asked for
    seeds: tuple[tuple[float, float, float], ...] = ()
    pins: NDArray[np.bool_] | None = None
    steps: int = 0
    time: float = 0.0
    area_mm2: float = 0.0
    perimeter_mm: float = 0.0
    steps_per_s: float = 0.0
    converged: bool = False
    vanished: bool = False
    running: bool = False
    stage: str = ""  # "seeds", "growing" (the pixel flood), "evolving", "paused" or "vanished"
    undo_index: int = 0
    message: str = ""
