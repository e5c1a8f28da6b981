"""Read the header of one DICOM file into the few values the loader needs.

Files are read with :func:`pydicom.dcmread` without ``force`` and without pixel
data. Header values are copied into a small :class:`DicomHeader` and the
pydicom dataset is dropped, so scanning a large folder does not keep every
header in memory. Values that cannot be parsed (bad VRs) are recorded as
*problems* naming the attribute; the loader refuses a stack that has any.

References
----------
.. [1] NEMA PS3.10, *Media Storage and File Format*, section 7.1 (the 128-byte
   preamble, the ``DICM`` prefix and the File Meta Information).
.. [2] NEMA PS3.3, sections C.7.6.2 (Image Plane), C.7.6.3 (Image Pixel),
   C.11.1 (Modality LUT), C.11.2 (VOI LUT) and C.7.6.16 (Multi-frame
   Functional Groups).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pydicom
from pydicom.errors import InvalidDicomError

from engine.io.geometry import ORIENTATION_TOLERANCE, PlaneAxes, plane_axes

__all__ = ["DicomHeader", "NotAnImage", "read_header", "MEDIA_STORAGE_DIRECTORY"]

#: SOP Class UID of a DICOMDIR (Media Storage Directory Storage).
MEDIA_STORAGE_DIRECTORY = "1.2.840.10008.1.3.10"


class NotAnImage(Exception):
    """The file is not a DICOM image the loader can use; ``str()`` says why."""


@dataclass
class DicomHeader:
    """What the loader needs from one DICOM file (no pixel data).

    Per-frame lists have one entry per frame of the object (length 1 for a
    single-frame image).
    """

    path: str
    transfer_syntax: str
    sop_class_uid: str = ""
    sop_instance_uid: str = ""
    series_uid: str = ""
    study_uid: str = ""
    frame_of_reference_uid: str = ""
    modality: str = ""
    series_description: str = ""
    series_number: int | None = None
    instance_number: int | None = None
    rows: int = 0
    cols: int = 0
    samples_per_pixel: int = 1
    bits_allocated: int = 16
    bits_stored: int = 16
    pixel_representation: int = 0
    photometric: str = "MONOCHROME2"
    frames: int = 1
    multiframe: bool = False
    pixel_spacing: tuple[float, float] | None = None
    spacing_source: str = ""
    spacing_note: str = ""  # why a PixelSpacing that is present was not used (zero, negative, NaN)
    slice_thickness: float | None = None
    spacing_between_slices: float | None = None
    axes: PlaneAxes | None = None
    frame_positions: np.ndarray | None = None
    origin: np.ndarray | None = None
    frame_rescale: list[tuple[float, float]] = field(default_factory=lambda: [(1.0, 0.0)])
    modality_lut: tuple[int, int, np.ndarray] | None = None
    windows: list[tuple[float, float]] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def has_geometry(self) -> bool:
        """True when the object has both orientation and per-frame positions."""
        return self.axes is not None and self.frame_positions is not None


def _value(ds: Any, keyword: str) -> Any:
    """Element value with pydicom's validation warnings silenced (checked here)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return ds.get(keyword)


def _tag_name(keyword: str) -> str:
    tag = pydicom.datadict.tag_for_keyword(keyword)
    return f"{keyword} ({tag >> 16:04X},{tag & 0xFFFF:04X})" if tag is not None else keyword


def _numbers(ds: Any, keyword: str, problems: list[str], *, count: int | None = None) -> list[float] | None:
    """All values of a numeric element as floats; ``None`` when absent or empty."""
    try:
        raw = _value(ds, keyword)
    except Exception as exc:  # pydicom failed to convert the raw bytes
        problems.append(f"{_tag_name(keyword)} cannot be read ({exc})")
        return None
    if raw is None or (isinstance(raw, (str, bytes)) and not str(raw).strip()):
        return None
    items = list(raw) if isinstance(raw, (list, tuple, pydicom.multival.MultiValue)) else [raw]
    try:
        with warnings.catch_warnings():  # pydicom warns about values such as 'nan' as it converts them
            warnings.simplefilter("ignore")
            values = [float(v) for v in items]
    except (TypeError, ValueError):
        problems.append(f"{_tag_name(keyword)} has an invalid value {str(raw)!r}")
        return None
    if not all(np.isfinite(values)):
        problems.append(f"{_tag_name(keyword)} has a non-finite value {str(raw)!r}")
        return None
    if count is not None and len(values) != count:
        problems.append(f"{_tag_name(keyword)} has {len(values)} values, expected {count}")
        return None
    return values


