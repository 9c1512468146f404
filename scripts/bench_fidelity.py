"""Fidelity of the evolved states of this tree against an earlier checkout of mpsobs.

Evolves the research quench (:mod:`bench_point`: tilted-field Ising g = 1.05, h = 0.25
from all up, or XXZ delta = 0.5, staggered field 0.3 from Neel; dt 0.05, order 4,
cutoff 1e-10) with each tree in its own process (OPENBLAS_NUM_THREADS=1) and prints, at
every output time, 1 - |<a|b>|^2 between the two normalised states, the two discarded
weights and the CPU seconds of each evolution.

    python scripts/bench_fidelity.py --baseline /path/to/checkout --L 32 --bond 64
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_point import research_spec  # noqa: E402

HERE = Path(__file__).resolve().parents[1]

_CHILD = """
import json, sys, time
import numpy as np
from mpsobs.pipeline import build, spec
p = spec.parse(json.loads(sys.argv[1])).points[0]
built = build.build_point(p, cheap_only=True)
evo = p.params["evolution"]
state = build.initial_state(p.params["state"], built.model, evo)
cpu = time.process_time()
out = {}
for k, snap in enumerate(build.evolve(built, state, p.params["times"]["values"],
                                      evo["chi_max"])):
    out[f"t{k}"] = np.array([snap.t, snap.discarded_weight])
    for i, t in enumerate(snap.state.tensors):
        out[f"s{k}_{i}"] = t
out["cpu"] = np.array(time.process_time() - cpu)
np.savez(sys.argv[2], **out)
"""


def run(tree: Path, data: dict, path: Path) -> dict:
    env = {**os.environ, "PYTHONPATH": str(tree), "OPENBLAS_NUM_THREADS": "1",
           "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
    subprocess.run([sys.executable, "-c", _CHILD, json.dumps(data), str(path)], env=env,
                   cwd=tree, check=True)
    return dict(np.load(path))


def overlap(a: list[np.ndarray], b: list[np.ndarray]) -> complex:
    """<a|b> by a left-to-right contraction of two MPS (site tensors (l, 2, r))."""
    env = np.ones((1, 1), dtype=complex)
    for x, y in zip(a, b, strict=True):
        env = np.einsum("ab,asc,bsd->cd", env, x.conj(), y, optimize=True)
    return complex(env[0, 0])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--baseline", required=True, type=Path)
    parser.add_argument("--spec", default="ising", help="ising or xxz")
    parser.add_argument("--L", type=int, default=32)
    parser.add_argument("--bond", type=int, default=64)
    parser.add_argument("--n-times", type=int, default=7)
    parser.add_argument("--t-max", type=float, default=6.0)
    args = parser.parse_args()
    data = research_spec(args.spec, args.L, args.bond, args.n_times)
    data["times"]["t_max"] = args.t_max
    print(f"{time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}; load average "
          f"{os.getloadavg()[0]:.2f}; {args.spec} L = {args.L}, bond {args.bond}")
    with tempfile.TemporaryDirectory() as tmp:
        old = run(args.baseline, data, Path(tmp) / "old.npz")
        new = run(HERE, data, Path(tmp) / "new.npz")
    print(f"CPU s: baseline {float(old['cpu']):.1f}, this tree {float(new['cpu']):.1f}, "
          f"ratio {float(old['cpu']) / float(new['cpu']):.2f}")
    print(f"{'t':>6} {'1 - fidelity':>14} {'disc. baseline':>15} {'disc. new':>12}")
    for k in range(args.n_times):
        a = [old[f"s{k}_{i}"] for i in range(args.L)]
        b = [new[f"s{k}_{i}"] for i in range(args.L)]
        fid = abs(overlap(a, b)) ** 2 / (abs(overlap(a, a)) * abs(overlap(b, b)))
        t, d_old = old[f"t{k}"]
        d_new = new[f"t{k}"][1]
        print(f"{t:6.2f} {1 - fid:14.3e} {d_old:15.4e} {d_new:12.4e}")


if __name__ == "__main__":
    main()
