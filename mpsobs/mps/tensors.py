"""The project's matrix-product states: plain arrays, canonical forms, quimb interop.

An :class:`MPS` holds L tensors of shape (chi_left, 2, chi_right), complex128, with
chi_left of the first and chi_right of the last equal to 1. Amplitudes are
psi(s_0 ... s_{L-1}) = A_0[:, s_0, :] @ ... @ A_{L-1}[:, s_{L-1}, :]; site 0 is the most
significant bit of a dense index (as quimb). "Right-canonical" means
sum_s A[:, s, :] @ A[:, s, :]^dagger = 1 at every site but the first, so the right
environment of any site is the identity and <psi|psi> = ||A_0||^2.

A :class:`PurifiedMPS` represents a mixed state rho = Tr_ancilla |psi><psi| by a pure
state of L (physical, ancilla) site pairs: tensors (chi_left, 4, chi_right) whose middle
index is 2 s + a, s the physical and a the ancilla value (physical most significant).

Functions never modify their inputs; every transformation returns a new MPS.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla

from mpsobs.core.errors import InputError
from mpsobs.core.printing import size_range

__all__ = ["MPS", "as_mps", "from_quimb", "to_quimb", "from_dense", "to_dense",
           "right_canonical", "right_canonical_log_norm", "bond_entropies", "random_mps",
           "product_mps", "norm", "robust_svd", "right_canonical_defect", "PurifiedMPS"]


@dataclass(frozen=True, eq=False)
class MPS:
    """A matrix-product state of L sites; see the module docstring for conventions."""

    tensors: tuple[np.ndarray, ...]

    @property
    def L(self) -> int:
        return len(self.tensors)

    @property
    def bond_dims(self) -> tuple[int, ...]:
        """The L - 1 inner bond dimensions."""
        return tuple(t.shape[2] for t in self.tensors[:-1])

    @property
    def max_bond(self) -> int:
        return max(self.bond_dims, default=1)

    def __repr__(self) -> str:
        size = sum(t.nbytes for t in self.tensors)
        return (f"MPS(L={self.L}, bond dimensions {size_range(self.bond_dims or (1,))}, "
                f"{size / 2**20:.3g} MiB)")


@dataclass(frozen=True, eq=False)
class PurifiedMPS:
    """A mixed state of L spins as a purification (see the module docstring for the
    (chi_left, 4, chi_right) tensors, index 2 s + a).

    ``beta``, ``mu`` and ``number`` name the Gibbs ensemble it purifies
    (exp(-beta (H - mu N)) / Z, or with ``number`` the sector N = number of exp(-beta H);
    ``mu`` None for mu = 0 or in a sector). ``error`` is an estimate of the trace
    distance between the represented rho and the exact ensemble (Trotter and truncation,
    see :func:`mpsobs.thermo.gibbs_state`); ``discarded_weight`` the summed relative
    truncation weight of the imaginary-time evolution that built it.
    """

    tensors: tuple[np.ndarray, ...]
    beta: float = 0.0
    mu: float | None = None
    number: int | None = None
    error: float = 0.0
    discarded_weight: float = 0.0

    def __post_init__(self) -> None:
        arrs = _chain_tensors(self.tensors, 4, "purification")
        object.__setattr__(self, "tensors", arrs)

    @property
    def L(self) -> int:
        return len(self.tensors)

    @property
    def max_bond(self) -> int:
        return max((t.shape[2] for t in self.tensors[:-1]), default=1)

    def __repr__(self) -> str:
        number = "" if self.number is None else f", number={self.number}"
        return (f"PurifiedMPS(L={self.L}, max_bond={self.max_bond}, beta={self.beta:.6g}, "
                f"mu={self.mu if self.mu is None else format(self.mu, '.6g')}{number}, "
                f"error={self.error:.3g}, discarded_weight={self.discarded_weight:.3g})")


def _chain_tensors(tensors, local_dim: int, kind: str) -> tuple[np.ndarray, ...]:
    """Complex (left, local_dim, right) arrays of an open chain, checked: matching bonds,
    outer bonds of dimension 1 (``kind`` names the state in the errors)."""
    arrs = tuple(np.asarray(t, dtype=complex) for t in tensors)
    if not arrs:
        raise InputError(f"state: {kind} needs at least one site")
    legs = ("(left bond, physical, right bond)" if local_dim == 2 else
            f"(left bond, {local_dim} = physical x ancilla, right bond)")
    for i, t in enumerate(arrs):
        if t.ndim != 3:
            raise InputError(f"state: {kind} tensor {i} has {t.ndim} legs, expected 3 {legs}")
        if t.shape[1] != local_dim:
            raise InputError(f"state: {kind} tensor {i} (site {i}) has local dimension "
                             f"{t.shape[1]}, expected {local_dim} {legs}; mpsobs handles "
                             f"spin-1/2 chains only")
        if i and arrs[i - 1].shape[2] != t.shape[0]:
            raise InputError(f"state: bond {i - 1}-{i} dimensions disagree "
                             f"({arrs[i - 1].shape[2]} vs {t.shape[0]})")
    if arrs[0].shape[0] != 1 or arrs[-1].shape[2] != 1:
        raise InputError(f"state: the outer bonds of an open-chain {kind} must have "
                         f"dimension 1")
    return arrs


def _validated(tensors) -> MPS:
    return MPS(_chain_tensors(tensors, 2, "MPS"))


def from_quimb(qmps) -> MPS:
    """Copy a quimb ``MatrixProductState`` (open boundaries, any gauge) into an MPS."""
    if getattr(qmps, "cyclic", False):
        raise InputError("state: periodic (cyclic) MPS are not supported; use open boundaries")
    L = qmps.L
    tensors = []
    for i in range(L):
        t = qmps[i]
        phys = qmps.site_ind(i)
        if phys not in t.inds:
            raise InputError(f"state: quimb tensor of site {i} has no physical index {phys!r}")
        left = qmps.bond(i - 1, i) if i > 0 else None
        right = qmps.bond(i, i + 1) if i < L - 1 else None
        order = [ix for ix in (left, phys, right) if ix is not None]
        data = np.asarray(t.transpose(*order).data)
        if left is None:
            data = data[None]
        if right is None:
            data = data[..., None]
        tensors.append(data)
    return _validated(tensors)


def to_quimb(mps: MPS):
    """A quimb ``MatrixProductState`` with the same tensors (shape convention 'lpr')."""
    import quimb.tensor as qtn

    arrays = [t for t in mps.tensors]
    if mps.L == 1:
        raise InputError("state: quimb needs at least two sites")
    arrays[0] = arrays[0][0]
    arrays[-1] = arrays[-1][..., 0]
    return qtn.MatrixProductState(arrays, shape="lpr")


def as_mps(state) -> MPS:
    """An MPS from an MPS, a quimb ``MatrixProductState`` or a list of (l, 2, r) arrays."""
    if isinstance(state, MPS):
        return state
    if hasattr(state, "site_ind") and hasattr(state, "L"):
        return from_quimb(state)
    if isinstance(state, list | tuple):
        return _validated(state)
    raise InputError(f"state: expected an mpsobs MPS, a quimb MatrixProductState or a list of "
                     f"(left, 2, right) arrays, got {type(state).__name__}")


def robust_svd(m: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Thin SVD that falls back to LAPACK's gesvd when the default gesdd does not
    converge (it occasionally fails on nearly degenerate spectra)."""
    try:
        return sla.svd(m, full_matrices=False, lapack_driver="gesdd", check_finite=False)
    except np.linalg.LinAlgError:
        return sla.svd(m, full_matrices=False, lapack_driver="gesvd", check_finite=False)


