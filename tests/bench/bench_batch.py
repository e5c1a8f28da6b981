"""Batch throughput: cases per minute on 1 and 2 local worker processes, Dask's overhead, memory.

The cases are the demo studies' structures (sample_cases/*/seeds.json: 7 in
the abdomen, 4 in the head), each seeded on its README slice (``--carry N``:
and carried N slices either side), region model, a step limit of
``--max-steps`` per slice (1500, a guard: every documented seed now
converges in a few hundred steps at most), run with ``--force``.

Printed:

- in this process, one case after another (the engine's own time per case);
- on a LocalCluster of 1 and of 2 worker processes: wall time from the
  first submission to the last result, cases per minute, the speed-up of 2
  workers over 1, and the bound a perfect schedule of these case times on 2
  workers would reach (the longest case limits it);
- Dask's overhead per case: (wall x workers - time inside the cases) /
  time inside the cases on 1 worker, and the round trip of a case that does
  nothing (a resume check of a missing result), as a fraction of the mean
  case time;
- peak resident memory of each worker process (``ru_maxrss``).

Run: ``python tests/bench/bench_batch.py [--carry N] [--max-steps S] [--repeat R]`` (R copies of every
case under other names: more cases even out the schedule). On a machine
whose cores are shared the figures are noisy; ratios come from the same run.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import tempfile
import time
from dataclasses import replace
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def demo_cases(repeat: int, carry: int, max_steps: int) -> list:
    from engine.batch.manifest import parse_case

    cases = []
    for study in ("abdomen_mr", "head_mr"):
        folder = ROOT / "sample_cases" / study
        table = json.loads((folder / "seeds.json").read_text())
        n_slices = {"abdomen_mr": 24, "head_mr": 16}[study]
        for seed in table["seeds"]:
            k = int(seed["slice"])
            lo, hi = max(k - carry, 0), min(k + carry, n_slices - 1)
            for copy in range(repeat):
                row = {"path": str(folder / "dicom"), "label": seed["name"], "model": "region",
                       "seeds": f"{k}:{seed['row']},{seed['col']},{seed['radius_px']}", "slice": f"{lo}-{hi}",
                       "reference": str(folder / "truth_dseg.nii.gz"), "case": f"{study}-{copy}",
                       "max_steps": max_steps}
                cases.append(parse_case(row, number=len(cases) + 1, base=ROOT))
    return cases


def lpt_makespan(times: list[float], workers: int) -> float:
    """Longest-processing-time-first schedule's makespan (a near-perfect schedule; Graham 1969)."""
    loads = [0.0] * workers
    for t in sorted(times, reverse=True):
        loads[loads.index(min(loads))] += t
    return max(loads)


def peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def run_on(workers: int, cases: list, out: Path) -> dict:
    from engine.batch import RunOptions, batch_client, run_cases

    t0 = time.perf_counter()
    with batch_client(workers=workers) as client:
        started = time.perf_counter()
        t1 = time.perf_counter()
        results = run_cases(cases, RunOptions(str(out), force=True), client=client)
        wall = time.perf_counter() - t1
        memory = sorted(client.run(peak_mb).values()) if client is not None else [peak_mb()]
        # a case that does nothing: the resume check of a result that is not there
        empty = [replace(c, name=f"nothing-{i}", path=str(out / "no-such-study")) for i, c in enumerate(cases[:20])]
        t2 = time.perf_counter()
        run_cases(empty, RunOptions(str(out / "nothing")), client=client)
        nothing = (time.perf_counter() - t2) / len(empty)
    bad = [r for r in results if r.status != "done"]
    if bad:
        raise SystemExit(f"case {bad[0].label}/{bad[0].name} failed: {bad[0].error}")
    inside = sum(r.worker_seconds for r in results)
    return {"workers": workers, "start": started - t0, "wall": wall, "inside": inside,
            "times": [r.worker_seconds for r in results], "cpu": [r.cpu_seconds for r in results],
            "memory": memory, "nothing": nothing,
            "dice": statistics.median(r.dice for r in results)}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=1, help="copies of every demo case")
    parser.add_argument("--carry", type=int, default=0, help="slices carried on either side of the seeded one")
    parser.add_argument("--max-steps", type=int, default=1500, help="step limit of each slice's front")
    args = parser.parse_args()
    cases = demo_cases(args.repeat, args.carry, args.max_steps)
    n = len(cases)
    print(f"{n} demo cases ({1 + 2 * args.carry} slice(s) each, step limit {args.max_steps}), cores available: {len(os.sched_getaffinity(0))}, "
          f"load average {os.getloadavg()[0]:.2f}")
    with tempfile.TemporaryDirectory() as tmp:
        here = run_on(0, cases, Path(tmp) / "here")
        one = run_on(1, cases, Path(tmp) / "one")
        two = run_on(2, cases, Path(tmp) / "two")
    print(f"\n{'where':<26}{'start s':>9}{'wall s':>9}{'cases/min':>11}{'in cases s':>12}{'processor s':>13}"
          f"{'peak MB/worker':>18}")
    for label, r in (("this process", here), ("LocalCluster, 1 worker", one), ("LocalCluster, 2 workers", two)):
        mem = "/".join(f"{m:.0f}" for m in r["memory"])
        print(f"{label:<26}{r['start']:>9.2f}{r['wall']:>9.2f}{60 * n / r['wall']:>11.1f}{r['inside']:>12.2f}"
              f"{sum(r['cpu']):>13.2f}{mem:>18}")
    times = one["times"]
    print(f"\ncase time inside a worker: median {statistics.median(times):.2f} s, longest {max(times):.2f} s, "
          f"total {sum(times):.2f} s; median Dice against the truth {one['dice']:.4f}")
    speedup = one["wall"] / two["wall"]
    bound = sum(times) / lpt_makespan(times, 2)
    print(f"speed-up of 2 workers over 1: {speedup:.2f} (a perfect schedule of these case times: {bound:.2f}; "
          f"goal >= 1.8)")
    overhead_1 = (one["wall"] - one["inside"]) / one["inside"]
    print(f"Dask overhead on 1 worker: (wall - time in cases) / time in cases = {100 * overhead_1:.1f} % "
          f"(goal <= 5 %)")
    mean_case = sum(times) / n
    print(f"round trip of a case that does nothing: {1000 * one['nothing']:.1f} ms on 1 worker, "
          f"{1000 * two['nothing']:.1f} ms on 2 = {100 * one['nothing'] / mean_case:.2f} % of the mean case "
          f"({mean_case:.2f} s)")
    cpu_one, cpu_two = sum(one["cpu"]), sum(two["cpu"])
    print(f"processor time in cases: {cpu_one:.1f} s on 1 worker, {cpu_two:.1f} s on 2 (ratio {cpu_two / cpu_one:.2f}); "
          f"share of the cores the workers got: {cpu_one / one['wall']:.2f} of 1, {cpu_two / two['wall']:.2f} of 2")
    print(f"speed-up with the cores to themselves (processor times, 2-worker schedule): "
          f"{cpu_one / lpt_makespan(two['cpu'], 2):.2f}")
    slowdown = one["inside"] / here["inside"]
    print(f"time in cases, 1 worker / this process: {slowdown:.2f}; 2 workers / 1 worker: "
          f"{two['inside'] / one['inside']:.2f} (above 1: the two workers slow each other, shared cores)")


if __name__ == "__main__":
    main()
