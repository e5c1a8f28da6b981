"""RBF-FD weights and operator matrices against outside references."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.interpolate import RBFInterpolator

from engine.nodes.lattice import lattice_operators, symmetric_offsets
from engine.numerics.polynomials import monomial_exponents
from engine.numerics.neighbours import knn_stencils
from engine.numerics.rbffd import operator_matrix, stencil_weights

RNG_SEED = 20261201


def _random_points(n: int, dim: int, seed: int = RNG_SEED) -> np.ndarray:
    return np.random.default_rng(seed).uniform(0.0, 1.0, (n, dim))


def test_identity_weights_equal_scipy_rbfinterpolator() -> None:
    # Reference: scipy.interpolate.RBFInterpolator with kernel='quintic'
    # (which is -r^5; the sign does not change the interpolant), degree=4 and
    # neighbors=n uses the same k-nearest stencil per evaluation point, so its
    # interpolant of the unit vectors e_j gives exactly our "value" weights.
    points = _random_points(300, 2)
    centers = _random_points(40, 2, seed=7) * 0.8 + 0.1
    n = 30
    ours = operator_matrix(points, "value", centers, stencil_size=n, degree=4, phs=5).toarray()
    reference = RBFInterpolator(points, np.eye(len(points)), kernel="quintic", degree=4, neighbors=n)(centers)
    scale = np.max(np.abs(reference))
    np.testing.assert_allclose(ours, reference, rtol=0, atol=1e-9 * scale)


@pytest.mark.parametrize("dim", [2, 3])
def test_derivative_weights_agree_with_treverhines_rbf(dim: int) -> None:
    # Reference: the treverhines-rbf package, rbf.pde.fd.weights (RBF-FD as in
    # Fornberg & Flyer, "A Primer on Radial Basis Functions", SIAM 2015), with
    # the same PHS r^5 kernel, polynomial order given explicitly and the same
    # stencils.
    fd = pytest.importorskip("rbf.pde.fd")
    degree = 4 if dim == 2 else 3
    n = 30 if dim == 2 else 40
    points = _random_points(400, dim, seed=3)
    centers = _random_points(25, dim, seed=5) * 0.6 + 0.2
    stencils = knn_stencils(points, centers, k=n)
    ops: list = []
    for axis in range(dim):
        ops.append(tuple(int(axis == k) for k in range(dim)))
    for i in range(dim):
        for j in range(i, dim):
            alpha = [0] * dim
            alpha[i] += 1
            alpha[j] += 1
            ops.append(tuple(alpha))
    ours = stencil_weights(points, stencils, centers, ops, degree=degree, phs=5)
    for k, alpha in enumerate(ops):
        ref = fd.weights(centers, points[stencils], np.array(alpha), phi="phs5", order=degree)
        scale = np.max(np.abs(ref), axis=1, keepdims=True)
        assert np.max(np.abs(ours[:, :, k] - ref) / scale) < 1e-8, alpha
    # The Laplacian as a sum of the pure second derivatives.
    lap = stencil_weights(points, stencils, centers, ["laplacian"], degree=degree, phs=5)[:, :, 0]
    ref = fd.weights(centers, points[stencils], np.eye(dim, dtype=int) * 2, phi="phs5", order=degree)
    assert np.max(np.abs(lap - ref) / np.max(np.abs(ref), axis=1, keepdims=True)) < 1e-8


def _monomial_derivative(points: np.ndarray, beta: np.ndarray, alpha: tuple[int, ...]) -> np.ndarray:
    """D^alpha x^beta by the power rule (hand calculus)."""
    out = np.ones(len(points))
    for axis, (b, a) in enumerate(zip(beta, alpha)):
        if a > b:
            return np.zeros(len(points))
        coef = 1.0
        for i in range(a):
            coef *= b - i
        out = out * coef * points[:, axis] ** (b - a)
    return out


@pytest.mark.parametrize("dim,degree,n", [(2, 4, 30), (2, 3, 20), (3, 3, 40), (3, 4, 70)])
def test_polynomials_are_differentiated_exactly(dim: int, degree: int, n: int) -> None:
    # Polynomial reproduction: RBF-FD weights with appended monomials of degree
    # l are exact for every polynomial of degree <= l (Flyer et al., J. Comput.
    # Phys. 321 (2016) 21-38). Checked to round-off on random stencils.
    points = _random_points(500, dim, seed=11) * 4.0 - 2.0
    centers = _random_points(30, dim, seed=13) * 2.0 - 1.0
    unit = [tuple(int(axis == k) for k in range(dim)) for axis in range(dim)]
    second = [tuple(2 * int(axis == k) for k in range(dim)) for axis in range(dim)]
    mixed = tuple([1, 1] + [0] * (dim - 2))
    ops = ["value", *unit, *second, mixed, "laplacian"]
    mats = operator_matrix(points, ops, centers, stencil_size=n, degree=degree)
    for beta in monomial_exponents(dim, degree):
        values = np.prod(points ** beta, axis=1)
        for op, mat in zip(ops, mats):
            if op == "laplacian":
                exact = sum(_monomial_derivative(centers, beta, a) for a in second)
            elif op == "value":
                exact = np.prod(centers ** beta, axis=1)
            else:
                exact = _monomial_derivative(centers, beta, op)
            np.testing.assert_allclose(mat @ values, exact, rtol=0, atol=1e-9 * (1 + np.max(np.abs(exact))))


def test_hyperviscosity_is_exact_on_polynomials() -> None:
    # Δ² of x^4 + x^2 y^2 is 24 + 8 = 32 (hand calculus); needs degree >= 4
    # and r^m with m >= 5 (Fornberg & Lehto, J. Comput. Phys. 230 (2011) 2270).
    points = _random_points(400, 2, seed=17)
    centers = _random_points(10, 2, seed=19) * 0.5 + 0.25
    mat = operator_matrix(points, ("hyperviscosity", 2), centers, stencil_size=30, degree=4, phs=5)
    values = points[:, 0] ** 4 + points[:, 0] ** 2 * points[:, 1] ** 2
    np.testing.assert_allclose(mat @ values, 32.0, rtol=1e-8)


# Franke's test function: R. Franke, "A critical comparison of some methods for
# interpolation of scattered data", Naval Postgraduate School report
# NPS-53-79-003 (1979/1982); a standard scattered-data benchmark.
_FRANKE_TERMS = (
    # amplitude, Q(x, y), dQ/dx, dQ/dy, d2Q/dx2, d2Q/dy2 for A * exp(-Q)
    (0.75, lambda x, y: ((9 * x - 2) ** 2 + (9 * y - 2) ** 2) / 4,
     lambda x, y: 9 * (9 * x - 2) / 2, lambda x, y: 9 * (9 * y - 2) / 2, 81 / 2, 81 / 2),
    (0.75, lambda x, y: (9 * x + 1) ** 2 / 49 + (9 * y + 1) / 10,
     lambda x, y: 18 * (9 * x + 1) / 49, lambda x, y: 0 * x + 9 / 10, 162 / 49, 0.0),
    (0.5, lambda x, y: ((9 * x - 7) ** 2 + (9 * y - 3) ** 2) / 4,
     lambda x, y: 9 * (9 * x - 7) / 2, lambda x, y: 9 * (9 * y - 3) / 2, 81 / 2, 81 / 2),
    (-0.2, lambda x, y: (9 * x - 4) ** 2 + (9 * y - 7) ** 2,
     lambda x, y: 18 * (9 * x - 4), lambda x, y: 18 * (9 * y - 7), 162.0, 162.0),
)


def franke(p: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Franke's function, its x-derivative and its Laplacian (hand calculus)."""
    x, y = p[:, 0], p[:, 1]
    f = np.zeros(len(p))
    fx = np.zeros(len(p))
    lap = np.zeros(len(p))
    for amp, q, qx, qy, qxx, qyy in _FRANKE_TERMS:
        e = amp * np.exp(-q(x, y))
        f += e
        fx += -qx(x, y) * e
        lap += (qx(x, y) ** 2 - qxx + qy(x, y) ** 2 - qyy) * e
    return f, fx, lap


