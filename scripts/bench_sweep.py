"""Parallel efficiency of the sweep runner: eight equal points on one worker and on two.

Eight points that differ only in the run seed (same model, state and evolution, so the
same cost; their sampled estimators draw different samples) run through
:func:`mpsobs.sweep.run_sweep` on a local cluster of one worker, then of two. Cluster
start-up is excluded (the cluster is started before the clock); everything else counts:
task submission, the points, their Parquet files and the merged table.

    efficiency = T1 / (2 T2)      goal >= 0.85

Printed as well: T1, T2, the speed-up T1 / T2, the mean time of a point on its worker in
both runs (if it grows with two workers, the cores are busy with other work: the
efficiency then measures the machine, not the runner), the share of each wall time spent
inside points, and the load average. On a shared
machine the figures are noisy; run it more than once (``--repeat``) and read the best.

    python scripts/bench_sweep.py [--L 24] [--repeat 1]
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

from mpsobs.pipeline import spec, store, sweep

POINTS = 8


def bench_spec(L: int) -> spec.RunSpec:
    return spec.parse({
        "name": "bench-sweep", "seed": list(range(1, POINTS + 1)),
        "model": {"name": "xxz", "L": L, "delta": 0.6,
                  "field": {"kind": "staggered", "strength": 0.4}},
        "state": {"kind": "neel"},
        "evolution": {"dt": 0.05, "order": 4, "chi_max": 32, "cutoff": 1e-10},
        "times": {"t_max": 2.0, "n_times": 5},
        "coarse": [{"observable": "number", "block": 4},
                   {"observable": "energy", "block": 2}],
        "estimator": {"method": "auto", "samples": 500},
        "output": {"checkpoint_seconds": 1e9},
    })


def timed_sweep(run: spec.RunSpec, workers: int, root: Path) -> tuple[float, float]:
    """Wall time of the sweep and the mean time of one point on its worker."""
    with sweep.local_cluster(workers) as client:
        address = client.scheduler.address
        with store.open_run(root, run) as st:
            start = time.perf_counter()
            report = sweep.run_sweep(run, st, scheduler=address)
            elapsed = time.perf_counter() - start
    if report.failed or report.computed != len(run.points):
        errors = "; ".join(f"{f.point.label}: {f.error}: {f.message}" for f in report.failed)
        raise SystemExit(f"bench: {len(report.failed)} points failed ({errors})")
    return elapsed, sum(report.task_seconds) / len(report.task_seconds)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--L", type=int, default=24, help="chain length (default 24)")
    parser.add_argument("--repeat", type=int, default=1, help="repetitions (default 1)")
    args = parser.parse_args()
    run = bench_spec(args.L)
    print(f"{POINTS} equal points: XXZ L = {args.L}, Neel state, chi_max 32, t = 0..2 "
          f"(dt 0.05, order 4), number b4 + energy b2")
    with tempfile.TemporaryDirectory() as tmp:
        for r in range(args.repeat):
            load = os.getloadavg()[0]
            t1, p1 = timed_sweep(run, 1, Path(tmp) / f"one-{r}")
            t2, p2 = timed_sweep(run, 2, Path(tmp) / f"two-{r}")
            print(f"run {r + 1} (load average before: {load:.2f} on {os.cpu_count()} cores)")
            print(f"  T1 = {t1:.2f} s on one worker  (a point takes {p1:.2f} s on its worker)")
            print(f"  T2 = {t2:.2f} s on two workers (a point takes {p2:.2f} s on its worker; "
                  f"x{p2 / p1:.2f} of the one-worker time: > 1 means the cores are shared)")
            print(f"  speed-up T1/T2 = {t1 / t2:.2f}; efficiency T1/(2 T2) = {t1 / (2 * t2):.3f} "
                  f"(goal >= 0.85)")
            print(f"  scheduling share: T1 = {POINTS * p1 / t1:.3f} x (points' work), "
                  f"T2 = {POINTS * p2 / (2 * t2):.3f} x (points' work / 2) - near 1 means the "
                  f"runner itself adds little")


if __name__ == "__main__":
    main()
