"""Lattice nodes of a narrow band: the nodes near points, a band grown by layers, zero crossings along lattice edges."""

from __future__ import annotations

import itertools

import numpy as np
from numpy.typing import NDArray
from scipy import ndimage

from engine.nodes.lattice import LatticeLookup

__all__ = ["nodes_near", "dilate_nodes", "crossing_points", "DENSE_DISTANCE_LIMIT", "DENSE_DILATION_LIMIT"]

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
