"""A front started from a function whose inside pixels the caller already knows."""

from __future__ import annotations

import numpy as np
import pytest

from engine.front import Front


def _ellipse(p: np.ndarray) -> np.ndarray:
    # an approximate signed distance (mm) of an ellipse with semi-axes 21 and 13 mm, centre (30.3, 34.6)
    q = (p - np.array([30.3, 34.6])) / np.array([21.0, 13.0])
    return (np.sqrt((q**2).sum(axis=1)) - 1.0) * 13.0


@pytest.mark.parametrize("spacing", [(1.0, 1.0), (0.8, 1.3)])
def test_known_inside_gives_the_same_front_as_reading_every_pixel(spacing) -> None:
    shape = (64, 72)
    sp = np.asarray(spacing)
    centres = np.indices(shape).reshape(2, -1).T * sp
    inside = (_ellipse(centres) < 0).reshape(shape)
    image = np.where(inside, 1.0, 0.0)
    plain = Front.from_function(_ellipse, shape, image=image, spacing=sp, model="region")
    known = Front.from_function(_ellipse, shape, image=image, spacing=sp, model="region", inside=inside)
    np.testing.assert_array_equal(known.snapshot().phi, plain.snapshot().phi)
    np.testing.assert_array_equal(known.mask(), plain.mask())
    known.step(5)
    plain.step(5)
    np.testing.assert_array_equal(known.pixel_phi(), plain.pixel_phi())


def test_an_inside_mask_that_disagrees_with_the_function_is_refused() -> None:
    shape = (64, 72)
    centres = np.indices(shape).reshape(2, -1).T.astype(float)
    inside = (_ellipse(centres) < 0).reshape(shape)
    wrong = inside.copy()
    wrong[30, 10:20] = True  # pixels beyond the ellipse's left end marked inside
    with pytest.raises(ValueError, match="inside disagrees with phi"):
        Front.from_function(_ellipse, shape, model="curvature", inside=wrong)
    with pytest.raises(ValueError, match="inside must be a boolean mask"):
        Front.from_function(_ellipse, shape, model="curvature", inside=inside.astype(int))
