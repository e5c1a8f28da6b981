"""The public readers: :func:`load` and :func:`list_series`.

The file kind is recognised by content (magic bytes), not by name: DICOM Part
10 (``DICM`` after the 128-byte preamble), NIfTI-1/2 (also gzipped), PNG, TIFF
and NPY. Folders and DICOMDIRs are searched for DICOM images.
"""

from __future__ import annotations

import gzip
import math
import os
import struct
from collections.abc import Sequence
from pathlib import Path

from engine.io.dicom_reader import load_stack
from engine.io.dicom_scan import choose_stack, scan_path
from engine.io.errors import LoadError, SeriesSelectionError
from engine.io.nifti_reader import load_nifti, nifti_info
from engine.io.raster_reader import RASTER_KINDS, load_raster, raster_info
from engine.io.volume import DEFAULT_MAX_BYTES, Progress, SeriesInfo, Volume

__all__ = ["load", "list_series", "sniff"]

_UNRECOGNISED = (
    "unrecognised file: not a DICOM Part 10 file (no 128-byte preamble with 'DICM' prefix; "
    "files without file meta information are not read), nor NIfTI-1/2, PNG, TIFF or NPY"
)


#: What a file's name says it is (the content decides; the name only sharpens the message).
_NAMED = ((".nii.gz", "a gzipped NIfTI image"), (".nii", "a NIfTI image"), (".png", "a PNG image"),
          (".tiff", "a TIFF image"), (".tif", "a TIFF image"), (".npy", "a NumPy array"),
          (".dcm", "a DICOM file"), (".gz", "gzipped data"))


def _unrecognised(path: str) -> str:
    """Why ``path`` was not read: empty, damaged gzip, or not what its name says, and what is read."""
    try:
        size = os.path.getsize(path)
        with open(path, "rb") as fh:
            gzipped = fh.read(2) == b"\x1f\x8b"
    except OSError:
        size, gzipped = -1, False
    if size == 0:
        return "the file is empty (0 bytes)"
    name = os.path.basename(path).lower()
    claimed = next((what for suffix, what in _NAMED if name.endswith(suffix)), None)
    if gzipped:
        try:
            with gzip.open(path, "rb") as gz:
                while gz.read(1 << 20):
                    pass
            reason = "its gzipped content is not an image read here"
        except (OSError, EOFError) as exc:
            reason = f"its gzip data is damaged or cut short ({exc})"
    elif claimed == "a DICOM file":
        reason = ("it has no 128-byte preamble with the 'DICM' prefix (files without file meta "
                  "information are not read)")
    elif claimed is not None:
        reason = "its content is not one"
    else:
        return _UNRECOGNISED
    named = f"named as {claimed}, but " if claimed is not None else ""
    return (f"unrecognised file: {named}{reason} (read are DICOM Part 10 with its preamble, NIfTI-1/2, "
            "PNG, TIFF and NPY, recognised by content)")


def _nifti_magic(head: bytes) -> bool:
    if len(head) >= 348:
        for endian in "<>":
            size = struct.unpack(endian + "i", head[:4])[0]
            if size == 348 and head[344:347] in (b"n+1", b"ni1"):
                return True
            if size == 540 and head[4:7] in (b"n+2", b"ni2"):
                return True
    return False


