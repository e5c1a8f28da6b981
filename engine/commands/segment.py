"""``isotide segment IMAGE --seed ROW,COL,RADIUS ... --out OUT``: outline one structure on one slice.

IMAGE is anything :func:`engine.io.load` reads: a DICOM file, folder or
DICOMDIR, a NIfTI-1/2 file, or a PNG/TIFF/NPY picture. The front grows from
the seed disks on one slice (``--slice K``; default the middle slice,
``slices // 2``) with :func:`engine.segment.segment` until it converges or
``--max-steps`` steps were taken.

Output
------
``--out DIR/NAME``
    The full result through :func:`engine.io.save_result`:
    ``NAME_dseg.nii.gz`` (label 1 on the chosen slice, 0 elsewhere),
    ``NAME_dseg.tsv``, ``NAME_dseg.json`` (provenance: model, the settings
    actually used, seeds, steps, timings, operator from ``$USER`` or else
    the system's login name, and a ``segment`` history entry with the command-line settings) and, with
    ``--dicom-seg`` for DICOM input, ``NAME.seg.dcm``. ``DIR/NAME_dseg.nii.gz``
    and ``DIR/NAME_dseg.json`` are accepted as ``DIR/NAME``.
``--out FILE.png``
    An 8-bit grey PNG of the slice's shape: 0 outside, 255 inside. No
    sidecar is written.

The command prints the steps taken, the evolution time reached, the wall
time, the area in mm² and whether the front converged; when the block size
of ``--coarse`` is more than the outlined structure can hold, the block
size it was lowered to (also in the sidecar's parameters as ``coarse`` and
``coarse_requested``, and in its notes). With ``--progress``,
or whenever stderr is a terminal, a one-line text bar on stderr shows the
steps taken out of the step limit (fronts usually converge long before it).

Exit codes: 0 done (converged or stopped at the step limit), 2 bad input
(one line on stderr: ``isotide segment: error: <what is wrong>``), 130
interrupted.
"""

from __future__ import annotations

import argparse
import io
import math
import os
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, TextIO

import numpy as np

if TYPE_CHECKING:
    from engine.io import Volume
    from engine.segment import Segmentation

HELP = "grow a front from seed disks on one slice and save the outline"

PROG = "isotide segment"

_RESULT_SUFFIXES = ("_dseg.nii.gz", "_dseg.json", "_dseg.tsv", ".seg.dcm")


class UsageError(ValueError):
    """A command-line value is wrong; the message names the flag."""


