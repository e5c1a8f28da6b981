"""Benchmark: front steps per second against band size.

Prints figures and ratios; asserts nothing. Not part of the test suite.

    python tests/bench/bench_front_steps.py            # both BLAS settings
    python tests/bench/bench_front_steps.py --quick    # fewer sizes, shorter runs

Each front comes from ``Front.from_function`` on a circle whose radius gives
a band of about 2 000 ... 80 000 nodes (band nodes ≈ 2πr · 2 · band_width ·
detail with r in pixels, band_width = 10 node spacings), at detail 1 (image
side chosen to hold the band) and, for the three largest sizes, at detail 2.
Four cases:

- ``constant`` with drive 0: a still front, so no band rebuilds; every step
  is two RKL2 evaluations.
- ``curvature`` (smoothness 1): the circle shrinks slowly; the number of
  RKL2 stages follows the stiffness, and rebuilds happen at the smallest
  sizes (their time is reported apart from the step time).
- ``region`` (default settings) on the image of a bright disk of the same
  radius (intensity 1 on 0, exact area fraction at the rim from 4 × 4
  sub-pixels): the front rests at the disk, so each step is what a
  converging segmentation pays: image sampling at three points per layer
  node, region statistics, curvature, RKL2 stages. A resting front takes
  the longest steps (the speed floor), hence the most stages.
- ``growing``: the region model on a bright disk GROW_MARGIN times wider
  than the front, which grows toward its rim at full speed during the
  timed runs (a quarter node spacing a step): what a technician watches
  while the front spreads. Shorter steps, fewer RKL2 stages.

The four cases run with the default integrator (RKL2 super time steps,
whose length follows the front's motion and the curvature term's
stiffness). At about 10 000 nodes the three moving cases also run with
``integrator="ssp_rk3"``, three evaluations a step within forward Euler's
limit for the curvature term: the step of the design notes (§3.3). The
last table sets them side by side: steps per second, the front time one
step advances, and front time per wall second (what a user sees move).

After a few warm-up steps a snapshot is taken; ``front.step(n)`` is then
timed at least three times, each run restored from the snapshot (so the
shrinking front keeps its size), and the best run is kept (median and worst
are printed in the last table). Reported per size: band nodes, active nodes,
steps/s, ms per step (``front.timings["step"]``, which leaves rebuilds out),
RKL2 evaluations per step (``front.timings["evaluations"]``), ms per
evaluation, ms of the derivative product ``step_rows @ take(phi, gather)`` alone (one thread), and the
exponent of a least-squares line through log(time per step) against
log(band nodes). Targets (issue 3): ≥ 200 steps/s at 10 000 nodes; exponent
≤ 1.1.

Every measurement runs in a fresh child process, once with the BLAS thread
count left alone and once with ``OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1``
in the child's environment: the small dense product of the derivatives can
be much slower with threaded BLAS on a busy 2-core machine. The last table
gives the ratio of the two.
"""

from __future__ import annotations

import json
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

TARGETS = (2_000, 5_000, 10_000, 20_000, 40_000, 80_000)
DETAIL2_TARGETS = (20_000, 40_000, 80_000)
MODELS = ("constant", "curvature", "region", "growing")
GROW_MARGIN = 1.3
BAND_WIDTH = 10.0  # FrontParams.band_width default (node spacings)
REPEATS = 3
SECONDS_PER_REPEAT = 0.6
WARMUP_STEPS = 3


def circle_radius(nodes: int, detail: int) -> float:
    """Radius (px) of a circle whose band holds about ``nodes`` lattice nodes."""
    return nodes / (2.0 * np.pi * 2.0 * BAND_WIDTH * detail)


def build_front(model: str, nodes: int, detail: int, integrator: str = "rkl2"):
    from engine.front import Front

    radius = circle_radius(nodes, detail)
    disk = GROW_MARGIN * radius if model == "growing" else radius
    side = int(np.ceil(2.0 * disk + 4.0 * BAND_WIDTH / detail + 16))
    centre = np.array([side / 2.0 + 0.31, side / 2.0 - 0.17])

    def phi(points_mm: np.ndarray) -> np.ndarray:
        return np.hypot(points_mm[:, 0] - centre[0], points_mm[:, 1] - centre[1]) - radius

    params = {"drive": 0.0} if model == "constant" else {"smoothness": 1.0}
    image = None
    if model in ("region", "growing"):
        params = {}
        offsets = (np.arange(4) + 0.5) / 4 - 0.5
        rows, cols = np.indices((side, side), dtype=float)
        image = np.zeros((side, side))
        for dr in offsets:
            for dc in offsets:
                image += np.hypot(rows + dr - centre[0], cols + dc - centre[1]) < disk
        image /= 16.0
    t0 = time.perf_counter()
    front = Front.from_function(phi, (side, side), spacing=(1.0, 1.0), model="region" if model == "growing" else model,
                                detail=detail, image=image, integrator=integrator,
                                **params)
    return front, side, radius, time.perf_counter() - t0


