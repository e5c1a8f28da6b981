"""Partial-volume phantoms for the tests: each pixel (voxel) holds the fraction of it inside a shape."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

SUB = 8  # sub-samples per axis


def partial_volume(shape: tuple[int, ...], inside: Callable[..., np.ndarray], sub: int = SUB
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Area (volume) fraction of ``inside`` per pixel from sub^d sub-samples, and the pixel-centre truth.

    ``inside(*coordinates)`` takes one array per axis (pixel units, centres at integers).
    """
    grids = np.indices(shape, dtype=float)
    offsets = (np.arange(sub) + 0.5) / sub - 0.5
    image = np.zeros(shape)
    for shift in np.array(np.meshgrid(*([offsets] * len(shape)), indexing="ij")).reshape(len(shape), -1).T:
        image += inside(*(g + s for g, s in zip(grids, shift)))
    return image / sub ** len(shape), inside(*grids)