# --------------------------------------------------------------------------
# arguments
# --------------------------------------------------------------------------
def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``isotide segment``.

    Values are kept as text here and checked in :func:`run`, so that every
    bad value gives exit code 2 and one line naming it. Errors argparse itself
    finds (a missing IMAGE, a flag without its value) are printed on one line
    too.
    """
    one_line_errors(parser, PROG)
    parser.add_argument("image", metavar="IMAGE", help="DICOM file/folder/DICOMDIR, NIfTI, PNG, TIFF or NPY")
    parser.add_argument(
        "--seed", action="append", default=[], metavar="ROW,COL,RADIUS",
        help="seed disk in pixels on the chosen slice (repeat for several disks)",
    )
    parser.add_argument(
        "--model", default="region", metavar="MODEL",
        help="speed model: region (Chan-Vese, default), edge (geodesic), window, curvature, constant",
    )
    parser.add_argument(
        "--window", metavar="LOW,HIGH",
        help="intensity window of the window model (default: estimated from the seeds); "
             "write --window=-100,200 for a negative LOW",
    )
    parser.add_argument("--smoothness", metavar="X", help="curvature weight (>= 0; larger = rounder)")
    parser.add_argument("--drive", metavar="X", help="image-driven speed weight")
    parser.add_argument("--edge-sigma", metavar="MM", help="edge scale sigma in mm (>= 0)")
    parser.add_argument("--edge-contrast", metavar="K", help="edge contrast K (> 0; default automatic)")
    parser.add_argument("--outline-averaging", metavar="MM",
                        help="sigma in mm of the image speed's average along the outline (>= 0; default 1; "
                             "larger = steadier on noise, less detail)")
    parser.add_argument("--detail", default="1", metavar="1|2|4", help="nodes per pixel along each axis")
    parser.add_argument("--nodes", default="lattice", metavar="lattice|scattered",
                        help="where the front lives: a lattice (default) or scattered nodes, finer near edges")
    parser.add_argument("--coarse", default="auto", metavar="auto|1|2|4|8",
                        help="block size of a coarse stage (auto or 1: none, the flood brings the front to the "
                             "boundary; a size the outlined structure cannot hold is lowered)")
    parser.add_argument("--max-steps", metavar="N", help="step limit (default 20000)")
    parser.add_argument("--slice", metavar="K", help="slice of a volume (default: the middle slice)")
    parser.add_argument("--label", default="structure", metavar="NAME", help="label name (default: structure)")
    parser.add_argument("--out", metavar="OUT",
                        help="DIR/NAME for the full result, or FILE.png for a mask picture (0 outside, 255 inside)")
    parser.add_argument("--dicom-seg", action="store_true", help="also write NAME.seg.dcm (DICOM input only)")
    parser.add_argument("--progress", action="store_true", help="show a progress bar on stderr even when redirected")


def one_line_errors(parser: argparse.ArgumentParser, prog: str) -> None:
    """Make ``parser`` report a usage error as one line ``<prog>: error: ...`` (exit code 2)."""

    def error(message: str) -> None:
        parser.exit(2, f"{prog}: error: {' '.join(str(message).split())}\n")

    parser.error = error  # type: ignore[method-assign]


@dataclass(frozen=True)
class Settings:
    """Checked command-line settings of ``isotide segment``."""

    image: str
    seeds: tuple[tuple[float, float, float], ...]
    model: str
    params: dict = field(default_factory=dict)
    detail: int = 1
    coarse: int | None = None  # None: chosen automatically
    nodes: str = "lattice"
    max_steps: int | None = None
    slice: int | None = None
    label: str = "structure"
    out: str = ""
    png: bool = False
    dicom_seg: bool = False
    progress: bool = False


def parse_seed(text: str) -> tuple[float, float, float]:
    """``"ROW,COL,RADIUS"`` -> ``(row, col, radius_px)``.

    Raises
    ------
    UsageError
        Not three finite numbers, a radius <= 0, or a 3-D seed.
    """
    parts = [p.strip() for p in str(text).split(",")]
    try:
        values = [float(p) for p in parts]
    except ValueError:
        raise UsageError(f"--seed {text!r}: expected ROW,COL,RADIUS as numbers") from None
    if len(values) == 4:
        raise UsageError(
            f"--seed {text!r}: 3-D seeds (SLICE,ROW,COL,RADIUS) are not supported; "
            "choose the slice with --slice K and give ROW,COL,RADIUS"
        )
    if len(values) != 3:
        raise UsageError(f"--seed {text!r}: expected ROW,COL,RADIUS (three numbers)")
    if not all(math.isfinite(v) for v in values):
        raise UsageError(f"--seed {text!r}: values must be finite numbers")
    if values[2] <= 0:
        raise UsageError(f"--seed {text!r}: radius must be > 0 pixels")
    return values[0], values[1], values[2]


def parse_window(text: str) -> tuple[float, float]:
    """``"LOW,HIGH"`` -> ``(low, high)`` with ``low < high``."""
    parts = [p.strip() for p in str(text).split(",")]
    try:
        values = [float(p) for p in parts]
    except ValueError:
        raise UsageError(f"--window {text!r}: expected LOW,HIGH as numbers") from None
    if len(values) != 2 or not all(math.isfinite(v) for v in values):
        raise UsageError(f"--window {text!r}: expected LOW,HIGH (two finite numbers)")
    if values[0] >= values[1]:
        raise UsageError(f"--window {text!r}: LOW must be less than HIGH")
    return values[0], values[1]


def _number(text: str, flag: str, *, minimum: float | None = None, strict: bool = False) -> float:
    try:
        value = float(text)
    except ValueError:
        raise UsageError(f"{flag} {text!r}: expected a number") from None
    if not math.isfinite(value):
        raise UsageError(f"{flag} {text!r}: expected a finite number")
    if minimum is not None and (value <= minimum if strict else value < minimum):
        raise UsageError(f"{flag} {text!r}: must be {'>' if strict else '>='} {minimum:g}")
    return value


def _integer(text: str, flag: str, *, minimum: int) -> int:
    try:
        value = int(str(text).strip())
    except ValueError:
        raise UsageError(f"{flag} {text!r}: expected a whole number") from None
    if value < minimum:
        raise UsageError(f"{flag} {text!r}: must be >= {minimum}")
    return value


def result_prefix(out: str) -> str:
    """``DIR/NAME`` from ``--out`` (``DIR/NAME_dseg.nii.gz`` and friends accepted)."""
    name = Path(out).name
    for suffix in _RESULT_SUFFIXES:
        if name.endswith(suffix) and len(name) > len(suffix):
            return str(Path(out).with_name(name[: -len(suffix)]))
    if not name or name in (".", "..") or out.endswith(("/", os.sep)):
        raise UsageError(f"--out {out!r}: expected DIR/NAME (result files) or FILE.png")
    return out


def parse_settings(args: argparse.Namespace) -> Settings:
    """Check every command-line value; raise :class:`UsageError` naming the first bad one."""
    from engine.speeds import MODELS

    if not args.seed:
        raise UsageError("--seed: at least one ROW,COL,RADIUS seed is required")
    seeds = tuple(parse_seed(s) for s in args.seed)
    model = str(args.model).strip().lower()
    if model not in MODELS:
        raise UsageError(f"--model {args.model!r}: unknown model; choose one of {', '.join(MODELS)}")
    params: dict = {}
    if args.window is not None:
        if model != "window":
            raise UsageError(f"--window: only used with --model window (got --model {model})")
        params["window"] = parse_window(args.window)
    if args.smoothness is not None:
        params["smoothness"] = _number(args.smoothness, "--smoothness", minimum=0.0)
    if args.drive is not None:
        params["drive"] = _number(args.drive, "--drive")
    if args.edge_sigma is not None:
        params["edge_sigma"] = _number(args.edge_sigma, "--edge-sigma", minimum=0.0)
    if args.edge_contrast is not None:
        params["edge_contrast"] = _number(args.edge_contrast, "--edge-contrast", minimum=0.0, strict=True)
    if args.outline_averaging is not None:
        params["outline_averaging"] = _number(args.outline_averaging, "--outline-averaging", minimum=0.0)
    detail = _integer(args.detail, "--detail", minimum=1)
    if detail not in (1, 2, 4):
        raise UsageError(f"--detail {args.detail!r}: must be 1, 2 or 4")
    nodes = str(args.nodes).strip().lower()
    if nodes not in ("lattice", "scattered"):
        raise UsageError(f"--nodes {args.nodes!r}: must be lattice or scattered")
    coarse = None
    if nodes == "scattered" and str(args.coarse).strip().lower() not in ("auto", "1"):
        raise UsageError(f"--coarse {args.coarse!r}: the coarse start is for lattice nodes (use --coarse 1)")
    if str(args.coarse).strip().lower() != "auto":
        coarse = _integer(args.coarse, "--coarse", minimum=1)
        if coarse not in (1, 2, 4, 8):
            raise UsageError(f"--coarse {args.coarse!r}: must be auto, 1, 2, 4 or 8")
    max_steps = None if args.max_steps is None else _integer(args.max_steps, "--max-steps", minimum=1)
    slice_index = None if args.slice is None else _integer(args.slice, "--slice", minimum=0)
    label = str(args.label)
    if not label.strip() or "\t" in label or "\n" in label:
        raise UsageError("--label: expected a non-empty one-line name without tabs")
    if not args.out:
        raise UsageError("--out: required (DIR/NAME for the result files, or FILE.png)")
    png = str(args.out).lower().endswith(".png")
    out = str(args.out) if png else result_prefix(str(args.out))
    if png and args.dicom_seg:
        raise UsageError("--dicom-seg: needs --out DIR/NAME, not a .png file")
    return Settings(
        image=str(args.image), seeds=seeds, model=model, params=params, detail=detail, coarse=coarse,
        nodes=nodes, max_steps=max_steps, slice=slice_index, label=label, out=out, png=png, dicom_seg=bool(args.dicom_seg),
        progress=bool(args.progress),
    )


# --------------------------------------------------------------------------
# progress bar
# --------------------------------------------------------------------------
class TextProgress:
    """A one-line text progress bar, redrawn at most every ``interval`` seconds.

    Use as the ``progress(steps, time)`` callback of :func:`engine.segment.segment`.

    Parameters
    ----------
    total : int
        Step limit; the bar fills towards it.
    stream : text stream
        Where to draw (normally ``sys.stderr``).
    label : str
        Text in front of the bar.
    width : int
        Characters of the bar itself.
    interval : float
        Smallest time between redraws in seconds.
    clock : callable
        Monotonic clock in seconds (for tests).
    """

    def __init__(self, total: int, *, stream: TextIO, label: str = "evolving", width: int = 24,
                 interval: float = 0.2, clock: Callable[[], float] = time.monotonic) -> None:
        if total < 1:
            raise ValueError(f"total: expected >= 1, got {total}")
        self.total = int(total)
        self.stream = stream
        self.label = label
        self.width = int(width)
        self.interval = float(interval)
        self.clock = clock
        self._start = clock()
        self._last_draw = -math.inf
        self._shown = 0
        self.draws = 0

    def line(self, steps: int, t: float) -> str:
        """The bar's text for ``steps`` steps at evolution time ``t``."""
        fraction = min(max(steps / self.total, 0.0), 1.0)
        filled = int(round(fraction * self.width))
        elapsed = max(self.clock() - self._start, 1e-9)
        return (f"{self.label} [{'#' * filled}{'.' * (self.width - filled)}] {steps}/{self.total} steps, "
                f"t = {t:.4g}, {steps / elapsed:.0f} steps/s")

    def __call__(self, steps: int, t: float) -> None:
        now = self.clock()
        if now - self._last_draw < self.interval and steps < self.total:
            return
        self._last_draw = now
        text = self.line(steps, t)
        pad = max(self._shown - len(text), 0)
        self.stream.write("\r" + text + " " * pad)
        self.stream.flush()
        self._shown = len(text)
        self.draws += 1

    def close(self) -> None:
        """Erase the bar (the summary follows on stdout)."""
        if self._shown:
            self.stream.write("\r" + " " * self._shown + "\r")
            self.stream.flush()
            self._shown = 0


