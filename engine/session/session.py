"""The Session: one case being outlined — labels, committed outlines per slice, the live front, undo.

The class is assembled from one part per job: opening, read-outs, labels,
seeds and undo here; runs and settings in :mod:`engine.session.running`;
brushes, commit and carry in :mod:`engine.session.editing`; frames in
:mod:`engine.session.frames`.

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
from collections.abc import Callable, Mapping, Sequence
from dataclasses import replace
from types import MappingProxyType
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from engine.front import Front
from engine.io.sidecar import OKABE_ITO, utc_now
from engine.image.features import ImageFeatures, compute_features
from engine.io.volume import Volume
from engine.segmenter import Segmenter
from engine.session import fronts
from engine.session.editing import Editing
from engine.session.frames import Publishing
from engine.session.outline import Outline
from engine.session.running import Running, SessionBusy
from engine.session.settings import FrontSettings
from engine.session.state import Command, Frame, Label, LiveState, SessionState, UndoStack
from engine.validation import check_colour, check_label_name, check_seed, check_slice, check_spacing

__all__ = ["Session", "SessionBusy"]


class Session(Running, Editing, Publishing):
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
        self._features: dict[tuple[int, float, float | None], ImageFeatures] = {}
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
                self._features.clear()
            self._images[k] = img
        return img

    def features(self, slice_index: int, settings: FrontSettings | None = None) -> ImageFeatures:
        """The image features of slice ``slice_index`` at the edge scale and contrast of ``settings``.

        Cached with the slice (:meth:`image`): every front started on the
        slice shares them (the smoothed image and its spline coefficients).
        """
        image = self.image(slice_index)
        params = (settings or self._default_settings).resolved()
        key = (self._check_slice(slice_index), float(params.edge_sigma), params.edge_contrast)
        found = self._features.get(key)
        if found is None:
            found = self._features[key] = compute_features(image, np.asarray(self.spacing, dtype=float),
                                                           sigma_mm=params.edge_sigma, contrast=params.edge_contrast)
        return found

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
            front = fronts.restore_front(self.image(live.slice), live.snapshot, self.spacing, settings,
                                         self.features(live.slice, settings))
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
            front = fronts.start_from_seeds(self.image(k), live.seeds, self.spacing, settings, self.features(k, settings))
        elif (label, k) in state.outlines:
            front = fronts.start_from_outline(self.image(k), state.outlines[(label, k)], self.spacing, settings,
                                              self.features(k, settings))
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

    # ------------------------------------------------------------------ saving
    def save(self, out: str, **options: Any) -> dict:
        """Write the committed outlines as a result; see :func:`engine.session.record.save_session`."""
        from engine.session.record import save_session

        with self._lock:
            self._idle()
            return save_session(self, out, **options)
