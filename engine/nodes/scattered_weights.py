"""RBF-FD weights on scattered nodes: the band operators of a node and the interpolation at a point.

Operators per node (the column order of the lattice band stencil of
:mod:`engine.nodes.band_stencils`, :func:`operator_labels`):

- ``d0`` … centred first derivatives and ``d00``, ``d01``, … (i <= j)
  second derivatives: PHS r^phs + polynomials of degree ``degree`` on the
  node's centred stencil (its k nearest nodes) [1]_;
- ``hv``: hyperviscosity ``s_i (−Δ)³`` on the same stencil, from PHS r^7
  (the lowest odd power with Δ³ r^m finite at r = 0) and the same polynomial
  degree; the weights annihilate every polynomial of degree <= ``degree``
  (Δ³ of such a polynomial is zero) and act on the grid-scale content. The
  per-node factor ``s_i = (h_i / h_ref)^hv_scaling`` (h_i the requested
  spacing at the node, h_ref the largest requested spacing of the set,
  ``hv_scaling`` = 6 by default) makes a front's scalar damping coefficient γ
  act as γ_i = γ s_i ∝ h_i^6, the scaling γ ∝ h^(2k) of hyperviscosity for
  RBF-FD with k = 3 [2]_ [3]_. The column has the sign of the lattice's
  Σ(−∂_i²)³: its symbol |ξ|^6 is non-negative, so a rate −γ·hv damps;
- ``b0``, ``f0``, ``b1``, ``f1`` …: backward / forward first derivatives
  along each axis (interleaved, as on the lattice) from the node's one-sided
  stencils (see :mod:`engine.nodes.scattered_stencils`), degree
  ``upwind_degree`` — the one-sided differences of the Godunov upwind
  |∇φ| [4]_.

References
----------
.. [1] N. Flyer, B. Fornberg, V. Bayona, G. A. Barnett, "On the role of
   polynomials in RBF-FD approximations: I. Interpolation and accuracy",
   J. Comput. Phys. 321 (2016) 21-38.
.. [2] B. Fornberg, E. Lehto, "Stabilization of RBF-generated finite
   difference methods for convective PDEs", J. Comput. Phys. 230 (2011)
   2270-2285.
.. [3] N. Flyer, E. Lehto, S. Blaise, G. B. Wright, A. St-Cyr, "A guide to
   RBF-generated finite differences for nonlinear transport: shallow water
   simulations on a sphere", J. Comput. Phys. 231 (2012) 4078-4095.
.. [4] S. Osher, R. Fedkiw, "Level Set Methods and Dynamic Implicit
   Surfaces", Springer (2003), ch. 6.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import NDArray

from engine.nodes.band_stencils import HYPERVISCOSITY_POWER, centred_derivatives
from engine.numerics.interpolant import squared_distances
from engine.numerics.polynomials import apply_to_monomials, monomial_exponents, monomial_values
from engine.numerics.rbffd import SOLVE_CHUNK, Operator, parse_operator

__all__ = ["HYPERVISCOSITY_PHS", "operator_labels", "local_weights", "band_operator_weights",
           "interpolation_weights"]

#: PHS exponent of the hyperviscosity weights: Δ^k r^m is finite at r = 0 only for m >= 2k + 1.
HYPERVISCOSITY_PHS = 2 * HYPERVISCOSITY_POWER + 1
#: Entries of the (c, n + M, n + M) systems solved per batched call of the weights (cache-sized chunks).
_WEIGHT_CHUNK_ENTRIES = 2_000_000


def operator_labels(dim: int) -> tuple[str, ...]:
    """Column labels of the band operators: ``d<i>``, ``d<i><j>`` (i <= j), ``hv``, then ``b<i>``, ``f<i>``."""
    sides = [f"{tag}{a}" for a in range(dim) for tag in ("b", "f")]
    return tuple(centred_derivatives(dim)[1] + ["hv"] + sides)



def local_weights(
    rel: NDArray[np.floating], kernels: Sequence[tuple[int, Sequence[Operator]]], *, degree: int
) -> list[NDArray[np.floating]]:
    """RBF-FD weights on stencils given relative to their centres, for several PHS kernels at once.

    Parameters
    ----------
    rel : (S, n, d) array
        Stencil nodes minus the point where the operators are evaluated (mm).
    kernels : sequence of (phs, operators)
        For each odd PHS exponent, the parsed operators to weigh with it.
    degree : int
        Polynomial degree appended to every kernel.

    Returns
    -------
    list of (S, n, K_j) arrays, one per kernel, in physical units (the
    stencils are scaled to unit radius for the solves and the weights scaled
    back by radius^-order).

    Notes
    -----
    The same systems as :func:`engine.numerics.rbffd.scaled_weights`, assembled
    once per geometry for all kernels (distances and the polynomial matrix
    are shared) with power tables for the monomials. Degenerate stencils are
    the caller's to exclude (see :func:`engine.nodes.scattered_stencils.degenerate`).
    """
    s_count, n, dim = rel.shape
    radius = np.sqrt(np.max(np.einsum("snd,snd->sn", rel, rel), axis=1))
    if np.any(radius <= 0):
        raise ValueError("rel: a stencil has zero radius")
    xs = rel / radius[:, None, None]
    exps = monomial_exponents(dim, degree)
    m = len(exps)
    origin = np.zeros((1, dim))
    outs = [np.empty((s_count, n, len(ops))) for _, ops in kernels]
    poly_rhs = [np.stack([apply_to_monomials(origin, exps, op.terms)[0] for op in ops], axis=1)
                for _, ops in kernels]
    # chunks small enough for the (c, n, n) temporaries to stay in cache-sized blocks
    chunk = max(64, min(SOLVE_CHUNK, _WEIGHT_CHUNK_ENTRIES // (n + m) ** 2))
    for start in range(0, s_count, chunk):
        x = xs[start:start + chunk]
        c = len(x)
        r2 = squared_distances(x)
        r = np.sqrt(r2)
        p = monomial_values(x, exps)
        system = np.empty((c, n + m, n + m))
        system[:, :n, n:] = p
        system[:, n:, :n] = np.transpose(p, (0, 2, 1))
        system[:, n:, n:] = 0.0
        minus_x = -x
        block = system[:, :n, :n]
        power = 0  # the block holds r^power (the solves leave the system as it is)
        for j, (phs, ops) in enumerate(kernels):
            if power == 0 or phs < power:
                block[...] = r
                power = 1
            while power < phs:
                block *= r2
                power += 2
            rhs = np.empty((c, n + m, len(ops)))
            for k, op in enumerate(ops):
                rhs[:, :n, k] = op.on_kernel(minus_x, phs)
            rhs[:, n:, :] = poly_rhs[j][None]
            outs[j][start:start + c] = np.linalg.solve(system, rhs)[:, :n, :]
    for (_, ops), out in zip(kernels, outs):
        orders = np.array([op.order for op in ops], dtype=float)
        out /= radius[:, None, None] ** orders[None, None, :]
    return outs


def band_operator_weights(points: NDArray[np.floating], union: NDArray[np.int64], centred: NDArray[np.int64],
                          sides: NDArray[np.int64], hv_scale: NDArray[np.floating], *, phs: int, degree: int,
                          hv_degree: int, upwind_degree: int) -> NDArray[np.floating]:
    """The band operators' weights of nodes ``union[:, 0]`` on their stencils' union.

    Parameters
    ----------
    points : (N, d) array
        Every node of the set (mm).
    union : (S, W) int array
        Per node, the union of its stencils (global ids), the node itself
        first; shorter rows padded with the node.
    centred : (S, k) int array
        The centred stencils.
    sides : (S, 2 d, m) int array
        The one-sided stencils, backward then forward along each axis.
    hv_scale : (S,) array
        The per-node hyperviscosity factor s_i.
    phs, degree, hv_degree, upwind_degree : int
        PHS exponent and polynomial degrees of the centred, ``hv`` and
        one-sided weights.

    Returns
    -------
    (S, W, K) array
        Column k weighs operator ``operator_labels(d)[k]`` at the node;
        zero where a union member is not in that operator's stencil.
    """
    count, dim = len(union), points.shape[1]
    n_ids = len(points)
    x = points[union[:, 0]]
    derivatives, _ = centred_derivatives(dim)
    # centred: gradient and Hessian from r^phs, (−Δ)^3 from r^7, one shared geometry
    ops_c = [parse_operator(op, dim) for op in derivatives]
    hv_op = parse_operator(("hyperviscosity", HYPERVISCOSITY_POWER), dim)
    rel_c = points[centred] - x[:, None, :]
    hv_kernel = (max(phs, HYPERVISCOSITY_PHS), [hv_op])
    if hv_degree == degree:
        w_c, w_hv = local_weights(rel_c, [(phs, ops_c), hv_kernel], degree=degree)
    else:
        (w_c,) = local_weights(rel_c, [(phs, ops_c)], degree=degree)
        (w_hv,) = local_weights(rel_c, [hv_kernel], degree=hv_degree)
    w_hv = -w_hv[:, :, 0] * hv_scale[:, None]
    # one-sided first derivatives: every half-space stencil, all d first derivatives, one solve each
    groups, side_size = sides.shape[1], sides.shape[2]
    flat_sides = sides.reshape(-1, side_size)
    rel_s = points[flat_sides] - np.repeat(x, groups, axis=0)[:, None, :]
    (w_s,) = local_weights(rel_s, [(phs, ops_c[:dim])], degree=upwind_degree)
    axis_of = np.tile(np.repeat(np.arange(dim), 2), count)
    w_s = w_s[np.arange(len(flat_sides)), :, axis_of].reshape(count, groups, side_size)

    out = np.zeros((count, union.shape[1], len(operator_labels(dim))))
    rows = np.arange(count)[:, None]
    pos_c = _row_positions(union, centred, n_ids)
    n_c = w_c.shape[2]
    for col in range(n_c):
        out[rows, pos_c, col] = w_c[:, :, col]
    out[rows, pos_c, n_c] = w_hv
    for g in range(groups):
        pos_s = _row_positions(union, sides[:, g], n_ids)
        out[rows, pos_s, n_c + 1 + g] = w_s[:, g]
    return out


def interpolation_weights(nodes: NDArray[np.floating], stencils: NDArray[np.int64], centres: NDArray[np.floating],
                          *, phs: int, degree: int) -> NDArray[np.floating]:
    """(P, k) RBF-FD interpolation weights (identity operator) of points ``centres`` on ``nodes[stencils]``."""
    (w,) = local_weights(nodes[stencils] - centres[:, None, :], [(phs, [parse_operator("value", centres.shape[1])])],
                         degree=degree)
    return w[:, :, 0]


def _row_positions(rows: NDArray[np.int64], members: NDArray[np.int64], n_ids: int) -> NDArray[np.int64]:
    """Column of each ``members[s, j]`` in row ``rows[s]`` (every member must be present).

    ``rows`` (S, W) and ``members`` (S, m) hold integers in [0, n_ids]. Rows
    may repeat a value; the first column holding it (in column order) wins.
    """
    s_count, width = rows.shape
    order = np.argsort(rows, axis=1, kind="stable")
    ranked = np.take_along_axis(rows, order, axis=1)
    base = (np.arange(s_count, dtype=np.int64) * (n_ids + 1))[:, None]
    flat = (ranked + base).reshape(-1)
    where = np.searchsorted(flat, (members + base).reshape(-1)).reshape(members.shape)
    where -= (np.arange(s_count, dtype=np.int64) * width)[:, None]
    return np.take_along_axis(order, where, axis=1)
