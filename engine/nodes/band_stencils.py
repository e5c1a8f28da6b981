"""Shared lattice stencils for the narrow band: centred and one-sided RBF-FD weights.

On a lattice every complete stencil is a translate of one pattern, so the
weights of all operators are solved once per pattern and applied to the band
as a gather followed by one small dense product: derivs = φ[nodes + offsets] @ W.

Centred weights (symmetric pattern) give the gradient and the Hessian for
curvature, and a sixth-order hyperviscosity. The tangential second
derivative that curvature motion applies has, on a lattice, a slightly
positive Fourier symbol at a few high frequencies for oblique directions
(anti-diffusion); a hyperviscosity −γ Σ_i (−∂_i²)³ φ, discretised by
undivided differences (symbol Σ_i 64 sin⁶(θ_i/2) ≥ 0 at every frequency),
with γ ∝ h⁴ removes it while changing smooth solutions only at O(h⁴)
(hyperviscosity for RBF-FD: Fornberg & Lehto, J. Comput. Phys. 230 (2011)
2270-2285); :func:`curvature_damping` computes the smallest sufficient γ
from the symbols. One-sided weights (the half of a ball with o_i ≤ 0, respectively
o_i ≥ 0) give the backward/forward derivatives of the Godunov upwind
Hamiltonian for the advective part of the level-set equation.

References
----------
.. [1] N. Flyer, B. Fornberg, V. Bayona, G. A. Barnett, J. Comput. Phys. 321
   (2016) 21-38 (PHS + polynomial RBF-FD).
.. [2] S. Osher, R. Fedkiw, "Level Set Methods and Dynamic Implicit
   Surfaces", Springer (2003), ch. 6 (Godunov Hamiltonian for |∇φ|).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from functools import cached_property, lru_cache

import numpy as np
from numpy.typing import ArrayLike, NDArray

from engine.nodes.lattice import symmetric_offsets, whole_shells
from engine.numerics.polynomials import monomial_count
from engine.numerics.rbffd import parse_operator, scaled_weights


#: k of the hyperviscosity Σ_i (−∂_i²)^k added to curvature motion.
HYPERVISCOSITY_POWER = 3


def _undivided_sixth_differences(step: NDArray[np.floating]) -> tuple[NDArray[np.int64], NDArray[np.floating]]:
    """Offsets and weights of Σ_i (−δ_i²)³ / h_i⁶ (1-D weights −1, 6, −15, 20, −15, 6, −1)."""
    dim = len(step)
    base = np.array([-1.0, 6.0, -15.0, 20.0, -15.0, 6.0, -1.0])
    offsets, weights = [], []
    for axis in range(dim):
        for k, w in zip(range(-3, 4), base):
            o = np.zeros(dim, dtype=np.int64)
            o[axis] = k
            offsets.append(o)
            weights.append(w / step[axis] ** 6)
    off = np.array(offsets)
    keys, inverse = np.unique(off, axis=0, return_inverse=True)
    summed = np.zeros(len(keys))
    np.add.at(summed, inverse.reshape(-1), weights)
    return keys, summed


def centred_derivatives(dim: int) -> tuple[list[tuple[int, ...]], list[str]]:
    """Multi-indices and labels of the band's centred columns: ``d<i>``, then ``d<i><j>`` (i <= j)."""
    unit = [tuple(int(a == k) for k in range(dim)) for a in range(dim)]
    second, labels = [], []
    for i, j in itertools.combinations_with_replacement(range(dim), 2):
        alpha = [0] * dim
        alpha[i] += 1
        alpha[j] += 1
        second.append(tuple(alpha))
        labels.append(f"d{i}{j}")
    return unit + second, [f"d{a}" for a in range(dim)] + labels


def step_labels(dim: int) -> tuple[str, ...]:
    """Operators a stage of the front needs at every active node: ∂_i, ∂_i⁻, ∂_i⁺, then the hyperviscosity."""
    return tuple([f"d{i}" for i in range(dim)] + [f"b{i}" for i in range(dim)] + [f"f{i}" for i in range(dim)]
                 + ["hv"])


def layer_labels(dim: int) -> tuple[str, ...]:
    """Operators needed only at the layer next to the front (curvature): ∂_i, then ∂_i∂_j (i <= j)."""
    return tuple(centred_derivatives(dim)[1])


def one_sided_offsets(dim: int, axis: int, direction: int, size: int) -> NDArray[np.int64]:
    """Offsets of a half ball (o_axis * direction >= 0) with about ``size`` nodes.

    The half ball is symmetric in the other axes; whole shells are taken and
    the count closest to ``size`` is chosen (ties: the larger).
    """
    reach = int(np.ceil((2 * size) ** (1.0 / dim))) + 2
    grid = np.array(list(itertools.product(range(-reach, reach + 1), repeat=dim)), dtype=np.int64)
    return whole_shells(grid[grid[:, axis] * direction >= 0], size)


