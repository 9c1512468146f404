"""One sweep point: model and initial state -> TEBD evolution -> estimators -> rows.

:func:`compute_point` is a pure function of the resolved point (:class:`mpsobs.spec.Point`):
the same point gives the same rows whatever worker, order or interruption. Randomness
comes only from seeds in the point: the random field (``model.field.seed``), a random
product state (``state.seed``) and the sampled estimators, whose generator for time
index k and coarse-graining j is ``SeedSequence(point.seed, spawn_key=(k, j))``; the
equilibrium estimate of coarse-graining j (below) uses the key (len(times), j), one past
the last time index, so it never shares a stream with the time series.

The thermodynamic reference is computed once per point from the initial state
(:mod:`mpsobs.thermo`): the Gibbs entropy at its energy and, when the model conserves
it, its particle number (grand ensemble; for XX chains with a definite number, exactly
that sector), and for XX chains the generalised Gibbs entropy of its mode occupations.
With it, per coarse-graining, ``S_obs_eq``: S_obs of that same Gibbs ensemble (same
beta, mu or sector), the value a thermalizing chain should reach, from the purification
of :func:`mpsobs.thermo.gibbs_state` (bond :data:`EQ_MAX_BOND`, at most the evolution's
chi_max) and the point's estimator settings. ``S_obs_eq_err`` = sampling stderr +
the pruned-mass bound of enumeration + :func:`mpsobs.thermo.entropy_shift_bound` of the
purification's trace-distance error (the Trotter and truncation estimate of the state).
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
evolution's own cumulative discarded weight. ``t_trusted`` (one value per
coarse-graining, see :func:`trusted_time`) is the end of the time range where the
truncation error stays within ``evolution.trust_rtol`` times S_obs or within the
sampling error. Without the check all four error columns and ``t_trusted`` are NaN.

Energy regions wider than the block limit (:class:`mpsobs.coarse.WideEnergyRegions`) are
evaluated by the Chebyshev estimator with its defaults (no estimator settings); its
error estimate is the column ``S_obs_method_err`` (part of ``S_obs_err``; 0 for the other
estimators), and its truncation check repeats it on the check state; ``check_point``
builds it (which checks its parameters) but does not evaluate it.

Rows: one per (time, coarse-graining), with the columns of :mod:`mpsobs.columns`, the
block size of the coarse-graining (``block_size``, 0 for explicit regions) and the
point's parameters. Entropies in nats. The frame's ``attrs["site_fields"]`` holds the
longitudinal field h_i of every site (units of J), which the store keeps in the point
file's metadata.
"""

from __future__ import annotations

import logging
import math
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from mpsobs.chain import coarse, models, states
from mpsobs.chain import evolution as tebd
from mpsobs.core.errors import InputError
from mpsobs.core.version import __version__
from mpsobs.estimators.entropy import observational_entropy
from mpsobs.estimators.estimate import countable, pruned_entropy_bound
from mpsobs.estimators.result import EntropyResult
from mpsobs.mps.tensors import MPS
from mpsobs.pipeline.columns import EXTRA, REQUIRED
from mpsobs.pipeline.spec import Point
from mpsobs.pipeline.store import SITE_FIELDS_ATTR
from mpsobs.references import gaussian, thermo

__all__ = ["compute_point", "check_point", "check_points", "build_model",
           "build_coarse_grainings", "initial_state", "total_number", "trusted_time",
           "ROW_COLUMNS", "ROUNDOFF_NATS"]

log = logging.getLogger(__name__)

#: Columns of a point's rows before its parameters.
ROW_COLUMNS = (*REQUIRED, *EXTRA, "block_size")
_NUMBER = np.diag([0.0, 1.0])  # sites in |1>
#: <N> this close to an integer is taken as that integer (a state of definite number).
NUMBER_TOL = 1e-8
#: Largest bond of the Gibbs-state purification behind ``S_obs_eq`` (the evolution's
#: chi_max if smaller). Its sampling costs about 2**b chi^3 per block and sample (b sites
#: per block), so the bond is kept modest; the truncation it causes is in S_obs_eq_err.
EQ_MAX_BOND = 24
#: Truncation errors up to this (nats) are round-off for the trusted time range.
ROUNDOFF_NATS = 1e-9


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


