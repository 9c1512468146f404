"""Spec files: the parsing and validation of a TOML run description, and the generated
key reference.

A spec is data (TOML, read with :mod:`tomllib`); nothing in it is evaluated. The spec
modules are schema and parsing only: they import nothing numerical from mpsobs. One
table, :data:`SCHEMA` (:mod:`mpsobs.pipeline.spec_schema`), lists every key with its
type, default, allowed values or range, unit and description; it drives the parsing
here, the checks of types and ranges, the names and descriptions of the parameter
columns and the generated key reference (:func:`keys_markdown`, ``mpsobs reference
keys``). Unknown keys, wrong types and values out of range raise
:class:`mpsobs.core.errors.InputError` with the key path (``evolution.dt``,
``coarse[1].block``) and the allowed values. Rules that belong to the physics modules
(block sizes, regions, estimator methods and what they can evaluate) are raised by those
modules when :mod:`mpsobs.pipeline.build` makes the point's objects; the builder adds
the key path.

The parsed body is expanded into points (sweep axes, zipped axes, point identity and
seed) by :mod:`mpsobs.pipeline.spec_points`. This module re-exports the public names of
both, so ``from mpsobs.pipeline.spec import parse, Point, SCHEMA`` works as before.
Cost: linear in the size of the spec, plus one hash per point.
"""

from __future__ import annotations

import itertools
import json
import logging
import tomllib
from collections.abc import Mapping
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from mpsobs.core.errors import InputError
from mpsobs.pipeline.spec_points import (
    Point,
    RunSpec,
    canonical_hash,
    expand_points,
    fixed_settings,
    get_path,
    plain_data,
)
from mpsobs.pipeline.spec_schema import (
    BY_PATH,
    DEFAULT_OUTPUT_ROOT,
    DISORDER_AXES,
    FIELD_KINDS,
    MODELS,
    OBSERVABLES,
    PATTERN_CHARACTERS,
    REQUIRED,
    SCHEMA,
    STATES,
    Key,
    key_error,
    kind_is,
    model_couplings,
    parameter_column_descriptions,
    section_keys,
    state_keys,
)

__all__ = ["Point", "RunSpec", "Key", "SCHEMA", "load", "parse", "default_spec_path",
           "DEFAULT_OUTPUT_ROOT", "fixed_settings", "DISORDER_AXES", "MODELS", "STATES",
           "OBSERVABLES", "FIELD_KINDS", "keys_markdown", "parameter_column_descriptions"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)

_TOP_TABLES = ("model", "state", "evolution", "times", "coarse", "estimator", "sweep",
               "output")
_COARSE_KEYS = tuple(k.name for k in SCHEMA if k.section == "coarse[]")
#: ``[[coarse]]`` keys of the wide-region energy estimator's resolution, kept in an
#: entry's ``wide_energy`` table only when given.
WIDE_ENERGY_KEYS = ("moments", "moment_bond", "sub_bins")


def _default_text(key: Key, defaults: Mapping[str, Any]) -> str:
    if key.path in defaults:
        return f"{defaults[key.path]!r}"
    if key.default_text:
        return key.default_text
    if key.default is REQUIRED:
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


def default_spec_path() -> Path:
    """The built-in default scenario shipped with the package."""
    return Path(__file__).parents[1] / "scenarios" / "default.toml"


def _join(prefix: str, key: str) -> str:
    return f"{prefix}.{key}" if prefix else key


def _table(path: str, value: Any) -> dict:
    if not isinstance(value, dict):
        raise key_error(path, f"expected a table ([{path}]), got {value!r}")
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
            if key.default is REQUIRED:
                raise key_error(p, f"missing; expected {key.allowed()}")
            if not key.retired:
                out[name] = key.default
            continue
        value = table[name]
        if isinstance(value, list):
            if not key.sweep:
                raise key_error(p, f"expected {key.allowed()} (this key cannot be swept), "
                            f"got a list")
            if not value:
                raise key_error(p, "an empty list gives no points; give at least one value")
            checked = [key.check(f"{p}[{i}]", v) for i, v in enumerate(value)]
            if len(set(checked)) != len(checked):
                raise key_error(p, f"repeated values in the sweep list {value!r}")
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
        raise key_error(path, f"expected a pair [start, stop] of {noun}, got {value!r}")
    return tuple(kind(v) for v in value)


