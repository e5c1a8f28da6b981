"""``isotide verify NAME_dseg.json``: check a saved result against its sidecar.

Exit codes: 0 everything matches, 1 something no longer matches (each
mismatch printed on its own line), 2 bad input: missing, not JSON, or not an
Isotide result sidecar (one line on stderr), 130 interrupted. With
``--quiet`` nothing is printed when everything matches, except one line on
stderr when input files were not present and so not checked.
"""

from __future__ import annotations

import argparse
import json
import sys

HELP = "check a saved mask against its sidecar's hashes and hash chain"

EPILOG = """exit codes:
  0    everything matches
  1    something no longer matches (one line per mismatch)
  2    bad input: no such sidecar, not JSON, or not an Isotide result sidecar
  130  interrupted (Ctrl-C)"""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``isotide verify``."""
    parser.add_argument("sidecar", metavar="NAME_dseg.json", help="the sidecar (or the mask, or DIR/NAME)")
    parser.add_argument("--json", action="store_true", help="print the report as JSON")
    parser.add_argument("--quiet", action="store_true", help="print nothing when everything matches")


def run(args: argparse.Namespace) -> int:
    """Verify ``args.sidecar``; return 0 (OK), 1 (mismatch) or 2 (bad input)."""
    from engine.commands.interrupts import report as interrupted
    from engine.io import verify

    try:
        report = verify(args.sidecar)
    except KeyboardInterrupt:
        return interrupted("isotide verify")
    if not report.readable:
        print(f"isotide verify: {' '.join(report.problems[0].split())}", file=sys.stderr)
        return 2
    if args.json:
        print(
            json.dumps(
                {
                    "path": str(report.path),
                    "ok": report.ok,
                    "problems": report.problems,
                    "notes": report.notes,
                    "checked": report.checked,
                },
                indent=2,
            )
        )
    elif not (report.ok and args.quiet):
        print(report)
        for note in report.notes:
            print(f"  note: {note}")
    elif report.inputs_skipped:
        n = report.inputs_skipped
        print(f"isotide verify: note: {n} input file{'s' if n != 1 else ''} not present, so not checked "
              "(everything else matches)", file=sys.stderr)
    return 0 if report.ok else 1
