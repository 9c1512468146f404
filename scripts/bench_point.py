"""Whole research points: the current algorithms against the baseline ones, per part.

Two research specs, one point each (one process, no Dask):

- ising: tilted-field Ising chain, J = 1, g = 1.05, h = 0.25 (uniform), all sites up
  (every site in |0>); not number-conserving.
- xxz: XXZ chain, J = 1, delta = 0.5, staggered field 0.3, Neel state; number-conserving.

Same settings for both: chi_max 128 (the truncation check at the default chi_check =
chi_max // 2), dt 0.05, order 4, cutoff 1e-10, 13 output times up to t = 6, number and
energy blocks of 4, the automatic estimator with 1000 samples. L = 64 and 128 by
default; ``--quick`` runs L = 32 with bond 64 and 7 output times (for a loaded machine).

Each point is computed by :func:`mpsobs.pipeline.point.compute_point` twice per repeat,
alternately: with the current algorithms and inside
:func:`mpsobs.estimators.estimate.baseline_algorithms` (dense environments for
number-conserving states, enumeration tried at every output time). The best-of-repeats
CPU time (see CLOCK; the wall time is printed too) is split into exclusive parts by timers
wrapped around the library's functions for this script only:

    evolution    next() of the TEBD snapshot generators (main and check evolution)
    sampling     the sampler (conditional or per-string batches)
    enumeration  exact enumeration, including attempts given up for sampling
    counting     the region-counting estimator
    references   the thermodynamic reference and S_obs_eq (estimators inside it count
                 here, not above)
    other        the rest (canonical forms, bond entropies, block tensors, rows)

The evolution runs the same code in both columns (the TEBD kernel has no baseline switch
here), so its ratio shows the noise of the machine. The rows of both runs are compared:
exact values must agree to 1e-9, sampled ones within 4 combined standard errors (the
largest |difference| / error is printed).

``--final`` times only the estimators, on the state of the last output time (evolved
once, at chi_max, by the point's own builders): for each coarse-graining the point's
estimator settings (automatic, without a previous method) and the conditional sampler
(1000 samples), current against baseline algorithms, same seed. A cheap proxy of the
estimator part of a research point where the whole point takes too long.

Usage: OPENBLAS_NUM_THREADS=1 python scripts/bench_point.py [--quick] [--repeat 1]
       [--specs ising,xxz] [--L 64,128] [--final]
"""

from __future__ import annotations

import argparse
import os
import platform
import time
from collections import defaultdict
from contextlib import nullcontext

import numpy as np

from mpsobs.estimators import counting, enumeration, estimate
from mpsobs.estimators.entropy import observational_entropy
from mpsobs.pipeline import build, point, spec

#: The clock of every figure: CPU seconds of this process. With one BLAS thread
#: (OPENBLAS_NUM_THREADS=1) that is the work done, and much less sensitive than wall time
#: to other processes on a shared machine (not to their use of caches and memory bandwidth).
CLOCK = time.process_time

PARTS = ("evolution", "sampling", "enumeration", "counting", "references", "other")

MODELS = {
    "ising": ({"name": "ising", "J": 1.0, "g": 1.05,
               "field": {"kind": "uniform", "strength": 0.25}},
              {"kind": "product", "pattern": "0"}),
    "xxz": ({"name": "xxz", "J": 1.0, "delta": 0.5,
             "field": {"kind": "staggered", "strength": 0.3}},
            {"kind": "neel"}),
}


def research_spec(name: str, L: int, bond: int, n_times: int) -> dict:
    model, state = MODELS[name]
    return {"name": f"bench-{name}", "seed": 7,
            "model": {**model, "L": L}, "state": state,
            "evolution": {"dt": 0.05, "order": 4, "chi_max": bond, "cutoff": 1e-10},
            "times": {"t_max": 6.0, "n_times": n_times},
            "coarse": [{"observable": "number", "block": 4},
                       {"observable": "energy", "block": 4}],
            "estimator": {"method": "auto", "samples": 1000}}


class Timers:
    """Exclusive time per part (CLOCK: CPU time of the process): a part entered inside
    another pauses the outer."""

    def __init__(self):
        self.total = defaultdict(float)
        self._stack = ["other"]
        self._mark = CLOCK()

    def _switch(self, push: str | None) -> None:
        now = CLOCK()
        self.total[self._stack[-1]] += now - self._mark
        self._mark = now
        if push is None:
            self._stack.pop()
        else:   # everything inside the references counts there
            self._stack.append("references" if "references" in self._stack else push)

    def wrap(self, part: str, func):
        def timed(*args, **kwargs):
            self._switch(part)
            try:
                return func(*args, **kwargs)
            finally:
                self._switch(None)
        return timed

    def wrap_generator(self, part: str, func):
        def timed(*args, **kwargs):
            gen = self.wrap(part, func)(*args, **kwargs)
            step = self.wrap(part, next)
            while True:
                try:
                    yield step(gen)
                except StopIteration:
                    return
        return timed

    def close(self) -> dict:
        self._switch("other")
        return dict(self.total)


def timed_point(p: spec.Point, baseline: bool) -> tuple[dict, object]:
    """(seconds per part, rows) of one compute_point run."""
    timers = Timers()
    patches = [(build.tebd, "evolve", timers.wrap_generator("evolution", build.tebd.evolve)),
               (point, "_reference", timers.wrap("references", point._reference)),
               (estimate._Sampling, "draw", timers.wrap("sampling", estimate._Sampling.draw)),
               (enumeration, "enumerate_outcomes",
                timers.wrap("enumeration", enumeration.enumerate_outcomes)),
               (enumeration, "enumerate_outcomes_charged",
                timers.wrap("enumeration", enumeration.enumerate_outcomes_charged)),
               (counting, "count_numbers", timers.wrap("counting", counting.count_numbers))]
    saved = [(owner, name, getattr(owner, name)) for owner, name, _ in patches]
    wall = time.perf_counter()
    for owner, name, new in patches:
        setattr(owner, name, new)
    try:
        with estimate.baseline_algorithms() if baseline else nullcontext():
            rows = point.compute_point(p)
    finally:
        for owner, name, old in saved:
            setattr(owner, name, old)
    parts = timers.close()
    parts["total"] = sum(parts.values())
    parts["wall"] = time.perf_counter() - wall
    return parts, rows


