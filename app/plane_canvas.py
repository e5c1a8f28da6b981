"""One plane of the study on screen: image, outlines, live front, seeds, brush and cursor (pyqtgraph).

A :class:`PlaneCanvas` shows a plane's natural 2-D array (``[row, col]`` of a
slice, ``[slice, col]`` of a row plane, ``[slice, row]`` of a column plane)
in an ``ImageItem`` (row-major) placed so that pixel centres fall on whole
numbers; the item and every overlay hang in one group whose transform turns
pixels into screen millimetres in the plane's orientation
(:meth:`engine.session.planes.PlaneView.display_matrix`), so the physical
aspect ratio and the patient's left and right come out right. Mouse gestures
are reported in the plane's pixel coordinates ``(p0, p1)``; the wheel scrolls
slices (Ctrl: zoom), the middle button pans, right-drag sets window/level.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pyqtgraph as pg
from numpy.typing import NDArray
from PySide6.QtCore import QPointF, QRectF, Qt, Signal
from PySide6.QtGui import QColor, QTransform
from PySide6.QtWidgets import QLabel

from app.curvature_bar import CurvatureBar
from app.overlays import CurvatureCurves, circle_points, ellipse_points, hatch_rgba, joined, label_pen, stroke_pen
from engine.session.planes import PlaneView

__all__ = ["PlaneCanvas"]

_OVERLAY_STYLE = "color: #f0f0f0; background: rgba(0, 0, 0, 140); padding: 1px 4px; border-radius: 3px;"


class _PlaneViewBox(pg.ViewBox):
    """A ViewBox whose mouse gestures go to its canvas (left: the tool; right: window/level)."""

    def __init__(self, canvas: "PlaneCanvas") -> None:
        super().__init__(invertY=True, lockAspect=True, enableMenu=False)
        self.disableAutoRange()  # the canvas fits the plane itself; no bounds to gather at every frame
        self._canvas = canvas
        self.setAcceptHoverEvents(True)

    def mouseClickEvent(self, ev) -> None:  # noqa: N802 - Qt naming
        p0, p1 = self._canvas.to_natural(ev.scenePos())
        self._canvas.clicked.emit(p0, p1, int(ev.button().value), int(ev.modifiers().value))
        ev.accept()

    def mouseDragEvent(self, ev, axis=None) -> None:  # noqa: N802
        button = ev.button()
        if button == Qt.MouseButton.MiddleButton:
            self._canvas.auto_fit = False
            super().mouseDragEvent(ev, axis)
            return
        ev.accept()
        stage = "start" if ev.isStart() else ("finish" if ev.isFinish() else "move")
        if button == Qt.MouseButton.RightButton:
            delta = ev.screenPos() - ev.lastScreenPos()
            self._canvas.levelDragged.emit(float(delta.x()), float(delta.y()), stage)
            return
        if button == Qt.MouseButton.LeftButton:
            p0, p1 = self._canvas.to_natural(ev.scenePos())
            s0, s1 = self._canvas.to_natural(ev.buttonDownScenePos())
            self._canvas.dragged.emit(stage, p0, p1, s0, s1)

    def wheelEvent(self, ev, axis=None) -> None:  # noqa: N802
        if ev.modifiers() & Qt.KeyboardModifier.ControlModifier:
            self._canvas.auto_fit = False
            super().wheelEvent(ev, axis)
            return
        delta = ev.delta() if hasattr(ev, "delta") else ev.angleDelta().y()
        steps = int(round(delta / 120.0)) or (1 if delta > 0 else -1)
        self._canvas.wheeled.emit(steps)
        ev.accept()

    def hoverEvent(self, ev) -> None:  # noqa: N802
        if ev.isExit():
            self._canvas.left.emit()
            return
        p0, p1 = self._canvas.to_natural(ev.scenePos())
        self._canvas.hovered.emit(p0, p1)


class PlaneCanvas(pg.GraphicsView):
    """A plane of the study with its overlays (see the module docstring)."""

    clicked = Signal(float, float, int, int)  # p0, p1, Qt mouse button, modifiers
    dragged = Signal(str, float, float, float, float)  # stage, p0, p1, start p0, start p1
    levelDragged = Signal(float, float, str)  # dx, dy screen pixels, stage
    wheeled = Signal(int)  # wheel steps (positive: away from the user)
    hovered = Signal(float, float)
    left = Signal()

    def __init__(self, parent=None) -> None:
        super().__init__(parent, background="#101010")
        self.vb = _PlaneViewBox(self)
        self.setCentralItem(self.vb)
        self.vb.sigResized.connect(self._vb_resized)
        self.group = pg.ItemGroup()
        self.vb.addItem(self.group)
        self.image = pg.ImageItem(axisOrder="row-major")
        self.image.setParentItem(self.group)
        self.pins = pg.ImageItem(axisOrder="row-major")
        self.pins.setParentItem(self.group)
        self.pins.setZValue(5)
        self._outline_items: dict[int, pg.PlotCurveItem] = {}
        self._outline_curvature = CurvatureCurves(self.group, z=10)
        self.live = self._curve(z=20)
        self._live_curvature = CurvatureCurves(self.group, dashed=True, z=20)
        self.seeds = self._curve(z=25)
        self.seed_centres = pg.ScatterPlotItem(size=5, pxMode=True)
        self.seed_centres.setParentItem(self.group)
        self.seed_centres.setZValue(25)
        self.stroke = self._curve(z=15)
        self.brush = self._curve(z=30)
        self.cursor = self._curve(z=8)
        self.cursor.setPen(pg.mkPen(QColor(255, 230, 120, 150), width=1, style=Qt.PenStyle.DotLine))
        self.view: PlaneView | None = None
        self.auto_fit = True  # fit the plane to the canvas on resize until the user zooms or pans
        self.shape: tuple[int, int] = (0, 0)
        self.pixel_mm: tuple[float, float] = (1.0, 1.0)
        self._pins_source: object = None
        self._title = self._overlay_label()
        self._edges = [self._overlay_label() for _ in range(4)]
        self._corner = self._overlay_label()
        self.curvature_bar = CurvatureBar(self)
        self.curvature_bar.setAttribute(Qt.WidgetAttribute.WA_TransparentForMouseEvents)
        self.curvature_bar.setFixedWidth(300)
        self.curvature_bar.hide()
        self._empty = QLabel(self)
        self._empty.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self._empty.setWordWrap(True)
        self._empty.setStyleSheet("color: #9a9a9a; font-size: 15px;")
        self._empty.setAttribute(Qt.WidgetAttribute.WA_TransparentForMouseEvents)
        self._empty.hide()
        self.setMinimumSize(160, 160)
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)

    # ---------------------------------------------------------------- set-up
    def _curve(self, *, z: float) -> pg.PlotCurveItem:
        item = pg.PlotCurveItem(connect="finite", antialias=True)
        item.setParentItem(self.group)
        item.setZValue(z)
        return item

    def _overlay_label(self) -> QLabel:
        label = QLabel(self)
        label.setStyleSheet(_OVERLAY_STYLE)
        label.setAttribute(Qt.WidgetAttribute.WA_TransparentForMouseEvents)
        label.hide()
        return label

    def set_plane(self, view: PlaneView, volume_shape: Sequence[int], spacing: Sequence[float]) -> None:
        """Lay out the plane ``view`` of a volume (shape and spacing of all three axes)."""
        self.view = view
        a0, a1 = view.axes
        self.shape = (int(volume_shape[a0]), int(volume_shape[a1]))
        self.pixel_mm = (float(spacing[a0]), float(spacing[a1]))
        m = view.display_matrix(volume_shape, spacing)
        # item coordinates are (x, y) = (p1, p0); QTransform maps x' = m11 x + m21 y + dx, y' = m12 x + m22 y + dy
        self.group.setTransform(QTransform(m[0, 1], m[1, 1], m[0, 0], m[1, 0], m[0, 2], m[1, 2]))
        for label, text in zip(self._edges, view.edges):
            label.setText(text)
            label.setVisible(bool(text))
        self._place_overlays()
        self.fit()

    def fit(self) -> None:
        """Show the whole plane (and keep it fitted when the canvas is resized)."""
        self.auto_fit = True
        if self.view is None:
            return
        rect = self.group.mapRectToParent(self._rect())
        self.vb.setRange(rect, padding=0.02)

    def zoom(self, factor: float) -> None:
        """Enlarge (``factor`` > 1) or shrink the view about its centre."""
        self.auto_fit = False
        self.vb.scaleBy((1.0 / factor, 1.0 / factor))

    def set_title(self, text: str) -> None:
        self._title.setText(text)
        self._title.setVisible(bool(text))
        self._title.adjustSize()

    def _vb_resized(self, *_args) -> None:
        if self.auto_fit and self.view is not None and not getattr(self, "closed", False):
            self.fit()

    def set_empty_text(self, text: str) -> None:
        """A centred note shown while the canvas has nothing to show ("" hides it)."""
        self._empty.setText(text)
        self._empty.setVisible(bool(text))
        self._place_overlays()

    def set_corner_text(self, text: str) -> None:
        """A line in the bottom-left corner (e.g. the window/level)."""
        self._corner.setText(text)
        self._corner.setVisible(bool(text))
        self._corner.adjustSize()
        self._place_overlays()

    def resizeEvent(self, ev) -> None:  # noqa: N802
        if getattr(self, "closed", False):
            return  # closing: the scene's items are already deleted
        super().resizeEvent(ev)
        self._place_overlays()

    def _place_overlays(self) -> None:
        if not hasattr(self, "_corner"):
            return  # called by the base class before the overlays exist
        w, h = self.width(), self.height()
        self._title.adjustSize()
        self._title.move(6, 6)
        left, right, top, bottom = self._edges
        for label in self._edges:
            label.adjustSize()
        left.move(4, (h - left.height()) // 2)
        right.move(w - right.width() - 4, (h - right.height()) // 2)
        top.move((w - top.width()) // 2, 4)
        bottom.move((w - bottom.width()) // 2, h - bottom.height() - 4)
        self._corner.adjustSize()
        self._corner.move(6, h - self._corner.height() - 6)
        self.curvature_bar.move(w - self.curvature_bar.width() - 8, h - self.curvature_bar.height() - 8)
        self._empty.setGeometry(w // 8, h // 3, w - w // 4, h // 3)

    # ----------------------------------------------------------- mapping
    def to_natural(self, scene_pos: QPointF) -> tuple[float, float]:
        """Plane pixel coordinates ``(p0, p1)`` of a scene point."""
        p = self.group.mapFromScene(scene_pos)
        return float(p.y()), float(p.x())

    def to_scene(self, p0: float, p1: float) -> QPointF:
        return self.group.mapToScene(QPointF(p1, p0))

    def to_widget(self, p0: float, p1: float):
        """Viewport pixel position of a plane point (for scripted mouse input)."""
        return self.mapFromScene(self.to_scene(p0, p1))

    def screen_px_per_pixel(self) -> float:
        """Screen pixels per plane pixel along its first axis (for brush outlines)."""
        a, b = self.to_widget(0.0, 0.0), self.to_widget(1.0, 0.0)
        return float(np.hypot(b.x() - a.x(), b.y() - a.y()))

    # ---------------------------------------------------------- contents
    def _rect(self) -> QRectF:
        """Where the plane's pixels lie in item coordinates: pixel centres on whole numbers."""
        return QRectF(-0.5, -0.5, self.shape[1], self.shape[0])

    def set_image(self, array: NDArray, levels: tuple[float, float]) -> None:
        self.image.setImage(array, levels=levels, autoLevels=False)
        self.image.setRect(self._rect())  # after the image: the rect scales by the image's size

    def set_levels(self, levels: tuple[float, float]) -> None:
        self.image.setLevels(levels)

    def set_outlines(self, outlines: Mapping[int, tuple[str, Sequence[NDArray], Sequence[NDArray] | None]], *,
                     curvature_limit: float | None = None) -> None:
        """Committed outlines per label: ``{label: (colour, contours, curvature)}`` (solid lines).

        With ``curvature_limit`` the outlines are coloured by curvature instead.
        """
        for label in list(self._outline_items):
            if label not in outlines or curvature_limit is not None:
                self._outline_items.pop(label).setParentItem(None)
        if curvature_limit is not None:
            contours = [c for _, cs, _ in outlines.values() for c in cs]
            kappa = [k for _, cs, ks in outlines.values() if ks is not None for k in ks]
            if len(kappa) == len(contours):
                self._outline_curvature.set(contours, kappa, curvature_limit)
                return
        self._outline_curvature.clear()
        for label, (colour, contours, _) in outlines.items():
            item = self._outline_items.get(label)
            if item is None:
                item = self._outline_items[label] = self._curve(z=10)
            item.setPen(label_pen(colour))
            item.setData(*joined(contours), connect="finite")

    def set_live(self, contours: Sequence[NDArray], colour: str, curvature: Sequence[NDArray] | None = None, *,
                 curvature_limit: float | None = None) -> None:
        """The live front (dashed), or coloured by curvature."""
        if curvature_limit is not None and curvature is not None:
            self.live.setData([], [])
            self._live_curvature.set(contours, curvature, curvature_limit)
            return
        self._live_curvature.clear()
        self.live.setPen(label_pen(colour, dashed=True))
        self.live.setData(*joined(contours), connect="finite")

    def set_seeds(self, seeds: Sequence[Sequence[float]], colour: str) -> None:
        """Seed disks ``(row, col, radius_px)`` as thin circles with a dot at the centre."""
        circles = [circle_points(r, c, rad) for r, c, rad in seeds]
        self.seeds.setPen(pg.mkPen(QColor(colour), width=1.5))
        self.seeds.setData(*joined(circles), connect="finite")
        self.seed_centres.setData([c for _, c, _ in seeds], [r for r, _, _ in seeds], brush=pg.mkBrush(colour),
                                  pen=pg.mkPen("#000000"))

    def set_pins(self, pins: NDArray[np.bool_] | None) -> None:
        """The pinned area, hatched grey (redrawn only when the mask object changes)."""
        if pins is self._pins_source:
            return
        self._pins_source = pins
        if pins is None or not pins.any():
            self.pins.hide()
            return
        self.pins.setImage(hatch_rgba(pins), autoLevels=False)
        self.pins.setRect(self._rect())
        self.pins.show()

    def set_brush(self, p0: float | None, p1: float | None = None, radius_mm: float = 0.0, *,
                  style: Qt.PenStyle = Qt.PenStyle.SolidLine) -> None:
        """The brush circle (``radius_mm``) around a plane point; None hides it."""
        if p0 is None or radius_mm <= 0:
            self.brush.setData([], [])
            return
        pts = ellipse_points(p0, p1, radius_mm / self.pixel_mm[0], radius_mm / self.pixel_mm[1])
        self.brush.setPen(pg.mkPen(QColor(255, 255, 255, 220), width=1.5, style=style))
        self.brush.setData(*joined([pts]), connect="finite")

    def set_preview_circle(self, p0: float | None, p1: float = 0.0, radius_px: float = 0.0) -> None:
        """A dashed circle of ``radius_px`` plane pixels (a seed being placed); None hides it."""
        if p0 is None:
            self.brush.setData([], [])
            return
        self.brush.setPen(pg.mkPen(QColor(255, 255, 255, 230), width=1.5, style=Qt.PenStyle.DashLine))
        self.brush.setData(*joined([circle_points(p0, p1, max(radius_px, 0.5))]), connect="finite")

    def set_stroke(self, points: Sequence[Sequence[float]], radius_mm: float, colour: str) -> None:
        """The area a brush stroke sweeps, shown while it is drawn."""
        if not points:
            self.stroke.setData([], [])
            return
        pts = np.asarray(points, dtype=float).reshape(-1, 2)
        width = 2.0 * radius_mm / float(np.mean(self.pixel_mm))
        self.stroke.setPen(stroke_pen(colour, width, alpha=140 if colour == "#000000" else 90))
        if len(pts) == 1:
            pts = np.vstack([pts, pts + 1e-3])
        self.stroke.setData(pts[:, 1], pts[:, 0])

    def set_cursor(self, p0: float | None, p1: float | None) -> None:
        """Cross-hair lines through a plane point (None hides them)."""
        if p0 is None or self.view is None:
            self.cursor.setData([], [])
            return
        n0, n1 = self.shape
        x = np.array([-0.5, n1 - 0.5, np.nan, p1, p1])
        y = np.array([p0, p0, np.nan, -0.5, n0 - 0.5])
        self.cursor.setData(x, y, connect="finite")
