"""RBF-FD weights and sparse operator matrices.

Polyharmonic splines r^m augmented with all monomials up to degree l on local
stencils: for each stencil x_1..x_n around a centre x_c solve

    [[A, P], [P^T, 0]] [w; λ] = [L r^m(|x - x_j|) at x_c; L p_k at x_c]

with A_ij = |x_i - x_j|^m and P_jk = p_k(x_j), and keep w. Every stencil is
shifted to its centre and scaled by its radius δ before the solve, and the
weights are scaled back by δ^-order. All systems are solved in batches; stencils
that are translates of one another (lattice interiors) share one solve.

References
----------
.. [1] N. Flyer, B. Fornberg, V. Bayona, G. A. Barnett, "On the role of
   polynomials in RBF-FD approximations: I. Interpolation and accuracy",
   J. Comput. Phys. 321 (2016) 21-38.
.. [2] V. Bayona, N. Flyer, B. Fornberg, G. A. Barnett, "On the role of
   polynomials in RBF-FD approximations: II. Numerical solution of elliptic
   PDEs", J. Comput. Phys. 332 (2017) 257-273.
.. [3] B. Fornberg, N. Flyer, "Solving PDEs with radial basis functions",
   Acta Numerica 24 (2015) 215-258.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from numpy.typing import ArrayLike, NDArray

from engine.numerics.kernels import check_phs, phs_derivative, phs_laplacian_power
from engine.numerics.neighbours import knn_stencils
from engine.numerics.polynomials import (
    Terms,
    apply_to_monomials,
    laplacian_power_terms,
    monomial_count,
    monomial_exponents,
)

#: Stencils solved per batched LAPACK call (bounds memory: chunk * (n+M)^2 floats).
SOLVE_CHUNK = 2048


@dataclass(frozen=True)
class Operator:
    """A parsed linear operator: its derivative order and how to apply it."""

    label: str
    order: int
    terms: Terms  # as a sum of D^alpha, for the polynomial part
    laplacian_power: int | None = None  # set for Laplacian / Δ^k (closed-form kernel)

    def on_kernel(self, diff: NDArray[np.floating], phs: int) -> NDArray[np.floating]:
        """Apply the operator to r^phs at displacements ``diff`` (..., d)."""
        if self.laplacian_power is not None:
            return phs_laplacian_power(diff, phs, self.laplacian_power)
        coef, alpha = self.terms[0]
        return coef * phs_derivative(diff, phs, alpha)


def parse_operator(op: object, dim: int) -> Operator:
    """Turn a user operator spec into an :class:`Operator`.

    Accepted: ``"value"``; a derivative multi-index such as ``(1, 0)`` or
    ``(0, 2)`` of length ``dim`` and total order <= 2; ``"laplacian"``;
    ``("hyperviscosity", k)`` for Δ^k with k >= 1.
    """
    if isinstance(op, str):
        if op == "value":
            return Operator("value", 0, ((1.0, (0,) * dim),))
        if op == "laplacian":
            return Operator("laplacian", 2, laplacian_power_terms(dim, 1), laplacian_power=1)
        raise ValueError(f"op: unknown operator name {op!r}; use 'value', 'laplacian', "
                         "a derivative multi-index, or ('hyperviscosity', k)")
    if isinstance(op, tuple) and len(op) == 2 and op[0] == "hyperviscosity":
        k = op[1]
        if not isinstance(k, (int, np.integer)) or k < 1:
            raise ValueError(f"op: hyperviscosity power must be an integer >= 1, got {k!r}")
        return Operator(f"laplacian^{k}", 2 * k, laplacian_power_terms(dim, int(k)),
                        laplacian_power=int(k))
    if isinstance(op, tuple) and all(isinstance(a, (int, np.integer)) for a in op):
        if len(op) != dim:
            raise ValueError(f"op: multi-index {op} has length {len(op)} but points are {dim}-D")
        if any(a < 0 for a in op) or sum(op) > 2:
            raise ValueError(f"op: multi-index {op} must be non-negative with total order <= 2")
        alpha = tuple(int(a) for a in op)
        return Operator(str(alpha), sum(alpha), ((1.0, alpha),))
    raise ValueError(f"op: cannot interpret {op!r} as an operator")


def check_degree(degree: int, phs: int, operators: Sequence[Operator]) -> None:
    """Validate the polynomial degree against the kernel and the operators."""
    check_phs(phs)
    if not isinstance(degree, (int, np.integer)) or degree < 0:
        raise ValueError(f"degree must be a non-negative integer, got {degree!r}")
    if degree < (phs - 1) // 2:
        raise ValueError(f"degree={degree} is too low for r^{phs}: need degree >= {(phs - 1) // 2}")
    top = max(op.order for op in operators)
    if degree < top:
        raise ValueError(f"degree={degree} cannot reproduce an operator of order {top}")
    for op in operators:
        if op.order >= phs:
            raise ValueError(f"phs={phs} is too low for {op.label} (order {op.order}); "
                             f"use phs >= {op.order + 1}")


def scaled_weights(
    xs: NDArray[np.floating], operators: Sequence[Operator], *, degree: int, phs: int
) -> NDArray[np.floating]:
    """Weights for stencils already shifted to their centre and scaled to unit radius.

    Parameters
    ----------
    xs : (S, n, d) array
        Stencil nodes relative to the evaluation point, divided by the radius.

    Returns
    -------
    (S, n, K) array of weights, one column per operator.
    """
    s_count, n, dim = xs.shape
    exps = monomial_exponents(dim, degree)
    m = exps.shape[0]
    origin = np.zeros((1, dim))
    poly_rhs = np.stack([apply_to_monomials(origin, exps, op.terms)[0] for op in operators], axis=1)
    out = np.empty((s_count, n, len(operators)))
    for start in range(0, s_count, SOLVE_CHUNK):
        x = xs[start:start + SOLVE_CHUNK]
        c = x.shape[0]
        diff = x[:, :, None, :] - x[:, None, :, :]
        a = np.sqrt(np.einsum("sijd,sijd->sij", diff, diff))
        off_diag_min = np.min(a + np.eye(n)[None] * 1e300, axis=(1, 2))
        if np.any(off_diag_min <= 1e-12):
            bad = start + int(np.argmax(off_diag_min <= 1e-12))
            raise ValueError(f"points: stencil {bad} contains duplicate nodes")
        p = apply_to_monomials(x, exps, ((1.0, (0,) * dim),))
        sv = np.linalg.svd(p, compute_uv=False)
        degenerate = sv[:, -1] <= 1e-10 * sv[:, 0]
        if np.any(degenerate):
            bad = start + int(np.argmax(degenerate))
            raise ValueError(
                f"points: stencil {bad} is degenerate for polynomial degree {degree} "
                "(its nodes are collinear/coplanar or too few); use more or better-spread nodes"
            )
        system = np.zeros((c, n + m, n + m))
        system[:, :n, :n] = a**phs
        system[:, :n, n:] = p
        system[:, n:, :n] = np.transpose(p, (0, 2, 1))
        rhs = np.empty((c, n + m, len(operators)))
        minus_x = -x
        for k, op in enumerate(operators):
            rhs[:, :n, k] = op.on_kernel(minus_x, phs)
        rhs[:, n:, :] = poly_rhs[None]
        out[start:start + c] = np.linalg.solve(system, rhs)[:, :n, :]
    return out


def stencil_weights(
    points: NDArray[np.floating],
    stencils: NDArray[np.integer],
    centers: NDArray[np.floating],
    ops: Sequence[object],
    *,
    degree: int = 4,
    phs: int = 5,
) -> NDArray[np.floating]:
    """RBF-FD weights of several operators on given stencils.

    Parameters
    ----------
    points : (N, d) array of node coordinates.
    stencils : (S, n) int array of node indices per stencil.
    centers : (S, d) array, where each stencil's operators are evaluated.
    ops : sequence of operator specs (see :func:`parse_operator`).

    Returns
    -------
    (S, n, K) array; weights[s, :, k] applied to values at points[stencils[s]]
    approximates ops[k] at centers[s]. Translated copies of one stencil shape
    share a single solve.
    """
    dim = points.shape[1]
    operators = [parse_operator(op, dim) for op in ops]
    check_degree(degree, phs, operators)
    n = stencils.shape[1]
    if n < monomial_count(dim, degree):
        raise ValueError(f"stencil_size={n} is smaller than the {monomial_count(dim, degree)} "
                         f"monomials of degree {degree} in {dim}-D")
    rel = points[stencils] - centers[:, None, :]
    radius = np.sqrt(np.max(np.einsum("snd,snd->sn", rel, rel), axis=1))
    if np.any(radius <= 0):
        raise ValueError("points: a stencil has zero radius (all nodes at its centre)")
    xs = rel / radius[:, None, None]
    # Translates (lattice interiors) have identical scaled stencils: solve once.
    key = np.round(xs.reshape(len(xs), -1) * 2**30).astype(np.int64)
    unique_keys, first, inverse = np.unique(key, axis=0, return_index=True, return_inverse=True)
    unique_weights = scaled_weights(xs[first], operators, degree=degree, phs=phs)
    weights = unique_weights[inverse.reshape(-1)]
    orders = np.array([op.order for op in operators], dtype=float)
    return weights / radius[:, None, None] ** orders[None, None, :]


def validate_points(points: ArrayLike, name: str = "points") -> NDArray[np.floating]:
    """Return ``points`` as a finite (N, d) float array or raise ``ValueError``."""
    arr = np.asarray(points, dtype=float)
    if arr.ndim != 2 or arr.shape[0] == 0 or arr.shape[1] < 1:
        raise ValueError(f"{name} must be a non-empty (N, d) array, got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} contains NaN or infinite coordinates")
    return arr


def assemble(stencils: NDArray[np.integer], weights: NDArray[np.floating],
             n_columns: int) -> sp.csr_matrix:
    """Sparse matrix with row s holding ``weights[s]`` at columns ``stencils[s]``."""
    s_count, n = stencils.shape
    indptr = np.arange(0, s_count * n + 1, n, dtype=np.int64)
    return sp.csr_matrix((weights.reshape(-1), stencils.reshape(-1).astype(np.int64), indptr),
                         shape=(s_count, n_columns))


def operator_matrix(
    points: ArrayLike,
    op: object,
    centers: ArrayLike | None = None,
    *,
    stencil_size: int | None = None,
    degree: int = 4,
    phs: int = 5,
) -> sp.csr_matrix | list[sp.csr_matrix]:
    """Sparse RBF-FD matrix approximating ``op`` at ``centers`` from values at ``points``.

    Parameters
    ----------
    points : (N, d) array_like
        Node coordinates (any units; derivatives are per that unit).
    op : operator spec or list of specs
        ``"value"`` (interpolation), a derivative multi-index such as
        ``(1, 0)`` or ``(0, 2)``, ``"laplacian"``, or ``("hyperviscosity", k)``
        for Δ^k. A list gives one matrix per operator from one shared solve.
    centers : (C, d) array_like, optional
        Where to evaluate; defaults to ``points``.
    stencil_size : int, optional
        Nodes per stencil (k nearest to each centre). Default 2M, M being the
        number of monomials of degree ``degree``.
    degree : int, default 4
        Highest total degree of the appended polynomials (accuracy O(h^(l+1-k))
        for a k-th derivative).
    phs : int, default 5
        Odd exponent m of the polyharmonic spline r^m.

    Returns
    -------
    scipy.sparse.csr_matrix of shape (C, N), or a list of them if ``op`` is a list.

    References
    ----------
    Flyer, Fornberg, Bayona & Barnett, J. Comput. Phys. 321 (2016) 21-38.
    """
    pts = validate_points(points, "points")
    ctr = pts if centers is None else validate_points(centers, "centers")
    if ctr.shape[1] != pts.shape[1]:
        raise ValueError(f"centers are {ctr.shape[1]}-D but points are {pts.shape[1]}-D")
    ops = list(op) if isinstance(op, list) else [op]
    if not ops:
        raise ValueError("op: the operator list is empty")
    dim = pts.shape[1]
    if stencil_size is None:
        stencil_size = 2 * monomial_count(dim, degree)
    if not isinstance(stencil_size, (int, np.integer)) or stencil_size < 1:
        raise ValueError(f"stencil_size must be a positive integer, got {stencil_size!r}")
    stencil_size = int(stencil_size)
    if stencil_size > len(pts):
        raise ValueError(f"stencil_size={stencil_size} exceeds the number of points ({len(pts)})")
    stencils = knn_stencils(pts, ctr, k=stencil_size)
    weights = stencil_weights(pts, stencils, ctr, ops, degree=degree, phs=phs)
    mats = [assemble(stencils, weights[:, :, k], len(pts)) for k in range(len(ops))]
    return mats if isinstance(op, list) else mats[0]
