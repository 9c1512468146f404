"""Column names of the results table (one row per point, time and coarse-graining).

The names in :data:`REQUIRED` are fixed: tools outside the project read them. Every
other column that is not in :data:`EXTRA` is a parameter of the sweep point (``L`` is
always one of them).
"""

from __future__ import annotations

from collections.abc import Iterable

__all__ = ["REQUIRED", "EXTRA", "DESCRIPTIONS", "PARAMETER_DESCRIPTIONS", "describe",
           "parameter_columns"]

#: Fixed result columns (besides the point's parameters, among them ``L``).
REQUIRED = (
    "t",                 # time, in units of 1/J (hbar = 1)
    "coarse_graining",   # short label of the coarse-graining
    "S_obs",             # observational entropy, nats
    "S_obs_err",         # its standard error (0 when exact)
    "S_shannon",         # Shannon part H(p)
    "S_boltzmann",       # mean Boltzmann entropy sum p ln V
    "knowledge",         # S_max - S_obs (KL divergence from the maximally mixed outcomes)
    "S_max",             # L ln 2
    "S_thermo",          # Gibbs entropy at the initial energy (and number)
    "S_ent_half",        # von Neumann entropy of the half-chain bond
    "discarded_weight",  # cumulative TEBD discarded weight up to t
    "max_bond",          # largest bond dimension of the state at t
    "seed",              # the point's seed
    "method",            # "exact" or "sampled"
)

#: Further result columns that are not parameters.
EXTRA = (
    "point_id",          # hash of the point's canonical parameters
    "S_shannon_err",
    "S_boltzmann_err",
    "pruned_mass",       # probability left out by exact enumeration
    "samples",           # number of samples (0 when exact)
    "algorithm",         # which estimator ran
    "S_thermo_err",
    "S_gge",             # generalised Gibbs entropy (free-fermion models), NaN otherwise
    "beta",              # inverse temperature of the Gibbs reference
    "energy",            # <H> of the state at t
    "energy_drift",      # <H>(t) - <H>(0)
    "norm",              # norm of the state at t before renormalisation
    "elapsed_s",         # wall time of the point
    "mpsobs_version",
    "S_obs_eq",          # S_obs of the Gibbs ensemble behind S_thermo (the equilibrium value)
    "S_obs_eq_err",      # its error: stderr + pruned-mass bound + Gibbs-state error bound
    "S_obs_gge",         # S_obs of the XX generalised Gibbs ensemble (number, <= 3 regions)
    "S_obs_method_err",  # method error of the wide-region energy estimator (in S_obs_err)
    # truncation check: the same point evolved at bond chi_check (evolution.chi_check),
    # estimated with the same seeds; all NaN when the check is off (chi_check = 0)
    "S_obs_trunc_err",         # |S_obs(chi_max) - S_obs(chi_check)|: an error estimate, not a bound
    "S_shannon_trunc_err",     # the same for the Shannon part
    "S_boltzmann_trunc_err",   # the same for the Boltzmann part
    "check_discarded_weight",  # cumulative discarded weight of the check evolution up to t
    "t_trusted",               # end of the trusted time range of the (point, coarse-graining)
    "observables",       # the coarse-graining's observables, comma-separated, in asking order
    "n_observables",     # how many observables it asks per block, one after the other
    "disorder_axes",     # parameter columns that label disorder realizations, comma-separated
)

