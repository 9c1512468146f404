"""Benchmark: the library's thread choice against pinned and free BLAS threads.

For bond dimensions 16..256 it times, in one process and one run:

- TEBD: ``mpsobs.evolve`` of a random 32-site MPS of that bond (max_bond = the bond,
  order 2, steps of dt = 0.05: ten up to bond 64, two from 128 on);
- an estimate: sampled S_obs of the same state, number blocks of 4 sites;

under three settings of :mod:`mpsobs.threads`: ``1`` (pinned: one BLAS thread, the
baseline), ``"blas"`` (no limit: the BLAS library's own count, what a user got before)
and ``"auto"`` (the library's default rule). It prints the best of three timings per
cell (one from bond 128 on) and the ratios to the pinned baseline (> 1: slower than
pinned).

Run it without OMP/OPENBLAS/MKL_NUM_THREADS in the environment (else BLAS starts
pinned and "blas" equals "1"); the figures depend on the machine's load. Arguments:
bond dimensions to time (default 16 32 64 128 256).
"""

from __future__ import annotations

import os
import sys
import time

for _name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    if os.environ.get(_name):
        sys.exit(f"unset {_name} for this benchmark (it compares thread counts)")

import mpsobs  # noqa: E402
from mpsobs.chain import coarse, models  # noqa: E402
from mpsobs.core.threads import SMALL_BOND, using_threads  # noqa: E402
from mpsobs.mps.tensors import random_mps  # noqa: E402

L = 32
BONDS = (16, 32, 64, 128, 256)
SETTINGS = (1, "blas", "auto")
REPEATS = 3


def best(func, repeats: int = REPEATS) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    from threadpoolctl import threadpool_info

    print(f"BLAS: {[(i['internal_api'], i['num_threads']) for i in threadpool_info()]}, "
          f"{os.cpu_count()} cores; auto rule: 1 thread below bond {SMALL_BOND}")
    model = models.xxz(L, delta=0.5)
    cg = coarse.blocks(L, 4, "number")
    header = "  ".join(f"{str(s):>7s}" for s in SETTINGS)
    print(f"{'kernel':8s} {'bond':>4s}  seconds: {header}   ratio to pinned: "
          + "  ".join(f"{str(s):>6s}" for s in SETTINGS[1:]))
    bonds = tuple(int(b) for b in sys.argv[1:]) or BONDS
    for chi in bonds:
        state = random_mps(L, chi, seed=chi)
        samples = max(8, 4096 // chi)

        def run_evolve(state=state, chi=chi):
            list(mpsobs.evolve(state, model, [0.5 if chi <= 64 else 0.1], max_bond=chi,
                               cutoff=0.0, dt=0.05, order=2))

        def run_estimate(state=state, samples=samples):
            mpsobs.observational_entropy(state, cg, method="sample", samples=samples,
                                         seed=1)

        for name, func in (("evolve", run_evolve), ("estimate", run_estimate)):
            seconds = {}
            for setting in SETTINGS:
                with using_threads(setting):
                    seconds[setting] = best(func, REPEATS if chi <= 64 else 1)
            row = "  ".join(f"{seconds[s]:7.3f}" for s in SETTINGS)
            ratios = "  ".join(f"{seconds[s] / seconds[1]:6.2f}" for s in SETTINGS[1:])
            print(f"{name:8s} {chi:4d}           {row}                    {ratios}",
                  flush=True)


if __name__ == "__main__":
    main()
