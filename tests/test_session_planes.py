"""Planes of a volume as a viewer lays them out, and outlines cut by them.

References: the layout is the trade's radiological convention (common
practice: patient's right on the screen's left in axial and coronal planes,
anterior up in axial, head up in coronal and sagittal, anterior on the left
of a sagittal plane); DICOM's patient coordinate system LPS (DICOM PS3.3
C.7.6.2.1.1); analytic chords of a circle (half chord √(R² − d²)) and the
Euclidean distance to a circle (|x − c| − R).
"""

from __future__ import annotations

import numpy as np
import pytest

from engine.analysis.contours import signed_area
from engine.phantoms.mr import centred_affine
from engine.session.outline import outline_from_phi
from engine.session.planes import (
    auto_window,
    line_intervals,
    plane_views,
    section_contours,
    signed_distance,
    slab_rectangles,
)


def affine_from(slice_dir, row_dir, col_dir, spacing=(6.0, 1.5, 1.5)):
    a = np.eye(4)
    a[:3, 0] = np.asarray(slice_dir, float) * spacing[0]
    a[:3, 1] = np.asarray(row_dir, float) * spacing[1]
    a[:3, 2] = np.asarray(col_dir, float) * spacing[2]
    return a


X, Y, Z = np.eye(3)


def test_axial_stack_as_scanners_store_it():
    # rows run to posterior (+y), columns to the patient's left (+x), slices foot to head (+z):
    # the layout of sample_cases/abdomen_mr (its README).
    views = plane_views(centred_affine((24, 256, 256), (6.0, 1.5625, 1.5625), "axial"))
    axial, coronal, sagittal = views[0], views[1], views[2]
    assert (axial.name, axial.horizontal, axial.flip_h, axial.flip_v) == ("Axial", 1, False, False)
    assert axial.edges == ("R", "L", "A", "P")
    # plane of fixed row: (slice, col); the head must be at the top, so slices run upwards
    assert (coronal.name, coronal.horizontal, coronal.flip_h, coronal.flip_v) == ("Coronal", 1, False, True)
    assert coronal.edges == ("R", "L", "S", "I")
    # plane of fixed column: (slice, row); anterior on the left, head up
    assert (sagittal.name, sagittal.horizontal, sagittal.flip_h, sagittal.flip_v) == ("Sagittal", 1, False, True)
    assert sagittal.edges == ("A", "P", "S", "I")


def test_coronal_stack():
    # sample_cases/head_mr: rows to the feet, columns to the patient's left, slices to posterior
    views = plane_views(centred_affine((16, 160, 160), (5.0, 1.5, 1.5), "coronal"))
    assert (views[0].name, views[0].horizontal, views[0].flip_h, views[0].flip_v) == ("Coronal", 1, False, False)
    assert views[0].edges == ("R", "L", "S", "I")
    assert views[1].name == "Axial" and views[2].name == "Sagittal"


@pytest.mark.parametrize("row_dir,col_dir,expected", [
    # stored transposed: rows run to the left, columns to posterior -> rows shown across
    (X, Y, (0, False, False)),
    # stored upside down and mirrored: rows to anterior, columns to the right
    (-Y, -X, (1, True, True)),
    # transposed and mirrored: rows to the right, columns to anterior
    (-X, -Y, (0, True, True)),
])
def test_axial_stack_stored_in_other_orientations_is_shown_the_right_way_up(row_dir, col_dir, expected):
    view = plane_views(affine_from(np.cross(row_dir, col_dir), row_dir, col_dir))[0]
    assert view.name == "Axial"
    assert (view.horizontal, view.flip_h, view.flip_v) == expected
    assert view.edges == ("R", "L", "A", "P")
    # the pixel a step towards the patient's left lands to the right on the screen
    m = view.display_matrix((3, 10, 12), (6.0, 1.5, 1.5))
    centre = np.array([4.0, 5.0, 1.0])
    left_step = np.array([row_dir @ X, col_dir @ X, 0.0])  # (row, col) step towards +x
    posterior_step = np.array([row_dir @ Y, col_dir @ Y, 0.0])
    assert (m @ (centre + left_step))[0] > (m @ centre)[0]
    assert (m @ (centre + posterior_step))[1] > (m @ centre)[1]
    # pixel centres fill [0, (n - 1) * spacing] on both screen axes
    corners = np.array([[0, 0, 1], [9, 11, 1], [0, 11, 1], [9, 0, 1]], float)
    xy = corners @ m.T
    extent = {xy[:, 0].max() - xy[:, 0].min(), xy[:, 1].max() - xy[:, 1].min()}
    assert extent == {9 * 1.5, 11 * 1.5} and xy.min() == 0.0


def test_sagittal_stack():
    # slices run to the patient's left, rows to the feet, columns to posterior
    views = plane_views(affine_from(X, -Z, Y))
    assert views[0].name == "Sagittal"
    assert (views[0].horizontal, views[0].flip_h, views[0].flip_v) == (1, False, False)
    assert views[0].edges == ("A", "P", "S", "I")


