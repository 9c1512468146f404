"""Spin-1/2 chain Hamiltonians as lists of local terms, and what derives from them.

Conventions (open chain, L sites, local dimension 2, quimb's basis order: site 0 is the
most significant bit of a dense index, |0> has sigma^z = +1):

- XXZ:   H = J sum_i (Sx_i Sx_{i+1} + Sy_i Sy_{i+1} + delta Sz_i Sz_{i+1}) + sum_i h_i Sz_i,
  with spin operators S = sigma / 2 (XX is delta = 0). It conserves the number of sites
  in |1>.
- Ising: H = -J sum_i sz_i sz_{i+1} - g sum_i sx_i - h sum_i sz_i, with Pauli matrices.

A model is its list of local terms; block Hamiltonians, dense Hamiltonians, the MPO, the
bond Hamiltonians of the time evolution and the DMRG ground state derive from them.
Fields ``h`` (and ``g`` for Ising) may be a number or one value per site; the longitudinal
field ``h`` may also be shaped by :func:`field_values` (uniform, staggered, seeded random).
:func:`build` is the registry the spec layer calls.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Literal, get_args

import numpy as np
import scipy.sparse as sp

from mpsobs.core.errors import InputError, finite_number, integer, one_of, seed_value
from mpsobs.core.printing import number
from mpsobs.core.threads import limits_threads
from mpsobs.mps.tensors import MPS, as_mps, from_quimb, norm, product_mps, right_canonical, to_quimb

__all__ = ["Term", "Model", "xxz", "ising", "build", "MODELS", "field_values", "site_values",
           "FieldKind", "bond_hamiltonians", "mpo_tensors", "to_quimb_mpo", "expectation",
           "energy", "GroundState", "dmrg", "ground_state", "PAULI_X", "PAULI_Z", "SPIN_Z"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

logger = logging.getLogger(__name__)

PAULI_X = np.array([[0.0, 1.0], [1.0, 0.0]])
PAULI_Z = np.array([[1.0, 0.0], [0.0, -1.0]])
SPIN_Z = PAULI_Z / 2
_SPIN_FLIP = np.array([[0.0, 0.0, 0.0, 0.0],
                       [0.0, 0.0, 0.5, 0.0],
                       [0.0, 0.5, 0.0, 0.0],
                       [0.0, 0.0, 0.0, 0.0]])  # Sx Sx + Sy Sy on two sites

#: Largest chain for which :meth:`Model.dense_hamiltonian` builds a full matrix.
DENSE_MAX_SITES = 12

FieldKind = Literal["uniform", "staggered", "random"]


@dataclass(frozen=True, eq=False)
class Term:
    """One local term: ``matrix`` acts on the contiguous sites ``start .. start + width - 1``."""

    start: int
    matrix: np.ndarray

    @property
    def width(self) -> int:
        return int(np.log2(self.matrix.shape[0]))

    @property
    def stop(self) -> int:
        return self.start + self.width

    def __repr__(self) -> str:
        rows, cols = self.matrix.shape
        return f"Term(sites {self.start}..{self.stop - 1}, {rows}x{cols})"


@dataclass(frozen=True, eq=False)
class Model:
    """A chain Hamiltonian given by its local terms.

    Attributes
    ----------
    name : "xxz" or "ising".
    L : number of sites.
    params : the resolved parameters, for tables (fields as given: number or list).
    terms : the local terms; their sum is H.
    conserves_number : whether H commutes with the total number of sites in |1>.
    """

    name: str
    L: int
    params: Mapping[str, object]
    terms: tuple[Term, ...]
    conserves_number: bool
    energy_scale: float = field(default=1.0)

    def __repr__(self) -> str:
        shown = []
        for key, value in self.params.items():
            if value is None:
                continue
            if isinstance(value, list | tuple):
                value = f"[{len(value)} values]"
            elif not isinstance(value, str):
                value = number(value)
            shown.append(f"{key}={value}")
        number_note = "conserves number" if self.conserves_number else "number not conserved"
        return (f"Model({self.name}, L={self.L}, {', '.join(shown)}; {len(self.terms)} terms, "
                f"{number_note})")

    def block_hamiltonian(self, start: int, stop: int) -> np.ndarray:
        """Sum of the terms lying wholly inside sites ``start .. stop - 1``, as a dense
        (2**b, 2**b) matrix in the block's own basis (b = stop - start). Cost O(4**b)."""
        if not 0 <= start < stop <= self.L:
            raise InputError(f"block: sites [{start}, {stop}) are not inside 0..{self.L}")
        b = stop - start
        out = np.zeros((2**b, 2**b))
        for term in self.terms:
            if term.start >= start and term.stop <= stop:
                out += _embed(term.matrix, term.start - start, term.width, b, dense=True)
        return out

    def sparse_hamiltonian(self) -> sp.csr_matrix:
        """The whole H as a sparse (2**L, 2**L) matrix; for exact checks (L <= 16)."""
        if self.L > 16:
            raise InputError(f"L: a sparse Hamiltonian is built for L <= 16, not {self.L}")
        out = sp.csr_matrix((2**self.L, 2**self.L))
        for term in self.terms:
            out = out + _embed(term.matrix, term.start, term.width, self.L, dense=False)
        return out.tocsr()

    def dense_hamiltonian(self) -> np.ndarray:
        """The whole H as a dense (2**L, 2**L) array; L <= DENSE_MAX_SITES."""
        if self.L > DENSE_MAX_SITES:
            raise InputError(
                f"L: a dense Hamiltonian is built for L <= {DENSE_MAX_SITES}, not {self.L}")
        return self.sparse_hamiltonian().toarray()

    def restricted(self, start: int, stop: int) -> Model:
        """The model on the sub-chain ``start .. stop - 1`` alone (open ends): the terms
        lying wholly inside, shifted so that site ``start`` becomes site 0."""
        if not (isinstance(start, int | np.integer) and isinstance(stop, int | np.integer)
                and 0 <= start and start + 2 <= stop <= self.L):
            raise InputError(f"region: expected integer sites 0 <= start, start + 2 <= stop "
                             f"<= {self.L}, got [{start!r}, {stop!r})")
        terms = tuple(Term(t.start - start, t.matrix) for t in self.terms
                      if t.start >= start and t.stop <= stop)
        params = {**self.params, "region": [int(start), int(stop)]}
        return Model(self.name, int(stop - start), params, terms, self.conserves_number,
                     self.energy_scale)


