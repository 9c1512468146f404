"""Thermodynamic references: Gibbs entropies and Gibbs states of a chain, by purification
where free fermions do not give them exactly.

The Gibbs reference of a state is the Gibbs ensemble rho = exp(-beta H + alpha N) / Z
whose energy <H> (the total energy, the same H as :mod:`mpsobs.models`, constants of the
Jordan-Wigner mapping included) equals the state's, and, for number-conserving models
when a particle number is given, whose <N> equals it too (alpha = beta mu). Without a
number the ensemble is that of H alone (mu = 0): the Gibbs state of the spin chain.
Entropies are von Neumann entropies -Tr rho ln rho, total (not per site), in nats.
Energies above the infinite-temperature energy give negative beta.

Two ways to compute it:

- "free-fermion", exact at any L, for XX chains and Ising chains with h = 0
  (:mod:`mpsobs.references.free_fermion_gibbs`, with the canonical ensemble of a
  definite number for XX chains);
- "purification", for everything else: the infinite-temperature state of the chain
  and one ancilla per site, |I> = prod_i (|00> + e^{alpha/2} |11>), evolved in
  imaginary time, |psi(beta)> = exp(-beta H / 2) |I> as an MPS of local dimension 4
  (Phys. Rev. Lett. 93, 207204 (2004)), with ln Z accumulated from the norm. One sweep
  gives E(beta) and S(beta) = beta E - alpha N + ln Z on a grid; the target energy is
  found by cubic Hermite interpolation of S(E) (slope dS/dE = beta). With a number,
  alpha is tuned at every grid point by reweighting: exp(-beta H + alpha' N) differs
  from the simulated state by exp((alpha' - alpha) N / 2) applied to it, exact because
  [H, N] = 0; the sweep is redone around the final alpha if the shift is large.

Accuracy and cost of the purification: the evolution is the shared kernel
(:mod:`mpsobs.mps.evolution`, imaginary time, local dimension 4) with the second-order
Strang splitting of even and odd bonds, exp(-dbeta H / 2) per step dbeta, and the one
truncation rule of :mod:`mpsobs.mps.truncation` (at most ``max_bond`` singular values,
the smallest dropped while their squared sum stays within ``cutoff`` times the total;
default PURIFICATION_CUTOFF = 1e-18, small because a discarded component of low energy
is amplified by the later imaginary-time steps). For number-conserving models the
decompositions work in blocks of n_s - n_a (:mod:`mpsobs.mps.charges`). Every run is
repeated at 2 dbeta; the result is the Richardson extrapolation and ``entropy_err`` =
|S(dbeta) - S(2 dbeta)| / 3, the Trotter error of the unextrapolated S(dbeta) (so a
conservative bound for the extrapolated value: at L = 6, dbeta = 0.05, the true error
was 5e-9 against a reported 1e-6). When the bond limit ``max_bond`` is reached, the run
is repeated at half the bond and |S(chi) - S(chi / 2)| is added.
Cost per step O(L (4 chi)^3) for the splits, measurements O(L 16 chi^3), memory
O(L 4 chi^2); see scripts/bench_thermo.py for timings.

The generalised Gibbs ensemble of XX chains is in :mod:`mpsobs.references.gge`,
:class:`GibbsResult` in :mod:`mpsobs.references.gibbs_result`; this module re-exports both.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla
from scipy.interpolate import CubicHermiteSpline, CubicSpline
from scipy.optimize import brentq

from mpsobs.chain.models import Model, bond_hamiltonians
from mpsobs.chain.states import paired_purification
from mpsobs.core.errors import InputError, finite_number, integer
from mpsobs.core.threads import limits_threads
from mpsobs.mps.charges import definite_charges
from mpsobs.mps.evolution import GateChain, Gates, layer_schedule, on_physical
from mpsobs.mps.tensors import MPS, PurifiedMPS, right_canonical_log_norm
from mpsobs.references.free_fermion_gibbs import (
    FreeModes,
    free_gibbs,
    free_modes,
    grand_ensemble,
)
from mpsobs.references.gge import GGEResult, gge
from mpsobs.references.gibbs_result import (
    Ensemble,
    GibbsResult,
    Method,
    check_energy_range,
    chemical_potential,
)

__all__ = ["GibbsResult", "GGEResult", "gibbs", "gibbs_at", "gibbs_state", "gge",
           "entropy_shift_bound", "Method", "Ensemble", "PURIFICATION_CUTOFF"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)

#: Default truncation cutoff of the purification (meaning: :mod:`mpsobs.mps.truncation`).
PURIFICATION_CUTOFF = 1e-18
#: Largest ancilla reweighting |alpha' - alpha| * sqrt(L) / 2 kept without a new sweep.
_REWEIGHT_MAX = 1.0
#: Sweeps tried to bring the simulated alpha close to the target's.
_MAX_SWEEPS = 3




def _infinite_temperature(model: Model, alpha: float,
                          number: int | None = None) -> tuple[GateChain, float]:
    """The normalised purification of exp(alpha N) (or, with ``number``, of the projector
    on the sector N = number) as the start of an imaginary-time run (a kernel chain,
    renormalising), with its ln Z = ln Tr.

    Without a number: prod_i (|00> + e^{alpha/2} |11>), bond 1. With one: the sum of
    |s>|s> over the strings s with ``number`` sites in |1>, an MPS whose bond index counts
    the particles to its left (bond <= min(N, L - N) + 1), brought to canonical form;
    ln Z = ln C(L, N). For a number-conserving model the chain carries the charges
    n_s - n_a (0 on every bond here; :mod:`mpsobs.mps.charges`).
    """
    L = model.L
    if number is None:
        tensors, log_z = paired_purification(L, alpha)
    else:
        raw = []
        for i in range(L):
            left = np.arange(max(0, number - (L - i)), min(i, number) + 1)
            right = np.arange(max(0, number - (L - i - 1)), min(i + 1, number) + 1)
            t = np.zeros((left.size, 4, right.size))
            for a, n in enumerate(left):
                for value, index in ((n, 0), (n + 1, 3)):  # |00> keeps the count, |11> adds one
                    hit = np.flatnonzero(right == value)
                    if hit.size:
                        t[a, index, hit[0]] = 1.0
            raw.append(t)
        rc, log_norm = right_canonical_log_norm(MPS(tuple(raw)))
        tensors, log_z = list(rc.tensors), 2 * log_norm
    fixed = definite_charges(tensors) if model.conserves_number else None
    if fixed is None:
        return GateChain(tensors, None, normalize=True), log_z
    return GateChain(fixed[0], fixed[1], center=L - 1, normalize=True), log_z


def _imaginary_time(chain: GateChain, gates: Gates, steps: Sequence[float], max_bond: int,
                    cutoff: float) -> float:
    """exp(-tau H) for the consecutive steps tau (second-order Strang schedule of
    :mod:`mpsobs.mps.evolution`, half layers merged); returns the discarded weight."""
    return sum(chain.apply_layer(parity, gates.layer(parity, tau), max_bond, cutoff)
               for parity, tau in layer_schedule(2, steps))


def _closing(left: np.ndarray, bra: np.ndarray, ket: np.ndarray,
             right: np.ndarray) -> np.ndarray:
    """sum over bonds of conj(bra[a, p, c]) left[a, b] ket[b, p, d] right[d, c], per p."""
    y = np.tensordot(np.tensordot(left, ket, axes=(1, 0)), right, axes=(2, 0))
    return np.sum(bra.conj() * y, axis=(0, 2))


def _tilted(tensors: Sequence[np.ndarray], bonds: Sequence[np.ndarray] | None,
            delta: float) -> tuple[float, float, float]:
    """For the state tilted by exp(delta N / 2): (ln <e^{delta N}>, <N>, <H>) (<H> is
    NaN when ``bonds``, the (16, 16) bond Hamiltonians on the physical legs, is None).
    Local values are divided by the norm through the same environments, so environments
    may be rescaled freely. Cost O(L chi^3 16)."""
    w = np.array([1.0, 1.0, np.exp(delta), np.exp(delta)])
    occ = np.array([0.0, 0.0, 1.0, 1.0])
    lefts = [np.ones((1, 1))]
    log_norm = 0.0
    for t in tensors:
        y = np.tensordot(lefts[-1], t, axes=(1, 0)) * w[None, :, None]
        env = np.tensordot(t.conj(), y, axes=([0, 1], [0, 1]))
        scale = float(np.abs(env).max())
        log_norm += np.log(scale)
        lefts.append(env / scale)
    log_norm += np.log(float(lefts[-1].real.sum()))
    rights = [np.ones((1, 1))]
    for t in reversed(tensors):
        y = np.tensordot(t, rights[-1], axes=(2, 0)) * w[None, :, None]
        env = np.tensordot(y, t.conj(), axes=([1, 2], [1, 2]))
        rights.append(env / float(np.abs(env).max()))
    rights.reverse()  # rights[i]: sites i .. L-1
    number = 0.0
    for i, t in enumerate(tensors):
        part = _closing(lefts[i], t, t, rights[i + 1]).real * w
        number += float(part @ occ / part.sum())
    if bonds is None:
        return log_norm, number, float("nan")
    root = np.sqrt(w)
    energy = 0.0
    for b, h in enumerate(bonds):
        theta = np.tensordot(tensors[b], tensors[b + 1], axes=(2, 0))
        theta = theta * root[None, :, None, None] * root[None, None, :, None]
        chl, chr_ = theta.shape[0], theta.shape[3]
        theta = theta.reshape(chl, 16, chr_)
        h_theta = np.matmul(h, theta)
        num = _closing(lefts[b], theta, h_theta, rights[b + 2]).sum()
        den = _closing(lefts[b], theta, theta, rights[b + 2]).sum()
        energy += float((num / den).real)
    return log_norm, number, energy


@dataclass(frozen=True, eq=False)
class _Curve:
    """One imaginary-time sweep: values at every step (beta >= 0 along ``sign`` H)."""

    beta: np.ndarray
    energy: np.ndarray
    entropy: np.ndarray
    alpha: np.ndarray
    number: np.ndarray
    discarded: float
    max_bond: int
    steps: int


def _sweep(model: Model, sign: int, alpha0: float, dbeta: float, n_steps: int,
           max_bond: int, cutoff: float, number: float | None,
           stop: Callable[[float, float], bool]) -> _Curve:
    """Imaginary-time sweep of exp(-beta sign H + alpha N) from beta = 0 in steps dbeta.

    At every step: ln Z from the accumulated norms and, with a ``number``, alpha tuned by
    reweighting; stops after ``n_steps`` or two steps after ``stop(beta, energy)``.
    ``beta`` and ``energy`` of the curve are for H itself (beta = sign * steps * dbeta).
    """
    bonds = [sign * h for h in bond_hamiltonians(model)]
    ops = [on_physical(h, 4) for h in bonds]
    chain, log_z0 = _infinite_temperature(model, alpha0)
    gates = Gates(bonds, "imaginary", 4, conserve_charge=chain.charges is not None)
    rows = []
    after = None
    discarded = 0.0
    for step in range(n_steps + 1):
        if step:   # exp(-dbeta H / 2) as one Strang step
            discarded += _imaginary_time(chain, gates, [dbeta / 2], max_bond, cutoff)
        beta = step * dbeta
        if number is None:
            _, n, e = _tilted(chain.tensors, ops, 0.0)
            delta, log_ratio = 0.0, 0.0
        else:
            delta = _reweight(chain.tensors, number)
            log_ratio, n, e = _tilted(chain.tensors, ops, delta)
        alpha = alpha0 + delta
        s = beta * e - alpha * n + log_z0 + chain.log_norm2 + log_ratio
        rows.append((sign * beta, sign * e, s, alpha, n))
        if after is None and stop(sign * beta, sign * e):
            after = step + 2
        if after is not None and step >= after:
            break
    beta, energy, entropy, alpha, nums = (np.array(col) for col in zip(*rows, strict=True))
    return _Curve(beta, energy, entropy, alpha, nums, discarded, chain.peak_bond,
                  len(rows) - 1)


def _reweight(tensors: Sequence[np.ndarray], number: float) -> float:
    """delta with <N> = number in the state tilted by exp(delta N / 2)."""
    def excess(d: float) -> float:
        return _tilted(tensors, None, d)[1] - number

    lo, hi = -0.5, 0.5
    for _ in range(8):
        if excess(lo) < 0 < excess(hi):
            return brentq(excess, lo, hi, xtol=1e-13)
        lo, hi = 2 * lo, 2 * hi
    raise InputError(f"number: {number!r} could not be reached by the purified state")


@limits_threads(lambda call: call.arguments["max_bond"])
def _purification_gibbs(model: Model, target: float | None, beta: float | None,
                        mu: float | None, number: float | None, *, max_bond: int,
                        dbeta: float, cutoff: float, beta_max: float) -> GibbsResult:
    """Gibbs ensemble by purification at ``target`` energy, or at ``beta`` (with mu)."""
    L = model.L
    bonds = bond_hamiltonians(model)
    e_inf = float(sum(np.trace(h).real for h in bonds)) / 4
    if target is not None:
        e_lb = float(sum(sla.eigvalsh(h)[0] for h in bonds))
        e_ub = float(sum(sla.eigvalsh(h)[-1] for h in bonds))
        check_energy_range(target, e_lb, e_ub, 1e-12 * max(1.0, model.energy_scale * L))
        alpha0 = 0.0 if number is None else float(np.log(number / (L - number)))
    else:
        alpha0 = 0.0 if mu is None else float(beta * mu)
    if target is not None:
        sign = 1 if target <= e_inf else -1
        n_steps = int(np.ceil(beta_max / dbeta / 2)) * 2
    else:
        sign = 1 if beta >= 0 else -1
        n_steps = max(2, int(np.ceil(abs(beta) / dbeta / 2)) * 2)
    step = dbeta if target is not None else abs(beta) / n_steps

    def reached(b: float, e: float) -> bool:
        return (e - target) * sign <= 0 if target is not None else False

    def run(factor: int, bond: int):
        curve = _sweep(model, sign, alpha0, factor * step, n_steps // factor, bond, cutoff,
                       number, reached)
        return curve, _read_curve(curve, target)

    for attempt in range(_MAX_SWEEPS):
        main, (s1, b1, a1, e1, n1) = run(1, max_bond)
        shift = a1 - alpha0
        if number is None or abs(shift) * np.sqrt(L) / 2 <= _REWEIGHT_MAX \
                or attempt == _MAX_SWEEPS - 1:
            break
        alpha0 = a1
        log.info("purification: new sweep at alpha = %.6g", alpha0)
    _, (s2, b2, a2, e2, n2) = run(2, max_bond)
    trotter = abs(s1 - s2) / 3
    truncation = 0.0
    if main.max_bond >= max_bond:  # the bond limit truncated: compare with half of it
        _, (s3, b3, _, _, _) = run(1, max(1, max_bond // 2))
        truncation = abs(s1 - s3)
    entropy = s1 + (s1 - s2) / 3
    beta_out = b1 + (b1 - b2) / 3
    e1, n1 = e1 + (e1 - e2) / 3, n1 + (n1 - n2) / 3  # unchanged when matched to a target
    # alpha extrapolated like beta, so that (beta, mu) together name the matched ensemble
    alpha_out = a1 + (a1 - a2) / 3 if mu is None else a1
    mu_out = None if (number is None and mu is None) else chemical_potential(alpha_out, beta_out)
    conserves = model.conserves_number
    beta_err = abs(b1 - b2) / 3 + (abs(b1 - b3) if truncation else 0.0)
    return GibbsResult(float(entropy), float(trotter + truncation), float(beta_out),
                       float(beta_err), mu_out, float(e1), float(n1) if conserves else None,
                       "purification", "grand", main.discarded, main.max_bond, main.steps)


def _read_curve(curve: _Curve, target: float | None):
    """(S, beta, alpha, E, N) at the target energy, or at the curve's last point."""
    if target is None:
        return (curve.entropy[-1], curve.beta[-1], curve.alpha[-1], curve.energy[-1],
                curve.number[-1])
    e = curve.energy
    passed = np.flatnonzero((e - target) * np.sign(curve.beta[-1] or 1.0) <= 0)
    if passed.size == 0:
        raise InputError(f"energy: {target:.12g} was not reached by the imaginary-time sweep "
                         f"(E = {e[-1]:.12g} at beta = {curve.beta[-1]:.6g}); it lies beyond "
                         f"the ground (or ceiling) energy or needs a larger beta_max")
    order = np.argsort(e)
    e_s = e[order]
    if np.any(np.diff(e_s) <= 0):
        keep = np.concatenate([[True], np.diff(e_s) > 0])
        order = order[keep]
        e_s = e[order]
    s = CubicHermiteSpline(e_s, curve.entropy[order], curve.beta[order])(target)
    beta, alpha, number = (CubicSpline(e_s, y[order])(target)
                           for y in (curve.beta, curve.alpha, curve.number))
    return float(s), float(beta), float(alpha), float(target), float(number)


