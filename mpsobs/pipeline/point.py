"""One sweep point: model and initial state -> TEBD evolution -> estimators -> rows.

:func:`compute_point` is a pure function of the resolved point (:class:`mpsobs.spec.Point`):
the same point gives the same rows whatever worker, order or interruption. Randomness
comes only from seeds in the point: the random field (``model.field.seed``), a random
product state (``state.seed``) and the sampled estimators, whose generator for time
index k and coarse-graining j is ``SeedSequence(point.seed, spawn_key=(k, j))``; the
equilibrium estimate of coarse-graining j (below) uses the one-element key (j,), so it
never shares a stream with the time series. No key depends on the length of the time
grid: a grid extended by later times gives the same numbers at the earlier ones.

The thermodynamic reference is computed once per point from the initial state
(:mod:`mpsobs.thermo`): the Gibbs entropy at its energy and, when the model conserves
it, its particle number (grand ensemble; for XX chains with a definite number, exactly
that sector), and for XX chains the generalised Gibbs entropy of its mode occupations.
With it, per coarse-graining, ``S_obs_eq``: S_obs of that same Gibbs ensemble (same
beta, mu or sector), the value a thermalizing chain should reach, from the purification
of :func:`mpsobs.thermo.gibbs_state` (bond :data:`EQ_MAX_BOND`, at most the evolution's
chi_max) and the point's estimator settings. ``S_obs_eq_err`` = sampling stderr + the
method error of the wide-region estimator + the pruned-mass bound of enumeration +
:func:`mpsobs.thermo.entropy_shift_bound` of the purification's trace-distance error
(the Trotter and truncation estimate of the state).
For XX chains ``S_obs_gge`` is S_obs of the generalised Gibbs ensemble of the initial
mode occupations (a Gaussian state; grand in the particle number), exact by counting
statistics for number coarse-grainings of at most three regions, NaN otherwise.

Truncation check (``evolution.chi_check`` > 0): a second state starts from the same
initial state and is evolved alongside the main one at the smaller bond chi_check with
the same gates, steps, cutoff and output times; at every output time it is estimated
with the same seeds and, where the main estimate was exact, exactly, where it was
sampled, with the same number of samples, so the sampling noise largely cancels in the
difference. ``S_obs_trunc_err`` = |S_obs(chi_max) - S_obs(chi_check)| (and the same for
the Shannon and Boltzmann parts) is a heuristic error estimate of the truncation at
chi_max, not a bound: it assumes that the error at chi_max is smaller than the change
from chi_check to chi_max. It does not see errors of the initial state (a ground state
found at chi_max is the starting point of both). ``check_discarded_weight`` is the check
evolution's own cumulative discarded weight. Without the check all four error columns
are NaN. Trusted times are not a point's business: the analysis derives them from these
columns at a tolerance chosen afterwards (:mod:`mpsobs.analysis.trust`).

Energy regions wider than the block limit
(:class:`mpsobs.chain.coarse.WideEnergyRegions`) are evaluated by the Chebyshev estimator
with its defaults (no estimator settings); its error estimate is the column
``S_obs_method_err`` (0 for the other estimators), and its truncation check repeats it on
the check state.

The model, initial state, coarse-grainings and estimator options come from the builder
(:mod:`mpsobs.pipeline.build`) that :func:`check_point` uses too.

Rows: one per (time, coarse-graining), with the columns
:data:`mpsobs.pipeline.columns.ROW_COLUMNS` and the point's parameters. Entropies in
nats. The frame's ``attrs["site_fields"]`` holds the longitudinal field h_i of every
site (units of J), which the store keeps in the point file's metadata.
"""

from __future__ import annotations

import logging
import math
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from mpsobs.chain import coarse, models
from mpsobs.core.errors import InputError, TooLargeError
from mpsobs.core.version import __version__
from mpsobs.estimators.entropy import observational_entropy
from mpsobs.estimators.estimate import PREVIOUS_METHODS, countable, pruned_entropy_bound
from mpsobs.estimators.result import EntropyResult
from mpsobs.mps.tensors import MPS
from mpsobs.pipeline import columns as col
from mpsobs.pipeline.build import (
    BuiltCoarse,
    BuiltPoint,
    build_point,
    equilibrium_seed,
    estimator_seed,
    evolve,
    initial_state,
)
from mpsobs.pipeline.spec_points import Point
from mpsobs.pipeline.store import SITE_FIELDS_ATTR
from mpsobs.references import gaussian, thermo

