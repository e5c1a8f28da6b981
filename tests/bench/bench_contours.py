"""Benchmark: band contours, their linking, partial volumes and band masks.

Prints wall times (best of several runs) and ratios against scikit-image
measured in the same process; asserts nothing.

    python tests/bench/bench_contours.py
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
from skimage.draw import polygon as draw_polygon
from skimage.measure import find_contours

try:
    import engine  # noqa: F401
except ImportError:  # run from a checkout without installing
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from engine.analysis.contours import _cell_segments, _chain_order, band_contour_set, band_contours
from engine.analysis.masks import mask_from_band, partial_volume


def best_of(fn, repeat: int = 5) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def disk_band(n_nodes: int, half_width: float = 4.0, detail: int = 1):
    """A disk whose band |φ| < half_width px holds about n_nodes lattice nodes.

    Returns (indices, values, full lattice grid of φ for the reference run).
    """
    radius_lattice = n_nodes / (2 * np.pi * 2 * half_width * detail)
    side = int(2 * radius_lattice + 4 * half_width * detail + 8)
    centre = side / 2 + 0.37
    i, j = np.mgrid[0:side, 0:side]
    full = (np.hypot(i - centre, j - centre - 0.21) - radius_lattice) / detail
    keep = np.abs(full) < half_width
    idx = np.argwhere(keep)
    perm = np.random.default_rng(0).permutation(len(idx))
    return idx[perm], full[keep][perm], full


def python_walk(succ: np.ndarray) -> list[list[int]]:
    """Plain-Python successor walk (comparison only)."""
    succ_list = succ.tolist()
    pred = [-1] * len(succ_list)
    for k, s in enumerate(succ_list):
        if s >= 0:
            pred[s] = k
    seen = [False] * len(succ_list)
    chains = []
    starts = [k for k in range(len(succ_list)) if pred[k] < 0] + list(range(len(succ_list)))
    for k in starts:
        if seen[k]:
            continue
        chain = []
        while k >= 0 and not seen[k]:
            seen[k] = True
            chain.append(k)
            k = succ_list[k]
        chains.append(chain)
    return chains


def bench_band_contours() -> None:
    print("band_contours vs skimage.measure.find_contours on the full lattice grid (detail 1)")
    for n in (20_000, 80_000):
        idx, vals, full = disk_band(n)
        rowmajor = np.lexsort((idx[:, 1], idx[:, 0]))
        idx_sorted, vals_sorted = idx[rowmajor], vals[rowmajor]
        t_band = best_of(lambda: band_contours(idx, vals))
        t_sorted = best_of(lambda: band_contours(idx_sorted, vals_sorted))
        t_full = best_of(lambda: find_contours(full, 0.0), repeat=3)
        n_vertices = sum(len(p) for p in band_contours(idx, vals))
        print(
            f"  {len(idx):6d} band nodes, {n_vertices:5d} vertices, grid {full.shape[0]}²: "
            f"band (shuffled) {t_band * 1e3:6.2f} ms, band (row-major) {t_sorted * 1e3:6.2f} ms, "
            f"skimage {t_full * 1e3:7.2f} ms; ratio skimage/band {t_full / t_band:4.1f} (shuffled), "
            f"{t_full / t_sorted:4.1f} (row-major)"
        )


def bench_linking() -> None:
    print("linking 20 000 contour vertices (detail 4 disk)")
    idx, vals, _ = disk_band(20_000, half_width=1.0, detail=4)
    # grow the disk until the contour has about 20 000 vertices
    scale = 20_000 / sum(len(p) for p in band_contours(idx, vals))
    idx, vals, _ = disk_band(int(20_000 * scale), half_width=1.0, detail=4)
    order, right, down, segs = _cell_segments(idx, vals, "mean")
    edges, inverse = np.unique(segs.ravel(), return_inverse=True)
    inverse = inverse.reshape(segs.shape)
    succ = np.full(len(edges), -1, dtype=np.int64)
    succ[inverse[:, 0]] = inverse[:, 1]
    t_jump = best_of(lambda: _chain_order(succ))
    t_walk = best_of(lambda: python_walk(succ), repeat=3)
    t_total = best_of(lambda: band_contour_set(idx, vals, detail=4))
    print(
        f"  {len(succ)} vertices ({len(idx)} band nodes): pointer jumping {t_jump * 1e3:.2f} ms, "
        f"Python walk {t_walk * 1e3:.2f} ms, whole band_contour_set {t_total * 1e3:.2f} ms"
    )


def bench_partial_volume() -> None:
    print("partial_volume / mask_from_band on a 512² image")
    shape = (512, 512)
    for detail in (1, 4):
        lo = -3 * detail
        # band of a disk (R = 200 px) and an inner hole (R = 60 px), |φ| < 6h, built directly per detail
        i, j = np.mgrid[lo : (512 + 3) * detail, lo : (512 + 3) * detail]
        rho = np.hypot(i / detail - 255.6, j / detail - 256.3)
        phi = np.maximum(rho - 200.0, 60.0 - rho)
        keep = np.abs(phi) < 6.0 / detail
        idx, vals = np.stack([i[keep], j[keep]], axis=1), phi[keep]
        del i, j, rho, phi
        polys = band_contours(idx, vals, detail=detail)
        n_vertices = sum(len(p) for p in polys)
        t_pv = best_of(lambda: partial_volume(polys, shape))
        t_mask = best_of(lambda: mask_from_band(idx, vals, shape, detail=detail))

        def binary_raster():
            out = np.zeros(shape, bool)
            for p in polys:
                rr, cc = draw_polygon(p[:, 0], p[:, 1], shape)
                out[rr, cc] ^= True
            return out

        t_draw = best_of(binary_raster, repeat=1)
        print(
            f"  detail {detail}: {n_vertices} vertices: partial_volume {t_pv * 1e3:.2f} ms "
            f"(skimage.draw.polygon binary raster {t_draw * 1e3:.2f} ms, ratio draw/partial_volume {t_draw / t_pv:.0f}); "
            f"mask_from_band ({len(idx)} nodes) {t_mask * 1e3:.2f} ms"
        )


if __name__ == "__main__":
    bench_band_contours()
    bench_linking()
    bench_partial_volume()
