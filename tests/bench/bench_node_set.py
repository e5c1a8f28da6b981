"""Benchmark: the scattered node set of one image and its band operators.

On a 512 x 512 disk phantom (0.8 mm pixels, light noise) prints the time of
the edge-adaptive spacing, of generating the global nodes (finest 0.4 mm at
the edge, coarsest 0.8 mm), and, for a band of about 10 000 nodes around the
disk's edge, the first (solving) and second (cached) call of
``operator_weights``, ``complete``, ``pixel_interpolation``,
``crossing_points``, the spectral figure (Arnoldi estimate and Gershgorin
bound) and one application of all band operators
(gather + per-node weights, as einsum and as batched matmul) next to the lattice band's shared-pattern
product for the same number of nodes, measured in the same process.

Run: ``python tests/bench/bench_node_set.py``. Prints only; asserts nothing.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

try:
    import engine  # noqa: F401
except ImportError:  # run from a checkout without installing
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from engine.nodes.band_stencils import band_stencil
from engine.image.features import compute_features
from engine.nodes.edge_spacing import edge_adaptive_spacing
from engine.nodes.node_set import ScatteredNodeSet
from engine.nodes.spacing_quality import spacing_quality


def timed(label: str, fn, repeats: int = 1):
    best = float("inf")
    out = None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    print(f"  {label:<44s} {best * 1e3:9.1f} ms")
    return out


def main() -> None:
    rng = np.random.default_rng(0)
    n, pixel = 512, 0.8
    yy, xx = np.mgrid[:n, :n]
    radius_px = 50.0
    img = np.where((yy - 256.0) ** 2 + (xx - 256.0) ** 2 < radius_px**2, 100.0, 0.0)
    img += rng.normal(0.0, 5.0, img.shape)
    feats = compute_features(img, (pixel, pixel), sigma_mm=1.0)
    print(f"image {n}x{n}, pixel {pixel} mm, disk radius {radius_px} px")
    fn = timed("edge_adaptive_spacing", lambda: edge_adaptive_spacing(feats, finest=pixel / 2, coarsest=pixel))
    ns = timed("ScatteredNodeSet (node generation + tree)",
               lambda: ScatteredNodeSet(img.shape, (pixel, pixel), fn))
    q = spacing_quality(ns.points, radius=fn)
    print(f"  nodes {ns.node_count}; nearest neighbour / spacing: median {q.median:.3f}, "
          f"p05 {q.p05:.3f}, p95 {q.p95:.3f}; max neighbour ratio bound {fn.max_ratio(pixel):.3f}")

    centre = np.array([256.0, 256.0]) * pixel
    angles = np.linspace(0.0, 2 * np.pi, 4000, endpoint=False)
    circle = centre + radius_px * pixel * np.column_stack([np.cos(angles), np.sin(angles)])
    half_width = 4.3 * pixel
    ids = timed("nodes_near (band around the disk edge)", lambda: ns.nodes_near(circle, half_width))
    print(f"  band: {len(ids)} nodes")
    solves0 = ns.solves
    st, w = timed("operator_weights, first call (solves)", lambda: ns.operator_weights(ids))
    print(f"  solves {ns.solves - solves0}; stencil width {st.shape[1]}; weights {w.nbytes / 1e6:.1f} MB")
    timed("operator_weights, cached call", lambda: ns.operator_weights(ids), repeats=3)
    comp = timed("complete", lambda: ns.complete(ids), repeats=3)
    print(f"  complete: {int(comp.sum())} of {len(ids)}")
    loc = timed("local_stencils", lambda: ns.local_stencils(ids), repeats=3)
    phi = np.linalg.norm(ns.points[ids] - centre, axis=1) - radius_px * pixel
    pts = timed("crossing_points", lambda: ns.crossing_points(ids, phi), repeats=3)
    err = np.abs(np.linalg.norm(pts - centre, axis=1) - radius_px * pixel)
    print(f"  crossings {len(pts)}, max distance to the circle {err.max():.2e} mm")
    pix = np.unique(np.rint(ns.pixels[ids[comp]]).astype(np.int64), axis=0)
    mat = timed("pixel_interpolation (band pixels)", lambda: ns.pixel_interpolation(ids, pix))
    timed("  its sparse product", lambda: mat @ phi, repeats=5)
    print(f"  pixels {len(pix)}")
    bound = timed("spectral_bound (Arnoldi estimate)", lambda: ns.spectral_bound(ids), repeats=1)
    gersh = timed("spectral_bound (Gershgorin)", lambda: ns.spectral_bound(ids, method="gershgorin"), repeats=1)
    damped = ns.spectral_bound(ids, damping=0.01)
    damped_g = ns.spectral_bound(ids, damping=0.01, method="gershgorin")
    print(f"  spectral figure {bound:.1f} 1/mm^2, Gershgorin {gersh:.1f} (lattice at h = {pixel / 2}: "
          f"{band_stencil((pixel / 2, pixel / 2)).spectral_radius:.1f}); with damping 0.01: {damped:.1f} "
          f"against {damped_g:.1f}")

    act = np.flatnonzero(comp)
    gather = loc[act]
    wa = w[act]
    timed("apply all operators (scattered: gather + einsum)",
          lambda: np.einsum("an,ank->ak", phi[gather], wa), repeats=5)
    timed("apply all operators (scattered: batched matmul)",
          lambda: (phi[gather][:, None, :] @ wa)[:, 0, :], repeats=5)
    lattice = band_stencil((pixel / 2, pixel / 2))
    lg = rng.integers(0, len(phi), size=(len(act), len(lattice.offsets)))
    timed(f"apply all operators (lattice pattern, {len(lattice.offsets)} nodes)",
          lambda: phi[lg] @ lattice.weights, repeats=5)


if __name__ == "__main__":
    main()
