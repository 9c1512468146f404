"""Block tensors of an MPS in a coarse-graining's readout basis, and the environment
contraction the MPS estimators are built from.

Conventions: MPS tensors are (chi_left, 2, chi_right), site 0 first (:mod:`mpsobs.mps`).
The sites ``start .. stop - 1`` of a block contract into T of shape (chi_left, 2**b,
chi_right), the block's first site being the most significant bit of the physical index
(as :mod:`mpsobs.coarse`). Rotating by the block's readout B (R, 2**b) gives one matrix per
readout row, A_r = sum_s B[r, s] T[:, s, :], stored as A[:, r, :] of shape
(chi_left, R, chi_right) with the rows sorted by outcome group.

Since sum_r B_r^dagger B_r = 1, the rotated tensors of a right-canonical MPS stay
right-canonical, sum_r A_r A_r^dagger = 1, so the right environment of every block is the
identity. A left environment E (positive chi x chi matrix) of an outcome prefix then
propagates as E <- sum_{r in outcome} A_r^dagger E A_r and the probability of the prefix is
Tr E (canonical forms and environments: U. Schollwoeck, Ann. Phys. 326, 96 (2011)).
With the right environment the identity, the probability that the block's outcome is i
given a prefix of environment E is Tr[E R_i] / Tr E with R_i = sum_{r in i} A_r A_r^dagger
(:func:`outcome_weights`, :func:`conditional_probabilities`).

For number-conserving states the rows can be re-chosen with a definite number each
(``readout_blocks(..., number_rows=True)``, :func:`number_definite_rows`), which
:mod:`mpsobs.estimators.charges` cuts into charge blocks.

Only the fields of :class:`ReadoutBlock` are used here: any number R of rows per block
(ancilla rows of a purification included) works the same way.

A purification (:class:`mpsobs.mps.PurifiedMPS`, local dimension 4 = physical x ancilla)
is handled the same way: the block contracts to (chi_left, 2**b, 2**b, chi_right)
(physical, ancilla), the readout rotates the physical leg, and every readout row r becomes
2**b rows (r, a), one per ancilla string a, in r's outcome group. Then
E <- sum_{r in outcome} sum_a A_{r,a}^dagger E A_{r,a} traces the ancilla inside every
environment update, and sum over all rows of A A^dagger = 1 still holds.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mpsobs.chain.coarse import BlockCoarseGraining
from mpsobs.mps.tensors import MPS, PurifiedMPS

__all__ = ["ReadoutBlock", "block_tensor", "readout_blocks", "number_definite_rows",
           "transfer", "transfer_flops", "outcome_weights", "conditional_probabilities",
           "WORK_BYTES"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

#: Working memory of one :func:`transfer` chunk (bytes of the intermediate product).
WORK_BYTES = 2**26
#: Relative size of the entries of a POVM element that may break number conservation
#: (round-off of the block diagonalisation), and of the eigenvalues dropped as empty.
NUMBER_TOL = 1e-10


@dataclass(frozen=True, eq=False)
class ReadoutBlock:
    """One block of an MPS contracted and rotated into its readout rows.

    ``tensor`` is (chi_left, R, chi_right), rows sorted by outcome; the rows of outcome j
    are ``offsets[j]:offsets[j + 1]``; ``row_outcome[r]`` is the outcome of row r;
    ``log_volumes[j]`` is ln V_j of the block's macrostate j; ``row_numbers[r]``, when
    not None, the definite number of sites in |1> of row r (see
    :func:`number_definite_rows`).
    """

    start: int
    stop: int
    tensor: np.ndarray
    offsets: np.ndarray
    row_outcome: np.ndarray
    log_volumes: np.ndarray
    row_numbers: np.ndarray | None = None

    @property
    def n_outcomes(self) -> int:
        return len(self.log_volumes)

    def __repr__(self) -> str:
        chl, rows, chr_ = self.tensor.shape
        return (f"ReadoutBlock(sites {self.start}..{self.stop - 1}, {self.n_outcomes} outcomes, "
                f"tensor {chl}x{rows}x{chr_})")

    def rows(self, outcome: int) -> np.ndarray:
        """Contiguous (chi_left, g, chi_right) copy of the g rows of one outcome."""
        lo, hi = self.offsets[outcome], self.offsets[outcome + 1]
        return np.ascontiguousarray(self.tensor[:, lo:hi, :])


def block_tensor(mps: MPS | PurifiedMPS, start: int, stop: int) -> np.ndarray:
    """Contract sites ``start .. stop - 1`` into (chi_left, d**b, chi_right) (local
    dimension d), the first site most significant. Cost chi^3 d**(b + 1)."""
    out = mps.tensors[start]
    for site in range(start + 1, stop):
        nxt = mps.tensors[site]
        out = np.tensordot(out, nxt, axes=(2, 0)).reshape(out.shape[0], -1, nxt.shape[2])
    return out


def number_definite_rows(readout: np.ndarray, group: np.ndarray
                         ) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """Readout rows of the same POVM elements, each row of a definite block number.

    Outcome j's POVM element M_j = sum_{r in j} B_r^dagger B_r is all the estimators use
    (the environment update sum_{r in j} A_r^dagger E A_r depends on the rows only
    through M_j). Where every M_j commutes with the block's number operator (off-sector
    entries below NUMBER_TOL relative), M_j is diagonalised inside each number sector and
    its rows become sqrt(w) v^dagger there (the rows of a basis state already are), so
    sum_{r in j} B_r^dagger B_r = M_j is kept to round-off. Returns (rows, outcome of
    each row, number of each row), or None if some M_j mixes numbers. Cost per outcome
    one eigendecomposition per number sector, at most D^3 (D = 2**b).
    """
    dim = readout.shape[1]
    numbers = np.array([bin(s).count("1") for s in range(dim)])
    big = np.abs(readout) > NUMBER_TOL * np.abs(readout).max(axis=1, keepdims=True)
    low = np.where(big, numbers, dim).min(axis=1)
    if np.all(np.where(big, numbers, -1).max(axis=1) == low):  # already definite
        return readout, group, low
    rows, groups, counts = [], [], []
    for j in np.unique(group):
        b = readout[group == j]
        povm = b.conj().T @ b
        scale = max(float(np.abs(povm).max()), 1e-300)
        if np.any(np.abs(povm[numbers[:, None] != numbers[None, :]]) > NUMBER_TOL * scale):
            return None
        for n in np.unique(numbers):
            sector = np.flatnonzero(numbers == n)
            w, v = np.linalg.eigh(povm[np.ix_(sector, sector)])
            keep = w > NUMBER_TOL * max(1.0, float(w.max()))
            block_rows = np.zeros((int(keep.sum()), dim), dtype=complex)
            block_rows[:, sector] = np.sqrt(w[keep])[:, None] * v[:, keep].conj().T
            rows.append(block_rows)
            groups.append(np.full(block_rows.shape[0], j))
            counts.append(np.full(block_rows.shape[0], n))
    return np.concatenate(rows), np.concatenate(groups), np.concatenate(counts)


def readout_blocks(mps: MPS | PurifiedMPS, coarse_graining: BlockCoarseGraining, *,
                   number_rows: bool = False) -> tuple[ReadoutBlock, ...] | None:
    """Every block of ``mps`` rotated by its readout (all blocks need one, i.e. blocks of
    at most :data:`mpsobs.coarse.MAX_BLOCK_SITES` sites); for a purification the ancilla
    strings are folded into the rows (module docstring).

    With ``number_rows`` the rows are first re-chosen with a definite number
    (:func:`number_definite_rows`, ``row_numbers`` set; an MPS only): None if some
    block's outcomes mix numbers.

    Cost per block chi^3 2**(b+1) + chi^2 R 2**b; memory 16 bytes x sum over blocks of
    chi_left R chi_right (R = 2**b for a single observable). A purification has 2**b
    times more rows: cost chi^3 4**(b+1) + chi^2 R 4**b, memory and row count x 2**b.
    """
    out = []
    for block in coarse_graining.blocks:
        readout, group, numbers = block.readout, block.group, None
        if number_rows:
            definite = number_definite_rows(readout, group)
            if definite is None:
                return None
            readout, group, numbers = definite
        order = np.argsort(group, kind="stable")
        readout = readout[order]
        row_outcome = group[order]
        offsets = np.searchsorted(row_outcome, np.arange(block.n_outcomes + 1))
        t = block_tensor(mps, block.start, block.stop)
        cl, cr = t.shape[0], t.shape[2]
        if isinstance(mps, PurifiedMPS):
            b = block.stop - block.start
            legs = t.reshape(cl, *(2,) * (2 * b), cr)  # s_0 a_0 s_1 a_1 ...
            phys, anc = list(range(1, 2 * b + 1, 2)), list(range(2, 2 * b + 2, 2))
            t = legs.transpose(0, *phys, *anc, 2 * b + 1).reshape(cl, 2**b, 2**b * cr)
            row_outcome, offsets = np.repeat(row_outcome, 2**b), offsets * 2**b
        rotated = np.tensordot(readout, t, axes=(1, 1))  # (R, chi_l, [ancilla x] chi_r)
        rows = rotated.transpose(1, 0, 2).reshape(cl, -1, cr)  # row index r 2**b + a
        out.append(ReadoutBlock(block.start, block.stop, np.ascontiguousarray(rows),
                                offsets, row_outcome, np.log(block.volumes),
                                None if numbers is None else numbers[order]))
    return tuple(out)


def transfer(envs: np.ndarray, rows: np.ndarray, out: np.ndarray | None = None,
             work: np.ndarray | None = None) -> np.ndarray:
    """sum_r A_r^dagger E_n A_r for a stack of environments.

    Parameters
    ----------
    envs : (n, l, l) stack of left environments E_n.
    rows : (l, g, c) the matrices A_r, r = 0 .. g-1 (one outcome's readout rows).
    out : optional C-contiguous (n, c, c) array for the result.
    work : optional flat complex scratch array for the intermediate product (its size
        sets the chunk; default WORK_BYTES). Reusing one saves fresh allocations.

    Returns
    -------
    (n, c, c) stack (``out`` if given). Two GEMMs per chunk of the stack,
    (n l, l) x (l, g c) and n times (c, l g) x (l g, c): 8 n g l c (l + c) real flops
    (:func:`transfer_flops`); chunks keep the intermediate below :data:`WORK_BYTES`. For
    right environments, pass the adjoint rows ``A.conj().transpose(2, 1, 0)`` to get
    sum_r A_r R A_r^dagger.
    """
    n, cl, _ = envs.shape
    _, g, cr = rows.shape
    flat = rows.reshape(cl, g * cr)
    adjoint = np.ascontiguousarray(rows.reshape(cl * g, cr).conj().T)
    if out is None:
        out = np.empty((n, cr, cr), dtype=complex)
    if work is None:
        work = np.empty(max(WORK_BYTES // 16, cl * g * cr), dtype=complex)
    chunk = max(1, work.size // (cl * g * cr))
    for lo in range(0, n, chunk):
        part = envs[lo:lo + chunk]
        m = part.shape[0]
        x = work[:m * cl * g * cr].reshape(m * cl, g * cr)
        np.matmul(part.reshape(m * cl, cl), flat, out=x)
        np.matmul(adjoint, x.reshape(m, cl * g, cr), out=out[lo:lo + m])
    return out


def transfer_flops(n: int, rows_shape: tuple[int, int, int]) -> float:
    """Real floating-point operations of :func:`transfer` on n environments."""
    cl, g, cr = rows_shape
    return 8.0 * n * g * cl * cr * (cl + cr)


def outcome_weights(block: ReadoutBlock) -> np.ndarray:
    """The matrices R_i = sum_{r in outcome i} A_r A_r^dagger of one block as the columns
    of a real (2 chi_l^2, outcomes) array W, for :func:`conditional_probabilities`.

    R_i is Hermitian, so Tr[E R_i] = sum_ab E_ab R_ba = Re sum_ab E_ab conj(R_ab): the
    real dot product of the interleaved (re, im) entries of E and of R_i, which is column
    i of W. Computed once per state: cost 8 chi_l^2 R chi_r flops (R rows); an outcome
    without rows has a zero column.
    """
    cl, n_rows, cr = block.tensor.shape
    weights = np.zeros((block.n_outcomes, cl, cl), dtype=complex)
    for j in range(block.n_outcomes):
        rows = block.rows(j).reshape(cl, -1)
        np.matmul(rows, rows.conj().T, out=weights[j])
    return np.ascontiguousarray(weights.view(np.float64).reshape(block.n_outcomes, -1).T)


def conditional_probabilities(envs: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """p(i | prefix) = Tr[E R_i] / sum_i Tr[E R_i] for a stack of environments.

    Parameters
    ----------
    envs : (n, l, l) complex stack of positive environments E (any trace).
    weights : (2 l^2, outcomes) from :func:`outcome_weights` of the next block (float32
        with a complex64 stack: the product is then taken in single precision and
        returned in double).

    Returns
    -------
    (n, outcomes) conditional distributions, one real matrix product (n, 2 l^2) x
    (2 l^2, outcomes): 4 n l^2 outcomes flops. Round-off negatives are set to 0 before
    the rows are normalised (their sum is Tr E, since sum_i R_i = 1).
    """
    n = envs.shape[0]
    envs = np.ascontiguousarray(envs)
    p = (envs.view(envs.real.dtype).reshape(n, -1) @ weights).astype(np.float64, copy=False)
    np.clip(p, 0.0, None, out=p)
    p /= p.sum(axis=1, keepdims=True)
    return p
