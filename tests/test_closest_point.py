"""Newton closest points and signed distances against an analytic ellipse.

The zero set is the ellipse x²/a² + y²/b² = 1 (a = 40 px, b = 20 px, centre
off the lattice), given to the engine only through node values of implicit
functions that are *not* distances, on a lattice at h = 1 px (1 mm per px).
The reference distance is computed independently of the engine: dense
sampling of the parameter t of (a cos t, b sin t), then Newton's method on
d/dt |p − (a cos t, b sin t)|² = 0 (common geometry).

References
----------
R. I. Saye, "High-order methods for computing distances to implicitly defined
surfaces", Commun. Appl. Math. Comput. Sci. 9(1) (2014) 107-141 (Newton on the
Lagrangian ½|y − x|² + λφ(y); converges in ~5 iterations).
D. L. Chopp, "Some improvements of the fast marching method", SIAM J. Sci.
Comput. 23(1) (2001) 230-244 (gradient / tangential projection fallback).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pytest

import ellipse_reference
from scipy.spatial import cKDTree

from engine.numerics.closest_point import closest_points, signed_distance
from engine.analysis.contours import band_contours
from engine.numerics.interpolant import LocalInterpolant
from engine.nodes.lattice import lattice_stencils

A, B = 40.0, 20.0  # semi-axes (px) along rows and columns
CENTRE = np.array([60.37, 50.81])  # off the lattice on purpose
BAND_PX = 8.0  # lattice nodes within this exact distance of the ellipse
CHECK_PX = 5.0  # accuracy is required within this distance of the ellipse


def exact_ellipse_distance(points: np.ndarray, *, samples: int = 4096) -> tuple[np.ndarray, np.ndarray]:
    """Signed distance to this file's ellipse and the closest point's parameter (see ellipse_reference)."""
    return ellipse_reference.exact_ellipse_distance(points, CENTRE, A, B, samples=samples)


# Implicit functions with the ellipse as zero set, negative inside; none is a distance.
def _quadratic(q: np.ndarray) -> np.ndarray:
    return q[:, 0] ** 2 / A**2 + q[:, 1] ** 2 / B**2 - 1.0


def _root(q: np.ndarray) -> np.ndarray:
    return np.sqrt(q[:, 0] ** 2 / A**2 + q[:, 1] ** 2 / B**2) - 1.0


def _exponential(q: np.ndarray) -> np.ndarray:
    return np.expm1(q[:, 0] ** 2 / A**2 + q[:, 1] ** 2 / B**2 - 1.0)


IMPLICIT: dict[str, Callable[[np.ndarray], np.ndarray]] = {
    # A polynomial of degree 2: the degree-4 interpolant reproduces it exactly
    # (polynomial reproduction, Flyer et al., J. Comput. Phys. 321 (2016)
    # 21-38), so this case checks the Newton projection on its own.
    "quadratic": _quadratic,
    # Not polynomials: these also check the interpolation error of the local
    # RBF interpolant near the zero set, added to the projection error.
    "root": _root,
    "exponential": _exponential,
}


@pytest.fixture(scope="module")
def lattice() -> dict[str, np.ndarray | LocalInterpolant]:
    """Lattice nodes within 8 px of the ellipse and the local interpolant on them."""
    i, j = np.mgrid[0:130, 0:110]
    idx = np.stack([i.ravel(), j.ravel()], axis=1)
    assert np.all(CENTRE - [A, B] - BAND_PX > 1) and np.all(CENTRE + [A, B] + BAND_PX < [129, 109])
    exact, _ = exact_ellipse_distance(idx.astype(float))
    keep = np.abs(exact) <= BAND_PX
    idx, exact = idx[keep], exact[keep]
    positions = idx.astype(float)  # h = 1 px = 1 mm
    pattern, interior, _ = lattice_stencils(idx, (1.0, 1.0), stencil_size=30)
    owners = np.flatnonzero(interior)  # nodes whose symmetric stencil is complete
    interp = LocalInterpolant.build(positions, pattern[owners], owners=owners, degree=4, phs=5)
    return {"idx": idx, "positions": positions, "exact": exact, "interp": interp}


def _setup(lattice: dict, name: str) -> tuple[LocalInterpolant, np.ndarray, np.ndarray, np.ndarray]:
    """Interpolant, its coefficients, node values and the contour vertices for one implicit function."""
    interp = lattice["interp"]
    values = IMPLICIT[name](lattice["positions"] - CENTRE)
    coeffs = interp.coefficients(values)
    lines = band_contours(lattice["idx"], values)
    assert len(lines) == 1
    return interp, coeffs, values, lines[0]


@pytest.mark.parametrize("name", list(IMPLICIT))
def test_signed_distance_to_ellipse_within_a_hundredth_of_a_pixel(lattice: dict, name: str) -> None:
    # Reference: exact distance to the ellipse by parametric sampling + Newton
    # (common geometry); requirement 0.01 px within 5 px of the curve.
    interp, coeffs, values, vertices = _setup(lattice, name)
    near = np.abs(lattice["exact"]) <= CHECK_PX
    query = lattice["positions"][near]
    _, nearest = cKDTree(vertices).query(query)
    for start in (vertices[nearest], None):  # nearest contour vertex / default gradient projection
        dist, cp = signed_distance(interp, coeffs, query, sign_values=values[near], start=start)
        error = np.abs(dist - lattice["exact"][near])
        assert np.all(cp.converged), name
        assert error.max() <= 0.01, (name, error.max())
    if name == "quadratic":
        # Exactly reproduced φ: only Newton round-off remains.
        assert error.max() < 1e-9, error.max()
    # The closest points lie on the ellipse (analytic zero set).
    on_curve = _quadratic(cp.points - CENTRE)
    assert np.max(np.abs(on_curve)) < 1e-3


@pytest.mark.parametrize("name", list(IMPLICIT))
def test_newton_converges_in_a_few_iterations(lattice: dict, name: str) -> None:
    # Saye (2014): Newton on the Lagrangian from a start near the zero set
    # converges in about five iterations (quadratic convergence).
    interp, coeffs, values, vertices = _setup(lattice, name)
    near = np.abs(lattice["exact"]) <= CHECK_PX
    query = lattice["positions"][near]
    _, nearest = cKDTree(vertices).query(query)
    start = vertices[nearest]
    cp = closest_points(interp, coeffs, query, start=start)
    assert np.all(cp.converged) and cp.iterations < 12
    # Smallest iteration budget under which every point meets the tolerance.
    needed = next(k for k in range(1, 13)
                  if np.all(closest_points(interp, coeffs, query, start=start, max_iter=k).converged))
    print(f"{name}: all {len(query)} points within {CHECK_PX} px converged after {needed} Newton "
          f"iterations (reported iterations: {cp.iterations})")
    assert needed <= 6, needed
    # The reported count is the Newton steps of the slowest point: exactly the
    # smallest budget that suffices.
    assert cp.iterations == needed, (cp.iterations, needed)
    # One iteration is not enough from a contour vertex (up to ~0.7 px off):
    # the flags must say so.
    assert not np.all(closest_points(interp, coeffs, query, start=start, max_iter=1).converged)


# Points far from the curve and on its medial axis (the segment |x| <= (a² − b²)/a
# of the major axis, where two closest points tie; the centre is one of them).
FAR_AND_MEDIAL = CENTRE + np.array([
    [0.0, 0.0], [15.0, 0.0], [-25.0, 0.0], [10.0, 1e-4],   # medial axis (inside)
    [80.0, 0.0], [0.0, 60.0], [60.0, 60.0], [-70.0, -45.0],  # far outside, off the band
    [43.0, 0.0], [0.0, -23.0], [0.0, 21.0],                 # just outside, beyond curvature radius
])


@pytest.mark.parametrize("name", list(IMPLICIT))
def test_far_and_medial_points_take_the_fallback_safely(lattice: dict, name: str) -> None:
    # Reference: the exact ellipse distance (parametric Newton, common geometry).
    # Any point of the zero set is at least as far as the closest one, so a
    # fallback that lands on the curve can never under-estimate the distance.
    interp, coeffs, values, vertices = _setup(lattice, name)
    exact, _ = exact_ellipse_distance(FAR_AND_MEDIAL)
    _, nearest = cKDTree(vertices).query(FAR_AND_MEDIAL)
    start = vertices[nearest]
    # Full Newton from the nearest contour vertex: converged and exact.
    cp = closest_points(interp, coeffs, FAR_AND_MEDIAL, start=start)
    assert np.all(cp.converged)
    np.testing.assert_allclose(cp.distance, np.abs(exact), atol=0.01)
    # Newton cut short: every point is flagged, and the fallback (Chopp 2001
    # alternating projection) still returns finite distances to points on the
    # ellipse, no shorter than the exact distance.
    for budget in (1, 2):
        short = closest_points(interp, coeffs, FAR_AND_MEDIAL, start=start, max_iter=budget)
        assert not np.any(short.converged)
        assert np.all(np.isfinite(short.distance)) and np.all(np.isfinite(short.points))
        assert np.max(np.abs(_quadratic(short.points - CENTRE))) < 1e-3, budget
        assert np.all(short.distance >= np.abs(exact) - 0.01), (budget, short.distance - np.abs(exact))
        # From a start in the right basin it reaches the true closest point.
        np.testing.assert_allclose(short.distance, np.abs(exact), atol=0.01)
    # Signs: the medial-axis points are inside, the far points outside.
    dist, _ = signed_distance(interp, coeffs, FAR_AND_MEDIAL, start=start)
    np.testing.assert_array_equal(np.sign(dist), np.sign(exact))


def test_signed_distance_sign_from_node_values_or_interpolant(lattice: dict) -> None:
    # Sign convention (DESIGN: φ negative inside): both sign sources agree
    # with the analytic inside test x²/a² + y²/b² < 1.
    interp, coeffs, values, vertices = _setup(lattice, "root")
    near = np.abs(lattice["exact"]) <= CHECK_PX
    query = lattice["positions"][near]
    _, nearest = cKDTree(vertices).query(query)
    d_nodes, _ = signed_distance(interp, coeffs, query, sign_values=values[near], start=vertices[nearest])
    d_interp, _ = signed_distance(interp, coeffs, query, start=vertices[nearest])
    np.testing.assert_array_equal(np.sign(d_nodes), np.sign(lattice["exact"][near]))
    np.testing.assert_array_equal(d_nodes, d_interp)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"query": np.zeros((3, 2)), "start": np.zeros((4, 2))}, "start"),
        ({"query": np.zeros((3, 2)), "start": np.zeros((3, 3))}, "start"),
        ({"query": np.zeros((3, 2)), "start": np.full((3, 2), np.nan)}, "start"),
        ({"query": np.zeros((3, 3))}, "query"),
        ({"query": np.zeros(3)}, "query"),
        ({"query": np.zeros((0, 2))}, "query"),
        ({"query": np.full((2, 2), np.inf)}, "query"),
    ],
)
def test_bad_input_names_the_argument(lattice: dict, kwargs: dict, message: str) -> None:
    interp, coeffs, _, _ = _setup(lattice, "quadratic")
    with pytest.raises(ValueError, match=message):
        closest_points(interp, coeffs, **kwargs)
    with pytest.raises(ValueError, match=message):
        signed_distance(interp, coeffs, **kwargs)


def test_bad_sign_values_and_coefficients_name_the_argument(lattice: dict) -> None:
    interp, coeffs, _, _ = _setup(lattice, "quadratic")
    query = lattice["positions"][:5]
    with pytest.raises(ValueError, match="sign_values"):
        signed_distance(interp, coeffs, query, sign_values=np.zeros(4))
    with pytest.raises(ValueError, match="coeffs"):
        closest_points(interp, coeffs[:-1], query)


def test_spectral_norm_of_symmetric_hessians_matches_numpy() -> None:
    # reference: numpy.linalg.norm(ord=2), the largest singular value (= largest |eigenvalue| when symmetric)
    from engine.numerics.closest_point import _spectral_norm

    rng = np.random.default_rng(5)
    for dim in (2, 3):
        a = rng.normal(size=(500, dim, dim))
        h = a + a.transpose(0, 2, 1)
        h[:5] = 0.0  # zero matrices: norm 0
        np.testing.assert_allclose(_spectral_norm(h), np.linalg.norm(h, ord=2, axis=(1, 2)), rtol=1e-12, atol=1e-12)
