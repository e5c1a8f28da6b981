"""What the window shows: the three planes, orientation, window/level, the Probe, curvature colours,
settings reaching a running front, and the series chooser.

References: the radiological layout (common practice: patient's right on
the screen's left, anterior up in an axial plane); the sample studies'
geometry (``sample_cases/*/README.md``: the abdomen is an axial stack,
the head a coronal one); analytic signed distance to a disk (|x − c| − R).
"""

from __future__ import annotations

import shutil

import numpy as np
import pytest
from PySide6.QtCore import Qt

from tests.window_helpers import ABDOMEN, HEAD, click, drag, make_window, open_and_wait, wait_idle

pytestmark = pytest.mark.gui


def edges(canvas) -> tuple[str, ...]:
    return tuple(label.text() for label in canvas._edges)


def test_three_planes_named_and_oriented_with_outlines_in_all_of_them(qtbot, tmp_path):
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, ABDOMEN / "dicom")
    s = w.controller.session
    v = w.views
    assert v.side_panel.isVisible()
    assert v.main._title.text().startswith("Axial · slice")
    assert edges(v.main) == ("R", "L", "A", "P")
    assert edges(v.side[1]) == ("R", "L", "S", "I") and v.side[1]._title.text().startswith("Coronal")
    assert edges(v.side[2]) == ("A", "P", "S", "I") and v.side[2]._title.text().startswith("Sagittal")
    # physical aspect: a 400 mm x 144 mm coronal plane is drawn 400:144 on the screen
    rect = v.side[1].group.mapRectToParent(v.side[1]._rect())
    assert rect.width() / rect.height() == pytest.approx(400.0 / 144.0, rel=1e-6)
    # an outline drawn with Extend on slice 12 shows in the coronal plane through it, one slab thick
    v.set_slice(12)
    w.tools.set_tool("extend")
    w.brush.setValue(15.0)
    click(qtbot, v.main, 100, 128)
    wait_idle(qtbot, w)
    w.actions["commit"].trigger()
    wait_idle(qtbot, w)
    assert s.outlines(12)
    v.set_cursor(100, 128)
    qtbot.wait(20)
    items = [i for i in v.side[1]._outline_items.values()]
    x, y = items[0].xData, items[0].yData
    assert np.nanmin(y) == pytest.approx(11.5) and np.nanmax(y) == pytest.approx(12.5)
    assert np.nanmax(x) - np.nanmin(x) == pytest.approx(2 * 15.0 / 1.5625, abs=0.3)  # the 30 mm disk's diameter
    # a click in the sagittal plane moves the slice and the coronal plane
    click(qtbot, v.side[2], 5.0, 60.0)
    qtbot.wait(20)
    assert v.slice_index == 5 and v.cursor[0] == 60.0


def test_a_coronal_stack_is_titled_and_lettered_as_such(qtbot, tmp_path):
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, HEAD / "dicom")
    assert w.views.main._title.text().startswith("Coronal")
    assert edges(w.views.main) == ("R", "L", "S", "I")


def test_window_level_by_right_drag_and_presets(qtbot, tmp_path):
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, ABDOMEN / "dicom")
    v = w.views
    assert v.window == (450.0, 900.0)  # the file's first preset (sample_cases/abdomen_mr DICOM header)
    drag(qtbot, v.main, [(100, 100), (100, 130), (100, 160)], button=Qt.MouseButton.RightButton)
    c, width = v.window
    assert width > 900.0 and v.main.image.levels[1] - v.main.image.levels[0] == pytest.approx(width)
    assert v.side[1].image.levels[1] - v.side[1].image.levels[0] == pytest.approx(width)
    index = w.window_presets.findText("Auto", Qt.MatchFlag.MatchStartsWith)
    w.window_presets.activated.emit(index)
    auto = w.window_presets.itemData(index)
    assert v.window == pytest.approx(auto)
    assert "C " in w.level_text.text()


def test_the_probe_gives_the_signed_distance_to_the_outline(qtbot, tmp_path):
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, HEAD / "image.nii.gz")
    s = w.controller.session
    w.views.set_slice(3)
    w.tools.set_tool("extend")
    w.brush.setValue(12.0)
    click(qtbot, w.views.main, 80, 80)
    wait_idle(qtbot, w)
    w.tools.set_tool("probe")
    sp = s.spacing
    r0, c0 = s.history[-1].details["points"][0]  # where the click landed (screen pixels are coarser)
    assert abs(r0 - 80) < 1 and abs(c0 - 80) < 1
    # |x − c| − R at the centre and 20 mm to the side (analytic), within a tenth of a pixel
    inside = w.tools.probe_text(r0, c0)
    outside = w.tools.probe_text(r0, c0 + 20.0 / sp[1])
    assert inside.startswith("-") and float(inside.split()[0]) == pytest.approx(-12.0, abs=0.15)
    assert "(inside)" in inside and "the front" in inside
    assert float(outside.split()[0]) == pytest.approx(8.0, abs=0.15) and "(outside)" in outside


