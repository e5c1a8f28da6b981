"""Lattice nodes restricted to a region, with fixed symmetric stencils.

A lattice with per-axis step h (mm) has nodes at integer indices k, located at
k * h mm. With ``detail`` D and pixel spacing s, h = s / D and node k sits at
pixel coordinate k / D (pixel centres at integers). Only the nodes of a region
(the narrow band) are ever created.

Interior stencils are one fixed offset pattern that is symmetric under sign
flips of each axis, so all of them are translates and share one weight solve;
k-nearest selection on a lattice has ties and would break that symmetry.
Nodes near the edge of the region, whose pattern is incomplete, get one-sided
k-nearest stencils among the region's nodes.
"""

from __future__ import annotations

import itertools
from collections.abc import Sequence

import numpy as np
import scipy.sparse as sp
from numpy.typing import ArrayLike, NDArray

from engine.numerics.neighbours import knn_stencils
from engine.numerics.rbffd import parse_operator, stencil_weights


def symmetric_offsets(dim: int, size: int) -> NDArray[np.int64]:
    """Integer lattice offsets of a symmetric stencil of about ``size`` nodes.

    All offsets within an index-space radius R are taken (a union of whole
    shells |o|² = const, hence symmetric under sign flips and permutations of
    the axes); R is chosen so that the count is the closest available to
    ``size`` (ties: the larger). Index space rather than physical distance
    keeps every axis resolved when pixels are strongly anisotropic. The
    centre (offset 0) comes first, then by increasing |o|.
    """
    if not isinstance(dim, (int, np.integer)) or dim < 1:
        raise ValueError(f"dim must be a positive integer, got {dim!r}")
    if size < 1:
        raise ValueError(f"stencil_size must be >= 1, got {size}")
    reach = int(np.ceil(size ** (1.0 / dim))) + 1
    grid = np.array(list(itertools.product(range(-reach, reach + 1), repeat=dim)), dtype=np.int64)
    return whole_shells(grid, size)


def whole_shells(grid: NDArray[np.int64], size: int) -> NDArray[np.int64]:
    """The offsets of ``grid`` in whole shells |o|² = const, as many as closest to ``size``.

    Sorted by |o|², then lexicographically (the centre first); ties between
    two counts go to the larger.
    """
    dist2 = np.sum(grid**2, axis=1)
    order = np.lexsort((*grid.T[::-1], dist2))
    grid, dist2 = grid[order], dist2[order]
    counts = np.append(np.flatnonzero(np.diff(dist2)) + 1, len(grid))
    best = counts[np.argmin(np.abs(counts - size) - 1e-3 * counts)]
    return grid[:best]


#: Largest bounding box (nodes) for which a lookup keeps a dense position table
#: (4 bytes per box node: 64 MiB at the limit); larger boxes use sorted keys.
DENSE_LOOKUP_LIMIT = 1 << 24


class LatticeLookup:
    """Find the position of lattice indices within a node set (−1 where absent).

    A dense table over the nodes' bounding box answers each query with one
    array read when the box holds at most ``DENSE_LOOKUP_LIMIT`` nodes (every
    2-D band, and 3-D bands of moderate extent); otherwise sorted keys and a
    binary search. With ``pad`` the box grows by that many nodes on every
    side, so :meth:`around` reads the neighbours of every node at offsets up
    to ``pad`` without a bounds check.
    """

    def __init__(self, indices: NDArray[np.integer], *, pad: int = 0):
        idx = np.asarray(indices, dtype=np.int64)
        if idx.ndim != 2 or len(idx) == 0:
            raise ValueError(f"indices must be a non-empty (N, d) integer array, got shape {idx.shape}")
        self.pad = int(pad)
        self.low = idx.min(axis=0) - self.pad
        self.dims = idx.max(axis=0) + self.pad - self.low + 1
        self._strides = np.cumprod(np.concatenate([self.dims[1:], [1]])[::-1])[::-1].astype(np.int64)
        keys = self._keys(idx - self.low)
        self._node_keys = keys
        self._indices = idx
        size = int(np.prod(self.dims))
        self.table: NDArray[np.int32] | None = None
        if size <= DENSE_LOOKUP_LIMIT and len(idx) < np.iinfo(np.int32).max:
            counts = np.bincount(keys, minlength=size)
            if np.any(counts > 1):
                raise ValueError("indices contain duplicate lattice nodes")
            self.table = np.full(size, -1, dtype=np.int32)
            self.table[keys] = np.arange(len(idx), dtype=np.int32)
        else:
            self.order = np.argsort(keys, kind="stable")
            self.sorted_keys = keys[self.order]
            if np.any(np.diff(self.sorted_keys) == 0):
                raise ValueError("indices contain duplicate lattice nodes")

    def _keys(self, rel: NDArray[np.int64]) -> NDArray[np.int64]:
        """Row-major keys of offsets ``rel`` from ``low`` (valid only inside the box)."""
        keys = rel[:, -1].copy()
        for axis in range(rel.shape[1] - 1):
            keys += rel[:, axis] * self._strides[axis]
        return keys

    def find(self, query: NDArray[np.integer]) -> NDArray[np.int64]:
        """Positions of ``query`` (..., d) indices in the node set, −1 where absent."""
        q = np.asarray(query, dtype=np.int64)
        flat = q.reshape(-1, q.shape[-1])
        rel = flat - self.low
        # negative offsets become huge unsigned values: one comparison per axis
        inside = rel[:, 0].view(np.uint64) < np.uint64(self.dims[0])
        for axis in range(1, rel.shape[1]):
            inside &= rel[:, axis].view(np.uint64) < np.uint64(self.dims[axis])
        keys = np.where(inside, self._keys(rel), 0)
        if self.table is not None:
            out = np.where(inside, self.table[keys], -1).astype(np.int64)
        else:
            pos = np.searchsorted(self.sorted_keys, keys)
            pos = np.minimum(pos, len(self.sorted_keys) - 1)
            hit = inside & (self.sorted_keys[pos] == keys)
            out = np.where(hit, self.order[pos], -1)
        return out.reshape(q.shape[:-1])

    def around(self, offsets: NDArray[np.integer]) -> NDArray[np.int64]:
        """Positions of every node's neighbours at ``offsets`` (n, d): (N, n), −1 where absent.

        The same as ``find(indices[:, None, :] + offsets[None])`` for the
        lookup's own indices, in one read of the table when it is dense and
        padded for these offsets.
        """
        off = np.asarray(offsets, dtype=np.int64)
        if self.table is None or np.max(np.abs(off), initial=0) > self.pad:
            return self.find(self._indices[:, None, :] + off[None])
        return self.table[self._node_keys[:, None] + (off @ self._strides)[None, :]].astype(np.int64)


