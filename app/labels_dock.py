"""The **Labels** dock: the structures being outlined — colour, name, shown, locked, slices with an outline.

The selected row is the current label: the one every tool acts on. Changes
(add, rename, colour, lock, delete) are Session commands run by the worker;
showing or hiding is a view setting.
"""

from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QColor, QIcon, QPixmap
from PySide6.QtWidgets import (
    QAbstractItemView,
    QColorDialog,
    QHBoxLayout,
    QHeaderView,
    QMessageBox,
    QPushButton,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from app.controller import SessionController
from engine.io import OKABE_ITO

__all__ = ["LabelsPanel"]

COLOUR, NAME, SHOW, LOCK, SLICES = range(5)


def swatch(colour: str, size: int = 14) -> QIcon:
    pix = QPixmap(size, size)
    pix.fill(QColor(colour))
    return QIcon(pix)


class LabelsPanel(QWidget):
    """The label table and its buttons (see the module docstring)."""

    currentChanged = Signal(object)  # label index or None
    visibilityChanged = Signal()

    def __init__(self, controller: SessionController, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.controller = controller
        self.table = QTableWidget(0, 5)
        self.table.setHorizontalHeaderLabels(["", "Name", "Show", "Lock", "Slices"])
        self.table.verticalHeader().hide()
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.table.setEditTriggers(QAbstractItemView.EditTrigger.DoubleClicked
                                   | QAbstractItemView.EditTrigger.EditKeyPressed)
        header = self.table.horizontalHeader()
        header.setSectionResizeMode(NAME, QHeaderView.ResizeMode.Stretch)
        for col in (COLOUR, SHOW, LOCK, SLICES):
            header.setSectionResizeMode(col, QHeaderView.ResizeMode.ResizeToContents)
        self.add_button = QPushButton("Add label")
        self.colour_button = QPushButton("Colour…")
        self.delete_button = QPushButton("Delete label")
        buttons = QHBoxLayout()
        for b in (self.add_button, self.colour_button, self.delete_button):
            buttons.addWidget(b)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(6, 4, 6, 4)
        layout.addWidget(self.table)
        layout.addLayout(buttons)
        self._rows: list[int] = []
        self._shown_key: object = None
        self._filling = False
        self.current: int | None = None
        self.add_button.clicked.connect(self.add_label)
        self.colour_button.clicked.connect(self.choose_colour)
        self.delete_button.clicked.connect(self.delete_label)
        self.table.itemChanged.connect(self._item_changed)
        self.table.itemSelectionChanged.connect(self._selection_changed)
        self.table.cellDoubleClicked.connect(lambda r, c: self.choose_colour() if c == COLOUR else None)
        self.refresh()

    # --------------------------------------------------------------- showing
    def refresh(self) -> None:
        """Rebuild the table when labels, outlines or visibility changed."""
        session = self.controller.session
        enabled = session is not None
        for b in (self.add_button, self.colour_button, self.delete_button):
            b.setEnabled(enabled and (b is self.add_button or self.current is not None))
        if session is None:
            self._fill([], {}, frozenset())
            return
        counts: dict[int, int] = {}
        for label, _ in session.state.outlines:
            counts[label] = counts.get(label, 0) + 1
        key = (session.labels, tuple(sorted(counts.items())), session.hidden_labels())
        if key == self._shown_key:
            return
        self._shown_key = key
        self._fill(session.labels, counts, session.hidden_labels())

    def _fill(self, labels, counts, hidden) -> None:
        self._filling = True
        try:
            self.table.setRowCount(len(labels))
            self._rows = [lab.index for lab in labels]
            for row, lab in enumerate(labels):
                colour = QTableWidgetItem(swatch(lab.colour), "")
                colour.setFlags(Qt.ItemFlag.ItemIsEnabled | Qt.ItemFlag.ItemIsSelectable)
                colour.setToolTip(f"{lab.colour} (double-click to change)")
                name = QTableWidgetItem(lab.name)
                name.setToolTip(f"Label {lab.index} in the saved mask; double-click to rename")
                show = QTableWidgetItem()
                show.setFlags(Qt.ItemFlag.ItemIsEnabled | Qt.ItemFlag.ItemIsSelectable | Qt.ItemFlag.ItemIsUserCheckable)
                show.setCheckState(Qt.CheckState.Unchecked if lab.index in hidden else Qt.CheckState.Checked)
                lock = QTableWidgetItem()
                lock.setFlags(Qt.ItemFlag.ItemIsEnabled | Qt.ItemFlag.ItemIsSelectable | Qt.ItemFlag.ItemIsUserCheckable)
                lock.setCheckState(Qt.CheckState.Checked if lab.locked else Qt.CheckState.Unchecked)
                lock.setToolTip("A locked label is a barrier no front enters, and cannot be edited")
                slices = QTableWidgetItem(str(counts.get(lab.index, 0)))
                slices.setFlags(Qt.ItemFlag.ItemIsEnabled | Qt.ItemFlag.ItemIsSelectable)
                slices.setTextAlignment(Qt.AlignmentFlag.AlignCenter)
                for col, item in ((COLOUR, colour), (NAME, name), (SHOW, show), (LOCK, lock), (SLICES, slices)):
                    self.table.setItem(row, col, item)
            if self.current in self._rows:
                self.table.selectRow(self._rows.index(self.current))
            elif self._rows:
                self.table.selectRow(len(self._rows) - 1)
            else:
                self._set_current(None)
        finally:
            self._filling = False
        self._selection_changed()

    def _selection_changed(self) -> None:
        if self._filling:
            return
        rows = {i.row() for i in self.table.selectedIndexes()}
        self._set_current(self._rows[min(rows)] if rows and min(rows) < len(self._rows) else None)

    def _set_current(self, index: int | None) -> None:
        enabled = self.controller.session is not None and index is not None
        self.colour_button.setEnabled(enabled)
        self.delete_button.setEnabled(enabled)
        if index != self.current:
            self.current = index
            self.currentChanged.emit(index)

    def select(self, index: int) -> None:
        """Make label ``index`` current."""
        if index in self._rows:
            self.table.selectRow(self._rows.index(index))
        else:
            self.current = index  # selected as soon as the table shows it
            self.currentChanged.emit(index)

    # --------------------------------------------------------------- changes
    def _item_changed(self, item: QTableWidgetItem) -> None:
        if self._filling or item.row() >= len(self._rows):
            return
        index = self._rows[item.row()]
        session = self.controller.session
        lab = session.label(index)
        if item.column() == NAME:
            name = item.text().strip()
            if name and name != lab.name:
                self.controller.submit("Rename label", lambda s: s.rename_label(index, name), resume=True)
            self._shown_key = None
        elif item.column() == SHOW:
            session.set_label_visible(index, item.checkState() == Qt.CheckState.Checked)
            self._shown_key = None
            self.visibilityChanged.emit()
        elif item.column() == LOCK:
            locked = item.checkState() == Qt.CheckState.Checked
            if locked != lab.locked:
                self.controller.submit("Lock" if locked else "Unlock",
                                       lambda s: s.set_label_locked(index, locked), resume=True)
            self._shown_key = None

    def add_label(self) -> None:
        """Add a label (next Okabe–Ito colour) and make it current."""
        def added(outcome) -> None:
            if outcome.result is not None:
                self.select(outcome.result.index)

        self.controller.submit("Add label", lambda s: s.add_label(), resume=True, on_done=added)

    def choose_colour(self) -> None:
        if self.current is None or self.controller.session is None:
            return
        index = self.current
        lab = self.controller.session.label(index)
        for i, colour in enumerate(OKABE_ITO):
            QColorDialog.setCustomColor(i, QColor(colour))
        colour = QColorDialog.getColor(QColor(lab.colour), self, f"Colour of {lab.name}")
        if colour.isValid() and colour.name().upper() != lab.colour.upper():
            hex_colour = colour.name().upper()
            self.controller.submit("Colour", lambda s: s.set_label_colour(index, hex_colour), resume=True)

    def delete_label(self) -> None:
        session = self.controller.session
        if self.current is None or session is None:
            return
        index = self.current
        lab = session.label(index)
        count = sum(1 for key in session.state.outlines if key[0] == index)
        if count:
            answer = QMessageBox.question(
                self, "Delete label",
                f"Delete {lab.name} and its outlines on {count} slice{'s' if count != 1 else ''}? "
                "Undo brings them back.")
            if answer != QMessageBox.StandardButton.Yes:
                return
        live = session.live
        self.controller.submit("Delete label", lambda s: s.remove_label(index),
                               resume=live is not None and live.label != index)
