"""Spec files: the schema of a TOML run description, its parsing and validation, and
the expansion of its sweep into points.

A spec is data (TOML, read with :mod:`tomllib`); nothing in it is evaluated. This module
is schema and parsing only: it imports nothing numerical from mpsobs. One table,
:data:`SCHEMA`, lists every key with its type, default, allowed values or range, unit
and description; it drives the parsing, the checks of types and ranges, the names and
descriptions of the parameter columns and the generated key reference
(:func:`keys_markdown`, ``mpsobs reference keys``). Unknown keys, wrong types and values
out of range raise :class:`mpsobs.core.errors.InputError` with the key path
(``evolution.dt``, ``coarse[1].block``) and the allowed values. Rules that belong to the
physics modules (block sizes, regions, estimator methods and what they can evaluate)
are raised by those modules when :mod:`mpsobs.pipeline.build` makes the point's objects;
the builder adds the key path.

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
"""

from __future__ import annotations

import hashlib
import itertools
import json
import logging
import math
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Literal

import numpy as np

from mpsobs.core.errors import InputError
from mpsobs.core.printing import short

__all__ = ["Point", "RunSpec", "Key", "SCHEMA", "load", "parse", "default_spec_path",
           "DEFAULT_OUTPUT_ROOT", "fixed_settings", "DISORDER_AXES", "MODELS", "STATES",
           "OBSERVABLES", "FIELD_KINDS", "keys_markdown", "parameter_column_descriptions"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)

MODELS = ("xxz", "ising")
STATES = ("product", "domain_wall", "neel", "gas", "random_product", "ground")
OBSERVABLES = ("number", "energy", "fine")
FIELD_KINDS = ("uniform", "staggered", "random")
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


# --------------------------------------------------------------------------- schema


@dataclass(frozen=True)
class Key:
    """One spec key.

    ``path`` is the key path (``[]`` marks an array of tables: ``coarse[].block``);
    ``kind`` a scalar type (int, float, str: checked here by :meth:`check`) or a
    structure parsed by its section (``pair``, ``list``, ``table``); ``when`` the
    setting under which the key exists (e.g. ``model.name = 'xxz'``); ``column`` the
    parameter column it fills (``columns``: the columns of a structured key), ``unit``
    its unit; ``sweep`` whether a list of values makes it a sweep axis. ``allowed_text``
    and ``default_text`` describe what the fields cannot (values checked by the builder,
    defaults that depend on other keys). ``retired`` is the message of a key that is
    accepted only for old specs.
    """

    path: str
    kind: Literal["int", "float", "str", "pair", "list", "table"]
    doc: str
    default: Any = _REQUIRED
    choices: tuple = ()
    low: float | None = None
    low_open: bool = False
    high: float | None = None
    high_open: bool = False
    unit: str = ""
    column: str | None = None
    columns: tuple[tuple[str, str], ...] = ()
    sweep: bool = True
    when: str = ""
    allowed_text: str = ""
    default_text: str = ""
    retired: str = ""

    @property
    def name(self) -> str:
        return self.path.rsplit(".", 1)[-1]

    @property
    def section(self) -> str:
        return self.path.rsplit(".", 1)[0] if "." in self.path else ""

    def allowed(self) -> str:
        if self.allowed_text:
            return self.allowed_text
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


def _kind_is(kind: str) -> str:
    return f"state.kind = {kind!r}"


_XXZ, _ISING = "model.name = 'xxz'", "model.name = 'ising'"
_POSITIVE = {"low": 0.0, "low_open": True}

