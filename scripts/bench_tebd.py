"""Benchmark: mpsobs.evolve against quimb.tensor.TEBD in the same run.

Scenario: quench of the XXZ chain (delta = 0.5, random longitudinal field of strength 0.5
with a fixed seed, so that no symmetry makes Schmidt values degenerate) from the Neel
state. Both codes get the same bond Hamiltonians, initial state, dt, Trotter order 2
(both use the even/odd Strang splitting with merged half steps), max bond and cutoff
(discarded squared singular values relative to the total; quimb's cutoff_mode 'rsum2').
For every max bond the codes run alternately ``--repeats`` times; the best time of each
is reported with the ratio, the fidelity of the final states, the discarded weight and
the bond dimension reached. "ours" is evolve() as called by default (symmetry="auto":
number blocks from max bond BLOCKS_MIN_BOND on); from that bond on "dense" is also timed
(symmetry="none"), the kernel without the number blocks.

Usage:  python scripts/bench_tebd.py [--L 32] [--bonds 8 16 32 64 128] [--repeats 2]
The machine may be shared: times are noisy, the interleaving keeps the ratio fair. Both
codes suffer alike from multi-threaded BLAS on small matrices; OPENBLAS_NUM_THREADS=1
(as the sweep workers run) gives steadier figures.
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np
import quimb.tensor as qtn

from mpsobs.chain import models
from mpsobs.chain.evolution import BLOCKS_MIN_BOND, evolve
from mpsobs.chain.states import neel
from mpsobs.mps.tensors import to_quimb

#: Evolution time per max bond: long enough for the middle bond to reach the maximum.
DEFAULT_TIMES = {8: 3.0, 16: 3.5, 32: 4.5, 64: 5.5, 128: 6.5}


def run_ours(psi0, model, T, dt, chi, cutoff, order, symmetry="auto"):
    snap = list(evolve(psi0, model, [T], max_bond=chi, cutoff=cutoff, dt=dt, order=order,
                       symmetry=symmetry))[-1]
    return to_quimb(snap.state), snap


def run_quimb(psi0, model, T, dt, chi, cutoff, order):
    ham = qtn.LocalHam1D(model.L, H2={(b, b + 1): h for b, h in
                                      enumerate(models.bond_hamiltonians(model))})
    tebd = qtn.TEBD(to_quimb(psi0), ham, dt=dt, progbar=False,
                    split_opts={"max_bond": chi, "cutoff": cutoff, "cutoff_mode": "rsum2"})
    tebd.update_to(T, order=order)
    return tebd.pt


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--L", type=int, default=32)
    parser.add_argument("--bonds", type=int, nargs="+", default=[8, 16, 32, 64, 128])
    parser.add_argument("--repeats", type=int, default=2)
    parser.add_argument("--dt", type=float, default=0.05)
    parser.add_argument("--cutoff", type=float, default=1e-10)
    parser.add_argument("--order", type=int, default=2, choices=(2, 4))
    args = parser.parse_args()

    model = models.xxz(args.L, J=1.0, delta=0.5, h=0.5, field="random", seed=7)
    psi0 = neel(args.L)
    print(f"XXZ delta=0.5, random field 0.5 (seed 7), Neel start, L={args.L}, "
          f"dt={args.dt}, order={args.order}, cutoff={args.cutoff}, "
          f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}")
    print(f"{'max_bond':>8} {'T':>5} {'ours_s':>8} {'dense_s':>8} {'quimb_s':>8} "
          f"{'ratio':>6} {'ratio_dense':>11} {'1-fidelity':>11} {'discarded':>10} {'bond':>7}")
    for chi in args.bonds:
        T = DEFAULT_TIMES.get(chi, 6.5)
        blocks = chi >= BLOCKS_MIN_BOND
        times = {"ours": [], "dense": [], "quimb": []}
        for _ in range(args.repeats):
            t = time.perf_counter()
            ours, snap = run_ours(psi0, model, T, args.dt, chi, args.cutoff, args.order)
            times["ours"].append(time.perf_counter() - t)
            if blocks:
                t = time.perf_counter()
                dense, _ = run_ours(psi0, model, T, args.dt, chi, args.cutoff, args.order,
                                    symmetry="none")
                times["dense"].append(time.perf_counter() - t)
            t = time.perf_counter()
            theirs = run_quimb(psi0, model, T, args.dt, chi, args.cutoff, args.order)
            times["quimb"].append(time.perf_counter() - t)
        best = {k: min(v) if v else float("nan") for k, v in times.items()}
        if not blocks:
            best["dense"] = best["ours"]
        theirs = theirs / np.sqrt(abs(theirs.H @ theirs))
        infidelity = 1.0 - abs(ours.H @ theirs) ** 2
        print(f"{chi:>8} {T:>5.1f} {best['ours']:>8.3f} {best['dense']:>8.3f} "
              f"{best['quimb']:>8.3f} {best['quimb'] / best['ours']:>6.2f} "
              f"{best['quimb'] / best['dense']:>11.2f} {infidelity:>11.2e} "
              f"{snap.discarded_weight:>10.2e} {snap.max_bond:>3}/{theirs.max_bond():<3}",
              flush=True)


if __name__ == "__main__":
    main()
