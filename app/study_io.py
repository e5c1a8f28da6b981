"""Opening studies, saved results and working sessions without blocking the window.

:class:`StudyOpener` reads in a ``QThread`` (the loader reports progress to a
progress dialog with a Cancel button), asks which series to open when a
folder holds several, and reports a bad file with the engine's one-line
message in an error dialog: the window stays as it was. What it opens is
told by the path: a ``.tide`` working session, a saved result
(``NAME_dseg.json`` / ``NAME_dseg.nii.gz``) over its study, or a study
(DICOM file or folder, NIfTI, PNG/TIFF/NPY).
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from PySide6.QtCore import QObject, Qt, QThread, Signal, Slot
from PySide6.QtWidgets import QInputDialog, QMessageBox, QProgressDialog, QWidget

from engine.io import SeriesInfo, list_series
from engine.session import Session, StudyNotFoundError, open_result
from engine.session.working import SUFFIX, open_working

__all__ = ["Opened", "StudyOpener", "kind_of", "result_prefix"]


class _Cancelled(Exception):
    """The user cancelled a load."""


@dataclass
class Opened:
    """A session read from ``path`` (``kind``: study, result or working) and what came with it."""

    session: Session
    path: str
    kind: str
    series: list[SeriesInfo] = field(default_factory=list)
    series_key: str | None = None
    meta: dict[str, Any] = field(default_factory=dict)


def kind_of(path: str) -> str:
    """``"working"``, ``"result"`` or ``"study"``, from the path's name."""
    name = Path(path).name.lower()
    if name.endswith(SUFFIX):
        return "working"
    if name.endswith("_dseg.json") or name.endswith("_dseg.nii.gz") or name.endswith("_dseg.tsv"):
        return "result"
    return "study"


def result_prefix(path: str) -> str:
    """``DIR/NAME`` of a result file name (``NAME_dseg.nii.gz`` etc.), or of a plain name."""
    p = Path(path)
    for suffix in ("_dseg.nii.gz", "_dseg.json", "_dseg.tsv", ".seg.dcm", ".nii.gz", ".json"):
        if p.name.endswith(suffix):
            return str(p.with_name(p.name[: -len(suffix)]))
    return str(p)


class _LoadJob(QObject):
    progress = Signal(int, int)
    finished = Signal(object)  # Opened
    failed = Signal(str)
    choose = Signal(str, list)  # path, several series

    def __init__(self, path: str, series: str | None, cancel: threading.Event, study: str | None = None) -> None:
        super().__init__()
        self.path, self.series, self.cancel, self.study = path, series, cancel, study

    def _progress(self, done: int, total: int) -> None:
        if self.cancel.is_set():
            raise _Cancelled()
        self.progress.emit(int(done), int(total))

    @Slot()
    def run(self) -> None:
        try:
            kind = kind_of(self.path)
            if kind == "working":
                session, meta = open_working(self.path, progress=self._progress)
                self.finished.emit(Opened(session, self.path, kind, meta=meta))
                return
            if kind == "result":
                try:
                    session = open_result(self.path, progress=self._progress)
                except StudyNotFoundError:
                    if not self.study:
                        raise
                    # the record keeps no usable path to its study: try the study in view
                    session = open_result(self.path, study=self.study, progress=self._progress)
                self.finished.emit(Opened(session, self.path, kind))
                return
            found: list[SeriesInfo] = []
            if Path(self.path).is_dir():
                found = list_series(self.path)
                if len(found) > 1 and self.series is None:
                    self.choose.emit(self.path, found)
                    return
            session = Session.open(self.path, series=self.series, progress=self._progress)
            key = self.series or (found[0].key if found else None)
            self.finished.emit(Opened(session, self.path, kind, found, key))
        except _Cancelled:
            self.failed.emit("")
        except (ValueError, OSError) as exc:  # LoadError is a ValueError: one line naming the file
            self.failed.emit(str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__)
        except Exception as exc:  # noqa: BLE001 - shown to the user; the window stays usable
            self.failed.emit(f"{self.path}: cannot be read ({type(exc).__name__}: {exc})")