#: Every key of a spec, in the order of the reference.
SCHEMA: tuple[Key, ...] = (
    Key("name", "str", "name of the run (run directory and figure titles)", None,
        sweep=False, default_text="the spec file's stem"),
    Key("seed", "int", "seed of the run: random fields, random states and sampling derive "
        "from it", 0, low=0, column="run_seed"),
    Key("description", "str", "free text, kept with the run", "", sweep=False),
    # [model]
    Key("model.name", "str", "model name: XXZ chain (S = sigma/2) or Ising chain (Pauli)",
        choices=MODELS, column="model", sweep=False),
    Key("model.L", "int", "chain length in sites", low=2, column="L"),
    Key("model.J", "float", "exchange coupling (the energy unit)", 1.0, unit="J",
        column="J"),
    Key("model.delta", "float", "XXZ anisotropy Delta (in units of J)", 1.0, column="delta",
        when=_XXZ),
    Key("model.g", "float", "transverse field of the Ising chain", 1.0, unit="J",
        column="g", when=_ISING),
    Key("model.field.kind", "str", "shape of the longitudinal field h_i: uniform, staggered "
        "or random", "uniform", choices=FIELD_KINDS, column="field"),
    Key("model.field.strength", "float", "strength of the longitudinal field", 0.0,
        unit="J", column="h"),
    Key("model.field.seed", "int", "seed of the random field", _RUN_SEED, low=0,
        column="field_seed", default_text="the run seed"),
    # [state]
    Key("state.kind", "str", "kind of initial state", choices=STATES, column="state",
        sweep=False),
    Key("state.pattern", "str", "product-state pattern repeated along the chain (site 0 "
        "first; 1 = occupied, +/- = (|0> +/- |1>)/sqrt 2); its length divides model.L",
        column="pattern", when=_kind_is("product"),
        allowed_text="a string of the characters 0, 1, +, -"),
    Key("state.box", "pair", "the gas box [start, stop) in sites", None, sweep=False,
        columns=(("box_start", "first site of the gas box"),
                 ("box_stop", "site after the gas box")),
        when=_kind_is("gas"), allowed_text="[start, stop] with 0 <= start < stop <= model.L",
        default_text="give box or box_fraction"),
    Key("state.box_fraction", "pair", "the gas box as fractions [a, b] of L, rounded half "
        "up to sites", None, sweep=False,
        columns=(("box_from", "start of the gas box as a fraction of L"),
                 ("box_to", "end of the gas box as a fraction of L")),
        when=_kind_is("gas"), allowed_text="[a, b] with 0 <= a < b <= 1",
        default_text="give box or box_fraction"),
    Key("state.number", "int", "particles in the gas box", None, low=0, column="number",
        when=_kind_is("gas"), default_text="from filling"),
    Key("state.filling", "float", "filling fraction of the gas box", None, low=0.0,
        low_open=True, high=1.0, column="filling", when=_kind_is("gas"),
        default_text="1.0 when number is not given"),
    Key("state.fill", "str", "how the gas box is filled ('ground': the box's ground state, "
        "number-conserving models only)", "packed", choices=GAS_FILLS, column="fill",
        when=_kind_is("gas")),
    Key("state.seed", "int", "seed of the random product state", _RUN_SEED, low=0,
        column="state_seed", when=_kind_is("random_product"), default_text="the run seed"),
    Key("state.draw", "str", "how random product states are drawn (haar: uniform on the "
        "Bloch sphere; basis: |0> or |1>)", "haar", choices=RANDOM_DRAWS, column="draw",
        when=_kind_is("random_product")),
    Key("state.prequench", "table", "model keys (J, delta or g, field) of the "
        "Hamiltonian whose ground state is the initial state, where they differ from "
        "[model]", None, sweep=False, when=_kind_is("ground"),
        allowed_text="a table of [model] couplings and [model.field] keys",
        default_text="the [model] values"),
    # [evolution]
    Key("evolution.dt", "float", "TEBD time step", 0.05, unit="1/J", column="dt",
        **_POSITIVE),
    Key("evolution.order", "int", "Trotter order of TEBD", 4, choices=(2, 4),
        column="order"),
    Key("evolution.chi_max", "int", "largest bond dimension allowed in TEBD", 64, low=1,
        column="chi_max"),
    Key("evolution.cutoff", "float", "TEBD truncation cutoff (discarded weight per bond)",
        1e-10, low=0.0, high=1.0, high_open=True, column="cutoff"),
    Key("evolution.chi_check", "int", "bond dimension of the truncation-check evolution "
        "(0 = off); it gives the truncation error of every row", _HALF_CHI, low=0,
        column="chi_check", allowed_text="an integer >= 0 and below evolution.chi_max",
        default_text="chi_max // 2"),
    Key("evolution.trust_rtol", "float", "retired: the tolerance of trusted times is an "
        "analysis option now (mpsobs plot/scale --trust-rtol)", None, low=0.0, high=1.0,
        sweep=False, default_text="-",
        retired="evolution.trust_rtol is no longer part of a point: trusted times are "
        "computed by the analysis; give the tolerance to `mpsobs plot` or `mpsobs scale` "
        "(--trust-rtol) or to mpsobs.workflow.plot/scale (trust_rtol=); the key is "
        "ignored"),
    # [times]
    Key("times.t_max", "float", "last output time of an even grid from 0", None,
        unit="1/J", sweep=False, default_text="give t_max and n_times, or values",
        **_POSITIVE),
    Key("times.n_times", "int", "number of output times of the even grid", None, low=2,
        sweep=False, default_text="give t_max and n_times, or values"),
    Key("times.values", "list", "output times, instead of the grid", None, unit="1/J",
        sweep=False, allowed_text="a strictly increasing list of times >= 0",
        default_text="give t_max and n_times, or values"),
    # [[coarse]]
    Key("coarse[].observable", "list", "observable measured on every block, or a list of "
        "them asked in that order", sweep=False,
        allowed_text="one of 'number', 'energy', 'fine', or a list of them"),
    Key("coarse[].block", "list", "block size in sites (the last block may be shorter); a "
        "list gives one coarse-graining per size", None, sweep=False,
        allowed_text="an integer >= 1 or a list of them",
        default_text="give block or regions (fine: 1)"),
    Key("coarse[].regions", "list", "explicit blocks [start, stop), contiguous, covering "
        "the chain from site 0", None, sweep=False,
        allowed_text="a list of [start, stop] pairs", default_text="give block or regions"),
    Key("coarse[].bin_width", "list", "energy outcomes are bins floor(E / bin_width) "
        "instead of distinct eigenvalues; a list gives one coarse-graining per width", None,
        unit="J", sweep=False, allowed_text="a number > 0 or a list of them (energy only)",
        default_text="distinct eigenvalues"),
    Key("coarse[].label", "str", "label of the coarse-graining in the table", None,
        sweep=False, allowed_text="a non-empty string", default_text="made from the "
        "observable and blocks"),
    # [estimator]
    Key("estimator.method", "str", "estimator method (see the methods section); checked "
        "against the estimators' registry when the point is built", "auto",
        column="estimator"),
    Key("estimator.samples", "int", "samples per estimate where the estimator samples",
        None, low=1, column="sample_budget", default_text="the estimator's default"),
    Key("estimator.target_stderr", "float", "target standard error of sampling (0 = off); "
        "needs a method that samples", 0.0, low=0.0, unit="nats", column="target_stderr"),
    Key("estimator.prune", "float", "probability floor of exact enumeration", 1e-12,
        low=0.0, high=1.0, high_open=True, column="prune"),
    # [sweep]
    Key("sweep.zip", "list", "groups of axis names that advance together", None,
        sweep=False, allowed_text='a list of groups of axis names, e.g. [["model.L", '
        '"evolution.chi_max"]]', default_text="none"),
    Key("sweep.disorder", "list", "seed axes whose values are realizations of one disorder "
        "ensemble (the analysis averages over them); zipped only with another one", None,
        sweep=False, allowed_text=" or ".join(DISORDER_AXES), default_text="none"),
    # [output]
    Key("output.dir", "str", "run directory", None, sweep=False,
        default_text="mpsobs-runs/<name>"),
    Key("output.checkpoint_seconds", "float", "seconds between checkpoints of a point", 300.0,
        low=0.0, unit="s", sweep=False),
)

