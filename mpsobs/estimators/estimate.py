"""Observational entropy of block coarse-grainings of long chains given as MPS.

Conventions: natural logarithms; site 0 is the first (most significant) site; the state
is brought to right-canonical form, so the right environment of every block is the
identity and a left environment's trace is the probability of its outcome prefix (see
:mod:`mpsobs.blocktensors`). Every coarse-graining, sequences of non-commuting
observables included, is handled as "an outcome is a group of readout rows" (see
:mod:`mpsobs.coarse`).

Estimators (``method``):

- ``"enumerate"``: exact outcome distribution, block by block; the live outcome
  prefixes of a level are contracted as one stack. Prefixes whose probability falls below
  ``prune`` are dropped and their probability is reported as ``pruned_mass`` (delta).
  All terms -p ln(p/V) are >= 0 (p_i <= V_i), so the exact S_obs lies in
  [entropy, entropy + delta (ln dim - ln delta)] (:func:`pruned_entropy_bound`).
- ``"count"``: exact joint distribution of the number of sites in |1> in up to three
  regions of any size, with a counter index on the environments (number
  coarse-grainings only; the only method for blocks wider than
  :data:`mpsobs.coarse.MAX_BLOCK_SITES`).
- ``"sample"``: the conditional (chain-rule) estimator, :func:`draw_conditional`. For
  a coarse prefix i_<k with unit-trace environment E, p(i | i_<k) = Tr[E R_{k,i}] with
  R_{k,i} = sum over the outcome's rows of A_r A_r^dagger (once per state), and
  f_k = sum_i p(i | i_<k) (-ln p(i | i_<k) + ln V_{k,i}). A path is drawn from these
  conditionals; its value sum_k f_k is an unbiased estimate of S_obs (chain rule,
  S_obs = sum_k E[f_k]) that averages each block's outcome exactly instead of drawing
  it (Rao-Blackwellisation: never a larger variance than ``"sample_strings"``; zero for
  a product over blocks). The Shannon and Boltzmann parts split the same way.
- ``"sample_strings"``: the per-string estimator, :func:`draw_samples`. A readout-row
  string is drawn by perfect sampling with a vector environment (Ferris and Vidal,
  Phys. Rev. B 85, 165146 (2012)); its rows fix the coarse outcome string i, whose
  exact probability p_i follows from the matrix environment; the sample value is
  -ln p_i + ln V_i. Kept for comparison.
- Both sampled estimators report means and standard errors from the sample variance.
- ``"exact"``: ``"count"`` where it applies, else the one-path conditional value for a
  product over blocks (bond dimension 1 at every block boundary; ``algorithm``
  "mps-conditional", no ``distribution``), else ``"enumerate"``.
- ``None`` (automatic): as ``"exact"`` for countable coarse-graining and block products
  (blocks wider than MAX_BLOCK_SITES only count). Otherwise by cost and error:
  enumeration is tried with a flop budget equal to the cost of the conditional sampling
  it replaces (n samples x :func:`conditional_sample_flops`; n = ``samples`` or
  DEFAULT_SAMPLES, or with ``target_stderr`` n = (sigma / target)^2 from a pilot of the
  first ``samples`` or MIN_TARGET_SAMPLES samples), the memory cap ENUMERATE_BYTES and,
  if given, ``max_branches``. Its result is kept if it finishes within the budget and
  ``pruned_entropy_bound`` is at most the error sampling would give: ``target_stderr``,
  or sigma / sqrt(n) from a pilot of MIN_TARGET_SAMPLES samples (drawn only when
  something was pruned). Else ``"sample"`` runs, continuing from the pilot samples. The
  wasted work is at most the sampling cost, so automatic costs at most about twice the
  cheaper method.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Literal

import numpy as np

from mpsobs.chain.coarse import MAX_BLOCK_SITES, BlockCoarseGraining, ProjectorCoarseGraining
from mpsobs.core.errors import InputError
from mpsobs.estimators.blocktensors import (
    WORK_BYTES,
    ReadoutBlock,
    conditional_probabilities,
    outcome_weights,
    readout_blocks,
    transfer,
    transfer_flops,
)
from mpsobs.estimators.dense import NORM_TOL
from mpsobs.estimators.result import EntropyResult, OutcomeDistribution
from mpsobs.mps.tensors import MPS, PurifiedMPS, as_mps, bond_entropies, right_canonical_log_norm

__all__ = ["mps_observational_entropy", "canonical_state", "draw_samples", "SampleBatch",
           "draw_conditional", "ConditionalBatch", "conditional_terms",
           "conditional_sample_flops", "default_batch", "pruned_entropy_bound", "countable",
           "check_seed", "Method", "METHODS"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

logger = logging.getLogger(__name__)

Method = Literal["enumerate", "count", "sample", "sample_strings", "exact"]
METHODS = ("enumerate", "count", "sample", "sample_strings", "exact")

#: Samples drawn when neither ``samples`` nor ``target_stderr`` is given.
DEFAULT_SAMPLES = 1000
#: Minimum number of samples before ``target_stderr`` is tested.
MIN_TARGET_SAMPLES = 100
DEFAULT_MAX_SAMPLES = 1_000_000
DEFAULT_PRUNE = 1e-12
DEFAULT_MAX_BRANCHES = 2**14
#: Memory cap of the live environments of enumeration (bytes).
ENUMERATE_BYTES = 2**29
#: Memory target of one sampling batch (bytes), used when ``batch`` is None.
BATCH_BYTES = 2**28
MAX_BATCH = 1024
COUNT_MAX_REGIONS = 3


# --------------------------------------------------------------------------- input


def canonical_state(state, L: int | None = None) -> MPS | PurifiedMPS:
    """A right-canonical copy of a normalised ``state`` (the input is never modified).

    ``state`` is an :class:`mpsobs.mps.MPS`, a quimb ``MatrixProductState`` or a list of
    (left, 2, right) arrays, in any gauge; or a :class:`mpsobs.mps.PurifiedMPS`, brought
    to the right-canonical form of its local dimension 4 (a PurifiedMPS is returned).
    One rule for dense vectors and MPS alike: a state with |ln norm| >
    :data:`mpsobs.dense.NORM_TOL` is refused with an InputError that says how to
    normalise it (a silent or warned rescaling would hide a wrong state;
    :func:`mpsobs.tebd.evolve` snapshots are normalised, their loss to truncation kept in
    ``Snapshot.norm``). A zero or non-finite norm raises InputError too. Cost L chi^3 d.
    """
    mps = MPS(state.tensors) if isinstance(state, PurifiedMPS) else as_mps(state)
    if L is not None and mps.L != L:
        raise InputError(f"coarse_graining: it is for L = {L} sites, the state has {mps.L}")
    for i, t in enumerate(mps.tensors):
        if not np.all(np.isfinite(t)):
            raise InputError(f"state: MPS tensor {i} contains NaN or infinite entries")
    rc, log_norm = right_canonical_log_norm(mps)
    if abs(log_norm) > NORM_TOL:
        raise InputError(f"state: the MPS is not normalised (norm = {np.exp(log_norm):.12g}, "
                         f"ln norm = {log_norm:.3g}, tolerance {NORM_TOL:g}); normalise it "
                         f"first, e.g. mpsobs.mps.right_canonical(mpsobs.mps.as_mps(state), "
                         f"normalize=True), or quimb's state.normalize()")
    if isinstance(state, PurifiedMPS):
        return replace(state, tensors=rc.tensors)
    return rc


def _positive_int(value, name: str, minimum: int = 1) -> int:
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < minimum:
        raise InputError(f"{name}: expected an integer >= {minimum}, got {value!r}")
    return int(value)


def check_seed(seed) -> None:
    """Refuse a ``seed`` that :func:`numpy.random.default_rng` does not take (InputError
    naming ``seed``)."""
    if isinstance(seed, str | bytes | float | bool):
        raise InputError(f"seed: expected None, a non-negative integer, a sequence of them, "
                         f"a numpy SeedSequence or Generator; got {seed!r}")
    try:
        np.random.default_rng(seed)
    except (TypeError, ValueError) as exc:
        raise InputError(f"seed: expected None, a non-negative integer, a sequence of them, "
                         f"a numpy SeedSequence or Generator; got {seed!r} ({exc})") from None


def _check_options(samples, target_stderr, prune, max_branches, batch, max_samples,
                   progress, seed) -> None:
    if samples is not None:
        _positive_int(samples, "samples", 2)
    if target_stderr is not None:
        if (isinstance(target_stderr, bool) or not isinstance(target_stderr, float | int)
                or not np.isfinite(target_stderr) or target_stderr <= 0):
            raise InputError(f"target_stderr: expected a positive number, got {target_stderr!r}")
    if (isinstance(prune, bool) or not isinstance(prune, float | int)
            or not 0.0 <= prune < 1.0):
        raise InputError(f"prune: expected a probability floor in [0, 1), got {prune!r}")
    if max_branches is not None:
        _positive_int(max_branches, "max_branches")
    if batch is not None:
        _positive_int(batch, "batch")
    _positive_int(max_samples, "max_samples", 2)
    if samples is not None and samples > max_samples:
        raise InputError(f"samples: {samples} exceeds max_samples = {max_samples}")
    if not isinstance(progress, bool):
        raise InputError(f"progress: expected True or False, got {progress!r}")
    check_seed(seed)


def countable(cg: BlockCoarseGraining) -> bool:
    """Whether the automatic and "exact" choices count ``cg`` exactly: the number
    observable alone on at most COUNT_MAX_REGIONS blocks."""
    return (len(cg.stages) == 1 and cg.stages[0].name == "number"
            and len(cg.blocks) <= COUNT_MAX_REGIONS)


def _resolve_method(method, cg: BlockCoarseGraining, samples, target_stderr) -> str:
    """The estimator to run: "count", "enumerate", "exact" (not countable: a product
    over blocks or enumeration), "sample", "sample_strings" or "auto"."""
    if method is not None and (not isinstance(method, str) or method not in METHODS):
        raise InputError(f"method: unknown {method!r}; allowed: None (automatic), "
                         f"{', '.join(map(repr, METHODS))}")
    wide = any(b.readout is None for b in cg.blocks)
    if method in ("count", "enumerate", "exact") and (samples is not None
                                                      or target_stderr is not None):
        name = "samples" if samples is not None else "target_stderr"
        raise InputError(f"{name}: method {method!r} is exact and draws no samples; drop "
                         f"{name} or use method 'sample' or None (automatic)")
    chosen = method or "auto"
    if chosen in ("auto", "exact") and countable(cg):
        chosen = "count"
    if chosen == "count" and not countable(cg):
        raise InputError(f"method: 'count' evaluates the number coarse-graining in at most "
                         f"{COUNT_MAX_REGIONS} regions; got {cg.label!r} with "
                         f"{len(cg.blocks)} blocks")
    if wide and chosen != "count":
        raise InputError(f"coarse_graining: blocks wider than {MAX_BLOCK_SITES} sites are "
                         f"evaluated only by method 'count' (number, at most "
                         f"{COUNT_MAX_REGIONS} regions); got {len(cg.blocks)} blocks")
    return chosen


# --------------------------------------------------------------------------- results


def pruned_entropy_bound(pruned_mass: float, max_entropy: float) -> float:
    """Largest entropy the outcomes left out by enumeration can carry.

    With delta = ``pruned_mass`` and q = p / delta on the pruned outcomes,
    sum -p ln(p / V) = delta [H(q) + E_q ln V] - delta ln delta <= delta (ln sum V - ln delta)
    <= delta (max_entropy - ln delta) (Gibbs' inequality; sum V <= dim). Each term is
    >= 0, so the exact S_obs lies in [entropy, entropy + this bound].
    """
    if pruned_mass <= 0.0:
        return 0.0
    return float(pruned_mass * (max_entropy - np.log(pruned_mass)))


def _exact_result(p: np.ndarray, log_v: np.ndarray, outcomes: np.ndarray,
                  cg: BlockCoarseGraining, algorithm: str, pruned_mass: float,
                  bonds: np.ndarray) -> EntropyResult:
    """Exact S_obs and its parts from p_i and ln V_i (log volumes: no overflow at any L)."""
    p = np.clip(p, 0.0, None)
    live = p > 0
    shannon = float(-np.sum(p[live] * np.log(p[live])))
    boltzmann = float(np.sum(p[live] * log_v[live]))
    with np.errstate(over="ignore"):  # volumes beyond 1e308 are reported as inf
        dist = OutcomeDistribution(outcomes, p, np.exp(log_v))
    return EntropyResult(entropy=shannon + boltzmann, stderr=0.0, shannon=shannon,
                         shannon_err=0.0, boltzmann=boltzmann, boltzmann_err=0.0,
                         max_entropy=cg.max_entropy, method="exact", label=cg.label,
                         pruned_mass=float(pruned_mass), distribution=dist,
                         bond_entropies=bonds, algorithm=algorithm)


def _bar(progress: bool, total: int, desc: str):
    from tqdm.auto import tqdm

    return tqdm(total=total, desc=desc, disable=not progress, leave=False)


# --------------------------------------------------------------------------- enumerate


class _TooManyBranches(Exception):
    """Enumeration needs more live prefixes than allowed."""


def _enumerate(blocks: Sequence[ReadoutBlock], limit: float, prune: float, progress: bool,
               budget: float = np.inf) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """Leaves (p, ln V, outcome strings) of the pruned outcome tree, and the pruned mass.

    Level k holds the live prefixes i_1 .. i_k, each with its environment normalised to
    unit trace and its ln p; every outcome j of block k + 1 extends all of them in one
    :func:`transfer` call. Cost sum_k n_k 8 R_k chi_l chi_r (chi_l + chi_r) flops (n_k
    live prefixes); memory 16 bytes x n_k chi^2 (twice, current and next level), capped
    at ENUMERATE_BYTES. Raises _TooManyBranches before a level that would take the live
    prefixes beyond ``limit`` or the flops beyond ``budget``.
    """
    env = np.ones((1, 1, 1), dtype=complex)
    log_p, log_v = np.zeros(1), np.zeros(1)
    outcomes = np.zeros((1, 0), dtype=np.int64)
    pruned = 0.0
    flops = 0.0
    with _bar(progress, len(blocks), "enumerate") as bar:
        for k, blk in enumerate(blocks):
            flops += transfer_flops(env.shape[0], blk.tensor.shape)
            if flops > budget:
                raise _TooManyBranches(
                    f"more than {budget:.3g} flops (the cost of sampling) at block {k} "
                    f"(sites {blk.start}..{blk.stop - 1})")
            chi = blk.tensor.shape[2]
            cap = min(limit, max(1, ENUMERATE_BYTES // (16 * chi * chi)))
            p_parent = np.exp(log_p)
            parts = []
            kept = 0
            for j in range(blk.n_outcomes):
                rows = blk.rows(j)
                if rows.shape[1] == 0:
                    continue
                child = transfer(env, rows)
                trace = np.einsum("nii->n", child).real
                p = p_parent * trace
                keep = (p > 0) & (p >= prune)
                pruned += float(np.sum(np.clip(p[~keep], 0.0, None)))
                sel = np.flatnonzero(keep)
                kept += sel.size
                if kept > cap:
                    why = ("max_branches" if cap == limit else
                           f"the memory cap of {ENUMERATE_BYTES / 2**20:.0f} MiB")
                    raise _TooManyBranches(
                        f"more than {cap} live outcome prefixes ({why}) at block {k} "
                        f"(sites {blk.start}..{blk.stop - 1})")
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


# --------------------------------------------------------------------------- count


def _count_left(env: np.ndarray, tensors: Sequence[np.ndarray]) -> np.ndarray:
    """Append a counted region to a stack of left environments: (K, l, l) ->
    (K (b + 1), c, c), the new counter (sites in |1> of the region) varying fastest.
    The site's rows of |0> and of |1> are the first and second half of its index (one
    row, or two ancilla rows for a purification)."""
    cur = env[:, None]
    for t in tensors:
        n_prev, n_cnt, cl, _ = cur.shape
        cr, half = t.shape[2], t.shape[1] // 2
        flat = cur.reshape(n_prev * n_cnt, cl, cl)
        new = np.zeros((n_prev, n_cnt + 1, cr, cr), dtype=complex)
        new[:, :-1] += transfer(flat, t[:, :half, :]).reshape(n_prev, n_cnt, cr, cr)
        new[:, 1:] += transfer(flat, t[:, half:, :]).reshape(n_prev, n_cnt, cr, cr)
        cur = new
    return cur.reshape(-1, *cur.shape[2:])


def _count_right(tensors: Sequence[np.ndarray]) -> np.ndarray:
    """Right environments R[n] = sum over the region's strings with n sites in |1> of
    A R A^dagger, from the chain's right end: (b + 1, l, l)."""
    right = np.ones((1, 1, 1), dtype=complex)
    for t in reversed(tensors):
        adj = t.conj().transpose(2, 1, 0)
        n = right.shape[0]
        cl, half = t.shape[0], t.shape[1] // 2
        new = np.zeros((n + 1, cl, cl), dtype=complex)
        new[:-1] += transfer(right, adj[:, :half, :])
        new[1:] += transfer(right, adj[:, half:, :])
        right = new
    return right


