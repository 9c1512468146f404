"""Column names of the results table (one row per point, time and coarse-graining).

This module is the one home of every result column name: the producers
(:mod:`mpsobs.pipeline.point`) and the readers (:mod:`mpsobs.analysis.scaling`,
:mod:`mpsobs.analysis.plots`, :mod:`mpsobs.analysis.trust`) use the constants below.
:data:`RESULT_COLUMNS` gives each its unit and one-line description; the names of
:data:`REQUIRED` are fixed (tools outside the project read them). Every column of a
table that is not a result column is a parameter of the sweep point (``L`` is always one
of them); the parameter columns, their units and descriptions come from the spec schema
(:data:`mpsobs.pipeline.spec.SCHEMA`).

Units: nats for entropies, 1/J for times and inverse temperatures, J for energies, s
for wall times; "" when the value is a count, a label, a flag or dimensionless.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

from mpsobs.pipeline.spec_schema import parameter_column_descriptions

__all__ = ["Column", "RESULT_COLUMNS", "REQUIRED", "EXTRA", "ANALYSIS", "ROW_COLUMNS",
           "DESCRIPTIONS", "PARAMETER_DESCRIPTIONS", "describe", "parameter_columns",
           "columns_markdown"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

# --------------------------------------------------------------------------- names

T = "t"
COARSE_GRAINING = "coarse_graining"
S_OBS = "S_obs"
S_OBS_ERR = "S_obs_err"
S_SHANNON = "S_shannon"
S_BOLTZMANN = "S_boltzmann"
KNOWLEDGE = "knowledge"
S_MAX = "S_max"
S_THERMO = "S_thermo"
S_ENT_HALF = "S_ent_half"
DISCARDED_WEIGHT = "discarded_weight"
MAX_BOND = "max_bond"
SEED = "seed"
METHOD = "method"
POINT_ID = "point_id"
S_SHANNON_ERR = "S_shannon_err"
S_BOLTZMANN_ERR = "S_boltzmann_err"
PRUNED_MASS = "pruned_mass"
SAMPLES = "samples"
ALGORITHM = "algorithm"
S_THERMO_ERR = "S_thermo_err"
S_GGE = "S_gge"
BETA = "beta"
ABOVE_INFINITE_TEMPERATURE = "above_infinite_temperature"
ENERGY = "energy"
ENERGY_DRIFT = "energy_drift"
NORM = "norm"
ELAPSED = "elapsed_s"
VERSION = "mpsobs_version"
EQUILIBRIUM = "S_obs_eq"
EQUILIBRIUM_ERR = "S_obs_eq_err"
S_OBS_GGE = "S_obs_gge"
TRUNCATION_ERROR = "S_obs_trunc_err"
SHANNON_TRUNCATION_ERROR = "S_shannon_trunc_err"
BOLTZMANN_TRUNCATION_ERROR = "S_boltzmann_trunc_err"
CHECK_DISCARDED_WEIGHT = "check_discarded_weight"
OBSERVABLES = "observables"
N_OBSERVABLES = "n_observables"
DISORDER_AXES = "disorder_axes"
BLOCK_SIZE = "block_size"
TRUSTED_TIME = "t_trusted"
METHOD_ERROR = "S_obs_method_err"
TOTAL_ERROR = "S_obs_total_err"
#: The chain length: a parameter column every table has.
LENGTH = "L"


@dataclass(frozen=True)
class Column:
    """One result column: name, unit, one-line description, and where it comes from
    (``"required"``: a point's row, fixed name; ``"row"``: a point's row;
    ``"grouping"``: a point's row that the analysis treats like a parameter;
    ``"analysis"``: added by the analysis when it reads a table)."""

    name: str
    unit: str
    description: str
    kind: str = "row"


_NO_CHECK = "; NaN without the check (evolution.chi_check = 0)"

#: Every result column, in table order (the point's parameters follow in the table).
RESULT_COLUMNS: tuple[Column, ...] = (
    Column(T, "1/J", "time after the quench (hbar = 1)", "required"),
    Column(COARSE_GRAINING, "", "short label of the coarse-graining", "required"),
    Column(S_OBS, "nats", "observational entropy of the state at t", "required"),
    Column(S_OBS_ERR, "nats", "standard error of S_obs (0 when exact)", "required"),
    Column(S_SHANNON, "nats", "Shannon part H(p) of S_obs", "required"),
    Column(S_BOLTZMANN, "nats", "mean Boltzmann entropy sum_i p_i ln V_i of S_obs",
           "required"),
    Column(KNOWLEDGE, "nats", "S_max - S_obs, the KL divergence from the maximally mixed "
                              "outcomes", "required"),
    Column(S_MAX, "nats", "largest possible S_obs, L ln 2", "required"),
    Column(S_THERMO, "nats", "Gibbs entropy at the initial energy (and particle number)",
           "required"),
    Column(S_ENT_HALF, "nats", "von Neumann entanglement entropy of the half-chain bond",
           "required"),
    Column(DISCARDED_WEIGHT, "", "cumulative TEBD discarded weight up to t", "required"),
    Column(MAX_BOND, "", "largest bond dimension of the state at t", "required"),
    Column(SEED, "", "the point's own seed (derived from its parameters)", "required"),
    Column(METHOD, "", "'exact' or 'sampled'", "required"),
    Column(POINT_ID, "", "hash of the point's resolved parameters (its store key)"),
    Column(S_SHANNON_ERR, "nats", "standard error of S_shannon"),
    Column(S_BOLTZMANN_ERR, "nats", "standard error of S_boltzmann"),
    Column(PRUNED_MASS, "", "probability left out by exact enumeration"),
    Column(SAMPLES, "", "number of samples drawn (0 when exact)"),
    Column(ALGORITHM, "", "which estimator ran"),
    Column(S_THERMO_ERR, "nats", "error of S_thermo (purification or root finding)"),
    Column(S_GGE, "nats", "generalised Gibbs entropy of the initial mode occupations (XX); "
                          "NaN otherwise"),
    Column(BETA, "1/J", "inverse temperature of the Gibbs reference (negative: the state "
                        "lies above infinite temperature)"),
    Column(ENERGY, "J", "energy <H> of the state at t"),
    Column(ENERGY_DRIFT, "J", "<H>(t) - <H>(0)"),
    Column(NORM, "", "norm of the state at t before renormalisation"),
    Column(ELAPSED, "s", "wall time of the point"),
    Column(VERSION, "", "version of mpsobs that computed the row"),
    Column(EQUILIBRIUM, "nats", "S_obs of the Gibbs ensemble behind S_thermo for this "
                                "coarse-graining (the equilibrium value)"),
    Column(EQUILIBRIUM_ERR, "nats", "error of S_obs_eq: stderr + method error (wide "
                                    "regions) + pruned-mass bound + Gibbs-state error "
                                    "bound"),
    Column(S_OBS_GGE, "nats", "S_obs of the XX generalised Gibbs ensemble (number, <= 3 "
                              "regions); NaN otherwise"),
    Column(METHOD_ERROR, "nats", "error estimate of an approximate estimator (the energies "
                                 "of wide regions: moments, compression bond and volume "
                                 "sub-bins halved, weight unresolved at bin edges); an "
                                 "estimate, not a bound; 0 otherwise"),
    Column(TRUNCATION_ERROR, "nats", "|S_obs(chi_max) - S_obs(chi_check)|, a truncation "
                                     "error estimate (not a bound)" + _NO_CHECK),
    Column(SHANNON_TRUNCATION_ERROR, "nats", "the same for the Shannon part" + _NO_CHECK),
    Column(BOLTZMANN_TRUNCATION_ERROR, "nats", "the same for the Boltzmann part" + _NO_CHECK),
    Column(CHECK_DISCARDED_WEIGHT, "", "cumulative discarded weight of the check evolution "
                                       "at bond chi_check up to t" + _NO_CHECK),
    Column(OBSERVABLES, "", "observables of the coarse-graining, comma-separated, asked in "
                            "this order on every block"),
    Column(N_OBSERVABLES, "", "number of observables asked per block (1 = a single one)"),
    Column(DISORDER_AXES, "", "parameter columns whose values are disorder realizations of "
                              "one ensemble, comma-separated ('' = none)"),
    Column(ABOVE_INFINITE_TEMPERATURE, "", "True when the Gibbs reference has beta < 0 (a "
                                           "state above infinite temperature)"),
    Column(BLOCK_SIZE, "", "block size of the coarse-graining (0 for explicit regions); "
                           "the analysis groups by it like a parameter", "grouping"),
    Column(TRUSTED_TIME, "1/J", "end of the trusted time range of the point and "
                                "coarse-graining at the analysis tolerance (inf: all "
                                "trusted; -inf: none; NaN: no check)", "analysis"),
    Column(TOTAL_ERROR, "nats", "total error of S_obs: its standard error, truncation and "
                                "method error estimates in quadrature plus the pruned-mass "
                                "bound (mpsobs.analysis.uncertainty)", "analysis"),
)

#: Fixed result columns (besides the point's parameters, among them ``L``).
REQUIRED = tuple(c.name for c in RESULT_COLUMNS if c.kind == "required")
#: Further result columns of a point's rows that are not parameters.
EXTRA = tuple(c.name for c in RESULT_COLUMNS if c.kind == "row")
#: Columns the analysis adds to a table it reads (never stored by a point).
ANALYSIS = tuple(c.name for c in RESULT_COLUMNS if c.kind == "analysis")
#: Columns of a point's rows before its parameters, in order.
ROW_COLUMNS = (*REQUIRED, *EXTRA, *(c.name for c in RESULT_COLUMNS if c.kind == "grouping"))

#: Unit and one-line description of every result column, by name.
DESCRIPTIONS: dict[str, tuple[str, str]] = {c.name: (c.unit, c.description)
                                            for c in RESULT_COLUMNS}
#: Unit and description of the parameter columns the spec writes (from its schema);
#: ``pre_<name>`` columns are the same parameter before the quench.
PARAMETER_DESCRIPTIONS: dict[str, tuple[str, str]] = parameter_column_descriptions()


def describe(name: str) -> tuple[str, str] | None:
    """(unit, description) of a column, or None for a column without one."""
    if name in DESCRIPTIONS:
        return DESCRIPTIONS[name]
    if name in PARAMETER_DESCRIPTIONS:
        return PARAMETER_DESCRIPTIONS[name]
    if name.startswith("pre_") and name[4:] in PARAMETER_DESCRIPTIONS:
        unit, text = PARAMETER_DESCRIPTIONS[name[4:]]
        return unit, f"{text}, before the quench"
    return None


def parameter_columns(columns: Iterable[str]) -> list[str]:
    """The columns of a results table that are sweep-point parameters, in table order."""
    known = {*REQUIRED, *EXTRA, *ANALYSIS}
    return [c for c in columns if c not in known]


def _cell(text: str) -> str:
    return text.replace("|", "\\|")


def columns_markdown() -> str:
    """The column reference as markdown: result columns (with where they come from),
    then the parameter columns; generated from :data:`RESULT_COLUMNS` and the spec
    schema."""
    origin = {"required": "point (fixed name)", "row": "point", "grouping": "point",
              "analysis": "analysis"}
    lines = ["Result columns (one row per point, time and coarse-graining):", "",
             "| column | unit | from | description |", "| --- | --- | --- | --- |"]
    lines += [f"| `{c.name}` | {c.unit} | {origin[c.kind]} | {_cell(c.description)} |"
              for c in RESULT_COLUMNS]
    lines += ["", "Parameter columns (from the spec; `pre_<name>`: the same before the "
              "quench):", "", "| column | unit | description |", "| --- | --- | --- |"]
    lines += [f"| `{name}` | {unit} | {_cell(text)} |"
              for name, (unit, text) in PARAMETER_DESCRIPTIONS.items()]
    return "\n".join(lines) + "\n"
