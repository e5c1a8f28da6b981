"""Benchmark: growth from a click, side by side with scikit-image's Chan–Vese methods from the same seed disk.

Prints figures and ratios; asserts nothing. Not part of the test suite.

    python tests/bench/bench_growth.py                  # every case at 256², 512² and 1024²
    python tests/bench/bench_growth.py --sides 256 512  # fewer sizes
    python tests/bench/bench_growth.py --cases star annulus

Cases (tests/growth_phantoms.py; contrast 1, Gaussian noise σ 0.05 unless
said, partial volume at every edge, one seed disk of radius 3-4 px):
star (five arms reaching 0.39·side), annulus (radii 0.33 and 0.39·side,
seeded at one point of the ring: the front must go round), channel (a
winding channel side/42 px wide, two sine periods, seeded at one end),
ellipse (semi-axes 0.35 and 0.2·side, pixels 0.7 × 1 mm, SNR 8),
convoluted (a blob whose outline carries lobes of orders 2-24), all
scaled with the side; and a real slice, the liver of pydicom's test file
examples_overlay.dcm (an axial abdominal MR, 0.723 mm pixels; a 256² crop,
512² and 1024² by cubic spline zoom), seeded in the liver. It has no
truth: its Dice column compares each method with the engine. (A real head
CT among pydicom's test files, seeded in the posterior fossa, is not a fair
case for a one-click region model: the scalp outside the skull has the
brain's Hounsfield units and the block mean opens the skull base; every
method leaked.)

Methods (everything in this one process, one after the other):

1. ``engine.segment.segment(image, [seed], spacing=...)``, default settings,
   converged by its own criterion.
2. ``skimage.segmentation.morphological_chan_vese(image, N,
   init_level_set=<seed disk>, smoothing=1, lambda1=1, lambda2=1)``.
3. ``skimage.segmentation.chan_vese(image, mu=0.25, lambda1=1, lambda2=1,
   tol=0, dt=0.5, max_num_iter=N, init_level_set=tanh(d))`` with d the
   signed distance (px) to the seed circle, positive inside.

Each method runs once on a small invented slice first (imports and caches
are not timed). For 2 and 3, N is found by running chunks of 10 iterations (each method's
state is its level set, so chunks add up to one long run) until a chunk
changes no pixel of the mask, or until TIME_CAP seconds (then marked
"cap"); their time is the sum of the chunks' times. A baseline whose first
chunk leaves the seed's mask unchanged "did not grow" and is left out of
the ratios.

Columns: wall time; ratio to the faster baseline (goal ≤ 1, aim ≤ 0.2);
Dice against the pixel-centre truth; boundary error = RMS distance from
each method's outline (the engine's sub-pixel contours; chan_vese's φ at
0; morphological's mask at 0.5) to the exact boundary curve (contours of
the shape sampled on a 4096² grid, bisected onto the boundary, joined by
chords), in pixels; steps (engine: flood passes and front steps) or
iterations; "reach" = the longest geodesic
distance in pixels from the seed centre to any point of the structure
(scikit-image's MCP_Geometric on the truth), and steps / reach. Last
table: the exponent p of time ∝ side^p from a least-squares fit over
the sides run (goal ≤ 2).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path
from typing import NamedTuple

import numpy as np
from scipy.spatial import cKDTree

try:
    import engine  # noqa: F401
except ImportError:  # run from a checkout without installing
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import growth_phantoms as gp  # noqa: E402

from engine.front.geometry import seed_disks  # noqa: E402
from engine.analysis.metrics import dice  # noqa: E402
from engine.segment import segment  # noqa: E402

SIDES = (256, 512, 1024)
CASES = ("star", "annulus", "channel", "ellipse", "convoluted", "mr liver")
MAKERS = {"star": gp.star, "annulus": gp.annulus, "channel": gp.channel, "ellipse": gp.ellipse,
          "convoluted": gp.convoluted, "mr liver": gp.mr_liver}
CHUNK = 10
#: Seconds after which a baseline's run is cut (marked "cap", not converged).
TIME_CAP = 300.0
#: Side of the grid on which exact boundaries are traced.
FINE = 4096
CV_SETTINGS = {"mu": 0.25, "lambda1": 1.0, "lambda2": 1.0, "dt": 0.5}


class ExactBoundary(NamedTuple):
    """The shape's boundary as short chords between points on it (pixel coordinates)."""

    starts: np.ndarray  # (n, 2)
    ends: np.ndarray  # (n, 2)
    midpoints: cKDTree


