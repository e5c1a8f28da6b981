"""Local RBF interpolant: value, gradient and Hessian of φ at arbitrary points.

Each node carries the PHS + polynomial interpolant of its own stencil (the
same stencils the RBF-FD operators use); a query point is served by the
interpolant of its nearest node. The interpolation matrices depend only on
geometry: their inverses are computed once per node set (once in all for the
translated interior stencils of a lattice), so refreshing the coefficients
after φ changes is a single batched matrix product, and evaluating needs no
solve at all.

References
----------
.. [1] N. Flyer, B. Fornberg, V. Bayona, G. A. Barnett, "On the role of
   polynomials in RBF-FD approximations: I. Interpolation and accuracy",
   J. Comput. Phys. 321 (2016) 21-38.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree

from engine.numerics.kernels import check_phs
from engine.numerics.polynomials import (
    derivative_shift,
    monomial_count,
    monomial_exponents,
    monomial_values,
)
from engine.numerics.rbffd import SOLVE_CHUNK, validate_points

#: Entries of the systems and right-hand sides solved per batched call (cache-sized chunks).
_CHUNK_ENTRIES = 3_000_000


@dataclass(frozen=True)
class LocalInterpolant:
    """Per-node local interpolants on a fixed node set (geometry only)."""

    points: NDArray[np.floating]  # (N, d) node coordinates (mm)
    owner_nodes: NDArray[np.int64]  # (U,) nodes that carry an interpolant
    stencils: NDArray[np.int64]  # (U, n) node indices of each owner's stencil
    radius: NDArray[np.floating]  # (U,) stencil radius used for scaling
    scaled: NDArray[np.floating]  # (U, n, d) stencil nodes relative to owner / radius
    inverse_index: NDArray[np.int64]  # (U,) row of `inverses` serving each owner
    inverses: NDArray[np.floating]  # (U, n + M, n): stencil values -> [alpha; beta]
    exponents: NDArray[np.int64]  # (M, d)
    phs: int
    lattice: tuple | None = None  # (step, LatticeLookup of owner indices) for O(1) owner search

    @cached_property
    def tree(self) -> cKDTree:
        """k-d tree of the owners (built on first use: lattice owners are found by rounding)."""
        return cKDTree(self.points[self.owner_nodes])

    @classmethod
    def build(
        cls, points: ArrayLike, stencils: ArrayLike, *, owners: ArrayLike | None = None,
        degree: int = 4, phs: int = 5, translates: bool = False,
        lattice_step: ArrayLike | None = None, lattice_indices: ArrayLike | None = None,
    ) -> "LocalInterpolant":
        """Factor the interpolation systems of the owners' stencils.

        ``stencils[u]`` lists the nodes of owner u's stencil; ``owners`` are
        the node indices carrying an interpolant (default: every node, with
        ``stencils`` of shape (N, n)). Query points are served by the nearest
        owner. Translated copies of a stencil shape share one inverse;
        ``translates=True`` declares that all stencils are translates of the
        first (lattice interiors) and skips the search for distinct shapes.
        With ``lattice_step`` and ``lattice_indices`` (the nodes' integer
        lattice indices) the nearest owner is found by rounding instead of a
        tree search.
        """
        pts = validate_points(points)
        st = np.asarray(stencils, dtype=np.int64)
        own = np.arange(len(pts)) if owners is None else np.asarray(owners, dtype=np.int64)
        check_phs(phs)
        dim = pts.shape[1]
        m = monomial_count(dim, degree)
        if st.ndim != 2 or st.shape[0] != len(own):
            raise ValueError(f"stencils must be (U, n) with U = {len(own)} owners, got shape {st.shape}")
        if len(own) == 0:
            raise ValueError("owners: no node carries an interpolant")
        if st.shape[1] < m:
            raise ValueError(f"stencil_size={st.shape[1]} is smaller than the {m} monomials of degree {degree}")
        if degree < (phs - 1) // 2:
            raise ValueError(f"degree={degree} is too low for r^{phs}")
        # translates share one shape: work it out once (a read-only broadcast serves every owner)
        rel = pts[st[:1]] - pts[own[:1]][:, None, :] if translates else pts[st] - pts[own][:, None, :]
        radius = np.sqrt(np.max(np.einsum("snd,snd->sn", rel, rel), axis=1))
        if np.any(radius <= 0):
            raise ValueError("points: a stencil has zero radius")
        scaled = rel / radius[:, None, None]
        if translates:
            radius = np.broadcast_to(radius, (len(st),))
            scaled = np.broadcast_to(scaled, (len(st),) + scaled.shape[1:])
            first = np.zeros(1, dtype=np.int64)
            inverse_index = np.zeros(len(st), dtype=np.int64)
        else:
            key = np.round(scaled.reshape(len(st), -1) * 2**30).astype(np.int64)
            _, first, inverse_index = np.unique(key, axis=0, return_index=True, return_inverse=True)
        exps = monomial_exponents(dim, degree)
        inverses = _interpolation_inverses(scaled[first], exps, phs)
        lattice = None
        if lattice_step is not None and lattice_indices is not None:
            from engine.nodes.lattice import LatticeLookup

            idx = np.asarray(lattice_indices, dtype=np.int64)
            lattice = (np.asarray(lattice_step, dtype=float), LatticeLookup(idx[own]))
        return cls(pts, own, st, radius, scaled, inverse_index.reshape(-1), inverses, exps, phs, lattice)

    def coefficients(self, values: ArrayLike) -> NDArray[np.floating]:
        """Interpolation coefficients [alpha; beta] of every owner's stencil, (U, n + M)."""
        f = np.asarray(values, dtype=float)
        if f.shape != (len(self.points),):
            raise ValueError(f"values must have shape ({len(self.points)},), got {f.shape}")
        local = f[self.stencils]
        out = np.empty((len(self.stencils), self.inverses.shape[1]))
        for u in range(len(self.inverses)):
            rows = np.flatnonzero(self.inverse_index == u) if len(self.inverses) > 1 else slice(None)
            out[rows] = local[rows] @ self.inverses[u].T
        return out

    def owners(self, query: NDArray[np.floating]) -> NDArray[np.int64]:
        """Index (into the owners) of the interpolant serving each query point: the nearest owner."""
        if self.lattice is not None:
            step, lookup = self.lattice
            found = lookup.find(np.rint(query / step).astype(np.int64))
            missing = found < 0
            if np.any(missing):
                _, idx = self.tree.query(query[missing])
                found[missing] = idx
            return found
        _, idx = self.tree.query(query)
        return np.asarray(idx, dtype=np.int64)

    def evaluate(
        self,
        query: ArrayLike,
        coefficients: NDArray[np.floating],
        *,
        owners: NDArray[np.int64] | None = None,
        order: int = 2,
    ) -> tuple[NDArray[np.floating], NDArray[np.floating] | None, NDArray[np.floating] | None]:
        """Value, gradient (Q, d) and Hessian (Q, d, d) of the interpolant at ``query``.

        Gradient and Hessian are None when ``order`` is below 1 or 2.
        """
        q = validate_points(query, "query")
        own = self.owners(q) if owners is None else owners
        delta = self.radius[own]
        xq = (q - self.points[self.owner_nodes[own]]) / delta[:, None]
        dim = q.shape[1]
        if len(self.inverses) == 1:  # all stencils are translates: no gather needed
            # axis by axis: a broadcast over the stencil with the short axis innermost is several times slower
            shape = self.scaled[0]
            diff = np.empty((len(q),) + shape.shape)
            for i in range(dim):
                np.subtract(xq[:, i, None], shape[None, :, i], out=diff[:, :, i])
        else:
            diff = xq[:, None, :] - self.scaled[own]  # (Q, n, d)
        if dim == 2:  # the sum einsum takes, written out (the same rounding, a quarter of the time)
            r2 = diff[:, :, 0] * diff[:, :, 0]
            r2 += diff[:, :, 1] * diff[:, :, 1]
        else:
            r2 = np.einsum("qnd,qnd->qn", diff, diff)
        n = self.stencils.shape[1]
        coef = coefficients[own]
        alpha = coef[:, :n]
        beta = coef[:, n:]
        m = self.phs
        poly = monomial_values(xq, self.exponents)
        r = np.sqrt(r2)
        value = np.einsum("qn,qn->q", alpha, _power(r, r2, m)) + np.einsum("qk,qk->q", beta, poly)
        grad = hess = None

        def poly_part(derivative: tuple[int, ...]) -> NDArray[np.floating]:
            # the polynomial part's derivative is again a polynomial: shift its coefficients
            source, factor = derivative_shift(self.exponents, derivative)
            return np.einsum("qk,qk->q", poly, beta[:, source] * factor)

        unit = np.eye(dim, dtype=np.int64)
        if order >= 1:
            w2 = m * alpha * _power(r, r2, m - 2)  # coefficient of Δx in ∇r^m
            grad = np.stack([np.einsum("qn,qn->q", w2, diff[:, :, i]) + poly_part(tuple(unit[i]))
                             for i in range(dim)], axis=1)
            grad /= delta[:, None]
        if order >= 2:
            if m < 3:
                raise ValueError("Hessians need phs >= 3")
            if m >= 4:
                w4 = m * (m - 2) * alpha * _power(r, r2, m - 4)
            else:
                w4 = m * (m - 2) * alpha * np.where(r > 0, r, np.inf) ** (m - 4.0)
            hess = np.empty((len(q), dim, dim))
            trace_part = w2.sum(axis=1)
            for i in range(dim):
                wi = w4 * diff[:, :, i]
                for j in range(i, dim):
                    v = np.einsum("qn,qn->q", wi, diff[:, :, j]) + poly_part(tuple(unit[i] + unit[j]))
                    if i == j:
                        v = v + trace_part
                    hess[:, i, j] = hess[:, j, i] = v
            hess /= (delta**2)[:, None, None]
        return value, grad, hess


