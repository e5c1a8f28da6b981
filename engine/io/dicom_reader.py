"""Turn one DICOM stack (see :mod:`engine.io.dicom_scan`) into a Volume.

Slices are sorted by the projection of ImagePositionPatient on the plane
normal, the slice spacing is measured from the sorted positions (uneven gaps
are reported), the modality LUT (RescaleSlope/Intercept, also from the
multi-frame functional groups, or a Modality LUT Sequence) is applied and
MONOCHROME1 images are inverted so that larger is brighter. Pixels are decoded
one frame at a time straight into the preallocated float32 volume.

References
----------
.. [1] NEMA PS3.3, sections C.7.6.2 (Image Plane), C.7.6.3.1.2 (Photometric
   Interpretation), C.11.1 (Modality LUT) and C.7.6.16.2 (functional group
   macros).
.. [2] NEMA PS3.5, section 8 and Annex A (encapsulated transfer syntaxes).
"""

from __future__ import annotations

import warnings
from collections.abc import Callable

import numpy as np
import pydicom.uid
from pydicom.pixels import get_decoder, iter_pixels

from engine.io.dicom_header import DicomHeader
from engine.io.dicom_scan import ScanResult, Stack
from engine.io.errors import DecodeError, LoadError
from engine.io.geometry import CoincidentSlicesError, dicom_affine, orientation_label, scaling_affine, stack_slices
from engine.io.hashing import sha256_file
from engine.io.volume import Volume, check_size

__all__ = ["load_stack", "CODECS_HINT", "NATIVE_SYNTAXES"]

#: What to install when a compressed transfer syntax cannot be decoded.
CODECS_HINT = "install the 'dicom-codecs' extra: pip install 'isotide[dicom-codecs]'"

#: Uncompressed transfer syntaxes (pixel data read as is).
NATIVE_SYNTAXES = frozenset(
    {
        pydicom.uid.ImplicitVRLittleEndian,
        pydicom.uid.ExplicitVRLittleEndian,
        pydicom.uid.ExplicitVRBigEndian,
        pydicom.uid.DeflatedExplicitVRLittleEndian,
    }
)

#: ITU-R BT.601 luma weights used to turn an RGB image into one grey channel
#: (common practice).
_LUMA = np.array([0.299, 0.587, 0.114], dtype=np.float32)


def _syntax_name(uid: str) -> str:
    try:
        name = pydicom.uid.UID(uid).name
    except Exception:
        name = uid
    return f"{name} ({uid})" if name != uid else uid


def _expected_native_bytes(h: DicomHeader) -> int:
    pixels = h.rows * h.cols * h.frames * h.samples_per_pixel
    return (pixels + 7) // 8 if h.bits_allocated == 1 else pixels * (h.bits_allocated // 8)


