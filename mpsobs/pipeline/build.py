"""Spec sections -> objects: the one builder behind ``mpsobs check`` and the point
computation.

:func:`build_point` turns a resolved :class:`mpsobs.pipeline.spec.Point` into its model,
initial state, coarse-grainings with their estimator options, and evolution options;
:func:`mpsobs.pipeline.point.check_point` and :func:`~mpsobs.pipeline.point.compute_point`
both call it, so ``mpsobs check`` and ``mpsobs run`` refuse the same points before any
work. The rules themselves belong to the modules that build the objects (models,
states, coarse, the estimators, TEBD) and are raised by them once; the builder adds the
spec key path to their message (``coarse[0].regions: ...``), keeping the module's own
message (which names the Python argument) after it.

Checks that cost little are part of the build: every estimator runs, with the point's
options, on the all-empty product state (bond dimension 1), and the evolution is set up
(its arguments are checked at the call) but not stepped. Cost: the block
eigendecompositions of energy coarse-grainings (2**b per block), the estimators on a
bond-1 state and, unless ``cheap_only``, the initial state (DMRG for ground states).
"""

from __future__ import annotations

import contextlib
import re
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from mpsobs.chain import coarse, models, states
from mpsobs.chain import evolution as tebd
from mpsobs.core.errors import InputError
from mpsobs.estimators import estimate
from mpsobs.estimators.entropy import observational_entropy
from mpsobs.mps.tensors import MPS
from mpsobs.pipeline import spec as specs

__all__ = ["BuiltCoarse", "BuiltPoint", "build_point", "build_model", "initial_state",
           "build_coarse_grainings", "estimator_options", "estimator_seed", "equilibrium_seed",
           "evolve", "empty_chain", "ESTIMATOR_METHODS", "keys_reference"]

#: Values of ``estimator.method``: "auto" (the estimators' automatic choice) and the
#: estimators' registry.
ESTIMATOR_METHODS = ("auto", *estimate.METHODS)

_MODEL_ARGUMENTS = {"J": "J", "delta": "delta", "g": "g", "h": "field.strength",
                    "field": "field.kind", "seed": "field.seed"}
_STATE_ARGUMENTS = {"pattern": "state.pattern", "number": "state.number",
                    "n": "state.number", "start": "state.box", "stop": "state.box",
                    "fill": "state.fill", "seed": "state.seed", "kind": "state.draw"}
_EVOLUTION_ARGUMENTS = {"dt": "evolution.dt", "order": "evolution.order",
                        "max_bond": "evolution.chi_max", "cutoff": "evolution.cutoff",
                        "times": "times.values"}
_ESTIMATOR_ARGUMENTS = {"method": "estimator.method", "samples": "estimator.samples",
                        "target_stderr": "estimator.target_stderr",
                        "prune": "estimator.prune"}


@dataclass(frozen=True)
class BuiltCoarse:
    """One coarse-graining of a point: its table label, block size (0 for explicit
    regions), observables in asking order, the object, the estimator's keyword
    arguments and the spec key of its ``[[coarse]]`` entry."""

    label: str
    block_size: int
    observables: tuple[str, ...]
    coarse_graining: coarse.BlockCoarseGraining
    options: dict
    path: str

    def __repr__(self) -> str:
        return (f"BuiltCoarse({self.label!r} from {self.path}, method "
                f"{self.options.get('method') or 'auto'})")


@dataclass(frozen=True)
class BuiltPoint:
    """The objects of one point: model, initial state (with ``cheap_only`` a bond-1
    stand-in where the state needs DMRG), coarse-grainings and the evolution's keyword
    arguments for :func:`mpsobs.chain.evolution.evolve`."""

    model: models.Model
    state: MPS
    coarse: tuple[BuiltCoarse, ...]
    evolution: dict

    def __repr__(self) -> str:
        return (f"BuiltPoint({self.model.name} L={self.model.L}, "
                f"{len(self.coarse)} coarse-grainings, bond {self.evolution['max_bond']})")


def _locate(message: str, section: str, arguments: Mapping[str, str]) -> str:
    """The key path of a module's message: its leading argument name looked up in
    ``arguments`` (with the index of a ``regions[j]`` the message names), else
    ``section``."""
    head, _, rest = message.partition(": ")
    if head not in arguments:
        return section
    index = re.search(r"\bregions\[(\d+)\]", rest) if head == "regions" else None
    return arguments[head] + (f"[{index.group(1)}]" if index else "")