def _embed(matrix: np.ndarray, start: int, width: int, n_sites: int, *, dense: bool):
    """kron(1_left, matrix, 1_right) on ``n_sites`` sites, site 0 most significant."""
    left, right = 2**start, 2 ** (n_sites - start - width)
    if dense:
        return np.kron(np.kron(np.eye(left), matrix), np.eye(right))
    return sp.kron(sp.kron(sp.identity(left), sp.csr_matrix(matrix)), sp.identity(right))


def site_values(value: float | Sequence[float], L: int, name: str) -> np.ndarray:
    """A per-site parameter as an array of length L (a number means the same on every site).
    Real numbers only: strings and booleans are refused, not converted."""
    try:
        raw = np.asarray(value)
    except (TypeError, ValueError):
        raw = np.asarray(None)
    if raw.dtype.kind not in "iuf":
        raise InputError(f"{name}: expected a number or {L} numbers, got {value!r}")
    arr = raw.astype(float)
    if not np.all(np.isfinite(arr)):
        raise InputError(f"{name}: values must be finite, got {value!r}")
    if arr.ndim == 0:
        return np.full(L, float(arr))
    if arr.shape != (L,):
        raise InputError(f"{name}: expected a number or {L} values (one per site), "
                         f"got shape {arr.shape}")
    return arr


def field_values(kind: FieldKind, strength: float, L: int,
                 seed: int | np.random.SeedSequence | None = None) -> np.ndarray:
    """A per-site field of the given shape.

    ``"uniform"``: strength on every site; ``"staggered"``: strength * (-1)**i;
    ``"random"``: independent uniform values in [-strength, strength] drawn from
    ``np.random.default_rng(seed)`` (a seed is required, so the field is reproducible).
    """
    one_of(kind, "field", get_args(FieldKind))
    L = integer(L, "L", 1)
    strength = finite_number(strength, "strength")
    if kind == "uniform":
        return np.full(L, strength)
    if kind == "staggered":
        return strength * (-1.0) ** np.arange(L)
    if seed is None:
        raise InputError("seed: a random field needs an integer seed >= 0 (or SeedSequence)")
    return np.random.default_rng(seed).uniform(-strength, strength, size=L)


def _check_length(L: int) -> int:
    return integer(L, "L", 2)


def _as_param(value) -> object:
    arr = np.asarray(value, dtype=float)
    return float(arr) if arr.ndim == 0 else arr.tolist()


