"""One quench from Python: the rows a run table holds, without a spec file or a loop.

:func:`run_quench` writes its arguments into a spec mapping (the sections of a spec
file, see :mod:`mpsobs.pipeline.spec`), validates it with
:func:`mpsobs.pipeline.spec.parse`, checks the single point with
:func:`mpsobs.pipeline.point.check_point` and computes it with
:func:`mpsobs.pipeline.point.compute_point`: the rows, columns and seeds are those of
``mpsobs run`` on the same spec. Trusted times are an analysis of the rows:
:func:`mpsobs.analysis.trust.with_trusted_times` adds them at a tolerance of your
choice.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from mpsobs.chain.models import Model
from mpsobs.core.errors import InputError
from mpsobs.pipeline import point as points
from mpsobs.pipeline import spec as specs

__all__ = ["run_quench", "quench_spec"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports


def _model_table(model: Mapping | Model) -> dict:
    """A ``[model]`` table: a mapping as given, or the parameters of a Model."""
    if isinstance(model, Mapping):
        return dict(model)
    if not isinstance(model, Model):
        raise InputError(f"model: expected a [model] table as a dict or an "
                         f"mpsobs.models.Model, got {type(model).__name__}")
    params = dict(model.params)
    if "region" in params or any(isinstance(v, list) for v in params.values()):
        raise InputError("model: only models of uniform couplings from models.xxz or "
                         "models.ising map to a spec (no per-site values, no restricted "
                         "models); give the [model] table as a dict")
    field = {"kind": params.pop("field"), "strength": params.pop("h")}
    seed = params.pop("seed")
    if seed is not None:
        field["seed"] = seed
    return {"name": model.name, "L": model.L, **params, "field": field}


def quench_spec(model: Mapping | Model, state: Mapping | str, times, coarse, *,
                max_bond: int | None = None, evolution: Mapping | None = None,
                estimator: Mapping | None = None, seed: int = 0,
                name: str = "quench") -> dict:
    """The spec mapping of :func:`run_quench`'s arguments (see there)."""
    sections = {"seed": seed, "name": name, "model": _model_table(model)}
    sections["state"] = {"kind": state} if isinstance(state, str) else state
    if isinstance(times, Mapping):
        sections["times"] = dict(times)
    else:
        if isinstance(times, np.ndarray):
            times = times.tolist()
        try:
            sections["times"] = {"values": list(times)}
        except TypeError:
            raise InputError(f"times: expected a list of times or a [times] table, got "
                             f"{times!r}") from None
    sections["coarse"] = [coarse] if isinstance(coarse, Mapping) else coarse
    sections["evolution"] = dict(evolution or {})
    if max_bond is not None:
        if "chi_max" in sections["evolution"]:
            raise InputError("max_bond: give max_bond or evolution['chi_max'], not both")
        sections["evolution"]["chi_max"] = max_bond
    if estimator is not None:
        sections["estimator"] = estimator
    return sections


def run_quench(model: Mapping | Model, state: Mapping | str, times: Sequence[float] | Mapping,
               coarse: Mapping | Sequence[Mapping], *, max_bond: int | None = None,
               evolution: Mapping | None = None, estimator: Mapping | None = None,
               seed: int = 0) -> pd.DataFrame:
    """Evolve one initial state under one model and return the run table's rows.

    Parameters
    ----------
    model : the ``[model]`` table as a dict, e.g. ``{"name": "xxz", "L": 48, "delta": 0.5,
        "field": {"kind": "random", "strength": 1.0}}``, or a :class:`mpsobs.models.Model`
        of uniform couplings (from :func:`mpsobs.models.xxz` or :func:`~mpsobs.models.ising`).
    state : the ``[state]`` table as a dict, e.g. ``{"kind": "gas", "box": [0, 12]}``,
        or just its kind (``"neel"``, ``"domain_wall"``, ...).
    times : output times (a list from 0 up, increasing) or a ``[times]`` table such as
        ``{"t_max": 4.0, "n_times": 21}``.
    coarse : one ``[[coarse]]`` entry as a dict, e.g. ``{"observable": "number",
        "block": [2, 4]}``, or a list of them.
    max_bond : the evolution's bond dimension cap (``evolution.chi_max``, default 64).
    evolution, estimator : the ``[evolution]`` (dt, order, chi_max, cutoff, chi_check)
        and ``[estimator]`` (method, samples, target_stderr, prune) tables; defaults as
        in a spec file (``mpsobs reference keys``).
    seed : the run seed (random fields and states, sampling).

    Returns
    -------
    DataFrame: one row per (time, coarse-graining), the columns of a run table
    (:mod:`mpsobs.pipeline.columns`, then the point's parameters), entropies in nats.

    Every value is checked as in a spec file (InputError naming the key path, e.g.
    ``model.delta``) and the point as by ``mpsobs check``, before the evolution starts.
    A list where a spec would sweep is refused: a sweep is many quenches, for
    ``mpsobs run``. Cost: that of :func:`mpsobs.point.compute_point`.
    """
    spec = specs.parse(quench_spec(model, state, times, coarse, max_bond=max_bond,
                                   evolution=evolution, estimator=estimator, seed=seed),
                       source="<run_quench>")
    if len(spec.points) != 1:
        axes = ", ".join(name for group in spec.axes for name in group)
        raise InputError(f"{axes}: run_quench computes one quench; these lists give "
                         f"{len(spec.points)} points (use a spec file and `mpsobs run` for "
                         f"a sweep)")
    (single,) = spec.points
    points.check_point(single)
    return points.compute_point(single)
