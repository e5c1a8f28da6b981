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
:meth:`engine.front.core.Front.keep_parts` then drops any part that holds no seed.
Since the flood of :mod:`engine.image.growth` brings the front to the boundary at
pixel level, the coarse stage runs only when a block size is asked for or
the image resolves only blocks of several pixels
(:func:`engine.image.resolution.resolved_block`: the block mean then loses
nothing the image holds), and at no more than the structure the flood
found can hold (:func:`resolvable_factor`).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from numpy.typing import NDArray
from scipy import ndimage

#: Smallest side (pixels) of the block-averaged image, by dimension: a 48³
#: block mean holds as many voxels as a 330² image holds pixels.
MIN_COARSE_SIDE = {2: 96, 3: 48}
#: Smallest radius of the structure's largest inscribed disk, in blocks, for a
#: coarse front: its band stencils reach about four coarse pixels, and a
#: structure two blocks wide leaks through the blocks it shares with its
#: surroundings.
MIN_COARSE_SEED = 4.0
#: The coarse front only has to come within a fraction of a block of the
#: boundary: it counts as converged at this many times the fine front's
#: tolerance, and it stops after COARSE_MAX_STEPS steps in any case.
COARSE_TOL_FACTOR = 5.0
COARSE_MAX_STEPS = 2000


def resolvable_factor(inside: NDArray[np.bool_], spacing: NDArray[np.floating], requested: int) -> int:
    """The largest block size up to ``requested`` that the image and the structure ``inside`` can hold.

    The block-averaged image must keep MIN_COARSE_SIDE pixels on its
    shortest side (a 256² image allows blocks of 2: on coarser block means a
    thin layer around a structure disappears and the front creeps along it),
    and the radius of the largest disk (ball) inside ``inside``, in pixels
    along the coarsest axis (exact Euclidean distance transform, Maurer, Qi
    & Raghavan, IEEE Trans. PAMI 25(2) (2003) 265-270, as scipy implements
    it), must be at least MIN_COARSE_SEED blocks. The block size is halved
    until both hold (1: no coarse stage).
    """
    m = np.asarray(inside, dtype=bool)
    sp = np.asarray(spacing, dtype=float)
    depth = ndimage.distance_transform_edt(m, sampling=sp / float(np.max(sp))) if m.any() else None
    radius = float(np.max(depth)) if depth is not None else 0.0
    side = MIN_COARSE_SIDE.get(m.ndim, 0)
    factor = int(requested)
    while factor > 1 and (radius < MIN_COARSE_SEED * factor or min(m.shape) / factor < side):
        factor //= 2
    return factor


def block_mean(image: NDArray[np.floating], factor: int) -> NDArray[np.floating]:
    """Mean over ``factor`` × ``factor`` blocks; the last partial blocks repeat the edge pixels.

    Summed axis by axis, the last first, from strided slices (a reduction
    over the axes of a reshaped view is ten times slower): the same sums
    in the same order as numpy's mean in 2-D for blocks up to 4 pixels,
    equal to rounding otherwise.
    """
    img = np.asarray(image, dtype=float)
    pad = [(0, (-n) % factor) for n in img.shape]
    out = np.pad(img, pad, mode="edge") if any(after for _, after in pad) else img
    if factor == 1:
        return out.copy()
    for axis in reversed(range(img.ndim)):
        lead = (slice(None),) * axis
        total = out[lead + (slice(0, None, factor),)] + out[lead + (slice(1, None, factor),)]
        for offset in range(2, factor):
            total += out[lead + (slice(offset, None, factor),)]
        out = total
    return out / factor ** img.ndim


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