def right_canonical(mps: MPS, *, normalize: bool = False) -> MPS:
    """Right-canonical form by LQ sweeps from the right (no truncation). Cost L chi^3.

    The norm stays in the first tensor unless ``normalize``.
    """
    rc, log_norm = right_canonical_log_norm(mps)
    if normalize:
        return rc
    return MPS((rc.tensors[0] * np.exp(log_norm),) + rc.tensors[1:])


def right_canonical_log_norm(mps: MPS) -> tuple[MPS, float]:
    """The normalised right-canonical form and ln <psi|psi>^(1/2).

    The factor carried leftwards is rescaled at every site, so states whose norm
    over- or underflows a float (long chains of unnormalised tensors) come out right.
    Raises InputError for a zero or non-finite norm. Cost L chi^3.
    """
    tensors = list(mps.tensors)
    log_norm = 0.0
    for i in range(mps.L - 1, 0, -1):
        t = tensors[i]
        chl, d, chr_ = t.shape
        # A = L Q with Q having orthonormal rows: take QR of A^dagger.
        q, r = np.linalg.qr(t.reshape(chl, d * chr_).conj().T)
        scale = np.linalg.norm(r)
        if not np.isfinite(scale) or scale == 0:
            raise InputError(f"state: the MPS has norm {scale} (seen at site {i})")
        log_norm += np.log(scale)
        tensors[i] = q.conj().T.reshape(-1, d, chr_)
        tensors[i - 1] = np.tensordot(tensors[i - 1], r.conj().T / scale, axes=(2, 0))
    n = np.linalg.norm(tensors[0])
    if not np.isfinite(n) or n == 0:
        raise InputError(f"state: the MPS has norm {n}")
    tensors[0] = tensors[0] / n
    return MPS(tuple(tensors)), float(log_norm + np.log(n))


