"""Benchmark of the sampled MPS estimator (not a test; prints a table).

1. L = 128, bond 128, blocks of 4 (number and XXZ energy): samples per second, and the
   achieved flop rate of the contractions (flops counted by ``draw_samples``) divided by
   numpy's complex matrix-multiply rate (1024 x 1024 zgemm) measured around each run.
2. Time per sample at L = 64, 128, 256 and bond 128 (number blocks of 4), divided by L.
3. quimb's fine-grained ``MatrixProductState.sample`` at the same L and bond (steady
   state, after its one-off canonicalisation), against our coarse-grained samples, each
   of which carries its exact probability.

The machine may be shared: figures are noisy; ratios are taken against baselines measured
in the same run, next to each measurement.

Usage: python scripts/bench_estimate.py [--bond 128] [--samples 64]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from mpsobs import coarse, models
from mpsobs import mps as mpsmod
from mpsobs.blocktensors import readout_blocks
from mpsobs.estimate import canonical_state, draw_samples, mps_observational_entropy


def zgemm_rate(n: int = 1024, repeats: int = 3) -> float:
    """Best-of-``repeats`` flop rate of a complex n x n matrix product (8 n^3 flops)."""
    rng = np.random.default_rng(0)
    a = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
    b = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
    a @ b
    best = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        a @ b
        best = min(best, time.perf_counter() - t0)
    return 8.0 * n**3 / best


def timed_samples(blocks, n: int, seed: int) -> tuple[float, float]:
    """Wall time and counted flops of drawing n samples in one batch."""
    uniforms = np.random.default_rng(seed).random((n, len(blocks)))
    t0 = time.perf_counter()
    batch = draw_samples(blocks, uniforms)
    return time.perf_counter() - t0, batch.flops


def quimb_rate(state: mpsmod.MPS, n: int) -> float:
    """Steady-state samples per second of quimb's MatrixProductState.sample."""
    gen = mpsmod.to_quimb(state).sample(n + 1, seed=1)
    next(gen)  # the first sample includes quimb's canonicalisation
    t0 = time.perf_counter()
    for _ in gen:
        pass
    return n / (time.perf_counter() - t0)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--bond", type=int, default=128)
    parser.add_argument("--samples", type=int, default=64)
    parser.add_argument("--quimb-samples", type=int, default=8)
    args = parser.parse_args()
    bond, n = args.bond, args.samples

    print(f"1. L = 128, bond {bond}, blocks of 4, {n} samples per batch")
    print(f"{'blocks':>10} {'samples/s':>10} {'GFLOP/s':>9} {'zgemm':>7} {'ratio':>6} "
          f"{'setup s':>8} {'entry s/sample':>15}")
    L = 128
    state = mpsmod.random_mps(L, bond, seed=1)
    for cg in (coarse.blocks(L, 4), coarse.blocks(L, 4, "energy", model=models.xxz(L))):
        t0 = time.perf_counter()
        blocks = readout_blocks(canonical_state(state, L), cg)
        setup = time.perf_counter() - t0
        timed_samples(blocks, 8, seed=0)  # warm-up
        before = zgemm_rate()
        wall, flops = timed_samples(blocks, n, seed=1)
        peak = 0.5 * (before + zgemm_rate())
        t0 = time.perf_counter()
        mps_observational_entropy(state, cg, method="sample", samples=n, seed=2)
        entry = (time.perf_counter() - t0) / n
        print(f"{cg.label:>10} {n / wall:10.2f} {flops / wall / 1e9:9.1f} {peak / 1e9:7.1f} "
              f"{flops / wall / peak:6.2f} {setup:8.2f} {entry:15.3f}")

    print(f"\n2./3. number blocks of 4, bond {bond}: time per sample vs L; quimb fine-grained "
          f"sampling ({args.quimb_samples} samples)")
    print(f"{'L':>5} {'s/sample':>9} {'ms/(sample site)':>17} {'quimb samples/s':>16} "
          f"{'ours samples/s':>15} {'ours/quimb':>11}")
    per_site = {}
    for L in (64, 128, 256):
        state = mpsmod.random_mps(L, bond, seed=L)
        blocks = readout_blocks(canonical_state(state, L), coarse.blocks(L, 4))
        timed_samples(blocks, 8, seed=0)
        wall, _ = timed_samples(blocks, n, seed=1)
        ours = n / wall
        per_site[L] = wall / n / L
        theirs = quimb_rate(state, args.quimb_samples)
        print(f"{L:5d} {wall / n:9.3f} {1e3 * per_site[L]:17.3f} {theirs:16.2f} {ours:15.2f} "
              f"{ours / theirs:11.1f}")
    spread = max(per_site.values()) / min(per_site.values()) - 1
    print(f"time per sample and site varies by {100 * spread:.0f}% over L = 64 .. 256 "
          f"(goal <= 25%)")


if __name__ == "__main__":
    main()