def build_model(params: dict, L: int) -> models.Model:
    """The model of a resolved ``[model]`` (or ``[state.prequench]``) section."""
    couplings = {k: v for k, v in params.items() if k not in ("name", "L", "field")}
    field = params["field"]
    return models.build(params["name"], L, **couplings, h=field["strength"],
                        field=field["kind"], seed=field["seed"])


def build_coarse_grainings(entries: list[dict], model: models.Model
                           ) -> list[tuple[str, int, coarse.BlockCoarseGraining]]:
    """(label, block size or 0, coarse-graining) for each resolved ``[[coarse]]`` entry.
    An InputError names the entry (its label, or observable and blocks)."""
    out = []
    for entry in entries:
        parts = []
        try:
            for name in entry["observable"]:
                energy = name == "energy"
                parts.append(coarse.blocks(model.L, entry["block"], name,
                                           model=model if energy else None,
                                           bin_width=entry["bin_width"] if energy else None,
                                           regions=entry["regions"]))
            cg = parts[0] if len(parts) == 1 else coarse.sequence(*parts)
        except InputError as exc:
            raise InputError(f"coarse-graining {_entry_name(entry)}: {exc}") from None
        out.append((entry["label"] or cg.label, entry["block"] or 0, cg))
    return out


def _entry_name(entry: dict) -> str:
    if entry["label"]:
        return repr(entry["label"])
    where = (f"block {entry['block']}" if entry["block"] is not None
             else f"regions {entry['regions']}")
    return f"{'>'.join(entry['observable'])} {where}"


