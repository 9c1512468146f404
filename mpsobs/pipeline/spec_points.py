"""The points of a spec: the expansion of its sweep into resolved points and the
identity of a point (store key and seed).

Sweeps: any scalar key marked sweepable may be given a list; the run is then the
cartesian product of all such axes (first axis slowest), except for axes tied together
by ``sweep.zip``, which advance together. Lists inside a ``[[coarse]]`` entry (``block``,
``bin_width``) are not sweep axes: they give one coarse-graining per value, evaluated on
the same states.

The resolved point (all defaults filled, axes substituted, gas box and number in sites)
without its time grid is hashed (SHA-256 of its canonical JSON) into the point's store
key; its seed derives from the run seed and that hash through
:class:`numpy.random.SeedSequence`. A point is its physics; its output times are rows,
so a longer time grid keeps the point, its seed and its earlier rows.

Cost: one deep copy and one hash of the spec body per point.
"""

from __future__ import annotations

import hashlib
import itertools
import json
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from mpsobs.core.printing import short
from mpsobs.pipeline.spec_schema import (
    BY_PATH,
    HALF_CHI,
    SCHEMA,
    key_error,
    model_couplings,
    section_keys,
    state_keys,
)

__all__ = ["Point", "RunSpec", "IDENTITY_EXCLUDES", "fixed_settings", "get_path",
           "canonical_hash", "plain_data", "expand_points"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports


@dataclass(frozen=True)
class Point:
    """One sweep point, fully resolved.

    ``params`` is the nested point spec (sections model, state, evolution, times,
    coarse, estimator and the run seed) with every default filled in and the gas box
    and number resolved to sites; treat it as read-only. ``columns`` are its scalar
    parameters under their table column names. ``point_id`` is the store key (hash of
    the canonical ``params`` without the time grid, see the module docstring), ``seed``
    the point's own seed (63-bit integer), ``coarse_paths`` the spec key of each entry
    of ``params["coarse"]`` (``coarse[1]``), for messages.
    """

    index: int
    point_id: str
    seed: int
    params: dict
    columns: dict
    label: str = ""  # the swept values, e.g. "model.L=16 evolution.chi_max=32"
    disorder: tuple[str, ...] = ()  # parameter columns that label disorder realizations
    coarse_paths: tuple[str, ...] = ()

    @property
    def L(self) -> int:
        return self.params["model"]["L"]

    def __repr__(self) -> str:
        p = self.params
        return (f"Point({self.index}, id {self.point_id}, {short(self.label, 100)!r}: "
                f"{p['model']['name']} L={self.L}, state {p['state']['kind']}, "
                f"{len(p['times']['values'])} times, {len(p['coarse'])} coarse-grainings)")


@dataclass(frozen=True)
class RunSpec:
    """A validated spec: its resolved body, sweep axes and points.

    ``body`` is the resolved spec (defaults filled, lists of sweep axes kept) as written
    to the run directory; ``run_id`` hashes everything that changes results (not
    ``name``, ``description`` or ``[output]``), so two specs with equal ``run_id`` may
    share a run directory.
    """

    name: str
    source: str
    body: dict
    axes: tuple[tuple[str, ...], ...]
    points: tuple[Point, ...]
    run_id: str
    output_dir: Path
    checkpoint_seconds: float = field(default=300.0)

    def __repr__(self) -> str:
        axes = " x ".join("zip(" + ", ".join(g) + ")" if len(g) > 1 else g[0]
                          for g in self.axes) or "none"
        return (f"RunSpec({short(self.name, 40)!r}, {len(self.points)} points, axes "
                f"{short(axes, 100)}, run id {self.run_id[:12]}, from "
                f"{short(self.source, 60)})")


def fixed_settings(body: Mapping[str, Any], axes) -> dict:
    """The part of a resolved spec body that must be equal for two specs to share a run
    directory: everything that enters the points except the sweep axes ``axes`` (key
    paths, replaced by a placeholder) and the sweep grouping. Retired keys (in bodies
    stored by older versions) are left out."""
    fixed = json.loads(json.dumps({k: v for k, v in body.items()
                                   if k not in ("name", "description", "output", "sweep")}))
    for key in SCHEMA:
        if key.retired:
            section = fixed.get(key.section)
            if isinstance(section, dict):
                section.pop(key.name, None)
    for path in axes:
        try:
            get_path(fixed, path)
        except (KeyError, TypeError):
            continue
        _set(fixed, path, "<sweep axis>")
    return fixed


def get_path(body: dict, path: str) -> Any:
    """The value at the dotted key ``path`` of a nested spec body."""
    node: Any = body
    for part in path.split("."):
        node = node[part]
    return node


def _set(body: dict, path: str, value: Any) -> None:
    parts = path.split(".")
    node = body
    for part in parts[:-1]:
        node = node[part]
    node[parts[-1]] = value


def _canonical(obj: Any) -> str:
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), allow_nan=False)


