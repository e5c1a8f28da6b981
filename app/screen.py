"""Whether a window can be shown here, without importing Qt (which aborts when it cannot).

:func:`screen_problem` says why there is no screen (``QT_QPA_PLATFORM`` set
to a platform without one, or no display on Linux); :func:`xcb_problem`
finds a system library missing for Qt's X11 plugin (a fresh Debian lacks
``libxcb-cursor0`` and its siblings) by loading the plugin in a child
process, and :data:`APT_LINE` is the command that installs them;
:func:`display_problem` tries the X display itself (a stale ``DISPLAY``
would otherwise make Qt abort).
"""

from __future__ import annotations

import ctypes
import importlib.util
import os
import re
import subprocess
import sys
from pathlib import Path

__all__ = ["screen_problem", "xcb_problem", "display_problem", "APT_LINE", "XCB_PACKAGES"]

#: Debian/Ubuntu packages Qt 6's xcb platform plugin needs beyond a minimal system.
XCB_PACKAGES = ("libxcb-cursor0", "libxcb-icccm4", "libxcb-keysyms1", "libxcb-image0", "libxcb-render-util0",
                "libxcb-xkb1", "libxkbcommon-x11-0", "libxcb-shape0", "libxcb-xinerama0")
APT_LINE = "sudo apt-get install -y " + " ".join(XCB_PACKAGES)
_NO_SCREEN_PLATFORMS = ("offscreen", "minimal", "vnc")


def screen_problem(environ: dict[str, str] | None = None, platform: str | None = None) -> str | None:
    """Why a window cannot be shown (None: a screen is available)."""
    env = os.environ if environ is None else environ
    system = sys.platform if platform is None else platform
    qpa = env.get("QT_QPA_PLATFORM", "").split(":", 1)[0].strip().lower()
    if qpa in _NO_SCREEN_PLATFORMS:
        return f"QT_QPA_PLATFORM is {qpa}"
    if system.startswith("linux") and not (env.get("DISPLAY") or env.get("WAYLAND_DISPLAY")):
        return "no display: neither DISPLAY nor WAYLAND_DISPLAY is set"
    return None


def missing_library(error_text: str) -> str | None:
    """The shared library a loader error names as missing (``libxcb-cursor.so.0``...)."""
    match = re.search(r"(lib[\w.+-]+\.so[\w.]*): cannot open shared object file", error_text)
    return match.group(1) if match else None


def _xcb_plugin() -> Path | None:
    spec = importlib.util.find_spec("PySide6")
    if spec is None or not spec.submodule_search_locations:
        return None
    plugin = Path(list(spec.submodule_search_locations)[0]) / "Qt" / "plugins" / "platforms" / "libqxcb.so"
    return plugin if plugin.is_file() else None


def xcb_problem(environ: dict[str, str] | None = None) -> str | None:
    """The library Qt's xcb plugin cannot load on this Linux/X11 machine (None: it loads, or xcb is not used)."""
    env = os.environ if environ is None else environ
    qpa = env.get("QT_QPA_PLATFORM", "").split(":", 1)[0].strip().lower()
    if not sys.platform.startswith("linux") or qpa not in ("", "xcb") or not env.get("DISPLAY"):
        return None
    if qpa == "" and env.get("WAYLAND_DISPLAY"):
        return None
    plugin = _xcb_plugin()
    if plugin is None:
        return None
    try:
        run = subprocess.run([sys.executable, "-c", "import ctypes, sys; ctypes.CDLL(sys.argv[1])", str(plugin)],
                             capture_output=True, text=True, timeout=30)
    except (OSError, subprocess.TimeoutExpired):
        return None
    if run.returncode == 0:
        return None
    return missing_library(run.stderr) or (run.stderr.strip().splitlines() or ["the plugin does not load"])[-1]


def _uses_x11(env: dict[str, str]) -> bool:
    qpa = env.get("QT_QPA_PLATFORM", "").split(":", 1)[0].strip().lower()
    if not sys.platform.startswith("linux") or qpa not in ("", "xcb") or not env.get("DISPLAY"):
        return False
    return not (qpa == "" and env.get("WAYLAND_DISPLAY"))


def display_problem(environ: dict[str, str] | None = None) -> str | None:
    """Why the X display in ``DISPLAY`` cannot be reached (None: it can, or X11 is not used).

    Connects with libxcb itself (``xcb_connect``, then
    ``xcb_connection_has_error``), as Qt's plugin would.
    """
    env = os.environ if environ is None else environ
    if not _uses_x11(env):
        return None
    try:
        xcb = ctypes.CDLL("libxcb.so.1")
    except OSError:
        return None  # xcb_problem names what is missing
    xcb.xcb_connect.restype = ctypes.c_void_p
    xcb.xcb_connect.argtypes = [ctypes.c_char_p, ctypes.c_void_p]
    xcb.xcb_connection_has_error.argtypes = [ctypes.c_void_p]
    xcb.xcb_disconnect.argtypes = [ctypes.c_void_p]
    display = env["DISPLAY"]
    connection = xcb.xcb_connect(display.encode(), None)
    try:
        failed = xcb.xcb_connection_has_error(connection) if connection else 1
    finally:
        if connection:
            xcb.xcb_disconnect(connection)
    return f"the X display {display} cannot be reached" if failed else None
