"""What local region statistics read: a region's core and the ring beyond its rim, Gaussian sums at a few pixels.

The flood (:mod:`engine.image.growth`) and the front's local statistics
(:mod:`engine.front.statistics`) tell the tissue around a region from its
own by Gaussian-weighted means over the region without its blurred rim and
over a ring of outside pixels beyond that rim (Lankton & Tannenbaum 2008).
Both functions here give exactly what the whole-array operations give, at
less cost: the distance transforms (Maurer et al. 2003, scipy's) run on
the region's bounding box, and a Gaussian filter read at a few pixels
filters its last axis at those pixels only.

References
----------
.. [1] S. Lankton, A. Tannenbaum, "Localizing region-based active
   contours", IEEE Trans. Image Process. 17(11) (2008) 2029-2039.
.. [2] C. R. Maurer, R. Qi, V. Raghavan, "A linear time algorithm for
   computing exact Euclidean distance transforms of binary images in
   arbitrary dimensions", IEEE Trans. Pattern Anal. Mach. Intell. 25(2)
   (2003) 265-270.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import ndimage

__all__ = ["core_and_ring", "gaussian_at"]


def core_and_ring(region: NDArray[np.bool_], spacing: ArrayLike, *, rim: float, outer: float
                  ) -> tuple[NDArray[np.bool_], NDArray[np.bool_]]:
    """The pixels of ``region`` deeper than ``rim`` (mm), and the outside pixels beyond ``rim`` and within ``outer``.

    Depth and distance are the Euclidean distance transforms of the region
    and of its outside (``scipy.ndimage.distance_transform_edt`` with the
    pixel ``spacing``). They run on the region's bounding box: one pixel
    wider for the depth (the nearest outside pixel of a pixel in the box is
    never farther than one on that margin), ``outer`` wider for the distance
    (a pixel farther from the box is farther than ``outer`` from the region).
    An empty region has neither.
    """
    sp = np.asarray(spacing, dtype=float).reshape(-1)
    if sp.size == 1:
        sp = np.full(region.ndim, float(sp[0]))
    if sp.size != region.ndim or np.any(sp <= 0):
        raise ValueError(f"spacing: expected {region.ndim} positive values, got {spacing!r}")
    nz = [np.flatnonzero(np.any(region, axis=tuple(j for j in range(region.ndim) if j != i)))
          for i in range(region.ndim)]
    core, ring = np.zeros_like(region), np.zeros_like(region)
    if any(len(a) == 0 for a in nz):
        return core, ring
    reach = np.ceil(outer / sp).astype(int) + 1
    inner = tuple(slice(max(int(a[0]) - 1, 0), min(int(a[-1]) + 2, n)) for a, n in zip(nz, region.shape))
    wide = tuple(slice(max(int(a[0]) - r, 0), min(int(a[-1]) + r + 1, n))
                 for a, r, n in zip(nz, reach, region.shape))
    core[inner] = region[inner] & (ndimage.distance_transform_edt(region[inner], sampling=sp) > rim)
    distance = ndimage.distance_transform_edt(~region[wide], sampling=sp)
    ring[wide] = (distance > rim) & (distance <= outer)
    return core, ring


def gaussian_at(values: NDArray[np.floating], sigma: ArrayLike, pixels: tuple[NDArray[np.int64], ...]
                ) -> NDArray[np.floating]:
    """``scipy.ndimage.gaussian_filter(values, sigma, mode="nearest")`` at ``pixels`` (index arrays), bit for bit.

    The separable passes run over the whole array along every axis but the
    last; the last pass is taken at ``pixels`` only, summing in the order
    scipy's symmetric correlation sums (the centre tap first, then each
    pair of taps from the outermost in), in double precision, and rounded to
    ``values``' type as scipy's output is.
    """
    values = np.asarray(values)
    if values.dtype.kind != "f":
        raise ValueError(f"values: expected a floating-point array, got {values.dtype}")
    s = np.asarray(sigma, dtype=float).reshape(-1)
    if s.size == 1:
        s = np.full(values.ndim, float(s[0]))
    axes = [a for a in range(values.ndim) if s[a] > 1e-15]
    if not axes:
        return values[pixels].copy()
    partial = values
    for a in axes[:-1]:
        partial = ndimage.gaussian_filter1d(partial, s[a], axis=a, mode="nearest")
    last = axes[-1]
    half = int(4.0 * float(s[last]) + 0.5)  # scipy's radius at its default truncate of 4
    # the taps as scipy's filter has them: its response to a unit impulse (exact: one product each)
    impulse = np.zeros(2 * half + 1)
    impulse[half] = 1.0
    taps = ndimage.gaussian_filter1d(impulse, s[last], mode="constant")
    # each pixel's taps along the last axis, edge repeated (scipy's "nearest"), one row per tap
    pad = [(0, 0)] * values.ndim
    pad[last] = (half, half)
    windows = np.lib.stride_tricks.sliding_window_view(np.pad(partial, pad, mode="edge"), 2 * half + 1, axis=last)
    along = np.ascontiguousarray(windows[pixels].T, dtype=np.float64)
    out = along[half] * taps[half]
    for j in range(half, 0, -1):
        out += (along[half - j] + along[half + j]) * taps[half - j]
    return out.astype(values.dtype, copy=False)
