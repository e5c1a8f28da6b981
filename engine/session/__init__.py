"""The Session: one case being outlined, driven alike by the window, the command line, a batch and scripts.

A :class:`Session` holds a study (:class:`engine.io.Volume`), its labels,
each label's committed :class:`Outline` per slice, the live front, and an
undo stack on which every change is one command. :meth:`Session.frame` gives
an immutable picture of the live front for a viewer; :meth:`Session.save`
writes the result with its provenance record; :func:`open_result` reads one
back to go on working; :mod:`engine.session.working` keeps a case being
outlined in a working-session file (``.tide``, autosave and recovery), and
:mod:`engine.session.planes` lays out a volume's three planes and cuts
outlines along them for a viewer. No Qt here.
"""

from engine.session.outline import Outline
from engine.session.record import StudyNotFoundError, label_volume, open_result, provenance_record, save_session
from engine.session.session import Session, SessionBusy
from engine.session.settings import FrontSettings
from engine.session.state import Command, Frame, Label, LiveState, SessionState
from engine.session.working import open_working, save_working

__all__ = [
    "Session",
    "SessionBusy",
    "Label",
    "Outline",
    "Frame",
    "Command",
    "FrontSettings",
    "LiveState",
    "SessionState",
    "open_result",
    "StudyNotFoundError",
    "save_session",
    "provenance_record",
    "label_volume",
    "open_working",
    "save_working",
]