def test_franke_derivatives_are_right() -> None:
    # Guard for the hand calculus above: centred differences (common practice).
    p = _random_points(50, 2, seed=23)
    h = 1e-4
    ex, ey = np.array([h, 0.0]), np.array([0.0, h])
    f0, fx, lap = franke(p)
    fd_x = (franke(p + ex)[0] - franke(p - ex)[0]) / (2 * h)
    fd_lap = (franke(p + ex)[0] + franke(p - ex)[0] + franke(p + ey)[0] + franke(p - ey)[0] - 4 * f0) / h**2
    np.testing.assert_allclose(fx, fd_x, atol=1e-6)
    np.testing.assert_allclose(lap, fd_lap, atol=1e-3)


def _franke_errors(h: float) -> tuple[float, float]:
    rng = np.random.default_rng(RNG_SEED)
    g = np.arange(0.0, 1.0 + h / 2, h)
    xx, yy = np.meshgrid(g, g, indexing="ij")
    points = np.stack([xx.ravel(), yy.ravel()], axis=1) + rng.uniform(-h / 4, h / 4, (xx.size, 2))
    inner = np.all((points >= 0.2) & (points <= 0.8), axis=1)
    centers = points[inner]
    dx, lap = operator_matrix(points, [(1, 0), "laplacian"], centers)  # defaults: r^5, l = 4, n = 30
    f, _, _ = franke(points)
    _, fx_exact, lap_exact = franke(centers)
    return float(np.max(np.abs(dx @ f - fx_exact))), float(np.max(np.abs(lap @ f - lap_exact)))