def _longitudinal(h, L: int, kind: FieldKind, seed) -> tuple[np.ndarray, dict]:
    """The per-site longitudinal field and its table parameters."""
    one_of(kind, "field", get_args(FieldKind))
    if seed is not None:
        seed = seed_value(seed)
    if kind == "uniform":
        values = site_values(h, L, "h")
    elif np.ndim(h) != 0:
        raise InputError(f"h: with field={kind!r}, h is the field strength (a number), "
                         f"not per-site values")
    else:
        values = field_values(kind, finite_number(h, "h"), L, seed)
    seed_param = int(seed) if isinstance(seed, int | np.integer) else None
    return values, {"h": _as_param(h), "field": kind, "seed": seed_param}


def xxz(L: int, J: float = 1.0, delta: float = 1.0, h: float | Sequence[float] = 0.0, *,
        field: FieldKind = "uniform", seed: int | None = None) -> Model:
    """The XXZ chain, H = J sum (SxSx + SySy + delta SzSz) + sum h_i Sz_i, S = sigma/2.

    ``h`` is a number or per-site values; with ``field="staggered"`` or ``"random"`` it is
    the strength given to :func:`field_values` (with ``seed``).
    """
    L = _check_length(L)
    J, delta = finite_number(J, "J"), finite_number(delta, "delta")
    fields, field_params = _longitudinal(h, L, field, seed)
    bond = J * (_SPIN_FLIP + delta * np.kron(SPIN_Z, SPIN_Z))
    terms = [Term(i, bond) for i in range(L - 1)]
    terms += [Term(i, fields[i] * SPIN_Z) for i in range(L) if fields[i] != 0.0]
    scale = max(abs(J), abs(J * delta), float(np.max(np.abs(fields))), 1e-300)
    return Model("xxz", L, {"J": J, "delta": delta, **field_params}, tuple(terms),
                 conserves_number=True, energy_scale=scale)


def ising(L: int, J: float = 1.0, g: float | Sequence[float] = 1.0,
          h: float | Sequence[float] = 0.0, *, field: FieldKind = "uniform",
          seed: int | None = None) -> Model:
    """The Ising chain, H = -J sum sz sz - g sum sx - h sum sz (Pauli matrices).

    ``g`` is a number or per-site values; ``h`` as in :func:`xxz` (shaped by ``field``).
    """
    L = _check_length(L)
    J = finite_number(J, "J")
    gs = site_values(g, L, "g")
    hs, field_params = _longitudinal(h, L, field, seed)
    terms = [Term(i, -J * np.kron(PAULI_Z, PAULI_Z)) for i in range(L - 1)]
    terms += [Term(i, -gs[i] * PAULI_X - hs[i] * PAULI_Z) for i in range(L)
              if gs[i] != 0.0 or hs[i] != 0.0]
    scale = max(abs(J), float(np.max(np.abs(gs))), float(np.max(np.abs(hs))), 1e-300)
    conserves = bool(np.all(gs == 0.0))
    return Model("ising", L, {"J": J, "g": _as_param(g), **field_params}, tuple(terms),
                 conserves_number=conserves, energy_scale=scale)


#: Registry of model builders: name -> (builder, allowed parameters).
MODELS = {
    "xxz": (xxz, ("J", "delta", "h", "field", "seed")),
    "ising": (ising, ("J", "g", "h", "field", "seed")),
}


def build(name: str, L: int, **params) -> Model:
    """The model ``name`` on L sites with the given parameters (the spec layer's entry).

    Raises InputError naming the model or parameter and listing the allowed ones.
    """
    if name not in MODELS:
        raise InputError(f"model: unknown model {name!r}; allowed: {', '.join(sorted(MODELS))}")
    builder, allowed = MODELS[name]
    unknown = sorted(set(params) - set(allowed))
    if unknown:
        raise InputError(f"model.{unknown[0]}: unknown parameter of model {name!r}; "
                         f"allowed: {', '.join(allowed)}")
    return builder(L, **params)


# ---------------------------------------------------------------- derived operators


def _site_and_bond_terms(model: Model) -> tuple[list[np.ndarray], list[np.ndarray]]:
    """The model's terms summed per site (L (2, 2) arrays) and per bond (L - 1 (4, 4))."""
    sites = [np.zeros((2, 2)) for _ in range(model.L)]
    bonds = [np.zeros((4, 4)) for _ in range(model.L - 1)]
    for term in model.terms:
        if term.width == 1:
            sites[term.start] = sites[term.start] + term.matrix
        elif term.width == 2:
            bonds[term.start] = bonds[term.start] + term.matrix
        else:
            raise InputError(f"model: terms on {term.width} sites are not supported by the "
                             f"MPO and the time evolution (nearest-neighbour terms only)")
    return sites, bonds


