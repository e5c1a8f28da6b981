"""Small geometric helpers of the front: zero crossings on the pixel grid, seed and stroke distances."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from numpy.typing import NDArray



def grid_crossing_points(values: NDArray[np.floating], step: NDArray[np.floating]) -> NDArray[np.floating]:
    """:func:`engine.nodes.lattice_band.crossing_points` of values on a whole pixel grid (shape = the image's), without a lookup.

    The same points in the same order (row-major per axis), from slices of
    the grid, so a large volume needs no lookup of every pixel's neighbours.
    """
    v = np.asarray(values, dtype=float)
    out = []
    for axis in range(v.ndim):
        head = v[(slice(None),) * axis + (slice(0, -1),)]
        tail = v[(slice(None),) * axis + (slice(1, None),)]
        change = (head < 0) != (tail < 0)
        va, vb = head[change], tail[change]
        pts = np.argwhere(change).astype(float)
        pts[:, axis] += va / (va - vb)
        out.append(pts * step)
    return np.concatenate(out) if out else np.empty((0, v.ndim))


def seed_function(seeds: NDArray[np.floating], spacing: NDArray[np.floating]) -> Callable[[NDArray[np.floating]], NDArray[np.floating]]:
    """φ of a union of seed disks/balls, min_k(|x − c_k| − r_k), in mm.

    Seed radii are in pixels along the finest axis.
    """
    centres = seeds[:, :-1] * spacing
    radii = seeds[:, -1] * float(np.min(spacing))

    def phi(points_mm: NDArray[np.floating]) -> NDArray[np.floating]:
        out = np.full(len(points_mm), np.inf)
        for c, r in zip(centres, radii):
            out = np.minimum(out, np.sqrt(np.sum((points_mm - c) ** 2, axis=1)) - r)
        return out

    return phi


def polyline_distance(points: NDArray[np.floating], polyline: NDArray[np.floating]) -> NDArray[np.floating]:
    """Distance from each point to an open polyline (a single point is allowed)."""
    if len(polyline) == 1:
        return np.sqrt(np.sum((points - polyline[0]) ** 2, axis=1))
    best = np.full(len(points), np.inf)
    a = polyline[:-1]
    b = polyline[1:]
    ab = b - a
    ab2 = np.maximum(np.sum(ab * ab, axis=1), 1e-300)
    # chunk over segments to bound memory
    chunk = max(1, 2_000_000 // max(len(points), 1))
    for s in range(0, len(a), chunk):
        aa, vv, ll = a[s:s + chunk], ab[s:s + chunk], ab2[s:s + chunk]
        ap = points[:, None, :] - aa[None]
        t = np.clip(np.einsum("psd,sd->ps", ap, vv) / ll[None], 0.0, 1.0)
        closest = aa[None] + t[..., None] * vv[None]
        d = np.sqrt(np.sum((points[:, None, :] - closest) ** 2, axis=2))
        best = np.minimum(best, d.min(axis=1))
    return best


def stroke_distance(points_mm: NDArray[np.floating], stroke_mm: NDArray[np.floating], radius_mm: float) -> NDArray[np.floating]:
    """Signed distance to a brush stroke (a capsule along the polyline), negative inside."""
    return polyline_distance(points_mm, stroke_mm) - radius_mm


def seed_disks(shape: tuple[int, ...], seeds: NDArray[np.floating]) -> NDArray[np.bool_]:
    """Pixels whose centre lies inside any seed disk ``(..., radius_px)`` (radius at least one pixel)."""
    inside = np.zeros(shape, dtype=bool)
    for seed in np.asarray(seeds, dtype=float):
        radius = max(seed[-1], 1.0)
        # only the seed's bounding box (a whole-volume coordinate grid is gigabytes)
        low = np.maximum(np.floor(seed[:-1] - radius).astype(np.int64), 0)
        high = np.minimum(np.ceil(seed[:-1] + radius).astype(np.int64), np.array(shape) - 1)
        if np.any(high < low):
            continue
        box = tuple(slice(lo, hi + 1) for lo, hi in zip(low, high))
        d2 = sum((axis - centre) ** 2 for axis, centre in zip(np.ogrid[box], seed[:-1]))
        inside[box] |= d2 <= radius**2
    return inside
