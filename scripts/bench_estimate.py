"""Benchmark of the sampled MPS estimators (not a test; prints tables).

1. L = 128, bond 128, blocks of 4 (number and XXZ energy): samples per second of the
   per-string sampler, and the achieved flop rate of the contractions (flops counted by
   ``draw_samples``) divided by numpy's complex matrix-multiply rate (1024 x 1024 zgemm)
   measured around each run.
2. Time per sample at L = 64, 128, 256 and bond 128 (number blocks of 4), divided by L.
3. quimb's fine-grained ``MatrixProductState.sample`` at the same L and bond (steady
   state, after its one-off canonicalisation), against our coarse-grained samples, each
   of which carries its exact probability.
4. Conditional (``method="sample"``) against per-string (``"sample_strings"``) sampling
   on quench states of the shipped specs' models, evolved by TEBD until the bond
   reaches 128: the tilted-field Ising chain of runs/size-scan.toml (g = 1.05, h = 0.25,
   all up) and the disordered XXZ chain of runs/block-scan.toml (delta = 1, random field
   of strength 0.5, seed 77; Neel start), L = 64 and 128, number and energy blocks of 4
   (second-order TEBD, dt = 0.1).
   Per-sample variance ratio old / new (``--pilot`` samples each); wall time of each
   estimator to a standard error of 0.1 nats, as the samples needed (variance / 0.1^2)
   times the best-of time per sample of a full batch, same state, same run, and their
   ratio; the flop rate of ``draw_conditional`` against the zgemm rate.

Section 4 adds to each table row whether the two estimates agree (|difference| over the
combined standard error).

The machine may be shared: figures are noisy. Timings are best-of-``--repeats`` (ours,
quimb's and zgemm's alike) and ratios are taken against baselines measured in the same
run, next to each measurement. Under heavy load, running with OPENBLAS_NUM_THREADS=1
gives steadier ratios.

Usage: python scripts/bench_estimate.py [--bond 128] [--samples 64] [--quick]
    [--sections 1234] [--cache DIR] [--target 0.1] [--pilot 200]
--quick runs section 4 only, at L = 64 on the Ising quench; --cache keeps the evolved
quench states (.npz) between runs.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np

from mpsobs.chain import coarse, models, states
from mpsobs.chain.evolution import evolve
from mpsobs.estimators.blocktensors import outcome_weights, readout_blocks
from mpsobs.estimators.estimate import (
    canonical_state,
    default_batch,
    draw_conditional,
    draw_samples,
    mps_observational_entropy,
)
from mpsobs.mps import tensors as mpsmod


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


QUENCHES = {
    "ising": (lambda L: models.ising(L, g=1.05, h=0.25), lambda L: states.product_state("0" * L)),
    "xxz": (lambda L: models.xxz(L, delta=1.0, h=0.5, field="random", seed=77),
            lambda L: states.neel(L)),
}


def quench_state(name: str, L: int, bond: int, cache: Path | None) -> tuple[mpsmod.MPS, float]:
    """The quench of ``name`` evolved (second order, dt 0.1, cutoff 1e-10: the estimators
    only need a typical state at that bond) to the first time on a grid of 0.25 at which
    the bond dimension reaches ``bond``; with its time."""
    file = cache / f"{name}-L{L}-chi{bond}.npz" if cache else None
    if file is not None and file.exists():
        data = np.load(file)
        return mpsmod.MPS(tuple(data[f"t{i}"] for i in range(L))), float(data["time"])
    build_model, build_state = QUENCHES[name]
    times = np.arange(0.25, 40.0, 0.25)
    for snap in evolve(build_state(L), build_model(L), times, max_bond=bond, cutoff=1e-10,
                       dt=0.1, order=2):
        if snap.max_bond >= bond:
            break
    if file is not None:
        file.parent.mkdir(parents=True, exist_ok=True)
        np.savez(file, time=snap.t, **{f"t{i}": t for i, t in enumerate(snap.state.tensors)})
    return snap.state, snap.t


def timed_batch(draw, n_blocks: int, n: int, repeats: int) -> tuple[float, float]:
    """Best-of-``repeats`` wall time and counted flops of one batch of n samples."""
    best, flops = np.inf, 0.0
    for seed in range(repeats):
        uniforms = np.random.default_rng(seed).random((n, n_blocks))
        t0 = time.perf_counter()
        batch = draw(uniforms)
        wall = time.perf_counter() - t0
        if wall < best:
            best, flops = wall, batch.flops
    return best, flops


def compare_estimators(names, lengths, bond, cache, target, pilot, repeats) -> None:
    """Section 4: one table row per model, L and coarse-graining.

    The per-sample variances come from ``pilot`` samples of each estimator (seed 1); the
    time to the target error is n = variance / target^2 samples times the best-of
    wall time per sample of a full batch (per-sample work does not change along a run).
    """
    print(f"\n4. conditional ('sample') vs per-string ('sample_strings') sampling on quench "
          f"states at bond {bond}; target standard error {target} nats; variances from "
          f"{pilot} samples each")
    print(f"{'model':>6} {'L':>4} {'t':>5} {'blocks':>9} {'var old':>9} {'var new':>9} "
          f"{'ratio':>7} {'n old':>7} {'n new':>6} {'s old':>8} {'s new':>7} {'speed-up':>9} "
          f"{'GFLOP/s':>8} {'zgemm':>6} {'rate':>5} {'|dS|/err':>8}")
    for name in names:
        for L in lengths:
            t0 = time.perf_counter()
            state, t = quench_state(name, L, bond, cache)
            print(f"   ({name} L = {L} state at t = {t}: {time.perf_counter() - t0:.0f} s)",
                  flush=True)
            model = QUENCHES[name][0](L)
            for cg in (coarse.blocks(L, 4), coarse.blocks(L, 4, "energy", model=model)):
                blocks = readout_blocks(canonical_state(state, L), cg)
                weights = [outcome_weights(b) for b in blocks]
                n = default_batch(blocks)
                draws = {"sample_strings": lambda u, b=blocks: draw_samples(b, u),
                         "sample": lambda u, b=blocks, w=weights: draw_conditional(b, w, u)}
                rows = {}
                for method, draw in draws.items():
                    r = mps_observational_entropy(state, cg, method=method, samples=pilot,
                                                  seed=1)
                    var = (r.stderr * np.sqrt(r.samples)) ** 2
                    draw(np.zeros((8, len(blocks))))  # warm-up
                    before = zgemm_rate()
                    wall, flops = timed_batch(draw, len(blocks), n, repeats)
                    peak = max(before, zgemm_rate())
                    needed = int(np.ceil(var / target**2))
                    rows[method] = (var, needed, needed * wall / n, flops / wall, peak, r)
                old, new = rows["sample_strings"], rows["sample"]
                agree = abs(old[5].entropy - new[5].entropy) / np.hypot(old[5].stderr,
                                                                         new[5].stderr)
                print(f"{name:>6} {L:4d} {t:5.2f} {cg.label:>9} {old[0]:9.3g} {new[0]:9.3g} "
                      f"{old[0] / new[0]:7.1f} {old[1]:7d} {new[1]:6d} {old[2]:8.1f} "
                      f"{new[2]:7.1f} {old[2] / new[2]:9.1f} {new[3] / 1e9:8.1f} "
                      f"{new[4] / 1e9:6.1f} {new[3] / new[4]:5.2f} {agree:8.2f}", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--bond", type=int, default=128)
    parser.add_argument("--samples", type=int, default=None,
                        help="samples per timed batch (default: the estimator's batch size)")
    parser.add_argument("--quimb-samples", type=int, default=8)
    parser.add_argument("--repeats", type=int, default=3, help="best-of repeats per timing")
    parser.add_argument("--sections", default="1234",
                        help="sections to run: 1-3 (per-string sampler) run together, 4")
    parser.add_argument("--quick", action="store_true",
                        help="section 4 only, L = 64, Ising quench")
    parser.add_argument("--cache", type=Path, default=None,
                        help="directory keeping the evolved quench states")
    parser.add_argument("--target", type=float, default=0.1,
                        help="target standard error of section 4 (nats)")
    parser.add_argument("--pilot", type=int, default=200,
                        help="samples of the per-sample variance estimate of section 4")
    args = parser.parse_args()
    if args.quick:
        compare_estimators(["ising"], [64], args.bond, args.cache, args.target, args.pilot,
                           args.repeats)
        return
    if set(args.sections) & set("123"):
        per_string_sections(args)
    if "4" in args.sections:
        compare_estimators(list(QUENCHES), [64, 128], args.bond, args.cache, args.target,
                           args.pilot, args.repeats)


def per_string_sections(args) -> None:
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
        timed_batch(lambda u, b=blocks: draw_samples(b, u), len(blocks), 8, 1)  # warm-up
        before = zgemm_rate()
        wall, flops = timed_batch(lambda u, b=blocks: draw_samples(b, u), len(blocks), n, reps)
        peak = max(before, zgemm_rate())
        t0 = time.perf_counter()
        mps_observational_entropy(state, cg, method="sample_strings", samples=n, seed=2)
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
        timed_batch(lambda u, b=blocks: draw_samples(b, u), len(blocks), 8, 1)
        wall, flops = timed_batch(lambda u, b=blocks: draw_samples(b, u), len(blocks), n, reps)
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
