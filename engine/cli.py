"""The ``isotide`` command line: one verb per module in :mod:`engine.commands`."""

from __future__ import annotations

import argparse
import importlib
import signal
import sys
from collections.abc import Callable, Sequence
from typing import NoReturn

from engine import __version__
from engine.commands import interrupts

#: Verb name -> module under ``engine.commands`` that implements it. Each module
#: exposes ``add_arguments(parser)``, ``HELP`` (one line) and ``run(args) -> int``.
VERBS: dict[str, str] = {
    "demo": "engine.commands.demo",
    "segment": "engine.commands.segment",
    "verify": "engine.commands.verify",
    "batch": "engine.commands.batch",
    "sweep": "engine.commands.sweep",
    "review": "engine.commands.review",
    "report": "engine.commands.report",
}


def build_parser() -> argparse.ArgumentParser:
    """Build the argument parser with one sub-parser per verb."""
    parser = argparse.ArgumentParser(
        prog="isotide",
        description=(
            "Isotide: outline structures on medical image slices with a live "
            "level-set front. Not a medical device: outlines must be reviewed "
            "by qualified people."
        ),
    )
    parser.add_argument("--version", action="version", version=f"isotide {__version__}")
    sub = parser.add_subparsers(dest="verb", metavar="VERB")
    for verb, module_name in VERBS.items():
        module = importlib.import_module(module_name)
        verb_parser = sub.add_parser(verb, help=module.HELP, description=module.HELP,
                                     epilog=getattr(module, "EPILOG", None),
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
        module.add_arguments(verb_parser)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``isotide`` program; returns the process exit code.

    Ctrl-C ends every verb with one ``<prog>: interrupted`` line on stderr
    and exit code 130 (see :mod:`engine.commands.interrupts`).
    """
    owner = interrupts.install()
    words = list(sys.argv[1:] if argv is None else argv)
    verb = next((w for w in words if not w.startswith("-")), "")
    interrupts.set_prog(f"isotide {verb}" if verb in VERBS else "isotide")
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        interrupts.check()
        if args.verb is None:
            parser.print_help()
            return 0
        module = importlib.import_module(VERBS[args.verb])
        code = int(module.run(args) or 0)
        if code != 130 and interrupts.requested():  # pressed after the verb's last safe point
            return interrupts.report()
        return code
    except KeyboardInterrupt:
        return interrupts.report()
    finally:
        if owner:
            interrupts.uninstall()


def run_program(entry: Callable[[], int] | None = None) -> NoReturn:
    """The ``isotide`` console command: ``entry()`` (default :func:`main`), then exit with its code.

    Ctrl-C is taken over before anything heavy is imported, and ignored once
    the entry has returned, so that shutting the interpreter down cannot
    turn a late Ctrl-C into a traceback or change the exit code.
    """
    interrupts.install()
    try:
        code = (entry or main)()
    finally:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
    sys.exit(code)


if __name__ == "__main__":  # pragma: no cover
    run_program()
