"""Benchmark: RBF-FD weights, lattice operators, operator application, Newton distances.

Prints wall times (best of a few runs) and, for the operator application, the
ratio to a scipy.sparse matvec of a random CSR matrix with the same shape and
number of non-zeros, measured in the same process. Asserts nothing.

    python tests/bench/bench_rbffd.py

Rows:
- RBF-FD weights (r^5, degree 4, n = 30; operators ∂x, ∂y, ∂xx, ∂xy, ∂yy) by
  ``engine.numerics.rbffd.operator_matrix`` for 10 000 and 40 000 stencils on uniform
  random points, and on variable-density nodes from
  ``engine.nodes.scattered_nodes.scattered_nodes`` (their generation timed too).
- ``engine.nodes.lattice.lattice_operators`` for a ~10 000-node annulus band at
  h = 1 px (one-sided edge stencils, and with ``edge="skip"``).
- One stacked operator matvec (the five matrices in one CSR) against a random
  CSR of the same shape and nnz.
- The gather-and-dense-product form the front uses,
  ``phi[gather] @ W`` with ``engine.nodes.band_stencils.band_stencil`` weights, on
  the same band; again in a child process with BLAS limited to one thread
  (small products can be much slower with BLAS threads on a busy machine).
- Newton signed distance (``engine.numerics.closest_point.signed_distance``) for
  10 000 points within 5 px of the ellipse x²/a² + y²/b² = 1 (a = 40, b = 20
  px) from node values of the implicit function exp(x²/a² + y²/b² − 1) − 1, with the
  interpolant set-up timed separately and the error against the exact
  distance (parametric Newton, common geometry) printed.
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import scipy.sparse as sp
from scipy.spatial import cKDTree

try:
    import engine  # noqa: F401
except ImportError:  # run from a checkout without installing
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from engine.nodes.band_stencils import band_stencil
from engine.numerics.closest_point import signed_distance
from engine.analysis.contours import band_contours
from engine.numerics.interpolant import LocalInterpolant
from engine.nodes.lattice import LatticeLookup, lattice_operators, lattice_stencils
from engine.numerics.rbffd import operator_matrix
from engine.nodes.scattered_nodes import DENSITY_2D, scattered_nodes

OPS = [(1, 0), (0, 1), (2, 0), (1, 1), (0, 2)]
ROWS: list[tuple[str, str, str]] = []


def best_of(fn: Callable[[], object], repeats: int = 3) -> tuple[float, object]:
    """Smallest wall time of ``repeats`` calls, and the last result."""
    best, out = math.inf, None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def per_call(fn: Callable[[], object], *, min_time: float = 0.2, repeats: int = 5) -> float:
    """Seconds per call of a fast function (best of ``repeats`` loops of ≥ ``min_time``)."""
    loops = 1
    while True:
        t0 = time.perf_counter()
        for _ in range(loops):
            fn()
        if time.perf_counter() - t0 >= min_time / repeats:
            break
        loops *= 2
    best = math.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        for _ in range(loops):
            fn()
        best = min(best, (time.perf_counter() - t0) / loops)
    return best


def row(case: str, size: str, value: str) -> None:
    ROWS.append((case, size, value))
    print(f"  {case:<58}{size:>12}{value:>22}", flush=True)


def bench_scattered_weights() -> None:
    rng = np.random.default_rng(0)
    for count in (10_000, 40_000):
        side = math.sqrt(count)  # unit mean spacing
        points = rng.uniform(0.0, side, (count, 2))
        t, _ = best_of(lambda: operator_matrix(points, OPS, stencil_size=30, degree=4, phs=5),
                       repeats=2 if count <= 10_000 else 1)
        row("weights, uniform random points (5 ops, n=30)", f"{count}", f"{t:.3f} s  {1e6 * t / count:.0f} us/st")
    for count in (10_000, 40_000):
        side = 100.0
        radius = math.sqrt(DENSITY_2D * 2.0 / math.sqrt(3.0) / count) * side
        t_nodes, nodes = best_of(lambda: scattered_nodes((0.0, 0.0), (side, side), radius), repeats=1)
        t, _ = best_of(lambda: operator_matrix(nodes, OPS, stencil_size=30, degree=4, phs=5), repeats=1)
        row("scattered_nodes generation (constant radius)", f"{len(nodes)}", f"{t_nodes:.3f} s")
        row("weights on those nodes (5 ops, n=30)", f"{len(nodes)}", f"{t:.3f} s  {1e6 * t / len(nodes):.0f} us/st")


def annulus_band(count: int = 10_000, half_width: float = 6.0) -> tuple[np.ndarray, np.ndarray]:
    """Lattice nodes (h = 1 px) with |r − R| <= half_width, about ``count`` of them, and φ = r − R."""
    radius = count / (2.0 * math.pi * 2.0 * half_width)
    centre = radius + half_width + 4.37
    side = int(2 * centre) + 2
    i, j = np.mgrid[0:side, 0:side]
    phi = np.hypot(i - centre, j - centre + 0.21) - radius
    keep = np.abs(phi) <= half_width
    return np.argwhere(keep), phi[keep]


def gather_product_times() -> tuple[float, float, float, int, int, int]:
    """Per-call times of phi[gather] @ W (all columns, the 5 centred ones) and of the gather alone."""
    idx, _ = annulus_band()
    x = np.random.default_rng(1).normal(size=len(idx))
    stencil = band_stencil((1.0, 1.0), stencil_size=30)
    table = LatticeLookup(idx).find(idx[:, None, :] + stencil.offsets[None])
    gather = table[np.all(table >= 0, axis=1)]
    weights = stencil.weights
    centred = [stencil.column(lab) for lab in ("d0", "d1", "d00", "d01", "d11")]
    w5 = np.ascontiguousarray(weights[:, centred])
    t_all = per_call(lambda: x[gather] @ weights)
    t_five = per_call(lambda: x[gather] @ w5)
    t_gather = per_call(lambda: x[gather])
    return t_all, t_five, t_gather, len(gather), weights.shape[0], weights.shape[1]


def single_thread_gather() -> tuple[float, float] | None:
    """The gather products timed in a child process with BLAS limited to one thread."""
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
    try:
        out = subprocess.run([sys.executable, __file__, "--gather-only"], env=env, check=True,
                             capture_output=True, text=True, timeout=300).stdout.split()
    except (subprocess.SubprocessError, OSError):
        return None
    return float(out[0]), float(out[1])


def bench_lattice_and_matvec() -> None:
    idx, _ = annulus_band()
    n = len(idx)
    t_one, (mats, interior) = best_of(lambda: lattice_operators(idx, (1.0, 1.0), OPS, stencil_size=30), repeats=2)
    t_skip, _ = best_of(lambda: lattice_operators(idx, (1.0, 1.0), OPS, stencil_size=30, edge="skip"), repeats=2)
    row(f"lattice_operators, annulus band ({interior.sum()} interior)", f"{n}", f"{t_one:.3f} s")
    row("lattice_operators, edge='skip'", f"{n}", f"{t_skip:.3f} s")

    stacked = sp.vstack(mats, format="csr")
    rng = np.random.default_rng(1)
    x = rng.normal(size=n)
    t_ours = per_call(lambda: stacked @ x)
    density = stacked.nnz / (stacked.shape[0] * stacked.shape[1])
    random_csr = sp.random(stacked.shape[0], stacked.shape[1], density=density, format="csr", random_state=rng)
    t_rand = per_call(lambda: random_csr @ x)
    row(f"stacked matvec {stacked.shape[0]}x{stacked.shape[1]}", f"nnz {stacked.nnz}", f"{1e6 * t_ours:.0f} us")
    row(f"random CSR matvec, same shape (nnz {random_csr.nnz})", "", f"{1e6 * t_rand:.0f} us")
    row("ratio stacked / random", "", f"{t_ours / t_rand:.2f}")

    t_all, t_five, t_gather, nodes, offsets, columns = gather_product_times()
    row(f"gather phi[gather] @ W ({nodes} nodes x {offsets} offsets, {columns} cols)",
        f"{nodes * offsets}", f"{1e6 * t_all:.0f} us")
    row("  same, the 5 centred columns only", "", f"{1e6 * t_five:.0f} us")
    row("  of which the gather phi[gather]", "", f"{1e6 * t_gather:.0f} us")
    row("ratio gather (5 cols) / stacked CSR matvec", "", f"{t_five / t_ours:.2f}")
    single = single_thread_gather()
    if single is not None:
        row(f"gather @ W, BLAS 1 thread (child process), {columns} cols", "", f"{1e6 * single[0]:.0f} us")
        row("  same, the 5 centred columns only", "", f"{1e6 * single[1]:.0f} us")


A, B = 40.0, 20.0
ELLIPSE_CENTRE = np.array([60.37, 50.81])


def exact_ellipse_distance(points: np.ndarray, samples: int = 4096) -> np.ndarray:
    """Signed distance to the ellipse: dense sampling of t, then Newton on t (common geometry)."""
    q = points - ELLIPSE_CENTRE
    px, py = q[:, 0], q[:, 1]
    grid = np.linspace(0.0, 2.0 * np.pi, samples, endpoint=False)
    t = np.empty(len(q))
    for s0 in range(0, len(q), 2048):
        sl = slice(s0, s0 + 2048)
        d2 = (A * np.cos(grid)[None] - px[sl, None]) ** 2 + (B * np.sin(grid)[None] - py[sl, None]) ** 2
        t[sl] = grid[np.argmin(d2, axis=1)]
    for _ in range(40):
        s, c = np.sin(t), np.cos(t)
        f1 = -A * s * (A * c - px) + B * c * (B * s - py)
        f2 = A * A * s * s - A * c * (A * c - px) + B * B * c * c - B * s * (B * s - py)
        t = t - np.clip(f1 / np.where(f2 > 0, f2, np.inf), -2 * np.pi / samples, 2 * np.pi / samples)
    dist = np.hypot(A * np.cos(t) - px, B * np.sin(t) - py)
    return np.where(px**2 / A**2 + py**2 / B**2 < 1.0, -dist, dist)


def bench_newton_distance(count: int = 10_000) -> None:
    i, j = np.mgrid[0:130, 0:110]
    idx = np.stack([i.ravel(), j.ravel()], axis=1)
    exact_nodes = exact_ellipse_distance(idx.astype(float))
    keep = np.abs(exact_nodes) <= 8.0
    idx = idx[keep]
    positions = idx.astype(float)
    q = positions - ELLIPSE_CENTRE
    values = np.expm1(q[:, 0] ** 2 / A**2 + q[:, 1] ** 2 / B**2 - 1.0)  # not a distance, not a polynomial

    def setup() -> tuple[LocalInterpolant, np.ndarray]:
        pattern, interior, _ = lattice_stencils(idx, (1.0, 1.0), stencil_size=30)
        owners = np.flatnonzero(interior)
        return LocalInterpolant.build(positions, pattern[owners], owners=owners)

    t_build, interp = best_of(setup)
    t_coef, coeffs = best_of(lambda: interp.coefficients(values))
    rng = np.random.default_rng(2)
    candidates = rng.uniform([15.0, 25.0], [106.0, 77.0], (4 * count, 2))
    exact_c = exact_ellipse_distance(candidates)
    chosen = np.flatnonzero(np.abs(exact_c) <= 5.0)[:count]
    query, exact = candidates[chosen], exact_c[chosen]
    sign_values, _, _ = interp.evaluate(query, coeffs, order=0)

    def starts() -> np.ndarray:
        vertices = np.concatenate(band_contours(idx, values))
        _, nearest = cKDTree(vertices).query(query)
        return vertices[nearest]

    t_start, start = best_of(starts)
    t_newton, (dist, cp) = best_of(lambda: signed_distance(interp, coeffs, query, sign_values=sign_values,
                                                            start=start))
    t_default, (dist2, cp2) = best_of(lambda: signed_distance(interp, coeffs, query, sign_values=sign_values))
    err = np.abs(dist - exact).max()
    err2 = np.abs(dist2 - exact).max()
    row(f"interpolant build, ellipse band ({len(interp.owner_nodes)} owners)", f"{len(idx)}", f"{t_build:.3f} s")
    row("interpolant coefficients", f"{len(idx)}", f"{1e3 * t_coef:.1f} ms")
    row("starts: band_contours + nearest vertex", f"{len(query)}", f"{1e3 * t_start:.1f} ms")
    row(f"Newton signed distance, start = nearest vertex ({cp.iterations} it)", f"{len(query)}",
        f"{t_newton:.3f} s")
    row(f"  converged {cp.converged.sum()}/{len(query)}, max |error| vs exact", "", f"{err:.1e} px")
    row(f"Newton signed distance, default start ({cp2.iterations} it)", f"{len(query)}", f"{t_default:.3f} s")
    row(f"  converged {cp2.converged.sum()}/{len(query)}, max |error| vs exact", "", f"{err2:.1e} px")


def main() -> None:
    if "--gather-only" in sys.argv:
        t_all, t_five, *_ = gather_product_times()
        print(t_all, t_five)
        return
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"RBF-FD benchmark: numpy {np.__version__}, {os.cpu_count()} CPUs (load {load:.1f}), "
          "best of 1-3 runs")
    print(f"  {'case':<58}{'size':>12}{'time':>22}")
    bench_scattered_weights()
    bench_lattice_and_matvec()
    bench_newton_distance()


if __name__ == "__main__":
    main()
