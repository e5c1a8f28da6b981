"""The batch manifest: one row per case (a study, a label, its seeds and settings).

A manifest is a CSV file with a header row, or a JSON list of objects with
the same fields:

========== ======== =========================================================
field      required meaning
========== ======== =========================================================
path       yes      the study: DICOM file/folder/DICOMDIR, NIfTI, PNG/TIFF/NPY
                    (relative to the manifest's folder)
label      yes      the structure's name (also the output folder's name)
seeds      yes      ``ROW,COL,RADIUS`` seed disks in pixels separated by ``;``,
                    each optionally prefixed ``K:`` for slice K of a volume
model      yes      region, edge, window, curvature or constant
series     no       which series of a folder holding several (index or UID)
slice      no       ``K`` or ``FIRST-LAST``: the slices to outline (seeds
                    without a prefix go on K; a range is filled by carrying
                    the outline from the seeded slices)
window     no       ``LOW,HIGH`` (window model)
smoothness no       curvature weight
drive      no       image-driven speed weight
max_steps  no       step limit of each slice's front (default 20000)
reference  no       a label volume to compare with (Dice, HD95); the label's
                    value in it is found by name in its ``.tsv`` label table
case       no       the case's name in output file names (default: the file
                    or folder name without extension)
========== ======== =========================================================

A row that cannot be read becomes a :class:`CaseProblem` (reported like a
failed case; the other rows still run). A manifest that cannot be read at
all raises :class:`ManifestError`.
"""

from __future__ import annotations

import csv
import io
import json
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from engine.validation import check_file_name, parse_number, parse_seed, parse_whole
from engine.validation import parse_window as parse_window_text

__all__ = [
    "CaseSpec",
    "CaseProblem",
    "ManifestError",
    "COLUMNS",
    "REQUIRED",
    "read_manifest",
    "parse_case",
    "parse_seeds",
    "parse_slices",
    "parse_window",
    "case_stem",
    "slice_text",
]

#: Every field a manifest row may have, in the order the documentation lists them.
COLUMNS = ("path", "label", "seeds", "model", "series", "slice", "window", "smoothness", "drive", "max_steps",
           "reference", "case")
#: Fields every row must have.
REQUIRED = ("path", "label", "seeds", "model")
Seed = tuple[int | None, float, float, float]


class ManifestError(ValueError):
    """The manifest as a whole cannot be read (the message names the file and the problem)."""


@dataclass(frozen=True)
class CaseSpec:
    """One case of a batch: everything a worker needs to outline it (picklable, immutable).

    Attributes
    ----------
    row : int
        Where the case came from (manifest line for CSV, 1-based item for JSON).
    name : str
        Case name used in output file names.
    path : str
        Absolute path of the study.
    label : str
        Structure name (label table name and output folder).
    seeds : tuple of (slice or None, row, col, radius_px)
        Seed disks; ``None`` as slice: the case's default slice.
    model : str
        Speed model.
    series : str or int or None
        Series of a folder with several.
    slices : (first, last) or None
        Inclusive slice range to outline; ``None``: the seeded slices only.
    params : tuple of (name, value)
        Front settings given for the case (window, smoothness, drive, ...).
    reference : str or None
        Absolute path of a label volume to score against.
    variant : tuple of (name, value)
        The settings a sweep varied for this case (empty in a batch).
    """

    row: int
    name: str
    path: str
    label: str
    seeds: tuple[Seed, ...]
    model: str
    series: str | int | None = None
    slices: tuple[int, int] | None = None
    params: tuple[tuple[str, Any], ...] = ()
    reference: str | None = None
    variant: tuple[tuple[str, Any], ...] = field(default=())

    @property
    def output_name(self) -> str:
        """File-name stem of the case's result (the case name, plus a sweep's varied settings)."""
        if not self.variant:
            return self.name
        return self.name + "_" + "_".join(f"{k}-{_number_text(v)}" for k, v in self.variant)

    def settings_record(self) -> dict[str, Any]:
        """The case's settings as plain values (what the resume check compares)."""
        return {
            "path": self.path,
            "series": self.series,
            "label": self.label,
            "seeds": [list(s) for s in self.seeds],
            "model": self.model,
            "slices": list(self.slices) if self.slices else None,
            "params": {k: (list(v) if isinstance(v, tuple) else v) for k, v in self.params},
            "reference": self.reference,
        }


@dataclass(frozen=True)
class CaseProblem:
    """A manifest row that could not be read: reported as a failed case."""

    row: int
    name: str
    label: str
    error: str


def _number_text(value: Any) -> str:
    return f"{value:g}" if isinstance(value, float) else str(value)


