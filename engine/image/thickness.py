"""How thick the inside is behind each point of an outline: the local half-width of a structure.

Curvature motion holds a resting front where the image speed equals a·κ. At
the end of a strip of half-width w the outline's curvature is 1/w (2/w for a
tube in 3-D), so with a fixed smoothness a a strip narrower than about 2a
cannot be held: its tip retreats wherever partial volume weakens the image's
pull. Scaling the smoothness by the
local half-width, as the small-structure rule scales it by a structure's
mean radius, keeps the curvature force at a strip's tip the same whatever
its width.

The half-width behind an outline point y with outward normal n is read from
the Euclidean distance transform D of the inside (distance from each inside
pixel centre to the nearest outside one): going inward, D(y − s·n) first
rises with s and falls again past the structure's midline, so
max over s of min(D(y − s·n), s) is the distance from y to the midline.

References
----------
.. [1] C. R. Maurer, R. Qi, V. Raghavan, "A linear time algorithm for
   computing exact Euclidean distance transforms of binary images in
   arbitrary dimensions", IEEE Trans. Pattern Anal. Mach. Intell. 25(2)
   (2003) 265-270 (scipy's distance_transform_edt).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray
from scipy import ndimage

from engine.image.boxes import occupied_box

#: Depths (in units of the smallest pixel spacing) at which the distance transform is read.
DEPTHS = (0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 6.0, 8.0, 12.0, 16.0)


def half_width(inside: NDArray[np.bool_], spacing: NDArray[np.floating], points_mm: NDArray[np.floating],
               normals: NDArray[np.floating], reach_mm: float) -> NDArray[np.floating]:
    """Local half-width (mm) of ``inside`` behind each outline point (outward unit ``normals``) on its thin parts.

    Points next to a long thin run of the midline (:func:`thin_midline`)
    get the half-width behind them; all others (and points whose structure
    is thicker than ``reach_mm``) get ``reach_mm``: the corner of a large
    organ or the tip of a wedge is thin only over a few pixels, and keeps
    its smoothness. Works on the bounding box of the points widened by
    ``reach_mm``.
    """
    sp = np.asarray(spacing, dtype=float)
    pts = np.asarray(points_mm, dtype=float)
    if len(pts) == 0:
        return np.zeros(0)
    pad = np.ceil(reach_mm / sp).astype(int) + 2
    px = pts / sp
    lo = np.maximum(np.floor(px.min(axis=0)).astype(int) - pad, 0)
    hi = np.minimum(np.ceil(px.max(axis=0)).astype(int) + pad + 1, np.array(inside.shape))
    box = tuple(slice(a, b) for a, b in zip(lo, hi))
    region = np.asarray(inside[box], dtype=bool)
    midline = thin_midline(region, sp)
    out = np.full(len(pts), float(reach_mm))
    if not midline.any():
        return out
    step = float(np.min(sp))
    near_midline = ndimage.distance_transform_edt(~midline, sampling=sp / step)
    local = (px - lo).T
    thin = ndimage.map_coordinates(near_midline, local, order=1, mode="nearest") <= THIN_HALF_WIDTH + 1.5
    if not np.any(thin):
        return out
    depth = ndimage.distance_transform_edt(region, sampling=sp)
    best = np.zeros(int(thin.sum()))
    for s in DEPTHS:
        s_mm = s * step
        if s_mm > reach_mm:
            break
        probe = ((pts[thin] - s_mm * normals[thin]) / sp - lo).T
        d = ndimage.map_coordinates(depth, probe, order=1, mode="constant", cval=0.0)
        best = np.maximum(best, np.minimum(d, s_mm))
    out[thin] = np.minimum(np.maximum(best, step), reach_mm)
    return out


#: A structure whose midline runs this many pixels at a half-width of at most
#: THIN_HALF_WIDTH pixels is thin: one node per pixel cannot hold a signed
#: distance across it (its layer's ||∇φ| − 1| stays near 0.3 after every
#: reinitialisation, and the outline of a 2-3 px strip never comes to rest).
THIN_HALF_WIDTH = 2.0
THIN_LENGTH = 10
#: The same bar read on a flood's pixels (:func:`thin_length` for the fine front's detail). At SNR 4-6
#: the flood of a vessel 3-4 px wide takes a fringe of its partial-volume pixels, and the pixel-centre
#: distance along its midline reads 2.0 and 2.24 (√5, the next value a pixel-centre distance takes)
#: where the vessel's own reads 2.0: at 2.0 its midline broke into runs shorter than THIN_LENGTH, the
#: front ran at one node per pixel, could not hold a distance across the vessel and never came to rest.
#: Counting √5 as well takes in strips up to about 4.5 px wide, which converge in fewer steps at two
#: nodes per pixel and as accurately (a 5 px strip: 76-145 steps at one node per pixel, 66-80 at two).
THIN_FLOOD_HALF_WIDTH = 2.25


def thin_midline(inside: NDArray[np.bool_], spacing: NDArray[np.floating], *,
                 half_width: float = THIN_HALF_WIDTH) -> NDArray[np.bool_]:
    """The long thin runs of the midline of ``inside``: where its half-width is at most ``half_width`` pixels.

    The midline is the skeleton (Zhang & Suen thinning in 2-D, Lee, Kashyap
    & Chu in 3-D, as scikit-image implements them) of what an opening by a
    ball of ``half_width`` pixels (rounded up) removes (only that can be thin; skeletons
    of large regions are slow); the half-width there is the distance
    transform in pixels of the smallest spacing. Runs shorter than
    THIN_LENGTH pixels (the spurs of a rough outline, the tip of a wedge)
    are left out.

    References
    ----------
    T. Y. Zhang, C. Y. Suen, Commun. ACM 27(3) (1984) 236-239; T.-C. Lee,
    R. L. Kashyap, C.-N. Chu, CVGIP: Graphical Models and Image Processing
    56(6) (1994) 462-478.
    """
    full = np.asarray(inside, dtype=bool)
    out = np.zeros(full.shape, dtype=bool)
    if not full.any():
        return out
    box = occupied_box(full, 1)
    m = full[box]
    radius = int(np.ceil(half_width))
    ball = np.sqrt(np.sum((np.indices((2 * radius + 1,) * m.ndim) - radius) ** 2, axis=0)) <= radius
    wide = tuple(slice(radius + 1, -radius - 1) for _ in range(m.ndim))
    residue = m & ~ndimage.binary_opening(np.pad(m, radius + 1), structure=ball)[wide]
    if not residue.any():  # nothing is thin (most outlines): the distances and the skeleton are not needed
        return out
    from skimage.morphology import skeletonize

    sp = np.asarray(spacing, dtype=float)
    inner = tuple(slice(1, -1) for _ in range(m.ndim))
    depth = ndimage.distance_transform_edt(np.pad(m, 1), sampling=sp / float(np.min(sp)))[inner]
    midline = skeletonize(residue) & (depth <= half_width)
    if not midline.any():
        return out
    labels, count = ndimage.label(midline, structure=np.ones((3,) * m.ndim, dtype=bool))
    sizes = np.bincount(labels.ravel(), minlength=count + 1)
    long_runs = sizes >= THIN_LENGTH
    long_runs[0] = False
    out[box] = long_runs[labels]
    return out


def thin_length(inside: NDArray[np.bool_], spacing: NDArray[np.floating], *,
                half_width: float = THIN_HALF_WIDTH) -> int:
    """Pixels on the long thin runs of the midline of ``inside`` (:func:`thin_midline`; 0: nothing thin)."""
    return int(np.count_nonzero(thin_midline(inside, spacing, half_width=half_width)))
