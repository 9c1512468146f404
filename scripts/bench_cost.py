"""The cost model of `mpsobs check` against measured points of the shipped specs.

Each selected point of runs/*.toml is computed in a fresh Python process with one BLAS
thread (OPENBLAS/OMP/MKL_NUM_THREADS=1); its CPU time (user + system: the core-seconds a
cluster bills, less disturbed by other load than the wall time, which is printed too)
and peak resident memory (ru_maxrss) are compared with
:func:`mpsobs.pipeline.cost.point_cost`. Printed per point: predicted and measured
seconds and MiB and their ratios (measured / predicted), and the time relative to the
first point measured in the same run next to the predicted one (the scaling, free of
the machine's speed). A factor of 3 either way is the target.

    python scripts/bench_cost.py                          # points predicted <= 60 s
    python scripts/bench_cost.py --max-seconds 600 runs/block-scan.toml
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

from mpsobs.pipeline import cost, spec

ROOT = Path(__file__).resolve().parents[1]
CHILD = """
import json, resource, sys, time
from mpsobs.pipeline import point, spec
run = spec.load(sys.argv[1])
chosen = [p for p in run.points if p.point_id == sys.argv[2]][0]
before = resource.getrusage(resource.RUSAGE_SELF)
start = time.perf_counter()
point.compute_point(chosen)
wall = time.perf_counter() - start
after = resource.getrusage(resource.RUSAGE_SELF)
cpu = after.ru_utime + after.ru_stime - before.ru_utime - before.ru_stime
print(json.dumps({"seconds": cpu, "wall": wall, "bytes": after.ru_maxrss * 1024}))
"""


def measure(spec_path: Path, point_id: str) -> dict:
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1",
           "MKL_NUM_THREADS": "1", "PYTHONPATH": str(ROOT)}
    done = subprocess.run([sys.executable, "-c", CHILD, str(spec_path), point_id],
                          env=env, capture_output=True, text=True, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("specs", nargs="*", type=Path,
                        default=[ROOT / "runs" / "default.toml", ROOT / "runs" / "size-scan.toml",
                                 ROOT / "runs" / "block-scan.toml"])
    parser.add_argument("--max-seconds", type=float, default=60.0,
                        help="measure only points predicted to take at most this long")
    args = parser.parse_args()
    machine = platform.processor() or platform.machine()
    print(f"{time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}, {machine}, "
          f"{os.cpu_count()} cores, load {os.getloadavg()[0]:.1f} at start")
    print(f"model rates: GEMM {cost.GEMM_RATE:.3g} flop/s, LAPACK {cost.LAPACK_RATE:.3g} "
          f"flop/s, {cost.CALL_SECONDS:.2g} s per call")
    rows = []
    for path in args.specs:
        for point in spec.load(path).points:
            predicted = cost.point_cost(point)
            if predicted.seconds > args.max_seconds:
                print(f"skip {path.name} {point.label}: predicted {predicted.seconds:.0f} s")
                continue
            got = measure(path, point.point_id)
            rows.append((path.name, point.label, predicted, got))
            print(f"{path.name:16s} {point.label:36s} time {predicted.seconds:8.2f} s "
                  f"predicted {got['seconds']:8.2f} s measured (wall {got['wall']:.1f} s) ratio "
                  f"{got['seconds'] / predicted.seconds:5.2f}   memory "
                  f"{predicted.peak_bytes / 2**20:6.0f} MiB predicted "
                  f"{got['bytes'] / 2**20:6.0f} MiB measured ratio "
                  f"{got['bytes'] / predicted.peak_bytes:5.2f}", flush=True)
    if not rows:
        return
    base_pred, base_got = rows[0][2].seconds, rows[0][3]["seconds"]
    print(f"\nscaling against the first point ({rows[0][1]}, measured {base_got:.2f} s):")
    for name, label, predicted, got in rows:
        print(f"  {name:16s} {label:36s} measured x{got['seconds'] / base_got:7.2f}   "
              f"predicted x{predicted.seconds / base_pred:7.2f}")
    time_ratio = np.array([g["seconds"] / p.seconds for _, _, p, g in rows])
    memory_ratio = np.array([g["bytes"] / p.peak_bytes for _, _, p, g in rows])
    for what, ratio in (("time", time_ratio), ("memory", memory_ratio)):
        within = np.mean((ratio >= 1 / 3) & (ratio <= 3))
        print(f"{what}: measured / predicted geometric mean {np.exp(np.mean(np.log(ratio))):.2f}, "
              f"range {ratio.min():.2f}-{ratio.max():.2f}, {100 * within:.0f}% of "
              f"{ratio.size} points within a factor 3")
    print(f"load {os.getloadavg()[0]:.1f} at the end")


if __name__ == "__main__":
    main()
