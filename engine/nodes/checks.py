"""Checks of the node modules' arguments, each raising a ValueError that names the argument."""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

__all__ = ["positive", "non_negative", "as_spacing", "as_int"]


def positive(value: object, name: str) -> float:
    """``value`` as a positive finite float."""
    try:
        v = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name}: expected a positive number, got {value!r}") from exc
    if not (0.0 < v < math.inf):
        raise ValueError(f"{name}: expected a positive finite number, got {value!r}")
    return v


def non_negative(value: object, name: str) -> float:
    """``value`` as a non-negative finite float."""
    try:
        v = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name}: expected a non-negative number, got {value!r}") from exc
    if not (0.0 <= v < math.inf):
        raise ValueError(f"{name}: expected a non-negative finite number, got {value!r}")
    return v


def as_spacing(spacing: object, dim: int, name: str) -> NDArray[np.floating]:
    """A number or ``dim`` numbers (mm per axis) as ``dim`` positive finite floats."""
    try:
        sp_arr = np.broadcast_to(np.asarray(spacing, dtype=float), (dim,)).copy()
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name}: expected a number or {dim} numbers (mm), got {spacing!r}") from exc
    if not np.all(np.isfinite(sp_arr)) or np.any(sp_arr <= 0):
        raise ValueError(f"{name}: values must be positive and finite, got {sp_arr.tolist()}")
    return sp_arr


def as_int(value: object, name: str, low: int, high: int) -> int:
    """``value`` as an integer (not a bool) in ``[low, high]``."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise ValueError(f"{name}: expected an integer, got {value!r}")
    if not low <= int(value) <= high:
        raise ValueError(f"{name}: expected {low} <= {name} <= {high}, got {value}")
    return int(value)
