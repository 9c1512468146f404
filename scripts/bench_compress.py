"""Compression of the Chebyshev vectors: the triangular-factor sweep against the previous
sweep of full QR decompositions, in the same run.

Two segments as the wide-region estimators meet them: (1) the left half of a
tilted-field Ising chain (g = 1.05, h = 0.25, L = --length, all up) evolved by TEBD to
t = 2 at bond --chi (d = 2, the state's Chebyshev run), and (2) the Gibbs purification of
a 13-site XXZ region (delta = 0.5, beta = 0.3, d = 4, a volume reference). For each, the
N = --moments moment matrices at compression bond --bond are computed with the current
:func:`mpsobs.estimators.chebyshev._compress` and with the previous algorithm (a QR sweep
forming the left-canonical tensors, then SVDs sweeping back; kept below as the
baseline), best of --repeats wall times, their ratio and the largest difference of the
moments (both are the same SVD truncation in exact arithmetic).

    OPENBLAS_NUM_THREADS=1 python scripts/bench_compress.py [--quick]
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np

from mpsobs.chain import evolution as tebd
from mpsobs.chain import models, states
from mpsobs.estimators import chebyshev
from mpsobs.estimators.estimate import canonical_state
from mpsobs.estimators.wide_energy import _region, _split
from mpsobs.mps.tensors import robust_svd


def previous_compress(seg, max_bond: int) -> list[np.ndarray]:
    """The compression before the triangular-factor sweep: QR sweep to the right forming
    the left-canonical tensors, then SVD truncation sweeping left."""
    tensors = list(seg)
    n = len(tensors)
    for i in range(n - 1):
        dl, d, dr = tensors[i].shape
        q, r = np.linalg.qr(tensors[i].reshape(dl * d, dr))
        tensors[i] = q.reshape(dl, d, -1)
        tensors[i + 1] = np.tensordot(r, tensors[i + 1], axes=(1, 0))
    for i in range(n - 1, 0, -1):
        dl, d, dr = tensors[i].shape
        u, s, vh = robust_svd(tensors[i].reshape(dl, d * dr))
        weight = s**2
        keep = max(1, min(max_bond, int(np.sum(weight > chebyshev.COMPRESSION_CUTOFF
                                                * weight.sum()))))
        tensors[i] = vh[:keep].reshape(keep, d, dr)
        tensors[i - 1] = np.tensordot(tensors[i - 1], u[:, :keep] * s[:keep], axes=(2, 0))
    return tensors


def _segments(length: int, chi: int):
    """(label, segment, region model) of the two cases."""
    model = models.ising(length, g=1.05, h=0.25)
    snap = next(iter(tebd.evolve(states.product_state("0" * length), model, [2.0],
                                 max_bond=chi, cutoff=1e-10, dt=0.05, order=4)))
    left, _, _ = _split(canonical_state(snap.state, length).tensors, length // 2)
    region = model.restricted(0, length // 2)
    xxz = models.xxz(13, delta=0.5, h=0.1, field="staggered")
    gibbs, _ = chebyshev.gibbs_segment(xxz, 0.3, 32)
    return [(f"Ising half, {length // 2} sites, d = 2", left, region),
            ("XXZ Gibbs reference, 13 sites, d = 4", gibbs, xxz)]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--length", type=int, default=64)
    parser.add_argument("--chi", type=int, default=32)
    parser.add_argument("--moments", type=int, default=32)
    parser.add_argument("--bond", type=int, default=64)
    parser.add_argument("--repeats", type=int, default=2)
    parser.add_argument("--quick", action="store_true", help="L = 32, N = 16, bond 32")
    args = parser.parse_args()
    if args.quick:
        args.length, args.moments, args.bond = 32, 16, 32
    print(f"load average {os.getloadavg()[0]:.2f}; N = {args.moments}, bond {args.bond}")
    current = chebyshev._compress
    for label, seg, model in _segments(args.length, args.chi):
        reg = _region(model, 1.0)
        mpo = chebyshev.scaled_mpo(model, reg.centre, reg.half_width, seg[0].shape[1])
        times, moments = {}, {}
        for name, compress in (("previous", previous_compress), ("current", current)):
            chebyshev._compress = compress
            best = np.inf
            for _ in range(args.repeats):
                start = time.perf_counter()
                moments[name] = chebyshev.moment_matrices(seg, mpo, args.moments, args.bond)
                best = min(best, time.perf_counter() - start)
            times[name] = best
        chebyshev._compress = current
        diff = np.max(np.abs(moments["current"] - moments["previous"]))
        print(f"{label}: previous {times['previous']:.2f} s, current {times['current']:.2f} s, "
              f"speed-up {times['previous'] / times['current']:.2f}x; largest moment "
              f"difference {diff:.1e}", flush=True)
    print(f"load average {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
