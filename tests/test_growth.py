"""The pieces of growth from a click: the flood, the noise estimate, the outline's motion, thin parts."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

from engine.front.convergence import CHECK_EVERY, OutlineMotion, hausdorff
from engine.image.growth import CLEAR_INSIDE, RegionGrowth, noise_level, smoothing_factor
from engine.analysis.metrics import dice
from engine.segment import segment
from engine.image.thickness import THIN_FLOOD_HALF_WIDTH, THIN_LENGTH, half_width, thin_length, thin_midline
from partial_volume import partial_volume


def _disk(shape, centre, radius):
    return partial_volume(shape, lambda r, c: np.hypot(r - centre[0], c - centre[1]) < radius)


@pytest.mark.parametrize("sigma", [0.05, 0.3, 2.0])
def test_noise_level_of_white_noise_beside_an_edge_and_a_ramp(sigma: float) -> None:
    # Donoho & Johnstone, Biometrika 81(3) (1994) 425-455: the median absolute
    # finest diagonal wavelet coefficient over 0.6745 estimates the standard
    # deviation of Gaussian white noise; a step edge and a linear ramp leave
    # the diagonal coefficients (almost) untouched.
    rng = np.random.default_rng(11)
    rows, cols = np.indices((128, 128), dtype=float)
    image = 0.01 * rows + 5.0 * (cols > 63.5) + rng.normal(0.0, sigma, (128, 128))
    estimate = noise_level(image, [(40.0, 60.0), (90.0, 70.0)])
    assert estimate == pytest.approx(sigma, rel=0.1)


@pytest.mark.parametrize("sigma_px", [1.0, 1.5, 2.0, 3.0])
def test_smoothing_factor_matches_scipy_on_white_noise(sigma_px: float) -> None:
    # Reference: scipy.ndimage.gaussian_filter applied to white noise; the
    # standard deviation falls by sqrt(sum of squared weights).
    noise = np.random.default_rng(5).normal(0.0, 1.0, (512, 512))
    measured = float(np.std(ndimage.gaussian_filter(noise, sigma_px)))
    assert smoothing_factor(np.array([sigma_px, sigma_px])) == pytest.approx(measured, rel=0.05)
    assert smoothing_factor(np.array([0.0, 0.0])) == 1.0


def test_flood_of_a_noise_free_disk_takes_the_pixels_three_quarters_inside() -> None:
    # Contrast 1 on 0: the region speed of a pixel covered to a fraction c is
    # 2c - 1 (Chan & Vese 2001 with the two means 1 and 0), so the flood keeps
    # exactly the connected pixels with c >= 3/4 (CLEAR_INSIDE = 1/2) and no
    # pixel less than half covered.
    assert CLEAR_INSIDE == 0.5
    image, truth = _disk((96, 96), (47.3, 48.6), 30.0)
    grown = RegionGrowth(image, np.array([[47.0, 48.0, 4.0]]), np.ones(2)).run()
    assert not np.any(grown & (image < 0.5))
    assert np.all(grown[image >= 0.8])
    assert grown.sum() >= np.sum(image >= 0.75) - 2


def test_flood_under_a_bias_field_stays_inside_and_the_front_finishes() -> None:
    # A disk whose intensity rises by 30 % across it (a smooth bias field),
    # contrast 1 against noise 0.05: the flood, whose local inside mean lags
    # behind the field, stops short but never leaves the disk; the level set
    # finishes the outline (Dice against the pixel-centre truth).
    image, truth = _disk((128, 128), (64.2, 63.7), 45.0)
    cols = np.indices(image.shape)[1]
    image = image * (0.85 + 0.3 * cols / 127.0) + np.random.default_rng(2).normal(0.0, 0.05, image.shape)
    grown = RegionGrowth(image, np.array([[64.0, 40.0, 4.0]]), np.ones(2)).run()
    assert np.sum(grown & ~truth) <= 5
    assert grown.sum() >= 0.4 * truth.sum()
    result = segment(image, [(64.0, 40.0, 4.0)])
    assert result.converged and dice(result.mask, truth) >= 0.98


def test_flood_does_not_cross_a_one_pixel_gap() -> None:
    # Two same-intensity disks 1.2 px apart, noise 0.05: the flood keeps to
    # the seeded one (pixels connect through faces only).
    shape = (80, 140)
    a, ta = _disk(shape, (40.3, 40.2), 25.0)
    b, tb = _disk(shape, (40.3, 40.2 + 51.2), 25.0)
    image = np.clip(a + b, 0, 1) + np.random.default_rng(4).normal(0.0, 0.05, shape)
    grown = RegionGrowth(image, np.array([[40.0, 40.0, 4.0]]), np.ones(2)).run()
    assert not np.any(grown & tb)
    assert grown.sum() >= 0.9 * ta.sum()


def test_window_flood_is_the_inner_half_of_the_window() -> None:
    image, truth = _disk((64, 64), (31.5, 32.4), 20.0)
    grown = RegionGrowth(image, np.array([[31.0, 32.0, 3.0]]), np.ones(2), model="window", window=(0.5, 1.5),
                         window_sigma_mm=0.0).run()
    # (ε − |I − 1|)/ε >= 1/2 with ε = 1/2: I >= 0.75
    np.testing.assert_array_equal(grown, ndimage.binary_fill_holes(image >= 0.75))


def test_flood_without_a_boundary_gives_the_seeds_back() -> None:
    image = np.random.default_rng(0).normal(0.0, 1.0, (64, 64))
    growth = RegionGrowth(image, np.array([[32.0, 32.0, 3.0]]), np.ones(2))
    grown = growth.run()
    # it leaked once, started again judging likeness by the noise figure alone, and leaked again
    assert growth.unbounded and growth.record["unbounded"] and growth.record["restarted"]
    assert grown.sum() == 29  # the seed disk: lattice points within radius 3 (Gauss circle problem)


def test_outline_displacement_of_a_moved_circle() -> None:
    # Samples of a circle of radius 20 moved by d along x: the Hausdorff
    # distance between the two circles is d (common geometry); samples slid
    # along the same circle are at distance ~0 (within the sampling's sag,
    # r(1 - cos(π/n)) for n samples).
    t = np.linspace(0, 2 * np.pi, 400, endpoint=False)
    circle = 20.0 * np.column_stack([np.cos(t), np.sin(t)])
    slid = 20.0 * np.column_stack([np.cos(t + 0.004), np.sin(t + 0.004)])
    assert hausdorff(circle, circle + [0.3, 0.0]) == pytest.approx(0.3, abs=1e-3)
    assert hausdorff(circle, slid) < 20.0 * (1 - np.cos(np.pi / 400)) + 1e-9
    # one point of the outline moved outward by 0.5: the largest displacement is 0.5, however small the mean
    bumped = circle.copy()
    bumped[17] *= 20.5 / 20.0
    assert hausdorff(circle, bumped) == pytest.approx(0.5, abs=1e-2)


def test_outline_motion_needs_a_full_window_at_rest() -> None:
    motion = OutlineMotion(window=20, tolerance_mm=0.05)
    t = np.linspace(0, 2 * np.pi, 200, endpoint=False)
    circle = 10.0 * np.column_stack([np.cos(t), np.sin(t)])
    stopped = [motion.update(step, circle if step % CHECK_EVERY == 0 else None) for step in range(1, 41)]
    assert not any(stopped[:19]) and all(stopped[24:])
    # a tip that keeps moving (0.02 per step) is not at rest over a window, though its mean motion is tiny
    motion = OutlineMotion(window=20, tolerance_mm=0.05)
    for step in range(1, 101):
        moving = circle.copy()
        moving[0] *= (10.0 + 0.02 * step) / 10.0
        assert not motion.update(step, moving if step % CHECK_EVERY == 0 else None)


def test_half_width_of_strips_and_disks() -> None:
    # A strip of width w (pixels, axis-aligned) has half-width w/2 behind the
    # points of its long sides; a large disk is not thin.
    shape = (40, 200)
    for width in (2.0, 3.0):
        strip = np.zeros(shape, dtype=bool)
        strip[20:20 + int(width), 10:190] = True
        assert thin_length(strip, np.ones(2)) >= 150
        side = np.column_stack([np.full(50, 19.5), np.linspace(40, 160, 50)])
        found = half_width(strip, np.ones(2), side, np.tile([-1.0, 0.0], (50, 1)), 8.0)
        assert np.all(np.abs(found - width / 2.0) <= 0.75)
    rr, cc = np.indices((120, 120), dtype=float)
    disk = np.hypot(rr - 60.2, cc - 59.7) < 40.0
    assert thin_length(disk, np.ones(2)) == 0 and not thin_midline(disk, np.ones(2)).any()
    points = np.column_stack([60.2 + 40 * np.cos(np.linspace(0, 6, 30)), 59.7 + 40 * np.sin(np.linspace(0, 6, 30))])
    normals = (points - [60.2, 59.7]) / 40.0
    assert np.all(half_width(disk, np.ones(2), points, normals, 8.0) == 8.0)
    assert THIN_LENGTH > 2


def test_a_flood_with_a_partial_volume_fringe_along_a_thin_strip_counts_as_thin() -> None:
    # A strip 4 px wide with a fringe pixel on every other column of each side (what a flood takes of a
    # vessel's partial-volume pixels at SNR 4-6): its midline's pixel-centre distance to the outside
    # alternates between 2 and √5, so at the front's bar of 2 px no run is THIN_LENGTH long, and at the
    # flood's bar (THIN_FLOOD_HALF_WIDTH, 2.25) the whole midline counts. Plain strips 5 and 6 px wide
    # (pixel-centre half-width 3) count at neither.
    fringed = np.zeros((40, 200), dtype=bool)
    fringed[18:22, 20:180] = True
    fringed[17, 20:180:2] = True
    fringed[22, 21:180:2] = True
    assert thin_length(fringed, np.ones(2)) == 0
    assert thin_length(fringed, np.ones(2), half_width=THIN_FLOOD_HALF_WIDTH) >= 150
    for rows in (slice(17, 22), slice(17, 23)):
        plain = np.zeros((40, 200), dtype=bool)
        plain[rows, 20:180] = True
        assert thin_length(plain, np.ones(2), half_width=THIN_FLOOD_HALF_WIDTH) == 0


@pytest.mark.parametrize("spacing", [(1.0, 1.0), (0.8, 1.3), (0.6, 0.6), (2.0, 1.5)])
def test_the_front_starts_with_every_flooded_pixel_inside(spacing) -> None:
    # the hand-over from the flood to the front must not drop the flood's boundary pixels, whatever the spacing
    from engine.segmenter import Segmenter

    rng = np.random.default_rng(3)
    rr, cc = np.indices((90, 100))
    disk = (rr - 44.5) ** 2 + (cc - 51.2) ** 2 < 30.0**2
    image = 100.0 + 60.0 * disk + rng.normal(0.0, 4.0, disk.shape)
    seg = Segmenter(image, [(44, 51, 4)], spacing=spacing)
    while seg.stage == "growing":
        flooded = seg.mask()
        seg.step(1)
    assert flooded.sum() > 0.5 * disk.sum()  # the flood reached most of the disk before the hand-over
    start = seg.mask()
    assert not np.any(flooded & ~start)
