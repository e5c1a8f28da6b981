"""Intensity statistics of an image region: robust spread, the window of the window model.

References
----------
F. R. Hampel, "The influence curve and its role in robust estimation",
J. Amer. Statist. Assoc. 69 (1974) 383-393 (the median absolute deviation).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from engine.front.geometry import seed_disks

__all__ = ["WINDOW_SPREAD", "estimate_window", "estimate_window_from_mask", "robust_std"]

#: Half-width of an estimated intensity window, in robust standard deviations
#: of the smoothed intensities inside the seeds: wide enough that the front
#: does not stop at the first shoulder of a partial-volume edge, narrow
#: enough to exclude a neighbour whose contrast is several noise levels.
WINDOW_SPREAD = 5.0


def estimate_window(image: NDArray[np.floating], seeds: NDArray[np.floating]) -> tuple[float, float]:
    """Intensity window from the pixels inside the seed disks: median ± WINDOW_SPREAD robust standard deviations.

    The robust standard deviation is 1.4826 × the median absolute deviation
    (Hampel 1974; common practice).
    """
    inside = seed_disks(image.shape, seeds)
    return estimate_window_from_mask(image, inside)


def robust_std(values: NDArray[np.floating]) -> float:
    """1.4826 × the median absolute deviation (Hampel 1974; common practice)."""
    if values.size == 0:
        return 0.0
    med = float(np.median(values))
    return 1.4826 * float(np.median(np.abs(values - med)))


def estimate_window_from_mask(image: NDArray[np.floating], mask: NDArray[np.bool_]) -> tuple[float, float]:
    """Intensity window median ± WINDOW_SPREAD robust standard deviations of ``image`` inside ``mask``.

    Pass the smoothed image the speeds use, so the window matches them.
    """
    values = image[mask]
    med = float(np.median(values))
    spread = max(robust_std(values), 0.01 * (float(np.percentile(image, 99)) - float(np.percentile(image, 1))), 1e-6)
    return med - WINDOW_SPREAD * spread, med + WINDOW_SPREAD * spread
