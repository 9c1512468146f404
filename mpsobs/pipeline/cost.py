"""Cost of a sweep point before it runs: core-hours and peak memory from flop counts.

The estimate is built from the spec alone (nothing is evolved) and counts the work per
kernel call; flops are real floating-point operations (a complex multiply-add is 8).
Bonds: at output time t every bond is taken at chi(t) = min(chi_max, 2**(t /
DOUBLING_TIME)) (the linear growth of entanglement after a quench from a product state,
with a doubling time measured on the shipped specs), and no larger than the chain
allows, chi_i = min(chi(t), 2**i, 2**(L - i)) (:func:`bond_caps`); the steps up to t
are counted at chi(t). A state whose entanglement grows more slowly (disorder,
localization, low energy) costs less; an initial state that is already entangled
(``ground``) costs more early on.

- TEBD (:mod:`mpsobs.chain.evolution`), for the main evolution at chi_max and the
  truncation check at chi_check: the n steps between two output times are even and odd
  layers (order 2: n + 1 even and n odd layers after merging; order 4: 3 n + 1 and
  3 n). Per two-site gate on bonds (l, m, r): theta 32 l m r, the gate 128 l r, the
  truncated split of a (2 l, 2 r) matrix keeping m (:func:`split_flops`: the Gram route
  at the spec's cutoff, the SVD below GRAM_FLOOR) and a QR of the next site (2 r, r')
  or (2 l, l'). Per output time the read-out sweep: L QRs and two-site thetas.
- SVD and QR counts: thin SVD of an m x n complex matrix (m >= n) 4 (6 m n**2 + 20 n**3)
  (R-SVD with vectors), Householder QR 4 (2 m n**2 - 2 n**3 / 3), doubled for forming Q
  (Golub and Van Loan, Matrix Computations, 4th ed. (2013), Secs. 5.2 and 8.6; the
  coefficients from memory; x4 for complex arithmetic).
- Estimators per output time and coarse-graining, on the state and on the check
  state: bring the state to right-canonical form (L QRs), contract and rotate the
  blocks (:func:`mpsobs.estimators.blocktensors.readout_blocks`: chi**3 2**(b+1) +
  8 chi**2 R**2 per block), then by method: sampling ("sample", and "auto" where the
  coarse-graining is not countable) ``samples`` x
  :func:`mpsobs.estimators.estimate.conditional_sample_flops` in single precision (the
  dense environments; charge blocks, in double, need fewer flops) (the automatic choice may
  first try an enumeration of at most that cost: up to twice this); counting ("count",
  and "auto" / "exact" where countable) 32 chi**3 sum_i K_i b_i**2 / 2 with K_i the
  counters carried into region i; "enumerate" and "exact" on other coarse-grainings
  depend on the state and are counted like sampling with ``samples`` (the estimator's
  default where the spec leaves it out); energies of wide regions by
  :func:`mpsobs.estimators.wide_energy.kernel_counts` (the Chebyshev runs on the state
  at the point's moments and bond).
- References once per point: Gibbs entropies of free-fermion models (XX, Ising at
  h = 0) are negligible; otherwise the purification in imaginary time
  (:mod:`mpsobs.references.thermo`) to BETA_GUESS (the target temperature is not known
  before the run) at steps 0.05, repeated at twice the step, at bond THERMO_BOND_GUESS
  (local dimension 4: SVDs of (4 chi, 4 chi)), the Gibbs state for S_obs_eq, and per
  coarse-graining the estimator on that purification (rows x 2**b); the Gibbs references
  of wide energy regions (kept in the memo and reused by later output times and the
  check state) at BETA_GUESS.

Seconds = gemm flops / GEMM_RATE (single-precision ones at twice the rate) + lapack
flops / LAPACK_RATE + calls x CALL_SECONDS, single core; core-hours = seconds / 3600.
The rates are effective single-core rates of numpy/LAPACK on the machine the benchmark
ran on (scripts/bench_cost.py); a different machine scales them. Peak memory =
BASE_BYTES (the interpreter with numpy, scipy, pandas and mpsobs loaded) + the states
(main and check) + the largest working set of one kernel: the estimator's batch
(:func:`mpsobs.estimators.estimate.default_batch` samples) and block tensors, the
counting environments, or the purification.
Cost of the estimate itself: the coarse-grainings' block eigendecompositions, as in
``mpsobs check``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from mpsobs.chain import coarse
from mpsobs.core.errors import InputError
from mpsobs.core.printing import number
from mpsobs.estimators import estimate, wide_energy
from mpsobs.estimators.blocktensors import WORK_BYTES, ReadoutBlock
from mpsobs.mps import truncation
from mpsobs.pipeline import point as points
from mpsobs.pipeline.build import BuiltPoint, build_point
from mpsobs.pipeline.spec_points import Point
from mpsobs.references import gaussian
from mpsobs.references.thermo import PURIFICATION_CUTOFF

__all__ = ["GEMM_RATE", "LAPACK_RATE", "CALL_SECONDS", "BASE_BYTES", "BETA_GUESS",
           "DOUBLING_TIME", "THERMO_BOND_GUESS", "Work", "PointCost", "grown_bond",
           "bond_caps", "svd_flops", "split_flops", "qr_flops", "tebd_work", "estimator_work",
           "point_cost", "format_costs"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

#: Effective single-core rate of complex matrix products (flop/s).
GEMM_RATE = 2.0e10
#: Effective single-core rate of LAPACK SVDs and QRs at the counts above (flop/s).
LAPACK_RATE = 1.0e10
#: Python and call overhead per kernel call (gate, QR, transfer, batch) in seconds.
CALL_SECONDS = 2.0e-5
#: Time in which the bond dimension of a quenched product state doubles (1/J), until
#: the cap: measured on the shipped specs (Ising chains near g = 1: bond 4 at t = 0.5,
#: 16 at t = 2, 64 at t = 4). Slower (localized) or faster dynamics change it.
DOUBLING_TIME = 0.75
#: Resident memory of a worker with numpy, scipy, pandas and mpsobs loaded (bytes).
BASE_BYTES = 1.6e8
#: Inverse temperature assumed for the imaginary-time reference sweep (1/J) and the
#: bond its purification is taken at: quenches from product states land at beta ~ 0.1-1
#: (measured on the shipped specs: beta 0.14-0.78 at bonds 8-14), far below the sweep's
#: bond limit of 64.
BETA_GUESS = 0.5
THERMO_BOND_GUESS = 12
#: Step and repetitions of the purification (:mod:`mpsobs.references.thermo`): the run
#: at dbeta, at 2 dbeta (half the steps) and, at the bond limit, at half the bond.
_THERMO_DBETA, _THERMO_REPEATS = 0.05, 2.0
_COMPLEX = 4.0  # real flops per complex flop in the LAPACK counts


@dataclass(frozen=True)
class Work:
    """Counted work: flops in matrix products (``gemm``; ``single``: those done in single
    precision) and in factorizations (``lapack``), and kernel ``calls``."""

    gemm: float = 0.0
    lapack: float = 0.0
    calls: float = 0.0
    single: float = 0.0

    def __add__(self, other: Work) -> Work:
        return Work(self.gemm + other.gemm, self.lapack + other.lapack,
                    self.calls + other.calls, self.single + other.single)

    def __mul__(self, factor: float) -> Work:
        return Work(self.gemm * factor, self.lapack * factor, self.calls * factor,
                    self.single * factor)

    __rmul__ = __mul__

    @property
    def flops(self) -> float:
        return self.gemm + self.lapack + self.single

    @property
    def seconds(self) -> float:
        """Single-core seconds at GEMM_RATE (twice that in single precision),
        LAPACK_RATE and CALL_SECONDS."""
        return ((self.gemm + self.single / 2.0) / GEMM_RATE + self.lapack / LAPACK_RATE
                + self.calls * CALL_SECONDS)

    def __repr__(self) -> str:
        return f"Work({number(self.flops)} flops, {number(self.calls)} calls)"


@dataclass(frozen=True)
class PointCost:
    """Estimated cost of one point: the work of the main evolution, of the truncation
    check (its evolution and estimates), of the estimators and of the references, and
    the peak memory in bytes."""

    point_id: str
    label: str
    evolution: Work
    check: Work
    estimators: Work
    references: Work
    peak_bytes: float

    @property
    def work(self) -> Work:
        return self.evolution + self.check + self.estimators + self.references

    @property
    def seconds(self) -> float:
        return self.work.seconds

    @property
    def core_hours(self) -> float:
        return self.seconds / 3600.0

    def __repr__(self) -> str:
        return (f"PointCost({self.point_id}, {number(self.core_hours)} core-h, peak "
                f"{self.peak_bytes / 2**20:.0f} MiB)")


def bond_caps(L: int, cap: int, local_dim: int = 2) -> np.ndarray:
    """Largest bond dimension at each of the L + 1 cuts: min(cap, d**i, d**(L - i))."""
    i = np.arange(L + 1)
    exponent = np.minimum(i, L - i).astype(float)
    return np.minimum(float(cap), float(local_dim) ** exponent).astype(np.int64)


def svd_flops(m: int, n: int) -> float:
    """Thin SVD with vectors of a complex m x n matrix (R-SVD count, Golub and Van Loan,
    Sec. 8.6, from memory)."""
    m, n = max(m, n), min(m, n)
    return _COMPLEX * (6.0 * m * n * n + 20.0 * n**3)


def split_flops(m: int, n: int, k: int, cutoff: float) -> float:
    """Truncated split of a complex m x n matrix keeping k values
    (:func:`mpsobs.mps.truncation.split`, route "auto"): below GRAM_FLOOR the SVD;
    otherwise the Gram route on the smaller side a = min(m, n) (the larger b): a QR of
    (b, a) first where a < QR_REDUCTION b, the Gram matrix by zherk 4 a^2 b, the
    tridiagonal reduction 16/3 a^3, the back-transformation of k vectors 8 a^2 k and the
    projection 8 k a b (real flops; LAPACK's operation counts, from memory)."""
    if not truncation.use_gram("auto", cutoff):
        return svd_flops(m, n)
    a, b = min(m, n), max(m, n)
    reduction = qr_flops(b, a) if a < truncation.QR_REDUCTION * b else 0.0
    return reduction + 4.0 * a * a * b + 16.0 / 3.0 * a**3 + 8.0 * a * a * k + 8.0 * k * a * b


def qr_flops(m: int, n: int) -> float:
    """Householder QR of a complex m x n matrix and forming its thin Q (Golub and Van
    Loan, Sec. 5.2, from memory)."""
    k = min(m, n)
    return 2.0 * _COMPLEX * (2.0 * max(m, n) * k * k - 2.0 * k**3 / 3.0)


def _layers(order: int, steps: int) -> tuple[int, int]:
    """(even, odd) layers of ``steps`` TEBD steps after merging adjacent half layers."""
    if steps == 0:
        return 0, 0
    per_step = 1 if order == 2 else 3
    return per_step * steps + 1, per_step * steps


def _gate_work(chi: np.ndarray, b: int, d: int, cutoff: float) -> Work:
    """One two-site gate on sites (b, b + 1) with bonds l, m, r = chi[b], chi[b+1],
    chi[b+2]: theta, gate, the split of (d l, d r) keeping m (:func:`split_flops`), and
    one QR that moves the centre on, of the site left behind (shape (d m, r) or (d m, l)),
    with its product into the next."""
    left, mid, right = (float(x) for x in chi[b:b + 3])
    gemm = (8.0 * left * d * mid * d * right + 8.0 * d**4 * left * right
            + 8.0 * mid * mid * d * max(left, right))
    lapack = (split_flops(int(d * left), int(d * right), int(mid), cutoff)
              + qr_flops(int(d * mid), int(max(left, right))))
    return Work(gemm, lapack, 4.0)


def tebd_work(L: int, cap: int, steps: int, order: int, n_times: int, *,
              local_dim: int = 2, sweep: bool = False, cutoff: float = 0.0) -> Work:
    """Work of ``steps`` TEBD steps at bond cap ``cap`` and truncation ``cutoff`` (one
    stretch between output times: adjacent half layers merge only inside it) plus
    ``n_times`` read-out sweeps (L - 1 QRs of (2 chi[i+1], chi[i]) and the two-site
    energies).

    With ``sweep`` (the purification's symmetric sweep): every step applies all L - 1
    gates twice, no read-out."""
    chi = bond_caps(L, cap, local_dim)
    gates = [_gate_work(chi, b, local_dim, cutoff) for b in range(L - 1)]
    if sweep:
        return 2.0 * steps * sum(gates, Work())
    even_layers, odd_layers = _layers(order, steps)
    even = sum(gates[0::2], Work())
    odd = sum(gates[1::2], Work())
    readout = Work()
    for i in range(1, L):
        left, mid, right = (float(x) for x in chi[i - 1:i + 2])
        readout += Work(8.0 * left * 2 * mid * 2 * right + 8.0 * 16 * left * right * 2
                        + 8.0 * left * 2 * mid * mid, qr_flops(int(2 * right), int(mid)), 3.0)
    return even_layers * even + odd_layers * odd + n_times * readout


def _readout_shapes(cg: coarse.BlockCoarseGraining, chi: np.ndarray,
                    ancilla: bool) -> list[ReadoutBlock]:
    """Stand-ins for the readout blocks at the given bonds (shapes and outcome offsets
    only: the tensor is a zero-size broadcast view)."""
    out = []
    for block in cg.blocks:
        counts = np.bincount(block.group, minlength=block.n_outcomes)
        factor = 2**block.size if ancilla else 1
        offsets = np.concatenate([[0], np.cumsum(counts * factor)])
        shape = (int(chi[block.start]), int(offsets[-1]), int(chi[block.stop]))
        out.append(ReadoutBlock(block.start, block.stop,
                                np.broadcast_to(np.zeros((), complex), shape), offsets,
                                np.repeat(np.arange(block.n_outcomes), counts * factor),
                                np.log(block.volumes)))
    return out


def _method(cg: coarse.BlockCoarseGraining, method: str) -> str:
    """The estimator the point will run, as far as the spec decides it."""
    if method in ("auto", "exact", "count") and estimate.countable(cg):
        return "count"
    return "sample"


def estimator_work(cg: coarse.BlockCoarseGraining, L: int, cap: int, method: str,
                   samples: int, *, ancilla: bool = False,
                   options: dict | None = None) -> tuple[Work, float]:
    """(work, working-set bytes) of one estimate of ``cg`` on a state at bond cap
    ``cap`` (a purification with ``ancilla``): canonical form, block tensors and the
    method's own work (module docstring); ``options``: the estimator options of the point
    (for wide energy regions their moments and bond)."""
    d = 4 if ancilla else 2
    chi = bond_caps(L, cap, d)
    canonical = Work(sum(8.0 * float(chi[i]) * d * float(chi[i + 1]) ** 2 for i in range(L)),
                     sum(qr_flops(int(d * chi[i + 1]), int(chi[i])) for i in range(L)), L)
    if isinstance(cg, coarse.WideEnergyRegions):
        work, size = _wide_work(cg, int(np.max(chi)), d, options, references=False)
        return canonical + work, size
    if _method(cg, method) == "count":
        carried, gemm = 1.0, 0.0
        for start, stop in cg.regions:
            b = stop - start
            gemm += 32.0 * float(np.max(chi[start:stop + 1])) ** 3 * carried * b * b / 2
            carried *= b + 1
        size = 16.0 * float(np.max(chi)) ** 2 * (3 * carried + cg.regions[-1][1] + 1)
        return canonical + Work(gemm, 0.0, float(L)), size
    blocks = _readout_shapes(cg, chi, ancilla)
    setup = Work()
    for blk in blocks:
        cl, rows, cr = blk.tensor.shape
        b = blk.stop - blk.start
        setup += Work(8.0 * cl * cr * float(np.max(chi[blk.start:blk.stop + 1])) * d**(b + 1)
                      + 8.0 * cl * rows * rows * cr / (d // 2) ** b
                      + 8.0 * cl * cl * rows * cr, 0.0, 3.0)
    batch = estimate.default_batch(blocks)
    # dense environments are advanced in single precision (estimators.sampling)
    paths = Work(0.0, 0.0, 2.0 * len(blocks) * math.ceil(samples / batch),
                 single=samples * estimate.conditional_sample_flops(blocks))
    per_sample = max(16 * (2 * b.tensor.shape[0] ** 2 + 2 * b.tensor.shape[2] ** 2
                           + b.tensor.shape[1] * b.tensor.shape[2]) for b in blocks)
    size = (sum(16.0 * np.prod(b.tensor.shape) for b in blocks) + batch * per_sample
            + WORK_BYTES)
    return canonical + setup + paths, size


def _wide_work(cg: coarse.WideEnergyRegions, state_bond: int, local_dim: int,
               options: dict | None, *, references: bool) -> tuple[Work, float]:
    """(work, bytes) of the Chebyshev runs of wide energy regions on a state, or (with
    ``references``) of their Gibbs references alone, at the point's moments and bond."""
    resolution = {k: v for k, v in (options or {}).items() if k in ("moments", "bond")}
    counts = wide_energy.kernel_counts(cg, state_bond, local_dim, beta=BETA_GUESS,
                                       runs=not references, references=references,
                                       **resolution)
    lapack = (sum(svd_flops(m, n) * k for m, n, k in counts.svds)
              + sum(qr_flops(m, n) * k for m, n, k in counts.qrs))
    return Work(counts.gemm, lapack, counts.calls), counts.size


def _free_fermion(model) -> bool:
    """Whether the Gibbs reference is exact from single-particle energies (XX chains,
    Ising chains without longitudinal field): the test of :mod:`mpsobs.references.thermo`."""
    for modes in (gaussian.quadratic_hamiltonian, gaussian.quasiparticle_energies):
        try:
            modes(model)
        except InputError:
            continue
        return True
    return False


def grown_bond(t: float, cap: int) -> int:
    """Bond dimension assumed at time t after a quench from a product state:
    min(cap, 2**(t / DOUBLING_TIME)) (module docstring)."""
    return int(min(cap, max(1.0, round(2.0 ** (t / DOUBLING_TIME)))))


def _time_series(L: int, cap: int, times: np.ndarray, evo: dict,
                 estimates) -> tuple[Work, Work]:
    """(evolution work, estimator work) of the output ``times`` at a bond that grows as
    :func:`grown_bond` up to ``cap``: each interval's steps at the bond of its end
    (``evo``: the point's evolution keys dt, order and cutoff)."""
    evolution, estimators, done = Work(), Work(), 0
    for t in times:
        steps = max(0, math.ceil(float(t) / evo["dt"] - 1e-9) - done) if t > 0 else 0
        done += steps
        bond = grown_bond(float(t), cap)
        evolution += tebd_work(L, bond, steps, evo["order"], 1, cutoff=evo["cutoff"])
        estimators += estimates(bond)[0]
    return evolution, estimators


def point_cost(point: Point, built: BuiltPoint | None = None) -> PointCost:
    """The estimated work and peak memory of one point (module docstring); ``built``:
    its objects when already made (:func:`mpsobs.pipeline.point.check_point`), else
    they are built here."""
    p = point.params
    evo, est = p["evolution"], p["estimator"]
    L = int(p["model"]["L"])
    times = np.asarray(p["times"]["values"], dtype=float)
    built = built or build_point(point, cheap_only=True)
    model = built.model
    cap, check_cap = int(evo["chi_max"]), int(evo.get("chi_check") or 0)
    samples = int(est["samples"] or estimate.DEFAULT_SAMPLES)

    def estimates(bond: int, *, ancilla: bool = False) -> tuple[Work, float]:
        parts = [estimator_work(c.coarse_graining, L, bond, est["method"], samples,
                                ancilla=ancilla, options=c.options) for c in built.coarse]
        return sum((w for w, _ in parts), Work()), max(s for _, s in parts)

    main_est, main_bytes = estimates(cap)
    evolution, estimators = _time_series(L, cap, times, evo, estimates)
    check, check_bytes = Work(), 0.0
    if check_cap > 0:
        _, check_bytes = estimates(check_cap)
        check_evolution, check_est = _time_series(L, check_cap, times, evo, estimates)
        check = check_evolution + check_est
    references, thermo_bytes = _reference_work(model, L, cap, estimates)
    for c in built.coarse:
        if isinstance(c.coarse_graining, coarse.WideEnergyRegions):
            work, size = _wide_work(c.coarse_graining, cap, 2, c.options, references=True)
            references, thermo_bytes = references + work, max(thermo_bytes, size)
    chi_main = bond_caps(L, cap).astype(float)
    chi_check = bond_caps(L, check_cap).astype(float) if check_cap else np.zeros(L + 1)
    states = 16.0 * 2 * float(np.sum(chi_main[:-1] * chi_main[1:])
                              + np.sum(chi_check[:-1] * chi_check[1:]))
    gate_bytes = 16.0 * 8 * (2 * cap) ** 2
    peak = BASE_BYTES + 2 * states + max(gate_bytes, main_bytes, check_bytes, thermo_bytes)
    return PointCost(point.point_id, point.label, evolution, check, estimators,
                     references, float(peak))


def _reference_work(model, L: int, cap: int, estimates) -> tuple[Work, float]:
    """Work and working set of the thermodynamic references of one point."""
    if _free_fermion(model):
        return Work(float(L) ** 3 * 8.0, 0.0, 10.0), 16.0 * L * L
    steps = 2 * math.ceil(BETA_GUESS / _THERMO_DBETA / 2)
    sweep = tebd_work(L, THERMO_BOND_GUESS, steps, 2, 0, local_dim=4, sweep=True,
                      cutoff=PURIFICATION_CUTOFF)
    eq_bond = min(cap, points.EQ_MAX_BOND, THERMO_BOND_GUESS)
    eq_sweep = tebd_work(L, eq_bond, steps, 2, 0, local_dim=4, sweep=True,
                         cutoff=PURIFICATION_CUTOFF)
    eq_est, eq_bytes = estimates(eq_bond, ancilla=True)
    chi = bond_caps(L, THERMO_BOND_GUESS, 4).astype(float)
    thermo_bytes = 16.0 * 4 * 3 * float(np.sum(chi[:-1] * chi[1:]))
    return _THERMO_REPEATS * sweep + eq_sweep + eq_est, max(thermo_bytes, eq_bytes)


def format_costs(costs: Sequence[PointCost]) -> list[str]:
    """Lines for ``mpsobs check``: per point the core-hours and peak memory, then the
    total core-hours and the largest peak (the memory a worker needs)."""
    lines = []
    for c in costs:
        lines.append(f"{c.point_id}  {_hours(c.core_hours)}  peak {_bytes(c.peak_bytes)}  "
                     f"({_share(c)})")
    total = sum(c.core_hours for c in costs)
    peak = max((c.peak_bytes for c in costs), default=0.0)
    lines.append(f"total {_hours(total)} on one core; a worker needs {_bytes(peak)}")
    return lines


def _hours(hours: float) -> str:
    if hours < 1.0 / 60:
        return f"{hours * 3600:.2g} core-s"
    if hours < 1.0:
        return f"{hours * 60:.2g} core-min"
    return f"{hours:.3g} core-h"


def _bytes(size: float) -> str:
    return f"{size / 2**20:.0f} MiB" if size < 2**30 else f"{size / 2**30:.1f} GiB"


def _share(cost: PointCost) -> str:
    """Shares of the total time: evolution, check, estimators, references."""
    total = cost.seconds or 1.0
    parts = (("evolution", cost.evolution), ("check", cost.check),
             ("estimators", cost.estimators), ("references", cost.references))
    return ", ".join(f"{name} {100 * w.seconds / total:.0f}%" for name, w in parts)
