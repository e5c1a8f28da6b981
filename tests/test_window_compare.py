"""The Compare board in the real window (offscreen, pytest-qt): variants run in their own threads while the GUI
keeps drawing, linked planes, the metrics table against the committed outline and a reference, Adopt.

References: Dice (Ecology 1945) recomputed with numpy from the variants' masks; the head phantom's truth labels
(``sample_cases/head_mr/truth_dseg.nii.gz`` with its ``.tsv``) as the reference outline.
"""

from __future__ import annotations

import threading

import numpy as np
import pytest
from PySide6.QtCore import Qt

from tests.review_cases import HEAD, make_result
from tests.window_helpers import key, make_window, open_and_wait, wait_idle

pytestmark = pytest.mark.gui


def board_on_tumour(qtbot, tmp_path):
    sidecar = make_result(tmp_path)
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, sidecar)
    w.views.set_slice(10)
    w.labels.select(1)
    w.update_actions()
    assert w.actions["compare"].isEnabled()
    key(qtbot, w, Qt.Key.Key_B, Qt.KeyboardModifier.ControlModifier)
    board = w.compare_board
    assert board is not None
    qtbot.addWidget(board)
    return w, board


def test_variants_run_in_their_own_threads_and_are_scored(qtbot, tmp_path):
    w, board = board_on_tumour(qtbot, tmp_path)
    assert [s.description for s in board.starts] == ["the committed outline's seeds (1)", "the committed outline",
                                                     "the outline of slice 9, carried",
                                                     "the outline of slice 11, carried"]
    board.count.setValue(3)
    assert not board.columns[3].isVisible() and board.table.isRowHidden(3)
    gui_ticks = []
    board.timer.timeout.connect(lambda: gui_ticks.append(threading.current_thread().name))
    qtbot.mouseClick(board.run_button, Qt.MouseButton.LeftButton)
    names = {t.name for t in board.threads}
    assert names == {"isotide-variant-A", "isotide-variant-B", "isotide-variant-C"}
    qtbot.waitUntil(lambda: board.finished, timeout=120000)
    qtbot.waitUntil(lambda: board.pairs.item(0, 1) is not None and board.pairs.item(0, 1).text() != "", timeout=30000)
    assert gui_ticks and set(gui_ticks) == {threading.main_thread().name}  # the board drew while they ran
    frames = [r.frame for r in board.runs]
    committed = board.committed
    for i, f in enumerate(frames):
        assert f.state == "converged" and board.table.item(i, 0).text() == "converged"
        overlap = 2 * np.count_nonzero(f.mask & committed) / (f.mask.sum() + committed.sum())
        assert float(board.table.item(i, 5).text()) == pytest.approx(overlap, abs=6e-4)
        assert board.table.item(i, 1).text() == str(f.steps)
        assert board.table.item(i, 7).text() == "–"  # no reference yet
    ab = 2 * np.count_nonzero(frames[0].mask & frames[1].mask) / (frames[0].mask.sum() + frames[1].mask.sum())
    assert float(board.pairs.item(0, 1).text()) == pytest.approx(ab, abs=6e-4)
    assert float(board.pairs.item(1, 0).text()) >= 0.0  # HD95 below the diagonal
    assert board.columns[0].canvas._outline_items  # each variant's outline drawn, solid, at the end


def test_the_planes_zoom_and_pan_together(qtbot, tmp_path):
    w, board = board_on_tumour(qtbot, tmp_path)
    qtbot.wait(50)
    first, second = board.columns[0].canvas, board.columns[2].canvas
    before = second.vb.viewRange()
    first.zoom(1.6)
    qtbot.wait(20)
    after = second.vb.viewRange()
    assert after != before and np.allclose(after, first.vb.viewRange())
    board.fit_button.click()
    qtbot.wait(20)
    x, y = first.vb.viewRange()
    assert np.allclose(second.vb.viewRange(), (x, y))


def test_a_reference_and_adopting_a_variants_settings(qtbot, tmp_path):
    w, board = board_on_tumour(qtbot, tmp_path)
    board.count.setValue(2)
    column = board.columns[1]
    column.smoothness.setValue(2.5)  # the trainer's own variant
    assert column.variant.settings.resolved().smoothness == 2.5
    assert board.load_reference(str(HEAD / "truth_dseg.nii.gz"))  # found by name: "tumour" in truth_dseg.tsv
    qtbot.mouseClick(board.run_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: board.finished, timeout=120000)
    qtbot.waitUntil(lambda: board.table.item(1, 7) is not None and board.table.item(1, 7).text() != "–",
                    timeout=30000)
    assert all(float(board.table.item(i, 7).text()) > 0.9 for i in (0, 1))
    assert column.reference_curve.getData()[0] is not None and len(column.reference_curve.getData()[0]) > 10
    qtbot.mouseClick(column.adopt_button, Qt.MouseButton.LeftButton)
    wait_idle(qtbot, w)
    assert w.controller.session.settings(1).resolved().smoothness == 2.5


def test_closing_the_board_stops_the_runs(qtbot, tmp_path):
    w, board = board_on_tumour(qtbot, tmp_path)
    for column in board.columns:
        column.max_steps.setValue(1_000_000)
        column.smoothness.setValue(0.01)  # slow to settle: still running when the board closes
    qtbot.mouseClick(board.run_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: all(r.frame.steps > 2 for r in board.runs), timeout=60000)
    board.close()
    assert all(not t.is_alive() for t in board.threads)
    assert all(r.frame.finished for r in board.runs)


def test_a_bad_reference_is_refused_in_one_line(qtbot, tmp_path, monkeypatch):
    shown = []
    monkeypatch.setattr("app.compare_board.QMessageBox.warning", lambda parent, title, text: shown.append(text))
    w, board = board_on_tumour(qtbot, tmp_path)
    other = tmp_path / "other.npy"
    np.save(other, np.zeros((3, 8, 8), dtype=np.uint8))
    assert not board.load_reference(str(other))
    assert shown and "shape" in shown[0] and "\n" not in shown[0] and board.reference is None