def case_stem(path: str | os.PathLike[str]) -> str:
    """A study's file or folder name without its extension(s) (``image.nii.gz`` -> ``image``)."""
    name = Path(os.fspath(path).rstrip("/\\")).name
    lower = name.lower()
    for ext in (".nii.gz", ".nii", ".dcm", ".png", ".tif", ".tiff", ".npy", ".ima"):
        if lower.endswith(ext) and len(name) > len(ext):
            return name[: -len(ext)]
    return name


def parse_seeds(text: Any) -> tuple[Seed, ...]:
    """``"K:ROW,COL,RADIUS; ROW,COL,RADIUS"`` (or a list of 3- or 4-number lists) -> seeds.

    Each seed is checked by :func:`engine.validation.parse_seed`.

    Raises
    ------
    ValueError
        ``seeds``: empty, not numbers, a radius <= 0 or a negative slice.
    """
    if isinstance(text, (list, tuple)):
        items = [list(item) if isinstance(item, (list, tuple)) else item for item in text]
        for item in items:
            if not isinstance(item, list) or len(item) not in (3, 4):
                raise ValueError(f"seeds: expected [ROW, COL, RADIUS] or [SLICE, ROW, COL, RADIUS], got {item!r}")
    else:
        items = [chunk.strip() for chunk in str(text if text is not None else "").split(";") if chunk.strip()]
    if not items:
        raise ValueError("seeds: expected at least one ROW,COL,RADIUS seed")
    return tuple(parse_seed(item, name="seeds", with_slice=True) for item in items)  # type: ignore[misc]


def parse_slices(text: Any) -> tuple[int, int] | None:
    """``"K"`` -> ``(K, K)``; ``"FIRST-LAST"`` -> ``(FIRST, LAST)``; empty -> ``None``."""
    if text is None or str(text).strip() == "":
        return None
    raw = str(text).strip()
    first, sep, last = raw.partition("-")
    a = parse_whole(first, name="slice")
    b = parse_whole(last, name="slice") if sep else a
    if b < a:
        raise ValueError(f"slice {raw!r}: FIRST must not be after LAST")
    return a, b


def slice_text(slices: Sequence[int]) -> str:
    """``[9, 10, 11]`` -> ``"9-11"``; one slice -> ``"9"``; gaps -> ``"9-10,12"``; none -> ``""``."""
    ks = sorted(set(int(k) for k in slices))
    runs: list[str] = []
    start = prev = None
    for k in ks + [None]:  # type: ignore[list-item]
        if start is not None and (k is None or k != prev + 1):
            runs.append(str(start) if start == prev else f"{start}-{prev}")
            start = None
        if k is not None and start is None:
            start = k
        prev = k
    return ",".join(runs)


def parse_window(text: Any) -> tuple[float, float]:
    """``"LOW,HIGH"`` (or a two-number list) -> ``(low, high)`` with ``low < high``."""
    return parse_window_text(text, name="window")


def _blank(value: Any) -> bool:
    return value is None or (isinstance(value, str) and value.strip() == "")


def parse_case(row: Mapping[str, Any], *, number: int, base: str | os.PathLike[str]) -> CaseSpec:
    """One manifest row -> :class:`CaseSpec` (paths relative to ``base``).

    Raises
    ------
    ValueError
        A missing required field or a bad value (the message names the field).
    """
    from engine.front import MODELS
    from engine.session.settings import FrontSettings

    for key in REQUIRED:
        if _blank(row.get(key)):
            raise ValueError(f"{key}: missing")
    path = Path(os.fspath(base)) / str(row["path"]).strip()
    label = check_file_name(row["label"], name="label")
    seeds = parse_seeds(row["seeds"])
    model = str(row["model"]).strip().lower()
    if model not in MODELS:
        raise ValueError(f"model {row['model']!r}: unknown model; choose one of {', '.join(MODELS)}")
    series: str | int | None = None
    if not _blank(row.get("series")):
        text = str(row["series"]).strip()
        series = int(text) if text.isdigit() else text
    slices = parse_slices(row.get("slice"))
    params: dict[str, Any] = {}
    if not _blank(row.get("window")):
        if model != "window":
            raise ValueError(f"window: only used with the window model (the row's model is {model})")
        params["window"] = parse_window(row["window"])
    if not _blank(row.get("smoothness")):
        params["smoothness"] = parse_number(row["smoothness"], name="smoothness", minimum=0.0)
    if not _blank(row.get("drive")):
        params["drive"] = parse_number(row["drive"], name="drive")
    if not _blank(row.get("max_steps")):
        params["max_steps"] = parse_whole(row["max_steps"], name="max_steps", minimum=1)
    FrontSettings(model=model).updated(**params)  # refuses values the front would refuse
    if slices is not None:
        unplaced = [s for s in seeds if s[0] is None]
        if unplaced and slices[0] != slices[1]:
            raise ValueError(f"seeds: give each seed its slice (K:ROW,COL,RADIUS) when slice is a range "
                             f"({slices[0]}-{slices[1]})")
        outside = [s[0] for s in seeds if s[0] is not None and not slices[0] <= s[0] <= slices[1]]
        if outside:
            raise ValueError(f"seeds: slice {outside[0]} lies outside the slice range {slices[0]}-{slices[1]}")
    reference = None
    if not _blank(row.get("reference")):
        reference = os.path.abspath(Path(os.fspath(base)) / str(row["reference"]).strip())
    name = (check_file_name(row["case"], name="case") if not _blank(row.get("case"))
            else check_file_name(case_stem(path), name="case name of path"))
    return CaseSpec(row=number, name=name, path=os.path.abspath(path), label=label, seeds=seeds, model=model,
                    series=series, slices=slices, params=tuple(sorted(params.items())), reference=reference)


