"""``isotide review RESULT --submit|--approve|--return``: record a sign-off step on a saved result, headless.

RESULT is the result's sidecar ``NAME_dseg.json``, its mask or ``DIR/NAME``.
The result is checked first (as ``isotide verify`` does): one that no longer
matches its record is not reviewed. The step is appended to the sidecar's
hash-chained history and the sidecar is written again atomically (the mask
is not touched): see :mod:`engine.review`.

Without a step the command prints the result's review: state, version,
decisions, notes and the steps the state allows.

Notes on outlines: ``--label L --slice K --note TEXT``, repeated for more
notes (the n-th ``--label`` and ``--slice`` go with the n-th ``--note``); L
is a label's index or name.

Exit codes (also in ``--help``): see :data:`EPILOG`.
"""

from __future__ import annotations

import argparse
import sys

from engine.validation import parse_whole

HELP = "record a sign-off step (submit, approve, return) on a saved result"

EPILOG = """exit codes:
  0    the step was recorded (without a step: the review was printed)
  1    not reviewed: the result no longer matches its record (as isotide verify reports)
  2    bad input: one line on stderr naming the flag or file
  3    refused: the result's review state does not allow the step (the line names the state),
       or the result changed while the step was being recorded
  130  interrupted (Ctrl-C); nothing was recorded

steps:
  --submit   Draft -> Submitted
  --approve  Submitted -> Approved (needs --reviewer; final for this version)
  --return   Submitted -> Returned (needs --reviewer and --comment or a --note)
  A returned or approved result is reworked by saving it as a new version
  (isotide segment --new-version, or Save in the window), which is a Draft."""

PROG = "isotide review"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``isotide review``."""
    parser.add_argument("result", metavar="RESULT", help="the result: NAME_dseg.json, its mask, or DIR/NAME")
    steps = parser.add_mutually_exclusive_group()
    steps.add_argument("--submit", dest="step", action="store_const", const="submit",
                       help="submit a Draft for review")
    steps.add_argument("--approve", dest="step", action="store_const", const="approve",
                       help="approve a Submitted result")
    steps.add_argument("--return", dest="step", action="store_const", const="return",
                       help="return a Submitted result with comments")
    parser.add_argument("--reviewer", metavar="NAME",
                        help="who takes the step (recorded as given; the login name never is)")
    parser.add_argument("--comment", metavar="TEXT", help="the reviewer's comment")
    parser.add_argument("--label", action="append", default=[], metavar="L",
                        help="label of a note: index or name (repeat with each --note)")
    parser.add_argument("--slice", action="append", default=[], type=str, metavar="K",
                        help="slice of a note (repeat with each --note)")
    parser.add_argument("--note", action="append", default=[], metavar="TEXT",
                        help="a note on the label's outline on that slice")


class _Usage(ValueError):
    """A flag given wrongly (one line naming it)."""


def _marks(args: argparse.Namespace, labels: dict[str, int]) -> list[dict]:
    n = len(args.note)
    if not (len(args.label) == len(args.slice) == n):
        raise _Usage(f"--note: each note needs one --label and one --slice (got {len(args.label)} --label, "
                     f"{len(args.slice)} --slice, {n} --note)")
    if n and args.step is None:
        raise _Usage("--note: notes go with a step (--submit, --approve or --return)")
    out = []
    for label, k, note in zip(args.label, args.slice, args.note):
        key = label.strip()
        if key.lower() in labels:
            index = labels[key.lower()]
        else:
            try:
                index = int(key)
            except ValueError:
                names = ", ".join(sorted(labels)) or "none"
                raise _Usage(f"--label: the result has no label {label!r} (its labels: {names})") from None
        try:
            slice_index = parse_whole(k, name="--slice")
        except ValueError as exc:
            raise _Usage(str(exc)) from None
        out.append({"label": index, "slice": slice_index, "note": note})
    return out


def _flag_words(message: str) -> str:
    """A library message in the command line's words (flags for keywords)."""
    for word, flag in (("reviewer:", "--reviewer:"), ("comment:", "--comment:"), ("marks:", "--note:")):
        if message.startswith(word):
            return flag + message[len(word):]
    return message


def _print_review(record, out) -> None:
    print(f"{record.path.name}: {record.state}, version {record.version}"
          + (f", reviewer {record.reviewer}" if record.reviewer else ""), file=out)
    for d in record.decisions:
        who = f" by {d.reviewer}" if d.reviewer else ""
        print(f"  {d.time} {d.step or 'decision'}{who}" + (f": {d.comment}" if d.comment else ""), file=out)
        for m in d.marks:
            print(f"    note on label {m.label}, slice {m.slice}: {m.note}", file=out)
    for v in record.versions[:-1]:
        who = f" by {v.reviewer}" if v.reviewer else ""
        print(f"  earlier version {v.version}: {v.state}{who}", file=out)
    if record.allowed:
        print(f"  next: {', '.join(f'--{s}' for s in record.allowed)}", file=out)
    else:
        print("  next: rework the outlines and save them as a new version (a Draft)", file=out)


def run(args: argparse.Namespace) -> int:
    """Record the step (or print the review); return the exit code."""
    from engine.commands import interrupts
    from engine.io.errors import SaveError
    from engine.review import (
        NotAResultError,
        ResultChangedError,
        ResultMismatchError,
        ReviewStepError,
        read_review,
        record_step,
    )

    try:
        record = read_review(args.result)
    except (NotAResultError, ValueError) as exc:
        print(f"{PROG}: {' '.join(str(exc).split())}", file=sys.stderr)
        return 2
    try:
        marks = _marks(args, {lab.name.lower(): lab.index for lab in record.labels})
        if args.step is None:
            if args.reviewer or args.comment:
                raise _Usage("--reviewer/--comment: go with a step (--submit, --approve or --return)")
            _print_review(record, sys.stdout)
            return 0
        interrupts.check()
        record = record_step(args.result, args.step, reviewer=args.reviewer, comment=args.comment, marks=marks,
                             checkpoint=interrupts.check)
    except _Usage as exc:
        print(f"{PROG}: {exc}", file=sys.stderr)
        return 2
    except ResultMismatchError as exc:
        print(f"{PROG}: {' '.join(str(exc).split())}", file=sys.stderr)
        return 1
    except (ReviewStepError, ResultChangedError) as exc:
        print(f"{PROG}: {' '.join(str(exc).split())}", file=sys.stderr)
        return 3
    except (NotAResultError, ValueError, SaveError) as exc:
        print(f"{PROG}: {_flag_words(' '.join(str(exc).split()))}", file=sys.stderr)
        return 2
    last = record.decisions[-1]
    who = f" by {last.reviewer}" if last.reviewer else ""
    print(f"{record.path.name}: {last.source} -> {last.state}{who} (version {record.version})")
    return 0
