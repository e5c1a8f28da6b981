"""Benchmark: the engine against scikit-image's Chan–Vese methods on one 512² phantom.

Prints figures and ratios; asserts nothing. Not part of the test suite.

    python tests/bench/bench_vs_skimage.py
    python tests/bench/bench_vs_skimage.py --one-blas-thread   # rerun in a child with BLAS on one thread
    python tests/bench/bench_vs_skimage.py --noise 0           # the same phantom without noise

Phantom: the 512² member of the family in ``bench_front_scaling.py`` (dark
blob 0.2 on 0.6 with a five-lobed ripple, 8 × 8 partial volume, Gaussian
noise σ = 0.05 unless ``--noise`` says otherwise, truth at pixel centres), one seed disk at the centre with
radius 0.06 × 512 ≈ 30.7 px. Everything runs in this one process.

Methods and the settings used (all converged; how is stated per method):

1. ``engine.segment.segment(image, [seed], model="region")``, default
   settings; converged by its own criterion (``Segmentation.converged``).
2. The same with ``outline_averaging=12`` (mm): the image speed averaged
   along the outline with σ = 12 px instead of 1. With noise σ = 0.05 every
   outline's error is set by the noise (see the last table), and averaging
   along the outline is how an outline pools it; the price is detail: a
   feature shorter than about 2σ along the outline is smoothed away (a
   12-lobed ripple of 3 px on a 40 px disk: 0.09 px RMS at 1 mm, 1.3 px at
   8 mm). Stated here as a setting, not the default.
3. ``skimage.segmentation.morphological_chan_vese(image, N,
   init_level_set=<seed disk, bool>, smoothing=1, lambda1=1, lambda2=1)``.
4. ``skimage.segmentation.chan_vese(image, mu=0.25, lambda1=1, lambda2=1,
   tol=0, max_num_iter=N, dt=0.5, init_level_set="checkerboard")``; the
   output label containing the seed centre is taken as the object.
5. ``chan_vese`` with the same settings from the seed disk:
   ``init_level_set = tanh(d)``, d the signed distance (px) to the seed
   circle, positive inside. (The raw signed distance barely moves: the
   update is scaled by δ_ε(φ) = ε / (π (ε² + φ²)) with ε = 1, tiny away from
   the zero set, and ``tol`` then stops it far from the boundary; tanh keeps
   the seed's zero set and the ±1 range of scikit-image's own presets.)
6. ``chan_vese`` as 4 but stopped by its own rule, ``tol=1e-3`` (the
   default), ``max_num_iter=500`` — for reference: it stops before the mask
   settles.

For 3–5, N is found by running in chunks of 10 iterations (both methods'
state is their level set, so a chunked run equals one long run) until a
chunk changes no pixel of the mask; the time printed is that of a fresh run
of N iterations (the detection overhead left out, which favours them).

Columns: wall time; Dice against the truth; boundary error = RMS distance
from each method's own outline to the exact boundary curve, in pixels
(engine: its sub-pixel ``Segmentation.contours``; chan_vese:
``skimage.measure.find_contours`` of its φ at 0, sub-pixel too;
morphological: contours of its binary mask at 0.5, the best outline a mask
gives); mask surface RMS (for reference) = root mean square of the pooled
surface distances between each binary mask and the pixel-centre truth
(``engine.analysis.metrics.surface_distances``; 0 for a perfect mask).

The boundary error is the outline's, as in the project's accuracy targets
(contour RMS error of a partial-volume disk ≤ 0.05 px, where any binary
mask is limited to ≈ 0.5 px): a mask can only say which pixel centres lie
inside, so its surface distances count which centres within a fraction of a
pixel of the boundary flipped — with noise σ = 0.05 that is set by the
noise for every method, and on the noise-free phantom every method's mask
is within a few pixels of the truth.

Ratios (targets from issue 3), for each of the engine's two rows: time
ours / faster of 3 and 4 (≤ 1.0 must, ≤ 0.1 aim), Dice ours vs each (≥),
boundary error ours / each (≤ 1/3).
A last table averages each outline's signed error along the outline over
L px: with noise the error is noise correlated over a few pixels, so the
table shows how long a stretch an outline would have to be smoothed over
to reach a given figure. Its last row is the least error any unbiased
outline can have when it pools L px of boundary at this noise (the
Cramér–Rao bound, :func:`information_floor`).
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from scipy.spatial import cKDTree

try:
    import engine  # noqa: F401
except ImportError:  # run from a checkout without installing
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_front_scaling import (  # noqa: E402
    INSIDE, NOISE_SIGMA, OUTSIDE, blas_threads, blob_boundary, blob_level, make_phantom,
)

from engine.analysis.metrics import dice, surface_distances  # noqa: E402
from engine.segment import segment  # noqa: E402

SIDE = 512
CHUNK = 10
MAX_ITER = 5000
CV_SETTINGS = {"mu": 0.25, "lambda1": 1.0, "lambda2": 1.0, "dt": 0.5}
#: the engine's second row: its image speed averaged along the outline with this σ (mm; default 1)
STATED_AVERAGING = 12.0


def boundary_rms(mask: np.ndarray, truth: np.ndarray) -> float:
    d_ab, d_ba = surface_distances(mask, truth)
    pooled = np.concatenate([d_ab, d_ba])
    return float(np.sqrt(np.mean(pooled**2))) if pooled.size else 0.0


def outline_rms(lines: list[np.ndarray], boundary_tree: cKDTree) -> float:
    if not lines:
        return float("inf")
    d, _ = boundary_tree.query(np.concatenate(lines))
    return float(np.sqrt(np.mean(d**2)))


def averaged_error(lines: list[np.ndarray], boundary_tree: cKDTree, length_px: float) -> float:
    """RMS of the signed outline error after a moving average over ``length_px`` of outline (longest line).

    Shows how far along the outline its error is correlated: noise that is
    independent from pixel to pixel falls as 1/√length, a slowly varying
    error (a bias, or noise smoothed over a long stretch) stays.
    """
    from scipy.ndimage import uniform_filter1d

    if not lines:
        return float("inf")
    line = max(lines, key=len)
    d, _ = boundary_tree.query(line)
    signed = d * np.sign(blob_level(line[:, 0], line[:, 1], SIDE))
    spacing = float(np.mean(np.linalg.norm(np.diff(line, axis=0), axis=1)))
    window = max(1, int(round(length_px / spacing)) | 1)
    return float(np.sqrt(np.mean(uniform_filter1d(signed, window, mode="wrap") ** 2)))


def information_floor(noise: float, lengths: tuple[float, ...]) -> list[float]:
    """Least RMS error of an unbiased outline estimate that pools L px of boundary, at this noise.

    Shifting a stretch of the boundary by u along its normal changes each
    partial-volume pixel it crosses by C·ℓ_p·u (C the contrast, ℓ_p the
    boundary's length inside pixel p); with Gaussian noise σ the Fisher
    information is Σ (C ℓ_p / σ)², and no unbiased estimate of u has a
    smaller variance than its inverse (Cramér–Rao bound: Kay, *Fundamentals
    of Statistical Signal Processing: Estimation Theory*, Prentice Hall 1993,
    ch. 3). Per unit length Σ ℓ_p² / Σ ℓ_p is measured on this phantom's
    boundary (0.94 px; 1 for a boundary along an axis).
    """
    points = blob_boundary(SIDE, 2_000_000)
    pieces = np.linalg.norm(np.roll(points, -1, axis=0) - points, axis=1)
    pixel = np.floor(points + 0.5).astype(np.int64)
    _, owner = np.unique(pixel[:, 0] * (4 * SIDE) + pixel[:, 1], return_inverse=True)
    inside = np.bincount(owner.ravel(), pieces)
    per_length = float(np.sum(inside**2) / np.sum(inside))
    contrast = abs(OUTSIDE - INSIDE)
    return [noise / (contrast * np.sqrt(length * per_length)) for length in lengths]


def mask_contours(field: np.ndarray, level: float) -> list[np.ndarray]:
    from skimage.measure import find_contours

    return [c for c in find_contours(field, level) if len(c) > 2]


def converge_in_chunks(advance, state):
    """Advance ``CHUNK`` iterations at a time until the mask stops changing; returns (N, state, mask)."""
    state, mask = advance(state, None)
    iterations = 0
    while iterations < MAX_ITER:
        state, new = advance(state, CHUNK)
        iterations += CHUNK
        if np.array_equal(new, mask):
            return iterations, state, new
        mask = new
    return iterations, state, mask


def run_ours(ph: dict, averaging: float | None = None) -> dict:
    settings = {} if averaging is None else {"outline_averaging": averaging}
    t0 = time.perf_counter()
    res = segment(ph["image"], [ph["seed"]], model="region", **settings)
    wall = time.perf_counter() - t0
    name = "engine.segment (region)" if averaging is None else f"engine, averaging {averaging:g} mm"
    return {"name": name, "wall": wall, "mask": res.mask, "lines": res.contours,
            "iterations": f"{res.steps} steps", "converged": res.converged,
            "detail": f"{res.timings['rebuilds']} rebuilds, {res.timings['nodes']} nodes"}


def run_morphological(ph: dict) -> dict:
    from skimage.segmentation import morphological_chan_vese

    img = ph["image"]

    def advance(level, n):
        if n is None:
            return level, level
        new = morphological_chan_vese(img, n, init_level_set=level, smoothing=1, lambda1=1, lambda2=1).astype(bool)
        return new, new

    t0 = time.perf_counter()
    n, _, chunked = converge_in_chunks(advance, ph["seed_disk"].copy())
    detect = time.perf_counter() - t0
    t0 = time.perf_counter()
    mask = morphological_chan_vese(img, n, init_level_set=ph["seed_disk"], smoothing=1, lambda1=1,
                                   lambda2=1).astype(bool)
    wall = time.perf_counter() - t0
    return {"name": "morphological_chan_vese", "wall": wall, "mask": mask,
            "lines": mask_contours(mask.astype(float), 0.5), "iterations": f"{n} iter",
            "converged": n < MAX_ITER,
            "detail": f"seed disk; detect {detect:.1f} s; same as chunked: {np.array_equal(mask, chunked)}"}


def _object_label(seg: np.ndarray, seed: tuple[float, float, float]) -> bool:
    """True when chan_vese's φ > 0 region holds the seed centre (else the object is φ < 0)."""
    return bool(seg[int(round(seed[0])), int(round(seed[1]))])


def run_chan_vese(ph: dict, init, label: str, *, own_stop: bool = False) -> dict:
    from skimage.segmentation import chan_vese

    img = ph["image"]
    if own_stop:
        t0 = time.perf_counter()
        seg, phi, energies = chan_vese(img, tol=1e-3, max_num_iter=500, init_level_set=init, extended_output=True,
                                       **CV_SETTINGS)
        wall = time.perf_counter() - t0
        n = len(energies)
        detail = f"{label}; tol=1e-3, max_num_iter=500 (own stopping rule)"
        converged = n < 500
    else:
        def advance(phi, k):
            if k is None:
                phi0 = chan_vese(img, tol=0.0, max_num_iter=0, init_level_set=phi, extended_output=True,
                                 **CV_SETTINGS)[1]
                return phi0, phi0 > 0
            _, new_phi, _ = chan_vese(img, tol=0.0, max_num_iter=k, init_level_set=phi, extended_output=True,
                                      **CV_SETTINGS)
            return new_phi, new_phi > 0

        t0 = time.perf_counter()
        n, phi_chunked, seg_chunked = converge_in_chunks(advance, init)
        detect = time.perf_counter() - t0
        t0 = time.perf_counter()
        seg, phi, _ = chan_vese(img, tol=0.0, max_num_iter=n, init_level_set=init, extended_output=True,
                                **CV_SETTINGS)
        wall = time.perf_counter() - t0
        detail = f"{label}; detect {detect:.1f} s; same as chunked: {np.array_equal(seg, seg_chunked)}"
        converged = n < MAX_ITER
    positive = _object_label(seg, ph["seed"])
    mask = seg if positive else ~seg
    lines = mask_contours(phi if positive else -phi, 0.0)
    # find_contours follows the level through φ; orientation does not matter for distances
    name = "chan_vese (own tol)" if own_stop else "chan_vese"
    return {"name": name, "wall": wall, "mask": mask, "lines": lines, "iterations": f"{n} iter",
            "converged": converged, "detail": detail + ("" if positive else "; object is phi<0")}


def main() -> None:
    if "--one-blas-thread" in sys.argv:
        env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
        args = [a for a in sys.argv[1:] if a != "--one-blas-thread"]
        raise SystemExit(subprocess.run([sys.executable, __file__, *args], env=env).returncode)
    noise = float(sys.argv[sys.argv.index("--noise") + 1]) if "--noise" in sys.argv else NOISE_SIGMA
    ph = make_phantom(SIDE, noise=noise)
    truth = ph["truth"]
    tree = cKDTree(blob_boundary(SIDE))
    seed = ph["seed"]
    d_seed = seed[2] - np.hypot(*(np.mgrid[0:SIDE, 0:SIDE] - np.array(seed[:2])[:, None, None]))
    print(f"Engine vs scikit-image Chan–Vese on a {SIDE}² phantom (noise σ = {noise}), one process; "
          f"BLAS threads: {blas_threads()}")
    print(f"seed disk (row, col, r) = ({seed[0]:.1f}, {seed[1]:.1f}, {seed[2]:.1f}); truth area {truth.sum()} px\n")

    runs = []
    for fn in (lambda: run_ours(ph), lambda: run_ours(ph, STATED_AVERAGING), lambda: run_morphological(ph),
               lambda: run_chan_vese(ph, "checkerboard", "checkerboard"),
               lambda: run_chan_vese(ph, np.tanh(d_seed), "tanh(signed distance of the seed disk)"),
               lambda: run_chan_vese(ph, "checkerboard", "checkerboard", own_stop=True)):
        r = fn()
        r["dice"] = dice(r["mask"], truth)
        r["brms"] = boundary_rms(r["mask"], truth)
        r["orms"] = outline_rms(r["lines"], tree)
        runs.append(r)
        print(f"  done: {r['name']:<26} {r['wall']:7.2f} s  ({r['detail']})", flush=True)

    print()
    head = (f"{'#':>2} {'method':<26}{'wall s':>8}{'iterations':>12}{'conv':>6}{'Dice':>9}"
            f"{'boundary error px':>19}{'mask surface RMS px':>21}")
    print(head)
    print("-" * len(head))
    for i, r in enumerate(runs, start=1):
        print(f"{i:>2} {r['name']:<26}{r['wall']:>8.2f}{r['iterations']:>12}{str(r['converged']):>6}"
              f"{r['dice']:>9.5f}{r['orms']:>19.3f}{r['brms']:>21.3f}")
    print(f"   (2: outline_averaging={STATED_AVERAGING:g} mm, the rest default; 5: chan_vese from the seed disk, "
          "tanh(signed distance); 6: chan_vese stopped by tol=1e-3)")

    faster = min(runs[2:4], key=lambda r: r["wall"])
    for k, ours in enumerate(runs[:2], start=1):
        print(f"\nratios (#{k} {ours['name']} / theirs)")
        print(f"  time / faster of morphological_chan_vese and chan_vese ({faster['name']}, "
              f"{faster['wall']:.2f} s): {ours['wall'] / faster['wall']:.2f}   (target ≤ 1.0, aim ≤ 0.1)")
        for i, r in enumerate(runs[2:], start=3):
            brms = ours["brms"] / r["brms"] if r["brms"] > 0 else float("inf")
            print(f"  vs #{i} {r['name']:<26} time {ours['wall'] / r['wall']:6.2f}   Dice {ours['dice']:.5f} vs "
                  f"{r['dice']:.5f} ({'≥' if ours['dice'] >= r['dice'] else '<'})   boundary error "
                  f"{ours['orms'] / r['orms']:5.2f} (target ≤ 0.33)   mask surface RMS {brms:5.2f}")
    lengths = (1.0, 4.0, 8.0, 16.0, 24.0)
    print("\nboundary error (px) after averaging the signed error along the outline over L px "
          "(how far it is correlated; what smoothing along the outline could reach)")
    print(f"{'#':>2} {'method':<26}" + "".join(f"{'L = ' + format(v, 'g'):>10}" for v in lengths))
    for i, r in enumerate(runs, start=1):
        print(f"{i:>2} {r['name']:<26}" + "".join(f"{averaged_error(r['lines'], tree, v):>10.3f}" for v in lengths))
    if noise > 0:
        floor = information_floor(noise, lengths)
        print(f"{'':>2} {'least any outline can reach':<26}" + "".join(f"{v:>10.3f}" for v in floor))
        print("   (last row: the Cramér–Rao bound for an outline fitted to the image over L px of boundary, "
              "see information_floor)")


if __name__ == "__main__":
    main()
