"""Band candidates (lattice nodes within a distance of centre nodes) and zero crossings on a whole grid."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial import cKDTree

import engine.nodes.lattice_band as lattice_band
from engine.front.geometry import grid_crossing_points
from engine.nodes.lattice_band import crossing_points, nodes_near


def reference(centres: np.ndarray, step: np.ndarray, radius: float, upper: np.ndarray) -> np.ndarray:
    """Every lattice node in [0, upper] whose nearest centre is within ``radius`` mm (scipy's k-d tree)."""
    grid = np.indices(tuple(upper + 1)).reshape(len(upper), -1).T
    dist, _ = cKDTree(centres * step).query(grid * step)
    return grid[dist <= radius]


@pytest.mark.parametrize("step", [(0.7, 1.3), (0.5, 0.5), (1.0, 0.8, 2.5), (1.0, 1.0, 1.0)])
@pytest.mark.parametrize("radius", [0.0, 1.05, 3.31, 7.23])
@pytest.mark.parametrize("dense", [True, False])
def test_nodes_near_matches_a_kd_tree(step: tuple[float, ...], radius: float, dense: bool,
                                      monkeypatch: pytest.MonkeyPatch) -> None:
    # Distances from scipy.spatial.cKDTree (a general-purpose reference);
    # radii chosen off the lattice's exact distances, so no node sits on a tie.
    if not dense:  # boxes beyond the dense limit go in slabs (here a few nodes thick)
        monkeypatch.setattr(lattice_band, "DENSE_DISTANCE_LIMIT", 5000)
    step_arr = np.array(step)
    upper = np.array([40, 47, 23][:len(step)])
    centres = np.random.default_rng(len(step)).integers(0, upper + 1, size=(30, len(step)))
    got = nodes_near(centres, step_arr, radius, upper)
    want = reference(centres, step_arr, radius, upper)
    assert np.array_equal(got, want)  # same nodes, same row-major order


@pytest.mark.parametrize("shape, step", [((23, 31), (0.7, 1.3)), ((9, 14, 11), (2.0, 0.8, 0.8))])
def test_grid_crossings_equal_the_lookup_based_crossings(shape: tuple[int, ...], step: tuple[float, ...]) -> None:
    # The grid version promises the same points in the same order as
    # crossing_points on every pixel (its lookup-based definition).
    values = np.random.default_rng(len(shape)).normal(size=shape)
    grid = np.indices(shape).reshape(len(shape), -1).T
    want = crossing_points(grid, values.reshape(-1), np.array(step))
    got = grid_crossing_points(values, np.array(step))
    assert len(want) > 50 and np.array_equal(got, want)
