"""The Compare board's metrics: each variant's figures, Dice and HD95 against the committed outline or a
reference, and between every two variants.

Overlap and distances come from :mod:`engine.analysis.metrics` (Dice 1945; HD95, the
95th percentile of the pooled surface distances, Huttenlocher et al. 1993)
with the slice's pixel spacing, so distances are in mm.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from engine.compare.run import VariantFrame

__all__ = ["MetricsRow", "CompareTable", "compare_table", "mask_outline"]


@dataclass(frozen=True)
class MetricsRow:
    """One variant's figures (NaN where a comparison cannot be made yet)."""

    name: str
    state: str
    steps: int
    cpu_s: float
    area_mm2: float
    perimeter_mm: float
    converged: bool
    dice_committed: float = math.nan
    hd95_committed: float = math.nan
    dice_reference: float = math.nan
    hd95_reference: float = math.nan


@dataclass(frozen=True)
class CompareTable:
    """Rows per variant and, per pair of finished variants, ``(dice, hd95_mm)``."""

    rows: tuple[MetricsRow, ...]
    pairs: Mapping[tuple[str, str], tuple[float, float]]


def _scores(mask: NDArray[np.bool_] | None, other: NDArray[np.bool_] | None,
            spacing: Sequence[float]) -> tuple[float, float]:
    from engine.analysis.metrics import dice, hd95

    if mask is None or other is None:
        return math.nan, math.nan
    if not mask.any() and not other.any():
        return math.nan, math.nan
    return float(dice(mask, other)), float(hd95(mask, other, spacing=spacing))


def compare_table(frames: Sequence[VariantFrame], *, spacing: Sequence[float],
                  committed: NDArray[np.bool_] | None = None,
                  reference: NDArray[np.bool_] | None = None) -> CompareTable:
    """The metrics of ``frames`` (finished variants carry a mask; the others get their live figures only).

    Parameters
    ----------
    frames : sequence of VariantFrame
        One per variant.
    spacing : (float, float)
        Pixel spacing (row, col) in mm.
    committed, reference : 2-D bool array, optional
        The label's committed outline on the slice, and a reference outline
        (for instance the truth of an invented case), as pixel masks.

    Raises
    ------
    ValueError
        ``committed`` / ``reference``: shape differs from the variants' masks.
    """
    shapes = {f.mask.shape for f in frames if f.mask is not None}
    for name, other in (("committed", committed), ("reference", reference)):
        if other is not None and shapes and np.shape(other) not in shapes:
            raise ValueError(f"{name}: shape {np.shape(other)} differs from the slice's {next(iter(shapes))}")
    rows = []
    for f in frames:
        dc, hc = _scores(f.mask, None if committed is None else np.asarray(committed, bool), spacing)
        dr, hr = _scores(f.mask, None if reference is None else np.asarray(reference, bool), spacing)
        rows.append(MetricsRow(f.name, f.state, f.steps, f.cpu_s, f.area_mm2, f.perimeter_mm, f.converged,
                               dc, hc, dr, hr))
    pairs = {}
    done = [f for f in frames if f.mask is not None]
    for i, a in enumerate(done):
        for b in done[i + 1:]:
            pairs[(a.name, b.name)] = _scores(a.mask, b.mask, spacing)
    return CompareTable(tuple(rows), pairs)


def mask_outline(mask: NDArray[np.bool_]) -> list[NDArray[np.floating]]:
    """Closed ``(row, col)`` polylines along a pixel mask's edge (marching squares at level ½ on the mask
    padded with background, as :func:`skimage.measure.find_contours` does it; Lorensen & Cline 1987)."""
    from skimage.measure import find_contours

    m = np.asarray(mask, dtype=bool)
    if m.ndim != 2:
        raise ValueError(f"mask: expected a 2-D array, got shape {m.shape}")
    if not m.any():
        return []
    return [c - 1.0 for c in find_contours(np.pad(m.astype(float), 1), 0.5)]
