"""Real-time evolution of an MPS by TEBD on plain arrays.

The Hamiltonian is split into even bonds (0-1, 2-3, ...) and odd bonds (1-2, 3-4, ...)
with the bond Hamiltonians of :func:`mpsobs.models.bond_hamiltonians`; a step is a
product of layers exp(-i tau H_even) and exp(-i tau H_odd), each a product of commuting
two-site gates (hbar = 1, psi(t) = exp(-i H t) psi(0)).

- order 2: Strang splitting S2(tau) = E(tau/2) O(tau) E(tau/2); adjacent half layers of
  consecutive steps are merged. Error per unit time O(dt^2).
- order 4: Forest-Ruth composition S4(tau) = S2(a tau) S2((1 - 2a) tau) S2(a tau),
  a = 1 / (2 - 2^(1/3)), Phys. Lett. A 146, 319 (1990). Error per unit time O(dt^4).

TEBD: Phys. Rev. Lett. 93, 040502 (2004). The state keeps one canonical center: even
layers sweep left to right, odd layers right to left, and the center is moved by QR
between gates, so every two-site SVD sees orthonormal environments and its truncation is
the optimal one. Truncation keeps at most ``max_bond`` singular values and drops the
smallest ones as long as their squared sum stays within ``cutoff`` times the total.
The state is not renormalised during the run: its norm records the truncation loss.

Number conservation (U(1) symmetry; Phys. Rev. B 83, 115125 (2011), arXiv:1008.4774,
journal reference from memory): when H conserves the number of sites in |1> and every bond
basis state has a definite number ("charge"), every tensor is block-sparse in the
charges and each SVD / QR splits into independent blocks, with the truncation decided on
the whole spectrum as before. The tensors stay plain dense arrays (with exact zeros);
only the decompositions use the blocks.

Cost per step (order 2): L - 1 SVDs of (2 chi, 2 chi) matrices, about L QRs, i.e.
O(L chi^3); order 4 costs three times that. With number blocks the SVD cost drops to
the sum over blocks of (block size)^3.
"""

from __future__ import annotations

import functools
import logging
import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from typing import Literal, get_args

import numpy as np
from scipy.linalg import lapack

from mpsobs.chain.models import Model, bond_hamiltonians
from mpsobs.core.errors import InputError, finite_number, integer, one_of
from mpsobs.core.printing import number
from mpsobs.core.threads import kernel_threads
from mpsobs.mps.tensors import MPS, as_mps, right_canonical, robust_svd