def canonical_hash(obj: Any) -> str:
    """SHA-256 (hex) of the canonical JSON of ``obj`` (sorted keys, no spaces)."""
    return hashlib.sha256(_canonical(obj).encode()).hexdigest()


def _point_seed(run_seed: int, digest: str) -> int:
    words = [int(digest[i:i + 8], 16) for i in range(0, 32, 8)]
    state = np.random.SeedSequence([run_seed, *words]).generate_state(2, np.uint32)
    return int((int(state[0]) << 31) ^ int(state[1]))


#: Point parameters that are not part of its identity (store key and seed).
IDENTITY_EXCLUDES = ("times",)


def _resolve_point(body: dict, values: dict[str, Any], index: int,
                   disorder: tuple[str, ...]) -> Point:
    """Substitute one combination of axis values, fill run-seed defaults, check the
    point's consistency with its chain length and resolve the gas box; then hash."""
    p = json.loads(json.dumps(body))  # deep copy of plain data
    for path, value in values.items():
        _set(p, path, value)
    run_seed = p["seed"]
    model, state = p["model"], p["state"]
    L = model["L"]
    if model["field"]["seed"] is None:
        model["field"]["seed"] = run_seed
    if state["kind"] == "random_product" and state["seed"] is None:
        state["seed"] = run_seed
    if state["kind"] == "ground":
        pre = state["prequench"]
        for key, value in list(pre.items()):
            if key == "field":
                for fk, fv in list(value.items()):
                    if fv is None:
                        value[fk] = model["field"][fk]
            elif value is None:
                pre[key] = model[key]
    p["evolution"]["chi_check"] = _chi_check(p["evolution"])
    _check_pattern(state, L)
    given = {}
    if state["kind"] == "gas":
        box, number, given = _gas_in_sites(state, L)
        state.update(box=box, number=number)
    paths = tuple(entry.pop("path") for entry in p["coarse"])
    params = {k: p[k] for k in ("seed", "model", "state", "evolution", "times", "coarse",
                                "estimator")}
    digest = canonical_hash({k: v for k, v in params.items() if k not in IDENTITY_EXCLUDES})
    label = " ".join(f"{path}={value}" for path, value in values.items())
    return Point(index=index, point_id=digest[:16], seed=_point_seed(run_seed, digest),
                 params=params, columns=_columns(params, given), label=label or "single point",
                 disorder=disorder, coarse_paths=paths)


def _chi_check(evolution: dict) -> int:
    """The check bond (default chi_max // 2), checked against chi_max."""
    chi_max, chi_check = evolution["chi_max"], evolution["chi_check"]
    if chi_check is HALF_CHI:
        chi_check = chi_max // 2
    if chi_check and chi_check >= chi_max:
        raise key_error("evolution.chi_check", f"expected 0 (off) or a bond below "
                    f"evolution.chi_max = {chi_max}, got {chi_check}")
    return chi_check


def _check_pattern(state: dict, L: int) -> None:
    """A product pattern is repeated along the chain: its length must divide L."""
    if state["kind"] == "product" and L % len(state["pattern"]):
        raise key_error("state.pattern", f"its length {len(state['pattern'])} does not divide "
                    f"the chain length model.L = {L}")