def _count(mps: MPS | PurifiedMPS, cg: BlockCoarseGraining,
           bonds: np.ndarray | None) -> EntropyResult:
    """Exact joint distribution of the numbers n_1 .. n_k (k <= 3 regions).

    Left environments carry the counters of regions 1 .. k-1 (K = prod (b_i + 1) of them
    at the last cut); right environments R[n_k] come from the chain's end; then
    p(n_1 .. n_k) = Tr E[n_1 .. n_{k-1}] R[n_k]. Cost ~ 4 chi^3 per site and live
    counter value (8 flops each): about 4 chi^3 (b_1^2/2 + (b_1 + 1) b_2^2/2 + b_k^2/2)
    complex multiply-adds for three regions; memory 16 bytes x chi^2 (3 K + b_k + 1).
    """
    *head, (a_last, b_last) = cg.regions
    env = np.ones((1, 1, 1), dtype=complex)
    for a, b in head:
        env = _count_left(env, mps.tensors[a:b])
    right = _count_right(mps.tensors[a_last:b_last])
    joint = (env.reshape(env.shape[0], -1)
             @ right.transpose(0, 2, 1).reshape(right.shape[0], -1).T).real
    sizes = [b - a + 1 for a, b in cg.regions]
    outcomes = np.array(list(np.ndindex(*sizes)), dtype=np.int64).reshape(-1, len(sizes))
    log_vol = [np.log(blk.volumes) for blk in cg.blocks]
    log_v = sum(lv[outcomes[:, i]] for i, lv in enumerate(log_vol))
    return _exact_result(joint.reshape(-1), log_v, outcomes, cg, "mps-count", 0.0, bonds)


