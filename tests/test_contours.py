"""Tests for engine.analysis.contours: marching squares on band cells.

The reference for every polyline is ``skimage.measure.find_contours`` (level 0)
run on the full grid of the same samples; the band keeps only the nodes with
|φ| < 4 px. scikit-image returns closed contours with the first vertex
repeated at the end; ours do not repeat it, so closed ones are compared up to
a cyclic shift (orientation must agree, no reversal is allowed).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy.ndimage import binary_dilation
from skimage.filters import gaussian
from skimage.measure import find_contours

from engine.analysis.contours import (
    BandCutWarning,
    band_contour_set,
    band_contours,
    orient,
    polyline_length,
    signed_area,
)

R = 20.3


def lattice_samples(phi, n_px: int, detail: int = 1) -> np.ndarray:
    """φ on the full lattice: node (i, j) at pixel (i / detail, j / detail)."""
    i, j = np.mgrid[0 : n_px * detail, 0 : n_px * detail]
    return phi(i / detail, j / detail)


def band_of(full: np.ndarray, width_px: float = 4.0, *, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Band nodes |φ| < width_px of a full lattice sample, in shuffled order."""
    keep = np.abs(full) < width_px
    idx = np.argwhere(keep)
    vals = full[keep]
    perm = np.random.default_rng(seed).permutation(len(idx))
    return idx[perm], vals[perm]


def circle(cr: float, cc: float, radius: float):
    return lambda r, c: np.hypot(r - cr, c - cc) - radius


def assert_same_polylines(ours: list[np.ndarray], closed: np.ndarray, reference: list[np.ndarray], tol: float = 1e-12) -> None:
    """Every polyline equals one reference contour (cyclic shift for closed ones)."""
    assert len(ours) == len(reference)
    unused = list(range(len(reference)))
    for poly, is_closed in zip(ours, closed):
        for k in unused:
            q = reference[k]
            q_closed = bool(np.all(q[0] == q[-1])) and len(q) > 2
            if q_closed != bool(is_closed):
                continue
            if q_closed:
                q = q[:-1]
            if len(q) != len(poly):
                continue
            if q_closed:
                shift = int(np.argmin(np.sum((q - poly[0]) ** 2, axis=1)))
                q = np.roll(q, -shift, axis=0)
            if np.max(np.abs(q - poly)) <= tol:
                unused.remove(k)
                break
        else:
            raise AssertionError(f"no reference contour matches a polyline of {len(poly)} vertices")


def test_circle_matches_skimage_and_is_positive():
    full = lattice_samples(circle(29.6, 30.2, R), 60)
    idx, vals = band_of(full)
    result = band_contour_set(idx, vals)
    assert result.closed.tolist() == [True]
    # reference: scikit-image find_contours on the full grid
    assert_same_polylines(result.polylines, result.closed, find_contours(full, 0.0))
    # outer boundary: positive shoelace area, close to the disk area π R²
    area = signed_area(result.polylines[0])
    assert area > 0
    assert abs(area - np.pi * R**2) < 0.01 * np.pi * R**2


def test_annulus_hole_is_negative_and_matches_skimage():
    ring = lambda r, c: np.abs(np.hypot(r - 31.4, c - 29.8) - 16.0) - 6.2  # noqa: E731
    full = lattice_samples(ring, 64)
    idx, vals = band_of(full, seed=1)
    result = band_contour_set(idx, vals)
    assert result.closed.tolist() == [True, True]
    assert_same_polylines(result.polylines, result.closed, find_contours(full, 0.0))  # scikit-image reference
    areas = sorted(signed_area(p) for p in result.polylines)
    # outer circle radius 22.2 positive, inner radius 9.8 negative (analytic areas, 1 %)
    assert areas[0] < 0 < areas[1]
    assert abs(areas[1] - np.pi * 22.2**2) < 0.01 * np.pi * 22.2**2
    assert abs(-areas[0] - np.pi * 9.8**2) < 0.01 * np.pi * 9.8**2


def test_two_disjoint_disks_from_two_band_pieces():
    phi = lambda r, c: np.minimum(circle(20.2, 21.7, 11.1)(r, c), circle(52.6, 55.3, 14.4)(r, c))  # noqa: E731
    full = lattice_samples(phi, 75)
    idx, vals = band_of(full, seed=2)
    result = band_contour_set(idx, vals)
    assert result.closed.tolist() == [True, True]
    assert all(signed_area(p) > 0 for p in result.polylines)
    assert_same_polylines(result.polylines, result.closed, find_contours(full, 0.0))  # scikit-image reference


