"""``isotide demo`` in the window: the invented abdomen study, seeds on two structures, the front evolving.

The window opens ``sample_cases/abdomen_mr`` (an invented phantom, no
patient) on the slice and seeds the headless demo uses
(:data:`engine.commands.demo.STRUCTURES`); the first structure's front
evolves at once, and when it has converged the second is seeded and evolves
(placing that seed commits the first). Anything the user does in between
stops the script: from then on the window is theirs. Without the sample
study (an installed copy without ``sample_cases``) the demo slice is
rendered from :mod:`engine.phantoms.mr` instead.
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QObject, QThread, Signal, Slot

from app.study_io import Opened
from engine.commands.demo import DEMO_SLICE, STRUCTURES
from engine.session import Session

__all__ = ["DemoScript", "sample_study"]


def sample_study() -> Path | None:
    """The abdomen sample study's DICOM folder next to the package, when it is there."""
    folder = Path(__file__).resolve().parents[1] / "sample_cases" / "abdomen_mr" / "dicom"
    return folder if folder.is_dir() else None


class _Render(QObject):
    finished = Signal(object)

    @Slot()
    def run(self) -> None:
        from engine.commands.demo import demo_phantom

        phantom = demo_phantom()
        session = Session.from_array(phantom.image[0], spacing=phantom.spacing[1:])
        self.finished.emit(Opened(session, "invented abdomen slice", "study"))


class DemoScript(QObject):
    """Runs the demo on a window (see the module docstring)."""

    def __init__(self, window) -> None:
        super().__init__(window)
        self.w = window
        self.stage = "opening"
        self.slice = DEMO_SLICE
        self._thread: QThread | None = None

    def start(self) -> None:
        self.w.opener.opened.connect(self._opened)
        path = sample_study()
        if path is not None:
            self.w.open_path(str(path))
            return
        self.slice = 0
        self._thread = QThread(self)
        self._render = _Render()
        self._render.moveToThread(self._thread)
        self._thread.started.connect(self._render.run)
        self._render.finished.connect(self._rendered)
        self.w.statusBar().showMessage("Rendering the invented abdomen slice…")
        self._thread.start()

    def _rendered(self, opened: Opened) -> None:
        self._thread.quit()
        self._thread.wait(5000)
        self.w.show_opened(opened)
        self._opened(opened)

    def _opened(self, opened: Opened) -> None:
        if self.stage != "opening":
            return
        self.w.opener.opened.disconnect(self._opened)
        c = self.w.controller
        for s in STRUCTURES:
            c.submit("Add label", lambda sess, s=s: sess.add_label(s.name, s.color))
        self.w.views.set_slice(self.slice)
        self.stage = "first"
        c.runFinished.connect(self._run_finished)
        self._seed(0)

    def _seed(self, i: int) -> None:
        row, col, radius = STRUCTURES[i].seed
        self.w.labels.select(i + 1)
        self.w.controller.seed(row, col, radius, label=i + 1, slice_index=self.slice, evolve=True)

    def _run_finished(self, frame) -> None:
        c = self.w.controller
        if self.stage == "first" and frame.converged and frame.label == 1 and c.idle:
            self.stage = "second"
            self._seed(1)
            return
        self.stage = "done"
        c.runFinished.disconnect(self._run_finished)
