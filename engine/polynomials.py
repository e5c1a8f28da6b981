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
