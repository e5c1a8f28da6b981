"""Small geometric helpers of the front: zero crossings, node balls, seed and stroke distances."""

from __future__ import annotations

import itertools
from collections.abc import Callable

import numpy as np
from numpy.typing import NDArray
from scipy import ndimage

from engine.nodes.lattice import LatticeLookup


#: Largest grid (nodes) on which :func:`nodes_near` runs one distance
#: transform; larger bounding boxes are cut into slabs along the first axis.
DENSE_DISTANCE_LIMIT = 1 << 24


def nodes_near(centres: NDArray[np.int64], step: NDArray[np.floating], radius: float,
               upper: NDArray[np.int64]) -> NDArray[np.int64]:
    """Lattice nodes within ``radius`` (mm) of any of the lattice nodes ``centres``, clipped to [0, upper].

    The union of the balls of lattice offsets around every centre, in
    row-major order without duplicates, from exact Euclidean distance
    transforms (Maurer, Qi & Raghavan, IEEE Trans. PAMI 25(2) (2003) 265-270,
    as scipy implements it) rather than a ball of offsets per centre (in 3-D
    thousands of offsets times tens of thousands of centres). A bounding box
    beyond DENSE_DISTANCE_LIMIT nodes is done in slabs along the first axis,
    each with the centres within ``radius`` of it.
    """
    idx = np.asarray(centres, dtype=np.int64)
    step = np.asarray(step, dtype=float)
    upper = np.asarray(upper, dtype=np.int64)
    if len(idx) == 0:
        return np.zeros((0, idx.shape[1]), dtype=np.int64)
    pad = np.floor(radius / step).astype(np.int64)
    low = np.maximum(idx.min(axis=0) - pad, 0)
    high = np.minimum(idx.max(axis=0) + pad, upper)
    across = int(np.prod(high[1:] - low[1:] + 1))
    thickness = max(1, DENSE_DISTANCE_LIMIT // across - 2 * int(pad[0]))
    order = np.argsort(idx[:, 0], kind="stable")
    first = idx[order, 0]
    found = []
    for a in range(int(low[0]), int(high[0]) + 1, thickness):
        b = min(a + thickness, int(high[0]) + 1)  # this slab's nodes: a <= i0 < b
        lo, hi = np.searchsorted(first, [a - pad[0], b + pad[0]])
        near = idx[order[lo:hi]]
        if len(near) == 0:
            continue
        box_low = np.concatenate([[max(a - int(pad[0]), 0)], low[1:]])
        box_high = np.concatenate([[min(b - 1 + int(pad[0]), int(upper[0]))], high[1:]])
        free = np.ones(tuple(int(v) for v in box_high - box_low + 1), dtype=bool)
        free[tuple((near - box_low).T)] = False
        dist = ndimage.distance_transform_edt(free, sampling=step)
        nodes = np.argwhere(dist <= radius) + box_low
        found.append(nodes[(nodes[:, 0] >= a) & (nodes[:, 0] < b)])
    return np.concatenate(found) if found else np.zeros((0, idx.shape[1]), dtype=np.int64)


#: Largest bounding box (nodes) that :func:`dilate_nodes` grows as a dense
#: array (one byte per node); larger sets grow ring by ring on sorted keys.
DENSE_DILATION_LIMIT = 1 << 26


def dilate_nodes(indices: NDArray[np.int64], layers: int, upper: NDArray[np.int64]) -> NDArray[np.int64]:
    """The node set grown by ``layers`` rings of lattice neighbours (3^d box), clipped to [0, upper].

    Returned in row-major (lexicographic) order without duplicates.
    """
    idx = np.asarray(indices, dtype=np.int64)
    dim = idx.shape[1]
    upper = np.asarray(upper, dtype=np.int64)
    layers = max(int(layers), 0)
    low = np.maximum(idx.min(axis=0) - layers, 0)
    high = np.minimum(idx.max(axis=0) + layers, upper)
    shape = tuple(int(v) for v in high - low + 1)
    if int(np.prod(shape)) <= DENSE_DILATION_LIMIT:
        grid = np.zeros(shape, dtype=np.uint8)
        grid[tuple((idx - low).T)] = 1
        if layers:
            # k rings of the 3^d box = one Chebyshev ball of radius k (separable)
            grid = ndimage.maximum_filter(grid, size=2 * layers + 1, mode="constant", cval=0)
        return np.argwhere(grid) + low
    dims = tuple(int(u) + 1 for u in upper)
    box = np.array(list(itertools.product((-1, 0, 1), repeat=dim)), dtype=np.int64)
    keys = np.unique(np.ravel_multi_index(tuple(idx.T), dims))
    frontier = idx
    for _ in range(layers):
        grown = (frontier[:, None, :] + box[None]).reshape(-1, dim)
        grown = grown[np.all((grown >= 0) & (grown <= upper), axis=1)]
        grown_keys = np.unique(np.ravel_multi_index(tuple(grown.T), dims))
        fresh = np.setdiff1d(grown_keys, keys, assume_unique=True)
        if len(fresh) == 0:
            break
        keys = np.union1d(keys, fresh)
        frontier = np.stack(np.unravel_index(fresh, dims), axis=1).astype(np.int64)
    return np.stack(np.unravel_index(keys, dims), axis=1).astype(np.int64)


def crossing_points(indices: NDArray[np.int64], values: NDArray[np.floating], step: NDArray[np.floating],
                    *, lookup: LatticeLookup | None = None) -> NDArray[np.floating]:
    """Zero crossings of ``values`` along lattice edges, by linear interpolation (mm).

    Every pair of lattice neighbours (one step along one axis) whose values
    differ in sign (< 0 against >= 0) gives one point on the zero set,
    accurate to O(h²κ) — good starting points for Newton projection.
    """
    idx = np.asarray(indices, dtype=np.int64)
    v = np.asarray(values, dtype=float)
    lookup = lookup or LatticeLookup(idx)
    dim = idx.shape[1]
    out = []
    for axis in range(dim):
        e = np.zeros(dim, dtype=np.int64)
        e[axis] = 1
        nb = lookup.find(idx + e)
        has = nb >= 0
        a = np.flatnonzero(has)
        b = nb[has]
        va, vb = v[a], v[b]
        change = (va < 0) != (vb < 0)
        a, va, vb = a[change], va[change], vb[change]
        t = va / (va - vb)
        pts = idx[a].astype(float)
        pts[:, axis] += t
        out.append(pts * step)
    return np.concatenate(out) if out else np.empty((0, dim))


def grid_crossing_points(values: NDArray[np.floating], step: NDArray[np.floating]) -> NDArray[np.floating]:
    """:func:`crossing_points` of values on a whole pixel grid (shape = the image's), without a lookup.

    The same points in the same order (row-major per axis), from slices of
    the grid: a lookup of every pixel's neighbours cost 15 s on a
    120 × 512 × 512 volume.
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