@contextlib.contextmanager
def _at(section: str, arguments: Mapping[str, str], context: str = "",
        suffix: str = "") -> Iterator[None]:
    """Re-raise an InputError as ``<key path>: <context><message><suffix>``."""
    try:
        yield
    except InputError as exc:
        message = str(exc)
        raise InputError(f"{_locate(message, section, arguments)}: {context}{message}"
                         f"{suffix}") from None


def build_model(params: dict, L: int, path: str = "model") -> models.Model:
    """The model of a resolved ``[model]`` (or ``[state.prequench]``) section."""
    couplings = {k: v for k, v in params.items() if k not in ("name", "L", "field")}
    field = params["field"]
    arguments = {name: f"{path}.{key}" for name, key in _MODEL_ARGUMENTS.items()}
    with _at(path, arguments):
        return models.build(params["name"], L, **couplings, h=field["strength"],
                            field=field["kind"], seed=field["seed"])


def empty_chain(L: int) -> MPS:
    """Every site in |0>: a bond-1 stand-in state for the checks."""
    return states.product_state("0" * L)


def initial_state(params: dict, model: models.Model, evolution: dict, *,
                  cheap_only: bool = False) -> MPS:
    """The initial MPS of a resolved ``[state]`` section (a ground state is found with
    the evolution's chi_max and cutoff).

    With ``cheap_only``, a state that needs DMRG (``ground``, a gas filled by ``ground``)
    is not computed: its arguments and pre-quench model are checked and the all-empty
    product state stands in for it.
    """
    L, kind = model.L, params["kind"]
    with _at("state", _STATE_ARGUMENTS):
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
                return empty_chain(L)
            return states.gas_in_box(*args, model=model, max_bond=evolution["chi_max"])
        if kind == "random_product":
            return states.random_product_state(L, params["seed"], params["draw"])
    if kind == "ground":
        pre = build_model({**params["prequench"], "name": model.name}, L, "state.prequench")
        if cheap_only:
            return empty_chain(L)
        with _at("state", _STATE_ARGUMENTS):
            return states.ground_state(pre, max_bond=evolution["chi_max"]).state
    raise InputError(f"state.kind: unknown {kind!r}")


#: Spec keys of the wide-region energy estimator's resolution -> its keyword arguments
#: (:func:`mpsobs.estimators.wide_energy.wide_energy_entropy`) and label parts.
_WIDE_ARGUMENTS = {"moments": "moments", "moment_bond": "bond", "sub_bins": "sub_bins"}
_WIDE_LABELS = {"moments": "N", "moment_bond": "D", "sub_bins": "sb"}


def _entry_name(entry: dict) -> str:
    if entry["label"]:
        return repr(entry["label"])
    where = (f"block {entry['block']}" if entry["block"] is not None
             else f"regions {entry['regions']}")
    return f"{'>'.join(entry['observable'])} {where}"


def _coarse_arguments(path: str, entry: dict) -> dict[str, str]:
    """Spec keys of the arguments of :func:`mpsobs.chain.coarse.blocks` for one entry."""
    blocks = f"{path}.block" if entry["block"] is not None else f"{path}.regions"
    return {"size": blocks, "regions": f"{path}.regions", "bin_width": f"{path}.bin_width",
            "observable": f"{path}.observable", "sequence": f"{path}.observable",
            "coarse_graining": blocks}


def estimator_options(estimator: dict) -> dict:
    """Keyword arguments of the estimator from a resolved ``[estimator]`` section.

    ``samples`` is a budget for where the estimator samples: it goes to the methods that
    may sample ("auto" and :data:`mpsobs.estimators.estimate.SAMPLING_METHODS`) and is
    ignored by the exact ones. ``target_stderr`` > 0 is a demand: it always goes to the
    estimator, which refuses it for a method that draws no samples.
    """
    method = None if estimator["method"] == "auto" else estimator["method"]
    options = {"method": method, "prune": estimator["prune"]}
    if method is None or method in estimate.SAMPLING_METHODS:
        options["samples"] = estimator["samples"]
    if estimator["target_stderr"]:
        options["target_stderr"] = estimator["target_stderr"]
    return options


def estimator_seed(point_seed: int, time_index: int, cg_index: int) -> int:
    """Seed of the estimate at output time ``time_index`` of coarse-graining
    ``cg_index``: ``SeedSequence(point_seed, spawn_key=(time_index, cg_index))``."""
    return _spawned_seed(point_seed, (time_index, cg_index))


def equilibrium_seed(point_seed: int, cg_index: int) -> int:
    """Seed of S_obs_eq of coarse-graining ``cg_index`` (it does not depend on the time
    grid, so a run that grows in time keeps it):
    ``SeedSequence(point_seed, spawn_key=(cg_index,))``."""
    return _spawned_seed(point_seed, (cg_index,))


