"""The local node spacing of a generator: a constant or a callable of position, its values checked."""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from numpy.typing import ArrayLike, NDArray

from engine.nodes.checks import positive

__all__ = ["RadiusLike", "NodeRadius"]

#: A node spacing (mm): a constant, or a callable taking (N, d) points (mm) to N spacings.
RadiusLike = float | Callable[[NDArray[np.float64]], ArrayLike]


class NodeRadius:
    """Wraps a constant or callable radius; validates what the callable returns."""

    def __init__(self, radius: RadiusLike, dim: int) -> None:
        self.dim = dim
        if callable(radius):
            self.func: Callable | None = radius
            self.const = math.nan
        else:
            self.func = None
            self.const = positive(radius, "radius")  # a number: positive and finite

    @property
    def is_constant(self) -> bool:
        return self.func is None

    def __call__(self, points: NDArray[np.float64]) -> NDArray[np.float64]:
        n = len(points)
        if self.func is None:
            return np.full(n, self.const)
        values = np.asarray(self.func(points), dtype=float)
        if values.ndim == 0:
            values = np.full(n, float(values))
        elif values.size == n:
            values = values.reshape(n)
        else:
            raise ValueError(
                f"radius: the callable returned shape {values.shape} for {n} points; expected ({n},)"
            )
        if not np.all((values > 0) & np.isfinite(values)):
            bad = values[~((values > 0) & np.isfinite(values))][:3]
            raise ValueError(f"radius: the callable returned non-positive or non-finite values, e.g. {bad.tolist()}")
        return values

    def at(self, point: tuple[float, ...]) -> float:
        """Radius at one point (fast path for the sequential loops)."""
        if self.func is None:
            return self.const
        values = np.asarray(self.func(np.array([point])), dtype=float)
        if values.size != 1:
            raise ValueError(f"radius: the callable returned shape {values.shape} for 1 point; expected (1,)")
        value = float(values.reshape(-1)[0])
        if not (0.0 < value < math.inf):
            raise ValueError(f"radius: the callable returned a non-positive or non-finite value, {value!r}")
        return value
