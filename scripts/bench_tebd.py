"""Benchmark: mpsobs.evolve against quimb.tensor.TEBD, with and without number blocks,
the Gram-route truncation against the full SVD, in the same run.

Scenario: quench of the XXZ chain (delta = 0.5, random longitudinal field of strength 0.5
with a fixed seed, so that no symmetry makes Schmidt values degenerate) from the Neel
state, L = 64. For every max bond the quench is first run (untimed, number blocks) to a
time where the middle bonds have reached the maximum (``START_TIMES``; cached with
``--cache``); from that state every code then evolves ``--steps`` steps of dt, timed:

- ``blocks``: evolve(symmetry="number"), Gram route (the default, decomposition="auto");
- ``blocks_svd``: the same with the full SVD on every split (decomposition="svd");
- ``dense``: evolve(symmetry="none"), Gram route: the kernel without number blocks (what
  a chain without number conservation, e.g. Ising with a transverse field, runs);
- ``dense_svd``: the same with the full SVD;
- ``quimb``: quimb.tensor.TEBD with the same bond Hamiltonians, dt, Trotter order 2
  (both use the even/odd Strang splitting), max bond and cutoff (quimb's cutoff_mode
  'rsum2' is the same discarded-weight rule).

Printed: the best of ``--repeats`` times (s), the ratios quimb / ours, Gram / SVD, and the
infidelities 1 - |<a|b>|^2 between the final states of the Gram and the SVD route (blocks
and dense) and between ours and quimb's. Run with OPENBLAS_NUM_THREADS=1 (one BLAS thread,
as the sweep workers). The machine may be shared: the codes run interleaved, so the ratios
within one run are what counts.

Usage:  OPENBLAS_NUM_THREADS=1 python scripts/bench_tebd.py [--bonds 16 32 64 128]
            [--steps 10] [--repeats 1] [--cache /tmp/tebd_states]
"""

from __future__ import annotations

import argparse
import os
import time
from pathlib import Path

import numpy as np
import quimb.tensor as qtn

from mpsobs.chain import models
from mpsobs.chain.evolution import evolve
from mpsobs.chain.states import neel
from mpsobs.mps.tensors import MPS, to_quimb

#: Quench time after which the middle bonds have reached the max bond (L = 64).
START_TIMES = {8: 2.5, 16: 3.0, 32: 4.0, 64: 5.0, 128: 6.0}
OURS = {"blocks": ("number", "auto"), "blocks_svd": ("number", "svd"),
        "dense": ("none", "auto"), "dense_svd": ("none", "svd")}


def start_state(model, chi: int, dt: float, cutoff: float, cache: Path | None) -> MPS:
    path = None if cache is None else cache / f"xxz_L{model.L}_chi{chi}_dt{dt}_cut{cutoff}.npz"
    if path is not None and path.exists():
        data = np.load(path)
        return MPS(tuple(data[f"t{i}"] for i in range(model.L)))
    t = time.perf_counter()
    snap = list(evolve(neel(model.L), model, [START_TIMES.get(chi, 6.0)], max_bond=chi,
                       cutoff=cutoff, dt=dt, order=2, symmetry="number"))[-1]
    print(f"# start state for bond {chi}: t = {snap.t}, bond {snap.max_bond}, "
          f"{time.perf_counter() - t:.1f} s", flush=True)
    if path is not None:
        path.parent.mkdir(parents=True, exist_ok=True)
        np.savez(path, **{f"t{i}": a for i, a in enumerate(snap.state.tensors)})
    return snap.state


def run_ours(psi0, model, T, dt, chi, cutoff, symmetry, decomposition):
    return list(evolve(psi0, model, [T], max_bond=chi, cutoff=cutoff, dt=dt, order=2,
                       symmetry=symmetry, decomposition=decomposition))[-1].state


def run_quimb(psi0, model, T, dt, chi, cutoff):
    ham = qtn.LocalHam1D(model.L, H2={(b, b + 1): h for b, h in
                                      enumerate(models.bond_hamiltonians(model))})
    tebd = qtn.TEBD(to_quimb(psi0), ham, dt=dt, progbar=False,
                    split_opts={"max_bond": chi, "cutoff": cutoff, "cutoff_mode": "rsum2"})
    tebd.update_to(T, order=2)
    return tebd.pt


def infidelity(a, b) -> float:
    a = a / np.sqrt(abs(a.H @ a))
    b = b / np.sqrt(abs(b.H @ b))
    return float(max(1.0 - abs(a.H @ b) ** 2, 0.0))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--L", type=int, default=64)
    parser.add_argument("--bonds", type=int, nargs="+", default=[16, 32, 64, 128])
    parser.add_argument("--steps", type=int, default=10)
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--dt", type=float, default=0.05)
    parser.add_argument("--cutoff", type=float, default=1e-10)
    parser.add_argument("--cache", type=Path, default=None)
    args = parser.parse_args()

    model = models.xxz(args.L, J=1.0, delta=0.5, h=0.5, field="random", seed=7)
    T = args.steps * args.dt
    print(f"XXZ delta=0.5, random field 0.5 (seed 7), Neel quench, L={args.L}, dt={args.dt}, "
          f"order 2, cutoff={args.cutoff}, {args.steps} timed steps, "
          f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}, "
          f"load {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    print(f"{'bond':>5} {'blocks':>7} {'blk_svd':>7} {'dense':>7} {'dns_svd':>7} {'quimb':>7} "
          f"{'q/blk':>6} {'q/dense':>7} {'q/blkS':>6} {'q/dnsS':>6} {'svd/gram':>8} "
          f"{'1-F blk':>8} {'1-F dns':>8} {'1-F q':>8}")
    warm = neel(args.L)   # first calls (imports, caches) are not timed
    run_quimb(warm, model, 2 * args.dt, args.dt, 4, args.cutoff)
    run_ours(warm, model, 2 * args.dt, args.dt, 4, args.cutoff, "number", "auto")
    for chi in args.bonds:
        psi0 = start_state(model, chi, args.dt, args.cutoff, args.cache)
        times: dict[str, list[float]] = {name: [] for name in (*OURS, "quimb")}
        finals = {}
        for _ in range(args.repeats):
            for name, (symmetry, decomposition) in OURS.items():
                t = time.perf_counter()
                state = run_ours(psi0, model, T, args.dt, chi, args.cutoff, symmetry,
                                 decomposition)
                times[name].append(time.perf_counter() - t)
                finals[name] = to_quimb(state)
            t = time.perf_counter()
            finals["quimb"] = run_quimb(psi0, model, T, args.dt, chi, args.cutoff)
            times["quimb"].append(time.perf_counter() - t)
        best = {k: min(v) for k, v in times.items()}
        q = best["quimb"]
        print(f"{chi:>5} {best['blocks']:>7.2f} {best['blocks_svd']:>7.2f} "
              f"{best['dense']:>7.2f} {best['dense_svd']:>7.2f} {q:>7.2f} "
              f"{q / best['blocks']:>6.2f} {q / best['dense']:>7.2f} "
              f"{q / best['blocks_svd']:>6.2f} {q / best['dense_svd']:>6.2f} "
              f"{best['dense_svd'] / best['dense']:>8.2f} "
              f"{infidelity(finals['blocks'], finals['blocks_svd']):>8.1e} "
              f"{infidelity(finals['dense'], finals['dense_svd']):>8.1e} "
              f"{infidelity(finals['blocks'], finals['quimb']):>8.1e}", flush=True)


if __name__ == "__main__":
    main()
