"""The Session's edits of the live front (brushes, pins, margin) and its commit and carry.

Part of :class:`engine.session.Session` (its threading contract is in :mod:`engine.session.session`).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import replace
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from engine.front import Front
from engine.session import fronts
from engine.session.outline import Outline, outline_from_front
from engine.session.state import LiveState
from engine.validation import check_margin, check_stroke

__all__ = ["Editing"]


class Editing:
    """Brush strokes, pins and margins on the live front; committing it and carrying it to a next slice."""

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
                front = fronts.start_from_stroke(self.image(k), pts, r, self.spacing, self.settings(label),
                                                 self.features(k, self.settings(label)))
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
            front = fronts.start_from_outline(self.image(k), source, self.spacing, settings, self.features(k, settings))
            self._adopt(front, state, label, k)
            new_live = LiveState(label, k, origin="carry", snapshot=front.snapshot(), front_id=self._front_id)
            self._push(f"Carry from slice {from_slice}", "carry", replace(state, live=new_live), label=label,
                       slice_index=k, details={"from_slice": int(from_slice)})


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