#: Unit and one-line description of every result column, by name (units: nats for
#: entropies, 1/J for times and inverse temperatures, J for energies; "" when the value
#: is a count, a label or dimensionless). A column without an entry here has no
#: description in the Parquet schema; tests check that every column has one.
DESCRIPTIONS: dict[str, tuple[str, str]] = {
    "t": ("1/J", "time after the quench (hbar = 1)"),
    "coarse_graining": ("", "short label of the coarse-graining"),
    "S_obs": ("nats", "observational entropy of the state at t"),
    "S_obs_err": ("nats", "standard error of S_obs (0 when exact)"),
    "S_shannon": ("nats", "Shannon part H(p) of S_obs"),
    "S_boltzmann": ("nats", "mean Boltzmann entropy sum_i p_i ln V_i of S_obs"),
    "knowledge": ("nats", "S_max - S_obs, the KL divergence from the maximally mixed outcomes"),
    "S_max": ("nats", "largest possible S_obs, L ln 2"),
    "S_thermo": ("nats", "Gibbs entropy at the initial energy (and particle number)"),
    "S_ent_half": ("nats", "von Neumann entanglement entropy of the half-chain bond"),
    "discarded_weight": ("", "cumulative TEBD discarded weight up to t"),
    "max_bond": ("", "largest bond dimension of the state at t"),
    "seed": ("", "the point's own seed (derived from its parameters)"),
    "method": ("", "'exact' or 'sampled'"),
    "point_id": ("", "hash of the point's resolved parameters (its store key)"),
    "S_shannon_err": ("nats", "standard error of S_shannon"),
    "S_boltzmann_err": ("nats", "standard error of S_boltzmann"),
    "pruned_mass": ("", "probability left out by exact enumeration"),
    "samples": ("", "number of samples drawn (0 when exact)"),
    "algorithm": ("", "which estimator ran"),
    "S_thermo_err": ("nats", "error of S_thermo (purification or root finding)"),
    "S_gge": ("nats", "generalised Gibbs entropy of the initial mode occupations (XX); NaN "
                      "otherwise"),
    "beta": ("1/J", "inverse temperature of the Gibbs reference"),
    "energy": ("J", "energy <H> of the state at t"),
    "energy_drift": ("J", "<H>(t) - <H>(0)"),
    "norm": ("", "norm of the state at t before renormalisation"),
    "elapsed_s": ("s", "wall time of the point"),
    "mpsobs_version": ("", "version of mpsobs that computed the row"),
    "S_obs_eq": ("nats", "S_obs of the Gibbs ensemble behind S_thermo for this "
                         "coarse-graining (the equilibrium value)"),
    "S_obs_eq_err": ("nats", "error of S_obs_eq: stderr + pruned-mass bound + Gibbs-state "
                             "error bound"),
    "S_obs_gge": ("nats", "S_obs of the XX generalised Gibbs ensemble (number, <= 3 regions); "
                          "NaN otherwise"),
    "S_obs_method_err": ("nats", "estimated error of the approximation of the wide-region "
                                 "energy estimator (moments, compression bond, volume "
                                 "sub-bins halved), included in S_obs_err; an estimate, not "
                                 "a bound; 0 for the other estimators"),
    "S_obs_trunc_err": ("nats", "|S_obs(chi_max) - S_obs(chi_check)|, a truncation error "
                                "estimate (not a bound); NaN without the check"),
    "S_shannon_trunc_err": ("nats", "the same for the Shannon part"),
    "S_boltzmann_trunc_err": ("nats", "the same for the Boltzmann part"),
    "check_discarded_weight": ("", "cumulative discarded weight of the check evolution at "
                                   "bond chi_check up to t"),
    "t_trusted": ("1/J", "end of the trusted time range of the point and coarse-graining "
                         "(inf: all trusted; -inf: none; NaN: no check)"),
    "observables": ("", "observables of the coarse-graining, comma-separated, asked in this "
                        "order on every block"),
    "n_observables": ("", "number of observables asked per block (1 = a single one)"),
    "disorder_axes": ("", "parameter columns whose values are disorder realizations of one "
                          "ensemble, comma-separated ('' = none)"),
    "block_size": ("", "block size of the coarse-graining (0 for explicit regions)"),
}

#: Unit and description of the parameter columns the spec writes (see
#: :mod:`mpsobs.spec`); ``pre_<name>`` columns are the same parameter before the quench.
PARAMETER_DESCRIPTIONS: dict[str, tuple[str, str]] = {
    "run_seed": ("", "seed of the run (spec key seed)"),
    "model": ("", "model name (spec key model.name)"),
    "L": ("", "chain length in sites"),
    "J": ("J", "exchange coupling (the energy unit)"),
    "delta": ("", "XXZ anisotropy Delta (in units of J)"),
    "g": ("J", "transverse field of the Ising chain"),
    "field": ("", "shape of the longitudinal field: uniform, staggered or random"),
    "h": ("J", "strength of the longitudinal field"),
    "field_seed": ("", "seed of the random field (model.field.seed)"),
    "state": ("", "kind of initial state"),
    "pattern": ("", "product-state pattern repeated along the chain"),
    "number": ("", "particles in the gas box"),
    "filling": ("", "filling fraction of the gas box"),
    "box_start": ("", "first site of the gas box"),
    "box_stop": ("", "site after the gas box"),
    "box_from": ("", "start of the gas box as a fraction of L"),
    "box_to": ("", "end of the gas box as a fraction of L"),
    "fill": ("", "how the gas box is filled"),
    "state_seed": ("", "seed of the random product state"),
    "draw": ("", "how random product states are drawn"),
    "dt": ("1/J", "TEBD time step"),
    "order": ("", "Trotter order of TEBD"),
    "chi_max": ("", "largest bond dimension allowed in TEBD"),
    "cutoff": ("", "TEBD truncation cutoff (discarded weight per bond)"),
    "chi_check": ("", "bond dimension of the truncation-check evolution (0 = off)"),
    "trust_rtol": ("", "relative tolerance of the trusted time range (evolution.trust_rtol)"),
    "estimator": ("", "estimator method asked for in the spec"),
    "sample_budget": ("", "samples per estimate asked for in the spec"),
    "target_stderr": ("nats", "target standard error of sampling (0 = off)"),
    "prune": ("", "probability floor of exact enumeration"),
}


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
    known = set(REQUIRED) | set(EXTRA)
    return [c for c in columns if c not in known]
