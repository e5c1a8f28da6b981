"""The three planes of a volume as a viewer shows them, and outlines cut by those planes.

A volume ``[slice, row, col]`` has three array planes: the slices
themselves (fixed ``slice``), and the planes of fixed ``row`` and of fixed
``col``. :func:`plane_views` names each plane from the volume's affine
(Axial, Coronal or Sagittal: the patient axis closest to its normal) and
says how to lay it on a screen the way the trade does (common practice,
"radiological convention"): the patient's right on the screen's left in
axial and coronal planes, anterior at the top of an axial plane, the head at
the top of coronal and sagittal planes and anterior on the left of a
sagittal plane. A picture without a patient frame is shown as stored.

Outlines are committed per slice, so in the row and column planes each
slice is a slab one slice thick: :func:`section_contours` cuts a label's
outlines along a line of every slice (sub-pixel along the line, from the
outline's φ) and joins the slabs into closed polylines;
:func:`line_intervals` cuts a live front's contours along a line.
:func:`signed_distance` measures from a point to an outline (the Probe).
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from engine.session.outline import Outline, phi_contours

__all__ = ["PlaneView", "plane_views", "section_contours", "line_intervals", "slab_rectangles",
           "signed_distance", "auto_window", "PLANE_AXES"]

#: Array axes of each plane, keyed by the fixed axis: ``(first, second)`` of its natural 2-D array.
PLANE_AXES = {0: (1, 2), 1: (0, 2), 2: (0, 1)}

# Patient (LPS) direction that points to the screen's right / down, per plane name (common practice).
_SCREEN = {
    "Axial": (np.array([1.0, 0, 0]), np.array([0, 1.0, 0])),  # right: patient left (+x); down: posterior (+y)
    "Coronal": (np.array([1.0, 0, 0]), np.array([0, 0, -1.0])),  # right: patient left; down: feet (-z)
    "Sagittal": (np.array([0, 1.0, 0]), np.array([0, 0, -1.0])),  # right: posterior (+y); down: feet
}
_NAMES = ("Sagittal", "Coronal", "Axial")  # by the patient axis (x, y, z) closest to the normal
_LETTERS = (("R", "L"), ("A", "P"), ("I", "S"))  # (negative, positive) end of x, y, z in LPS


@dataclass(frozen=True)
class PlaneView:
    """How to show one plane of a volume.

    Attributes
    ----------
    fixed : int
        The array axis held fixed (0: a slice, 1: a row, 2: a column).
    name : str
        ``"Axial"``, ``"Coronal"``, ``"Sagittal"``, or ``""`` without a patient frame.
    horizontal : int
        0 or 1: which axis of the plane's natural array (``PLANE_AXES[fixed]``)
        runs left to right on the screen; the other runs top to bottom.
    flip_h, flip_v : bool
        Whether that axis runs right to left / bottom to top instead.
    edges : (str, str, str, str)
        Patient direction letters at the screen's left, right, top and bottom
        (R, L, A, P, S, I; empty without a patient frame).
    """

    fixed: int
    name: str
    horizontal: int
    flip_h: bool
    flip_v: bool
    edges: tuple[str, str, str, str]

    @property
    def axes(self) -> tuple[int, int]:
        """Array axes of the plane's natural 2-D array (first, second)."""
        return PLANE_AXES[self.fixed]

    def display_matrix(self, shape: Sequence[int], spacing: Sequence[float]) -> NDArray[np.float64]:
        """The 2 x 3 matrix taking a natural pixel position ``(p0, p1, 1)`` to screen millimetres ``(x, y)``.

        ``shape`` and ``spacing`` are the volume's (all three axes); x grows
        to the screen's right, y downwards; pixel centres of the plane fall
        on ``[0, (n - 1) * spacing]``.
        """
        a = self.axes
        n = [int(shape[a[0]]), int(shape[a[1]])]
        s = [float(spacing[a[0]]), float(spacing[a[1]])]
        h, v = self.horizontal, 1 - self.horizontal
        m = np.zeros((2, 3))
        for row, axis, flip in ((0, h, self.flip_h), (1, v, self.flip_v)):
            if flip:
                m[row, axis] = -s[axis]
                m[row, 2] = (n[axis] - 1) * s[axis]
            else:
                m[row, axis] = s[axis]
        return m


def _letter(direction: NDArray[np.floating]) -> str:
    k = int(np.argmax(np.abs(direction)))
    return _LETTERS[k][1 if direction[k] > 0 else 0]