_BY_PATH = {key.path: key for key in SCHEMA}


def _keys(section: str, *whens: str) -> dict[str, Key]:
    """The scalar keys directly in ``section`` that exist under no setting or under one
    of ``whens``, by name."""
    return {k.name: k for k in SCHEMA if k.section == section and k.when in ("", *whens)
            and k.kind in ("int", "float", "str")}


_TOP_TABLES = ("model", "state", "evolution", "times", "coarse", "estimator", "sweep",
               "output")
_COARSE_KEYS = tuple(k.name for k in SCHEMA if k.section == "coarse[]")


def _couplings(model: str) -> dict[str, Key]:
    cond = f"model.name = {model!r}"
    return {n: k for n, k in _keys("model", cond).items() if n not in ("name", "L")}


def _state_keys(kind: str) -> dict[str, Key]:
    return {n: k for n, k in _keys("state", _kind_is(kind)).items() if n != "kind"}


def parameter_column_descriptions() -> dict[str, tuple[str, str]]:
    """(unit, description) of every parameter column the schema fills, by column name."""
    out: dict[str, tuple[str, str]] = {}
    for key in SCHEMA:
        if key.column:
            out.setdefault(key.column, (key.unit, key.doc))
        for name, text in key.columns:
            out.setdefault(name, (key.unit, text))
    return out