def wants_progress(forced: bool, stream: TextIO) -> bool:
    """Show a bar when asked for or when ``stream`` is a terminal."""
    if forced:
        return True
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False


# --------------------------------------------------------------------------
# writing
# --------------------------------------------------------------------------
def png_mask_bytes(mask: np.ndarray) -> bytes:
    """8-bit grey PNG bytes of a 2-D boolean mask: 0 outside, 255 inside."""
    from PIL import Image

    arr = np.asarray(mask)
    if arr.ndim != 2:
        raise ValueError(f"mask: expected a 2-D array, got shape {arr.shape}")
    buf = io.BytesIO()
    Image.fromarray(np.where(arr != 0, 255, 0).astype(np.uint8), mode="L").save(buf, format="PNG")
    return buf.getvalue()


def write_png_mask(path: str | os.PathLike[str], mask: np.ndarray) -> Path:
    """Write :func:`png_mask_bytes` atomically to ``path`` (folders are created)."""
    from engine.io.atomic import commit_files

    target = Path(os.fspath(path))
    commit_files({target: png_mask_bytes(mask)})
    return target


def operator_name() -> str:
    """Who runs the command: ``$USER``, else the login name the system reports, else ``""``."""
    name = os.environ.get("USER", "")
    if name:
        return name
    try:
        import getpass

        return getpass.getuser()
    except (KeyError, OSError, ImportError):
        return ""


