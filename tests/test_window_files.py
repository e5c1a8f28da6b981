"""Bad input through the window, and a second study opened while a front evolves.

A corrupt file must give an error dialog with the engine's one-line message
naming the file, and leave the window as it was (the study in view still
works); opening another study while the worker evolves a front must stop
that run within a step, record it, and let the worker thread finish.
"""

from __future__ import annotations

import pytest
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QMessageBox

from tests.window_helpers import ABDOMEN, HEAD, click, key, make_window, open_and_wait, wait_idle

pytestmark = pytest.mark.gui


@pytest.fixture
def errors(monkeypatch):
    """Error dialogs shown (recorded instead of waiting for a click)."""
    shown: list[tuple[str, str]] = []
    monkeypatch.setattr("app.study_io.QMessageBox.critical", lambda parent, title, text: shown.append((title, text)))
    return shown


@pytest.mark.parametrize("name,content", [
    ("broken.nii.gz", b"\x1f\x8b\x08\x00" + b"not really a gzip stream" * 4),
    ("truncated.dcm", b"\x00" * 128 + b"DICM" + b"\x02\x00\x10\x00UI"),
    ("picture.png", b"\x89PNG\r\n\x1a\n" + b"\x00" * 20),
])
def test_a_corrupt_file_gives_an_error_dialog_and_the_study_in_view_stays_usable(qtbot, tmp_path, errors, name,
                                                                                 content):
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, HEAD / "image.nii.gz")
    study = w.controller.session
    bad = tmp_path / name
    bad.write_bytes(content)
    assert w.open_path(str(bad))
    qtbot.waitUntil(lambda: bool(errors) and not w.opener.busy, timeout=30000)
    title, text = errors[0]
    assert title == "Cannot open" and name in text and "\n" not in text
    assert w.controller.session is study and w.views.session is study
    # still usable: a seed on the tumour (sample_cases/head_mr/README.md) grows a front
    lab_count = len(study.labels)
    w.views.set_slice(10)
    click(qtbot, w.views.main, 50, 102)
    wait_idle(qtbot, w)
    assert len(study.labels) == lab_count + 1 and study.frame().contours


def test_opening_a_missing_path_reports_it(qtbot, tmp_path, errors):
    w = make_window(qtbot, tmp_path)
    assert w.open_path(str(tmp_path / "nothing-here.nii.gz"))
    qtbot.waitUntil(lambda: bool(errors), timeout=20000)
    assert "nothing-here.nii.gz" in errors[0][1]
    assert w.controller.session is None


def test_opening_a_second_study_while_a_front_evolves_stops_it_cleanly(qtbot, tmp_path, monkeypatch):
    monkeypatch.setattr("app.window_files.ask_save_changes", lambda *a: QMessageBox.StandardButton.Discard)
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, ABDOMEN / "dicom")
    first = w.controller.session
    for _ in range(30):
        if w.views.slice_index == 16:
            break
        key(qtbot, w, Qt.Key.Key_PageDown if w.views.slice_index < 16 else Qt.Key.Key_PageUp)
    assert w.views.slice_index == 16
    click(qtbot, w.views.main, 106, 112)  # the liver: it takes seconds to converge
    qtbot.waitUntil(lambda: first.running and first.frame().steps > 3, timeout=30000)
    thread = w.controller._thread.thread
    open_and_wait(qtbot, w, HEAD / "image.nii.gz")
    qtbot.waitUntil(thread.isFinished, timeout=10000)
    qtbot.waitUntil(lambda: w.controller.retiring == 0, timeout=10000)
    assert not first.running
    run = first.history[-1]
    assert run.action == "evolve" and not run.details["converged"]  # stopped, and kept as one command
    second = w.controller.session
    assert second is not first and w.views.session is second and second.live is None
    assert w.controller.undo_stack.count() == 0


def test_save_with_dicom_seg_writes_a_verifiable_result_beside_the_mask(qtbot, tmp_path):
    from engine.io import verify

    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, HEAD / "dicom")
    s = w.controller.session
    assert w.actions["dicom_seg"].isEnabled()
    w.views.set_slice(10)
    click(qtbot, w.views.main, 50, 102)  # the tumour
    wait_idle(qtbot, w)
    w.actions["commit"].trigger()
    wait_idle(qtbot, w)
    w.actions["dicom_seg"].setChecked(True)
    w.files.save_to(str(tmp_path / "head"))
    wait_idle(qtbot, w)
    assert (tmp_path / "head.seg.dcm").is_file() and verify(tmp_path / "head_dseg.json").ok
    assert not s.modified and w.files.result == str(tmp_path / "head")


def test_a_dropped_file_opens_and_joins_the_recent_list(qtbot, tmp_path):
    from PySide6.QtCore import QMimeData, QPointF, QUrl
    from PySide6.QtGui import QDropEvent

    w = make_window(qtbot, tmp_path)
    mime = QMimeData()
    path = HEAD / "image.nii.gz"
    mime.setUrls([QUrl.fromLocalFile(str(path))])
    event = QDropEvent(QPointF(20, 20), Qt.DropAction.CopyAction, mime, Qt.MouseButton.LeftButton,
                       Qt.KeyboardModifier.NoModifier)
    w.dropEvent(event)
    qtbot.waitUntil(lambda: w.controller.session is not None, timeout=30000)
    assert w.controller.session.volume.shape == (16, 160, 160)
    assert w.files.recent()[0] == str(path)
    assert [a.text() for a in w.menus["recent"].actions()] == [str(path)]
    assert w.windowTitle() == "Isotide — image[*]"


def test_the_demo_seeds_two_structures_and_evolves_them(qtbot, tmp_path):
    from app.demo import DemoScript
    from engine.commands.demo import DEMO_SLICE, STRUCTURES
    from independent_metrics import dice
    from tests.window_helpers import live_mask, truth

    w = make_window(qtbot, tmp_path)
    demo = DemoScript(w)
    demo.start()
    qtbot.waitUntil(lambda: demo.stage == "done", timeout=120000)
    wait_idle(qtbot, w)
    s = w.controller.session
    assert [lab.name for lab in s.labels] == [x.name for x in STRUCTURES]
    assert w.views.slice_index == DEMO_SLICE
    first = s.outlines(DEMO_SLICE, 1)[0]
    t = truth()[DEMO_SLICE]
    # the structures' truth labels in sample_cases/abdomen_mr (aorta 5, vertebral body 6)
    assert dice(first.mask, t == STRUCTURES[0].truth_label) >= 0.95
    assert s.live.label == 2 and s.frame().converged
    assert dice(live_mask(s), t == STRUCTURES[1].truth_label) >= 0.95


def test_without_the_sample_study_the_demo_renders_its_slice(qtbot, tmp_path, monkeypatch):
    from app.demo import DemoScript
    from engine.commands.demo import STRUCTURES, demo_phantom
    from independent_metrics import dice
    from tests.window_helpers import live_mask

    monkeypatch.setattr("app.demo.sample_study", lambda: None)
    w = make_window(qtbot, tmp_path)
    demo = DemoScript(w)
    demo.start()
    qtbot.waitUntil(lambda: demo.stage == "done", timeout=180000)
    wait_idle(qtbot, w)
    s = w.controller.session
    assert s.volume.shape[0] == 1 and not w.views.side_panel.isVisible()
    t = demo_phantom().truth[0]  # the rendered slice's own truth labels
    assert dice(s.outlines(0, 1)[0].mask, t == STRUCTURES[0].truth_label) >= 0.95
    assert dice(live_mask(s), t == STRUCTURES[1].truth_label) >= 0.95
