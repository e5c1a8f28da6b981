"""``isotide batch MANIFEST --out DIR``: outline every case of a manifest, here or on a Dask cluster.

MANIFEST is a CSV file (header row) or a JSON list with the fields ``path``,
``label``, ``seeds``, ``model`` (required) and ``series``, ``slice``,
``window``, ``smoothness``, ``drive``, ``reference``, ``case`` (optional);
see :mod:`engine.batch.manifest`. Each case's result goes to
``DIR/<label>/<case>_dseg.*`` (mask, label table, sidecar with the
provenance record) and every case gets a row of ``DIR/summary.csv``.

Where cases run
---------------
By default on a local Dask cluster of ``--workers N`` worker processes (one
case at a time each; default: one per core). ``--workers 0`` runs them one
after another in this process. ``--scheduler tcp://HOST:PORT`` sends them to
a running Dask scheduler instead; its workers need Isotide installed and
must read the manifest's paths and write ``--out`` under the same names.

Re-running the same command skips cases whose result is up to date (inputs
hash as recorded, same settings); ``--force`` runs them again. A case that
fails (missing file, unreadable image, seed outside the image, lost worker)
is reported in the summary and the others go on. Ctrl+C cancels: finished
cases keep their files and the summary lists the rest as cancelled.

Exit codes: 0 every case done or up to date, 1 some case failed, 2 bad
input (one line on stderr), 130 interrupted.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import TYPE_CHECKING, TextIO

from engine.commands.progress import wants_progress
from engine.commands.segment import fail
from engine.commands.segment_options import one_line_errors
from engine.validation import parse_whole

if TYPE_CHECKING:
    from engine.batch import CaseResult

HELP = "outline every case of a manifest (CSV or JSON), here or on a Dask cluster"

PROG = "isotide batch"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``isotide batch``."""
    one_line_errors(parser, PROG)
    parser.add_argument("manifest", metavar="MANIFEST", help="CSV or JSON list of cases (path, label, seeds, model, ...)")
    add_run_arguments(parser)


def add_run_arguments(parser: argparse.ArgumentParser) -> None:
    """``--out``, ``--workers``, ``--scheduler``, ``--force``, ``--progress`` (shared with ``isotide sweep``)."""
    parser.add_argument("--out", metavar="DIR", help="folder for the results and the summary")
    parser.add_argument("--workers", metavar="N",
                        help="worker processes of the local cluster (default: one per core; 0: run here, one case "
                             "after another)")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="a running Dask scheduler (tcp://HOST:PORT) to send the cases to")
    parser.add_argument("--force", action="store_true", help="run cases again even when their result is up to date")
    parser.add_argument("--progress", action="store_true", help="show the progress bar even when stderr is redirected")
    parser.add_argument("--operator", metavar="NAME", help="who runs the batch, recorded in every result (default: nobody)")


def parse_workers(text: str | None) -> int | None:
    """``--workers`` -> a count (None: the default)."""
    if text is None:
        return None
    return parse_whole(text, name="--workers", minimum=0)


def check_out(out: str | None) -> Path:
    """``--out`` as a folder (created when missing)."""
    if not out:
        raise ValueError("--out: required (the folder for the results and the summary)")
    path = Path(out)
    if path.exists() and not path.is_dir():
        raise ValueError(f"--out {out!r}: exists and is not a folder")
    path.mkdir(parents=True, exist_ok=True)
    return path


def case_line(result: CaseResult) -> str:
    """One line per finished case: status, label/case, figures or the error."""
    from engine.batch.summary import format_figure

    where = f"{result.label}/{result.name}" + (
        " " + " ".join(f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}" for k, v in result.variant)
        if result.variant else "")
    if result.status in ("done", "up to date"):
        bits = [f"slices {result.slices}", f"{result.steps} steps", f"{result.seconds:.1f} s"]
        if result.dice == result.dice:  # not NaN: scored against a reference
            bits.append(f"Dice {format_figure(result.dice, 3)}, HD95 {format_figure(result.hd95_mm, 1)} mm")
        if result.unconverged:
            bits.append(f"stopped at the step limit on slice(s) {result.unconverged}")
        return f"{result.status:<10} {where}: " + ", ".join(bits)
    return f"{result.status:<10} {where}: {result.error}"


