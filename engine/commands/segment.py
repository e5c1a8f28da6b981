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
    actually used, seeds, steps, timings, the operator given with
    ``--operator`` (none otherwise), and a ``segment`` history entry with
    the command-line settings, the image recorded relative to the result's
    folder) and, with ``--dicom-seg`` for DICOM input, ``NAME.seg.dcm``.
    ``DIR/NAME_dseg.nii.gz`` and ``DIR/NAME_dseg.json`` are accepted as
    ``DIR/NAME``. A result under review (Submitted, Approved, Returned) is
    only replaced with ``--new-version``, which keeps its review history in
    the new sidecar. The files are replaced all together or not at all
    (:mod:`engine.io.atomic`).
``--out FILE.png``
    An 8-bit grey PNG of the slice's shape: 0 outside, 255 inside. No
    sidecar is written.

The command prints the steps taken, the evolution time reached, the wall
time, the area in mm² and whether the front converged; when the block size
of ``--coarse`` is more than the outlined structure can hold, the block
size it was lowered to (also in the sidecar's parameters as ``coarse`` and
``coarse_requested``, and in its notes). With ``--progress``,
or whenever stderr is a terminal, a one-line text bar on stderr shows the
files loaded, then the steps taken out of the step limit (fronts usually
converge long before it).

A front that vanished (shrank to nothing), filled the whole image or holds
no pixel is a failure: one line on stderr and nothing written, unless
``--save-anyway``.

Exit codes (also in ``--help``): see :data:`EPILOG`.
"""

from __future__ import annotations

import argparse
import io
import math
import os
import sys
import time
import warnings
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from engine.commands.progress import LoadingBar, TextProgress, wants_progress
from engine.commands.segment_options import PROG, Settings, UsageError, as_usage, parse_settings
from engine.commands.segment_options import add_arguments, one_line_errors  # noqa: F401 - the verb's interface
from engine.validation import check_seed, check_slice

if TYPE_CHECKING:
    from engine.front import Front
    from engine.io import Volume
    from engine.segment import Segmentation
    from engine.segmenter import Segmenter
    from engine.validation.limits import SettingLimitError

HELP = "grow a front from seed disks on one slice and save the outline"

EPILOG = """exit codes:
  0    done: the outline converged, or stopped at the step limit
  2    bad input: one line on stderr naming the flag or file
  3    no outline: the front vanished, filled the whole image or holds no pixel;
       nothing is written unless --save-anyway
  130  interrupted (Ctrl-C); a result being saved is the whole previous one or
       the whole new one, never a mix"""

#: Exit code of a run that ended without an outline.
NO_OUTLINE = 3

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


def write_png_mask(path: str | os.PathLike[str], mask: np.ndarray, *,
                   checkpoint: Callable[[], None] | None = None) -> Path:
    """Write :func:`png_mask_bytes` atomically to ``path`` (folders are created; see
    :func:`engine.io.atomic.commit_files` for ``checkpoint``)."""
    from engine.io.atomic import commit_files

    target = Path(os.fspath(path))
    commit_files({target: png_mask_bytes(mask)}, checkpoint=checkpoint)
    return target


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
    from engine.io.sidecar import recorded_path

    timings = seconds(dict(seg.timings))
    timings.update({k: float(v) for k, v in (extra_timings or {}).items()})
    parameters = dict(seg.params)
    parameters.setdefault("detail", settings.detail)  # the detail used (raised for thin structures)
    state = ("converged" if seg.converged else outline_failure(seg) or
             "stopped at the step limit without converging")
    notes = (f"{state} after {seg.steps} steps (evolution time {seg.time:.6g}); "
             f"band nodes {seg.timings.get('nodes', 'n/a')}, band rebuilds {seg.timings.get('rebuilds', 'n/a')}")
    lowered = coarse_note(seg)
    if lowered:
        notes += f"; {lowered}"
    details = {
        "command": command,
        "image": recorded_path(settings.image, Path(os.path.abspath(settings.out)).parent),
        "slice": slice_index,
        "seeds": [list(s) for s in settings.seeds],
        "model": settings.model,
        "settings": {k: (list(v) if isinstance(v, tuple) else v) for k, v in settings.params.items()},
        "detail": settings.detail,
        "coarse": "auto" if settings.coarse is None else settings.coarse,
        "nodes": settings.nodes,
        "max_steps": settings.max_steps,
        "label": settings.label,
        "out": Path(settings.out).name,
        "steps": int(seg.steps),
        "converged": bool(seg.converged),
    }
    return {
        "operator": settings.operator,
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
    return as_usage(check_slice, requested, n, name="--slice")


def _check_seeds(seeds: tuple[tuple[float, float, float], ...], shape: tuple[int, int]) -> None:
    for row, col, radius in seeds:
        as_usage(check_seed, row, col, radius, shape, name=f"--seed {row:g},{col:g},{radius:g}")


def _on_border(seed: tuple[float, float, float], shape: tuple[int, int]) -> bool:
    """True when the seed's centre lies on the outermost pixels of the image."""
    row, col, _ = seed
    return min(row, col) < 0.5 or row > shape[0] - 1.5 or col > shape[1] - 1.5


