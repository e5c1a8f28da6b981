"""The **Sign-off** dock: the saved result's review state, reviewer, decisions, comments and versions, and the
steps a reviewer takes (Submit, Approve, Return with a comment and notes on outlines).

Everything about the workflow is :mod:`engine.review`'s: this panel reads a
result's review (:func:`engine.review.read_review`), asks the case's worker
to record a step (:func:`engine.review.record_step`, which checks the
result, refuses what the state does not allow and writes the sidecar
atomically), checks the record in a helper thread (:func:`engine.io.verify`)
and shows the notes on outlines in the Slice view. An Approved result is
read-only: an edit first asks to start a new version (a Draft), which the
next save writes with ``new_version=True``.
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pyqtgraph as pg
from PySide6.QtCore import Qt, QTimer, QUrl, Signal
from PySide6.QtGui import QColor, QDesktopServices, QKeySequence, QShortcut
from PySide6.QtWidgets import (
    QFileDialog,
    QFormLayout,
    QHBoxLayout,
    QInputDialog,
    QLabel,
    QLineEdit,
    QListWidget,
    QListWidgetItem,
    QMessageBox,
    QPlainTextEdit,
    QPushButton,
    QTabWidget,
    QVBoxLayout,
    QWidget,
)

from engine.review import STEPS, Mark, NotAResultError, ReviewRecord, read_review, record_step

if TYPE_CHECKING:
    from app.main_window import MainWindow

__all__ = ["SignoffPanel", "MarkOverlay", "STATE_COLOURS", "NOT_EDITS"]

#: State -> colour of its word on a dark and on a light window (Okabe–Ito hues; the word is always written out).
STATE_COLOURS = {"Draft": ("#c8c8c8", "#5a5a5a"), "Submitted": ("#56B4E9", "#0072B2"),
                 "Approved": ("#2fc496", "#00795a"), "Returned": ("#ff8a3d", "#D55E00")}
#: Requests that do not change the outlines (allowed on an Approved result without a new version).
NOT_EDITS = frozenset({"Save", "Save working session", "Curvature colours", "Undo", "Redo", "Submit", "Approve",
                       "Return", "Write review summary"})
#: What a reviewer sees as the next thing to do, per state.
_NEXT = {
    "Draft": "Submit the outlines for review when they are ready.",
    "Submitted": "A reviewer approves the outlines, or returns them with a comment or notes on outlines.",
    "Approved": "Approved: final for this version. Editing starts a new version (a Draft); the approval stays on "
                "this one.",
    "Returned": "Returned: rework the outlines and save them; the save makes the next version, a Draft.",
}


def _local(iso: str) -> str:
    from datetime import datetime

    try:
        return datetime.fromisoformat(iso.replace("Z", "+00:00")).astimezone().strftime("%Y-%m-%d %H:%M")
    except ValueError:
        return iso


def _dark(widget: QWidget) -> bool:
    return widget.palette().window().color().lightnessF() < 0.5


def _tone(widget: QWidget, dark: str, light: str) -> str:
    return dark if _dark(widget) else light


class MarkOverlay:
    """Reviewers' notes drawn on a plane canvas: a numbered circle at each note's point (or at the top of the
    label's outline when the note has none) on the slice in view."""

    def __init__(self, canvas: Any) -> None:
        self.canvas = canvas
        self.points = pg.ScatterPlotItem(size=18, pxMode=True, symbol="o")
        self.points.setParentItem(canvas.group)
        self.points.setZValue(40)
        self.texts: list[pg.TextItem] = []

    def show(self, marks: list[tuple[int, Mark, bool]], slice_index: int, anchors: dict[int, tuple[float, float]]
             ) -> None:
        """``marks``: (number, mark, pending) of every note; ``anchors``: label -> (row, col) for notes without
        a point."""
        for item in self.texts:
            item.setParentItem(None)
        self.texts = []
        xs, ys, pens = [], [], []
        for number, mark, pending in marks:
            if mark.slice != slice_index:
                continue
            point = mark.point or anchors.get(mark.label)
            if point is None:
                continue
            colour = QColor("#FFFFFF") if pending else QColor("#FFE680")
            xs.append(point[1])
            ys.append(point[0])
            pens.append(pg.mkPen(colour, width=2, style=Qt.PenStyle.DashLine if pending else Qt.PenStyle.SolidLine))
            note = mark.note if len(mark.note) <= 48 else mark.note[:47] + "…"
            text = pg.TextItem(f"{number}{' (new)' if pending else ''}: {note}", color=colour,
                               fill=pg.mkBrush(0, 0, 0, 170), anchor=(0, 1))
            text.setParentItem(self.canvas.group)
            text.setZValue(41)
            text.setPos(point[1] + 1.0, point[0] - 1.0)
            self.texts.append(text)
        self.points.setData(xs, ys, pen=pens, brush=pg.mkBrush(0, 0, 0, 0))
        loose = [f"{number}{' (new)' if pending else ''}: {mark.note}" for number, mark, pending in marks
                 if mark.slice == slice_index and mark.point is None and mark.label not in anchors]
        self.canvas.set_corner_text("Notes on this slice — " + "; ".join(loose) if loose else "")


class SignoffPanel(QWidget):
    """The Sign-off dock's contents (see the module docstring)."""

    _checked = Signal(str, bool, str)  # sidecar SHA-256, record matches, first problem (from the helper thread)

    def __init__(self, window: "MainWindow") -> None:
        super().__init__(window)
        self.w = window
        self.record: ReviewRecord | None = None
        self.pending: list[Mark] = []
        self._stat: Any = None
        self._verified: dict[str, tuple[bool, str]] = {}
        self._checking: set[str] = set()
        self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="isotide-record-check")
        self._marking = False
        self._tool_before = "seed"
        self.open_summaries = True  # open a written review summary in the browser
        self.overlay = MarkOverlay(window.views.main)
        self._build()
        self._checked.connect(self._record_checked)
        self.poll = QTimer(self)
        self.poll.setInterval(2000)
        self.poll.timeout.connect(self.sync)
        self.poll.start()

    # ---------------------------------------------------------------- layout
    def _build(self) -> None:
        layout = QVBoxLayout(self)
        layout.setContentsMargins(6, 4, 6, 4)
        self.state_text = QLabel("")
        self.state_text.setTextFormat(Qt.TextFormat.RichText)
        self.record_text = QLabel("")
        self.record_text.setWordWrap(True)
        self.next_text = QLabel("")
        self.next_text.setWordWrap(True)
        self.next_text.setStyleSheet(f"color: {_tone(self, '#a8a8a8', '#505050')};")
        for w in (self.state_text, self.record_text, self.next_text):
            layout.addWidget(w)
        form = QFormLayout()
        self.reviewer = QLineEdit(str(self.w.settings.value("review/reviewer", "") or ""))
        self.reviewer.setPlaceholderText("your name, as it goes into the record")
        self.reviewer.setToolTip("Recorded with each step you take (only the name you type here)")
        self.comment = QPlainTextEdit()
        self.comment.setPlaceholderText("comment recorded with the step")
        self.comment.setFixedHeight(58)
        form.addRow("Reviewer", self.reviewer)
        form.addRow("Comment", self.comment)
        layout.addLayout(form)
        notes_row = QHBoxLayout()
        self.mark_button = QPushButton("Mark outline")
        self.mark_button.setCheckable(True)
        self.mark_button.setToolTip("Then click on an outline in the Slice view to add a note at that point "
                                    "(Esc: stop)")
        self.remove_note_button = QPushButton("Remove note")
        notes_row.addWidget(self.mark_button)
        notes_row.addWidget(self.remove_note_button)
        layout.addLayout(notes_row)
        self.notes = QListWidget()
        self.notes.setMaximumHeight(64)
        self.notes.setToolTip("Notes recorded with the next step; double-click to go to the slice")
        layout.addWidget(self.notes)
        steps_row = QHBoxLayout()
        self.step_buttons: dict[str, QPushButton] = {}
        for key in ("submit", "approve", "return"):
            button = QPushButton(STEPS[key].word)
            button.clicked.connect(lambda _=False, k=key: self.take_step(k))
            self.step_buttons[key] = button
            steps_row.addWidget(button)
        layout.addLayout(steps_row)
        self.step_buttons["submit"].setToolTip("Draft → Submitted: the outlines are ready for review")
        self.step_buttons["approve"].setToolTip("Submitted → Approved (needs your name; final for this version)")
        self.step_buttons["return"].setToolTip("Submitted → Returned (needs your name and a comment or a note)")
        tabs = QTabWidget()
        self.decisions = QListWidget()
        self.decisions.setWordWrap(True)
        self.decisions.setToolTip("Every step of this version; double-click a note to go to its slice")
        self.versions = QListWidget()
        self.versions.setWordWrap(True)
        tabs.addTab(self.decisions, "Decisions")
        tabs.addTab(self.versions, "Versions")
        self.tabs = tabs
        layout.addWidget(tabs, 1)
        self.summary_button = QPushButton("Write review summary…")
        self.summary_button.setToolTip("An HTML summary of the result and its review, with a picture of every "
                                       "outlined slice, to read and archive")
        layout.addWidget(self.summary_button)
        self.stop_marking = QShortcut(QKeySequence(Qt.Key.Key_Escape), self.w)
        self.stop_marking.setEnabled(False)
        self.stop_marking.activated.connect(lambda: self.mark_button.setChecked(False))
        self.mark_button.toggled.connect(self._mark_mode)
        self.remove_note_button.clicked.connect(self._remove_note)
        self.notes.itemDoubleClicked.connect(lambda item: self._go_to(item.data(Qt.ItemDataRole.UserRole)))
        self.decisions.itemDoubleClicked.connect(lambda item: self._go_to(item.data(Qt.ItemDataRole.UserRole)))
        self.summary_button.clicked.connect(self.write_summary)
        self.w.views.main.clicked.connect(self._clicked)
        self.w.views.sliceChanged.connect(lambda _k: self.refresh_overlay())

    # ------------------------------------------------------------- reading
    @property
    def sidecar(self) -> Path | None:
        prefix = self.w.files.result
        return Path(f"{prefix}_dseg.json") if prefix else None

    def sync(self) -> None:
        """Read the result again when it is another one or its sidecar changed on disk."""
        path = self.sidecar
        try:
            stat = (str(path), path.stat().st_mtime_ns, path.stat().st_size) if path is not None else None
        except OSError:
            stat = (str(path), None, None)
        if stat != self._stat:
            self._stat = stat
            self.reload()

    def reload(self) -> None:
        """Show the review of the result the window saves to (none before the first save)."""
        path = self.sidecar
        self.record = None
        if path is not None and path.exists():
            try:
                self.record = read_review(path)
            except NotAResultError as exc:
                self.record_text.setText(str(exc))
        self._show()
        if self.record is not None:
            self._check(self.record)

    def _check(self, record: ReviewRecord) -> None:
        key = record.sidecar_sha256
        if key in self._verified or key in self._checking:
            return
        self._checking.add(key)
        path = record.path

        def work() -> None:
            from engine.io import verify

            try:
                report = verify(path)
                self._checked.emit(key, bool(report.ok), report.problems[0] if report.problems else "")
            except Exception as exc:  # noqa: BLE001 - shown in the panel
                self._checked.emit(key, False, f"{type(exc).__name__}: {exc}")

        self._pool.submit(work)

    def _record_checked(self, key: str, ok: bool, problem: str) -> None:
        self._checking.discard(key)
        self._verified[key] = (ok, problem)
        self._show_check()

    def _show_check(self) -> None:
        r = self.record
        if r is None:
            return
        found = self._verified.get(r.sidecar_sha256)
        if found is None:
            self.record_text.setText("Checking the record…")
            self.record_text.setStyleSheet(f"color: {_tone(self, '#a8a8a8', '#505050')};")
        elif found[0]:
            self.record_text.setText("Record intact: the mask, label table and history match.")
            self.record_text.setStyleSheet(f"color: {_tone(self, '#2fc496', '#00795a')};")
        else:
            self.record_text.setText(f"The result no longer matches its record: {found[1]}")
            self.record_text.setStyleSheet(f"color: {_tone(self, '#ff8a3d', '#b34700')}; font-weight: 600;")

    # ---------------------------------------------------------------- showing
    def _show(self) -> None:
        r = self.record
        session = self.w.controller.session
        self.decisions.clear()
        self.versions.clear()
        if r is None:
            has = session is not None
            self.state_text.setText("<b>Not saved yet</b>" if has else "<b>No result</b>")
            self.record_text.setText("")
            self.next_text.setText("Save the outlines (File ▸ Save) to submit them for review." if has else
                                   "Open a saved result (File ▸ Open result) to review it.")
            for button in self.step_buttons.values():
                button.setEnabled(False)
            self.mark_button.setEnabled(False)
            self.summary_button.setEnabled(False)
            self.refresh_overlay()
            return
        dark, light = STATE_COLOURS.get(r.state, ("#ffffff", "#000000"))
        colour = _tone(self, dark, light)
        muted = _tone(self, "#a8a8a8", "#505050")
        extra = ""
        if self.w.files.new_version:
            extra = (f"<br><span style='color:{muted}'>Editing: the next save makes version {r.version + 1}, "
                     "a Draft.</span>")
        elif r.state == "Approved":
            extra = f"<br><span style='color:{muted}'>Read-only: an edit asks to start a new version.</span>"
        who = f" · {r.reviewer}" if r.reviewer else ""
        self.state_text.setText(f"<span style='font-size:15px; font-weight:700; color:{colour}'>{r.state}</span>"
                                f" · version {r.version}{who} · {r.path.name}{extra}")
        self._show_check()
        self.next_text.setText(_NEXT.get(r.state, ""))
        allowed = set(r.allowed)
        for key, button in self.step_buttons.items():
            button.setEnabled(key in allowed and not self.w.files.new_version)
        self.mark_button.setEnabled(bool(allowed))
        self.summary_button.setEnabled(True)
        names = {lab.index: lab.name for lab in r.labels}
        number = 0
        for d in r.decisions:
            move = f" ({d.source} → {d.state})" if d.source else ""
            by = f" by {d.reviewer}" if d.reviewer else " (no name given)"
            head = QListWidgetItem(f"{d.step or 'decision'}{move}")
            font = head.font()
            font.setBold(True)
            head.setFont(font)
            self.decisions.addItem(head)
            lines = [f"    {_local(d.time)}{by}"] + [f"    {d.comment}"] if d.comment else [f"    {_local(d.time)}{by}"]
            self.decisions.addItem(QListWidgetItem("\n".join(lines)))
            for m in d.marks:
                number += 1
                child = QListWidgetItem(f"    note {number} · {names.get(m.label, m.label)} · slice {m.slice}: {m.note}")
                child.setToolTip(f"double-click: go to slice {m.slice}")
                child.setData(Qt.ItemDataRole.UserRole, (m.slice, m.point))
                self.decisions.addItem(child)
        if not r.decisions:
            self.decisions.addItem(QListWidgetItem("No step yet for this version."))
        for v in reversed(r.versions):
            who = f" by {v.reviewer}" if v.reviewer else ""
            head = f"Version {v.version}: {v.state}{who}" + (" (these files)" if v.current else "")
            lines = [head, f"saved {_local(v.saved)}" if v.saved else ""]
            lines += [f"  {d.step}{' by ' + d.reviewer if d.reviewer else ''}: {d.comment}" for d in v.decisions
                      if d.comment]
            lines += [f"  note: {names.get(m.label, m.label)}, slice {m.slice}: {m.note}" for d in v.decisions
                      for m in d.marks]
            item = QListWidgetItem("\n".join(line for line in lines if line))
            if v.current:
                font = item.font()
                font.setBold(True)
                item.setFont(font)
            self.versions.addItem(item)
        self._show_pending()

    def _show_pending(self) -> None:
        self.notes.clear()
        names = {lab.index: lab.name for lab in self.record.labels} if self.record else {}
        for m in self.pending:
            item = QListWidgetItem(f"{names.get(m.label, m.label)} · slice {m.slice}: {m.note}")
            item.setData(Qt.ItemDataRole.UserRole, (m.slice, m.point))
            self.notes.addItem(item)
        self.remove_note_button.setEnabled(bool(self.pending))
        self.notes.setVisible(bool(self.pending))
        self.refresh_overlay()

    def refresh_overlay(self) -> None:
        """Draw this version's notes (and the notes not yet recorded) on the slice in view."""
        marks: list[tuple[int, Mark, bool]] = []
        n = 0
        if self.record is not None:
            for d in self.record.decisions:
                for m in d.marks:
                    n += 1
                    marks.append((n, m, False))
        for m in self.pending:
            n += 1
            marks.append((n, m, True))
        k = self.w.views.slice_index
        anchors: dict[int, tuple[float, float]] = {}
        session = self.w.controller.session
        if session is not None and marks:
            for o in session.outlines(k):
                if o.contours:
                    pts = max(o.contours, key=len)
                    top = pts[int(pts[:, 0].argmin())]
                    anchors[o.label] = (float(top[0]), float(top[1]))
        self.overlay.show(marks, k, anchors)

    def _go_to(self, where: Any) -> None:
        if not where:
            return
        k, point = where
        self.w.views.set_slice(int(k))
        if point is not None:
            self.w.views.set_cursor(*point)

    # ---------------------------------------------------------------- notes
    def _mark_mode(self, on: bool) -> None:
        tools = self.w.tools
        self._marking = on
        self.stop_marking.setEnabled(on)
        if on:
            self._tool_before = tools.tool
            tools.set_tool("probe")
            self.w.statusBar().showMessage("Click on the outline to note on (Esc: stop)", 8000)
            self.w.views.main.setFocus()
        else:
            tools.set_tool(self._tool_before)

    def _clicked(self, row: float, col: float, button: int, _mods: int) -> None:
        if not self._marking or button != Qt.MouseButton.LeftButton.value or self.record is None:
            return
        session = self.w.controller.session
        k = self.w.views.slice_index
        label = self._label_near(row, col, k)
        self.mark_button.setChecked(False)
        if label is None:
            self.w.statusBar().showMessage("The result has no label to note on", 6000)
            return
        name = next((lab.name for lab in self.record.labels if lab.index == label), str(label))
        text, ok = QInputDialog.getMultiLineText(self, "Note on an outline", f"Note on {name}, slice {k}:")
        del session
        if ok and text.strip():
            self.add_note(Mark(label, k, text.strip(), (round(row, 2), round(col, 2))))

    def add_note(self, mark: Mark) -> None:
        """Add a note to be recorded with the next step."""
        self.pending.append(mark)
        self._show_pending()

    def _label_near(self, row: float, col: float, k: int) -> int | None:
        """The label whose outline on slice ``k`` is nearest the point, else the current label."""
        from engine.session.planes import signed_distance

        session = self.w.controller.session
        labels = {lab.index for lab in self.record.labels} if self.record else set()
        best, found = float("inf"), None
        if session is not None:
            for o in session.outlines(k):
                if o.label in labels:
                    d = abs(signed_distance(o.contours, (row, col), session.spacing))
                    if d < best:
                        best, found = d, o.label
        if found is None:
            current = self.w.labels.current
            found = current if current in labels else (min(labels) if labels else None)
        return found

    def _remove_note(self) -> None:
        row = self.notes.currentRow()
        if 0 <= row < len(self.pending):
            del self.pending[row]
        elif self.pending:
            self.pending.pop()
        self._show_pending()

    # ---------------------------------------------------------------- steps
    def take_step(self, step: str) -> None:
        """Record ``step`` on the saved result through the case's worker (asks to save unsaved outlines first)."""
        r = self.record
        session = self.w.controller.session
        s = STEPS[step]
        if r is None or session is None:
            return
        name = self.reviewer.text().strip() or None
        comment = self.comment.toPlainText().strip() or None
        if s.needs_reviewer and name is None:
            self.reviewer.setFocus()
            QMessageBox.information(self, "Reviewer", f"To {s.key} the outlines, type your name as reviewer first.")
            return
        if s.needs_comment and comment is None and not self.pending:
            self.comment.setFocus()
            QMessageBox.information(self, "Why", "To return the outlines, say why: a comment or a note on an "
                                               "outline (Mark outline).")
            return
        if session.modified and (session.outlines() or session.live is not None):
            if step == "submit" and r.state == "Draft":
                answer = QMessageBox.question(self, "Unsaved outlines", "The outlines in view differ from the "
                                              "saved result. Save them, then submit?",
                                              QMessageBox.StandardButton.Save | QMessageBox.StandardButton.Cancel)
                if answer == QMessageBox.StandardButton.Save:
                    self.w.files.save(then=lambda: self._after_save(step))
                return
            answer = QMessageBox.question(self, "Unsaved outlines", f"The outlines in view differ from the saved "
                                          f"result. {s.word} the saved result (version {r.version}) as it is?")
            if answer != QMessageBox.StandardButton.Yes:
                return
        if step == "approve":
            answer = QMessageBox.question(self, "Approve", f"Approve version {r.version} of {r.path.name} as "
                                          f"{name}? An approval is final for this version.")
            if answer != QMessageBox.StandardButton.Yes:
                return
        marks, expect, path = list(self.pending), r.sidecar_sha256, r.path
        self.w.controller.submit(s.word, lambda _s: record_step(path, step, reviewer=name, comment=comment,
                                                               marks=marks, expect_sha256=expect),
                                 on_done=lambda outcome: self._step_done(step, outcome))

    def _after_save(self, step: str) -> None:
        self._stat = None
        self.sync()
        self.take_step(step)

    def _step_done(self, step: str, outcome: Any) -> None:
        self._stat = None
        self.sync()
        if outcome.error:
            QMessageBox.warning(self, "Not recorded", outcome.error)
            return
        self.pending.clear()
        self.comment.clear()
        name = self.reviewer.text().strip()
        if name:
            self.w.settings.setValue("review/reviewer", name)
        record = outcome.result
        who = f" by {record.reviewer}" if record.reviewer and step != "submit" else ""
        self.w.statusBar().showMessage(f"{record.path.name}: {record.state}{who} (version {record.version})", 8000)
        self._show_pending()

    # ------------------------------------------------------ approved results
    def allow(self, what: str) -> bool:
        """Whether the request ``what`` may go ahead: an edit of an Approved result first asks to start a new
        version (the controller's guard)."""
        r = self.record
        if what in NOT_EDITS or r is None or r.state != "Approved" or self.w.files.new_version:
            return True
        if self.w.files.result is None:
            return True
        answer = QMessageBox.question(
            self.w, "Approved result",
            f"{r.path.name} is Approved (version {r.version}). Editing starts a new version {r.version + 1}, a "
            f"Draft; the approval stays on version {r.version}. Start a new version?",
            QMessageBox.StandardButton.Yes | QMessageBox.StandardButton.Cancel)
        if answer != QMessageBox.StandardButton.Yes:
            return False
        self.w.files.new_version = True
        self._show()
        return True

    # ---------------------------------------------------------------- summary
    def write_summary(self) -> None:
        """Ask where, then write the HTML review summary in the case's worker and open it."""
        r = self.record
        if r is None:
            return
        from engine.review.report import report_path, write_report

        chosen, _ = QFileDialog.getSaveFileName(self, "Write review summary", str(report_path(r.path)),
                                                "Review summary (*.html)")
        if not chosen:
            return
        out = chosen if chosen.lower().endswith((".html", ".htm")) else chosen + ".html"
        path = r.path

        def done(outcome: Any) -> None:
            if outcome.error:
                QMessageBox.warning(self, "Summary not written", outcome.error)
                return
            written = outcome.result
            note = "" if written.verified else " (the result no longer matches its record: the summary says what)"
            self.w.statusBar().showMessage(f"Wrote {written.path.name}{note}", 8000)
            if self.open_summaries:
                QDesktopServices.openUrl(QUrl.fromLocalFile(os.fspath(written.path)))

        self.w.controller.submit("Write review summary",
                                 lambda s: write_report(path, out, volume=s.volume), pause=False, on_done=done)

    def after_open(self) -> None:
        """A case was opened: forget the notes of the last one, show its review, bring the panel forward when the
        result is under review."""
        self.pending.clear()
        self.mark_button.setChecked(False)
        self._stat = None
        self.sync()
        r = self.record
        if r is not None and (r.state != "Draft" or r.decisions or len(r.versions) > 1):
            self.w.signoff_dock.raise_()

    def shutdown(self) -> None:
        """Stop the polling and the record checks (the window is closing)."""
        self.poll.stop()
        self._pool.shutdown(wait=False, cancel_futures=True)