def bond_hamiltonians(model: Model) -> list[np.ndarray]:
    """Bond Hamiltonians h_b (4, 4) on sites (b, b + 1), b = 0 .. L - 2, with
    sum_b h_b = H: each bond carries its two-site terms, an on-site term of an inner site
    is split equally between its two bonds, and the end sites' terms go to the end bonds.
    Basis of h_b: site b is the most significant bit."""
    sites, bonds = _site_and_bond_terms(model)
    eye = np.eye(2)
    out = []
    for b, h in enumerate(bonds):
        w_left = 1.0 if b == 0 else 0.5
        w_right = 1.0 if b == model.L - 2 else 0.5
        out.append(h + w_left * np.kron(sites[b], eye) + w_right * np.kron(eye, sites[b + 1]))
    return out


def mpo_tensors(model: Model) -> list[np.ndarray]:
    """The MPO of H as arrays W_i of shape (w_left, w_right, 2, 2), indices
    (left bond, right bond, output spin, input spin); w = 1 at the outer ends.

    Finite-state construction (fact of the trade): bond state 0 = "no term yet",
    state r + 1 = "term complete", states 1..r carry the r operator pairs of a two-site
    term split by an operator Schmidt decomposition. Bond dimension r + 2 (XXZ 5, Ising 3).
    """
    sites, bonds = _site_and_bond_terms(model)
    pairs = []  # per bond: list of (A_k, B_k) with term = sum_k kron(A_k, B_k)
    for h in bonds:
        m = h.reshape(2, 2, 2, 2).transpose(0, 2, 1, 3).reshape(4, 4)
        u, s, vh = np.linalg.svd(m)
        keep = s > 1e-14 * max(s[0], 1e-300)
        pairs.append([((u[:, k] * np.sqrt(s[k])).reshape(2, 2),
                       (np.sqrt(s[k]) * vh[k]).reshape(2, 2)) for k in np.flatnonzero(keep)])
    r = max((len(p) for p in pairs), default=0)
    w, done = r + 2, r + 1
    eye = np.eye(2)
    out = []
    for i in range(model.L):
        W = np.zeros((w, w, 2, 2), dtype=complex)
        W[0, 0] = W[done, done] = eye
        W[0, done] = sites[i]
        if i < model.L - 1:
            for k, (a, _) in enumerate(pairs[i]):
                W[0, 1 + k] = a
        if i > 0:
            for k, (_, b) in enumerate(pairs[i - 1]):
                W[1 + k, done] = b
        if i == 0:
            W = W[:1]
        if i == model.L - 1:
            W = W[:, done:]
        out.append(W)
    return out


def to_quimb_mpo(tensors: Sequence[np.ndarray]):
    """A quimb ``MatrixProductOperator`` (shape 'lrud', upper = output) of MPO arrays."""
    import quimb.tensor as qtn

    arrays = list(tensors)
    arrays[0] = arrays[0][0]
    arrays[-1] = arrays[-1][:, 0]
    return qtn.MatrixProductOperator(arrays, shape="lrud")


def expectation(tensors: Sequence[np.ndarray], state) -> complex:
    """<psi|O|psi> / <psi|psi> for the MPO ``tensors`` (see :func:`mpo_tensors`) and an
    MPS (any gauge). Cost L chi^3 w."""
    mps = as_mps(state)
    if len(tensors) != mps.L:
        raise InputError(f"state: {mps.L} sites, but the operator has {len(tensors)}")
    env = np.ones((1, 1, 1), dtype=complex)  # (bra bond, mpo bond, ket bond)
    for A, W in zip(mps.tensors, tensors, strict=True):
        t = np.tensordot(env, A, axes=(2, 0))                 # a x s d
        t = np.tensordot(t, W, axes=([1, 2], [0, 3]))         # a d y o
        env = np.tensordot(A.conj(), t, axes=([0, 1], [0, 3]))  # c d y
        env = env.transpose(0, 2, 1)
    return complex(env[0, 0, 0]) / norm(mps) ** 2


def energy(model: Model, state) -> float:
    """<psi|H|psi> / <psi|psi> of an MPS (or quimb MPS) through the MPO. Cost L chi^3 w."""
    mps = as_mps(state)
    if mps.L != model.L:
        raise InputError(f"state: {mps.L} sites, but the model has L = {model.L}")
    return float(expectation(mpo_tensors(model), mps).real)