class CaseProgress:
    """A tqdm bar of finished cases with the counts so far, and one printed line per case."""

    def __init__(self, total: int, *, show: bool, stream: TextIO, out: TextIO) -> None:
        from tqdm import tqdm

        self.out = out
        self.counts = {"done": 0, "up to date": 0, "failed": 0, "cancelled": 0}
        self.bar = tqdm(total=total, unit="case", file=stream, disable=not show, dynamic_ncols=True,
                        desc="cases")

    def __call__(self, result: CaseResult) -> None:
        self.counts[result.status] = self.counts.get(result.status, 0) + 1
        self.bar.write(case_line(result), file=self.out)
        self.bar.set_postfix_str(", ".join(f"{v} {k}" for k, v in self.counts.items() if v), refresh=False)
        self.bar.update(1)

    def close(self) -> None:
        self.bar.close()


def execute(cases, out: Path, args: argparse.Namespace) -> tuple[list, bool]:
    """Run ``cases`` as the flags say; returns (results, interrupted)."""
    from engine.batch import BatchInterrupted, RunOptions, batch_client, run_cases

    workers = parse_workers(args.workers)
    if args.scheduler and args.workers is not None:
        raise ValueError("--workers: not used with --scheduler (the scheduler's workers run the cases)")
    options = RunOptions(str(out.resolve()), force=bool(args.force), operator=str(args.operator or ""))
    with batch_client(workers=workers, scheduler=args.scheduler) as client:
        where = ("in this process" if client is None else
                 f"through the scheduler {args.scheduler}" if args.scheduler else
                 f"on a local cluster of {len(client.scheduler_info()['workers'])} worker processes")
        print(f"{len(cases)} case{'s' if len(cases) != 1 else ''} {where}", flush=True)
        progress = CaseProgress(len(cases), show=wants_progress(args.progress, sys.stderr), stream=sys.stderr,
                                out=sys.stdout)
        try:
            return run_cases(cases, options, client=client, on_result=progress), False
        except BatchInterrupted as stop:
            return stop.results, True
        finally:
            progress.close()


def run(args: argparse.Namespace) -> int:
    """Run ``isotide batch``; return 0, 1 (some case failed), 2 (bad input) or 130 (interrupted)."""
    from engine.batch import read_manifest
    from engine.batch.summary import SUMMARY_COLUMNS, summary_rows, write_table

    try:
        out = check_out(args.out)
        cases = read_manifest(args.manifest)
        results, interrupted = execute(cases, out, args)
    except KeyboardInterrupt:
        print(f"\n{PROG}: interrupted", file=sys.stderr)
        return 130
    except (ValueError, OSError) as exc:
        return fail(" ".join(str(exc).split()), prog=PROG)
    path = write_table(out / "summary.csv", summary_rows(results, out_dir=out), SUMMARY_COLUMNS)
    return report_end(PROG, results, interrupted, [path], "cases")


def report_end(prog: str, results: list, interrupted: bool, written: list[Path], noun: str) -> int:
    """Print the counts per status and the files written; the exit code (130 interrupted, 1 a case failed)."""
    from engine.batch.summary import counts

    tally = counts(results)
    print(", ".join(f"{v} {k}" for k, v in tally.items() if v) + f"; wrote: {', '.join(map(str, written))}")
    if interrupted:
        print(f"{prog}: interrupted ({tally['done'] + tally['up to date']} of {len(results)} {noun} finished; "
              f"see {written[0]})", file=sys.stderr)
        return 130
    return 1 if tally["failed"] else 0
