"""Command-line options of ``isotide segment``: declared, then checked into :class:`Settings`.

Values are kept as text by argparse and checked here, so that every bad
value gives exit code 2 and one line naming the flag.
"""

from __future__ import annotations

import argparse
import os
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TypeVar

from engine import validation

__all__ = ["UsageError", "as_usage", "Settings", "add_arguments", "one_line_errors", "parse_settings", "parse_seed",
           "parse_window", "result_prefix"]

PROG = "isotide segment"

_RESULT_SUFFIXES = ("_dseg.nii.gz", "_dseg.json", "_dseg.tsv", ".seg.dcm")

T = TypeVar("T")


class UsageError(ValueError):
    """A command-line value is wrong; the message names the flag."""


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
                        help="block size of a coarse stage (auto: the block the image resolves, none on an image "
                             "that resolves its pixels; 1: none; a size the outlined structure cannot hold is "
                             "lowered)")
    parser.add_argument("--max-steps", metavar="N", help="step limit (default 20000)")
    parser.add_argument("--slice", metavar="K", help="slice of a volume (default: the middle slice)")
    parser.add_argument("--label", default="structure", metavar="NAME", help="label name (default: structure)")
    parser.add_argument("--out", metavar="OUT",
                        help="DIR/NAME for the full result, or FILE.png for a mask picture (0 outside, 255 inside)")
    parser.add_argument("--dicom-seg", action="store_true", help="also write NAME.seg.dcm (DICOM input only)")
    parser.add_argument("--series", metavar="KEY",
                        help="which image stack to load when IMAGE holds several (the keys are listed when needed)")
    parser.add_argument("--memory-limit", metavar="MIB",
                        help="largest volume to load, in MiB of 32-bit values (default 4096)")
    parser.add_argument("--new-version", action="store_true",
                        help="replace a result under review (Submitted, Approved, Returned) by a new Draft version; "
                             "its review history is kept in the new sidecar")
    parser.add_argument("--save-anyway", action="store_true",
                        help="write the result even when the front vanished, filled the image or holds no pixel")
    parser.add_argument("--operator", metavar="NAME",
                        help="who made the outline, recorded in the sidecar (default: nobody is recorded)")
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
    series: str | None = None
    max_bytes: int | None = None  # None: the loader's default
    new_version: bool = False
    save_anyway: bool = False
    operator: str = ""


def as_usage(check: Callable[..., T], *args: Any, **kwargs: Any) -> T:
    """``check(*args, **kwargs)`` with its ``ValueError`` raised as :class:`UsageError` (exit code 2)."""
    try:
        return check(*args, **kwargs)
    except UsageError:
        raise
    except ValueError as exc:
        raise UsageError(str(exc)) from None


def parse_seed(text: str) -> tuple[float, float, float]:
    """``"ROW,COL,RADIUS"`` -> ``(row, col, radius_px)`` (:func:`engine.validation.parse_seed`).

    Raises
    ------
    UsageError
        Not three finite numbers, a radius <= 0, or a 3-D seed.
    """
    if str(text).count(",") == 3:
        raise UsageError(
            f"--seed {text!r}: 3-D seeds (SLICE,ROW,COL,RADIUS) are not supported; "
            "choose the slice with --slice K and give ROW,COL,RADIUS"
        )
    return as_usage(validation.parse_seed, text, name="--seed")  # type: ignore[return-value]


def parse_window(text: str) -> tuple[float, float]:
    """``"LOW,HIGH"`` -> ``(low, high)`` with ``low < high``."""
    return as_usage(validation.parse_window, text, name="--window")


def _number(text: str, flag: str, *, minimum: float | None = None, strict: bool = False) -> float:
    return as_usage(validation.parse_number, text, name=flag, minimum=minimum, strict=strict)


def _integer(text: str, flag: str, *, minimum: int) -> int:
    return as_usage(validation.parse_whole, text, name=flag, minimum=minimum)


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
    from engine.front import MODELS

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
    detail = as_usage(validation.check_detail, _integer(args.detail, "--detail", minimum=1), name="--detail")
    nodes = as_usage(validation.check_nodes, str(args.nodes).strip().lower(), name="--nodes")
    coarse = None
    if str(args.coarse).strip().lower() != "auto":
        coarse = as_usage(validation.check_coarse, _integer(args.coarse, "--coarse", minimum=1), nodes=nodes,
                        name="--coarse", automatic="auto")
    max_steps = None if args.max_steps is None else _integer(args.max_steps, "--max-steps", minimum=1)
    slice_index = None if args.slice is None else _integer(args.slice, "--slice", minimum=0)
    label = as_usage(validation.check_label_name, args.label, name="--label")
    if not args.out:
        raise UsageError("--out: required (DIR/NAME for the result files, or FILE.png)")
    png = str(args.out).lower().endswith(".png")
    out = str(args.out) if png else result_prefix(str(args.out))
    if png and args.dicom_seg:
        raise UsageError("--dicom-seg: needs --out DIR/NAME, not a .png file")
    if png and args.new_version:
        raise UsageError("--new-version: needs --out DIR/NAME (a .png file has no review)")
    blocked = _file_on_path(Path(out).parent)
    if blocked is not None:
        raise UsageError(f"--out {args.out!r}: {blocked} is a file, not a folder")
    max_bytes = None
    if args.memory_limit is not None:
        max_bytes = int(_number(args.memory_limit, "--memory-limit", minimum=0.0, strict=True) * 2**20)
    operator = "" if args.operator is None else str(args.operator).strip()
    if args.operator is not None and (not operator or "\n" in operator):
        raise UsageError("--operator: expected a non-empty one-line name")
    series = None if args.series is None else str(args.series)
    return Settings(
        image=str(args.image), seeds=seeds, model=model, params=params, detail=detail, coarse=coarse,
        nodes=nodes, max_steps=max_steps, slice=slice_index, label=label, out=out, png=png,
        dicom_seg=bool(args.dicom_seg), progress=bool(args.progress), series=series, max_bytes=max_bytes,
        new_version=bool(args.new_version), save_anyway=bool(args.save_anyway), operator=operator,
    )


def _file_on_path(folder: Path) -> Path | None:
    """The first existing regular file among ``folder`` and its parents (``None`` when there is none)."""
    for parent in [folder, *folder.parents]:
        if parent.exists():
            return None if parent.is_dir() else parent
    return None