def test_curvature_colours_colour_the_live_front_and_outlines(qtbot, tmp_path):
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, HEAD / "image.nii.gz")
    s = w.controller.session
    w.views.set_slice(10)
    click(qtbot, w.views.main, 50, 102)  # the tumour (sample_cases/head_mr/README.md)
    wait_idle(qtbot, w)
    assert not any(item.isVisible() for item in w.views.main._live_curvature.items)
    w.front.curvature.setChecked(True)
    wait_idle(qtbot, w)
    frame = s.frame()
    assert frame.curvature is not None and len(frame.curvature) == len(frame.contours)
    assert w.actions["curvature"].isChecked() and w.views.main.curvature_bar.isVisible()
    shown = [item for item in w.views.main._live_curvature.items if item.isVisible()]
    assert shown and len(w.views.main.live.xData) == 0
    # a roughly round tumour: most of its outline convex (positive curvature), near 1/radius
    kappa = np.concatenate(frame.curvature)
    radius_mm = np.sqrt(frame.area_mm2 / np.pi)
    assert np.median(kappa) == pytest.approx(1.0 / radius_mm, rel=0.5)
    w.actions["curvature"].setChecked(False)
    wait_idle(qtbot, w)
    assert not any(item.isVisible() for item in w.views.main._live_curvature.items)


def test_a_setting_changed_while_the_front_evolves_reaches_it_at_once(qtbot, tmp_path):
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, ABDOMEN / "dicom")
    s = w.controller.session
    w.views.set_slice(16)
    # the edge model has no flood: its front crosses the liver step by step, for seconds
    w.front.model.setCurrentIndex(w.front.model.findData("edge"))
    qtbot.waitUntil(lambda: s.settings().model == "edge", timeout=5000)
    click(qtbot, w.views.main, 106, 112)
    qtbot.waitUntil(lambda: s.running and s.frame().steps > 2, timeout=30000)
    commands = len(s.history)
    w.front.smoothness.setValue(2.5)
    qtbot.waitUntil(lambda: s._front is not None and s._front.params.curvature_weight == 2.5, timeout=5000)
    assert s.running and len(s.history) == commands  # the running front took it: no pause, no new command
    w.actions["evolve"].trigger()  # Pause
    wait_idle(qtbot, w)
    run = s.history[-1]
    assert len(s.history) == commands + 1 and run.action == "evolve"  # one run, Evolve to Pause
    assert run.details["settings"]["params"]["smoothness"] == 2.5 and not run.details["converged"]


def test_a_folder_with_two_series_asks_which_to_open(qtbot, tmp_path, monkeypatch):
    folder = tmp_path / "two"
    shutil.copytree(ABDOMEN / "dicom", folder / "abdomen")
    shutil.copytree(HEAD / "dicom", folder / "head")
    asked = []

    def choose(parent, title, text, items, current, editable):
        asked.append(items)
        return next(i for i in items if "160" in i), True

    monkeypatch.setattr("app.study_io.QInputDialog.getItem", choose)
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, folder)
    assert len(asked[0]) == 2
    assert w.controller.session.volume.shape == (16, 160, 160)
    assert w.cases.series.count() == 2 and w.cases.series.isVisible()


def test_carry_from_a_live_front_commits_it_and_evolves_the_next_slice_from_this_one(qtbot, tmp_path):
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, HEAD / "image.nii.gz")
    s = w.controller.session
    w.views.set_slice(10)
    click(qtbot, w.views.main, 50, 102)  # the tumour (sample_cases/head_mr/README.md)
    wait_idle(qtbot, w)
    w.actions["commit"].trigger()
    wait_idle(qtbot, w)
    w.views.set_slice(12)  # an outline two slices on, so slice 11 has one on each side
    click(qtbot, w.views.main, 50, 102)
    wait_idle(qtbot, w)
    assert s.live.slice == 12 and s.frame().converged
    w.actions["carry_previous"].trigger()  # from the live front on 12, not from the outline on 10
    wait_idle(qtbot, w)
    assert w.views.slice_index == 11 and s.live.slice == 11 and s.frame().converged and s.frame().steps > 0
    assert (1, 12) in s.state.outlines  # the live front was committed first
    assert s.history[-1].action == "evolve" and s.history[-2].details["from_slice"] == 12


def test_a_click_in_the_history_list_goes_back_to_that_point(qtbot, tmp_path):
    w = make_window(qtbot, tmp_path)
    open_and_wait(qtbot, w, HEAD / "image.nii.gz")
    s = w.controller.session
    w.views.set_slice(4)
    w.tools.set_tool("extend")
    for col in (40, 80, 120):  # three strokes: Add label, then Extend three times
        click(qtbot, w.views.main, 80, col)
        wait_idle(qtbot, w)
    assert s.undo_index == 4 and w.controller.undo_stack.count() == 4
    after_first = s.history[1].after.live.snapshot.phi.copy()
    view = w.history
    row = view.model().index(2, 0)  # row 0 is "Study opened"; row 2 is after the first Extend
    qtbot.mouseClick(view.viewport(), Qt.MouseButton.LeftButton, pos=view.visualRect(row).center())
    wait_idle(qtbot, w)
    assert s.undo_index == 2 and w.controller.undo_stack.index() == 2
    assert np.array_equal(s.live.snapshot.phi, after_first)
    assert w.actions["redo"].isEnabled() and w.actions["redo"].text().startswith("Redo Extend")
