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
  first ``samples`` or MIN_TARGET_SAMPLES samples), the memory cap enumeration.ENUMERATE_BYTES and,
  if given, ``max_branches``. Its result is kept if it finishes within the budget and
  ``pruned_entropy_bound`` is at most the error sampling would give: ``target_stderr``,
  or sigma / sqrt(n) from a pilot of MIN_TARGET_SAMPLES samples (drawn only when
  something was pruned). Else ``"sample"`` runs, continuing from the pilot samples. The
  wasted work is at most the sampling cost, so automatic costs at most about twice the
  cheaper method; with ``previous_method="sampled"`` (the point passes how the previous
  output time came out) enumeration is not tried at all.

Number-conserving states (definite bond charges) are enumerated and sampled on charge
blocks (:mod:`mpsobs.estimators.charges`), with the same values up to round-off; the
sampler with dense environments (states without definite charges, purifications) works
in single precision (:func:`mpsobs.estimators.sampling.draw_conditional`), whose
round-off stays far below the standard error; :func:`baseline_algorithms` switches
these, and the ``previous_method`` shortcut, off.
"""

from __future__ import annotations

import contextlib
import contextvars
import logging
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, replace
from typing import Literal

import numpy as np

from mpsobs.chain.coarse import MAX_BLOCK_SITES, BlockCoarseGraining, ProjectorCoarseGraining
from mpsobs.core.errors import InputError, check_seed
from mpsobs.estimators import counting, enumeration
from mpsobs.estimators.blocktensors import ReadoutBlock, outcome_weights, readout_blocks, transfer
from mpsobs.estimators.charges import ChargedBlock, charged_blocks
from mpsobs.estimators.counting import COUNT_MAX_REGIONS, countable
from mpsobs.estimators.dense import NORM_TOL
from mpsobs.estimators.enumeration import progress_bar
from mpsobs.estimators.result import EntropyResult, OutcomeDistribution
from mpsobs.estimators.sampling import (
    ConditionalBatch,
    SampleBatch,
    conditional_sample_flops,
    conditional_terms,
    default_batch,
    draw_conditional,
    draw_conditional_charged,
    draw_conditional_vectors,
    draw_samples,
    single_rows,
)
from mpsobs.mps.charges import bond_charges
from mpsobs.mps.tensors import MPS, PurifiedMPS, as_mps, right_canonical_log_norm

__all__ = ["mps_observational_entropy", "canonical_state", "draw_samples", "SampleBatch",
           "draw_conditional", "ConditionalBatch", "conditional_terms",
           "conditional_sample_flops", "default_batch", "pruned_entropy_bound", "countable",
           "check_seed", "Method", "METHODS", "SAMPLING_METHODS", "draw_conditional_charged",
           "baseline_algorithms", "PREVIOUS_METHODS", "Evaluator", "EVALUATORS",
           "draw_conditional_vectors", "single_rows"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

logger = logging.getLogger(__name__)

Method = Literal["enumerate", "count", "sample", "sample_strings", "exact"]
METHODS = ("enumerate", "count", "sample", "sample_strings", "exact")
#: The methods that always sample (the automatic choice samples where exact methods cost
#: more); sample settings apply to these and to the automatic choice.
SAMPLING_METHODS = ("sample", "sample_strings")

#: Samples drawn when neither ``samples`` nor ``target_stderr`` is given.
DEFAULT_SAMPLES = 1000
#: Minimum number of samples before ``target_stderr`` is tested.
MIN_TARGET_SAMPLES = 100
DEFAULT_MAX_SAMPLES = 1_000_000
DEFAULT_PRUNE = 1e-12
DEFAULT_MAX_BRANCHES = 2**14
#: Values of ``previous_method``: how the same coarse-graining was estimated at the
#: previous output time of the same evolution.
PREVIOUS_METHODS = ("exact", "sampled")

_BASELINE = contextvars.ContextVar("mpsobs_baseline_algorithms", default=False)


@contextlib.contextmanager
def baseline_algorithms() -> Iterator[None]:
    """Inside this context the estimators run the algorithms used before the charge
    blocks: dense chi x chi environments also for number-conserving states, one per path
    (not one per distinct prefix) and in double precision (not single), and the automatic
    choice tries enumeration whatever ``previous_method`` says. For benchmarks
    and cross-checks (``scripts/bench_point.py``); the numbers agree with the default
    algorithms within round-off (exact values) or draw for draw (samples, same seed;
    within single-precision round-off where the default samples with dense environments).
    """
    token = _BASELINE.set(True)
    try:
        yield
    finally:
        _BASELINE.reset(token)


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


def _bond_entropies(rc: MPS) -> np.ndarray:
    """Von Neumann entropy (nats) of every bond of a normalised right-canonical MPS (entry
    i cuts sites i | i + 1), as :func:`mpsobs.mps.bond_entropies`: with the right
    environments the identity, the left environment E_i = sum_s A_s^dagger E_(i-1) A_s
    at bond i has the squared Schmidt values as its eigenvalues. Cost per bond one
    :func:`transfer` (32 chi^3 flops) and one Hermitian eigenvalue problem, a fraction
    of the SVD sweep; the values agree to round-off (1e-15 absolute)."""
    env = np.ones((1, 1, 1), dtype=complex)
    out = np.zeros(rc.L - 1)
    for i, t in enumerate(rc.tensors[:-1]):
        env = transfer(env, t)
        p = np.linalg.eigvalsh(env[0])
        p = p[p > 1e-300]
        out[i] = float(-np.sum(p * np.log(p)))
    return out


def _positive_int(value, name: str, minimum: int = 1) -> int:
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < minimum:
        raise InputError(f"{name}: expected an integer >= {minimum}, got {value!r}")
    return int(value)


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


def _resolve_method(method, cg: BlockCoarseGraining, samples, target_stderr) -> str:
    """The estimator to run: a name of :data:`EVALUATORS` ("count"), "enumerate", "exact"
    (no evaluator applies: a product over blocks or enumeration), "sample",
    "sample_strings" or "auto"."""
    if method is not None and (not isinstance(method, str) or method not in METHODS):
        raise InputError(f"method: unknown {method!r}; allowed: None (automatic), "
                         f"{', '.join(map(repr, METHODS))}")
    wide = any(b.readout is None for b in cg.blocks)
    if method in (*EVALUATORS, "enumerate", "exact") and (samples is not None
                                                          or target_stderr is not None):
        name = "samples" if samples is not None else "target_stderr"
        raise InputError(f"{name}: method {method!r} is exact and draws no samples; drop "
                         f"{name} or use method 'sample' or None (automatic)")
    chosen = method or "auto"
    if chosen in ("auto", "exact"):
        chosen = next((name for name, ev in EVALUATORS.items() if ev.applies(cg)), chosen)
    if chosen in EVALUATORS and not EVALUATORS[chosen].applies(cg):
        raise InputError(f"method: {chosen!r} evaluates {EVALUATORS[chosen].scope}; got "
                         f"{cg.label!r} with {len(cg.blocks)} blocks")
    if wide and chosen not in EVALUATORS:
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


def _count(mps: MPS | PurifiedMPS, cg: BlockCoarseGraining,
           bonds: np.ndarray | None) -> EntropyResult:
    """The counting estimator (:func:`mpsobs.estimators.counting.count_numbers`) as a
    result."""
    p, log_v, outcomes = counting.count_numbers(mps, cg)
    return _exact_result(p, log_v, outcomes, cg, "mps-count", 0.0, bonds)


@dataclass(frozen=True)
class Evaluator:
    """An exact estimator for the coarse-grainings it ``applies`` to (``scope`` says which,
    for the error when it is asked for another): ``run(state, cg, bond_entropies)`` on the
    right-canonical state."""

    applies: Callable[[BlockCoarseGraining], bool]
    run: Callable[[MPS | PurifiedMPS, BlockCoarseGraining, np.ndarray | None], EntropyResult]
    scope: str


#: The exact estimators besides enumeration, by method name. The automatic and "exact"
#: choices take the first that applies; a new one (a method name in METHODS and Method
#: too) is one entry here.
EVALUATORS: dict[str, Evaluator] = {
    "count": Evaluator(countable, _count, f"the number coarse-graining in at most "
                                          f"{COUNT_MAX_REGIONS} regions"),
}


def _mean_err(x: np.ndarray) -> tuple[float, float]:
    return float(np.mean(x)), float(np.std(x, ddof=1) / np.sqrt(x.size))


class _Sampling:
    """Batches of sample values (Shannon and Boltzmann parts) drawn from one generator:
    sample s always uses row s of its uniforms, whatever the batch size."""

    def __init__(self, blocks: Sequence[ReadoutBlock], conditional: bool, seed,
                 batch: int | None, bar, charged: Sequence[ChargedBlock] | None = None):
        self.blocks = blocks
        self.algorithm = "mps-conditional" if conditional else "mps-sample"
        self._share = self._single = not _BASELINE.get()
        self._vectors = conditional and self._share and single_rows(blocks)
        self._charged = charged if conditional and not self._vectors else None
        self._weights = ([outcome_weights(b) for b in blocks] if conditional
                         and charged is None and not self._vectors else None)
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
            if self._vectors:
                batch = draw_conditional_vectors(self.blocks, uniforms)
                h, b = batch.shannon, batch.boltzmann
            elif self._charged is not None:
                batch = draw_conditional_charged(self._charged, uniforms, share=self._share)
                h, b = batch.shannon, batch.boltzmann
            elif self._weights is None:
                batch = draw_samples(self.blocks, uniforms)
                h, b = -batch.log_p, batch.log_v
            else:
                batch = draw_conditional(self.blocks, self._weights, uniforms,
                                         share=self._share, single=self._single)
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
                              progress: bool = False,
                              previous_method: str | None = None) -> EntropyResult:
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
        otherwise at its flop budget. Always capped by enumeration.ENUMERATE_BYTES.
    batch : samples contracted together (default: as many as fit in sampling.BATCH_BYTES = 256 MiB,
        16 .. MAX_BATCH).
    max_samples : upper bound on samples; with ``target_stderr``, where drawing stops
        (default 10**6).
    progress : show a tqdm progress bar.
    previous_method : None, or how the same coarse-graining of the same evolution came
        out at the previous output time (the ``method`` of that result: "exact" or
        "sampled"). With "sampled" the automatic choice goes straight to sampling,
        without trying enumeration first: in a quench the live prefixes only grow, so
        an enumeration that exceeded its budget once is not tried again at later times
        (where it might have succeeded, e.g. when the entanglement falls again, the
        result is sampled, with its error). Other methods ignore it.

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
    distinct outcome prefix of a batch (at most one per sample) and block
    4 chi^2 n_out + 16 g chi^3 flops (n_out outcomes, g = readout rows of the drawn
    outcome); working memory 16 bytes x batch x 2 chi^2. Per-string
    sampling: per sample and block ~ 8 chi^2 R + 16 g chi^3 flops; working memory 16 bytes
    x batch x (2 chi^2 + R chi). Both plus :data:`mpsobs.blocktensors.WORK_BYTES`.
    Enumeration: per live prefix and block
    16 R chi^3 flops; 32 bytes x live prefixes x chi^2.
    A number-conserving MPS (definite bond charges, :func:`mpsobs.estimators.charges.
    bond_charges`) with outcomes of definite number (number; energy and any observable
    commuting with the block number) is sampled and enumerated on charge blocks
    (:mod:`mpsobs.estimators.charges`): chi^3 above becomes d_q^3 per live charge q,
    e.g. about (chi / d_q)^3 fewer flops for number blocks. Counting: 32 chi^3 flops per site
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
    if previous_method is not None and previous_method not in PREVIOUS_METHODS:
        raise InputError(f"previous_method: expected None or one of "
                         f"{', '.join(map(repr, PREVIOUS_METHODS))}, got {previous_method!r}")
    chosen = _resolve_method(method, cg, samples, target_stderr)
    mps = canonical_state(state, cg.L)
    bonds = None if isinstance(mps, PurifiedMPS) else _bond_entropies(mps)
    if chosen in EVALUATORS:
        return EVALUATORS[chosen].run(mps, cg, bonds)
    charged = None if chosen == "sample_strings" else _charge_blocks(mps, cg)
    blocks = readout_blocks(mps, cg) if charged is None else tuple(c.block for c in charged)
    if chosen in ("exact", "auto") and _block_product(blocks):
        return _product_result(blocks, cg, bonds)
    if chosen in ("enumerate", "exact"):
        try:
            p, log_v, outcomes, pruned = _enumerate_any(
                blocks, charged, max_branches or DEFAULT_MAX_BRANCHES, prune, progress)
        except enumeration.TooManyBranches as exc:
            raise InputError(f"method: {chosen!r} (exact enumeration) needs {exc}; raise "
                             f"max_branches or prune, or use method 'sample'") from None
        return _exact_result(p, log_v, outcomes, cg, "mps-enumerate", pruned, bonds)
    if target_stderr is None:
        minimum = goal = samples or DEFAULT_SAMPLES
    else:
        minimum, goal = samples or MIN_TARGET_SAMPLES, max_samples
    with progress_bar(progress, goal, "sample") as bar:
        run = _Sampling(blocks, chosen != "sample_strings", seed, batch, bar, charged)
        if chosen == "auto" and (previous_method != "sampled" or _BASELINE.get()):
            exact = _enumerate_if_cheaper(run, blocks, charged, cg, bonds, prune,
                                          max_branches, progress, minimum, goal,
                                          target_stderr, max_samples)
            if exact is not None:
                return exact
        run.draw(goal, minimum, target_stderr)
    return run.result(cg, bonds, target_stderr, max_samples)


def _charge_blocks(mps: MPS | PurifiedMPS, cg: BlockCoarseGraining
                   ) -> tuple[ChargedBlock, ...] | None:
    """The charge blocks of a number-conserving MPS whose outcomes have definite numbers,
    else None (dense environments): a purification, a state without definite bond
    charges, an observable that mixes numbers, or inside :func:`baseline_algorithms`."""
    if _BASELINE.get() or isinstance(mps, PurifiedMPS):
        return None
    charges = bond_charges(mps)
    if charges is None:
        return None
    blocks = readout_blocks(mps, cg, number_rows=True)
    return None if blocks is None else charged_blocks(blocks, charges)


def _enumerate_any(blocks: Sequence[ReadoutBlock], charged: Sequence[ChargedBlock] | None,
                   limit: float, prune: float, progress: bool, budget: float = np.inf
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """Enumeration on the charge blocks where there are some, else with dense
    environments (:mod:`mpsobs.estimators.enumeration`)."""
    if charged is not None:
        return enumeration.enumerate_outcomes_charged(charged, limit, prune, progress, budget)
    return enumeration.enumerate_outcomes(blocks, limit, prune, progress, budget)


def _enumerate_if_cheaper(run: _Sampling, blocks: Sequence[ReadoutBlock],
                          charged: Sequence[ChargedBlock] | None, cg: BlockCoarseGraining,
                          bonds: np.ndarray, prune: float,
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
        p, log_v, outcomes, pruned = _enumerate_any(blocks, charged, max_branches or np.inf,
                                                    prune, progress, budget)
    except enumeration.TooManyBranches as exc:
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
