"""Spec files: parse and validate a TOML run description and expand it into sweep points.

A spec is data (TOML, read with :mod:`tomllib`); nothing in it is evaluated. Every key is
checked before any work starts: unknown keys, wrong types, values out of range and
inconsistent combinations raise :class:`mpsobs.errors.InputError` with the key path
(``evolution.dt``, ``coarse[1].block``) and the allowed values.

Sweeps: any scalar key marked sweepable below may be given a list; the run is then the
cartesian product of all such axes (first axis slowest), except for axes tied together
by ``sweep.zip``, which advance together. Lists inside a ``[[coarse]]`` entry (``block``,
``bin_width``) are not sweep axes: they give one coarse-graining per value, evaluated on
the same states.

The schema (defaults in brackets; S = sweepable):

- top level: ``name`` (str) [file stem], ``seed`` (int >= 0, S) [0], ``description``.
- ``[model]``: ``name`` "xxz" | "ising" (required); ``L`` (int >= 2, S, required);
  ``J`` (S) [1.0]; xxz: ``delta`` (S) [1.0]; ising: ``g`` (S) [1.0].
  ``[model.field]`` (the longitudinal field h_i): ``kind`` uniform | staggered | random (S)
  [uniform]; ``strength`` (S) [0.0]; ``seed`` (int >= 0, S) [the run seed].
- ``[state]``: ``kind`` (required) product | domain_wall | neel | gas | random_product |
  ground. product: ``pattern`` (string of 0, 1, +, -, repeated along the chain, S);
  gas: ``box = [start, stop]`` (sites) or ``box_fraction = [a, b]`` (fractions of L,
  rounded half up to sites),
  ``number`` (int, S) or ``filling`` (fraction of the box, S) [filling 1.0], ``fill``
  packed | spread | ground (S) [packed]; random_product: ``seed`` (S) [the run seed],
  ``draw`` haar | basis (S) [haar];
  ground: ``[state.prequench]`` with model keys (J, delta or g, field) that differ
  from ``[model]`` before the quench [none].
- ``[evolution]``: ``dt`` (> 0, S) [0.05]; ``order`` 2 | 4 (S) [4]; ``chi_max``
  (int >= 1, S) [64]; ``cutoff`` (0 <= c < 1, S) [1e-10]; ``chi_check`` (int >= 0 and
  < chi_max, 0 = off, S) [chi_max // 2]: bond of the check evolution that gives the
  truncation error of every row (see :mod:`mpsobs.point`); ``trust_rtol`` (0 <= r <= 1)
  [0.01]: truncation error allowed relative to S_obs within the trusted time range.
- ``[times]``: ``t_max`` (> 0) with ``n_times`` (int >= 2): an even grid from 0;
  or ``values`` (increasing list >= 0).
- ``[[coarse]]`` (one or more): ``observable`` number | energy | fine, or a list of them
  asked in that order; ``block`` (int >= 1 or a list) or ``regions`` (list of
  [start, stop]); ``bin_width`` (> 0 or a list; energy only); ``label`` (str).
- ``[estimator]``: ``method`` auto | exact | enumerate | count | sample |
  sample_strings (S) [auto], see :mod:`mpsobs.estimate` (sample: the conditional
  chain-rule estimator; sample_strings: the per-string estimator, for comparison);
  ``samples`` (int >= 1, S) [2000]; ``target_stderr`` (>= 0, 0 = off, S) [0]; ``prune``
  (0 <= p < 1, S) [1e-12].
- ``[sweep]``: ``zip`` = list of groups of axis names, e.g. [["model.L", "evolution.chi_max"]];
  ``disorder`` = list of seed axes whose values are realizations of one disorder
  ensemble, from ``model.field.seed`` (needs ``model.field.kind = "random"``) and
  ``state.seed`` (needs ``state.kind = "random_product"``) [none]. The analysis averages
  over them (:mod:`mpsobs.scaling`); a disorder axis is zipped only with another one.
- ``[output]``: ``dir`` (str) [mpsobs-runs/<name>]; ``checkpoint_seconds`` (>= 0) [300].

The resolved point (all defaults filled, axes substituted, gas box and number in sites)
is hashed (SHA-256 of its canonical JSON) into the point's store key; its seed derives
from the run seed and that hash through :class:`numpy.random.SeedSequence`.
"""

from __future__ import annotations

import hashlib
import itertools
import json
import math
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Literal

import numpy as np

from mpsobs.chain.coarse import MAX_BLOCK_SITES, MAX_WIDE_REGIONS
from mpsobs.core.errors import InputError
from mpsobs.core.printing import short
from mpsobs.estimators.estimate import COUNT_MAX_REGIONS

