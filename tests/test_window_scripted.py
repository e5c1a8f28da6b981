"""A technician's session in the window, driven with mouse and keys (pytest-qt, offscreen).

The study is the invented abdomen of ``sample_cases/abdomen_mr`` (its README
lists where the structures are); outlines are compared with the case's
noise-free truth labels by the Dice coefficient (Dice 1945). Undo is checked
bit for bit against the state before the edit, the saved result with
``isotide verify`` (hashes and hash chain) and by reading it back.
"""

from __future__ import annotations

import contextlib
import io

import numpy as np
import pytest
from PySide6.QtCore import Qt
from scipy import ndimage

from independent_metrics import dice
from tests.window_helpers import ABDOMEN, click, drag, key, live_mask, make_window, open_and_wait, truth, wait_idle

pytestmark = pytest.mark.gui


def rename_current(qtbot, window, name: str) -> None:
    """Rename the selected label by typing in its Name cell (F2, the name, Enter)."""
    from PySide6.QtWidgets import QApplication

    table = window.labels.table
    row = table.currentRow()
    table.setCurrentCell(row, 1)
    table.setFocus()
    qtbot.keyClick(table, Qt.Key.Key_F2)
    editor = QApplication.focusWidget()
    editor.selectAll()
    qtbot.keyClicks(editor, name)
    qtbot.keyClick(editor, Qt.Key.Key_Return)
    wait_idle(qtbot, window)


def add_label(qtbot, window, name: str) -> int:
    qtbot.mouseClick(window.labels.add_button, Qt.MouseButton.LeftButton)
    wait_idle(qtbot, window)
    rename_current(qtbot, window, name)
    index = window.labels.current
    assert window.controller.session.label(index).name == name
    return index


