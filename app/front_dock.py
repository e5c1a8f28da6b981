"""The **Front** dock: the current label's speed model and settings, run controls and live figures.

Settings are the label's (``Session.settings(label)``); a change goes to
the Session at once, so a running front takes it at its next step. The run
controls are the window's actions (shared with the menus and shortcuts).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QAction
from PySide6.QtWidgets import (
    QCheckBox,
    QComboBox,
    QDoubleSpinBox,
    QFormLayout,
    QGridLayout,
    QGroupBox,
    QHBoxLayout,
    QLabel,
    QSizePolicy,
    QSpinBox,
    QToolButton,
    QVBoxLayout,
    QWidget,
)

from engine.session import Frame, FrontSettings

__all__ = ["FrontPanel", "MODELS"]

#: Model key -> name shown.
MODELS = {"region": "Region (Chan–Vese)", "edge": "Edge (geodesic)", "window": "Intensity window"}
_INTEGRATORS = {"rkl2": "RKL2", "ssp_rk3": "SSP-RK3"}


def _spin(low: float, high: float, step: float, decimals: int = 2, *, auto: bool = False,
          suffix: str = "") -> QDoubleSpinBox:
    box = QDoubleSpinBox()
    box.setRange(low, high)
    box.setSingleStep(step)
    box.setDecimals(decimals)
    box.setKeyboardTracking(False)
    box.setSuffix(suffix)
    if auto:
        box.setSpecialValueText("auto")
    return box


def _int_spin(low: int, high: int, *, auto: bool = False) -> QSpinBox:
    box = QSpinBox()
    box.setRange(low, high)
    box.setKeyboardTracking(False)
    if auto:
        box.setSpecialValueText("auto")
    return box


class FrontPanel(QWidget):
    """Settings, run controls and live figures of the front."""

    paramsChanged = Signal(dict)  # {setting: value} for the current label
    curvatureChanged = Signal(bool, float)  # shown, limit (1/mm)

    def __init__(self, actions: Mapping[str, QAction], parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self._loading = False
        self.title = QLabel("")
        self.title.setWordWrap(True)
        self.model = QComboBox()
        for key, name in MODELS.items():
            self.model.addItem(name, key)
        self.drive = _spin(0.05, 20.0, 0.1)
        self.smoothness = _spin(0.0, 20.0, 0.1)
        self.edge_pull = _spin(0.0, 50.0, 0.5)
        self.edge_sigma = _spin(0.0, 10.0, 0.25, suffix=" mm")
        self.edge_contrast = _spin(0.0, 1e6, 1.0, 3, auto=True)
        self.window_low = _spin(-1e6, 1e6, 10.0, 1)
        self.window_high = _spin(-1e6, 1e6, 10.0, 1)
        self.averaging = _spin(0.0, 30.0, 0.5, suffix=" mm")
        self.detail = QComboBox()
        for d in (1, 2, 4):
            self.detail.addItem(f"{d}×", d)
        self.max_steps = _int_spin(1, 1_000_000)
        self.band_width = _spin(8.0, 40.0, 1.0, 1)
        self.stencil_size = _int_spin(9, 200, auto=True)
        self.degree = _int_spin(2, 6)
        self.integrator = QComboBox()
        for key, name in _INTEGRATORS.items():
            self.integrator.addItem(name, key)
        self._build(actions)
        self._connect()

    # ---------------------------------------------------------------- layout
    def _build(self, actions: Mapping[str, QAction]) -> None:
        layout = QVBoxLayout(self)
        layout.setContentsMargins(6, 4, 6, 4)
        layout.addWidget(self.title)

        def button(name: str) -> QToolButton:
            b = QToolButton()
            b.setDefaultAction(actions[name])
            b.setToolButtonStyle(Qt.ToolButtonStyle.ToolButtonTextOnly)
            b.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Fixed)
            return b

        self.steps = _int_spin(1, 10000)
        self.steps.setValue(10)
        self.steps.setSuffix(" steps")
        self.steps.setToolTip("Steps taken by Step")
        self.margin_mm = _spin(-50.0, 50.0, 0.5, 1, suffix=" mm")
        self.margin_mm.setValue(1.0)
        self.margin_mm.setToolTip("Margin: grow (+) or shrink (−) the outline by this many mm")
        rows = [[button("evolve"), button("step"), self.steps], [button("commit"), button("clear_front")],
                [button("carry_previous"), button("carry_next")], [button("margin"), self.margin_mm,
                                                                   button("clear_pins")]]
        for widgets in rows:
            line = QHBoxLayout()
            line.setSpacing(3)
            for widget in widgets:
                line.addWidget(widget, 1)
            layout.addLayout(line)
        self.evolve_on_seed = QCheckBox("Evolve after each seed")
        self.evolve_on_seed.setChecked(True)
        self.curvature = QCheckBox("Curvature colours")
        self.curvature_limit = _spin(0.01, 5.0, 0.05, 2, suffix=" 1/mm")
        self.curvature_limit.setValue(0.25)
        self.curvature_limit.setEnabled(False)
        self.curvature_limit.setToolTip("Curvature at the ends of the colour map (the bar on the Slice view)")
        options = QGridLayout()
        options.addWidget(self.evolve_on_seed, 0, 0, 1, 2)
        options.addWidget(self.curvature, 1, 0)
        options.addWidget(self.curvature_limit, 1, 1)
        layout.addLayout(options)

        figures = QGroupBox("Live figures")
        grid = QGridLayout(figures)
        grid.setContentsMargins(6, 2, 6, 4)
        grid.setVerticalSpacing(1)
        self.figures: dict[str, QLabel] = {}
        items = (("steps", "Step"), ("time", "Time"), ("area", "Area (mm²)"), ("perimeter", "Perimeter (mm)"),
                 ("rate", "Steps/s"), ("state", "State"))
        for i, (key, name) in enumerate(items):
            value = QLabel("–")
            value.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
            self.figures[key] = value
            row, col = (i // 2, 2 * (i % 2)) if key != "state" else (3, 0)
            grid.addWidget(QLabel(name), row, col)
            grid.addWidget(value, row, col + 1, 1, 3 if key == "state" else 1)
        grid.setColumnStretch(1, 1)
        grid.setColumnStretch(3, 1)
        layout.addWidget(figures)

        form = QFormLayout()
        form.addRow("Model", self.model)
        form.addRow("Drive", self.drive)
        form.addRow("Smoothness", self.smoothness)
        form.addRow("Edge pull", self.edge_pull)
        form.addRow("Edge scale σ (mm)", self.edge_sigma)
        form.addRow("Edge contrast K", self.edge_contrast)
        form.addRow("Intensity low", self.window_low)
        form.addRow("Intensity high", self.window_high)
        form.addRow("Outline averaging (mm)", self.averaging)
        form.addRow("Detail", self.detail)
        form.addRow("Max steps", self.max_steps)
        self.form = form
        layout.addLayout(form)
        self.advanced_toggle = QToolButton()
        self.advanced_toggle.setText("Advanced")
        self.advanced_toggle.setCheckable(True)
        self.advanced_toggle.setToolButtonStyle(Qt.ToolButtonStyle.ToolButtonTextBesideIcon)
        self.advanced_toggle.setArrowType(Qt.ArrowType.RightArrow)
        self.advanced_toggle.setAutoRaise(True)
        self.advanced = QWidget()
        adv = QFormLayout(self.advanced)
        adv.setContentsMargins(0, 0, 0, 0)
        adv.addRow("Band width", self.band_width)
        adv.addRow("Stencil size", self.stencil_size)
        adv.addRow("Polynomial degree", self.degree)
        adv.addRow("Integrator", self.integrator)
        self.advanced.setVisible(False)
        self.advanced_toggle.toggled.connect(self._show_advanced)
        layout.addWidget(self.advanced_toggle)
        layout.addWidget(self.advanced)

        layout.addStretch(1)

    def _show_advanced(self, on: bool) -> None:
        self.advanced.setVisible(on)
        self.advanced_toggle.setArrowType(Qt.ArrowType.DownArrow if on else Qt.ArrowType.RightArrow)

    def _set_row_visible(self, widget: QWidget, on: bool) -> None:
        widget.setVisible(on)
        label = self.form.labelForField(widget)
        if label is not None:
            label.setVisible(on)

    # ---------------------------------------------------------------- values
    def _connect(self) -> None:
        self.model.currentIndexChanged.connect(lambda _: self._emit(model=self.model.currentData()))
        for box, key in ((self.drive, "drive"), (self.smoothness, "smoothness"), (self.edge_pull, "edge_pull"),
                         (self.edge_sigma, "edge_sigma"), (self.averaging, "outline_averaging"),
                         (self.band_width, "band_width")):
            box.valueChanged.connect(lambda v, k=key: self._emit(**{k: float(v)}))
        self.edge_contrast.valueChanged.connect(
            lambda v: self._emit(edge_contrast=None if v <= self.edge_contrast.minimum() else float(v)))
        self.window_low.valueChanged.connect(lambda _: self._window_changed())
        self.window_high.valueChanged.connect(lambda _: self._window_changed())
        self.detail.currentIndexChanged.connect(lambda _: self._emit(detail=int(self.detail.currentData())))
        self.max_steps.valueChanged.connect(lambda v: self._emit(max_steps=int(v)))
        self.stencil_size.valueChanged.connect(
            lambda v: self._emit(stencil_size=None if v <= self.stencil_size.minimum() else int(v)))
        self.degree.valueChanged.connect(lambda v: self._emit(degree=int(v)))
        self.integrator.currentIndexChanged.connect(lambda _: self._emit(integrator=self.integrator.currentData()))
        self.curvature.toggled.connect(self._curvature)
        self.curvature_limit.valueChanged.connect(lambda _: self._curvature(self.curvature.isChecked()))

    def _emit(self, **changes: Any) -> None:
        if not self._loading:
            self.paramsChanged.emit(changes)

    def _window_changed(self) -> None:
        low, high = self.window_low.value(), self.window_high.value()
        if low < high:
            self._emit(window=(low, high))

    def _curvature(self, on: bool) -> None:
        self.curvature_limit.setEnabled(on)
        self.curvatureChanged.emit(on, self.curvature_limit.value())

    def show_settings(self, settings: FrontSettings, *, label_name: str | None,
                      window_default: tuple[float, float]) -> None:
        """Show ``settings`` (of ``label_name``; None: the settings new labels start with)."""
        self._loading = True
        try:
            p = settings.resolved()
            self.title.setText(f"Settings of <b>{label_name}</b>" if label_name else "Settings for new labels")
            self.model.setCurrentIndex(max(self.model.findData(settings.model), 0))
            self.drive.setValue(p.drive)
            self.smoothness.setValue(p.curvature_weight)
            self.edge_pull.setValue(p.edge_pull)
            self.edge_sigma.setValue(p.edge_sigma)
            self.edge_contrast.setValue(p.edge_contrast if p.edge_contrast is not None else self.edge_contrast.minimum())
            low, high = p.window if p.window is not None else window_default
            self.window_low.setValue(low)
            self.window_high.setValue(high)
            self.averaging.setValue(p.outline_averaging)
            self.detail.setCurrentIndex(max(self.detail.findData(settings.detail), 0))
            self.max_steps.setValue(settings.max_steps)
            self.band_width.setValue(p.band_width)
            self.stencil_size.setValue(p.stencil_size if p.stencil_size is not None else self.stencil_size.minimum())
            self.degree.setValue(p.degree)
            self.integrator.setCurrentIndex(max(self.integrator.findData(p.integrator), 0))
            model = settings.model
            for widget in (self.edge_pull, self.edge_contrast):
                self._set_row_visible(widget, model == "edge")
            for widget in (self.window_low, self.window_high):
                self._set_row_visible(widget, model == "window")
        finally:
            self._loading = False

    def show_frame(self, frame: Frame, *, evolving: bool) -> None:
        """Live figures of the front (dashes when there is none)."""
        f = self.figures
        if frame.label is None:
            for value in f.values():
                value.setText("–")
            return
        f["steps"].setText(str(frame.steps))
        f["time"].setText(f"{frame.time:.4g}")
        f["area"].setText(f"{frame.area_mm2:.1f}")
        f["perimeter"].setText(f"{frame.perimeter_mm:.1f}")
        f["rate"].setText(f"{frame.steps_per_s:.0f}" if frame.steps_per_s else "–")
        if frame.vanished:
            state = "vanished"
        elif evolving:
            state = "evolving"
        elif frame.converged:
            state = "converged"
        elif frame.stage == "seeds":
            state = "seeds placed"
        else:
            state = "paused"
        f["state"].setText(state)