def plane_views(affine: ArrayLike, *, patient_frame: bool = True) -> dict[int, PlaneView]:
    """The three planes of a volume (keyed by the fixed axis), named and laid out from ``affine``.

    Parameters
    ----------
    affine : (4, 4) array
        Index ``(slice, row, col, 1)`` to patient LPS mm (:class:`engine.io.Volume`).
    patient_frame : bool
        False for pictures with no patient frame (PNG, TIFF, arrays): no names,
        no letters, shown as stored (rows down, columns right; slices down in
        the row and column planes).
    """
    a = np.asarray(affine, dtype=float)
    if a.shape != (4, 4) or not np.all(np.isfinite(a)):
        raise ValueError(f"affine: expected a finite 4 x 4 matrix, got shape {a.shape}")
    out: dict[int, PlaneView] = {}
    for fixed, (p0, p1) in PLANE_AXES.items():
        if not patient_frame:
            out[fixed] = PlaneView(fixed, "", 1, False, False, ("", "", "", ""))
            continue
        d0 = a[:3, p0] / np.linalg.norm(a[:3, p0])
        d1 = a[:3, p1] / np.linalg.norm(a[:3, p1])
        normal = np.cross(d0, d1)
        name = _NAMES[int(np.argmax(np.abs(normal)))]
        right, down = _SCREEN[name]
        horizontal = 0 if abs(d0 @ right) > abs(d1 @ right) else 1
        dh, dv = (d0, d1) if horizontal == 0 else (d1, d0)
        flip_h, flip_v = bool(dh @ right < 0), bool(dv @ down < 0)
        to_right = -dh if flip_h else dh
        to_bottom = -dv if flip_v else dv
        edges = (_letter(-to_right), _letter(to_right), _letter(-to_bottom), _letter(to_bottom))
        out[fixed] = PlaneView(fixed, name, horizontal, flip_h, flip_v, edges)
    return out


def _outline_line(outline: Outline, axis: int, index: int, far: float) -> NDArray[np.floating]:
    """φ (mm) along row ``index`` (axis 1) or column ``index`` (axis 2) of an outline's slice."""
    mask_line = outline.mask[index, :] if axis == 1 else outline.mask[:, index]
    out = np.where(mask_line, -far, far).astype(float)
    r0, c0 = outline.phi_origin
    rows, cols = outline.phi.shape
    if axis == 1 and r0 <= index < r0 + rows:
        out[c0:c0 + cols] = outline.phi[index - r0, :]
    elif axis == 2 and c0 <= index < c0 + cols:
        out[r0:r0 + rows] = outline.phi[:, index - c0]
    return out


def section_contours(outlines: Iterable[Outline], axis: int, index: int, *, slices: int,
                     spacing: Sequence[float]) -> list[NDArray[np.floating]]:
    """One label's committed outlines cut by the row (``axis=1``) or column (``axis=2``) plane ``index``.

    Each slice with an outline is a slab from ``k - 0.5`` to ``k + 0.5``;
    along the line the outline's φ gives sub-pixel ends (marching squares,
    Lorensen & Cline 1987, on the slabs' φ). Returns closed polylines in the
    plane's natural pixel coordinates ``(slice, col)`` or ``(slice, row)``.

    Parameters
    ----------
    outlines : iterable of Outline
        Outlines of one label (any slices).
    axis : int
        1: the plane of fixed row ``index``; 2: the plane of fixed column ``index``.
    slices : int
        Number of slices of the volume.
    spacing : (float, float)
        In-plane pixel spacing (row, col) in mm.
    """
    if axis not in (1, 2):
        raise ValueError(f"axis: expected 1 (row plane) or 2 (column plane), got {axis!r}")
    if slices < 1:
        raise ValueError(f"slices: expected >= 1, got {slices!r}")
    step = float(np.max(spacing))
    lines: dict[int, NDArray[np.floating]] = {}
    length = None
    for outline in outlines:
        size = outline.mask.shape[2 - axis]  # along the line
        if not 0 <= index < outline.mask.shape[axis - 1]:
            raise ValueError(f"index: {index} is outside the slice's {outline.mask.shape[axis - 1]} lines")
        length = size
        if 0 <= outline.slice < slices:
            lines[outline.slice] = _outline_line(outline, axis, index, 2.0 * step) / step
    if not lines:
        return []
    # Slab k fills rows 2k and 2k + 1 of the grid; φ in pixel units, clipped to ±2 (a signed
    # distance changes by at most one unit between neighbours, so crossings stay where they are).
    grid = np.full((2 * slices, length), 2.0)
    for k, line in lines.items():
        grid[2 * k] = grid[2 * k + 1] = np.clip(line, -2.0, 2.0)
    out = []
    for poly in phi_contours(grid, np.array([1.0, 1.0])):
        g = poly[:, 0]
        k = np.floor(g / 2.0)
        position = k - 0.5 + np.minimum(g - 2.0 * k, 1.0)
        out.append(np.column_stack([position, poly[:, 1]]))
    return out