# --------------------------------------------------------------------------- sections


def _optional(keys: Mapping[str, Key]) -> dict[str, Key]:
    """The same keys with default None (unset keys of a prequench model inherit)."""
    return {name: replace(key, default=None) for name, key in keys.items()}


def _model_section(path: str, table: dict, axes: list[str],
                   prequench_of: str | None = None) -> dict:
    """[model], or with ``prequench_of`` (the model name) the partial [state.prequench]."""
    out: dict = {}
    common = {n: k for n, k in section_keys("model").items() if n in ("name", "L")}
    fields = section_keys("model.field")
    if prequench_of is None:
        _scalars(path, table, common, out, axes)
        couplings = model_couplings(out["name"])
        allowed = [*common, *couplings, "field"]
    else:
        couplings, fields = _optional(model_couplings(prequench_of)), _optional(fields)
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
    _scalars("state", table, {"kind": BY_PATH["state.kind"]}, out, axes)
    kind = out["kind"]
    structured = [k.name for k in SCHEMA if k.section == "state" and k.when == kind_is(kind)
                  and k.kind in ("pair", "table")]
    allowed = ["kind", *state_keys(kind), *structured]
    _unknown("state", table, allowed)
    _scalars("state", table, state_keys(kind), out, axes)
    if kind == "product":
        patterns = out["pattern"] if isinstance(out["pattern"], list) else [out["pattern"]]
        for pattern in patterns:
            if not pattern or set(pattern) - set(PATTERN_CHARACTERS):
                raise key_error("state.pattern", f"expected {BY_PATH['state.pattern'].allowed()} "
                            f"(site 0 first; 1 = occupied, +/- = (|0> +/- |1>)/sqrt 2), "
                            f"got {pattern!r}")
    if kind == "gas":
        if ("box" in table) == ("box_fraction" in table):
            raise key_error("state.box", "give exactly one of state.box = [start, stop] (sites) "
                        "and state.box_fraction = [a, b] (fractions of L)")
        if "box" in table:
            out["box"] = _pair("state.box", table["box"], int)
            out["box_fraction"] = None
        else:
            out["box_fraction"] = _pair("state.box_fraction", table["box_fraction"], float)
            out["box"] = None
            a, b = out["box_fraction"]
            if not 0.0 <= a < b <= 1.0:
                raise key_error("state.box_fraction", f"expected 0 <= a < b <= 1, got {[a, b]}")
        if out["number"] is not None and out["filling"] is not None:
            raise key_error("state.number", "give state.number or state.filling, not both")
        if out["number"] is None and out["filling"] is None:
            out["filling"] = 1.0
    fills = out.get("fill") if isinstance(out.get("fill"), list) else [out.get("fill")]
    if kind == "gas" and "ground" in fills and model_name != "xxz":
        raise key_error("state.fill", "'ground' needs a number-conserving model; use it with "
                    "model.name = 'xxz', or fill = 'packed' or 'spread'")
    if kind == "ground":
        pre = _table("state.prequench", table.get("prequench", {}))
        out["prequench"] = _model_section("state.prequench", pre, axes, model_name)
    return out


def _times_section(table: dict) -> dict:
    _unknown("times", table, [k.name for k in SCHEMA if k.section == "times"])
    if "values" in table:
        if "t_max" in table or "n_times" in table:
            raise key_error("times.values", "give either times.values or times.t_max with "
                        "times.n_times, not both")
        values = table["values"]
        if not isinstance(values, list) or not values:
            raise key_error("times.values", f"expected a non-empty list of times >= 0, got "
                        f"{values!r}")
        key = Key("times.values", "float", "", low=0.0)
        checked = [key.check(f"times.values[{i}]", v) for i, v in enumerate(values)]
        if any(b <= a for a, b in itertools.pairwise(checked)):
            raise key_error("times.values", f"expected strictly increasing times, got {values!r}")
        return {"values": checked}
    out: dict = {}
    _scalars("times", table, section_keys("times"), out, [])
    if out["t_max"] is None or out["n_times"] is None:
        raise key_error("times", "give times.t_max and times.n_times (an even grid from 0), "
                    "or times.values")
    grid = np.linspace(0.0, out["t_max"], out["n_times"])
    return {"values": [round(float(t), 12) for t in grid]}


