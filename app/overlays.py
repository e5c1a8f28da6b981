"""Drawing helpers for outlines on a plane: polylines for ``PlotCurveItem``, curvature colours, hatching.

Everything here turns engine values (pixel ``(row, col)`` polylines,
curvature per vertex, masks) into what pyqtgraph draws; coordinates stay in
the plane's pixel units (x = column, y = row).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pyqtgraph as pg
from numpy.typing import NDArray
from PySide6.QtCore import Qt
from PySide6.QtGui import QColor, QPen

__all__ = ["joined", "circle_points", "ellipse_points", "CurvatureCurves", "curvature_colours", "hatch_rgba",
           "label_pen", "stroke_pen", "CURVATURE_BINS"]

#: Colour steps of the curvature map.
CURVATURE_BINS = 15
# Diverging map: concave (negative κ) blue #0072B2, straight light grey, convex vermillion #D55E00
# (end colours from the Okabe–Ito palette, so the map stays readable with colour-blind vision).
_NEG, _MID, _POS = np.array([0, 114, 178]), np.array([235, 235, 235]), np.array([213, 94, 0])


def curvature_colours(n: int = CURVATURE_BINS) -> list[QColor]:
    """``n`` colours from concave (blue) through straight (light grey) to convex (vermillion)."""
    out = []
    for t in np.linspace(-1.0, 1.0, n):
        rgb = _MID + (_POS - _MID) * t if t >= 0 else _MID + (_NEG - _MID) * (-t)
        out.append(QColor(*[int(round(v)) for v in rgb]))
    return out


def joined(contours: Sequence[NDArray[np.floating]], *, close: bool = True) -> tuple[NDArray, NDArray]:
    """All polylines as one (x, y) pair separated by NaN (``connect='finite'``); x = column, y = row."""
    parts = []
    for c in contours:
        c = np.asarray(c, dtype=float).reshape(-1, 2)
        if len(c) == 0:
            continue
        parts.append(np.vstack([c, c[:1]]) if close else c)
        parts.append(np.full((1, 2), np.nan))
    if not parts:
        return np.zeros(0), np.zeros(0)
    pts = np.vstack(parts)
    return pts[:, 1], pts[:, 0]


def circle_points(row: float, col: float, radius_px: float, n: int = 64) -> NDArray[np.floating]:
    """A closed circle polyline ``(row, col)`` of ``radius_px`` pixels."""
    return ellipse_points(row, col, radius_px, radius_px, n)


def ellipse_points(row: float, col: float, radius_rows: float, radius_cols: float, n: int = 64
                   ) -> NDArray[np.floating]:
    t = np.linspace(0.0, 2.0 * np.pi, n, endpoint=False)
    return np.column_stack([row + radius_rows * np.sin(t), col + radius_cols * np.cos(t)])


def label_pen(colour: str, *, dashed: bool = False, width: float = 2.0) -> QPen:
    pen = pg.mkPen(QColor(colour), width=width)
    if dashed:
        pen.setStyle(Qt.PenStyle.CustomDashLine)
        pen.setDashPattern([4.0, 3.0])
    return pen


def stroke_pen(colour: str, width_px: float, *, alpha: int = 90) -> QPen:
    """A translucent pen as wide as a brush stroke, in the plane's pixel units (not screen pixels)."""
    c = QColor(colour)
    c.setAlpha(alpha)
    pen = QPen(c)
    pen.setWidthF(max(width_px, 0.1))
    pen.setCosmetic(False)
    pen.setCapStyle(Qt.PenCapStyle.RoundCap)
    pen.setJoinStyle(Qt.PenJoinStyle.RoundJoin)
    return pen


class CurvatureCurves:
    """Outlines coloured by curvature: one ``PlotCurveItem`` per colour step, drawn as segment pairs."""

    def __init__(self, parent: pg.GraphicsObject, *, dashed: bool = False, z: float = 0.0) -> None:
        self.items = []
        for colour in curvature_colours():
            item = pg.PlotCurveItem(connect="pairs", antialias=True)
            item.setPen(label_pen(colour.name(), dashed=dashed, width=2.5))
            item.setParentItem(parent)
            item.setZValue(z)
            item.setVisible(False)
            self.items.append(item)

    def clear(self) -> None:
        for item in self.items:
            if item.isVisible():
                item.setData([], [])
                item.setVisible(False)

    def set(self, contours: Sequence[NDArray[np.floating]], curvature: Sequence[NDArray[np.floating]],
            limit: float) -> None:
        """Colour each segment by the mean curvature of its ends, ±``limit`` (1/mm) at the map's ends."""
        starts, ends, kappa = [], [], []
        for c, k in zip(contours, curvature):
            c = np.asarray(c, dtype=float).reshape(-1, 2)
            k = np.asarray(k, dtype=float).reshape(-1)
            if len(c) < 2 or len(k) != len(c):
                continue
            starts.append(c)
            ends.append(np.roll(c, -1, axis=0))
            kappa.append(0.5 * (k + np.roll(k, -1)))
        if not starts:
            self.clear()
            return
        a, b, k = np.vstack(starts), np.vstack(ends), np.concatenate(kappa)
        n = len(self.items)
        bins = np.clip(np.rint((k / max(limit, 1e-12) + 1.0) * 0.5 * (n - 1)), 0, n - 1).astype(int)
        for i, item in enumerate(self.items):
            sel = bins == i
            if not sel.any():
                item.setData([], [])
                item.setVisible(False)
                continue
            item.setVisible(True)
            pts = np.empty((2 * int(sel.sum()), 2))
            pts[0::2], pts[1::2] = a[sel], b[sel]
            item.setData(pts[:, 1], pts[:, 0], connect="pairs")


def hatch_rgba(mask: NDArray[np.bool_], *, period: int = 6) -> NDArray[np.uint8]:
    """An RGBA picture of ``mask``: grey diagonal hatching over a faint grey fill."""
    rows, cols = np.indices(mask.shape)
    stripe = ((rows + cols) % period) < 2
    out = np.zeros(mask.shape + (4,), dtype=np.uint8)
    out[mask] = (170, 170, 170, 45)
    out[mask & stripe] = (200, 200, 200, 210)
    return out
