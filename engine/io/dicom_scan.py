"""Find DICOM image stacks in a file, a folder (any depth) or a DICOMDIR.

A *stack* is what one :class:`~engine.io.Volume` is made of: the single-frame
images of one SeriesInstanceUID that share one orientation (one UID can also
hold localizers in other planes), or one multi-frame object. Files that are
not DICOM images are skipped with a reason; nothing is read with
``force=True``.
"""

from __future__ import annotations

import os
from collections import Counter
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import pydicom

from engine.io.dicom_header import DicomHeader, NotAnImage, read_header
from engine.io.errors import LoadError, SeriesSelectionError
from engine.io.geometry import orientation_label, same_orientation
from engine.io.volume import SeriesInfo

__all__ = ["Stack", "ScanResult", "scan_path", "choose_stack", "is_dicomdir"]


@dataclass
class Stack:
    """Headers of one loadable image stack and the problems found in it."""

    headers: list[DicomHeader]
    key: str = ""
    problems: list[str] = field(default_factory=list)

    @property
    def first(self) -> DicomHeader:
        return self.headers[0]

    @property
    def multiframe(self) -> bool:
        return self.first.multiframe

    @property
    def slices(self) -> int:
        return sum(h.frames for h in self.headers)

    def info(self) -> SeriesInfo:
        """Describe the stack for :func:`engine.io.list_series`."""
        h = self.first
        orientation = orientation_label(h.axes.normal) if h.axes is not None else "unknown"
        problems = list(self.problems) + [f"{x.path}: {p}" for x in self.headers for p in x.problems]
        return SeriesInfo(
            key=self.key,
            series_uid=h.series_uid,
            modality=h.modality,
            description=h.series_description,
            series_number=h.series_number,
            slices=self.slices,
            rows=h.rows,
            cols=h.cols,
            orientation=orientation,
            files=tuple(x.path for x in self.headers),
            problems=tuple(problems),
        )


@dataclass
class ScanResult:
    """Stacks found under ``root`` and the files skipped on the way."""

    root: str
    stacks: list[Stack]
    skipped: list[tuple[str, str]]
    files_scanned: int


def _walk(folder: str, skipped: list[tuple[str, str]]) -> list[str]:
    """Every regular file under ``folder`` (sorted, symlinked folders not followed)."""

    def on_error(exc: OSError) -> None:
        skipped.append((str(exc.filename), f"folder cannot be listed ({exc.strerror})"))

    found: list[str] = []
    for dirpath, dirnames, filenames in os.walk(folder, onerror=on_error):
        dirnames.sort()
        for name in sorted(filenames):
            full = os.path.join(dirpath, name)
            if os.path.isfile(full):
                found.append(full)
    return found


def is_dicomdir(path: str | Path) -> bool:
    """True when ``path`` is a DICOM file-set index (DICOMDIR)."""
    try:
        ds = pydicom.dcmread(str(path), stop_before_pixels=True, specific_tags=["DirectoryRecordSequence"])
    except Exception:  # not DICOM, unreadable or damaged: not a DICOMDIR either
        return False
    return "DirectoryRecordSequence" in ds


def _dicomdir_files(path: str, skipped: list[tuple[str, str]]) -> list[str]:
    from pydicom.fileset import FileSet

    try:
        fileset = FileSet(pydicom.dcmread(path))
    except Exception as exc:
        raise LoadError(path, f"damaged DICOMDIR ({type(exc).__name__}: {exc})") from None
    files: list[str] = []
    for instance in fileset:
        file = str(instance.path)
        if os.path.isfile(file):
            files.append(file)
        else:
            skipped.append((file, "listed in the DICOMDIR but missing"))
    return files


def _group(headers: Sequence[DicomHeader]) -> list[Stack]:
    stacks: list[Stack] = []
    for h in headers:
        target = None
        if not h.multiframe:
            for stack in stacks:
                g = stack.first
                if stack.multiframe or g.series_uid != h.series_uid:
                    continue
                if (g.axes is None) != (h.axes is None):
                    continue
                if g.axes is not None and h.axes is not None and not same_orientation(g.axes, h.axes):
                    continue
                target = stack
                break
        if target is None:
            stacks.append(Stack([h]))
        else:
            target.headers.append(h)
    for stack in stacks:
        sizes: dict[tuple[int, int, int], str] = {}
        for h in stack.headers:
            sizes.setdefault((h.rows, h.cols, h.samples_per_pixel), h.path)
        if len(sizes) > 1:
            described = ", ".join(f"{p} is {r}x{c}x{s}" for (r, c, s), p in sizes.items())
            stack.problems.append(f"mixed image sizes (rows x columns x samples) in one series: {described}")
    stacks.sort(key=lambda s: (s.first.series_number or 0, s.first.series_uid, s.first.path))
    counts = Counter(s.first.series_uid for s in stacks)
    seen: Counter[str] = Counter()
    for stack in stacks:
        uid = stack.first.series_uid or "no-series-uid"
        seen[uid] += 1
        stack.key = uid if counts[stack.first.series_uid] == 1 else f"{uid}#{seen[uid]}"
    return stacks


