"""The **Compare board**: 2–4 variants of one slice's front side by side, with a metrics table.

Every variant starts alike (the same seed disks, or the same outline: the
label's committed outline on the slice or a neighbour's, carried) and has
its own settings. **Run** starts each variant in a thread of its own
(:class:`engine.compare.VariantRun`); the board reads their immutable frames
on a 30 Hz timer and never waits for them. The planes are linked: zooming
or panning one moves all. The table gives each variant's steps, processor
time, area, perimeter and whether it converged, and Dice and HD95 against
the committed outline, a reference (when one is loaded) and each other
(:func:`engine.compare.compare_table`, computed in a helper thread).
**Adopt** gives the label a variant's settings.
"""

from __future__ import annotations

import math
import threading
from concurrent.futures import ThreadPoolExecutor
from typing import TYPE_CHECKING, Any

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtGui import QColor
from PySide6.QtWidgets import (
    QAbstractItemView,
    QComboBox,
    QDoubleSpinBox,
    QFileDialog,
    QFormLayout,
    QGroupBox,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QMessageBox,
    QPushButton,
    QSizePolicy,
    QSpinBox,
    QSplitter,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from app.front_dock import MODELS
from app.overlays import joined
from app.plane_canvas import PlaneCanvas
from engine.compare import (
    MAX_VARIANTS,
    NAMES,
    Start,
    Variant,
    VariantRun,
    compare_table,
    default_variants,
    mask_outline,
    settings_changes,
    starts_for,
)
from engine.session import FrontSettings, Session
from engine.session.planes import plane_views

if TYPE_CHECKING:
    from app.main_window import MainWindow

__all__ = ["CompareBoard", "VariantColumn", "COLUMNS"]

#: Metrics table columns: (heading, tip).
COLUMNS = (
    ("State", "converged, step limit, stopped, vanished, running or error"),
    ("Steps", "steps the front took"),
    ("Time (s)", "processor time of the variant's own thread (variants share the cores while they run)"),
    ("Area\n(mm²)", "area inside the outline"),
    ("Perimeter\n(mm)", "length of the outline"),
    ("Dice\ncommitted", "overlap with the label's committed outline on this slice (1 = the same pixels)"),
    ("HD95 (mm)\ncommitted", "95th-percentile distance between the edges of the variant's and the committed outline"),
    ("Dice\nreference", "overlap with the reference outline"),
    ("HD95 (mm)\nreference", "95th-percentile distance between the edges of the variant's and the reference outline"),
)
_COMMITTED_COLOUR = "#FFFFFF"
_REFERENCE_COLOUR = "#FFFFFF"


def _spin(low: float, high: float, step: float, decimals: int = 2, suffix: str = "") -> QDoubleSpinBox:
    box = QDoubleSpinBox()
    box.setRange(low, high)
    box.setSingleStep(step)
    box.setDecimals(decimals)
    box.setKeyboardTracking(False)
    box.setSuffix(suffix)
    return box


def _fmt(value: float, digits: int) -> str:
    if value is None or (isinstance(value, float) and (math.isnan(value))):
        return "–"
    if isinstance(value, float) and math.isinf(value):
        return "∞"
    return f"{value:.{digits}f}"


class VariantColumn(QWidget):
    """One variant: its settings, its plane, its Adopt button."""

    changed = Signal()
    adopt = Signal(object)  # FrontSettings

    def __init__(self, variant: Variant, colour: str, window_default: tuple[float, float]) -> None:
        super().__init__()
        self.variant = variant
        self.colour = colour
        self._loading = False
        self.box = QGroupBox(f"{variant.name}: {variant.description}")
        form = QFormLayout(self.box)
        form.setContentsMargins(6, 2, 6, 4)
        form.setVerticalSpacing(2)
        self.model = QComboBox()
        for key, name in MODELS.items():
            self.model.addItem(name, key)
        self.drive = _spin(0.05, 20.0, 0.1)
        self.smoothness = _spin(0.0, 20.0, 0.1)
        self.averaging = _spin(0.0, 30.0, 0.5, suffix=" mm")
        self.edge_pull = _spin(0.0, 50.0, 0.5)
        self.window_low = _spin(-1e6, 1e6, 10.0, 1)
        self.window_high = _spin(-1e6, 1e6, 10.0, 1)
        self.detail = QComboBox()
        for d in (1, 2, 4):
            self.detail.addItem(f"{d}×", d)
        self.max_steps = QSpinBox()
        self.max_steps.setRange(1, 1_000_000)
        self.max_steps.setKeyboardTracking(False)
        self.form = form
        for name, widget in (("Model", self.model), ("Drive", self.drive), ("Smoothness", self.smoothness),
                             ("Outline averaging (mm)", self.averaging), ("Edge pull", self.edge_pull),
                             ("Intensity low", self.window_low), ("Intensity high", self.window_high),
                             ("Detail", self.detail), ("Max steps", self.max_steps)):
            form.addRow(name, widget)
        self.canvas = PlaneCanvas()
        self.canvas.setMinimumSize(220, 220)
        # white dashes (committed) and dots (reference) on a dark under-line: seen on bright and dark tissue alike
        # under the variant's outline (where the two agree it shows as a dark rim; where they differ, by itself)
        self.committed_under = self._curve("#000000", Qt.PenStyle.SolidLine, 4.0, 7)
        self.committed_curve = self._curve(_COMMITTED_COLOUR, Qt.PenStyle.DashLine, 2.0, 8)
        self.reference_under = self._curve("#000000", Qt.PenStyle.SolidLine, 4.0, 7)
        self.reference_curve = self._curve(_REFERENCE_COLOUR, Qt.PenStyle.DotLine, 2.0, 9)
        self.adopt_button = QPushButton(f"Adopt {variant.name}'s settings")
        self.adopt_button.setToolTip("Give the label these settings (its next fronts grow with them)")
        self.adopt_button.clicked.connect(lambda: self.adopt.emit(self.variant.settings))
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.box)
        layout.addWidget(self.canvas, 1)
        layout.addWidget(self.adopt_button)
        self.window_default = window_default
        self.show_settings(variant.settings)
        self.model.currentIndexChanged.connect(lambda _: self._edited())
        self.detail.currentIndexChanged.connect(lambda _: self._edited())
        for box in (self.drive, self.smoothness, self.averaging, self.edge_pull, self.window_low, self.window_high,
                    self.max_steps):
            box.valueChanged.connect(lambda _=None: self._edited())

    def _curve(self, colour: str, style: Qt.PenStyle, width: float, z: float) -> pg.PlotCurveItem:
        item = pg.PlotCurveItem(connect="finite", antialias=True)
        item.setPen(pg.mkPen(QColor(colour), width=width, style=style))
        item.setParentItem(self.canvas.group)
        item.setZValue(z)
        return item

    def show_references(self, committed: list, reference: list) -> None:
        """The committed outline (grey dashes) and the reference (white dots) over the variant's outline."""
        for items, contours in (((self.committed_under, self.committed_curve), committed),
                                ((self.reference_under, self.reference_curve), reference)):
            x, y = joined(contours)
            for item in items:
                item.setData(x, y, connect="finite")

    def show_settings(self, settings: FrontSettings) -> None:
        self._loading = True
        try:
            p = settings.resolved()
            self.model.setCurrentIndex(max(self.model.findData(settings.model), 0))
            self.drive.setValue(p.drive)
            self.smoothness.setValue(p.curvature_weight)
            self.averaging.setValue(p.outline_averaging)
            self.edge_pull.setValue(p.edge_pull)
            low, high = p.window if p.window is not None else self.window_default
            self.window_low.setValue(low)
            self.window_high.setValue(high)
            self.detail.setCurrentIndex(max(self.detail.findData(settings.detail), 0))
            self.max_steps.setValue(settings.max_steps)
            self._rows_for(settings.model)
        finally:
            self._loading = False

    def _rows_for(self, model: str) -> None:
        for widget, on in ((self.edge_pull, model == "edge"), (self.window_low, model == "window"),
                           (self.window_high, model == "window")):
            widget.setVisible(on)
            label = self.form.labelForField(widget)
            if label is not None:
                label.setVisible(on)

    def _edited(self) -> None:
        if self._loading:
            return
        model = self.model.currentData()
        changes: dict[str, Any] = {"model": model, "drive": self.drive.value(), "smoothness": self.smoothness.value(),
                                   "outline_averaging": self.averaging.value(), "detail": self.detail.currentData(),
                                   "max_steps": self.max_steps.value()}
        if model == "edge":
            changes["edge_pull"] = self.edge_pull.value()
        if model == "window" and self.window_low.value() < self.window_high.value():
            changes["window"] = (self.window_low.value(), self.window_high.value())
        try:
            settings = self.variant.settings.updated(**changes)
        except ValueError as exc:
            self.box.setToolTip(str(exc))
            self.box.setStyleSheet("QGroupBox { color: #D55E00; }")
            return
        self.box.setToolTip("")
        self.box.setStyleSheet("")
        self._rows_for(model)
        self.variant = Variant(self.variant.name, settings, "changed")
        self.box.setTitle(f"{self.variant.name}: changed")
        self.changed.emit()


