"""The Isotide window (PySide6 + pyqtgraph): a thin shell over :class:`engine.session.Session`.

Widgets turn gestures into Session calls; one worker thread per case runs
those calls and evolves the case's live front, sending immutable frames back;
the Qt undo stack mirrors the Session's. No numerics live here. The
command-line entry point is :mod:`app.cli` (it imports Qt only when a window
is opened).
"""