def test_a_technician_outlines_corrects_carries_locks_saves_and_reopens(qtbot, tmp_path, monkeypatch):
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, ABDOMEN / "dicom")
    s = w.controller.session
    t = truth()
    canvas = w.views.main
    # to slice 17 with PageDown / PageUp, as a user walks the stack
    for _ in range(30):  # PageDown / PageUp as a user walks the stack
        if w.views.slice_index == 17:
            break
        key(qtbot, w, Qt.Key.Key_PageDown if w.views.slice_index < 17 else Qt.Key.Key_PageUp)
    assert w.views.slice_index == 17
    assert w.views.main.image.image is not None and np.array_equal(w.views.main.image.image, s.volume.array[17])

    # spleen: a seed dragged to a 5 px radius; the front evolves at once and converges
    spleen = add_label(qtbot, w, "spleen")
    drag(qtbot, canvas, [(150, 189), (150, 191), (150, 193), (150, 194)])
    wait_idle(qtbot, w)
    assert s.live.seeds and s.live.seeds[0][2] == pytest.approx(5.0, abs=0.3)
    assert s.frame().converged
    # the live front is drawn (dashed) on the Slice view while it is live
    assert len(canvas.live.xData) > 50
    assert dice(live_mask(s), t[17] == 2) >= 0.95  # spleen is label 2 of the case's truth

    # aorta: a click (default seed radius); the spleen's front is committed first
    aorta = add_label(qtbot, w, "aorta")
    click(qtbot, canvas, 147, 136)
    wait_idle(qtbot, w)
    assert s.frame().converged and s.live.label == aorta
    assert dice(live_mask(s), t[17] == 5) >= 0.95
    spleen_outline = s.outlines(17, spleen)[0]
    assert dice(spleen_outline.mask, t[17] == 2) >= 0.95

    # Trim the spleen with a brush stroke across its lower edge
    w.labels.table.selectRow(0)
    assert w.current_label() == spleen
    key(qtbot, w, Qt.Key.Key_T)
    assert w.tools.tool == "trim"
    w.brush.setValue(4.0)
    lowest = np.argwhere(spleen_outline.mask)[:, 0].max()
    cols = np.flatnonzero(spleen_outline.mask[lowest - 2])
    stroke = [(lowest - 2.0, float(c)) for c in np.linspace(cols.min() - 3, cols.max() + 3, 8)]
    drag(qtbot, canvas, stroke)
    wait_idle(qtbot, w)
    assert s.live.label == spleen and s.live.slice == 17
    trimmed_phi = s.live.snapshot.phi.copy()
    trimmed = live_mask(s)
    assert trimmed.sum() < spleen_outline.mask.sum() - 20
    assert not (trimmed & ~spleen_outline.mask).any()

    # undo: the spleen's outline exactly as before, no front; redo: the trimmed front bit for bit
    key(qtbot, w, Qt.Key.Key_Z, Qt.KeyboardModifier.ControlModifier)
    wait_idle(qtbot, w)
    assert s.live is None
    back = s.outlines(17, spleen)[0]
    assert back.same_as(spleen_outline) and np.array_equal(back.phi, spleen_outline.phi)
    key(qtbot, w, Qt.Key.Key_Z, Qt.KeyboardModifier.ControlModifier | Qt.KeyboardModifier.ShiftModifier)
    wait_idle(qtbot, w)
    assert np.array_equal(s.live.snapshot.phi, trimmed_phi)
    # the History list shows every command, the last one current
    stack = w.controller.undo_stack
    assert stack.count() == len(s.history) and stack.index() == s.undo_index
    assert stack.text(stack.index() - 1).startswith("Trim (spleen, slice 17)")

    # Commit outline (Return), then carry to the next slice (Shift+PageDown): it evolves at once
    key(qtbot, w, Qt.Key.Key_Return)
    wait_idle(qtbot, w)
    assert np.array_equal(s.outlines(17, spleen)[0].mask, trimmed)
    key(qtbot, w, Qt.Key.Key_PageDown, Qt.KeyboardModifier.ShiftModifier)
    wait_idle(qtbot, w)
    assert w.views.slice_index == 18 and s.live.slice == 18 and s.frame().converged
    assert dice(live_mask(s), t[18] == 2) >= 0.95
    key(qtbot, w, Qt.Key.Key_Return)
    wait_idle(qtbot, w)
    spleen_18 = s.outlines(18, spleen)[0].mask

    # lock the spleen (its Lock box), then grow the aorta's label with an intensity window that
    # takes in muscle (300) and spleen (390) from a seed in the muscle beside the spleen: it must
    # reach the spleen and stop there (sample_cases/abdomen_mr/README.md lists the tissues)
    lock = w.labels.table.item(0, 3)
    lock.setCheckState(Qt.CheckState.Checked)
    wait_idle(qtbot, w)
    assert s.label(spleen).locked
    w.labels.table.selectRow(1)
    key(qtbot, w, Qt.Key.Key_S)
    f = w.front
    f.model.setCurrentIndex(f.model.findData("window"))
    wait_idle(qtbot, w)
    f.window_low.setValue(250.0)
    f.window_high.setValue(450.0)
    f.max_steps.setValue(150)
    wait_idle(qtbot, w)
    settings = s.settings(aorta)
    assert settings.model == "window" and settings.resolved().window == (250.0, 450.0)
    assert settings.max_steps == 150
    image = ndimage.median_filter(s.volume.array[18], 5)
    ring = ndimage.binary_dilation(spleen_18, iterations=4) & ~ndimage.binary_dilation(spleen_18, iterations=2)
    ring &= t[18] == 0
    candidates = np.argwhere(ring)
    r, c = candidates[np.argmin(np.abs(image[ring] - 300.0))]
    w.seed_radius.setValue(2.0)
    click(qtbot, canvas, float(r), float(c))
    wait_idle(qtbot, w)
    grown = live_mask(s)
    assert s.live.label == aorta and s.frame().steps == 150
    assert not (grown & spleen_18).any()  # no overlap with the locked label
    assert (grown & ndimage.binary_dilation(spleen_18, iterations=2)).sum() > 10  # it did reach it
    key(qtbot, w, Qt.Key.Key_Delete, Qt.KeyboardModifier.ControlModifier)  # Clear front
    wait_idle(qtbot, w)
    assert s.live is not None and s.live.snapshot is None and len(s.live.seeds) == 1  # back to its seed
    key(qtbot, w, Qt.Key.Key_Delete)  # Remove seed: the last one when the mouse is over none
    wait_idle(qtbot, w)
    assert s.live is None

    # save (Ctrl+S asks for a name the first time), verify, reopen and compare
    out = tmp_path / "results" / "abdomen_dseg.nii.gz"
    out.parent.mkdir()
    monkeypatch.setattr("app.window_files.QFileDialog.getSaveFileName", lambda *a, **k: (str(out), ""))
    key(qtbot, w, Qt.Key.Key_S, Qt.KeyboardModifier.ControlModifier)
    wait_idle(qtbot, w)
    sidecar = tmp_path / "results" / "abdomen_dseg.json"
    assert sidecar.is_file() and not w.isWindowModified()
    from app.cli import main

    report = io.StringIO()
    with contextlib.redirect_stdout(report):
        assert main(["verify", str(sidecar)]) == 0
    saved = {(o.label, o.slice): o.mask for o in s.outlines()}
    assert set(saved) == {(spleen, 17), (spleen, 18), (aorta, 17)}
    open_and_wait(qtbot, w, sidecar)
    again = w.controller.session
    assert again is not s and [lab.name for lab in again.labels] == ["spleen", "aorta"]
    assert {(o.label, o.slice): o.mask for o in again.outlines()}.keys() == saved.keys()
    assert all(np.array_equal(o.mask, saved[(o.label, o.slice)]) for o in again.outlines())
    assert w.files.result == str(tmp_path / "results" / "abdomen")
