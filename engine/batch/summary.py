"""``summary.csv`` of a batch and ``sweep.csv`` of a sweep: one row per case, written atomically."""

from __future__ import annotations

import csv
import io
import math
import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from engine.batch.case import CaseResult

__all__ = ["SUMMARY_COLUMNS", "summary_rows", "write_table", "format_figure", "counts"]

#: Columns of ``summary.csv``; a sweep puts its varied settings after ``label``.
SUMMARY_COLUMNS = ("case", "label", "slices", "steps", "time_s", "area_mm2", "dice", "hd95_mm", "status", "error",
                   "not_converged", "attempts", "row", "output")


def format_figure(value: float, digits: int) -> str:
    """A number for the table: empty when unknown (NaN), ``inf`` when infinite."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    if math.isinf(value):
        return "inf"
    return f"{value:.{digits}f}"


def summary_rows(results: Sequence[CaseResult], *, out_dir: str | os.PathLike[str] | None = None,
                 varied: Sequence[str] = ()) -> list[dict[str, Any]]:
    """The table's rows in case order (``output`` relative to ``out_dir`` when given)."""
    rows = []
    for r in results:
        output = r.output
        if output and out_dir is not None:
            try:
                output = Path(output).relative_to(Path(os.fspath(out_dir))).as_posix()
            except ValueError:
                pass
        row: dict[str, Any] = {"case": r.name, "label": r.label}
        values = dict(r.variant)
        for name in varied:
            v = values.get(name)
            row[name] = "" if v is None else (f"{v:g}" if isinstance(v, float) else str(v))
        row.update({
            "slices": r.slices,
            "steps": r.steps if r.status in ("done", "up to date") else "",
            "time_s": format_figure(r.seconds, 2) if r.status in ("done", "up to date") else "",
            "area_mm2": format_figure(r.area_mm2, 1),
            "dice": format_figure(r.dice, 4),
            "hd95_mm": format_figure(r.hd95_mm, 2),
            "status": r.status,
            "error": r.error,
            "not_converged": r.unconverged,
            "attempts": r.attempts,
            "row": r.row,
            "output": output if r.status in ("done", "up to date") else "",
        })
        rows.append(row)
    return rows


def write_table(path: str | os.PathLike[str], rows: Sequence[dict[str, Any]], columns: Sequence[str]) -> Path:
    """Write ``rows`` as CSV with ``columns`` atomically (temp file, fsync, rename)."""
    from engine.io.atomic import commit_files

    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=list(columns), lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow({k: row.get(k, "") for k in columns})
    target = Path(os.fspath(path))
    commit_files({target: buf.getvalue().encode("utf-8")})
    return target


def counts(results: Sequence[CaseResult]) -> dict[str, int]:
    """How many cases have each status."""
    out = {"done": 0, "up to date": 0, "failed": 0, "cancelled": 0}
    for r in results:
        out[r.status] = out.get(r.status, 0) + 1
    return out
