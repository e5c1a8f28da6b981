"""Coarse start: grow the front on a block-averaged copy of a large image first.

A narrow band costs about (image side) per step and the front needs about
(image side) steps to cross the object, so time grows as side². Growing
first on the image averaged over f × f blocks (f² fewer pixels to cross with
f times fewer nodes) and then continuing at full resolution from the coarse
outline cuts both: the fine front only travels the last pixel or two. This is
the coarse-to-fine strategy of multiresolution image analysis (Burt &
Adelson, IEEE Trans. Commun. 31(4) (1983) 532-540).

A coarse front can bridge a gap narrower than a block; the fine front
reopens it (the gap's pixels push the outline back) and
:meth:`engine.front.Front.keep_parts` then drops any part that holds no seed.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from numpy.typing import NDArray
from scipy import ndimage

#: Models that start coarse: region statistics and intensity windows survive
#: block averaging. The edge model stops at the first strong gradient, which
#: averaging weakens (a thin dark rim vanishes), so it starts at full
#: resolution, as do the geometric flows (curvature, constant), whose time
#: scale is the result.
COARSE_MODELS = ("region", "window")
#: Smallest side (pixels) of the block-averaged image, by dimension: a 48³
#: block mean holds as many voxels as a 330² image holds pixels.
MIN_COARSE_SIDE = {2: 96, 3: 48}
#: Smallest seed radius on the coarse image (coarse pixels): the band
#: stencils must fit inside the seed.
MIN_COARSE_SEED = 4.0
#: Largest block size.
MAX_FACTOR = 8
#: The coarse front only has to come within a fraction of a block of the
#: boundary: it counts as converged at this many times the fine front's
#: tolerance (on a 100² block mean of a noisy phantom a thin structure's coarse
#: front crept by 0.002 spacings a step, twice the fine tolerance, for 4 000
#: steps), and it stops after COARSE_MAX_STEPS steps in any case.
COARSE_TOL_FACTOR = 5.0
COARSE_MAX_STEPS = 2000


def coarse_factor(shape: tuple[int, ...], seeds: NDArray[np.floating] | None, model: str) -> int:
    """Block size f (1, 2, 4 or 8) for a coarse start; 1 means start at full resolution.

    The largest power of two keeping the coarse image at least
    ``MIN_COARSE_SIDE`` pixels on its shortest side and the smallest seed at
    least ``MIN_COARSE_SEED`` coarse pixels in radius (``seeds`` None: the
    image alone decides). 2-D images and 3-D volumes.
    """
    if len(shape) not in MIN_COARSE_SIDE or model not in COARSE_MODELS:
        return 1
    smallest_seed = np.inf if seeds is None else float(np.min(np.asarray(seeds, dtype=float)[:, -1]))
    factor = 1
    while (factor * 2 <= MAX_FACTOR and min(shape) / (factor * 2) >= MIN_COARSE_SIDE[len(shape)]
           and smallest_seed / (factor * 2) >= MIN_COARSE_SEED):
        factor *= 2
    return factor


def block_mean(image: NDArray[np.floating], factor: int) -> NDArray[np.floating]:
    """Mean over ``factor`` × ``factor`` blocks; the last partial blocks repeat the edge pixels."""
    img = np.asarray(image, dtype=float)
    pad = [(0, (-n) % factor) for n in img.shape]
    padded = np.pad(img, pad, mode="edge")
    shape = []
    for n in padded.shape:
        shape += [n // factor, factor]
    return padded.reshape(shape).mean(axis=tuple(range(1, 2 * img.ndim, 2)))


def to_coarse(points_px: NDArray[np.floating], factor: int) -> NDArray[np.floating]:
    """Pixel coordinates on the block-averaged image (block i covers pixels f·i … f·i + f − 1)."""
    return (np.asarray(points_px, dtype=float) - 0.5 * (factor - 1)) / factor


def coarse_seeds(seeds: NDArray[np.floating], factor: int) -> NDArray[np.floating]:
    """Seed disks ``(..., radius_px)`` on the block-averaged image."""
    arr = np.asarray(seeds, dtype=float).copy()
    arr[:, :-1] = to_coarse(arr[:, :-1], factor)
    arr[:, -1] /= factor
    return arr


def upsample_phi(coarse_phi: NDArray[np.floating], factor: int, spacing: NDArray[np.floating]
                 ) -> Callable[[NDArray[np.floating]], NDArray[np.floating]]:
    """φ (mm) at full-resolution points (mm) from φ at the coarse pixel centres, by cubic B-spline interpolation.

    The cubic spline (Unser, IEEE Signal Process. Mag. 16(6) (1999) 22-38)
    is twice continuously differentiable, so the curvature of the upsampled
    front has no kinks at the coarse cell lines, and it reproduces a smooth
    signed distance to O(h⁴) near the zero set.
    """
    coeffs = ndimage.spline_filter(np.asarray(coarse_phi, dtype=float), order=3, mode="nearest")
    sp = np.asarray(spacing, dtype=float)

    def values(points_mm: NDArray[np.floating]) -> NDArray[np.floating]:
        coords = to_coarse(np.asarray(points_mm, dtype=float) / sp, factor).T
        return ndimage.map_coordinates(coeffs, coords, order=3, mode="nearest", prefilter=False)

    return values