def _power(r: NDArray[np.floating], r2: NDArray[np.floating], p: int) -> NDArray[np.floating]:
    """r**p for an integer p >= 0 from r and r², by products."""
    out = r.copy() if p % 2 else np.ones_like(r)
    for _ in range(p // 2):
        out *= r2
    return out


def _interpolation_inverses(scaled: NDArray[np.floating], exps: NDArray[np.int64], phs: int) -> NDArray[np.floating]:
    """Columns of the inverse saddle-point matrices that map values to coefficients."""
    u_count, n, _ = scaled.shape
    m = exps.shape[0]
    out = np.empty((u_count, n + m, n))
    # chunks small enough for the (c, n, n) temporaries to stay in cache-sized blocks
    chunk = max(64, min(SOLVE_CHUNK, _CHUNK_ENTRIES // ((n + m) * (2 * n + m))))
    eye = np.eye(n)
    for start in range(0, u_count, chunk):
        x = scaled[start:start + chunk]
        c = len(x)
        r2 = squared_distances(x)
        system = np.empty((c, n + m, n + m))
        block = system[:, :n, :n]
        np.sqrt(r2, out=block)
        for _ in range(phs // 2):
            block *= r2
        p = monomial_values(x, exps)
        system[:, :n, n:] = p
        system[:, n:, :n] = np.transpose(p, (0, 2, 1))
        system[:, n:, n:] = 0.0
        rhs = np.zeros((c, n + m, n))
        rhs[:, :n, :] = eye
        try:
            out[start:start + c] = np.linalg.solve(system, rhs)
        except np.linalg.LinAlgError as exc:
            raise ValueError("points: a stencil is degenerate (collinear or duplicate nodes)") from exc
    return out


def squared_distances(x: NDArray[np.floating]) -> NDArray[np.floating]:
    """|x_i − x_j|² within each stencil of ``x`` (c, n, d): (c, n, n), one contiguous pass per axis."""
    c, n, dim = x.shape
    coords = np.ascontiguousarray(np.transpose(x, (2, 0, 1)))
    r2 = np.empty((c, n, n))
    delta = np.empty((c, n, n))
    for axis in range(dim):
        xa = coords[axis]
        part = r2 if axis == 0 else delta
        np.subtract(xa[:, :, None], xa[:, None, :], out=part)
        np.multiply(part, part, out=part)
        if axis:
            r2 += delta
    return r2