__all__ = ["compute_point", "check_point", "check_points", "total_number", "EQ_MAX_BOND"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)

_NUMBER = np.diag([0.0, 1.0])  # sites in |1>
#: <N> this close to an integer is taken as that integer (a state of definite number).
NUMBER_TOL = 1e-8
#: Largest bond of the Gibbs-state purification behind ``S_obs_eq`` (the evolution's
#: chi_max if smaller). Its sampling costs about 2**b chi^3 per block and sample (b sites
#: per block), so the bond is kept modest; the truncation it causes is in S_obs_eq_err.
EQ_MAX_BOND = 24


@dataclass(frozen=True)
class _Reference:
    """Thermodynamic reference of a point (nats); the last three have one entry per
    coarse-graining."""

    S_thermo: float
    S_thermo_err: float
    beta: float
    S_gge: float
    S_obs_eq: tuple[float, ...]
    S_obs_eq_err: tuple[float, ...]
    S_obs_gge: tuple[float, ...]


def total_number(state: MPS) -> float:
    """<N>, the expected number of sites in |1>, of a normalised MPS. Cost L chi^3."""
    L = state.L
    counter = models.Model("number", L, {}, tuple(models.Term(i, _NUMBER) for i in range(L)),
                           conserves_number=True)
    return models.energy(counter, state)


def _is_xx(model: models.Model) -> bool:
    """Whether the model is an XX chain (free fermions that carry the particle number)."""
    try:
        gaussian.quadratic_hamiltonian(model)
    except InputError:
        return False
    return True


def _reference(model: models.Model, state: MPS, energy: float,
               cgs: Sequence[BuiltCoarse], seeds: list[int], max_bond: int) -> _Reference:
    """Gibbs entropy at the state's energy (and number, where conserved); the GGE entropy
    of its mode occupations for XX chains; S_obs of both ensembles per coarse-graining
    (see the module docstring). A state with every site empty or every site filled is
    alone in its sector: entropy 0, and its own S_obs is the equilibrium value."""
    number = None
    if model.conserves_number:
        number = total_number(state)
        if abs(number - round(number)) < NUMBER_TOL:
            number = float(round(number))
        if number in (0.0, float(model.L)):
            return _Reference(0.0, 0.0, math.nan, math.nan,
                              *_equilibrium_values(state, 0.0, cgs, seeds),
                              S_obs_gge=(math.nan,) * len(cgs))
    xx = _is_xx(model)
    ensemble = "canonical" if xx and number is not None and number.is_integer() else "grand"
    gibbs = thermo.gibbs(model, energy, number, ensemble=ensemble)
    gge = thermo.gge(model, state) if xx else None
    eq_values = eq_errors = (math.nan,) * len(cgs)
    sector = int(number) if ensemble == "canonical" else None
    mu = None if sector is not None else gibbs.mu
    if gibbs.beta < 0:
        log.warning("the initial state lies above infinite temperature: its Gibbs reference "
                    "has beta = %g < 0 (energy %g in the upper half of the spectrum); "
                    "S_thermo and S_obs_eq refer to that negative-temperature ensemble",
                    gibbs.beta, energy)
    if np.isfinite(gibbs.beta) and (mu is None or np.isfinite(mu)):
        rho = thermo.gibbs_state(model, gibbs.beta, mu, number=sector,
                                 max_bond=min(max_bond, EQ_MAX_BOND))
        eq_values, eq_errors = _equilibrium_values(rho, rho.error, cgs, seeds)
    else:
        log.warning("S_obs_eq: no Gibbs state at beta = %g, mu = %s (ground or ceiling "
                    "energy, or infinite temperature off half filling); NaN", gibbs.beta, mu)
    gge_obs = tuple(_gge_entropy(gge, c.coarse_graining) for c in cgs)
    return _Reference(S_thermo=float(gibbs.entropy), S_thermo_err=float(gibbs.entropy_err),
                      beta=float(gibbs.beta),
                      S_gge=float(gge.entropy) if gge is not None else math.nan,
                      S_obs_eq=eq_values, S_obs_eq_err=eq_errors, S_obs_gge=gge_obs)


