"""Area of an outline cut by the image's border (:func:`engine.analysis.clipped_area.area_in_image`).

Reference: the exact area of a disk (or a ring) within the image's extent
[−½, rows − ½] × [−½, cols − ½], integrated numerically over its chords with
``scipy.integrate.quad``. The contours come from marching squares on the
analytic signed distance at every pixel centre (Lorensen & Cline 1987), so
the error left is the polygon's O(h²κ) and the half-pixel rim taken straight
across: below a pixel² almost always.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate

from engine.analysis.clipped_area import area_in_image
from engine.analysis.contours import band_contour_set

ROWS, COLS = 60, 80
INDICES = np.stack([a.ravel() for a in np.indices((ROWS, COLS))], axis=1)


def disk_in_image(centre, radius):
    """Exact area (px²) of the disk within the image's extent."""
    lo_r, hi_r, lo_c, hi_c = -0.5, ROWS - 0.5, -0.5, COLS - 0.5

    def chord(x):
        h = np.sqrt(max(radius**2 - (x - centre[0]) ** 2, 0.0))
        return max(min(centre[1] + h, hi_c) - max(centre[1] - h, lo_c), 0.0)

    a, b = max(lo_r, centre[0] - radius), min(hi_r, centre[0] + radius)
    if a >= b:
        return 0.0
    kinks = [centre[0]]  # where the chord meets a side of the image: the integrand's corners
    for edge in (lo_c, hi_c):
        gap = radius**2 - (edge - centre[1]) ** 2
        if gap > 0:
            kinks += [centre[0] - np.sqrt(gap), centre[0] + np.sqrt(gap)]
    inner = sorted(k for k in kinks if a < k < b)
    return integrate.quad(chord, a, b, limit=400, points=inner or None, epsabs=1e-9)[0]


def area_of(phi, spacing=(1.0, 1.0)):
    found = band_contour_set(INDICES, phi)
    inside = (phi < 0).reshape(ROWS, COLS)
    border = np.concatenate([inside[0], inside[-1], inside[:, 0], inside[:, -1]])
    return area_in_image(found.polylines, found.closed, (ROWS, COLS), spacing, border_inside=bool(border.all()))


def test_disks_cut_by_the_border_seeded_family():
    rng = np.random.default_rng(2024)
    errors = []
    for _ in range(150):
        radius = rng.uniform(5.0, 40.0)
        centre = np.array([rng.uniform(-0.8 * radius, ROWS + 0.8 * radius),
                           rng.uniform(-0.8 * radius, COLS + 0.8 * radius)])
        phi = np.hypot(INDICES[:, 0] - centre[0], INDICES[:, 1] - centre[1]) - radius
        if not np.any(phi < 0):
            continue
        errors.append(area_of(phi) - disk_in_image(centre, radius))
    errors = np.abs(errors)
    assert len(errors) > 100
    assert np.median(errors) <= 0.4  # px²
    assert np.percentile(errors, 95) <= 1.0
    # Worst case: a disk whose top lies inside the half-pixel strip, which the outline carried
    # straight across cannot follow: at most the segment between an arc of radius 40 and its chord
    # half a pixel deep, (4/3) · sqrt(2 · 40 · 0.5) · 0.5 = 4.2 px².
    assert np.max(errors) <= 4.2


def test_ring_cut_by_a_corner_and_pixel_spacing():
    # A ring (a hole inside an outer boundary), centre 5 px outside the corner.
    centre, inner, outer = np.array([-5.0, -5.0]), 15.0, 35.0
    dist = np.hypot(INDICES[:, 0] - centre[0], INDICES[:, 1] - centre[1])
    phi = np.maximum(dist - outer, inner - dist)
    exact = disk_in_image(centre, outer) - disk_in_image(centre, inner)
    assert area_of(phi) == pytest.approx(exact, abs=1.5)
    assert area_of(phi, spacing=(0.5, 2.0)) == pytest.approx(exact, abs=1.5)  # area scales by 0.5 x 2


def test_whole_image_inside_with_a_hole():
    dist = np.hypot(INDICES[:, 0] - 30.0, INDICES[:, 1] - 40.0)
    phi = 10.0 - dist  # inside everywhere but a disk of radius 10
    assert area_of(phi) == pytest.approx(ROWS * COLS - np.pi * 100.0, abs=1.0)


def test_closed_outline_inside_the_image_is_its_shoelace_area():
    dist = np.hypot(INDICES[:, 0] - 30.0, INDICES[:, 1] - 40.0)
    assert area_of(dist - 20.0) == pytest.approx(np.pi * 400.0, abs=1.0)
