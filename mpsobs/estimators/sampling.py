"""Sampling estimators of observational entropy on the block tensors of an MPS.

Conventions as :mod:`mpsobs.estimators.blocktensors`. Every sampler takes a (n, blocks)
array of uniforms, row s deciding sample s, so a sample does not depend on the batch it
is drawn in. :func:`draw_samples` is the per-string estimator; :func:`draw_conditional`
the conditional (chain-rule) estimator with dense environments, and
:func:`draw_conditional_vectors` (outcomes of one row each) and
:func:`draw_conditional_charged` (number-conserving states) the same estimator on
smaller environments, with the same draws and values up to round-off.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from mpsobs.estimators.blocktensors import (
    WORK_BYTES,
    ReadoutBlock,
    conditional_probabilities,
    transfer,
    transfer_flops,
)
from mpsobs.estimators.charges import ChargedBlock, Group, merge, start_group, work_buffer

__all__ = ["draw_samples", "SampleBatch", "draw_conditional", "draw_conditional_vectors",
           "draw_conditional_charged", "ConditionalBatch", "conditional_terms",
           "conditional_sample_flops", "default_batch", "single_rows", "BATCH_BYTES",
           "MAX_BATCH"]

#: Memory target of one sampling batch (bytes), used when ``batch`` is None.
BATCH_BYTES = 2**28
MAX_BATCH = 1024


class _Environments:
    """Unit-trace matrix environments of n samples, in reused buffers.

    At every block the samples are reordered by their outcome (environments copied into
    a scratch buffer) so that each outcome's environments are one contiguous slice,
    advanced together by :func:`mpsobs.blocktensors.transfer` back into the stack.
    ``held[s]`` is the sample at position s; ``env`` is the (n, chi, chi) stack.
    """

    def __init__(self, blocks: Sequence[ReadoutBlock], n: int):
        chi = max(max(b.tensor.shape[0], b.tensor.shape[2]) for b in blocks)
        self._stack, self._scratch = (np.empty(n * chi * chi, dtype=complex) for _ in range(2))
        self._work = np.empty(max(WORK_BYTES // 16, max(b.tensor.size for b in blocks)),
                              dtype=complex)
        self.env = self._stack[:n].reshape(n, 1, 1)
        self.env[...] = 1.0
        self.held = np.arange(n)
        self.flops = 0.0

    def advance(self, blk: ReadoutBlock, outcome: np.ndarray,
                carried: tuple[np.ndarray, ...]) -> tuple[np.ndarray, np.ndarray, tuple]:
        """Advance every environment with the rows of its sample's outcome at ``blk``.

        Returns the traces before renormalisation (the conditional probabilities of the
        outcomes), the outcomes and the ``carried`` per-sample arrays, all in the new
        order of the samples.
        """
        n = outcome.size
        cl, _, cr = blk.tensor.shape
        order = np.argsort(outcome, kind="stable")
        outcome = outcome[order]
        self.held = self.held[order]
        sorted_env = self._scratch[:n * cl * cl].reshape(n, cl, cl)
        np.take(self.env, order, axis=0, out=sorted_env, mode="clip")
        self.env = self._stack[:n * cr * cr].reshape(n, cr, cr)
        present = np.flatnonzero(np.bincount(outcome, minlength=blk.n_outcomes))
        bounds = np.searchsorted(outcome, present)
        for j, lo, hi in zip(present, bounds, list(bounds[1:]) + [n], strict=True):
            rows = blk.rows(j)
            transfer(sorted_env[lo:hi], rows, out=self.env[lo:hi], work=self._work)
            self.flops += transfer_flops(hi - lo, rows.shape)
        trace = np.einsum("nii->n", self.env).real
        self.env /= trace[:, None, None]
        return trace, outcome, tuple(c[order] for c in carried)


def _draw_index(weights: np.ndarray, uniforms: np.ndarray) -> np.ndarray:
    """Per row of non-negative ``weights`` (n, K), the index drawn with probability
    proportional to its weight by the uniform in [0, 1) of that row (inverse CDF; 1 - u
    lies in (0, 1], so the drawn index always has positive weight)."""
    cum = np.cumsum(weights, axis=1)
    threshold = (1.0 - uniforms) * cum[:, -1]
    return np.minimum((cum < threshold[:, None]).sum(axis=1), weights.shape[1] - 1)


def _row_amplitudes(vec: np.ndarray, blk: ReadoutBlock
                    ) -> tuple[np.ndarray, np.ndarray, float]:
    """Amplitudes v_s A_r (n, R, chi_r) of the vector environments ``vec`` (n, chi_l),
    their squared norms (n, R) and the flops: one GEMM, 8 n chi_l R chi_r."""
    cl, n_rows, cr = blk.tensor.shape
    amp = (vec @ blk.tensor.reshape(cl, n_rows * cr)).reshape(-1, n_rows, cr)
    return amp, (amp.real**2 + amp.imag**2).sum(axis=2), 8.0 * amp.size * cl


def _batch_repr(batch) -> str:
    """``Name(n samples over k blocks, f flops)``: a batch's size, not its arrays."""
    n, k = batch.outcomes.shape
    return (f"{type(batch).__name__}({n} sample{'' if n == 1 else 's'} over {k} "
            f"block{'' if k == 1 else 's'}, {batch.flops:.3g} flops)")