def scan_path(path: str | Path, *, tick: Callable[[int, int], None] | None = None) -> ScanResult:
    """Read the headers of every DICOM file at ``path`` and group them into stacks.

    Parameters
    ----------
    path : str or Path
        A DICOM file, a DICOMDIR, or a folder searched to any depth.
    tick : callable, optional
        Called as ``tick(done, total)`` after each file's header.

    Raises
    ------
    LoadError
        ``path`` is a single file that is not a usable DICOM image, or a
        damaged DICOMDIR.
    """
    root = str(path)
    skipped: list[tuple[str, str]] = []
    # Files are named by absolute path (Volume.sha256 keys, messages).
    if os.path.isdir(root):
        files = _walk(os.path.abspath(root), skipped)
        explicit = False
    elif is_dicomdir(root):
        files = _dicomdir_files(os.path.abspath(root), skipped)
        explicit = False
    else:
        files = [os.path.abspath(root)]
        explicit = True
    headers: list[DicomHeader] = []
    for done, file in enumerate(files, start=1):
        try:
            headers.append(read_header(file))
        except NotAnImage as exc:
            if explicit:
                raise LoadError(file, str(exc)) from None
            skipped.append((file, str(exc)))
        if tick is not None:
            tick(done, len(files))
    return ScanResult(root=root, stacks=_group(headers), skipped=skipped, files_scanned=len(files))


def _skipped_summary(skipped: Sequence[tuple[str, str]]) -> str:
    reasons = Counter(reason for _, reason in skipped)
    parts = [f"{n} x {reason}" for reason, n in reasons.most_common(3)]
    more = len(reasons) - len(parts)
    return "; ".join(parts) + (f"; {more} other reasons" if more > 0 else "")


def choose_stack(scan: ScanResult, series: str | int | None) -> Stack:
    """Pick the stack ``series`` names (key, SeriesInstanceUID or index).

    Raises
    ------
    LoadError
        No DICOM image was found.
    SeriesSelectionError
        Several stacks and ``series`` is ``None``, or ``series`` matches none.
    """
    stacks = scan.stacks
    if not stacks:
        if scan.files_scanned == 0:
            what = "empty folder" if os.path.isdir(scan.root) else "the DICOMDIR lists no files"
            raise LoadError(scan.root, f"no files found ({what})")
        raise LoadError(
            scan.root,
            f"no DICOM images found among {scan.files_scanned} files ({_skipped_summary(scan.skipped)})",
        )
    keys = tuple(s.key for s in stacks)
    listing = "; ".join(
        f"{s.key} ({s.first.modality or '?'} {s.first.series_description or 'no description'}, "
        f"{s.slices} slices)"
        for s in stacks
    )
    if series is None:
        if len(stacks) == 1:
            return stacks[0]
        raise SeriesSelectionError(
            scan.root, f"holds {len(stacks)} image stacks; choose one with series=...: {listing}", choices=keys
        )
    if isinstance(series, bool) or not isinstance(series, (int, str)):
        raise ValueError(f"series: expected a key, a SeriesInstanceUID or an index, got {series!r}")
    if isinstance(series, int):
        if -len(stacks) <= series < len(stacks):
            return stacks[series]
        raise SeriesSelectionError(
            scan.root, f"series index {series} out of range (0..{len(stacks) - 1}): {listing}", choices=keys
        )
    for stack in stacks:
        if stack.key == series:
            return stack
    by_uid = [s for s in stacks if s.first.series_uid == series]
    if len(by_uid) == 1:
        return by_uid[0]
    if len(by_uid) > 1:
        raise SeriesSelectionError(
            scan.root,
            f"series {series} holds {len(by_uid)} stacks; choose one of "
            + ", ".join(s.key for s in by_uid),
            choices=keys,
        )
    raise SeriesSelectionError(scan.root, f"no series {series!r} here: {listing}", choices=keys)
