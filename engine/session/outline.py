"""Committed outlines: immutable values a viewer and a saver can share across threads.

An :class:`Outline` is one label's accepted outline on one slice: its pixel
mask, its sub-pixel contours with the curvature at every vertex, and the
level-set function φ (mm, negative inside) on the pixels around it, which is
what a carried front or a later correction starts from. Outlines made from a
front keep the front's sub-pixel geometry; outlines read back from a saved
mask get φ from a signed Euclidean distance transform of the mask (Danielsson,
Comput. Graph. Image Process. 14 (1980) 227-248; scipy's
``distance_transform_edt``), so their contours follow the pixel edges.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy import ndimage

from engine.analysis.contours import average_along_polyline, band_contours, polyline_length, signed_area

__all__ = ["Outline", "outline_from_front", "outline_from_mask", "outline_from_phi", "frozen_array",
           "shown_curvature", "CURVATURE_AVERAGING_MM"]

#: Gaussian σ (mm) along the outline of the curvature that curvature colours show: the per-vertex
#: curvature of a noisy image's outline speckles; this halves the speckle and leaves a bend a few
#: mm across standing out (examples/plot_curvature.py)
CURVATURE_AVERAGING_MM = 1.0

#: φ beyond the stored box, in mm times the box margin: only its sign matters there.
_FAR_PIXELS = 3.0
#: Pixels of φ kept around the outline (enough for a front's band to start from).
BOX_MARGIN = 12


def frozen_array(a: Any, dtype: Any = None) -> NDArray:
    """A read-only copy of ``a`` (safe to hand to another thread)."""
    out = np.array(a, dtype=dtype, copy=True)
    out.flags.writeable = False
    return out


@dataclass(frozen=True, eq=False)
class Outline:
    """One label's committed outline on one slice (immutable).

    Attributes
    ----------
    label, slice : int
        Label index (value in the saved mask) and slice of the volume.
    mask : (rows, cols) bool array
        Pixels whose centre lies inside.
    contours : tuple of (k, 2) float arrays
        Closed sub-pixel polylines in pixel ``(row, col)``; outer boundaries
        counter-clockwise on screen, holes clockwise.
    curvature : tuple of (k,) float arrays
        Curvature (1/mm) at every contour vertex, positive where the outline
        is convex.
    phi_origin : (int, int)
        Pixel of ``phi[0, 0]``.
    phi : 2-D float32 array
        φ (mm, negative inside) at the pixel centres of a box around the
        outline; beyond it φ has the sign of ``mask``.
    area_mm2, perimeter_mm : float
        Area inside and total outline length.
    record : mapping
        How the outline was made (model, parameters, seeds, steps, notes),
        recorded with the saved result.
    """

    label: int
    slice: int
    mask: NDArray[np.bool_]
    contours: tuple[NDArray[np.floating], ...]
    curvature: tuple[NDArray[np.floating], ...]
    phi_origin: tuple[int, int]
    phi: NDArray[np.float32]
    area_mm2: float
    perimeter_mm: float
    record: Mapping[str, Any] = field(default_factory=lambda: MappingProxyType({}))  # noqa: RUF009

    def pixel_phi(self, far: float) -> NDArray[np.floating]:
        """φ (mm) at every pixel of the slice: the stored box, ±``far`` beyond it."""
        out = np.where(self.mask, -far, far).astype(float)
        r0, c0 = self.phi_origin
        rows, cols = self.phi.shape
        out[r0:r0 + rows, c0:c0 + cols] = self.phi
        return out

    def same_as(self, other: "Outline") -> bool:
        """True when label, slice, mask and contours are equal (bit for bit)."""
        return (self.label == other.label and self.slice == other.slice
                and np.array_equal(self.mask, other.mask) and len(self.contours) == len(other.contours)
                and all(np.array_equal(a, b) for a, b in zip(self.contours, other.contours)))

    def with_label(self, label: int) -> "Outline":
        """The same outline under another label index."""
        return Outline(label, self.slice, self.mask, self.contours, self.curvature, self.phi_origin, self.phi,
                       self.area_mm2, self.perimeter_mm, self.record)


def _box(mask: NDArray[np.bool_], near: NDArray[np.bool_]) -> tuple[slice, slice]:
    """Bounding box of ``near`` (pixels close to the outline) grown by BOX_MARGIN, clipped to the slice."""
    rows = np.flatnonzero(near.any(axis=1))
    cols = np.flatnonzero(near.any(axis=0))
    if not len(rows):
        return slice(0, 0), slice(0, 0)
    r0 = max(int(rows[0]) - BOX_MARGIN, 0)
    r1 = min(int(rows[-1]) + BOX_MARGIN + 1, mask.shape[0])
    c0 = max(int(cols[0]) - BOX_MARGIN, 0)
    c1 = min(int(cols[-1]) + BOX_MARGIN + 1, mask.shape[1])
    return slice(r0, r1), slice(c0, c1)


def _measure(contours: Sequence[NDArray[np.floating]], spacing: NDArray[np.floating]) -> tuple[float, float]:
    area = float(sum(signed_area(c * spacing) for c in contours))
    length = float(sum(polyline_length(c * spacing) for c in contours))
    return area, length


def _freeze_record(record: Mapping[str, Any] | None) -> Mapping[str, Any]:
    return MappingProxyType(dict(record or {}))


def outline_from_phi(label: int, slice_index: int, pixel_phi: NDArray[np.floating], spacing: Sequence[float], *,
                     record: Mapping[str, Any] | None = None,
                     contours: Sequence[NDArray[np.floating]] | None = None,
                     curvature: Sequence[NDArray[np.floating]] | None = None) -> Outline:
    """An outline from φ at every pixel centre (mm, negative inside).

    Without ``contours`` they come from marching squares on ``pixel_phi``
    (Lorensen & Cline 1987, as in :func:`engine.analysis.contours.band_contours`), and
    without ``curvature`` it is κ = ∇·(∇φ/|∇φ|) of ``pixel_phi`` by central
    differences (smoothed over one pixel), interpolated at the vertices.
    """
    phi = np.asarray(pixel_phi, dtype=float)
    sp = np.asarray(spacing, dtype=float).reshape(2)
    mask = phi < 0
    near = np.abs(phi) < _FAR_PIXELS * float(np.max(sp)) * 2
    rs, cs = _box(mask, near | mask)
    if contours is None:
        contours = phi_contours(phi, sp)
    contours = tuple(frozen_array(c, float) for c in contours)
    if curvature is None:
        curvature = curvature_along(phi, contours, sp)
    curvature = tuple(frozen_array(k, float) for k in curvature)
    area, length = _measure(contours, sp)
    if _touches_border(mask):  # the outline runs along the image's edge: count what is inside the image
        area = float(np.count_nonzero(mask)) * float(np.prod(sp))
    return Outline(int(label), int(slice_index), frozen_array(mask, bool), contours, curvature,
                   (rs.start, cs.start), frozen_array(phi[rs, cs], np.float32), area, length,
                   _freeze_record(record))


def outline_from_mask(label: int, slice_index: int, mask: NDArray[np.bool_], spacing: Sequence[float], *,
                      record: Mapping[str, Any] | None = None) -> Outline:
    """An outline from a pixel mask: φ is the mask's signed distance (mm) through the pixel edges."""
    m = np.asarray(mask, dtype=bool)
    if m.ndim != 2:
        raise ValueError(f"mask: expected a 2-D slice, got shape {m.shape}")
    if not m.any():
        raise ValueError("mask: empty, there is no outline to keep")
    return outline_from_phi(label, slice_index, mask_signed_distance(m, spacing), spacing, record=record)