@dataclass(frozen=True, eq=False, repr=False)
class SampleBatch:
    """Samples of coarse outcome strings with their exact probabilities.

    ``outcomes`` (n, blocks): macrostate index per block; ``log_p``, ``log_v``: ln p_i
    and ln V_i of each sample; ``flops``: real floating-point operations of the
    contractions done.
    """

    outcomes: np.ndarray
    log_p: np.ndarray
    log_v: np.ndarray
    flops: float

    __repr__ = _batch_repr


def draw_samples(blocks: Sequence[ReadoutBlock], uniforms: np.ndarray) -> SampleBatch:
    """Sample outcome strings of a right-canonical MPS and their exact probabilities
    (the per-string estimator, method "sample_strings").

    Parameters
    ----------
    blocks : the state's blocks from :func:`mpsobs.blocktensors.readout_blocks`.
    uniforms : (n, blocks) numbers in [0, 1); row s, column k decides sample s at block k
        (so a sample does not depend on which other samples share its batch).

    Per block: the vector environments v_s (normalised) give the row probabilities
    |v_s A_r|^2 (perfect sampling, Phys. Rev. B 85, 165146 (2012); one GEMM (n, l) x
    (l, R c)); the drawn row fixes the outcome j; the matrix environments of the samples
    with outcome j are advanced together by :func:`mpsobs.blocktensors.transfer`, and
    renormalised to unit trace, the log of the trace (the conditional probability of j)
    being accumulated, so nothing underflows at any L. Cost per sample and block
    8 chi^2 R + 8 g chi^3 (2 of them for chi_l = chi_r) flops, g = rows of the drawn
    outcome; memory 16 bytes x n (2 chi^2 + R chi) (two environment stacks and the
    vectors' row amplitudes) plus :data:`mpsobs.blocktensors.WORK_BYTES`.
    """
    n, m = uniforms.shape
    envs = _Environments(blocks, n)
    vec = np.ones((n, 1), dtype=complex)
    log_p = np.zeros(n)
    log_v = np.zeros(n)
    outcomes = np.empty((n, m), dtype=np.int64)
    every = np.arange(n)
    flops = 0.0
    for k, blk in enumerate(blocks):
        amp, weight, cost = _row_amplitudes(vec, blk)
        flops += cost
        row = _draw_index(weight, uniforms[envs.held, k])
        vec = amp[every, row] / np.sqrt(weight[every, row])[:, None]
        outcome = blk.row_outcome[row]
        log_v += blk.log_volumes[outcome]
        trace, outcome, (vec, log_p, log_v) = envs.advance(blk, outcome, (vec, log_p, log_v))
        outcomes[envs.held, k] = outcome
        log_p += np.log(trace)
    restore = np.argsort(envs.held)
    return SampleBatch(outcomes, log_p[restore], log_v[restore], flops + envs.flops)