def exact_boundary(case: gp.Case) -> ExactBoundary | None:
    """The shape's boundary: points traced on a FINE² grid, bisected onto it, joined by chords.

    Contours of the inside test sampled on the grid lie within half a grid
    step of the boundary; each point is then moved onto it by bisection
    along the traced contour's normal (30 halvings of a ±1 grid step
    bracket). Distances are taken to the chords between neighbouring points,
    not to the points: the points lie side/FINE px apart, and the distance
    to the nearest point would add up to half that spacing along the curve
    (its RMS, spacing/√12, is 0.072 px at 1024²; common geometry). A chord
    of length δ departs from a curve of curvature κ by at most κδ²/8.
    """
    from skimage.measure import find_contours

    inside = case.info.get("inside")
    if inside is None:
        return None
    side = case.image.shape[0]
    scale = FINE / side
    coords = (np.arange(FINE) + 0.5) / scale - 0.5
    rows, cols = np.meshgrid(coords, coords, indexing="ij")
    field = inside(rows, cols).astype(np.float32)
    del rows, cols
    refined = []
    for line in find_contours(field, 0.5):
        points = (line + 0.5) / scale - 0.5
        tangent = np.gradient(points, axis=0)
        normal = np.column_stack([-tangent[:, 1], tangent[:, 0]])
        normal /= np.maximum(np.linalg.norm(normal, axis=1, keepdims=True), 1e-12)
        low, high = points - normal / scale, points + normal / scale
        low_in = inside(low[:, 0], low[:, 1])
        bracketed = low_in != inside(high[:, 0], high[:, 1])
        low, high, low_in = low[bracketed], high[bracketed], low_in[bracketed]
        for _ in range(30):
            mid = 0.5 * (low + high)
            same = inside(mid[:, 0], mid[:, 1]) == low_in
            low = np.where(same[:, None], mid, low)
            high = np.where(same[:, None], high, mid)
        refined.append(0.5 * (low + high))
    starts = np.concatenate([p[:-1] for p in refined if len(p) > 1]) if refined else np.zeros((0, 2))
    ends = np.concatenate([p[1:] for p in refined if len(p) > 1]) if refined else np.zeros((0, 2))
    return ExactBoundary(starts, ends, cKDTree(0.5 * (starts + ends)))


def boundary_distance(points: np.ndarray, boundary: ExactBoundary, nearest: int = 6) -> np.ndarray:
    """Distance (px) from each point to the nearest chord of ``boundary`` (among the chords of the nearest midpoints)."""
    _, idx = boundary.midpoints.query(points, k=nearest)
    a, b = boundary.starts[idx], boundary.ends[idx]  # (m, k, 2)
    ab = b - a
    t = np.clip(np.einsum("mkj,mkj->mk", points[:, None, :] - a, ab) / np.maximum(np.einsum("mkj,mkj->mk", ab, ab), 1e-24),
                0.0, 1.0)
    foot = a + t[..., None] * ab
    return np.min(np.linalg.norm(points[:, None, :] - foot, axis=-1), axis=1)


def outline_rms(lines: list[np.ndarray], boundary: ExactBoundary | None) -> float:
    if boundary is None or not lines:
        return float("nan")
    d = boundary_distance(np.concatenate(lines), boundary)
    return float(np.sqrt(np.mean(d**2)))


def reach(case: gp.Case) -> float:
    """The longest geodesic distance (px) from the seed centre to a pixel of the structure."""
    from skimage.graph import MCP_Geometric

    if not case.truth.any():
        return float("nan")
    cost = np.where(case.truth, 1.0, np.inf)
    start = tuple(int(round(v)) for v in case.seed[:2])
    costs, _ = MCP_Geometric(cost).find_costs([start])
    finite = costs[np.isfinite(costs) & case.truth]
    return float(np.max(finite)) if finite.size else float("nan")


def mask_lines(field: np.ndarray, level: float) -> list[np.ndarray]:
    from skimage.measure import find_contours

    return [c for c in find_contours(field, level) if len(c) > 2]


def chunked(advance, state):
    """Run ``advance(state, CHUNK)`` until the mask stops changing or TIME_CAP.

    Returns (iterations, seconds, state, note): note "cap" when cut, "did
    not grow" when the first chunk left the seed's mask as it was.
    """
    spent, iterations = 0.0, 0
    state, mask = advance(state, 0)
    while True:
        t0 = time.perf_counter()
        state, new = advance(state, CHUNK)
        spent += time.perf_counter() - t0
        iterations += CHUNK
        if np.array_equal(new, mask):
            return iterations, spent, state, "did not grow" if iterations == CHUNK else ""
        if spent > TIME_CAP:
            return iterations, spent, state, "cap"
        mask = new


def run_engine(case: gp.Case) -> dict:
    t0 = time.perf_counter()
    res = segment(case.image, [case.seed], spacing=case.spacing)
    wall = time.perf_counter() - t0
    return {"name": "engine", "wall": wall, "mask": res.mask, "lines": res.contours, "steps": res.steps,
            "converged": res.converged, "note": f"detail {res.params['detail']}, growth {res.params['growth']['passes']} passes"}


def run_morphological(case: gp.Case) -> dict:
    from skimage.segmentation import morphological_chan_vese

    img = case.image

    def advance(level, n):
        if n == 0:
            return level, level
        new = morphological_chan_vese(img, n, init_level_set=level, smoothing=1, lambda1=1, lambda2=1).astype(bool)
        return new, new

    n, spent, mask, note = chunked(advance, seed_disks(img.shape, np.array([case.seed])))
    return {"name": "morphological_chan_vese", "wall": spent, "mask": mask,
            "lines": mask_lines(mask.astype(float), 0.5), "steps": n, "converged": note == "", "note": note}


