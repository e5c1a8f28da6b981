"""The region statistics' shortcuts, the flood's 3 × 3 extremes and hole filling equal scipy's whole-array results.

Reference: scipy.ndimage (``distance_transform_edt``, Maurer et al. 2003;
``gaussian_filter``) on the whole array. Seeded random families of regions
(blobs touching the array's sides or not, several parts, anisotropic
spacing) and of read pixels.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

from engine.image.ring_statistics import block_gaussian_at, core_and_ring, gaussian_at, gaussian_block


def _random_region(rng: np.random.Generator, shape: tuple[int, ...]) -> np.ndarray:
    noise = ndimage.gaussian_filter(rng.standard_normal(shape), rng.uniform(2.0, 6.0))
    return noise > np.quantile(noise, rng.uniform(0.5, 0.95))


@pytest.mark.parametrize("seed", range(12))
def test_core_and_ring_equal_the_whole_array_distance_transforms(seed: int) -> None:
    rng = np.random.default_rng(seed)
    ndim = 2 if seed < 9 else 3
    shape = tuple(int(n) for n in rng.integers(20, 90 if ndim == 2 else 30, size=ndim))
    region = _random_region(rng, shape)
    if seed % 3 == 0:  # a small region away from the sides
        region = np.zeros(shape, bool)
        region[tuple(slice(n // 3, n // 3 + 4) for n in shape)] = True
    spacing = rng.choice([1.0, 0.5, 0.7, 0.9, 2.0], size=ndim)
    rim = float(rng.uniform(0.5, 6.0))
    outer = rim + float(rng.uniform(1.0, 5.0))
    core, ring = core_and_ring(region, spacing, rim=rim, outer=outer)
    depth = ndimage.distance_transform_edt(region, sampling=spacing)
    distance = ndimage.distance_transform_edt(~region, sampling=spacing)
    np.testing.assert_array_equal(core, region & (depth > rim))
    np.testing.assert_array_equal(ring, (distance > rim) & (distance <= outer))


def test_core_and_ring_of_an_empty_region_are_empty_and_spacing_is_checked() -> None:
    core, ring = core_and_ring(np.zeros((8, 9), bool), (1.0, 1.0), rim=1.0, outer=3.0)
    assert not core.any() and not ring.any()
    with pytest.raises(ValueError, match="spacing"):
        core_and_ring(np.ones((4, 4), bool), (1.0, 0.0), rim=1.0, outer=2.0)


@pytest.mark.parametrize("seed", range(12))
def test_gaussian_at_equals_the_whole_array_filter(seed: int) -> None:
    rng = np.random.default_rng(100 + seed)
    ndim = 2 if seed < 9 else 3
    shape = tuple(int(n) for n in rng.integers(5, 70 if ndim == 2 else 25, size=ndim))
    dtype = np.float32 if seed % 2 else np.float64
    values = (rng.standard_normal(shape) * (_random_region(rng, shape) if seed % 3 else 1.0)).astype(dtype)
    sigma = rng.uniform(0.3, 7.0, size=ndim)
    if seed == 4:
        sigma[0] = 0.0  # an axis left unfiltered
    if seed == 5:
        sigma[-1] = 0.0  # the last axis left unfiltered
    count = int(rng.integers(0, 200))
    flat = np.unique(rng.integers(0, values.size, size=count))
    pixels = np.unravel_index(flat, shape)
    got = gaussian_at(values, sigma, pixels)
    expected = ndimage.gaussian_filter(values, sigma, mode="nearest")[pixels]
    assert got.dtype == expected.dtype
    np.testing.assert_array_equal(got, expected)


def test_gaussian_at_refuses_integer_values() -> None:
    with pytest.raises(ValueError, match="values"):
        gaussian_at(np.zeros((4, 4), dtype=int), 1.0, (np.array([0]), np.array([0])))


@pytest.mark.parametrize("seed", range(10))
def test_block_gaussian_at_is_within_a_fifth_of_a_percent_of_the_whole_array_filter(seed: int) -> None:
    # Reference: scipy.ndimage.gaussian_filter(mode="nearest") on the whole array. σ of 8-40 px (the local
    # statistics' radius on a fine grid), blocks of σ/4: masks, masked images and thin rings, reaching the
    # array's sides; every pixel read. Measured over 30 seeds: at most 0.11 % of the values' range away from
    # the sides, 0.2 % anywhere; held to 0.3 % here.
    rng = np.random.default_rng(400 + seed)
    ndim = 2 if seed < 8 else 3
    shape = tuple(int(n) for n in (rng.integers(120, 300, size=ndim) if ndim == 2 else rng.integers(36, 64, size=ndim)))
    region = _random_region(rng, shape)
    kind = seed % 3
    if kind == 0:
        values = region.astype(float)
    elif kind == 1:
        values = region * (100.0 + 20.0 * rng.standard_normal(shape))
    else:
        values = (ndimage.binary_dilation(region, iterations=6) & ~ndimage.binary_dilation(region, iterations=2)
                  ).astype(float)
    sigma = rng.uniform(8.0, 40.0 if ndim == 2 else 14.0, size=ndim)
    if seed % 2:
        sigma[:] = sigma[0]
    points = np.indices(shape).reshape(ndim, -1)
    got = block_gaussian_at(values, sigma, points).reshape(shape)
    expected = ndimage.gaussian_filter(values, sigma, mode="nearest")
    assert np.all(gaussian_block(sigma, ndim) >= 2)
    assert np.max(np.abs(got - expected)) <= 0.003 * np.ptp(values)


def test_block_gaussian_at_reads_between_pixels_and_checks_its_arguments() -> None:
    # A linear ramp is kept by any Gaussian (its mean is the ramp's value): read at fractional points
    # away from the sides, the block grid gives it back (common practice: a symmetric kernel preserves
    # linear functions).
    rows, cols = np.indices((200, 180), dtype=float)
    ramp = 0.3 * rows - 0.2 * cols + 5.0
    points = np.array([[80.25, 100.5, 120.75], [70.5, 90.125, 60.0]])
    np.testing.assert_allclose(block_gaussian_at(ramp, 12.0, points), 0.3 * points[0] - 0.2 * points[1] + 5.0,
                               rtol=0, atol=1e-6)
    with pytest.raises(ValueError, match="values"):
        block_gaussian_at(np.zeros((4, 4), dtype=int), 1.0, points)
    with pytest.raises(ValueError, match="block"):
        block_gaussian_at(ramp, 12.0, points, block=(0, 3))
    with pytest.raises(ValueError, match="sigma"):
        gaussian_block((1.0, -2.0), 2)


@pytest.mark.parametrize("seed", range(6))
def test_the_floods_neighbourhood_extremes_equal_scipys_size_3_filters(seed: int) -> None:
    from engine.image.growth import _extreme3

    rng = np.random.default_rng(200 + seed)
    ndim = 2 if seed < 4 else 3
    shape = tuple(int(n) for n in rng.integers(1, 60 if ndim == 2 else 20, size=ndim))
    values = rng.standard_normal(shape)
    np.testing.assert_array_equal(_extreme3(values, np.maximum), ndimage.maximum_filter(values, size=3))
    np.testing.assert_array_equal(_extreme3(values, np.minimum), ndimage.minimum_filter(values, size=3))


@pytest.mark.parametrize("seed", range(8))
def test_the_floods_hole_filling_on_its_box_equals_scipys_on_the_whole_array(seed: int) -> None:
    from engine.image.growth import _fill_small_holes, _filled

    rng = np.random.default_rng(300 + seed)
    ndim = 2 if seed < 6 else 3
    shape = tuple(int(n) for n in rng.integers(1, 70 if ndim == 2 else 25, size=ndim))
    noise = ndimage.gaussian_filter(rng.standard_normal(shape), rng.uniform(0.5, 3.0))
    inside = noise > np.quantile(noise, rng.uniform(0.2, 0.9)) if seed else np.zeros(shape, bool)
    filled = ndimage.binary_fill_holes(inside)
    np.testing.assert_array_equal(_filled(inside), filled)
    labels, count = ndimage.label(filled & ~inside)
    small = np.bincount(labels.ravel(), minlength=count + 1) < 6
    small[0] = False
    np.testing.assert_array_equal(_fill_small_holes(inside, 6), inside | small[labels])
