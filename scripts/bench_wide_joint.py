"""Cost of the joint number and energy of wide regions against the energy alone.

An XXZ chain (delta = 0.5, staggered field h = 0.1) starts in the Neel state and is
evolved by TEBD (order 4, dt = 0.05) to t = --time at bond chi; then the halves (the
first at least 13 sites, so that it is wide), or with ``--regions 3`` three regions
(outer ones of max(13, 5 L / 16) sites), are
evaluated by :func:`mpsobs.estimators.wide_energy.wide_energy_entropy` (the baseline,
energy alone) and by
:func:`mpsobs.estimators.wide_number_energy.wide_number_energy_entropy` (number and
energy) with N moments and compression bond D, on the same state in the same run.
Printed per configuration: wall times, their ratio, S_obs and method error of both.
Then the infinite-temperature check of the purification path: the beta = 0 Gibbs state
must give S_obs = L ln 2 (definition, DESIGN 3c), printed with the reported error.

    OPENBLAS_NUM_THREADS=1 python scripts/bench_wide_joint.py [--quick] [--regions 3]
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np

from mpsobs.chain import coarse, models, states
from mpsobs.chain import evolution as tebd
from mpsobs.estimators.estimate import pruned_entropy_bound
from mpsobs.estimators.wide_energy import wide_energy_entropy
from mpsobs.estimators.wide_number_energy import wide_number_energy_entropy
from mpsobs.references import thermo

#: (L, chi, moments, compression bond)
FULL = [(32, 16, 64, 16), (64, 32, 128, 32)]
QUICK = [(16, 8, 32, 8), (32, 16, 64, 16)]


def _total(res) -> float:
    """Method error plus the entropy bound of the pruned mass (the row's total error)."""
    return res.method_err + pruned_entropy_bound(res.pruned_mass, res.max_entropy)


def _regions(L: int, parts: int) -> list[list[int]]:
    """Two parts (the first at least 13 sites) or three (outer ones of max(13, 5 L / 16))."""
    if parts == 2:
        cut = max(coarse.MAX_BLOCK_SITES + 1, L // 2)
        return [[0, cut], [cut, L]]
    cut = max(coarse.MAX_BLOCK_SITES + 1, 5 * L // 16)
    return [[0, cut], [cut, L - cut], [L - cut, L]]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small configurations only")
    parser.add_argument("--time", type=float, default=1.0, help="time of the snapshot")
    parser.add_argument("--bin-width", type=float, default=1.0)
    parser.add_argument("--regions", type=int, choices=(2, 3), default=2)
    args = parser.parse_args()
    print(f"load average {os.getloadavg()[0]:.2f}; t = {args.time}, bin width "
          f"{args.bin_width}, {args.regions} regions")
    print(f"{'L':>4} {'chi':>4} {'N':>5} {'D':>4} {'energy s':>9} {'joint s':>9} {'ratio':>6} "
          f"{'S_energy':>9} {'err':>6} {'S_joint':>9} {'err':>6}")
    for L, chi, n_moments, bond in QUICK if args.quick else FULL:
        model = models.xxz(L, delta=0.5, h=0.1, field="staggered")
        state = list(tebd.evolve(states.neel(L), model, [args.time], max_bond=chi,
                                 cutoff=1e-10, dt=0.05, order=4))[-1].state
        halves = _regions(L, args.regions)
        energy = coarse.blocks(L, None, "energy", model=model, bin_width=args.bin_width,
                               regions=halves)
        joint = coarse.sequence(coarse.blocks(L, None, "number", regions=halves), energy)
        start = time.perf_counter()
        alone = wide_energy_entropy(state, energy, moments=n_moments, bond=bond)
        t_alone = time.perf_counter() - start
        start = time.perf_counter()
        both = wide_number_energy_entropy(state, joint, moments=n_moments, bond=bond)
        t_both = time.perf_counter() - start
        print(f"{L:4d} {chi:4d} {n_moments:5d} {bond:4d} {t_alone:9.1f} {t_both:9.1f} "
              f"{t_both / t_alone:6.2f} {alone.entropy:9.4f} {_total(alone):6.3f} "
              f"{both.entropy:9.4f} {_total(both):6.3f}", flush=True)
    L = 16 if args.quick else 32
    model = models.xxz(L, delta=0.5)
    halves = _regions(L, args.regions)
    joint = coarse.sequence(coarse.blocks(L, None, "number", regions=halves),
                            coarse.blocks(L, None, "energy", model=model, bin_width=2.0,
                                          regions=halves))
    start = time.perf_counter()
    res = wide_number_energy_entropy(thermo.gibbs_state(model, 0.0, max_bond=4), joint,
                                     moments=16, bond=8)
    print(f"beta = 0, L = {L}, regions {halves}: S_obs = {res.entropy:.4f}, L ln 2 = "
          f"{L * np.log(2):.4f}, difference {res.entropy - L * np.log(2):+.4f}, reported "
          f"total error {_total(res):.4f}, {time.perf_counter() - start:.1f} s")


if __name__ == "__main__":
    main()
