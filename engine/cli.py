"""The ``isotide`` command line: one verb per module in :mod:`engine.commands`."""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Sequence

from engine import __version__

#: Verb name -> module under ``engine.commands`` that implements it. Each module
#: exposes ``add_arguments(parser)``, ``HELP`` (one line) and ``run(args) -> int``.
VERBS: dict[str, str] = {
    "demo": "engine.commands.demo",
    "segment": "engine.commands.segment",
    "verify": "engine.commands.verify",
    "batch": "engine.commands.batch",
    "sweep": "engine.commands.sweep",
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
        verb_parser = sub.add_parser(verb, help=module.HELP, description=module.HELP)
        module.add_arguments(verb_parser)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``isotide`` program; returns the process exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.verb is None:
        parser.print_help()
        return 0
    module = importlib.import_module(VERBS[args.verb])
    return int(module.run(args) or 0)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