def _integer(ds: Any, keyword: str, problems: list[str], default: int | None = None) -> int | None:
    values = _numbers(ds, keyword, problems)
    if values is None:
        return default
    if len(values) != 1 or values[0] != int(values[0]):
        problems.append(f"{_tag_name(keyword)} is not one integer ({values!r})")
        return default
    return int(values[0])


def _text(ds: Any, keyword: str) -> str:
    try:
        value = _value(ds, keyword)
    except Exception:
        return ""
    return "" if value is None else str(value).strip()


def _first_item(ds: Any, keyword: str) -> Any:
    try:
        seq = _value(ds, keyword)
    except Exception:
        return None
    return seq[0] if seq else None


def _macro(frame_group: Any, shared_group: Any, macro: str) -> Any:
    """One functional-group macro item: per-frame first, then shared."""
    item = _first_item(frame_group, macro) if frame_group is not None else None
    if item is None and shared_group is not None:
        item = _first_item(shared_group, macro)
    return item


def _axes(values: list[float] | None, problems: list[str]) -> PlaneAxes | None:
    if values is None:
        return None
    try:
        return plane_axes(values)
    except ValueError as exc:
        problems.append(f"ImageOrientationPatient (0020,0037) {str(exc).split(': ', 1)[1]}")
        return None


def _windows(item: Any, problems: list[str]) -> list[tuple[float, float]]:
    if item is None:
        return []
    centers = _numbers(item, "WindowCenter", problems)
    widths = _numbers(item, "WindowWidth", problems)
    if not centers or not widths:
        return []
    return [(c, w) for c, w in zip(centers, widths) if w > 0]


def _modality_lut(ds: Any, problems: list[str]) -> tuple[int, int, np.ndarray] | None:
    item = _first_item(ds, "ModalityLUTSequence")
    if item is None:
        return None
    desc = _numbers(item, "LUTDescriptor", problems, count=3)
    data = _value(item, "LUTData")
    if desc is None or data is None:
        problems.append("ModalityLUTSequence (0028,3000) lacks LUTDescriptor or LUTData")
        return None
    entries = int(desc[0]) or 65536  # 0 means 2**16 entries (PS3.3 C.11.1.1.1)
    table = np.asarray(data, dtype=np.float64).ravel()
    if table.size != entries:
        problems.append(f"ModalityLUTSequence (0028,3000) has {table.size} entries, descriptor says {entries}")
        return None
    return entries, int(desc[1]), table


