"""Column names of the results table (one row per point, time and coarse-graining).

The names in :data:`REQUIRED` are fixed: tools outside the project read them. Every
other column that is not in :data:`EXTRA` is a parameter of the sweep point (``L`` is
always one of them).
"""

from __future__ import annotations

from collections.abc import Iterable

__all__ = ["REQUIRED", "EXTRA", "parameter_columns"]

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
    # truncation check: the same point evolved at bond chi_check (evolution.chi_check),
    # estimated with the same seeds; all NaN when the check is off (chi_check = 0)
    "S_obs_trunc_err",         # |S_obs(chi_max) - S_obs(chi_check)|: an error estimate, not a bound
    "S_shannon_trunc_err",     # the same for the Shannon part
    "S_boltzmann_trunc_err",   # the same for the Boltzmann part
    "check_discarded_weight",  # cumulative discarded weight of the check evolution up to t
    "t_trusted",               # end of the trusted time range of the (point, coarse-graining)
)


def parameter_columns(columns: Iterable[str]) -> list[str]:
    """The columns of a results table that are sweep-point parameters, in table order."""
    known = set(REQUIRED) | set(EXTRA)
    return [c for c in columns if c not in known]