def _touches_border(mask: NDArray[np.bool_]) -> bool:
    return bool(mask[0].any() or mask[-1].any() or mask[:, 0].any() or mask[:, -1].any())


def phi_contours(pixel_phi: NDArray[np.floating], spacing: NDArray[np.floating]) -> list[NDArray[np.floating]]:
    """Closed zero-level polylines of a pixel φ; where the inside reaches the image's edge the outline
    closes along the edge (half a pixel outside the border pixels' centres)."""
    padded = np.pad(np.asarray(pixel_phi, dtype=float), 1, constant_values=float(np.max(spacing)))
    band = np.argwhere(np.abs(padded) < 2.5 * float(np.max(spacing)))
    if not len(band):
        return []
    lines = band_contours(band, padded[tuple(band.T)])
    top = np.array(pixel_phi.shape, dtype=float) - 0.5
    return [np.clip(line - 1.0, -0.5, top) for line in lines]


def mask_signed_distance(mask: NDArray[np.bool_], spacing: Sequence[float]) -> NDArray[np.floating]:
    """Signed distance (mm, negative inside) of a pixel mask's outline through the pixel edges."""
    sp = np.asarray(spacing, dtype=float)
    outside = ndimage.distance_transform_edt(~mask, sampling=sp)
    inside = ndimage.distance_transform_edt(mask, sampling=sp)
    half = 0.5 * float(np.min(sp))
    return np.where(mask, -(inside - half), outside - half)


def curvature_along(pixel_phi: NDArray[np.floating], contours: Sequence[NDArray[np.floating]],
                    spacing: NDArray[np.floating]) -> tuple[NDArray[np.floating], ...]:
    """κ = ∇·(∇φ/|∇φ|) (1/mm) of a pixel φ at contour vertices, by central differences of a lightly smoothed φ."""
    if not contours:
        return ()
    phi = ndimage.gaussian_filter(np.asarray(pixel_phi, dtype=float), 1.0)
    gr, gc = np.gradient(phi, *spacing)
    norm = np.maximum(np.hypot(gr, gc), 1e-12)
    nr, nc = gr / norm, gc / norm
    kappa = np.gradient(nr, spacing[0], axis=0) + np.gradient(nc, spacing[1], axis=1)
    return tuple(ndimage.map_coordinates(kappa, np.asarray(c).T, order=1, mode="nearest") for c in contours)


def shown_curvature(contours: Sequence[NDArray[np.floating]], curvature: Sequence[NDArray[np.floating]],
                    spacing: Sequence[float]) -> tuple[NDArray[np.floating], ...]:
    """What curvature colours show: each contour's curvature averaged along it over CURVATURE_AVERAGING_MM."""
    sp = np.asarray(spacing, dtype=float)
    return tuple(frozen_array(average_along_polyline(k, np.asarray(c) * sp, CURVATURE_AVERAGING_MM), float)
                 for c, k in zip(contours, curvature))


def outline_from_front(label: int, slice_index: int, front: Any, *,
                       record: Mapping[str, Any] | None = None) -> Outline:
    """An outline from a 2-D front: its refined contours, its curvature there, its pixel φ and mask."""
    contours = front.contours()
    if not contours:
        raise ValueError("the front has no outline (it vanished or filled the slice)")
    pixel_phi = front.pixel_phi()
    curvature = [front.curvature_at(c) for c in contours]
    out = outline_from_phi(label, slice_index, pixel_phi, front.features.spacing, record=record,
                           contours=contours, curvature=curvature)
    mask = front.mask()
    if not np.array_equal(mask, out.mask):  # the front's own inside image is the reference
        out = Outline(out.label, out.slice, frozen_array(mask, bool), out.contours, out.curvature,
                      out.phi_origin, out.phi, out.area_mm2, out.perimeter_mm, out.record)
    return out
