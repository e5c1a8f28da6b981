"""Benchmark: segmenting volumes, and placing a seed in a large one.

Prints figures and ratios; asserts nothing. Not part of the test suite.

    python tests/bench/bench_volume.py            # 128³ ball, with and without a coarse stage; seed in 200 × 512 × 512
    python tests/bench/bench_volume.py --quick    # 96³ ball, seed in 120 × 512 × 512

1. A noisy ball (radius 0.23 × side, contrast 1, Gaussian noise σ = 0.2,
   voxel centres inside = truth) segmented by ``engine.segment.segment`` with
   the region model from a seed of radius side/16 at its centre: once with
   the defaults (the flood, then the front at full resolution) and once with
   a coarse stage of 2 × 2 × 2 blocks after the flood (``coarse=2``).
   Reported: wall time, the block size used, steps, band nodes, Dice.
2. ``Front.from_seeds`` on a large volume (zeros with a bright box, one seed
   of radius 10 voxels), in a fresh child process so that its peak resident
   memory (``ru_maxrss``) is the front's set-up alone: wall time, peak memory
   and the image's own size. Nothing in a front's set-up may scale as a
   coordinate grid of the whole volume (DEVELOPERS.md, large volumes).
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

try:
    import engine  # noqa: F401
except ImportError:  # run from a checkout without installing
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))


def noisy_ball(side: int) -> tuple[np.ndarray, np.ndarray, tuple[float, ...]]:
    centre = np.array([0.5 * side + 0.3, 0.5 * side - 0.2, 0.5 * side + 0.1])
    grid = np.indices((side,) * 3, dtype=np.float32)
    truth = np.sqrt(sum((g - c) ** 2 for g, c in zip(grid, centre))) < 0.23 * side
    image = truth + np.random.default_rng(0).normal(0.0, 0.2, truth.shape)
    seed = (0.5 * side, 0.5 * side, 0.5 * side, side / 16.0)
    return image, truth, seed


def segment_ball(side: int) -> None:
    from engine.analysis.metrics import dice
    from engine.segment import segment

    image, truth, seed = noisy_ball(side)
    print(f"\n1. noisy ball in a {side}³ volume (radius {0.23 * side:.1f} voxels, σ = 0.2), region model, "
          f"seed radius {seed[-1]:.1f}")
    head = f"{'start':<12}{'wall s':>8}{'block':>7}{'steps':>7}{'nodes':>9}{'Dice':>8}"
    print(head)
    print("-" * len(head))
    walls = {}
    for label, coarse in (("default", None), ("coarse 2", 2)):
        t0 = time.perf_counter()
        res = segment(image, [seed], model="region", coarse=coarse)
        walls[label] = time.perf_counter() - t0
        print(f"{label:<12}{walls[label]:>8.1f}{res.params['coarse']:>7}{res.steps:>7}{res.timings['nodes']:>9}"
              f"{dice(res.mask, truth):>8.4f}")
    print(f"ratio default / coarse stage: {walls['default'] / walls['coarse 2']:.2f}")


def seed_child(slices: int) -> None:
    import resource

    from engine.front import Front

    image = np.zeros((slices, 512, 512), dtype=np.float32)
    mid = slices // 2
    image[mid - 20:mid + 20, 200:300, 200:300] = 1.0
    t0 = time.perf_counter()
    front = Front.from_seeds(image, [(mid, 250, 250, 10)], model="region")
    wall = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # Linux reports KiB
    print(json.dumps({"wall": wall, "peak": peak, "nodes": front.node_count, "image": image.nbytes}))


def seed_in_large_volume(slices: int) -> None:
    out = subprocess.run([sys.executable, __file__, "--seed-child", str(slices)], check=True,
                         capture_output=True, text=True)
    r = json.loads(out.stdout.strip().splitlines()[-1])
    print(f"\n2. Front.from_seeds in a {slices} × 512 × 512 volume (fresh process): {r['wall']:.1f} s, "
          f"peak memory {r['peak'] / 1e9:.2f} GB (the float32 image itself {r['image'] / 1e9:.2f} GB), "
          f"{r['nodes']} band nodes")


def main() -> None:
    if "--seed-child" in sys.argv:
        seed_child(int(sys.argv[sys.argv.index("--seed-child") + 1]))
        return
    quick = "--quick" in sys.argv
    t0 = time.perf_counter()
    segment_ball(96 if quick else 128)
    seed_in_large_volume(120 if quick else 200)
    print(f"\ntotal benchmark time {time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
