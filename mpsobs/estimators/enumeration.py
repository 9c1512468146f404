"""Exact enumeration of the outcome strings of a block coarse-graining of an MPS.

Conventions as :mod:`mpsobs.estimators.blocktensors` (right-canonical state, unit-trace
left environments). The outcome tree is walked block by block; the live prefixes of a
level are contracted as one stack; prefixes below the probability floor ``prune`` are
dropped and their total is the pruned mass. :func:`enumerate_outcomes` keeps dense
chi x chi environments, :func:`enumerate_outcomes_charged` the charge blocks of a
number-conserving state (:mod:`mpsobs.estimators.charges`); both give the same leaves in
the same order and stop at the same limits.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from mpsobs.estimators.blocktensors import ReadoutBlock, transfer, transfer_flops
from mpsobs.estimators.charges import ChargedBlock, Group, merge, start_group, work_buffer

__all__ = ["enumerate_outcomes", "enumerate_outcomes_charged", "TooManyBranches",
           "progress_bar", "ENUMERATE_BYTES"]

#: Memory cap of the live environments of enumeration (bytes).
ENUMERATE_BYTES = 2**29


def progress_bar(progress: bool, total: int, desc: str):
    """A tqdm bar, shown only with ``progress``."""
    from tqdm.auto import tqdm

    return tqdm(total=total, desc=desc, disable=not progress, leave=False)


class TooManyBranches(Exception):
    """Enumeration needs more live prefixes than allowed."""


def _level_cap(flops: float, budget: float, limit: float, k: int, blk: ReadoutBlock) -> float:
    """Live prefixes allowed at block k (``limit`` and the memory cap ENUMERATE_BYTES of
    dense chi x chi environments); raises TooManyBranches when the enumeration's flops,
    counted for dense environments, passed ``budget``."""
    if flops > budget:
        raise TooManyBranches(f"more than {budget:.3g} flops (the cost of sampling) at "
                               f"block {k} (sites {blk.start}..{blk.stop - 1})")
    chi = blk.tensor.shape[2]
    return min(limit, max(1, ENUMERATE_BYTES // (16 * chi * chi)))


def _check_live(kept: int, cap: float, limit: float, k: int, blk: ReadoutBlock) -> None:
    if kept > cap:
        why = ("max_branches" if cap == limit else
               f"the memory cap of {ENUMERATE_BYTES / 2**20:.0f} MiB")
        raise TooManyBranches(f"more than {cap} live outcome prefixes ({why}) at block "
                               f"{k} (sites {blk.start}..{blk.stop - 1})")


def _kept(p: np.ndarray, prune: float) -> tuple[np.ndarray, float]:
    """Indices of the children of probability ``p`` that stay live (p > 0 and p >=
    ``prune``) and the probability of the others (the mass pruned)."""
    keep = (p > 0) & (p >= prune)
    return np.flatnonzero(keep), float(np.sum(np.clip(p[~keep], 0.0, None)))


def enumerate_outcomes(blocks: Sequence[ReadoutBlock], limit: float, prune: float, progress: bool,
               budget: float = np.inf) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """Leaves (p, ln V, outcome strings) of the pruned outcome tree, and the pruned mass.

    Level k holds the live prefixes i_1 .. i_k, each with its environment normalised to
    unit trace and its ln p; every outcome j of block k + 1 extends all of them in one
    :func:`transfer` call. Cost sum_k n_k 8 R_k chi_l chi_r (chi_l + chi_r) flops (n_k
    live prefixes); memory 16 bytes x n_k chi^2 (twice, current and next level), capped
    at ENUMERATE_BYTES. Raises TooManyBranches before a level that would take the live
    prefixes beyond ``limit`` or the flops beyond ``budget``.
    """
    env = np.ones((1, 1, 1), dtype=complex)
    log_p, log_v = np.zeros(1), np.zeros(1)
    outcomes = np.zeros((1, 0), dtype=np.int64)
    pruned = 0.0
    flops = 0.0
    with progress_bar(progress, len(blocks), "enumerate") as bar:
        for k, blk in enumerate(blocks):
            flops += transfer_flops(env.shape[0], blk.tensor.shape)
            cap = _level_cap(flops, budget, limit, k, blk)
            p_parent = np.exp(log_p)
            parts = []
            kept = 0
            for j in range(blk.n_outcomes):
                rows = blk.rows(j)
                if rows.shape[1] == 0:
                    continue
                child = transfer(env, rows)
                trace = np.einsum("nii->n", child).real
                sel, lost = _kept(p_parent * trace, prune)
                pruned += lost
                kept += sel.size
                _check_live(kept, cap, limit, k, blk)
                if sel.size:
                    parts.append((child[sel] / trace[sel, None, None],
                                  log_p[sel] + np.log(trace[sel]),
                                  log_v[sel] + blk.log_volumes[j],
                                  np.column_stack([outcomes[sel],
                                                   np.full(sel.size, j, dtype=np.int64)])))
            if not parts:
                return np.zeros(0), np.zeros(0), np.zeros((0, len(blocks)), np.int64), pruned
            env = np.concatenate([q[0] for q in parts])
            log_p = np.concatenate([q[1] for q in parts])
            log_v = np.concatenate([q[2] for q in parts])
            outcomes = np.concatenate([q[3] for q in parts])
            bar.update(1)
    return np.exp(log_p), log_v, outcomes, pruned


def enumerate_outcomes_charged(blocks: Sequence[ChargedBlock], limit: float, prune: float,
                       progress: bool, budget: float = np.inf
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """:func:`enumerate_outcomes` on charge blocks (:mod:`mpsobs.estimators.charges`): the same
    leaves in the same order, the same pruning, and the same limits (flops and memory
    counted as for dense environments, so that the automatic choice decides as before),
    with each prefix's environment one or a few charge blocks."""
    groups = [start_group(np.arange(1))]
    log_p, log_v = np.zeros(1), np.zeros(1)
    outcomes = np.zeros((1, 0), dtype=np.int64)
    pruned = 0.0
    flops = 0.0
    work = work_buffer(blocks)
    with progress_bar(progress, len(blocks), "enumerate") as bar:
        for k, cb in enumerate(blocks):
            blk = cb.block
            flops += transfer_flops(log_p.size, blk.tensor.shape)
            cap = _level_cap(flops, budget, limit, k, blk)
            p_parent = np.exp(log_p)
            children, parts = [], []
            kept = 0
            for j in range(blk.n_outcomes):
                if blk.offsets[j + 1] == blk.offsets[j]:
                    continue
                for g in groups:
                    child, trace, _ = g.child(cb, j, None, work)
                    sel, lost = _kept(p_parent[g.members] * trace, prune)
                    pruned += lost
                    kept += sel.size
                    _check_live(kept, cap, limit, k, blk)
                    if sel.size:
                        parent = g.members[sel]
                        children.append(Group({q: e[sel] for q, e in child.envs.items()},
                                              np.arange(kept - sel.size, kept)))
                        parts.append((log_p[parent] + np.log(trace[sel]),
                                      log_v[parent] + blk.log_volumes[j],
                                      np.column_stack([outcomes[parent],
                                                       np.full(sel.size, j, np.int64)])))
            if not parts:
                return np.zeros(0), np.zeros(0), np.zeros((0, len(blocks)), np.int64), pruned
            groups = merge(children)
            log_p = np.concatenate([q[0] for q in parts])
            log_v = np.concatenate([q[1] for q in parts])
            outcomes = np.concatenate([q[2] for q in parts])
            bar.update(1)
    order = np.lexsort(outcomes.T)  # the dense order: last block's outcome first
    return np.exp(log_p[order]), log_v[order], outcomes[order], pruned
