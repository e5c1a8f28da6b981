"""Where a converged outline sits against a boundary known exactly: its mean offset and its spread.

Two invented partial-volume slices (tests/growth_phantoms.py; contrast 1,
noise σ 0.05, seeded with a disk of radius 3-4 px), each with an exact
boundary to measure the outline's signed offset from (positive outward):

- a winding channel 6 px wide: its inside is every point within 3 px of a
  sampled path, so the signed offset of a point is its distance to the path
  minus 3 px (the phantom's own definition);
- a blob whose outline carries lobes of orders 2-24, r < R(θ): the signed
  offset of a point (r, θ) is, to first order, (r − R(θ)) R / √(R² + R'²)
  (the radial gap projected on the normal of a polar curve; common geometry).

The Chan–Vese front (Chan & Vese, IEEE Trans. Image Process. 10(2) (2001)
266-277) rests where the image reads the midpoint of the two regions'
means. Pixels near the outline hold a mixture of both (partial volume, then
smoothing); taken into the inside mean they drew a 6 px channel's outline
0.07 px outward. Curvature motion shifts a resting outline by a·κ over the
speed's slope, inward on convex lobes and outward in concave ones: 0.105 px
RMS on the lobed blob.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

import growth_phantoms as gp
from engine.segment import segment


def test_a_thin_channel_outline_sits_on_its_edges() -> None:
    case = gp.channel(256)
    result = segment(case.image, [case.seed], spacing=case.spacing)
    assert result.converged
    points = np.concatenate(result.contours)
    distance, _ = cKDTree(gp.channel_path(256)).query(points)
    offset = distance - case.info["width_px"] / 2.0
    # with the rim's pixels in the inside mean: mean +0.070 px, RMS 0.083 px (96 % outward)
    assert abs(np.mean(offset)) <= 0.03, np.mean(offset)
    assert np.sqrt(np.mean(offset**2)) <= 0.06, np.sqrt(np.mean(offset**2))


def test_a_lobed_outline_is_not_shrunk_by_the_smoothness() -> None:
    case = gp.convoluted(256)
    result = segment(case.image, [case.seed], spacing=case.spacing)
    assert result.converged
    points = np.concatenate(result.contours)
    # the blob's radius function, from the same draw as the phantom (growth_phantoms.convoluted)
    side = 256
    rng = np.random.default_rng(1000)
    centre = (side - 1) / 2.0 + 0.21
    ks = np.arange(2, 25)
    amp = 0.22 * rng.uniform(0.4, 1.0, len(ks)) / np.sqrt(ks)
    phase = rng.uniform(0, 2 * np.pi, len(ks))

    def radius(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        waves = ks[:, None] * t[None] + phase[:, None]
        r = 0.3 * side * (1 + np.sum(amp[:, None] * np.cos(waves), axis=0) / 1.6)
        dr = 0.3 * side * np.sum(-amp[:, None] * ks[:, None] * np.sin(waves), axis=0) / 1.6
        return r, dr

    y, x = points[:, 0] - centre, points[:, 1] - centre
    r_true, slope = radius(np.arctan2(y, x))
    assert np.all(case.info["inside"](points[:, 0] + 0.0, points[:, 1]) == (np.hypot(y, x) < r_true))
    offset = (np.hypot(y, x) - r_true) * r_true / np.hypot(r_true, slope)
    # with plain curvature motion: RMS 0.105 px, 0.63 mm² times the curvature
    assert np.sqrt(np.mean(offset**2)) <= 0.075, np.sqrt(np.mean(offset**2))
    assert abs(np.mean(offset)) <= 0.02, np.mean(offset)
