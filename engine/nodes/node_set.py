"""A fixed scattered node set for one image, with the band's RBF-FD operators.

The nodes are generated once per image with a spacing that follows the
image's edges (finest near strong edges, coarsest in flat areas), by the
advancing-front generator of :mod:`engine.nodes.scattered_nodes`. A front then
works on a *band* of these nodes: any subset of global node ids. Stencils and
RBF-FD weights are properties of single nodes in the global set, so they are
computed the first time a node enters a band and cached for good.

Operators per node (the column order of the lattice band stencil of
:mod:`engine.nodes.band_stencils`):

- ``d0`` … centred first derivatives and ``d00``, ``d01``, … (i <= j)
  second derivatives: PHS r^phs + polynomials of degree ``degree`` on the
  ``stencil_size`` nearest global nodes [1]_;
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
  along each axis (interleaved, as on the lattice) from the
  ``2 M(upwind_degree) + 1`` nearest nodes in the closed half-space behind /
  ahead of the node along that axis, degree ``upwind_degree`` — the one-sided
  differences of the Godunov upwind |∇φ| [4]_.

A node whose stencil ball (or the half ball of a one-sided stencil) crosses
the image box, or whose stencil is degenerate, is an *edge node* of every
band: it is never :meth:`ScatteredNodeSet.complete` and its weight rows are
zero (like a lattice node whose pattern would leave the image).

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
.. [5] B. Fornberg, N. Flyer, "Fast generation of 2-D node distributions for
   mesh-free PDE discretizations", Comput. Math. Appl. 69 (2015) 531-544.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Sequence

import numpy as np
import scipy.sparse as sp
from numpy.typing import ArrayLike, NDArray
from scipy import ndimage
from scipy.sparse.linalg import ArpackNoConvergence, eigs
from scipy.spatial import cKDTree

from engine.nodes.band_stencils import centred_derivatives
from engine.image.features import ImageFeatures
from engine.numerics.interpolant import squared_distances
from engine.numerics.kernels import check_phs
from engine.numerics.polynomials import (
    apply_to_monomials,
    monomial_count,
    monomial_exponents,
    monomial_values,
)
from engine.numerics.rbffd import (
    SOLVE_CHUNK,
    Operator,
    assemble,
    parse_operator,
)
from engine.nodes.scattered_nodes import scattered_nodes

__all__ = [
    "HYPERVISCOSITY_PHS",
    "HYPERVISCOSITY_POWER",
    "SPECTRAL_SAFETY",
    "EdgeAdaptiveSpacing",
    "ScatteredNodeSet",
    "edge_adaptive_spacing",
    "edge_crossings",
    "operator_labels",
]

#: k of the hyperviscosity (−Δ)^k in the ``hv`` column (as on the lattice).
HYPERVISCOSITY_POWER = 3
#: PHS exponent of the hyperviscosity weights: Δ^k r^m is finite at r = 0 only for m >= 2k + 1.
HYPERVISCOSITY_PHS = 2 * HYPERVISCOSITY_POWER + 1
#: Smallest singular value of a stencil's scaled polynomial matrix, relative to
#: its largest, below which the stencil counts as degenerate (an edge node).
_DEGENERATE = 1e-6
#: Entries of the (c, n + M, n + M) systems solved per batched call of the weights (cache-sized chunks).
_WEIGHT_CHUNK_ENTRIES = 2_000_000
#: Factor on the estimated spectral radius of :meth:`ScatteredNodeSet.spectral_bound` (normals vary in
#: space, the estimate takes them constant; see there).
SPECTRAL_SAFETY = 1.15
#: Operators up to this size get their eigenvalues densely.
_DENSE_EIGEN = 64
#: Rows of the per-node stores allocated at a time (grown by doubling).
_MIN_ROWS = 1024


# --------------------------------------------------------------------------
# spacing that follows image edges
# --------------------------------------------------------------------------
class EdgeAdaptiveSpacing:
    """Node spacing (mm) as a function of position; see :func:`edge_adaptive_spacing`.

    Calling it with an ``(N, d)`` array of points in mm returns ``N``
    spacings between ``finest`` and ``coarsest``.
    """

    def __init__(self, level: NDArray[np.floating], pixel_spacing: NDArray[np.floating], finest: float,
                 coarsest: float) -> None:
        self.level = level  # t in [0, 1] on the pixel grid: 1 = finest, 0 = coarsest
        self.pixel_spacing = pixel_spacing
        self.finest = float(finest)
        self.coarsest = float(coarsest)
        # |∇t| of the multilinear interpolant is at most sqrt(Σ_i (max|Δ_i t| / s_i)²)
        slopes = [float(np.max(np.abs(np.diff(level, axis=i)))) / pixel_spacing[i] if level.shape[i] > 1 else 0.0
                  for i in range(level.ndim)]
        #: Lipschitz constant of log(spacing) in 1/mm (a bound, from the grid values).
        self.log_slope = math.log(self.coarsest / self.finest) * math.sqrt(sum(s * s for s in slopes))

    def __call__(self, points: ArrayLike) -> NDArray[np.floating]:
        p = np.asarray(points, dtype=float)
        if p.ndim != 2 or p.shape[1] != self.level.ndim:
            raise ValueError(f"points: expected shape (N, {self.level.ndim}), got {p.shape}")
        if self.finest == self.coarsest:  # no refinement: the same spacing everywhere
            return np.full(len(p), self.coarsest)
        px = p / self.pixel_spacing
        upper = np.array(self.level.shape, dtype=float) - 1.0
        px = np.clip(px, 0.0, upper)
        t = ndimage.map_coordinates(self.level, px.T, order=1, mode="nearest")
        return self.coarsest * (self.finest / self.coarsest) ** np.clip(t, 0.0, 1.0)

    def max_ratio(self, distance_mm: float | ArrayLike) -> NDArray[np.floating] | float:
        """Upper bound of spacing(x) / spacing(y) for points ``distance_mm`` apart."""
        d = np.asarray(distance_mm, dtype=float)
        out = np.exp(self.log_slope * np.abs(d))
        return float(out) if out.ndim == 0 else out


def edge_adaptive_spacing(
    features_or_edge_map: ImageFeatures | ArrayLike,
    spacing_mm: ArrayLike | None = None,
    *,
    finest: float,
    coarsest: float,
    strong: float = 0.1,
    weak: float = 0.2,
    reach_mm: float | None = None,
    ramp_mm: float | None = None,
    min_area_mm2: float | None = None,
    levels: int = 8,
) -> EdgeAdaptiveSpacing:
    """Node spacing that is finest near strong image edges and coarsest in flat areas.

    Parameters
    ----------
    features_or_edge_map : ImageFeatures or array_like
        The image's :class:`~engine.image.features.ImageFeatures` (its edge
        stopping function ``g`` [1]_ is used) or an edge map ``g`` itself: values
        in [0, 1], low on edges, 1 in flat areas (2-D or 3-D, array order).
    spacing_mm : sequence of float, optional
        Pixel spacing per axis (mm). Required with an edge map; with
        features, defaults to (and must equal) ``features.spacing``.
    finest, coarsest : float
        Spacing (mm) on strong edges and in flat areas, ``0 < finest <=
        coarsest`` (e.g. half a pixel and one pixel).
    strong, weak : float, default 0.1 and 0.2
        Edge strength from ``g``: 1 where ``g <= strong``, 0 where ``g >=
        weak``, linear in between. With the default edge contrast K of
        :func:`~engine.image.features.compute_features` (1.5 times the median
        gradient), g = 0.1 is a gradient of 3K and g = 0.2 one of 2K: noise
        in flat areas rarely reaches them, real boundaries do.
    reach_mm : float, optional
        Distance from a strong edge within which the spacing stays at its
        finest. Default ``2 * coarsest``.
    ramp_mm : float, optional
        Distance over which the spacing then grows to ``coarsest``. Default
        ``5 * coarsest``.
    min_area_mm2 : float, optional
        Connected pieces of edge (at each strength level, touching
        neighbours including diagonals) smaller than this are ignored: noise
        specks in flat areas refine nothing, while object boundaries are long
        connected curves. Default ``16 * coarsest**2``.
    levels : int, default 8
        Edge strength is quantised into this many levels for the spreading.

    Returns
    -------
    EdgeAdaptiveSpacing
        Callable ``(N, d)`` points (mm) → ``N`` spacings (mm).

    Notes
    -----
    The spacing is ``coarsest * (finest / coarsest) ** t(x)`` with a refinement
    level ``t`` in [0, 1]. ``t`` spreads the edge strength e (in [0, 1]) by
    distance: for each level ℓ of e (after dropping pieces smaller than
    ``min_area_mm2``), ``ℓ * clip((reach + ramp − dist_ℓ(x)) /
    ramp, 0, 1)`` with dist_ℓ the Euclidean distance (mm, exact distance
    transform) to the pixels where e >= ℓ, and t is the largest of these.
    Every term is (ℓ / ramp)-Lipschitz, so t is (1/ramp)-Lipschitz and
    ``log(spacing)`` is ``log(coarsest / finest) / ramp``-Lipschitz: two points
    a distance ρ apart have spacings within a factor ``(coarsest / finest) **
    (ρ / ramp)`` of each other (up to sqrt(d) more for the multilinear
    interpolation between pixel centres; :attr:`EdgeAdaptiveSpacing.log_slope`
    holds the bound computed from the grid and
    :meth:`EdgeAdaptiveSpacing.max_ratio` applies it). With the defaults,
    neighbouring nodes (ρ <= coarsest) differ in spacing by at most
    2^(1/5) ≈ 1.15 (1.22 with the interpolation factor) when coarsest =
    2 finest. A Gaussian blur of e, the obvious alternative, lowers the peak of
    a thin edge line so that the finest spacing is never reached; spreading by
    distance keeps it on the edge itself and bounds the slope exactly.
    Points outside the image take the value at the nearest pixel centre.

    References
    ----------
    .. [1] V. Caselles, R. Kimmel, G. Sapiro, "Geodesic active contours",
       Int. J. Comput. Vis. 22(1) (1997) 61-79 (the edge stopping function g).
    .. [2] B. Fornberg, N. Flyer, Comput. Math. Appl. 69 (2015) 531-544 (node
       generation from a spacing function).
    """
    if isinstance(features_or_edge_map, ImageFeatures):
        g = np.asarray(features_or_edge_map.edge, dtype=float)
        own = np.asarray(features_or_edge_map.spacing, dtype=float)
        if spacing_mm is not None:
            sp_given = _as_spacing(spacing_mm, g.ndim, "spacing_mm")
            if not np.allclose(sp_given, own, rtol=1e-9, atol=0.0):
                raise ValueError(f"spacing_mm: {sp_given.tolist()} differs from the features' spacing {own.tolist()}")
        sp_mm = own
    else:
        try:
            g = np.asarray(features_or_edge_map, dtype=float)
        except (TypeError, ValueError) as exc:
            raise ValueError("features_or_edge_map: expected ImageFeatures or a numeric array") from exc
        if g.ndim not in (2, 3):
            raise ValueError(f"features_or_edge_map: expected a 2-D or 3-D edge map, got shape {g.shape}")
        if not np.all(np.isfinite(g)):
            raise ValueError("features_or_edge_map: the edge map contains NaN or inf")
        if spacing_mm is None:
            raise ValueError("spacing_mm: required when an edge map array is given")
        sp_mm = _as_spacing(spacing_mm, g.ndim, "spacing_mm")
    fine = _positive(finest, "finest")
    coarse = _positive(coarsest, "coarsest")
    if fine > coarse:
        raise ValueError(f"finest: must not exceed coarsest, got finest={fine} > coarsest={coarse}")
    if not (np.isfinite(strong) and np.isfinite(weak)) or not strong < weak:
        raise ValueError(f"strong: must be below weak, got strong={strong!r}, weak={weak!r}")
    reach = 2.0 * coarse if reach_mm is None else _non_negative(reach_mm, "reach_mm")
    ramp = 5.0 * coarse if ramp_mm is None else _positive(ramp_mm, "ramp_mm")
    min_area = 16.0 * coarse**2 if min_area_mm2 is None else _non_negative(min_area_mm2, "min_area_mm2")
    if isinstance(levels, bool) or not isinstance(levels, (int, np.integer)) or not 1 <= levels <= 64:
        raise ValueError(f"levels: expected an integer in 1..64, got {levels!r}")
    pixel_area = float(np.prod(sp_mm))
    connectivity = np.ones((3,) * g.ndim, dtype=bool)

    strength = np.clip((weak - g) / (weak - strong), 0.0, 1.0)
    t = np.zeros(g.shape)
    for k in range(1, int(levels) + 1):
        level = k / levels
        region = strength >= level - 1e-12
        if min_area > 0 and np.any(region):
            labels, count = ndimage.label(region, structure=connectivity)
            sizes = np.bincount(labels.reshape(-1), minlength=count + 1) * pixel_area
            big = sizes >= min_area
            big[0] = False
            region = big[labels]
        if not np.any(region):
            break
        dist = ndimage.distance_transform_edt(~region, sampling=sp_mm)
        np.maximum(t, level * np.clip((reach + ramp - dist) / ramp, 0.0, 1.0), out=t)
    return EdgeAdaptiveSpacing(t, sp_mm, fine, coarse)


# --------------------------------------------------------------------------
# validation helpers
# --------------------------------------------------------------------------
def _positive(value: object, name: str) -> float:
    try:
        v = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name}: expected a positive number, got {value!r}") from exc
    if not (0.0 < v < math.inf):
        raise ValueError(f"{name}: expected a positive finite number, got {value!r}")
    return v


def _non_negative(value: object, name: str) -> float:
    try:
        v = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name}: expected a non-negative number, got {value!r}") from exc
    if not (0.0 <= v < math.inf):
        raise ValueError(f"{name}: expected a non-negative finite number, got {value!r}")
    return v


def _as_spacing(spacing: object, dim: int, name: str) -> NDArray[np.floating]:
    try:
        sp_arr = np.broadcast_to(np.asarray(spacing, dtype=float), (dim,)).copy()
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name}: expected a number or {dim} numbers (mm), got {spacing!r}") from exc
    if not np.all(np.isfinite(sp_arr)) or np.any(sp_arr <= 0):
        raise ValueError(f"{name}: values must be positive and finite, got {sp_arr.tolist()}")
    return sp_arr


def _as_int(value: object, name: str, low: int, high: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise ValueError(f"{name}: expected an integer, got {value!r}")
    if not low <= int(value) <= high:
        raise ValueError(f"{name}: expected {low} <= {name} <= {high}, got {value}")
    return int(value)


def operator_labels(dim: int) -> tuple[str, ...]:
    """Column labels of the band operators: ``d<i>``, ``d<i><j>`` (i <= j), ``hv``, then ``b<i>``, ``f<i>``."""
    sides = [f"{tag}{a}" for a in range(dim) for tag in ("b", "f")]
    return tuple(centred_derivatives(dim)[1] + ["hv"] + sides)


def _local_weights(
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
    the caller's to exclude (see :func:`_degenerate`).
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


def _degenerate(xs: NDArray[np.floating], degree: int) -> NDArray[np.bool_]:
    """Per stencil (S, n, d), scaled to unit radius: is its polynomial matrix (nearly) rank-deficient?

    From the eigenvalues of PᵀP: σ_min / σ_max below ``_DEGENERATE``.
    """
    dim = xs.shape[2]
    exps = monomial_exponents(dim, degree)
    p = monomial_values(xs, exps)
    ev = np.linalg.eigvalsh(np.transpose(p, (0, 2, 1)) @ p)
    return ev[:, 0] <= _DEGENERATE**2 * ev[:, -1]


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


# --------------------------------------------------------------------------
# the node set
# --------------------------------------------------------------------------
def edge_crossings(points: NDArray[np.floating], edges: NDArray[np.int64],
                   values: NDArray[np.floating]) -> NDArray[np.floating]:
    """Zero crossings of ``values`` along graph ``edges`` (pairs of rows of ``points``), linear interpolation.

    Every edge whose end values differ in sign (< 0 against >= 0) gives one point.
    """
    va, vb = values[edges[:, 0]], values[edges[:, 1]]
    cross = (va < 0) != (vb < 0)
    e, va, vb = edges[cross], va[cross], vb[cross]
    t = va / (va - vb)
    xa, xb = points[e[:, 0]], points[e[:, 1]]
    return xa + t[:, None] * (xb - xa)


class ScatteredNodeSet:
    """Scattered nodes over one image, generated once, with per-node cached stencils and weights.

    Parameters
    ----------
    shape : sequence of int
        Image shape (2-D or 3-D, array order). The nodes fill the box of the
        pixel centres, ``[0, (shape − 1) * spacing]`` mm.
    spacing : float or sequence of float
        Pixel spacing (mm) per axis; anisotropic pixels are fine.
    node_spacing : float or callable
        Requested node spacing (mm): a constant or a callable ``(N, d)``
        points (mm) → ``N`` spacings, e.g. from :func:`edge_adaptive_spacing`.
    stencil_size : int, optional
        Nodes per centred stencil (k nearest). Default as the front's
        ``FrontParams.stencil_size_for``: round(2 M) in 2-D, round(1.6 M) in
        3-D, M the number of monomials of degree ``degree`` (30 and 56 for
        degree 4).
    degree : int, default 4
        Polynomial degree of the centred operators (and of ``hv``).
    phs : int, default 5
        Odd PHS exponent of the centred and one-sided operators.
    upwind_degree : int, default 2
        Polynomial degree of the one-sided stencils, which hold
        ``2 M(upwind_degree) + 1`` nodes (13 in 2-D, 21 in 3-D).
    hv_scaling : float, default 6
        Exponent p of the per-node hyperviscosity factor ``(h_i / h_ref)^p``.
    hv_degree : int, optional
        Polynomial degree of the ``hv`` weights (default ``degree``). With
        ``hv_degree >= 6`` (and a stencil of more than M(hv_degree) nodes) the
        weights reproduce Δ³ exactly on polynomials of that degree; with the
        default they only annihilate polynomials of degree <= ``degree``,
        which is all a damping term needs: ``γ_i hv`` then changes a smooth
        φ by O(h^(degree+1)).
    edge_neighbours : int, optional
        Nearest neighbours per node in the graph of :meth:`edges`. Default 6
        in 2-D, 12 in 3-D.
    seed : int or None, default 0
        Seed of the node generator (fixed seed: identical nodes every run).
    max_nodes : int, default 2_000_000
        Safety limit of the generator.
    points : (N, d) array_like, optional
        Use these node positions (mm) instead of generating nodes.

    Attributes
    ----------
    points : (N, d) ndarray
        Node positions in mm (array axis order).
    pixels : (N, d) ndarray
        Node positions in pixel coordinates (pixel centres at integers).
    local_spacing : (N,) ndarray
        Requested spacing at each node (mm), h_i.
    reference_spacing : float
        h_ref, the largest requested spacing over the nodes.
    tree : scipy.spatial.cKDTree
        Over ``points``.
    labels : tuple of str
        Column labels of :meth:`operator_weights`.
    solves : int
        RBF-FD systems solved so far (one per stencil and kernel).

    Notes
    -----
    Nodes come from :func:`engine.nodes.scattered_nodes.scattered_nodes` (2-D: the
    advancing front of Fornberg & Flyer [1]_; 3-D: its height-field variant).
    Operators and their ``hv`` scaling are described in the module docstring
    ([2]_ for the RBF-FD weights, [3]_ for the hyperviscosity scaling).

    Memory: the cached stencils and weights take about 2.6 kB per node that
    has been in a band in 2-D (10 operators, stencil width ~32) and about
    9.5 kB in 3-D (16 operators, stencil width ~70); pixel weights add
    0.5 kB (2-D) and 0.9 kB (3-D) per pixel.

    References
    ----------
    .. [1] B. Fornberg, N. Flyer, "Fast generation of 2-D node distributions
       for mesh-free PDE discretizations", Comput. Math. Appl. 69 (2015)
       531-544.
    .. [2] N. Flyer, B. Fornberg, V. Bayona, G. A. Barnett, J. Comput. Phys.
       321 (2016) 21-38.
    .. [3] B. Fornberg, E. Lehto, J. Comput. Phys. 230 (2011) 2270-2285.
    """

    def __init__(
        self,
        shape: Sequence[int],
        spacing: float | Sequence[float],
        node_spacing: float | Callable[[NDArray[np.floating]], ArrayLike],
        *,
        stencil_size: int | None = None,
        degree: int = 4,
        phs: int = 5,
        upwind_degree: int = 2,
        hv_scaling: float = 6.0,
        hv_degree: int | None = None,
        edge_neighbours: int | None = None,
        seed: int | None = 0,
        max_nodes: int = 2_000_000,
        points: ArrayLike | None = None,
    ) -> None:
        try:
            shp = tuple(int(s) for s in shape)
        except (TypeError, ValueError) as exc:
            raise ValueError(f"shape: expected 2 or 3 integers, got {shape!r}") from exc
        if len(shp) not in (2, 3) or any(s < 2 for s in shp):
            raise ValueError(f"shape: expected 2 or 3 sizes >= 2, got {shape!r}")
        dim = len(shp)
        self.shape = shp
        self.dim = dim
        self.pixel_spacing = _as_spacing(spacing, dim, "spacing")
        self.box_min = np.zeros(dim)
        self.box_max = (np.array(shp) - 1.0) * self.pixel_spacing
        self.degree = _as_int(degree, "degree", 1, 8)
        try:
            check_phs(phs)
        except ValueError as exc:
            raise ValueError(f"phs: {exc}") from exc
        if phs < 3:
            raise ValueError(f"phs: second derivatives need phs >= 3, got {phs}")
        if self.degree < (phs - 1) // 2 or self.degree < 2:
            raise ValueError(f"degree: {self.degree} is too low for r^{phs} and second derivatives "
                             f"(need >= {max(2, (phs - 1) // 2)})")
        self.phs = int(phs)
        self.upwind_degree = _as_int(upwind_degree, "upwind_degree", 1, 4)
        if self.upwind_degree < (self.phs - 1) // 2:
            raise ValueError(f"upwind_degree: {self.upwind_degree} is too low for r^{self.phs} "
                             f"(need >= {(self.phs - 1) // 2})")
        m = monomial_count(dim, self.degree)
        if stencil_size is None:
            stencil_size = round((2.0 if dim == 2 else 1.6) * m)
        self.stencil_size = _as_int(stencil_size, "stencil_size", m + 1, 400)
        self.side_size = 2 * monomial_count(dim, self.upwind_degree) + 1
        self.hv_scaling = _non_negative(hv_scaling, "hv_scaling")
        self.hv_degree = self.degree if hv_degree is None else _as_int(hv_degree, "hv_degree", 3, 8)
        if monomial_count(dim, self.hv_degree) >= self.stencil_size:
            raise ValueError(f"hv_degree: {self.hv_degree} needs more than {monomial_count(dim, self.hv_degree)} "
                             f"stencil nodes; stencil_size is {self.stencil_size}")
        if edge_neighbours is None:
            edge_neighbours = 6 if dim == 2 else 12
        self.edge_neighbours = _as_int(edge_neighbours, "edge_neighbours", 1, self.stencil_size - 1)

        if points is None:
            if not callable(node_spacing):
                _positive(node_spacing, "node_spacing")
            kwargs: dict = {"seed": seed, "max_nodes": max_nodes}
            if dim == 3 and callable(node_spacing) and hasattr(node_spacing, "finest"):
                kwargs["min_radius"] = float(node_spacing.finest)  # type: ignore[attr-defined]
            try:
                pts = scattered_nodes(self.box_min, self.box_max, node_spacing, **kwargs)
            except ValueError as exc:
                if str(exc).startswith("radius"):
                    raise ValueError(f"node_spacing{str(exc)[len('radius'):]}") from exc
                raise
        else:
            pts = np.asarray(points, dtype=float)
            if pts.ndim != 2 or pts.shape[1] != dim or len(pts) < 2 or not np.all(np.isfinite(pts)):
                raise ValueError(f"points: expected a finite (N, {dim}) array with N >= 2, got shape {pts.shape}")
            if np.min(cKDTree(pts).query(pts, k=2)[0][:, 1]) <= 0.0:
                raise ValueError("points: some nodes coincide; node positions must be distinct")
        self._given_points = points is not None
        self.points = np.ascontiguousarray(pts)
        n = len(self.points)
        if n < self.stencil_size + 1:
            raise ValueError(f"node_spacing: only {n} nodes fit the image, fewer than a stencil "
                             f"({self.stencil_size}); use a smaller spacing")
        self.pixels = self.points / self.pixel_spacing
        self.tree = cKDTree(self.points)
        if callable(node_spacing):
            local = np.asarray(node_spacing(self.points), dtype=float).reshape(-1)
            if local.shape != (n,) or not np.all((local > 0) & np.isfinite(local)):
                raise ValueError("node_spacing: the callable must return one positive spacing per point")
        else:
            local = np.full(n, _positive(node_spacing, "node_spacing"))
        self.local_spacing = local
        self.reference_spacing = float(np.max(local))
        self.hv_scale = (local / self.reference_spacing) ** self.hv_scaling
        self.labels = operator_labels(dim)
        self.solves = 0

        # per-node stores, filled lazily (rows = slots)
        self._slot = np.full(n, -1, dtype=np.int64)
        self._used = 0
        k, ns = self.stencil_size, self.side_size
        self._centred = np.zeros((0, k), dtype=np.int64)
        self._sides = np.zeros((0, 2 * dim, ns), dtype=np.int64)
        self._union = np.zeros((0, 1), dtype=np.int64)
        self._width = np.zeros(0, dtype=np.int64)
        self._edge = np.zeros(0, dtype=bool)
        self._weights = np.zeros((0, 1, len(self.labels)))
        self._have_weights = np.zeros(0, dtype=bool)
        # per-pixel interpolation weights (see pixel_weights), filled lazily
        self._pixel_slot: NDArray[np.int64] | None = None
        self._pixel_used = 0
        self._pixel_stencils = np.zeros((0, k), dtype=np.int64)
        self._pixel_weights = np.zeros((0, k))

    # ------------------------------------------------------------ builders
    @classmethod
    def from_features(cls, features: ImageFeatures, *, finest: float, coarsest: float,
                      spacing_options: dict | None = None, **options: object) -> ScatteredNodeSet:
        """Node set for an image's features with :func:`edge_adaptive_spacing`.

        ``spacing_options`` go to :func:`edge_adaptive_spacing`, ``options``
        to the constructor.
        """
        if not isinstance(features, ImageFeatures):
            raise ValueError(f"features: expected ImageFeatures, got {type(features).__name__}")
        spacing_fn = edge_adaptive_spacing(features, finest=finest, coarsest=coarsest, **(spacing_options or {}))
        return cls(features.image.shape, features.spacing, spacing_fn, **options)  # type: ignore[arg-type]

    # ------------------------------------------------------------ basics
    @property
    def node_count(self) -> int:
        """Number of nodes in the set."""
        return len(self.points)

    def _check_ids(self, ids: ArrayLike, *, unique: bool = True) -> NDArray[np.int64]:
        arr = np.asarray(ids)
        if arr.ndim != 1:
            raise ValueError(f"ids: expected a 1-D array of node ids, got shape {arr.shape}")
        if arr.size == 0:
            return np.zeros(0, dtype=np.int64)
        if not np.issubdtype(arr.dtype, np.integer):
            raise ValueError(f"ids: expected integer node ids, got dtype {arr.dtype}")
        arr = arr.astype(np.int64)
        if arr.min() < 0 or arr.max() >= self.node_count:
            raise ValueError(f"ids: node ids must lie in [0, {self.node_count}), got [{arr.min()}, {arr.max()}]")
        if unique and len(np.unique(arr)) != len(arr):
            raise ValueError("ids: contains repeated node ids")
        return arr

    def nodes_near(self, points_mm: ArrayLike, radius_mm: float) -> NDArray[np.int64]:
        """Sorted unique ids of the nodes within ``radius_mm`` of any of ``points_mm`` (N, d)."""
        p = np.asarray(points_mm, dtype=float)
        if p.ndim != 2 or p.shape[1] != self.dim:
            raise ValueError(f"points_mm: expected shape (N, {self.dim}), got {p.shape}")
        if not np.all(np.isfinite(p)):
            raise ValueError("points_mm: contains NaN or inf")
        r = _non_negative(radius_mm, "radius_mm")
        if len(p) == 0:
            return np.zeros(0, dtype=np.int64)
        # query each distinct cell of a grid of pitch r/4 once (nearby points share balls)
        pitch = max(r / 4.0, 1e-12)
        _, first = np.unique(np.floor(p / pitch).astype(np.int64), axis=0, return_index=True)
        centres = p[first]
        # a ball of radius r + pitch * sqrt(d) around a representative covers its whole cell;
        # filter back to the exact radius afterwards
        lists = self.tree.query_ball_point(centres, r + pitch * math.sqrt(self.dim), return_sorted=False)
        lengths = np.fromiter((len(x) for x in lists), dtype=np.int64, count=len(lists))
        cand = np.unique(np.fromiter(itertools.chain.from_iterable(lists), dtype=np.int64, count=int(lengths.sum())))
        if len(cand) == 0:
            return cand
        d, _ = cKDTree(p).query(self.points[cand], distance_upper_bound=r * (1 + 1e-12) + 1e-300)
        return cand[np.isfinite(d)]

    # ------------------------------------------------------------ stencils
    def _grow(self, extra: int) -> None:
        need = self._used + extra
        rows = len(self._edge)
        if need <= rows:
            return
        new = max(need, 2 * rows, _MIN_ROWS)

        def grow(a: NDArray) -> NDArray:
            out = np.zeros((new,) + a.shape[1:], dtype=a.dtype)
            out[:rows] = a
            return out

        self._centred = grow(self._centred)
        self._sides = grow(self._sides)
        self._union = grow(self._union)
        self._width = grow(self._width)
        self._edge = grow(self._edge)
        self._weights = grow(self._weights)
        self._have_weights = grow(self._have_weights)

    def _widen(self, width: int) -> None:
        if width <= self._union.shape[1]:
            return
        rows, old = self._union.shape
        union = np.zeros((rows, width), dtype=np.int64)
        union[:, :old] = self._union
        # pad with each row's own node (its first column)
        union[:, old:] = self._union[:, :1]
        weights = np.zeros((rows, width, self._weights.shape[2]))
        weights[:, :old] = self._weights
        self._union, self._weights = union, weights

    def _ensure_stencils(self, ids: NDArray[np.int64]) -> NDArray[np.int64]:
        """Slots of ``ids``, computing the stencils of nodes seen for the first time."""
        new = np.unique(ids[self._slot[ids] < 0])
        if len(new):
            self._add_stencils(new)
        return self._slot[ids]

    def _add_stencils(self, nodes: NDArray[np.int64]) -> None:
        dim, k, ns = self.dim, self.stencil_size, self.side_size
        count = len(nodes)
        x = self.points[nodes]
        kq = min(max(k, 4 * ns), self.node_count)
        dist, cand = self.tree.query(x, k=kq)
        cand = np.asarray(cand, dtype=np.int64).reshape(count, kq)
        dist = np.asarray(dist, dtype=float).reshape(count, kq)
        # the node itself first (distinct nodes: it is the unique nearest)
        centred = cand[:, :k].copy()
        wrong = centred[:, 0] != nodes
        if np.any(wrong):
            raise ValueError("points: some nodes coincide; node positions must be distinct")
        edge = ~self._ball_inside(x, dist[:, k - 1])
        rel = self.points[cand] - x[:, None, :]
        sides = np.empty((count, 2 * dim, ns), dtype=np.int64)
        for axis in range(dim):
            for j, direction in enumerate((-1.0, 1.0)):
                mask = direction * rel[:, :, axis] >= 0.0
                order = np.argsort(~mask, axis=1, kind="stable")[:, :ns]
                sides[:, 2 * axis + j] = np.take_along_axis(cand, order, axis=1)
                enough = mask.sum(axis=1) >= ns
                radius = np.take_along_axis(dist, order[:, -1:], axis=1)[:, 0]
                edge |= ~enough | ~self._half_ball_inside(x, radius, axis, direction)
        # degenerate stencils (rank-deficient polynomial part) make edge nodes too; generated nodes
        # are well spread (nearest neighbours within [0.77, 1.21] of the spacing), so only
        # given positions are checked
        interior = np.flatnonzero(~edge) if self._given_points else np.zeros(0, dtype=np.int64)
        if len(interior):
            xs = rel[interior, :k] / dist[interior, k - 1][:, None, None]
            bad = _degenerate(xs, max(self.degree, self.hv_degree))
            side_rel = self.points[sides[interior]] - x[interior][:, None, None, :]
            side_r = np.sqrt(np.max(np.einsum("sgnd,sgnd->sgn", side_rel, side_rel), axis=2))
            side_xs = (side_rel / side_r[:, :, None, None]).reshape(-1, ns, dim)
            bad |= _degenerate(side_xs, self.upwind_degree).reshape(len(interior), 2 * dim).any(axis=1)
            edge[interior[bad]] = True
        # union of all stencils, ordered by distance (the node itself first), padded with the node
        cat = np.concatenate([centred, sides.reshape(count, -1)], axis=1)
        cat.sort(axis=1)
        dup = np.zeros_like(cat, dtype=bool)
        dup[:, 1:] = cat[:, 1:] == cat[:, :-1]
        sentinel = self.node_count
        cat[dup] = sentinel
        cat.sort(axis=1)
        width = (cat < sentinel).sum(axis=1)
        w_max = int(width.max())
        cat = cat[:, :w_max]
        pad = cat == sentinel
        safe = np.where(pad, nodes[:, None], cat)
        d2 = np.sum((self.points[safe] - x[:, None, :]) ** 2, axis=2)
        d2[pad] = np.inf
        union = np.take_along_axis(safe, np.argsort(d2, axis=1, kind="stable"), axis=1)

        self._grow(count)
        self._widen(w_max)
        slots = np.arange(self._used, self._used + count)
        self._used += count
        self._slot[nodes] = slots
        self._centred[slots] = centred
        self._sides[slots] = sides
        self._union[slots] = nodes[:, None]
        self._union[slots, :w_max] = union
        self._width[slots] = width
        self._edge[slots] = edge

    def _ball_inside(self, x: NDArray[np.floating], radius: NDArray[np.floating]) -> NDArray[np.bool_]:
        tol = 1e-9 * float(np.max(self.box_max))
        r = radius[:, None]
        return np.all((x - r >= self.box_min - tol) & (x + r <= self.box_max + tol), axis=1)

    def _half_ball_inside(self, x: NDArray[np.floating], radius: NDArray[np.floating], axis: int,
                          direction: float) -> NDArray[np.bool_]:
        tol = 1e-9 * float(np.max(self.box_max))
        r = radius[:, None]
        low = x - r >= self.box_min - tol
        high = x + r <= self.box_max + tol
        if direction < 0:
            high[:, axis] = True
        else:
            low[:, axis] = True
        return np.all(low & high, axis=1)

    # ------------------------------------------------------------ weights
    def _ensure_weights(self, slots: NDArray[np.int64]) -> None:
        todo = np.unique(slots[~self._have_weights[slots]])
        if len(todo) == 0:
            return
        ok = todo[~self._edge[todo]]
        self._have_weights[todo] = True
        self._weights[todo] = 0.0
        if len(ok) == 0:
            return
        dim, n_ids = self.dim, self.node_count
        nodes = self._union[ok, 0]
        x = self.points[nodes]
        centred = self._centred[ok]
        derivatives, _ = centred_derivatives(dim)
        # centred: gradient and Hessian from r^phs, (−Δ)^3 from r^7, one shared geometry
        ops_c = [parse_operator(op, dim) for op in derivatives]
        hv_op = parse_operator(("hyperviscosity", HYPERVISCOSITY_POWER), dim)
        rel_c = self.points[centred] - x[:, None, :]
        hv_kernel = (max(self.phs, HYPERVISCOSITY_PHS), [hv_op])
        if self.hv_degree == self.degree:
            w_c, w_hv = _local_weights(rel_c, [(self.phs, ops_c), hv_kernel], degree=self.degree)
        else:
            (w_c,) = _local_weights(rel_c, [(self.phs, ops_c)], degree=self.degree)
            (w_hv,) = _local_weights(rel_c, [hv_kernel], degree=self.hv_degree)
        w_hv = -w_hv[:, :, 0] * self.hv_scale[nodes][:, None]
        # one-sided first derivatives: every half-space stencil, all d first derivatives, one solve each
        sides = self._sides[ok]
        groups = 2 * dim
        flat_sides = sides.reshape(-1, self.side_size)
        rel_s = self.points[flat_sides] - np.repeat(x, groups, axis=0)[:, None, :]
        (w_s,) = _local_weights(rel_s, [(self.phs, ops_c[:dim])], degree=self.upwind_degree)
        axis_of = np.tile(np.repeat(np.arange(dim), 2), len(ok))
        w_s = w_s[np.arange(len(flat_sides)), :, axis_of].reshape(len(ok), groups, self.side_size)
        self.solves += len(ok) * (2 + groups)

        union = self._union[ok]
        out = np.zeros((len(ok), union.shape[1], len(self.labels)))
        rows = np.arange(len(ok))[:, None]
        pos_c = _row_positions(union, centred, n_ids)
        n_c = w_c.shape[2]
        for col in range(n_c):
            out[rows, pos_c, col] = w_c[:, :, col]
        out[rows, pos_c, n_c] = w_hv
        for g in range(groups):
            pos_s = _row_positions(union, sides[:, g], n_ids)
            out[rows, pos_s, n_c + 1 + g] = w_s[:, g]
        self._weights[ok] = out

    def operator_weights(self, ids: ArrayLike) -> tuple[NDArray[np.int64], NDArray[np.floating]]:
        """Stencils and weights of the band operators at nodes ``ids``.

        Parameters
        ----------
        ids : (A,) int array
            Global node ids.

        Returns
        -------
        stencils : (A, W) int64 array
            Global ids of each node's stencil nodes (the union of its centred
            and one-sided stencils), the node itself first, then by distance;
            rows shorter than W are padded with the node itself (weight 0).
        weights : (A, W, K) array
            ``(phi[stencils] * weights[..., k]).sum(1)`` approximates operator
            ``labels[k]`` at each node; columns as in :func:`operator_labels`
            (``d*`` in 1/mm or 1/mm², ``hv`` = s_i (−Δ)³ in 1/mm⁶, ``b*``/``f*``
            in 1/mm). Rows of edge nodes (never :meth:`complete`) are zero.

        Notes
        -----
        Weights are computed once per node (batched solves) and cached; a
        repeated call only gathers.
        """
        arr = self._check_ids(ids, unique=False)
        if len(arr) == 0:
            return np.zeros((0, 1), dtype=np.int64), np.zeros((0, 1, len(self.labels)))
        slots = self._ensure_stencils(arr)
        self._ensure_weights(slots)
        w = int(self._width[slots].max())
        return self._union[slots, :w].copy(), self._weights[slots, :w, :].copy()

    def local_stencils(self, ids: ArrayLike) -> NDArray[np.int64]:
        """The stencils of :meth:`operator_weights` as positions in ``ids`` (−1 where a node is not in ``ids``)."""
        arr = self._check_ids(ids)
        if len(arr) == 0:
            return np.zeros((0, 1), dtype=np.int64)
        slots = self._ensure_stencils(arr)
        w = int(self._width[slots].max())
        return self._positions_in(arr, self._union[slots, :w])

    @staticmethod
    def _positions_in(ids: NDArray[np.int64], members: NDArray[np.int64]) -> NDArray[np.int64]:
        order = np.argsort(ids, kind="stable")
        ranked = ids[order]
        pos = np.clip(np.searchsorted(ranked, members), 0, len(ranked) - 1)
        found = ranked[pos] == members
        return np.where(found, order[pos], -1)

    def complete(self, ids: ArrayLike) -> NDArray[np.bool_]:
        """Which of ``ids`` have every stencil node in ``ids`` (and are not edge nodes)."""
        arr = self._check_ids(ids)
        if len(arr) == 0:
            return np.zeros(0, dtype=bool)
        slots = self._ensure_stencils(arr)
        w = int(self._width[slots].max())
        inside = np.all(self._positions_in(arr, self._union[slots, :w]) >= 0, axis=1)
        return inside & ~self._edge[slots]

    def is_edge_node(self, ids: ArrayLike) -> NDArray[np.bool_]:
        """Nodes whose stencils cross the image box or are degenerate (never complete)."""
        arr = self._check_ids(ids, unique=False)
        if len(arr) == 0:
            return np.zeros(0, dtype=bool)
        slots = self._ensure_stencils(arr)
        return self._edge[slots].copy()

    # ------------------------------------------------------------ pixels
    def _check_pixels(self, pixel_indices: ArrayLike) -> NDArray[np.int64]:
        """Pixel indices as a (P, d) int64 array inside the image; ValueError naming the problem."""
        pix = np.asarray(pixel_indices)
        if pix.ndim != 2 or pix.shape[1] != self.dim:
            raise ValueError(f"pixel_indices: expected shape (P, {self.dim}), got {pix.shape}")
        if pix.size and not np.issubdtype(pix.dtype, np.integer):
            raise ValueError(f"pixel_indices: expected integers, got dtype {pix.dtype}")
        pix = pix.astype(np.int64)
        if len(pix) and (np.any(pix < 0) or np.any(pix >= np.array(self.shape))):
            raise ValueError(f"pixel_indices: indices must lie inside the image shape {self.shape}")
        return pix

    def pixel_interpolation(self, ids: ArrayLike, pixel_indices: ArrayLike) -> sp.csr_matrix:
        """Sparse matrix taking φ at ``ids`` to φ at pixel centres.

        Parameters
        ----------
        ids : (A,) int array
            Global node ids (the band); columns of the matrix follow this order.
        pixel_indices : (P, d) int array
            Pixel indices (array order).

        Returns
        -------
        scipy.sparse.csr_matrix, shape (P, A)
            Row p holds the RBF-FD interpolation (identity operator) weights
            of pixel p's centre on its ``stencil_size`` nearest nodes among
            ``ids`` (PHS r^phs + degree ``degree``). Pixels far from the band
            are extrapolated: keep them within the band.
        """
        arr = self._check_ids(ids)
        pix = self._check_pixels(pixel_indices)
        k = self.stencil_size
        if len(arr) < k:
            raise ValueError(f"ids: {len(arr)} nodes are fewer than a stencil ({k})")
        if len(pix) == 0:
            return sp.csr_matrix((0, len(arr)))
        local = self.points[arr]
        centres = pix * self.pixel_spacing
        _, st = cKDTree(local).query(centres, k=k)
        st = np.asarray(st, dtype=np.int64).reshape(len(pix), k)
        (w,) = _local_weights(local[st] - centres[:, None, :], [(self.phs, [parse_operator("value", self.dim)])],
                              degree=self.degree)
        w = w[:, :, 0]
        self.solves += len(pix)
        return assemble(st, w, len(arr))

    def pixel_weights(self, pixel_indices: ArrayLike) -> tuple[NDArray[np.int64], NDArray[np.floating]]:
        """Interpolation stencils and weights of pixel centres on their nearest nodes of the whole set.

        Parameters
        ----------
        pixel_indices : (P, d) int array
            Pixel indices (array order), inside the image.

        Returns
        -------
        stencils : (P, stencil_size) int64 array
            Global ids of each pixel centre's ``stencil_size`` nearest nodes.
        weights : (P, stencil_size) array
            RBF-FD interpolation weights (PHS r^phs + degree ``degree``), as in
            :meth:`pixel_interpolation` but on the global nearest nodes, so
            they are computed once per pixel and cached. A band can use the
            rows whose stencil lies entirely in it.
        """
        pix = self._check_pixels(pixel_indices)
        k = self.stencil_size
        if len(pix) == 0:
            return np.zeros((0, k), dtype=np.int64), np.zeros((0, k))
        if self._pixel_slot is None:
            self._pixel_slot = np.full(int(np.prod(self.shape)), -1, dtype=np.int64)
        flat = np.ravel_multi_index(tuple(pix.T), self.shape)
        new = np.unique(flat[self._pixel_slot[flat] < 0])
        if len(new):
            centres = np.stack(np.unravel_index(new, self.shape), axis=1) * self.pixel_spacing
            _, st = self.tree.query(centres, k=k)
            st = np.asarray(st, dtype=np.int64).reshape(len(new), k)
            (w,) = _local_weights(self.points[st] - centres[:, None, :],
                                  [(self.phs, [parse_operator("value", self.dim)])], degree=self.degree)
            self.solves += len(new)
            used = self._pixel_used
            need = used + len(new)
            if need > len(self._pixel_stencils):
                size = max(need, 2 * len(self._pixel_stencils), _MIN_ROWS)
                grown_st = np.zeros((size, k), dtype=np.int64)
                grown_w = np.zeros((size, k))
                grown_st[:used] = self._pixel_stencils[:used]
                grown_w[:used] = self._pixel_weights[:used]
                self._pixel_stencils, self._pixel_weights = grown_st, grown_w
            self._pixel_stencils[used:need] = st
            self._pixel_weights[used:need] = w[:, :, 0]
            self._pixel_slot[new] = np.arange(used, need)
            self._pixel_used = need
        slots = self._pixel_slot[flat]
        return self._pixel_stencils[slots], self._pixel_weights[slots]

    # ------------------------------------------------------------ zero crossings
    def edges(self, ids: ArrayLike) -> NDArray[np.int64]:
        """Edges of the k-nearest-neighbour graph within ``ids``, as (E, 2) positions in ``ids``.

        Each node is joined to its ``edge_neighbours`` nearest global nodes;
        the edges with both ends in ``ids`` are kept, each once (first < second).
        """
        arr = self._check_ids(ids)
        if len(arr) == 0:
            return np.zeros((0, 2), dtype=np.int64)
        slots = self._ensure_stencils(arr)
        m = self.edge_neighbours
        nb = self._centred[slots, 1:m + 1]
        other = self._positions_in(arr, nb)
        a = np.repeat(np.arange(len(arr), dtype=np.int64), m)
        b = other.reshape(-1)
        keep = b >= 0
        n = np.int64(len(arr))
        keys = np.unique(np.minimum(a[keep], b[keep]) * n + np.maximum(a[keep], b[keep]))
        return np.stack([keys // n, keys % n], axis=1)

    def crossing_points(self, ids: ArrayLike, phi: ArrayLike) -> NDArray[np.floating]:
        """Zero crossings of φ along the graph :meth:`edges`, by linear interpolation (mm).

        Every edge whose end values differ in sign (< 0 against >= 0) gives one
        point. For a signed distance φ, a point on an edge of length L lies
        within L² max|∂²φ/∂e²| / 8 of the zero set (linear interpolation
        error), i.e. L² κ / 8 near a front of curvature κ.
        """
        arr = self._check_ids(ids)
        values = np.asarray(phi, dtype=float)
        if values.shape != arr.shape:
            raise ValueError(f"phi: expected shape {arr.shape} like ids, got {values.shape}")
        if not np.all(np.isfinite(values)):
            raise ValueError("phi: contains NaN or inf")
        e = self.edges(arr)
        if len(e) == 0:
            return np.zeros((0, self.dim))
        return edge_crossings(self.points[arr], e, values)

    # ------------------------------------------------------------ stability figures
    def spectral_bound(self, ids: ArrayLike, *, damping: float = 0.0, method: str = "arnoldi") -> float:
        """Spectral radius of curvature motion's linear part on the complete nodes of ``ids``.

        Curvature motion of a signed distance φ with unit normal n has the
        linear part ``Δφ − n·H·n = Σ_ab (δ_ab − n_a n_b) ∂_a∂_b φ`` (the sum
        of the second derivatives along the front's tangents; t·H·t for the
        one tangent t in 2-D), here with the hyperviscosity ``− damping·hv``
        added. The result (1/mm² per unit curvature weight, for the explicit
        time-step limit) plays the part of ``BandStencil.spectral_radius`` of
        the lattice.

        Parameters
        ----------
        ids : (A,) int array
            Global node ids of the band; the operator is assembled on its
            complete nodes, the others held fixed.
        damping : float, default 0
            Hyperviscosity coefficient γ (mm⁴).
        method : {"arnoldi", "gershgorin"}
            ``"gershgorin"``: a bound for any unit normal field, by
            Gershgorin's theorem: ``max_i Σ_j ((d−1) max_a |w_aa| + Σ_{a<b}
            |w_ab| + γ |w_hv|)_ij`` (Σ_a (1 − n_a²) = d − 1 and
            2|n_a n_b| <= 1). ``"arnoldi"`` (default): the largest
            eigenvalue modulus of the assembled sparse operator for a fixed
            set of constant normals (2-D: the axes and diagonals; 3-D: the
            axes and one body diagonal), by implicitly restarted Arnoldi
            iteration [1]_, times ``SPECTRAL_SAFETY``, and never above the
            Gershgorin bound.

        Returns
        -------
        float
            The spectral radius figure (0 when no node of ``ids`` is complete).

        Notes
        -----
        Scattered RBF-FD operators have no Fourier symbol to scan as on the
        lattice, and a Gershgorin row sum counts every weight's modulus, which
        makes it 1.3 (2-D) to 2.2 (3-D) times the actual radius at the
        front's damping 0.01 (1 mm spacing: estimates 63 and 87 1/mm², of
        which the curvature part alone is 13 and 18); the RKL2 stages grow
        with its square root. The
        estimate takes normals constant in space; a front's normal varies
        slowly on the stencil scale, and the largest moduli (grid-scale
        modes, dominated by the isotropic hyperviscosity at the front's
        damping) change by a few per cent between directions, which the
        safety factor covers.

        References
        ----------
        .. [1] R. B. Lehoucq, D. C. Sorensen, C. Yang, "ARPACK Users' Guide",
           SIAM (1998) (scipy.sparse.linalg.eigs).
        """
        arr = self._check_ids(ids)
        gamma = _non_negative(damping, "damping")
        if method not in ("arnoldi", "gershgorin"):
            raise ValueError(f"method: expected 'arnoldi' or 'gershgorin', got {method!r}")
        if len(arr) == 0:
            return 0.0
        act = arr[self.complete(arr)]
        if len(act) == 0:
            return 0.0
        stencils, w = self.operator_weights(act)
        dim = self.dim
        diag_cols = [self.labels.index(f"d{a}{a}") for a in range(dim)]
        pairs = list(itertools.combinations(range(dim), 2))
        off_cols = [self.labels.index(f"d{i}{j}") for i, j in pairs]
        hv_col = self.labels.index("hv")
        diag = np.max(np.abs(w[:, :, diag_cols]), axis=2)
        off = np.sum(np.abs(w[:, :, off_cols]), axis=2) if off_cols else np.zeros(w.shape[:2])
        rows = np.sum((dim - 1) * diag + off + gamma * np.abs(w[:, :, hv_col]), axis=1)
        gershgorin = float(np.max(rows))
        if method == "gershgorin":
            return gershgorin
        cols = self._positions_in(act, stencils)
        # one entry per (node, stencil node in the active set); the padding repeats the node itself
        first = np.zeros(cols.shape, dtype=bool)
        first[:, 0] = True
        keep = (cols >= 0) & (first | (stencils != act[:, None]))
        row_of = np.broadcast_to(np.arange(len(act))[:, None], cols.shape)[keep]
        matrix = sp.csr_matrix((np.arange(1, int(keep.sum()) + 1, dtype=float), (row_of, cols[keep])),
                               shape=(len(act), len(act)))
        order = matrix.data.astype(np.int64) - 1
        columns = diag_cols + off_cols + [hv_col]
        entries = w[keep][:, columns]  # (nnz, d + pairs + 1)
        largest = 0.0
        for normal in _normal_directions(dim):
            coef = np.array([1.0 - normal[a] ** 2 for a in range(dim)]
                            + [-2.0 * normal[i] * normal[j] for i, j in pairs] + [-gamma])
            matrix.data = (entries @ coef)[order]
            modulus = _largest_eigenvalue_modulus(matrix)
            if modulus is None:
                return gershgorin
            largest = max(largest, modulus)
        return min(SPECTRAL_SAFETY * largest, gershgorin)


def _normal_directions(dim: int) -> list[NDArray[np.floating]]:
    """Unit normals at which :meth:`ScatteredNodeSet.spectral_bound` samples: axes and diagonals."""
    if dim == 2:
        raw = [(1, 0), (0, 1), (1, 1), (1, -1)]
    else:
        raw = [(1, 0, 0), (0, 1, 0), (0, 0, 1), (1, 1, 1)]
    return [np.asarray(v, dtype=float) / np.linalg.norm(v) for v in raw]


def _largest_eigenvalue_modulus(matrix: sp.csr_matrix) -> float | None:
    """Largest |λ| of a square sparse matrix: dense for small ones, else Arnoldi (None if it does not converge)."""
    size = matrix.shape[0]
    if size <= _DENSE_EIGEN:
        return float(np.max(np.abs(np.linalg.eigvals(matrix.toarray()))))
    start = np.cos(np.arange(size, dtype=float))  # fixed start vector: the same figure every run
    try:
        values = eigs(matrix, k=2, which="LM", tol=1e-3, v0=start, ncv=min(size - 1, 20), maxiter=2000,
                      return_eigenvectors=False)
    except ArpackNoConvergence:
        return None
    return float(np.max(np.abs(values)))