__all__ = ["Point", "RunSpec", "load", "parse", "default_spec_path", "DEFAULT_OUTPUT_ROOT",
           "fixed_settings", "DISORDER_AXES", "MODELS", "STATES", "OBSERVABLES",
           "FIELD_KINDS", "ESTIMATOR_METHODS"]

MODELS = ("xxz", "ising")
STATES = ("product", "domain_wall", "neel", "gas", "random_product", "ground")
OBSERVABLES = ("number", "energy", "fine")
FIELD_KINDS = ("uniform", "staggered", "random")
ESTIMATOR_METHODS = ("auto", "exact", "enumerate", "count", "sample", "sample_strings")
_SAMPLING_METHODS = ("auto", "sample", "sample_strings")
GAS_FILLS = ("packed", "spread", "ground")
RANDOM_DRAWS = ("haar", "basis")
PATTERN_CHARACTERS = "01+-"
#: Seed keys that may be marked as disorder axes, with their table column and the
#: setting each needs (key path, value).
DISORDER_AXES = {"model.field.seed": ("field_seed", ("model.field.kind", "random")),
                 "state.seed": ("state_seed", ("state.kind", "random_product"))}
#: Where runs go when neither the spec nor the command line names a directory.
DEFAULT_OUTPUT_ROOT = Path("mpsobs-runs")

_REQUIRED = object()
_RUN_SEED = None  # default of seeds that follow the point's run seed
_HALF_CHI = None  # default of evolution.chi_check: the point's chi_max // 2


@dataclass(frozen=True)
class _Key:
    """One scalar key: its type, allowed values, default and table column."""

    kind: Literal["int", "float", "str"]
    default: Any = _REQUIRED
    choices: tuple = ()
    low: float | None = None
    low_open: bool = False
    high: float | None = None
    high_open: bool = False
    column: str | None = None
    sweep: bool = True

    def allowed(self) -> str:
        if self.choices:
            return "one of " + ", ".join(repr(c) for c in self.choices)
        noun = {"int": "an integer", "float": "a number", "str": "a string"}[self.kind]
        parts = []
        if self.low is not None:
            parts.append(f"{'>' if self.low_open else '>='} {self.low:g}")
        if self.high is not None:
            parts.append(f"{'<' if self.high_open else '<='} {self.high:g}")
        return noun + (" " + " and ".join(parts) if parts else "")

    def check(self, path: str, value: Any) -> Any:
        """The value in canonical type, or InputError naming ``path``."""
        bad = InputError(f"{path}: expected {self.allowed()}, got {value!r}")
        if self.kind == "int":
            if isinstance(value, bool) or not isinstance(value, int):
                raise bad
        elif self.kind == "float":
            if isinstance(value, bool) or not isinstance(value, int | float):
                raise bad
            value = float(value)
            if not math.isfinite(value):
                raise bad
        elif not isinstance(value, str):
            raise bad
        if self.choices and value not in self.choices:
            raise bad
        if self.low is not None and (value < self.low or (self.low_open and value == self.low)):
            raise bad
        if self.high is not None and (value > self.high
                                      or (self.high_open and value == self.high)):
            raise bad
        return value


def _number(column: str | None, default: Any = _REQUIRED, **bounds) -> _Key:
    return _Key("float", default, column=column, **bounds)


_TOP = {
    "name": _Key("str", None, sweep=False),
    "seed": _Key("int", 0, low=0, column="run_seed"),
    "description": _Key("str", "", sweep=False),
}
_TOP_TABLES = ("model", "state", "evolution", "times", "coarse", "estimator", "sweep",
               "output")
