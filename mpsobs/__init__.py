"""mpsobs: observational entropy of long quantum spin chains as matrix-product states.

One import gives the whole library::

    import mpsobs

    model = mpsobs.models.xxz(48, delta=0.5)
    psi = mpsobs.states.neel(48)
    for snap in mpsobs.evolve(psi, model, [1.0, 2.0], max_bond=32, cutoff=1e-10, dt=0.05):
        print(mpsobs.observational_entropy(snap.state, mpsobs.coarse.blocks(48, 4)))

    rows = mpsobs.run_quench({"name": "xxz", "L": 48, "delta": 0.5}, "neel",
                             times=[0.0, 1.0, 2.0], coarse={"observable": "number",
                                                            "block": 4})

The package is built in layers, each importing only from the layers before it
(DEVELOPERS.md): ``core`` (errors, printing, threads), ``mps`` (tensors, truncation, the
evolution kernel), ``chain`` (models, states, coarse-grainings, TEBD of a model),
``estimators``, ``references`` (free fermions, Gibbs states), ``pipeline`` (specs, points,
the run store, the Dask sweep), ``analysis`` (scaling, figures) and the application
(``workflow``, ``cli``). The modules a user reaches for are attributes of the package,
imported on first use, under their short names (``mpsobs.models`` is
:mod:`mpsobs.chain.models`, ``mpsobs.tebd`` is :mod:`mpsobs.chain.evolution`, ...).
"""

from __future__ import annotations

import importlib

from mpsobs.core.version import __version__

#: Short names of the modules reachable as package attributes -> their full module path.
SUBMODULES = {
    "errors": "core.errors", "printing": "core.printing", "threads": "core.threads",
    "mps": "mps",
    "models": "chain.models", "states": "chain.states", "coarse": "chain.coarse",
    "random_states": "chain.random_states", "tebd": "chain.evolution",
    "dense": "estimators.dense", "blocktensors": "estimators.blocktensors",
    "estimate": "estimators.estimate", "result": "estimators.result",
    "entropy": "estimators.entropy", "chebyshev": "estimators.chebyshev",
    "wide_energy": "estimators.wide_energy", "wide_number_energy": "estimators.wide_number_energy",
    "gaussian": "references.gaussian", "thermo": "references.thermo",
    "spec": "pipeline.spec", "columns": "pipeline.columns", "point": "pipeline.point",
    "quench": "pipeline.quench", "store": "pipeline.store", "sweep": "pipeline.sweep",
    "scaling": "analysis.scaling", "plots": "analysis.plots",
    "synthetic": "analysis.synthetic",
    "workflow": "workflow", "cli": "cli",
}
#: Functions and classes of the package namespace: name -> defining module (short name).
_FUNCTIONS = {"observational_entropy": "entropy", "evolve": "tebd", "run_quench": "quench",
              "set_threads": "threads", "using_threads": "threads",
              "InputError": "errors", "EntropyResult": "result"}

__all__ = ["__version__", *_FUNCTIONS, *SUBMODULES]


def __getattr__(name: str):
    if name in _FUNCTIONS:
        module = importlib.import_module(f"mpsobs.{SUBMODULES[_FUNCTIONS[name]]}")
        value = getattr(module, name)
    elif name in SUBMODULES:
        value = importlib.import_module(f"mpsobs.{SUBMODULES[name]}")
    else:
        raise AttributeError(f"module 'mpsobs' has no attribute {name!r}")
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