def measure_one(model: str, nodes: int, detail: int, seconds: float, integrator: str = "rkl2") -> dict:
    """Best time per step of ``front.step(n)``; the front is restored from a snapshot before each run.

    Restoring keeps the band size fixed for the shrinking (curvature) front;
    ``n`` is capped so that a run moves the circle by less than about 5 % of
    its radius (curvature flow: r² = r0² − 2t).
    """
    front, side, radius, build_s = build_front(model, nodes, detail, integrator)
    nodes0, active0 = front.node_count, int(len(front._band.active))
    t0 = time.perf_counter()
    front.step(WARMUP_STEPS)
    per_step = (time.perf_counter() - t0) / WARMUP_STEPS
    n = int(np.clip(seconds / max(per_step, 1e-6), 5, 2000))
    if model == "curvature":
        time_per_step = max(front.time / front.steps, 1e-9)
        n = int(np.clip(0.1 * radius**2 / 2.0 / time_per_step, 5, n))
    if model == "growing":  # at most 5 % of the radius (a quarter spacing a step), well short of the rim
        n = int(np.clip(0.05 * radius * detail / front.params.cfl, 5, n))
    band, rows, phi = front._band, front.stencil.step_rows, front.phi
    product = []
    for _ in range(5):
        t0 = time.perf_counter()
        for _ in range(10):
            rows @ np.take(phi, band.gather)
        product.append((time.perf_counter() - t0) / 10)
    snap = front.snapshot()
    repeats = int(np.clip(np.ceil(REPEATS * seconds / max(n * per_step, 1e-9)), REPEATS, 20))
    best = None
    per_run = []
    for _ in range(repeats):
        front.restore(snap)
        step0, ev0 = front.timings["step"], front.timings.get("evaluations", 0)
        reb0, rebt0 = front.timings["rebuilds"], front.timings["rebuild"]
        time0 = front.time
        t0 = time.perf_counter()
        front.step(n)
        wall = time.perf_counter() - t0
        run = {
            "step_s": (front.timings["step"] - step0) / n,
            "wall_s": wall / n,
            "evals": (front.timings.get("evaluations", 0) - ev0) / n,
            "dt": (front.time - time0) / n,
            "rebuilds": front.timings["rebuilds"] - reb0,
            "rebuild_s": front.timings["rebuild"] - rebt0,
        }
        per_run.append(run["step_s"])
        if best is None or run["step_s"] < best["step_s"]:
            best = run
    return {
        "model": model, "integrator": integrator, "target": nodes, "detail": detail, "side": side, "radius_px": radius,
        "nodes": nodes0, "active": active0, "nodes_end": front.node_count, "steps_timed": n,
        "repeats": repeats, "build_s": build_s, "median_step_s": float(np.median(per_run)),
        "worst_step_s": float(np.max(per_run)), "product_s": float(np.median(product)), **best,
    }


def blas_threads() -> str:
    """BLAS libraries and their thread counts (shared with the scaling benchmark)."""
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from bench_front_scaling import blas_threads as describe

    return describe()


def child(quick: bool) -> None:
    """Run every measurement and print one JSON document."""
    targets = TARGETS[::2] + (TARGETS[-1],) if quick else TARGETS
    seconds = SECONDS_PER_REPEAT / 3 if quick else SECONDS_PER_REPEAT
    rows = []
    for model in MODELS:
        for nodes in targets:
            rows.append(measure_one(model, nodes, 1, seconds))
        for nodes in DETAIL2_TARGETS:
            if quick and nodes != DETAIL2_TARGETS[-1]:
                continue
            rows.append(measure_one(model, nodes, 2, seconds))
    compare = [measure_one(model, 10_000, 1, seconds, "ssp_rk3") for model in MODELS if model != "constant"]
    print(json.dumps({"blas": blas_threads(), "rows": rows, "compare": compare}))


