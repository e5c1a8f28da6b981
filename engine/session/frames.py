"""The Session's frames: an immutable picture of the live front after every step and change.

Part of :class:`engine.session.Session` (its threading contract is in :mod:`engine.session.session`).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from engine.session.outline import frozen_array, shown_curvature
from engine.session.state import Frame

__all__ = ["Publishing"]


class Publishing:
    """Publishing frames of the live front (the flood's pixels while it grows) for viewers."""

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
            self._frame = self._growth_frame(base, running, refine)
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

    def _growth_frame(self, base: dict[str, Any], running: bool, refine: bool) -> Frame:
        """A frame of the flood (the pixels it has taken, outlined along their edges), or of the front built from it."""
        from engine.analysis.contours import polyline_length, signed_area

        grower = self._grower
        contours = tuple(frozen_array(c, float) for c in grower.contours(refine=refine))
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