# --------------------------------------------------------------------------- public API


def _check_number(model: Model, number, ensemble: Ensemble) -> float | None:
    if number is None:
        if ensemble == "canonical":
            raise InputError("ensemble: 'canonical' needs a number")
        return None
    if not model.conserves_number:
        raise InputError(f"number: the {model.name} chain with these parameters does not "
                         f"conserve the particle number; give number=None")
    value = finite_number(number, "number")
    if ensemble == "canonical":
        if value != round(value) or not 0 <= value <= model.L:
            raise InputError(f"number: the canonical ensemble needs an integer in 0..{model.L}, "
                             f"got {number!r}")
        return value
    if not 0 < value < model.L:
        raise InputError(f"number: expected a value strictly between 0 and L = {model.L} "
                         f"(the sectors N = 0 and N = L hold one state each, entropy 0), "
                         f"got {number!r}")
    return value


def _check_options(model, method, ensemble, max_bond, dbeta, cutoff) -> None:
    if not isinstance(model, Model):
        raise InputError(f"model: expected an mpsobs.models.Model, got {type(model).__name__}")
    if method not in ("auto", "free-fermion", "purification"):
        raise InputError(f"method: unknown {method!r}; allowed: 'auto', 'free-fermion', "
                         f"'purification'")
    if ensemble not in ("grand", "canonical"):
        raise InputError(f"ensemble: unknown {ensemble!r}; allowed: 'grand', 'canonical'")
    integer(max_bond, "max_bond", 1)
    if not finite_number(dbeta, "dbeta") > 0:
        raise InputError(f"dbeta: expected a positive number, got {dbeta!r}")
    if not 0 <= finite_number(cutoff, "cutoff") < 1:
        raise InputError(f"cutoff: expected a number in [0, 1), got {cutoff!r}")