def _default_text(key: Key, defaults: Mapping[str, Any]) -> str:
    if key.path in defaults:
        return f"{defaults[key.path]!r}"
    if key.default_text:
        return key.default_text
    if key.default is _REQUIRED:
        return "required"
    return repr(key.default)


def keys_markdown(allowed: Mapping[str, str] | None = None,
                  defaults: Mapping[str, Any] | None = None) -> str:
    """The spec-key reference as a markdown table, generated from :data:`SCHEMA`.

    ``allowed`` and ``defaults`` (by key path) fill in what other modules own: the
    estimator methods and the estimator's default sample count
    (:func:`mpsobs.pipeline.build.keys_reference` passes them).
    """
    allowed, defaults = dict(allowed or {}), dict(defaults or {})
    lines = ["| key | type | default | allowed | unit | sweep | description |",
             "| --- | --- | --- | --- | --- | --- | --- |"]
    for key in SCHEMA:
        text = key.doc + (f" (when {key.when})" if key.when else "")
        cells = [f"`{key.path}`", key.kind, _default_text(key, defaults),
                 allowed.get(key.path) or key.allowed(), key.unit,
                 "yes" if key.sweep else "", text]
        lines.append("| " + " | ".join(c.replace("|", "\\|") for c in cells) + " |")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- data


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


def _scalars(path: str, table: Mapping, keys: Mapping[str, Key], out: dict,
             axes: list[str]) -> None:
    """Check the scalar keys of ``table`` into ``out`` (lists become sweep axes). A
    retired key is checked, then dropped with a warning."""
    for name, key in keys.items():
        p = _join(path, name)
        if name not in table:
            if key.default is _REQUIRED:
                raise _fail(p, f"missing; expected {key.allowed()}")
            if not key.retired:
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
        if key.retired:
            log.warning("%s", key.retired)
            out.pop(name)


def _pair(path: str, value: Any, kind: type) -> tuple:
    noun = "integers" if kind is int else "numbers"
    ok = (isinstance(value, list) and len(value) == 2
          and all(isinstance(v, int | float) and not isinstance(v, bool) for v in value)
          and (kind is float or all(isinstance(v, int) for v in value)))
    if not ok:
        raise _fail(path, f"expected a pair [start, stop] of {noun}, got {value!r}")
    return tuple(kind(v) for v in value)


# --------------------------------------------------------------------------- sections


def _optional(keys: Mapping[str, Key]) -> dict[str, Key]:
    """The same keys with default None (unset keys of a prequench model inherit)."""
    return {name: replace(key, default=None) for name, key in keys.items()}


def _model_section(path: str, table: dict, axes: list[str],
                   prequench_of: str | None = None) -> dict:
    """[model], or with ``prequench_of`` (the model name) the partial [state.prequench]."""
    out: dict = {}
    common = {n: k for n, k in _keys("model").items() if n in ("name", "L")}
    fields = _keys("model.field")
    if prequench_of is None:
        _scalars(path, table, common, out, axes)
        couplings = _couplings(out["name"])
        allowed = [*common, *couplings, "field"]
    else:
        couplings, fields = _optional(_couplings(prequench_of)), _optional(fields)
        allowed = [*couplings, "field"]
    _unknown(path, table, allowed)
    _scalars(path, table, couplings, out, axes)
    field_path = _join(path, "field")
    field_table = _table(field_path, table.get("field", {}))
    _unknown(field_path, field_table, list(fields))
    out["field"] = {}
    _scalars(field_path, field_table, fields, out["field"], axes)
    return out


