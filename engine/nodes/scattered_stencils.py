"""Stencils of scattered nodes: the centred k nearest, one-sided half-space sets, and which nodes are edge nodes.

Each node of a scattered set gets a centred stencil (its ``stencil_size``
nearest nodes, itself first) and, per axis and direction, a one-sided
stencil: the ``side_size`` nearest nodes in the closed half-space behind or
ahead of it along that axis (for the Godunov upwind |∇φ|). A node whose
stencil ball (or the half ball of a one-sided stencil) crosses the image
box, or whose stencil is degenerate, is an *edge node* of every band: it is
never complete and its operator weights are zero (like a lattice node whose
pattern would leave the image).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numpy.typing import NDArray
from scipy.spatial import cKDTree

from engine.numerics.polynomials import monomial_exponents, monomial_values

__all__ = ["NodeStencils", "node_stencils", "degenerate", "positions_in"]

#: Smallest singular value of a stencil's scaled polynomial matrix, relative to
#: its largest, below which the stencil counts as degenerate (an edge node).
DEGENERATE = 1e-6


class NodeStencils(NamedTuple):
    """The stencils of some nodes (rows in the order of the nodes asked for)."""

    centred: NDArray[np.int64]  # (S, k) the k nearest nodes, the node itself first
    sides: NDArray[np.int64]  # (S, 2 d, m) one-sided stencils: backward, forward along each axis
    union: NDArray[np.int64]  # (S, W) all stencil nodes by distance, the node first; padded with the node
    width: NDArray[np.int64]  # (S,) distinct nodes of each row of ``union``
    edge: NDArray[np.bool_]  # (S,) edge nodes (stencil leaves the box, or degenerate)


def node_stencils(points: NDArray[np.floating], tree: cKDTree, nodes: NDArray[np.int64], *, stencil_size: int,
                  side_size: int, box_min: NDArray[np.floating], box_max: NDArray[np.floating],
                  degrees: tuple[int, int] | None = None) -> NodeStencils:
    """Centred and one-sided stencils of ``nodes`` among ``points`` (mm; ``tree`` over them).

    ``degrees`` = (centred, one-sided) polynomial degrees: when given, a node
    whose stencils' polynomial matrices are (nearly) rank-deficient becomes
    an edge node too (see :func:`degenerate`).
    """
    dim, k, ns = points.shape[1], stencil_size, side_size
    count, n_ids = len(nodes), len(points)
    x = points[nodes]
    kq = min(max(k, 4 * ns), n_ids)
    dist, cand = tree.query(x, k=kq)
    cand = np.asarray(cand, dtype=np.int64).reshape(count, kq)
    dist = np.asarray(dist, dtype=float).reshape(count, kq)
    # the node itself first (distinct nodes: it is the unique nearest)
    centred = cand[:, :k].copy()
    wrong = centred[:, 0] != nodes
    if np.any(wrong):
        raise ValueError("points: some nodes coincide; node positions must be distinct")
    tol = 1e-9 * float(np.max(box_max))
    edge = ~_ball_inside(x, dist[:, k - 1], box_min, box_max, tol)
    rel = points[cand] - x[:, None, :]
    sides = np.empty((count, 2 * dim, ns), dtype=np.int64)
    for axis in range(dim):
        for j, direction in enumerate((-1.0, 1.0)):
            mask = direction * rel[:, :, axis] >= 0.0
            order = np.argsort(~mask, axis=1, kind="stable")[:, :ns]
            sides[:, 2 * axis + j] = np.take_along_axis(cand, order, axis=1)
            enough = mask.sum(axis=1) >= ns
            radius = np.take_along_axis(dist, order[:, -1:], axis=1)[:, 0]
            edge |= ~enough | ~_half_ball_inside(x, radius, axis, direction, box_min, box_max, tol)
    interior = np.flatnonzero(~edge) if degrees is not None else np.zeros(0, dtype=np.int64)
    if len(interior):
        centred_degree, side_degree = degrees  # type: ignore[misc]
        xs = rel[interior, :k] / dist[interior, k - 1][:, None, None]
        bad = degenerate(xs, centred_degree)
        side_rel = points[sides[interior]] - x[interior][:, None, None, :]
        side_r = np.sqrt(np.max(np.einsum("sgnd,sgnd->sgn", side_rel, side_rel), axis=2))
        side_xs = (side_rel / side_r[:, :, None, None]).reshape(-1, ns, dim)
        bad |= degenerate(side_xs, side_degree).reshape(len(interior), 2 * dim).any(axis=1)
        edge[interior[bad]] = True
    # union of all stencils, ordered by distance (the node itself first), padded with the node
    cat = np.concatenate([centred, sides.reshape(count, -1)], axis=1)
    cat.sort(axis=1)
    dup = np.zeros_like(cat, dtype=bool)
    dup[:, 1:] = cat[:, 1:] == cat[:, :-1]
    sentinel = n_ids
    cat[dup] = sentinel
    cat.sort(axis=1)
    width = (cat < sentinel).sum(axis=1)
    w_max = int(width.max())
    cat = cat[:, :w_max]
    pad = cat == sentinel
    safe = np.where(pad, nodes[:, None], cat)
    d2 = np.sum((points[safe] - x[:, None, :]) ** 2, axis=2)
    d2[pad] = np.inf
    union = np.take_along_axis(safe, np.argsort(d2, axis=1, kind="stable"), axis=1)
    return NodeStencils(centred, sides, union, width, edge)


def _ball_inside(x: NDArray[np.floating], radius: NDArray[np.floating], box_min: NDArray[np.floating],
                 box_max: NDArray[np.floating], tol: float) -> NDArray[np.bool_]:
    r = radius[:, None]
    return np.all((x - r >= box_min - tol) & (x + r <= box_max + tol), axis=1)


def _half_ball_inside(x: NDArray[np.floating], radius: NDArray[np.floating], axis: int, direction: float,
                      box_min: NDArray[np.floating], box_max: NDArray[np.floating], tol: float) -> NDArray[np.bool_]:
    r = radius[:, None]
    low = x - r >= box_min - tol
    high = x + r <= box_max + tol
    if direction < 0:
        high[:, axis] = True
    else:
        low[:, axis] = True
    return np.all(low & high, axis=1)


def degenerate(xs: NDArray[np.floating], degree: int) -> NDArray[np.bool_]:
    """Per stencil (S, n, d), scaled to unit radius: is its polynomial matrix (nearly) rank-deficient?

    From the eigenvalues of PᵀP: σ_min / σ_max below ``DEGENERATE``.
    """
    dim = xs.shape[2]
    exps = monomial_exponents(dim, degree)
    p = monomial_values(xs, exps)
    ev = np.linalg.eigvalsh(np.transpose(p, (0, 2, 1)) @ p)
    return ev[:, 0] <= DEGENERATE**2 * ev[:, -1]


def positions_in(ids: NDArray[np.int64], members: NDArray[np.int64], *, ids_sorted: bool = False
                 ) -> NDArray[np.int64]:
    """Position of each of ``members`` (any shape) in ``ids``, −1 where absent (``ids_sorted``: skip the sort)."""
    if ids_sorted:
        pos = np.minimum(np.searchsorted(ids, members), len(ids) - 1)
        return np.where(ids[pos] == members, pos, -1)
    order = np.argsort(ids, kind="stable")
    ranked = ids[order]
    pos = np.clip(np.searchsorted(ranked, members), 0, len(ranked) - 1)
    found = ranked[pos] == members
    return np.where(found, order[pos], -1)
