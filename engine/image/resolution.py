"""The block size below which an image holds no detail of its own (an image sampled finer than it resolves).

An image interpolated to a finer grid (zero-filled k-space in MR, a spline
zoom, a reconstruction on a grid finer than its kernel) has neighbouring
pixels that vary together: its noise and texture decorrelate only over a
few pixels. Every rule that counts pixels (the flood's neighbourhoods, a
front's step of ``cfl`` node spacings, a tolerance of a fraction of a pixel)
then works on a scale the image does not resolve, and the number of steps
grows with the zoom while the outline gains nothing.

The test reads the finest diagonal Haar coefficients (Donoho & Johnstone
1994) near the seeds on the image and on its block means of 2, 4, … pixels.
For white noise the coefficients of the 2× block means vary half as much as
the pixels' (the mean of four independent values); where they vary *more*
than the finer level's, that level lies below the image's resolution and the
block size doubles.

References
----------
.. [1] D. L. Donoho, I. M. Johnstone, "Ideal spatial adaptation by wavelet
   shrinkage", Biometrika 81(3) (1994) 425-455.
.. [2] P. J. Burt, E. H. Adelson, "The Laplacian pyramid as a compact image
   code", IEEE Trans. Commun. 31(4) (1983) 532-540 (coarse to fine).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from engine.image.boxes import around_points
from engine.image.coarse_start import MIN_COARSE_SIDE, block_mean, to_coarse
from engine.image.growth import NOISE_BOX, noise_level

#: Largest block size tried.
MAX_RESOLVED_BLOCK = 8
#: Ratio of the Haar detail of the 2× block means to that of the finer level above which the finer level
#: is below the image's resolution (white noise: 0.5; an image zoomed 2× by a cubic spline: 2-4).
CORRELATED = 1.0


def resolved_block(image: NDArray[np.floating], centres: ArrayLike, *, largest: int = MAX_RESOLVED_BLOCK) -> int:
    """The block size (1, 2, 4 or 8) at which ``image`` resolves detail near ``centres`` (pixel coordinates).

    Doubled while the finest diagonal Haar coefficients of the block means
    twice as large vary more than the present level's (see module
    docstring), and only while the block means keep
    :data:`engine.image.coarse_start.MIN_COARSE_SIDE` pixels on their
    shortest side.
    """
    img = np.asarray(image, dtype=float)
    points = np.atleast_2d(np.asarray(centres, dtype=float))
    side = MIN_COARSE_SIDE.get(img.ndim, 0)
    shape = img.shape
    # only the boxes the coefficients are read in: the seeds' box widened by NOISE_BOX pixels at every level
    box = around_points(points, NOISE_BOX * largest, largest, shape)
    img = img[box]
    points = points - [s.start for s in box]
    block, level = 1, img
    detail = noise_level(level, points, half=NOISE_BOX)
    while 2 * block <= largest and min(shape) / (2 * block) >= side:
        coarser = block_mean(level, 2)
        coarse_detail = noise_level(coarser, to_coarse(points, 2 * block), half=max(NOISE_BOX // (2 * block), 8))
        if not detail > 0 or coarse_detail <= CORRELATED * detail:
            break
        block, level, detail = 2 * block, coarser, coarse_detail
    return block
