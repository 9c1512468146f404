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

Functions: :func:`observational_entropy`, :func:`evolve` (TEBD, :mod:`mpsobs.tebd`),
:func:`run_quench` (one quench as table rows, :mod:`mpsobs.quench`),
:func:`set_threads` / :func:`using_threads` (:mod:`mpsobs.threads`). Submodules are
attributes, imported on first use (``mpsobs.models``, ``mpsobs.states``,
``mpsobs.coarse``, ``mpsobs.thermo``, ...).
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

#: Submodules reachable as attributes of the package (imported on first access).
SUBMODULES = ("blocktensors", "cli", "coarse", "columns", "dense", "entropy", "errors",
              "estimate", "gaussian", "models", "mps", "plots", "point", "quench",
              "random_states", "result", "scaling", "spec", "states", "store", "sweep",
              "synthetic", "tebd", "thermo", "threads")
#: Functions and classes of the package namespace: name -> defining module.
_FUNCTIONS = {"observational_entropy": "entropy", "evolve": "tebd", "run_quench": "quench",
              "set_threads": "threads", "using_threads": "threads",
              "InputError": "errors", "EntropyResult": "result"}

__all__ = ["__version__", *_FUNCTIONS, *SUBMODULES]


def __getattr__(name: str):
    if name in _FUNCTIONS:
        value = getattr(importlib.import_module(f"mpsobs.{_FUNCTIONS[name]}"), name)
    elif name in SUBMODULES:
        value = importlib.import_module(f"mpsobs.{name}")
    else:
        raise AttributeError(f"module 'mpsobs' has no attribute {name!r}")
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
