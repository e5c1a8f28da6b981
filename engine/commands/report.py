"""``isotide report RESULT [--out FILE.html]``: write the HTML review summary of a saved result.

RESULT is the result's sidecar ``NAME_dseg.json``, its mask or ``DIR/NAME``.
The summary (default ``DIR/NAME_review.html``) is one self-contained file:
the record check, study, how each outline was made, a picture of every
outlined slice, the sign-off and its decisions, earlier versions and the
edit history (see :mod:`engine.review.report`). The study is read from the
path the record keeps, when it is there and hashes as recorded; otherwise
the pictures show the outlines alone and the summary says why.

Exit codes (also in ``--help``): see :data:`EPILOG`.
"""

from __future__ import annotations

import argparse
import sys

HELP = "write the HTML review summary of a saved result"

EPILOG = """exit codes:
  0    written; the result matches its record
  1    written, but the result no longer matches its record (the summary says what differs)
  2    bad input: one line on stderr naming the flag or file
  130  interrupted (Ctrl-C); nothing written"""

PROG = "isotide report"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``isotide report``."""
    parser.add_argument("result", metavar="RESULT", help="the result: NAME_dseg.json, its mask, or DIR/NAME")
    parser.add_argument("--out", metavar="FILE.html", help="where to write the summary (default "
                        "DIR/NAME_review.html beside the result)")


def run(args: argparse.Namespace) -> int:
    """Write the summary; return the exit code."""
    from engine.commands import interrupts
    from engine.io.errors import SaveError
    from engine.review.report import write_report
    from engine.review.steps import NotAResultError

    try:
        written = write_report(args.result, args.out, checkpoint=interrupts.check)
    except (NotAResultError, SaveError) as exc:
        print(f"{PROG}: {' '.join(str(exc).split())}", file=sys.stderr)
        return 2
    except ValueError as exc:
        text = " ".join(str(exc).split())
        print(f"{PROG}: {'--out' + text[3:] if text.startswith('out:') else text}", file=sys.stderr)
        return 2
    what = f"{written.pictures} picture{'s' if written.pictures != 1 else ''}"
    if not written.study_found:
        what += ", outlines only (study not at hand)"
    print(f"{written.path} ({what})")
    if not written.verified:
        print(f"{PROG}: the result no longer matches its record; the summary says what differs", file=sys.stderr)
        return 1
    return 0