def sniff(path: str | Path) -> str:
    """Recognise a file by its first bytes.

    Returns
    -------
    str
        ``"dicom"``, ``"nifti"``, ``"png"``, ``"tiff"``, ``"npy"`` or ``"unknown"``.

    Raises
    ------
    LoadError
        The file cannot be opened.
    """
    try:
        with open(path, "rb") as fh:
            head = fh.read(540)
    except PermissionError:
        raise LoadError(path, "cannot be read: permission denied") from None
    except OSError as exc:
        raise LoadError(path, f"cannot be read ({exc.strerror or exc})") from None
    # DICOM first: a DICOM preamble may itself look like a TIFF header.
    if head[128:132] == b"DICM":
        return "dicom"
    if head[:8] == b"\x89PNG\r\n\x1a\n":
        return "png"
    if head[:4] in (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+"):
        return "tiff"
    if head[:6] == b"\x93NUMPY":
        return "npy"
    if head[:2] == b"\x1f\x8b":
        try:
            with gzip.open(path, "rb") as gz:
                head = gz.read(540)
        except (OSError, EOFError):
            return "unknown"
    if _nifti_magic(head):
        return "nifti"
    return "unknown"


class _Reporter:
    """Turns the readers' two phases into one monotone ``progress(done, total)``."""

    def __init__(self, progress: Progress | None) -> None:
        self.progress = progress
        self.base = 0
        self.total = 0
        self.done = 0

    def emit(self, done: int, total: int) -> None:
        self.done, self.total = max(self.done, done), max(total, 1)
        if self.progress is not None:
            self.progress(min(self.done, self.total), self.total)

    def scan_tick(self, done: int, files: int) -> None:
        # While scanning, assume one frame per file for the total.
        self.emit(done, 2 * files)

    def start_reading(self, base: int) -> None:
        self.base = base

    def on_total(self, frames: int) -> None:
        self.total = self.base + frames
        self.emit(self.base, self.total)

    def tick(self, frames_done: int) -> None:
        self.emit(self.base + frames_done, self.total)

    def finish(self) -> None:
        self.emit(self.total, self.total)


def _check_args(path: object, series: object, spacing: object, progress: object, max_bytes: object) -> tuple:
    if not isinstance(path, (str, os.PathLike)):
        raise ValueError(f"path: expected a str or path-like, got {type(path).__name__}")
    if series is not None and (isinstance(series, bool) or not isinstance(series, (str, int))):
        raise ValueError(f"series: expected a key, a SeriesInstanceUID or an index, got {series!r}")
    if spacing is not None:
        try:
            values = tuple(float(s) for s in spacing)  # type: ignore[union-attr]
        except (TypeError, ValueError):
            raise ValueError(f"spacing: expected 2 or 3 numbers in mm, got {spacing!r}") from None
        if len(values) not in (2, 3) or not all(math.isfinite(v) and v > 0 for v in values):
            raise ValueError(f"spacing: expected 2 or 3 positive numbers in mm, got {spacing!r}")
        spacing = values
    if progress is not None and not callable(progress):
        raise ValueError("progress: expected a callable progress(done, total)")
    if isinstance(max_bytes, bool) or not isinstance(max_bytes, int) or max_bytes <= 0:
        raise ValueError(f"max_bytes: expected a positive int, got {max_bytes!r}")
    return os.fspath(path), spacing


def load(
    path: str | os.PathLike[str],
    *,
    series: str | int | None = None,
    spacing: Sequence[float] | None = None,
    progress: Progress | None = None,
    max_bytes: int = DEFAULT_MAX_BYTES,
) -> Volume:
    """Load an image file, folder or DICOMDIR into a :class:`~engine.io.Volume`.

    Parameters
    ----------
    path : str or path-like
        A DICOM file (single- or multi-frame), a folder of DICOM files (searched
        to any depth, any file names; other files skipped with a reason), a
        DICOMDIR, a NIfTI-1/2 file (``.nii``, ``.nii.gz``, ``.hdr``), or a PNG,
        TIFF or NPY picture/array.
    series : str or int, optional
        Which stack to load when ``path`` holds several: a key or index from
        :func:`list_series`, or a SeriesInstanceUID that names one stack.
    spacing : sequence of 2 or 3 float, optional
        ``(row, col)`` or ``(slice, row, col)`` in mm for files without pixel
        spacing (PNG, TIFF, NPY, DICOM objects without PixelSpacing). A
        ``ValueError`` when the file carries its own spacing.
    progress : callable, optional
        ``progress(done, total)``, called as files are scanned and slices
        decoded; ``done`` never decreases and the last call has
        ``done == total``. For a folder, ``total`` is first the number of
        files scanned times two, then the number of files plus the number of
        slices to decode. Raise from it to cancel the load.
    max_bytes : int, optional
        Refuse volumes whose float32 array would be larger (default 2 GiB).

    Returns
    -------
    Volume
        ``array`` float32 ``[slice, row, col]``; see :class:`~engine.io.Volume`.

    Raises
    ------
    LoadError
        A file problem; the message names the file (subclasses:
        :class:`~engine.io.DecodeError`, :class:`~engine.io.SeriesSelectionError`,
        :class:`~engine.io.VolumeTooLargeError`).
    ValueError
        A bad argument, named in the message.

    Examples
    --------
    >>> from engine.io import load                                # doctest: +SKIP
    >>> vol = load("sample_cases/abdomen_mr/dicom")               # doctest: +SKIP
    >>> vol.array.shape, vol.spacing                              # doctest: +SKIP
    ((24, 256, 256), (6.0, 1.5625, 1.5625))
    """
    p, spacing_t = _check_args(path, series, spacing, progress, max_bytes)
    if not os.path.exists(p):
        raise LoadError(p, "no such file or folder")
    reporter = _Reporter(progress)
    if os.path.isdir(p):
        volume = _load_dicom(p, series, spacing_t, max_bytes, reporter)
    else:
        kind = sniff(p)
        if kind == "dicom":
            volume = _load_dicom(p, series, spacing_t, max_bytes, reporter)
        elif kind == "unknown":
            raise LoadError(p, _unrecognised(p))
        else:
            _check_single_series(p, series)
            if kind == "nifti":
                if spacing_t is not None:
                    raise ValueError("spacing: NIfTI files carry their own spacing")
                volume = load_nifti(p, max_bytes=max_bytes, tick=reporter.tick, on_total=reporter.on_total)
            else:
                volume = load_raster(
                    p, kind, spacing=spacing_t, max_bytes=max_bytes, tick=reporter.tick, on_total=reporter.on_total
                )
    reporter.finish()
    return volume


def _check_single_series(path: str, series: str | int | None) -> None:
    key = os.path.basename(path)
    if series is None or series in (0, -1, key):
        return
    raise SeriesSelectionError(path, f"holds one image; series {series!r} does not name it", choices=(key,))


def _load_dicom(
    path: str, series: str | int | None, spacing: tuple[float, ...] | None, max_bytes: int, reporter: _Reporter
) -> Volume:
    try:
        scan = scan_path(path, tick=reporter.scan_tick)
        stack = choose_stack(scan, series)
        reporter.start_reading(scan.files_scanned)
        return load_stack(
            stack,
            scan,
            path=path,
            spacing=spacing,
            max_bytes=max_bytes,
            tick=reporter.tick,
            on_total=reporter.on_total,
        )
    except LoadError as exc:
        raise _named_as_given(exc, path) from None


def _named_as_given(exc: LoadError, given: str) -> LoadError:
    """``exc`` naming its file as the user wrote the path (a file found in a folder: under that folder's name)."""
    if exc.path is None or os.path.isabs(given):
        return exc
    root = os.path.abspath(given)
    if exc.path == root:
        named = given
    elif exc.path.startswith(root + os.sep):
        named = os.path.join(given, os.path.relpath(exc.path, root))
    else:
        return exc
    exc.path = named
    exc.args = (f"{named}: {exc.reason}",)
    return exc


def list_series(path: str | os.PathLike[str]) -> list[SeriesInfo]:
    """Describe the image stacks that :func:`load` can read at ``path``.

    Parameters
    ----------
    path : str or path-like
        Anything :func:`load` accepts.

    Returns
    -------
    list of SeriesInfo
        One entry per stack (DICOM series split by orientation; each
        multi-frame object on its own), in the order ``series=<index>``
        uses; a single entry for NIfTI and pictures. Stacks that cannot be
        loaded are listed with their ``problems``.

    Raises
    ------
    LoadError
        ``path`` does not exist or is not a readable image file.
    """
    p, _ = _check_args(path, None, None, None, 1)
    if not os.path.exists(p):
        raise LoadError(p, "no such file or folder")
    if os.path.isdir(p):
        return [s.info() for s in scan_path(p).stacks]
    kind = sniff(p)
    if kind == "dicom":
        return [s.info() for s in scan_path(p).stacks]
    if kind == "nifti":
        return [nifti_info(p)]
    if kind in RASTER_KINDS:
        return [raster_info(p, kind)]
    raise LoadError(p, _UNRECOGNISED)