# --------------------------------------------------------------------------- sample


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


@dataclass(frozen=True, eq=False)
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
        cl, n_rows, cr = blk.tensor.shape
        amp = (vec @ blk.tensor.reshape(cl, n_rows * cr)).reshape(n, n_rows, cr)
        flops += 8.0 * n * cl * n_rows * cr
        weight = (amp.real**2 + amp.imag**2).sum(axis=2)
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


@dataclass(frozen=True, eq=False)
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


def draw_conditional(blocks: Sequence[ReadoutBlock], weights: Sequence[np.ndarray],
                     uniforms: np.ndarray) -> ConditionalBatch:
    """Draw coarse outcome paths block by block from their exact conditional
    distributions and add up the exact conditional entropies along each path.

    Parameters
    ----------
    blocks : the state's blocks from :func:`mpsobs.blocktensors.readout_blocks`.
    weights : :func:`mpsobs.blocktensors.outcome_weights` of every block (once per state).
    uniforms : (n, blocks) numbers in [0, 1); row s, column k draws sample s at block k
        (so a sample does not depend on which other samples share its batch).

    With the unit-trace environments E of the n paths stacked, all conditionals
    p(i | i_<k) = Tr[E R_{k,i}] come from one matrix product
    (:func:`mpsobs.blocktensors.conditional_probabilities`); f_k = sum_i p_i (-ln p_i +
    ln V_{k,i}) is added to the path's value; i_k is drawn from the same p; E is advanced
    with the rows of i_k only and renormalised. By the chain rule sum_k E[f_k] = S_obs,
    so the path value is unbiased; it is exact for a product of blocks. Cost per sample
    and block 4 chi_l^2 n_out + 8 g chi_l chi_r (chi_l + chi_r) flops (n_out outcomes, g
    rows of the drawn outcome); memory 16 bytes x n x 2 chi^2 plus
    :data:`mpsobs.blocktensors.WORK_BYTES`.
    """
    n, m = uniforms.shape
    envs = _Environments(blocks, n)
    shannon = np.zeros(n)
    boltzmann = np.zeros(n)
    outcomes = np.empty((n, m), dtype=np.int64)
    flops = 0.0
    for k, (blk, w) in enumerate(zip(blocks, weights, strict=True)):
        p = conditional_probabilities(envs.env, w)
        flops += 2.0 * n * w.size
        h, b = conditional_terms(p, blk.log_volumes)
        shannon += h
        boltzmann += b
        outcome = _draw_index(p, uniforms[envs.held, k])
        _, outcome, (shannon, boltzmann) = envs.advance(blk, outcome, (shannon, boltzmann))
        outcomes[envs.held, k] = outcome
    restore = np.argsort(envs.held)
    return ConditionalBatch(outcomes, shannon[restore], boltzmann[restore],
                            flops + envs.flops)