def _stored_pixel_bytes(path: str) -> int | None:
    """Length of the Pixel Data element without reading its value."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ds = pydicom.dcmread(path, defer_size=256)
            element = ds.get_item("PixelData")
        if element is None:
            return None
        if element.value is None or isinstance(element.value, bytes) and len(element.value) == 0:
            return int(element.length)
        return len(element.value) if isinstance(element.value, bytes) else int(element.length)
    except Exception:
        return None


def _decode_error(h: DicomHeader, exc: Exception) -> LoadError:
    text = " ".join(line.strip() for line in str(exc).splitlines() if line.strip())
    message = (text[:400] + "...") if len(text) > 400 else (text or type(exc).__name__)
    if isinstance(exc, AttributeError) and "no 'Pixel Data'" in str(exc):
        return LoadError(h.path, "no pixel data in this object (not an image)")
    if h.transfer_syntax in NATIVE_SYNTAXES:
        stored = _stored_pixel_bytes(h.path)
        expected = _expected_native_bytes(h)
        if stored is not None and stored < expected:
            return LoadError(
                h.path, f"pixel data truncated: {stored} bytes stored, {expected} expected for "
                f"{h.frames} frame(s) of {h.rows}x{h.cols}x{h.samples_per_pixel} at {h.bits_allocated} bits"
            )
        return LoadError(h.path, f"cannot read pixel data ({type(exc).__name__}: {message})")
    syntax = _syntax_name(h.transfer_syntax)
    try:
        available = get_decoder(h.transfer_syntax).is_available
    except NotImplementedError:
        return DecodeError(
            h.path,
            f"transfer syntax {syntax} is not supported by any pixel decoder",
            transfer_syntax=h.transfer_syntax,
        )
    if not available:
        why = f"no decoder for transfer syntax {syntax} is installed; {CODECS_HINT}"
    else:
        why = (
            f"cannot decode pixel data in transfer syntax {syntax}: {message}. The installed decoders "
            f"failed, so the compressed data are probably damaged (decoders come from the "
            f"'dicom-codecs' extra: pip install 'isotide[dicom-codecs]')"
        )
    return DecodeError(h.path, why, transfer_syntax=h.transfer_syntax)


def _stored_range(h: DicomHeader) -> tuple[float, float]:
    """Range of values after the modality LUT (for MONOCHROME1 inversion)."""
    bits = max(1, min(h.bits_stored, 32))
    if h.pixel_representation == 1:
        lo, hi = -(2.0 ** (bits - 1)), 2.0 ** (bits - 1) - 1
    else:
        lo, hi = 0.0, 2.0**bits - 1
    if h.modality_lut is not None:
        table = h.modality_lut[2]
        return float(table.min()), float(table.max())
    slope, intercept = h.frame_rescale[0]
    a, b = lo * slope + intercept, hi * slope + intercept
    return min(a, b), max(a, b)


def _apply_lut(frame: np.ndarray, lut: tuple[int, int, np.ndarray]) -> np.ndarray:
    """Modality LUT: values below the first mapped value take the first entry,
    above the last take the last (PS3.3 C.11.1.1.1)."""
    entries, first, table = lut
    index = np.clip(frame.astype(np.int64) - first, 0, entries - 1)
    return table[index]


def _check_problems(stack: Stack, scan: ScanResult) -> None:
    for h in stack.headers:
        if h.problems:
            raise LoadError(h.path, h.problems[0])
    if stack.problems:
        raise LoadError(scan.root, stack.problems[0])


def load_stack(
    stack: Stack,
    scan: ScanResult,
    *,
    path: str,
    spacing: tuple[float, ...] | None,
    max_bytes: int,
    tick: Callable[[int], None],
    on_total: Callable[[int], None],
) -> Volume:
    """Read the pixels of ``stack`` into a :class:`Volume`.

    Parameters
    ----------
    stack, scan
        From :func:`engine.io.dicom_scan.scan_path` /
        :func:`~engine.io.dicom_scan.choose_stack`.
    path : str
        What the user asked to load (used in messages and ``Volume.path``).
    spacing : tuple of float or None
        ``(row, col)`` or ``(slice, row, col)`` mm, only for objects that carry
        no PixelSpacing.
    max_bytes : int
        Memory limit for the float32 volume.
    tick : callable
        Called with the number of frames decoded so far.
    on_total : callable
        Called once with the number of frames to decode.
    """
    _check_problems(stack, scan)
    first = stack.first
    notes: list[str] = []
    # One entry per output slice before sorting: (header, frame index, position or None).
    frames: list[tuple[DicomHeader, int]] = []
    positions: list[np.ndarray] = []
    for h in stack.headers:
        for f in range(h.frames):
            frames.append((h, f))
            if h.frame_positions is not None:
                positions.append(h.frame_positions[f])
    missing = [h.path for h in stack.headers if h.frame_positions is None]
    if first.axes is not None and missing and len(missing) < len(stack.headers):
        raise LoadError(missing[0], "ImagePositionPatient (0020,0032) missing while other slices have it")
    n = len(frames)

    # In-plane spacing.
    if first.pixel_spacing is not None:
        if spacing is not None:
            raise ValueError(
                "spacing: the DICOM object carries its own pixel spacing; spacing= applies only to "
                "files without one"
            )
        row_sp, col_sp = first.pixel_spacing
        if first.spacing_source == "ImagerPixelSpacing":
            notes.append("pixel spacing taken from ImagerPixelSpacing (at the detector, not the patient)")
    elif spacing is not None:
        row_sp, col_sp = float(spacing[-2]), float(spacing[-1])
    else:
        row_sp = col_sp = 1.0
        if first.spacing_note:
            notes.append(f"{first.path}: {first.spacing_note}: 1 mm assumed")
        else:
            notes.append("no pixel spacing in the file: 1 mm assumed")
    default_gap = first.spacing_between_slices or first.slice_thickness
    if spacing is not None and len(spacing) == 3 and first.frame_positions is None:
        default_gap = float(spacing[0])

    if first.axes is not None and len(positions) == n:
        try:
            st = stack_slices(np.asarray(positions), first.axes.normal, default_spacing=default_gap or 1.0)
        except CoincidentSlicesError as exc:
            i, j = exc.first, exc.second
            where = f"{frames[i][0].path} and {frames[j][0].path}"
            if frames[i][0] is frames[j][0]:
                where = f"{frames[i][0].path} (frames {frames[i][1] + 1} and {frames[j][1] + 1})"
            raise LoadError(
                where, "two slices at the same position (several echoes, phases or stacks in one series?)"
            ) from None
        order = st.order
        slice_gap = st.spacing
        affine = dicom_affine(positions[int(order[0])], first.axes, (row_sp, col_sp), st.step)
        slice_positions = tuple(float(p) for p in st.positions)
        if n == 1 and not default_gap:
            notes.append("single slice without SliceThickness: slice spacing 1 mm assumed")
        if not st.uniform:
            worst = int(np.argmax(np.abs(st.gaps - st.spacing)))
            notes.append(
                f"non-uniform slice gaps: {st.gaps.min():.3f} to {st.gaps.max():.3f} mm (median "
                f"{st.spacing:.3f} mm; largest departure between slices {worst} and {worst + 1}); "
                "spacing and affine use the median, slice_positions hold the true positions"
            )
        shear = st.step - (st.step @ first.axes.normal) * first.axes.normal
        if n > 1 and np.linalg.norm(shear) > 1e-3 * max(1.0, abs(slice_gap)):
            notes.append("slices are sheared (gantry tilt): the affine carries the shear")
    else:
        if first.multiframe:
            order = np.arange(n)
        else:
            order = np.argsort(
                [h.instance_number if h.instance_number is not None else i for i, (h, _) in enumerate(frames)],
                kind="stable",
            )
        if n > 1:
            notes.append("no per-slice positions: slices ordered by InstanceNumber / frame order")
        if n > 1 and not default_gap:
            notes.append("no slice spacing in the file: 1 mm assumed")
        slice_gap = float(default_gap or 1.0)
        if first.axes is not None:
            origin = first.origin if first.origin is not None else np.zeros(3)
            affine = dicom_affine(origin, first.axes, (row_sp, col_sp), first.axes.normal * slice_gap)
        else:
            affine = scaling_affine((slice_gap, row_sp, col_sp))
        slice_positions = tuple(float(i * slice_gap) for i in range(n))
    notes.extend(note for h in stack.headers[:1] for note in h.notes)
    unreadable = [p for p, why in scan.skipped if why.startswith(("cannot be read", "damaged", "folder cannot"))]
    if unreadable:
        notes.append(
            f"{len(unreadable)} file(s) could not be read and were skipped (first: {unreadable[0]}); "
            "they may belong to this series (see Volume.skipped)"
        )

    rows, cols = first.rows, first.cols
    check_size(path, (n, rows, cols), max_bytes)
    out = np.empty((n, rows, cols), dtype=np.float32)
    destination = np.empty(n, dtype=np.int64)
    destination[order] = np.arange(n)
    on_total(n)
    hashes: dict[str, str] = {}
    decode_notes: list[str] = []
    k = 0
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        for h in stack.headers:
            hashes[h.path] = _hash(h.path)
            iterator = iter_pixels(_pixel_source(h))
            for f in range(h.frames):
                try:
                    frame = next(iterator)
                except StopIteration:
                    raise LoadError(h.path, f"pixel data hold {f} frames, header says {h.frames}") from None
                except Exception as exc:
                    raise _decode_error(h, exc) from None
                target = out[destination[k]]
                _store(frame, target, h, f)
                k += 1
                tick(k)
        for w in caught:
            text = str(w.message).splitlines()[0]
            if text not in decode_notes:
                decode_notes.append(text)
    notes.extend(decode_notes)

    presets = tuple((float(c), float(w)) for c, w in first.windows)
    inverted = first.photometric == "MONOCHROME1"
    if inverted:
        lo, hi = _stored_range(first)
        np.subtract(np.float32(lo + hi), out, out=out)
        presets = tuple((lo + hi - c, w) for c, w in presets)
        notes.append("MONOCHROME1 image inverted so that larger values are brighter")
    if first.samples_per_pixel == 3:
        notes.append("colour image converted to grey (ITU-R BT.601 luma)")

    sorted_frames = [frames[int(i)] for i in order]
    orientation = orientation_label(first.axes.normal) if first.axes is not None else "unknown"
    description = first.series_description or "no description"
    source = (
        f"DICOM {first.modality or '?'} series '{description}' ({n} slice{'s' if n != 1 else ''} "
        f"{rows}x{cols}, {orientation}, {slice_gap:.3g} x {row_sp:.3g} x {col_sp:.3g} mm)"
    )
    return Volume(
        array=out,
        spacing=(abs(slice_gap), row_sp, col_sp),
        affine=affine,
        modality=first.modality or "OT",
        presets=presets,
        source=source,
        sha256=hashes,
        path=path,
        kind="dicom",
        series_uid=first.series_uid or None,
        study_uid=first.study_uid or None,
        frame_of_reference_uid=first.frame_of_reference_uid or None,
        sop_instance_uids=tuple(h.sop_instance_uid for h, _ in sorted_frames),
        frame_numbers=tuple(f + 1 for _, f in sorted_frames),
        source_files=tuple(h.path for h, _ in sorted_frames),
        slice_positions=slice_positions,
        inverted=inverted,
        warnings=tuple(notes),
        skipped=tuple(scan.skipped),
    )


def _pixel_source(h: DicomHeader) -> object:
    """What to decode from: the path, or the whole dataset for deflated files
    (pydicom reads deflated pixel data only from a decoded dataset)."""
    if h.transfer_syntax == pydicom.uid.DeflatedExplicitVRLittleEndian:
        try:
            return pydicom.dcmread(h.path)
        except Exception as exc:
            raise LoadError(h.path, f"damaged deflated DICOM file ({type(exc).__name__}: {exc})") from None
    return h.path


def _hash(path: str) -> str:
    try:
        return sha256_file(path)
    except OSError as exc:
        raise LoadError(path, f"cannot be read ({exc.strerror or exc})") from None


def _store(frame: np.ndarray, target: np.ndarray, h: DicomHeader, f: int) -> None:
    """Write one decoded frame into ``target`` with the modality LUT applied."""
    if frame.ndim == 3 and frame.shape[-1] == 3:
        if frame.shape[:2] != target.shape:
            raise LoadError(h.path, f"frame {f + 1} is {frame.shape[:2]}, header says {target.shape}")
        np.dot(frame.astype(np.float32), _LUMA, out=target)
        return
    if frame.shape != target.shape:
        raise LoadError(h.path, f"frame {f + 1} is {frame.shape}, header says {target.shape}")
    if h.modality_lut is not None:
        target[...] = _apply_lut(frame, h.modality_lut)
        return
    np.copyto(target, frame, casting="unsafe")
    slope, intercept = h.frame_rescale[f]
    if slope != 1.0:
        target *= np.float32(slope)
    if intercept != 0.0:
        target += np.float32(intercept)
