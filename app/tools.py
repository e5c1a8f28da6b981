"""Mouse tools of the Slice view: Seed, Extend, Trim, Pin and Probe.

- **Seed**: click places a seed disk of the default radius; press and drag
  sets its radius; right-click on a seed (or Delete with the mouse over it)
  removes it. By default the front evolves at once.
- **Extend** / **Trim** / **Pin**: a stroke of the brush (radius in mm,
  shown as a circle under the mouse) is one edit when the button is let go.
- **Probe**: hovering reports the intensity and the signed distance to the
  front (or to the label's outline on the slice).

Every tool acts on the current label on the slice in view; a click with
every tool also moves the linked cursor of the other two planes.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from PySide6.QtCore import QObject, Qt, Signal

from app.controller import SessionController
from app.study_views import StudyViews
from engine.session.planes import signed_distance

__all__ = ["TOOLS", "ToolHandler"]

#: Tool key -> (name shown, shortcut, what it does).
TOOLS = {
    "seed": ("Seed", "S", "Click: place a seed disk; drag: set its radius; right-click: remove it"),
    "extend": ("Extend", "E", "Brush: add the stroke to the outline"),
    "trim": ("Trim", "T", "Brush: cut the stroke out of the outline"),
    "pin": ("Pin", "P", "Brush: the front cannot move where it is pinned"),
    "probe": ("Probe", "I", "Hover: intensity and signed distance to the front"),
}

#: Colour of a stroke being drawn: Extend in the label's colour, Trim dark (cut away), Pin grey (hatched after).
_STROKE_COLOUR = {"trim": "#000000", "pin": "#b4b4b4"}
_BRUSH_STYLE = {"extend": Qt.PenStyle.SolidLine, "trim": Qt.PenStyle.DashLine, "pin": Qt.PenStyle.DotLine}


class ToolHandler(QObject):
    """Turns gestures on the Slice view into Session calls for the current label."""

    message = Signal(str)  # something for the status bar
    probed = Signal(str)  # the Probe's reading ("" when there is none)
    toolChanged = Signal(str)

    def __init__(self, views: StudyViews, controller: SessionController,
                 current_label: Callable[[bool], int | None]) -> None:
        super().__init__(views)
        self.views = views
        self.controller = controller
        self.current_label = current_label  # current_label(create) -> label index (create: add one if none)
        self.tool = "seed"
        self.brush_mm = 5.0
        self.seed_radius_px = 4.0
        self.evolve_on_seed = True
        self.colour = "#ffffff"
        self._stroke: list[tuple[float, float]] = []
        self._mouse: tuple[float, float] | None = None
        canvas = views.main
        canvas.clicked.connect(self._clicked)
        canvas.dragged.connect(self._dragged)
        canvas.hovered.connect(self._hovered)
        canvas.left.connect(self._left)

    # -------------------------------------------------------------- state
    def set_tool(self, tool: str) -> None:
        if tool not in TOOLS:
            raise ValueError(f"tool: expected one of {', '.join(TOOLS)}, got {tool!r}")
        self.tool = tool
        self.views.main.set_brush(None)
        self.views.main.setCursor(Qt.CursorShape.CrossCursor if tool != "probe" else Qt.CursorShape.ArrowCursor)
        if self._mouse is not None:
            self._hovered(*self._mouse)
        self.probed.emit("")
        self.toolChanged.emit(tool)

    def set_brush_mm(self, radius: float) -> None:
        self.brush_mm = float(max(radius, 0.1))
        if self._mouse is not None:
            self._hovered(*self._mouse)

    def _inside(self, p0: float, p1: float) -> bool:
        n0, n1 = self.views.main.shape
        return -0.5 <= p0 <= n0 - 0.5 and -0.5 <= p1 <= n1 - 0.5

    def _target(self) -> tuple[int, int] | None:
        if self.controller.session is None:
            return None
        label = self.current_label(True)
        if label is None:
            return None
        lab = next((x for x in self.controller.session.labels if x.index == label), None)  # None: being added
        if lab is not None and lab.locked:
            self.message.emit(f"{lab.name} is locked: unlock it in the Labels panel to change it")
            return None
        return label, self.views.slice_index

    # ------------------------------------------------------------ gestures
    def _clicked(self, p0: float, p1: float, button: int, modifiers: int) -> None:
        if self.controller.session is None:
            return
        if button == Qt.MouseButton.RightButton.value:
            if self.tool == "seed":
                self.remove_seed_at(p0, p1)
            return
        if button != Qt.MouseButton.LeftButton.value or not self._inside(p0, p1):
            return
        self.views.set_cursor(p0, p1)
        if self.tool == "seed":
            self._place_seed(p0, p1, self.seed_radius_px)
        elif self.tool in _BRUSH_STYLE:
            self._apply_stroke([(p0, p1)])

    def _dragged(self, stage: str, p0: float, p1: float, s0: float, s1: float) -> None:
        if self.controller.session is None:
            return
        canvas = self.views.main
        if self.tool == "probe":
            self.views.set_cursor(p0, p1)
            return
        if not self._inside(s0, s1):
            return
        if self.tool == "seed":
            radius = max(float(np.hypot(p0 - s0, p1 - s1)), 1.0)
            if stage == "finish":
                canvas.set_preview_circle(None)
                self.views.set_cursor(s0, s1)
                self._place_seed(s0, s1, radius)
            else:
                canvas.set_preview_circle(s0, s1, radius)
                self.message.emit(f"Seed radius {radius:.1f} px")
            return
        if stage == "start":
            self._stroke = [(s0, s1)]
        if not self._stroke or np.hypot(p0 - self._stroke[-1][0], p1 - self._stroke[-1][1]) >= 0.5:
            self._stroke.append((p0, p1))
        canvas.set_stroke(self._stroke, self.brush_mm, _STROKE_COLOUR.get(self.tool, self.colour))
        canvas.set_brush(p0, p1, self.brush_mm, style=_BRUSH_STYLE[self.tool])
        if stage == "finish":
            points, self._stroke = self._stroke, []
            canvas.set_stroke([], 0.0, self.colour)
            self._apply_stroke(points)

    def _hovered(self, p0: float, p1: float) -> None:
        self._mouse = (p0, p1)
        canvas = self.views.main
        if self.tool in _BRUSH_STYLE and self._inside(p0, p1):
            canvas.set_brush(p0, p1, self.brush_mm, style=_BRUSH_STYLE[self.tool])
        else:
            canvas.set_brush(None)
        if self.tool == "probe":
            self.probed.emit(self.probe_text(p0, p1))

    def _left(self) -> None:
        self._mouse = None
        if not self._stroke:
            self.views.main.set_brush(None)
        self.probed.emit("")

    # ------------------------------------------------------------- actions
    def _place_seed(self, p0: float, p1: float, radius: float) -> None:
        target = self._target()
        if target is None:
            return
        label, k = target
        self.controller.seed(p0, p1, radius, label=label, slice_index=k, evolve=self.evolve_on_seed)

    def _apply_stroke(self, points: list[tuple[float, float]]) -> None:
        target = self._target()
        if target is None:
            return
        label, k = target
        self.controller.stroke(self.tool, points, self.brush_mm, label=label, slice_index=k)

    def remove_seed_at(self, p0: float, p1: float) -> bool:
        """Remove the live front's seed under ``(p0, p1)`` on this slice; False when there is none."""
        session = self.controller.session
        frame = session.frame() if session is not None else None
        if frame is None or frame.slice != self.views.slice_index or not frame.seeds:
            self.message.emit("No seed here")
            return False
        seeds = np.asarray(frame.seeds, dtype=float)
        distance = np.hypot(seeds[:, 0] - p0, seeds[:, 1] - p1)
        near = np.flatnonzero(distance <= seeds[:, 2] + 2.0)
        if not len(near):
            self.message.emit("No seed here")
            return False
        index = int(near[np.argmin(distance[near])])
        self.controller.submit("Remove seed", lambda s: s.remove_seed(index))
        return True

    def remove_seed_under_mouse(self) -> bool:
        """Delete: the seed under the mouse, else the last seed placed."""
        if self._mouse is not None and self.remove_seed_at(*self._mouse):
            return True
        session = self.controller.session
        frame = session.frame() if session is not None else None
        if frame is None or not frame.seeds or frame.slice != self.views.slice_index:
            return False
        last = len(frame.seeds) - 1
        self.controller.submit("Remove seed", lambda s: s.remove_seed(last))
        return True

    def probe_text(self, p0: float, p1: float) -> str:
        """The Probe's reading at a pixel: signed distance to the front or the current label's outline."""
        session = self.controller.session
        if session is None or not self._inside(p0, p1):
            return ""
        frame = session.frame()
        k = self.views.slice_index
        contours, what = (), ""
        if frame.slice == k and frame.contours:
            contours, what = frame.contours, "the front"
        else:
            label = self.current_label(False)
            found = session.outlines(k, label) if label is not None else ()
            if found:
                contours, what = found[0].contours, f"the outline of {session.label(label).name}"
        if not contours:
            return "no front or outline on this slice"
        d = signed_distance(contours, (p0, p1), session.spacing)
        return f"{d:+.2f} mm from {what} ({'inside' if d < 0 else 'outside'})"