def conditional_terms(p: np.ndarray, log_volumes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Shannon and Boltzmann parts of f_k for rows of conditional distributions.

    ``p`` (n, outcomes), ``log_volumes`` (outcomes,): returns -sum_i p_i ln p_i and
    sum_i p_i ln V_i per row; outcomes with p_i = 0 contribute 0 (also when V_i = 0).
    """
    live = p > 0
    log_p = np.log(p, where=live, out=np.zeros_like(p))
    log_v = np.where(np.isfinite(log_volumes), log_volumes, 0.0)
    return -np.sum(p * log_p, axis=1), p @ log_v


@dataclass(frozen=True, eq=False, repr=False)
class ConditionalBatch:
    """Coarse outcome paths drawn from their exact conditionals, with their chain-rule
    values (the conditional estimator, method "sample").

    ``outcomes`` (n, blocks): macrostate index per block; ``shannon`` and ``boltzmann``
    (n,): sum over blocks k of -sum_i p(i | i_<k) ln p(i | i_<k) and of
    sum_i p(i | i_<k) ln V_{k,i} along each path (their sum is the path's estimate of
    S_obs); ``flops``: real floating-point operations of the contractions done.
    """

    outcomes: np.ndarray
    shannon: np.ndarray
    boltzmann: np.ndarray
    flops: float

    __repr__ = _batch_repr


class _SharedEnvironments:
    """The unit-trace environments of the distinct outcome prefixes among n paths.

    Paths that drew the same outcomes so far share one environment: ``env`` is the
    (u, chi, chi) stack of the u distinct prefixes and ``where[s]`` the prefix of path s.
    With ``share`` False every path starts as a prefix of its own (one environment per
    path, as before the sharing).
    At each block a prefix's environment is advanced once per outcome drawn after it
    (one transfer for every member), the new prefixes grouped by outcome so that each
    outcome's environments are advanced together by :func:`transfer`.
    """

    def __init__(self, blocks: Sequence[ReadoutBlock], n: int, share: bool, dtype=complex):
        chi = max(max(b.tensor.shape[0], b.tensor.shape[2]) for b in blocks)
        self._dtype = np.dtype(dtype)
        self._stack, self._scratch = (np.empty(n * chi * chi, dtype=dtype) for _ in range(2))
        self._work = np.empty(max(WORK_BYTES // self._dtype.itemsize,
                                  max(b.tensor.size for b in blocks)), dtype=dtype)
        self.where = np.zeros(n, dtype=np.int64) if share else np.arange(n)
        self.env = self._stack[:self.where[-1] + 1].reshape(-1, 1, 1)
        self.env[...] = 1.0
        self.flops = 0.0

    def advance(self, blk: ReadoutBlock, outcome: np.ndarray) -> None:
        """Extend every path's prefix by its ``outcome`` at ``blk``."""
        cl, _, cr = blk.tensor.shape
        key = self.where * blk.n_outcomes + outcome
        prefixes, self.where = np.unique(key, return_inverse=True)
        parent, drawn = np.divmod(prefixes, blk.n_outcomes)
        u = prefixes.size
        order = np.argsort(drawn, kind="stable")
        drawn = drawn[order]
        sorted_env = self._scratch[:u * cl * cl].reshape(u, cl, cl)
        np.take(self.env, parent[order], axis=0, out=sorted_env, mode="clip")
        new = self._stack[:u * cr * cr].reshape(u, cr, cr)
        present = np.flatnonzero(np.bincount(drawn, minlength=blk.n_outcomes))
        bounds = np.searchsorted(drawn, present)
        for j, lo, hi in zip(present, bounds, list(bounds[1:]) + [u], strict=True):
            rows = blk.rows(j).astype(self._dtype, copy=False)
            transfer(sorted_env[lo:hi], rows, out=new[lo:hi], work=self._work)
            self.flops += transfer_flops(hi - lo, rows.shape)
        new /= np.einsum("nii->n", new).real[:, None, None]
        self.env = new
        # prefix i of ``prefixes`` now sits at the position of i in ``order``
        position = np.empty(u, dtype=np.int64)
        position[order] = np.arange(u)
        self.where = position[self.where]


def draw_conditional(blocks: Sequence[ReadoutBlock], weights: Sequence[np.ndarray],
                     uniforms: np.ndarray, share: bool = False,
                     single: bool = False) -> ConditionalBatch:
    """Draw coarse outcome paths block by block from their exact conditional
    distributions and add up the exact conditional entropies along each path.

    Parameters
    ----------
    blocks : the state's blocks from :func:`mpsobs.blocktensors.readout_blocks`.
    weights : :func:`mpsobs.blocktensors.outcome_weights` of every block (once per state).
    uniforms : (n, blocks) numbers in [0, 1); row s, column k draws sample s at block k
        (so a sample does not depend on which other samples share its batch).
    share : advance one environment per distinct prefix (below) instead of one per path;
        the same paths and values up to round-off, fewer flops.
    single : keep the environments and do the contractions in single precision
        (complex64; the conditional probabilities are summed up in double): about twice
        as fast; the values change by single-precision round-off (unit 6e-8 per
        operation, summed over the 2 chi_l^2 terms of a probability and the blocks), far
        below the standard error of a sampled S_obs; a draw whose uniform falls within
        that round-off of a boundary between outcomes may go the other way.

    With the unit-trace environments E of the distinct prefixes i_<k of the n paths
    stacked, all conditionals p(i | i_<k) = Tr[E R_{k,i}] come from one matrix product
    (:func:`mpsobs.blocktensors.conditional_probabilities`); f_k = sum_i p_i (-ln p_i +
    ln V_{k,i}) is added to the path's value; i_k is drawn from the same p; E is advanced
    with the rows of i_k only and renormalised; with ``share`` once for all paths with the
    same prefix (paths often share their first blocks' outcomes, which have few values).
    By the chain rule sum_k E[f_k] = S_obs, so the path value is unbiased; it is exact
    for a product of blocks. Cost per environment and block
    4 chi_l^2 n_out + 8 g chi_l chi_r (chi_l + chi_r) flops (n_out outcomes, g rows of the
    drawn outcome), at most that per path; memory 16 bytes x n x 2 chi^2 plus
    :data:`mpsobs.blocktensors.WORK_BYTES`.
    """
    n, m = uniforms.shape
    dtype = np.complex64 if single else complex
    envs = _SharedEnvironments(blocks, n, share, dtype)
    weights = [w.astype(np.float32) if single else w for w in weights]
    shannon = np.zeros(n)
    boltzmann = np.zeros(n)
    outcomes = np.empty((n, m), dtype=np.int64)
    flops = 0.0
    for k, (blk, w) in enumerate(zip(blocks, weights, strict=True)):
        p = conditional_probabilities(envs.env, w)
        flops += 2.0 * p.shape[0] * w.size
        h, b = conditional_terms(p, blk.log_volumes)
        shannon += h[envs.where]
        boltzmann += b[envs.where]
        outcome = _draw_index(p[envs.where], uniforms[:, k])
        outcomes[:, k] = outcome
        envs.advance(blk, outcome)
    return ConditionalBatch(outcomes, shannon, boltzmann, flops + envs.flops)


def single_rows(blocks: Sequence[ReadoutBlock]) -> bool:
    """Whether every outcome of every block is at most one readout row (a non-degenerate
    observable, e.g. Ising block energies, or fine blocks): then
    :func:`draw_conditional_vectors` applies."""
    return all(np.all(np.diff(b.offsets) <= 1) for b in blocks)


def draw_conditional_vectors(blocks: Sequence[ReadoutBlock],
                             uniforms: np.ndarray) -> ConditionalBatch:
    """:func:`draw_conditional` where every outcome is one readout row
    (:func:`single_rows`): the same paths and values up to round-off, with vectors.

    A path's environment starts as the 1 x 1 identity and is advanced by one row at a
    time, E <- A_r^dagger E A_r, so it stays of rank one, E = v^dagger v with v a row
    vector: the conditionals are p(i | prefix) = |v A_i|^2 (the perfect-sampling
    amplitudes of Phys. Rev. B 85, 165146 (2012)) and the drawn row's amplitude,
    normalised, is the next v. Cost per sample and block 8 chi_l R chi_r flops (one GEMM
    (n, chi_l) x (chi_l, R chi_r) for the batch) instead of about 16 chi^3; memory 16
    bytes x n R chi_r.
    """
    n, m = uniforms.shape
    vec = np.ones((n, 1), dtype=complex)
    shannon = np.zeros(n)
    boltzmann = np.zeros(n)
    outcomes = np.empty((n, m), dtype=np.int64)
    every = np.arange(n)
    flops = 0.0
    for k, blk in enumerate(blocks):
        amp, weight, cost = _row_amplitudes(vec, blk)
        flops += cost
        p = np.zeros((n, blk.n_outcomes))
        p[:, blk.row_outcome] = weight
        p /= p.sum(axis=1, keepdims=True)
        h, b = conditional_terms(p, blk.log_volumes)
        shannon += h
        boltzmann += b
        outcome = _draw_index(p, uniforms[:, k])
        outcomes[:, k] = outcome
        row = blk.offsets[outcome]
        vec = amp[every, row] / np.sqrt(weight[every, row])[:, None]
    return ConditionalBatch(outcomes, shannon, boltzmann, flops)


def draw_conditional_charged(blocks: Sequence[ChargedBlock], uniforms: np.ndarray,
                             share: bool = False) -> ConditionalBatch:
    """:func:`draw_conditional` on the charge blocks of a number-conserving state
    (:mod:`mpsobs.estimators.charges`): the same paths and values up to round-off.

    The environments are kept in groups of equal charges (after number outcomes, one
    charge per group), one environment per path, or with ``share`` one per distinct
    outcome prefix (as in :func:`draw_conditional`); per group one matrix product per
    charge gives the conditionals, and the environments whose paths drew the same
    outcome advance together. Cost per environment and block 4 sum_q d_q^2 n_out +
    sum 8 g d_q d_q' (d_q + d_q') flops over the charges q it carries and q' = q + c
    (rows of count c in the drawn outcome); memory 16 bytes x n x sum_q d_q^2 (twice)
    plus :data:`mpsobs.blocktensors.WORK_BYTES`.
    """
    n, m = uniforms.shape
    shannon = np.zeros(n)
    boltzmann = np.zeros(n)
    outcomes = np.empty((n, m), dtype=np.int64)
    prefix = np.zeros(n, dtype=np.int64) if share else np.arange(n)  # environment of path s
    groups = [start_group(np.arange(prefix[-1] + 1))]  # members: environment ids
    work = work_buffer(blocks)
    flops = 0.0
    for k, cb in enumerate(blocks):
        slot = np.empty(sum(g.members.size for g in groups), dtype=np.int64)
        group_of = np.empty_like(slot)
        for i, g in enumerate(groups):
            slot[g.members] = np.arange(g.members.size)
            group_of[g.members] = i
        path_group = group_of[prefix]
        next_prefix = np.empty(n, dtype=np.int64)
        children = []
        made = 0   # environments made so far at this block
        for i, g in enumerate(groups):
            paths = np.flatnonzero(path_group == i)
            at = slot[prefix[paths]]   # each path's environment within the group
            p = g.probabilities(cb)
            flops += 2.0 * g.members.size * sum(cb.weights[q].size for q in g.envs)
            h, b = conditional_terms(p, cb.block.log_volumes)
            shannon[paths] += h[at]
            boltzmann[paths] += b[at]
            drawn = _draw_index(p[at], uniforms[paths, k])
            outcomes[paths, k] = drawn
            for j in np.unique(drawn):
                chosen = drawn == j
                rows, inverse = np.unique(at[chosen], return_inverse=True)
                select = None
                if rows.size < g.members.size:
                    select = np.zeros(g.members.size, dtype=bool)
                    select[rows] = True
                child, _, cost = g.child(cb, int(j), select, work)
                next_prefix[paths[chosen]] = made + inverse
                children.append(Group(child.envs, np.arange(made, made + rows.size)))
                made += rows.size
                flops += cost
        prefix = next_prefix
        groups = merge(children)
    return ConditionalBatch(outcomes, shannon, boltzmann, flops)


def conditional_sample_flops(blocks: Sequence[ReadoutBlock]) -> float:
    """Predicted flops of one conditional path with dense environments (:func:`draw_conditional`):
    per block the conditionals plus the transfer with the mean drawn group size
    g = sum_i g_i^2 / R (rows drawn uniformly). The automatic choice measures its
    enumeration budget in these units whichever sampler then runs, so that it decides
    as with dense environments."""
    total = 0.0
    for blk in blocks:
        cl, n_rows, cr = blk.tensor.shape
        sizes = np.diff(blk.offsets)
        mean_group = float(np.sum(sizes**2)) / n_rows
        total += 4.0 * cl * cl * blk.n_outcomes + 8.0 * mean_group * cl * cr * (cl + cr)
    return total


def default_batch(blocks: Sequence[ReadoutBlock]) -> int:
    """Samples per batch when ``batch`` is None: as many as fit in BATCH_BYTES, 16 to
    MAX_BATCH (about 250 at bond 128 and blocks of 4)."""
    per_sample = max(16 * (2 * b.tensor.shape[0] ** 2 + 2 * b.tensor.shape[2] ** 2
                           + b.tensor.shape[1] * b.tensor.shape[2]) for b in blocks)
    return int(np.clip(BATCH_BYTES // per_sample, 16, MAX_BATCH))
