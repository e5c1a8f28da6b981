"""Monomial bases and their derivatives for RBF-FD polynomial augmentation.

The polynomial part of an RBF-FD stencil makes the weights exact for every
polynomial up to a chosen degree l, which sets the order of accuracy
(Flyer, Fornberg, Bayona & Barnett, J. Comput. Phys. 321 (2016) 21-38).
"""

from __future__ import annotations

import itertools
from functools import lru_cache
from math import comb

import numpy as np
from numpy.typing import NDArray

#: A linear differential operator as a sum of terms coefficient * D^alpha.
Terms = tuple[tuple[float, tuple[int, ...]], ...]


@lru_cache(maxsize=64)
def monomial_exponents(dim: int, degree: int) -> NDArray[np.int64]:
    """Exponents of all monomials in ``dim`` variables of total degree <= ``degree``.

    Returned as an ``(M, dim)`` integer array ordered by total degree, then
    lexicographically; ``M = C(degree + dim, dim)``.
    """
    if dim < 1:
        raise ValueError(f"dim must be >= 1, got {dim}")
    if degree < 0:
        raise ValueError(f"degree must be >= 0, got {degree}")
    rows = [
        alpha
        for total in range(degree + 1)
        for alpha in sorted(
            (a for a in itertools.product(range(total + 1), repeat=dim) if sum(a) == total),
            reverse=True,
        )
    ]
    out = np.array(rows, dtype=np.int64).reshape(-1, dim)
    out.setflags(write=False)
    return out


def monomial_count(dim: int, degree: int) -> int:
    """Number of monomials of total degree <= ``degree`` in ``dim`` variables."""
    return comb(degree + dim, dim)


def laplacian_power_terms(dim: int, k: int) -> Terms:
    """Expand Δ^k in ``dim`` variables as multinomial terms c * D^alpha."""
    terms: dict[tuple[int, ...], float] = {}
    for split in itertools.product(range(k + 1), repeat=dim):
        if sum(split) != k:
            continue
        coef = float(np.prod([comb(k - sum(split[:i]), split[i]) for i in range(dim)]))
        alpha = tuple(2 * s for s in split)
        terms[alpha] = terms.get(alpha, 0.0) + coef
    return tuple((c, a) for a, c in sorted(terms.items()))


def apply_to_monomials(
    points: NDArray[np.floating], exponents: NDArray[np.int64], terms: Terms
) -> NDArray[np.floating]:
    """Apply the operator ``terms`` to every monomial at every point.

    Parameters
    ----------
    points : (..., d) array
        Evaluation points (already shifted and scaled).
    exponents : (M, d) int array
        Monomial exponents from :func:`monomial_exponents`.
    terms : sequence of (coefficient, alpha)
        The operator as a sum of partial derivatives D^alpha.

    Returns
    -------
    (..., M) array of L x^beta evaluated at ``points``.
    """
    points = np.asarray(points, dtype=float)
    out = np.zeros(points.shape[:-1] + (exponents.shape[0],))
    for coef, alpha in terms:
        alpha_arr = np.asarray(alpha, dtype=np.int64)
        reduced = exponents - alpha_arr
        valid = np.all(reduced >= 0, axis=1)
        if not np.any(valid):
            continue
        # falling factorial beta!/(beta-alpha)! per monomial
        factor = np.ones(exponents.shape[0])
        for axis, a in enumerate(alpha):
            for i in range(a):
                factor = factor * np.clip(exponents[:, axis] - i, 0, None)
        powers = np.ones(points.shape[:-1] + (exponents.shape[0],))
        for axis in range(exponents.shape[1]):
            e = np.clip(reduced[:, axis], 0, None)
            powers = powers * points[..., axis, None] ** e
        out += coef * np.where(valid, factor * powers, 0.0)
    return out


def monomial_table(
    points: NDArray[np.floating], exponents: NDArray[np.int64], order: int = 0
) -> tuple[NDArray[np.floating], NDArray[np.floating] | None, NDArray[np.floating] | None]:
    """All monomials at ``points`` with their gradients and Hessians, from power tables.

    Returns value (Q, M), gradient (Q, M, d) if ``order >= 1`` and Hessian
    (Q, M, d, d) if ``order >= 2``.
    """
    q, dim = points.shape
    top = int(exponents.max()) if exponents.size else 0
    powers = np.empty((q, dim, top + 1))
    powers[:, :, 0] = 1.0
    for k in range(1, top + 1):
        powers[:, :, k] = powers[:, :, k - 1] * points

    def factor(axis: int, shift: int) -> NDArray[np.floating]:
        e = exponents[:, axis] - shift
        coef = np.ones(len(e))
        for i in range(shift):
            coef = coef * (exponents[:, axis] - i)
        return np.where(e >= 0, coef, 0.0)[None, :] * powers[:, axis, np.clip(e, 0, None)]

    base = [factor(a, 0) for a in range(dim)]
    value = base[0]
    for a in range(1, dim):
        value = value * base[a]
    grad = hess = None
    if order >= 1:
        first = [factor(a, 1) for a in range(dim)]
        grad = np.empty((q, len(exponents), dim))
        for i in range(dim):
            term = first[i]
            for a in range(dim):
                if a != i:
                    term = term * base[a]
            grad[:, :, i] = term
    if order >= 2:
        second = [factor(a, 2) for a in range(dim)]
        hess = np.empty((q, len(exponents), dim, dim))
        for i in range(dim):
            for j in range(i, dim):
                if i == j:
                    term = second[i]
                    others = [a for a in range(dim) if a != i]
                else:
                    term = first[i] * first[j]
                    others = [a for a in range(dim) if a not in (i, j)]
                for a in others:
                    term = term * base[a]
                hess[:, :, i, j] = term
                hess[:, :, j, i] = term
    return value, grad, hess
