"""Cost and accuracy of the free-fermion engine and the Gibbs references.

Prints wall times, and their ratio to a yardstick measured in the same run (one complex
512 x 512 SVD), so that figures from machines of different speed compare:

- counting statistics: one region of half the chain at L = 1000..4000; three regions
  covering L = 512 (a Neel state after an XX quench, definite total number), against the
  plain method (det(1 + (Z - 1) C) by LU on the full (b + 1)^2 grid of the two free
  regions, extrapolated from a sample of grid points);
- purification: transverse Ising at L = 32 (error per site against the exact free-fermion
  entropy) and the Heisenberg chain at L = 32 and 64, bond <= 64, to beta = 1;
- S_obs_eq per point at L = 64 and 128 (tilted-field Ising, the built-in scenario's
  model and state, hot, and the all-up state, colder): the Gibbs reference, the
  purified Gibbs state (bond mpsobs.point.EQ_MAX_BOND) and its sampled S_obs for number
  and energy blocks of 4,
  against the same estimator (1000 samples) on the evolved state at t = 2 (bond 32),
  i.e. the cost of one output time of the time series.

Under heavy load, OPENBLAS_NUM_THREADS=1 avoids BLAS threads competing for the cores.
Usage: python scripts/bench_thermo.py [--quick]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from mpsobs import observational_entropy
from mpsobs.chain import coarse, states
from mpsobs.chain import evolution as tebd
from mpsobs.chain.models import energy, ising, xxz
from mpsobs.pipeline.point import EQ_MAX_BOND
from mpsobs.references import gaussian, thermo


def timed(func):
    start = time.perf_counter()
    out = func()
    return out, time.perf_counter() - start


def yardstick() -> float:
    rng = np.random.default_rng(0)
    a = rng.normal(size=(512, 512)) + 1j * rng.normal(size=(512, 512))
    return min(timed(lambda: np.linalg.svd(a))[1] for _ in range(3))


def quench(L: int, t: float) -> np.ndarray:
    ham = gaussian.quadratic_hamiltonian(xxz(L, J=1.0, delta=0.0, h=0.0))
    return gaussian.evolve_correlation(ham, gaussian.product_correlation(
        [i % 2 for i in range(L)]), t)


def plain_grid_time(corr: np.ndarray, regions, samples: int = 40) -> float:
    """Seconds for det(1 + (Z - 1) C) on the full grid of the first two regions (the last
    fixed by the total number), extrapolated from ``samples`` points."""
    sites = np.concatenate([np.arange(a, b) for a, b in regions[:2]])
    sizes = [b - a for a, b in regions[:2]]
    block = corr[np.ix_(sites, sites)]
    rng = np.random.default_rng(1)
    start = time.perf_counter()
    for _ in range(samples):
        z = np.exp(2j * np.pi * rng.random(2))
        w = np.concatenate([np.full(sizes[0], z[0]), np.full(sizes[1], z[1])]) - 1
        np.linalg.slogdet(np.eye(len(sites)) + w[:, None] * block)
    per_point = (time.perf_counter() - start) / samples
    return per_point * (sizes[0] + 1) * (sizes[1] + 1)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller sizes")
    args = parser.parse_args()
    unit = yardstick()
    print(f"yardstick (complex 512x512 SVD): {unit * 1e3:.1f} ms")

    print("\n# counting statistics (exact number distribution, FFT inversion)")
    for L in ((1000,) if args.quick else (1000, 2000, 4000)):
        corr, t_evolve = timed(lambda L=L: quench(L, L / 8))
        res, t_count = timed(lambda L=L, corr=corr: gaussian.number_entropy(
            corr, [(L // 4, 3 * L // 4)]))
        total = res.distribution.probabilities.sum()
        print(f"L={L:5d} one region of {L // 2}: evolve {t_evolve:6.2f} s, count "
              f"{t_count:6.2f} s ({t_count / unit:7.0f} x yardstick), S_obs/L = "
              f"{res.entropy / L:.6f}, 1 - sum p = {1 - total:.1e}")
    L = 512
    regions = [(0, 171), (171, 342), (342, 512)]
    for t in (10.0, 40.0):
        corr = quench(L, t)
        dist, t_count = timed(lambda corr=corr: gaussian.number_distribution(corr, regions))
        plain = plain_grid_time(corr, regions)
        print(f"L=512 three regions, t={t:4.0f}: {t_count:6.2f} s ({t_count / unit:6.0f} x "
              f"yardstick), plain full-grid LU ~{plain:7.1f} s (ratio {plain / t_count:5.0f}); "
              f"outcomes {len(dist.probabilities)}, defect {dist.total_defect:.1e}, "
              f"min p {dist.min_probability:.1e}, tail bound {dist.tail_mass:.1e}")

    print("\n# purification (imaginary time, bond <= 64)")
    L = 32
    model = ising(L, J=1.0, g=1.0, h=0.0)
    exact = thermo.gibbs_at(model, 1.0)
    res, t_run = timed(lambda: thermo.gibbs_at(model, 1.0, method="purification",
                                                max_bond=64))
    print(f"ising L={L} beta=1: {t_run:6.1f} s ({t_run / unit:6.0f} x yardstick), error/site "
          f"{(res.entropy - exact.entropy) / L:+.1e}, reported err/site {res.entropy_err / L:.1e}, "
          f"bond {res.max_bond}")
    for L in ((32,) if args.quick else (32, 64)):
        res, t_run = timed(lambda L=L: thermo.gibbs_at(xxz(L, J=1.0, delta=1.0), 1.0,
                                                       max_bond=64))
        print(f"xxz delta=1 L={L} beta=1: {t_run:6.1f} s ({t_run / unit:6.0f} x yardstick), "
              f"S/L = {res.entropy / L:.6f} +- {res.entropy_err / L:.1e}, bond {res.max_bond}, "
              f"discarded {res.discarded_weight:.1e}")

    print(f"\n# S_obs_eq per point (Gibbs state purified at bond {EQ_MAX_BOND}, 1000 samples)")
    for pattern in ("0001", "0"):
        for L in ((64,) if args.quick else (64, 128)):
            equilibrium_cost(L, unit, pattern)


def equilibrium_cost(L: int, unit: float, pattern: str) -> None:
    """Seconds of the S_obs_eq columns of one point against one output time's estimates,
    for the product state of ``pattern`` quenched in the tilted-field Ising chain."""
    model = ising(L, J=1.0, g=1.0, h=0.5)
    psi0 = states.product_state(pattern * (L // len(pattern)))
    (snap,) = tebd.evolve(psi0, model, [2.0], max_bond=32, cutoff=1e-10, dt=0.25,
                             order=4)
    cgs = [coarse.blocks(L, 4, "number"), coarse.blocks(L, 4, "energy", model=model,
                                                          bin_width=1.0)]
    ref, t_ref = timed(lambda: thermo.gibbs(model, energy(model, psi0)))
    rho, t_state = timed(lambda: thermo.gibbs_state(model, ref.beta, max_bond=EQ_MAX_BOND))
    t_eq = t_series = 0.0
    for cg in cgs:
        eq, t = timed(lambda cg=cg: observational_entropy(rho, cg, method="sample",
                                                           samples=1000, seed=1))
        t_eq += t
        now, t = timed(lambda cg=cg: observational_entropy(snap.state, cg, method="sample",
                                                            samples=1000, seed=1))
        t_series += t
        print(f"L={L:4d} {cg.label:14s} S_obs_eq/L = {eq.entropy / L:.4f} +- "
              f"{eq.stderr / L:.1e}; at t = 2: S_obs/L = {now.entropy / L:.4f}")
    total = t_ref + t_state + t_eq
    print(f"L={L:4d} pattern {pattern!r} beta {ref.beta:.3f}: Gibbs reference {t_ref:6.1f} s, "
          f"purified state {t_state:6.1f} s "
          f"(bond {rho.max_bond}, error {rho.error:.1e}), its estimates {t_eq:6.1f} s; "
          f"one output time's estimates {t_series:6.1f} s (bond {snap.state.max_bond}); "
          f"S_obs_eq total = {total / t_series:5.1f} output times "
          f"({total / unit:6.0f} x yardstick)")


if __name__ == "__main__":
    main()
