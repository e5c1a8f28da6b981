"""Benchmark: scattered node generation and k-nearest stencils.

Prints nodes per second for about 10 000 and 40 000 nodes (2-D constant and
variable radius, 3-D constant and variable radius), the time of
``knn_stencils(k=30)`` on those node sets, and, for comparison in the same
process, scipy's Poisson-disk sampler (``scipy.stats.qmc.PoissonDisk``) on
the 2-D unit square at the radius of the 10 000-node case.

Run: ``python tests/bench/bench_scattered_nodes.py``. Prints only; asserts
nothing.
"""

from __future__ import annotations

import math
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
from scipy.stats import qmc

try:
    import engine  # noqa: F401
except ImportError:  # run from a checkout without installing
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from engine.nodes.scattered_nodes import DENSITY_2D, DENSITY_3D, scattered_nodes
from engine.nodes.spacing_quality import spacing_quality
from engine.numerics.neighbours import knn_stencils


def best_of(fn: Callable[[], np.ndarray], repeats: int = 3) -> tuple[float, np.ndarray]:
    best = math.inf
    out = np.empty((0, 2))
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def radius_for_count(n: int, dim: int) -> float:
    """Constant radius giving about n nodes in the unit square / cube."""
    if dim == 2:
        return math.sqrt(DENSITY_2D * 2.0 / math.sqrt(3.0) / n)
    return (DENSITY_3D * math.sqrt(2.0) / n) ** (1.0 / 3.0)


def main() -> None:
    print("scattered_nodes: unit square / unit cube, seed 0, best of 3")
    print(f"{'case':<34}{'nodes':>8}{'time (s)':>11}{'nodes/s':>11}{'knn k=30 (s)':>14}{'NN/r min..max':>18}")
    rows = []
    for target in (10_000, 40_000):
        for dim in (2, 3):
            r = radius_for_count(target, dim)
            lo, hi = (0.0,) * dim, (1.0,) * dim
            cases = [
                (f"{dim}-D constant r={r:.4f}", r),
                # spacing grows linearly by 2x along the last axis; r0 scaled to keep the count
                (
                    f"{dim}-D variable r0={0.7 * r:.4f} (x2 across)",
                    (lambda p, r0=0.7 * r: r0 * (1.0 + p[:, -1])),
                ),
            ]
            for name, radius in cases:
                t, nodes = best_of(lambda radius=radius, lo=lo, hi=hi: scattered_nodes(lo, hi, radius, seed=0))
                t_knn, _ = best_of(lambda nodes=nodes: knn_stencils(nodes, k=30))
                q = spacing_quality(nodes, radius=radius)
                rows.append((name, len(nodes), t))
                print(
                    f"{name:<34}{len(nodes):>8}{t:>11.3f}{len(nodes) / t:>11.0f}{t_knn:>14.3f}"
                    f"{q.min:>9.3f}..{q.max:.3f}"
                )

    # same-process comparison with scipy's Poisson-disk sampler (constant radius, 2-D)
    r = radius_for_count(10_000, 2)
    t_ours, ours = best_of(lambda: scattered_nodes((0.0, 0.0), (1.0, 1.0), r, seed=0))
    t0 = time.perf_counter()
    ref = qmc.PoissonDisk(2, radius=r, rng=0).fill_space()
    t_ref = time.perf_counter() - t0
    q_ref = spacing_quality(ref, radius=r)
    q_ours = spacing_quality(ours, radius=r)
    print()
    print(f"2-D unit square, r = {r:.4f}: this module vs scipy.stats.qmc.PoissonDisk(...).fill_space()")
    print(f"  this module : {len(ours):6d} nodes in {t_ours:7.3f} s = {len(ours) / t_ours:9.0f} nodes/s, "
          f"NN/r median {q_ours.median:.3f}, p05..p95 {q_ours.p05:.3f}..{q_ours.p95:.3f}")
    print(f"  scipy       : {len(ref):6d} nodes in {t_ref:7.3f} s = {len(ref) / t_ref:9.0f} nodes/s, "
          f"NN/r median {q_ref.median:.3f}, p05..p95 {q_ref.p05:.3f}..{q_ref.p95:.3f}")
    print(f"  ratio (nodes/s, this module / scipy): {(len(ours) / t_ours) / (len(ref) / t_ref):.1f}")


if __name__ == "__main__":
    main()