def _state_section(table: dict, model_name: str, axes: list[str]) -> dict:
    out: dict = {}
    _scalars("state", table, {"kind": _BY_PATH["state.kind"]}, out, axes)
    kind = out["kind"]
    structured = [k.name for k in SCHEMA if k.section == "state" and k.when == _kind_is(kind)
                  and k.kind in ("pair", "table")]
    allowed = ["kind", *_state_keys(kind), *structured]
    _unknown("state", table, allowed)
    _scalars("state", table, _state_keys(kind), out, axes)
    if kind == "product":
        patterns = out["pattern"] if isinstance(out["pattern"], list) else [out["pattern"]]
        for pattern in patterns:
            if not pattern or set(pattern) - set(PATTERN_CHARACTERS):
                raise _fail("state.pattern", f"expected {_BY_PATH['state.pattern'].allowed()} "
                            f"(site 0 first; 1 = occupied, +/- = (|0> +/- |1>)/sqrt 2), "
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
    _unknown("times", table, [k.name for k in SCHEMA if k.section == "times"])
    if "values" in table:
        if "t_max" in table or "n_times" in table:
            raise _fail("times.values", "give either times.values or times.t_max with "
                        "times.n_times, not both")
        values = table["values"]
        if not isinstance(values, list) or not values:
            raise _fail("times.values", f"expected a non-empty list of times >= 0, got "
                        f"{values!r}")
        key = Key("times.values", "float", "", low=0.0)
        checked = [key.check(f"times.values[{i}]", v) for i, v in enumerate(values)]
        if any(b <= a for a, b in itertools.pairwise(checked)):
            raise _fail("times.values", f"expected strictly increasing times, got {values!r}")
        return {"values": checked}
    out: dict = {}
    _scalars("times", table, _keys("times"), out, [])
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
        allowed = _BY_PATH["coarse[].observable"].allowed()
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
            key = Key("coarse[].block", "int", "", low=1)
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
            key = Key("coarse[].bin_width", "float", "", low=0.0, low_open=True)
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
    digest = _digest({k: v for k, v in params.items() if k not in IDENTITY_EXCLUDES})
    label = " ".join(f"{path}={value}" for path, value in values.items())
    return Point(index=index, point_id=digest[:16], seed=_point_seed(run_seed, digest),
                 params=params, columns=_columns(params, given), label=label or "single point",
                 disorder=disorder, coarse_paths=paths)


def _chi_check(evolution: dict) -> int:
    """The check bond (default chi_max // 2), checked against chi_max."""
    chi_max, chi_check = evolution["chi_max"], evolution["chi_check"]
    if chi_check is _HALF_CHI:
        chi_check = chi_max // 2
    if chi_check and chi_check >= chi_max:
        raise _fail("evolution.chi_check", f"expected 0 (off) or a bond below "
                    f"evolution.chi_max = {chi_max}, got {chi_check}")
    return chi_check


def _check_pattern(state: dict, L: int) -> None:
    """A product pattern is repeated along the chain: its length must divide L."""
    if state["kind"] == "product" and L % len(state["pattern"]):
        raise _fail("state.pattern", f"its length {len(state['pattern'])} does not divide "
                    f"the chain length model.L = {L}")


def _gas_in_sites(state: dict, L: int) -> tuple[list[int], int, dict]:
    """The gas box [start, stop] and particle number in sites at chain length L, and the
    columns that hold them as given (constant along an L scan)."""
    if state["box"] is not None:
        start, stop = state["box"]
        if not 0 <= start < stop <= L:
            raise _fail("state.box", f"the box {[start, stop]} lies outside the chain: "
                        f"expected 0 <= start < stop <= model.L = {L}")
        given: dict[str, Any] = {"box_start": start, "box_stop": stop}
    else:
        a, b = state["box_fraction"]
        start, stop = math.floor(a * L + 0.5), math.floor(b * L + 0.5)  # half up
        if stop <= start:
            raise _fail("state.box_fraction", f"{[a, b]} of L = {L} sites is an empty box")
        given = {"box_from": a, "box_to": b}
    size = stop - start
    if state["filling"] is not None:
        number = round(state["filling"] * size)
        if number == 0:
            raise _fail("state.filling", f"{state['filling']} of a {size}-site box holds no "
                        f"particle (model.L = {L})")
        given["filling"] = state["filling"]
    else:
        number = state["number"]
        if number > size:
            raise _fail("state.number", f"{number} particles do not fit in a box of {size} "
                        f"sites (state.box {[start, stop]}, model.L = {L})")
        given["number"] = number
    return [start, stop], number, given


def _columns(params: dict, gas_columns: dict) -> dict:
    """The point's scalar parameters under their table column names (``gas_columns``:
    the gas box and number as given)."""
    cols: dict[str, Any] = {_BY_PATH["seed"].column: params["seed"]}
    model, state = params["model"], params["state"]
    common = {n: k for n, k in _keys("model").items() if n in ("name", "L")}
    for name, key in {**common, **_couplings(model["name"])}.items():
        cols[key.column] = model[name]
    fields = _keys("model.field")
    for name, key in fields.items():
        cols[key.column] = model["field"][name]
    cols[_BY_PATH["state.kind"].column] = state["kind"]
    if state["kind"] == "gas":
        cols.update(gas_columns, fill=state["fill"])
    else:
        for name, key in _state_keys(state["kind"]).items():
            cols[key.column] = state[name]
    if state["kind"] == "ground":
        pre = state["prequench"]
        for name, key in _couplings(model["name"]).items():
            cols[f"pre_{key.column}"] = pre[name]
        for name, key in fields.items():
            cols[f"pre_{key.column}"] = pre["field"][name]
    for section in ("evolution", "estimator"):
        for name, key in _keys(section).items():
            if not key.retired:
                cols[key.column] = params[section][name]
    return cols


# --------------------------------------------------------------------------- entry


def _section(raw: dict, name: str, axes: list[str]) -> dict:
    """A section of scalar keys only ([evolution], [estimator], [output])."""
    out: dict = {}
    table = _table(name, raw.get(name, {}))
    keys = _keys(name)
    _unknown(name, table, list(keys))
    _scalars(name, table, keys, out, axes)
    return out


def parse(data: Mapping[str, Any], *, name: str = "run", source: str = "<spec>") -> RunSpec:
    """Validate a spec given as a (TOML-decoded) mapping and expand its sweep.

    Raises InputError naming the key path at the first problem found.
    """
    raw = json.loads(json.dumps(data, default=str)) if data is not None else {}
    if not isinstance(raw, dict):
        raise InputError("spec: expected a table of sections")
    top = _keys("")
    _unknown("", raw, [*top, *_TOP_TABLES])
    axes: list[str] = []
    body: dict = {}
    _scalars("", raw, top, body, axes)
    body["name"] = body["name"] or name
    for section in ("model", "state", "coarse"):
        if section not in raw:
            raise _fail(section, "missing section; see the README's Spec files section")
    body["model"] = _model_section("model", _table("model", raw["model"]), axes)
    body["state"] = _state_section(_table("state", raw["state"]), body["model"]["name"], axes)
    body["evolution"] = _section(raw, "evolution", axes)
    if "times" not in raw:
        raise _fail("times", "missing section; give times.t_max and times.n_times, or "
                    "times.values")
    body["times"] = _times_section(_table("times", raw["times"]))
    body["coarse"] = _coarse_section(raw["coarse"])
    body["estimator"] = _section(raw, "estimator", axes)
    output = _section(raw, "output", [])
    body["output"] = output
    sweep = _table("sweep", raw.get("sweep", {}))
    groups = _axis_groups(sweep, axes)
    disorder = _disorder_axes(sweep, body, groups)
    body["sweep"] = {"zip": [list(g) for g in groups if len(g) > 1], "disorder": disorder}
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


def _expand(body: dict, groups: list[tuple[str, ...]],
            disorder: tuple[str, ...]) -> list[Point]:
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
