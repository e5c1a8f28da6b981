"""Averaging a quantity along the outline: a Gaussian in arc length, on the front's layer of nodes.

The image speed a front feels at each point of its outline carries the
image noise of that point. Averaging the speed along the outline (not across
it) pools the noise of a stretch of boundary the way a least-squares fit of a
smooth outline would, without the inward shift that curvature smoothing
causes on a curved boundary (a·κ over the speed's slope) and without the
blur across the edge that an isotropic Gaussian applies to the image (which
spreads the edge over pixels that carry no information on its position and
shifts the mid-level crossing of a curved edge by about σ²κ/2).

The average is the heat kernel of the layer's neighbour graph: k steps of a
lazy random walk whose tangential variance per step is measured on the
graph, so that the walk's variance is σ² along the outline (along each of
its two directions on a surface). A random walk's distribution tends to a
Gaussian in arc length (central limit theorem); on a circle of radius R the
mode cos(mθ) is damped by about exp(−m²σ²/(2R²)). On a lattice the spread
depends a little on the outline's direction (the neighbourhoods differ):
0.9–1.0 σ.
Neighbours whose normals differ by more than 60° are not connected, so the
two sides of a thin neck, or of a gap between two structures, are not mixed.

References
----------
Chung, F. R. K., *Spectral Graph Theory*, CBMS 92, AMS (1997), ch. 1
(random walks and the graph heat kernel).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy.sparse import csr_matrix

#: neighbours are connected only if their normals agree to within this cosine (60°)
MIN_NORMAL_COSINE = 0.5


@dataclass(frozen=True)
class OutlineGraph:
    """The layer's neighbour graph as the random walk of :func:`average_along_outline` takes it.

    Built once per set of normals (:func:`outline_graph`) and used for
    averages of any width (:meth:`average`): the two averages a front takes
    at every step (the image speed's, the curvature's) share it.
    """

    count: int
    rows: NDArray[np.int64]  # both directions of every connected pair
    cols: NDArray[np.int64]
    degree: NDArray[np.floating]  # 1 + the number of connected neighbours
    step_variance: float  # variance along the outline of one (non-lazy) step, mm²
    dim: int

    def average(self, values: NDArray[np.floating], sigma: float) -> NDArray[np.floating]:
        """``values`` (L,) or (L, m) averaged with a Gaussian of ``sigma`` (mm) along the outline; 0 returns a copy."""
        values = np.asarray(values, dtype=float)
        if sigma <= 0 or len(values) == 0 or self.step_variance <= 0:
            return values.copy()
        count = self.count
        # σ² along each of the outline's d − 1 directions
        target = (self.dim - 1) * sigma**2
        steps = int(np.ceil(target / self.step_variance))
        laziness = target / (steps * self.step_variance)  # weight of the walk per step (≤ 1)
        rows, cols, degree = self.rows, self.cols, self.degree
        weights = laziness / degree[rows]
        stay = 1.0 - laziness * (degree - 1.0) / degree
        flat = values.reshape(count, -1)
        if steps * flat.shape[1] <= 8:  # a few products: weighted sums, no matrix to build
            columns = flat.T.copy()
            for _ in range(steps):
                for k, column in enumerate(columns):
                    columns[k] = stay * column + np.bincount(rows, weights * column[cols], minlength=count)
            return columns.T.reshape(values.shape).copy()
        diagonal = np.arange(count)
        walk = csr_matrix((np.concatenate([weights, stay]), (np.concatenate([rows, diagonal]),
                                                            np.concatenate([cols, diagonal]))), shape=(count, count))
        out = flat
        for _ in range(steps):
            out = walk @ out
        return out.reshape(values.shape)


def outline_graph(positions: NDArray[np.floating], pairs: NDArray[np.int64],
                  normals: NDArray[np.floating]) -> OutlineGraph:
    """The walk's graph: ``pairs`` of layer nodes whose ``normals`` agree, with the walk's variance per step.

    Parameters
    ----------
    positions : (L, d) node positions (mm).
    pairs : (E, 2) neighbouring layer nodes (each pair once, i < j or not).
    normals : (L, d) unit normals of the front at the nodes; a zero normal leaves its node out
        (it keeps its own value and lends it to none).
    """
    count = len(positions)
    i, j = pairs[:, 0], pairs[:, 1]
    # per-axis columns: gathering 1-D arrays is cheaper than rows of (L, d) ones
    n_cols = [np.ascontiguousarray(normals[:, k]) for k in range(normals.shape[1])]
    aligned = sum(n[i] * n[j] for n in n_cols) > MIN_NORMAL_COSINE
    i, j = i[aligned], j[aligned]
    diff = [np.take(x, j) - np.take(x, i) for x in (np.ascontiguousarray(positions[:, k])
                                                     for k in range(positions.shape[1]))]
    # tangential part of each link, seen from either end (their mean: symmetric)
    along_i = sum(dk * n[i] for dk, n in zip(diff, n_cols))
    along_j = sum(dk * n[j] for dk, n in zip(diff, n_cols))
    tangential = np.maximum(sum(dk * dk for dk in diff) - 0.5 * (along_i**2 + along_j**2), 0.0)
    degree = 1.0 + np.bincount(i, minlength=count) + np.bincount(j, minlength=count)
    # variance along the outline (summed over its directions) of one step of
    # the (non-lazy) walk, averaged over the nodes as the walk visits them
    # (in proportion to their degree)
    per_node = np.bincount(i, tangential, minlength=count) + np.bincount(j, tangential, minlength=count)
    step_variance = float(np.sum(per_node) / np.sum(degree)) if count else 0.0
    return OutlineGraph(count, np.concatenate([i, j]), np.concatenate([j, i]), degree, step_variance,
                        positions.shape[1])


def average_along_outline(
    values: NDArray[np.floating],
    positions: NDArray[np.floating],
    pairs: NDArray[np.int64],
    normals: NDArray[np.floating],
    sigma: float,
) -> NDArray[np.floating]:
    """Average ``values`` over the layer nodes with a Gaussian of ``sigma`` (mm) along the outline.

    Parameters
    ----------
    values : (L,) or (L, m) values at the layer nodes.
    positions : (L, d) node positions (mm).
    pairs : (E, 2) neighbouring layer nodes (each pair once, i < j or not).
    normals : (L, d) unit normals of the front at the nodes; a zero normal leaves its node out
        (it keeps its own value and lends it to none).
    sigma : standard deviation of the average along the outline (mm); 0 returns a copy.
    """
    values = np.asarray(values, dtype=float)
    if sigma <= 0 or len(values) == 0:
        return values.copy()
    return outline_graph(positions, pairs, normals).average(values, sigma)