def coarse_note(seg: "Segmentation") -> str:
    """What became of a block size the structure could not hold ("" when the one asked for was used)."""
    asked = seg.params.get("coarse_requested")
    if asked is None:
        return ""
    used = seg.params.get("coarse", 1)
    return (f"block size {asked} lowered to {used} (the outlined structure is too small for blocks of "
            f"{asked} pixels{'; finished at full resolution' if used == 1 else ''})")


def seconds(timings: dict) -> dict[str, float]:
    """The timing entries in seconds (keys ending in ``_s``), as plain floats."""
    return {k: float(v) for k, v in timings.items() if k.endswith("_s") and math.isfinite(float(v))}


def provenance(
    settings: Settings,
    seg: "Segmentation",
    *,
    slice_index: int,
    label_index: int = 1,
    extra_timings: dict[str, float] | None = None,
    command: str = PROG,
) -> dict:
    """The ``provenance`` dict of :func:`engine.io.save_result` for one outline.

    Parameters
    ----------
    settings : Settings
        The checked command-line settings (recorded in the history entry).
    seg : engine.segment.Segmentation
        The result (its ``params`` are the settings actually used).
    slice_index : int
        Slice of the volume the outline is on.
    label_index : int
        Label value in the mask.
    extra_timings : dict, optional
        More timings in seconds (loading, wall time).
    command : str
        Program name recorded in the history entry.
    """
    timings = seconds(dict(seg.timings))
    timings.update({k: float(v) for k, v in (extra_timings or {}).items()})
    parameters = dict(seg.params)
    parameters.setdefault("detail", settings.detail)  # the detail used (raised for thin structures)
    state = "converged" if seg.converged else "stopped at the step limit without converging"
    notes = (f"{state} after {seg.steps} steps (evolution time {seg.time:.6g}); "
             f"band nodes {seg.timings.get('nodes', 'n/a')}, band rebuilds {seg.timings.get('rebuilds', 'n/a')}")
    lowered = coarse_note(seg)
    if lowered:
        notes += f"; {lowered}"
    details = {
        "command": command,
        "image": settings.image,
        "slice": slice_index,
        "seeds": [list(s) for s in settings.seeds],
        "model": settings.model,
        "settings": {k: (list(v) if isinstance(v, tuple) else v) for k, v in settings.params.items()},
        "detail": settings.detail,
        "coarse": "auto" if settings.coarse is None else settings.coarse,
        "nodes": settings.nodes,
        "max_steps": settings.max_steps,
        "label": settings.label,
        "out": settings.out,
        "steps": int(seg.steps),
        "converged": bool(seg.converged),
    }
    return {
        "operator": operator_name(),
        "description": f"Outline of {settings.label} on slice {slice_index} grown by {command} "
                       f"(model {settings.model}).",
        "manual": False,
        "labels": [
            {
                "index": label_index,
                "slices": [
                    {
                        "slice": slice_index,
                        "model": settings.model,
                        "parameters": parameters,
                        "seeds": [list(s) for s in settings.seeds],
                        "steps": int(seg.steps),
                        "timings": timings,
                        "notes": notes,
                    }
                ],
            }
        ],
        "history": [{"action": "segment", "label": label_index, "slice": slice_index, "details": details}],
    }


