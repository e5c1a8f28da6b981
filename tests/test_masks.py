"""Tests for engine.analysis.masks: pixel-centre masks from a band and partial volumes."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from skimage.measure import points_in_poly

from engine.analysis.contours import band_contours, signed_area
from engine.analysis.masks import mask_from_band, partial_volume


# --------------------------------------------------------------------------
# helpers


def disk(cr: float, cc: float, radius: float):
    return lambda r, c: np.hypot(r - cr, c - cc) - radius


def annulus(cr: float, cc: float, r_in: float, r_out: float):
    mid, half = 0.5 * (r_in + r_out), 0.5 * (r_out - r_in)
    return lambda r, c: np.abs(np.hypot(r - cr, c - cc) - mid) - half


def two_disks(r, c):
    return np.minimum(disk(18.2, 20.7, 9.4)(r, c), disk(45.1, 40.6, 12.3)(r, c))


def band_nodes(phi, shape: tuple[int, int], detail: int, half_width_nodes: float = 6.0, margin_px: int = 3):
    """Lattice nodes with |φ| < half_width_nodes·h over the image (plus a margin), shuffled.

    Built on the full lattice for the test only; the engine never does this.
    """
    lo = -margin_px * detail
    i, j = np.mgrid[lo : (shape[0] + margin_px) * detail, lo : (shape[1] + margin_px) * detail]
    values = phi(i / detail, j / detail)
    keep = np.abs(values) < half_width_nodes / detail
    idx = np.stack([i[keep], j[keep]], axis=1)
    perm = np.random.default_rng(detail).permutation(len(idx))
    return idx[perm], values[keep][perm]


def threshold(phi, shape: tuple[int, int]) -> np.ndarray:
    r, c = np.mgrid[0 : shape[0], 0 : shape[1]]
    return phi(r.astype(float), c.astype(float)) < 0


def clip_polygon(poly: np.ndarray, r0: float, r1: float, c0: float, c1: float) -> np.ndarray:
    """Sutherland–Hodgman clipping of a polygon to the box [r0, r1] x [c0, c1].

    Sutherland & Hodgman, "Reentrant polygon clipping", Commun. ACM 17(1)
    (1974) 32-42; exact in area for any simple polygon against a convex box.
    """
    out = [tuple(p) for p in poly]
    for axis, bound, keep_below in ((0, r0, False), (0, r1, True), (1, c0, False), (1, c1, True)):
        src, out = out, []
        if not src:
            break
        for k in range(len(src)):
            cur, prev = src[k], src[k - 1]
            cur_in = cur[axis] <= bound if keep_below else cur[axis] >= bound
            prev_in = prev[axis] <= bound if keep_below else prev[axis] >= bound
            if cur_in != prev_in:
                t = (bound - prev[axis]) / (cur[axis] - prev[axis])
                cross = [prev[0] + t * (cur[0] - prev[0]), prev[1] + t * (cur[1] - prev[1])]
                cross[axis] = bound
                out.append(tuple(cross))
            if cur_in:
                out.append(cur)
    return np.array(out, dtype=float).reshape(-1, 2)


def clipped_fractions(polys: list[np.ndarray], shape: tuple[int, int]) -> np.ndarray:
    """Per-pixel covered fraction by clipping every polygon to every pixel (slow, exact)."""
    frac = np.zeros(shape)
    for poly in polys:
        lo = np.maximum(np.floor(poly.min(axis=0) + 0.5).astype(int), 0)
        hi = np.minimum(np.ceil(poly.max(axis=0) - 0.5).astype(int), np.array(shape) - 1)
        for r in range(lo[0], hi[0] + 1):
            for c in range(lo[1], hi[1] + 1):
                piece = clip_polygon(poly, r - 0.5, r + 0.5, c - 0.5, c + 0.5)
                if len(piece) >= 3:
                    frac[r, c] += signed_area(piece)
    return frac


def regular_polygon(cr: float, cc: float, radius: float, n: int, phase: float = 0.1) -> np.ndarray:
    t = phase + 2 * np.pi * np.arange(n) / n
    return np.c_[cr + radius * np.cos(t), cc + radius * np.sin(t)]  # positive orientation


# --------------------------------------------------------------------------
# mask_from_band


@pytest.mark.parametrize("detail", [1, 2, 4])
@pytest.mark.parametrize(
    "name, phi",
    [
        ("disk", disk(31.3, 28.6, 17.2)),
        ("annulus", annulus(32.4, 30.9, 8.3, 21.7)),
        ("two disks", two_disks),
    ],
)
def test_mask_equals_threshold_of_analytic_shape(name, phi, detail):
    shape = (64, 61)
    idx, vals = band_nodes(phi, shape, detail)
    mask = mask_from_band(idx, vals, shape, detail=detail)
    assert mask.dtype == bool and mask.shape == shape
    # reference: the analytic φ thresholded at every pixel centre (φ < 0 inside)
    expected = threshold(phi, shape)
    np.testing.assert_array_equal(mask, expected)
    assert expected.sum() > 100 and (~expected).sum() > 100  # both sides present: the test can fail


@pytest.mark.parametrize("detail", [1, 4])
def test_mask_shapes_cut_by_the_image_border(detail):
    shape = (40, 50)
    # a disk sticking out of the top-left corner, and a big disk that contains the
    # bottom-right corner (its interior region touches the border yet is inside)
    phi = lambda r, c: np.minimum(disk(2.3, -3.1, 15.2)(r, c), disk(60.4, 71.8, 40.0)(r, c))  # noqa: E731
    idx, vals = band_nodes(phi, shape, detail)
    mask = mask_from_band(idx, vals, shape, detail=detail)
    expected = threshold(phi, shape)  # analytic threshold at pixel centres
    assert expected[-1, -1] and expected[0, 0]
    np.testing.assert_array_equal(mask, expected)


def test_mask_without_band_is_outside():
    assert not mask_from_band(np.zeros((0, 2), np.int64), np.zeros(0), (5, 6)).any()
    # band entirely off the image: the one region touches the border and sees no band pixel
    idx = np.array([[-10, -10], [-10, -9]])
    assert not mask_from_band(idx, np.array([-1.0, -1.0]), (5, 6)).any()


def test_mask_band_with_a_gap_warns():
    shape = (40, 40)
    phi = disk(20.2, 19.7, 10.4)
    idx, vals = band_nodes(phi, shape, 1, half_width_nodes=1.0)
    gap = (idx[:, 0] < 20) & (idx[:, 1] > 17) & (idx[:, 1] < 22)
    with pytest.warns(RuntimeWarning, match="separate"):
        mask_from_band(idx[~gap], vals[~gap], shape)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        np.testing.assert_array_equal(mask_from_band(idx, vals, shape), threshold(phi, shape))


@pytest.mark.parametrize(
    "args, kwargs, word",
    [
        ((np.zeros((2, 2), np.int64), np.zeros(2), (0, 5)), {}, "shape"),
        ((np.zeros((2, 2), np.int64), np.zeros(2), (5,)), {}, "shape"),
        ((np.zeros((2, 2), np.int64), np.zeros(2), (5.5, 5)), {}, "shape"),
        ((np.zeros((2, 2), np.int64), np.zeros(3), (5, 5)), {}, "values"),
        ((np.zeros((2, 2), float), np.zeros(2), (5, 5)), {}, "indices"),
        ((np.zeros((2, 2), np.int64), np.zeros(2), (5, 5)), {"detail": 3.0}, "detail"),
    ],
)
def test_mask_bad_input_names_the_argument(args, kwargs, word):
    with pytest.raises(ValueError, match=word):
        mask_from_band(*args, **kwargs)


# --------------------------------------------------------------------------
# partial_volume


def test_partial_volume_of_polygon_disk_matches_supersampling():
    poly = regular_polygon(15.37, 14.81, 10.3, 48)
    shape = (31, 30)
    frac = partial_volume([poly], shape)
    # reference 1: 64 x 64 midpoint supersampling of every pixel with
    # skimage.measure.points_in_poly. For each of the 64 sub-columns the count of
    # sub-samples below one straight edge is off by at most half a sub-sample, so
    # one edge crossing a pixel costs ≤ 64 · 0.5 / 64² = 1/128; allow two edges
    # (a polygon vertex inside the pixel) on top of 1/64².
    s = 64
    sub = (np.arange(s) + 0.5) / s - 0.5
    rr, cc = np.mgrid[0 : shape[0], 0 : shape[1]]
    pts = np.stack(
        [
            (rr[:, :, None, None] + sub[:, None]).repeat(s, axis=3),
            (cc[:, :, None, None] + sub[None, :]).repeat(s, axis=2),
        ],
        axis=-1,
    ).reshape(-1, 2)
    sampled = points_in_poly(pts, poly).reshape(shape[0], shape[1], s * s).mean(axis=2)
    tol = 1 / s**2 + 2 / (2 * s)
    assert np.max(np.abs(frac - sampled)) <= tol
    assert np.mean(np.abs(frac - sampled)) < 1e-3
    # reference 2: exact per-pixel clipping (Sutherland–Hodgman), independent algorithm
    np.testing.assert_allclose(frac, clipped_fractions([poly], shape), rtol=0, atol=1e-12)
    # total = shoelace area of the polygon
    assert frac.sum() == pytest.approx(signed_area(poly), rel=1e-9)
    # pixels well inside are exactly 1, well outside exactly 0
    assert frac[15, 15] == 1.0 and frac[0, 0] == 0.0
    assert np.all((frac >= 0) & (frac <= 1))


def test_partial_volume_of_shape_partly_outside_the_image():
    polys = [regular_polygon(3.2, -2.7, 9.9, 31), regular_polygon(24.4, 27.9, 8.6, 29, phase=0.7)]
    shape = (30, 30)
    frac = partial_volume(polys, shape)
    # exact per-pixel clipping (Sutherland–Hodgman) as the reference
    np.testing.assert_allclose(frac, clipped_fractions(polys, shape), rtol=0, atol=1e-12)
    # and the total equals the polygon clipped to the image box
    inside_image = sum(signed_area(clip_polygon(p, -0.5, shape[0] - 0.5, -0.5, shape[1] - 0.5)) for p in polys)
    assert frac.sum() == pytest.approx(inside_image, rel=1e-9)


def test_partial_volume_of_pixel_aligned_squares_is_exact():
    # corners on pixel edges: pixels 2..4 x 2..4 fully covered
    sq = np.array([[1.5, 1.5], [4.5, 1.5], [4.5, 4.5], [1.5, 4.5]])
    frac = partial_volume([sq], (7, 7))
    expected = np.zeros((7, 7))
    expected[2:5, 2:5] = 1.0
    np.testing.assert_array_equal(frac, expected)
    # columns cut at pixel centres: half pixels on both sides (hand-computed)
    half = np.array([[1.5, 2.0], [4.5, 2.0], [4.5, 4.0], [1.5, 4.0]])
    expected = np.zeros((7, 7))
    expected[2:5, 2] = expected[2:5, 4] = 0.5
    expected[2:5, 3] = 1.0
    np.testing.assert_array_equal(partial_volume([half], (7, 7)), expected)
    # a quarter pixel at a corner
    quarter = np.array([[2.0, 2.0], [3.5, 2.0], [3.5, 3.5], [2.0, 3.5]])
    got = partial_volume([quarter], (5, 5))
    assert got[2, 2] == 0.25 and got[3, 3] == 1.0 and got[2, 3] == 0.5 and got[3, 2] == 0.5


def test_hole_subtracts():
    outer = np.array([[0.5, 0.5], [8.5, 0.5], [8.5, 8.5], [0.5, 8.5]])  # positive
    hole = np.array([[3.0, 3.0], [3.0, 6.0], [6.0, 6.0], [6.0, 3.0]])  # negative
    assert signed_area(outer) > 0 > signed_area(hole)
    frac = partial_volume([outer, hole], (10, 10))
    expected = np.zeros((10, 10))
    expected[1:9, 1:9] = 1.0
    expected[4:6, 4:6] = 0.0  # hand-computed: the hole [3,6]² covers these fully,
    expected[3, 4:6] = expected[6, 4:6] = expected[4:6, 3] = expected[4:6, 6] = 0.5  # its edges halve these,
    expected[3, 3] = expected[3, 6] = expected[6, 3] = expected[6, 6] = 0.75  # and its corners quarter these
    np.testing.assert_array_equal(frac, expected)
    assert frac.sum() == pytest.approx(64.0 - 9.0, rel=1e-12)  # shoelace areas


def test_partial_volume_of_band_contours_of_annulus():
    phi = annulus(32.4, 30.9, 8.3, 21.7)
    idx, vals = band_nodes(phi, (64, 64), 1)
    polys = band_contours(idx, vals)
    frac = partial_volume(polys, (64, 64))
    np.testing.assert_allclose(frac, clipped_fractions(polys, (64, 64)), rtol=0, atol=1e-12)  # Sutherland–Hodgman
    # analytic ring area π (r_out² − r_in²), 0.5 % for the polygon of marching squares
    assert frac.sum() == pytest.approx(np.pi * (21.7**2 - 8.3**2), rel=5e-3)


def test_wrong_orientation_or_bad_input_raise():
    outer = np.array([[0.5, 0.5], [8.5, 0.5], [8.5, 8.5], [0.5, 8.5]])
    hole_wrong = np.array([[3.0, 3.0], [6.0, 3.0], [6.0, 6.0], [3.0, 6.0]])  # positive: winding 2 inside
    with pytest.raises(ValueError, match="orient"):
        partial_volume([outer, hole_wrong], (10, 10))
    with pytest.raises(ValueError, match="orient"):
        partial_volume([outer[::-1]], (10, 10))
    with pytest.raises(ValueError, match=r"polylines\[0\]"):
        partial_volume([np.zeros((4, 3))], (10, 10))
    with pytest.raises(ValueError, match=r"polylines\[1\]"):
        partial_volume([outer, np.array([[0.0, np.nan], [1.0, 1.0], [2.0, 0.0]])], (10, 10))
    with pytest.raises(ValueError, match="shape"):
        partial_volume([outer], (10, -1))
    assert not partial_volume([], (3, 4)).any()