class StudyOpener(QObject):
    """Opens a path in a background thread with a progress dialog (see the module docstring)."""

    opened = Signal(object)  # Opened
    failedToOpen = Signal(str, str)  # path, message

    def __init__(self, parent: QWidget) -> None:
        super().__init__(parent)
        self.parent_widget = parent
        self._thread: QThread | None = None
        self._job: _LoadJob | None = None
        self._dialog: QProgressDialog | None = None
        self._cancel = threading.Event()
        self._path = ""
        self.quiet = False  # True: no dialogs (errors still reported through failedToOpen)

    @property
    def busy(self) -> bool:
        return self._thread is not None

    def open(self, path: str, *, series: str | None = None, study: str | None = None) -> bool:
        """Start reading ``path``; False when another read is still running.

        ``study``: the study in view, for a result whose record keeps no
        usable path to its own study.
        """
        if self.busy:
            return False
        self._cancel = threading.Event()
        self._thread = QThread()
        self._thread.setObjectName("isotide-loader")
        self._job = _LoadJob(path, series, self._cancel, study)
        self._job.moveToThread(self._thread)
        self._thread.started.connect(self._job.run)
        self._job.progress.connect(self._progress)
        self._job.finished.connect(self._finished)
        self._path = path
        self._job.failed.connect(self._failed)  # a bound method: runs in the GUI thread
        self._job.choose.connect(self._choose)
        if not self.quiet:
            dialog = QProgressDialog(f"Reading {Path(path).name}…", "Cancel", 0, 0, self.parent_widget)
            dialog.setWindowTitle("Isotide")
            dialog.setWindowModality(Qt.WindowModality.WindowModal)
            dialog.setMinimumDuration(300)
            dialog.canceled.connect(self._cancel.set)
            self._dialog = dialog
        self._thread.start()
        return True

    def _progress(self, done: int, total: int) -> None:
        if self._dialog is not None:
            self._dialog.setMaximum(max(total, 1))
            self._dialog.setValue(min(done, max(total, 1)))

    def _done(self) -> None:
        if self._dialog is not None:
            self._dialog.reset()
            self._dialog.deleteLater()
            self._dialog = None
        thread = self._thread
        self._thread, self._job = None, None
        if thread is not None:
            thread.quit()
            thread.wait(5000)

    def _finished(self, opened: Opened) -> None:
        self._done()
        self.opened.emit(opened)

    def _failed(self, message: str) -> None:
        path = self._path
        self._done()
        if not message:
            return  # cancelled
        self.failedToOpen.emit(path, message)
        if not self.quiet:
            QMessageBox.critical(self.parent_widget, "Cannot open", message)

    def _choose(self, path: str, found: list[SeriesInfo]) -> None:
        self._done()
        choice = self.choose_series(path, found)
        if choice is not None:
            self.open(path, series=choice)

    def choose_series(self, path: str, found: list[SeriesInfo]) -> str | None:
        """Ask which series of a folder to open (None: cancelled)."""
        labels = [f"{i.modality} {i.description or 'series'} — {i.slices} × {i.rows} × {i.cols}, {i.orientation}"
                  + (f" ({i.problems[0]})" if i.problems else "") for i in found]
        text, ok = QInputDialog.getItem(self.parent_widget, "Choose a series",
                                        f"{Path(path).name} holds {len(found)} series. Open:", labels, 0, False)
        return found[labels.index(text)].key if ok and text in labels else None

    def cancel(self, *, wait_ms: int = 5000) -> None:
        """Stop a read in progress (used when the window closes)."""
        self._cancel.set()
        if self._thread is not None:
            self._thread.quit()
            self._thread.wait(wait_ms)
            self._thread = None


def ask_save_changes(parent: QWidget, name: str) -> QMessageBox.StandardButton:
    """Save / Discard / Cancel for unsaved outlines of ``name``."""
    return QMessageBox.question(
        parent, "Unsaved outlines", f"Save the outlines of {name} before closing it?",
        QMessageBox.StandardButton.Save | QMessageBox.StandardButton.Discard | QMessageBox.StandardButton.Cancel,
        QMessageBox.StandardButton.Save)

