"""Benchmark: time to converge against image side, object and seed scaled with the image.

Prints figures and ratios; asserts nothing. Not part of the test suite.

    python tests/bench/bench_front_scaling.py                    # 256², 512², 1024²
    python tests/bench/bench_front_scaling.py --quick            # 256² and 512² only
    python tests/bench/bench_front_scaling.py --one-blas-thread  # rerun in a child with BLAS on one thread

The phantom (invented for this benchmark, built by :func:`make_phantom`) is a
dark blob, intensity 0.2 on a 0.6 background: an ellipse (semi-axes 0.30 and
0.21 of the side, turned by 25°) whose normalised radius carries a
five-lobed ripple, ρ(θ) = 1 + 0.08 cos(5θ + 0.4). Pixels are area-averaged
over 8 × 8 sub-pixels (partial volume at the boundary), then Gaussian noise
σ = 0.05 is added (fixed random seed). The truth mask is the blob at pixel
centres (the engine's mask convention). One seed disk at the image centre,
radius 0.06 of the side.

Rows:
- ``engine.segment.segment(image, [seed], model="region")`` at 256², 512²
  and 1024²: wall time, its split (setup / evolve / output), steps, band
  rebuilds, converged flag, band nodes at the end, ms per step, Dice
  against the truth.
- ``skimage.segmentation.morphological_chan_vese(image, num_iter,
  init_level_set=<seed disk>, smoothing=1, lambda1=1, lambda2=1)`` at 256²
  and 512². Convergence is found by running it in chunks of 10 iterations
  (its state is the binary level set, so a chunked run equals one long run)
  until a chunk changes no pixel; the time printed is that of a fresh run with
  the iteration count found (the detection overhead left out).
- Exponent p of time ∝ side^p (least squares on log-log) for both. A narrow
  band pays ~side per step times ~side steps (p ≈ 2); a full-grid method
  pays ~side² per iteration times ~side iterations (p ≈ 3). Target for the
  engine (issue 3): p ≤ 2.0.
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

try:
    import engine  # noqa: F401
except ImportError:  # run from a checkout without installing
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from engine.analysis.metrics import dice
from engine.segment import segment

INSIDE = 0.2
OUTSIDE = 0.6
NOISE_SIGMA = 0.05
SUPERSAMPLE = 8
SEMI_AXES = (0.30, 0.21)  # fractions of the side
TURN_DEG = 25.0
RIPPLE = (5, 0.08, 0.4)  # lobes, amplitude, phase
SEED_RADIUS = 0.06  # fraction of the side
MCV_CHUNK = 10
MCV_MAX_ITER = 5000


def _centre(side: int) -> tuple[float, float]:
    """Blob centre (row, col): off the pixel lattice by a fixed fraction of a pixel per 256."""
    return 0.5 * side + 0.37 * side / 256.0, 0.5 * side - 0.23 * side / 256.0


def blob_level(rows: np.ndarray, cols: np.ndarray, side: int) -> np.ndarray:
    """Negative inside the blob: ρ_ellipse − (1 + a cos(kθ + φ0))."""
    cr, cc = _centre(side)
    a, b = SEMI_AXES[0] * side, SEMI_AXES[1] * side
    turn = np.deg2rad(TURN_DEG)
    u, v = rows - cr, cols - cc
    ur = np.cos(turn) * u + np.sin(turn) * v
    vr = -np.sin(turn) * u + np.cos(turn) * v
    k, amp, phase = RIPPLE
    theta = np.arctan2(vr / b, ur / a)
    return np.hypot(ur / a, vr / b) - (1.0 + amp * np.cos(k * theta + phase))


def blob_boundary(side: int, count: int | None = None) -> np.ndarray:
    """Dense points (row, col) on the true boundary, for sub-pixel outline errors."""
    count = count or 80 * side
    theta = np.linspace(0.0, 2.0 * np.pi, count, endpoint=False)
    k, amp, phase = RIPPLE
    rho = 1.0 + amp * np.cos(k * theta + phase)
    ur = SEMI_AXES[0] * side * rho * np.cos(theta)
    vr = SEMI_AXES[1] * side * rho * np.sin(theta)
    turn = np.deg2rad(TURN_DEG)
    cr, cc = _centre(side)
    return np.stack([cr + np.cos(turn) * ur - np.sin(turn) * vr, cc + np.sin(turn) * ur + np.cos(turn) * vr], axis=1)


def make_phantom(side: int, *, noise_seed: int = 7, noise: float = NOISE_SIGMA) -> dict:
    """The benchmark phantom at ``side``² pixels: noisy image (σ = ``noise``), clean image, truth, seed disk."""
    offsets = (np.arange(SUPERSAMPLE) + 0.5) / SUPERSAMPLE - 0.5
    clean = np.empty((side, side))
    cols = (np.arange(side)[:, None] + offsets[None, :]).ravel()
    chunk = max(1, 2_000_000 // (side * SUPERSAMPLE * SUPERSAMPLE))
    for start in range(0, side, chunk):
        rows_px = np.arange(start, min(side, start + chunk))
        rows = (rows_px[:, None] + offsets[None, :]).ravel()
        inside = blob_level(rows[:, None], cols[None, :], side) < 0
        fraction = inside.reshape(len(rows_px), SUPERSAMPLE, side, SUPERSAMPLE).mean(axis=(1, 3))
        clean[rows_px] = OUTSIDE + (INSIDE - OUTSIDE) * fraction
    r, c = np.mgrid[0:side, 0:side].astype(float)
    truth = blob_level(r, c, side) < 0
    image = clean + noise * np.random.default_rng(noise_seed).standard_normal(clean.shape)
    seed = (0.5 * side, 0.5 * side, SEED_RADIUS * side)
    seed_disk = np.hypot(r - seed[0], c - seed[1]) <= seed[2]
    return {"image": image, "clean": clean, "truth": truth, "seed": seed, "seed_disk": seed_disk}


def run_engine(ph: dict) -> dict:
    t0 = time.perf_counter()
    result = segment(ph["image"], [ph["seed"]], model="region")
    wall = time.perf_counter() - t0
    return {"wall": wall, "result": result, "dice": dice(result.mask, ph["truth"])}


def run_morphological(ph: dict) -> dict:
    """Morphological Chan–Vese from the seed disk, iterated until a chunk changes no pixel."""
    from skimage.segmentation import morphological_chan_vese

    level = ph["seed_disk"].copy()
    iterations = 0
    t0 = time.perf_counter()
    while iterations < MCV_MAX_ITER:
        new = morphological_chan_vese(ph["image"], MCV_CHUNK, init_level_set=level, smoothing=1,
                                      lambda1=1, lambda2=1).astype(bool)
        iterations += MCV_CHUNK
        changed = int(np.count_nonzero(new != level))
        level = new
        if changed == 0:
            break
    detect = time.perf_counter() - t0
    t0 = time.perf_counter()
    mask = morphological_chan_vese(ph["image"], iterations, init_level_set=ph["seed_disk"], smoothing=1,
                                   lambda1=1, lambda2=1).astype(bool)
    wall = time.perf_counter() - t0
    return {"wall": wall, "detect": detect, "iterations": iterations, "converged": iterations < MCV_MAX_ITER,
            "mask": mask, "dice": dice(mask, ph["truth"]), "same_as_chunked": bool(np.array_equal(mask, level))}


def exponent(sides: list[int], times: list[float]) -> float:
    if len(sides) < 2:
        return float("nan")
    return float(np.polyfit(np.log(sides), np.log(times), 1)[0])


def blas_threads() -> str:
    try:
        from threadpoolctl import threadpool_info
    except ImportError:
        return "unknown"
    info = [f"{p.get('internal_api')}={p.get('num_threads')}" for p in threadpool_info() if p.get("user_api") == "blas"]
    return ", ".join(info) or "none found"


def main() -> None:
    if "--one-blas-thread" in sys.argv:
        env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
        args = [a for a in sys.argv[1:] if a != "--one-blas-thread"]
        raise SystemExit(subprocess.run([sys.executable, __file__, *args], env=env).returncode)
    quick = "--quick" in sys.argv
    sides = [256, 512] if quick else [256, 512, 1024]
    mcv_sides = [256, 512]
    print("Time to converge vs image side (object and seed scaled with the image); BLAS threads:", blas_threads())
    print(f"phantom: blob {INSIDE} on {OUTSIDE}, noise sigma {NOISE_SIGMA}, {SUPERSAMPLE}x{SUPERSAMPLE} "
          f"partial volume, seed disk radius {SEED_RADIUS} x side at the centre\n")

    ours, theirs = {}, {}
    for side in sides:
        t0 = time.perf_counter()
        ph = make_phantom(side)
        build = time.perf_counter() - t0
        ours[side] = run_engine(ph)
        if side in mcv_sides:
            theirs[side] = run_morphological(ph)
        r = ours[side]["result"]
        print(f"  {side}²: phantom {build:.1f} s, engine {ours[side]['wall']:.1f} s"
              + (f", morphological Chan–Vese {theirs[side]['wall']:.1f} s" if side in theirs else ""), flush=True)

    print("\nengine.segment.segment(image, [seed], model='region')  (default settings)")
    head = (f"{'side':>6}{'wall s':>9}{'setup s':>9}{'evolve s':>10}{'output s':>10}{'steps':>7}{'rebuilds':>9}"
            f"{'conv':>6}{'nodes':>8}{'ms/step':>9}{'Dice':>8}")
    print(head)
    print("-" * len(head))
    for side in sides:
        r = ours[side]["result"]
        t = r.timings
        print(f"{side:>6}{ours[side]['wall']:>9.2f}{t['setup_s']:>9.2f}{t['evolve_s']:>10.2f}{t['output_s']:>10.2f}"
              f"{r.steps:>7}{t['rebuilds']:>9}{str(r.converged):>6}{t['nodes']:>8}"
              f"{1e3 * t['evolve_s'] / max(r.steps, 1):>9.2f}{ours[side]['dice']:>8.4f}")

    print("\nskimage.segmentation.morphological_chan_vese(image, N, init_level_set=<seed disk>, smoothing=1, "
          "lambda1=1, lambda2=1)")
    print(f"N = iterations until a chunk of {MCV_CHUNK} changes no pixel; time = a fresh run of N iterations")
    head = f"{'side':>6}{'wall s':>9}{'N':>7}{'conv':>6}{'ms/iter':>9}{'Dice':>8}{'detect s':>10}{'same':>6}"
    print(head)
    print("-" * len(head))
    for side in mcv_sides:
        m = theirs[side]
        print(f"{side:>6}{m['wall']:>9.2f}{m['iterations']:>7}{str(m['converged']):>6}"
              f"{1e3 * m['wall'] / m['iterations']:>9.2f}{m['dice']:>8.4f}{m['detect']:>10.2f}"
              f"{str(m['same_as_chunked']):>6}")

    print("\nexponent p of time ∝ side^p (least squares on log-log)")
    ours_all = exponent(sides, [ours[s]["wall"] for s in sides])
    print(f"  engine, {', '.join(map(str, sides))}: wall p = {ours_all:.2f}   (target ≤ 2.0)")
    ev = [ours[s]["result"].timings["evolve_s"] for s in sides]
    print(f"  engine evolve time only: p = {exponent(sides, ev):.2f}; steps p = "
          f"{exponent(sides, [ours[s]['result'].steps for s in sides]):.2f}; end nodes p = "
          f"{exponent(sides, [ours[s]['result'].timings['nodes'] for s in sides]):.2f}")
    for a, b in zip(sides[:-1], sides[1:]):
        print(f"  engine {a}→{b}: p = {exponent([a, b], [ours[a]['wall'], ours[b]['wall']]):.2f}")
    mcv_p = exponent(mcv_sides, [theirs[s]["wall"] for s in mcv_sides])
    print(f"  morphological Chan–Vese, {', '.join(map(str, mcv_sides))}: p = {mcv_p:.2f}; iterations p = "
          f"{exponent(mcv_sides, [theirs[s]['iterations'] for s in mcv_sides]):.2f}")
    print("\nratio engine / morphological Chan–Vese (wall time, same image, same process)")
    for side in mcv_sides:
        print(f"  {side}²: {ours[side]['wall'] / theirs[side]['wall']:.2f}")


if __name__ == "__main__":
    main()