def _gas_in_sites(state: dict, L: int) -> tuple[list[int], int, dict]:
    """The gas box [start, stop] and particle number in sites at chain length L, and the
    columns that hold them as given (constant along an L scan)."""
    if state["box"] is not None:
        start, stop = state["box"]
        if not 0 <= start < stop <= L:
            raise key_error("state.box", f"the box {[start, stop]} lies outside the chain: "
                        f"expected 0 <= start < stop <= model.L = {L}")
        given: dict[str, Any] = {"box_start": start, "box_stop": stop}
    else:
        a, b = state["box_fraction"]
        start, stop = math.floor(a * L + 0.5), math.floor(b * L + 0.5)  # half up
        if stop <= start:
            raise key_error("state.box_fraction", f"{[a, b]} of L = {L} sites is an empty box")
        given = {"box_from": a, "box_to": b}
    size = stop - start
    if state["filling"] is not None:
        number = round(state["filling"] * size)
        if number == 0:
            raise key_error("state.filling", f"{state['filling']} of a {size}-site box holds no "
                        f"particle (model.L = {L})")
        given["filling"] = state["filling"]
    else:
        number = state["number"]
        if number > size:
            raise key_error("state.number", f"{number} particles do not fit in a box of {size} "
                        f"sites (state.box {[start, stop]}, model.L = {L})")
        given["number"] = number
    return [start, stop], number, given


def _columns(params: dict, gas_columns: dict) -> dict:
    """The point's scalar parameters under their table column names (``gas_columns``:
    the gas box and number as given)."""
    cols: dict[str, Any] = {BY_PATH["seed"].column: params["seed"]}
    model, state = params["model"], params["state"]
    common = {n: k for n, k in section_keys("model").items() if n in ("name", "L")}
    for name, key in {**common, **model_couplings(model["name"])}.items():
        cols[key.column] = model[name]
    fields = section_keys("model.field")
    for name, key in fields.items():
        cols[key.column] = model["field"][name]
    cols[BY_PATH["state.kind"].column] = state["kind"]
    if state["kind"] == "gas":
        cols.update(gas_columns, fill=state["fill"])
    else:
        for name, key in state_keys(state["kind"]).items():
            cols[key.column] = state[name]
    if state["kind"] == "ground":
        pre = state["prequench"]
        for name, key in model_couplings(model["name"]).items():
            cols[f"pre_{key.column}"] = pre[name]
        for name, key in fields.items():
            cols[f"pre_{key.column}"] = pre["field"][name]
    for section in ("evolution", "estimator"):
        for name, key in section_keys(section).items():
            if not key.retired:
                cols[key.column] = params[section][name]
    return cols


def plain_data(obj: Any) -> Any:
    """Plain JSON-like data (tuples as lists) without bookkeeping keys, for storage."""
    if isinstance(obj, dict):
        return {k: plain_data(v) for k, v in obj.items() if k != "path"}
    if isinstance(obj, list | tuple):
        return [plain_data(v) for v in obj]
    return obj


def expand_points(body: dict, groups: list[tuple[str, ...]],
                  disorder: tuple[str, ...]) -> list[Point]:
    """The points of a parsed spec body: one per combination of the axis ``groups``
    (zipped axes advance together), resolved and hashed; ``disorder`` the parameter
    columns that label disorder realizations. Raises InputError for zipped axes of
    unequal lengths and for two combinations that give the same point."""
    choices = []
    for group in groups:
        lists = [get_path(body, path) for path in group]
        if len({len(v) for v in lists}) > 1:
            sizes = ", ".join(f"{path} has {len(v)}" for path, v in zip(group, lists,
                                                                        strict=True))
            raise key_error("sweep.zip", f"zipped axes need equal lengths: {sizes}")
        choices.append([dict(zip(group, combo, strict=True))
                        for combo in zip(*lists, strict=True)])
    stored = json.loads(json.dumps(body))  # deep copy, tuples as lists
    points, seen = [], {}
    for index, combo in enumerate(itertools.product(*choices)):
        values = {k: v for part in combo for k, v in part.items()}
        point = _resolve_point(stored, values, index, disorder)
        if point.point_id in seen:
            raise key_error("sweep", f"points {seen[point.point_id]} and {index} are the same "
                        f"point ({point.label})")
        seen[point.point_id] = index
        points.append(point)
    return points
