"""Averaging along the outline (engine.numerics.outline_averaging) against the Gaussian it stands for."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial import cKDTree

from engine.numerics.outline_averaging import average_along_outline
from partial_volume import partial_volume


def ring_layer(radius: float, width: float = 1.2, centre: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Lattice nodes (spacing 1) within ``width`` of a circle: positions and outward normals."""
    n = int(radius + width + 2)
    r, c = np.mgrid[-n:n + 1, -n:n + 1].astype(float)
    keep = np.abs(np.hypot(r, c) - radius) <= width
    pos = np.column_stack([r[keep], c[keep]])
    normals = pos / np.linalg.norm(pos, axis=1)[:, None]
    return pos + centre, normals


def pairs_of(pos: np.ndarray) -> np.ndarray:
    return cKDTree(pos).query_pairs(1.5, output_type="ndarray")


@pytest.mark.parametrize("modes", [3, 6, 10])
@pytest.mark.parametrize("sigma", [2.0, 4.0, 8.0])
def test_modes_on_a_circle_are_damped_as_by_a_gaussian_in_arc_length(modes, sigma):
    # A Gaussian of σ in arc length multiplies cos(mθ) on a circle of radius R by
    # exp(−m²σ²/(2R²)) (the Fourier transform of a Gaussian; common practice).
    radius = 40.0
    pos, normals = ring_layer(radius)
    theta = np.arctan2(pos[:, 1], pos[:, 0])
    values = np.cos(modes * theta)
    out = average_along_outline(values, pos, pairs_of(pos), normals, sigma)
    def gaussian_gain(s: float) -> float:
        return float(np.exp(-(modes * s / radius) ** 2 / 2.0))

    gain = float(np.dot(out, values) / np.dot(values, values))
    # The walk's spread along a lattice outline depends a little on the
    # outline's direction (neighbourhoods differ; measured on this ring for
    # σ = 8: 7.2 where the outline runs along an axis, 8.0 elsewhere), so the
    # gain lies between the Gaussian's for 0.88 σ and for σ, within 0.01.
    assert gaussian_gain(1.0 * sigma) - 0.01 <= gain <= gaussian_gain(0.88 * sigma) + 0.01, (
        gain, gaussian_gain(sigma))
    # and the result is that mode, up to the same direction dependence
    residual = out - gain * values
    assert np.sqrt(np.mean(residual**2)) < (gaussian_gain(0.88 * sigma) - gaussian_gain(sigma)) + 0.02


def test_constants_are_kept_and_zero_sigma_is_the_identity():
    pos, normals = ring_layer(25.0)
    pairs = pairs_of(pos)
    ones = np.full(len(pos), 3.5)
    np.testing.assert_allclose(average_along_outline(ones, pos, pairs, normals, 5.0), 3.5, rtol=1e-12)
    values = np.random.default_rng(1).standard_normal((len(pos), 2))
    np.testing.assert_array_equal(average_along_outline(values, pos, pairs, normals, 0.0), values)


def test_one_column_and_many_give_the_same_average():
    # a few walk steps run as weighted sums, more as a sparse matrix: same numbers
    pos, normals = ring_layer(30.0)
    pairs = pairs_of(pos)
    values = np.random.default_rng(2).standard_normal((len(pos), 12))
    many = average_along_outline(values, pos, pairs, normals, 1.5)
    one = average_along_outline(values[:, 3], pos, pairs, normals, 1.5)
    np.testing.assert_allclose(one, many[:, 3], rtol=0, atol=1e-12)


def test_noise_falls_as_the_square_root_of_the_averaging_length():
    # Independent noise averaged by a Gaussian of σ along a curve keeps a
    # variance of 1 / (2 √π σ λ) of its own, λ nodes per unit length (common practice).
    pos, normals = ring_layer(60.0)
    pairs = pairs_of(pos)
    rng = np.random.default_rng(4)
    per_length = len(pos) / (2 * np.pi * 60.0)
    for sigma in (3.0, 6.0):
        noise = rng.standard_normal((len(pos), 40))
        out = average_along_outline(noise, pos, pairs, normals, sigma)
        expected = 1.0 / np.sqrt(2 * np.sqrt(np.pi) * sigma * per_length)
        assert float(np.std(out)) == pytest.approx(expected, rel=0.25)


def test_facing_sides_of_a_narrow_gap_are_not_mixed():
    # Two parallel outlines two spacings apart with opposite normals: the
    # lattice links them, their normals do not; each side keeps its value.
    x = np.arange(-30.0, 31.0)
    side_a = np.column_stack([np.zeros_like(x), x])
    side_b = np.column_stack([np.full_like(x, 1.0), x])
    pos = np.vstack([side_a, side_b])
    normals = np.vstack([np.tile([-1.0, 0.0], (len(x), 1)), np.tile([1.0, 0.0], (len(x), 1))])
    values = np.r_[np.zeros(len(x)), np.ones(len(x))]
    out = average_along_outline(values, pos, pairs_of(pos), normals, 6.0)
    np.testing.assert_allclose(out, values, atol=1e-12)
    # with the normals ignored (all alike) the sides would mix: the check can fail
    mixed = average_along_outline(values, pos, pairs_of(pos), np.tile([1.0, 0.0], (len(pos), 1)), 6.0)
    assert np.max(np.abs(mixed - values)) > 0.3


