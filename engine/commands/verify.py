"""``isotide verify NAME_dseg.json``: check a saved result against its sidecar.

Exit codes: 0 everything matches, 1 something no longer matches (each
mismatch printed on its own line), 2 bad input (one line on stderr).
"""

from __future__ import annotations

import argparse
import json
import sys

HELP = "check a saved mask against its sidecar's hashes and hash chain"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``isotide verify``."""
    parser.add_argument("sidecar", metavar="NAME_dseg.json", help="the sidecar (or the mask, or DIR/NAME)")
    parser.add_argument("--json", action="store_true", help="print the report as JSON")
    parser.add_argument("--quiet", action="store_true", help="print nothing when everything matches")


def run(args: argparse.Namespace) -> int:
    """Verify ``args.sidecar``; return 0 (OK), 1 (mismatch) or 2 (bad input)."""
    from engine.io import verify

    report = verify(args.sidecar)
    if not report.readable:
        print(f"isotide verify: {report.problems[0]}", file=sys.stderr)
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
    return 0 if report.ok else 1