_FIELD = {
    "kind": _Key("str", "uniform", choices=FIELD_KINDS, column="field"),
    "strength": _number("h", 0.0),
    "seed": _Key("int", _RUN_SEED, low=0, column="field_seed"),
}
_MODEL_COMMON = {
    "name": _Key("str", choices=MODELS, column="model", sweep=False),
    "L": _Key("int", low=2, column="L"),
}
_COUPLINGS = {
    "xxz": {"J": _number("J", 1.0), "delta": _number("delta", 1.0)},
    "ising": {"J": _number("J", 1.0), "g": _number("g", 1.0)},
}
_STATE_KEYS = {
    "product": {"pattern": _Key("str", column="pattern")},
    "domain_wall": {},
    "neel": {},
    "gas": {
        "number": _Key("int", None, low=0, column="number"),
        "filling": _number(None, None, low=0.0, low_open=True, high=1.0),
        "fill": _Key("str", "packed", choices=GAS_FILLS, column="fill"),
    },
    "random_product": {"seed": _Key("int", _RUN_SEED, low=0, column="state_seed"),
                       "draw": _Key("str", "haar", choices=RANDOM_DRAWS, column="draw")},
    "ground": {},
}
_EVOLUTION = {
    "dt": _number("dt", 0.05, low=0.0, low_open=True),
    "order": _Key("int", 4, choices=(2, 4), column="order"),
    "chi_max": _Key("int", 64, low=1, column="chi_max"),
    "cutoff": _number("cutoff", 1e-10, low=0.0, high=1.0, high_open=True),
    "chi_check": _Key("int", _HALF_CHI, low=0, column="chi_check"),
    "trust_rtol": _number("trust_rtol", 0.01, low=0.0, high=1.0, sweep=False),
}
_TIMES = {
    "t_max": _number(None, None, low=0.0, low_open=True, sweep=False),
    "n_times": _Key("int", None, low=2, sweep=False),
}
_ESTIMATOR = {
    "method": _Key("str", "auto", choices=ESTIMATOR_METHODS, column="estimator"),
    "samples": _Key("int", 2000, low=1, column="sample_budget"),
    "target_stderr": _number("target_stderr", 0.0, low=0.0),
    "prune": _number("prune", 1e-12, low=0.0, high=1.0, high_open=True),
}
_OUTPUT = {
    "dir": _Key("str", None, sweep=False),
    "checkpoint_seconds": _number(None, 300.0, low=0.0, sweep=False),
}
_COARSE_KEYS = ("observable", "block", "regions", "bin_width", "label")


# --------------------------------------------------------------------------- data


@dataclass(frozen=True)
class Point:
    """One sweep point, fully resolved.

    ``params`` is the nested point spec (sections model, state, evolution, times,
    coarse, estimator and the run seed) with every default filled in and the gas box
    and number resolved to sites; treat it as read-only. ``columns`` are its scalar
    parameters under their table column names. ``point_id`` is the store key (hash of
    the canonical ``params``), ``seed`` the point's own seed (63-bit integer).
    """

    index: int
    point_id: str
    seed: int
    params: dict
    columns: dict
    label: str = ""  # the swept values, e.g. "model.L=16 evolution.chi_max=32"
    disorder: tuple[str, ...] = ()  # parameter columns that label disorder realizations

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


def default_spec_path() -> Path:
    """The built-in default scenario shipped with the package."""
    return Path(__file__).parents[1] / "scenarios" / "default.toml"


# --------------------------------------------------------------------------- helpers


def _fail(path: str, message: str) -> InputError:
    return InputError(f"{path}: {message}")


def _join(prefix: str, key: str) -> str:
    return f"{prefix}.{key}" if prefix else key


def _table(path: str, value: Any) -> dict:
    if not isinstance(value, dict):
        raise _fail(path, f"expected a table ([{path}]), got {value!r}")
    return value


def _unknown(path: str, table: Mapping, allowed) -> None:
    for key in table:
        if key not in allowed:
            where = path or "top level"
            raise InputError(f"{_join(path, key)}: unknown key; allowed at {where}: "
                             f"{', '.join(allowed)}")


def _scalars(path: str, table: Mapping, keys: Mapping[str, _Key], out: dict,
             axes: list[str]) -> None:
    """Check the scalar keys of ``table`` into ``out`` (lists become sweep axes)."""
    for name, key in keys.items():
        p = _join(path, name)
        if name not in table:
            if key.default is _REQUIRED:
                raise _fail(p, f"missing; expected {key.allowed()}")
            out[name] = key.default
            continue
        value = table[name]
        if isinstance(value, list):
            if not key.sweep:
                raise _fail(p, f"expected {key.allowed()} (this key cannot be swept), "
                            f"got a list")
            if not value:
                raise _fail(p, "an empty list gives no points; give at least one value")
            checked = [key.check(f"{p}[{i}]", v) for i, v in enumerate(value)]
            if len(set(checked)) != len(checked):
                raise _fail(p, f"repeated values in the sweep list {value!r}")
            out[name] = checked
            axes.append(p)
        else:
            out[name] = key.check(p, value)


def _pair(path: str, value: Any, kind: type) -> tuple:
    noun = "integers" if kind is int else "numbers"
    ok = (isinstance(value, list) and len(value) == 2
          and all(isinstance(v, int | float) and not isinstance(v, bool) for v in value)
          and (kind is float or all(isinstance(v, int) for v in value)))
    if not ok:
        raise _fail(path, f"expected a pair [start, stop] of {noun}, got {value!r}")
    return tuple(kind(v) for v in value)


# --------------------------------------------------------------------------- sections


def _optional(keys: Mapping[str, _Key]) -> dict[str, _Key]:
    """The same keys with default None (unset keys of a prequench model inherit)."""
    return {name: replace(key, default=None) for name, key in keys.items()}