def test_a_sphere_in_three_dimensions():
    # The same Gaussian on a surface: the degree-1 harmonic z/R on a sphere of
    # radius R is damped by about exp(−2σ²/(2R²)) (eigenvalue l(l+1)/R² of the
    # Laplace–Beltrami operator, heat kernel exp(−t l(l+1)/R²) with t = σ²/2;
    # common practice, from memory).
    radius, sigma = 14.0, 3.0
    n = int(radius + 3)
    z, r, c = np.mgrid[-n:n + 1, -n:n + 1, -n:n + 1].astype(float)
    keep = np.abs(np.sqrt(z**2 + r**2 + c**2) - radius) <= 1.2
    pos = np.column_stack([z[keep], r[keep], c[keep]])
    normals = pos / np.linalg.norm(pos, axis=1)[:, None]
    values = normals[:, 0]
    out = average_along_outline(values, pos, cKDTree(pos).query_pairs(1.5, output_type="ndarray"), normals, sigma)
    gain = float(np.dot(out, values) / np.dot(values, values))
    # the walk's variance is σ² per tangential axis pair: t = σ² / (d − 1) in the heat kernel
    expected = np.exp(-2.0 * sigma**2 / (2.0 * radius**2))
    assert gain == pytest.approx(expected, abs=0.03), (gain, expected)


# ---------------------------------------------------------------- on a front


DISK_CENTRE = np.array([40.3, 41.6])
DISK_RADIUS = 25.0


def _disk_radial_errors(noise: float, averaging: float) -> np.ndarray:
    from engine.segment import segment

    image, _ = partial_volume((84, 84), lambda r, c: np.hypot(r - DISK_CENTRE[0], c - DISK_CENTRE[1]) < DISK_RADIUS)
    image = image + noise * np.random.default_rng(11).standard_normal(image.shape)
    res = segment(image, [(40, 41, 8)], model="region", outline_averaging=averaging)
    assert res.converged
    assert res.params["outline_averaging"] == averaging
    points = np.concatenate(res.contours)
    return np.hypot(*(points - DISK_CENTRE).T) - DISK_RADIUS


def test_averaging_pools_noise_without_moving_the_outline():
    # A partial-volume disk, contrast 1, noise σ = 0.25 (CNR 4); the radial
    # error against the exact circle (analytic). Measured: without averaging
    # (the region speed then reads the 1 mm-smoothed image) RMS 0.142 px,
    # mean −0.021 px (a Gaussian blur moves a curved edge's mid-level
    # crossing inward by about σ²/(2R) = 0.02 px); at 1 mm 0.124 / −0.004;
    # at 8 mm 0.077 / +0.001.
    plain = _disk_radial_errors(0.25, 0.0)
    default = _disk_radial_errors(0.25, 1.0)
    pooled = _disk_radial_errors(0.25, 8.0)
    assert np.sqrt(np.mean(pooled**2)) <= 0.65 * np.sqrt(np.mean(plain**2))
    assert np.sqrt(np.mean(default**2)) < np.sqrt(np.mean(plain**2))
    for errors in (default, pooled):
        assert abs(float(np.mean(errors))) < 0.01  # no shrinking or growing: the average is along the outline


def test_averaging_keeps_a_noise_free_outline_exact():
    # The noise-free disk's outline within 0.02 px RMS of the circle (the
    # contour accuracy target is 0.05 px; measured 0.010 px at 8 mm).
    errors = _disk_radial_errors(0.0, 8.0)
    assert np.sqrt(np.mean(errors**2)) < 0.02
    assert abs(float(np.mean(errors))) < 0.005


def test_the_price_is_detail_shorter_than_the_averaging():
    # A 40 px disk with a 12-lobed ripple of ±3 px (lobes 21 px apart along
    # the outline): the default (1 mm) follows it to 0.09 px RMS, an average
    # over σ = 8 mm smooths the lobes away (1.3 px RMS). Exact curve: r(θ) =
    # 40 + 3 cos 12θ, distance to a dense sampling of it.
    from engine.segment import segment

    c = 80.0

    def level(r, col):
        return np.hypot(r - c, col - c) - (40.0 + 3.0 * np.cos(12 * np.arctan2(r - c, col - c)))

    image = 0.6 - 0.4 * partial_volume((160, 160), lambda r, col: level(r, col) < 0)[0]
    theta = np.linspace(0, 2 * np.pi, 20000, endpoint=False)
    rho = 40.0 + 3.0 * np.cos(12 * theta)
    tree = cKDTree(np.column_stack([c + rho * np.sin(theta), c + rho * np.cos(theta)]))

    def rms(averaging: float) -> float:
        res = segment(image, [(80, 80, 10)], model="region", outline_averaging=averaging)
        d, _ = tree.query(np.concatenate(res.contours))
        return float(np.sqrt(np.mean(d**2)))

    assert rms(1.0) < 0.12
    assert rms(8.0) > 0.5


def test_the_setting_is_checked():
    from engine.front import FrontParams

    for bad in (-1.0, float("nan"), float("inf")):
        with pytest.raises(ValueError, match="outline_averaging"):
            FrontParams(outline_averaging=bad)