def _coarse_section(value: Any) -> list[dict]:
    if not isinstance(value, list) or not value:
        raise key_error("coarse", "expected one or more [[coarse]] tables (array of tables), "
                    f"got {value!r}")
    entries: list[dict] = []
    for i, raw in enumerate(value):
        path = f"coarse[{i}]"
        table = _table(path, raw)
        _unknown(path, table, list(_COARSE_KEYS))
        observable = table.get("observable", REQUIRED)
        allowed = BY_PATH["coarse[].observable"].allowed()
        names = observable if isinstance(observable, list) else [observable]
        if observable is REQUIRED:
            raise key_error(f"{path}.observable", f"missing; expected {allowed}")
        if not names or any(n not in OBSERVABLES for n in names):
            raise key_error(f"{path}.observable", f"expected {allowed}, got {observable!r}")
        if ("block" in table) == ("regions" in table) and names != ["fine"]:
            raise key_error(f"{path}.block", "give exactly one of block (block size in sites) "
                        "and regions (list of [start, stop])")
        if "block" in table and "regions" in table:
            raise key_error(f"{path}.block", "give block or regions, not both")
        blocks: list[int | None] = [None]
        regions = None
        if "block" in table:
            raw_blocks = table["block"]
            items = raw_blocks if isinstance(raw_blocks, list) else [raw_blocks]
            key = Key("coarse[].block", "int", "", low=1)
            if not items:
                raise key_error(f"{path}.block", "expected a block size or a non-empty list")
            blocks = [key.check(f"{path}.block", b) for b in items]
        elif "regions" in table:
            spans = table["regions"]
            if not isinstance(spans, list) or not spans:
                raise key_error(f"{path}.regions", f"expected a list of [start, stop] pairs, got "
                            f"{spans!r}")
            regions = [list(_pair(f"{path}.regions[{j}]", s, int))
                       for j, s in enumerate(spans)]
        elif names == ["fine"]:
            blocks = [1]
        widths: list[float | None] = [None]
        if "bin_width" in table:
            if "energy" not in names:
                raise key_error(f"{path}.bin_width", "only energy outcomes are binned; add "
                            "'energy' to the observable or drop bin_width")
            raw_widths = table["bin_width"]
            items = raw_widths if isinstance(raw_widths, list) else [raw_widths]
            key = Key("coarse[].bin_width", "float", "", low=0.0, low_open=True)
            if not items:
                raise key_error(f"{path}.bin_width", "expected a width or a non-empty list")
            widths = [key.check(f"{path}.bin_width", w) for w in items]
        label = table.get("label")
        if label is not None:
            if not isinstance(label, str) or not label:
                raise key_error(f"{path}.label", f"expected a non-empty string, got {label!r}")
            if len(blocks) * len(widths) > 1:
                raise key_error(f"{path}.label", "a label names one coarse-graining; this entry "
                            "gives several (list of block or bin_width)")
        wide = {name: BY_PATH[f"coarse[].{name}"].check(f"{path}.{name}", table[name])
                for name in WIDE_ENERGY_KEYS if name in table}
        if wide.get("moments", 0) % 2:
            raise key_error(f"{path}.moments", f"expected an even integer >= 4 (it is halved "
                            f"for the error estimate), got {wide['moments']}")
        if wide and "energy" not in names:
            raise key_error(f"{path}.{next(iter(wide))}", "only the energy observable of wide "
                            "regions takes it (observable = \"energy\", alone or with "
                            "\"number\")")
        for b, w in itertools.product(blocks, widths):
            entry = {"observable": list(names), "block": b, "regions": regions,
                     "bin_width": w, "label": label, "path": path}
            if wide:   # only when given: entries without them keep their identity
                entry["wide_energy"] = wide
            entries.append(entry)
    seen: dict[str, str] = {}
    for entry in entries:
        key = json.dumps({k: v for k, v in entry.items() if k != "path"}, sort_keys=True)
        if key in seen:
            raise key_error(entry["path"], f"the same coarse-graining as {seen[key]}")
        seen[key] = entry["path"]
    labels = [e["label"] for e in entries if e["label"] is not None]
    if len(set(labels)) != len(labels):
        raise key_error("coarse", f"repeated labels {labels!r}; labels must differ")
    return entries