def _model_section(path: str, table: dict, axes: list[str],
                   prequench_of: str | None = None) -> dict:
    """[model], or with ``prequench_of`` (the model name) the partial [state.prequench]."""
    out: dict = {}
    if prequench_of is None:
        _scalars(path, table, _MODEL_COMMON, out, axes)
        couplings, fields = _COUPLINGS[out["name"]], _FIELD
        allowed = [*_MODEL_COMMON, *couplings, "field"]
    else:
        couplings, fields = _optional(_COUPLINGS[prequench_of]), _optional(_FIELD)
        allowed = [*couplings, "field"]
    _unknown(path, table, allowed)
    _scalars(path, table, couplings, out, axes)
    field_path = _join(path, "field")
    field_table = _table(field_path, table.get("field", {}))
    _unknown(field_path, field_table, list(_FIELD))
    out["field"] = {}
    _scalars(field_path, field_table, fields, out["field"], axes)
    return out


def _state_section(table: dict, model_name: str, axes: list[str]) -> dict:
    out: dict = {}
    kind_key = _Key("str", choices=STATES, column="state", sweep=False)
    _scalars("state", table, {"kind": kind_key}, out, axes)
    kind = out["kind"]
    extra = {"gas": ["box", "box_fraction"], "ground": ["prequench"]}.get(kind, [])
    allowed = ["kind", *_STATE_KEYS[kind], *extra]
    _unknown("state", table, allowed)
    _scalars("state", table, _STATE_KEYS[kind], out, axes)
    if kind == "product":
        patterns = out["pattern"] if isinstance(out["pattern"], list) else [out["pattern"]]
        for pattern in patterns:
            if not pattern or set(pattern) - set(PATTERN_CHARACTERS):
                raise _fail("state.pattern", f"expected a string of the characters 0, 1, +, "
                            f"- (site 0 first; 1 = occupied, +/- = (|0> +/- |1>)/sqrt 2), "
                            f"got {pattern!r}")
    if kind == "gas":
        if ("box" in table) == ("box_fraction" in table):
            raise _fail("state.box", "give exactly one of state.box = [start, stop] (sites) "
                        "and state.box_fraction = [a, b] (fractions of L)")
        if "box" in table:
            out["box"] = _pair("state.box", table["box"], int)
            out["box_fraction"] = None
        else:
            out["box_fraction"] = _pair("state.box_fraction", table["box_fraction"], float)
            out["box"] = None
            a, b = out["box_fraction"]
            if not 0.0 <= a < b <= 1.0:
                raise _fail("state.box_fraction", f"expected 0 <= a < b <= 1, got {[a, b]}")
        if out["number"] is not None and out["filling"] is not None:
            raise _fail("state.number", "give state.number or state.filling, not both")
        if out["number"] is None and out["filling"] is None:
            out["filling"] = 1.0
    fills = out.get("fill") if isinstance(out.get("fill"), list) else [out.get("fill")]
    if kind == "gas" and "ground" in fills and model_name != "xxz":
        raise _fail("state.fill", "'ground' needs a number-conserving model; use it with "
                    "model.name = 'xxz', or fill = 'packed' or 'spread'")
    if kind == "ground":
        pre = _table("state.prequench", table.get("prequench", {}))
        out["prequench"] = _model_section("state.prequench", pre, axes, model_name)
    return out


def _times_section(table: dict) -> dict:
    _unknown("times", table, ["t_max", "n_times", "values"])
    if "values" in table:
        if "t_max" in table or "n_times" in table:
            raise _fail("times.values", "give either times.values or times.t_max with "
                        "times.n_times, not both")
        values = table["values"]
        if not isinstance(values, list) or not values:
            raise _fail("times.values", f"expected a non-empty list of times >= 0, got "
                        f"{values!r}")
        key = _number(None, low=0.0)
        checked = [key.check(f"times.values[{i}]", v) for i, v in enumerate(values)]
        if any(b <= a for a, b in itertools.pairwise(checked)):
            raise _fail("times.values", f"expected strictly increasing times, got {values!r}")
        return {"values": checked}
    out: dict = {}
    _scalars("times", table, _TIMES, out, [])
    if out["t_max"] is None or out["n_times"] is None:
        raise _fail("times", "give times.t_max and times.n_times (an even grid from 0), "
                    "or times.values")
    grid = np.linspace(0.0, out["t_max"], out["n_times"])
    return {"values": [round(float(t), 12) for t in grid]}