def _pick(model: Model, method: Method, ensemble: Ensemble,
          number: float | None) -> FreeModes | None:
    """The free modes when the free-fermion route is taken, else None."""
    modes = None if method == "purification" else free_modes(model)
    if method == "free-fermion" and modes is None:
        raise InputError(f"method: 'free-fermion' needs an XX chain (xxz, delta = 0) or an "
                         f"Ising chain with h = 0, not this {model.name} chain")
    if modes is not None and number is not None and not modes.charged:
        modes = None  # number-conserving Ising (g = 0): its modes do not carry number
        if method == "free-fermion":
            raise InputError("number: the free-fermion Ising ensemble has no particle number; "
                             "use method='purification'")
    if modes is None and ensemble == "canonical":
        raise InputError("ensemble: 'canonical' is computed for XX chains (free fermions) "
                         "only; use ensemble='grand'")
    return modes


def gibbs(model: Model, energy: float, number: float | None = None, *,
          ensemble: Ensemble = "grand", method: Method = "auto", max_bond: int = 64,
          dbeta: float = 0.05, cutoff: float = PURIFICATION_CUTOFF,
          beta_max: float | None = None) -> GibbsResult:
    """The Gibbs ensemble with <H> = ``energy`` (and <N> = ``number``) and its entropy.

    Parameters
    ----------
    model : the chain (:func:`mpsobs.models.xxz` or :func:`mpsobs.models.ising`).
    energy : the total energy <H> to match (H as in models, JW constants included).
    number : the particle number (sites in |1>) to match, for number-conserving models;
        None for the Gibbs state of H alone (mu = 0).
    ensemble : "grand" (mu fixes <N>) or "canonical" (exactly N = number; XX only).
    method : "auto" (free fermions when exact, else purification), "free-fermion" or
        "purification".
    max_bond, dbeta, cutoff, beta_max : purification: bond dimension limit, imaginary-time
        step in beta, truncation cutoff (discarded weight, :mod:`mpsobs.mps.truncation`),
        and the largest |beta| swept
        (default 20 / energy scale).

    Raises InputError for energies outside the spectrum range (exact bounds for free
    fermions; the sum of the bonds' extreme eigenvalues, then the sweep's reach, for the
    purification). See the module docstring for accuracy and cost.
    """
    _check_options(model, method, ensemble, max_bond, dbeta, cutoff)
    target = finite_number(energy, "energy")
    value = _check_number(model, number, ensemble)
    modes = _pick(model, method, ensemble, value)
    if modes is not None:
        return free_gibbs(modes, model.L, model.energy_scale, target, value, ensemble)
    beta_max = 20.0 / model.energy_scale if beta_max is None else finite_number(beta_max,
                                                                                 "beta_max")
    return _purification_gibbs(model, target, None, None, value, max_bond=max_bond,
                               dbeta=dbeta, cutoff=cutoff, beta_max=float(beta_max))


