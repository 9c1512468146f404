"""Benchmark of the sampled MPS estimator (not a test; prints a table).

1. L = 128, bond 128, blocks of 4 (number and XXZ energy): samples per second, and the
   achieved flop rate of the contractions (flops counted by ``draw_samples``) divided by
   numpy's complex matrix-multiply rate (1024 x 1024 zgemm) measured around each run.
2. Time per sample at L = 64, 128, 256 and bond 128 (number blocks of 4), divided by L.
3. quimb's fine-grained ``MatrixProductState.sample`` at the same L and bond (steady
   state, after its one-off canonicalisation), against our coarse-grained samples, each
   of which carries its exact probability.

The machine may be shared: figures are noisy. Timings are best-of-``--repeats`` (ours,
quimb's and zgemm's alike) and ratios are taken against baselines measured in the same
run, next to each measurement. Under heavy load, running with OPENBLAS_NUM_THREADS=1
gives steadier ratios.

Usage: python scripts/bench_estimate.py [--bond 128] [--samples 64]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from mpsobs import coarse, models
from mpsobs import mps as mpsmod
from mpsobs.blocktensors import readout_blocks
from mpsobs.estimate import canonical_state, default_batch, draw_samples, mps_observational_entropy


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


def timed_samples(blocks, n: int, repeats: int) -> tuple[float, float]:
    """Best-of-``repeats`` wall time and counted flops of drawing n samples in one batch."""
    best, flops = np.inf, 0.0
    for seed in range(repeats):
        uniforms = np.random.default_rng(seed).random((n, len(blocks)))
        t0 = time.perf_counter()
        batch = draw_samples(blocks, uniforms)
        wall = time.perf_counter() - t0
        if wall < best:
            best, flops = wall, batch.flops
    return best, flops


def quimb_rate(state: mpsmod.MPS, n: int) -> float:
    """Samples per second of quimb's MatrixProductState.sample from its fastest sample
    (best-of, as for ours), after the first one, which includes its canonicalisation."""
    gen = mpsmod.to_quimb(state).sample(n + 1, seed=1)
    next(gen)
    best = np.inf
    while True:
        t0 = time.perf_counter()
        try:
            next(gen)
        except StopIteration:
            return 1.0 / best
        best = min(best, time.perf_counter() - t0)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--bond", type=int, default=128)
    parser.add_argument("--samples", type=int, default=None,
                        help="samples per timed batch (default: the estimator's batch size)")
    parser.add_argument("--quimb-samples", type=int, default=8)
    parser.add_argument("--repeats", type=int, default=3, help="best-of repeats per timing")
    args = parser.parse_args()
    bond, reps = args.bond, args.repeats
    L = 128
    state = mpsmod.random_mps(L, bond, seed=1)
    n = args.samples or default_batch(readout_blocks(canonical_state(state, L),
                                                     coarse.blocks(L, 4)))

    print(f"1. L = 128, bond {bond}, blocks of 4, {n} samples per batch, best of {reps}")
    print(f"{'blocks':>10} {'samples/s':>10} {'GFLOP/s':>9} {'zgemm':>7} {'ratio':>6} "
          f"{'setup s':>8} {'entry s/sample':>15}")
    for cg in (coarse.blocks(L, 4), coarse.blocks(L, 4, "energy", model=models.xxz(L))):
        t0 = time.perf_counter()
        blocks = readout_blocks(canonical_state(state, L), cg)
        setup = time.perf_counter() - t0
        timed_samples(blocks, 8, 1)  # warm-up
        before = zgemm_rate()
        wall, flops = timed_samples(blocks, n, reps)
        peak = max(before, zgemm_rate())
        t0 = time.perf_counter()
        mps_observational_entropy(state, cg, method="sample", samples=n, seed=2)
        entry = (time.perf_counter() - t0) / n
        print(f"{cg.label:>10} {n / wall:10.2f} {flops / wall / 1e9:9.1f} {peak / 1e9:7.1f} "
              f"{flops / wall / peak:6.2f} {setup:8.2f} {entry:15.3f}")

    print(f"\n2./3. number blocks of 4, bond {bond}: time per sample vs L; quimb fine-grained "
          f"sampling ({args.quimb_samples} samples)")
    print(f"{'L':>5} {'s/sample':>9} {'ms/(sample site)':>17} {'GFLOP/sample':>13} "
          f"{'s/TFLOP':>8} {'quimb samples/s':>16} {'ours samples/s':>15} {'ours/quimb':>11}")
    per_sample = {}
    for L in (64, 128, 256):
        state = mpsmod.random_mps(L, bond, seed=L)
        blocks = readout_blocks(canonical_state(state, L), coarse.blocks(L, 4))
        timed_samples(blocks, 8, 1)
        wall, flops = timed_samples(blocks, n, reps)
        ours = n / wall
        per_sample[L] = wall / n
        theirs = quimb_rate(state, args.quimb_samples)
        print(f"{L:5d} {wall / n:9.3f} {1e3 * wall / n / L:17.3f} {flops / n / 1e9:13.2f} "
              f"{1e12 * wall / flops:8.1f} {theirs:16.2f} {ours:15.2f} {ours / theirs:11.1f}")
    spread = max(t / L for L, t in per_sample.items()) / min(
        t / L for L, t in per_sample.items()) - 1
    low = (per_sample[128] - per_sample[64]) / 64
    high = (per_sample[256] - per_sample[128]) / 128
    print(f"time per sample and site varies by {100 * spread:.0f}% over L = 64 .. 256 "
          f"(goal <= 25%); the bond is below {bond} near the chain ends, so short chains do "
          f"less work per site: marginal cost per added site {1e3 * low:.3f} ms (64 -> 128) "
          f"and {1e3 * high:.3f} ms (128 -> 256), ratio {high / low:.2f}")


if __name__ == "__main__":
    main()