def _coarse_section(value: Any) -> list[dict]:
    if not isinstance(value, list) or not value:
        raise _fail("coarse", "expected one or more [[coarse]] tables (array of tables), "
                    f"got {value!r}")
    entries: list[dict] = []
    for i, raw in enumerate(value):
        path = f"coarse[{i}]"
        table = _table(path, raw)
        _unknown(path, table, list(_COARSE_KEYS))
        observable = table.get("observable", _REQUIRED)
        allowed = f"one of {', '.join(map(repr, OBSERVABLES))}, or a list of them"
        names = observable if isinstance(observable, list) else [observable]
        if observable is _REQUIRED:
            raise _fail(f"{path}.observable", f"missing; expected {allowed}")
        if not names or any(n not in OBSERVABLES for n in names):
            raise _fail(f"{path}.observable", f"expected {allowed}, got {observable!r}")
        if ("block" in table) == ("regions" in table) and names != ["fine"]:
            raise _fail(f"{path}.block", "give exactly one of block (block size in sites) "
                        "and regions (list of [start, stop])")
        if "block" in table and "regions" in table:
            raise _fail(f"{path}.block", "give block or regions, not both")
        blocks: list[int | None] = [None]
        regions = None
        if "block" in table:
            raw_blocks = table["block"]
            items = raw_blocks if isinstance(raw_blocks, list) else [raw_blocks]
            key = _Key("int", low=1)
            if not items:
                raise _fail(f"{path}.block", "expected a block size or a non-empty list")
            blocks = [key.check(f"{path}.block", b) for b in items]
        elif "regions" in table:
            spans = table["regions"]
            if not isinstance(spans, list) or not spans:
                raise _fail(f"{path}.regions", f"expected a list of [start, stop] pairs, got "
                            f"{spans!r}")
            regions = [list(_pair(f"{path}.regions[{j}]", s, int))
                       for j, s in enumerate(spans)]
        elif names == ["fine"]:
            blocks = [1]
        widths: list[float | None] = [None]
        if "bin_width" in table:
            if "energy" not in names:
                raise _fail(f"{path}.bin_width", "only energy outcomes are binned; add "
                            "'energy' to the observable or drop bin_width")
            raw_widths = table["bin_width"]
            items = raw_widths if isinstance(raw_widths, list) else [raw_widths]
            key = _number(None, low=0.0, low_open=True)
            if not items:
                raise _fail(f"{path}.bin_width", "expected a width or a non-empty list")
            widths = [key.check(f"{path}.bin_width", w) for w in items]
        label = table.get("label")
        if label is not None:
            if not isinstance(label, str) or not label:
                raise _fail(f"{path}.label", f"expected a non-empty string, got {label!r}")
            if len(blocks) * len(widths) > 1:
                raise _fail(f"{path}.label", "a label names one coarse-graining; this entry "
                            "gives several (list of block or bin_width)")
        for b, w in itertools.product(blocks, widths):
            entries.append({"observable": list(names), "block": b, "regions": regions,
                            "bin_width": w, "label": label, "path": path})
    seen: dict[str, str] = {}
    for entry in entries:
        key = json.dumps({k: v for k, v in entry.items() if k != "path"}, sort_keys=True)
        if key in seen:
            raise _fail(entry["path"], f"the same coarse-graining as {seen[key]}")
        seen[key] = entry["path"]
    labels = [e["label"] for e in entries if e["label"] is not None]
    if len(set(labels)) != len(labels):
        raise _fail("coarse", f"repeated labels {labels!r}; labels must differ")
    return entries


def _axis_groups(table: dict, axes: list[str]) -> list[tuple[str, ...]]:
    _unknown("sweep", table, ["zip", "disorder"])
    groups = table.get("zip", [])
    shape = "a list of groups of axis names, e.g. [[\"model.L\", \"evolution.chi_max\"]]"
    if not isinstance(groups, list) or not all(isinstance(g, list) for g in groups):
        raise _fail("sweep.zip", f"expected {shape}, got {groups!r}")
    zipped: set[str] = set()
    for j, group in enumerate(groups):
        if len(group) < 2 or not all(isinstance(n, str) for n in group):
            raise _fail(f"sweep.zip[{j}]", f"expected two or more axis names, got {group!r}")
        for name in group:
            if name not in axes:
                listed = ", ".join(axes) if axes else "none (no key is given a list)"
                raise _fail(f"sweep.zip[{j}]", f"{name!r} is not a sweep axis; axes: {listed}")
            if name in zipped:
                raise _fail(f"sweep.zip[{j}]", f"{name!r} is already zipped in another group")
            zipped.add(name)
    out: list[tuple[str, ...]] = []
    for name in axes:
        group = next((tuple(g) for g in groups if name in g), (name,))
        if group not in out:
            out.append(group)
    return out


