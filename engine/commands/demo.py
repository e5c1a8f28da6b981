"""``isotide demo --headless [--out DIR]``: outline two structures of an invented phantom, without the window.

The demo renders one axial slice of the invented abdomen phantom
(:func:`engine.phantoms.mr.build_abdomen`, 256 x 256 pixels of 1.5625 mm: the
height of slice 11 of ``sample_cases/abdomen_mr``, whose README documents the
seeds used here), grows a front with the default model from a preset seed in
each of two structures, and writes into the folder ``DIR`` (default
``./isotide-demo``):

- ``image.png``: the slice as a 16-bit grey PNG (the stored intensities);
- ``abdomen_dseg.nii.gz``, ``abdomen_dseg.tsv``, ``abdomen_dseg.json``: both
  outlines as one labelled result, saved through a :class:`engine.session.Session` (label 1 and
  2 in the order of :data:`STRUCTURES`), with provenance;
- ``overlay.png``: the slice (twice enlarged) with each outline drawn in its
  label colour (Okabe-Ito orange and sky blue) and a legend;
- ``summary.json``: the printed figures, machine-readable.

For each structure it prints the steps, the time, the area and the Dice
coefficient against the phantom's truth labels.

``isotide demo`` opens the window on the same study when a screen is
available (:mod:`app.verbs.demo_verb`); with ``--headless`` (``--no-window``
is the same) or without a screen it runs this module's headless demo.

Exit codes: 0 done, 2 the output folder cannot be written (one line on
stderr), 130 interrupted.
"""

from __future__ import annotations

import argparse
import io
import json
import math
import os
import sys
import time
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import TextIO

import numpy as np
from numpy.typing import NDArray

from engine.commands.progress import TextProgress, wants_progress
from engine.commands.segment import fail, seconds
from engine.commands.segment_options import one_line_errors

HELP = "outline two structures of an invented abdomen phantom and write the results"

PROG = "isotide demo"

#: Default output folder.
DEFAULT_OUT = "isotide-demo"

#: Slice of the 24-slice abdomen case the demo renders (its README lists the seeds).
DEMO_SLICE = 11

#: Label colours of the demo's two structures (Okabe & Ito, "Color Universal Design", 2008).
ORANGE = "#E69F00"
SKY_BLUE = "#56B4E9"


@dataclass(frozen=True)
class DemoStructure:
    """One structure the demo outlines.

    Attributes
    ----------
    name : str
        Structure name (as in :data:`engine.phantoms.mr.ABDOMEN_LABELS`).
    truth_label : int
        Its label in the phantom's truth.
    seed : (float, float, float)
        ``(row, col, radius_px)`` on the demo slice.
    color : str
        ``#RRGGBB`` of its outline.
    """

    name: str
    truth_label: int
    seed: tuple[float, float, float]
    color: str


#: The two structures, with the seeds of ``sample_cases/abdomen_mr/README.md`` (slice 11).
STRUCTURES: tuple[DemoStructure, ...] = (
    DemoStructure("aorta", 5, (147.0, 136.0, 3.0), ORANGE),
    DemoStructure("vertebral body", 6, (170.0, 127.0, 5.0), SKY_BLUE),
)


@dataclass(frozen=True)
class StructureResult:
    """Figures of one outlined structure."""

    name: str
    label: int
    seed: tuple[float, float, float]
    steps: int
    converged: bool
    evolution_time: float
    seconds: float
    area_mm2: float
    truth_area_mm2: float
    dice: float


