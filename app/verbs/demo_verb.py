"""``isotide demo``: the window on the invented abdomen study with the front evolving; headless without a screen.

``--headless`` (or no screen) runs the headless demo of
:mod:`engine.commands.demo` and writes its files.
"""

from __future__ import annotations

import argparse

from app.verbs.launch import launch, report, window_problem
from engine.commands import demo as headless

HELP = "show the window outlining two structures of an invented abdomen study (--headless: write the results)"
PROG = "isotide demo"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    headless.add_arguments(parser)
    if "--headless" not in parser._option_string_actions:  # noqa: SLF001 - older engine demo
        parser.add_argument("--headless", action="store_true", help="run without the window and write the results")


def run(args: argparse.Namespace) -> int:
    if getattr(args, "headless", False) or getattr(args, "no_window", False):
        return headless.run(args)
    problem = window_problem()
    if problem is not None:
        report(PROG, problem, then="; running the headless demo")
        return headless.run(args)
    return launch(PROG, demo=True)