# --------------------------------------------------------------------------
# the command
# --------------------------------------------------------------------------
def _pick_slice(volume: "Volume", requested: int | None) -> int:
    n = volume.shape[0]
    if requested is None:
        return n // 2
    if not 0 <= requested < n:
        raise UsageError(f"--slice {requested}: the image has {n} slice{'s' if n != 1 else ''} (0..{n - 1})")
    return requested


def _check_seeds(seeds: tuple[tuple[float, float, float], ...], shape: tuple[int, int]) -> None:
    rows, cols = shape
    for row, col, radius in seeds:
        if not (-0.5 <= row <= rows - 0.5 and -0.5 <= col <= cols - 0.5):
            raise UsageError(
                f"--seed {row:g},{col:g},{radius:g}: centre (row {row:g}, col {col:g}) lies outside the image "
                f"({rows} rows x {cols} columns: rows 0..{rows - 1}, columns 0..{cols - 1})"
            )


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split()) or type(exc).__name__


def fail(message: str, *, prog: str = PROG) -> int:
    """Print ``<prog>: error: <message>`` on one line of stderr; return 2."""
    print(f"{prog}: error: {' '.join(message.split())}", file=sys.stderr)
    return 2


def run(args: argparse.Namespace) -> int:
    """Run ``isotide segment``; return 0 (done), 2 (bad input) or 130 (interrupted)."""
    from engine.io import LoadError, SaveError

    try:
        settings = parse_settings(args)
        return _run(settings)
    except KeyboardInterrupt:
        print(f"\n{PROG}: interrupted", file=sys.stderr)
        return 130
    except (ValueError, LoadError, SaveError, OSError) as exc:
        return fail(_one_line(exc))