def _disorder_axes(table: dict, body: dict, groups: list[tuple[str, ...]]) -> list[str]:
    """The ``sweep.disorder`` axis names, checked (seed axes with a random setting, zipped
    with disorder axes only)."""
    names = table.get("disorder", [])
    allowed = ", ".join(DISORDER_AXES)
    if not isinstance(names, list) or not all(isinstance(n, str) for n in names):
        raise _fail("sweep.disorder", f"expected a list of seed axis names ({allowed}), "
                    f"got {names!r}")
    if len(set(names)) != len(names):
        raise _fail("sweep.disorder", f"repeated names in {names!r}")
    axes = [path for group in groups for path in group]
    for j, name in enumerate(names):
        where = f"sweep.disorder[{j}]"
        if name not in DISORDER_AXES:
            raise _fail(where, f"{name!r} cannot be a disorder axis; allowed: {allowed}")
        if name not in axes:
            raise _fail(where, f"{name!r} is not a sweep axis; give it a list of seeds, "
                        f"e.g. {name} = [1, 2, 3]")
        setting, needed = DISORDER_AXES[name][1]
        if _get(body, setting) != needed:
            raise _fail(where, f"{name!r} draws no disorder unless {setting} = {needed!r} "
                        f"(got {_get(body, setting)!r})")
        group = next(g for g in groups if name in g)
        others = [a for a in group if a not in names]
        if others:
            raise _fail(where, f"{name!r} is zipped with {', '.join(others)}, which are "
                        f"not disorder axes; a realization must not change other parameters")
    return names


def fixed_settings(body: Mapping[str, Any], axes) -> dict:
    """The part of a resolved spec body that must be equal for two specs to share a run
    directory: everything that enters the points except the sweep axes ``axes`` (key
    paths, replaced by a placeholder) and the sweep grouping."""
    fixed = json.loads(json.dumps({k: v for k, v in body.items()
                                   if k not in ("name", "description", "output", "sweep")}))
    for path in axes:
        try:
            _get(fixed, path)
        except (KeyError, TypeError):
            continue
        _set(fixed, path, "<sweep axis>")
    return fixed


# --------------------------------------------------------------------------- points


def _get(body: dict, path: str) -> Any:
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


def _digest(obj: Any) -> str:
    return hashlib.sha256(_canonical(obj).encode()).hexdigest()


def _point_seed(run_seed: int, digest: str) -> int:
    words = [int(digest[i:i + 8], 16) for i in range(0, 32, 8)]
    state = np.random.SeedSequence([run_seed, *words]).generate_state(2, np.uint32)
    return int((int(state[0]) << 31) ^ int(state[1]))


def _resolve_point(body: dict, values: dict[str, Any], index: int,
                   disorder: tuple[str, ...] = ()) -> Point:
    """Substitute one combination of axis values, fill run-seed defaults, check the
    point's consistency with its chain length and resolve the gas box."""
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
    _check_evolution(p["evolution"])
    _check_state(state, L)
    _check_coarse(p["coarse"], L, p["estimator"]["method"])
    for entry in p["coarse"]:
        entry.pop("path")
    params = {k: p[k] for k in ("seed", "model", "state", "evolution", "times", "coarse",
                                "estimator")}
    columns = _columns(params)
    digest = _digest(params)
    label = " ".join(f"{path}={value}" for path, value in values.items())
    return Point(index=index, point_id=digest[:16], seed=_point_seed(run_seed, digest),
                 params=params, columns=columns, label=label or "single point",
                 disorder=disorder)


def _check_evolution(evolution: dict) -> None:
    """Resolve the check bond (default chi_max // 2) and check it against chi_max."""
    chi_max = evolution["chi_max"]
    if evolution["chi_check"] is _HALF_CHI:
        evolution["chi_check"] = chi_max // 2
    chi_check = evolution["chi_check"]
    if chi_check and chi_check >= chi_max:
        raise _fail("evolution.chi_check", f"expected 0 (off) or a bond below "
                    f"evolution.chi_max = {chi_max}, got {chi_check}")


def _check_state(state: dict, L: int) -> None:
    kind = state["kind"]
    if kind == "product" and L % len(state["pattern"]):
        raise _fail("state.pattern", f"its length {len(state['pattern'])} does not divide "
                    f"the chain length model.L = {L}")
    if kind != "gas":
        return
    if state["box"] is not None:
        start, stop = state["box"]
        if not 0 <= start < stop <= L:
            raise _fail("state.box", f"the box {[start, stop]} lies outside the chain: "
                        f"expected 0 <= start < stop <= model.L = {L}")
    else:
        a, b = state["box_fraction"]
        start, stop = math.floor(a * L + 0.5), math.floor(b * L + 0.5)  # half up
        if stop <= start:
            raise _fail("state.box_fraction", f"{[a, b]} of L = {L} sites is an empty box")
    size = stop - start
    if state["filling"] is not None:
        number = round(state["filling"] * size)
        if number == 0:
            raise _fail("state.filling", f"{state['filling']} of a {size}-site box holds no "
                        f"particle (model.L = {L})")
    else:
        number = state["number"]
        if number > size:
            raise _fail("state.number", f"{number} particles do not fit in a box of {size} "
                        f"sites (state.box {[start, stop]}, model.L = {L})")
    state["columns"] = ({"box_start": start, "box_stop": stop} if state["box"] is not None
                        else dict(zip(("box_from", "box_to"), state["box_fraction"],
                                      strict=True)))
    state["columns"].update({"number": number} if state["filling"] is None
                            else {"filling": state["filling"]})
    state.update(box=[start, stop], number=number)