@dataclass(frozen=True)
class DemoResult:
    """What :func:`run_demo` did."""

    folder: Path
    model: str
    slice_index: int
    spacing: tuple[float, float]
    structures: tuple[StructureResult, ...]
    files: tuple[Path, ...]
    wall_s: float


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``isotide demo``."""
    one_line_errors(parser, PROG)
    parser.add_argument("--out", default=DEFAULT_OUT, metavar="DIR",
                        help=f"folder for the demo's files (default: ./{DEFAULT_OUT})")
    parser.add_argument("--headless", "--no-window", dest="headless", action="store_true",
                        help="run without the window and write the results (also when there is no screen)")
    parser.add_argument("--operator", metavar="NAME",
                        help="who ran the demo, recorded in the sidecar (default: nobody is recorded)")
    parser.add_argument("--progress", action="store_true", help="show a progress bar on stderr even when redirected")


# --------------------------------------------------------------------------
# the phantom slice
# --------------------------------------------------------------------------
def demo_phantom(*, supersample: int = 4, noise_sigma: float = 18.0):
    """The demo's slice: one 256 x 256 axial slice of the invented abdomen.

    Rendered at the height of slice :data:`DEMO_SLICE` of the default
    24-slice, 144 mm stack of :func:`engine.phantoms.mr.build_abdomen` (6 mm
    thick, 1.5625 mm pixels), so its truth labels equal that slice's.

    Returns
    -------
    engine.phantoms.mr.Phantom
        With one slice (``image``/``truth`` of shape ``(1, 256, 256)``).
    """
    from engine.phantoms.mr import build_abdomen

    n, depth = 24, 144.0
    thickness = depth / n
    offset = (DEMO_SLICE - (n - 1) / 2) * thickness
    return build_abdomen((1, 256, 256), fov_mm=(thickness, 400.0, 400.0), offset_mm=offset,
                         supersample=supersample, noise_sigma=noise_sigma)


# --------------------------------------------------------------------------
# drawing
# --------------------------------------------------------------------------
def hex_rgb(color: str) -> tuple[int, int, int]:
    """``"#RRGGBB"`` -> ``(r, g, b)``."""
    text = color.lstrip("#")
    if len(text) != 6:
        raise ValueError(f"color: expected '#RRGGBB', got {color!r}")
    return int(text[0:2], 16), int(text[2:4], 16), int(text[4:6], 16)


def grey_rgb(image: NDArray[np.floating], *, scale: int = 2, percentiles: tuple[float, float] = (0.5, 99.5)
             ) -> NDArray[np.uint8]:
    """A 2-D image as an RGB picture, windowed to ``percentiles`` and enlarged ``scale`` times."""
    img = np.asarray(image, dtype=float)
    if img.ndim != 2:
        raise ValueError(f"image: expected a 2-D array, got shape {img.shape}")
    if scale < 1:
        raise ValueError(f"scale: expected >= 1, got {scale}")
    lo, hi = np.percentile(img, percentiles)
    grey = np.clip((img - lo) / max(hi - lo, 1e-12), 0.0, 1.0)
    grey = np.rint(grey * 255).astype(np.uint8)
    grey = np.repeat(np.repeat(grey, scale, axis=0), scale, axis=1)
    return np.repeat(grey[:, :, None], 3, axis=2)


def draw_contour(rgb: NDArray[np.uint8], contour: NDArray[np.floating], color: str, *, scale: int = 2,
                 thickness: int = 2, closed: bool = True) -> None:
    """Draw a sub-pixel polyline (pixel ``(row, col)`` of the original image) onto ``rgb`` in place.

    Points are mapped to the enlarged picture (pixel centre ``r`` goes to
    ``r * scale + (scale - 1) / 2``), the polyline is sampled every quarter
    pixel along its length and each sample paints a ``thickness`` square.
    """
    pts = np.asarray(contour, dtype=float).reshape(-1, 2)
    if len(pts) == 0:
        return
    pts = pts * scale + (scale - 1) / 2.0
    if closed and len(pts) > 1:
        pts = np.vstack([pts, pts[:1]])
    seg = np.hypot(*np.diff(pts, axis=0).T) if len(pts) > 1 else np.zeros(0)
    arc = np.concatenate([[0.0], np.cumsum(seg)])
    samples = np.linspace(0.0, arc[-1], max(int(math.ceil(arc[-1] / 0.25)) + 1, 1))
    rows = np.interp(samples, arc, pts[:, 0])
    cols = np.interp(samples, arc, pts[:, 1])
    lo = -(thickness // 2)
    offsets = np.arange(lo, lo + thickness)
    rr = (np.rint(rows)[:, None, None] + offsets[None, :, None]).astype(int)
    cc = (np.rint(cols)[:, None, None] + offsets[None, None, :]).astype(int)
    rr, cc = np.broadcast_arrays(rr, cc)
    keep = (rr >= 0) & (rr < rgb.shape[0]) & (cc >= 0) & (cc < rgb.shape[1])
    rgb[rr[keep], cc[keep]] = hex_rgb(color)


def overlay_png_bytes(image: NDArray[np.floating], outlines: Sequence[tuple[Sequence[NDArray[np.floating]], str, str]],
                      *, scale: int = 2) -> bytes:
    """PNG bytes of ``image`` with outlines drawn and a legend.

    Parameters
    ----------
    image : 2-D array
        The slice.
    outlines : sequence of (contours, color, legend text)
        Each structure's contours (pixel ``(row, col)`` polylines), its
        ``#RRGGBB`` colour and its legend line.
    scale : int
        Enlargement of the picture.
    """
    from PIL import Image, ImageDraw, ImageFont

    rgb = grey_rgb(image, scale=scale)
    for contours, color, _ in outlines:
        for contour in contours:
            draw_contour(rgb, contour, color, scale=scale)
    picture = Image.fromarray(rgb, mode="RGB")
    draw = ImageDraw.Draw(picture)
    font = ImageFont.load_default()
    y = 6
    for _, color, text in outlines:
        box = draw.textbbox((22, y), text, font=font)
        draw.rectangle((4, y - 2, box[2] + 4, box[3] + 2), fill=(0, 0, 0))
        draw.rectangle((8, y + 1, 17, box[3] - 1), fill=hex_rgb(color))
        draw.text((22, y), text, fill=hex_rgb(color), font=font)
        y = box[3] + 8
    buf = io.BytesIO()
    picture.save(buf, format="PNG")
    return buf.getvalue()


def grey16_png_bytes(image: NDArray[np.floating]) -> bytes:
    """16-bit grey PNG bytes of an integer-valued image in 0..65535."""
    from PIL import Image

    arr = np.asarray(image)
    if arr.ndim != 2:
        raise ValueError(f"image: expected a 2-D array, got shape {arr.shape}")
    buf = io.BytesIO()
    Image.fromarray(np.clip(np.rint(arr), 0, 65535).astype(np.uint16)).save(buf, format="PNG")
    return buf.getvalue()


# --------------------------------------------------------------------------
# the demo
# --------------------------------------------------------------------------
def run_demo(out: str | os.PathLike[str] = DEFAULT_OUT, *, model: str = "region",
             progress_stream: TextIO | None = None, operator: str = "") -> DemoResult:
    """Render the demo slice, outline :data:`STRUCTURES`, write the files; return the figures.

    Parameters
    ----------
    out : str or path-like
        Output folder (created when missing).
    model : str
        Speed model of both fronts (default: the engine's default).
    progress_stream : text stream, optional
        Where to draw a progress bar per structure (none when None).
    operator : str
        Who ran it, for the sidecar (default: nobody is recorded).

    Returns
    -------
    DemoResult
        Steps, times, areas and Dice per structure, and the files written.
    """
    from engine.commands import interrupts
    from engine.io import SaveError, load
    from engine.io.atomic import commit_files
    from engine.analysis.metrics import dice
    from engine.segmenter import Segmenter
    from engine.session import Session

    wall0 = time.perf_counter()
    folder = Path(os.fspath(out))
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise SaveError(f"{folder}: cannot create the output folder ({exc.strerror or exc})") from None
    phantom = demo_phantom()
    image_path = folder / "image.png"
    commit_files({image_path: grey16_png_bytes(phantom.image[0])})
    spacing = (float(phantom.spacing[1]), float(phantom.spacing[2]))
    volume = load(image_path, spacing=spacing)
    image = volume.array[0]
    truth = phantom.truth[0]
    pixel_mm2 = spacing[0] * spacing[1]
    session = Session(volume, operator=operator)
    results: list[StructureResult] = []
    outlines: list[tuple[list[NDArray[np.floating]], str, str]] = []
    for index, structure in enumerate(STRUCTURES, start=1):
        bar = TextProgress(20000, stream=progress_stream, label=structure.name) if progress_stream else None

        def on_step(steps: int, t: float, bar: TextProgress | None = bar) -> None:
            interrupts.check()  # a safe point (see engine.commands.interrupts)
            if bar is not None:
                bar(steps, t)

        t0 = time.perf_counter()
        label = session.add_label(structure.name, structure.color)
        try:
            runner = Segmenter(image, [structure.seed], spacing=spacing, model=model)
            runner.run(progress=on_step)
            seg = runner.result()
        finally:
            if bar is not None:
                bar.close()
        elapsed = time.perf_counter() - t0
        reference = truth == structure.truth_label
        score = float(dice(seg.mask, reference))
        result = StructureResult(
            name=structure.name, label=index, seed=structure.seed, steps=int(seg.steps),
            converged=bool(seg.converged), evolution_time=float(seg.time), seconds=elapsed,
            area_mm2=float(seg.area_mm2), truth_area_mm2=float(np.count_nonzero(reference)) * pixel_mm2,
            dice=score,
        )
        results.append(result)
        if not seg.vanished and seg.mask.any():  # a front that vanished leaves the label without an outline
            session.add_outline(runner.front(), label=label.index, slice=0, record={
                "model": model, "parameters": dict(seg.params), "seeds": [list(structure.seed)],
                "steps": int(seg.steps), "timings": seconds(dict(seg.timings)),
                "notes": f"{'converged' if seg.converged else 'not converged'}; Dice {score:.4f} against the "
                         f"phantom's truth label {structure.truth_label}",
            }, details={"command": PROG, "seeds": [list(structure.seed)], "model": model, "steps": int(seg.steps),
                        "converged": bool(seg.converged)})
        outlines.append((seg.contours, structure.color, f"{structure.name}  Dice {score:.3f}"))
    interrupts.check()
    paths = session.save(str(folder / "abdomen"), checkpoint=interrupts.check,
                         description=f"{PROG}: two outlines on an invented abdomen phantom slice (no patient).")
    overlay_path = folder / "overlay.png"
    summary_path = folder / "summary.json"
    wall = time.perf_counter() - wall0
    summary = {
        "phantom": f"invented abdomen, slice {DEMO_SLICE} height, {image.shape[0]} x {image.shape[1]}",
        "spacing_mm": list(spacing),
        "model": model,
        "structures": [asdict(r) for r in results],
        "wall_s": wall,
    }
    commit_files({
        overlay_path: overlay_png_bytes(image, outlines),
        summary_path: (json.dumps(summary, indent=2) + "\n").encode("utf-8"),
    })
    files = (image_path, *paths.values(), overlay_path, summary_path)
    return DemoResult(folder, model, DEMO_SLICE, spacing, tuple(results), files, time.perf_counter() - wall0)


def run(args: argparse.Namespace) -> int:
    """Run ``isotide demo``; return 0, 2 (cannot write) or 130 (interrupted)."""
    from engine.commands import interrupts
    from engine.io import SaveError

    stream = sys.stderr if wants_progress(bool(getattr(args, "progress", False)), sys.stderr) else None
    try:
        operator = "" if getattr(args, "operator", None) is None else " ".join(str(args.operator).split())
        result = run_demo(args.out, progress_stream=stream, operator=operator)
    except KeyboardInterrupt:
        return interrupts.report(PROG)
    except (ValueError, SaveError, OSError) as exc:
        return fail(str(exc), prog=PROG)
    print(f"Isotide demo: invented abdomen phantom (no patient), one axial slice of "
          f"{result.spacing[0]:g} x {result.spacing[1]:g} mm pixels, model {result.model}")
    for r in result.structures:
        state = "converged" if r.converged else "not converged"
        print(f"{r.name}: {r.steps} steps ({state}), evolution time {r.evolution_time:.4g}, "
              f"{r.seconds:.2f} s, area {r.area_mm2:.1f} mm² (truth {r.truth_area_mm2:.1f} mm²), Dice {r.dice:.3f}")
    for p in result.files:
        print(f"wrote: {p}")
    print(f"wall time: {result.wall_s:.2f} s")
    return 0
