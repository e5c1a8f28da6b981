"""The colour bar of the curvature colouring: concave (blue) … straight (grey) … convex (vermillion), in 1/mm."""

from __future__ import annotations

from PySide6.QtCore import QRectF, Qt
from PySide6.QtGui import QColor, QLinearGradient, QPainter
from PySide6.QtWidgets import QSizePolicy, QWidget

from app.overlays import curvature_colours

__all__ = ["CurvatureBar"]


class CurvatureBar(QWidget):
    """A horizontal colour bar from −limit to +limit (1/mm)."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.limit = 0.25
        self.setMinimumHeight(36)
        self.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Fixed)
        self.setToolTip("Curvature along the outline (1/mm): a circle of radius r has 1/r; "
                        "negative where the outline bends inward")

    def set_limit(self, limit: float) -> None:
        self.limit = float(limit)
        self.update()

    def paintEvent(self, _ev) -> None:  # noqa: N802
        p = QPainter(self)
        w, h = self.width(), self.height()
        p.fillRect(self.rect(), QColor(0, 0, 0, 150))
        bar = QRectF(4, 2, w - 8, 12)
        gradient = QLinearGradient(bar.left(), 0, bar.right(), 0)
        colours = curvature_colours()
        for i, colour in enumerate(colours):
            gradient.setColorAt(i / (len(colours) - 1), colour)
        p.fillRect(bar, gradient)
        p.setPen(QColor(235, 235, 235))
        text_box = QRectF(4, 16, w - 8, h - 16)
        p.drawText(text_box, Qt.AlignmentFlag.AlignLeft, f"−{self.limit:g} concave")
        p.drawText(text_box, Qt.AlignmentFlag.AlignHCenter, "0")
        p.drawText(text_box, Qt.AlignmentFlag.AlignRight, f"convex +{self.limit:g} 1/mm")
        p.end()
