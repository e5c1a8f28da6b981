"""The window's file work: open, save, save as, working sessions, recent files, recovery.

Saving runs in the case's worker thread after every change already asked
for, through ``Session.save`` (mask, label table, provenance sidecar and,
when asked, a DICOM SEG; all or nothing). A result reopened with File ▸ Open
result saves back to where it came from.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

from PySide6.QtWidgets import QFileDialog, QMessageBox

from app.autosave import forget, orphaned
from app.cases_dock import case_name
from app.study_io import Opened, ask_save_changes, result_prefix
from engine.io.errors import ReviewedResultError
from engine.io.writer import check_replaceable
from engine.session import Session
from engine.session.planes import auto_window
from engine.session.working import SUFFIX

if TYPE_CHECKING:
    from app.main_window import MainWindow

__all__ = ["WindowFiles"]

_STUDY_FILTER = ("Studies and results (*.dcm *.DCM *.nii *.nii.gz *.png *.tif *.tiff *.npy *_dseg.json *.tide);;"
                 "DICOM (*.dcm *.DCM);;NIfTI (*.nii *.nii.gz);;Pictures (*.png *.tif *.tiff *.npy);;"
                 "Saved results (*_dseg.json);;Working sessions (*.tide);;All files (*)")
_RECENT = 10


def _local_time(iso: str) -> str:
    """An ISO 8601 UTC time as local date and time (the text itself when it is not one)."""
    from datetime import datetime

    try:
        return datetime.fromisoformat(iso.replace("Z", "+00:00")).astimezone().strftime("%Y-%m-%d %H:%M:%S")
    except ValueError:
        return iso


class WindowFiles:
    """Open, save and recover for one :class:`~app.main_window.MainWindow`."""

    def __init__(self, window: "MainWindow") -> None:
        self.w = window
        self.result: str | None = None  # DIR/NAME the case saves to
        self.new_version = False  # the user chose to start a new version of a reviewed result (no second question)
        self.study_path = ""
        self._recovered: Path | None = None
        self._after_save: list = []
        a = window.actions
        a["open_file"].triggered.connect(self.ask_open_file)
        a["open_folder"].triggered.connect(self.ask_open_folder)
        a["open_result"].triggered.connect(self.ask_open_result)
        a["save"].triggered.connect(lambda: self.save())
        a["save_as"].triggered.connect(lambda: self.save(ask=True))
        a["save_working"].triggered.connect(self.ask_save_working)
        a["quit"].triggered.connect(window.close)
        a["about"].triggered.connect(self.about)
        window.opener.opened.connect(self.show_opened)
        self.fill_recent()

    # ------------------------------------------------------------------ open
    def ask_open_file(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self.w, "Open file", self._last_folder(), _STUDY_FILTER)
        if path:
            self.open_path(path)

    def ask_open_folder(self) -> None:
        path = QFileDialog.getExistingDirectory(self.w, "Open folder", self._last_folder())
        if path:
            self.open_path(path)

    def ask_open_result(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self.w, "Open result", self._last_folder(),
                                              "Saved results (*_dseg.json);;All files (*)")
        if path:
            self.open_path(path)

    def _last_folder(self) -> str:
        recent = self.recent()
        return str(Path(recent[0]).parent) if recent else str(Path.home())

    def open_path(self, path: str, *, series: str | None = None) -> bool:
        if self.w.opener.busy:
            self.w.statusBar().showMessage("Still reading the last study", 4000)
            return False
        session = self.w.controller.session
        study = session.volume.path if session is not None and session.volume.path else None
        if not self.may_close(then=lambda: self.w.opener.open(str(path), series=series, study=study)):
            return False
        return self.w.opener.open(str(path), series=series, study=study)

    def show_opened(self, opened: Opened) -> None:
        w = self.w
        w.controller.set_session(opened.session)
        self.study_path = opened.session.volume.path
        self.result = None
        self.new_version = False
        if opened.kind == "result":
            self.result = result_prefix(opened.path)
        meta = opened.meta or {}
        if opened.kind == "working":
            self.result = meta.get("result") or None
            if self._recovered is not None:
                forget(self._recovered)
                self._recovered = None
                w.history.setEmptyLabel("Recovered work")
        else:
            w.history.setEmptyLabel("Study opened")
        if isinstance(meta.get("slice"), int):
            w.views.set_slice(meta["slice"])
        elif opened.session.labels:
            first = opened.session.outlines()
            if first:
                w.views.set_slice(first[0].slice)
        w.cases.set_series(opened.path, opened.series, opened.series_key)
        if opened.kind != "working":
            self.add_recent(opened.path)
        w.statusBar().showMessage(f"Opened {opened.path}", 5000)
        w.activateWindow()  # back from the progress dialog: keys go to the Slice view
        w.views.main.setFocus()

    def default_window(self, session: Session) -> tuple[float, float]:
        """The file's first preset, else one spanning the intensities (0.5 to 99.5 percentile)."""
        if session.volume.presets:
            c, width = session.volume.presets[0]
            return float(c), float(width)
        return auto_window(session.volume.array)

    # ---------------------------------------------------------------- recent
    def recent(self) -> list[str]:
        value = self.w.settings.value("recent", [])
        if isinstance(value, str):
            value = [value]
        return [str(v) for v in (value or []) if v]

    def add_recent(self, path: str) -> None:
        items = [path] + [p for p in self.recent() if p != path]
        self.w.settings.setValue("recent", items[:_RECENT])
        self.fill_recent()

    def fill_recent(self) -> None:
        menu = self.w.menus["recent"]
        menu.clear()
        items = self.recent()
        for path in items:
            action = menu.addAction(path)
            action.triggered.connect(lambda _=False, p=path: self.open_path(p))
        menu.setEnabled(bool(items))

    # ------------------------------------------------------------------ save
    def save(self, *, ask: bool = False, then=None) -> bool:
        """Save the committed outlines (asks for a name the first time or with ``ask``)."""
        w = self.w
        session = w.controller.session
        if session is None:
            return False
        prefix = self.result
        if prefix is None or ask:
            suggestion = str(Path(self._last_folder()) / f"{case_name(session)}_dseg.nii.gz")
            chosen, _ = QFileDialog.getSaveFileName(w, "Save outlines", suggestion,
                                                    "Labelled mask (*_dseg.nii.gz)")
            if not chosen:
                return False
            prefix = result_prefix(chosen)
        self.save_to(prefix, then=then)
        return True

    def save_to(self, prefix: str, *, then=None) -> None:
        """Save to ``DIR/NAME`` through the worker; ``then()`` runs once it is saved."""
        w = self.w
        seg = w.actions["dicom_seg"].isChecked() and w.controller.session.volume.kind == "dicom"
        new_version = self.new_version and prefix == self.result
        try:
            if not new_version:
                check_replaceable(prefix)
        except ReviewedResultError as exc:
            answer = QMessageBox.question(
                w, "Result under review",
                f"{Path(prefix).name} is {exc.state or 'unreadable'}: it carries a review. Save a new version that "
                "keeps the earlier review history? (Cancel, then Save as…, keeps it under another name.)",
                QMessageBox.StandardButton.Save | QMessageBox.StandardButton.Cancel)
            if answer != QMessageBox.StandardButton.Save:
                return
            new_version = True

        def done(outcome) -> None:
            if outcome.error:
                return  # shown by the window
            self.result = prefix
            self.new_version = False
            w.autosaver.discard()
            w.setWindowModified(False)
            w.statusBar().showMessage(f"Saved {Path(outcome.result['json']).name} and its mask", 6000)
            if then is not None:
                then()

        w.controller.submit("Save", lambda s: s.save(prefix, dicom_seg=seg, new_version=new_version), on_done=done)

    def ask_save_working(self) -> None:
        w = self.w
        session = w.controller.session
        if session is None:
            return
        suggestion = str(Path(self._last_folder()) / f"{case_name(session)}{SUFFIX}")
        path, _ = QFileDialog.getSaveFileName(w, "Save working session", suggestion, f"Working session (*{SUFFIX})")
        if not path:
            return
        if not path.endswith(SUFFIX):
            path += SUFFIX
        meta = self.autosave_meta()
        from engine.session.working import save_working

        w.controller.submit("Save working session", lambda s: save_working(s, path, meta=meta),
                            on_done=lambda o: None if o.error else w.statusBar().showMessage(f"Saved {path}", 6000))

    def autosave_meta(self) -> dict[str, Any]:
        """What a working-session file keeps about the window: slice, label and where results go."""
        w = self.w
        session = w.controller.session
        return {"case": case_name(session) if session else "", "slice": int(w.views.slice_index),
                "label": w.labels.current, "result": self.result or ""}

    def may_close(self, then=None) -> bool:
        """True when the case in view can go now (nothing unsaved, or the user chose Discard).

        With Save the outlines are saved first (a grown front is committed)
        and ``then()`` runs once they are; False is returned meanwhile.
        """
        w = self.w
        session = w.controller.session
        if session is None or not session.modified:
            return True
        live = session.live
        if not session.outlines() and (live is None or live.snapshot is None):
            w.autosaver.discard()
            return True
        answer = ask_save_changes(w, case_name(session))
        if answer == QMessageBox.StandardButton.Cancel:
            return False
        if answer == QMessageBox.StandardButton.Discard:
            w.autosaver.discard()
            return True
        if live is not None and live.snapshot is not None:
            w.controller.submit("Commit outline", lambda s: s.commit())
        self.save(then=then)
        return False

    # -------------------------------------------------------------- recovery
    def offer_recovery(self) -> bool:
        """Offer the newest recovery file left by a crashed window; True when recovery started."""
        found = orphaned(self.w.autosaver.folder)
        if not found:
            return False
        s = found[0]
        labels = ", ".join(s.labels) or "no labels"
        box = QMessageBox(QMessageBox.Icon.Question, "Recover unsaved work",
                          f"Isotide closed without saving the outlines of {s.meta.get('case') or s.study}.\n\n"
                          f"Autosaved {_local_time(s.saved)} — {labels}; {s.outlines} committed outline"
                          f"{'s' if s.outlines != 1 else ''}{', a front in progress' if s.live else ''}.",
                          parent=self.w)
        recover = box.addButton("Recover", QMessageBox.ButtonRole.AcceptRole)
        discard = box.addButton("Discard", QMessageBox.ButtonRole.DestructiveRole)
        box.addButton("Later", QMessageBox.ButtonRole.RejectRole)
        box.exec()
        if box.clickedButton() is recover:
            return self.recover(s.path)
        if box.clickedButton() is discard:
            forget(s.path)
        return False

    def recover(self, path: Path) -> bool:
        """Open a recovery file; it is deleted once its work is in view again."""
        self._recovered = Path(path)
        return self.w.opener.open(str(path))

    def about(self) -> None:
        from app.about import AboutDialog

        AboutDialog(self.w).exec()