def run_chan_vese(case: gp.Case) -> dict:
    from scipy import ndimage
    from skimage.segmentation import chan_vese

    img = case.image
    disk = seed_disks(img.shape, np.array([case.seed]))
    distance = np.where(disk, ndimage.distance_transform_edt(disk), -ndimage.distance_transform_edt(~disk))
    init = np.tanh(distance)

    def advance(phi, n):
        if n == 0:
            return phi, phi > 0
        _, new, _ = chan_vese(img, tol=0.0, max_num_iter=n, init_level_set=phi, extended_output=True, **CV_SETTINGS)
        return new, new > 0

    n, spent, phi, note = chunked(advance, init)
    return {"name": "chan_vese", "wall": spent, "mask": phi > 0, "lines": mask_lines(phi, 0.0), "steps": n,
            "converged": note == "", "note": note}


def best_of(run, case: gp.Case, repeats: int) -> dict:
    """``run(case)`` ``repeats`` times; the result of the shortest (results are deterministic).

    The shortest of repeated timings is the one least disturbed by other
    work on the machine (the rationale of Python's timeit, which reports
    the minimum; common practice).
    """
    results = [run(case) for _ in range(repeats)]
    return min(results, key=lambda r: r["wall"])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sides", type=int, nargs="+", default=list(SIDES))
    parser.add_argument("--cases", nargs="+", default=list(CASES), choices=list(CASES))
    parser.add_argument("--repeats", type=int, default=1,
                        help="run each method this many times per case and keep its shortest time")
    args = parser.parse_args()
    if args.repeats < 1:
        parser.error(f"--repeats {args.repeats}: must be at least 1")
    print("growth from a click: engine vs scikit-image, one process; times are wall seconds "
          f"(shortest of {args.repeats} runs; 2 shared cores: noisy; ratios are measured back to back)\n")
    header = (f"{'case':<12}{'side':>6}  {'method':<24}{'time s':>9}{'ratio':>8}{'Dice':>8}{'error px':>10}"
              f"{'steps':>7}{'reach':>7}{'st/reach':>9}  conv  note")
    # warm-up: the first call of each method in a process pays for imports and caches
    warm = gp.family("dark_on_bright", 1)[0]
    for run in (run_engine, run_morphological, run_chan_vese):
        run(warm)
    print(header)
    print("-" * len(header))
    times: dict[tuple[str, str], list[tuple[int, float]]] = {}
    summary = []
    for name in args.cases:
        for side in args.sides:
            case = MAKERS[name](side)
            tree = exact_boundary(case)
            far = reach(case)
            rows = [best_of(run, case, args.repeats) for run in (run_engine, run_morphological, run_chan_vese)]
            grew = [r for r in rows[1:] if r["note"] != "did not grow"] or rows[1:]
            faster = min(r["wall"] for r in grew)
            has_truth = case.truth.any()
            for r in rows:
                r["dice"] = dice(r["mask"], case.truth) if has_truth else dice(r["mask"], rows[0]["mask"])
                r["error"] = outline_rms(r["lines"], tree)
                times.setdefault((name, r["name"]), []).append((side, r["wall"]))
            for r in rows:
                ratio = r["wall"] / faster if r is rows[0] else float("nan")
                per = r["steps"] / far if np.isfinite(far) else float("nan")
                print(f"{name:<12}{side:>6}  {r['name']:<24}{r['wall']:>9.2f}{ratio:>8.3f}{r['dice']:>8.4f}"
                      f"{r['error']:>10.3f}{r['steps']:>7d}{far:>7.0f}{per:>9.2f}  {'yes' if r['converged'] else 'no ':<4}  "
                      f"{r['note']}", flush=True)
            best_error = min(r["error"] for r in grew)
            summary.append((name, side, rows[0]["wall"] / faster, rows[0]["dice"],
                            max(r["dice"] for r in grew), rows[0]["error"] / best_error if best_error else np.nan))
    print("\nratios (engine against the baselines; Dice of the MR slice is agreement with the engine)")
    print(f"{'case':<12}{'side':>6}{'time/faster':>13}{'Dice':>9}{'best base':>11}{'error/best':>12}")
    for name, side, ratio, ours, base, err in summary:
        print(f"{name:<12}{side:>6}{ratio:>13.3f}{ours:>9.4f}{base:>11.4f}{err:>12.3f}")
    if len(args.sides) >= 2:
        print("\nexponent p of time ∝ side^p (least squares over the sides run)")
        for name in args.cases:
            parts = []
            for method in ("engine", "morphological_chan_vese", "chan_vese"):
                pts = times.get((name, method), [])
                if len(pts) >= 2:
                    s, t = np.log(np.array(pts)).T
                    parts.append(f"{method} {np.polyfit(s, t, 1)[0]:.2f}")
            print(f"  {name:<12}" + ";  ".join(parts))


if __name__ == "__main__":
    main()