def agreement(new, old) -> str:
    exact = ((new["method"] == "exact") & (old["method"] == "exact")).to_numpy()
    diff = np.abs(new["S_obs"] - old["S_obs"]).to_numpy()
    worst_exact = float(np.max(diff[exact], initial=0.0))
    err = np.hypot(new["S_obs_err"], old["S_obs_err"]).to_numpy()
    sampled = ~exact & (err > 0)
    z = diff[sampled] / err[sampled]
    worst_z = float(np.max(z, initial=0.0))
    ok = worst_exact <= 1e-9 and worst_z <= 4.0
    return (f"rows agree: {'yes' if ok else 'NO'} (exact: max |diff| {worst_exact:.1e} nats "
            f"over {int(exact.sum())} rows; sampled: max |diff|/err {worst_z:.2f} over "
            f"{int(sampled.sum())} rows)")


def bench(name: str, L: int, bond: int, n_times: int, repeat: int) -> None:
    p = spec.parse(research_spec(name, L, bond, n_times)).points[0]
    best = {False: None, True: None}
    rows = {}
    for _ in range(repeat):
        for baseline in (True, False):   # alternate, so that a change of load hits both
            parts, rows[baseline] = timed_point(p, baseline)
            if best[baseline] is None or parts["total"] < best[baseline]["total"]:
                best[baseline] = parts
    old, new = best[True], best[False]
    print(f"\n{name}: L = {L}, chi_max {bond}, chi_check {p.params['evolution']['chi_check']},"
          f" {n_times} times to t = 6, number and energy blocks of 4, 1000 samples")
    print(f"  {'CPU s':<12} {'baseline':>11} {'new':>9} {'ratio':>7}")
    for part in (*PARTS, "total", "wall"):
        a, b = old.get(part, 0.0), new.get(part, 0.0)
        ratio = f"{a / b:7.2f}" if b > 0.01 and a > 0.01 else "      -"
        print(f"  {part:<12} {a:11.2f} {b:9.2f} {ratio}")
    print("  " + agreement(rows[False], rows[True]))
    methods = rows[False].groupby("coarse_graining")["algorithm"].agg(
        lambda s: ",".join(f"{k}:{v}" for k, v in s.value_counts().items()))
    print("  estimates: " + "; ".join(f"{k} {v}" for k, v in methods.items()))


def best_of(repeat: int, func, *args, **kwargs) -> tuple[float, object]:
    best, out = np.inf, None
    for _ in range(repeat):
        start = CLOCK()
        out = func(*args, **kwargs)
        best = min(best, CLOCK() - start)
    return best, out


def bench_final(name: str, L: int, bond: int, n_times: int, repeat: int) -> None:
    p = spec.parse(research_spec(name, L, bond, n_times)).points[0]
    built = build.build_point(p)
    evo, times = p.params["evolution"], p.params["times"]["values"]
    start = time.perf_counter()
    *_, last = build.evolve(built, built.state, times, evo["chi_max"])
    print(f"\n{name}: L = {L}, t = {times[-1]:g}, bond {last.max_bond} (evolved in "
          f"{time.perf_counter() - start:.0f} s wall); CPU seconds per estimate, best of "
          f"{repeat}")
    print(f"  {'coarse-graining':<16} {'estimator':<22} {'baseline':>11} {'new':>8} "
          f"{'ratio':>7}  agreement")
    for c in built.coarse:
        label, cg = c.label, c.coarse_graining
        runs = {"point's estimator": c.options, "sample": {"method": "sample", "samples": 1000}}
        for kind, kwargs in runs.items():
            with estimate.baseline_algorithms():
                t_old, old = best_of(repeat, observational_entropy, last.state, cg, seed=3,
                                     **kwargs)
            t_new, new = best_of(repeat, observational_entropy, last.state, cg, seed=3,
                                 **kwargs)
            z = abs(new.entropy - old.entropy) / max(np.hypot(new.stderr, old.stderr), 1e-300)
            print(f"  {label:<16} {kind:<22} {t_old:11.2f} {t_new:8.2f} "
                  f"{t_old / t_new:7.2f}  |diff| {abs(new.entropy - old.entropy):.1e} nats "
                  f"= {z:.2f} errors")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true",
                        help="L = 32, bond 64, 7 output times")
    parser.add_argument("--repeat", type=int, default=1, help="runs of each kind (1)")
    parser.add_argument("--specs", default="ising,xxz", help="ising,xxz")
    parser.add_argument("--L", default=None, help="chain lengths (64,128; quick: 32)")
    parser.add_argument("--final", action="store_true",
                        help="time the estimators on the last snapshot only")
    args = parser.parse_args()
    lengths = [int(x) for x in (args.L or ("32" if args.quick else "64,128")).split(",")]
    bond, n_times = (64, 7) if args.quick else (128, 13)
    print(f"{time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}; {platform.node()}, "
          f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f}; "
          f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}")
    for name in args.specs.split(","):
        for L in lengths:
            (bench_final if args.final else bench)(name, L, bond, n_times, args.repeat)
    print(f"\nload average at the end {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