# ---------------------------------------------------------------- ground states


@dataclass(frozen=True, eq=False)
class GroundState:
    """A DMRG ground state.

    Attributes
    ----------
    state : the MPS, right-canonical and normalised.
    energy : <psi|H|psi> of ``state``.
    converged : whether the energy changed by less than ``tol`` over the last sweep.
    sweeps : number of sweeps done.
    energy_change : |E(last sweep) - E(sweep before)|, the convergence indicator.
    energies : the energy after every sweep.
    """

    state: MPS
    energy: float
    converged: bool
    sweeps: int
    energy_change: float
    energies: tuple[float, ...]

    def __repr__(self) -> str:
        status = "converged" if self.converged else "NOT converged"
        return (f"GroundState(E={number(self.energy)}, {status} after {self.sweeps} sweeps "
                f"(last change {self.energy_change:.2g}), {self.state!r})")


@limits_threads(lambda call: call.arguments["max_bond"])
def dmrg(tensors: Sequence[np.ndarray], *, max_bond: int, cutoff: float, initial: MPS,
         tol: float = 1e-10, max_sweeps: int = 30) -> GroundState:
    """Two-site DMRG (quimb's DMRG2) for the MPO ``tensors`` from the state ``initial``.

    Bond dimension ramps 8, 16, ... up to ``max_bond``; singular values are dropped while
    their squared sum stays below ``cutoff`` (quimb's "sum2" on the normalised state:
    the rule of :mod:`mpsobs.mps.truncation`). Sweeps alternate right and left until the
    energy changes by less than ``tol``. DMRG: Phys. Rev. Lett. 69, 2863 (1992).
    """
    import quimb.tensor as qtn

    max_bond = integer(max_bond, "max_bond", 1)
    cutoff = finite_number(cutoff, "cutoff")
    if not 0.0 <= cutoff < 1.0:
        raise InputError(f"cutoff: expected 0 <= cutoff < 1, got {cutoff!r}")
    if finite_number(tol, "tol") <= 0:
        raise InputError(f"tol: expected a positive number, got {tol!r}")
    max_sweeps = integer(max_sweeps, "max_sweeps", 1)
    ramp = [b for b in (8, 16, 32, 64, 128, 256, 512) if b < max_bond] + [int(max_bond)]
    solver = qtn.DMRG2(to_quimb_mpo(tensors), bond_dims=ramp, cutoffs=max(cutoff, 1e-16),
                       p0=to_quimb(initial))
    # local eigen-solves need not be much tighter than the sweep-to-sweep tolerance
    solver.opts["local_eig_tol"] = min(1e-3, max(1e3 * tol, 1e-8))
    converged = bool(solver.solve(tol=tol, max_sweeps=max_sweeps, sweep_sequence="RL"))
    energies = tuple(float(np.real(e)) for e in solver.energies)
    change = abs(energies[-1] - energies[-2]) if len(energies) > 1 else float("inf")
    if not converged:
        logger.warning("DMRG did not converge in %d sweeps (last energy change %.3g)",
                       len(energies), change)
    state = right_canonical(from_quimb(solver.state), normalize=True)
    return GroundState(state, float(expectation(tensors, state).real), converged,
                       len(energies), change, energies)


def ground_state(model: Model, max_bond: int = 64, cutoff: float = 1e-12, *,
                 tol: float = 1e-10, max_sweeps: int = 30,
                 initial: MPS | None = None, seed: int = 0) -> GroundState:
    """The ground state of ``model`` by two-site DMRG (see :func:`dmrg`).

    The start is ``initial`` or, by default, the product state with every site in
    (|0> + |1>)/sqrt(2) slightly randomised by ``seed`` (so no symmetry sector is
    excluded). Cost per sweep L chi^3 w d^2.
    """
    if not isinstance(model, Model):
        raise InputError(f"model: expected an mpsobs.models.Model, got {type(model).__name__}")
    if initial is None:
        rng = np.random.default_rng(seed_value(seed))
        vecs = 1.0 + 0.1 * rng.normal(size=(model.L, 2))
        initial = product_mps(vecs / np.linalg.norm(vecs, axis=1, keepdims=True))
    initial = as_mps(initial)
    if initial.L != model.L:
        raise InputError(f"initial: {initial.L} sites, but the model has L = {model.L}")
    return dmrg(mpo_tensors(model), max_bond=max_bond, cutoff=cutoff, initial=initial,
                tol=tol, max_sweeps=max_sweeps)
