"""The Sign-off dock in the real window (offscreen, pytest-qt): a reviewer's steps, notes on outlines, an
approved result kept read-only until a new version is started, and refusals.

Results are the head phantom's truth outlines (``tests/review_cases.py``); what the dock records is checked
in the sidecar itself and with ``engine.io.verify``.
"""

from __future__ import annotations

import json

import pytest
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QMessageBox

import engine.io as eio
from engine.review import Mark, read_review, record_step
from tests.review_cases import make_result
from tests.window_helpers import click, make_window, open_and_wait, wait_idle

pytestmark = pytest.mark.gui


class Dialogs:
    """Questions and messages the window shows, answered by the test."""

    def __init__(self, monkeypatch, answers=None):
        self.seen: list[tuple[str, str, str]] = []
        self.answers = dict(answers or {})
        for kind in ("question", "information", "warning", "critical"):
            monkeypatch.setattr(QMessageBox, kind, self._make(kind))

    def _make(self, kind):
        def show(parent, title, text, *args, **kwargs):
            self.seen.append((kind, title, text))
            return self.answers.get(title, QMessageBox.StandardButton.Yes if kind == "question"
                                    else QMessageBox.StandardButton.Ok)
        return staticmethod(show)

    def titles(self):
        return [t for _, t, _ in self.seen]


def open_result_window(qtbot, tmp_path, sidecar):
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, sidecar)
    qtbot.waitUntil(lambda: w.signoff.record is not None, timeout=10000)
    return w


def test_a_reviewer_returns_a_submitted_result_with_a_note_placed_on_the_outline(qtbot, tmp_path, monkeypatch):
    sidecar = make_result(tmp_path)
    record_step(sidecar, "submit", comment="ready")
    dialogs = Dialogs(monkeypatch)
    monkeypatch.setattr("app.signoff_dock.QInputDialog.getMultiLineText",
                        lambda *a, **k: ("the lower rim is missed here", True))
    w = open_result_window(qtbot, tmp_path, sidecar)
    panel = w.signoff
    assert panel.record.state == "Submitted" and not w.signoff_dock.visibleRegion().isEmpty()
    assert not panel.step_buttons["submit"].isEnabled()
    assert panel.step_buttons["approve"].isEnabled() and panel.step_buttons["return"].isEnabled()
    qtbot.waitUntil(lambda: "Record intact" in panel.record_text.text(), timeout=20000)
    w.views.set_slice(10)
    panel.reviewer.setText("Dr A")
    panel.comment.setPlainText("please redo the lower rim")
    qtbot.mouseClick(panel.mark_button, Qt.MouseButton.LeftButton)
    assert w.tools.tool == "probe"  # a click marks, it does not seed
    click(qtbot, w.views.main, 58.0, 100.0)
    assert w.tools.tool == "seed" and not panel.mark_button.isChecked()
    assert len(panel.pending) == 1
    mark = panel.pending[0]
    assert (mark.label, mark.slice, mark.note) == (1, 10, "the lower rim is missed here")
    assert mark.point == pytest.approx((58.0, 100.0), abs=0.6)
    assert len(panel.overlay.texts) == 1 and "the lower rim" in panel.overlay.texts[0].textItem.toPlainText()
    qtbot.mouseClick(panel.step_buttons["return"], Qt.MouseButton.LeftButton)
    wait_idle(qtbot, w)
    qtbot.waitUntil(lambda: panel.record.state == "Returned", timeout=10000)
    review = json.loads(sidecar.read_text())["Isotide"]["Review"]
    assert review["State"] == "Returned" and review["Reviewer"] == "Dr A"
    assert review["Decisions"][-1]["Comment"] == "please redo the lower rim"
    assert review["Decisions"][-1]["Marks"][0]["Note"] == "the lower rim is missed here"
    assert eio.verify(sidecar).ok
    assert not any(b.isEnabled() for b in panel.step_buttons.values()) and panel.pending == []
    assert w.settings.value("review/reviewer") == "Dr A"
    assert len(panel.overlay.texts) == 1  # the recorded note stays in the view
    assert "Returned" in panel.state_text.text() and panel.decisions.count() == 5  # two steps of two lines, a note
    assert panel.decisions.item(4).data(Qt.ItemDataRole.UserRole)[0] == 10
    assert not any(kind in ("warning", "critical") for kind, _, _ in dialogs.seen)


def test_an_approval_needs_a_name_and_is_confirmed(qtbot, tmp_path, monkeypatch):
    sidecar = make_result(tmp_path)
    record_step(sidecar, "submit")
    dialogs = Dialogs(monkeypatch, {"Approve": QMessageBox.StandardButton.No})
    w = open_result_window(qtbot, tmp_path, sidecar)
    panel = w.signoff
    panel.reviewer.setText("")
    before = sidecar.read_bytes()
    qtbot.mouseClick(panel.step_buttons["approve"], Qt.MouseButton.LeftButton)
    assert dialogs.titles() == ["Reviewer"]
    panel.reviewer.setText("Dr A")
    qtbot.mouseClick(panel.step_buttons["approve"], Qt.MouseButton.LeftButton)
    wait_idle(qtbot, w)
    assert dialogs.titles()[-1] == "Approve" and sidecar.read_bytes() == before  # answered No
    dialogs.answers["Approve"] = QMessageBox.StandardButton.Yes
    qtbot.mouseClick(panel.step_buttons["approve"], Qt.MouseButton.LeftButton)
    wait_idle(qtbot, w)
    qtbot.waitUntil(lambda: panel.record.state == "Approved", timeout=10000)
    assert read_review(sidecar).reviewer == "Dr A" and eio.verify(sidecar).ok