def _spawned_seed(point_seed: int, key: tuple[int, ...]) -> int:
    """A 63-bit seed from ``SeedSequence(point_seed, spawn_key=key)``."""
    return int(np.random.SeedSequence(point_seed, spawn_key=key)
               .generate_state(1, np.uint64)[0] >> 1)


def build_coarse_grainings(entries: Sequence[dict], model: models.Model,
                           estimator: dict, paths: Sequence[str] | None = None,
                           point_seed: int = 0) -> tuple[BuiltCoarse, ...]:
    """The coarse-grainings of resolved ``[[coarse]]`` entries with their estimator
    options; each estimator is run once on the bond-1 empty chain, so that the rules of
    the estimators (methods, what they can evaluate, sample settings) are raised here.
    An InputError names the entry's key path and the coarse-graining."""
    paths = list(paths) if paths is not None else [f"coarse[{i}]" for i in range(len(entries))]
    blank = empty_chain(model.L)
    out = []
    for j, (entry, path) in enumerate(zip(entries, paths, strict=True)):
        arguments = _coarse_arguments(path, entry)
        with _at(path, arguments, f"coarse-graining {_entry_name(entry)}: ",
                 f" (model.L = {model.L})"):
            parts = []
            for name in entry["observable"]:
                energy = name == "energy"
                parts.append(coarse.blocks(model.L, entry["block"], name,
                                           model=model if energy else None,
                                           bin_width=entry["bin_width"] if energy else None,
                                           regions=entry["regions"]))
            cg = parts[0] if len(parts) == 1 else coarse.sequence(*parts)
        resolution = entry.get("wide_energy", {})
        if isinstance(cg, coarse.WideEnergyRegions):
            # the Chebyshev estimator takes only its resolution (its parameters were
            # checked when built and by the spec); a resolution away from the defaults
            # is part of the label, so that rows of two resolutions stay apart
            options = {_WIDE_ARGUMENTS[k]: v for k, v in resolution.items()}
            label = entry["label"] or cg.label + "".join(
                f",{_WIDE_LABELS[k]}{v}" for k, v in resolution.items())
        elif resolution:
            raise InputError(f"{path}.{next(iter(resolution))}: only energy regions wider "
                             f"than {coarse.MAX_BLOCK_SITES} sites take it; "
                             f"coarse-graining {_entry_name(entry)} has none "
                             f"(model.L = {model.L})")
        else:
            label = entry["label"] or cg.label
            options = estimator_options(estimator)
            with _at("estimator", {**_ESTIMATOR_ARGUMENTS,
                                   "coarse_graining": arguments["coarse_graining"]},
                     f"coarse-graining {label!r}: "):
                observational_entropy(blank, cg, seed=estimator_seed(point_seed, 0, j),
                                      **options)
        out.append(BuiltCoarse(label, entry["block"] or 0, tuple(entry["observable"]), cg,
                               options, path))
    return tuple(out)


def evolve(built: BuiltPoint, state: MPS, times: Sequence[float], bond: int,
           start_time: float = 0.0):
    """:func:`mpsobs.chain.evolution.evolve` with the point's options at bond ``bond``
    (argument errors name the spec key)."""
    with _at("evolution", _EVOLUTION_ARGUMENTS):
        return tebd.evolve(state, built.model, times, **{**built.evolution, "max_bond": bond},
                           start_time=start_time)


def build_point(point: specs.Point, *, cheap_only: bool = False) -> BuiltPoint:
    """The objects of a point (see the module docstring); with ``cheap_only`` the
    initial state is only checked where it needs DMRG. The evolution is set up, not
    stepped."""
    p = point.params
    evo = p["evolution"]
    model = build_model(p["model"], p["model"]["L"])
    cgs = build_coarse_grainings(p["coarse"], model, p["estimator"],
                                 point.coarse_paths or None, point.seed)
    state = initial_state(p["state"], model, evo, cheap_only=cheap_only)
    built = BuiltPoint(model, state, cgs, {"max_bond": evo["chi_max"], "cutoff": evo["cutoff"],
                                           "dt": evo["dt"], "order": evo["order"]})
    evolve(built, state, p["times"]["values"], evo["chi_max"])
    return built


def keys_reference() -> str:
    """The spec-key reference (markdown) with the values other modules own filled in:
    the estimator methods and the estimator's default sample count."""
    return specs.keys_markdown(
        allowed={"estimator.method": "one of " + ", ".join(map(repr, ESTIMATOR_METHODS))},
        defaults={"estimator.samples": estimate.DEFAULT_SAMPLES})
