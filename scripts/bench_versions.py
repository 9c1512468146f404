"""Whole research points with this tree against an earlier checkout of mpsobs.

Runs the research specs of :mod:`bench_point` (tilted-field Ising g = 1.05, h = 0.25
from all up; XXZ delta = 0.5, staggered field 0.3, from Neel; number and energy blocks
of 4, 1000 samples, the default truncation check) once with each tree, each in its own
process (OPENBLAS_NUM_THREADS=1, one core), alternating so that a change of load hits
both, and prints the CPU seconds of each, their ratio, and how far the two tables agree
(|S_obs difference| in units of the combined reported error: the seeds of the two
versions may differ, so sampled values agree within their errors, not exactly).

    python scripts/bench_versions.py --baseline /path/to/old/checkout --L 32 --bond 64

The baseline is any earlier checkout whose ``mpsobs.pipeline.point.compute_point`` and
``mpsobs.pipeline.spec.parse`` take a point and a spec dictionary (the layout since the
layers). CPU time of one single-threaded process is the work done; wall times on a
shared machine vary with the other processes.
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

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_point import research_spec  # noqa: E402

HERE = Path(__file__).resolve().parents[1]

_CHILD = """
import json, sys, time
import mpsobs
from mpsobs.pipeline import point, spec
print("loaded=" + mpsobs.__file__, file=sys.stderr)
p = spec.parse(json.loads(sys.argv[1])).points[0]
cpu, wall = time.process_time(), time.perf_counter()
frame = point.compute_point(p)
cpu, wall = time.process_time() - cpu, time.perf_counter() - wall
rows = frame.sort_values(["coarse_graining", "t"])
print(json.dumps({"cpu": cpu, "wall": wall, "S_obs": rows["S_obs"].tolist(),
                  "err": rows["S_obs_err"].tolist(),
                  "trunc": rows["S_obs_trunc_err"].fillna(0.0).tolist()}))
"""


def timed(tree: Path, data: dict) -> dict:
    """Run one point with the mpsobs of ``tree`` in a fresh process."""
    env = {**os.environ, "PYTHONPATH": str(tree), "OPENBLAS_NUM_THREADS": "1",
           "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
    # run from the tree itself: ``python -c`` puts the working directory first on the path
    done = subprocess.run([sys.executable, "-c", _CHILD, json.dumps(data)], env=env,
                          cwd=tree, capture_output=True, text=True, check=True)
    loaded = Path(next(line for line in done.stderr.splitlines()
                       if line.startswith("loaded=")).removeprefix("loaded=")).resolve()
    if not loaded.is_relative_to(tree.resolve()):
        raise SystemExit(f"the child process loaded {loaded}, not the mpsobs of {tree}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--baseline", required=True, type=Path,
                        help="a checkout of an earlier mpsobs (its repository root)")
    parser.add_argument("--specs", default="ising,xxz", help="ising,xxz")
    parser.add_argument("--L", type=int, default=64, help="chain length (64)")
    parser.add_argument("--bond", type=int, default=128, help="chi_max (128)")
    parser.add_argument("--n-times", type=int, default=13, help="output times to t = 6 (13)")
    args = parser.parse_args()
    print(f"{time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}; {platform.node()}, "
          f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f}; baseline "
          f"{args.baseline}")
    for name in args.specs.split(","):
        data = research_spec(name, args.L, args.bond, args.n_times)
        old = timed(args.baseline, data)
        new = timed(HERE, data)
        diff = [abs(a - b) / max((ea**2 + eb**2 + ta**2 + tb**2) ** 0.5, 1e-12)
                for a, b, ea, eb, ta, tb in zip(old["S_obs"], new["S_obs"], old["err"],
                                                new["err"], old["trunc"], new["trunc"],
                                                strict=True)]
        print(f"{name}: L = {args.L}, chi_max {args.bond}, {args.n_times} times; CPU s "
              f"baseline {old['cpu']:.1f}, this tree {new['cpu']:.1f}, ratio "
              f"{old['cpu'] / new['cpu']:.2f} (wall {old['wall']:.1f} / {new['wall']:.1f}); "
              f"max |S_obs difference| {max(diff):.2f} combined errors over {len(diff)} rows")
    print(f"load average at the end {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