def test_an_approved_result_is_read_only_until_a_new_version_is_started(qtbot, tmp_path, monkeypatch):
    sidecar = make_result(tmp_path)
    record_step(sidecar, "submit")
    record_step(sidecar, "approve", reviewer="Dr A", marks=[Mark(1, 10, "fine", (46.0, 101.0))])
    approved_voxels = json.loads(sidecar.read_text())["Isotide"]["Output"]["VoxelSHA256"]
    dialogs = Dialogs(monkeypatch, {"Approved result": QMessageBox.StandardButton.Cancel})
    w = open_result_window(qtbot, tmp_path, sidecar)
    session = w.controller.session
    w.views.set_slice(10)
    w.labels.select(1)
    assert "Read-only" in w.signoff.state_text.text()
    click(qtbot, w.views.main, 50, 102)  # a seed: an edit
    wait_idle(qtbot, w)
    assert dialogs.titles() == ["Approved result"] and session.history == () and session.live is None
    dialogs.answers["Approved result"] = QMessageBox.StandardButton.Yes
    w.labels.select(1)
    w.tools.evolve_on_seed = False
    click(qtbot, w.views.main, 58, 100)
    wait_idle(qtbot, w)
    assert w.files.new_version and session.live is not None
    assert "next save makes version 2" in w.signoff.state_text.text()
    assert not any(b.isEnabled() for b in w.signoff.step_buttons.values())
    w.controller.evolve(30)
    wait_idle(qtbot, w)
    w.controller.submit("Commit outline", lambda s: s.commit())
    wait_idle(qtbot, w)
    assert w.files.save()
    wait_idle(qtbot, w)
    assert "Result under review" not in dialogs.titles()  # agreed once, not asked again
    qtbot.waitUntil(lambda: w.signoff.record is not None and w.signoff.record.version == 2, timeout=10000)
    record = w.signoff.record
    assert record.state == "Draft" and [v.state for v in record.versions] == ["Approved", "Draft"]
    assert json.loads(sidecar.read_text())["Isotide"]["Versions"][0]["VoxelSHA256"] == approved_voxels
    assert eio.verify(sidecar).ok and not w.files.new_version
    assert w.signoff.step_buttons["submit"].isEnabled()
    assert w.signoff.versions.count() == 2


def test_submitting_unsaved_outlines_saves_them_first(qtbot, tmp_path, monkeypatch):
    sidecar = make_result(tmp_path)
    dialogs = Dialogs(monkeypatch, {"Unsaved outlines": QMessageBox.StandardButton.Save})
    w = open_result_window(qtbot, tmp_path, sidecar)
    session = w.controller.session
    w.views.set_slice(12)
    w.labels.select(1)
    click(qtbot, w.views.main, 50, 102)  # the tumour on slice 12 was not outlined: grow it
    wait_idle(qtbot, w)
    w.controller.submit("Commit outline", lambda s: s.commit())
    wait_idle(qtbot, w)
    assert session.modified
    qtbot.mouseClick(w.signoff.step_buttons["submit"], Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: w.signoff.record is not None and w.signoff.record.state == "Submitted", timeout=30000)
    wait_idle(qtbot, w)
    assert "Unsaved outlines" in dialogs.titles() and not session.modified
    block = json.loads(sidecar.read_text())["Isotide"]
    slices = {s["Slice"] for lab in block["Labels"] if lab["Index"] == 1 for s in lab["Slices"]}
    assert 12 in slices and eio.verify(sidecar).ok


def test_a_step_on_a_result_changed_elsewhere_is_refused_and_the_dock_catches_up(qtbot, tmp_path, monkeypatch):
    sidecar = make_result(tmp_path)
    record_step(sidecar, "submit")
    dialogs = Dialogs(monkeypatch)
    w = open_result_window(qtbot, tmp_path, sidecar)
    w.signoff.poll.stop()  # the dock has not seen the other reviewer's step yet
    record_step(sidecar, "return", reviewer="Dr B", comment="from another desk")
    w.signoff.reviewer.setText("Dr A")
    qtbot.mouseClick(w.signoff.step_buttons["approve"], Qt.MouseButton.LeftButton)
    wait_idle(qtbot, w)
    warnings = [t for k, _, t in dialogs.seen if k == "warning"]
    assert warnings and "changed since it was read" in warnings[-1]
    qtbot.waitUntil(lambda: w.signoff.record.state == "Returned", timeout=10000)
    assert read_review(sidecar).reviewer == "Dr B" and eio.verify(sidecar).ok
