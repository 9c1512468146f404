"""The evolution kernel: layers of two-site gates on an MPS with a canonical centre.

One kernel for pure states (local dimension 2) and purifications (local dimension 4,
index 2 s + a, see :mod:`mpsobs.mps.tensors`: the gate acts on the physical legs and as
the identity on the ancillas), in real time (gates exp(-i tau h_b), hbar = 1) and
imaginary time (gates exp(-tau h_b)). It receives the bond Hamiltonians h_b (4, 4) on
sites (b, b + 1) as arrays (site b the most significant bit), sum_b h_b = H.

The Hamiltonian is split into even bonds (0-1, 2-3, ...) and odd bonds (1-2, 3-4, ...);
each parity is a layer of commuting gates. Trotter schedules (:func:`layer_schedule`):

- order 2: Strang splitting S2(tau) = E(tau/2) O(tau) E(tau/2); adjacent half layers of
  consecutive steps are merged. Error per unit time O(dt^2).
- order 4: Forest-Ruth composition S4(tau) = S2(a tau) S2((1 - 2a) tau) S2(a tau),
  a = 1 / (2 - 2^(1/3)), Phys. Lett. A 146, 319 (1990). Error per unit time O(dt^4).

TEBD: Phys. Rev. Lett. 93, 040502 (2004); imaginary time on purifications: Phys. Rev.
Lett. 93, 207204 (2004). The chain keeps one canonical centre: even layers sweep left to
right, odd layers right to left, and the centre is moved by QR between gates, so every
two-site split sees orthonormal environments and its truncation (the rule of
:mod:`mpsobs.mps.truncation`) is the optimal one. With ``normalize`` (imaginary time) the
kept part is renormalised after every gate and ln of the squared norm before truncation
is accumulated in ``log_norm2`` (so ln <psi|psi> of the untruncated product of gates is
known); without it the norm is left alone and records the truncation loss.

With bond charges (:mod:`mpsobs.mps.charges`) every QR and split works block by block;
the gates' entries that change the charge are set to exact zeros.

Cost per gate for bond chi: the split of a (d chi, d chi) matrix (Gram route ~ 8 d^3
chi^3 plus an eigh of size d chi, or the SVD) and a QR of (d chi, chi); a layer costs
L / 2 gates. Memory O(L d chi^2).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Literal

import numpy as np

from mpsobs.mps.charges import block_qr, block_split, col_charges, local_charges, row_charges
from mpsobs.mps.truncation import Route, qr, split

__all__ = ["ORDERS", "FOREST_RUTH", "step_lengths", "layer_schedule", "on_physical", "Gates",
           "GateChain", "Time"]

ORDERS = (2, 4)
FOREST_RUTH = 1.0 / (2.0 - 2.0 ** (1.0 / 3.0))
Time = Literal["real", "imaginary"]
#: A requested time within this fraction of dt past a whole number of steps is reached
#: by those steps (no extra sliver step).
_LANDING_TOL = 1e-9


def step_lengths(duration: float, dt: float) -> list[float]:
    """Steps of length dt covering ``duration``, the last one shortened to land on it."""
    if duration <= 0.0:
        return []
    n = max(1, math.ceil(duration / dt - _LANDING_TOL))
    return [dt] * (n - 1) + [duration - (n - 1) * dt]


def layer_schedule(order: int, steps: Sequence[float]) -> list[tuple[int, float]]:
    """(parity, tau) layers for consecutive steps; parity 0 = even bonds, 1 = odd bonds.
    Adjacent layers of the same parity are merged into one."""
    layers: list[tuple[int, float]] = []
    for tau in steps:
        parts = [tau] if order == 2 else [FOREST_RUTH * tau, (1 - 2 * FOREST_RUTH) * tau,
                                          FOREST_RUTH * tau]
        for part in parts:
            for parity, length in ((0, part / 2), (1, part), (0, part / 2)):
                if layers and layers[-1][0] == parity:
                    layers[-1] = (parity, layers[-1][1] + length)
                else:
                    layers.append((parity, length))
    return layers


def on_physical(op: np.ndarray, local_dim: int) -> np.ndarray:
    """A two-site operator (4, 4) on the spins as a (d^2, d^2) operator on two sites of
    local dimension d: itself for d = 2, op (x) identity on the ancillas for d = 4 (index
    order (s1, a1, s2, a2))."""
    if local_dim == 2:
        return op
    out = np.einsum("ikjl,mn,op->imkojnlp", op.reshape(2, 2, 2, 2), np.eye(2), np.eye(2))
    return out.reshape(16, 16)


def _charge_mask(local_dim: int) -> np.ndarray:
    pair = np.add.outer(local_charges(local_dim), local_charges(local_dim)).ravel()
    return pair[:, None] == pair[None, :]


class Gates:
    """exp(-i tau h_b) (real time) or exp(-tau h_b) (imaginary time) on the bonds of one
    parity, as (d^2, d^2) arrays, cached per (parity, tau).

    The exponential comes from the eigen-decomposition of the Hermitian h_b, taken once
    (exact to rounding, and much cheaper than a Pade expm per gate). With
    ``conserve_charge`` the entries that change the charge are set to exact zeros."""

    def __init__(self, bond_hams: Sequence[np.ndarray], time: Time, local_dim: int,
                 conserve_charge: bool):
        self._eig = [np.linalg.eigh(np.asarray(h, dtype=complex)) for h in bond_hams]
        self._rate = -1j if time == "real" else -1.0
        self._dim = local_dim
        self._mask = _charge_mask(local_dim) if conserve_charge else True
        self._cache: dict[tuple[int, float], list[np.ndarray]] = {}

    def layer(self, parity: int, tau: float) -> list[np.ndarray]:
        key = (parity, tau)
        if key not in self._cache:
            self._cache[key] = [
                np.where(self._mask,
                         on_physical((v * np.exp(self._rate * tau * w)) @ v.conj().T,
                                     self._dim), 0)
                for w, v in self._eig[parity::2]]
        return self._cache[key]


class GateChain:
    """The evolving MPS: site tensors (chi_l, d, chi_r), the canonical centre (sites left
    of it left-isometric, right of it right-isometric) and, when a charge is conserved,
    the bond charges q_0 .. q_L (then every decomposition works block by block).

    Attributes
    ----------
    tensors, charges, center : the state (modified in place by the methods).
    normalize : renormalise the kept part after every gate (imaginary time).
    log_norm2 : with ``normalize``, the sum of ln (squared norm before truncation).
    peak_bond : the largest bond dimension seen so far.
    route : "auto" (Gram route where it resolves the cutoff) or "svd".
    """

    def __init__(self, tensors: list[np.ndarray], charges: list[np.ndarray] | None, *,
                 center: int = 0, normalize: bool = False, route: Route = "auto"):
        self.tensors, self.charges, self.center = tensors, charges, center
        self.normalize, self.route = normalize, route
        self.log_norm2 = 0.0
        self.peak_bond = self.max_bond()
        self._local = local_charges(tensors[0].shape[1]) if charges is not None else None

    def max_bond(self) -> int:
        return max(t.shape[2] for t in self.tensors)

    def move_right(self) -> None:
        """Centre from site i to i + 1 (QR of site i)."""
        i = self.center
        a = self.tensors[i]
        chl, d, chr_ = a.shape
        m = a.reshape(chl * d, chr_)
        if self.charges is None:
            q, r = qr(m)
        else:
            q, r, self.charges[i + 1] = block_qr(m, row_charges(self.charges[i], self._local),
                                                 self.charges[i + 1])
        self.tensors[i] = q.reshape(chl, d, -1)
        nxt = self.tensors[i + 1]
        self.tensors[i + 1] = (r @ nxt.reshape(chr_, -1)).reshape(r.shape[0], d, nxt.shape[2])
        self.center = i + 1

    def move_left(self) -> np.ndarray:
        """Centre from site i to i - 1 (LQ of site i); returns the bond matrix, whose
        singular values are the Schmidt values of the cut (i - 1, i)."""
        i = self.center
        a = self.tensors[i]
        chl, d, chr_ = a.shape
        mt = a.reshape(chl, d * chr_).T   # a = r^T q^T, q^T has orthonormal rows
        if self.charges is None:
            q, r = qr(mt)
        else:
            q, r, self.charges[i] = block_qr(mt, col_charges(self.charges[i + 1], self._local),
                                             self.charges[i])
        self.tensors[i] = q.T.reshape(-1, d, chr_)
        prv = self.tensors[i - 1]
        self.tensors[i - 1] = (prv.reshape(-1, chl) @ r.T).reshape(prv.shape[0], d, r.shape[0])
        self.center = i - 1
        return r

    def move_to(self, target: int) -> None:
        while self.center < target:
            self.move_right()
        while self.center > target:
            self.move_left()

    def apply_layer(self, parity: int, gates: list[np.ndarray], max_bond: int,
                    cutoff: float) -> float:
        """Apply the gates of one parity: even bonds left to right, the centre ending on
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
            chl, d, _ = left.shape
            chr_ = right.shape[2]
            theta = left.reshape(chl * d, -1) @ right.reshape(left.shape[2], -1)
            theta = np.matmul(gate, theta.reshape(chl, d * d, chr_)).reshape(chl * d, d * chr_)
            side = "left" if parity == 0 else "right"
            if self.charges is None:
                u, vh, s, lost = split(theta, side, max_bond, cutoff, self.route)
            else:
                u, vh, s, self.charges[b + 1], lost = block_split(
                    theta, row_charges(self.charges[b], self._local),
                    col_charges(self.charges[b + 2], self._local), side, max_bond, cutoff,
                    self.route)
            k = s.size
            if self.normalize:
                total = float(np.sum(s * s)) / (1.0 - lost) if lost < 1.0 else 0.0
                self.log_norm2 += math.log(total)
                scale = 1.0 / math.sqrt(float(np.sum(s * s)))
                if parity == 0:
                    vh = vh * scale
                else:
                    u = u * scale
            discarded += lost
            self.peak_bond = max(self.peak_bond, k)
            tensors[b] = u.reshape(chl, d, k)
            tensors[b + 1] = vh.reshape(k, d, chr_)
            if parity == 0:   # centre on b + 1, then on to b + 2 if another gate follows
                self.center = b + 1
                if b + 3 < L:
                    self.move_right()
            else:             # centre on b, then on to b - 1 if another gate follows
                self.center = b
                if b >= 2:
                    self.move_left()
        return discarded

    def readout(self, bond_ops: Sequence[np.ndarray]) -> tuple[float, float, float]:
        """Move the centre to site 0 and read off on the way the squared norm,
        sum_b <h_b> / <psi|psi> for the (d^2, d^2) bond operators ``bond_ops``, and the
        entropy of the cut between sites L//2 - 1 and L//2 (nats)."""
        L = len(self.tensors)
        self.move_to(L - 1)
        e_sum = 0.0
        schmidt = None
        for i in range(L - 1, 0, -1):
            r = self.move_left()
            if i == L // 2:
                schmidt = np.linalg.svd(r, compute_uv=False)
            left, right = self.tensors[i - 1], self.tensors[i]
            chl, d, _ = left.shape
            chr_ = right.shape[2]
            theta = (left.reshape(chl * d, -1) @ right.reshape(left.shape[2], -1))
            theta = theta.reshape(chl, d * d, chr_)
            e_sum += float(np.vdot(theta, np.matmul(bond_ops[i - 1], theta)).real)
        norm2 = float(np.vdot(self.tensors[0], self.tensors[0]).real)
        p = schmidt**2 / np.sum(schmidt**2)
        p = p[p > 1e-300]
        return norm2, e_sum / norm2, float(-np.sum(p * np.log(p)))
