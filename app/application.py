"""Starting the window: the Qt application, its look, the first-start caution, recovery, then a study or the demo."""

from __future__ import annotations

import gc
import os
import sys
from pathlib import Path

os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")

import pyqtgraph as pg  # noqa: E402
from PySide6.QtCore import QSettings, QTimer  # noqa: E402
from PySide6.QtGui import QColor, QGuiApplication, QIcon, QPalette  # noqa: E402
from PySide6.QtWidgets import QApplication  # noqa: E402

from engine import __version__  # noqa: E402

__all__ = ["make_application", "run_window", "settle_memory", "ICON"]

ICON = Path(__file__).resolve().parents[1] / "assets" / "isotide.svg"


def _dark_palette() -> QPalette:
    p = QPalette()
    base, window, text = QColor(30, 32, 36), QColor(44, 47, 52), QColor(225, 225, 225)
    for role, colour in ((QPalette.ColorRole.Window, window), (QPalette.ColorRole.WindowText, text),
                         (QPalette.ColorRole.Base, base), (QPalette.ColorRole.AlternateBase, window),
                         (QPalette.ColorRole.ToolTipBase, QColor(250, 250, 220)),
                         (QPalette.ColorRole.ToolTipText, QColor(20, 20, 20)), (QPalette.ColorRole.Text, text),
                         (QPalette.ColorRole.Button, window), (QPalette.ColorRole.ButtonText, text),
                         (QPalette.ColorRole.Highlight, QColor(0, 114, 178)),
                         (QPalette.ColorRole.HighlightedText, QColor(255, 255, 255)),
                         (QPalette.ColorRole.Link, QColor(86, 180, 233)),
                         (QPalette.ColorRole.PlaceholderText, QColor(150, 150, 150))):
        p.setColor(role, colour)
    for role in (QPalette.ColorRole.WindowText, QPalette.ColorRole.Text, QPalette.ColorRole.ButtonText):
        p.setColor(QPalette.ColorGroup.Disabled, role, QColor(120, 120, 120))
    return p


def make_application(argv: list[str] | None = None) -> QApplication:
    """The QApplication (made once), named so settings and recovery files have a home."""
    app = QApplication.instance()
    if app is None:
        app = QApplication(list(argv or [sys.argv[0]]))
    QApplication.setOrganizationName("Isotide")
    QApplication.setApplicationName("Isotide")
    QApplication.setApplicationVersion(__version__)
    app.setStyle("Fusion")
    app.setPalette(_dark_palette())
    if ICON.is_file():
        app.setWindowIcon(QIcon(str(ICON)))
    pg.setConfigOptions(imageAxisOrder="row-major", antialias=True)
    single_blas_thread()
    return app


def single_blas_thread() -> None:
    """One BLAS thread for the window's process, for as long as it runs.

    The engine's dense products are small (a band's stencils, thousands of
    3 × 3 systems): a second BLAS thread saves nothing on them and then
    spins waiting for work on the core the GUI thread draws with (about a
    tenth of a core while a front evolves).
    """
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=1, user_api="blas")


def settle_memory() -> None:
    """Move everything made so far (modules, the window) out of the garbage collector's way.

    A full collection walks every tracked object while holding the
    interpreter, which stalled the GUI for ~60 ms during a run; objects made
    at start-up live as long as the program, so they are frozen
    (:func:`gc.freeze`) and later full collections skip them.
    """
    gc.collect()
    gc.freeze()


def run_window(path: str | None = None, *, series: str | None = None, demo: bool = False) -> int:
    """Open the window (on ``path``, or on the demo) and run until it closes; returns the exit code."""
    from app.about import show_caution
    from app.demo import DemoScript
    from app.main_window import MainWindow

    app = make_application()
    settings = QSettings()
    window = MainWindow(settings=settings)
    screen = QGuiApplication.primaryScreen()
    if settings.value("window/geometry") is not None:
        window.restoreGeometry(settings.value("window/geometry"))
    elif screen is not None:
        area = screen.availableGeometry()
        window.setGeometry(area.adjusted(0, 0, -int(area.width() * 0.04), -int(area.height() * 0.05)))
    window.show()
    settle_memory()

    def start() -> None:
        if not settings.value("caution_shown", False, type=bool):
            show_caution(window)
            settings.setValue("caution_shown", True)
        if window.files.offer_recovery():
            return
        if demo:
            window.demo = DemoScript(window)
            window.demo.start()
        elif path:
            window.open_path(path, series=series)

    QTimer.singleShot(0, start)
    return int(app.exec())