def gibbs_at(model: Model, beta: float, mu: float | None = None, *, method: Method = "auto",
             max_bond: int = 64, dbeta: float = 0.05,
             cutoff: float = PURIFICATION_CUTOFF) -> GibbsResult:
    """The grand Gibbs ensemble exp(-beta (H - mu N)) / Z at a given beta (any sign) and
    chemical potential (None: mu = 0; needs a number-conserving model otherwise).
    Options as :func:`gibbs`; the purification's steps are adjusted to end on beta."""
    _check_options(model, method, "grand", max_bond, dbeta, cutoff)
    beta = finite_number(beta, "beta")
    mu_value = None if mu is None else finite_number(mu, "mu")
    if mu_value is not None and not model.conserves_number:
        raise InputError(f"mu: the {model.name} chain with these parameters does not conserve "
                         f"the particle number")
    modes = _pick(model, method, "grand", mu_value)
    if modes is not None:
        alpha = 0.0 if mu_value is None else beta * mu_value
        e, n, s = grand_ensemble(modes, beta, alpha)
        return GibbsResult(s, 0.0, beta, 0.0, mu_value, e, n if modes.charged else None,
                           "free-fermion", "grand")
    return _purification_gibbs(model, None, beta, mu_value, None, max_bond=max_bond,
                               dbeta=dbeta, cutoff=cutoff, beta_max=abs(beta))