def _open_dataset(path: str) -> Any:
    """``dcmread`` without pixels and without ``force``; raises :class:`NotAnImage`."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return pydicom.dcmread(path, stop_before_pixels=True)
    except InvalidDicomError:
        raise NotAnImage(
            "not a DICOM Part 10 file: no 'DICM' prefix after a 128-byte preamble "
            "(files without preamble and file meta information are not read)"
        ) from None
    except PermissionError:
        raise NotAnImage("cannot be read: permission denied") from None
    except IsADirectoryError:
        raise NotAnImage("is a folder, not a file") from None
    except OSError as exc:
        raise NotAnImage(f"cannot be read ({exc.strerror or exc})") from None
    except Exception as exc:  # damaged header: EOF, bad lengths, bad sequences...
        raise NotAnImage(f"damaged DICOM header ({type(exc).__name__}: {exc})") from None


def read_header(path: str | Path) -> DicomHeader:
    """Read one DICOM file's header (no pixel data).

    Parameters
    ----------
    path : str or Path
        The file.

    Returns
    -------
    DicomHeader
        Values of the image; ``problems`` lists values that stop it loading.

    Raises
    ------
    NotAnImage
        When the file is not a DICOM Part 10 file, cannot be read, is a
        DICOMDIR, has no transfer syntax, or is not an image.
    """
    path = str(path)
    ds = _open_dataset(path)
    meta = getattr(ds, "file_meta", None)
    sop_class = _text(meta, "MediaStorageSOPClassUID") if meta is not None else ""
    if sop_class == MEDIA_STORAGE_DIRECTORY or "DirectoryRecordSequence" in ds:
        raise NotAnImage("DICOMDIR index (its images are read through it, not as an image)")
    transfer_syntax = _text(meta, "TransferSyntaxUID") if meta is not None else ""
    if not transfer_syntax:
        raise NotAnImage("file meta information has no Transfer Syntax UID (0002,0010)")
    sop_class = _text(ds, "SOPClassUID") or sop_class
    problems: list[str] = []
    rows = _integer(ds, "Rows", problems)
    cols = _integer(ds, "Columns", problems)
    if rows is None or cols is None:
        try:
            what = pydicom.uid.UID(sop_class).name if sop_class else "unknown SOP class"
        except Exception:
            what = sop_class
        raise NotAnImage(f"not an image: no Rows/Columns ({what})")
    h = DicomHeader(path=path, transfer_syntax=transfer_syntax, problems=problems)
    h.sop_class_uid = sop_class
    h.sop_instance_uid = _text(ds, "SOPInstanceUID")
    h.series_uid = _text(ds, "SeriesInstanceUID")
    h.study_uid = _text(ds, "StudyInstanceUID")
    h.frame_of_reference_uid = _text(ds, "FrameOfReferenceUID")
    h.modality = _text(ds, "Modality")
    h.series_description = _text(ds, "SeriesDescription")
    h.series_number = _integer(ds, "SeriesNumber", [], None)
    h.instance_number = _integer(ds, "InstanceNumber", [], None)
    h.rows, h.cols = rows, cols
    if rows <= 0 or cols <= 0:
        problems.append(f"image size {rows}x{cols} is empty")
    h.samples_per_pixel = _integer(ds, "SamplesPerPixel", problems, 1) or 1
    h.bits_allocated = _integer(ds, "BitsAllocated", problems, 16) or 16
    h.bits_stored = _integer(ds, "BitsStored", problems, h.bits_allocated) or h.bits_allocated
    h.pixel_representation = _integer(ds, "PixelRepresentation", problems, 0) or 0
    h.photometric = _text(ds, "PhotometricInterpretation").upper() or "MONOCHROME2"
    frames = _integer(ds, "NumberOfFrames", problems, 1)
    h.frames = frames if frames is not None and frames > 0 else 1
    if frames is not None and frames <= 0:
        problems.append(f"NumberOfFrames (0028,0008) is {frames}")
    shared = _first_item(ds, "SharedFunctionalGroupsSequence")
    try:
        per_frame = _value(ds, "PerFrameFunctionalGroupsSequence")
    except Exception:
        per_frame = None
    h.multiframe = h.frames > 1 or shared is not None or per_frame is not None
    if h.photometric == "PALETTE COLOR":
        problems.append("PhotometricInterpretation PALETTE COLOR is not supported (grey or RGB only)")
    h.slice_thickness = (_numbers(ds, "SliceThickness", problems) or [None])[0]
    h.spacing_between_slices = (_numbers(ds, "SpacingBetweenSlices", problems) or [None])[0]
    if shared is not None or per_frame is not None:
        _read_functional_groups(ds, h, shared, per_frame)
    else:
        _read_classic(ds, h)
    return h


def _pixel_spacing(item: Any, h: DicomHeader) -> tuple[tuple[float, float] | None, str]:
    """(row, col) spacing in mm and the element it came from; an unusable one is noted in ``h.spacing_note``."""
    for keyword in ("PixelSpacing", "ImagerPixelSpacing"):
        found: list[str] = []
        values = _numbers(item, keyword, found, count=2)
        if values is not None and min(values) > 0:
            return (values[0], values[1]), keyword
        if (values is not None or found) and not h.spacing_note:
            raw = _value(item, keyword)
            items = list(raw) if isinstance(raw, (list, tuple, pydicom.multival.MultiValue)) else [raw]
            shown = "\\".join(str(v) for v in items)
            h.spacing_note = f"{_tag_name(keyword)} is {shown!r}, not a usable pixel spacing"
    return None, ""


def _read_classic(ds: Any, h: DicomHeader) -> None:
    """Single-frame images and classic multi-frame objects (one plane, offsets)."""
    p = h.problems
    h.pixel_spacing, h.spacing_source = _pixel_spacing(ds, h)
    h.axes = _axes(_numbers(ds, "ImageOrientationPatient", p, count=6), p)
    ipp = _numbers(ds, "ImagePositionPatient", p, count=3)
    slope = (_numbers(ds, "RescaleSlope", p) or [1.0])[0]
    intercept = (_numbers(ds, "RescaleIntercept", p) or [0.0])[0]
    if h.modality == "RTDOSE":
        # RT Dose: stored value times DoseGridScaling is dose in Gy (PS3.3 C.8.8.3).
        slope *= (_numbers(ds, "DoseGridScaling", p) or [1.0])[0]
    h.frame_rescale = [(slope, intercept)] * h.frames
    h.modality_lut = _modality_lut(ds, p)
    h.windows = _windows(ds, p)
    if ipp is None:
        return
    origin = np.asarray(ipp)
    h.origin = origin
    if h.frames == 1:
        h.frame_positions = origin[None, :]
        return
    offsets = _numbers(ds, "GridFrameOffsetVector", p)
    if offsets is not None and h.axes is not None:
        if len(offsets) != h.frames:
            p.append(f"GridFrameOffsetVector (3004,000C) has {len(offsets)} values for {h.frames} frames")
            return
        # Offsets are along the plane normal, relative to ImagePositionPatient
        # when the first is zero (PS3.3 C.8.8.3.2).
        base = 0.0 if offsets[0] == 0.0 else float(origin @ h.axes.normal)
        rel = np.asarray(offsets) - base
        h.frame_positions = origin[None, :] + rel[:, None] * h.axes.normal[None, :]
        return
    h.notes.append("multi-frame object without per-frame positions: frames stacked in file order")


def _read_functional_groups(ds: Any, h: DicomHeader, shared: Any, per_frame: Any) -> None:
    """Enhanced / legacy-converted multi-frame objects (PS3.3 C.7.6.16)."""
    p = h.problems
    frames = list(per_frame) if per_frame is not None else []
    if frames and len(frames) != h.frames:
        p.append(f"PerFrameFunctionalGroupsSequence has {len(frames)} items for {h.frames} frames")
        return
    if not frames:
        frames = [None] * h.frames
    positions: list[list[float]] = []
    orientations: list[list[float]] = []
    rescale: list[tuple[float, float]] = []
    spacing = None
    for frame in frames:
        pos_item = _macro(frame, shared, "PlanePositionSequence")
        ipp = _numbers(pos_item, "ImagePositionPatient", p, count=3) if pos_item is not None else None
        if ipp is not None:
            positions.append(ipp)
        ori_item = _macro(frame, shared, "PlaneOrientationSequence")
        iop = _numbers(ori_item, "ImageOrientationPatient", p, count=6) if ori_item is not None else None
        if iop is not None:
            orientations.append(iop)
        pvt = _macro(frame, shared, "PixelValueTransformationSequence")
        if pvt is not None:
            slope = (_numbers(pvt, "RescaleSlope", p) or [1.0])[0]
            intercept = (_numbers(pvt, "RescaleIntercept", p) or [0.0])[0]
        else:
            slope = (_numbers(ds, "RescaleSlope", p) or [1.0])[0]
            intercept = (_numbers(ds, "RescaleIntercept", p) or [0.0])[0]
        rescale.append((slope, intercept))
        if spacing is None:
            measures = _macro(frame, shared, "PixelMeasuresSequence")
            if measures is not None:
                spacing, h.spacing_source = _pixel_spacing(measures, h)
                thick = _numbers(measures, "SliceThickness", p)
                between = _numbers(measures, "SpacingBetweenSlices", p)
                h.slice_thickness = thick[0] if thick else h.slice_thickness
                h.spacing_between_slices = between[0] if between else h.spacing_between_slices
    h.frame_rescale = rescale
    h.pixel_spacing = spacing
    if spacing is None:
        h.pixel_spacing, h.spacing_source = _pixel_spacing(ds, h)
    voi = _macro(frames[0], shared, "FrameVOILUTSequence")
    h.windows = _windows(voi, p) or _windows(ds, p)
    h.modality_lut = _modality_lut(ds, p)
    if orientations:
        h.axes = _axes(orientations[0], p)
        if h.axes is None:
            return
        ref = np.asarray(orientations[0])
        spread = max(float(np.max(np.abs(np.asarray(o) - ref))) for o in orientations)
        if spread > ORIENTATION_TOLERANCE:
            p.append("frames lie in different orientations (not one stack of parallel planes)")
            return
    if positions:
        h.origin = np.asarray(positions[0], dtype=np.float64)
    if len(positions) == h.frames and h.axes is not None:
        h.frame_positions = np.asarray(positions, dtype=np.float64)
    elif positions:
        p.append(f"only {len(positions)} of {h.frames} frames have a PlanePositionSequence")
    else:
        h.notes.append("multi-frame object without per-frame positions: frames stacked in file order")
