"""The Session: one case being outlined — labels, committed outlines per slice, the live front, undo.

The window, the command line, a batch worker and a script all drive a
:class:`Session`; it holds no Qt.

Threading contract
------------------
Every method that changes the session takes the session's lock, so calls
from several threads are serialised. :meth:`Session.evolve` takes the lock
for one step at a time, so :meth:`Session.set_params` from another thread
reaches the running front at the next step, and a ``cancel`` token (a
``threading.Event`` or a callable) is checked between steps, so a pause
takes effect within one step. While a front evolves, the other changes
(seeds, brushes, commit, carry, undo, labels, save) raise
:class:`SessionBusy`: pause first. :meth:`Session.frame`, :meth:`Session.outlines`,
:attr:`Session.labels` and :attr:`Session.history` never take the lock and
never change anything: they return immutable values published after every
step and every change, so a viewer thread may call them at any rate.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import replace
from types import MappingProxyType
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from engine.front import Front
from engine.io.sidecar import OKABE_ITO, utc_now
from engine.io.volume import Volume
from engine.segmenter import Segmenter
from engine.session import fronts
from engine.session.outline import Outline, frozen_array, outline_from_front, shown_curvature
from engine.session.settings import FrontSettings
from engine.session.state import Command, Frame, Label, LiveState, SessionState, UndoStack
from engine.validation import (
    check_colour,
    check_label_name,
    check_margin,
    check_seed,
    check_slice,
    check_spacing,
    check_steps,
    check_stroke,
)

__all__ = ["Session", "SessionBusy"]

class SessionBusy(RuntimeError):
    """A front is evolving: pause it before changing anything else."""


def _cancelled(cancel: Any) -> Callable[[], bool]:
    if cancel is None:
        return lambda: False
    if hasattr(cancel, "is_set"):
        return cancel.is_set
    if callable(cancel):
        return cancel
    raise ValueError("cancel: expected a threading.Event or a callable returning True to stop")


class Session:
    """A case being outlined (see the module docstring for the threading contract).

    Parameters
    ----------
    volume : engine.io.Volume
        The study (use :meth:`open` to read one from disk or
        :meth:`from_array` for an array).
    operator : str
        Who outlines; recorded in the saved result only when given.
    undo_limit : int
        Commands kept on the undo stack (older ones stay in the history).
    """

    def __init__(self, volume: Volume, *, operator: str = "", undo_limit: int = 500) -> None:
        if not isinstance(volume, Volume):
            raise ValueError(f"volume: expected an engine.io.Volume, got {type(volume).__name__}")
        self.volume = volume
        self.operator = str(operator)
        self._lock = threading.RLock()
        self._stack = UndoStack(SessionState(), limit=undo_limit)
        self._fronts = fronts.FrontCache()
        self._front: Front | None = None
        self._front_id: int | None = None
        self._grower: Segmenter | None = None  # seeds flooding at pixel level before the front takes over
        self._running = False
        self._revision = 0
        self._frame = Frame(0)
        self._hidden: frozenset[int] = frozenset()
        self._images: dict[int, NDArray[np.floating]] = {}
        self._default_settings = FrontSettings()
        self._run_settings: FrontSettings | None = None  # settings changed during a run
        self.curvature_colours = False
        #: History entries of the result this session was opened from (already hash-chained).
        self.prior_history: tuple[Mapping[str, Any], ...] = ()
        #: Review block of the result this session was opened from (``None``: a new result).
        self.prior_review: Mapping[str, Any] | None = None
        #: When the result this session continues was first saved, and who made it (when recorded).
        self.created: str | None = None
        self.prior_operator = ""
        self.saved_index = 0

    # ---------------------------------------------------------------- opening
    @classmethod
    def open(cls, path: str, *, series: str | int | None = None, progress: Callable[[int, int], None] | None = None,
             operator: str = "") -> "Session":
        """A session on the study at ``path`` (anything :func:`engine.io.load` reads)."""
        from engine.io import load

        return cls(load(path, series=series, progress=progress), operator=operator)

    @classmethod
    def from_array(cls, image: ArrayLike, *, spacing: Sequence[float] | None = None, operator: str = "") -> "Session":
        """A session on an in-memory 2-D image (one slice) or 3-D volume ``[slice, row, col]``."""
        arr = np.asarray(image, dtype=np.float32)
        if arr.ndim == 2:
            arr = arr[None]
        if arr.ndim != 3 or min(arr.shape[1:]) < 4:
            raise ValueError(f"image: expected a 2-D slice or a 3-D volume of at least 4 x 4 pixels, got {arr.shape}")
        if arr.size == 0 or not np.all(np.isfinite(arr)):
            raise ValueError("image: holds NaN or infinite values")
        # spacing: (row, col) of a slice or (slice, row, col), in mm; a slice's alone puts slices 1 mm apart
        given = 0 if spacing is None else int(np.size(spacing))
        sp = [float(s) for s in check_spacing(spacing, given if given in (2, 3) else np.ndim(image))]
        if len(sp) == 2:
            sp = [1.0] + sp
        affine = np.diag(sp + [1.0])
        vol = Volume(np.ascontiguousarray(arr), tuple(sp), affine, "OT", (), "array", {}, kind="raster")
        return cls(vol, operator=operator)

    # -------------------------------------------------------------- read-outs
    @property
    def state(self) -> SessionState:
        return self._stack.state

    @property
    def labels(self) -> tuple[Label, ...]:
        return self._stack.state.labels

    def label(self, index: int) -> Label:
        return self._stack.state.label(index)

    @property
    def spacing(self) -> tuple[float, float]:
        """Pixel spacing of a slice (row, col) in mm."""
        return self.volume.spacing[1], self.volume.spacing[2]

    @property
    def slices(self) -> int:
        return self.volume.shape[0]

    def image(self, slice_index: int) -> NDArray[np.floating]:
        """Slice ``slice_index`` as float64 (cached: a front reads it at every step)."""
        k = self._check_slice(slice_index)
        img = self._images.get(k)
        if img is None:
            img = np.asarray(self.volume.array[k], dtype=float)
            if len(self._images) > 8:
                self._images.clear()
            self._images[k] = img
        return img

    def outlines(self, slice_index: int | None = None, label: int | None = None) -> tuple[Outline, ...]:
        """Committed outlines on a slice (all slices when None), optionally of one label, in label order."""
        state = self._stack.state
        order = {lab.index: i for i, lab in enumerate(state.labels)}
        found = [o for (lab, k), o in state.outlines.items()
                 if (slice_index is None or k == slice_index) and (label is None or lab == label)]
        return tuple(sorted(found, key=lambda o: (o.slice, order.get(o.label, 0))))

    def settings(self, label: int | None = None) -> FrontSettings:
        """The settings fronts of ``label`` grow with (None: the settings new labels start with)."""
        if label is None:
            return self._default_settings
        if self._running and self._run_settings is not None and self.live is not None and self.live.label == label:
            return self._run_settings
        return self._stack.state.settings.get(label, self._default_settings)

    @property
    def live(self) -> LiveState | None:
        return self._stack.state.live

    @property
    def running(self) -> bool:
        return self._running

    @property
    def history(self) -> tuple[Command, ...]:
        """Every command of the undo stack, oldest first (see :attr:`undo_index`)."""
        return self._stack.commands

    @property
    def undo_index(self) -> int:
        return self._stack.index

    def can_undo(self) -> bool:
        return self._stack.can_undo()

    def can_redo(self) -> bool:
        return self._stack.can_redo()

    @property
    def modified(self) -> bool:
        """True when the outlines differ from the last save (or there is work and no save yet)."""
        return self._stack.index != self.saved_index or self.live is not None

    def frame(self) -> Frame:
        """The latest picture of the live front (immutable; no lock, no side effects)."""
        return self._frame

    def hidden_labels(self) -> frozenset[int]:
        return self._hidden

    def set_label_visible(self, index: int, visible: bool) -> None:
        """Show or hide a label's outlines (a view setting: not on the undo stack; safe while a front evolves)."""
        self.label(index)
        self._hidden = self._hidden - {index} if visible else self._hidden | {index}

    # --------------------------------------------------------------- commands
    def _check_slice(self, slice_index: int) -> int:
        return check_slice(slice_index, self.slices)

    def _idle(self) -> None:
        if self._running:
            raise SessionBusy("a front is evolving; pause it first")

    def _name(self, label: int) -> str:
        try:
            return self.label(label).name
        except ValueError:
            return f"label {label}"

    def _push(self, text: str, action: str, after: SessionState, *, label: int | None = None,
              slice_index: int | None = None, details: Mapping[str, Any] | None = None) -> Command:
        where = [self._name(label)] if label is not None else []
        if slice_index is not None:
            where.append(f"slice {slice_index}")
        full = f"{text} ({', '.join(where)})" if where else text
        command = Command(full, action, utc_now(), label, slice_index, MappingProxyType(dict(details or {})), after)
        self._stack.push(command)
        self._publish(refine=True)
        return command

    def _with_live_snapshot(self, state: SessionState, **changes: Any) -> SessionState:
        """``state`` with the live front's present snapshot (and ``changes`` to the live state)."""
        live = state.live
        snap = self._front.snapshot() if self._front is not None else None
        return replace(state, live=replace(live, snapshot=snap, front_id=self._front_id, **changes))

    # ----------------------------------------------------------------- labels
    def add_label(self, name: str | None = None, colour: str | None = None) -> Label:
        """A new label (next free index; colours follow the Okabe–Ito order)."""
        with self._lock:
            self._idle()
            state = self._stack.state
            index = max((lab.index for lab in state.labels), default=0) + 1
            used = {lab.colour.upper() for lab in state.labels}
            if colour is None:
                colour = next((c for c in OKABE_ITO if c.upper() not in used), OKABE_ITO[(index - 1) % len(OKABE_ITO)])
            label = Label(index, check_label_name(name or f"Label {index}"), check_colour(colour))
            after = replace(state, labels=state.labels + (label,)).with_settings(index, self._default_settings)
            self._push(f"Add label {label.name}", "label_add", after, label=index,
                       details={"name": label.name, "colour": label.colour})
            return label

    def _replace_label(self, index: int, text: str, action: str, details: Mapping[str, Any], **changes: Any) -> None:
        with self._lock:
            self._idle()
            state = self._stack.state
            old = state.label(index)
            new = replace(old, **changes)
            after = replace(state, labels=tuple(new if lab.index == index else lab for lab in state.labels))
            if action == "label_lock" and self._front is not None and after.live is not None:
                self._front.set_barrier(self._barrier(after, after.live.label, after.live.slice))
                after = self._with_live_snapshot(after)
            self._push(text, action, after, label=index, details=details)

    def rename_label(self, index: int, name: str) -> None:
        old = self.label(index).name
        new = check_label_name(name)
        self._replace_label(index, f"Rename {old} to {new}", "label_rename", {"from": old, "to": new}, name=new)

    def set_label_colour(self, index: int, colour: str) -> None:
        c = check_colour(colour)
        self._replace_label(index, f"Colour {c}", "label_colour", {"colour": c}, colour=c)

    def set_label_locked(self, index: int, locked: bool) -> None:
        with self._lock:
            live = self.live
            if locked and live is not None and live.label == index:
                raise ValueError(f"{self._name(index)} has a front in progress: commit or clear it before locking")
            self._replace_label(index, "Lock" if locked else "Unlock", "label_lock", {"locked": bool(locked)},
                                locked=bool(locked))

    def remove_label(self, index: int) -> None:
        """Delete a label and every outline it has (undo brings them back)."""
        with self._lock:
            self._idle()
            state = self._stack.state
            lab = state.label(index)
            outlines = {key: o for key, o in state.outlines.items() if key[0] != index}
            settings = {k: v for k, v in state.settings.items() if k != index}
            on_label = state.live is not None and state.live.label == index
            after = replace(state, labels=tuple(x for x in state.labels if x.index != index),
                            outlines=MappingProxyType(outlines), settings=MappingProxyType(settings),
                            live=None if on_label else state.live)
            if on_label:
                self._drop_front()
            self._push(f"Delete label {lab.name}", "label_delete", after, label=index,
                       details={"name": lab.name, "outlines": len(state.outlines) - len(outlines)})

    # ------------------------------------------------------------ live front
    def _barrier(self, state: SessionState, label: int, slice_index: int) -> NDArray[np.bool_] | None:
        """Union of the other locked labels' outlines on the slice (no front enters them)."""
        locked = {lab.index for lab in state.labels if lab.locked and lab.index != label}
        masks = [o.mask for (lab, k), o in state.outlines.items() if lab in locked and k == slice_index]
        if not masks:
            return None
        return np.logical_or.reduce(masks)

    def _drop_front(self) -> None:
        self._front, self._front_id = None, None

    def _adopt(self, front: Front, state: SessionState, label: int, slice_index: int) -> None:
        front.set_barrier(self._barrier(state, label, slice_index))
        self._front_id = fronts.new_front_id()
        self._front = front
        self._fronts.put(self._front_id, front)

    def _sync_front(self, state: SessionState) -> None:
        """Make the live front object match ``state.live`` (restored from its snapshot)."""
        live = state.live
        if live is None or live.snapshot is None:
            self._drop_front()
            return
        front = self._fronts.get(live.front_id)
        if front is None:
            settings = state.settings.get(live.label, self._default_settings)
            front = fronts.restore_front(self.image(live.slice), live.snapshot, self.spacing, settings)
            self._fronts.put(live.front_id, front)
        else:
            front.restore(live.snapshot)
        self._front, self._front_id = front, live.front_id

    def _writable(self, label: int) -> Label:
        lab = self.label(label)
        if lab.locked:
            raise ValueError(f"{lab.name} is locked: unlock it to change its outlines")
        return lab

    def _settle_live(self, label: int, slice_index: int) -> None:
        """Before work on (label, slice): commit a live front elsewhere, or drop its unused seeds."""
        live = self.live
        if live is None or (live.label, live.slice) == (label, slice_index):
            return
        if live.snapshot is not None:
            self.commit()
        else:
            self._push("Leave seeds", "clear_front", replace(self._stack.state, live=None), label=live.label,
                       slice_index=live.slice, details={"seeds": [list(s) for s in live.seeds]})
            self._drop_front()

    def _editable_front(self, label: int, slice_index: int, action: str) -> SessionState:
        """The state with a live front on (label, slice) that an edit can change (started when needed)."""
        self._writable(label)
        k = self._check_slice(slice_index)
        self._settle_live(label, k)
        state = self._stack.state
        live = state.live
        if live is not None and live.snapshot is not None:
            return state
        settings = self.settings(label)
        if live is not None and live.seeds and not live.vanished:
            front = fronts.start_from_seeds(self.image(k), live.seeds, self.spacing, settings)
        elif (label, k) in state.outlines:
            front = fronts.start_from_outline(self.image(k), state.outlines[(label, k)], self.spacing, settings)
            live = LiveState(label, k, origin="outline")
        else:
            raise ValueError(f"nothing to {action}: {self._name(label)} has no outline or front on slice {k}")
        self._adopt(front, state, label, k)
        return replace(state, live=replace(live, snapshot=front.snapshot(), front_id=self._front_id))

    def seed(self, row: float, col: float, radius_px: float, *, label: int, slice: int) -> None:  # noqa: A002
        """Place a seed disk; on a front (or a committed outline) it adds the disk to the outline."""
        with self._lock:
            self._idle()
            self._writable(label)
            k = self._check_slice(slice)
            seed = check_seed(row, col, radius_px, self.volume.shape[1:])
            self._settle_live(label, k)
            state = self._stack.state
            live = state.live
            if live is None and (label, k) not in state.outlines:
                after = replace(state, live=LiveState(label, k, (seed,)))
            elif live is not None and live.snapshot is None and not live.vanished:
                after = replace(state, live=replace(live, seeds=live.seeds + (seed,)))
            elif live is not None and live.vanished:
                after = replace(state, live=LiveState(label, k, live.seeds + (seed,)))
            else:
                base = self._editable_front(label, k, "seed")
                self._front.extend((np.array([seed[:2]]), seed[2]))
                after = self._with_live_snapshot(base, seeds=base.live.seeds + (seed,))
            self._push("Seed", "seed", after, label=label, slice_index=k,
                       details={"row": seed[0], "col": seed[1], "radius_px": seed[2]})

    def remove_seed(self, index: int) -> None:
        """Remove seed ``index`` of the live front; a front already grown starts again from the others."""
        with self._lock:
            self._idle()
            state = self._stack.state
            live = state.live
            if live is None or not 0 <= index < len(live.seeds):
                raise ValueError(f"seed {index}: there is no such seed on the live front")
            seeds = live.seeds[:index] + live.seeds[index + 1:]
            new_live = LiveState(live.label, live.slice, seeds) if seeds else None
            self._drop_front()
            self._push("Remove seed", "seed_remove", replace(state, live=new_live), label=live.label,
                       slice_index=live.slice, details={"seed": list(live.seeds[index])})

    def clear_front(self) -> None:
        """Throw the live front away: back to its seeds (or to nothing when it had none)."""
        with self._lock:
            self._idle()
            state = self._stack.state
            live = state.live
            if live is None:
                raise ValueError("there is no front to clear")
            new_live = LiveState(live.label, live.slice, live.seeds) if live.seeds else None
            self._drop_front()
            self._push("Clear front", "clear_front", replace(state, live=new_live), label=live.label,
                       slice_index=live.slice)

    # ------------------------------------------------------------- evolution
    def evolve(self, steps: int | None = None, *, cancel: Any = None, on_frame: Callable[[Frame], None] | None = None,
               frame_interval: float = 1.0 / 30.0) -> Frame:
        """Grow the live front: ``steps`` steps, or until it converges, vanishes or reaches its step limit.

        ``cancel`` (a ``threading.Event`` or a callable) is checked between
        steps. ``on_frame(frame)`` is called with a fresh frame on a beat of
        ``frame_interval`` seconds (never more often on average) and once at the end. The whole run is one
        command on the undo stack. Returns the last frame.
        """
        if steps is not None:
            check_steps(steps)
        stop = _cancelled(cancel)
        with self._lock:
            self._idle()
            before = self._stack.state
            live = before.live
            if live is None:
                raise ValueError("there is no front to evolve: place a seed first")
            self._writable(live.label)
            if live.snapshot is None:
                if not live.seeds:
                    raise ValueError("the front vanished and has no seeds to start again from")
                self._grower = fronts.grow_from_seeds(self.image(live.slice), live.seeds, self.spacing,
                                                      self.settings(live.label),
                                                      barrier=self._barrier(before, live.label, live.slice))
            self._run_settings = self.settings(live.label)
            self._running = True
            t0 = time.perf_counter()
            first_step = self._front.steps if self._grower is None and self._front is not None else 0
        taken, passes, due = 0, 0, 0.0
        try:
            while not stop() and (steps is None or taken < steps):
                with self._lock:
                    grower = self._grower
                    if grower is not None and grower.stage != "growing":
                        self._adopt_grown(before)  # the flood is done and the front built from it
                        continue
                    if grower is not None:
                        grower.step(1)  # one flood pass (or the hand-over to the front)
                        passes += 1
                    else:
                        front = self._front
                        if front.vanished or (steps is None and front.converged):
                            break
                        if front.steps >= self._run_settings.max_steps and steps is None:
                            break
                        front.step(1)
                    taken += 1
                    now = time.perf_counter()
                    if now >= due:
                        # frames on a fixed beat (at most one per frame_interval on average), not an
                        # interval after the last one: a step's overrun no longer lowers the rate
                        due = due + frame_interval if now - due < frame_interval else now + frame_interval
                        self._publish(running=True, rate=taken / max(now - t0, 1e-9))
                        if on_frame is not None:
                            on_frame(self._frame)
                # a thread waiting for the lock (a setting, a busy edit) takes it now: a lock
                # released and taken again at once would keep it waiting for many steps
                time.sleep(0)
        finally:
            with self._lock:
                if self._grower is not None and taken:
                    self._adopt_grown(before)  # paused during the flood: the front starts from what it took
                self._grower = None
                self._running = False
                settings, self._run_settings = self._run_settings, None
                if taken:
                    self._finish_run(before.with_settings(live.label, settings), first_step, passes,
                                     time.perf_counter() - t0)
                else:
                    self._publish(refine=True)
        if on_frame is not None:
            on_frame(self._frame)
        return self._frame

    def _adopt_grown(self, state: SessionState) -> None:
        """Make the grower's full-resolution front the live front (building it from the flood if needed)."""
        grower, self._grower = self._grower, None
        live = state.live
        self._adopt(grower.front(), state, live.label, live.slice)

    def _finish_run(self, before: SessionState, first_step: int, passes: int, seconds: float) -> None:
        """Push the run as one command (``before``: the state it started from, with the settings it ended with).

        The run's steps are the front's (as the live step count shows them);
        ``passes`` counts the flood's passes and its hand-over to the front.
        """
        front = self._front
        live = before.live
        settings = before.settings[live.label]
        taken = max(int(front.steps) - first_step, 0)
        details = {"steps": taken, "passes": passes, "front_steps": int(front.steps),
                   "converged": bool(front.converged),
                   "vanished": bool(front.vanished), "seconds": round(seconds, 3), "settings": settings.as_record()}
        if front.vanished:
            after = replace(before, live=replace(live, snapshot=None, front_id=None, vanished=True))
            self._drop_front()
        else:
            after = self._with_live_snapshot(before)
        word = "vanished" if front.vanished else ("converged" if front.converged else "paused")
        count = f"{taken} steps" if taken or not passes else f"{passes} growth passes"
        self._push(f"Evolve {count}, {word}", "evolve", after, label=live.label, slice_index=live.slice,
                   details=details)
        self._frame = replace(self._frame, steps_per_s=(taken + passes) / max(seconds, 1e-9))

    def set_params(self, label: int | None = None, **changes: Any) -> None:
        """Change a label's front settings; a running front takes them at its next step.

        ``label`` defaults to the live front's label (with no live front: the
        settings new labels start with). Outside a run the change is a
        command; during a run it becomes part of the run's command.
        """
        with self._lock:
            state = self._stack.state
            live = state.live
            if label is None:
                label = live.label if live is not None else None
            if label is not None:
                self.label(label)
            old = self.settings(label)
            if changes.get("model") == "window" and changes.get("window") is None \
                    and "window" not in old.front_params and self._front is not None and live.label == label:
                changes["window"] = fronts.window_for_mask(self.image(live.slice), self.spacing, self._front.mask())
            new = old.updated(**changes)
            if new == old:
                return
            if label is None:
                self._default_settings = new
                return
            on_live = live is not None and live.label == label
            if self._running:
                if not on_live:
                    raise SessionBusy("a front is evolving; pause it before changing another label's settings")
                self._apply_settings(old, new)
                self._run_settings = new
                return
            self._idle()
            after = state.with_settings(label, new)
            if on_live and self._front is not None:
                self._apply_settings(old, new)
                after = self._with_live_snapshot(after)
            changed = _changes(old, new)
            self._push("Settings " + ", ".join(f"{k} {v}" for k, v in changed.items()), "settings", after,
                       label=label, details={"changes": changed, "settings": new.as_record()})

    def _apply_settings(self, old: FrontSettings, new: FrontSettings) -> None:
        if self._front is None and self._grower is not None:
            self._adopt_grown(self._stack.state)  # new settings during the flood: the front takes over now
        front = self._front
        if new.detail != old.detail:
            live = self.live
            phi = front.pixel_phi()
            rebuilt = Front.from_pixel_phi(self.image(live.slice), phi, spacing=self.spacing, model=new.model,
                                           detail=new.detail, **new.front_params)
            rebuilt.steps, rebuilt.time = front.steps, front.time
            self._adopt(rebuilt, self._stack.state, live.label, live.slice)
            return
        params = dict(new.front_params)
        for key in old.front_params:
            if key not in params:  # back to the default
                params[key] = getattr(type(front.params)(model=new.model), key)
        front.set_params(model=new.model, **params)

    # ------------------------------------------------------------------ edits
    def _edit(self, label: int, slice_index: int, action: str, text: str, apply: Callable[[Front], None],
              details: Mapping[str, Any]) -> None:
        with self._lock:
            self._idle()
            base = self._editable_front(label, slice_index, action)
            apply(self._front)
            after = self._with_live_snapshot(base)
            self._push(text, action, after, label=label, slice_index=self.live.slice if self.live else slice_index,
                       details=details)

    def extend(self, points_px: ArrayLike, radius_mm: float, *, label: int, slice: int) -> None:  # noqa: A002
        """Add the area a brush stroke sweeps (a disk of ``radius_mm`` around every point of the polyline).

        With no front or outline of the label on the slice, the stroke itself
        starts a front.
        """
        pts, r = check_stroke(points_px, radius_mm)
        with self._lock:
            self._idle()
            self._writable(label)
            k = self._check_slice(slice)
            self._settle_live(label, k)
            state = self._stack.state
            live = state.live
            has_seeds = live is not None and bool(live.seeds) and not live.vanished
            if (live is None or live.snapshot is None) and not has_seeds and (label, k) not in state.outlines:
                front = fronts.start_from_stroke(self.image(k), pts, r, self.spacing, self.settings(label))
                self._adopt(front, state, label, k)
                after = replace(state, live=LiveState(label, k, origin="stroke", snapshot=front.snapshot(),
                                                      front_id=self._front_id))
                self._push("Extend", "extend", after, label=label, slice_index=k, details=_stroke_details(pts, r))
                return
            radius_px = r / min(self.spacing)
            self._edit(label, k, "extend", "Extend", lambda f: f.extend((pts, radius_px)), _stroke_details(pts, r))

    def trim(self, points_px: ArrayLike, radius_mm: float, *, label: int, slice: int) -> None:  # noqa: A002
        """Cut the area a brush stroke sweeps out of the outline."""
        pts, r = check_stroke(points_px, radius_mm)
        radius_px = r / min(self.spacing)
        self._edit(label, slice, "trim", "Trim", lambda f: f.trim((pts, radius_px)), _stroke_details(pts, r))

    def pin(self, points_px: ArrayLike, radius_mm: float, *, label: int, slice: int) -> None:  # noqa: A002
        """Freeze the front where a brush stroke sweeps (the front cannot move there)."""
        pts, r = check_stroke(points_px, radius_mm)
        area = fronts.stroke_mask(self.volume.shape[1:], pts, r, self.spacing)
        self._edit(label, slice, "pin", "Pin", lambda f: f.pin(area), _stroke_details(pts, r))

    def clear_pins(self, *, label: int, slice: int) -> None:  # noqa: A002
        """Release every pin of the live front."""
        self._edit(label, slice, "pin", "Clear pins", lambda f: f.pin(None), {"cleared": True})

    def margin(self, mm: float, *, label: int, slice: int) -> None:  # noqa: A002
        """Grow (``mm`` > 0) or shrink (``mm`` < 0) the outline by a margin."""
        mm = check_margin(mm, limit_mm=0.25 * max(self.volume.shape[1:]) * max(self.spacing))
        self._edit(label, slice, "margin", f"Margin {mm:+g} mm", lambda f: f.margin(float(mm)), {"mm": float(mm)})

    # ----------------------------------------------------- commit and carry
    def commit(self) -> Outline:
        """Accept the live front as its label's outline on its slice."""
        with self._lock:
            self._idle()
            state = self._stack.state
            live = state.live
            if live is None or live.snapshot is None or self._front is None:
                raise ValueError("there is no grown front to commit" + (" (it vanished)" if live and live.vanished
                                                                           else ""))
            front = self._front
            outline = outline_from_front(live.label, live.slice, front,
                                         record=_outline_record(front, live.seeds, live.origin))
            after = replace(state.with_outlines({(live.label, live.slice): outline}), live=None)
            self._drop_front()
            self._push("Commit outline", "commit", after, label=live.label, slice_index=live.slice,
                       details={"area_mm2": round(outline.area_mm2, 3), "steps": int(front.steps),
                                "converged": bool(front.converged)})
            return outline

    def add_outline(self, front: Front, *, label: int, slice: int,  # noqa: A002
                    record: Mapping[str, Any] | None = None, details: Mapping[str, Any] | None = None,
                    action: str = "segment", text: str = "Grow outline") -> Outline:
        """Commit an outline grown outside the session (e.g. by a :class:`engine.segmenter.Segmenter`
        run headless) as one command; it replaces the label's outline on that slice.

        ``front`` is a 2-D front on the slice's image; ``record`` is the
        outline's record in the saved result (model, parameters, seeds,
        steps, timings, notes) and ``details`` those of the history entry.
        """
        with self._lock:
            self._idle()
            self._writable(label)
            k = self._check_slice(slice)
            if tuple(front.shape) != tuple(self.volume.shape[1:]):
                raise ValueError(f"front: its image is {tuple(front.shape)}, the study's slices are "
                                 f"{tuple(self.volume.shape[1:])}")
            self._settle_live(label, k)
            outline = outline_from_front(label, k, front,
                                         record=_outline_record(front, None, "seeds") if record is None else record)
            after = self._stack.state.with_outlines({(label, k): outline})
            self._push(text, action, after, label=label, slice_index=k, details=details)
            return outline

    def carry(self, to_slice: int, *, label: int, from_slice: int | None = None) -> None:
        """Start a front on ``to_slice`` from the label's outline on a neighbouring slice.

        A live front of the label is committed first. ``from_slice``
        defaults to the live front's slice, else the neighbour of
        ``to_slice`` that holds an outline of the label.
        """
        with self._lock:
            self._idle()
            self._writable(label)
            k = self._check_slice(to_slice)
            live = self.live
            if live is not None and live.label == label and live.snapshot is not None:
                from_slice = live.slice if from_slice is None else from_slice
                self.commit()
            else:
                self._settle_live(label, k)
            state = self._stack.state
            if from_slice is None:
                near = [s for s in (k - 1, k + 1) if (label, s) in state.outlines]
                if not near:
                    raise ValueError(f"nothing to carry: {self._name(label)} has no outline next to slice {k}")
                from_slice = near[0]
            source = state.outlines.get((label, self._check_slice(from_slice)))
            if source is None:
                raise ValueError(f"nothing to carry: {self._name(label)} has no outline on slice {from_slice}")
            if from_slice == k:
                raise ValueError("carry: the target slice is the outline's own slice")
            settings = self.settings(label)
            front = fronts.start_from_outline(self.image(k), source, self.spacing, settings)
            self._adopt(front, state, label, k)
            new_live = LiveState(label, k, origin="carry", snapshot=front.snapshot(), front_id=self._front_id)
            self._push(f"Carry from slice {from_slice}", "carry", replace(state, live=new_live), label=label,
                       slice_index=k, details={"from_slice": int(from_slice)})

    # ------------------------------------------------------------- undo/redo
    def undo(self) -> str:
        """Undo the last command; returns its text."""
        with self._lock:
            self._idle()
            command = self._stack.undo()
            self._sync_front(self._stack.state)
            self._publish(refine=True)
            return command.text

    def redo(self) -> str:
        """Redo the next command; returns its text."""
        with self._lock:
            self._idle()
            command = self._stack.redo()
            self._sync_front(self._stack.state)
            self._publish(refine=True)
            return command.text

    # ----------------------------------------------------------------- frames
    def _publish(self, *, running: bool = False, rate: float | None = None, refine: bool = False) -> None:
        """Make a new frame of the live front (called with the lock held, after every change and step)."""
        self._revision += 1
        live = self._stack.state.live
        if live is None:
            self._frame = Frame(self._revision, undo_index=self._stack.index)
            return
        front = self._front
        base = dict(revision=self._revision, label=live.label, slice=live.slice, seeds=live.seeds,
                    vanished=live.vanished, running=running, undo_index=self._stack.index,
                    steps_per_s=self._frame.steps_per_s if rate is None else rate)
        if front is None and self._grower is not None:
            self._frame = self._growth_frame(base, running)
            return
        if front is None:
            self._frame = Frame(**base, stage="seeds" if not live.vanished else "vanished",
                                message="the front vanished" if live.vanished else "")
            return
        contours = tuple(frozen_array(c, float) for c in front.contours(refine=refine)) if not front.vanished else ()
        from engine.analysis.contours import polyline_length, signed_area

        sp = np.asarray(self.spacing)
        curvature = None
        if self.curvature_colours and contours:
            curvature = shown_curvature(contours, [front.curvature_at(c) for c in contours], sp)

        area = float(sum(signed_area(c * sp) for c in contours))
        perimeter = float(sum(polyline_length(c * sp) for c in contours))
        pins = getattr(front, "_pins", None)
        self._frame = Frame(**dict(base, vanished=live.vanished or front.vanished), contours=contours,
                            curvature=curvature, pins=pins, steps=int(front.steps), time=float(front.time),
                            area_mm2=area, perimeter_mm=perimeter, converged=bool(front.converged),
                            stage="evolving" if running else "paused")

    def _growth_frame(self, base: dict[str, Any], running: bool) -> Frame:
        """A frame of the flood (the pixels it has taken, outlined along their edges)."""
        from engine.analysis.contours import polyline_length, signed_area

        grower = self._grower
        contours = tuple(frozen_array(c, float) for c in grower.contours())
        sp = np.asarray(self.spacing)
        area = float(sum(signed_area(c * sp) for c in contours))
        perimeter = float(sum(polyline_length(c * sp) for c in contours))
        # the front's steps: none while the flood grows (the frame's stage says so)
        steps = int(grower.steps) - grower.passes
        return Frame(**base, contours=contours, steps=steps, time=0.0, area_mm2=area,
                     perimeter_mm=perimeter, converged=False,
                     stage=("growing" if grower.stage == "growing" else "evolving") if running else "paused")

    def refresh(self) -> Frame:
        """Publish a new frame now (after changing :attr:`curvature_colours`, say)."""
        with self._lock:
            self._publish(refine=True)
            return self._frame

    # ------------------------------------------------------------------ saving
    def save(self, out: str, **options: Any) -> dict:
        """Write the committed outlines as a result; see :func:`engine.session.record.save_session`."""
        from engine.session.record import save_session

        with self._lock:
            self._idle()
            return save_session(self, out, **options)