class CompareBoard(QWidget):
    """The Compare board window (see the module docstring)."""

    _tableReady = Signal(object, int)  # CompareTable, run generation (from the helper thread)

    def __init__(self, window: "MainWindow", session: Session, label: int, slice_index: int) -> None:
        super().__init__(window, Qt.WindowType.Window)
        self.w = window
        self.session = session
        self.label = label
        self.slice = int(slice_index)
        lab = session.label(label)
        self.setWindowTitle(f"Compare board — {lab.name}, slice {slice_index}")
        self.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose, False)
        self.image = np.asarray(session.volume.array[self.slice], dtype=float)
        self.spacing = session.spacing
        committed = session.state.outlines.get((label, self.slice))
        self.committed = None if committed is None else np.asarray(committed.mask, dtype=bool)
        self.committed_contours = [] if committed is None else list(committed.contours)
        self.reference: np.ndarray | None = None
        self.reference_contours: list = []
        self.starts = starts_for(session, label, self.slice)
        self.runs: list[VariantRun] = []
        self.threads: list[threading.Thread] = []
        self.cancel = threading.Event()
        self.generation = 0
        self._drawn: dict[str, int] = {}
        self._table_generation = -1
        self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="isotide-compare-metrics")
        arr = self.image
        low, high = float(np.percentile(arr[::4, ::4], 25)), float(np.percentile(arr[::4, ::4], 75))
        self.columns = [VariantColumn(v, lab.colour, (low, high))
                        for v in default_variants(session.settings(label), MAX_VARIANTS)]
        self._build()
        self._tableReady.connect(self._show_table)
        self.timer = QTimer(self)
        self.timer.setInterval(33)
        self.timer.timeout.connect(self._poll)
        self.resize(min(1560, 380 * 4 + 40), 980)
        self._set_count(self.count.value())
        self._show_start()
        self._fill_table()

    # ---------------------------------------------------------------- layout
    def _build(self) -> None:
        top = QHBoxLayout()
        top.addWidget(QLabel("Start from"))
        self.start = QComboBox()
        for s in self.starts:
            self.start.addItem(s.description)
        self.start.setToolTip("Every variant starts from this; only their settings differ")
        top.addWidget(self.start, 1)
        top.addWidget(QLabel("Variants"))
        self.count = QSpinBox()
        self.count.setRange(2, MAX_VARIANTS)
        self.count.setValue(MAX_VARIANTS)
        top.addWidget(self.count)
        self.run_button = QPushButton("Run")
        self.run_button.setToolTip("Run every variant from the start, each in its own thread")
        top.addWidget(self.run_button)
        self.stop_button = QPushButton("Stop")
        self.stop_button.setEnabled(False)
        top.addWidget(self.stop_button)
        self.reference_button = QPushButton("Reference…")
        self.reference_button.setToolTip("A label volume on this study's grid (e.g. a case's truth) to score "
                                         "against; the label is found by name in its .tsv")
        top.addWidget(self.reference_button)
        self.fit_button = QPushButton("Fit")
        self.fit_button.setToolTip("Show the whole slice in every plane (Ctrl+wheel zooms, middle-drag pans, "
                                   "all planes together)")
        top.addWidget(self.fit_button)
        self.note = QLabel("")
        self.note.setWordWrap(True)
        self.note.setStyleSheet("color: #a8a8a8;" if self.palette().window().color().lightnessF() < 0.5
                                else "color: #505050;")
        grid = QWidget()
        row = QHBoxLayout(grid)
        row.setContentsMargins(0, 0, 0, 0)
        for column in self.columns:
            row.addWidget(column, 1)
            column.changed.connect(self._variant_changed)
            column.adopt.connect(self._adopt)
        first = self.columns[0].canvas
        for column in self.columns:
            canvas = column.canvas
            view = plane_views(self.session.volume.affine,
                               patient_frame=self.session.volume.kind in ("dicom", "nifti"))[0]
            canvas.set_plane(view, self.session.volume.shape, self.session.volume.spacing)
            canvas.set_image(self.image, self.w.views.levels)
            if canvas is not first:
                canvas.vb.setXLink(first.vb)
                canvas.vb.setYLink(first.vb)
            canvas.wheeled.connect(lambda n, c=canvas: c.zoom(1.25 ** n))
        self.table = QTableWidget(MAX_VARIANTS, len(COLUMNS))
        self.table.setHorizontalHeaderLabels([c[0] for c in COLUMNS])
        for i, (_, tip) in enumerate(COLUMNS):
            self.table.horizontalHeaderItem(i).setToolTip(tip)
        self.table.setVerticalHeaderLabels(list(NAMES))
        self.table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Stretch)
        self.pairs = QTableWidget(MAX_VARIANTS, MAX_VARIANTS)
        self.pairs.setHorizontalHeaderLabels(list(NAMES))
        self.pairs.setVerticalHeaderLabels(list(NAMES))
        self.pairs.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.pairs.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Stretch)
        self.pairs.setToolTip("Between variants: Dice above the diagonal, HD95 (mm) below it")
        pairs_box = QGroupBox("Between variants: Dice ↗, HD95 mm ↙")
        pairs_layout = QVBoxLayout(pairs_box)
        pairs_layout.setContentsMargins(4, 2, 4, 4)
        pairs_layout.addWidget(self.pairs)
        pairs_box.setMaximumWidth(380)
        bottom = QWidget()
        bottom.setMinimumHeight(6 * 22 + 40)
        bottom_row = QHBoxLayout(bottom)
        bottom_row.setContentsMargins(0, 0, 0, 0)
        bottom_row.addWidget(self.table, 3)
        bottom_row.addWidget(pairs_box, 1)
        for t in (self.table, self.pairs):
            t.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Expanding)
            t.verticalHeader().setDefaultSectionSize(22)
        splitter = QSplitter(Qt.Orientation.Vertical)
        splitter.addWidget(grid)
        splitter.addWidget(bottom)
        splitter.setStretchFactor(0, 4)
        splitter.setStretchFactor(1, 1)
        layout = QVBoxLayout(self)
        layout.addLayout(top)
        layout.addWidget(self.note)
        layout.addWidget(splitter, 1)
        self.start.currentIndexChanged.connect(lambda _: (self._show_start(), self.focus()))
        self.count.valueChanged.connect(self._set_count)
        self.run_button.clicked.connect(self.run)
        self.stop_button.clicked.connect(self.stop)
        self.reference_button.clicked.connect(self.ask_reference)
        self.fit_button.clicked.connect(lambda: [c.canvas.fit() for c in self.columns])
        self.focus_button = QPushButton("Zoom to outline")
        self.focus_button.setToolTip("Show the part of the slice around the start and the committed outline")
        self.focus_button.clicked.connect(self.focus)
        top.insertWidget(top.indexOf(self.fit_button), self.focus_button)
        if not self.starts:
            self.run_button.setEnabled(False)
            self.note.setText("Nothing to start from: place seeds for this label on this slice, or commit an outline "
                              "here or on a neighbouring slice.")

    def focus(self) -> None:
        """Zoom every plane (they are linked) to the start and the committed outline, with room around them."""
        from PySide6.QtCore import QRectF

        from engine.review.pictures import crop_box

        area = np.zeros(self.image.shape, dtype=bool)
        start = self.current_start
        if start is not None and start.kind == "seeds":
            rr, cc = np.indices(self.image.shape)
            for r, c, radius in start.seeds:
                area |= (rr - r) ** 2 + (cc - c) ** 2 <= radius ** 2
        elif start is not None and start.outline is not None:
            area |= np.asarray(start.outline.mask, dtype=bool)
        if self.committed is not None:
            area |= self.committed
        if self.reference is not None:
            area |= self.reference
        if not area.any():
            return
        r0, r1, c0, c1 = crop_box(area, self.spacing)
        canvas = self.columns[0].canvas
        rect = canvas.group.mapRectToParent(QRectF(c0 - 0.5, r0 - 0.5, c1 - c0, r1 - r0))
        for column in self.columns:
            column.canvas.auto_fit = False
        canvas.vb.setRange(rect, padding=0.0)

    def showEvent(self, ev) -> None:  # noqa: N802
        super().showEvent(ev)
        if not getattr(self, "_focused", False):
            self._focused = True
            QTimer.singleShot(0, self.focus)  # once the planes have their size

    def _set_count(self, n: int) -> None:
        for i, column in enumerate(self.columns):
            column.setVisible(i < n)
            self.table.setRowHidden(i, i >= n)
            self.pairs.setRowHidden(i, i >= n)
            self.pairs.setColumnHidden(i, i >= n)

    @property
    def active(self) -> list[VariantColumn]:
        return self.columns[: self.count.value()]

    @property
    def current_start(self) -> Start | None:
        i = self.start.currentIndex()
        return self.starts[i] if 0 <= i < len(self.starts) else None

    # ---------------------------------------------------------------- drawing
    def _show_start(self) -> None:
        start = self.current_start
        for column in self.columns:
            canvas = column.canvas
            column.show_references(self.committed_contours, self.reference_contours)
            canvas.set_outlines({})
            canvas.set_live([], column.colour)
            if start is not None and start.kind == "seeds":
                canvas.set_seeds(start.seeds, column.colour)
            else:
                canvas.set_seeds((), column.colour)
                if start is not None and start.outline is not None:
                    canvas.set_live(list(start.outline.contours), column.colour)
            canvas.set_title(f"{column.variant.name}")
        parts = ["White dashes: the committed outline" if self.committed_contours else
                 "No committed outline on this slice"]
        if self.reference_contours:
            parts.append("white dots: the reference")
        parts.append("in the label's colour: each variant's front (dashed while it runs, solid when it ends)")
        self.note.setText("; ".join(parts) + ".")
        self._drawn.clear()

    def _draw(self, column: VariantColumn, frame: Any) -> None:
        canvas = column.canvas
        shown = {}
        column.show_references(self.committed_contours, self.reference_contours)
        if frame.finished and frame.contours:
            shown[1] = (column.colour, list(frame.contours), None)
            canvas.set_live([], column.colour)
        else:
            canvas.set_live(list(frame.contours), column.colour)
        canvas.set_outlines(shown)
        text = frame.error or f"{frame.state}, {frame.steps} steps"
        canvas.set_title(f"{column.variant.name}: {text}")

    # ---------------------------------------------------------------- running
    def run(self) -> None:
        """Run every shown variant from the chosen start, each in its own thread."""
        start = self.current_start
        if start is None:
            return
        self.stop(wait=True)
        self.generation += 1
        self.cancel = threading.Event()
        self.runs = [VariantRun(self.image, self.spacing, start, c.variant) for c in self.active]
        self.threads = [threading.Thread(target=r.run, args=(self.cancel,), name=f"isotide-variant-{r.variant.name}",
                                         daemon=True) for r in self.runs]
        self._drawn.clear()
        self._table_generation = -1
        for t in self.threads:
            t.start()
        self.run_button.setText("Run again")
        self.stop_button.setEnabled(True)
        self.timer.start()
        self._fill_table()

    def stop(self, *, wait: bool = False) -> None:
        """Stop every running variant (each ends within one step)."""
        self.cancel.set()
        if wait:
            for t in self.threads:
                t.join(10.0)
        self.stop_button.setEnabled(False)

    @property
    def finished(self) -> bool:
        return bool(self.runs) and all(r.frame.finished for r in self.runs)

    def _poll(self) -> None:
        for column, run in zip(self.active, self.runs):
            frame = run.frame
            if self._drawn.get(column.variant.name) != frame.revision:
                self._drawn[column.variant.name] = frame.revision
                self._draw(column, frame)
        self._fill_table()
        if self.finished:
            self.timer.stop()
            self.stop_button.setEnabled(False)
            self._score()

    def _score(self) -> None:
        frames = [r.frame for r in self.runs]
        generation = self.generation
        committed, reference, spacing = self.committed, self.reference, self.spacing

        def work() -> None:
            try:
                table = compare_table(frames, spacing=spacing, committed=committed, reference=reference)
            except ValueError:
                return
            self._tableReady.emit(table, generation)

        self._pool.submit(work)

    def _show_table(self, table: Any, generation: int) -> None:
        if generation != self.generation:
            return
        self._table_generation = generation
        self._fill_rows(table.rows)
        names = [c.variant.name for c in self.active]
        for i, a in enumerate(NAMES):
            for j, b in enumerate(NAMES):
                text = "—" if i == j else ""
                if a in names and b in names and i != j:
                    d, h = table.pairs.get((a, b)) or table.pairs.get((b, a)) or (math.nan, math.nan)
                    text = _fmt(d, 3) if j > i else _fmt(h, 2)
                item = QTableWidgetItem(text)
                item.setTextAlignment(Qt.AlignmentFlag.AlignCenter)
                self.pairs.setItem(i, j, item)

    def _fill_table(self) -> None:
        if self._table_generation == self.generation and self.finished:
            return
        frames = [r.frame for r in self.runs] if self.runs else []
        if frames:
            rows = compare_table([f if f.mask is None else _without_mask(f) for f in frames],
                                 spacing=self.spacing).rows
            self._fill_rows(rows)
        else:
            for i in range(MAX_VARIANTS):
                for j in range(len(COLUMNS)):
                    self.table.setItem(i, j, QTableWidgetItem("–" if j else "not run"))

    def _fill_rows(self, rows: Any) -> None:
        for i, row in enumerate(rows):
            values = (row.state, str(row.steps), _fmt(row.cpu_s, 2), _fmt(row.area_mm2, 1),
                      _fmt(row.perimeter_mm, 1), _fmt(row.dice_committed, 3), _fmt(row.hd95_committed, 2),
                      _fmt(row.dice_reference, 3), _fmt(row.hd95_reference, 2))
            for j, text in enumerate(values):
                item = QTableWidgetItem(text)
                item.setTextAlignment(Qt.AlignmentFlag.AlignCenter if j else
                                      Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignVCenter)
                self.table.setItem(i, j, item)

    def _variant_changed(self) -> None:
        if self.runs and not self.finished:
            return  # the running ones go on with the settings they started with; Run again uses the new ones
        self.run_button.setText("Run again" if self.runs else "Run")

    # ---------------------------------------------------------------- reference, adopt
    def ask_reference(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Reference outlines", "",
                                              "Label volumes (*.nii *.nii.gz *.npy *.png *.tif *.tiff);;All files (*)")
        if path:
            self.load_reference(path)

    def load_reference(self, path: str) -> bool:
        """Score the variants against the label's outline (found by name) in the label volume at ``path``."""
        from engine.batch.reference import reference_mask

        name = self.session.label(self.label).name
        try:
            mask = reference_mask(path, name, self.session.volume.shape)
        except ValueError as exc:
            QMessageBox.warning(self, "Reference not used", str(exc).splitlines()[0])
            return False
        self.reference = np.asarray(mask[self.slice], dtype=bool)
        self.reference_contours = mask_outline(self.reference)
        self.reference_button.setText("Reference ✓")
        self.reference_button.setToolTip(f"Scored against {path}")
        self._show_start()
        for column, run in zip(self.active, self.runs):
            self._draw(column, run.frame)
        if self.finished:
            self._score()
        return True

    def _adopt(self, settings: FrontSettings) -> None:
        if self.w.controller.session is not self.session:
            QMessageBox.information(self, "Adopt", "The board's study is no longer the one in view; its settings "
                                    "cannot be given to a label there.")
            return
        current = self.session.settings(self.label)
        changes = settings_changes(current, settings)
        name = self.session.label(self.label).name
        if not changes:
            self.w.statusBar().showMessage(f"{name} already has these settings", 5000)
            return
        self.w.controller.set_params(self.label, **changes)
        self.w.statusBar().showMessage(f"{name} now grows with the adopted settings", 6000)

    def closeEvent(self, ev) -> None:  # noqa: N802
        self.timer.stop()
        self.stop(wait=True)
        self._pool.shutdown(wait=False, cancel_futures=True)
        for column in self.columns:
            column.canvas.closed = True
        super().closeEvent(ev)


def _without_mask(frame: Any) -> Any:
    """The frame's live figures only (masks are scored once, in the helper thread)."""
    from dataclasses import replace

    return replace(frame, mask=None)
