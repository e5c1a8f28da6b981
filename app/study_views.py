"""The Slice view and, for a volume, the two other planes through a linked cursor.

:class:`StudyViews` holds the **Slice view** (the study's own slices, where
fronts grow and tools act; titled Axial, Coronal or Sagittal when the file
says which) with its slice slider, and beside it the planes of fixed row and
fixed column through the cursor. Every label's outlines show in all three
(cut along the row and column in the other two, one slab per slice) and the
live front is drawn dashed wherever it shows. Window/level is shared by all.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QHBoxLayout, QLabel, QSlider, QSplitter, QVBoxLayout, QWidget

from app.plane_canvas import PlaneCanvas
from engine.session import Session
from engine.session.outline import shown_curvature
from engine.session.planes import PlaneView, line_intervals, plane_views, section_contours, slab_rectangles

__all__ = ["StudyViews", "EMPTY_TEXT"]

#: What the Slice view says before a study is open.
EMPTY_TEXT = ("No study open.\n\nFile ▸ Open file or Open folder, drop a file or folder here, "
              "or File ▸ Open recent.\nisotide demo shows the tool at work on an invented study.")


class StudyViews(QWidget):
    """The canvases of one study (see the module docstring)."""

    sliceChanged = Signal(int)
    hovered = Signal(float, float, float)  # slice, row, col of the pixel under the mouse
    hoverLeft = Signal()
    levelsChanged = Signal(float, float)  # centre, width

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.session: Session | None = None
        self.main = PlaneCanvas()
        self.side = {1: PlaneCanvas(), 2: PlaneCanvas()}
        self.slider = QSlider(Qt.Orientation.Vertical)
        self.slider.setInvertedAppearance(True)
        self.slider.setToolTip("Slice (PageUp / PageDown, mouse wheel)")
        self.slider.valueChanged.connect(self.set_slice)
        self.slice_label = QLabel("")
        self.slice_label.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self.slice_index = 0
        self.cursor = (0.0, 0.0)  # row, col of the other two planes
        self.window = (0.0, 1.0)  # centre, width
        self.curvature_limit: float | None = None
        self.three_views = True
        self.views: dict[int, PlaneView] = {}
        self._sections_key: Any = None
        self._build()
        self.main.wheeled.connect(lambda n: self.set_slice(self.slice_index + n))
        self.main.hovered.connect(lambda r, c: self.hovered.emit(float(self.slice_index), r, c))
        self.main.left.connect(self.hoverLeft)
        for axis, canvas in self.side.items():
            canvas.clicked.connect(lambda p0, p1, button, mods, a=axis: self._side_point(a, p0, p1, button))
            canvas.dragged.connect(lambda stage, p0, p1, s0, s1, a=axis: self._side_point(a, p0, p1, 1))
            canvas.wheeled.connect(lambda n, a=axis: self._move_plane(a, n))
            canvas.hovered.connect(lambda p0, p1, a=axis: self._side_hover(a, p0, p1))
            canvas.left.connect(self.hoverLeft)
        for canvas in self.canvases():
            canvas.levelDragged.connect(self._level_drag)

    def _build(self) -> None:
        main_panel = QWidget()
        row = QHBoxLayout(main_panel)
        row.setContentsMargins(0, 0, 0, 0)
        row.setSpacing(2)
        row.addWidget(self.main, 1)
        column = QVBoxLayout()
        column.addWidget(self.slider, 1)
        column.addWidget(self.slice_label)
        row.addLayout(column)
        self.side_panel = QSplitter(Qt.Orientation.Vertical)
        for canvas in self.side.values():
            self.side_panel.addWidget(canvas)
        self.splitter = QSplitter(Qt.Orientation.Horizontal)
        self.splitter.addWidget(main_panel)
        self.splitter.addWidget(self.side_panel)
        self.splitter.setStretchFactor(0, 3)
        self.splitter.setStretchFactor(1, 2)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.splitter)

    def canvases(self) -> list[PlaneCanvas]:
        return [self.main, *self.side.values()]

    # --------------------------------------------------------------- a study
    def set_session(self, session: Session | None, *, window: tuple[float, float] | None = None) -> None:
        """Show ``session``'s study (None: nothing)."""
        self.session = session
        self._sections_key = None
        if session is None:
            for canvas in self.canvases():
                canvas.image.clear()
                canvas.set_title("")
            self.main.set_empty_text(EMPTY_TEXT)
            self.slider.hide()
            self.slice_label.setText("")
            self.side_panel.hide()
            return
        self.main.set_empty_text("")
        vol = session.volume
        self.views = plane_views(vol.affine, patient_frame=vol.kind in ("dicom", "nifti"))
        for axis, canvas in ((0, self.main), *self.side.items()):
            canvas.set_plane(self.views[axis], vol.shape, vol.spacing)
        self.cursor = ((vol.shape[1] - 1) / 2.0, (vol.shape[2] - 1) / 2.0)
        if window is not None:
            self.window = window
        self.slider.blockSignals(True)
        self.slider.setRange(0, vol.shape[0] - 1)
        self.slider.setValue(0)
        self.slider.blockSignals(False)
        self.slider.setVisible(vol.shape[0] > 1)
        self.slice_index = -1
        self.set_slice(min(vol.shape[0] // 2, vol.shape[0] - 1))
        self._arrange()
        self._update_side_visibility()
        self._refresh_side_images()
        self.refresh_outlines()

    def _arrange(self) -> None:
        """Other planes beside the Slice view, or below it when they are much wider than tall."""
        vol = self.session.volume
        tall = vol.shape[0] * vol.spacing[0]
        wide = max(vol.shape[1] * vol.spacing[1], vol.shape[2] * vol.spacing[2])
        below = tall / wide < 0.7
        self.splitter.setOrientation(Qt.Orientation.Vertical if below else Qt.Orientation.Horizontal)
        self.side_panel.setOrientation(Qt.Orientation.Horizontal if below else Qt.Orientation.Vertical)
        total = self.splitter.height() if below else self.splitter.width()
        share = min(0.36, max(0.22, 0.5 * tall / wide + 0.05)) if below else 0.4
        self.splitter.setSizes([int(total * (1 - share)), int(total * share)])
        half = (self.side_panel.width() if below else self.side_panel.height()) // 2
        self.side_panel.setSizes([half, half])

    @property
    def has_volume(self) -> bool:
        return self.session is not None and self.session.volume.shape[0] > 1

    def set_three_views(self, on: bool) -> None:
        self.three_views = bool(on)
        self._update_side_visibility()

    def _update_side_visibility(self) -> None:
        self.side_panel.setVisible(self.three_views and self.has_volume)

    # ---------------------------------------------------------- navigation
    def set_slice(self, k: int) -> None:
        """Show slice ``k`` (clamped to the study)."""
        if self.session is None:
            return
        k = int(np.clip(k, 0, self.session.slices - 1))
        if k == self.slice_index:
            return
        self.slice_index = k
        self.slider.blockSignals(True)
        self.slider.setValue(k)
        self.slider.blockSignals(False)
        self.main.set_image(self.session.volume.array[k], self.levels)
        n = self.session.slices
        name = self.views[0].name
        self.main.set_title(f"{name + ' · ' if name else ''}slice {k} (0–{n - 1})" if n > 1 else name)
        self.slice_label.setText(str(k))
        for canvas in self.side.values():
            canvas.set_cursor(*self._side_cursor(canvas))
        self.refresh_outlines()
        self.sliceChanged.emit(k)

    def set_cursor(self, row: float, col: float) -> None:
        """Move the linked cursor (the row and column planes follow)."""
        if self.session is None:
            return
        rows, cols = self.session.volume.shape[1:]
        new = (float(np.clip(round(row), 0, rows - 1)), float(np.clip(round(col), 0, cols - 1)))
        if new == self.cursor:
            return
        self.cursor = new
        self._refresh_side_images()
        self.refresh_outlines()

    def _side_cursor(self, canvas: PlaneCanvas) -> tuple[float, float]:
        axis = 1 if canvas is self.side[1] else 2
        return float(self.slice_index), self.cursor[1] if axis == 1 else self.cursor[0]

    def _side_point(self, axis: int, p0: float, p1: float, button: int) -> None:
        if button != Qt.MouseButton.LeftButton.value:
            return
        if axis == 1:
            self.set_cursor(self.cursor[0], p1)
        else:
            self.set_cursor(p1, self.cursor[1])
        self.set_slice(int(round(p0)))

    def _move_plane(self, axis: int, steps: int) -> None:
        row, col = self.cursor
        self.set_cursor(row + steps, col) if axis == 1 else self.set_cursor(row, col + steps)

    def _side_hover(self, axis: int, p0: float, p1: float) -> None:
        row, col = (self.cursor[0], p1) if axis == 1 else (p1, self.cursor[1])
        self.hovered.emit(p0, row, col)

    def _refresh_side_images(self) -> None:
        if self.session is None or not self.has_volume:
            return
        arr = self.session.volume.array
        row, col = int(self.cursor[0]), int(self.cursor[1])
        self.side[1].set_image(arr[:, row, :], self.levels)
        self.side[2].set_image(arr[:, :, col], self.levels)
        self.side[1].set_title(f"{self.views[1].name + ' · ' if self.views[1].name else ''}row {row}")
        self.side[2].set_title(f"{self.views[2].name + ' · ' if self.views[2].name else ''}column {col}")
        for canvas in self.side.values():
            canvas.set_cursor(*self._side_cursor(canvas))
        self.main.set_cursor(row, col)

    # ------------------------------------------------------- window/level
    @property
    def levels(self) -> tuple[float, float]:
        c, w = self.window
        return c - w / 2.0, c + w / 2.0

    def set_window(self, centre: float, width: float) -> None:
        self.window = (float(centre), max(float(width), 1e-6))
        for canvas in self.canvases():
            canvas.set_levels(self.levels)
        self.levelsChanged.emit(*self.window)

    def _level_drag(self, dx: float, dy: float, stage: str) -> None:
        c, w = self.window
        scale = max(w, 1.0) / 300.0
        self.set_window(c - dy * scale, max(w + dx * scale, 1.0))

    # ---------------------------------------------------------- outlines
    def _labels(self) -> dict[int, tuple[str, bool]]:
        hidden = self.session.hidden_labels()
        return {lab.index: (lab.colour, lab.index not in hidden) for lab in self.session.labels}

    def refresh_outlines(self) -> None:
        """Redraw committed outlines (the live front's own label and slice excepted)."""
        s = self.session
        if s is None:
            return
        labels = self._labels()
        live = s.live
        skip = (live.label, live.slice) if live is not None else None
        shown: dict[int, tuple[str, list, list]] = {}
        for o in s.outlines(self.slice_index):
            colour, visible = labels.get(o.label, ("#ffffff", False))
            if visible and (o.label, o.slice) != skip:
                curvature = shown_curvature(o.contours, o.curvature, s.spacing) if self.curvature_limit else o.curvature
                shown[o.label] = (colour, list(o.contours), list(curvature))
        self.main.set_outlines(shown, curvature_limit=self.curvature_limit)
        if self.has_volume and self.side_panel.isVisible():
            self._refresh_sections(labels, skip)
        self.refresh_live()

    def _refresh_sections(self, labels: dict[int, tuple[str, bool]], skip: tuple[int, int] | None) -> None:
        s = self.session
        key = (s.state.outlines, tuple(sorted(labels.items())), self.cursor, skip)
        if key == self._sections_key:
            return
        self._sections_key = key
        by_label: dict[int, list] = {}
        for o in s.outlines():
            if (o.label, o.slice) != skip and labels.get(o.label, ("", False))[1]:
                by_label.setdefault(o.label, []).append(o)
        for axis, canvas in self.side.items():
            index = int(self.cursor[0] if axis == 1 else self.cursor[1])
            shown = {lab: (labels[lab][0], section_contours(outs, axis, index, slices=s.slices,
                                                            spacing=s.spacing), None)
                     for lab, outs in by_label.items()}
            canvas.set_outlines(shown)

    def refresh_live(self) -> None:
        """Redraw the live front, its seeds and pins from the latest frame."""
        s = self.session
        if s is None:
            return
        frame = s.frame()
        labels = self._labels()
        colour, visible = labels.get(frame.label, ("#ffffff", False)) if frame.label is not None else ("", False)
        on_slice = frame.slice == self.slice_index and visible
        contours = frame.contours if on_slice else ()
        self.main.set_live(contours, colour or "#ffffff", frame.curvature if on_slice else None,
                           curvature_limit=self.curvature_limit)
        self.main.set_seeds(frame.seeds if on_slice else (), colour or "#ffffff")
        self.main.set_pins(frame.pins if on_slice else None)
        if not (self.has_volume and self.side_panel.isVisible()):
            return
        for axis, canvas in self.side.items():
            rects = []
            if visible and frame.contours and frame.slice is not None:
                value = self.cursor[0] if axis == 1 else self.cursor[1]
                rects = slab_rectangles(line_intervals(frame.contours, axis, value), frame.slice)
            canvas.set_live(rects, colour or "#ffffff")

    def set_curvature_limit(self, limit: float | None) -> None:
        """Colour outlines by curvature (±``limit`` 1/mm at the map's ends); None: label colours."""
        self.curvature_limit = limit
        self.main.curvature_bar.setVisible(limit is not None)
        if limit is not None:
            self.main.curvature_bar.set_limit(limit)
        self.refresh_outlines()