@dataclass(frozen=True)
class BandStencil:
    """Union of the centred and one-sided patterns with a weight column per operator."""

    offsets: NDArray[np.int64]  # (n_u, d); offsets[0] is the centre
    weights: NDArray[np.floating]  # (n_u, K)
    labels: tuple[str, ...]  # name of each column
    reach: float  # largest |offset| in index units
    damping: float = 0.0  # γ per unit curvature weight (mm^(2k−2)): rate −a·γ·(−Δ)^k φ
    spectral_radius: float = 0.0  # of curvature motion per unit curvature weight (1/mm²)

    def column(self, label: str) -> int:
        return self.labels.index(label)

    def _rows(self, labels: tuple[str, ...]) -> NDArray[np.floating]:
        """Weights of ``labels`` as contiguous rows (n_labels, n_u): ``rows @ φ[gather]`` gives one row per operator."""
        return np.ascontiguousarray(self.weights[:, [self.column(lab) for lab in labels]].T)

    @cached_property
    def step_rows(self) -> NDArray[np.floating]:
        """Rows of the operators every active node needs at every stage, in :func:`step_labels` order."""
        return self._rows(step_labels(self.offsets.shape[1]))

    @cached_property
    def layer_rows(self) -> NDArray[np.floating]:
        """Rows of the operators needed only next to the front, in :func:`layer_labels` order."""
        return self._rows(layer_labels(self.offsets.shape[1]))


def _weights_on(offsets: NDArray[np.int64], step: NDArray[np.floating], ops: list, degree: int,
                phs: int) -> NDArray[np.floating]:
    pos = offsets * step
    radius = float(np.sqrt(np.max(np.sum(pos**2, axis=1))))
    operators = [parse_operator(op, len(step)) for op in ops]
    w = scaled_weights((pos / radius)[None], operators, degree=degree, phs=phs)[0]
    orders = np.array([op.order for op in operators], dtype=float)
    return w / radius**orders[None, :]


def band_stencil(step: ArrayLike, *, stencil_size: int | None = None, degree: int = 4, phs: int = 5,
                 upwind_degree: int = 2) -> BandStencil:
    """Weights of the band's operators for lattice step ``step`` (mm); cached per settings and shape of the step.

    Polyharmonic splines with polynomials are scale-covariant: on the step
    m·h the weights of a derivative of order k are those on h times m^(−k)
    (the sixth-order hyperviscosity's m^(−6)), the damping γ scales as m⁴
    and the spectral radius as m^(−2). So the weights are solved once for
    the step divided by its smallest entry and rescaled (a coarse start at
    2 mm reuses the 1 mm stencil instead of scanning its symbols again).
    """
    h = np.asarray(step, dtype=float).reshape(-1)
    m = float(np.min(h))
    base = _band_stencil_cached(tuple(float(v) for v in h / m), stencil_size, degree, phs, upwind_degree)
    if m == 1.0:
        return base
    orders = np.array([_operator_order(lab) for lab in base.labels], dtype=float)
    return BandStencil(base.offsets, base.weights * m ** -orders[None, :], base.labels, base.reach,
                       base.damping * m**4, base.spectral_radius / m**2)


def _operator_order(label: str) -> int:
    """Derivative order of a band stencil column: d0 → 1, d01 → 2, b0/f0 → 1, hv → 2·HYPERVISCOSITY_POWER."""
    if label == "hv":
        return 2 * HYPERVISCOSITY_POWER
    if label.startswith("d"):
        return len(label) - 1
    return 1


@lru_cache(maxsize=32)
def _band_stencil_cached(
    step: tuple[float, ...], stencil_size: int | None, degree: int, phs: int, upwind_degree: int
) -> BandStencil:
    return _make_band_stencil(step, stencil_size=stencil_size, degree=degree, phs=phs, upwind_degree=upwind_degree)