#: One-sided stencils take this many times the symmetric pattern's node count,
#: so that they stay unisolvent for the polynomial part near corners of a region.
EDGE_STENCIL_FACTOR = 1.5


def lattice_stencils(
    indices: NDArray[np.integer], step: ArrayLike, *, stencil_size: int, lookup: LatticeLookup | None = None
) -> tuple[NDArray[np.int64], NDArray[np.bool_], NDArray[np.int64]]:
    """Stencils of every node: the symmetric pattern where complete, else k-nearest.

    Returns
    -------
    pattern : (N, n) int array of node positions for the symmetric pattern
        (centre first); rows of edge nodes hold −1 where a node is missing.
    interior : (N,) bool, True where the symmetric pattern was complete.
    edge : (E, k) int array, k-nearest (one-sided) stencils of the nodes
        ``flatnonzero(~interior)`` in that order, k = 1.5 n (at most N).
    """
    idx = np.asarray(indices, dtype=np.int64)
    h = np.asarray(step, dtype=float)
    offsets = symmetric_offsets(len(h), stencil_size)
    lookup = lookup or LatticeLookup(idx)
    pattern = lookup.find(idx[:, None, :] + offsets[None, :, :])
    interior = np.all(pattern >= 0, axis=1)
    edge_rows = np.flatnonzero(~interior)
    k_edge = min(len(idx), int(np.ceil(EDGE_STENCIL_FACTOR * len(offsets))))
    edge = np.empty((0, k_edge), dtype=np.int64)
    if len(edge_rows):
        # Nearest in index space, so that each axis keeps enough distinct
        # coordinates for the polynomial part on anisotropic lattices.
        edge = knn_stencils(idx.astype(float), idx[edge_rows].astype(float), k=k_edge)
    return pattern, interior, edge


def lattice_operators(
    indices: ArrayLike,
    step: ArrayLike,
    ops: Sequence[object],
    *,
    stencil_size: int = 30,
    degree: int = 4,
    phs: int = 5,
    edge: str = "one-sided",
) -> tuple[list[sp.csr_matrix], NDArray[np.bool_]]:
    """RBF-FD operator matrices on the nodes of a lattice region.

    Parameters
    ----------
    indices : (N, d) int array_like
        Lattice indices of the region's nodes.
    step : (d,) array_like
        Lattice step per axis in mm.
    ops : list of operator specs (see :func:`engine.numerics.rbffd.parse_operator`).
    edge : {"one-sided", "skip"}
        Nodes whose symmetric pattern is incomplete get one-sided k-nearest
        stencils, or empty rows with ``"skip"`` (for callers that never
        update them, such as the outer layer of a narrow band).

    Returns
    -------
    matrices : list of (N, N) csr matrices, one per operator (derivatives per mm).
    interior : (N,) bool, nodes whose symmetric stencil was complete.
    """
    idx = np.asarray(indices, dtype=np.int64)
    h = np.asarray(step, dtype=float)
    if idx.ndim != 2 or idx.shape[1] != len(h):
        raise ValueError(f"indices must be (N, {len(h)}) to match step, got shape {idx.shape}")
    if edge not in ("one-sided", "skip"):
        raise ValueError(f"edge must be 'one-sided' or 'skip', got {edge!r}")
    ops = list(ops)
    for op in ops:
        parse_operator(op, len(h))
    pattern, interior, edge_stencils = lattice_stencils(idx, h, stencil_size=stencil_size)
    pos = idx * h
    rows_in = np.flatnonzero(interior)
    groups = [(rows_in, pattern[rows_in])]
    if edge == "one-sided" and len(edge_stencils):
        groups.append((np.flatnonzero(~interior), edge_stencils))
    mats = []
    parts = [(rows, st, stencil_weights(pos, st, pos[rows], ops, degree=degree, phs=phs))
             for rows, st in groups if len(rows)]
    for k in range(len(ops)):
        r = np.concatenate([np.repeat(rows, st.shape[1]) for rows, st, _ in parts]) if parts else np.empty(0, int)
        c = np.concatenate([st.ravel() for _, st, _ in parts]) if parts else np.empty(0, int)
        v = np.concatenate([w[:, :, k].ravel() for _, _, w in parts]) if parts else np.empty(0)
        mats.append(sp.csr_matrix((v, (r, c)), shape=(len(idx), len(idx))))
    return mats, interior