def line_intervals(contours: Sequence[ArrayLike], axis: int, value: float) -> NDArray[np.floating]:
    """Where the line ``row = value`` (``axis=1``) or ``col = value`` (``axis=2``) runs inside closed contours.

    Contours are pixel ``(row, col)`` polylines (closed implicitly); inside
    is by the even-odd rule, so holes count. Returns an ``(m, 2)`` array of
    ``[start, end]`` positions along the line (columns or rows), sorted.
    """
    if axis not in (1, 2):
        raise ValueError(f"axis: expected 1 (row line) or 2 (column line), got {axis!r}")
    across, along = (0, 1) if axis == 1 else (1, 0)
    hits = []
    for c in contours:
        p = np.asarray(c, dtype=float).reshape(-1, 2)
        if len(p) < 3:
            continue
        q = np.roll(p, -1, axis=0)
        y0, y1 = p[:, across], q[:, across]
        crosses = (y0 <= value) != (y1 <= value)  # half-open: a vertex on the line counts once
        t = (value - y0[crosses]) / (y1[crosses] - y0[crosses])
        hits.append(p[crosses, along] + t * (q[crosses, along] - p[crosses, along]))
    if not hits:
        return np.zeros((0, 2))
    x = np.sort(np.concatenate(hits))
    return x[: len(x) // 2 * 2].reshape(-1, 2)


def slab_rectangles(intervals: NDArray[np.floating], slice_index: int) -> list[NDArray[np.floating]]:
    """Closed rectangles ``(slice, position)`` of intervals along a line, one slice thick."""
    k0, k1 = slice_index - 0.5, slice_index + 0.5
    return [np.array([[k0, a], [k0, b], [k1, b], [k1, a], [k0, a]]) for a, b in np.asarray(intervals).reshape(-1, 2)]


def signed_distance(contours: Sequence[ArrayLike], point_px: Sequence[float], spacing: Sequence[float]) -> float:
    """Distance (mm) from pixel ``(row, col)`` to the nearest contour, negative inside (even-odd rule).

    ``nan`` when there are no contours.
    """
    sp = np.asarray(spacing, dtype=float).reshape(2)
    x = np.asarray(point_px, dtype=float).reshape(2) * sp
    best = np.inf
    for c in contours:
        p = np.asarray(c, dtype=float).reshape(-1, 2) * sp
        if len(p) == 0:
            continue
        q = np.roll(p, -1, axis=0)
        d = q - p
        t = np.clip(np.einsum("ij,ij->i", x - p, d) / np.maximum(np.einsum("ij,ij->i", d, d), 1e-300), 0.0, 1.0)
        best = min(best, float(np.min(np.linalg.norm(p + t[:, None] * d - x, axis=1))))
    if not np.isfinite(best):
        return float("nan")
    inside = line_intervals(contours, 1, float(point_px[0]))
    col = float(point_px[1])
    is_inside = bool(np.any((inside[:, 0] <= col) & (col <= inside[:, 1]))) if len(inside) else False
    return -best if is_inside else best


def auto_window(array: ArrayLike, *, percentiles: tuple[float, float] = (0.5, 99.5),
                samples: int = 1_000_000) -> tuple[float, float]:
    """A display window ``(center, width)`` spanning the given percentiles of the intensities.

    Large arrays are subsampled evenly to about ``samples`` values.
    """
    a = np.asarray(array).ravel()
    if a.size == 0:
        raise ValueError("array: empty")
    stride = max(1, a.size // max(int(samples), 1))
    lo, hi = np.percentile(a[::stride], percentiles)
    if not hi > lo:
        lo, hi = float(np.min(a)), float(np.max(a))
    if not hi > lo:
        hi = lo + 1.0
    return 0.5 * (float(lo) + float(hi)), float(hi) - float(lo)