def _make_band_stencil(
    step: ArrayLike, *, stencil_size: int | None = None, degree: int = 4, phs: int = 5,
    upwind_degree: int = 2,
) -> BandStencil:
    """Weights of ∂_i, ∂_i∂_j (centred) and ∂_i⁻, ∂_i⁺ (one-sided) on the lattice step ``step`` (mm).

    Columns are labelled ``"d0"`` … (centred first derivatives), ``"d00"``,
    ``"d01"``, … (second derivatives, i <= j), ``"b0"``/``"f0"`` … (backward
    and forward one-sided first derivatives).
    """
    h = np.asarray(step, dtype=float)
    dim = len(h)
    if stencil_size is None:
        stencil_size = 2 * monomial_count(dim, degree)
    centred = symmetric_offsets(dim, stencil_size)
    n_side = 2 * monomial_count(dim, upwind_degree) + 1
    columns: list[tuple[str, NDArray[np.int64], NDArray[np.floating]]] = []
    derivatives, labels = centred_derivatives(dim)
    unit = derivatives[:dim]
    w_c = _weights_on(centred, h, derivatives, degree, phs)
    for k, label in enumerate(labels):
        columns.append((label, centred, w_c[:, k]))
    columns.append(("hv", *_undivided_sixth_differences(h)))
    for axis in range(dim):
        for direction, tag in ((-1, "b"), (1, "f")):
            off = one_sided_offsets(dim, axis, direction, n_side)
            w = _weights_on(off, h, [unit[axis]], upwind_degree, phs)
            columns.append((f"{tag}{axis}", off, w[:, 0]))
    union = np.unique(np.concatenate([c[1] for c in columns]), axis=0)
    dist2 = np.sum(union**2, axis=1)
    union = union[np.lexsort((*union.T[::-1], dist2))]
    lookup = {tuple(o): i for i, o in enumerate(union)}
    weights = np.zeros((len(union), len(columns)))
    for k, (_, off, w) in enumerate(columns):
        rows = [lookup[tuple(o)] for o in off]
        weights[rows, k] = w
    reach = float(np.sqrt(np.max(np.sum(union**2, axis=1))))
    stencil = BandStencil(union, weights, tuple(c[0] for c in columns), reach)
    damping, radius = curvature_damping(stencil, h)
    return BandStencil(union, weights, stencil.labels, reach, damping, radius)


def curvature_damping(stencil: "BandStencil", step: NDArray[np.floating], *, safety: float = 1.5,
                      samples: int = 61, angles: int = 24) -> tuple[float, float]:
    """Hyperviscosity factor c and the parabolic spectral radius of curvature motion.

    Scans the Fourier symbols of the tangential second derivative
    tr((I − nnᵀ)H) (t·H·t in 2-D, the sum over two tangents in 3-D) over
    front normals n (``angles`` of them in 2-D, 4 × ``angles`` spread over
    the sphere in 3-D) and wave numbers on the lattice; returns c such that
    the hyperviscosity c·(−Δ)³ outweighs every positive (anti-diffusive) part
    of it (times ``safety``), and the largest |symbol| of the two together in
    1/mm² per unit curvature weight (for the explicit time-step limit).
    """
    dim = len(step)
    h2 = float(np.min(step)) ** (2 * HYPERVISCOSITY_POWER - 2)
    theta = np.linspace(-np.pi, np.pi, samples)
    grids = np.meshgrid(*([theta] * dim), indexing="ij")
    phase = sum(g[..., None] * stencil.offsets[:, i] for i, g in enumerate(grids))
    cosine = np.cos(phase)
    symbol = {lab: cosine @ stencil.weights[:, stencil.column(lab)]
              for lab in stencil.labels if lab.startswith("d") and len(lab) == 1 + 2 or lab == "hv"}
    if dim == 3:  # a Fibonacci lattice on the upper half sphere (n and −n give the same operator)
        k = np.arange(4 * angles) + 0.5
        z = k / (4 * angles)
        turn = np.pi * (3.0 - np.sqrt(5.0)) * k
        ring = np.sqrt(1.0 - z**2)
        directions = np.stack([ring * np.cos(turn), ring * np.sin(turn), z], axis=1)
    else:
        directions = np.stack([np.cos(np.linspace(0, np.pi, angles)), np.sin(np.linspace(0, np.pi, angles))],
                              axis=1)
    bih = symbol["hv"]
    need = 0.0
    worst = 0.0
    tangential = []
    for n in directions:
        # curvature motion of a front with normal n applies the trace of the Hessian over the
        # tangent plane, tr((I − nnᵀ) H): one tangent in 2-D, the sum over two in 3-D (taking
        # the tangents one at a time underestimates the 3-D spectral radius)
        proj = np.eye(dim) - np.outer(n, n)
        sym = sum(proj[i, j] * symbol[f"d{min(i, j)}{max(i, j)}"] for i in range(dim) for j in range(dim))
        tangential.append(sym)
        positive = sym > 1e-12
        if np.any(positive):
            need = max(need, float(np.max(sym[positive] / np.maximum(bih[positive], 1e-300))))
    c = safety * need / h2
    for sym in tangential:
        worst = max(worst, float(np.max(np.abs(sym - c * h2 * bih))))
    return c * h2, worst
