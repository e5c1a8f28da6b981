"""The one image type every reader returns: :class:`Volume`.

Conventions
-----------
- ``array`` is float32 indexed ``[slice, row, col]``; a 2-D picture is a
  volume of one slice.
- ``spacing`` is ``(slice, row, col)`` in millimetres: the distance between
  slice planes, between rows (DICOM ``PixelSpacing[0]``) and between columns
  (``PixelSpacing[1]``).
- ``affine`` is a 4x4 matrix taking a homogeneous index ``(slice, row, col, 1)``
  to patient coordinates in millimetres in the DICOM patient system (LPS:
  x to the patient's left, y to posterior, z to head). Column 0 is the step
  from one slice to the next, column 1 the step down one row, column 2 the
  step right one column, column 3 the centre of voxel (0, 0, 0). For NIfTI
  input the file's RAS affine is converted to this LPS convention; for PNG,
  TIFF and NPY input it is a pure scaling by ``spacing`` (no patient frame).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np

__all__ = [
    "DEFAULT_MAX_BYTES",
    "Progress",
    "Volume",
    "SeriesInfo",
    "check_size",
]

#: Default memory limit for one loaded volume (float32 bytes): 2 GiB.
DEFAULT_MAX_BYTES: int = 2 * 1024**3

#: Progress callback: ``progress(done, total)``; raise from it to cancel a load.
Progress = Callable[[int, int], None]


@dataclass(frozen=True, eq=False)
class Volume:
    """An image volume with its geometry, in the engine's conventions.

    Attributes
    ----------
    array : numpy.ndarray
        float32, shape ``(slices, rows, cols)``; modality LUT (rescale)
        applied; MONOCHROME1 images inverted so that larger is brighter (see
        ``inverted``). Treat as read-only.
    spacing : tuple of float
        ``(slice, row, col)`` spacing in mm.
    affine : numpy.ndarray
        4x4 float64, index ``(slice, row, col)`` to patient LPS mm (module
        docstring).
    modality : str
        DICOM modality (``"CT"``, ``"MR"``...), ``"unknown"`` for NIfTI and
        ``"OT"`` for pictures.
    presets : tuple of (float, float)
        Window ``(center, width)`` pairs stored in the file (may be empty).
    source : str
        One-line human description of what was loaded.
    sha256 : dict of str to str
        SHA-256 (hex) of every input file that contributed pixels, keyed by
        absolute path.
    path : str
        The path given to :func:`engine.io.load`.
    kind : str
        ``"dicom"``, ``"nifti"`` or ``"raster"``.
    series_uid, study_uid, frame_of_reference_uid : str or None
        DICOM identifiers of the loaded series (``None`` for other formats).
    sop_instance_uids : tuple of str
        DICOM SOP Instance UID of the object each slice comes from (one entry
        per slice; repeated for multi-frame objects). Empty for other formats.
    frame_numbers : tuple of int
        1-based frame number inside that object for each slice (all 1 for
        single-frame objects). Empty for other formats.
    source_files : tuple of str
        The file each slice was read from (one entry per slice); what a DICOM
        SEG writer re-reads headers from. Pixel data are never kept twice.
    slice_positions : tuple of float
        Position of each slice plane along the slice normal (mm), ascending
        for DICOM series; ``index * spacing[0]`` otherwise.
    inverted : bool
        True when the file was MONOCHROME1 and ``array`` was inverted.
    warnings : tuple of str
        Things the loader noticed that the user should know (non-uniform
        slice gaps, assumed spacing, skipped files...).
    skipped : tuple of (str, str)
        ``(path, reason)`` for files of a folder that were not used.
    nonfinite : int
        How many values of the file were NaN or infinite (set to 0 in
        ``array``, and noted in ``warnings``); callers that cannot accept
        made-up values refuse when it is not 0.
    """

    array: np.ndarray
    spacing: tuple[float, float, float]
    affine: np.ndarray
    modality: str
    presets: tuple[tuple[float, float], ...]
    source: str
    sha256: Mapping[str, str]
    path: str = ""
    kind: str = "raster"
    series_uid: str | None = None
    study_uid: str | None = None
    frame_of_reference_uid: str | None = None
    sop_instance_uids: tuple[str, ...] = ()
    frame_numbers: tuple[int, ...] = ()
    source_files: tuple[str, ...] = ()
    slice_positions: tuple[float, ...] = ()
    inverted: bool = False
    warnings: tuple[str, ...] = ()
    skipped: tuple[tuple[str, str], ...] = field(default=())
    nonfinite: int = 0

    def __post_init__(self) -> None:
        if not isinstance(self.array, np.ndarray) or self.array.ndim != 3:
            raise ValueError("array: expected a 3-D numpy array [slice, row, col]")
        if self.array.dtype != np.float32:
            raise ValueError(f"array: expected float32, got {self.array.dtype}")
        if len(self.spacing) != 3 or not all(float(s) > 0 for s in self.spacing):
            raise ValueError(f"spacing: expected three positive values, got {self.spacing!r}")
        affine = np.asarray(self.affine, dtype=np.float64)
        if affine.shape != (4, 4):
            raise ValueError(f"affine: expected a 4x4 matrix, got shape {affine.shape}")
        object.__setattr__(self, "affine", affine)
        object.__setattr__(self, "spacing", tuple(float(s) for s in self.spacing))

    @property
    def shape(self) -> tuple[int, int, int]:
        """Array shape ``(slices, rows, cols)``."""
        return tuple(int(n) for n in self.array.shape)  # type: ignore[return-value]

    def __repr__(self) -> str:
        return (
            f"Volume(shape={self.shape}, spacing={self.spacing}, modality={self.modality!r}, "
            f"source={self.source!r})"
        )


@dataclass(frozen=True)
class SeriesInfo:
    """One loadable image stack found in a file, folder or DICOMDIR.

    Attributes
    ----------
    key : str
        What to pass as ``load(path, series=key)``: the SeriesInstanceUID,
        with ``#2``, ``#3``... appended when one UID holds several stacks
        (other orientations, separate multi-frame objects).
    series_uid : str
        SeriesInstanceUID (empty for non-DICOM files).
    modality, description : str
        DICOM Modality and SeriesDescription (may be empty).
    series_number : int or None
        DICOM SeriesNumber.
    slices, rows, cols : int
        Size of the stack (slices counts frames of multi-frame objects).
    orientation : str
        ``"axial"``, ``"coronal"``, ``"sagittal"``, ``"oblique"`` or
        ``"unknown"``.
    files : tuple of str
        Files holding the stack.
    problems : tuple of str
        Problems that will stop it loading (named per file).
    """

    key: str
    series_uid: str
    modality: str
    description: str
    series_number: int | None
    slices: int
    rows: int
    cols: int
    orientation: str
    files: tuple[str, ...]
    problems: tuple[str, ...] = ()


def check_size(path: str, shape: tuple[int, ...], max_bytes: int) -> None:
    """Raise :class:`~engine.io.errors.VolumeTooLargeError` when a float32
    array of ``shape`` would exceed ``max_bytes``."""
    from engine.io.errors import VolumeTooLargeError

    needed = int(np.prod([int(n) for n in shape], dtype=np.int64)) * 4
    if needed > max_bytes:
        raise VolumeTooLargeError(path, needed_bytes=needed, max_bytes=max_bytes)