def _saddle_field(b: float):
    """φ = −xy + b + (x² + y²)²/400 with (x, y) = (r − 50.5, c − 50.5): two lobes
    (quadrants I and III) that meet at the saddle of the cell (50, 50)-(51, 51);
    the corner mean there is b + 1/1600, so b < 0 joins the lobes."""

    def phi(r, c):
        x, y = r - 50.5, c - 50.5
        return -x * y + b + (x**2 + y**2) ** 2 / 400.0

    return phi


def near_sign_change(full: np.ndarray, reach: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """Band of a non-distance function: nodes within `reach` nodes of a sign change."""
    out = full > 0
    change = np.zeros_like(out)
    change[:-1] |= out[:-1] != out[1:]
    change[1:] |= out[:-1] != out[1:]
    change[:, :-1] |= out[:, :-1] != out[:, 1:]
    change[:, 1:] |= out[:, :-1] != out[:, 1:]
    keep = binary_dilation(change, iterations=reach)
    return np.argwhere(keep), full[keep]


@pytest.mark.parametrize("b, joined", [(-0.05, True), (0.05, False)])
def test_saddle_split_by_corner_mean(b, joined):
    full = lattice_samples(_saddle_field(b), 100)
    out = full > 0
    saddle = (out[:-1, :-1] == out[1:, 1:]) & (out[:-1, 1:] == out[1:, :-1]) & (out[:-1, :-1] != out[:-1, 1:])
    assert np.argwhere(saddle).tolist() == [[50, 50]]  # the configuration really has one saddle cell
    assert (full[50:52, 50:52].mean() <= 0) == joined
    idx, vals = near_sign_change(full)
    result = band_contour_set(idx, vals)
    assert result.closed.all()
    assert len(result.polylines) == (1 if joined else 2)
    # scikit-image's fully_connected="low" joins the low (inside) corners, "high" separates them
    reference = find_contours(full, 0.0, fully_connected="low" if joined else "high")
    assert_same_polylines(result.polylines, result.closed, reference)
    assert all(signed_area(p) > 0 for p in result.polylines)


@pytest.mark.parametrize("rule, connected", [("inside", "low"), ("outside", "high")])
def test_fixed_saddle_rules_match_skimage_on_random_field(rule, connected):
    # a smooth random field with many saddle cells and contours that run off the grid
    rng = np.random.default_rng(3)
    field = gaussian(rng.standard_normal((60, 60)), 1.0)
    field -= field.mean()
    out = field > 0
    saddle = (out[:-1, :-1] == out[1:, 1:]) & (out[:-1, 1:] == out[1:, :-1]) & (out[:-1, :-1] != out[:-1, 1:])
    assert saddle.sum() >= 5
    idx = np.argwhere(np.ones(field.shape, bool))
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # band_contour_set itself never warns
        result = band_contour_set(idx, field.ravel(), saddle=rule)
    assert (~result.closed).sum() > 0  # open polylines where contours leave the grid
    # scikit-image find_contours with the same fixed saddle rule, open contours included
    assert_same_polylines(result.polylines, result.closed, find_contours(field, 0.0, fully_connected=connected))


@pytest.mark.parametrize("detail", [2, 4])
def test_detail_gives_pixel_coordinates(detail):
    c0 = (29.6, 30.2)
    full = lattice_samples(circle(*c0, R), 60, detail)
    idx, vals = band_of(full, 4.0, seed=detail)
    result = band_contour_set(idx, vals, detail=detail)
    # scikit-image on the lattice-resolution grid, rescaled to pixels
    reference = [q / detail for q in find_contours(full, 0.0)]
    assert_same_polylines(result.polylines, result.closed, reference)
    poly = result.polylines[0]
    err = np.abs(np.hypot(poly[:, 0] - c0[0], poly[:, 1] - c0[1]) - R)
    # h = 1/detail px: the O(h²/(8R)) bound scales with detail⁻²
    assert err.max() <= 0.01 / detail**2


def test_circle_vertex_error_within_h2_over_8R():
    # Linear interpolation of f along an edge of length h errs by at most
    # h²/8 · max|f''| (common numerical analysis); for the signed distance of
    # a circle f'' ≤ 1/R near the curve, so vertices lie within about
    # h²/(8R) = 0.0062 px of the circle for R = 20.3, h = 1 px.
    rng = np.random.default_rng(7)
    worst = 0.0
    for _ in range(10):
        c0 = 30.0 + rng.random(2)
        full = lattice_samples(circle(*c0, R), 60)
        idx, vals = band_of(full)
        (poly,) = band_contours(idx, vals)
        err = np.abs(np.hypot(poly[:, 0] - c0[0], poly[:, 1] - c0[1]) - R)
        worst = max(worst, err.max())
    assert worst <= 0.01
    assert worst <= 1.05 / (8 * R)


def test_long_contour_links_in_order():
    # 1 600 vertices: exercises many pointer-jumping passes
    c0 = (210.3, 205.8)
    full = lattice_samples(circle(*c0, 200.0), 420)
    idx, vals = band_of(full, 2.0, seed=5)
    result = band_contour_set(idx, vals)
    assert len(result.polylines[0]) > 1500
    assert_same_polylines(result.polylines, result.closed, find_contours(full, 0.0))  # scikit-image reference


def test_input_order_and_band_holes_do_not_matter():
    full = lattice_samples(circle(29.6, 30.2, R), 60)
    idx, vals = band_of(full, seed=0)
    base = band_contours(idx, vals)
    # shuffled differently, and with holes punched where 2.5 < |φ| < 3 (no cell there meets the zero set)
    keep = ~((np.abs(vals) > 2.5) & (np.abs(vals) < 3.0))
    perm = np.random.default_rng(11).permutation(np.count_nonzero(keep))
    other = band_contours(idx[keep][perm], vals[keep][perm])
    assert len(other) == len(base) == 1
    np.testing.assert_array_equal(other[0], base[0])


def test_band_cut_gives_flagged_open_polyline():
    full = lattice_samples(circle(29.6, 30.2, R), 60)
    idx, vals = band_of(full)
    cut = (idx[:, 1] >= 28) & (idx[:, 1] <= 31) & (idx[:, 0] < 30)  # a gap across the top of the circle
    result = band_contour_set(idx[~cut], vals[~cut])
    assert result.closed.tolist() == [False]
    (closed_ref,) = band_contours(idx, vals)
    open_poly = result.polylines[0]
    # the open polyline is a contiguous, equally oriented run of the closed one
    start = int(np.argmin(np.sum((closed_ref - open_poly[0]) ** 2, axis=1)))
    run = np.roll(closed_ref, -start, axis=0)[: len(open_poly)]
    np.testing.assert_array_equal(run, open_poly)
    assert len(open_poly) < len(closed_ref)
    with pytest.warns(BandCutWarning):
        polylines = band_contours(idx[~cut], vals[~cut])
    assert len(polylines) == 1


def test_exact_zeros_at_nodes():
    # φ = |r - 20| + |c - 20| - 10 is linear on every cell, so the contour is the
    # exact diamond (area 2·10² = 200) and passes through nodes where φ = 0
    full = lattice_samples(lambda r, c: np.abs(r - 20) + np.abs(c - 20) - 10, 40)
    idx, vals = band_of(full, 3.0)
    (poly,) = band_contours(idx, vals)
    assert np.all(np.any(poly != np.roll(poly, -1, axis=0), axis=1))  # no repeated vertex
    assert signed_area(poly) == pytest.approx(200.0, abs=1e-12)
    assert np.allclose(np.abs(poly[:, 0] - 20) + np.abs(poly[:, 1] - 20), 10.0, atol=1e-12)
    # same vertex set as scikit-image find_contours (which merges coincident points)
    (ref,) = find_contours(full, 0.0)
    assert sorted(map(tuple, poly)) == sorted(map(tuple, ref[:-1]))


def test_no_crossing_and_empty_band():
    full = lattice_samples(circle(10.0, 10.0, 3.0), 20) + 10.0  # all positive
    idx, vals = band_of(full, 100.0)
    result = band_contour_set(idx, vals)
    assert result.polylines == [] and result.closed.shape == (0,)
    assert band_contours(np.zeros((0, 2), np.int64), np.zeros(0)) == []


def test_regular_polygon_area_and_length():
    # regular n-gon of circumradius ρ: area (n/2) ρ² sin(2π/n), perimeter 2nρ sin(π/n) (elementary geometry)
    n, rho = 37, 7.5
    t = 2 * np.pi * np.arange(n) / n
    poly = np.c_[3.0 + rho * np.cos(t), -2.0 + rho * np.sin(t)]  # counter-clockwise in (row, col) as (x, y)
    assert signed_area(poly) == pytest.approx(0.5 * n * rho**2 * np.sin(2 * np.pi / n), rel=1e-13)
    assert signed_area(poly[::-1]) == pytest.approx(-0.5 * n * rho**2 * np.sin(2 * np.pi / n), rel=1e-13)
    assert polyline_length(poly) == pytest.approx(2 * n * rho * np.sin(np.pi / n), rel=1e-13)
    assert polyline_length(poly, closed=False) == pytest.approx(2 * (n - 1) * rho * np.sin(np.pi / n), rel=1e-13)
    # a repeated closing vertex changes neither
    closed_copy = np.vstack([poly, poly[:1]])
    assert signed_area(closed_copy) == pytest.approx(signed_area(poly), rel=1e-13)
    assert polyline_length(closed_copy) == pytest.approx(polyline_length(poly), rel=1e-13)
    # unit square (0,0) → (1,0) → (1,1) → (0,1): area +1 by the shoelace formula
    assert signed_area([[0, 0], [1, 0], [1, 1], [0, 1]]) == 1.0


def test_orient_by_nesting():
    def square(r0, c0, size, positive):
        sq = np.array([[r0, c0], [r0 + size, c0], [r0 + size, c0 + size], [r0, c0 + size]], float)
        return sq if positive else sq[::-1]

    outer = square(0, 0, 30, False)  # given the wrong way round
    hole = square(5, 5, 20, True)  # wrong way round too
    island = square(10, 10, 5, True)  # right
    apart = square(40, 40, 3, False)  # wrong
    fixed = orient([outer, hole, island, apart])
    signs = [np.sign(signed_area(p)) for p in fixed]
    assert signs == [1, -1, 1, 1]
    np.testing.assert_array_equal(fixed[2], island)


@pytest.mark.parametrize(
    "kwargs, word",
    [
        (dict(indices=np.zeros((3, 3), np.int64), values=np.zeros(3)), "indices"),
        (dict(indices=np.zeros((3, 2)), values=np.zeros(3)), "indices"),
        (dict(indices=np.array([[0, 0], [0, 1], [0, 0]]), values=np.zeros(3)), "indices"),
        (dict(indices=np.array([[0, 0], [0, 1]]), values=np.zeros(3)), "values"),
        (dict(indices=np.array([[0, 0], [0, 1]]), values=np.array([0.0, np.nan])), "values"),
        (dict(indices=np.array([[0, 0], [0, 1]]), values=np.zeros(2), detail=0), "detail"),
        (dict(indices=np.array([[0, 0], [0, 1]]), values=np.zeros(2), detail=1.5), "detail"),
        (dict(indices=np.array([[0, 0], [0, 1]]), values=np.zeros(2), saddle="centre"), "saddle"),
    ],
)
def test_bad_input_names_the_argument(kwargs, word):
    with pytest.raises(ValueError, match=word):
        band_contour_set(**kwargs)


def test_bad_polyline_names_the_argument():
    with pytest.raises(ValueError, match="polyline"):
        signed_area(np.zeros((4, 3)))
    with pytest.raises(ValueError, match="polyline"):
        polyline_length([[0.0, 0.0], [np.inf, 1.0]])
    with pytest.raises(ValueError, match=r"polylines\[1\]"):
        orient([np.zeros((3, 2)), np.zeros(5)])


@pytest.mark.parametrize("count", [300, 1200])
def test_average_along_a_circle_damps_each_mode_as_a_gaussian(count) -> None:
    # A Gaussian of σ in arc length multiplies the mode cos(mθ) on a circle of radius R by
    # exp(−m²σ²/(2R²)) (the Fourier transform of a Gaussian); vertices unevenly spaced
    # (±30 % jitter) must not bias it.
    from engine.analysis.contours import average_along_polyline

    rng = np.random.default_rng(11)
    radius, sigma = 20.0, 1.5
    theta = (np.arange(count) + rng.uniform(-0.3, 0.3, count)) * 2 * np.pi / count
    circle = np.c_[radius * np.cos(theta), radius * np.sin(theta)]
    for m in (1, 4, 9):
        out = average_along_polyline(np.cos(m * theta), circle, sigma)
        expected = np.cos(m * theta) * np.exp(-0.5 * (m * sigma / radius) ** 2)
        np.testing.assert_allclose(out, expected, atol=2e-3)
    constant = average_along_polyline(np.full(count, 0.05), circle, sigma)
    np.testing.assert_allclose(constant, 0.05, rtol=1e-12)
    # a closed polyline given with its first vertex repeated at the end: the same values, the end repeated
    closed = average_along_polyline(np.append(np.cos(4 * theta), 1.0), np.vstack([circle, circle[:1]]), sigma)
    np.testing.assert_allclose(closed[:-1], average_along_polyline(np.cos(4 * theta), circle, sigma), atol=1e-12)
    assert closed[-1] == closed[0]


def test_average_along_an_open_line_and_bad_input() -> None:
    from engine.analysis.contours import average_along_polyline

    x = np.linspace(0.0, 30.0, 121)
    line = np.c_[x, 0.5 * x]
    ramp = 2.0 * x + 1.0  # a linear function keeps its value away from the ends
    out = average_along_polyline(ramp, line, 2.0, closed=False)
    inner = (x > 10) & (x < 20)
    np.testing.assert_allclose(out[inner], ramp[inner], rtol=1e-9)
    assert out[0] > ramp[0] and out[-1] < ramp[-1]  # one-sided at the ends
    np.testing.assert_array_equal(average_along_polyline(ramp, line, 0.0, closed=False), ramp)
    with pytest.raises(ValueError, match="one entry per vertex"):
        average_along_polyline(ramp[:-1], line, 1.0)
    with pytest.raises(ValueError, match="sigma"):
        average_along_polyline(ramp, line, -1.0)