def gibbs_state(model: Model, beta: float, mu: float | None = None, *,
                number: int | None = None, max_bond: int = 64, dbeta: float = 0.05,
                cutoff: float = PURIFICATION_CUTOFF) -> PurifiedMPS:
    """The Gibbs state exp(-beta (H - mu N)) / Z as a purification MPS.

    Parameters
    ----------
    model : the chain (any model with one- and two-site terms).
    beta : inverse temperature, any sign (finite).
    mu : chemical potential (None: mu = 0; needs a number-conserving model otherwise).
    number : the canonical ensemble instead: P_N exp(-beta H) / Z_N in the sector of N =
        ``number`` sites in |1> (number-conserving models; mu must be None).
    max_bond, dbeta, cutoff : bond dimension limit, imaginary-time step (adjusted down
        so that the steps end on beta) and truncation cutoff (discarded weight,
        :mod:`mpsobs.mps.truncation`).

    Returns
    -------
    PurifiedMPS |psi> = exp(-beta H / 2) |I> / norm, |I> the infinite-temperature state
    of the chain and its ancillas (Phys. Rev. Lett. 93, 207204 (2004)), so that
    Tr_ancilla |psi><psi| is the Gibbs state; tensors (chi_l, 4, chi_r), index 2 s + a.

    Notes
    -----
    ``error`` estimates the trace distance to the exact Gibbs state. The state is built
    again with twice the step; for the second-order splitting the purification distance
    of the returned state from the exact one is then about a third of
    d = (1 - |<psi_dbeta|psi_2dbeta>|^2)^(1/2), and the purification distance bounds the
    trace distance of the reduced states (Fuchs-van de Graaf; Nielsen and Chuang,
    Quantum Computation and Quantum Information, sec. 9.2). When the bond limit is reached
    the state is built once more at half the bond and that distance is added (an estimate,
    not a bound, like the truncation companion of the evolution). Cost: the three runs
    (Strang steps with merged half layers, about L two-site splits of (4 chi, 4 chi) per
    step), about 2.5 x (|beta| / dbeta) L (4 chi)^3; less in number blocks.
    """
    _check_options(model, "purification", "grand", max_bond, dbeta, cutoff)
    beta = finite_number(beta, "beta")
    if mu is not None:
        mu = finite_number(mu, "mu")
        if not model.conserves_number:
            raise InputError(f"mu: the {model.name} chain with these parameters does not "
                             f"conserve the particle number")
    if number is not None:
        if mu is not None:
            raise InputError("mu: the canonical ensemble (number given) has no chemical "
                             "potential; give mu=None")
        value = _check_number(model, number, "canonical")
        number = int(value)
    alpha = 0.0 if mu is None else beta * mu
    bonds = [np.sign(beta) * h for h in bond_hamiltonians(model)]
    n_steps = int(np.ceil(abs(beta) / dbeta / 2)) * 2

    def build(steps: int, bond: int) -> tuple[GateChain, float]:
        """The purification after ``steps`` Strang steps, centre on site 0, and its
        discarded weight."""
        chain, _ = _infinite_temperature(model, alpha, number)
        gates = Gates(bonds, "imaginary", 4, conserve_charge=chain.charges is not None)
        lost = _imaginary_time(chain, gates, [abs(beta) / steps / 2] * steps, bond,
                               cutoff) if steps else 0.0
        chain.move_to(0)
        return chain, lost

    main, discarded = build(n_steps, max_bond)
    error = _purification_distance(main.tensors, build(n_steps // 2, max_bond)[0].tensors) / 3
    if main.peak_bond >= max_bond and n_steps:
        error += _purification_distance(main.tensors,
                                        build(n_steps, max(1, max_bond // 2))[0].tensors)
    log.debug("gibbs_state: beta %.6g, %d steps, bond %d, error %.3g", beta, n_steps,
              main.peak_bond, error)
    return PurifiedMPS(tuple(main.tensors), beta=beta, mu=mu, number=number,
                       error=float(error), discarded_weight=float(discarded))


def _purification_distance(a: Sequence[np.ndarray], b: Sequence[np.ndarray]) -> float:
    """(1 - |<a|b>|^2 / (<a|a> <b|b>))^(1/2) of two MPS of the same local dimension.
    Environments are rescaled at every site. Cost L chi^3 d."""
    envs = {pair: np.ones((1, 1), dtype=complex) for pair in ("aa", "ab", "bb")}
    logs = dict.fromkeys(envs, 0.0)
    for ta, tb in zip(a, b, strict=True):
        for pair, (x, y) in {"aa": (ta, ta), "ab": (ta, tb), "bb": (tb, tb)}.items():
            env = np.tensordot(np.tensordot(envs[pair], y, axes=(1, 0)), x.conj(),
                               axes=([0, 1], [0, 1])).T
            scale = float(np.abs(env).max()) or 1.0
            envs[pair], logs[pair] = env / scale, logs[pair] + np.log(scale)
    ratio = (abs(envs["ab"][0, 0]) ** 2 / (envs["aa"][0, 0].real * envs["bb"][0, 0].real)
             * np.exp(2 * logs["ab"] - logs["aa"] - logs["bb"]))
    return float(np.sqrt(max(0.0, 1.0 - ratio)))


def entropy_shift_bound(trace_distance: float, max_entropy: float) -> float:
    """Largest change of S_obs (any coarse-graining) between two states at
    ``trace_distance`` T <= 1, in a space of ln dim = ``max_entropy``:
    T ln(dim - 1) + h(T), h the binary entropy.

    S_obs(rho) is the Shannon entropy of the fine distribution p_i / V_i spread over the
    macrostate i; measuring contracts the trace distance, so the two fine distributions
    are within total variation T, and the sharp continuity bound of the Shannon entropy
    applies (K. M. R. Audenaert, J. Phys. A 40, 8127 (2007), from memory). At T >= 1 - 1/dim
    it is ``max_entropy``.
    """
    t = float(trace_distance)
    dim_minus_one = np.expm1(max_entropy) if max_entropy < 700 else np.inf
    if t <= 0.0:
        return 0.0
    if t >= 1.0 - 1.0 / (dim_minus_one + 1.0):
        return float(max_entropy)
    log_dm1 = np.log(dim_minus_one) if np.isfinite(dim_minus_one) else max_entropy
    return float(t * log_dm1 - t * np.log(t) - (1 - t) * np.log1p(-t))
