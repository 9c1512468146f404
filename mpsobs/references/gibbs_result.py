"""The result of a Gibbs reference and the rules both of its routes share.

:class:`GibbsResult` is what :func:`mpsobs.references.thermo.gibbs` and
:func:`mpsobs.references.thermo.gibbs_at` return, from the exact free-fermion route
(:mod:`mpsobs.references.free_fermion_gibbs`) or the purification
(:mod:`mpsobs.references.thermo`). Conventions: the ensemble is
exp(-beta H + alpha N) / Z with alpha = beta mu; entropies are von Neumann entropies,
total (not per site), in nats; energies are total energies of H as in
:mod:`mpsobs.chain.models`. Cost: O(1).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np

from mpsobs.core.errors import InputError
from mpsobs.core.printing import number, with_error

__all__ = ["Method", "Ensemble", "GibbsResult", "chemical_potential", "check_energy_range"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

Method = Literal["auto", "free-fermion", "purification"]
Ensemble = Literal["grand", "canonical"]


@dataclass(frozen=True, eq=False)
class GibbsResult:
    """A Gibbs ensemble exp(-beta H + beta mu N) / Z matched to an energy (and number).

    ``entropy`` is the von Neumann entropy (total, nats) with error ``entropy_err``
    (0 when exact; Trotter and truncation estimate for the purification); ``beta`` with
    ``beta_err``; ``mu`` the chemical potential (None without a number; +-inf at
    beta = 0 with a number away from half filling; for the canonical ensemble the mu of the
    grand ensemble with the same beta and <N>); ``energy`` and ``number`` the
    achieved <H> and <N> (``number`` None for models that do not conserve it);
    ``discarded_weight`` the summed truncation weight, ``max_bond`` the largest bond
    reached and ``steps`` the imaginary-time steps of the purification (0 otherwise).
    """

    entropy: float
    entropy_err: float
    beta: float
    beta_err: float
    mu: float | None
    energy: float
    number: float | None
    method: Literal["free-fermion", "purification"]
    ensemble: Ensemble
    discarded_weight: float = 0.0
    max_bond: int = 0
    steps: int = 0

    def __repr__(self) -> str:
        extra = (f"; bond {self.max_bond}, {self.steps} steps, discarded weight "
                 f"{self.discarded_weight:.2g}" if self.method == "purification" else "")
        return (f"GibbsResult(S = {with_error(self.entropy, self.entropy_err)} nats, beta = "
                f"{with_error(self.beta, self.beta_err)}, mu = {number(self.mu)}, "
                f"E = {number(self.energy)}, N = {number(self.number)}; {self.method}, "
                f"{self.ensemble}{extra})")


def chemical_potential(alpha: float, beta: float) -> float:
    """mu = alpha / beta; at beta = 0, 0 for alpha = 0 and +-inf otherwise."""
    if beta != 0:
        return float(alpha / beta)
    return 0.0 if alpha == 0 else float(np.copysign(np.inf, alpha))


def check_energy_range(target: float, e_min: float, e_max: float, tol: float,
                       number: float | None = None) -> None:
    """Raise InputError when the energy ``target`` lies outside [e_min, e_max] by more
    than ``tol`` (``number``: the particle number the range is for, named in the
    message)."""
    if not e_min - tol <= target <= e_max + tol:
        at = "" if number is None else f" at number {number:g}"
        raise InputError(f"energy: {target:.12g} is outside the spectrum range{at}, "
                         f"[{e_min:.12g}, {e_max:.12g}]")
