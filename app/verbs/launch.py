"""Open the window from the command line, or say in one line why it cannot be opened here."""

from __future__ import annotations

import sys

from app.screen import APT_LINE, display_problem, screen_problem, xcb_problem

__all__ = ["launch", "headless_verbs", "window_problem"]


def headless_verbs() -> str:
    """The verbs that work without a screen."""
    from engine.cli import VERBS

    names = [v for v in VERBS if v not in ("open", "demo")]
    return ", ".join(names + ["demo --headless"])


def window_problem() -> tuple[str, bool] | None:
    """Why the window cannot open here, and whether installing system libraries fixes it (None: it can)."""
    problem = screen_problem()
    if problem:
        return f"the window needs a screen ({problem})", False
    missing = xcb_problem()
    if missing:
        return f"Qt's window-system plugin (xcb) cannot load: {missing} is missing", True
    unreachable = display_problem()
    if unreachable:
        return f"the window needs a screen ({unreachable})", False
    return None


def report(prog: str, problem: tuple[str, bool], *, then: str = "") -> None:
    """One line on stderr (and the line that installs missing libraries, when that fixes it)."""
    text, fixable = problem
    print(f"{prog}: {text}{then}", file=sys.stderr)
    if fixable:
        print(f"install the libraries it needs with: {APT_LINE}", file=sys.stderr)


def launch(prog: str, *, path: str | None = None, series: str | None = None, demo: bool = False) -> int:
    """Run the window; 2 with one line naming the headless verbs when there is no screen."""
    problem = window_problem()
    if problem is not None:
        report(prog, problem, then="" if problem[1] else f"; without one use the headless verbs: {headless_verbs()}")
        return 2
    from app.application import run_window

    return run_window(path, series=series, demo=demo)