def _changes(old: FrontSettings, new: FrontSettings) -> dict[str, Any]:
    """Settings that differ between ``old`` and ``new`` (new values; None where a parameter went back to its default)."""
    a, b = old.as_record(), new.as_record()
    out = {k: v for k, v in b["params"].items() if a["params"].get(k) != v}
    out.update({k: None for k in a["params"] if k not in b["params"]})
    out.update({k: b[k] for k in ("model", "detail", "max_steps") if a[k] != b[k]})
    return out


def _stroke_details(points: NDArray[np.floating], radius_mm: float) -> dict[str, Any]:
    return {"points": np.round(points, 3).tolist(), "radius_mm": radius_mm}


def _outline_record(front: Front, seeds: Sequence[Sequence[float]] | None, origin: str) -> dict[str, Any]:
    """An outline's record in the saved result: model, settings used, seeds, steps, how it was made."""
    record: dict[str, Any] = {"model": front.params.model,
                              "parameters": dict(front.params.as_dict(), detail=front.detail)}
    if seeds is not None:
        record["seeds"] = [list(s) for s in seeds]
    record.update(steps=int(front.steps), notes=_notes(front, origin))
    return record


def _notes(front: Front, origin: str) -> str:
    state = "converged" if front.converged else "not converged (paused or at the step limit)"
    start = {"seeds": "grown from seeds", "outline": "a corrected outline", "carry": "carried from a neighbouring slice",
             "stroke": "drawn with the Extend brush"}.get(origin, origin)
    return f"{start}; {state} after {front.steps} steps (evolution time {front.time:.6g})"
