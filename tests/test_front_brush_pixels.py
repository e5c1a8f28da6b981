"""A brush edit looks again only at the pixels its stroke can change, and gives what the whole image gives."""

from __future__ import annotations

import numpy as np

from engine.front import Front


def _front() -> Front:
    rng = np.random.default_rng(3)
    rr, cc = np.indices((200, 220))
    image = np.where((rr - 100) ** 2 + (cc - 100) ** 2 < 50**2, 1.0, 0.0) + rng.normal(0, 0.05, rr.shape)
    front = Front.from_seeds(image, [(100, 100, 5)], model="region", spacing=(0.8, 1.1))
    front.run(max_steps=40)
    return front


def test_a_stroke_re_reads_only_the_pixels_in_its_box(monkeypatch) -> None:
    front = _front()
    seen = []
    original = type(front.layout).pixel_grid_values

    def spy(self, band, phi, grid, base, spacing):
        seen.append(len(grid))
        return original(self, band, phi, grid, base, spacing)

    monkeypatch.setattr(type(front.layout), "pixel_grid_values", spy)
    front.extend(([[100.0, 160.0], [110.0, 170.0]], 6.0))  # radius 6 px = 4.8 mm (row spacing 0.8 mm)
    # the stroke's box: rows 100-110 and columns 160-170 widened by the radius in each axis and 2 px
    assert seen and seen[-1] <= (10 + 2 * 6 + 4) * (10 + 2 * 5 + 4)
    assert seen[-1] < 0.05 * 200 * 220


def test_the_boxed_edit_equals_the_whole_image_edit() -> None:
    # Extend adds only pixels inside the stroke, Trim removes only those: outside the stroke's box
    # no pixel can change side, so re-reading the whole image gives the same inside, bit for bit.
    boxed, whole = _front(), _front()
    for front, near in ((boxed, True), (whole, False)):
        stroke = np.array([[100.0, 160.0], [110.0, 170.0]]) * front.features.spacing
        radius = 6.0 * float(np.min(front.features.spacing))
        from engine.front.geometry import stroke_distance

        combine = lambda v, mm, px: np.minimum(v, stroke_distance(mm, stroke, radius))  # noqa: E731
        front._apply_to_pixels(combine, (stroke, radius) if near else None)
    np.testing.assert_array_equal(boxed._inside, whole._inside)
    assert boxed._inside.sum() > _front()._inside.sum()  # the stroke reached beyond the outline