def _equilibrium_values(state, trace_distance: float, cgs: Sequence[BuiltCoarse],
                        seeds: list[int]) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """(S_obs per coarse-graining, their errors) of an equilibrium state (:func:`_estimate`)."""
    eq = []
    for c, seed in zip(cgs, seeds, strict=True):
        try:
            eq.append(_estimate(state, c.coarse_graining, c.options, seed, trace_distance))
        except TooLargeError as exc:
            log.warning("S_obs_eq of %s: %s; NaN", c.label, exc)
            eq.append((math.nan, math.nan))
    values, errors = zip(*eq, strict=True)
    return tuple(values), tuple(errors)


def _estimate(state, cg: coarse.BlockCoarseGraining, options: dict, seed: int,
              trace_distance: float) -> tuple[float, float]:
    """(S_obs, error) of an equilibrium state: stderr + the method error of an
    approximate estimator (wide regions) + pruned-mass bound + the shift bound of the
    state's trace-distance error."""
    res = observational_entropy(state, cg, seed=seed, **options)
    err = (res.stderr + res.method_err + pruned_entropy_bound(res.pruned_mass, res.max_entropy)
           + thermo.entropy_shift_bound(trace_distance, res.max_entropy))
    return float(res.entropy), float(err)


def _gge_entropy(gge: thermo.GGEResult | None, cg: coarse.BlockCoarseGraining) -> float:
    """S_obs of the XX generalised Gibbs ensemble (correlation matrix U diag(n) U^dagger in
    the single-particle eigenmodes U) by counting statistics, for number coarse-grainings
    of at most three regions; NaN otherwise."""
    if gge is None or isinstance(cg, coarse.WideEnergyRegions) or not countable(cg):
        return math.nan
    return float(gaussian.number_entropy(gge.correlation, cg.regions).entropy)


def _resumable(resume: tuple[list[list[np.ndarray]], dict] | None, point: Point,
               n_states: int) -> bool:
    """Whether a checkpoint belongs to this point (same id, number of states, with the
    S_obs_eq reference) and to a prefix of its time grid."""
    if resume is None:
        return False
    tensors, meta = resume
    times = point.params["times"]["values"]
    done = meta.get("done", 0)
    return (meta.get("point_id") == point.point_id and len(tensors) == n_states
            and "S_obs_eq" in meta.get("reference", {})
            and 0 < done <= len(times) and times[done - 1] == meta.get("t"))


def check_point(point: Point) -> BuiltPoint:
    """Raise every InputError that :func:`compute_point` would raise from the point's
    parameters, without its expensive part: :func:`mpsobs.pipeline.build.build_point`
    with ``cheap_only`` (no DMRG, no time step; see there for the cost). Returns the
    objects built, for whatever else needs them (the cost estimate)."""
    return build_point(point, cheap_only=True)


def check_points(points: Sequence[Point]) -> list[BuiltPoint]:
    """:func:`check_point` for every point; the error keeps its key path first and names
    the point after it (``coarse[0].block: point 1 (model.L=52): ...``)."""
    built = []
    for point in points:
        try:
            built.append(check_point(point))
        except InputError as exc:
            path, _, rest = str(exc).partition(": ")
            raise InputError(f"{path}: point {point.index} ({point.label}): {rest}") from None
    return built


def _paired_options(main: EntropyResult, estimator: dict) -> dict:
    """Estimator settings for the check state that repeat the main estimate: exact where
    it was exact, else sampling with the same number of samples (with the same seed the
    s-th sample then uses the same uniforms in both)."""
    if main.method == "exact":
        return {"method": "exact", "prune": estimator["prune"]}
    sampler = "sample_strings" if main.algorithm == "mps-sample" else "sample"
    return {"method": sampler, "samples": main.samples}


def _check_estimate(state: MPS, cg: coarse.BlockCoarseGraining, main: EntropyResult,
                    seed: int, estimator: dict, options: dict) -> EntropyResult:
    """The estimate of the check state paired with ``main``; where an exact enumeration
    of the check state exceeds its limits, the point's own settings (``options``); the
    wide-region estimator with the same settings (its resolution)."""
    if main.method == "approximate":
        return observational_entropy(state, cg, seed=seed, **options)
    try:
        return observational_entropy(state, cg, seed=seed, **_paired_options(main, estimator))
    except InputError as exc:
        log.info("check state of %s: %s; using the point's estimator settings", cg.label, exc)
        return observational_entropy(state, cg, seed=seed, **options)