def _axis_groups(table: dict, axes: list[str]) -> list[tuple[str, ...]]:
    _unknown("sweep", table, ["zip", "disorder"])
    groups = table.get("zip", [])
    shape = "a list of groups of axis names, e.g. [[\"model.L\", \"evolution.chi_max\"]]"
    if not isinstance(groups, list) or not all(isinstance(g, list) for g in groups):
        raise key_error("sweep.zip", f"expected {shape}, got {groups!r}")
    zipped: set[str] = set()
    for j, group in enumerate(groups):
        if len(group) < 2 or not all(isinstance(n, str) for n in group):
            raise key_error(f"sweep.zip[{j}]", f"expected two or more axis names, got {group!r}")
        for name in group:
            if name not in axes:
                listed = ", ".join(axes) if axes else "none (no key is given a list)"
                raise key_error(f"sweep.zip[{j}]", f"{name!r} is not a sweep axis; axes: {listed}")
            if name in zipped:
                raise key_error(f"sweep.zip[{j}]", f"{name!r} is already zipped in another group")
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
        raise key_error("sweep.disorder", f"expected a list of seed axis names ({allowed}), "
                    f"got {names!r}")
    if len(set(names)) != len(names):
        raise key_error("sweep.disorder", f"repeated names in {names!r}")
    axes = [path for group in groups for path in group]
    for j, name in enumerate(names):
        where = f"sweep.disorder[{j}]"
        if name not in DISORDER_AXES:
            raise key_error(where, f"{name!r} cannot be a disorder axis; allowed: {allowed}")
        if name not in axes:
            raise key_error(where, f"{name!r} is not a sweep axis; give it a list of seeds, "
                        f"e.g. {name} = [1, 2, 3]")
        setting, needed = DISORDER_AXES[name][1]
        if get_path(body, setting) != needed:
            raise key_error(where, f"{name!r} draws no disorder unless {setting} = {needed!r} "
                        f"(got {get_path(body, setting)!r})")
        group = next(g for g in groups if name in g)
        others = [a for a in group if a not in names]
        if others:
            raise key_error(where, f"{name!r} is zipped with {', '.join(others)}, which are "
                        f"not disorder axes; a realization must not change other parameters")
    return names

# --------------------------------------------------------------------------- entry


def _section(raw: dict, name: str, axes: list[str]) -> dict:
    """A section of scalar keys only ([evolution], [estimator], [output])."""
    out: dict = {}
    table = _table(name, raw.get(name, {}))
    keys = section_keys(name)
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
    top = section_keys("")
    _unknown("", raw, [*top, *_TOP_TABLES])
    axes: list[str] = []
    body: dict = {}
    _scalars("", raw, top, body, axes)
    body["name"] = body["name"] or name
    for section in ("model", "state", "coarse"):
        if section not in raw:
            raise key_error(section, "missing section; see the README's Spec files section")
    body["model"] = _model_section("model", _table("model", raw["model"]), axes)
    body["state"] = _state_section(_table("state", raw["state"]), body["model"]["name"], axes)
    body["evolution"] = _section(raw, "evolution", axes)
    if "times" not in raw:
        raise key_error("times", "missing section; give times.t_max and times.n_times, or "
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
    points = expand_points(body, groups, tuple(DISORDER_AXES[name][0] for name in disorder))
    hashed = {k: v for k, v in body.items() if k not in ("name", "description", "output")}
    hashed["coarse"] = [{k: v for k, v in e.items() if k != "path"} for e in hashed["coarse"]]
    out_dir = Path(output["dir"]) if output["dir"] else DEFAULT_OUTPUT_ROOT / body["name"]
    return RunSpec(name=body["name"], source=source, body=plain_data(body),
                   axes=tuple(groups), points=tuple(points),
                   run_id=canonical_hash(plain_data(hashed)),
                   output_dir=out_dir, checkpoint_seconds=output["checkpoint_seconds"])

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