def run_child(single_thread: bool, quick: bool) -> dict:
    env = dict(os.environ)
    for name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        env.pop(name, None)
    if single_thread:
        env.update(OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
    args = [sys.executable, __file__, "--child"] + (["--quick"] if quick else [])
    out = subprocess.run(args, env=env, check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def fit_exponent(rows: list[dict], key: str = "step_s") -> float:
    if len(rows) < 2:
        return float("nan")
    x = np.log([r["nodes"] for r in rows])
    y = np.log([r[key] for r in rows])
    return float(np.polyfit(x, y, 1)[0])


def print_table(title: str, result: dict) -> dict:
    print(f"\n{title}  (BLAS threads: {result['blas']})")
    head = (f"{'model':<10}{'detail':>7}{'side':>6}{'r px':>8}{'nodes':>8}{'active':>8}{'steps/s':>9}"
            f"{'ms/step':>9}{'evals/st':>9}{'ms/eval':>9}{'gather@W':>9}{'wall ms/st':>11}{'rebuilds':>9}{'n x runs':>10}"
            f"{'build s':>8}")
    print(head)
    print("-" * len(head))
    exponents = {}
    for model in MODELS:
        for detail in (1, 2):
            rows = [r for r in result["rows"] if r["model"] == model and r["detail"] == detail]
            for r in rows:
                print(f"{r['model']:<10}{r['detail']:>7}{r['side']:>6}{r['radius_px']:>8.1f}{r['nodes']:>8}"
                      f"{r['active']:>8}{1.0 / r['step_s']:>9.0f}{1e3 * r['step_s']:>9.2f}{r['evals']:>9.1f}"
                      f"{1e3 * r['step_s'] / r['evals']:>9.3f}{1e3 * r['product_s']:>9.3f}{1e3 * r['wall_s']:>11.2f}{r['rebuilds']:>9}"
                      f"{str(r['steps_timed']) + 'x' + str(r['repeats']):>10}{r['build_s']:>8.2f}")
            if len(rows) >= 2:
                exponents[(model, detail)] = (fit_exponent(rows), fit_exponent(
                    [dict(r, per_eval=r["step_s"] / r["evals"]) for r in rows], "per_eval"))
    print("\n'growing': the region model while the front spreads toward the rim of a wider disk")
    print("'nodes'/'active': band nodes / nodes with a complete stencil at the start of each run; "
          "'wall' includes rebuilds;\n'gather@W': ms of the derivative product step_rows @ take(phi, gather) alone "
          "(median of 5 x 10 calls; one per RKL2 evaluation)")
    print("fitted exponent p of time ∝ nodes^p (least squares on log-log; target ≤ 1.1)")
    for (model, detail), (p_step, p_eval) in exponents.items():
        print(f"  {model:<10} detail {detail}: per step {p_step:5.2f}   per evaluation {p_eval:5.2f}")
    for model in MODELS:
        at10k = [r for r in result["rows"] if r["model"] == model and r["detail"] == 1 and r["target"] == 10_000]
        if at10k:
            r = at10k[0]
            print(f"  {model:<10} steps/s at {r['nodes']} nodes: {1.0 / r['step_s']:.0f} (target ≥ 200)")
    print_integrators(result)
    return exponents


def print_integrators(result: dict) -> None:
    """RKL2 super time steps against SSP-RK3 steps at 10 000 nodes: steps per second and front time per second."""
    print("\nintegrators at about 10 000 nodes (detail 1): 'time/step' is the front time one step advances "
          "(time units: mm² per unit smoothness, or mm per unit speed), 'time/s' the front time per wall second")
    head = f"{'model':<10}{'integrator':>11}{'steps/s':>9}{'evals/st':>9}{'time/step':>11}{'time/s':>9}{'rkl2/ssp':>9}"
    print(head)
    print("-" * len(head))
    for r3 in result.get("compare", []):
        r2 = next((r for r in result["rows"] if r["model"] == r3["model"] and r["detail"] == 1
                   and r["target"] == 10_000), None)
        for r in (r2, r3):
            if r is None:
                continue
            ratio = (r2["dt"] / r2["step_s"]) / (r3["dt"] / r3["step_s"]) if r is r3 and r2 else float("nan")
            print(f"{r['model']:<10}{r['integrator']:>11}{1.0 / r['step_s']:>9.0f}{r['evals']:>9.1f}{r['dt']:>11.4f}"
                  f"{r['dt'] / r['step_s']:>9.1f}{'' if r is r2 else f'{ratio:9.2f}'}")


def main() -> None:
    quick = "--quick" in sys.argv
    if "--child" in sys.argv:
        child(quick)
        return
    print("Front steps per second vs band size (each setting in a fresh child process; best of "
          f"at least {REPEATS} runs of front.step(n), each from the same snapshot)")
    t0 = time.perf_counter()
    default = run_child(False, quick)
    single = run_child(True, quick)
    print_table("BLAS threads left alone", default)
    print_table("OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1", single)
    print("\nms per step, default BLAS threads vs one BLAS thread: best / median / worst of the runs, "
          "and ratios default / one thread (> 1: threads hurt)")
    print(f"{'model':<10}{'detail':>7}{'nodes':>8}{'default b/m/w':>22}{'1-thread b/m/w':>22}"
          f"{'ratio best':>11}{'ratio median':>13}")
    for a, b in zip(default["rows"], single["rows"]):
        da = f"{1e3 * a['step_s']:.2f}/{1e3 * a['median_step_s']:.2f}/{1e3 * a['worst_step_s']:.2f}"
        db = f"{1e3 * b['step_s']:.2f}/{1e3 * b['median_step_s']:.2f}/{1e3 * b['worst_step_s']:.2f}"
        print(f"{a['model']:<10}{a['detail']:>7}{a['nodes']:>8}{da:>22}{db:>22}"
              f"{a['step_s'] / b['step_s']:>11.2f}{a['median_step_s'] / b['median_step_s']:>13.2f}")
    print(f"\ntotal benchmark time {time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