def _rows(path: Path) -> list[tuple[int, dict[str, Any]]]:
    """The manifest's rows as ``(number, fields)`` with lower-case field names."""
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise ManifestError(f"{path}: no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ManifestError(f"{path}: cannot be read ({exc})") from None
    if path.suffix.lower() == ".json" or text.lstrip().startswith("["):
        try:
            doc = json.loads(text)
        except json.JSONDecodeError as exc:
            raise ManifestError(f"{path}: not valid JSON ({exc.msg} at line {exc.lineno})") from None
        if not isinstance(doc, list) or not all(isinstance(item, dict) for item in doc):
            raise ManifestError(f"{path}: expected a JSON list of objects, one per case")
        rows = [(i + 1, {str(k).strip().lower(): v for k, v in item.items()}) for i, item in enumerate(doc)]
        keys = set().union(*(r.keys() for _, r in rows)) if rows else set()
    else:
        reader = csv.DictReader(io.StringIO(text))
        if not reader.fieldnames:
            raise ManifestError(f"{path}: empty (expected a header row: {','.join(REQUIRED)},...)")
        header = [str(h or "").strip().lower() for h in reader.fieldnames]
        if len(set(header)) != len(header):
            raise ManifestError(f"{path}: a column appears twice in the header")
        reader.fieldnames = header
        keys = set(header)
        rows = []
        for values in reader:
            if all(_blank(v) for k, v in values.items() if k is not None):
                continue
            if values.get(None):
                raise ManifestError(f"{path}: line {reader.line_num} has more cells than the header")
            rows.append((reader.line_num, {k: v for k, v in values.items() if k is not None}))
    unknown = sorted(keys - set(COLUMNS))
    if unknown:
        raise ManifestError(f"{path}: unknown column(s) {', '.join(unknown)} (known: {', '.join(COLUMNS)})")
    missing = [k for k in REQUIRED if k not in keys] if rows else []
    if missing:
        raise ManifestError(f"{path}: required column(s) {', '.join(missing)} missing")
    if not rows:
        raise ManifestError(f"{path}: holds no case")
    return rows


def read_manifest(path: str | os.PathLike[str]) -> list[CaseSpec | CaseProblem]:
    """Read a CSV or JSON manifest: one :class:`CaseSpec` per good row, a :class:`CaseProblem` per bad one.

    Two rows that would write the same result (same label and case name)
    are both problems.

    Raises
    ------
    ManifestError
        The file is missing, unreadable, has unknown or missing columns, or no row.
    """
    where = Path(os.fspath(path))
    base = where.parent
    out: list[CaseSpec | CaseProblem] = []
    for number, row in _rows(where):
        try:
            out.append(parse_case(row, number=number, base=base))
        except ValueError as exc:
            label = str(row.get("label") or "").strip()
            name = str(row.get("case") or "").strip() or case_stem(str(row.get("path") or "").strip() or "?")
            out.append(CaseProblem(number, name, label, f"row {number}: {' '.join(str(exc).split())}"))
    return mark_collisions(out, unit="row")


def mark_collisions(cases: Sequence[CaseSpec | CaseProblem], *, unit: str = "row") -> list[CaseSpec | CaseProblem]:
    """Replace every case whose result would overwrite another's by a :class:`CaseProblem`."""
    seen: dict[tuple[str, str], list[int]] = {}
    for i, case in enumerate(cases):
        if isinstance(case, CaseSpec):
            seen.setdefault((case.label.lower(), case.output_name.lower()), []).append(i)
    out = list(cases)
    for (_, _), where in seen.items():
        if len(where) > 1:
            rows = ", ".join(str(cases[i].row) for i in where)
            for i in where:
                c = cases[i]
                out[i] = CaseProblem(c.row, c.name, c.label,
                                     f"{unit}s {rows} would write the same result {c.label}/{c.output_name}_dseg.*; "
                                     "give each a different case name (case column)")
    return out
