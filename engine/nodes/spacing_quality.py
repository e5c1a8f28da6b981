"""Nearest-neighbour distance statistics of a node set, absolute or relative to the local spacing asked for."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree

from engine.nodes.node_radius import NodeRadius, RadiusLike
from engine.numerics.neighbours import as_points

__all__ = ["SpacingQuality", "spacing_quality"]


@dataclass(frozen=True)
class SpacingQuality:
    """Nearest-neighbour distance statistics of a node set.

    ``values`` holds, per node, the distance to its nearest other node, divided
    by the local radius when one was given (``relative`` is then true). The
    other fields summarise ``values``.
    """

    values: NDArray[np.float64]
    relative: bool
    min: float
    max: float
    mean: float
    std: float
    median: float
    p05: float
    p95: float

    def fraction_within(self, low: float, high: float) -> float:
        """Fraction of nodes with ``low <= value <= high``."""
        if self.values.size == 0:
            return 0.0
        return float(np.mean((self.values >= low) & (self.values <= high)))


def spacing_quality(nodes: ArrayLike, *, radius: RadiusLike | None = None) -> SpacingQuality:
    """Nearest-neighbour distance statistics.

    Parameters
    ----------
    nodes : (N, d) array, N >= 2
    radius : float or callable, optional
        Local target spacing; when given, each distance is divided by the
        radius at its node.

    Returns
    -------
    SpacingQuality
    """
    p = as_points(nodes, "nodes")
    if len(p) < 2:
        raise ValueError(f"nodes: need at least 2 nodes, got {len(p)}")
    dist, _ = cKDTree(p).query(p, k=2)
    nn = np.asarray(dist[:, 1], dtype=float)
    relative = radius is not None
    if relative:
        nn = nn / NodeRadius(radius, p.shape[1])(p)  # type: ignore[arg-type]
    return SpacingQuality(
        values=nn,
        relative=relative,
        min=float(nn.min()),
        max=float(nn.max()),
        mean=float(nn.mean()),
        std=float(nn.std()),
        median=float(np.median(nn)),
        p05=float(np.percentile(nn, 5)),
        p95=float(np.percentile(nn, 95)),
    )
