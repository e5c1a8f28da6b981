"""The neighbour graph of scattered nodes within a band, and zero crossings of φ along its edges.

Lattice nodes have their edges built in (one step along an axis, see
:func:`engine.nodes.lattice_band.crossing_points`); scattered nodes are joined
to their nearest neighbours instead.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from engine.nodes.scattered_stencils import positions_in

__all__ = ["neighbour_edges", "edge_crossings"]


def neighbour_edges(ids: NDArray[np.int64], neighbours: NDArray[np.int64]) -> NDArray[np.int64]:
    """Edges joining each of ``ids`` to its ``neighbours`` (A, m) that are in ``ids``, as (E, 2) positions in ``ids``.

    Each edge is kept once (first < second), in increasing order.
    """
    m = neighbours.shape[1]
    other = positions_in(ids, neighbours)
    a = np.repeat(np.arange(len(ids), dtype=np.int64), m)
    b = other.reshape(-1)
    keep = b >= 0
    n = np.int64(len(ids))
    keys = np.unique(np.minimum(a[keep], b[keep]) * n + np.maximum(a[keep], b[keep]))
    return np.stack([keys // n, keys % n], axis=1)


def edge_crossings(points: NDArray[np.floating], edges: NDArray[np.int64],
                   values: NDArray[np.floating]) -> NDArray[np.floating]:
    """Zero crossings of ``values`` along graph ``edges`` (pairs of rows of ``points``), linear interpolation.

    Every edge whose end values differ in sign (< 0 against >= 0) gives one
    point. For a signed distance φ, a point on an edge of length L lies
    within L² max|∂²φ/∂e²| / 8 of the zero set (linear interpolation error),
    i.e. L² κ / 8 near a front of curvature κ.
    """
    va, vb = values[edges[:, 0]], values[edges[:, 1]]
    cross = (va < 0) != (vb < 0)
    e, va, vb = edges[cross], va[cross], vb[cross]
    t = va / (va - vb)
    xa, xb = points[e[:, 0]], points[e[:, 1]]
    return xa + t[:, None] * (xb - xa)