def _border_seed_note(seeds: tuple[tuple[float, float, float], ...], shape: tuple[int, int]) -> str:
    for seed in seeds:
        if _on_border(seed, shape):
            return (f"; the seed {seed[0]:g},{seed[1]:g},{seed[2]:g} lies on the image border ({shape[0]} x "
                    f"{shape[1]} pixels): move its centre at least 1 pixel inside")
    return ""


def outline_failure(seg: "Segmentation") -> str:
    """What went wrong when ``seg`` holds no outline (vanished, filled the image, no pixel), else ``""``."""
    if seg.vanished and bool(np.all(seg.mask)):
        return f"the outline filled the whole image after {seg.steps} steps: no boundary stopped it"
    if seg.vanished:
        return f"the outline vanished after {seg.steps} steps: it shrank to nothing"
    if seg.empty:
        return f"the outline holds no pixel after {seg.steps} steps"
    return ""


#: Library words in messages -> the command line's flags.
_CLI_WORDS = (
    ("series=...", "--series KEY"),
    ("a larger max_bytes", "a larger --memory-limit MIB"),
    ("(new_version=True", "(--new-version"),
    ("under another name", "under another --out name"),
)


def cli_words(message: str) -> str:
    """``message`` with the library's keyword names replaced by the command line's flags."""
    for library, flag in _CLI_WORDS:
        message = message.replace(library, flag)
    return message


def _limit_message(exc: "SettingLimitError", path: str) -> str:
    flags = {"outline_averaging": "--outline-averaging", "edge_sigma": "--edge-sigma"}
    if exc.name in flags:
        return f"{flags[exc.name]} {exc.value:g}: {exc.reason}"
    if exc.name == "spacing":
        return f"{path}: {exc.reason}"
    return str(exc)


def _one_line(exc: BaseException) -> str:
    return " ".join(cli_words(str(exc)).split()) or type(exc).__name__


def fail(message: str, *, prog: str = PROG) -> int:
    """Print ``<prog>: error: <message>`` on one line of stderr; return 2."""
    print(f"{prog}: error: {' '.join(message.split())}", file=sys.stderr)
    return 2


def run(args: argparse.Namespace) -> int:
    """Run ``isotide segment``; return 0 (done), 2 (bad input), 3 (no outline) or 130 (interrupted)."""
    from engine.commands import interrupts
    from engine.io import LoadError, SaveError

    try:
        settings = parse_settings(args)
        return _run(settings)
    except KeyboardInterrupt:
        return interrupts.report(PROG)
    except (ValueError, LoadError, SaveError, OSError) as exc:
        return fail(_one_line(exc))


def save_through_session(settings: Settings, volume: "Volume", front: "Front", prov: dict, *, slice_index: int,
                         checkpoint: Callable[[], None] | None = None) -> dict[str, Path]:
    """Save the outline as the window and a batch do: one label of a :class:`engine.session.Session`,
    the outline committed as a ``segment`` command whose details are the run's, the record built there."""
    from engine.analysis.contours import BandCutWarning
    from engine.io.sidecar import OKABE_ITO
    from engine.session import Session

    session = Session(volume, operator=settings.operator)
    label = session.add_label(settings.label, OKABE_ITO[0])
    (record,) = prov["labels"][0]["slices"]
    (entry,) = prov["history"]
    with warnings.catch_warnings():
        # reading the outline again: an open contour at the image's border was noted (or left out) already
        warnings.simplefilter("ignore", BandCutWarning)
        session.add_outline(front, label=label.index, slice=slice_index,
                            record={k: v for k, v in record.items() if k != "slice"}, details=entry["details"])
    return session.save(settings.out, dicom_seg=settings.dicom_seg, new_version=settings.new_version,
                        description=prov["description"], checkpoint=checkpoint)


