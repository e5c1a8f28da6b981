"""Edits of a front between steps: brush strokes, margins, dropping parts, pins and barriers.

Part of :class:`engine.front.Front` (see :mod:`engine.front.core`).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import ndimage

from engine.front.constants import FAR
from engine.front.geometry import stroke_distance
from engine.front.state import _locked


class Edits:
    """Part of :class:`~engine.front.Front` (see the module docstring)."""

    def _edit(self, combine: Callable[[NDArray[np.floating], NDArray[np.floating], NDArray[np.floating]],
                                      NDArray[np.floating]],
              extra_starts: NDArray[np.floating] | None = None,
              near: tuple[NDArray[np.floating], float] | None = None) -> None:
        """Apply ``combine(values, positions_mm, pixels)`` to φ at nodes and pixel centres, and rebuild.

        ``near`` = (points in mm, radius in mm): the edit can change a pixel's side only within the
        radius of those points (a brush stroke), so only the pixels there are looked at again.
        """
        if self.vanished:
            raise ValueError("the outline has vanished; start a new front from seeds or a mask")
        b = self._band
        starts = self._crossings(b.indices, self._phi, b.lookup)
        if extra_starts is not None and len(extra_starts):
            starts = np.concatenate([starts, extra_starts]) if len(starts) else extra_starts

        def values_at(indices: NDArray[np.int64]) -> NDArray[np.floating]:
            return combine(self._current_values(indices), self.layout.positions(indices),
                           self.layout.pixels(indices))

        # the inside image must follow the edit beyond the band as well
        self._apply_to_pixels(combine, near)
        self._build_band(starts, values_at)
        self._swap(converged=False)
        self._restart_convergence()

    def _apply_to_pixels(self, combine: Callable[[NDArray[np.floating], NDArray[np.floating],
                                                  NDArray[np.floating]], NDArray[np.floating]],
                         near: tuple[NDArray[np.floating], float] | None = None) -> None:
        """Re-evaluate the edit at every pixel centre it can change (with ``near``: those in the stroke's box).

        Outside the stroke's box a stroke changes no pixel's φ sign, so there a
        pixel beyond the band keeps its side (φ there is ±far by its side). A
        band pixel keeps it too on a lattice, where its inside bit is φ's sign;
        on scattered nodes a barrier holds band pixels outside against φ, so
        those are read again as the whole image would read them.
        """
        sp = self.features.spacing
        box = tuple(slice(0, n) for n in self.shape)
        if near is not None:
            points_mm, radius_mm = near
            lo = np.floor((points_mm.min(axis=0) - radius_mm) / sp).astype(int) - 1
            hi = np.ceil((points_mm.max(axis=0) + radius_mm) / sp).astype(int) + 2
            box = tuple(slice(max(a, 0), min(b, n)) for a, b, n in zip(lo, hi, self.shape))
        corner = np.array([b.start for b in box])
        size = tuple(max(b.stop - b.start, 0) for b in box)
        new_inside = None
        if all(size):  # else the stroke lies outside the image
            grid = np.indices(size).reshape(len(size), -1).T + corner
            part = self._inside[box]
            base = np.where(part.reshape(-1), -1.0, 1.0) * FAR * self.band_half_width
            values, mm, px = self.layout.pixel_grid_values(self._band, self._phi, grid, base, sp)
            new_part = (combine(values, mm, px) < 0).reshape(size)
            if not np.array_equal(new_part, part):
                new_inside = self._inside.copy()
                new_inside[box] = new_part
        if near is not None and self.layout.holds_barrier_on_pixels:
            pixels = np.stack(self._band.pixel_index, axis=1)
            beyond = ~np.all((pixels >= corner) & (pixels < corner + np.array(size)), axis=1)
            if np.any(beyond):
                pixels = pixels[beyond]
                now = combine(self._pixel_band_values()[beyond], pixels * sp, pixels.astype(float)) < 0
                at = tuple(pixels.T)
                if not np.array_equal(now, (self._inside if new_inside is None else new_inside)[at]):
                    new_inside = self._inside.copy() if new_inside is None else new_inside
                    new_inside[at] = now
        if new_inside is None:
            return
        self._swap(inside=new_inside)
        self._reset_sums()

    def _stroke(self, stroke: object) -> tuple[NDArray[np.floating], float]:
        if isinstance(stroke, tuple) and len(stroke) == 2:
            points, radius = stroke
        else:
            raise ValueError("stroke must be (points_px, radius_px): a polyline and a radius in pixels")
        pts = np.asarray(points, dtype=float).reshape(-1, self.ndim)
        if len(pts) == 0 or not np.all(np.isfinite(pts)):
            raise ValueError("stroke points must be finite pixel coordinates")
        if not float(radius) > 0:
            raise ValueError(f"stroke radius must be > 0 pixels, got {radius!r}")
        return pts * self.features.spacing, float(radius) * float(np.min(self.features.spacing))

    @_locked
    def extend(self, stroke: tuple[ArrayLike, float]) -> None:
        """Add the area swept by a brush stroke: φ ← min(φ, d_stroke)."""
        pts, radius = self._stroke(stroke)
        self._edit(lambda v, mm, px: np.minimum(v, stroke_distance(mm, pts, radius)),
                   _stroke_outline(pts, radius, self.h), near=(pts, radius))

    @_locked
    def trim(self, stroke: tuple[ArrayLike, float]) -> None:
        """Cut the area swept by a brush stroke out: φ ← max(φ, −d_stroke)."""
        pts, radius = self._stroke(stroke)
        self._edit(lambda v, mm, px: np.maximum(v, -stroke_distance(mm, pts, radius)),
                   _stroke_outline(pts, radius, self.h), near=(pts, radius))

    @_locked
    def margin(self, mm: float) -> None:
        """Grow (mm > 0) or shrink (mm < 0) the outline by a margin: φ ← φ − mm, then reinitialise."""
        if not np.isfinite(mm):
            raise ValueError(f"mm must be finite, got {mm!r}")
        chunk = 0.4 * self.band_half_width
        remaining = float(mm)
        while abs(remaining) > 0:
            part = float(np.clip(remaining, -chunk, chunk))
            self._edit(lambda v, mm, px, p=part: v - p)
            remaining -= part
            if abs(remaining) < 1e-12:
                break

    @_locked
    def keep_parts(self, points_px: ArrayLike) -> int:
        """Remove every separate part of the inside that holds none of ``points_px``; returns how many went.

        Parts are the connected components of the pixel inside image (full
        connectivity). Nothing is removed when no part holds any of the
        points (so a front that moved off its seeds is never emptied).
        """
        pts = np.asarray(points_px, dtype=float).reshape(-1, self.ndim)
        if len(pts) == 0 or not np.all(np.isfinite(pts)):
            raise ValueError("points_px must be finite pixel coordinates")
        inside = self.mask()
        labels, count = ndimage.label(inside, structure=np.ones((3,) * self.ndim, dtype=bool))
        if count <= 1:
            return 0
        px = np.clip(np.rint(pts).astype(np.int64), 0, np.array(self.shape) - 1)
        held = np.unique(labels[tuple(px.T)])
        held = held[held > 0]
        if len(held) == 0:
            return 0
        drop = np.ones(count + 1, dtype=bool)
        drop[0] = False
        drop[held] = False
        if not np.any(drop):
            return 0
        # pixels of dropped parts, grown by one so nodes between pixel centres go too,
        # but never next to a kept part (whose outline must not move)
        box = np.ones((3,) * self.ndim, dtype=bool)
        kept = np.isin(labels, held)
        gone = ndimage.binary_dilation(drop[labels], structure=box) & ~ndimage.binary_dilation(kept, structure=box)
        far = FAR * self.band_half_width

        def combine(values: NDArray[np.floating], mm: NDArray[np.floating],
                    px: NDArray[np.floating]) -> NDArray[np.floating]:
            px_idx = tuple(np.clip(np.rint(px).astype(np.int64), 0, np.array(self.shape) - 1).T)
            return np.where(gone[px_idx], np.maximum(values, far), values)

        self._edit(combine)
        return int(drop.sum())

    @_locked
    def pin(self, mask: ArrayLike | None, *, replace: bool = False) -> None:
        """Freeze the front inside ``mask`` (pixel array); ``None`` clears all pins."""
        self._swap(pins=self._merge_mask(self._pins, mask, replace, "mask"))
        self._refresh_node_masks()

    @_locked
    def set_barrier(self, mask: ArrayLike | None) -> None:
        """Area the front may not enter (other labels' locked outlines); ``None`` clears it."""
        self._swap(barrier=self._merge_mask(None, mask, True, "mask"))
        self._refresh_node_masks()

    def _merge_mask(self, old: NDArray[np.bool_] | None, mask: ArrayLike | None, replace: bool,
                    name: str) -> NDArray[np.bool_] | None:
        if mask is None:
            return None
        m = np.asarray(mask, dtype=bool)
        if m.shape != self.shape:
            raise ValueError(f"{name} shape {m.shape} does not match the image shape {self.shape}")
        if old is not None and not replace:
            m = m | old
        m = m.copy()
        m.flags.writeable = False
        return m


def _stroke_outline(points_mm: NDArray[np.floating], radius: float, h: float) -> NDArray[np.floating]:
    """Points on the boundary of a brush stroke, as starts for the band around it."""
    dim = points_mm.shape[1]
    if dim == 2:
        angles = np.linspace(0, 2 * np.pi, max(16, int(2 * np.pi * radius / h)), endpoint=False)
        ring = radius * np.stack([np.cos(angles), np.sin(angles)], axis=1)
    else:
        n = max(32, int(4 * np.pi * radius**2 / h**2))
        k = np.arange(n) + 0.5
        phi_ang = np.arccos(1 - 2 * k / n)
        theta = np.pi * (1 + 5**0.5) * k
        ring = radius * np.stack([np.cos(phi_ang), np.sin(phi_ang) * np.cos(theta), np.sin(phi_ang) * np.sin(theta)], 1)
    dense = [points_mm[:1]]
    for a, b in zip(points_mm[:-1], points_mm[1:]):
        n = max(1, int(np.ceil(np.linalg.norm(b - a) / h)))
        dense.append(a + (b - a) * (np.arange(1, n + 1) / n)[:, None])
    path = np.concatenate(dense)
    return (path[:, None, :] + ring[None]).reshape(-1, dim)
