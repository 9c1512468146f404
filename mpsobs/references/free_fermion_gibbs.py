"""Exact Gibbs ensembles of free-fermion chains, at any L.

XX chains (delta = 0, any fields) from the single-particle energies of
:func:`mpsobs.references.gaussian.quadratic_hamiltonian`, and Ising chains with h = 0
from the Bogoliubov quasiparticle energies (Ann. Phys. 16, 407 (1961); Ann. Phys. 57,
79 (1970)). The ensemble exp(-beta H + alpha N) / Z is matched to a target energy (and
particle number) by root finding in beta (bracketed by doubling, then Brent's method)
and in alpha. With ``ensemble="canonical"`` (XX, integer number) the ensemble is
restricted to the sector N = number exactly: the right reference for a closed chain of
definite N (the grand ensemble's entropy is larger by about (1/2) ln(2 pi e Var N)).
Entropies are von Neumann entropies, total, in nats; the limits beta -> +-inf are
handled exactly (ground-state filling, degenerate Fermi level shared).

Cost: O(L) per evaluation of the grand ensemble, O(L^2) for the canonical one, times
the root-finding steps.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from math import comb

import numpy as np
from scipy.optimize import brentq
from scipy.special import expit

from mpsobs.chain.models import Model
from mpsobs.core.errors import InputError
from mpsobs.references import gaussian
from mpsobs.references.gibbs_result import (
    Ensemble,
    GibbsResult,
    check_energy_range,
    chemical_potential,
)

__all__ = ["FreeModes", "free_modes", "grand_ensemble", "free_gibbs", "occupation_entropy"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

#: Bracket doublings before a root search gives up.
_MAX_DOUBLINGS = 200


@dataclass(frozen=True, eq=False)
class FreeModes:
    """H = sum_k energies_k n_k + offset with independent fermion modes; ``charged``
    when every mode carries one particle of the chain (XX), not for Bogoliubov modes."""

    energies: np.ndarray
    offset: float
    charged: bool


def free_modes(model: Model) -> FreeModes | None:
    """The free modes of an XX chain, or of an Ising chain with h = 0; None for others."""
    try:
        ham = gaussian.quadratic_hamiltonian(model)
        return FreeModes(ham.energies, ham.offset, True)
    except InputError:
        pass
    try:
        eps = gaussian.quasiparticle_energies(model)
        return FreeModes(eps, -float(eps.sum()) / 2, False)
    except InputError:
        return None


def _binary_entropy(x: np.ndarray) -> np.ndarray:
    """h(f) for f = expit(x), without cancellation at large |x|."""
    a = -np.abs(x)
    return np.logaddexp(0.0, a) - a * expit(a)


def grand_ensemble(modes: FreeModes, beta: float, alpha: float) -> tuple[float, float, float]:
    """(E, N, S) of exp(-beta H + alpha N); N counts mode occupations."""
    x = alpha * modes.charged - beta * modes.energies
    f = expit(x)
    return (float(modes.offset + np.dot(modes.energies, f)), float(f.sum()),
            float(_binary_entropy(x).sum()))


def _alpha_for_number(modes: FreeModes, beta: float, number: float) -> float:
    """alpha with sum_k expit(alpha - beta eps_k) = number (monotone in alpha)."""
    be = beta * modes.energies
    base = np.log(number / (modes.energies.size - number))
    lo, hi = base + be.min() - 1.0, base + be.max() + 1.0
    return brentq(lambda a: expit(a - be).sum() - number, lo, hi, xtol=1e-14, rtol=1e-15)


def _canonical(modes: FreeModes, beta: float, number: int) -> tuple[float, float, float]:
    """(E, ln Z_N, alpha*) of the N = number sector of exp(-beta H), exact.

    Z_N = e^{-alpha N} prod_k (1 + e^{alpha - beta eps_k}) P_f(N), P_f the distribution
    of the number of successes of trials with probabilities f_k = expit(alpha - beta
    eps_k), for any alpha; alpha* is the grand-canonical saddle (so P_f(N) is not small).
    E = -d ln Z_N / d beta follows by carrying the beta-derivative through the
    convolution. Cost O(L^2).
    """
    alpha = _alpha_for_number(modes, beta, number)
    eps = modes.energies
    x = alpha - beta * eps
    f = expit(x)
    df = -eps * f * (1 - f)
    p = np.zeros(eps.size + 1)
    dp = np.zeros_like(p)
    p[0] = 1.0
    for k in range(eps.size):
        shifted, dshifted = np.roll(p, 1), np.roll(dp, 1)
        shifted[0] = dshifted[0] = 0.0
        dp = dp * (1 - f[k]) + dshifted * f[k] + (shifted - p) * df[k]
        p = p * (1 - f[k]) + shifted * f[k]
    log_z = float(np.logaddexp(0.0, x).sum() - alpha * number + np.log(p[number]))
    e = float(modes.offset + np.dot(eps, f) - dp[number] / p[number])
    return e, log_z, alpha


def _ground_filling(eps: np.ndarray, number: float, tol: float, sign: int):
    """Occupations of the beta -> sign * inf limit at <N> = number: the lowest (highest
    for sign < 0) modes filled, the Fermi level's degenerate modes sharing the rest.
    Returns (f, Fermi energy, degeneracy g, particles r placed in the level)."""
    order = np.argsort(sign * eps, kind="stable")
    e_sorted = eps[order]
    full = int(np.floor(number + 1e-12))
    f_sorted = np.zeros(eps.size)
    if full >= eps.size:
        f_sorted[:] = 1.0
        fermi = e_sorted[-1]
    else:
        fermi = e_sorted[full]
        level = np.abs(e_sorted - fermi) <= tol
        below = int(np.count_nonzero(level[:full]))
        f_sorted[:full] = 1.0
        g = int(np.count_nonzero(level))
        r = number - full + below
        f_sorted[level] = r / g
    f = np.empty_like(f_sorted)
    f[order] = f_sorted
    if full >= eps.size:
        return f, float(fermi), 1, 0.0
    return f, float(fermi), g, r


def _solve_decreasing(func: Callable[[float], float], target: float, scale: float) -> float:
    """Root of the decreasing func(beta) = target, bracketed by doubling from beta = 0."""
    f0 = func(0.0)
    if f0 == target:
        return 0.0
    direction = 1.0 if target < f0 else -1.0
    step = 1.0 / scale
    lo = 0.0
    for _ in range(_MAX_DOUBLINGS):
        hi = direction * step
        if (func(hi) - target) * direction < 0:
            a, b = sorted((lo, hi))
            return brentq(lambda b_: func(b_) - target, a, b, xtol=1e-15 / scale, rtol=1e-15)
        lo, step = hi, 2 * step
    raise InputError(f"energy: {target!r} could not be bracketed (it is within round-off of "
                     f"the ground or ceiling energy)")


def free_gibbs(modes: FreeModes, L: int, scale: float, target: float, number: float | None,
               ensemble: Ensemble, beta: float | None = None) -> GibbsResult:
    """The free-fermion Gibbs ensemble at ``target`` energy (or at ``beta``)."""
    eps = modes.energies
    tol = 1e-12 * max(1.0, scale * L)
    if number is None:
        if beta is None:
            e_min = modes.offset + float(np.minimum(eps, 0).sum())
            e_max = modes.offset + float(np.maximum(eps, 0).sum())
            check_energy_range(target, e_min, e_max, tol)
            if abs(target - e_min) <= tol or abs(target - e_max) <= tol:
                sign = 1 if abs(target - e_min) <= tol else -1
                zero = int(np.count_nonzero(np.abs(eps) <= tol))
                n = float(np.sum(np.where(np.abs(eps) <= tol, 0.5, sign * eps < 0)))
                return GibbsResult(zero * np.log(2.0), 0.0, sign * np.inf, 0.0, None, target,
                                   n if modes.charged else None, "free-fermion", ensemble)
            beta = _solve_decreasing(lambda b: grand_ensemble(modes, b, 0.0)[0], target, scale)
        e, n, s = grand_ensemble(modes, beta, 0.0)
        return GibbsResult(s, 0.0, beta, 0.0, None, e, n if modes.charged else None,
                           "free-fermion", ensemble)
    if ensemble == "canonical":
        return _free_canonical(modes, L, scale, target, int(number), tol, beta)
    if beta is None:
        (f_lo, _, _, _), (f_hi, _, _, _) = (_ground_filling(eps, number, tol, s)
                                            for s in (1, -1))
        e_min = modes.offset + float(np.dot(eps, f_lo))
        e_max = modes.offset + float(np.dot(eps, f_hi))
        check_energy_range(target, e_min, e_max, tol, number)
        if abs(target - e_min) <= tol or abs(target - e_max) <= tol:
            sign = 1 if abs(target - e_min) <= tol else -1
            f, fermi, _, _ = _ground_filling(eps, number, tol, sign)
            s = float(np.sum(occupation_entropy(f)))
            return GibbsResult(s, 0.0, sign * np.inf, 0.0, fermi, target, number,
                               "free-fermion", ensemble)

        def energy_at(b: float) -> float:
            return grand_ensemble(modes, b, _alpha_for_number(modes, b, number))[0]

        beta = _solve_decreasing(energy_at, target, scale)
    alpha = _alpha_for_number(modes, beta, number)
    e, n, s = grand_ensemble(modes, beta, alpha)
    return GibbsResult(s, 0.0, beta, 0.0, chemical_potential(alpha, beta), e, n, "free-fermion",
                       ensemble)


def _free_canonical(modes: FreeModes, L: int, scale: float, target: float, number: int,
                    tol: float, beta: float | None) -> GibbsResult:
    eps = np.sort(modes.energies)
    e_min = modes.offset + float(eps[:number].sum())
    e_max = modes.offset + float(eps[L - number:].sum())
    if number in (0, L):
        check_energy_range(target, e_min, e_max, tol, number)
        return GibbsResult(0.0, 0.0, 0.0 if beta is None else beta, 0.0, None, e_min,
                           float(number), "free-fermion", "canonical")
    if beta is None:
        check_energy_range(target, e_min, e_max, tol, number)
        if abs(target - e_min) <= tol or abs(target - e_max) <= tol:
            sign = 1 if abs(target - e_min) <= tol else -1
            _, fermi, g, r = _ground_filling(modes.energies, number, tol, sign)
            return GibbsResult(float(np.log(comb(g, int(round(r))))), 0.0, sign * np.inf, 0.0,
                               fermi, target, float(number), "free-fermion", "canonical")
        beta = _solve_decreasing(lambda b: _canonical(modes, b, number)[0], target, scale)
    e, log_z, alpha = _canonical(modes, beta, number)
    s = beta * (e - modes.offset) + log_z
    return GibbsResult(float(s), 0.0, beta, 0.0, chemical_potential(alpha, beta), e, float(number),
                       "free-fermion", "canonical")


def occupation_entropy(f: np.ndarray) -> np.ndarray:
    """h(f) = -f ln f - (1 - f) ln(1 - f) per mode occupation f (0 at f = 0 and 1)."""
    f = np.clip(f, 0.0, 1.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = -f * np.log(f) - (1 - f) * np.log1p(-f)
    return np.nan_to_num(out, nan=0.0)
