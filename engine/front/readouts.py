"""Read-outs of a front: φ, curvature and normals anywhere, contours, surfaces, masks, areas.

Part of :class:`engine.front.Front` (see :mod:`engine.front.core`).
"""

from __future__ import annotations

import warnings

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree

from engine.front.constants import FAR
from engine.front.state import FrontVanished, _locked
from engine.numerics.closest_point import closest_points
from engine.numerics.interpolant import LocalInterpolant

#: Offsets of a pixel's 3 × 3 neighbourhood.
_NEIGHBOURS = np.stack(np.meshgrid([-1, 0, 1], [-1, 0, 1], indexing="ij"), axis=-1).reshape(-1, 2)


class ReadOuts:
    """Part of :class:`~engine.front.Front` (see the module docstring)."""

    @property
    def phi(self) -> NDArray[np.floating]:
        """φ at the band nodes (mm); read-only view."""
        out = self._phi.view()
        out.flags.writeable = False
        return out

    def _interpolant(self) -> tuple[LocalInterpolant, NDArray[np.floating]]:
        """The band's local interpolant and the coefficients of the present φ (both cached until they change)."""
        b = self._band
        if b.interpolant is None:
            interp = self.layout.band_interpolant(b, self.params)
            if interp is None:
                raise FrontVanished("the band is too thin for an interpolant")
            b.interpolant = interp
        if self._coeffs is None:
            self._coeffs = self.layout.coefficients(b.interpolant, self._phi)
        return b.interpolant, self._coeffs

    def _to_mm(self, points_px: ArrayLike) -> NDArray[np.floating]:
        pts = np.asarray(points_px, dtype=float)
        if pts.ndim == 1:
            pts = pts[None]
        if pts.ndim != 2 or pts.shape[1] != self.ndim:
            raise ValueError(f"points must be (N, {self.ndim}) pixel coordinates, got shape {pts.shape}")
        if not np.all(np.isfinite(pts)):
            raise ValueError("points contain NaN or infinite coordinates")
        return pts * self.features.spacing

    @_locked
    def phi_at(self, points_px: ArrayLike) -> NDArray[np.floating]:
        """Signed distance (mm) to the front at pixel coordinates.

        Inside the band it is the RBF interpolant of φ; beyond it, the signed
        distance to the nearest vertex of the zero set (accurate to about h).
        """
        x = self._to_mm(points_px)
        interp, coeffs = self._interpolant()
        value, _, _ = interp.evaluate(x, coeffs, order=0)
        dist_owner, _ = interp.tree.query(x)
        outside_band = dist_owner > 1.5 * float(np.max(self.step_mm))
        if np.any(outside_band):
            b = self._band
            verts = self._crossings(b.indices, self._phi, b.lookup)
            d, _ = cKDTree(verts).query(x[outside_band])
            px = np.clip(np.rint(x[outside_band] / self.features.spacing).astype(np.int64), 0,
                         np.array(self.shape) - 1)
            value[outside_band] = np.where(self._inside[tuple(px.T)], -d, d)
        return value

    @_locked
    def curvature_at(self, points_px: ArrayLike) -> NDArray[np.floating]:
        """Curvature κ = ∇·(∇φ/|∇φ|) (1/mm) of the level set through each point."""
        x = self._to_mm(points_px)
        interp, coeffs = self._interpolant()
        _, grad, hess = interp.evaluate(x, coeffs)
        return curvature_from_derivatives(grad, hess)

    @_locked
    def normals_at(self, points_px: ArrayLike) -> NDArray[np.floating]:
        """Unit outward normals ∇φ/|∇φ| at pixel coordinates, in pixel axes order (mm-based directions)."""
        x = self._to_mm(points_px)
        interp, coeffs = self._interpolant()
        _, grad, _ = interp.evaluate(x, coeffs, order=1)
        return grad / np.maximum(np.linalg.norm(grad, axis=1, keepdims=True), 1e-300)

    @_locked
    def contours(self, *, refine: bool = True) -> list[NDArray[np.floating]]:
        """Closed sub-pixel outlines (2-D), (k, 2) pixel (row, col) arrays.

        Outer boundaries run counter-clockwise on screen (positive shoelace
        area on (row, col)), holes clockwise. With ``refine`` every vertex is
        projected onto the zero set of the RBF interpolant by Newton's method.
        """
        if self.ndim != 2:
            raise ValueError("contours() is for 2-D fronts; use surface() in 3-D")
        if self.vanished:
            return []
        from engine.analysis.contours import BandCutWarning, band_contour_set

        if refine:
            lines, closed = self._contour_set()
        else:
            nodes, values, detail = self.layout.contour_grid(self._band, self._phi)
            found = band_contour_set(nodes, values, detail=detail)
            lines, closed = found.polylines, found.closed
        cut = sum(1 for line, ok in zip(lines, closed) if not ok and not self._ends_on_border(line))
        if cut:
            warnings.warn(f"{cut} contour polyline(s) leave the band and are open; widen the band",
                          BandCutWarning, stacklevel=2)
        return [line.copy() for line in lines] if refine else lines

    def _ends_on_border(self, line: NDArray[np.floating]) -> bool:
        """Whether both ends of an open polyline (pixel coordinates) lie where an outline may stop.

        That is within a pixel of the image's border, or of a barrier pixel
        (a locked label's outline, which the band leaves out): there an open
        outline is expected, elsewhere the band has cut it.
        """
        last = np.array(self.shape[:2], dtype=float) - 1.0
        ends = line[[0, -1]]
        at_border = np.any((ends < 1.0) | (ends > last - 1.0), axis=1)
        if self._barrier is not None:
            near = np.clip(np.rint(ends).astype(int)[:, None, :] + _NEIGHBOURS[None], 0, last.astype(int))
            at_border |= np.any(self._barrier[near[..., 0], near[..., 1]], axis=1)
        return bool(np.all(at_border))

    def _contour_set(self) -> tuple[list[NDArray[np.floating]], NDArray[np.bool_]]:
        """Refined contours and which are closed (open ones end on the image's border, or where the band is cut).

        Kept until φ or the band changes (a result reads them for its contours and its area).
        """
        from engine.analysis.contours import band_contour_set

        kept = self._contours_kept
        if kept is not None and kept[0] is self._phi and kept[1] is self._band:
            return kept[2], kept[3]
        nodes, values, detail = self.layout.contour_grid(self._band, self._phi)
        found = band_contour_set(nodes, values, detail=detail)
        lines = found.polylines
        if lines:
            interp, coeffs = self._interpolant()
            lines = refine_polylines(lines, interp, coeffs, self.features.spacing)
        self._contours_kept = (self._phi, self._band, lines, found.closed)
        return lines, found.closed

    @_locked
    def surface(self) -> tuple[NDArray[np.floating], NDArray[np.int64]]:
        """Triangulated zero set of a 3-D front: vertices (k, 3) in voxel coordinates and faces (m, 3).

        Marching cubes (Lorensen & Cline, SIGGRAPH 1987; scikit-image's
        implementation) on the band's bounding box; lattice nodes outside the
        band take ±(band half-width) with the sign of their voxel. Scattered
        fronts use φ at the voxel centres (:meth:`pixel_phi`).
        """
        if self.ndim != 3:
            raise ValueError("surface() is for 3-D fronts; use contours() in 2-D")
        if self.vanished:
            return np.empty((0, 3)), np.empty((0, 3), dtype=np.int64)
        from skimage.measure import marching_cubes

        box = self.layout.surface_grid(self._band, self._phi,
                                       lambda keys: FAR * self.band_half_width * self._sign_from_pixels(keys))
        if box is None:  # φ at the voxel centres
            verts, faces, _, _ = marching_cubes(self.pixel_phi(), level=0.0)
            return verts, faces.astype(np.int64)
        dense, corner_mm = box
        verts, faces, _, _ = marching_cubes(dense, level=0.0, spacing=tuple(self.step_mm))
        return (verts + corner_mm) / self.features.spacing, faces.astype(np.int64)

    @_locked
    def pixel_phi(self) -> NDArray[np.floating]:
        """φ (mm) at every pixel centre: band values where the band has a node there, ±(beyond the band) elsewhere.

        With scattered nodes the band's values are interpolated to the pixel
        centres the active nodes cover.
        """
        out = np.where(self._current_inside(), -1.0, 1.0) * (FAR * self.band_half_width)
        if not self.vanished:
            b = self._band
            out[b.pixel_index] = self._pixel_band_values()
        return out

    @_locked
    def mask(self) -> NDArray[np.bool_]:
        """Pixels whose centre lies inside the front (φ < 0)."""
        return self._current_inside()

    def _current_inside(self) -> NDArray[np.bool_]:
        """A copy of the pixel inside image with the band's pixel centres as φ has them now."""
        inside = self._inside.copy()
        if not self.vanished:
            inside[self._band.pixel_index] = self._band_pixels_inside()
        return inside

    @_locked
    def area_mm2(self) -> float:
        """Area (2-D, from the refined contours) or volume (3-D, voxel count) inside the front, within the image.

        Where the outline runs off the image, the border closes it
        (:func:`engine.analysis.clipped_area.area_in_image`).
        """
        if self.ndim == 2 and not self.vanished:
            from engine.analysis.clipped_area import area_in_image

            lines, closed = self._contour_set()
            inside = self.mask()
            border = np.concatenate([inside[0], inside[-1], inside[:, 0], inside[:, -1]])
            return area_in_image(lines, closed, self.shape, self.features.spacing, border_inside=bool(border.all()))
        return float(self._inside.sum() * np.prod(self.features.spacing))

    @_locked
    def perimeter_mm(self) -> float:
        """Total length of the outlines (mm), 2-D only."""
        from engine.analysis.contours import polyline_length

        sp = self.features.spacing
        return float(sum(polyline_length(c * sp) for c in self.contours()))


def curvature_from_derivatives(grad: NDArray[np.floating], hess: NDArray[np.floating]) -> NDArray[np.floating]:
    """κ = (|g|² tr H − gᵀHg) / |g|³ (sum of principal curvatures)."""
    g2 = np.einsum("ni,ni->n", grad, grad)
    trace = np.trace(hess, axis1=1, axis2=2)
    ghg = np.einsum("ni,nij,nj->n", grad, hess, grad)
    return (g2 * trace - ghg) / np.maximum(g2, 1e-300) ** 1.5


def refine_polylines(lines: list[NDArray[np.floating]], interp: LocalInterpolant, coeffs: NDArray[np.floating],
                     spacing: NDArray[np.floating]) -> list[NDArray[np.floating]]:
    """Project contour vertices (pixel coordinates) onto the interpolant's zero set (Newton)."""
    counts = [len(c) for c in lines]
    pts = np.concatenate(lines) * spacing
    cp = closest_points(interp, coeffs, pts, start=pts, max_iter=8)
    out = cp.points / spacing
    return list(np.split(out, np.cumsum(counts)[:-1]))