def _run(settings: Settings) -> int:
    from engine.io import load, save_result
    from engine.io.sidecar import OKABE_ITO
    from engine.segment import segment

    wall0 = time.perf_counter()
    path = settings.image
    volume = load(path)
    load_s = time.perf_counter() - wall0
    bad = volume.nonfinite or int(np.count_nonzero(~np.isfinite(volume.array)))
    if bad:
        raise UsageError(f"{path}: the image holds {bad} non-finite value{'s' if bad != 1 else ''} (NaN or infinity)")
    if settings.dicom_seg and volume.kind != "dicom":
        raise UsageError(f"--dicom-seg: needs DICOM input; {path} was read as {volume.kind}")
    k = _pick_slice(volume, settings.slice)
    image = volume.array[k]
    _check_seeds(settings.seeds, image.shape)
    spacing = tuple(float(s) for s in volume.spacing[1:])
    bar = None
    if wants_progress(settings.progress, sys.stderr):
        bar = TextProgress(settings.max_steps or 20000, stream=sys.stderr)
    try:
        seg = segment(image, list(settings.seeds), spacing=spacing, model=settings.model,
                      max_steps=settings.max_steps, detail=settings.detail, coarse=settings.coarse,
                      nodes=settings.nodes, progress=bar, **settings.params)
    finally:
        if bar is not None:
            bar.close()
    pixel_area = spacing[0] * spacing[1]
    written: list[Path] = []
    if settings.png:
        written.append(write_png_mask(settings.out, seg.mask))
    else:
        table = [{"index": 1, "name": settings.label, "abbreviation": settings.label, "color": OKABE_ITO[0]}]
        extra = {"load_s": load_s, "wall_s": time.perf_counter() - wall0}
        prov = provenance(settings, seg, slice_index=k, extra_timings=extra)
        paths = save_result(settings.out, seg.mask.astype(np.uint8), volume, label_table=table, provenance=prov,
                            dicom_seg=settings.dicom_seg, slice_index=k)
        written.extend(paths.values())
    wall = time.perf_counter() - wall0
    n = volume.shape[0]
    print(f"image: {volume.source}; slice {k} of {n}")
    for note in volume.warnings:
        print(f"note: {note}")
    print(f"steps: {seg.steps}")
    lowered = coarse_note(seg)
    if lowered:
        print(f"coarse start: {lowered}")
    print(f"evolution time: {seg.time:.4g} (front time; {seg.timings.get('evolve_s', 0.0):.2f} s evolving)")
    print(f"wall time: {wall:.2f} s")
    print(f"area: {seg.area_mm2:.1f} mm² ({int(np.count_nonzero(seg.mask))} pixels of {pixel_area:.4g} mm²)")
    print(f"converged: {'yes' if seg.converged else 'no (stopped at the step limit)'}")
    for p in written:
        print(f"wrote: {p}")
    return 0
