"""Index-to-patient geometry: DICOM plane geometry and the NIfTI conversion.

The engine's affine takes ``(slice, row, col, 1)`` to patient LPS millimetres
(see :mod:`engine.io.volume`). DICOM image-plane terms (PS3.3 C.7.6.2):
``ImageOrientationPatient`` holds the direction cosines of the first row
(the direction of increasing column index) and of the first column (the
direction of increasing row index); ``PixelSpacing`` is (row spacing, column
spacing); ``ImagePositionPatient`` is the centre of the first pixel.

A NIfTI file stores data ``[i, j, k]`` with an affine to RAS millimetres. The
engine writes (and reads) NIfTI with ``i`` = column, ``j`` = row and
``k`` = slice, so a NIfTI affine is the engine affine with its first and
third index columns swapped, and x and y negated (LPS to RAS).

References
----------
.. [1] NEMA PS3.3, *DICOM Information Object Definitions*, section C.7.6.2
   "Image Plane Module" (equation C.7.6.2.1-1).
.. [2] R. W. Cox et al., "A (sort of) new image data format standard: NIfTI-1",
   NeuroImage 22 (2004) e1440 (the sform/qform affine to RAS+ space).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "LPS_TO_RAS",
    "ORIENTATION_TOLERANCE",
    "SWAP_SLICE_COL",
    "PlaneAxes",
    "CoincidentSlicesError",
    "SliceStack",
    "plane_axes",
    "orientation_label",
    "dicom_affine",
    "scaling_affine",
    "stack_slices",
    "lps_affine_to_nifti",
    "nifti_affine_to_lps",
    "spacing_from_affine",
    "same_orientation",
]

#: Diagonal sign change between LPS and RAS (its own inverse).
LPS_TO_RAS: np.ndarray = np.diag([-1.0, -1.0, 1.0, 1.0])

#: Index permutation (slice, row, col) <-> (col, row, slice) = NIfTI (i, j, k).
SWAP_SLICE_COL: np.ndarray = np.array(
    [[0.0, 0.0, 1.0, 0.0], [0.0, 1.0, 0.0, 0.0], [1.0, 0.0, 0.0, 0.0], [0.0, 0.0, 0.0, 1.0]]
)

#: Largest departure from unit length / orthogonality accepted in direction cosines.
ORIENTATION_TOLERANCE: float = 1e-3


@dataclass(frozen=True)
class PlaneAxes:
    """Unit vectors of an image plane in patient LPS coordinates.

    Attributes
    ----------
    col_dir : numpy.ndarray
        Direction of increasing column index (first three values of
        ImageOrientationPatient).
    row_dir : numpy.ndarray
        Direction of increasing row index (last three values).
    normal : numpy.ndarray
        ``col_dir x row_dir``; slices are sorted along it.
    """

    col_dir: np.ndarray
    row_dir: np.ndarray
    normal: np.ndarray


def plane_axes(orientation: object) -> PlaneAxes:
    """Validate six direction cosines and return the plane's unit vectors.

    Parameters
    ----------
    orientation : sequence of 6 float
        ImageOrientationPatient.

    Raises
    ------
    ValueError
        If the values are not two (nearly) orthonormal vectors.
    """
    try:
        values = np.asarray([float(v) for v in orientation], dtype=np.float64)  # type: ignore[union-attr]
    except (TypeError, ValueError) as exc:
        raise ValueError(f"orientation: not six numbers ({orientation!r})") from exc
    if values.shape != (6,) or not np.all(np.isfinite(values)):
        raise ValueError(f"orientation: expected six finite numbers, got {orientation!r}")
    col_dir, row_dir = values[:3], values[3:]
    n1, n2 = np.linalg.norm(col_dir), np.linalg.norm(row_dir)
    if abs(n1 - 1.0) > ORIENTATION_TOLERANCE or abs(n2 - 1.0) > ORIENTATION_TOLERANCE:
        raise ValueError(f"orientation: direction cosines are not unit vectors ({orientation!r})")
    col_dir, row_dir = col_dir / n1, row_dir / n2
    if abs(float(col_dir @ row_dir)) > ORIENTATION_TOLERANCE:
        raise ValueError(f"orientation: row and column directions are not orthogonal ({orientation!r})")
    normal = np.cross(col_dir, row_dir)
    normal /= np.linalg.norm(normal)
    return PlaneAxes(col_dir=col_dir, row_dir=row_dir, normal=normal)


def same_orientation(a: PlaneAxes, b: PlaneAxes, *, tol: float = ORIENTATION_TOLERANCE) -> bool:
    """True when two planes have the same row and column directions within ``tol``."""
    return bool(
        np.max(np.abs(a.col_dir - b.col_dir)) <= tol and np.max(np.abs(a.row_dir - b.row_dir)) <= tol
    )


def orientation_label(normal: np.ndarray) -> str:
    """Name the plane whose normal (LPS) is ``normal``.

    Returns ``"axial"`` (normal mostly head-foot), ``"coronal"`` (mostly
    anterior-posterior), ``"sagittal"`` (mostly left-right), or ``"oblique"``
    when no axis holds more than cos 30 deg of the unit normal.
    """
    n = np.abs(np.asarray(normal, dtype=np.float64))
    axis = int(np.argmax(n))
    if n[axis] < np.cos(np.deg2rad(30.0)):
        return "oblique"
    return ("sagittal", "coronal", "axial")[axis]


def dicom_affine(
    origin: np.ndarray, axes: PlaneAxes, pixel_spacing: tuple[float, float], slice_step: np.ndarray
) -> np.ndarray:
    """Affine from ``(slice, row, col)`` to LPS mm for a DICOM image stack.

    Parameters
    ----------
    origin : array of 3 float
        ImagePositionPatient of the first (sorted) slice.
    axes : PlaneAxes
        From :func:`plane_axes`.
    pixel_spacing : (float, float)
        DICOM PixelSpacing: (row spacing, column spacing) in mm.
    slice_step : array of 3 float
        Vector from one slice's first pixel to the next slice's.

    References
    ----------
    .. [1] NEMA PS3.3 C.7.6.2.1.1, equation C.7.6.2.1-1.
    """
    affine = np.eye(4)
    affine[:3, 0] = np.asarray(slice_step, dtype=np.float64)
    affine[:3, 1] = axes.row_dir * float(pixel_spacing[0])
    affine[:3, 2] = axes.col_dir * float(pixel_spacing[1])
    affine[:3, 3] = np.asarray(origin, dtype=np.float64)
    return affine


def scaling_affine(spacing: tuple[float, float, float]) -> np.ndarray:
    """Affine of a picture without patient geometry: ``diag(spacing)``."""
    return np.diag([float(spacing[0]), float(spacing[1]), float(spacing[2]), 1.0])


class CoincidentSlicesError(ValueError):
    """Two slices lie in the same plane; ``first`` and ``second`` index the input."""

    def __init__(self, first: int, second: int) -> None:
        self.first, self.second = first, second
        super().__init__(f"positions: slices {first} and {second} lie in the same plane")


@dataclass(frozen=True)
class SliceStack:
    """Slices sorted along their plane normal.

    Attributes
    ----------
    order : numpy.ndarray
        Indices that sort the input positions (ascending along the normal).
    positions : numpy.ndarray
        Sorted projections on the normal (mm).
    spacing : float
        Median gap between sorted slice planes (mm).
    step : numpy.ndarray
        Mean vector from one sorted position to the next (LPS mm); when the
        gaps are uneven, rescaled so that its normal component is the median
        gap.
    uniform : bool
        False when some gap differs from the median by more than the tolerance.
    gaps : numpy.ndarray
        The gaps between consecutive sorted planes (mm).
    """

    order: np.ndarray
    positions: np.ndarray
    spacing: float
    step: np.ndarray
    uniform: bool
    gaps: np.ndarray


def stack_slices(
    positions: np.ndarray,
    normal: np.ndarray,
    *,
    default_spacing: float,
    relative_tolerance: float = 0.01,
) -> SliceStack:
    """Sort slice positions along the plane normal and measure their gaps.

    Instance numbers are not spatial order; the projection of
    ImagePositionPatient on the normal is (common practice).

    Parameters
    ----------
    positions : (n, 3) array
        ImagePositionPatient of every slice, in any order.
    normal : (3,) array
        Unit plane normal.
    default_spacing : float
        Slice spacing to report for a single slice (e.g. SliceThickness).
    relative_tolerance : float
        Gaps within this fraction of the median gap (or 1e-3 mm) count as equal.

    Raises
    ------
    CoincidentSlicesError
        ``positions``: two slices at the same place (gap below 1e-3 mm); a
        ``ValueError``.
    """
    pos = np.asarray(positions, dtype=np.float64).reshape(-1, 3)
    proj = pos @ np.asarray(normal, dtype=np.float64)
    order = np.argsort(proj, kind="stable")
    sorted_proj = proj[order]
    if len(pos) == 1:
        step = np.asarray(normal, dtype=np.float64) * float(default_spacing)
        return SliceStack(order, sorted_proj, float(default_spacing), step, True, np.zeros(0))
    gaps = np.diff(sorted_proj)
    if np.any(gaps < 1e-3):
        k = int(np.argmax(gaps < 1e-3))
        raise CoincidentSlicesError(int(order[k]), int(order[k + 1]))
    median = float(np.median(gaps))
    uniform = bool(np.all(np.abs(gaps - median) <= max(1e-3, relative_tolerance * median)))
    step = (pos[order[-1]] - pos[order[0]]) / (len(pos) - 1)
    if not uniform:
        # Keep the mean direction (it carries any gantry-tilt shear) but the median gap.
        step = step * (median / float(step @ np.asarray(normal, dtype=np.float64)))
    return SliceStack(order, sorted_proj, median, step, uniform, gaps)


def lps_affine_to_nifti(affine: np.ndarray) -> np.ndarray:
    """NIfTI affine (``(i, j, k) = (col, row, slice)`` to RAS) from an engine affine."""
    return LPS_TO_RAS @ np.asarray(affine, dtype=np.float64) @ SWAP_SLICE_COL


def nifti_affine_to_lps(affine: np.ndarray) -> np.ndarray:
    """Engine affine (``(slice, row, col)`` to LPS) from a NIfTI affine."""
    return LPS_TO_RAS @ np.asarray(affine, dtype=np.float64) @ SWAP_SLICE_COL


def spacing_from_affine(affine: np.ndarray) -> tuple[float, float, float]:
    """Length of each index column of an affine: the step in mm per index."""
    norms = np.linalg.norm(np.asarray(affine, dtype=np.float64)[:3, :3], axis=0)
    return float(norms[0]), float(norms[1]), float(norms[2])
