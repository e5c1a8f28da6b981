"""Seed disks: the pixels a seed click covers."""

from __future__ import annotations

import numpy as np
from skimage.draw import disk

from engine.front.geometry import seed_disks


def test_seed_disks_match_scikit_image_disks() -> None:
    # Reference: skimage.draw.disk, pixel centres within the circle; radii
    # off the lattice's exact distances so no centre sits on the rim. Seeds
    # partly or wholly outside the image are clipped to it.
    shape = (40, 50)
    rng = np.random.default_rng(0)
    for _ in range(30):
        seeds = np.column_stack([rng.uniform(-6, 46, 3), rng.uniform(-6, 56, 3), rng.uniform(1.05, 9.05, 3)])
        want = np.zeros(shape, dtype=bool)
        for r0, c0, radius in seeds:
            want[disk((r0, c0), radius, shape=shape)] = True
        assert np.array_equal(seed_disks(shape, seeds), want)


def test_seed_balls_in_a_volume_cover_the_voxels_within_their_radius() -> None:
    shape = (20, 30, 25)
    seeds = np.array([[3.2, 28.7, 12.1, 4.3], [10.0, 10.0, 10.0, 0.4]])  # the second: at least one voxel
    grid = np.indices(shape, dtype=float)
    want = np.zeros(shape, dtype=bool)
    for *centre, radius in seeds:
        want |= sum((g - c) ** 2 for g, c in zip(grid, centre)) <= max(radius, 1.0) ** 2
    assert np.array_equal(seed_disks(shape, seeds), want)