def _truncation_columns(main: EntropyResult, check: EntropyResult | None,
                        check_discarded: float) -> dict:
    """The truncation-error columns of a row (NaN without a check evolution)."""
    if check is None:
        return {col.TRUNCATION_ERROR: math.nan, col.SHANNON_TRUNCATION_ERROR: math.nan,
                col.BOLTZMANN_TRUNCATION_ERROR: math.nan,
                col.CHECK_DISCARDED_WEIGHT: math.nan}
    return {col.TRUNCATION_ERROR: abs(main.entropy - check.entropy),
            col.SHANNON_TRUNCATION_ERROR: abs(main.shannon - check.shannon),
            col.BOLTZMANN_TRUNCATION_ERROR: abs(main.boltzmann - check.boltzmann),
            col.CHECK_DISCARDED_WEIGHT: check_discarded}


def _result_columns(res: EntropyResult) -> dict:
    """The columns of a row that come from the estimate."""
    return {col.S_OBS: res.entropy, col.S_OBS_ERR: res.stderr, col.S_SHANNON: res.shannon,
            col.S_BOLTZMANN: res.boltzmann, col.KNOWLEDGE: res.knowledge,
            col.S_MAX: res.max_entropy, col.METHOD: res.method,
            col.S_SHANNON_ERR: res.shannon_err, col.S_BOLTZMANN_ERR: res.boltzmann_err,
            col.PRUNED_MASS: res.pruned_mass, col.SAMPLES: res.samples,
            col.ALGORITHM: res.algorithm}


