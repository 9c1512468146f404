"""Spin-1/2 chain Hamiltonians as lists of local terms.

Conventions (open chain, L sites, local dimension 2, quimb's basis order: site 0 is the
most significant bit of a dense index, |0> has sigma^z = +1):

- XXZ:   H = J sum_i (Sx_i Sx_{i+1} + Sy_i Sy_{i+1} + delta Sz_i Sz_{i+1}) + sum_i h_i Sz_i,
  with spin operators S = sigma / 2 (XX is delta = 0). It conserves the number of sites
  in |1>.
- Ising: H = -J sum_i sz_i sz_{i+1} - g sum_i sx_i - h sum_i sz_i, with Pauli matrices.

A model is its list of local terms; block Hamiltonians and dense Hamiltonians derive from
them, and so do the gates of the time evolution. Fields ``h`` (and ``g`` for Ising) may
be a number or one value per site.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from mpsobs.errors import InputError

__all__ = ["Term", "Model", "xxz", "ising", "PAULI_X", "PAULI_Z", "SPIN_Z"]

PAULI_X = np.array([[0.0, 1.0], [1.0, 0.0]])
PAULI_Z = np.array([[1.0, 0.0], [0.0, -1.0]])
SPIN_Z = PAULI_Z / 2
_SPIN_FLIP = np.array([[0.0, 0.0, 0.0, 0.0],
                       [0.0, 0.0, 0.5, 0.0],
                       [0.0, 0.5, 0.0, 0.0],
                       [0.0, 0.0, 0.0, 0.0]])  # Sx Sx + Sy Sy on two sites

#: Largest chain for which :meth:`Model.dense_hamiltonian` builds a full matrix.
DENSE_MAX_SITES = 12


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


def _embed(matrix: np.ndarray, start: int, width: int, n_sites: int, *, dense: bool):
    """kron(1_left, matrix, 1_right) on ``n_sites`` sites, site 0 most significant."""
    left, right = 2**start, 2 ** (n_sites - start - width)
    if dense:
        return np.kron(np.kron(np.eye(left), matrix), np.eye(right))
    return sp.kron(sp.kron(sp.identity(left), sp.csr_matrix(matrix)), sp.identity(right))


def site_values(value: float | Sequence[float], L: int, name: str) -> np.ndarray:
    """A per-site parameter as an array of length L (a number means the same on every site)."""
    arr = np.asarray(value, dtype=float)
    if arr.ndim == 0:
        return np.full(L, float(arr))
    if arr.shape != (L,):
        raise InputError(f"{name}: expected a number or {L} values (one per site), "
                         f"got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise InputError(f"{name}: values must be finite")
    return arr


def _check_length(L: int) -> None:
    if not isinstance(L, int | np.integer) or L < 2:
        raise InputError(f"L: expected an integer >= 2, got {L!r}")


def _scalar(value: float, name: str) -> float:
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected a number, got {value!r}") from None
    if not np.isfinite(out):
        raise InputError(f"{name}: expected a finite number, got {value!r}")
    return out


def _as_param(value) -> object:
    arr = np.asarray(value, dtype=float)
    return float(arr) if arr.ndim == 0 else arr.tolist()


def xxz(L: int, J: float = 1.0, delta: float = 1.0,
        h: float | Sequence[float] = 0.0) -> Model:
    """The XXZ chain, H = J sum (SxSx + SySy + delta SzSz) + sum h_i Sz_i, S = sigma/2."""
    _check_length(L)
    J, delta = _scalar(J, "J"), _scalar(delta, "delta")
    fields = site_values(h, L, "h")
    bond = J * (_SPIN_FLIP + delta * np.kron(SPIN_Z, SPIN_Z))
    terms = [Term(i, bond) for i in range(L - 1)]
    terms += [Term(i, fields[i] * SPIN_Z) for i in range(L) if fields[i] != 0.0]
    scale = max(abs(J), abs(J * delta), float(np.max(np.abs(fields))), 1e-300)
    return Model("xxz", L, {"J": J, "delta": delta, "h": _as_param(h)}, tuple(terms),
                 conserves_number=True, energy_scale=scale)


def ising(L: int, J: float = 1.0, g: float | Sequence[float] = 1.0,
          h: float | Sequence[float] = 0.0) -> Model:
    """The Ising chain, H = -J sum sz sz - g sum sx - h sum sz (Pauli matrices)."""
    _check_length(L)
    J = _scalar(J, "J")
    gs, hs = site_values(g, L, "g"), site_values(h, L, "h")
    terms = [Term(i, -J * np.kron(PAULI_Z, PAULI_Z)) for i in range(L - 1)]
    terms += [Term(i, -gs[i] * PAULI_X - hs[i] * PAULI_Z) for i in range(L)
              if gs[i] != 0.0 or hs[i] != 0.0]
    scale = max(abs(J), float(np.max(np.abs(gs))), float(np.max(np.abs(hs))), 1e-300)
    conserves = bool(np.all(gs == 0.0))
    return Model("ising", L, {"J": J, "g": _as_param(g), "h": _as_param(h)}, tuple(terms),
                 conserves_number=conserves, energy_scale=scale)