def test_a_picture_without_a_patient_frame_is_shown_as_stored():
    views = plane_views(np.eye(4), patient_frame=False)
    assert all(v.name == "" and v.edges == ("", "", "", "") and v.horizontal == 1 for v in views.values())
    assert not any(v.flip_h or v.flip_v for v in views.values())


def disk_outline(slice_index, centre, radius, shape=(64, 80), spacing=(1.0, 1.0)):
    sp = np.asarray(spacing)
    rr, cc = np.mgrid[: shape[0], : shape[1]].astype(float)
    phi = np.hypot((rr - centre[0]) * sp[0], (cc - centre[1]) * sp[1]) - radius
    return outline_from_phi(1, slice_index, phi, spacing)


def test_section_of_disks_on_a_run_of_slices_is_a_slab_stack_with_exact_chords():
    # disks of radius 15 mm on slices 3..6: a row through the centre cuts each in the diameter,
    # a row 6 px off it in a chord of half length √(15² − 6²) (analytic); the slabs join into one box
    centre, radius = (30.2, 40.7), 15.0
    outlines = [disk_outline(k, centre, radius) for k in range(3, 7)]
    for row, offset in ((30, 0.2), (36, 5.8)):
        polys = section_contours(outlines, 1, row, slices=10, spacing=(1.0, 1.0))
        assert len(polys) == 1
        p = polys[0]
        half = np.sqrt(radius**2 - offset**2)
        assert p[:, 0].min() == pytest.approx(2.5) and p[:, 0].max() == pytest.approx(6.5)
        assert p[:, 1].min() == pytest.approx(centre[1] - half, abs=0.05)
        assert p[:, 1].max() == pytest.approx(centre[1] + half, abs=0.05)
        assert abs(signed_area(p)) == pytest.approx(4 * 2 * half, rel=0.01)
    # a column plane through the centre: chord along rows
    polys = section_contours(outlines, 2, 41, slices=10, spacing=(1.0, 1.0))
    half = np.sqrt(radius**2 - 0.3**2)
    assert polys[0][:, 1].min() == pytest.approx(centre[0] - half, abs=0.05)


def test_section_with_a_gap_gives_two_parts_and_a_line_missing_the_disks_gives_none():
    outlines = [disk_outline(k, (30, 40), 10.0) for k in (1, 2, 5)]
    assert len(section_contours(outlines, 1, 30, slices=8, spacing=(1.0, 1.0))) == 2
    assert section_contours(outlines, 1, 5, slices=8, spacing=(1.0, 1.0)) == []
    assert section_contours([], 1, 5, slices=8, spacing=(1.0, 1.0)) == []
    with pytest.raises(ValueError, match="axis"):
        section_contours(outlines, 0, 5, slices=8, spacing=(1.0, 1.0))


def circle(centre, radius, n=720):
    t = np.linspace(0, 2 * np.pi, n, endpoint=False)
    return np.column_stack([centre[0] + radius * np.sin(t), centre[1] + radius * np.cos(t)])


def test_line_intervals_of_a_ring_are_its_two_chords():
    # a ring: outer circle R = 20 and a hole r = 8 (even-odd rule); chord half lengths √(R² − d²), √(r² − d²)
    outer, hole = circle((50, 60), 20.0), circle((50, 60), 8.0)[::-1]
    d = 3.0
    got = line_intervals([outer, hole], 1, 50 + d)
    ho, hi = np.sqrt(400 - d * d), np.sqrt(64 - d * d)
    expected = [[60 - ho, 60 - hi], [60 + hi, 60 + ho]]
    np.testing.assert_allclose(got, expected, atol=0.01)  # 720-gon: sagitta R(1 − cos(π/720)) ≈ 2e-4
    np.testing.assert_allclose(line_intervals([outer], 2, 60.0), [[30.0, 70.0]], atol=0.01)
    assert line_intervals([outer], 1, 90.0).shape == (0, 2)
    rects = slab_rectangles(got, 4)
    assert len(rects) == 2 and rects[0][:, 0].min() == 3.5 and rects[0][:, 0].max() == 4.5


@pytest.mark.parametrize("spacing", [(1.0, 1.0), (0.5, 0.5)])
def test_signed_distance_to_a_circle(spacing):
    # |x − c| − R for a circle (analytic), in mm
    c = circle((50, 50), 20.0)
    s = spacing[0]
    assert signed_distance([c], (50, 50), spacing) == pytest.approx(-20.0 * s, abs=0.01)
    assert signed_distance([c], (50, 80), spacing) == pytest.approx(10.0 * s, abs=0.01)
    assert signed_distance([c], (50 + 12 / np.sqrt(2), 50 + 12 / np.sqrt(2)), spacing) == \
        pytest.approx(-8.0 * s, abs=0.01)
    assert np.isnan(signed_distance([], (1, 1), spacing))


def test_auto_window_spans_the_percentiles():
    # uniform 0..1000: the 0.5th and 99.5th percentiles are 5 and 995
    values = np.linspace(0.0, 1000.0, 200_001)
    centre, width = auto_window(values)
    assert centre == pytest.approx(500.0, abs=0.5) and width == pytest.approx(990.0, abs=1.0)
    assert auto_window(np.full(10, 7.0)) == (7.5, 1.0)
    with pytest.raises(ValueError):
        auto_window(np.zeros(0))
