"""A front's saved state (:class:`FrontSnapshot`), the error of a vanished front, the lock its methods hold."""

from __future__ import annotations

import functools
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from engine.front.speeds import FrontParams


if TYPE_CHECKING:  # pragma: no cover
    from engine.front.core import Front


def _locked(method: Callable) -> Callable:
    """Run ``method`` holding the front's lock (see the module docstring's threading contract)."""

    @functools.wraps(method)
    def locked(self: "Front", *args: object, **kwargs: object) -> object:
        with self._lock:
            return method(self, *args, **kwargs)

    return locked


class FrontVanished(ValueError):
    """The zero set disappeared (the outline shrank to nothing or filled the image)."""


@dataclass(frozen=True)
class FrontSnapshot:
    """Everything needed to restore a front exactly (band arrays, not images)."""

    indices: NDArray[np.int64]
    phi: NDArray[np.floating]
    phi_at_rebuild: NDArray[np.floating]
    inside_bits: NDArray[np.uint8]
    sums: tuple[float, float, float, float]
    time: float
    steps: int
    converged: bool
    motion: tuple  # checkpoints of the convergence monitor (engine.front.convergence)
    params: FrontParams
    pins: NDArray[np.bool_] | None
    barrier: NDArray[np.bool_] | None
    local_out: NDArray[np.floating] | None = None
    since_reinit: int = 0
    rebuild_drift: float = 1.0
    layer: tuple[NDArray, ...] = ()  # layer, source, edge_source and layer_phi of the last refresh
    thickness: NDArray[np.floating] | None = None  # half-width behind each layer node at the last refresh
    rest_reinitialised: bool = False  # reinitialised once already at the present rest
    noise: float | None = None  # robust std of the smoothed intensities inside the initial front (region model)

    @property
    def nbytes(self) -> int:
        return int(self.indices.nbytes + self.phi.nbytes + self.phi_at_rebuild.nbytes + self.inside_bits.nbytes)
