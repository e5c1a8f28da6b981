"""The Isotide main window: Slice view (and the other two planes), Cases, Front, Labels and History docks.

The window wires the parts together: the :class:`~app.controller.SessionController`
runs every change in the case's worker thread; :class:`~app.study_views.StudyViews`
draws; :class:`~app.tools.ToolHandler` turns gestures into changes; the docks
show and change labels and settings; :class:`~app.study_io.StudyOpener`
reads studies in the background; :class:`~app.autosave.Autosaver` keeps a
recovery file. Saving, opening and recovering are in :mod:`app.window_files`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from PySide6.QtCore import QSettings, Qt, QTimer
from PySide6.QtWidgets import (
    QApplication,
    QComboBox,
    QDockWidget,
    QDoubleSpinBox,
    QLabel,
    QMainWindow,
    QMessageBox,
    QScrollArea,
    QUndoView,
    QWidget,
)

from app.actions import make_actions, make_menus
from app.autosave import Autosaver
from app.cases_dock import CasesPanel, case_name
from app.controller import SessionController
from app.front_dock import FrontPanel
from app.labels_dock import LabelsPanel
from app.signoff_dock import SignoffPanel
from app.study_io import Opened, StudyOpener
from app.study_views import StudyViews
from app.tools import TOOLS, ToolHandler
from app.window_files import WindowFiles
from engine.session import FrontSettings
from engine.session.planes import auto_window

__all__ = ["MainWindow", "CT_PRESETS"]

#: Common CT window presets (name, centre, width) in HU — common practice, values from memory.
CT_PRESETS = (("Soft tissue", 40.0, 400.0), ("Lung", -600.0, 1500.0), ("Bone", 400.0, 1800.0),
              ("Brain", 40.0, 80.0))


class MainWindow(QMainWindow):
    """The main window (see the module docstring)."""

    def __init__(self, *, settings: QSettings | None = None, autosave_s: float | None = None,
                 recovery_folder: Path | None = None) -> None:
        super().__init__()
        self.settings = settings or QSettings()
        self.setWindowTitle("Isotide[*]")
        self.setAcceptDrops(True)
        self.controller = SessionController(self)
        self.views = StudyViews()
        self.setCentralWidget(self.views)
        self.actions = make_actions(self)
        self.menus = make_menus(self, self.actions)
        # Return commits only where the image is: in a text field it ends the editing
        commit = self.actions["commit"]
        self.removeAction(commit)
        commit.setShortcutContext(Qt.ShortcutContext.WidgetWithChildrenShortcut)
        self.views.addAction(commit)
        self.labels = LabelsPanel(self.controller)
        self.front = FrontPanel(self.actions)
        self.cases = CasesPanel()
        self.tools = ToolHandler(self.views, self.controller, self.current_label)
        self.opener = StudyOpener(self)
        self._docks()
        self._toolbar()
        self._status_bar()
        self.files = WindowFiles(self)
        self.signoff = SignoffPanel(self)
        self.signoff_dock = QDockWidget("Sign-off", self)
        self.signoff_dock.setObjectName("Sign-off")
        self.signoff_dock.setWidget(self.signoff)
        self.addDockWidget(Qt.DockWidgetArea.RightDockWidgetArea, self.signoff_dock)
        self.tabifyDockWidget(self.front_dock, self.signoff_dock)  # a reviewer needs it more than the settings
        self.front_dock.raise_()
        self.menus["docks"].addAction(self.signoff_dock.toggleViewAction())
        self.controller.guard = self.signoff.allow
        self.compare_board = None
        kwargs = {} if autosave_s is None else {"interval_s": autosave_s, "idle_s": min(3.0, autosave_s)}
        self.autosaver = Autosaver(self.controller, self.files.autosave_meta, folder=recovery_folder, **kwargs)
        self._connect()
        self._closing = False
        self._hover: tuple[float, float, float] | None = None
        self.views.set_session(None)
        self._case_changed()

    # ---------------------------------------------------------------- layout
    def _docks(self) -> None:
        def dock(title: str, widget: QWidget, area: Qt.DockWidgetArea) -> QDockWidget:
            d = QDockWidget(title, self)
            d.setObjectName(title)
            d.setWidget(widget)
            self.addDockWidget(area, d)
            self.menus["docks"].addAction(d.toggleViewAction())
            return d

        self.history = QUndoView(self.controller.undo_stack)
        self.history.setEmptyLabel("Study opened")
        self.cases_dock = dock("Cases", self.cases, Qt.DockWidgetArea.LeftDockWidgetArea)
        scroll = QScrollArea()
        scroll.setWidget(self.front)
        scroll.setWidgetResizable(True)
        scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        scroll.setFrameShape(QScrollArea.Shape.NoFrame)
        self.front_dock = dock("Front", scroll, Qt.DockWidgetArea.RightDockWidgetArea)
        self.labels_dock = dock("Labels", self.labels, Qt.DockWidgetArea.RightDockWidgetArea)
        self.history_dock = dock("History", self.history, Qt.DockWidgetArea.RightDockWidgetArea)
        self.resizeDocks([self.cases_dock], [230], Qt.Orientation.Horizontal)
        self.resizeDocks([self.front_dock], [340], Qt.Orientation.Horizontal)
        self.resizeDocks([self.front_dock, self.labels_dock, self.history_dock], [520, 200, 200],
                         Qt.Orientation.Vertical)

    def _toolbar(self) -> None:
        bar = self.addToolBar("Tools")
        bar.setObjectName("Tools")
        for key in TOOLS:
            bar.addAction(self.actions[f"tool_{key}"])
        bar.addSeparator()
        bar.addWidget(QLabel(" Brush radius "))
        self.brush = QDoubleSpinBox()
        self.brush.setRange(0.5, 100.0)
        self.brush.setSingleStep(0.5)
        self.brush.setSuffix(" mm")
        self.brush.setValue(5.0)
        self.brush.setToolTip("Radius of the Extend, Trim and Pin brushes ([ and ])")
        bar.addWidget(self.brush)
        bar.addWidget(QLabel(" Seed radius "))
        self.seed_radius = QDoubleSpinBox()
        self.seed_radius.setRange(1.0, 100.0)
        self.seed_radius.setSuffix(" px")
        self.seed_radius.setValue(4.0)
        self.seed_radius.setToolTip("Radius of a seed placed by a click (drag to set another)")
        bar.addWidget(self.seed_radius)
        bar.addSeparator()
        bar.addWidget(QLabel(" Window "))
        self.window_presets = QComboBox()
        self.window_presets.setMinimumContentsLength(18)
        self.window_presets.setToolTip("Window/level presets (right-drag on the image to adjust)")
        bar.addWidget(self.window_presets)
        for action in (self.actions["evolve"], self.actions["commit"], self.actions["carry_next"]):
            bar.addAction(action)

    def _status_bar(self) -> None:
        self.position_text = QLabel("")
        self.intensity_text = QLabel("")
        self.front_text = QLabel("")
        self.level_text = QLabel("")
        for w in (self.position_text, self.intensity_text, self.front_text, self.level_text):
            self.statusBar().addPermanentWidget(w)

    # ---------------------------------------------------------------- wiring
    def _connect(self) -> None:
        a, c = self.actions, self.controller
        c.changed.connect(self.refresh)
        c.frameReady.connect(self.refresh_frame)
        c.runningChanged.connect(lambda _: self.update_actions())
        c.failed.connect(self._failed)
        c.caseChanged.connect(self._case_changed)
        c.changed.connect(self.signoff.sync)
        self.opener.opened.connect(lambda _opened: self.signoff.after_open())  # after WindowFiles has taken it
        a["review_summary"].triggered.connect(self.signoff.write_summary)
        a["compare"].triggered.connect(self.open_compare_board)
        self.views.sliceChanged.connect(self._slice_changed)
        self.views.hovered.connect(self._hovered)
        self.views.hoverLeft.connect(self._hover_left)
        self.views.levelsChanged.connect(self._levels_changed)
        self.labels.currentChanged.connect(lambda _: self._label_changed())
        self.labels.visibilityChanged.connect(self.views.refresh_outlines)
        self.front.paramsChanged.connect(self._params_changed)
        self.front.curvatureChanged.connect(self._curvature_changed)
        self.front.evolve_on_seed.toggled.connect(lambda on: setattr(self.tools, "evolve_on_seed", on))
        self.front.curvature.toggled.connect(a["curvature"].setChecked)
        a["curvature"].toggled.connect(self.front.curvature.setChecked)
        self.cases.sliceChosen.connect(self.views.set_slice)
        self.cases.seriesChosen.connect(lambda path, key: self.open_path(path, series=key))
        self.tools.message.connect(lambda text: self.statusBar().showMessage(text, 4000))
        self.tools.probed.connect(self._probed)
        self.brush.valueChanged.connect(self.tools.set_brush_mm)
        self.seed_radius.valueChanged.connect(lambda v: setattr(self.tools, "seed_radius_px", float(v)))
        self.window_presets.activated.connect(self._preset_chosen)
        a["undo"].triggered.connect(c.undo)
        a["redo"].triggered.connect(c.redo)
        a["evolve"].triggered.connect(c.toggle_evolve)
        a["step"].triggered.connect(lambda: c.evolve(self.front.steps.value(), what="Step"))
        a["clear_front"].triggered.connect(lambda: c.submit("Clear front", lambda s: s.clear_front()))
        a["commit"].triggered.connect(lambda: c.submit("Commit outline", lambda s: s.commit()))
        a["carry_next"].triggered.connect(lambda: self.carry(+1))
        a["carry_previous"].triggered.connect(lambda: self.carry(-1))
        a["margin"].triggered.connect(self.margin)
        a["clear_pins"].triggered.connect(self.clear_pins)
        a["remove_seed"].triggered.connect(self.tools.remove_seed_under_mouse)
        a["next_slice"].triggered.connect(lambda: self.views.set_slice(self.views.slice_index + 1))
        a["previous_slice"].triggered.connect(lambda: self.views.set_slice(self.views.slice_index - 1))
        a["fit"].triggered.connect(lambda: [canvas.fit() for canvas in self.views.canvases()])
        a["zoom_in"].triggered.connect(lambda: self.views.main.zoom(1.25))
        a["zoom_out"].triggered.connect(lambda: self.views.main.zoom(0.8))
        a["three_views"].toggled.connect(self._three_views)
        a["brush_smaller"].triggered.connect(lambda: self.brush.setValue(self.brush.value() - 0.5))
        a["brush_larger"].triggered.connect(lambda: self.brush.setValue(self.brush.value() + 0.5))
        for key in TOOLS:
            a[f"tool_{key}"].triggered.connect(lambda _=False, k=key: self.tools.set_tool(k))
        self.tools.toolChanged.connect(lambda k: a[f"tool_{k}"].setChecked(True))

    # -------------------------------------------------------- current label
    def current_label(self, create: bool = False) -> int | None:
        """The label tools act on; with ``create`` a first label is added when there is none."""
        session = self.controller.session
        if session is None:
            return None
        if self.labels.current is not None and any(lab.index == self.labels.current for lab in session.labels):
            return self.labels.current
        if session.labels:
            self.labels.select(session.labels[-1].index)
            return session.labels[-1].index
        if not create:
            return None
        index = 1
        self.controller.submit("Add label", lambda s: s.add_label())
        self.labels.select(index)
        return index

    def _label_changed(self) -> None:
        session = self.controller.session
        label = self.current_label()
        if session is not None and label is not None:
            self.tools.colour = session.label(label).colour
        self._show_settings()

    def _show_settings(self) -> None:
        session = self.controller.session
        self.front.setEnabled(session is not None)
        if session is None:
            self.front.show_settings(FrontSettings(), label_name=None, window_default=(0.0, 1.0))
            return
        label = self.current_label()
        name = session.label(label).name if label is not None else None
        arr = session.volume.array[self.views.slice_index]
        low, high = float(np.percentile(arr[::4, ::4], 25)), float(np.percentile(arr[::4, ::4], 75))
        self.front.show_settings(session.settings(label), label_name=name, window_default=(low, high))

    def _params_changed(self, changes: dict) -> None:
        if self.controller.session is None:
            return
        self.controller.set_params(self.current_label(), **changes)

    # ------------------------------------------------------------- refresh
    def _case_changed(self) -> None:
        session = self.controller.session
        self.labels.current = None
        self.labels.refresh()
        self.cases.set_study(session)
        self.views.set_session(session, window=self.files.default_window(session) if session else None)
        self.views.set_three_views(self.actions["three_views"].isChecked())
        self._fill_presets()
        if session is None:
            self.history.setEmptyLabel("No study open")
        if session is not None:
            session.curvature_colours = self.front.curvature.isChecked()
            self.setWindowTitle(f"Isotide — {case_name(session)}[*]")
        else:
            self.setWindowTitle("Isotide[*]")
        self._label_changed()
        self.update_actions()

    def refresh(self) -> None:
        """After a change: labels, outlines, slices, settings, actions, title."""
        session = self.controller.session
        self.labels.refresh()
        if session is None:
            return
        self.views.refresh_outlines()
        self.cases.refresh(session, self.views.slice_index)
        if self.labels.current is not None:
            self.tools.colour = session.label(self.labels.current).colour \
                if any(lab.index == self.labels.current for lab in session.labels) else self.tools.colour
        focus = QApplication.focusWidget()
        if focus is None or not self.front.isAncestorOf(focus):  # not while the user types a setting
            self._show_settings()
        self.setWindowModified(session.modified)
        self.update_actions()

    def refresh_frame(self) -> None:
        """A new live frame: redraw the front and its figures."""
        session = self.controller.session
        if session is None:
            return
        self.views.refresh_live()
        frame = session.frame()
        self.front.show_frame(frame, evolving=self.controller.evolving)
        if frame.label is not None:
            rate = f", {frame.steps_per_s:.0f} steps/s" if frame.steps_per_s and self.controller.evolving else ""
            self.front_text.setText(f"step {frame.steps}{rate}")
        else:
            self.front_text.setText("")

    def update_actions(self) -> None:
        a = self.actions
        session = self.controller.session
        has = session is not None
        live = session.live if has else None
        running = self.controller.evolving
        a["evolve"].setText("Pause" if running else "Evolve")
        a["evolve"].setEnabled(has and (running or live is not None))
        a["step"].setEnabled(has and live is not None and not running)
        a["clear_front"].setEnabled(has and live is not None)
        a["commit"].setEnabled(has and live is not None and live.snapshot is not None)
        has_label = has and self.current_label() is not None
        for key in ("carry_next", "carry_previous", "margin", "clear_pins", "remove_seed"):
            a[key].setEnabled(has_label)
        for key in ("save", "save_as", "save_working"):
            a[key].setEnabled(has)
        a["dicom_seg"].setEnabled(has and session.volume.kind == "dicom")
        a["review_summary"].setEnabled(has and self.signoff.record is not None)
        a["compare"].setEnabled(has and self.current_label() is not None)
        a["undo"].setEnabled(has and (session.can_undo() or running))
        a["redo"].setEnabled(has and session.can_redo())
        undo_text = session.history[session.undo_index - 1].text if has and session.can_undo() else ""
        a["undo"].setText(f"Undo {undo_text}" if undo_text else "Undo")
        redo_text = session.history[session.undo_index].text if has and session.can_redo() else ""
        a["redo"].setText(f"Redo {redo_text}" if redo_text else "Redo")

    # -------------------------------------------------------------- actions
    def carry(self, direction: int) -> None:
        """Carry the current label's outline one slice on (``direction`` ±1); the view follows."""
        session = self.controller.session
        label = self.current_label()
        if session is None or label is None:
            return
        here = self.views.slice_index
        k = here + direction
        if not 0 <= k < session.slices:
            self.statusBar().showMessage("There is no slice beyond this one", 4000)
            return
        live = session.live
        source = here if (label, here) in session.state.outlines or (
            live is not None and (live.label, live.slice) == (label, here)) else None
        self.views.set_slice(k)  # first: leaving the slice pauses its front, which the carry then commits
        self.controller.carry(k, label=label, from_slice=source)

    def margin(self) -> None:
        label = self.current_label()
        if label is None:
            return
        mm, k = float(self.front.margin_mm.value()), self.views.slice_index
        if mm == 0:
            self.statusBar().showMessage("Set a margin other than 0 mm in the Front panel", 4000)
            return
        self.controller.edit("Margin", lambda s: s.margin(mm, label=label, slice=k), label=label, slice_index=k)

    def clear_pins(self) -> None:
        label = self.current_label()
        if label is None:
            return
        k = self.views.slice_index
        self.controller.edit("Clear pins", lambda s: s.clear_pins(label=label, slice=k), label=label, slice_index=k)

    def _slice_changed(self, k: int) -> None:
        if self.controller.evolving:
            live = self.controller.session.live if self.controller.session is not None else None
            if live is not None and live.slice != k:
                self.controller.pause()  # the front stays on its slice, paused
        self.cases.refresh(self.controller.session, k)
        self.refresh_frame()

    def _three_views(self, on: bool) -> None:
        self.views.set_three_views(on)
        self.views.refresh_outlines()

    def _curvature_changed(self, on: bool, limit: float) -> None:
        session = self.controller.session
        if session is not None:
            session.curvature_colours = on
            if not self.controller.evolving:
                self.controller.submit("Curvature colours", lambda s: s.refresh(), pause=False)
        self.views.set_curvature_limit(limit if on else None)

    def _failed(self, message: str, what: str) -> None:
        if what in ("Save", "Save working session"):
            QMessageBox.critical(self, "Cannot save", message)
            return
        self.statusBar().showMessage(f"{what}: {message}", 8000)

    # ------------------------------------------------------------ status bar
    def _hovered(self, k: float, row: float, col: float) -> None:
        session = self.controller.session
        if session is None:
            return
        self._hover = (k, row, col)
        ki, ri, ci = int(round(k)), int(round(row)), int(round(col))
        shape = session.volume.shape
        if not (0 <= ki < shape[0] and 0 <= ri < shape[1] and 0 <= ci < shape[2]):
            self.position_text.setText("")
            self.intensity_text.setText("")
            return
        x, y, z = (session.volume.affine @ np.array([k, row, col, 1.0]))[:3]
        frame = "LPS " if session.volume.kind in ("dicom", "nifti") else ""
        self.position_text.setText(f"{frame}{x:.1f}, {y:.1f}, {z:.1f} mm · pixel {ki}, {ri}, {ci}")
        self.intensity_text.setText(f"intensity {session.volume.array[ki, ri, ci]:g}")

    def _hover_left(self) -> None:
        self._hover = None
        self.position_text.setText("")
        self.intensity_text.setText("")

    def _probed(self, text: str) -> None:
        if text:
            self.statusBar().showMessage(f"Probe: {text}")
        else:
            self.statusBar().clearMessage()

    def _levels_changed(self, centre: float, width: float) -> None:
        self.level_text.setText(f"window C {centre:.0f} W {width:.0f}")
        if self.window_presets.currentIndex() >= 0:
            data = self.window_presets.currentData()
            if data is None or abs(data[0] - centre) > 1e-6 or abs(data[1] - width) > 1e-6:
                self.window_presets.setCurrentIndex(-1)

    def _fill_presets(self) -> None:
        session = self.controller.session
        menu = self.menus["window"]
        menu.clear()
        self.window_presets.clear()
        if session is None:
            return
        entries = [("Auto", auto_window(session.volume.array))]
        entries += [(f"From file {i + 1}", (float(c), float(w))) for i, (c, w) in enumerate(session.volume.presets)]
        if session.volume.modality == "CT":
            entries += [(name, (c, w)) for name, c, w in CT_PRESETS]
        for name, (c, w) in entries:
            text = f"{name}: C {c:.0f} W {w:.0f}"
            self.window_presets.addItem(text, (c, w))
            action = menu.addAction(text)
            action.triggered.connect(lambda _=False, cw=(c, w): self.views.set_window(*cw))
        start = self.views.window
        match = [i for i, (_, cw) in enumerate(entries) if np.allclose(cw, start)]
        self.window_presets.setCurrentIndex(match[0] if match else -1)
        self._levels_changed(*start)

    def _preset_chosen(self, index: int) -> None:
        data = self.window_presets.itemData(index)
        if data is not None:
            self.views.set_window(*data)
            self.window_presets.setCurrentIndex(index)

    def open_compare_board(self) -> None:
        """The Compare board on the current label and slice (one board at a time: a new one replaces the last)."""
        from app.compare_board import CompareBoard

        session = self.controller.session
        label = self.current_label()
        if session is None or label is None:
            self.statusBar().showMessage("Pick a label first: the Compare board runs variants of its front", 6000)
            return
        if self.compare_board is not None:
            self.compare_board.close()
        self.compare_board = CompareBoard(self, session, label, self.views.slice_index)
        self.compare_board.show()

    # ---------------------------------------------------------- open / close
    def open_path(self, path: str, *, series: str | None = None) -> bool:
        """Open a study, result or working session (asks to save unsaved outlines first)."""
        return self.files.open_path(path, series=series)

    def show_opened(self, opened: Opened) -> None:
        """Make ``opened`` the case in view (the previous case's worker stops cleanly)."""
        self.files.show_opened(opened)

    def dragEnterEvent(self, ev) -> None:  # noqa: N802
        if ev.mimeData().hasUrls() and any(u.isLocalFile() for u in ev.mimeData().urls()):
            ev.acceptProposedAction()

    def dropEvent(self, ev) -> None:  # noqa: N802
        paths = [u.toLocalFile() for u in ev.mimeData().urls() if u.isLocalFile()]
        if paths:
            ev.acceptProposedAction()
            QTimer.singleShot(0, lambda: self.open_path(paths[0]))

    def _close_after_save(self) -> None:
        self._closing = True
        self.close()

    def closeEvent(self, ev) -> None:  # noqa: N802
        if not self._closing and not self.files.may_close(then=self._close_after_save):
            ev.ignore()
            return
        self._closing = True
        if self.compare_board is not None:
            self.compare_board.close()
        self.signoff.shutdown()
        self.opener.cancel()
        self.controller.shutdown()
        self.autosaver.close()
        self.settings.setValue("window/geometry", self.saveGeometry())
        self.settings.setValue("window/state", self.saveState())
        super().closeEvent(ev)
