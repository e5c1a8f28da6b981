"""The k nearest nodes of each centre: the stencils of RBF-FD on scattered points.

Queries go through :class:`scipy.spatial.cKDTree` (Maneewongvatana & Mount's
sliding-midpoint k-d tree, as scipy implements it).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree

__all__ = ["as_points", "knn_stencils"]


def as_points(points: ArrayLike, name: str, dim: int | None = None) -> NDArray[np.float64]:
    """``points`` as a finite (N, d) float array, d in 1..3 (``dim`` columns if given); ValueError naming ``name``."""
    try:
        p = np.asarray(points, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name}: expected an (N, d) numeric array") from exc
    if p.ndim != 2 or p.shape[1] not in (1, 2, 3):
        raise ValueError(f"{name}: expected shape (N, d) with d in 1..3, got {p.shape}")
    if dim is not None and p.shape[1] != dim:
        raise ValueError(f"{name}: expected {dim} columns like nodes, got {p.shape[1]}")
    if not np.all(np.isfinite(p)):
        raise ValueError(f"{name}: contains NaN or inf")
    return p


def knn_stencils(nodes: ArrayLike, centers: ArrayLike | None = None, *, k: int) -> NDArray[np.intp]:
    """Indices of the k nearest nodes of each centre.

    Parameters
    ----------
    nodes : (N, d) array
    centers : (M, d) array, optional
        Default: the nodes themselves.
    k : int
        Stencil size, 1 <= k <= N.

    Returns
    -------
    ndarray of intp, shape (M, k)
        Row m lists node indices by increasing distance from ``centers[m]``
        (ties in the order :class:`scipy.spatial.cKDTree` returns them). When
        `centers` is omitted, column 0 is the centre node itself, even if
        other nodes coincide with it.
    """
    p = as_points(nodes, "nodes")
    n = len(p)
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)):
        raise ValueError(f"k: expected an integer, got {k!r}")
    if not (1 <= k <= n):
        raise ValueError(f"k: expected 1 <= k <= {n} (number of nodes), got {k}")
    tree = cKDTree(p)
    own = centers is None
    c = p if own else as_points(centers, "centers", p.shape[1])
    _, idx = tree.query(c, k=k)
    idx = np.asarray(idx, dtype=np.intp).reshape(len(c), k)
    if own:
        rows = np.arange(n)
        wrong = np.flatnonzero(idx[:, 0] != rows)
        if wrong.size:
            # coincident nodes: move the centre itself to column 0
            sub = idx[wrong]
            hit = sub == wrong[:, None]
            pos = np.where(hit.any(axis=1), hit.argmax(axis=1), k - 1)
            sub[np.arange(len(wrong)), pos] = sub[:, 0]
            sub[:, 0] = wrong
            idx[wrong] = sub
    return idx