def conditional_sample_flops(blocks: Sequence[ReadoutBlock]) -> float:
    """Predicted flops of one conditional path: per block the conditionals plus the
    transfer with the mean drawn group size g = sum_i g_i^2 / R (rows drawn uniformly)."""
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


def _mean_err(x: np.ndarray) -> tuple[float, float]:
    return float(np.mean(x)), float(np.std(x, ddof=1) / np.sqrt(x.size))


class _Sampling:
    """Batches of sample values (Shannon and Boltzmann parts) drawn from one generator:
    sample s always uses row s of its uniforms, whatever the batch size."""

    def __init__(self, blocks: Sequence[ReadoutBlock], conditional: bool, seed,
                 batch: int | None, bar):
        self.blocks = blocks
        self.algorithm = "mps-conditional" if conditional else "mps-sample"
        self._weights = [outcome_weights(b) for b in blocks] if conditional else None
        self._rng = np.random.default_rng(seed)
        self._batch = batch or default_batch(blocks)
        self._bar = bar
        self.shannon: list[np.ndarray] = []
        self.boltzmann: list[np.ndarray] = []
        self.drawn = 0
        self.flops = 0.0

    def values(self) -> np.ndarray:
        return np.concatenate(self.shannon) + np.concatenate(self.boltzmann)

    def draw(self, goal: int, minimum: int, target_stderr: float | None) -> None:
        """Draw until ``goal`` samples, or with ``target_stderr`` until the standard error
        of S_obs reaches it after at least ``minimum`` samples."""
        while self.drawn < goal:
            if (target_stderr is not None and self.drawn >= minimum
                    and _mean_err(self.values())[1] <= target_stderr):
                return
            size = min(self._batch, goal - self.drawn)
            uniforms = self._rng.random((size, len(self.blocks)))
            if self._weights is None:
                batch = draw_samples(self.blocks, uniforms)
                h, b = -batch.log_p, batch.log_v
            else:
                batch = draw_conditional(self.blocks, self._weights, uniforms)
                h, b = batch.shannon, batch.boltzmann
            self.shannon.append(h)
            self.boltzmann.append(b)
            self.drawn += size
            self.flops += batch.flops
            self._bar.update(size)

    def result(self, cg: BlockCoarseGraining, bonds: np.ndarray,
               target_stderr: float | None, max_samples: int) -> EntropyResult:
        entropy, stderr = _mean_err(self.values())
        shannon, shannon_err = _mean_err(np.concatenate(self.shannon))
        boltzmann, boltzmann_err = _mean_err(np.concatenate(self.boltzmann))
        if target_stderr is not None and stderr > target_stderr:
            logger.warning("target_stderr %.3g not reached with max_samples = %d "
                           "(stderr %.3g)", target_stderr, max_samples, stderr)
        logger.debug("%s: %d samples, %.3g flops", self.algorithm, self.drawn, self.flops)
        return EntropyResult(entropy=entropy, stderr=stderr, shannon=shannon,
                             shannon_err=shannon_err, boltzmann=boltzmann,
                             boltzmann_err=boltzmann_err, max_entropy=cg.max_entropy,
                             method="sampled", label=cg.label, samples=self.drawn,
                             bond_entropies=bonds, algorithm=self.algorithm)


