"""The box of a mask: the slices of the smallest box holding every set element, widened within the array.

Read from the mask's projections on the axes (``np.any`` over the other
axes): a list of its elements would take a hundred times longer on a large
region.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray


def occupied_box(mask: NDArray[np.bool_], pad: int | ArrayLike = 0) -> tuple[slice, ...] | None:
    """Slices of the smallest box holding every set element of ``mask``, widened by ``pad``; None if none is set.

    ``pad``: elements added on both sides, one number or one per axis; the
    box never leaves the array.
    """
    along = [np.flatnonzero(np.any(mask, axis=tuple(j for j in range(mask.ndim) if j != i))) for i in range(mask.ndim)]
    if any(len(a) == 0 for a in along):
        return None
    return widened(tuple(slice(int(a[0]), int(a[-1]) + 1) for a in along), pad, mask.shape)


def around_points(points: NDArray[np.floating], reach: int, align: int, shape: tuple[int, ...]) -> tuple[slice, ...]:
    """Slices of the box holding ``points`` (pixel coordinates, one row each) widened by ``reach`` pixels.

    Its low corner is moved down to a multiple of ``align``, so block means
    taken on the box fall on the image's own blocks; the box never leaves
    an array of ``shape``.
    """
    lo = np.maximum((np.floor(points.min(axis=0)).astype(int) - reach) // align * align, 0)
    hi = np.minimum(np.ceil(points.max(axis=0)).astype(int) + reach + 1, shape)
    return tuple(slice(int(a), int(b)) for a, b in zip(lo, hi))


def widened(box: tuple[slice, ...], pad: int | ArrayLike, shape: tuple[int, ...]) -> tuple[slice, ...]:
    """``box`` widened by ``pad`` elements on both sides (one number or one per axis), within an array of ``shape``."""
    pads = np.broadcast_to(np.asarray(pad, dtype=int), (len(shape),))
    return tuple(slice(max(s.start - int(p), 0), min(s.stop + int(p), int(n))) for s, p, n in zip(box, pads, shape))
