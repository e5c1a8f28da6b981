"""The front on scattered nodes in 3-D (``nodes="scattered"``) against analytic and published references."""

from __future__ import annotations

import numpy as np
import pytest

from engine.front import Front
from engine.analysis.metrics import dice
from engine.nodes.node_set import ScatteredNodeSet
from tests.test_front_scattered import check_snapshot_and_determinism


def sphere_sd(centre_mm, radius_mm):
    c = np.asarray(centre_mm, dtype=float)
    return lambda p: np.linalg.norm(p - c, axis=1) - radius_mm


def ray_directions(count: int = 200) -> np.ndarray:
    """Nearly uniform unit vectors (Fibonacci sphere; common practice)."""
    k = np.arange(count) + 0.5
    z = 1.0 - 2.0 * k / count
    azimuth = np.pi * (1.0 + 5.0**0.5) * k
    s = np.sqrt(1.0 - z * z)
    return np.stack([z, s * np.cos(azimuth), s * np.sin(azimuth)], axis=1)


def zero_set_radii(front: Front, centre_mm, guess_mm: float, spacing=(1.0, 1.0, 1.0)) -> np.ndarray:
    """Distance (mm) from ``centre_mm`` to the front's zero set along rays: Newton on the front's interpolated φ."""
    sp = np.asarray(spacing, dtype=float)
    u = ray_directions()
    rho = np.full(len(u), float(guess_mm))
    for _ in range(4):  # |∇φ| = 1 along the ray of a sphere: ρ ← ρ − φ
        rho = rho - front.phi_at((np.asarray(centre_mm) + rho[:, None] * u) / sp)
    return rho


def surface_radii(front: Front, centre_px) -> np.ndarray:
    """Distance (voxels) from ``centre_px`` of the vertices of :meth:`Front.surface`.

    For scattered fronts that is marching cubes (Lorensen & Cline, SIGGRAPH
    1987; scikit-image's implementation) on :meth:`Front.pixel_phi`.
    """
    verts, _ = front.surface()
    return np.linalg.norm(verts - np.asarray(centre_px), axis=1)


def test_sphere_curvature_flow_radius() -> None:
    # Mean-curvature flow (curvature = sum of the principal curvatures) of a
    # sphere in 3-D: r(t)² = r0² − 2(d − 1) t = r0² − 4t (Osher & Sethian,
    # J. Comput. Phys. 79 (1988) 12-49; Evans & Spruck, J. Differential Geom.
    # 33 (1991) 635-681). Requirement: the surface's mean distance from the
    # centre within 1 % after shrinking by a third (r0 = 6.5 voxels).
    r0 = 6.5
    centre = np.array([9.6, 9.3, 9.45])
    front = Front.from_function(sphere_sd(centre, r0), (20, 20, 20), model="curvature", smoothness=1.0,
                                nodes="scattered", finest=1.0, coarsest=1.0)
    assert front.nodes == "scattered" and front.node_set.dim == 3
    start = surface_radii(front, centre)
    assert abs(start.mean() - r0) / r0 < 0.005, start.mean()  # the reinitialised signed distance
    front.run(until_time=(r0**2 - (2.0 * r0 / 3.0) ** 2) / 4.0)
    exact = np.sqrt(r0**2 - 4.0 * front.time)
    radii = surface_radii(front, centre)
    assert abs(radii.mean() - exact) / exact < 0.01, (radii.mean(), exact)
    assert radii.std() < 0.03 * exact, radii.std()  # still a sphere


