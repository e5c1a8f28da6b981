"""Coarse start of a segmentation: block averaging, upsampling, the choice of block size, no leak."""

from __future__ import annotations

import numpy as np
import pytest
from skimage.transform import downscale_local_mean

from engine.analysis.contours import signed_area
from engine.image.coarse_start import block_mean, coarse_seeds, resolvable_factor, to_coarse, upsample_phi
from engine.front import Front
from engine.analysis.metrics import dice
from engine.segment import segment
from tests.test_front_robustness import narrow_gap_phantom


@pytest.mark.parametrize("factor", [2, 4])
def test_block_mean_matches_scikit_image(factor: int) -> None:
    # Reference: skimage.transform.downscale_local_mean (same block mean when
    # the shape divides evenly).
    image = np.random.default_rng(0).normal(size=(64, 48))
    np.testing.assert_allclose(block_mean(image, factor), downscale_local_mean(image, (factor, factor)),
                               rtol=0, atol=1e-12)


def test_block_mean_repeats_edge_pixels_for_partial_blocks() -> None:
    image = np.arange(5 * 3, dtype=float).reshape(5, 3)
    out = block_mean(image, 2)
    assert out.shape == (3, 2)
    # last row block is row 4 twice; last column block is column 2 twice (hand-computed)
    assert out[2, 1] == image[4, 2]
    assert out[0, 1] == pytest.approx((image[0, 2] + image[1, 2]) / 2)


def test_upsampling_reproduces_a_quadratic_exactly() -> None:
    # Cubic B-spline interpolation reproduces polynomials up to degree 3
    # (Unser 1999); the coarse block centres sit at f·i + (f − 1)/2 on the
    # full-resolution pixel grid. Spacing 0.5 × 0.8 mm.
    factor = 4
    spacing = np.array([0.5, 0.8])
    quad = lambda r, c: 0.03 * r**2 - 0.7 * c + 0.01 * r * c + 2.0  # noqa: E731  (pixel coordinates)
    coarse_grid = np.indices((40, 40), dtype=float) * factor + 0.5 * (factor - 1)
    values = upsample_phi(quad(*coarse_grid), factor, spacing)
    # points 15+ blocks from the border, where the spline's end conditions
    # have decayed (by 0.268 per block, Unser 1999) below the tolerance
    pts = np.random.default_rng(1).uniform([62, 62], [98, 98], size=(200, 2))
    np.testing.assert_allclose(values(pts * spacing), quad(*pts.T), atol=1e-6)
    np.testing.assert_allclose(to_coarse(np.array([[1.5, 5.5]]), factor), [[0.0, 1.0]])


def test_block_size_follows_the_structure_and_the_image() -> None:
    # The largest disk inside a disk of radius R is the disk itself (common
    # geometry): R = 33 px holds 4 blocks of 8 px, R = 20 of 4 px, R = 9 of
    # 2 px, R = 6 none; a 2 px × 300 px strip none. The block mean keeps
    # 96 px a side: 768² allows blocks of 8, 256² of 2, 160² none.
    rr, cc = np.indices((768, 768), dtype=float)
    for radius, factor in ((33.0, 8), (20.0, 4), (9.0, 2), (6.0, 1)):
        disk = np.hypot(rr - 64.2, cc - 63.7) < radius
        assert resolvable_factor(disk, np.ones(2), 8) == factor
        assert resolvable_factor(disk, np.ones(2), 2) == min(2, factor)
        assert resolvable_factor(disk[:256, :256], np.ones(2), 8) == min(2, factor)
        assert resolvable_factor(disk[:160, :160], np.ones(2), 8) == 1
    strip = np.zeros((200, 300), dtype=bool)
    strip[99:101, :] = True
    assert resolvable_factor(strip, np.ones(2), 8) == 1
    # distances in pixels of the coarsest axis: 0.5 × 1 mm pixels see the disk half as wide
    disk = np.hypot((rr - 164.2) / 2.0, cc - 63.7) < 20.0
    assert resolvable_factor(disk, np.array([0.5, 1.0]), 8) == 4
    seeds = np.array([[256.0, 256.0, 30.0]])
    np.testing.assert_allclose(coarse_seeds(seeds, 4), [[(256 - 1.5) / 4, (256 - 1.5) / 4, 7.5]])


def test_keep_parts_drops_the_part_without_a_seed() -> None:
    shape = (80, 120)
    rr, cc = np.indices(shape)
    left = (rr - 40) ** 2 + (cc - 35) ** 2 < 15**2
    right = (rr - 40) ** 2 + (cc - 85) ** 2 < 12**2
    image = np.where(left | right, 1.0, 0.0)
    front = Front.from_mask(image, left | right, model="region")
    lines = front.contours()
    assert len(lines) == 2
    left_area = [signed_area(c) for c in lines if c[:, 1].max() < 60]
    assert front.keep_parts([(40, 35)]) == 1
    mask = front.mask()
    assert not mask[:, 60:].any()
    assert mask[40, 35]
    # the kept outline does not move (only reinitialised): same enclosed area
    assert len(front.contours()) == 1
    assert front.area_mm2() == pytest.approx(left_area[0], rel=1e-3)
    assert front.keep_parts([(5, 5)]) == 0  # a point in no part removes nothing
    assert front.mask().any()


