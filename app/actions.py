"""The window's actions (menu entries, toolbar buttons and their shortcuts), made in one place.

Each action is made here with its text, shortcut and tip; the window
connects them to what they do. Shortcuts follow the platform where one
exists (open, save, undo, redo, quit), otherwise a single key a technician
can keep a finger on: Space evolves or pauses, PageUp/PageDown change
slice, Shift+PageUp/PageDown carry the outline, Return commits it.
"""

from __future__ import annotations

from PySide6.QtGui import QAction, QActionGroup, QKeySequence
from PySide6.QtWidgets import QMainWindow, QMenu

from app.tools import TOOLS

__all__ = ["make_actions", "make_menus"]

_SPECS = {
    # key: (text, shortcut(s), tip)
    "open_file": ("Open file…", QKeySequence.StandardKey.Open, "Open a DICOM, NIfTI or picture file, a saved result "
                  "or a working session"),
    "open_folder": ("Open folder…", "Ctrl+Shift+O", "Open a folder of DICOM files"),
    "open_result": ("Open result…", "", "Reopen a saved result over its study to go on working"),
    "save": ("Save", QKeySequence.StandardKey.Save, "Save the committed outlines: mask, label table and "
             "provenance sidecar"),
    "save_as": ("Save as…", QKeySequence.StandardKey.SaveAs, "Save the outlines under a new name"),
    "dicom_seg": ("Also write DICOM SEG", "", "Save a DICOM Segmentation beside the mask (DICOM studies only)"),
    "save_working": ("Save working session…", "", "Keep the case as it is, with its live front, to go on later"),
    "review_summary": ("Write review summary…", "", "An HTML summary of the saved result and its review, with a "
                       "picture of every outlined slice"),
    "quit": ("Quit", QKeySequence.StandardKey.Quit, "Close Isotide"),
    "undo": ("Undo", QKeySequence.StandardKey.Undo, "Undo the last change"),
    "redo": ("Redo", ["Ctrl+Shift+Z", "Ctrl+Y"], "Redo the change undone last"),
    "evolve": ("Evolve", "Space", "Evolve the front until it converges (Space: Evolve / Pause)"),
    "step": ("Step", ".", "Evolve the front a fixed number of steps"),
    "clear_front": ("Clear front", "Ctrl+Delete", "Throw the front away, back to its seeds"),
    "commit": ("Commit outline", ["Return", "Enter"], "Accept the front as the label's outline on this slice"),
    "carry_next": ("Carry to next slice", "Shift+PgDown", "Start the next slice's front from this outline"),
    "carry_previous": ("Carry to previous slice", "Shift+PgUp", "Start the previous slice's front from this "
                       "outline"),
    "margin": ("Margin", "M", "Grow or shrink the outline by the margin set in the Front panel"),
    "compare": ("Compare board…", "Ctrl+B", "Run 2–4 variants of this slice's front side by side with different "
                "settings"),
    "clear_pins": ("Clear pins", "", "Release every pin of the front"),
    "remove_seed": ("Remove seed", "Delete", "Remove the seed under the mouse (else the last one)"),
    "next_slice": ("Next slice", "PgDown", "Show the next slice"),
    "previous_slice": ("Previous slice", "PgUp", "Show the previous slice"),
    "fit": ("Fit to window", "Ctrl+0", "Show the whole slice"),
    "zoom_in": ("Zoom in", QKeySequence.StandardKey.ZoomIn, "Enlarge the Slice view (also Ctrl+wheel)"),
    "zoom_out": ("Zoom out", QKeySequence.StandardKey.ZoomOut, "Shrink the Slice view (also Ctrl+wheel)"),
    "three_views": ("Three views", "", "Show the planes of fixed row and column beside the Slice view"),
    "curvature": ("Curvature colours", "",
                  "Colour outlines by their curvature (1/mm, averaged along the outline over 1 mm)"),
    "brush_smaller": ("Smaller brush", "[", "Brush radius − 0.5 mm"),
    "brush_larger": ("Larger brush", "]", "Brush radius + 0.5 mm"),
    "about": ("About Isotide", "", "Version, caution and licences"),
}


def make_actions(window: QMainWindow) -> dict[str, QAction]:
    """Every action of the window (tools included, as an exclusive group), keyed by name."""
    actions: dict[str, QAction] = {}
    for key, (text, shortcut, tip) in _SPECS.items():
        action = QAction(text, window)
        if isinstance(shortcut, list):
            action.setShortcuts([QKeySequence(s) for s in shortcut])
        elif shortcut:
            action.setShortcut(QKeySequence(shortcut))
        action.setToolTip(f"{tip} ({action.shortcut().toString()})" if shortcut else tip)
        action.setStatusTip(tip)
        actions[key] = action
    for key in ("dicom_seg", "three_views", "curvature"):
        actions[key].setCheckable(True)
    actions["three_views"].setChecked(True)
    group = QActionGroup(window)
    group.setExclusive(True)
    for key, (name, shortcut, tip) in TOOLS.items():
        action = QAction(name, window)
        action.setCheckable(True)
        action.setShortcut(QKeySequence(shortcut))
        action.setToolTip(f"{name}: {tip} ({shortcut})")
        action.setStatusTip(tip)
        action.setData(key)
        group.addAction(action)
        actions[f"tool_{key}"] = action
    actions["tool_seed"].setChecked(True)
    for action in actions.values():
        window.addAction(action)  # shortcuts work wherever the focus is in the window
    return actions


def make_menus(window: QMainWindow, actions: dict[str, QAction]) -> dict[str, QMenu]:
    """File, Edit, View, Front, Tools and Help menus."""
    bar = window.menuBar()
    menus = {}
    file_menu = bar.addMenu("&File")
    for key in ("open_file", "open_folder", "open_result"):
        file_menu.addAction(actions[key])
    menus["recent"] = file_menu.addMenu("Open recent")
    file_menu.addSeparator()
    for key in ("save", "save_as", "dicom_seg", "save_working", "review_summary"):
        file_menu.addAction(actions[key])
    file_menu.addSeparator()
    file_menu.addAction(actions["quit"])
    edit = bar.addMenu("&Edit")
    for key in ("undo", "redo"):
        edit.addAction(actions[key])
    view = bar.addMenu("&View")
    for key in ("next_slice", "previous_slice", "zoom_in", "zoom_out", "fit", "three_views", "curvature"):
        view.addAction(actions[key])
    menus["window"] = view.addMenu("Window/level")
    menus["docks"] = view.addMenu("Panels")
    front = bar.addMenu("F&ront")
    for key in ("evolve", "step", "clear_front", "commit", None, "carry_previous", "carry_next", None, "margin",
                "clear_pins", "remove_seed", None, "compare"):
        front.addSeparator() if key is None else front.addAction(actions[key])
    tools = bar.addMenu("&Tools")
    for key in TOOLS:
        tools.addAction(actions[f"tool_{key}"])
    tools.addSeparator()
    tools.addAction(actions["brush_smaller"])
    tools.addAction(actions["brush_larger"])
    help_menu = bar.addMenu("&Help")
    help_menu.addAction(actions["about"])
    menus.update(file=file_menu, edit=edit, view=view, front=front, tools=tools, help=help_menu)
    return menus
