"""A brush edit looks again only at the pixels its stroke can change, and gives what the whole image gives."""

from __future__ import annotations

import numpy as np
import pytest

from engine.front import Front
from engine.front.geometry import stroke_distance

SHAPE = (200, 220)


def _front(nodes: str = "lattice") -> Front:
    rng = np.random.default_rng(3)
    rr, cc = np.indices(SHAPE)
    image = np.where((rr - 100) ** 2 + (cc - 100) ** 2 < 50**2, 1.0, 0.0) + rng.normal(0, 0.05, rr.shape)
    front = Front.from_seeds(image, [(100, 100, 5)], model="region", spacing=(0.8, 1.1), nodes=nodes)
    front.run(max_steps=40)
    return front


@pytest.fixture(scope="module")
def scattered() -> Front:
    return _front("scattered")


@pytest.mark.parametrize("nodes", ["lattice", "scattered"])
def test_a_stroke_re_reads_only_the_pixels_in_its_box(monkeypatch, nodes, scattered) -> None:
    front = scattered if nodes == "scattered" else _front()
    snap = front.snapshot()
    seen = []
    original = type(front.layout).pixel_grid_values

    def spy(self, band, phi, grid, base, spacing):
        seen.append(len(grid))
        return original(self, band, phi, grid, base, spacing)

    monkeypatch.setattr(type(front.layout), "pixel_grid_values", spy)
    front.extend(([[100.0, 160.0], [110.0, 170.0]], 6.0))  # radius 6 px = 4.8 mm (row spacing 0.8 mm)
    front.restore(snap)
    # the stroke's box: rows 100-110 and columns 160-170 widened by the radius in each axis and 2 px
    assert seen and seen[-1] <= (10 + 2 * 6 + 4) * (10 + 2 * 5 + 4)
    assert seen[-1] < 0.05 * SHAPE[0] * SHAPE[1]


def _edit_pixels(front: Front, stroke_px: np.ndarray, radius_px: float, sign: int, boxed: bool) -> np.ndarray:
    """The inside image after an Extend (sign 1) or Trim (sign −1) stroke's pixel pass, boxed or over the whole image."""
    before = front._state  # the front's state value: put back as it was after the pass
    stroke = stroke_px * front.features.spacing
    radius = radius_px * float(np.min(front.features.spacing))
    if sign > 0:
        combine = lambda v, mm, px: np.minimum(v, stroke_distance(mm, stroke, radius))  # noqa: E731
    else:
        combine = lambda v, mm, px: np.maximum(v, -stroke_distance(mm, stroke, radius))  # noqa: E731
    front._apply_to_pixels(combine, (stroke, radius) if boxed else None)
    out = front._inside
    front._state = before
    return out


def test_the_boxed_edit_equals_the_whole_image_edit() -> None:
    # Extend adds only pixels inside the stroke, Trim removes only those: outside the stroke's box
    # no pixel can change side, so re-reading the whole image gives the same inside, bit for bit.
    front = _front()
    stroke = np.array([[100.0, 160.0], [110.0, 170.0]])
    boxed = _edit_pixels(front, stroke, 6.0, 1, True)
    np.testing.assert_array_equal(boxed, _edit_pixels(front, stroke, 6.0, 1, False))
    assert boxed.sum() > front._inside.sum()  # the stroke reached beyond the outline


def test_boxed_strokes_on_scattered_nodes_equal_the_whole_image(scattered) -> None:
    # A seeded family of Extend and Trim strokes across the outline (and one off the image): the
    # boxed pass gives the whole image's inside bit for bit, with and without a barrier holding
    # band pixels outside against φ.
    front = scattered
    rng = np.random.default_rng(11)
    strokes = [np.array([[100.0, 160.0], [110.0, 170.0]]), np.array([[-40.0, -40.0], [-30.0, -35.0]])]
    for _ in range(6):
        # starts about the outline's radius (some 12 px after 40 steps) from the seed
        start = np.array([100.0, 100.0]) + 12.0 * np.array([np.cos(a := rng.uniform(0, 2 * np.pi)), np.sin(a)])
        strokes.append(start + np.cumsum(rng.normal(0.0, 4.0, (3, 2)), axis=0))
    barrier = np.zeros(SHAPE, dtype=bool)
    barrier[:, :100] = True  # the left half of the outline
    changed = {}
    for held in (None, barrier):
        front.set_barrier(held)
        if held is not None:
            pixels = front._band.pixel_index
            assert np.any(held[pixels] & (front._pixel_band_values() < 0))  # bits held against φ exist
        for k, stroke in enumerate(strokes):
            for sign in (1, -1):
                radius = 3.0 + k % 4
                boxed = _edit_pixels(front, stroke, radius, sign, True)
                np.testing.assert_array_equal(boxed, _edit_pixels(front, stroke, radius, sign, False))
                changed[held is None, k, sign] = bool(np.any(boxed != front._inside))
    front.set_barrier(None)
    # most strokes changed the inside (13 of 16 without the barrier, all with it, where the
    # held bits go back to φ's sign)
    assert sum(v for (free, _, _), v in changed.items() if free) >= 10
    assert all(v for (free, _, _), v in changed.items() if not free)


def test_a_scattered_brush_edit_keeps_the_front_as_the_whole_image_pass_does(scattered, monkeypatch) -> None:
    # Through the public edit: Extend then Trim with the boxed pass, against the same edits with
    # every pixel read again: the same φ, band and inside image, bit for bit.
    results = []
    for boxed in (True, False):
        front = _front("scattered")
        if not boxed:
            whole = type(front)._apply_to_pixels
            monkeypatch.setattr(type(front), "_apply_to_pixels", lambda self, combine, near=None: whole(self, combine))
        front.extend(([[100.0, 150.0], [104.0, 158.0]], 5.0))
        front.trim(([[60.0, 100.0], [66.0, 104.0]], 4.0))
        results.append((front._inside.copy(), front._band.indices.copy(), front._phi.copy()))
        monkeypatch.undo()
    for a, b in zip(*results):
        np.testing.assert_array_equal(a, b)
