"""Checks of a caller's image geometry, seeds and keyword names, each with a message naming the argument."""

from __future__ import annotations

import difflib
from collections.abc import Collection, Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["check_spacing", "validate_seeds", "check_names"]


def check_spacing(spacing: ArrayLike | None, ndim: int) -> NDArray[np.floating]:
    """Pixel spacing (mm per axis) as ``ndim`` floats; ``None`` means 1 mm. ValueError naming ``spacing``."""
    if spacing is None:
        return np.ones(ndim)
    try:
        sp = np.asarray(spacing, dtype=float).reshape(-1)
    except (TypeError, ValueError):
        sp = np.zeros(0)
    if sp.shape != (ndim,) or np.any(~np.isfinite(sp)) or np.any(sp <= 0):
        raise ValueError(f"spacing must be {ndim} positive numbers (mm), got {spacing!r}")
    return sp


def validate_seeds(seeds: Sequence[Sequence[float]], shape: tuple[int, ...]) -> NDArray[np.floating]:
    """Seed disks as an (n, d + 1) array; ValueError naming the problem (count, NaN, radius, outside)."""
    arr = np.asarray(seeds, dtype=float)
    dim = len(shape)
    if arr.ndim == 1 and arr.size == dim + 1:
        arr = arr[None]
    if arr.ndim != 2 or arr.shape[1] != dim + 1 or len(arr) == 0:
        raise ValueError(f"seeds must be a list of ({'slice, ' if dim == 3 else ''}row, col, radius_px) tuples")
    if not np.all(np.isfinite(arr)):
        raise ValueError("seeds contain NaN or infinite values")
    if np.any(arr[:, -1] <= 0):
        raise ValueError("seeds: every radius must be > 0 pixels")
    centres = arr[:, :dim]
    if np.any(centres < -0.5) or np.any(centres > np.array(shape) - 0.5):
        bad = int(np.flatnonzero(np.any((centres < -0.5) | (centres > np.array(shape) - 0.5), axis=1))[0])
        axes = ("slice", "row", "col")[3 - dim:]
        where = ", ".join(f"{axis} {value:g}" for axis, value in zip(axes, centres[bad]))
        extent = " x ".join(str(int(n)) for n in shape)
        ranges = ", ".join(f"{axis}s 0..{int(n) - 1}" for axis, n in zip(axes, shape))
        unit = "voxels" if dim == 3 else "pixels"
        raise ValueError(f"seeds: seed {bad}: centre ({where}) lies outside the image ({extent} {unit}: {ranges})")
    return arr


def check_names(params: Collection[str], known: Collection[str], where: str) -> None:
    """ValueError naming a keyword of ``where`` that is not in ``known`` (with the nearest known name)."""
    for name in params:
        if name not in known:
            close = difflib.get_close_matches(name, sorted(known), n=1)
            hint = f"; did you mean {close[0]}?" if close else ""
            raise ValueError(f"{name}: not a setting of {where}{hint}")
