"""One sweep point: model and initial state -> TEBD evolution -> estimators -> rows.

:func:`compute_point` is a pure function of the resolved point (:class:`mpsobs.spec.Point`):
the same point gives the same rows whatever worker, order or interruption. Randomness
comes only from seeds in the point: the random field (``model.field.seed``), a random
product state (``state.seed``) and the sampled estimators, whose generator for time
index k and coarse-graining j is ``SeedSequence(point.seed, spawn_key=(k, j))``.

The thermodynamic reference is computed once per point from the initial state
(:mod:`mpsobs.thermo`): the Gibbs entropy at its energy and, when the model conserves
it, its particle number (grand ensemble; for XX chains with a definite number, exactly
that sector), and for XX chains the generalised Gibbs entropy of its mode occupations.

Rows: one per (time, coarse-graining), with the columns of :mod:`mpsobs.columns`, the
block size of the coarse-graining (``block_size``, 0 for explicit regions) and the
point's parameters. Entropies in nats.
"""

from __future__ import annotations

import logging
import math
import time
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from mpsobs import __version__, coarse, gaussian, models, states, tebd, thermo
from mpsobs.columns import EXTRA, REQUIRED
from mpsobs.entropy import observational_entropy
from mpsobs.errors import InputError
from mpsobs.estimate import countable
from mpsobs.mps import MPS
from mpsobs.spec import Point

__all__ = ["compute_point", "check_point", "check_points", "build_model",
           "build_coarse_grainings", "initial_state", "total_number", "ROW_COLUMNS"]

log = logging.getLogger(__name__)

#: Columns of a point's rows before its parameters.
ROW_COLUMNS = (*REQUIRED, *EXTRA, "block_size")
_NUMBER = np.diag([0.0, 1.0])  # sites in |1>
#: <N> this close to an integer is taken as that integer (a state of definite number).
NUMBER_TOL = 1e-8


@dataclass(frozen=True)
class _Reference:
    """Thermodynamic reference of a point (nats)."""

    S_thermo: float
    S_thermo_err: float
    beta: float
    S_gge: float


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


def _reference(model: models.Model, state: MPS, energy: float) -> _Reference:
    """Gibbs entropy at the state's energy (and number, where conserved); the GGE entropy
    of its mode occupations for XX chains. A state with every site empty or every site
    filled is alone in its sector: entropy 0."""
    number = None
    if model.conserves_number:
        number = total_number(state)
        if abs(number - round(number)) < NUMBER_TOL:
            number = float(round(number))
        if number in (0.0, float(model.L)):
            return _Reference(S_thermo=0.0, S_thermo_err=0.0, beta=math.nan, S_gge=math.nan)
    xx = _is_xx(model)
    ensemble = "canonical" if xx and number is not None and number.is_integer() else "grand"
    gibbs = thermo.gibbs(model, energy, number, ensemble=ensemble)
    gge = thermo.gge(model, state).entropy if xx else math.nan
    return _Reference(S_thermo=float(gibbs.entropy), S_thermo_err=float(gibbs.entropy_err),
                      beta=float(gibbs.beta), S_gge=float(gge))


def _estimator_options(estimator: dict, cg: coarse.BlockCoarseGraining) -> dict:
    """Keyword arguments of the estimator; the sample settings only where sampling can
    happen (the exact methods, and "auto" on a countable coarse-graining, take none)."""
    method = None if estimator["method"] == "auto" else estimator["method"]
    options = {"method": method, "prune": estimator["prune"]}
    if method == "sample" or (method is None and not countable(cg)):
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


def compute_point(point: Point, *, progress: Callable[[int, int], None] | None = None,
                  resume: tuple[list[np.ndarray], dict] | None = None,
                  save: Callable[[list[np.ndarray], dict], None] | None = None
                  ) -> pd.DataFrame:
    """Rows of one sweep point (see the module docstring).

    Parameters
    ----------
    point : the resolved point.
    progress : called as ``progress(done, total)`` in time steps (t / dt) after each
        output time.
    resume : a checkpoint (tensors, meta) offered earlier through ``save``; the
        evolution restarts from its state and time, with its cumulative discarded weight,
        norm and initial energy, and its rows are kept.
    save : called after each output time with a checkpoint (tensors, meta).

    Cost: the evolution, O(t_max / dt * L chi^3) (x3 for order 4), plus the estimators
    at every output time (see :mod:`mpsobs.estimate`) and the thermodynamic reference.
    """
    clock = time.monotonic()
    p = point.params
    evo, times = p["evolution"], p["times"]["values"]
    model, cgs, options = _prepare(point)
    total_steps = max(1, round(times[-1] / evo["dt"]))
    if resume is not None and resume[1].get("point_id") == point.point_id:
        tensors, meta = resume
        state = MPS(tuple(np.asarray(t, dtype=complex) for t in tensors))
        done, t_start = meta["done"], meta["t"]
        discarded0, norm0, energy0 = meta["discarded_weight"], meta["norm"], meta["energy0"]
        ref = _Reference(**meta["reference"])
        rows, elapsed0 = list(meta["rows"]), meta["elapsed_s"]
        log.info("point %s: resuming at t = %g (%d of %d times done)", point.point_id,
                 t_start, done, len(times))
    else:
        state = initial_state(p["state"], model, evo)
        energy0 = models.energy(model, state)
        ref = _reference(model, state, energy0)
        done, t_start, discarded0, norm0 = 0, 0.0, 0.0, 1.0
        rows, elapsed0 = [], 0.0
    base = {"seed": point.seed, "point_id": point.point_id, "S_thermo": ref.S_thermo,
            "S_thermo_err": ref.S_thermo_err, "S_gge": ref.S_gge, "beta": ref.beta,
            "mpsobs_version": __version__}
    remaining = times[done:]
    snapshots = (tebd.evolve(state, model, remaining, max_bond=evo["chi_max"],
                               cutoff=evo["cutoff"], dt=evo["dt"], order=evo["order"],
                               start_time=t_start) if remaining else ())
    for k, snap in enumerate(snapshots, start=done):
        discarded = discarded0 + snap.discarded_weight
        norm = norm0 * snap.norm
        for j, (label, block_size, cg) in enumerate(cgs):
            res = observational_entropy(snap.state, cg, seed=_estimator_seed(point.seed, k, j),
                                        **options[j])
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
                "block_size": block_size})
        elapsed = elapsed0 + time.monotonic() - clock
        if progress is not None:
            progress(round(times[k] / evo["dt"]), total_steps)
        if save is not None:
            meta = {"point_id": point.point_id, "done": k + 1, "t": times[k],
                    "discarded_weight": discarded, "norm": norm, "energy0": energy0,
                    "reference": asdict(ref), "rows": rows, "elapsed_s": elapsed}
            save(list(snap.state.tensors), meta)
    frame = pd.DataFrame(rows)
    frame["elapsed_s"] = elapsed0 + time.monotonic() - clock
    for name, value in point.columns.items():
        frame[name] = value
    return frame[[*ROW_COLUMNS, *point.columns]]
