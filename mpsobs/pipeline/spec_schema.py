"""The spec schema: every key of a TOML run description with its type, default, allowed
values or range, unit and description, in one table (:data:`SCHEMA`).

The table drives the parsing and the checks of types and ranges
(:mod:`mpsobs.pipeline.spec`), the names and descriptions of the parameter columns
(:func:`parameter_column_descriptions`) and the generated key reference
(:func:`mpsobs.pipeline.spec.keys_markdown`, ``mpsobs reference keys``). A key is found
by its path (``evolution.dt``; ``coarse[].block`` for an entry of the array of tables
``[[coarse]]``), and exists under no setting or under one (``when``, e.g.
``model.name = 'xxz'``). Like the parser, this module is data and checks only: it
imports nothing numerical from mpsobs. Cost: the lookups scan the table, O(number of
keys).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

from mpsobs.core.errors import InputError

__all__ = [
    "MODELS", "STATES", "OBSERVABLES", "FIELD_KINDS", "GAS_FILLS", "RANDOM_DRAWS",
    "PATTERN_CHARACTERS", "DISORDER_AXES", "DEFAULT_OUTPUT_ROOT", "REQUIRED", "HALF_CHI",
    "Key", "SCHEMA", "BY_PATH", "kind_is", "section_keys", "model_couplings", "state_keys",
    "parameter_column_descriptions", "key_error",
]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

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

#: Default of a key that must be given.
REQUIRED = object()
_RUN_SEED = None  # default of seeds that follow the point's run seed
#: Default of evolution.chi_check: the point's chi_max // 2.
HALF_CHI = None


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
    default: Any = REQUIRED
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


def kind_is(kind: str) -> str:
    """The ``when`` text of keys that exist for ``state.kind = kind``."""
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
        column="pattern", when=kind_is("product"),
        allowed_text="a string of the characters 0, 1, +, -"),
    Key("state.box", "pair", "the gas box [start, stop) in sites", None, sweep=False,
        columns=(("box_start", "first site of the gas box"),
                 ("box_stop", "site after the gas box")),
        when=kind_is("gas"), allowed_text="[start, stop] with 0 <= start < stop <= model.L",
        default_text="give box or box_fraction"),
    Key("state.box_fraction", "pair", "the gas box as fractions [a, b] of L, rounded half "
        "up to sites", None, sweep=False,
        columns=(("box_from", "start of the gas box as a fraction of L"),
                 ("box_to", "end of the gas box as a fraction of L")),
        when=kind_is("gas"), allowed_text="[a, b] with 0 <= a < b <= 1",
        default_text="give box or box_fraction"),
    Key("state.number", "int", "particles in the gas box", None, low=0, column="number",
        when=kind_is("gas"), default_text="from filling"),
    Key("state.filling", "float", "filling fraction of the gas box", None, low=0.0,
        low_open=True, high=1.0, column="filling", when=kind_is("gas"),
        default_text="1.0 when number is not given"),
    Key("state.fill", "str", "how the gas box is filled ('ground': the box's ground state, "
        "number-conserving models only)", "packed", choices=GAS_FILLS, column="fill",
        when=kind_is("gas")),
    Key("state.seed", "int", "seed of the random product state", _RUN_SEED, low=0,
        column="state_seed", when=kind_is("random_product"), default_text="the run seed"),
    Key("state.draw", "str", "how random product states are drawn (haar: uniform on the "
        "Bloch sphere; basis: |0> or |1>)", "haar", choices=RANDOM_DRAWS, column="draw",
        when=kind_is("random_product")),
    Key("state.prequench", "table", "model keys (J, delta or g, field) of the "
        "Hamiltonian whose ground state is the initial state, where they differ from "
        "[model]", None, sweep=False, when=kind_is("ground"),
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
        "(0 = off); it gives the truncation error of every row", HALF_CHI, low=0,
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
    Key("coarse[].moments", "int", "Chebyshev moments per region of the wide-region "
        "energy estimator (energy regions wider than 12 sites only); resolution about "
        "pi a / N for a spectrum half-width a", None, low=4, sweep=False,
        allowed_text="an even integer >= 4", default_text="the estimator's default (256)"),
    Key("coarse[].moment_bond", "int", "compression bond of the Chebyshev vectors of the "
        "wide-region energy estimator (wide energy regions only)", None, low=2, sweep=False,
        allowed_text="an integer >= 2", default_text="the estimator's default (64)"),
    Key("coarse[].sub_bins", "int", "sub-bins per bin of the reweighted volumes of the "
        "wide-region energy estimator (wide energy regions only)", None, low=2, sweep=False,
        allowed_text="an integer >= 2", default_text="the estimator's default (8)"),
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

BY_PATH = {key.path: key for key in SCHEMA}


def section_keys(section: str, *whens: str) -> dict[str, Key]:
    """The scalar keys directly in ``section`` that exist under no setting or under one
    of ``whens``, by name."""
    return {k.name: k for k in SCHEMA if k.section == section and k.when in ("", *whens)
            and k.kind in ("int", "float", "str")}


def model_couplings(model: str) -> dict[str, Key]:
    """The coupling keys of the model ``model`` (not its name or L), by name."""
    cond = f"model.name = {model!r}"
    return {n: k for n, k in section_keys("model", cond).items() if n not in ("name", "L")}


def state_keys(kind: str) -> dict[str, Key]:
    """The scalar keys of an initial state of ``kind`` (not ``kind`` itself), by name."""
    return {n: k for n, k in section_keys("state", kind_is(kind)).items() if n != "kind"}


def parameter_column_descriptions() -> dict[str, tuple[str, str]]:
    """(unit, description) of every parameter column the schema fills, by column name."""
    out: dict[str, tuple[str, str]] = {}
    for key in SCHEMA:
        if key.column:
            out.setdefault(key.column, (key.unit, key.doc))
        for name, text in key.columns:
            out.setdefault(name, (key.unit, text))
    return out


def key_error(path: str, message: str) -> InputError:
    """InputError ``path: message`` (the key path first, as every spec error)."""
    return InputError(f"{path}: {message}")
