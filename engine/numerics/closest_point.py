"""Closest points on the zero level set of a local RBF interpolant, and signed distances.

For each query point x the closest point y on {φ = 0} is a stationary point
of the Lagrangian ½|y − x|² + λ φ(y). Newton's method on
F(y, λ) = (y − x + λ∇φ(y), φ(y)) with Jacobian [[I + λH, ∇φ], [∇φᵀ, 0]]
converges in a handful of iterations from a start on or near the zero set,
all query points in one batch. Steps are limited to a trust radius; points
where Newton does not converge fall back to the gradient projection of Chopp
(δ1 = −φ∇φ/|∇φ|², δ2 = (x0 − x) − [(x0 − x)·∇φ/|∇φ|²]∇φ; δ2 damped by the
curvature so that it also converges far from the zero set) and are reported.

References
----------
.. [1] R. I. Saye, "High-order methods for computing distances to implicitly
   defined surfaces", Commun. Appl. Math. Comput. Sci. 9(1) (2014) 107-141.
.. [2] D. L. Chopp, "Some improvements of the fast marching method",
   SIAM J. Sci. Comput. 23(1) (2001) 230-244.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from engine.numerics.interpolant import LocalInterpolant
from engine.numerics.rbffd import validate_points


@dataclass(frozen=True)
class ClosestPoints:
    """Result of a batched closest-point search."""

    points: NDArray[np.floating]  # (Q, d) closest points on the zero set
    distance: NDArray[np.floating]  # (Q,) unsigned distance |x − y|
    converged: NDArray[np.bool_]  # (Q,) Newton met the tolerance
    iterations: int


def chopp_projection(
    interp: LocalInterpolant, coeffs: NDArray[np.floating], start: NDArray[np.floating], *, steps: int = 3
) -> NDArray[np.floating]:
    """Move points onto the zero set along the gradient: y ← y − φ∇φ/|∇φ|² (Chopp 2001, δ1)."""
    y = start.copy()
    for _ in range(steps):
        value, grad, _ = interp.evaluate(y, coeffs, order=1)
        g2 = np.maximum(np.einsum("qd,qd->q", grad, grad), 1e-300)
        y -= (value / g2)[:, None] * grad
    return y


def closest_points(
    interp: LocalInterpolant,
    coeffs: NDArray[np.floating],
    query: ArrayLike,
    *,
    start: ArrayLike | None = None,
    tol: float | None = None,
    max_iter: int = 12,
    trust: float | None = None,
) -> ClosestPoints:
    """Closest points on {φ = 0} of the interpolant, by Newton on the Lagrangian (Saye 2014).

    Parameters
    ----------
    interp, coeffs : the interpolant and its coefficients for the current φ.
    query : (Q, d) points (same units as the interpolant's nodes).
    start : (Q, d) initial guesses on or near the zero set (e.g. the nearest
        contour vertex). Default: a few gradient projections from ``query``.
    tol : step size below which a point has converged; default 1e-8 × the
        typical stencil radius (Newton converges quadratically, so the
        distance is then accurate far below that).
    max_iter : Newton iterations at most.
    trust : largest allowed step per iteration; default half a stencil radius.

    References
    ----------
    Saye, Commun. Appl. Math. Comput. Sci. 9(1) (2014) 107-141.
    """
    x = validate_points(query, "query")
    if x.shape[1] != interp.points.shape[1]:
        raise ValueError(f"query must be (Q, {interp.points.shape[1]}) like the nodes, got shape {x.shape}")
    expected = (len(interp.stencils), interp.inverses.shape[1])
    if np.shape(coeffs) != expected:
        raise ValueError(f"coeffs must have shape {expected} (from interp.coefficients), got {np.shape(coeffs)}")
    scale = float(np.median(interp.radius))
    tol = 1e-8 * scale if tol is None else float(tol)
    trust = 0.5 * scale if trust is None else float(trust)
    if start is None:
        y = chopp_projection(interp, coeffs, x)
    else:
        y = validate_points(start, "start").copy()
        if y.shape != x.shape:
            raise ValueError(f"start must have the shape of query {x.shape}, got {y.shape}")
    dim = x.shape[1]
    value, grad, hess = interp.evaluate(y, coeffs)
    g2 = np.maximum(np.einsum("qd,qd->q", grad, grad), 1e-300)
    lam = np.einsum("qd,qd->q", x - y, grad) / g2
    active = np.ones(len(x), dtype=bool)
    converged = np.zeros(len(x), dtype=bool)
    iterations = 0  # Newton steps taken (by the slowest point)
    eye = np.eye(dim)[None]
    for iteration in range(max_iter):
        ia = np.flatnonzero(active)
        if len(ia) == 0:
            break
        iterations += 1
        ya, la, ga, ha, va = y[ia], lam[ia], grad[ia], hess[ia], value[ia]
        jac = np.zeros((len(ia), dim + 1, dim + 1))
        jac[:, :dim, :dim] = eye + la[:, None, None] * ha
        jac[:, :dim, dim] = ga
        jac[:, dim, :dim] = ga
        res = np.concatenate([ya - x[ia] + la[:, None] * ga, va[:, None]], axis=1)
        det_ok = np.abs(np.linalg.det(jac)) > 1e-14
        step = np.zeros_like(res)
        if np.any(det_ok):
            step[det_ok] = np.linalg.solve(jac[det_ok], -res[det_ok][..., None])[..., 0]
        if np.any(~det_ok):  # singular Jacobian: one Chopp gradient projection step instead
            bad = ~det_ok
            gb2 = np.maximum(np.einsum("qd,qd->q", ga[bad], ga[bad]), 1e-300)
            step[bad, :dim] = -(va[bad] / gb2)[:, None] * ga[bad]
        dy = step[:, :dim]
        norm = np.sqrt(np.einsum("qd,qd->q", dy, dy))
        shrink = np.minimum(1.0, trust / np.maximum(norm, 1e-300))
        y[ia] = ya + dy * shrink[:, None]
        lam[ia] = la + step[:, dim] * shrink
        done = norm < tol
        converged[ia[done]] = True
        active[ia[done]] = False
        going = ia[~done]  # (a converged point's φ and derivatives are not read again, nor any after the last step)
        if len(going) and iteration + 1 < max_iter:
            value[going], grad[going], hess[going] = interp.evaluate(y[going], coeffs)
    still = np.flatnonzero(~converged)
    if len(still):
        y[still] = _chopp_fallback(interp, coeffs, x[still], y[still], trust=trust, tol=tol)
    dist = np.sqrt(np.einsum("qd,qd->q", y - x, y - x))
    return ClosestPoints(y, dist, converged, iterations)


def _chopp_fallback(
    interp: LocalInterpolant, coeffs: NDArray[np.floating], x: NDArray[np.floating],
    y: NDArray[np.floating], *, trust: float, tol: float, iterations: int = 30
) -> NDArray[np.floating]:
    """Chopp's alternating projection: onto the zero set, then orthogonal to ∇φ toward x.

    Undamped, the tangential step multiplies the tangential error by −Dκ
    (D the distance of x along the normal, κ the curvature), so it diverges
    where |D| exceeds the radius of curvature (far points, medial axis). It is
    therefore scaled by 1 / (1 + |D| ‖H‖ / |∇φ|) (‖H‖/|∇φ| bounds every
    curvature), which makes it a contraction toward the nearest minimum of
    the distance, and both steps are limited to ``trust``. A point stops
    iterating once it moves less than ``tol``; three final projections onto
    the zero set follow for every point.
    """
    y = y.copy()
    moving = np.arange(len(y))
    for _ in range(iterations):
        if len(moving) == 0:
            break
        ym, xm = y[moving], x[moving]
        value, grad, hess = interp.evaluate(ym, coeffs)
        g2 = np.maximum(np.einsum("qd,qd->q", grad, grad), 1e-300)
        y0 = ym + _limit(-(value / g2)[:, None] * grad, trust)
        v = xm - y0
        along = np.einsum("qd,qd->q", v, grad)
        d2 = v - (along / g2)[:, None] * grad
        bound = _spectral_norm(hess) / g2
        new = y0 + _limit(d2 / (1.0 + np.abs(along) * bound)[:, None], trust)
        y[moving] = new
        moved = np.sqrt(np.einsum("qd,qd->q", new - ym, new - ym))
        moving = moving[moved >= tol]
    for _ in range(3):  # final projections onto the zero set
        value, grad, _ = interp.evaluate(y, coeffs, order=1)
        g2 = np.maximum(np.einsum("qd,qd->q", grad, grad), 1e-300)
        y = y + _limit(-(value / g2)[:, None] * grad, trust)
    return y


def _spectral_norm(hess: NDArray[np.floating]) -> NDArray[np.floating]:
    """‖H‖₂ of symmetric matrices (Q, d, d): the largest |eigenvalue| (closed form in 2-D)."""
    if hess.shape[1] == 2:
        half_trace = 0.5 * (hess[:, 0, 0] + hess[:, 1, 1])
        radius = np.hypot(0.5 * (hess[:, 0, 0] - hess[:, 1, 1]), hess[:, 0, 1])
        return np.abs(half_trace) + radius
    return np.max(np.abs(np.linalg.eigvalsh(hess)), axis=1)


def _limit(step: NDArray[np.floating], trust: float) -> NDArray[np.floating]:
    """Scale the rows of ``step`` down to length ``trust`` at most."""
    norm = np.sqrt(np.einsum("qd,qd->q", step, step))
    return step * np.minimum(1.0, trust / np.maximum(norm, 1e-300))[:, None]


def signed_distance(
    interp: LocalInterpolant,
    coeffs: NDArray[np.floating],
    query: ArrayLike,
    *,
    sign_values: ArrayLike | None = None,
    start: ArrayLike | None = None,
    **newton: float,
) -> tuple[NDArray[np.floating], ClosestPoints]:
    """Signed distance of ``query`` to {φ = 0}: negative where φ < 0.

    ``sign_values`` gives φ at the query points when known (node values);
    otherwise the interpolant is evaluated there.
    """
    x = validate_points(query, "query")
    if sign_values is not None and np.shape(sign_values) != (len(x),):
        raise ValueError(f"sign_values must have shape ({len(x)},) to match query, got {np.shape(sign_values)}")
    cp = closest_points(interp, coeffs, x, start=start, **newton)
    if sign_values is None:
        sign_values, _, _ = interp.evaluate(x, coeffs, order=0)
    s = np.where(np.asarray(sign_values) < 0, -1.0, 1.0)
    return s * cp.distance, cp
