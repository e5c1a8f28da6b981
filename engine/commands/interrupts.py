"""Ctrl-C on the command line: one "interrupted" line and exit code 130, whenever it comes.

Python turns SIGINT into a ``KeyboardInterrupt`` raised wherever the main
thread happens to be. Left so, it goes wrong three ways on the command line:

- The engine's nearest-neighbour queries (``scipy.spatial.cKDTree.query``
  with ``workers=2``) run in helper threads that the main thread joins. A
  ``KeyboardInterrupt`` raised inside that join abandons the helpers while
  they still work on the tree's arrays in native code; the interpreter then
  shuts down around them: a segmentation fault (exit 139) after the
  "interrupted" line.
- Raised while an extension module runs Python code through the C API, the
  exception is caught and reported, yet CPython remembers it as unhandled
  and kills itself with SIGINT at exit (exit −2, not 130).
- Raised before the command's own handler is reached (importing numpy and
  the rest), it prints a long traceback.

So :func:`install` replaces the handler with one that only records the
request; the commands call :func:`check` at safe points (as files load,
after every step of the front, before saving), where the
``KeyboardInterrupt`` is raised from Python code the command controls. A
request is never forgotten, so it is still honoured when some library code
swallowed an exception. A second Ctrl-C does not wait for a safe point: it
prints the line and leaves at once (``os._exit``, so no interpreter shutdown
runs around busy threads); a save's final renames hold it back until they
are done (:func:`engine.io.atomic.held_signals`), and temporary files it
leaves are removed by the next save.
"""

from __future__ import annotations

import os
import signal
import sys
import threading
from types import FrameType
from typing import TextIO

__all__ = ["install", "uninstall", "check", "requested", "report", "set_prog"]

_state: dict = {"requested": 0, "previous": None, "installed": False, "prog": "isotide", "reported": False}


def _handle(signum: int, frame: FrameType | None) -> None:
    _state["requested"] += 1
    if _state["requested"] > 1:  # asked twice: leave now
        try:
            if not _state["reported"]:
                report(_state["prog"])
        finally:
            os._exit(130)


def install() -> bool:
    """Take over SIGINT (main thread only); False when it could not or already had."""
    if _state["installed"] or threading.current_thread() is not threading.main_thread():
        return False
    _state["previous"] = signal.signal(signal.SIGINT, _handle)
    _state.update(requested=0, installed=True, reported=False)
    return True


def uninstall() -> None:
    """Give SIGINT back to the handler :func:`install` replaced."""
    if _state["installed"] and threading.current_thread() is threading.main_thread():
        previous = _state["previous"]
        signal.signal(signal.SIGINT, previous if previous is not None else signal.default_int_handler)
    _state.update(installed=False, previous=None, requested=0)


def set_prog(prog: str) -> None:
    """Name to print in the "interrupted" line (``isotide <verb>``)."""
    _state["prog"] = prog


def requested() -> bool:
    """True once Ctrl-C was pressed since :func:`install`."""
    return _state["requested"] > 0


def check(*_: object) -> None:
    """Raise ``KeyboardInterrupt`` when Ctrl-C was pressed (call at safe points; any arguments are ignored,
    so it can serve as a progress callback)."""
    if _state["requested"]:
        raise KeyboardInterrupt


def report(prog: str | None = None, stream: TextIO | None = None) -> int:
    """Print the one ``<prog>: interrupted`` line and return exit code 130."""
    stream = stream if stream is not None else sys.stderr
    try:
        tty = stream.isatty()
    except (AttributeError, ValueError):
        tty = False
    stream.write(("\n" if tty else "") + f"{prog or _state['prog']}: interrupted\n")
    stream.flush()
    _state["reported"] = True
    return 130
