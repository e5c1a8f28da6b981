"""The **Cases** dock: the study in view, the other series of its folder, and its slices.

Each slice shows a dot in the colour of every label outlined on it (and a
ring for the live front), so a technician walking a structure through a
stack sees where outlines are missing; a click goes to the slice. A
double-click on another series of the same folder opens it.
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QSize, Qt, Signal
from PySide6.QtGui import QColor, QIcon, QPainter, QPen, QPixmap
from PySide6.QtWidgets import QLabel, QListWidget, QListWidgetItem, QVBoxLayout, QWidget

from engine.io import SeriesInfo
from engine.session import Session

__all__ = ["CasesPanel", "case_name"]


def case_name(session: Session) -> str:
    """A short name of the study: its file or folder (the folder above a folder named ``dicom``)."""
    path = Path(session.volume.path) if session.volume.path else None
    if path is None or session.volume.path in ("array", ""):
        return "image in memory"
    name = path.name
    for suffix in (".nii.gz", ".nii", ".dcm", ".png", ".tif", ".tiff", ".npy"):
        if name.lower().endswith(suffix):
            return name[: -len(suffix)]
    if name.lower() == "dicom" and path.parent.name:
        return path.parent.name
    return name


def _dots(colours: list[str], live: str | None, size: int = 12) -> QIcon:
    count = max(len(colours) + (1 if live else 0), 1)
    pix = QPixmap(count * (size + 2), size)
    pix.fill(Qt.GlobalColor.transparent)
    p = QPainter(pix)
    p.setRenderHint(QPainter.RenderHint.Antialiasing)
    x = 0
    for colour in colours:
        p.setBrush(QColor(colour))
        p.setPen(Qt.PenStyle.NoPen)
        p.drawEllipse(x + 1, 1, size - 2, size - 2)
        x += size + 2
    if live:
        pen = QPen(QColor(live))
        pen.setWidthF(2.0)
        pen.setStyle(Qt.PenStyle.DashLine)
        p.setPen(pen)
        p.setBrush(Qt.BrushStyle.NoBrush)
        p.drawEllipse(x + 2, 2, size - 4, size - 4)
    p.end()
    return QIcon(pix)


class CasesPanel(QWidget):
    """Study summary, series of its folder, slice list."""

    sliceChosen = Signal(int)
    seriesChosen = Signal(str, str)  # path, series key

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.summary = QLabel("No study open.\nFile ▸ Open file or Open folder, or drop a file here.")
        self.summary.setWordWrap(True)
        self.summary.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.series = QListWidget()
        self.series.setToolTip("Series in the same folder (double-click to open one)")
        self.series_title = QLabel("Series in this folder")
        self.slices = QListWidget()
        self.slices.setIconSize(QSize(80, 12))
        self.slices.setToolTip("Slices; a dot for each label outlined there, a dashed ring for the live front")
        layout = QVBoxLayout(self)
        layout.setContentsMargins(6, 4, 6, 4)
        layout.addWidget(self.summary)
        layout.addWidget(self.series_title)
        layout.addWidget(self.series, 1)
        layout.addWidget(QLabel("Slices"))
        layout.addWidget(self.slices, 4)
        self._path = ""
        self._key: object = None
        self.slices.currentRowChanged.connect(lambda row: self.sliceChosen.emit(row) if row >= 0 else None)
        self.series.itemDoubleClicked.connect(self._series_chosen)
        self.set_series("", [], None)

    def set_study(self, session: Session | None) -> None:
        self._key = None
        if session is None:
            self.summary.setText("No study open.\nFile ▸ Open file or Open folder, or drop a file here.")
            self.slices.clear()
            return
        v = session.volume
        sp = v.spacing
        lines = [f"<b>{case_name(session)}</b>", v.source,
                 f"{v.modality} · {v.shape[0]} × {v.shape[1]} × {v.shape[2]} (slices × rows × columns)",
                 f"spacing {sp[1]:g} × {sp[2]:g} mm, slices {sp[0]:g} mm apart"]
        lines += [f"⚠ {w}" for w in v.warnings]
        self.summary.setText("<br>".join(lines))
        self.summary.setToolTip(v.path)
        self.refresh(session, None)

    def set_series(self, path: str, series: list[SeriesInfo], current: str | None) -> None:
        self._path = path
        self.series.clear()
        for info in series:
            text = (f"{info.modality} {info.description or 'series'} — {info.slices} × {info.rows} × {info.cols}, "
                    f"{info.orientation}")
            item = QListWidgetItem(("▸ " if info.key == current else "  ") + text)
            item.setData(Qt.ItemDataRole.UserRole, info.key)
            self.series.addItem(item)
        show = len(series) > 1
        self.series.setVisible(show)
        self.series_title.setVisible(show)

    def _series_chosen(self, item: QListWidgetItem) -> None:
        self.seriesChosen.emit(self._path, str(item.data(Qt.ItemDataRole.UserRole)))

    def refresh(self, session: Session | None, current_slice: int | None) -> None:
        """Update the dots when outlines, labels or the live front changed."""
        if session is None:
            return
        live = session.live
        key = (session.state.outlines, session.labels, (live.label, live.slice) if live else None,
               session.slices)
        if key != self._key:
            self._key = key
            colours = {lab.index: lab.colour for lab in session.labels}
            order = {lab.index: i for i, lab in enumerate(session.labels)}
            per_slice: dict[int, list[int]] = {}
            for label, k in session.state.outlines:
                per_slice.setdefault(k, []).append(label)
            self.slices.blockSignals(True)
            if self.slices.count() != session.slices:
                self.slices.clear()
                for k in range(session.slices):
                    self.slices.addItem(QListWidgetItem(f"{k}"))
            for k in range(session.slices):
                labels = sorted(per_slice.get(k, []), key=lambda i: order.get(i, 0))
                live_colour = colours.get(live.label) if live is not None and live.slice == k else None
                self.slices.item(k).setIcon(_dots([colours.get(i, "#888888") for i in labels], live_colour))
            self.slices.blockSignals(False)
        if current_slice is not None and self.slices.currentRow() != current_slice:
            self.slices.blockSignals(True)
            self.slices.setCurrentRow(current_slice)
            self.slices.blockSignals(False)
