"""Cost and error of the wide-region energy estimator (two or three regions) after a quench.

The tilted-field Ising chain (g = 1.05, h = 0.25) starts with every spin up and is
evolved by TEBD (order 4, dt = 0.05) to t = --time at bond chi; then the energies of the
two halves, or of three regions (5/16, 6/16, 5/16 of the chain: 20 + 24 + 20 sites at
L = 64), in bins of width --bin-width, are evaluated by
:func:`mpsobs.wide_energy.wide_energy_entropy` with N moments and compression bond D.
Printed per configuration: the wall time of one evaluation (one output time: the
estimate with its three reruns at half the resolution) with an empty memo of Gibbs
references ("first") and at t + 0.5 with the memo the first call left ("next", as at the
later output times of a run), S_obs and its method error at t, and the ratio of the first time to
the baseline (the first configuration) measured in the same run; with the load average,
since the machine may be shared.

    OPENBLAS_NUM_THREADS=1 python scripts/bench_wide.py [--quick | --regions]
"""

from __future__ import annotations

import argparse
import os
import time

from mpsobs.chain import coarse, models, states
from mpsobs.chain import evolution as tebd
from mpsobs.estimators.wide_energy import clear_references, wide_energy_entropy

#: (L, chi, moments, compression bond, regions); the first is the baseline.
FULL = [(64, 32, 128, 32, 2), (64, 32, 256, 32, 2), (64, 32, 128, 64, 2), (64, 64, 128, 64, 2),
        (128, 32, 128, 32, 2), (128, 64, 128, 64, 2), (64, 32, 128, 32, 3)]
QUICK = [(64, 16, 64, 16, 2), (64, 16, 128, 16, 2), (64, 32, 64, 32, 2), (64, 16, 64, 16, 3)]
#: Two against three regions at the same settings.
REGIONS = [(64, 16, 64, 16, 2), (64, 16, 64, 16, 3)]


def _regions(L: int, parts: int) -> list[list[int]]:
    """Two halves, or three regions of 5/16, 6/16 and 5/16 of the chain."""
    cuts = [0, L // 2, L] if parts == 2 else [0, 5 * L // 16, 11 * L // 16, L]
    return [[a, b] for a, b in zip(cuts[:-1], cuts[1:], strict=True)]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small configurations only")
    parser.add_argument("--regions", action="store_true",
                        help="only two against three regions at the quick settings")
    parser.add_argument("--time", type=float, default=2.0, help="time of the snapshot")
    parser.add_argument("--bin-width", type=float, default=1.0)
    args = parser.parse_args()
    configs = REGIONS if args.regions else QUICK if args.quick else FULL
    states_cache = {}
    baseline = None
    print(f"load average {os.getloadavg()[0]:.2f}; t = {args.time}, bin width "
          f"{args.bin_width}")
    print(f"{'L':>4} {'parts':>5} {'chi':>4} {'N':>5} {'D':>4} {'first s':>9} {'next s':>8} "
          f"{'ratio':>7} {'S_obs':>9} {'method_err':>10} {'S/L':>7}")
    for L, chi, n_moments, bond, parts in configs:
        model = models.ising(L, g=1.05, h=0.25)
        if (L, chi) not in states_cache:
            start = time.perf_counter()
            snaps = list(tebd.evolve(states.product_state("0" * L), model,
                                     [args.time, args.time + 0.5], max_bond=chi,
                                     cutoff=1e-10, dt=0.05, order=4))
            states_cache[L, chi] = [snap.state for snap in snaps]
            print(f"# evolution L = {L}, chi = {chi}: {time.perf_counter() - start:.1f} s")
        cg = coarse.blocks(L, None, "energy", model=model, bin_width=args.bin_width,
                           regions=_regions(L, parts))
        clear_references()
        timed, results = [], []
        for state in states_cache[L, chi]:
            start = time.perf_counter()
            results.append(wide_energy_entropy(state, cg, moments=n_moments, bond=bond))
            timed.append(time.perf_counter() - start)
        seconds, res = timed[0], results[0]
        baseline = baseline or seconds
        print(f"{L:>4} {parts:>5} {chi:>4} {n_moments:>5} {bond:>4} {seconds:>9.1f} "
              f"{timed[1]:>8.1f} {seconds / baseline:>7.2f} {res.entropy:>9.3f} "
              f"{res.method_err:>10.3f} "
              f"{res.entropy / L:>7.4f}", flush=True)
    print(f"load average {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
