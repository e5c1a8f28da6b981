"""Help ▸ About: version, the caution, and the licences of Isotide and what it is built on."""

from __future__ import annotations

import platform
from importlib import metadata

from PySide6 import __version__ as pyside_version
from PySide6.QtCore import Qt, qVersion
from PySide6.QtWidgets import QDialog, QDialogButtonBox, QLabel, QMessageBox, QTextBrowser, QVBoxLayout, QWidget

from engine import __version__

__all__ = ["CAUTION", "AboutDialog", "show_caution", "licence_lines"]

CAUTION = ("Isotide is not a medical device. Every outline it produces must be reviewed by qualified people "
           "before any use. Local regulations and licensed practice govern clinical use.")

#: Distributions Isotide runs on, as installed.
_PARTS = ("isotide", "PySide6-Essentials", "shiboken6", "pyqtgraph", "numpy", "scipy", "scikit-image", "pydicom",
          "nibabel", "highdicom", "jsonschema", "tifffile", "pillow", "threadpoolctl")


def _licence(dist: metadata.Distribution) -> str:
    meta = dist.metadata
    text = meta.get("License-Expression") or ""
    if not text:
        classifiers = [c.split(" :: ")[-1] for c in meta.get_all("Classifier") or [] if c.startswith("License ::")]
        text = ", ".join(classifiers)
    if not text:
        text = (meta.get("License") or "").strip().splitlines()[0] if meta.get("License") else ""
    return text[:80] or "see the package"


def licence_lines() -> list[tuple[str, str, str]]:
    """``(name, version, licence)`` of each part, as its installed package declares them."""
    out = []
    for name in _PARTS:
        try:
            dist = metadata.distribution(name)
        except metadata.PackageNotFoundError:
            continue
        out.append((dist.metadata.get("Name", name), dist.version, _licence(dist)))
    return out


class AboutDialog(QDialog):
    """The About box."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("About Isotide")
        self.resize(560, 520)
        head = QLabel(f"<h2>Isotide {__version__}</h2>"
                      "<p>Outline structures on medical image slices with a live level-set front "
                      "(RBF-FD on a narrow band, Newton closest-point reinitialisation, sub-pixel outlines).</p>"
                      f"<p><b>Caution.</b> {CAUTION}</p>")
        head.setWordWrap(True)
        head.setTextFormat(Qt.TextFormat.RichText)
        rows = "".join(f"<tr><td>{n}</td><td>{v}</td><td>{lic}</td></tr>" for n, v, lic in licence_lines())
        body = QTextBrowser()
        body.setHtml("<p><b>Licences</b> (as each installed package declares it)</p>"
                     f"<table cellspacing='6'><tr><th align='left'>Part</th><th align='left'>Version</th>"
                     f"<th align='left'>Licence</th></tr>{rows}</table>"
                     f"<p>Qt {qVersion()} through PySide6 {pyside_version}; Python {platform.python_version()}.</p>")
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Close)
        buttons.rejected.connect(self.reject)
        buttons.accepted.connect(self.accept)
        layout = QVBoxLayout(self)
        layout.addWidget(head)
        layout.addWidget(body, 1)
        layout.addWidget(buttons)


def show_caution(parent: QWidget | None) -> None:
    """The caution, shown once at first start."""
    box = QMessageBox(QMessageBox.Icon.Information, "Isotide", CAUTION, QMessageBox.StandardButton.Ok, parent)
    box.setInformativeText("This note is also in Help ▸ About.")
    box.exec()
