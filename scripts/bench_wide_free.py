"""True error of the wide-region energy estimator against the exact free-fermion value.

XX chain (delta = 0, random fields of strength 0.6, seed 0), L = --L sites, Neel quench;
--regions 2: the two halves (L / 2 each), --regions 3: three parts (L // 3, the rest,
L // 3). The exact S_obs of the energies of the regions (bins of width --bin-width,
smoothing --smoothing, default the reference's) comes from
:func:`mpsobs.references.free_energy_regions.free_region_energy_entropy`
on the exactly evolved correlation matrix; the estimator
:func:`mpsobs.wide_energy.wide_energy_entropy` runs on the TEBD state (order 4,
dt = 0.05, bond --chi) with N moments and compression bond D. Printed per time and
configuration: the estimate, its reported total error (method error + pruned-mass
bound), the true error, the wall and CPU times (this process) and the ratio of the CPU
time to the reference's measured in the same run (the baseline; CPU times suffer less
from a shared machine's load), and err(p): the part of the true error from the estimator's
probabilities (its S_obs recomputed with the exact volumes). Unless --skip-finer, the
reference is also evaluated at half its smoothing width (its change shows its
convergence; 2^m times the cost for m regions). Also printed: the reweighted volumes of
the left region (at the last configuration's N and D) against its exact level counts, on
the bins that carry 99.9 % of the probability.

    OPENBLAS_NUM_THREADS=1 python scripts/bench_wide_free.py [--quick] [--regions 3]
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np

from mpsobs.chain import coarse, models, states
from mpsobs.chain import evolution as tebd
from mpsobs.estimators.estimate import pruned_entropy_bound
from mpsobs.estimators.wide_energy import region_volumes, wide_energy_entropy
from mpsobs.references import gaussian as ga
from mpsobs.references.free_energy_regions import free_region_energy_entropy

#: (moments, compression bond) of the estimator.
FULL = [(32, 8), (64, 16), (128, 16), (128, 32)]
QUICK = [(32, 8), (64, 16)]


def _volume_check(model, cut: int, width: float, ref, n_moments: int, bond: int) -> str:
    """Largest |ln Omega_reweighted - ln Omega_exact| of the left region on the bins that
    carry 99.9 % of its marginal probability (one Gibbs reference at the mean energy)."""
    marginal = ref.probabilities.sum(axis=tuple(range(1, ref.probabilities.ndim)))
    order = np.argsort(marginal)[::-1]
    keep = np.sort(order[:np.searchsorted(np.cumsum(marginal[order]), 0.999) + 1])
    bins = ref.bins[0][keep]
    mean = float(np.sum(marginal * (ref.bins[0] + 0.5)) * width)
    start = time.perf_counter()
    got = region_volumes(model.restricted(0, cut), width, bins, targets=[mean],
                         n_moments=n_moments, bond=bond)
    seconds = time.perf_counter() - start
    diff = np.abs(got - np.log(ref.counts[0][keep].astype(float)))
    return (f"# volumes of the left region (N = {n_moments}, D = {bond}), bins "
            f"{bins[0]}..{bins[-1]}: max |ln Omega error| "
            f"{diff.max():.3f} (mean {diff.mean():.3f}), {seconds:.1f} s")


def _probability_part(res, ref) -> float:
    """S_obs of the estimator's probabilities with the exact volumes, minus the exact
    S_obs: the part of the true error that comes from the probabilities (the rest comes
    from the reweighted volumes). Outcomes without levels count as 0 volume: left out."""
    out = res.distribution.outcomes
    index = out - np.array([b[0] for b in ref.bins])
    inside = np.all((index >= 0) & (index < [len(b) for b in ref.bins]), axis=1)
    v = np.zeros(len(out))
    v[inside] = np.prod([c[index[inside, k]].astype(float)
                         for k, c in enumerate(ref.counts)], axis=0)
    p = res.distribution.probabilities
    live = (v > 0) & (p > 0)
    q = p[live] / p[live].sum()
    return float(-np.sum(q * np.log(q / v[live])) - ref.entropy)


def _timed(function, *args, **kwargs):
    """The function's value, its wall time and its CPU time (seconds; this process)."""
    wall, cpu = time.perf_counter(), time.process_time()
    value = function(*args, **kwargs)
    return value, time.perf_counter() - wall, time.process_time() - cpu


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small configurations only")
    parser.add_argument("--L", type=int, default=64)
    parser.add_argument("--times", type=float, nargs="+", default=[1.0, 2.0])
    parser.add_argument("--chi", type=int, default=32)
    parser.add_argument("--bin-width", type=float, default=1.0)
    parser.add_argument("--regions", type=int, choices=[2, 3], default=2,
                        help="two halves or three parts of the chain")
    parser.add_argument("--smoothing", type=float, default=None,
                        help="smoothing width of the reference (energy units)")
    parser.add_argument("--skip-finer", action="store_true",
                        help="do not evaluate the reference at half its smoothing width")
    parser.add_argument("--config", type=int, nargs=2, action="append", metavar=("N", "D"),
                        help="moments and bond of a configuration (repeat; replaces the "
                        "built-in list)")
    args = parser.parse_args()
    configs = args.config or (QUICK if args.quick else FULL)
    L, width = args.L, args.bin_width
    cuts = [L // 2] if args.regions == 2 else [L // 3, L - L // 3]
    edges = [0, *cuts, L]
    model = models.xxz(L, delta=0.0, h=0.6, field="random", seed=0)
    cg = coarse.blocks(L, None, "energy", model=model, bin_width=width,
                       regions=[[a, b] for a, b in zip(edges, edges[1:], strict=False)])
    ham = ga.quadratic_hamiltonian(model)
    corr0 = ga.correlation_matrix(states.neel(L))
    print(f"load average {os.getloadavg()[0]:.2f}; L = {L}, regions {list(cg.regions)}, "
          f"chi = {args.chi}, bin width {width}")
    start = time.perf_counter()
    snaps = list(tebd.evolve(states.neel(L), model, args.times, max_bond=args.chi,
                             cutoff=1e-10, dt=0.05, order=4))
    print(f"# evolution: {time.perf_counter() - start:.1f} s")
    print(f"{'t':>5} {'N':>5} {'D':>4} {'S_obs':>9} {'reported':>9} {'true err':>9} "
          f"{'wall s':>8} {'cpu s':>8} {'ratio':>7} {'err(p)':>8}")
    for snap in snaps:
        corr = ga.evolve_correlation(ham, corr0, snap.t)
        c_err = np.abs(ga.correlation_matrix(snap.state) - corr).max()
        ref, wall, baseline = _timed(free_region_energy_entropy, corr, cg,
                                     smoothing=args.smoothing)
        print(f"{snap.t:>5.2f} {'exact':>10} {ref.entropy:>9.4f} {ref.error:>9.4f} "
              f"{'':>9} {wall:>8.1f} {baseline:>8.1f} {1.0:>7.2f}   (bound {ref.bound:.2g}, "
              f"max |C_TEBD - C| {c_err:.1e}, S/L {ref.entropy / L:.4f}, sigma "
              f"{ref.smoothing:.3g})", flush=True)
        if not args.skip_finer:
            finer, wall, cpu = _timed(free_region_energy_entropy, corr, cg,
                                      smoothing=ref.smoothing / 2)
            print(f"{snap.t:>5.2f} {'sigma/2':>10} {finer.entropy:>9.4f} {finer.error:>9.4f} "
                  f"{finer.entropy - ref.entropy:>9.4f} {wall:>8.1f} {cpu:>8.1f} "
                  f"{cpu / baseline:>7.2f}   (convergence of the reference)", flush=True)
        for n_moments, bond in configs:
            res, wall, cpu = _timed(wide_energy_entropy, snap.state, cg, moments=n_moments,
                                    bond=bond)
            total = res.method_err + pruned_entropy_bound(res.pruned_mass, res.max_entropy)
            print(f"{snap.t:>5.2f} {n_moments:>5} {bond:>4} {res.entropy:>9.4f} "
                  f"{total:>9.4f} {res.entropy - ref.entropy:>9.4f} {wall:>8.1f} "
                  f"{cpu:>8.1f} {cpu / baseline:>7.2f} {_probability_part(res, ref):>8.4f}",
                  flush=True)
        print(_volume_check(model, cuts[0], width, ref, *configs[-1]), flush=True)


if __name__ == "__main__":
    main()
