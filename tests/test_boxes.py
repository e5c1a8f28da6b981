"""The box of a mask, against the extremes of its set elements' indices (np.argwhere)."""

from __future__ import annotations

import numpy as np

from engine.image.boxes import occupied_box, widened


def test_the_box_holds_every_set_element_and_no_more_rows_or_columns() -> None:
    rng = np.random.default_rng(5)
    for ndim in (2, 3):
        for _ in range(20):
            shape = tuple(int(n) for n in rng.integers(3, 12, ndim))
            mask = rng.random(shape) < rng.uniform(0.005, 0.2)
            box = occupied_box(mask)
            if not mask.any():
                assert box is None
                continue
            where = np.argwhere(mask)
            assert [(s.start, s.stop) for s in box] == [(int(a), int(b) + 1) for a, b in
                                                        zip(where.min(axis=0), where.max(axis=0))]
            assert mask[box].sum() == mask.sum()


def test_padding_is_per_axis_and_stays_within_the_array() -> None:
    mask = np.zeros((10, 20), dtype=bool)
    mask[1, 15] = mask[3, 16] = True
    assert occupied_box(mask, 2) == (slice(0, 6), slice(13, 19))
    assert occupied_box(mask, (0, 5)) == (slice(1, 4), slice(10, 20))
    assert widened((slice(4, 5), slice(0, 1)), (10, 1), (8, 3)) == (slice(0, 8), slice(0, 2))
    assert occupied_box(np.zeros((4, 4), dtype=bool), 1) is None


def test_the_box_around_points_is_aligned_to_blocks_and_stays_within_the_array() -> None:
    from engine.image.boxes import around_points

    points = np.array([[40.3, 70.0], [52.0, 66.6]])
    # widened by 10 px: rows 30.3-62, cols 56.6-80; low corner down to a multiple of 8
    assert around_points(points, 10, 8, (100, 200)) == (slice(24, 63), slice(56, 81))
    assert around_points(points, 60, 4, (100, 90)) == (slice(0, 100), slice(4, 90))