def test_anisotropic_voxels_sphere_curvature_flow_in_mm() -> None:
    # The same flow with 2.0 x 0.8 x 0.8 mm voxels: the motion is in mm, so the
    # sphere (r0 = 6 mm) follows r(t)² = r0² − 4t (Osher & Sethian 1988)
    # within 1 %.
    spacing = (2.0, 0.8, 0.8)
    r0 = 6.0
    centre = np.array([9.1, 8.5, 8.7])
    front = Front.from_function(sphere_sd(centre, r0), (10, 22, 22), spacing=spacing, model="curvature",
                                smoothness=1.0, nodes="scattered", finest=1.0, coarsest=1.0)
    assert np.allclose(front.node_set.pixel_spacing, spacing)
    front.run(until_time=(r0**2 - (2.0 * r0 / 3.0) ** 2) / 4.0)
    exact = np.sqrt(r0**2 - 4.0 * front.time)
    radii = zero_set_radii(front, centre, exact, spacing)
    assert abs(radii.mean() - exact) / exact < 0.01, (radii.mean(), exact)
    assert radii.std() < 0.015 * exact, radii.std()


def blob_image(shape=(20, 20, 20), semi_axes=(7.0, 6.0, 5.5), noise=6.0, seed=3):
    """A bright ellipsoid on a dark background with Gaussian noise, and its noise-free truth."""
    grid = np.indices(shape, dtype=float)
    centre = (np.array(shape) - 1) / 2.0 + np.array([0.3, -0.4, 0.2])
    truth = sum(((g - c) / a) ** 2 for g, c, a in zip(grid, centre, semi_axes)) < 1.0
    image = np.where(truth, 140.0, 60.0) + np.random.default_rng(seed).normal(0.0, noise, shape)
    return image, truth


def test_blob_segmentation_region_model() -> None:
    # Requirement: Dice >= 0.95 against the noise-free ellipsoid (Dice,
    # Ecology 26 (1945) 297-302), grown from a ball seed with the region
    # model (measured 0.995).
    image, truth = blob_image()
    front = Front.from_seeds(image, [(9.5, 9.5, 9.5, 3)], model="region", smoothness=0.3, nodes="scattered",
                             finest=1.0, coarsest=1.0)
    front.run(max_steps=300)
    assert front.converged
    assert dice(front.mask(), truth) >= 0.95, dice(front.mask(), truth)


def test_snapshot_restore_is_bit_for_bit_and_stepping_is_deterministic() -> None:
    image, _ = blob_image(shape=(16, 16, 16), semi_axes=(5.0, 4.5, 4.0), noise=5.0, seed=8)
    check_snapshot_and_determinism(
        lambda: Front.from_seeds(image, [(8, 8, 8, 3)], model="region", nodes="scattered", finest=1.0, coarsest=1.0),
        4, 12)


def test_a_front_through_the_volume_border_is_refused() -> None:
    # A plane through the box is a steady state of curvature motion, yet on
    # scattered 3-D nodes round-off grew about 2.4 times a step (the lattice
    # holds it to 1e-11 over 300 steps: test_front_analytic): edge nodes of the
    # set, which copy layer rates, lie on both sides of the front where it
    # crosses the border. Until that loop is stable, such a front is refused
    # with a message that names the way out.
    normal = np.array([0.36, 0.48, 0.8])
    with pytest.raises(ValueError, match=r"meets the volume's border near voxel .*nodes='lattice'"):
        Front.from_function(lambda p: p @ normal - 7.3, (15, 15, 15), model="curvature", smoothness=1.0,
                            nodes="scattered", finest=1.0, coarsest=1.0)


def test_refusals_and_bad_input() -> None:
    image = np.zeros((12, 12, 12))
    with pytest.raises(ValueError, match="detail"):
        Front.from_seeds(image, [(6, 6, 6, 3)], nodes="scattered", detail=2)
    with pytest.raises(ValueError, match="finest"):
        Front.from_seeds(image, [(6, 6, 6, 3)], nodes="scattered", finest=-1.0)
    with pytest.raises(ValueError, match="node_set"):
        Front.from_seeds(image, [(6, 6, 6, 3)], nodes="scattered", node_set=ScatteredNodeSet((12, 12, 13), 1.0, 1.0))