def compute_point(point: Point, *, progress: Callable[[int, int], None] | None = None,
                  resume: tuple[list[list[np.ndarray]], dict] | None = None,
                  save: Callable[[list[list[np.ndarray]], dict], None] | None = None
                  ) -> pd.DataFrame:
    """Rows of one sweep point (see the module docstring).

    Parameters
    ----------
    point : the resolved point.
    progress : called as ``progress(done, total)`` in time steps (t / dt) after each
        output time.
    resume : a checkpoint (tensors of each state, meta) offered earlier through
        ``save``; the evolution restarts from its states and time, with their cumulative
        discarded weights, norm, initial energy and reference, and its rows are kept. A
        checkpoint of another point, with another number of states, without the
        S_obs_eq reference, or of a time grid that is not a prefix of the point's, is
        ignored: the point starts over. The checkpoint after the last time of a shorter
        grid continues the point to the later times of a longer one.
    save : called after each output time with a checkpoint (tensors of the main state
        and, when there is a check evolution, of the check state; meta).

    Cost: the evolution, O(t_max / dt * L chi^3) (x3 for order 4), plus the estimators
    at every output time (see :mod:`mpsobs.estimators.estimate`) and the thermodynamic
    reference; the check evolution adds the same at its bond, about
    (chi_check / chi_max)^3 of the evolution, and one more estimate per output time and
    coarse-graining.
    """
    clock = time.monotonic()
    p = point.params
    evo, est, times = p["evolution"], p["estimator"], p["times"]["values"]
    chi_check = evo["chi_check"]
    built = build_point(point, cheap_only=True)
    model, cgs = built.model, built.coarse
    eq_seeds = [equilibrium_seed(point.seed, j) for j in range(len(cgs))]
    total_steps = max(1, round(times[-1] / evo["dt"]))
    n_states = 2 if chi_check else 1
    if _resumable(resume, point, n_states):
        tensors, meta = resume
        state, *checked = (MPS(tuple(np.asarray(t, dtype=complex) for t in ts))
                           for ts in tensors)
        check_state = checked[0] if checked else None
        done, t_start = meta["done"], meta["t"]
        discarded0, norm0, energy0 = meta["discarded_weight"], meta["norm"], meta["energy0"]
        check_discarded0 = meta["check_discarded_weight"]
        ref = _Reference(**{k: tuple(v) if isinstance(v, list) else v
                            for k, v in meta["reference"].items()})
        rows, elapsed0 = list(meta["rows"]), meta["elapsed_s"]
        log.info("point %s: resuming at t = %g (%d of %d times done)", point.point_id,
                 t_start, done, len(times))
    else:
        state = initial_state(p["state"], model, evo)
        check_state = state if chi_check else None
        energy0 = models.energy(model, state)
        ref = _reference(model, state, energy0, cgs, eq_seeds, evo["chi_max"])
        done, t_start, discarded0, norm0, check_discarded0 = 0, 0.0, 0.0, 1.0, 0.0
        rows, elapsed0 = [], 0.0
    base = {col.SEED: point.seed, col.POINT_ID: point.point_id, col.S_THERMO: ref.S_thermo,
            col.S_THERMO_ERR: ref.S_thermo_err, col.S_GGE: ref.S_gge, col.BETA: ref.beta,
            col.ABOVE_INFINITE_TEMPERATURE: bool(ref.beta < 0), col.VERSION: __version__}
    remaining = times[done:]

    def snapshots(start: MPS, bond: int):
        return evolve(built, start, remaining, bond, start_time=t_start)

    if not remaining:
        pairs: Iterable = ()
    elif check_state is None:
        pairs = ((snap, None) for snap in snapshots(state, evo["chi_max"]))
    else:  # same gates, steps and output times at both bonds
        pairs = zip(snapshots(state, evo["chi_max"]), snapshots(check_state, chi_check),
                    strict=True)
    # how each coarse-graining came out at the previous time (resumed rows included)
    previous = {row[col.COARSE_GRAINING]: row[col.METHOD] for row in rows
                if row[col.METHOD] in PREVIOUS_METHODS}
    for k, (snap, check_snap) in enumerate(pairs, start=done):
        discarded = discarded0 + snap.discarded_weight
        check_discarded = (check_discarded0 + check_snap.discarded_weight
                           if check_snap is not None else math.nan)
        norm = norm0 * snap.norm
        for j, c in enumerate(cgs):
            seed = estimator_seed(point.seed, k, j)
            res = observational_entropy(snap.state, c.coarse_graining, seed=seed, **c.options,
                                        previous_method=previous.get(c.label))
            if res.method in PREVIOUS_METHODS:   # not the wide-region estimator's
                previous[c.label] = res.method
            check = (None if check_snap is None else
                     _check_estimate(check_snap.state, c.coarse_graining, res, seed, est,
                                     c.options))
            rows.append({
                **base, col.T: times[k], col.COARSE_GRAINING: c.label, **_result_columns(res),
                col.S_ENT_HALF: snap.half_chain_entanglement,
                col.DISCARDED_WEIGHT: discarded, col.MAX_BOND: snap.max_bond,
                col.ENERGY: snap.energy, col.ENERGY_DRIFT: snap.energy - energy0,
                col.NORM: norm, col.EQUILIBRIUM: ref.S_obs_eq[j],
                col.EQUILIBRIUM_ERR: ref.S_obs_eq_err[j], col.S_OBS_GGE: ref.S_obs_gge[j],
                col.METHOD_ERROR: res.method_err,
                **_truncation_columns(res, check, check_discarded),
                col.OBSERVABLES: ",".join(c.observables),
                col.N_OBSERVABLES: len(c.observables), col.BLOCK_SIZE: c.block_size})
        elapsed = elapsed0 + time.monotonic() - clock
        if progress is not None:
            progress(round(times[k] / evo["dt"]), total_steps)
        if save is not None:
            meta = {"point_id": point.point_id, "done": k + 1, "t": times[k],
                    "discarded_weight": discarded, "norm": norm, "energy0": energy0,
                    "check_discarded_weight": check_discarded,
                    "reference": asdict(ref), "rows": rows, "elapsed_s": elapsed}
            saved = [list(snap.state.tensors)]
            if check_snap is not None:
                saved.append(list(check_snap.state.tensors))
            save(saved, meta)
    frame = pd.DataFrame(rows)
    frame[col.ELAPSED] = elapsed0 + time.monotonic() - clock
    frame[col.DISORDER_AXES] = ",".join(point.disorder)
    field = p["model"]["field"]
    frame.attrs[SITE_FIELDS_ATTR] = models.field_values(
        field["kind"], field["strength"], model.L, field["seed"]).tolist()
    for name, value in point.columns.items():
        frame[name] = value
    return frame[[*col.ROW_COLUMNS, *point.columns]]