def _block_product(blocks: Sequence[ReadoutBlock]) -> bool:
    """Whether the state is a product over the blocks (bond dimension 1 at every block
    boundary): then every conditional is the block's own distribution."""
    return all(b.tensor.shape[0] == 1 for b in blocks)


def _product_result(blocks: Sequence[ReadoutBlock], cg: BlockCoarseGraining,
                    bonds: np.ndarray) -> EntropyResult:
    """Exact S_obs of a product over blocks: one conditional path (any uniforms)."""
    path = draw_conditional(blocks, [outcome_weights(b) for b in blocks],
                            np.zeros((1, len(blocks))))
    shannon, boltzmann = float(path.shannon[0]), float(path.boltzmann[0])
    return EntropyResult(entropy=shannon + boltzmann, stderr=0.0, shannon=shannon,
                         shannon_err=0.0, boltzmann=boltzmann, boltzmann_err=0.0,
                         max_entropy=cg.max_entropy, method="exact", label=cg.label,
                         bond_entropies=bonds, algorithm="mps-conditional")


# --------------------------------------------------------------------------- entry point


def mps_observational_entropy(state, coarse_graining: BlockCoarseGraining, *,
                              samples: int | None = None, seed=None,
                              method: Method | None = None,
                              target_stderr: float | None = None,
                              prune: float = DEFAULT_PRUNE,
                              max_branches: int | None = None,
                              batch: int | None = None,
                              max_samples: int = DEFAULT_MAX_SAMPLES,
                              progress: bool = False) -> EntropyResult:
    """Observational entropy (nats) of an MPS under a block coarse-graining.

    Parameters
    ----------
    state : quimb ``MatrixProductState``, :class:`mpsobs.mps.MPS` or list of (left, 2,
        right) arrays; any L, bond dimension and gauge. Or a mixed state as a
        :class:`mpsobs.mps.PurifiedMPS` (e.g. :func:`mpsobs.thermo.gibbs_state`): the
        coarse-graining acts on the physical sites, the ancillas are traced inside the
        block contractions (:mod:`mpsobs.blocktensors`; 2**b times the readout rows,
        so sampling and enumeration cost about 2**b times more per block). It is not
        modified; a copy is brought to right-canonical form. It must be normalised:
        |ln norm| > :data:`mpsobs.dense.NORM_TOL` raises InputError (the same rule as for
        dense vectors; see :func:`canonical_state`).
    coarse_graining : from :func:`mpsobs.coarse.blocks` or :func:`mpsobs.coarse.sequence`
        with the state's L.
    samples : for ``"sample"`` and ``"sample_strings"``: number of samples (default
        DEFAULT_SAMPLES = 1000), or with ``target_stderr`` the minimum (default
        MIN_TARGET_SAMPLES = 100). In automatic mode it also sets the flop budget of
        enumeration (the cost of that many conditional samples).
    seed : anything :func:`numpy.random.default_rng` takes. Same seed and settings give
        the same numbers; sample s uses the s-th row of uniforms of that generator
        whatever the batch size, so the drawn outcomes do not depend on ``batch``.
        Anything else raises InputError naming ``seed``.
    method : "sample" (conditional chain-rule estimator), "sample_strings" (per-string
        estimator), "enumerate", "count", "exact" or None (automatic: exact when that is
        cheaper than sampling to the requested error; the rule is in the module
        docstring). The exact methods take neither ``samples`` nor ``target_stderr``.
    target_stderr : keep drawing batches until the standard error of S_obs is at most
        this, or ``max_samples`` are drawn (then a warning is logged).
    prune : enumeration drops outcome prefixes of probability below this floor
        (default 1e-12); their total is ``pruned_mass``.
    max_branches : ``"enumerate"`` and ``"exact"`` give up (InputError naming ``method``)
        beyond this many live prefixes at one block (default DEFAULT_MAX_BRANCHES =
        2**14); the automatic choice stops enumerating there only if it is given, and
        otherwise at its flop budget. Always capped by ENUMERATE_BYTES.
    batch : samples contracted together (default: as many as fit in BATCH_BYTES = 256 MiB,
        16 .. MAX_BATCH).
    max_samples : upper bound on samples; with ``target_stderr``, where drawing stops
        (default 10**6).
    progress : show a tqdm progress bar.

    Returns
    -------
    EntropyResult: ``method`` "exact" (``algorithm`` "mps-enumerate" or "mps-count" with
    ``pruned_mass`` and ``distribution``, or "mps-conditional" for a product over blocks)
    or "sampled" (``algorithm`` "mps-conditional" for ``"sample"``, "mps-sample" for
    ``"sample_strings"``; ``samples``, ``stderr``, ``shannon_err``, ``boltzmann_err``);
    ``bond_entropies``, the
    von Neumann entropy of every bond (index i cuts sites i | i + 1). At a cut between two
    blocks it is a lower bound: S_obs >= H(p_left) + <ln V_left> >= S_vN(rho_left).
    ``bond_entropies`` is None for a purification (its bond entropies are those of the
    chain with its ancillas, not of the mixed state).

    Notes
    -----
    Preparation: L chi^3 (canonical form, bond entropies) plus the rotated block tensors,
    16 bytes x sum_k chi_{k-1} R_k chi_k (R_k = 2**b_k readout rows for one observable).
    Conditional sampling: once per state 8 chi^3 R flops per block for the R_{k,i}; per
    sample and block 4 chi^2 n_out + 16 g chi^3 flops (n_out outcomes, g = readout rows
    of the drawn outcome); working memory 16 bytes x batch x 2 chi^2. Per-string
    sampling: per sample and block ~ 8 chi^2 R + 16 g chi^3 flops; working memory 16 bytes
    x batch x (2 chi^2 + R chi). Both plus :data:`mpsobs.blocktensors.WORK_BYTES`.
    Enumeration: per live prefix and block
    16 R chi^3 flops; 32 bytes x live prefixes x chi^2. Counting: 32 chi^3 flops per site
    and live counter value (about 4 chi^3 (b_1^2/2 + (b_1 + 1) b_2^2/2 + b_3^2/2) complex
    multiply-adds for three regions); memory 16 bytes x chi^2 x (3 K + b_last + 1), K =
    product of (b + 1) over all regions but the last.
    """
    if isinstance(coarse_graining, ProjectorCoarseGraining):
        raise InputError("coarse_graining: projector coarse-grainings act on dense states "
                         "only; use mpsobs.coarse.blocks for an MPS")
    if not isinstance(coarse_graining, BlockCoarseGraining):
        raise InputError(f"coarse_graining: expected a block coarse-graining from "
                         f"mpsobs.coarse, got {type(coarse_graining).__name__}")
    cg = coarse_graining
    _check_options(samples, target_stderr, prune, max_branches, batch, max_samples, progress,
                   seed)
    chosen = _resolve_method(method, cg, samples, target_stderr)
    mps = canonical_state(state, cg.L)
    bonds = None if isinstance(mps, PurifiedMPS) else bond_entropies(mps)
    if chosen == "count":
        return _count(mps, cg, bonds)
    blocks = readout_blocks(mps, cg)
    if chosen in ("exact", "auto") and _block_product(blocks):
        return _product_result(blocks, cg, bonds)
    if chosen in ("enumerate", "exact"):
        try:
            p, log_v, outcomes, pruned = _enumerate(
                blocks, max_branches or DEFAULT_MAX_BRANCHES, prune, progress)
        except _TooManyBranches as exc:
            raise InputError(f"method: {chosen!r} (exact enumeration) needs {exc}; raise "
                             f"max_branches or prune, or use method 'sample'") from None
        return _exact_result(p, log_v, outcomes, cg, "mps-enumerate", pruned, bonds)
    if target_stderr is None:
        minimum = goal = samples or DEFAULT_SAMPLES
    else:
        minimum, goal = samples or MIN_TARGET_SAMPLES, max_samples
    with _bar(progress, goal, "sample") as bar:
        run = _Sampling(blocks, chosen != "sample_strings", seed, batch, bar)
        if chosen == "auto":
            exact = _enumerate_if_cheaper(run, blocks, cg, bonds, prune, max_branches,
                                          progress, minimum, goal, target_stderr, max_samples)
            if exact is not None:
                return exact
        run.draw(goal, minimum, target_stderr)
    return run.result(cg, bonds, target_stderr, max_samples)