__all__ = ["Snapshot", "evolve", "ORDERS", "Symmetry", "CHARGE_TOL", "BLOCKS_MIN_BOND"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

logger = logging.getLogger(__name__)

ORDERS = (2, 4)
Symmetry = Literal["auto", "number", "none"]
#: With symmetry="auto", number blocks are used from this max_bond on (below it the
#: per-block overhead outweighs the cheaper decompositions; measured crossover 32..64).
BLOCKS_MIN_BOND = 48
_FOREST_RUTH = 1.0 / (2.0 - 2.0 ** (1.0 / 3.0))
#: A requested time within this fraction of dt past a whole number of steps is reached
#: by those steps (no extra sliver step).
_LANDING_TOL = 1e-9
_GESDD, _GESDD_LWORK = lapack.zgesdd, lapack.zgesdd_lwork
_GEQRF, _UNGQR = lapack.zgeqrf, lapack.zungqr


@dataclass(frozen=True, eq=False)
class Snapshot:
    """The evolved state at one requested time.

    Attributes
    ----------
    t : the time (exactly the requested one).
    state : the MPS, right-canonical and normalised.
    discarded_weight : sum over all truncations since the start of the discarded squared
        singular values relative to the state's squared norm at that truncation.
    max_bond : the largest bond dimension of ``state``.
    norm : the norm before renormalisation (1 minus the loss to truncation,
        norm**2 = prod(1 - discarded fractions)); the initial state counts as norm 1.
    energy : <H> in ``state``.
    energy_drift : energy - <H> at the start time.
    half_chain_entanglement : von Neumann entropy (nats) of the cut between sites
        L//2 - 1 and L//2.
    steps : number of Trotter steps done since the start.
    """

    t: float
    state: MPS
    discarded_weight: float
    max_bond: int
    norm: float
    energy: float
    energy_drift: float
    half_chain_entanglement: float
    steps: int

    def __repr__(self) -> str:
        return (f"Snapshot(t={number(self.t)}, L={self.state.L}, max bond {self.max_bond}, "
                f"discarded weight {self.discarded_weight:.3g}, norm {number(self.norm)}, "
                f"E={number(self.energy)} (drift {self.energy_drift:.3g}), "
                f"S_half={number(self.half_chain_entanglement)}, {self.steps} steps)")


# ---------------------------------------------------------------- validation


def _check_times(times, start_time) -> tuple[np.ndarray, float]:
    start = finite_number(start_time, "start_time")
    try:
        ts = np.atleast_1d(np.asarray(times, dtype=float))
    except (TypeError, ValueError):
        raise InputError("times: expected a sequence of numbers") from None
    if ts.ndim != 1 or ts.size == 0 or not np.all(np.isfinite(ts)):
        raise InputError("times: expected a non-empty 1-d sequence of finite numbers")
    if np.any(np.diff(ts) < 0):
        raise InputError("times: must be sorted in increasing order")
    if ts[0] < start:
        raise InputError(f"times: {ts[0]!r} is before start_time = {start!r}")
    return ts, start


def _check_options(max_bond, cutoff, dt, order) -> None:
    integer(max_bond, "max_bond", 1)
    if not 0.0 <= finite_number(cutoff, "cutoff") < 1.0:
        raise InputError(f"cutoff: expected a number with 0 <= cutoff < 1, got {cutoff!r}")
    if not finite_number(dt, "dt") > 0:
        raise InputError(f"dt: expected a positive finite time step, got {dt!r}")
    one_of(order, "order", ORDERS)


# ---------------------------------------------------------------- schedule and gates


def _step_lengths(duration: float, dt: float) -> list[float]:
    """Steps of length dt covering ``duration``, the last one shortened to land on it."""
    if duration <= 0.0:
        return []
    n = max(1, math.ceil(duration / dt - _LANDING_TOL))
    return [dt] * (n - 1) + [duration - (n - 1) * dt]


def _layer_schedule(order: int, steps: Sequence[float]) -> list[tuple[int, float]]:
    """(parity, tau) layers for consecutive steps; parity 0 = even bonds, 1 = odd bonds.
    Adjacent layers of the same parity are merged into one."""
    layers: list[tuple[int, float]] = []
    for tau in steps:
        parts = [tau] if order == 2 else [_FOREST_RUTH * tau, (1 - 2 * _FOREST_RUTH) * tau,
                                          _FOREST_RUTH * tau]
        for part in parts:
            for parity, length in ((0, part / 2), (1, part), (0, part / 2)):
                if layers and layers[-1][0] == parity:
                    layers[-1] = (parity, layers[-1][1] + length)
                else:
                    layers.append((parity, length))
    return layers


class _Gates:
    """exp(-i tau h_b) as (4, 4) arrays for the bonds of one parity, cached per tau.

    The exponential comes from the eigen-decomposition of the Hermitian h_b, taken once
    (exact to rounding, and much cheaper than a Pade expm per gate). With
    ``conserve_number`` the entries that change the number are set to exact zeros."""

    def __init__(self, bond_hams: Sequence[np.ndarray], conserve_number: bool):
        self._eig = [np.linalg.eigh(h) for h in bond_hams]
        self._mask = _NUMBER_MASK if conserve_number else True
        self._cache: dict[tuple[int, float], list[np.ndarray]] = {}

    def layer(self, parity: int, tau: float) -> list[np.ndarray]:
        key = (parity, tau)
        if key not in self._cache:
            self._cache[key] = [np.where(self._mask, (v * np.exp(-1j * tau * w)) @ v.conj().T, 0)
                                for w, v in self._eig[parity::2]]
        return self._cache[key]


# ---------------------------------------------------------------- kernel on arrays


def _keep_count(s: np.ndarray, max_bond: int, cutoff: float) -> tuple[int, float]:
    """Number of singular values kept and the discarded fraction of sum s^2."""
    csum = np.cumsum(s * s)
    total = csum[-1]
    if total <= 0.0:
        return 1, 0.0
    if cutoff > 0.0:
        k = int(np.count_nonzero(csum < total * (1.0 - cutoff))) + 1
    else:   # no cutoff: keep every non-zero value
        k = max(int(np.count_nonzero(s)), 1)
    k = min(k, max_bond)
    return k, float(max(total - csum[k - 1], 0.0) / total)


def _svd(m: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Thin SVD: LAPACK gesdd called directly (on m^T, which is Fortran-ordered, so
    nothing is copied and the factors come out C-ordered); if it does not converge,
    :func:`mpsobs.mps.robust_svd` (gesdd, then gesvd); if that fails too, the
    eigen-decomposition of the Gram matrix (:func:`_gram_svd`)."""
    lwork, _ = _GESDD_LWORK(m.shape[1], m.shape[0], compute_uv=1, full_matrices=0)
    ut, s, vht, info = _GESDD(m.T, compute_uv=1, full_matrices=0, lwork=int(lwork.real))
    if info == 0:   # m^T = ut s vht  =>  m = vht^T s ut^T
        return vht.T, s, ut.T
    logger.debug("gesdd failed (info %d) on a %s matrix; falling back", info, m.shape)
    try:
        return robust_svd(m)
    except np.linalg.LinAlgError:
        logger.warning("gesdd and gesvd failed on a %s matrix; using the Gram matrix", m.shape)
        return _gram_svd(m)


def _gram_svd(m: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Thin SVD through eigh of the smaller Gram matrix (m^dagger m or m m^dagger).

    Singular values below about sqrt(machine epsilon) * s_max lose accuracy; they are
    dropped together with their vectors (last resort when LAPACK's SVDs fail)."""
    wide = m.shape[0] < m.shape[1]
    a = m.conj().T if wide else m                     # tall: a = u s vh
    w, v = np.linalg.eigh(a.conj().T @ a)             # a^dagger a = v s^2 v^dagger
    w, v = w[::-1], v[:, ::-1]
    keep = w > max(w[0], 0.0) * 1e-15 if w.size and w[0] > 0 else np.zeros(w.size, bool)
    keep[:1] = True
    s = np.sqrt(np.clip(w[keep], 0.0, None))
    v = v[:, keep]
    u = (a @ v) / np.where(s > 0, s, 1.0)
    if wide:   # m = a^dagger = v s u^dagger
        return v, s, u.conj().T
    return u, s, v.conj().T


@functools.lru_cache(maxsize=4096)
def _upper_mask(k: int, n: int) -> np.ndarray:
    return np.triu(np.ones((k, n), dtype=bool))


def _qr(m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Economic QR by LAPACK geqrf + ungqr called directly."""
    qr, tau, _, _ = _GEQRF(m)
    k = min(m.shape)
    q, _, _ = _UNGQR(qr[:, :k], tau)
    return q, qr[:k] * _upper_mask(k, m.shape[1])


# ---------------------------------------------------------------- number blocks

_SPIN_NUMBER = np.array([0, 1])   # particles in |0>, |1>
_NUMBER_MASK = (_SPIN_NUMBER.repeat(2) + np.tile(_SPIN_NUMBER, 2))  # on (s_b, s_b+1)
_NUMBER_MASK = _NUMBER_MASK[:, None] == _NUMBER_MASK[None, :]
#: Entries below this fraction of a tensor's largest are taken as zero when the bond
#: charges of an input state are read off.
CHARGE_TOL = 1e-12


def _number_charges(tensors: list[np.ndarray]) -> list[np.ndarray] | None:
    """Bond charges q_0 .. q_L (particles left of each bond basis state) if every basis
    state has a definite number, zeroing the entries below CHARGE_TOL that break it
    (in place); None otherwise."""
    charges = [np.zeros(1, dtype=np.int64)]
    for i, a in enumerate(tensors):
        big = np.abs(a) > CHARGE_TOL * np.abs(a).max()
        count = np.broadcast_to((charges[-1][:, None] + _SPIN_NUMBER)[:, :, None], a.shape)
        low = np.where(big, count, np.iinfo(np.int64).max).min(axis=(0, 1))
        high = np.where(big, count, np.iinfo(np.int64).min).max(axis=(0, 1))
        empty = ~big.any(axis=(0, 1))
        low[empty] = high[empty] = 0
        if np.any(low != high):
            return None
        tensors[i] = np.where(count == low, a, 0.0)
        charges.append(low)
    return charges


def _charge_blocks(row_q: np.ndarray, col_q: np.ndarray):
    """Orders sorting the rows and the columns of a matrix by charge, and the
    (charge, row range, column range) in those orders of every charge on both sides."""
    ro, co = np.argsort(row_q, kind="stable"), np.argsort(col_q, kind="stable")
    rs, cs = row_q[ro], col_q[co]
    common = np.array(sorted(set(rs.tolist()).intersection(cs.tolist())), dtype=np.int64)
    bounds = np.concatenate([np.searchsorted(rs, common, "left"),
                             np.searchsorted(rs, common, "right"),
                             np.searchsorted(cs, common, "left"),
                             np.searchsorted(cs, common, "right")]).reshape(4, -1)
    return ro, co, list(zip(common.tolist(), *bounds.tolist(), strict=True))


def _block_qr(m: np.ndarray, row_q: np.ndarray, col_q: np.ndarray):
    """QR of a charge-conserving matrix block by block: (q, r, charges of q's columns)."""
    ro, co, ranges = _charge_blocks(row_q, col_q)
    ms = m[ro][:, co]
    parts = [_qr(ms[r0:r1, c0:c1]) for _, r0, r1, c0, c1 in ranges]
    k = sum(q.shape[1] for q, _ in parts)
    q_out = np.zeros((m.shape[0], k), dtype=complex)
    r_out = np.zeros((k, m.shape[1]), dtype=complex)
    charges = np.empty(k, dtype=np.int64)
    off = 0
    for (c, r0, r1, c0, c1), (q, r) in zip(ranges, parts, strict=True):
        n = q.shape[1]
        q_out[ro[r0:r1], off:off + n] = q
        r_out[off:off + n, co[c0:c1]] = r
        charges[off:off + n] = c
        off += n
    return q_out, r_out, charges


def _block_svd(m: np.ndarray, row_q: np.ndarray, col_q: np.ndarray, max_bond: int,
               cutoff: float):
    """Truncated SVD of a charge-conserving matrix block by block; the truncation is the
    one of the whole spectrum. Returns u, s, vh, charges of the kept values, discarded
    fraction."""
    ro, co, ranges = _charge_blocks(row_q, col_q)
    ms = m[ro][:, co]
    parts = [_svd(ms[r0:r1, c0:c1]) for _, r0, r1, c0, c1 in ranges]
    s_all = np.concatenate([s for _, s, _ in parts])
    order = np.argsort(-s_all, kind="stable")
    k, lost = _keep_count(s_all[order], max_bond, cutoff)
    keep = np.zeros(s_all.size, dtype=bool)
    keep[order[:k]] = True
    u_out = np.zeros((m.shape[0], k), dtype=complex)
    vh_out = np.zeros((k, m.shape[1]), dtype=complex)
    s_out = s_all[keep]
    charges = np.empty(k, dtype=np.int64)
    start = off = 0
    for (c, r0, r1, c0, c1), (u, s, vh) in zip(ranges, parts, strict=True):
        sel = keep[start:start + s.size]
        start += s.size
        n = int(np.count_nonzero(sel))
        if n:
            u_out[ro[r0:r1], off:off + n] = u[:, sel]
            vh_out[off:off + n, co[c0:c1]] = vh[sel]
            charges[off:off + n] = c
            off += n
    return u_out, s_out, vh_out, charges, lost


# ---------------------------------------------------------------- the evolving chain


class _Chain:
    """The evolving MPS: site tensors (chi_l, 2, chi_r), the canonical center (sites left
    of it left-isometric, right of it right-isometric) and, when the number is conserved,
    the bond charges (then every decomposition works block by block)."""

    def __init__(self, tensors: list[np.ndarray], charges: list[np.ndarray] | None):
        self.tensors, self.charges, self.center = tensors, charges, 0

    def _row_charges(self, i: int) -> np.ndarray:
        """Number up to site i of the rows (left bond, spin) of site i."""
        return (self.charges[i][:, None] + _SPIN_NUMBER).ravel()

    def _col_charges(self, i: int) -> np.ndarray:
        """Number before site i of the columns (spin, right bond) of site i."""
        return (self.charges[i + 1][None, :] - _SPIN_NUMBER[:, None]).ravel()

    def move_right(self) -> None:
        """Center from site i to i + 1 (QR of site i)."""
        i = self.center
        a = self.tensors[i]
        chl, _, chr_ = a.shape
        m = a.reshape(chl * 2, chr_)
        if self.charges is None:
            q, r = _qr(m)
        else:
            q, r, self.charges[i + 1] = _block_qr(m, self._row_charges(i), self.charges[i + 1])
        self.tensors[i] = q.reshape(chl, 2, -1)
        nxt = self.tensors[i + 1]
        self.tensors[i + 1] = (r @ nxt.reshape(chr_, -1)).reshape(r.shape[0], 2, nxt.shape[2])
        self.center = i + 1

    def move_left(self) -> np.ndarray:
        """Center from site i to i - 1 (LQ of site i); returns the bond matrix, whose
        singular values are the Schmidt values of the cut (i - 1, i)."""
        i = self.center
        a = self.tensors[i]
        chl, _, chr_ = a.shape
        mt = a.reshape(chl, 2 * chr_).T   # a = r^T q^T, q^T has orthonormal rows
        if self.charges is None:
            q, r = _qr(mt)
        else:
            q, r, self.charges[i] = _block_qr(mt, self._col_charges(i), self.charges[i])
        self.tensors[i] = q.T.reshape(-1, 2, chr_)
        prv = self.tensors[i - 1]
        self.tensors[i - 1] = (prv.reshape(-1, chl) @ r.T).reshape(prv.shape[0], 2, r.shape[0])
        self.center = i - 1
        return r

    def max_bond(self) -> int:
        return max(t.shape[2] for t in self.tensors)

    def move_to(self, target: int) -> None:
        while self.center < target:
            self.move_right()
        while self.center > target:
            self.move_left()

    def apply_layer(self, parity: int, gates: list[np.ndarray], max_bond: int,
                    cutoff: float) -> float:
        """Apply the gates of one parity: even bonds left to right, the center ending on
        the right site of each gate and moved one site on by QR; odd bonds right to left,
        mirrored. Returns the sum of the discarded fractions."""
        L = len(self.tensors)
        bonds = range(parity, L - 1, 2)
        if not bonds:
            return 0.0
        if parity == 1:
            bonds, gates = bonds[::-1], gates[::-1]
        self.move_to(min(max(self.center, bonds[0]), bonds[0] + 1))
        tensors = self.tensors
        discarded = 0.0
        for b, gate in zip(bonds, gates, strict=True):
            left, right = tensors[b], tensors[b + 1]
            chl, chr_ = left.shape[0], right.shape[2]
            theta = left.reshape(chl * 2, -1) @ right.reshape(left.shape[2], -1)
            theta = np.matmul(gate, theta.reshape(chl, 4, chr_)).reshape(chl * 2, 2 * chr_)
            if self.charges is None:
                u, s, vh = _svd(theta)
                k, lost = _keep_count(s, max_bond, cutoff)
                u, s, vh = u[:, :k], s[:k], vh[:k]
            else:
                u, s, vh, self.charges[b + 1], lost = _block_svd(
                    theta, self._row_charges(b), self._col_charges(b + 1), max_bond, cutoff)
                k = s.size
            discarded += lost
            if parity == 0:   # center to b + 1, then on to b + 2 if another gate follows
                tensors[b] = u.reshape(chl, 2, k)
                tensors[b + 1] = (s[:, None] * vh).reshape(k, 2, chr_)
                self.center = b + 1
                if b + 3 < L:
                    self.move_right()
            else:             # center to b, then on to b - 1 if another gate follows
                tensors[b] = (u * s).reshape(chl, 2, k)
                tensors[b + 1] = vh.reshape(k, 2, chr_)
                self.center = b
                if b >= 2:
                    self.move_left()
        return discarded

    def readout(self, bond_hams: Sequence[np.ndarray]) -> tuple[float, float, float]:
        """Move the center to site 0 and read off on the way the squared norm,
        <H> / <psi|psi> from the two-site center tensors, and the half-chain entropy."""
        L = len(self.tensors)
        self.move_to(L - 1)
        e_sum = 0.0
        schmidt = None
        for i in range(L - 1, 0, -1):
            r = self.move_left()
            if i == L // 2:
                schmidt = np.linalg.svd(r, compute_uv=False)
            left, right = self.tensors[i - 1], self.tensors[i]
            chl, chr_ = left.shape[0], right.shape[2]
            theta = (left.reshape(chl * 2, -1) @ right.reshape(left.shape[2], -1))
            theta = theta.reshape(chl, 4, chr_)
            e_sum += float(np.vdot(theta, np.matmul(bond_hams[i - 1], theta)).real)
        norm2 = float(np.vdot(self.tensors[0], self.tensors[0]).real)
        p = schmidt**2 / np.sum(schmidt**2)
        p = p[p > 1e-300]
        return norm2, e_sum / norm2, float(-np.sum(p * np.log(p)))


def _snapshot(t, tensors, norm2, e, e0, ent, discarded, steps) -> Snapshot:
    nrm = math.sqrt(norm2)
    out = list(tensors)
    out[0] = out[0] / nrm
    state = MPS(tuple(out))
    return Snapshot(t=float(t), state=state, discarded_weight=discarded,
                    max_bond=state.max_bond, norm=nrm, energy=e, energy_drift=e - e0,
                    half_chain_entanglement=ent, steps=steps)


# ---------------------------------------------------------------- entry point


def evolve(state, model: Model, times: Sequence[float], *, max_bond: int, cutoff: float,
           dt: float, order: int = 4, start_time: float = 0.0, progress: bool = False,
           symmetry: Symmetry = "auto") -> Iterator[Snapshot]:
    """Evolve ``state`` under ``model`` and yield one :class:`Snapshot` per requested time.

    Parameters
    ----------
    state : mpsobs MPS or quimb MatrixProductState at ``start_time``; it is brought to
        canonical form and normalised first (the snapshots' norm is relative to it).
    model : the Hamiltonian (nearest-neighbour terms), psi(t) = exp(-i H (t - t0)) psi.
    times : absolute times, sorted, each >= ``start_time``. Steps have length ``dt``; the
        last step before each requested time is shortened to land exactly on it.
    max_bond, cutoff : truncation (at most ``max_bond`` singular values; drop the smallest
        while their squared sum relative to the total stays within ``cutoff``).
    dt : Trotter step. order : 2 (Strang) or 4 (Forest-Ruth).
    progress : show a tqdm progress bar of the evolution time, advanced at every requested
        time (off by default).
    symmetry : ``"number"`` decomposes block by block in the particle number (U(1)
        charges on every bond); it needs a number-conserving model and an input whose
        bond basis states have definite numbers (e.g. basis product states; entries below
        CHARGE_TOL of a tensor's largest are dropped to read the numbers off).
        ``"none"``: dense decompositions. ``"auto"``: "number" where possible and
        ``max_bond >= BLOCKS_MIN_BOND``, else "none". Both give the same states up to
        rounding (and the order of equal singular values at a truncation).

    Bad arguments raise InputError at the call, before anything is computed. The steps
    run under the library's BLAS thread limit (:mod:`mpsobs.threads`), which is released
    while a snapshot is with the caller.
    """
    if not isinstance(model, Model):
        raise InputError(f"model: expected an mpsobs.models.Model, got {type(model).__name__}")
    mps = as_mps(state)
    if mps.L != model.L:
        raise InputError(f"state: {mps.L} sites, but the model has L = {model.L}")
    if mps.L < 2:
        raise InputError("state: time evolution needs at least two sites")
    ts, t0 = _check_times(times, start_time)
    _check_options(max_bond, cutoff, dt, order)
    one_of(symmetry, "symmetry", get_args(Symmetry))
    if not isinstance(progress, bool):
        raise InputError(f"progress: expected True or False, got {progress!r}")
    tensors = list(right_canonical(mps, normalize=True).tensors)
    charges = None
    if symmetry == "number" or (symmetry == "auto" and max_bond >= BLOCKS_MIN_BOND):
        charges = _number_charges(tensors) if model.conserves_number else None
        if charges is None and symmetry == "number":
            raise InputError("symmetry: 'number' needs a number-conserving model and a "
                             "state whose bond basis states have definite particle numbers")
    logger.debug("evolution with %s decompositions",
                 "dense" if charges is None else "number-block")
    return _run(_Chain(tensors, charges), model, ts, t0, int(max_bond), float(cutoff),
                float(dt), order, progress)


def _run(chain: _Chain, model: Model, ts: np.ndarray, t0: float, max_bond: int,
         cutoff: float, dt: float, order: int, progress: bool) -> Iterator[Snapshot]:
    from tqdm.auto import tqdm

    bond_hams = [np.asarray(h, dtype=complex) for h in bond_hamiltonians(model)]
    gates = _Gates(bond_hams, conserve_number=chain.charges is not None)
    with kernel_threads(chain.max_bond()):
        _, e0, ent = chain.readout(bond_hams)
    discarded, steps, t_now = 0.0, 0, t0
    bar = tqdm(total=float(ts[-1] - t0), disable=not progress, unit="t", leave=False)
    try:
        for t in ts:
            step_list = _step_lengths(float(t - t_now), dt)
            # the limit (chosen by the bond at the start of the interval) is not held
            # across the yield: the caller's own work runs with its own threads
            with kernel_threads(chain.max_bond()):
                for parity, tau in _layer_schedule(order, step_list):
                    discarded += chain.apply_layer(parity, gates.layer(parity, tau),
                                                   max_bond, cutoff)
                norm2, e, ent = chain.readout(bond_hams)
            steps += len(step_list)
            bar.update(float(t - t_now))
            t_now = float(t)
            logger.debug("t = %g: max bond %d, discarded %.3g", t_now, chain.max_bond(),
                         discarded)
            yield _snapshot(t_now, chain.tensors, norm2, e, e0, ent, discarded, steps)
    finally:
        bar.close()
