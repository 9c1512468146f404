"""True against reported error of the wide-region energy estimator at 13 + 13 sites.

An XXZ chain (L = 26, delta = 0.5, staggered field h = 0.1) starts in the Neel state and
is evolved by TEBD (order 4, dt = 0.05, bond --chi) to the times --times; the energies of
the halves (13 sites each, bins of width --bin-width) are evaluated by
:func:`mpsobs.estimators.wide_energy.wide_energy_entropy` with N moments and compression
bond D, and exactly: each half diagonalised sector by sector, p(b_A, b_B) from the
Schmidt vectors of the same MPS, eigenvalues counted per bin (the definition, DESIGN 3c).
Printed per time and configuration: the wall time, S_obs, the true error (estimate minus
exact), the reported method error and its four parts (moments, bond, sub-bins, edges),
and whether the report covers the true error. ``--exact-volumes`` counts the volumes
exactly in the estimator too (``exact_sites = 13``), so that the probabilities' error is
seen alone; without it the volumes of the 13-site halves are reweighted from Gibbs states.

    OPENBLAS_NUM_THREADS=1 python scripts/bench_wide_exact.py [--config N D ...]
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

from mpsobs.chain import coarse, models, states
from mpsobs.chain import evolution as tebd
from mpsobs.estimators import wide_energy as we

# the exact reference of the test suite (exact diagonalisation of each half)
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from test_wide_energy import _sector_eigh, exact_halves_entropy  # noqa: E402

L, CUT = 26, 13


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--times", type=float, nargs="+", default=[1.0, 2.0, 3.0])
    parser.add_argument("--chi", type=int, default=32)
    parser.add_argument("--bin-width", type=float, default=1.0)
    parser.add_argument("--config", type=int, nargs=2, action="append", metavar=("N", "D"),
                        help="moments and compression bond (repeatable; default 64 32, "
                             "128 32, 256 64)")
    parser.add_argument("--exact-volumes", action="store_true")
    args = parser.parse_args()
    configs = args.config or [(64, 32), (128, 32), (256, 64)]
    model = models.xxz(L, delta=0.5, h=0.1, field="staggered")
    spectra = [_sector_eigh(model.restricted(0, CUT)), _sector_eigh(model.restricted(CUT, L))]
    cg = coarse.blocks(L, None, "energy", model=model, bin_width=args.bin_width,
                       regions=[[0, CUT], [CUT, L]])
    parts = {}
    original = we._approximate_result

    def spy(mps, cg, dist, dropped, main, reruns, leak):
        half, low, sub = reruns
        parts["last"] = (main.change(half)[0] / we.RESOLUTION_ORDER_FACTOR,
                         main.change(low)[0], main.change(sub)[0], leak[0])
        return original(mps, cg, dist, dropped, main, reruns, leak)

    we._approximate_result = spy
    print(f"load average {os.getloadavg()[0]:.2f}; chi {args.chi}, bin width "
          f"{args.bin_width}, volumes {'exact' if args.exact_volumes else 'reweighted'}")
    print(f"{'t':>4} {'N':>5} {'D':>4} {'s':>7} {'S_obs':>9} {'true':>8} {'reported':>8} "
          f"{'moments':>8} {'bond':>7} {'sub':>7} {'edges':>7} covered")
    exact_sites = CUT if args.exact_volumes else we.EXACT_VOLUME_SITES
    for snap in tebd.evolve(states.neel(L), model, args.times, max_bond=args.chi,
                            cutoff=1e-12, dt=0.05, order=4):
        exact = exact_halves_entropy(snap.state, model, CUT, args.bin_width, spectra)
        for n_moments, bond in configs:
            start = time.perf_counter()
            res = we.wide_energy_entropy(snap.state, cg, moments=n_moments, bond=bond,
                                         exact_sites=exact_sites)
            seconds = time.perf_counter() - start
            true = res.entropy - exact
            m, b, s, e = parts["last"]
            print(f"{snap.t:>4.1f} {n_moments:>5} {bond:>4} {seconds:>7.1f} "
                  f"{res.entropy:>9.4f} {true:>+8.4f} {res.method_err:>8.4f} {m:>8.4f} "
                  f"{b:>7.4f} {s:>7.4f} {e:>7.4f} {abs(true) <= res.method_err}", flush=True)
    print(f"load average {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