def _check_coarse(entries: list[dict], L: int, method: str) -> None:
    for entry in entries:
        path = entry["path"]
        if entry["block"] is not None:
            b = entry["block"]
            if b > L:
                raise _fail(f"{path}.block", f"block size {b} is larger than the chain "
                            f"(model.L = {L})")
            widest, n_blocks = b, -(-L // b)
        else:
            position = 0
            for j, (start, stop) in enumerate(entry["regions"]):
                if start != position or stop <= start:
                    raise _fail(f"{path}.regions[{j}]", f"[{start}, {stop}]: regions must be "
                                f"non-empty, contiguous and in order from site 0")
                position = stop
            if position != L:
                raise _fail(f"{path}.regions", f"they cover sites 0..{position}, the chain "
                            f"0..{L} (model.L = {L})")
            widest = max(stop - start for start, stop in entry["regions"])
            n_blocks = len(entry["regions"])
        if method == "count" and (entry["observable"] != ["number"]
                                  or n_blocks > COUNT_MAX_REGIONS):
            raise _fail("estimator.method", f"'count' handles the number observable in at "
                        f"most {COUNT_MAX_REGIONS} regions; {path} asks "
                        f"{entry['observable']} in {n_blocks} blocks (model.L = {L}); use "
                        f"'auto' or another method")
        if widest > MAX_BLOCK_SITES and entry["observable"] == ["energy"] and (
                n_blocks != MAX_WIDE_REGIONS or entry["bin_width"] is None):
            raise _fail(f"{path}.block", f"energy regions wider than {MAX_BLOCK_SITES} "
                        f"sites are evaluated for exactly {MAX_WIDE_REGIONS} regions with a "
                        f"bin_width; got {n_blocks} blocks (model.L = {L}), bin_width "
                        f"{entry['bin_width']}")
        if widest > MAX_BLOCK_SITES and entry["observable"] not in (["number"], ["energy"]):
            raise _fail(f"{path}.block", f"blocks wider than {MAX_BLOCK_SITES} sites are "
                        f"possible for the number or the energy observable alone; got "
                        f"{widest} sites for {entry['observable']}")


def _columns(params: dict) -> dict:
    """The point's scalar parameters under their table column names."""
    cols: dict[str, Any] = {"run_seed": params["seed"]}
    model, state = params["model"], params["state"]
    for name, key in {**_MODEL_COMMON, **_COUPLINGS[model["name"]]}.items():
        cols[key.column] = model[name]
    for name, key in _FIELD.items():
        cols[key.column] = model["field"][name]
    cols["state"] = state["kind"]
    if state["kind"] == "gas":  # the box and number as given: constant along an L scan
        cols.update(state.pop("columns"), fill=state["fill"])
    else:
        for name, key in _STATE_KEYS[state["kind"]].items():
            cols[key.column] = state[name]
    if state["kind"] == "ground":
        pre = state["prequench"]
        for name in _COUPLINGS[model["name"]]:
            cols[f"pre_{name}"] = pre[name]
        for name, key in _FIELD.items():
            cols[f"pre_{key.column}"] = pre["field"][name]
    for section, keys in (("evolution", _EVOLUTION), ("estimator", _ESTIMATOR)):
        for name, key in keys.items():
            cols[key.column] = params[section][name]
    return cols


# --------------------------------------------------------------------------- entry


def parse(data: Mapping[str, Any], *, name: str = "run", source: str = "<spec>") -> RunSpec:
    """Validate a spec given as a (TOML-decoded) mapping and expand its sweep.

    Raises InputError naming the key path at the first problem found.
    """
    raw = json.loads(json.dumps(data, default=str)) if data is not None else {}
    if not isinstance(raw, dict):
        raise InputError("spec: expected a table of sections")
    _unknown("", raw, [*_TOP, *_TOP_TABLES])
    axes: list[str] = []
    body: dict = {}
    _scalars("", raw, _TOP, body, axes)
    body["name"] = body["name"] or name
    for section in ("model", "state", "coarse"):
        if section not in raw:
            raise _fail(section, "missing section; see the README's Spec files section")
    body["model"] = _model_section("model", _table("model", raw["model"]), axes)
    body["state"] = _state_section(_table("state", raw["state"]), body["model"]["name"], axes)
    evolution: dict = {}
    evo_table = _table("evolution", raw.get("evolution", {}))
    _unknown("evolution", evo_table, list(_EVOLUTION))
    _scalars("evolution", evo_table, _EVOLUTION, evolution, axes)
    body["evolution"] = evolution
    if "times" not in raw:
        raise _fail("times", "missing section; give times.t_max and times.n_times, or "
                    "times.values")
    body["times"] = _times_section(_table("times", raw["times"]))
    body["coarse"] = _coarse_section(raw["coarse"])
    estimator: dict = {}
    est_table = _table("estimator", raw.get("estimator", {}))
    _unknown("estimator", est_table, list(_ESTIMATOR))
    _scalars("estimator", est_table, _ESTIMATOR, estimator, axes)
    body["estimator"] = estimator
    output: dict = {}
    out_table = _table("output", raw.get("output", {}))
    _unknown("output", out_table, list(_OUTPUT))
    _scalars("output", out_table, _OUTPUT, output, [])
    body["output"] = output
    sweep = _table("sweep", raw.get("sweep", {}))
    groups = _axis_groups(sweep, axes)
    disorder = _disorder_axes(sweep, body, groups)
    body["sweep"] = {"zip": [list(g) for g in groups if len(g) > 1], "disorder": disorder}
    _check_consistency(body)
    points = _expand(body, groups, tuple(DISORDER_AXES[name][0] for name in disorder))
    hashed = {k: v for k, v in body.items() if k not in ("name", "description", "output")}
    hashed["coarse"] = [{k: v for k, v in e.items() if k != "path"} for e in hashed["coarse"]]
    out_dir = Path(output["dir"]) if output["dir"] else DEFAULT_OUTPUT_ROOT / body["name"]
    return RunSpec(name=body["name"], source=source, body=_plain(body),
                   axes=tuple(groups), points=tuple(points), run_id=_digest(_plain(hashed)),
                   output_dir=out_dir, checkpoint_seconds=output["checkpoint_seconds"])


def _plain(obj: Any) -> Any:
    """Plain JSON-like data (tuples as lists) without bookkeeping keys, for storage."""
    if isinstance(obj, dict):
        return {k: _plain(v) for k, v in obj.items() if k != "path"}
    if isinstance(obj, list | tuple):
        return [_plain(v) for v in obj]
    return obj


def _check_consistency(body: dict) -> None:
    est = body["estimator"]
    methods = est["method"] if isinstance(est["method"], list) else [est["method"]]
    targets = est["target_stderr"] if isinstance(est["target_stderr"], list) else [
        est["target_stderr"]]
    if set(methods) - set(_SAMPLING_METHODS) and any(t > 0 for t in targets):
        raise _fail("estimator.target_stderr", "a target standard error needs sampling; "
                    "use estimator.method = 'auto', 'sample' or 'sample_strings', or drop "
                    "target_stderr")


def _expand(body: dict, groups: list[tuple[str, ...]],
            disorder: tuple[str, ...] = ()) -> list[Point]:
    choices = []
    for group in groups:
        lists = [_get(body, path) for path in group]
        if len({len(v) for v in lists}) > 1:
            sizes = ", ".join(f"{path} has {len(v)}" for path, v in zip(group, lists,
                                                                        strict=True))
            raise _fail("sweep.zip", f"zipped axes need equal lengths: {sizes}")
        choices.append([dict(zip(group, combo, strict=True))
                        for combo in zip(*lists, strict=True)])
    stored = json.loads(json.dumps(body))  # deep copy, tuples as lists
    points, seen = [], {}
    for index, combo in enumerate(itertools.product(*choices)):
        values = {k: v for part in combo for k, v in part.items()}
        point = _resolve_point(stored, values, index, disorder)
        if point.point_id in seen:
            raise _fail("sweep", f"points {seen[point.point_id]} and {index} are the same "
                        f"point ({point.label})")
        seen[point.point_id] = index
        points.append(point)
    return points


def load(path: str | Path | None = None) -> RunSpec:
    """Read and validate a spec file (None: the built-in default scenario)."""
    file = default_spec_path() if path is None else Path(path)
    try:
        text = file.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"SPEC: no such file {str(file)!r}") from None
    except (IsADirectoryError, PermissionError, UnicodeDecodeError) as exc:
        raise InputError(f"SPEC: cannot read {str(file)!r} ({exc.__class__.__name__})") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"SPEC: {file} is not valid TOML: {exc}") from None
    source = "<built-in default>" if path is None else str(file)
    return parse(data, name=file.stem, source=source)
