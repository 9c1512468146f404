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
- ``"sample"``: unbiased sampling. A readout-row string is drawn by perfect sampling with
  a vector environment (Ferris and Vidal, Phys. Rev. B 85, 165146 (2012)); its rows fix the
  coarse outcome string i, whose exact probability p_i follows from the matrix
  environment; S_obs = E[-ln p_i + ln V_i] and its parts are sample means with standard
  errors from the sample variance.
- ``"exact"``: ``"count"`` where it applies, otherwise ``"enumerate"``.
- ``None`` (automatic): ``"count"`` for number coarse-grainings of at most three blocks
  (and for blocks wider than MAX_BLOCK_SITES); otherwise ``"enumerate"`` with at most as
  many live prefixes as the sample budget (``samples`` or DEFAULT_SAMPLES, capped by
  ``max_branches``), falling back to ``"sample"`` when that is exceeded or the pruned
  mass exceeds AUTO_MAX_PRUNED.
"""

from __future__ import annotations

import logging
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Literal

import numpy as np

from mpsobs.blocktensors import WORK_BYTES, ReadoutBlock, readout_blocks, transfer, transfer_flops
from mpsobs.coarse import MAX_BLOCK_SITES, BlockCoarseGraining, ProjectorCoarseGraining
from mpsobs.dense import NORM_TOL
from mpsobs.errors import InputError
from mpsobs.mps import MPS, PurifiedMPS, as_mps, bond_entropies, right_canonical_log_norm
from mpsobs.result import EntropyResult, OutcomeDistribution

__all__ = ["mps_observational_entropy", "canonical_state", "draw_samples", "SampleBatch",
           "default_batch", "pruned_entropy_bound", "countable", "Method", "METHODS"]

logger = logging.getLogger(__name__)

Method = Literal["enumerate", "count", "sample", "exact"]
METHODS = ("enumerate", "count", "sample", "exact")

#: Samples drawn when neither ``samples`` nor ``target_stderr`` is given.
DEFAULT_SAMPLES = 1000
#: Minimum number of samples before ``target_stderr`` is tested.
MIN_TARGET_SAMPLES = 100
DEFAULT_MAX_SAMPLES = 1_000_000
DEFAULT_PRUNE = 1e-12
DEFAULT_MAX_BRANCHES = 2**14
#: Largest pruned mass the automatic choice accepts from enumeration.
AUTO_MAX_PRUNED = 1e-9
#: Memory cap of the live environments of enumeration (bytes).
ENUMERATE_BYTES = 2**29
#: Memory target of one sampling batch (bytes), used when ``batch`` is None.
BATCH_BYTES = 2**28
MAX_BATCH = 1024
COUNT_MAX_REGIONS = 3


# --------------------------------------------------------------------------- input


def canonical_state(state, L: int | None = None) -> MPS | PurifiedMPS:
    """A normalised right-canonical copy of ``state`` (the input is never modified).

    ``state`` is an :class:`mpsobs.mps.MPS`, a quimb ``MatrixProductState`` or a list of
    (left, 2, right) arrays, in any gauge; or a :class:`mpsobs.mps.PurifiedMPS`, brought
    to the right-canonical form of its local dimension 4 (a PurifiedMPS is returned). A
    state with |ln norm| > :data:`mpsobs.dense.NORM_TOL` is normalised with a UserWarning
    (truncated time evolution loses norm); a zero or non-finite norm raises InputError.
    Cost L chi^3 d.
    """
    mps = MPS(state.tensors) if isinstance(state, PurifiedMPS) else as_mps(state)
    if L is not None and mps.L != L:
        raise InputError(f"coarse_graining: it is for L = {L} sites, the state has {mps.L}")
    for i, t in enumerate(mps.tensors):
        if not np.all(np.isfinite(t)):
            raise InputError(f"state: MPS tensor {i} contains NaN or infinite entries")
    rc, log_norm = right_canonical_log_norm(mps)
    if abs(log_norm) > NORM_TOL:
        warnings.warn(f"state: the MPS is not normalised (ln norm = {log_norm:.12g}); it is "
                      f"normalised before the estimate", UserWarning, stacklevel=3)
    if isinstance(state, PurifiedMPS):
        return replace(state, tensors=rc.tensors)
    return rc


def _positive_int(value, name: str, minimum: int = 1) -> int:
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < minimum:
        raise InputError(f"{name}: expected an integer >= {minimum}, got {value!r}")
    return int(value)


def _check_options(samples, target_stderr, prune, max_branches, batch, max_samples,
                   progress) -> None:
    if samples is not None:
        _positive_int(samples, "samples", 2)
    if target_stderr is not None:
        if (isinstance(target_stderr, bool) or not isinstance(target_stderr, float | int)
                or not np.isfinite(target_stderr) or target_stderr <= 0):
            raise InputError(f"target_stderr: expected a positive number, got {target_stderr!r}")
    if (isinstance(prune, bool) or not isinstance(prune, float | int)
            or not 0.0 <= prune < 1.0):
        raise InputError(f"prune: expected a probability floor in [0, 1), got {prune!r}")
    _positive_int(max_branches, "max_branches")
    if batch is not None:
        _positive_int(batch, "batch")
    _positive_int(max_samples, "max_samples", 2)
    if samples is not None and samples > max_samples:
        raise InputError(f"samples: {samples} exceeds max_samples = {max_samples}")
    if not isinstance(progress, bool):
        raise InputError(f"progress: expected True or False, got {progress!r}")


def countable(cg: BlockCoarseGraining) -> bool:
    """Whether the automatic and "exact" choices count ``cg`` exactly: the number
    observable alone on at most COUNT_MAX_REGIONS blocks."""
    return (len(cg.stages) == 1 and cg.stages[0].name == "number"
            and len(cg.blocks) <= COUNT_MAX_REGIONS)


def _resolve_method(method, cg: BlockCoarseGraining, samples, target_stderr) -> str:
    """The estimator to run: one of METHODS minus "exact", or "auto"."""
    if method is not None and (not isinstance(method, str) or method not in METHODS):
        raise InputError(f"method: unknown {method!r}; allowed: None (automatic), "
                         f"{', '.join(map(repr, METHODS))}")
    wide = any(b.readout is None for b in cg.blocks)
    if method in (None, "exact") and countable(cg):
        method = "count"
    elif method is None:
        method = "auto"
    elif method == "exact":
        method = "enumerate"
    if method == "count" and not countable(cg):
        raise InputError(f"method: 'count' evaluates the number coarse-graining in at most "
                         f"{COUNT_MAX_REGIONS} regions; got {cg.label!r} with "
                         f"{len(cg.blocks)} blocks")
    if wide and method != "count":
        raise InputError(f"coarse_graining: blocks wider than {MAX_BLOCK_SITES} sites are "
                         f"evaluated only by method 'count' (number, at most "
                         f"{COUNT_MAX_REGIONS} regions); got {len(cg.blocks)} blocks")
    if method in ("count", "enumerate") and (samples is not None or target_stderr is not None):
        name = "samples" if samples is not None else "target_stderr"
        raise InputError(f"{name}: method {method!r} is exact and draws no samples")
    return method


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


def _enumerate(blocks: Sequence[ReadoutBlock], limit: int, prune: float,
               progress: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """Leaves (p, ln V, outcome strings) of the pruned outcome tree, and the pruned mass.

    Level k holds the live prefixes i_1 .. i_k, each with its environment normalised to
    unit trace and its ln p; every outcome j of block k + 1 extends all of them in one
    :func:`transfer` call. Cost sum_k n_k 8 R_k chi^2 (chi_l + chi_r) flops (n_k live
    prefixes); memory 16 bytes x n_k chi^2 (twice, current and next level), capped at
    ENUMERATE_BYTES.
    """
    env = np.ones((1, 1, 1), dtype=complex)
    log_p, log_v = np.zeros(1), np.zeros(1)
    outcomes = np.zeros((1, 0), dtype=np.int64)
    pruned = 0.0
    with _bar(progress, len(blocks), "enumerate") as bar:
        for k, blk in enumerate(blocks):
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
    """Sample outcome strings of a right-canonical MPS and their exact probabilities.

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
    chi = max(max(b.tensor.shape[0], b.tensor.shape[2]) for b in blocks)
    # The samples are reordered by outcome at every block (environments copied from
    # ``stack`` into ``scratch``) so that each outcome's environments are one contiguous
    # slice; the advanced environments are written back into ``stack``.
    stack, scratch = (np.empty(n * chi * chi, dtype=complex) for _ in range(2))
    work = np.empty(max(WORK_BYTES // 16, max(b.tensor.size for b in blocks)), dtype=complex)
    env = stack[:n].reshape(n, 1, 1)
    env[...] = 1.0
    held = np.arange(n)  # position s of the stacks holds sample held[s]
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
        cum = np.cumsum(weight, axis=1)
        # 1 - u lies in (0, 1], so the chosen row always has positive weight.
        threshold = (1.0 - uniforms[held, k]) * cum[:, -1]
        row = np.minimum((cum < threshold[:, None]).sum(axis=1), n_rows - 1)
        vec = amp[every, row] / np.sqrt(weight[every, row])[:, None]
        outcome = blk.row_outcome[row]
        log_v += blk.log_volumes[outcome]
        order = np.argsort(outcome, kind="stable")
        held, vec, log_p, log_v, outcome = (held[order], vec[order], log_p[order],
                                            log_v[order], outcome[order])
        sorted_env = scratch[:n * cl * cl].reshape(n, cl, cl)
        np.take(env, order, axis=0, out=sorted_env, mode="clip")
        outcomes[held, k] = outcome
        env = stack[:n * cr * cr].reshape(n, cr, cr)
        present = np.flatnonzero(np.bincount(outcome, minlength=blk.n_outcomes))
        bounds = np.searchsorted(outcome, present)
        for j, lo, hi in zip(present, bounds, list(bounds[1:]) + [n], strict=True):
            rows = blk.rows(j)
            transfer(sorted_env[lo:hi], rows, out=env[lo:hi], work=work)
            flops += transfer_flops(hi - lo, rows.shape)
        trace = np.einsum("nii->n", env).real
        log_p += np.log(trace)
        env /= trace[:, None, None]
    restore = np.argsort(held)
    log_p, log_v = log_p[restore], log_v[restore]
    return SampleBatch(outcomes, log_p, log_v, flops)


def default_batch(blocks: Sequence[ReadoutBlock]) -> int:
    """Samples per batch when ``batch`` is None: as many as fit in BATCH_BYTES, 16 to
    MAX_BATCH (about 250 at bond 128 and blocks of 4)."""
    per_sample = max(16 * (2 * b.tensor.shape[0] ** 2 + 2 * b.tensor.shape[2] ** 2
                           + b.tensor.shape[1] * b.tensor.shape[2]) for b in blocks)
    return int(np.clip(BATCH_BYTES // per_sample, 16, MAX_BATCH))


def _mean_err(x: np.ndarray) -> tuple[float, float]:
    return float(np.mean(x)), float(np.std(x, ddof=1) / np.sqrt(x.size))


def _sample(blocks: Sequence[ReadoutBlock], cg: BlockCoarseGraining, bonds: np.ndarray, *,
            samples: int | None, target_stderr: float | None, max_samples: int,
            batch: int | None, seed, progress: bool) -> EntropyResult:
    """Draw batches until ``samples`` are drawn, or with ``target_stderr`` until the
    standard error of S_obs reaches it (after at least ``samples`` or MIN_TARGET_SAMPLES)
    or ``max_samples`` are drawn."""
    rng = np.random.default_rng(seed)
    batch = batch or default_batch(blocks)
    if target_stderr is None:
        minimum = goal = samples or DEFAULT_SAMPLES
    else:
        minimum, goal = samples or MIN_TARGET_SAMPLES, max_samples
    parts: list[SampleBatch] = []
    drawn = 0
    with _bar(progress, goal, "sample") as bar:
        while drawn < goal:
            size = min(batch, goal - drawn)
            parts.append(draw_samples(blocks, rng.random((size, len(blocks)))))
            drawn += size
            bar.update(size)
            if target_stderr is not None and drawn >= minimum:
                values = np.concatenate([q.log_v - q.log_p for q in parts])
                if _mean_err(values)[1] <= target_stderr:
                    break
    log_p = np.concatenate([q.log_p for q in parts])
    log_v = np.concatenate([q.log_v for q in parts])
    entropy, stderr = _mean_err(log_v - log_p)
    shannon, shannon_err = _mean_err(-log_p)
    boltzmann, boltzmann_err = _mean_err(log_v)
    if target_stderr is not None and stderr > target_stderr:
        logger.warning("target_stderr %.3g not reached with max_samples = %d (stderr %.3g)",
                       target_stderr, max_samples, stderr)
    logger.debug("sampled %d outcome strings, %.3g flops", drawn, sum(q.flops for q in parts))
    return EntropyResult(entropy=entropy, stderr=stderr, shannon=shannon,
                         shannon_err=shannon_err, boltzmann=boltzmann,
                         boltzmann_err=boltzmann_err, max_entropy=cg.max_entropy,
                         method="sampled", label=cg.label, samples=drawn,
                         bond_entropies=bonds, algorithm="mps-sample")


# --------------------------------------------------------------------------- entry point


def mps_observational_entropy(state, coarse_graining: BlockCoarseGraining, *,
                              samples: int | None = None, seed=None,
                              method: Method | None = None,
                              target_stderr: float | None = None,
                              prune: float = DEFAULT_PRUNE,
                              max_branches: int = DEFAULT_MAX_BRANCHES,
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
        modified; a copy is brought to right-canonical form. A state that is not
        normalised (|ln norm| > :data:`mpsobs.dense.NORM_TOL`) is normalised with a
        ``UserWarning``.
    coarse_graining : from :func:`mpsobs.coarse.blocks` or :func:`mpsobs.coarse.sequence`
        with the state's L.
    samples : for ``"sample"``: number of samples (default DEFAULT_SAMPLES = 1000), or
        with ``target_stderr`` the minimum (default MIN_TARGET_SAMPLES = 100). In
        automatic mode also the budget of live prefixes tried by enumeration.
    seed : anything :func:`numpy.random.default_rng` takes. Same seed and settings give
        the same numbers; sample s uses the s-th row of uniforms of that generator
        whatever the batch size, so the drawn outcomes do not depend on ``batch``.
    method : "enumerate", "count", "sample", "exact" or None (automatic; the rule is in
        the module docstring).
    target_stderr : keep drawing batches until the standard error of S_obs is at most
        this, or ``max_samples`` are drawn (then a warning is logged).
    prune : enumeration drops outcome prefixes of probability below this floor
        (default 1e-12); their total is ``pruned_mass``.
    max_branches : enumeration gives up (raises InputError naming ``method``) beyond this
        many live prefixes at one block (default 2**14; also capped by ENUMERATE_BYTES).
    batch : samples contracted together (default: as many as fit in BATCH_BYTES = 256 MiB,
        16 .. MAX_BATCH).
    max_samples : upper bound on samples; with ``target_stderr``, where drawing stops
        (default 10**6).
    progress : show a tqdm progress bar.

    Returns
    -------
    EntropyResult: ``method`` "exact" (``algorithm`` "mps-enumerate" or "mps-count",
    ``pruned_mass``, ``distribution``) or "sampled" (``algorithm`` "mps-sample",
    ``samples``, ``stderr``, ``shannon_err``, ``boltzmann_err``); ``bond_entropies``, the
    von Neumann entropy of every bond (index i cuts sites i | i + 1). At a cut between two
    blocks it is a lower bound: S_obs >= H(p_left) + <ln V_left> >= S_vN(rho_left).
    ``bond_entropies`` is None for a purification (its bond entropies are those of the
    chain with its ancillas, not of the mixed state).

    Notes
    -----
    Preparation: L chi^3 (canonical form, bond entropies) plus the rotated block tensors,
    16 bytes x sum_k chi_{k-1} R_k chi_k (R_k = 2**b_k readout rows for one observable).
    Sampling: per sample and block ~ 8 chi^2 R + 16 g chi^3 flops (g = readout rows of the
    drawn outcome); working memory 16 bytes x batch x (2 chi^2 + R chi), plus
    :data:`mpsobs.blocktensors.WORK_BYTES`. Enumeration: per live prefix and block
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
    _check_options(samples, target_stderr, prune, max_branches, batch, max_samples, progress)
    chosen = _resolve_method(method, cg, samples, target_stderr)
    mps = canonical_state(state, cg.L)
    bonds = None if isinstance(mps, PurifiedMPS) else bond_entropies(mps)
    if chosen == "count":
        return _count(mps, cg, bonds)
    blocks = readout_blocks(mps, cg)
    if chosen in ("enumerate", "auto"):
        limit = max_branches if chosen == "enumerate" else min(
            max_branches, samples or DEFAULT_SAMPLES)
        try:
            p, log_v, outcomes, pruned = _enumerate(blocks, limit, prune, progress)
        except _TooManyBranches as exc:
            if chosen == "enumerate":
                raise InputError(f"method: exact enumeration needs {exc}; raise max_branches "
                                 f"or prune, or use method='sample'") from None
            logger.info("enumeration stopped: %s; sampling instead", exc)
        else:
            if chosen == "enumerate" or pruned <= AUTO_MAX_PRUNED:
                return _exact_result(p, log_v, outcomes, cg, "mps-enumerate", pruned, bonds)
            logger.info("enumeration left out mass %.3g; sampling instead", pruned)
    return _sample(blocks, cg, bonds, samples=samples, target_stderr=target_stderr,
                   max_samples=max_samples, batch=batch, seed=seed, progress=progress)