@pytest.mark.slow
def test_franke_convergence_orders() -> None:
    # Expected orders with degree l = 4: l = 4 for first derivatives and
    # l - 1 = 3 for the Laplacian (Flyer et al., J. Comput. Phys. 321 (2016));
    # the requirement is >= 3.0 and >= 2.0 on jittered (+-h/4) nodes.
    hs = [1 / 40, 1 / 80, 1 / 160]
    errors = np.array([_franke_errors(h) for h in hs])
    orders = np.log2(errors[:-1] / errors[1:])
    assert np.all(orders[:, 0] >= 3.0), (errors, orders)
    assert np.all(orders[:, 1] >= 2.0), (errors, orders)


def test_lattice_interior_stencils_share_one_solve_and_match_generic() -> None:
    # On a lattice the symmetric pattern makes every interior stencil a
    # translate: the lattice operator must equal the generic operator built on
    # the same stencil, and be exact on polynomials (Flyer et al. 2016).
    step = np.array([0.7, 1.3])
    ii, jj = np.meshgrid(np.arange(-12, 13), np.arange(-10, 11), indexing="ij")
    idx = np.stack([ii.ravel(), jj.ravel()], axis=1)
    ops = [(1, 0), (0, 1), (2, 0), (1, 1), (0, 2)]
    mats, interior = lattice_operators(idx, step, ops, stencil_size=30)
    pos = idx * step
    assert interior.sum() > 0.5 * len(idx)
    offsets = symmetric_offsets(2, 30)
    centre = int(np.flatnonzero(np.all(idx == 0, axis=1))[0])
    row = mats[2].getrow(centre)
    assert row.nnz == len(offsets)
    for beta in monomial_exponents(2, 4):
        values = np.prod(pos ** beta, axis=1)
        for op, mat in zip(ops, mats):
            exact = _monomial_derivative(pos, beta, op)
            np.testing.assert_allclose(mat @ values, exact, atol=1e-8 * (1 + np.max(np.abs(exact))))


def test_symmetric_offsets_are_symmetric() -> None:
    # The pattern must be closed under sign flips of each axis (common practice
    # for lattice stencils, avoiding the ties of k-nearest selection).
    for dim, size in ((2, 30), (2, 20), (3, 40)):
        off = symmetric_offsets(dim, size)
        as_set = {tuple(o) for o in off}
        for axis in range(dim):
            flipped = off.copy()
            flipped[:, axis] *= -1
            assert {tuple(o) for o in flipped} == as_set
        assert tuple(off[0]) == (0,) * dim


@pytest.mark.parametrize(
    "kwargs,message",
    [
        (dict(points=np.random.default_rng(0).random((50, 2)), op="value", stencil_size=10), "stencil_size"),
        (dict(points=np.c_[np.linspace(0, 1, 40), np.linspace(0, 1, 40)], op="value", stencil_size=30), "degenerate"),
        (dict(points=np.array([[0.0, np.nan]] * 40), op="value"), "NaN"),
        (dict(points=np.random.default_rng(0).random((50, 2)), op="value",
              centers=np.zeros((3, 3))), "centers"),
        (dict(points=np.random.default_rng(0).random((50, 2)), op=(1, 0, 0)), "op"),
        (dict(points=np.random.default_rng(0).random((50, 2)), op="gradient"), "op"),
        (dict(points=np.random.default_rng(0).random((50, 2)), op="value", degree=1, phs=5), "degree"),
        (dict(points=np.random.default_rng(0).random((50, 2)), op="value", phs=4), "phs"),
        (dict(points=np.random.default_rng(0).random((50,)), op="value"), "points"),
        (dict(points=np.random.default_rng(0).random((20, 2)), op="value", stencil_size=40), "stencil_size"),
    ],
)
def test_bad_input_raises_clear_value_error(kwargs: dict, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        operator_matrix(**kwargs)


@pytest.mark.parametrize("step", [(2.0, 2.0), (0.7, 1.3), (2.0, 2.0, 2.0), (0.5, 0.9, 2.5)])
def test_band_stencil_rescaled_from_the_unit_step_equals_a_direct_solve(step: tuple[float, ...]) -> None:
    # Polyharmonic-spline + polynomial RBF-FD weights are scale-covariant
    # (Flyer, Fornberg, Bayona & Barnett, J. Comput. Phys. 321 (2016) 21-38):
    # the rescaled stencil must equal the one solved on the step itself.
    from engine.nodes.band_stencils import _make_band_stencil, band_stencil

    direct = _make_band_stencil(step)
    scaled = band_stencil(step)
    assert np.array_equal(scaled.offsets, direct.offsets) and scaled.labels == direct.labels
    np.testing.assert_allclose(scaled.weights, direct.weights, rtol=1e-9, atol=1e-12 * np.abs(direct.weights).max())
    assert scaled.damping == pytest.approx(direct.damping, rel=1e-9)
    assert scaled.spectral_radius == pytest.approx(direct.spectral_radius, rel=1e-9)
