"""The generalised Gibbs ensemble (GGE) of an XX chain and its entropy.

Integrable free-fermion chains relax to the ensemble fixed by the conserved occupations
n_k of their single-particle modes rather than to the Gibbs ensemble; its entropy is
sum_k h(n_k), h(x) = -x ln x - (1 - x) ln(1 - x), in nats, exact. The modes and
occupations come from :mod:`mpsobs.references.gaussian` (H = sum_k eps_k n_k + offset,
the same H as :mod:`mpsobs.chain.models`, Jordan-Wigner constants included).

Cost: O(L^3) for the modes, plus O(L^2 chi^3) for the correlation matrix of an MPS.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mpsobs.chain.models import Model
from mpsobs.core.errors import InputError
from mpsobs.core.printing import number
from mpsobs.mps.tensors import MPS, as_mps
from mpsobs.references import gaussian
from mpsobs.references.free_fermion_gibbs import occupation_entropy

__all__ = ["GGEResult", "gge"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports


@dataclass(frozen=True, eq=False)
class GGEResult:
    """Generalised Gibbs ensemble of a free-fermion chain fixed by the conserved mode
    occupations of a state: ``entropy`` = sum_k h(occupations_k), h(x) = -x ln x -
    (1 - x) ln(1 - x) (nats, exact: ``entropy_err`` = 0); ``energies`` the
    single-particle energies of the modes; ``energy`` and ``number`` of the ensemble
    (equal to the state's); ``correlation`` its correlation matrix C_ij = <c_i^dagger c_j>,
    the state's with the coherences between modes of different energies removed (its
    infinite-time average)."""

    entropy: float
    entropy_err: float
    occupations: np.ndarray
    energies: np.ndarray
    energy: float
    number: float
    correlation: np.ndarray

    def __repr__(self) -> str:
        return (f"GGEResult(S = {number(self.entropy)} nats (exact), {len(self.occupations)} "
                f"modes, E = {number(self.energy)}, N = {number(self.number)})")


def gge(model: Model, state) -> GGEResult:
    """The generalised Gibbs ensemble of an XX chain fixed by a state's conserved mode
    occupations, and its entropy sum_k h(n_k) (nats).

    ``state`` is a correlation matrix C_ij = <c_i^dagger c_j> (an (L, L) array), an MPS
    (mpsobs, quimb or a list of arrays; C is computed at O(L^2 chi^3)) or a 0/1 pattern of
    a computational-basis product state (a sequence of L ints). Integrable free-fermion
    chains relax to this ensemble rather than to Gibbs; its entropy is at most the grand
    Gibbs entropy at the same energy and number (maximum entropy under more constraints).
    Cost O(L^3) besides C.
    """
    ham = gaussian.quadratic_hamiltonian(model)
    corr = _state_correlation(state, model.L)
    occ = gaussian.mode_occupations(ham, corr)
    eps = ham.energies
    level = np.cumsum(np.concatenate([[0], np.diff(eps) > 1e-9 * max(1.0, np.abs(eps).max())]))
    in_modes = ham.modes.T @ corr @ ham.modes.conj()
    in_modes[level[:, None] != level[None, :]] = 0.0
    dephased = ham.modes.conj() @ in_modes @ ham.modes.T
    return GGEResult(float(np.sum(occupation_entropy(occ))), 0.0, occ, eps,
                     float(ham.offset + np.dot(eps, occ)), float(occ.sum()), dephased)


def _state_correlation(state, L: int) -> np.ndarray:
    if isinstance(state, np.ndarray) and state.ndim == 2:
        corr = state
    elif isinstance(state, MPS) or hasattr(state, "site_ind") or (
            isinstance(state, list | tuple) and len(state) and np.ndim(state[0]) == 3):
        corr = gaussian.correlation_matrix(as_mps(state))
    else:
        corr = gaussian.product_correlation(state)
    if corr.shape != (L, L):
        raise InputError(f"state: it has {corr.shape[0]} sites, the model L = {L}")
    return corr