@pytest.mark.slow
def test_coarse_start_does_not_leak_through_a_narrow_gap() -> None:
    # The narrow-gap phantom of test_front_robustness at twice the size: the
    # 1.5 px gap is narrower than the 2 × 2 blocks of the coarse stage asked for.
    image, a = narrow_gap_phantom(scale=2)
    result = segment(image, [(100, 90, 16)], model="region", coarse=2)
    assert result.params["coarse"] == 2
    assert dice(result.mask, a > 0.5) >= 0.97
    assert result.mask[:, 141:].sum() == 0
    full = segment(image, [(100, 90, 16)], model="region", coarse=1)
    assert dice(result.mask, full.mask) >= 0.995


def _noisy_disks(shape: tuple[int, int], disks: list[tuple[float, float, float]], seed: int) -> np.ndarray:
    """Dark disks (0.2) on 0.6 with exact area fractions at the rim (8 × 8 subsamples) and noise σ = 0.05."""
    sub = (np.arange(8) + 0.5) / 8 - 0.5
    rr, cc = np.indices(shape, dtype=float)
    fraction = np.zeros(shape)
    for dr in sub:
        for dc in sub:
            inside = np.zeros(shape, dtype=bool)
            for r0, c0, radius in disks:
                inside |= np.hypot(rr + dr - r0, cc + dc - c0) < radius
            fraction += inside
    fraction /= 64.0
    return 0.6 - 0.4 * fraction + np.random.default_rng(seed).normal(0.0, 0.05, shape)


@pytest.mark.slow
def test_a_small_seed_floods_then_goes_coarse_at_the_block_size_asked_for() -> None:
    # A 3 px click on a 512² image: the flood takes the front out to the disk
    # (radius 140 px, far more than 4 blocks of 4 px), the coarse stage runs
    # at the block size asked for, and the result agrees with a run at full
    # resolution throughout.
    image = _noisy_disks((512, 512), [(252.3, 261.7, 140.0)], seed=3)
    rr, cc = np.indices(image.shape)
    truth = np.hypot(rr - 252.3, cc - 261.7) < 140.0
    seed = (256.0, 256.0, 3.0)
    result = segment(image, [seed], model="region", coarse=4)
    assert result.params["coarse"] == 4 and "coarse_requested" not in result.params
    assert result.timings["coarse_steps"] > 0
    assert result.converged
    full = segment(image, [seed], model="region", coarse=1)
    assert dice(result.mask, full.mask) >= 0.995
    assert dice(result.mask, truth) >= 0.97


@pytest.mark.parametrize("asked", [2, 4, 8])
def test_a_block_size_the_structure_cannot_hold_is_lowered(asked: int) -> None:
    # A disk of radius 6 px cannot keep a core of 4 blocks of 2 px or more:
    # any block size asked for is lowered to 1 (full resolution), and the
    # lowering is recorded with the settings.
    image = _noisy_disks((256, 256), [(100.4, 140.6, 6.0)], seed=4)
    result = segment(image, [(100.0, 141.0, 2.0)], model="region", coarse=asked)
    assert result.params["coarse"] == 1 and result.params["coarse_requested"] == asked
    assert result.timings["coarse_steps"] == 0
    assert result.converged
    rr, cc = np.indices(image.shape)
    assert dice(result.mask, np.hypot(rr - 100.4, cc - 140.6) < 6.0) >= 0.95


def test_a_small_structure_stays_at_full_resolution() -> None:
    # By default there is no coarse stage: the flood brings the front to the
    # boundary and it finishes at full resolution.
    image = _noisy_disks((256, 256), [(100.4, 140.6, 6.0)], seed=4)
    result = segment(image, [(100.0, 141.0, 2.0)], model="region")
    assert result.params["coarse"] == 1 and "coarse_requested" not in result.params
    assert result.converged
    rr, cc = np.indices(image.shape)
    assert dice(result.mask, np.hypot(rr - 100.4, cc - 140.6) < 6.0) >= 0.95


@pytest.mark.slow
def test_a_volume_starts_coarse_and_matches_its_truth() -> None:
    # A 100³ volume allows 2 × 2 × 2 blocks (a 50³ block mean); a ball of
    # radius 22 voxels with noise σ = 0.2 on contrast 1 (common practice for
    # a noisy phantom). The coarse stage asked for must be taken and the
    # result must match the ball (Dice 0.99) and the block mean must match
    # scikit-image's.
    n, centre, radius = 100, np.array([50.3, 49.8, 50.1]), 22.0
    grid = np.indices((n, n, n), dtype=float)
    truth = np.sqrt(sum((g - c) ** 2 for g, c in zip(grid, centre))) < radius
    image = truth + np.random.default_rng(9).normal(0.0, 0.2, truth.shape)
    np.testing.assert_allclose(block_mean(image, 2), downscale_local_mean(image, (2, 2, 2)), rtol=0, atol=1e-12)
    seed = (50.0, 50.0, 50.0, 8.0)
    result = segment(image, [seed], model="region", coarse=2)
    assert result.params["coarse"] == 2 and result.converged
    assert dice(result.mask, truth) >= 0.99