def initial_state(params: dict, model: models.Model, evolution: dict, *,
                  cheap_only: bool = False) -> MPS:
    """The initial MPS of a resolved ``[state]`` section (a ground state is found with
    the evolution's chi_max and cutoff).

    With ``cheap_only``, a state that needs DMRG (``ground``, a gas filled by ``ground``)
    is not computed: its arguments and pre-quench model are checked and the all-empty
    product state stands in for it (for :func:`check_point`).
    """
    L, kind = model.L, params["kind"]
    if kind == "product":
        return states.product_state(params["pattern"] * (L // len(params["pattern"])))
    if kind == "domain_wall":
        return states.domain_wall(L)
    if kind == "neel":
        return states.neel(L)
    if kind == "gas":
        start, stop = params["box"]
        args = (L, start, stop, params["number"], params["fill"])
        if cheap_only and params["fill"] == "ground":
            states.check_gas_in_box(*args, model=model, max_bond=evolution["chi_max"])
            return _empty_chain(L)
        return states.gas_in_box(*args, model=model, max_bond=evolution["chi_max"])
    if kind == "random_product":
        return states.random_product_state(L, params["seed"], params["draw"])
    if kind == "ground":
        pre = build_model({**params["prequench"], "name": model.name}, L)
        if cheap_only:
            return _empty_chain(L)
        return states.ground_state(pre, max_bond=evolution["chi_max"]).state
    raise InputError(f"state.kind: unknown {kind!r}")


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


def _reference(model: models.Model, state: MPS, energy: float, cgs, options: list[dict],
               seeds: list[int], max_bond: int) -> _Reference:
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
                              *_equilibrium_values(state, 0.0, cgs, options, seeds),
                              S_obs_gge=(math.nan,) * len(cgs))
    xx = _is_xx(model)
    ensemble = "canonical" if xx and number is not None and number.is_integer() else "grand"
    gibbs = thermo.gibbs(model, energy, number, ensemble=ensemble)
    gge = thermo.gge(model, state) if xx else None
    eq_values = eq_errors = (math.nan,) * len(cgs)
    sector = int(number) if ensemble == "canonical" else None
    mu = None if sector is not None else gibbs.mu
    if np.isfinite(gibbs.beta) and (mu is None or np.isfinite(mu)):
        rho = thermo.gibbs_state(model, gibbs.beta, mu, number=sector,
                                 max_bond=min(max_bond, EQ_MAX_BOND))
        eq_values, eq_errors = _equilibrium_values(rho, rho.error, cgs, options, seeds)
    else:
        log.warning("S_obs_eq: no Gibbs state at beta = %g, mu = %s (ground or ceiling "
                    "energy, or infinite temperature off half filling); NaN", gibbs.beta, mu)
    gge_obs = tuple(_gge_entropy(gge, cg) for _, _, cg in cgs)
    return _Reference(S_thermo=float(gibbs.entropy), S_thermo_err=float(gibbs.entropy_err),
                      beta=float(gibbs.beta),
                      S_gge=float(gge.entropy) if gge is not None else math.nan,
                      S_obs_eq=eq_values, S_obs_eq_err=eq_errors, S_obs_gge=gge_obs)


def _equilibrium_values(state, trace_distance: float, cgs, options: list[dict],
                       seeds: list[int]) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """(S_obs per coarse-graining, their errors) of an equilibrium state (:func:`_estimate`)."""
    eq = [_estimate(state, cg, opts, seed, trace_distance)
          for (_, _, cg), opts, seed in zip(cgs, options, seeds, strict=True)]
    values, errors = zip(*eq, strict=True)
    return tuple(values), tuple(errors)


def _estimate(state, cg: coarse.BlockCoarseGraining, options: dict, seed: int,
              trace_distance: float) -> tuple[float, float]:
    """(S_obs, error) of an equilibrium state: stderr + pruned-mass bound + the shift
    bound of the state's trace-distance error."""
    res = observational_entropy(state, cg, seed=seed, **options)
    err = (res.stderr + pruned_entropy_bound(res.pruned_mass, res.max_entropy)
           + thermo.entropy_shift_bound(trace_distance, res.max_entropy))
    return float(res.entropy), float(err)


def _gge_entropy(gge: thermo.GGEResult | None, cg: coarse.BlockCoarseGraining) -> float:
    """S_obs of the XX generalised Gibbs ensemble (correlation matrix U diag(n) U^dagger in
    the single-particle eigenmodes U) by counting statistics, for number coarse-grainings
    of at most three regions; NaN otherwise."""
    if gge is None or isinstance(cg, coarse.WideEnergyRegions) or not countable(cg):
        return math.nan
    return float(gaussian.number_entropy(gge.correlation, cg.regions).entropy)


def _estimator_options(estimator: dict, cg: coarse.BlockCoarseGraining) -> dict:
    """Keyword arguments of the estimator; the sample settings only where sampling can
    happen (the exact methods, and "auto" on a countable coarse-graining, take none)."""
    if isinstance(cg, coarse.WideEnergyRegions):
        return {}  # the Chebyshev estimator of wide energy regions takes no settings
    method = None if estimator["method"] == "auto" else estimator["method"]
    options = {"method": method, "prune": estimator["prune"]}
    if method in ("sample", "sample_strings") or (method is None and not countable(cg)):
        options.update(samples=estimator["samples"],
                       target_stderr=estimator["target_stderr"] or None)
    return options


def _estimator_seed(point_seed: int, time_index: int, cg_index: int) -> int:
    return int(np.random.SeedSequence(point_seed, spawn_key=(time_index, cg_index))
               .generate_state(1, np.uint64)[0] >> 1)


def _empty_chain(L: int) -> MPS:
    """Every site in |0>: a bond-1 stand-in state for the checks."""
    return states.product_state("0" * L)


def _prepare(point: Point) -> tuple[models.Model, list, list[dict]]:
    """The point's model, coarse-grainings and estimator options."""
    p = point.params
    model = build_model(p["model"], p["model"]["L"])
    cgs = build_coarse_grainings(p["coarse"], model)
    return model, cgs, [_estimator_options(p["estimator"], cg) for _, _, cg in cgs]


def check_point(point: Point) -> None:
    """Raise every InputError that :func:`compute_point` would raise from the point's
    parameters, without its expensive part.

    The same builders as compute_point make the model, the coarse-grainings, the
    estimator options and the initial state (only checked where it needs DMRG, see
    :func:`initial_state`); the evolution is set up (its arguments are checked at the
    call) but not stepped; each estimator, with the point's options, evaluates the
    all-empty product state (bond dimension 1). Cost: the block eigendecompositions of
    energy coarse-grainings (2**b per block) and the estimators on a bond-1 state.
    """
    p = point.params
    evo = p["evolution"]
    model, cgs, options = _prepare(point)
    state = initial_state(p["state"], model, evo, cheap_only=True)
    tebd.evolve(state, model, p["times"]["values"], max_bond=evo["chi_max"],
                cutoff=evo["cutoff"], dt=evo["dt"], order=evo["order"])
    blank = _empty_chain(model.L)
    for j, (label, _, cg) in enumerate(cgs):
        if isinstance(cg, coarse.WideEnergyRegions):
            continue  # checked when built; its estimator takes no settings
        try:
            observational_entropy(blank, cg, seed=_estimator_seed(point.seed, 0, j),
                                  **options[j])
        except InputError as exc:
            raise InputError(f"coarse-graining {label!r}: {exc}") from None


def check_points(points: Sequence[Point]) -> None:
    """:func:`check_point` for every point; the error names the point."""
    for point in points:
        try:
            check_point(point)
        except InputError as exc:
            raise InputError(f"point {point.index} ({point.label}): {exc}") from None


def _paired_options(main: EntropyResult, estimator: dict) -> dict:
    """Estimator settings for the check state that repeat the main estimate: exact where
    it was exact, else sampling with the same number of samples (with the same seed the
    s-th sample then uses the same uniforms in both)."""
    if main.method == "approximate":
        return {}
    if main.method == "exact":
        return {"method": "exact", "prune": estimator["prune"]}
    sampler = "sample_strings" if main.algorithm == "mps-sample" else "sample"
    return {"method": sampler, "samples": main.samples}


def _check_estimate(state: MPS, cg: coarse.BlockCoarseGraining, main: EntropyResult,
                    seed: int, estimator: dict, options: dict) -> EntropyResult:
    """The estimate of the check state paired with ``main``; where an exact enumeration
    of the check state exceeds its limits, the point's own settings (``options``)."""
    try:
        return observational_entropy(state, cg, seed=seed, **_paired_options(main, estimator))
    except InputError as exc:
        log.info("check state of %s: %s; using the point's estimator settings", cg.label, exc)
        return observational_entropy(state, cg, seed=seed, **options)


def _truncation_columns(main: EntropyResult, check: EntropyResult | None,
                        check_discarded: float) -> dict:
    """The truncation-error columns of a row (NaN without a check evolution)."""
    if check is None:
        return {"S_obs_trunc_err": math.nan, "S_shannon_trunc_err": math.nan,
                "S_boltzmann_trunc_err": math.nan, "check_discarded_weight": math.nan}
    return {"S_obs_trunc_err": abs(main.entropy - check.entropy),
            "S_shannon_trunc_err": abs(main.shannon - check.shannon),
            "S_boltzmann_trunc_err": abs(main.boltzmann - check.boltzmann),
            "check_discarded_weight": check_discarded}


def trusted_time(t: np.ndarray, S_obs: np.ndarray, S_obs_err: np.ndarray,
                 trunc_err: np.ndarray, rtol: float) -> float:
    """The end of the trusted time range of one curve (one point and coarse-graining).

    An output time passes when its truncation error is within the tolerance or hidden
    in the sampling noise::

        S_obs_trunc_err <= max(rtol * |S_obs|, S_obs_err, ROUNDOFF_NATS)

    and the trusted range ends at the last output time before the first time that fails
    (later times that pass again do not count). Returns that time; ``inf`` when no time
    fails (the check says nothing beyond the last computed time); ``-inf`` when the
    first output time already fails; NaN when there is no check evolution (NaN
    truncation errors). The arrays are in time order.
    """
    trunc_err = np.asarray(trunc_err, dtype=float)
    if np.isnan(trunc_err).all():
        return math.nan
    allowed = np.maximum(np.maximum(rtol * np.abs(S_obs), S_obs_err), ROUNDOFF_NATS)
    failing = np.flatnonzero(~(trunc_err <= allowed))
    if failing.size == 0:
        return math.inf
    return float(t[failing[0] - 1]) if failing[0] > 0 else -math.inf


def _with_trusted_times(frame: pd.DataFrame, rtol: float) -> pd.DataFrame:
    """``frame`` with the column ``t_trusted`` (:func:`trusted_time` per coarse-graining)."""
    frame["t_trusted"] = math.nan
    for _, curve in frame.groupby("coarse_graining", sort=False):
        curve = curve.sort_values("t")
        frame.loc[curve.index, "t_trusted"] = trusted_time(
            curve["t"].to_numpy(), curve["S_obs"].to_numpy(), curve["S_obs_err"].to_numpy(),
            curve["S_obs_trunc_err"].to_numpy(), rtol)
    return frame


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
        checkpoint of another point, with another number of states, or without the
        S_obs_eq reference, is ignored: the point starts over.
    save : called after each output time with a checkpoint (tensors of the main state
        and, when there is a check evolution, of the check state; meta).

    Cost: the evolution, O(t_max / dt * L chi^3) (x3 for order 4), plus the estimators
    at every output time (see :mod:`mpsobs.estimate`) and the thermodynamic reference;
    the check evolution adds the same at its bond, about (chi_check / chi_max)^3 of the
    evolution, and one more estimate per output time and coarse-graining.
    """
    clock = time.monotonic()
    p = point.params
    evo, est, times = p["evolution"], p["estimator"], p["times"]["values"]
    chi_check = evo["chi_check"]
    model, cgs, options = _prepare(point)
    eq_seeds = [_estimator_seed(point.seed, len(times), j) for j in range(len(cgs))]
    total_steps = max(1, round(times[-1] / evo["dt"]))
    n_states = 2 if chi_check else 1
    if (resume is not None and resume[1].get("point_id") == point.point_id
            and len(resume[0]) == n_states and "S_obs_eq" in resume[1].get("reference", {})):
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
        ref = _reference(model, state, energy0, cgs, options, eq_seeds, evo["chi_max"])
        done, t_start, discarded0, norm0, check_discarded0 = 0, 0.0, 0.0, 1.0, 0.0
        rows, elapsed0 = [], 0.0
    base = {"seed": point.seed, "point_id": point.point_id, "S_thermo": ref.S_thermo,
            "S_thermo_err": ref.S_thermo_err, "S_gge": ref.S_gge, "beta": ref.beta,
            "mpsobs_version": __version__}
    remaining = times[done:]

    def snapshots(start: MPS, bond: int):
        return tebd.evolve(start, model, remaining, max_bond=bond, cutoff=evo["cutoff"],
                           dt=evo["dt"], order=evo["order"], start_time=t_start)

    if not remaining:
        pairs: Iterable = ()
    elif check_state is None:
        pairs = ((snap, None) for snap in snapshots(state, evo["chi_max"]))
    else:  # same gates, steps and output times at both bonds
        pairs = zip(snapshots(state, evo["chi_max"]), snapshots(check_state, chi_check),
                    strict=True)
    for k, (snap, check_snap) in enumerate(pairs, start=done):
        discarded = discarded0 + snap.discarded_weight
        check_discarded = (check_discarded0 + check_snap.discarded_weight
                           if check_snap is not None else math.nan)
        norm = norm0 * snap.norm
        for j, (label, block_size, cg) in enumerate(cgs):
            seed = _estimator_seed(point.seed, k, j)
            res = observational_entropy(snap.state, cg, seed=seed, **options[j])
            check = (None if check_snap is None else
                     _check_estimate(check_snap.state, cg, res, seed, est, options[j]))
            rows.append({
                **base, "t": times[k], "coarse_graining": label, "S_obs": res.entropy,
                "S_obs_err": res.stderr, "S_shannon": res.shannon,
                "S_boltzmann": res.boltzmann, "knowledge": res.knowledge,
                "S_max": res.max_entropy, "S_ent_half": snap.half_chain_entanglement,
                "discarded_weight": discarded, "max_bond": snap.max_bond,
                "method": res.method, "S_shannon_err": res.shannon_err,
                "S_boltzmann_err": res.boltzmann_err, "pruned_mass": res.pruned_mass,
                "samples": res.samples, "algorithm": res.algorithm, "energy": snap.energy,
                "energy_drift": snap.energy - energy0, "norm": norm,
                "S_obs_eq": ref.S_obs_eq[j], "S_obs_eq_err": ref.S_obs_eq_err[j],
                "S_obs_gge": ref.S_obs_gge[j], "S_obs_method_err": res.method_err,
                **_truncation_columns(res, check, check_discarded),
                "block_size": block_size})
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
    frame = _with_trusted_times(pd.DataFrame(rows), evo["trust_rtol"])
    frame["elapsed_s"] = elapsed0 + time.monotonic() - clock
    asked = {label: entry["observable"] for (label, _, _), entry in zip(cgs, p["coarse"],
                                                                          strict=True)}
    frame["observables"] = frame["coarse_graining"].map(lambda lab: ",".join(asked[lab]))
    frame["n_observables"] = frame["coarse_graining"].map(lambda lab: len(asked[lab]))
    frame["disorder_axes"] = ",".join(point.disorder)
    field = p["model"]["field"]
    frame.attrs[SITE_FIELDS_ATTR] = models.field_values(
        field["kind"], field["strength"], model.L, field["seed"]).tolist()
    for name, value in point.columns.items():
        frame[name] = value
    return frame[[*ROW_COLUMNS, *point.columns]]
