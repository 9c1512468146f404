"""Block estimators on the charge blocks of a number-conserving MPS.

Conventions as :mod:`mpsobs.estimators.blocktensors`. A right-canonical MPS has
*definite bond charges* when every bond basis state a has a definite number q_a of sites
in |1> to its left: then A[a, s, b] != 0 only if q_b = q_a + s
(:func:`mpsobs.mps.charges.bond_charges` reads them off the tensors). With readout rows
of definite number c_r (:func:`mpsobs.estimators.blocktensors.number_definite_rows`) a
block's row matrix A_r maps charge q to q + c_r only, so a left environment, built from
sums of A_r^dagger E A_r starting from the 1 x 1 environment of charge 0, is block diagonal in the
bond charge, E = sum_q E[q], and

    E'[q + c] += A_{r}[q, q + c]^dagger E[q] A_{r}[q, q + c]     (rows r of count c),
    p(i | prefix) = sum_q Tr[E[q] R_i[q]],  R_i[q] = sum_{r in i} A_r[q, :] A_r[q, :]^dagger.

A prefix of number outcomes fixes the charge (one block of d_q x d_q instead of
chi x chi); energy outcomes of a number-conserving model may join a few numbers (a few
blocks). Environments are kept in *groups* of samples (or enumerated prefixes) that
share their set of charges, one stack per charge, so the contractions stay batched.
The cost of a transfer falls from 16 g chi^3 to sum over the live charges of
8 g d_q d_q' (d_q + d_q') flops. The values are those of the dense environments of
:mod:`mpsobs.estimators.estimate` up to round-off: the same conditionals, hence the same
draws from the same uniforms except where a uniform falls within round-off of a
cumulative probability. Charge-conserving MPS and symmetric tensors: S. Singh, R. N. C.
Pfeifer, G. Vidal, Phys. Rev. B 83, 115125 (2011) (from memory).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from mpsobs.core.printing import short
from mpsobs.estimators.blocktensors import WORK_BYTES, ReadoutBlock, transfer, transfer_flops

__all__ = ["ChargedBlock", "charged_blocks", "Group", "start_group", "merge",
           "work_buffer"]

@dataclass(frozen=True, eq=False)
class ChargedBlock:
    """A :class:`ReadoutBlock` cut into charge blocks.

    ``parts[(q, j)]`` lists, for left charge q and outcome j, the pairs (q + c, rows)
    with rows the contiguous (d_q, g, d_{q+c}) sub-tensor of the outcome's rows of count
    c; ``weights[q]`` is the real (2 d_q^2, outcomes) array of the R_i[q] (as
    :func:`mpsobs.estimators.blocktensors.outcome_weights`); ``block`` is the dense one.
    """

    block: ReadoutBlock
    parts: dict
    weights: dict

    def __repr__(self) -> str:
        b = self.block
        return (f"ChargedBlock(sites {b.start}..{b.stop - 1}, {b.n_outcomes} outcomes, "
                f"{len(self.weights)} left charges)")


def _charged_block(block: ReadoutBlock, left: np.ndarray, right: np.ndarray) -> ChargedBlock:
    parts, weights = {}, {}
    right_index = {q: np.flatnonzero(right == q) for q in np.unique(right).tolist()}
    for q in np.unique(left).tolist():
        rows_q = np.flatnonzero(left == q)
        w = np.zeros((block.n_outcomes, rows_q.size, rows_q.size), dtype=complex)
        for j in range(block.n_outcomes):
            lo, hi = block.offsets[j], block.offsets[j + 1]
            counts = block.row_numbers[lo:hi]
            pieces = []
            for c in np.unique(counts).tolist():
                cols = right_index.get(q + c)
                if cols is None:
                    continue
                sub = np.ascontiguousarray(
                    block.tensor[np.ix_(rows_q, lo + np.flatnonzero(counts == c), cols)])
                flat = sub.reshape(rows_q.size, -1)
                w[j] += flat @ flat.conj().T
                pieces.append((q + c, sub))
            parts[(q, j)] = pieces
        weights[q] = np.ascontiguousarray(w.view(np.float64).reshape(block.n_outcomes, -1).T)
    return ChargedBlock(block, parts, weights)


def charged_blocks(blocks: Sequence[ReadoutBlock], charges: list[np.ndarray]
                   ) -> tuple[ChargedBlock, ...]:
    """The blocks (rows of definite number, ``row_numbers`` set) cut by the bond
    ``charges`` of :func:`bond_charges`. Memory about that of the dense blocks."""
    return tuple(_charged_block(b, charges[b.start], charges[b.stop]) for b in blocks)


class Group:
    """Unit-trace block-diagonal environments of ``m`` members sharing their charges:
    ``envs[q]`` is the (m, d_q, d_q) stack of charge q; ``members`` the members' ids."""

    def __init__(self, envs: dict, members: np.ndarray):
        self.envs = envs
        self.members = members

    def __repr__(self) -> str:
        sizes = ", ".join(f"{q}: {e.shape[1]}" for q, e in sorted(self.envs.items()))
        return f"Group({self.members.size} members, charge: block size {{{short(sizes, 200)}}})"

    @property
    def key(self) -> tuple[int, ...]:
        return tuple(sorted(self.envs))

    def probabilities(self, cb: ChargedBlock) -> np.ndarray:
        """(m, outcomes) conditional distributions of the next block: sum_q of one real
        matrix product each (4 m d_q^2 outcomes flops)."""
        m = self.members.size
        p = sum(np.ascontiguousarray(e).view(np.float64).reshape(m, -1) @ cb.weights[q]
                for q, e in self.envs.items())
        np.clip(p, 0.0, None, out=p)
        p /= p.sum(axis=1, keepdims=True)
        return p

    def child(self, cb: ChargedBlock, outcome: int, select: np.ndarray | None,
              work: np.ndarray) -> tuple[Group, np.ndarray, float]:
        """The members (or the ``select`` subset) advanced by the rows of ``outcome``:
        (group, trace of each member's new environment before renormalisation, flops).
        A member whose outcome has no weight gets trace 0 (and an empty or zero
        environment)."""
        members = self.members if select is None else self.members[select]
        new: dict = {}
        flops = 0.0
        for q, e in self.envs.items():
            stack = e if select is None else e[select]
            for target, rows in cb.parts[(q, outcome)]:
                out = transfer(stack, rows, work=work)
                flops += transfer_flops(stack.shape[0], rows.shape)
                if target in new:
                    new[target] += out
                else:
                    new[target] = out
        trace = np.zeros(members.size)
        for e in new.values():
            trace += np.einsum("nii->n", e).real
        live = trace > 0
        scale = np.where(live, trace, 1.0)[:, None, None]
        for e in new.values():
            e /= scale
        return Group(new, members), trace, flops


def start_group(members: np.ndarray) -> Group:
    """The 1 x 1 environment of charge 0 (left end of the chain) for every member."""
    return Group({0: np.ones((members.size, 1, 1), dtype=complex)}, members)


def merge(groups: Sequence[Group]) -> list[Group]:
    """Groups with the same charges joined into one (members and stacks concatenated in
    order)."""
    by_key: dict = {}
    for g in groups:
        by_key.setdefault(g.key, []).append(g)
    out = []
    for key, same in by_key.items():
        if len(same) == 1:
            out.append(same[0])
            continue
        envs = {q: np.concatenate([g.envs[q] for g in same]) for q in key}
        out.append(Group(envs, np.concatenate([g.members for g in same])))
    return out


def work_buffer(blocks: Sequence[ChargedBlock]) -> np.ndarray:
    """One scratch array for :func:`mpsobs.estimators.blocktensors.transfer` (WORK_BYTES)."""
    largest = max(b.block.tensor.size for b in blocks)
    return np.empty(max(WORK_BYTES // 16, largest), dtype=complex)