def _evolve(settings: Settings, image: np.ndarray, spacing: tuple[float, float],
            path: str) -> tuple["Segmentation", "Segmenter", list[str]]:
    """:func:`engine.segment.segment`'s loop with a bar, Ctrl-C taken at the end of a step, and CLI messages.

    Returns the result, the runner (whose front the session commits) and the
    library's warnings as notes (one line each);
    that open contours leave the band is expected where the outline meets
    the image's border, and left out there.
    """
    from engine.commands import interrupts
    from engine.analysis.contours import BandCutWarning
    from engine.front import FrontVanished
    from engine.segmenter import Segmenter
    from engine.validation.limits import SettingLimitError

    bar = TextProgress(settings.max_steps or 20000, stream=sys.stderr) if wants_progress(
        settings.progress, sys.stderr) else None

    def on_step(steps: int, t: float) -> None:
        interrupts.check()  # a safe point: no thread of the front's tree queries is running
        if bar is not None:
            bar(steps, t)

    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            runner = Segmenter(image, list(settings.seeds), spacing=spacing, model=settings.model,
                               max_steps=settings.max_steps, detail=settings.detail, coarse=settings.coarse,
                               nodes=settings.nodes, **settings.params)
            runner.run(progress=on_step)
            seg = runner.result()
    except SettingLimitError as exc:
        raise UsageError(_limit_message(exc, path)) from None
    except FrontVanished as exc:
        note = _border_seed_note(settings.seeds, image.shape)
        if note:
            raise UsageError(f"the front cannot start{note}") from None
        raise UsageError(f"{exc}") from None
    finally:
        if bar is not None:
            bar.close()
    m = seg.mask
    at_border = bool(m[0].any() or m[-1].any() or m[:, 0].any() or m[:, -1].any())
    notes: list[str] = []
    for w in caught:
        text = " ".join(str(w.message).split())
        if not (at_border and issubclass(w.category, BandCutWarning)) and text not in notes:
            notes.append(text)
    return seg, runner, notes


def _run(settings: Settings) -> int:
    from engine.commands import interrupts
    from engine.io import load, save_result
    from engine.io.sidecar import OKABE_ITO
    from engine.io.writer import check_replaceable

    wall0 = time.perf_counter()
    path = settings.image
    loading = LoadingBar(stream=sys.stderr) if wants_progress(settings.progress, sys.stderr) else None

    def on_file(done: int, total: int) -> None:
        interrupts.check()
        if loading is not None:
            loading(done, total)

    options = {} if settings.max_bytes is None else {"max_bytes": settings.max_bytes}
    try:
        volume = load(path, series=settings.series, progress=on_file, **options)
    finally:
        if loading is not None:
            loading.close()
    interrupts.check()
    load_s = time.perf_counter() - wall0
    bad = volume.nonfinite or int(np.count_nonzero(~np.isfinite(volume.array)))
    if bad:
        raise UsageError(f"{path}: the image holds {bad} non-finite value{'s' if bad != 1 else ''} (NaN or infinity)")
    if settings.dicom_seg and volume.kind != "dicom":
        raise UsageError(f"--dicom-seg: needs DICOM input; {path} was read as {volume.kind}")
    k = _pick_slice(volume, settings.slice)
    image = volume.array[k]
    _check_seeds(settings.seeds, image.shape)
    if not settings.png:  # refuse before a long run what the save would refuse after it
        check_replaceable(settings.out, new_version=settings.new_version)
    spacing = (float(volume.spacing[1]), float(volume.spacing[2]))
    seg, runner, notes = _evolve(settings, image, spacing, path)
    failure = outline_failure(seg)
    if failure and not settings.save_anyway:
        note = _border_seed_note(settings.seeds, image.shape)
        print(f"{PROG}: no outline: {failure}{note}; nothing written (--save-anyway writes it)", file=sys.stderr)
        return NO_OUTLINE
    interrupts.check()
    pixel_area = spacing[0] * spacing[1]
    written: list[Path] = []
    if settings.png:
        written.append(write_png_mask(settings.out, seg.mask, checkpoint=interrupts.check))
    else:
        extra = {"load_s": load_s, "wall_s": time.perf_counter() - wall0}
        prov = provenance(settings, seg, slice_index=k, extra_timings=extra)
        if failure:  # --save-anyway: there is no outline to commit, only the mask as it ended
            table = [{"index": 1, "name": settings.label, "abbreviation": settings.label, "color": OKABE_ITO[0]}]
            paths = save_result(settings.out, seg.mask.astype(np.uint8), volume, label_table=table,
                                provenance=prov, dicom_seg=settings.dicom_seg, slice_index=k,
                                new_version=settings.new_version, checkpoint=interrupts.check)
        else:
            paths = save_through_session(settings, volume, runner.front(), prov, slice_index=k,
                                         checkpoint=interrupts.check)
        written.extend(paths.values())
    wall = time.perf_counter() - wall0
    n = volume.shape[0]
    print(f"image: {volume.source}; slice {k} of {n}")
    for note in [*volume.warnings, *notes]:
        print(f"note: {note}")
    print(f"steps: {seg.steps}")
    lowered = coarse_note(seg)
    if lowered:
        print(f"coarse start: {lowered}")
    print(f"evolution time: {seg.time:.4g} (front time; {seg.timings.get('evolve_s', 0.0):.2f} s evolving)")
    print(f"wall time: {wall:.2f} s")
    print(f"area: {seg.area_mm2:.1f} mm² ({int(np.count_nonzero(seg.mask))} pixels of {pixel_area:.4g} mm²)")
    converged = "yes" if seg.converged else f"no ({failure or 'stopped at the step limit'})"
    print(f"converged: {converged}")
    for p in written:
        print(f"wrote: {p}")
    return NO_OUTLINE if failure else 0
