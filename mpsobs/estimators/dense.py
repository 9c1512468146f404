"""Exact observational entropy of dense states: the reference engine for small chains.

State vectors up to L = 14 and density matrices up to L = 10, for block
coarse-grainings (one observable or a sequence) and for general coarse-grainings given
as projectors on the whole space.

For block coarse-grainings each block's readout B_k (rows B_r with outcome groups, see
:mod:`mpsobs.coarse`) is applied to its legs: for a vector psi the fine amplitudes are
a = (B_1 x ... x B_m) psi and p(i) = sum over rows in groups i of |a|^2; for a density
matrix only the diagonal of (x B) rho (x B)^dagger is formed. Cost: O(2**L sum_k R_k)
for vectors, O(4**L sum_k R_k) for density matrices (R_k = rows of block k, = 2**b_k
for a single observable).
"""

from __future__ import annotations

import itertools

import numpy as np

from mpsobs.chain.coarse import BlockCoarseGraining, ProjectorCoarseGraining
from mpsobs.core.errors import InputError
from mpsobs.estimators.result import EntropyResult, entropy_from_distribution

__all__ = ["observational_entropy", "check_state", "von_neumann_entropy",
           "MAX_VECTOR_SITES", "MAX_DENSITY_SITES"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

MAX_VECTOR_SITES = 14
MAX_DENSITY_SITES = 10
#: Largest intermediate array (elements) the engine builds.
MAX_ELEMENTS = 2**27
NORM_TOL = 1e-8


def check_state(state: np.ndarray, dim: int | None = None) -> tuple[np.ndarray, bool]:
    """Validate a dense state; return it (vector 1-D, or matrix) and whether it is pure.

    A 1-D array or a (dim, 1) column is a state vector; a square array a density matrix
    (Hermitian, unit trace, positive semi-definite within 1e-10). A vector whose norm
    differs from 1 by more than NORM_TOL is refused, not rescaled: the same rule as for
    MPS states (:func:`mpsobs.estimate.canonical_state`).
    """
    arr = np.asarray(state)
    if not np.issubdtype(arr.dtype, np.number):
        raise InputError(f"state: expected a numeric array, got dtype {arr.dtype}")
    if arr.ndim == 2 and arr.shape[1] == 1 and arr.shape[0] > 1:
        arr = arr[:, 0]
    if arr.ndim == 1:
        pure = True
        n = arr.shape[0]
    elif arr.ndim == 2 and arr.shape[0] == arr.shape[1]:
        pure = False
        n = arr.shape[0]
    else:
        raise InputError(f"state: expected a vector (2**L,) or a density matrix (2**L, 2**L), "
                         f"got shape {arr.shape}")
    if dim is not None and n != dim:
        raise InputError(f"state: dimension {n} does not match the coarse-graining's {dim}")
    if not np.all(np.isfinite(arr)):
        raise InputError("state: contains NaN or infinite entries")
    if pure:
        norm = float(np.linalg.norm(arr))
        if abs(norm - 1.0) > NORM_TOL:
            raise InputError(f"state: not normalised (norm = {norm:.12g}); "
                             f"divide by np.linalg.norm(state)")
        return arr, True
    if not np.allclose(arr, arr.conj().T, atol=1e-10):
        raise InputError("state: the density matrix is not Hermitian")
    trace = float(np.trace(arr).real)
    if abs(trace - 1.0) > NORM_TOL:
        raise InputError(f"state: the density matrix does not have unit trace "
                         f"(trace = {trace:.12g})")
    lowest = float(np.linalg.eigvalsh(arr)[0])
    if lowest < -1e-10:
        raise InputError(f"state: the density matrix is not positive semi-definite "
                         f"(lowest eigenvalue {lowest:.3g})")
    return arr, False


def von_neumann_entropy(rho: np.ndarray) -> float:
    """S = -Tr rho ln rho from the eigenvalues (nats); 0 for a state vector."""
    arr = np.asarray(rho)
    if arr.ndim == 1 or arr.shape[1] == 1:
        return 0.0
    w = np.linalg.eigvalsh(arr)
    w = w[w > 1e-15]
    return float(-np.sum(w * np.log(w)))


def _check_size(tensor: np.ndarray) -> None:
    if tensor.size > MAX_ELEMENTS:
        raise InputError(f"coarse_graining: too many outcomes for the dense engine "
                         f"({tensor.size} intermediate elements, limit {MAX_ELEMENTS})")


def _block_probabilities(state: np.ndarray, pure: bool,
                         cg: BlockCoarseGraining) -> np.ndarray:
    """Tensor p[i_1, ..., i_m] of outcome-string probabilities."""
    dims = [b.dim for b in cg.blocks]
    m = len(dims)
    rows = [b.readout for b in cg.blocks]
    if any(r is None for r in rows):
        raise InputError("coarse_graining: blocks wider than the block-tensor limit are "
                         "evaluated on MPS states only")
    if pure:
        tensor = state.reshape(dims)
        for k, readout in enumerate(rows):
            tensor = np.moveaxis(np.tensordot(readout, tensor, axes=(1, k)), 0, k)
            _check_size(tensor)
        fine = np.abs(tensor) ** 2
    else:
        # Axes: rows of blocks done, kets of blocks to do, bras of blocks to do. For each
        # block only the diagonal sum_{a,b} B[r,a] conj(B[r,b]) rho[..a.., ..b..] is formed.
        tensor = state.reshape(dims + dims)
        for k, readout in enumerate(rows):
            left = m - k
            t = np.moveaxis(tensor, [k, k + left], [0, 1])
            rest = t.shape[2:]
            pair = (readout[:, :, None] * readout.conj()[:, None, :]).reshape(
                readout.shape[0], -1)
            t = (pair @ t.reshape(dims[k] ** 2, -1)).reshape((readout.shape[0],) + rest)
            tensor = np.moveaxis(t, 0, k)
            _check_size(tensor)
        fine = tensor.real
    probs = fine
    for k, block in enumerate(cg.blocks):
        indicator = np.zeros((block.readout.shape[0], block.n_outcomes))
        indicator[np.arange(block.readout.shape[0]), block.group] = 1.0
        probs = np.moveaxis(np.tensordot(probs, indicator, axes=(k, 0)), -1, k)
    return probs


def _block_entropy(state, pure, cg: BlockCoarseGraining) -> EntropyResult:
    probs = _block_probabilities(state, pure, cg)
    vols = np.ones(())
    for block in cg.blocks:
        vols = np.multiply.outer(vols, block.volumes)
    outcomes = np.array(list(np.ndindex(probs.shape)), dtype=np.int64).reshape(probs.size, -1)
    return entropy_from_distribution(probs.reshape(-1), vols.reshape(-1),
                                     max_entropy=cg.max_entropy, label=cg.label,
                                     algorithm="dense", outcomes=outcomes)


def _projector_entropy(state, pure, cg: ProjectorCoarseGraining) -> EntropyResult:
    """Enumerate outcome tuples of the sequence, dropping branches of zero volume."""
    dim = cg.dim
    branches = [((), np.eye(dim, dtype=complex))]
    for stage in cg.stages:
        nxt = []
        for (idx, kraus), (j, proj) in itertools.product(branches, enumerate(stage)):
            k = proj @ kraus
            if np.vdot(k, k).real > 1e-10:
                nxt.append((idx + (j,), k))
        branches = nxt
    probs, vols, outcomes = [], [], []
    for idx, k in branches:
        if pure:
            amp = k @ state
            probs.append(float(np.vdot(amp, amp).real))
        else:
            probs.append(float(np.trace(k @ state @ k.conj().T).real))
        vols.append(float(np.vdot(k, k).real))
        outcomes.append(idx)
    return entropy_from_distribution(np.array(probs), np.array(vols),
                                     max_entropy=cg.max_entropy, label=cg.label,
                                     algorithm="dense-projectors",
                                     outcomes=np.array(outcomes, dtype=np.int64))


def observational_entropy(state: np.ndarray,
                          coarse_graining: BlockCoarseGraining | ProjectorCoarseGraining
                          ) -> EntropyResult:
    """Exact S_obs of a dense state vector or density matrix.

    Parameters
    ----------
    state : vector of length 2**L (or a (2**L, 1) column), or a density matrix.
        Must be normalised; vectors up to L = 14 sites, density matrices up to L = 10.
    coarse_graining : from :func:`mpsobs.coarse.blocks`, :func:`mpsobs.coarse.sequence`
        or :func:`mpsobs.coarse.projectors`.
    """
    if not isinstance(coarse_graining, BlockCoarseGraining | ProjectorCoarseGraining):
        raise InputError(f"coarse_graining: expected a coarse-graining from mpsobs.coarse, "
                         f"got {type(coarse_graining).__name__}")
    arr, pure = check_state(state, coarse_graining.dim)
    n_sites = int(round(np.log2(coarse_graining.dim)))
    limit = MAX_VECTOR_SITES if pure else MAX_DENSITY_SITES
    if n_sites > limit:
        kind = "state vectors" if pure else "density matrices"
        raise InputError(f"state: the dense engine handles {kind} up to L = {limit}, "
                         f"not {n_sites}; use an MPS")
    if isinstance(coarse_graining, BlockCoarseGraining):
        return _block_entropy(arr, pure, coarse_graining)
    return _projector_entropy(arr, pure, coarse_graining)
