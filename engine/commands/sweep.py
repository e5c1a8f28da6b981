"""``isotide sweep CASE... --label L --vary NAME=START:STOP:COUNT --out DIR``: a grid of settings over cases.

Each CASE is a manifest (``.csv`` or ``.json``, see ``isotide batch``), whose
rows of label L are taken, or a study (anything ``isotide segment`` reads)
with its seeds given by ``--seed`` (``ROW,COL,RADIUS`` or
``K:ROW,COL,RADIUS``, repeatable). Every case needs a reference label
volume to be scored against: ``--reference REF`` or the manifest's
``reference`` column (the label is found by name in REF's ``.tsv`` table).

``--vary`` takes ``NAME=START:STOP:COUNT`` (COUNT values evenly spaced,
ends included) or ``NAME=V1,V2,...``; give it once per setting
(smoothness, drive, edge-pull, edge-sigma, edge-contrast, edge-weight,
outline-averaging). Every combination runs on every case, on the same
kind of cluster as ``isotide batch`` (``--workers``, ``--scheduler``).

``--max-steps N`` limits each slice's front of a study given as CASE.

Output: ``DIR/<label>/<case>_<setting>-<value>..._dseg.*`` per run,
``DIR/sweep.csv`` (one row per run: case, label, the varied settings, slices,
steps, time, area, Dice, HD95, status, error) and ``DIR/sweep.png`` (Dice and
HD95 against each varied setting). Re-running skips runs that are up to date.

Exit codes: 0 every run done or up to date, 1 some run failed, 2 bad input,
130 interrupted.
"""

from __future__ import annotations

import argparse
import os
import sys
from dataclasses import replace
from pathlib import Path

from engine.commands.batch import add_run_arguments, check_out, execute, report_end
from engine.commands.segment import fail, one_line_errors

HELP = "run a grid of front settings over one or more cases and plot Dice and HD95 against them"

PROG = "isotide sweep"

_MANIFEST_SUFFIXES = (".csv", ".json")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``isotide sweep``."""
    one_line_errors(parser, PROG)
    parser.add_argument("cases", metavar="CASE", nargs="+",
                        help="a manifest (.csv/.json; its rows of --label) or a study with --seed")
    parser.add_argument("--label", metavar="NAME", help="the structure (manifest rows of this label; result folder)")
    parser.add_argument("--vary", action="append", default=[], metavar="NAME=START:STOP:COUNT",
                        help="a setting and its values (START:STOP:COUNT evenly spaced, or V1,V2,...); repeatable")
    parser.add_argument("--seed", action="append", default=[], metavar="[K:]ROW,COL,RADIUS",
                        help="seed disk of a study given as CASE (repeatable)")
    parser.add_argument("--model", default="region", metavar="MODEL", help="speed model for a study given as CASE")
    parser.add_argument("--slice", metavar="K|FIRST-LAST", help="slices to outline for a study given as CASE")
    parser.add_argument("--series", metavar="SERIES", help="series of a folder with several (index or UID)")
    parser.add_argument("--max-steps", metavar="N", help="step limit of each slice's front (default 20000)")
    parser.add_argument("--reference", metavar="REF", help="reference label volume to score against")
    add_run_arguments(parser)


def base_cases(args: argparse.Namespace) -> list:
    """The cases before the grid: manifest rows of the label, and studies with ``--seed``."""
    from engine.batch.manifest import CaseProblem, mark_collisions, parse_case, read_manifest

    if not args.label or not str(args.label).strip():
        raise ValueError("--label: required (the structure to sweep)")
    label = str(args.label).strip()
    cases: list = []
    for text in args.cases:
        path = Path(text)
        if path.suffix.lower() in _MANIFEST_SUFFIXES and path.is_file():
            rows = [c for c in read_manifest(path) if c.label.lower() == label.lower()]
            if not rows:
                raise ValueError(f"{text}: has no case of label {label!r}")
            for case in rows:
                if not isinstance(case, CaseProblem) and case.reference is None and args.reference:
                    case = replace(case, reference=os.path.abspath(args.reference))
                cases.append(case)
            continue
        if not args.seed:
            raise ValueError(f"--seed: required for the study {text} (or give a manifest as CASE)")
        row = {"path": text, "label": label, "seeds": ";".join(args.seed), "model": args.model,
               "slice": args.slice, "series": args.series, "reference": args.reference, "max_steps": args.max_steps}
        try:
            cases.append(parse_case(row, number=len(cases) + 1, base="."))
        except ValueError as exc:
            raise ValueError(f"{text}: {' '.join(str(exc).split())}") from None
    for case in cases:
        if not isinstance(case, CaseProblem) and case.reference is None:
            raise ValueError(f"--reference: required for {case.path} (nothing to score the sweep against)")
    return mark_collisions(cases, unit="case")


def run(args: argparse.Namespace) -> int:
    """Run ``isotide sweep``; return 0, 1 (some run failed), 2 (bad input) or 130 (interrupted)."""
    from engine.batch.summary import SUMMARY_COLUMNS, summary_rows, write_table
    from engine.batch.sweep import parse_vary, plot_sweep, sweep_cases

    try:
        if not args.vary:
            raise ValueError("--vary: required (NAME=START:STOP:COUNT or NAME=V1,V2,...)")
        varies = [parse_vary(v) for v in args.vary]
        out = check_out(args.out)
        cases = sweep_cases(base_cases(args), varies)
        results, interrupted = execute(cases, out, args)
    except KeyboardInterrupt:
        print(f"\n{PROG}: interrupted", file=sys.stderr)
        return 130
    except (ValueError, OSError) as exc:
        return fail(" ".join(str(exc).split()), prog=PROG)
    varied = [name for name, _ in varies]
    columns = list(SUMMARY_COLUMNS[:2]) + varied + list(SUMMARY_COLUMNS[2:])
    table = write_table(out / "sweep.csv", summary_rows(results, out_dir=out, varied=varied), columns)
    picture = plot_sweep(results, varied, out / "sweep.png")
    return report_end(PROG, results, interrupted, [table, picture], "runs")
