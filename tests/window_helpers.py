"""Helpers for the window tests: a window with its own settings and recovery folder, mouse and keys as a user."""

from __future__ import annotations

import os
from pathlib import Path

import nibabel as nib
import numpy as np
import pytest

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")

ROOT = Path(__file__).resolve().parents[1]
ABDOMEN = ROOT / "sample_cases" / "abdomen_mr"
HEAD = ROOT / "sample_cases" / "head_mr"


def truth(case: Path = ABDOMEN) -> np.ndarray:
    """A sample case's truth labels as ``[slice, row, col]`` (NIfTI axes are col, row, slice)."""
    return np.asarray(nib.load(str(case / "truth_dseg.nii.gz")).dataobj).transpose(2, 1, 0)


def make_window(qtbot, tmp_path: Path, **kwargs):
    """A shown MainWindow whose settings and recovery files live under ``tmp_path``."""
    from PySide6.QtCore import QSettings

    from app.application import make_application
    from app.main_window import MainWindow

    make_application()
    settings = QSettings(str(tmp_path / "settings.ini"), QSettings.Format.IniFormat)
    recovery = tmp_path / "recovery"
    recovery.mkdir(exist_ok=True)
    window = MainWindow(settings=settings, recovery_folder=recovery, **kwargs)
    qtbot.addWidget(window, before_close_func=lambda w: setattr(w, "_closing", True))  # no save prompt
    window.resize(1400, 900)
    window.show()
    qtbot.waitExposed(window)
    return window


def wait_idle(qtbot, window, timeout: float = 120.0) -> None:
    """Wait until the worker has nothing left to do (and the GUI has drawn the outcome)."""
    qtbot.waitUntil(lambda: window.controller.idle, timeout=int(timeout * 1000))
    qtbot.wait(20)


def open_and_wait(qtbot, window, path: Path, timeout: float = 60.0) -> None:
    before = window.controller.session
    assert window.open_path(str(path))
    qtbot.waitUntil(lambda: window.controller.session is not None and window.controller.session is not before,
                    timeout=int(timeout * 1000))
    qtbot.wait(20)


def click(qtbot, canvas, row: float, col: float, button=None) -> None:
    """A mouse click on plane pixel ``(row, col)`` of a canvas."""
    from PySide6.QtCore import Qt

    qtbot.mouseClick(canvas.viewport(), button or Qt.MouseButton.LeftButton, pos=canvas.to_widget(row, col))


def drag(qtbot, canvas, points: list[tuple[float, float]], button=None) -> None:
    """Press at the first plane point, move through the others, release at the last."""
    from PySide6.QtCore import Qt
    from PySide6.QtTest import QTest

    button = button or Qt.MouseButton.LeftButton
    viewport = canvas.viewport()
    first = canvas.to_widget(*points[0])
    QTest.mousePress(viewport, button, Qt.KeyboardModifier.NoModifier, first)
    for p in points[1:]:
        QTest.mouseMove(viewport, canvas.to_widget(*p))
        qtbot.wait(5)
    QTest.mouseRelease(viewport, button, Qt.KeyboardModifier.NoModifier, canvas.to_widget(*points[-1]))


def key(qtbot, window, key_code, modifier=None) -> None:
    """A key press as the window's user makes it (shortcuts go through the window)."""
    from PySide6.QtCore import Qt

    qtbot.keyClick(window.views.main, key_code, modifier or Qt.KeyboardModifier.NoModifier)


def live_mask(session) -> np.ndarray:
    """The live front's inside (pixel centres), from its snapshot."""
    snap = session.live.snapshot
    shape = session.volume.shape[1:]
    return np.unpackbits(snap.inside_bits, count=int(np.prod(shape))).astype(bool).reshape(shape)



gui = pytest.mark.gui
