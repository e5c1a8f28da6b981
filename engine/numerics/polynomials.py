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


def monomial_values(points: NDArray[np.floating], exponents: NDArray[np.int64]) -> NDArray[np.floating]:
    """Every monomial at every point, ``(..., M)``, for ``points`` (..., d).

    Each monomial is a lower one (in the order of :func:`monomial_exponents`)
    times one coordinate, so the table takes one product per monomial.
    """
    pts = np.asarray(points, dtype=float)
    parent, axis = _monomial_chain(exponents)
    flat = pts.reshape(-1, pts.shape[-1])
    cols = np.empty((len(exponents), len(flat)))
    coords = np.ascontiguousarray(flat.T)
    for j in range(len(exponents)):
        if parent[j] < 0:
            cols[j] = 1.0
        else:
            np.multiply(cols[parent[j]], coords[axis[j]], out=cols[j])
    return cols.T.reshape(pts.shape[:-1] + (len(exponents),))


def _monomial_chain(exponents: NDArray[np.int64]) -> tuple[tuple[int, ...], tuple[int, ...]]:
    """For each monomial, a monomial one degree lower and the axis that raises it (-1 for the constant).

    Cached per exponent set: evaluating an interpolant at a few points (as
    Newton's fallback iterations do) otherwise spends most of its time here.
    """
    exps = np.ascontiguousarray(exponents, dtype=np.int64)
    return _monomial_chain_of(exps.shape[1] if exps.ndim == 2 else 0, exps.tobytes())


@lru_cache(maxsize=64)
def _monomial_chain_of(dim: int, raw: bytes) -> tuple[tuple[int, ...], tuple[int, ...]]:
    exponents = np.frombuffer(raw, dtype=np.int64).reshape(-1, dim) if dim else np.zeros((0, 0), dtype=np.int64)
    rows = {tuple(int(v) for v in e): j for j, e in enumerate(exponents)}
    parent, axis = [], []
    for e in exponents:
        if not np.any(e):
            parent.append(-1)
            axis.append(-1)
            continue
        a = int(np.flatnonzero(e)[-1])
        lower = tuple(int(v) - (i == a) for i, v in enumerate(e))
        if lower not in rows:
            raise ValueError("exponents: every monomial's lower neighbour must be in the set (a full degree set)")
        parent.append(rows[lower])
        axis.append(a)
    return tuple(parent), tuple(axis)


def monomial_table(
    points: NDArray[np.floating], exponents: NDArray[np.int64], order: int = 0
) -> tuple[NDArray[np.floating], NDArray[np.floating] | None, NDArray[np.floating] | None]:
    """All monomials at ``points`` with their gradients and Hessians, from power tables.

    Returns value (Q, M), gradient (Q, M, d) if ``order >= 1`` and Hessian
    (Q, M, d, d) if ``order >= 2``.
    """
    q, dim = points.shape
    m = len(exponents)
    top = int(exponents.max()) if exponents.size else 0
    # powers[s, a, q] = x_a^s, so one gather per derivative order takes every axis at once
    powers = np.empty((top + 1, dim, q))
    powers[0] = 1.0
    coords = np.ascontiguousarray(points.T)
    for k in range(1, top + 1):
        np.multiply(powers[k - 1], coords, out=powers[k])
    axes = np.arange(dim)[:, None]

    def factor(shift: int) -> NDArray[np.floating]:
        """d^shift/dx_a^shift of x_a^e_a per axis and monomial: (d, M, Q)."""
        e = exponents.T - shift  # (d, M)
        coef = np.ones(e.shape)
        for i in range(shift):
            coef = coef * (exponents.T - i)
        coef = np.where(e >= 0, coef, 0.0)
        return coef[:, :, None] * powers[np.clip(e, 0, None), axes]

    def product(parts: list[NDArray[np.floating]]) -> NDArray[np.floating]:
        out = parts[0]
        for p in parts[1:]:
            out = out * p
        return out

    base = factor(0)
    value = product([base[a] for a in range(dim)]).T
    grad = hess = None
    if order >= 1:
        first = factor(1)
        grad = np.empty((q, m, dim))
        for i in range(dim):
            grad[:, :, i] = product([first[i]] + [base[a] for a in range(dim) if a != i]).T
    if order >= 2:
        second = factor(2)
        hess = np.empty((q, m, dim, dim))
        for i in range(dim):
            for j in range(i, dim):
                if i == j:
                    parts = [second[i]] + [base[a] for a in range(dim) if a != i]
                else:
                    parts = [first[i], first[j]] + [base[a] for a in range(dim) if a not in (i, j)]
                term = product(parts).T
                hess[:, :, i, j] = term
                hess[:, :, j, i] = term
    return value, grad, hess


def derivative_shift(exponents: NDArray[np.int64], alpha: tuple[int, ...]) -> tuple[NDArray[np.int64], NDArray[np.floating]]:
    """D^alpha of a polynomial in the monomial basis, as a gather: ``(D^alpha p)_j = coef_j * p[source_j]``.

    D^alpha x^(e + alpha) = (e + alpha)! / e! x^e, so the coefficient of
    monomial j after differentiation is that of monomial e_j + alpha (if it
    is in the set, else 0) times the falling factorial. ``source`` points at
    that monomial (0 where there is none, with ``coef`` 0).
    """
    return _derivative_shift(exponents.tobytes(), exponents.shape, tuple(int(a) for a in alpha))


@lru_cache(maxsize=256)
def _derivative_shift(key: bytes, shape: tuple[int, int], alpha: tuple[int, ...]
                      ) -> tuple[NDArray[np.int64], NDArray[np.floating]]:
    exponents = np.frombuffer(key, dtype=np.int64).reshape(shape)
    rows = {tuple(int(v) for v in e): j for j, e in enumerate(exponents)}
    source = np.zeros(len(exponents), dtype=np.int64)
    coef = np.zeros(len(exponents))
    for j, e in enumerate(exponents):
        raised = tuple(int(v) + a for v, a in zip(e, alpha))
        if raised in rows:
            source[j] = rows[raised]
            c = 1.0
            for v, a in zip(raised, alpha):
                for i in range(a):
                    c *= v - i
            coef[j] = c
    source.setflags(write=False)
    coef.setflags(write=False)
    return source, coef