def norm(mps: MPS) -> float:
    """<psi|psi>^(1/2) by a transfer-matrix sweep. Cost L chi^3."""
    env = np.ones((1, 1), dtype=complex)
    for t in mps.tensors:
        env = np.einsum("ab,asc,bsd->cd", env, t.conj(), t, optimize=True)
    return float(np.sqrt(abs(env[0, 0])))


def bond_entropies(mps: MPS) -> np.ndarray:
    """Von Neumann entanglement entropy (nats) of every bond of a normalised state.

    Entry i is for the cut between sites i and i + 1 (length L - 1). Schmidt values come
    from a left-to-right SVD sweep of the right-canonical form. Cost L chi^3.
    """
    rc = right_canonical(mps, normalize=True)
    out = np.zeros(mps.L - 1)
    carry = rc.tensors[0]
    for i in range(mps.L - 1):
        chl, d, chr_ = carry.shape
        u, s, vh = robust_svd(carry.reshape(chl * d, chr_))
        p = s**2
        p = p[p > 1e-300] / p.sum()
        out[i] = float(-np.sum(p * np.log(p)))
        carry = np.tensordot(s[:, None] * vh, rc.tensors[i + 1], axes=(1, 0))
    return out


def from_dense(psi: np.ndarray, L: int | None = None, *, max_bond: int | None = None,
               cutoff: float = 0.0) -> MPS:
    """Exact (or truncated) MPS of a dense state vector by successive SVDs."""
    vec = np.asarray(psi, dtype=complex).reshape(-1)
    n = int(round(np.log2(vec.size)))
    if 2**n != vec.size or (L is not None and n != L):
        raise InputError(f"state: vector of length {vec.size} is not 2**L"
                         + (f" with L = {L}" if L is not None else ""))
    tensors = []
    rest = vec.reshape(1, -1)
    for _ in range(n - 1):
        chl = rest.shape[0]
        u, s, vh = robust_svd(rest.reshape(chl * 2, -1))
        keep = s > cutoff * s[0] if s.size else s > 0
        if max_bond is not None:
            keep[max_bond:] = False
        keep[0] = True
        u, s, vh = u[:, keep], s[keep], vh[keep]
        tensors.append(u.reshape(chl, 2, -1))
        rest = s[:, None] * vh
    tensors.append(rest.reshape(rest.shape[0], 2, 1))
    return MPS(tuple(tensors))


def to_dense(mps: MPS) -> np.ndarray:
    """The dense state vector (length 2**L); for checks at small L."""
    if mps.L > 24:
        raise InputError(f"state: to_dense is for L <= 24, not {mps.L}")
    out = mps.tensors[0].reshape(2, -1)
    for t in mps.tensors[1:]:
        out = np.tensordot(out, t, axes=(1, 0)).reshape(-1, t.shape[2])
    return out.reshape(-1)


def random_mps(L: int, bond: int, seed: int | np.random.SeedSequence | None = None) -> MPS:
    """A random normalised right-canonical MPS with bond dimension up to ``bond``
    (complex Gaussian tensors, then canonicalised)."""
    rng = np.random.default_rng(seed)
    dims = [1] + [min(bond, 2 ** min(i, L - i)) for i in range(1, L)] + [1]
    tensors = [rng.normal(size=(dims[i], 2, dims[i + 1]))
               + 1j * rng.normal(size=(dims[i], 2, dims[i + 1])) for i in range(L)]
    return right_canonical(MPS(tuple(tensors)), normalize=True)


def product_mps(site_states) -> MPS:
    """Bond-dimension-1 MPS of a product of normalised single-site vectors."""
    tensors = []
    for i, v in enumerate(site_states):
        v = np.asarray(v, dtype=complex).reshape(-1)
        if v.shape != (2,):
            raise InputError(f"state: site {i} vector must have 2 entries, got {v.shape}")
        nv = np.linalg.norm(v)
        if not np.isclose(nv, 1.0, atol=1e-10):
            raise InputError(f"state: site {i} vector is not normalised (norm {nv:.6g})")
        tensors.append(v.reshape(1, 2, 1))
    return MPS(tuple(tensors))


def right_canonical_defect(mps: MPS) -> float:
    """Largest deviation from a normalised right-canonical form: max over sites i > 0 of
    |sum_s A_s A_s^dagger - 1| (entrywise) and |(||A_0|| - 1)|. Cost L chi^3."""
    worst = abs(float(np.linalg.norm(mps.tensors[0])) - 1.0)
    for a in mps.tensors[1:]:
        m = a.reshape(a.shape[0], -1)
        worst = max(worst, float(np.max(np.abs(m @ m.conj().T - np.eye(a.shape[0])))))
    return worst