def _enumerate_if_cheaper(run: _Sampling, blocks: Sequence[ReadoutBlock],
                          cg: BlockCoarseGraining, bonds: np.ndarray, prune: float,
                          max_branches: int | None, progress: bool, minimum: int,
                          goal: int, target_stderr: float | None,
                          max_samples: int) -> EntropyResult | None:
    """The automatic choice: the exact enumeration result if it costs no more flops than
    the conditional sampling it replaces and its pruning error is no larger than the
    sampling error, else None (with the pilot samples, if any, kept in ``run``).

    Sampling cost: n samples x :func:`conditional_sample_flops`, n = ``goal`` or, with
    ``target_stderr``, (sigma / target)^2 from the per-sample deviation sigma of a pilot
    of ``minimum`` samples (the first samples of the run). Sampling error:
    ``target_stderr``, or sigma / sqrt(goal) (pilot of min(MIN_TARGET_SAMPLES, goal)
    samples, drawn only when enumeration pruned something).
    """
    per_sample = conditional_sample_flops(blocks)
    if target_stderr is not None:
        run.draw(minimum, minimum, None)
        sigma = float(np.std(run.values(), ddof=1))
        needed = int(np.clip(np.ceil((sigma / target_stderr) ** 2), minimum, max_samples))
    else:
        needed = goal
    budget = max(needed - run.drawn, 0) * per_sample
    try:
        p, log_v, outcomes, pruned = _enumerate(blocks, max_branches or np.inf, prune,
                                                progress, budget)
    except _TooManyBranches as exc:
        logger.info("enumeration stopped: %s; sampling instead", exc)
        return None
    bound = pruned_entropy_bound(pruned, cg.max_entropy)
    if bound > 0.0 and target_stderr is None:
        run.draw(min(MIN_TARGET_SAMPLES, goal), 0, None)
        error = float(np.std(run.values(), ddof=1)) / np.sqrt(goal)
    else:
        error = target_stderr or 0.0
    if bound <= error:
        return _exact_result(p, log_v, outcomes, cg, "mps-enumerate", pruned, bonds)
    logger.info("enumeration left out mass %.3g (entropy bound %.3g > sampling error "
                "%.3g); sampling instead", pruned, bound, error)
    return None
