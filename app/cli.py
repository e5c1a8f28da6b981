"""The ``isotide`` program: the window for ``isotide``, ``isotide open`` and ``isotide demo``; every other verb
is the engine's (:mod:`engine.cli`).

No Qt is imported here: a verb that does not open the window never loads
it, and a machine without a screen gets one line instead of Qt's abort.
"""

from __future__ import annotations

import sys
from collections.abc import Sequence
from typing import NoReturn

__all__ = ["main", "run_program", "WINDOW_VERBS"]

#: Verbs that open the window, and the module of each.
WINDOW_VERBS = {"open": "app.verbs.open_verb", "demo": "app.verbs.demo_verb"}


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of ``isotide``; returns the exit code."""
    from engine import cli as engine_cli

    args = list(sys.argv[1:] if argv is None else argv)
    if not args:
        from app.verbs.launch import launch

        return launch("isotide")
    engine_verbs = dict(engine_cli.VERBS)
    engine_cli.VERBS.update(WINDOW_VERBS)
    try:
        return engine_cli.main(args)
    finally:
        engine_cli.VERBS.clear()
        engine_cli.VERBS.update(engine_verbs)


def run_program() -> NoReturn:
    """The ``isotide`` console command: :func:`main` with the engine's Ctrl-C handling
    (:func:`engine.cli.run_program`: one "interrupted" line and exit 130)."""
    from engine.cli import run_program as engine_run_program

    engine_run_program(main)


if __name__ == "__main__":  # pragma: no cover
    run_program()
