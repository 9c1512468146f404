"""Number sectors of wide regions: the number of a region resolved by phases, and the
volumes Omega_R(n, b) of the joint number and energy (the number of eigenvalues of H_R in
the number-n sector in bin b), for :mod:`mpsobs.estimators.wide_number_energy`.

Phases. A purification's bonds carry the charge n_spin - n_ancilla, not the number of the
spins of a region, so the number is resolved by phases, P_R(n) = (1 / K) sum_j
e^(-i t_j n) e^(i t_j N_R), t_j = 2 pi j / K, K = n_R + 1 (exact for 0 <= n <= n_R): the
moments <v_a| e^(i t N_R) T_k(Ht_R) |v_b> of all K phases come from the same Chebyshev
vectors (e^(i t N_R) commutes with H_R; :func:`mpsobs.chebyshev.commuting_moments`),
each overlap K times (K n d chi^3 instead of n d chi^3).

Volumes Omega_R(n, b). Regions of at most ``exact_sites`` sites: the eigenvalues of each
number sector of H_R counted per bin (exact; cost sum_n C(n_R, n)^3). Wider regions:
reweighting from grand-canonical Gibbs states of the region (DESIGN 3c with a chemical
potential), rho = e^(-beta H_R + nu N_R) / Z, Omega_R(n, b) = Z sum_{E in b}
p(n, E) e^(beta E - nu n), with p(n, E) on sub-bins from the phase-resolved Chebyshev
moments of its purification (:func:`mpsobs.chebyshev.gibbs_segment` of beta H_R, which
gives ln Z(beta), times the product e^(nu N_R / 2), exact since N_R commutes with H_R,
whose norm gives the rest of ln Z). (beta, nu) by two-dimensional Newton steps so that
<H_R> lies near the state's mean regional energy (and its mean +- 2 standard
deviations: three references) and <N_R> near the state's mean regional number; each
(n, b) uses the reference that gives it the most weight (whose relative error is then
the smallest); |beta| is capped as in
:mod:`mpsobs.estimators.wide_energy`, |nu| at MAX_NU. As there, (beta, nu) lie on a grid
(spacings BETA_GRID / sigma_0 of H_R and of N_R at infinite temperature) and the
references are kept in the memo of the process, so that later output times reuse them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mpsobs.chain.models import Model
from mpsobs.core.errors import InputError
from mpsobs.estimators import chebyshev
from mpsobs.estimators.wide_energy import (
    BETA_GRID,
    DEFAULT_BOND,
    DEFAULT_MOMENTS,
    DEFAULT_SUB_BINS,
    EXACT_VOLUME_SITES,
    MAX_BETA_RESOLUTION,
    NEWTON_BOND,
    NEWTON_STEPS,
    PROBABILITY_FLOOR,
    _fingerprint,
    _memo,
    _Region,
    _region,
    _reweighted,
    _sub_bins,
    _targets,
)

__all__ = ["sector_volumes", "MAX_NU"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

#: Largest |nu| = |beta mu| of a volume reference (e^(nu) per particle).
MAX_NU = 20.0


# --------------------------------------------------------------------------- phases


def _spin_numbers(d: int) -> np.ndarray:
    """Number of the spin of each site value: [0, 1] (d = 2), [0, 0, 1, 1] (d = 4,
    index 2 s + a)."""
    return np.arange(d) // (d // 2)


def _phases(n_sites: int) -> np.ndarray:
    """e^(i t_j), t_j = 2 pi j / K, j = 0 .. K - 1, K = n_sites + 1."""
    return np.exp(2j * np.pi * np.arange(n_sites + 1) / (n_sites + 1))


def _phase_gram(x, y, phases: np.ndarray) -> np.ndarray:
    """G[j, a, b] = <x_a| e^(i t_j N) |y_b> over segments with an open right bond (N the
    number of spins of the segment). Cost K n d chi^3."""
    env = np.ones((len(phases), 1, 1), dtype=complex)
    for a, b in zip(x, y, strict=True):
        w = phases[:, None] ** _spin_numbers(a.shape[1])[None, :]     # (K, d)
        t = np.tensordot(env, a.conj(), axes=(1, 0)) * w[:, None, :, None]  # (K, m, d, r)
        env = np.einsum("kmdr,mdq->krq", t, b, optimize=True)
    return env


def _to_sectors(raw: np.ndarray, axis: int) -> np.ndarray:
    """The phase axis (K phases) of ``raw`` -> number sectors n = 0 .. K - 1 at the front:
    P(n) = (1 / K) sum_j e^(-i t_j n) e^(i t_j N)."""
    k = raw.shape[axis]
    dft = np.exp(-2j * np.pi * np.outer(np.arange(k), np.arange(k)) / k) / k
    return np.tensordot(dft, raw, axes=(1, axis))


def _sector_moments(segment, region: _Region, n_moments: int, bond: int,
                    n_sites: int) -> np.ndarray:
    """<v_a| P(n) T_k(Ht) |v_b> of a segment's vectors, (n_sites + 1, N, chi, chi)."""
    d = segment[0].shape[1]
    mpo = chebyshev.scaled_mpo(region.model, region.centre, region.half_width, d)
    phases = _phases(n_sites)
    raw = chebyshev.commuting_moments(segment, mpo, n_moments, bond,
                                      lambda x, y: _phase_gram(x, y, phases))
    return _to_sectors(raw, 1)


# --------------------------------------------------------------------------- volumes


def _sector_eigenvalues(model: Model) -> list[np.ndarray]:
    """Eigenvalues of H of each number sector n = 0 .. L (exact diagonalisation, L <= 16)."""
    h = model.sparse_hamiltonian().tocsr()
    count = np.array([bin(s).count("1") for s in range(2**model.L)])
    return [np.linalg.eigvalsh(h[idx][:, idx].toarray())
            for n in range(model.L + 1) for idx in [np.flatnonzero(count == n)]]


def _with_fugacity(seg: list[np.ndarray], nu: float) -> tuple[list[np.ndarray], float]:
    """e^(nu N / 2) |g> normalised (left-canonical, N the spins' number; a product of
    one-site factors, exact) and ln <g| e^(nu N) |g> for a normalised segment |g> with
    bonds 1 at both ends. Cost n d chi^3."""
    shift = max(nu, 0.0)   # factors e^(nu (s - 1) / 2) <= 1 for nu > 0: no overflow
    w = np.exp(nu / 2 * _spin_numbers(seg[0].shape[1]) - shift / 2)
    out, carry, log_norm = [], np.ones((1, 1)), 0.0
    for i, t in enumerate(seg):
        t = np.tensordot(carry, t * w[None, :, None], axes=(1, 0))
        scale = float(np.linalg.norm(t))
        t, log_norm = t / scale, log_norm + np.log(scale)
        if i < len(seg) - 1:
            q, carry = np.linalg.qr(t.reshape(-1, t.shape[2]))
            t = q.reshape(t.shape[0], t.shape[1], -1)
        out.append(t)
    return out, 2 * log_norm + shift * len(seg)


@dataclass(frozen=True)
class _GibbsPoint:
    """A grand-canonical reference e^(-beta H + nu N) / Z: its <H>, and at the
    compression bond (and half of it, ``*_low``) ln Z and the moments of Ht per number
    sector (K, N)."""

    beta: float
    nu: float
    energy: float
    log_z: float
    log_z_low: float
    moments: np.ndarray
    moments_low: np.ndarray


def _gibbs_run(region: _Region, beta: float, nu: float, n_moments: int, bond: int,
               step: float = chebyshev.GIBBS_STEP) -> tuple[float, np.ndarray]:
    """ln Z and the number-resolved moments (K, N) of Ht in e^(-beta H + nu N) / Z: the
    Gibbs segment of beta H (:func:`mpsobs.chebyshev.gibbs_segment`, imaginary-time
    ``step``) times e^(nu N / 2) (N commutes with H), ln Z = ln Z(beta) +
    ln <g| e^(nu N) |g>."""
    seg, log_z = chebyshev.gibbs_segment(region.model, beta, bond, step)
    seg, log_weight = _with_fugacity(seg, nu)
    moments = _sector_moments(seg, region, n_moments, bond, region.model.L)
    return log_z + log_weight, moments[:, :, 0, 0].real


def _grand_probe(region: _Region, beta: float, nu: float,
                 bond: int) -> tuple[float, float, float, float, float]:
    """<H_R>, <N_R>, Var H_R, Var N_R and Cov(H_R, N_R) in e^(-beta H + nu N) / Z
    (compression ``bond``, four moments)."""
    a, c = region.half_width, region.centre
    n = np.arange(region.model.L + 1)
    _, m = _gibbs_run(region, beta, nu, 4, bond)
    w, x1, x2 = m[:, 0], m[:, 1], (m[:, 2] + m[:, 0]) / 2   # P(n), <Ht; n>, <Ht^2; n>
    mean_n, mean_x = w @ n, x1.sum()
    return (float(c + a * mean_x), float(mean_n), float(a * a * (x2.sum() - mean_x**2)),
            float(w @ n**2 - mean_n**2), float(a * (x1 @ n - mean_x * mean_n)))


def _reference_point(region: _Region, target: float, number: float, n_moments: int,
                     bond: int, key: str) -> tuple[float, float]:
    """The grid (beta, nu) of the region's reference for <H_R> near ``target`` and <N_R>
    near ``number``: Newton steps from (0, 0) (d<H>/dbeta = -Var H, d<H>/dnu = Cov(H, N),
    d<N>/dbeta = -Cov(H, N), d<N>/dnu = Var N), each rounded to the grid of spacings
    BETA_GRID / sigma_0 (sigma_0 the spreads of H_R and N_R at (0, 0)), until both are
    within half a standard deviation or the step rounds to no move, at most NEWTON_STEPS,
    |beta| <= MAX_BETA_RESOLUTION / delta (as :mod:`mpsobs.estimators.wide_energy`) and
    |nu| <= MAX_NU. Probes are kept in the memo of the process."""
    search_bond = min(bond, NEWTON_BOND)

    def probe(beta: float, nu: float) -> tuple[float, float, float, float, float]:
        return _memo(("grand probe", key, beta, nu, search_bond),
                     lambda: _grand_probe(region, beta, nu, search_bond))

    _, _, var_h0, var_n0, _ = probe(0.0, 0.0)
    steps = BETA_GRID / np.sqrt(max(var_h0, 1e-300)), BETA_GRID / np.sqrt(max(var_n0, 1e-300))
    largest = (int(np.floor(MAX_BETA_RESOLUTION * n_moments / (np.pi * region.half_width)
                            / steps[0])), int(np.floor(MAX_NU / steps[1])))
    kb = kn = 0
    for _ in range(NEWTON_STEPS):
        beta, nu = kb * steps[0], kn * steps[1]
        mean_h, mean_n, var_h, var_n, cov_h = probe(beta, nu)
        if var_h <= 0 or (abs(mean_h - target) <= 0.5 * np.sqrt(var_h)
                          and abs(mean_n - number) <= 0.5 * np.sqrt(max(var_n, 0.0))):
            break
        jac = np.array([[-var_h, cov_h], [-cov_h, var_n]])
        step = np.linalg.lstsq(jac, [target - mean_h, number - mean_n], rcond=None)[0]
        new_kb = int(np.clip(np.rint((beta + step[0]) / steps[0]), -largest[0], largest[0]))
        # nu from the number's row with the beta step taken (a capped beta must not
        # make nu chase the energy)
        dnu = ((number - mean_n + cov_h * (new_kb * steps[0] - beta)) / var_n
               if var_n > 0 else 0.0)
        new_kn = int(np.clip(np.rint((nu + dnu) / steps[1]), -largest[1], largest[1]))
        if (new_kb, new_kn) == (kb, kn):
            break
        kb, kn = new_kb, new_kn
    return kb * steps[0], kn * steps[1]


def _gibbs_point(region: _Region, target: float, number: float, n_moments: int,
                 bond: int) -> _GibbsPoint:
    """The region's grand-canonical reference for ``target`` and ``number``
    (:func:`_reference_point`), its ln Z and moments at the compression bond and at half
    of it. Kept in the memo of the process by region, grid (beta, nu) and settings, so
    that later output times reuse it; the result does not depend on what the memo
    holds."""
    key = _fingerprint(region.model)
    beta, nu = _reference_point(region, target, number, n_moments, bond, key)

    def build() -> _GibbsPoint:
        (log_z, mu), (log_z_low, mu_low) = (
            _gibbs_run(region, beta, nu, n_moments, b, step)
            for b, step in ((bond, chebyshev.GIBBS_STEP),
                            (max(2, bond // 2), 2 * chebyshev.GIBBS_STEP)))
        energy = float(region.centre + region.half_width * mu[:, 1].sum())
        return _GibbsPoint(beta, nu, energy, log_z, log_z_low, mu, mu_low)

    return _memo(("grand reference", key, beta, nu, n_moments, bond), build)


class _SectorVolumes:
    """ln Omega_R(n, b) of one region: exact counts up to ``exact_sites`` sites, else
    reweighted from grand-canonical references (module docstring)."""

    def __init__(self, region: _Region, targets, number: float, n_moments: int, bond: int,
                 exact_sites: int):
        self.region = region
        self.exact = region.model.L <= exact_sites
        self.sector_bins = ([np.floor(w / region.bin_width).astype(np.int64)
                             for w in _sector_eigenvalues(region.model)] if self.exact else [])
        self.points = ([] if self.exact else
                       [_gibbs_point(region, float(e), number, n_moments, bond)
                        for e in targets])

    @classmethod
    def for_marginal(cls, region: _Region, marginal: np.ndarray, numbers: np.ndarray,
                     bins: np.ndarray, n_moments: int, bond: int,
                     exact_sites: int) -> _SectorVolumes:
        """The volumes for a state whose P(n, b) of the region is ``marginal`` on the grid
        ``numbers`` x ``bins`` (positions in region.bins): references at its mean regional
        energy +- 2 standard deviations and its mean number."""
        energy = np.zeros(len(region.bins))
        energy[bins] = marginal.sum(axis=0)
        return cls(region, _targets(region, energy), float(marginal.sum(axis=1) @ numbers),
                   n_moments, bond, exact_sites)

    def on_grid(self, marginal: np.ndarray, numbers: np.ndarray, bins: np.ndarray,
                n_moments: int, sub_bins: int, low: bool) -> np.ndarray:
        """ln Omega on the grid of ``marginal`` (``numbers`` x ``bins``, positions in
        region.bins) where it exceeds PROBABILITY_FLOOR, -inf elsewhere."""
        i, j = np.nonzero(marginal > PROBABILITY_FLOOR)
        values = np.full(marginal.shape, -np.inf)
        values[i, j] = self.log_volumes(numbers[i], self.region.bins[bins[j]], n_moments,
                                        sub_bins, low)
        return values

    def log_volumes(self, numbers, bins, n_moments: int, sub_bins: int,
                    low: bool = False) -> np.ndarray:
        """ln Omega(n, b) for the pairs (``numbers``[i], ``bins``[i])."""
        if self.exact:
            counts = np.array([np.sum(self.sector_bins[n] == k)
                               for n, k in zip(numbers, bins, strict=True)])
            with np.errstate(divide="ignore"):
                return np.log(counts.astype(float))
        out = np.empty(len(bins))
        for i, (n, k) in enumerate(zip(numbers, bins, strict=True)):
            weights, centres = _sub_bins(self.region, k, sub_bins, n_moments)
            subs = [weights @ (pt.moments_low if low else pt.moments)[n, :n_moments]
                    for pt in self.points]
            # the reference that puts the most weight into (n, b) resolves it best
            best = int(np.argmax([np.clip(sub, 0.0, None).sum() for sub in subs]))
            pt = self.points[best]
            log_z = pt.log_z_low if low else pt.log_z
            out[i] = _reweighted(subs[best], centres, log_z - pt.nu * n, pt.beta)
        return out


def sector_volumes(model: Model, bin_width: float, numbers, bins, *, targets=None,
                   number: float | None = None, n_moments: int = DEFAULT_MOMENTS,
                   bond: int = DEFAULT_BOND, sub_bins: int = DEFAULT_SUB_BINS,
                   exact_sites: int = EXACT_VOLUME_SITES) -> np.ndarray:
    """ln Omega(n, b) of the whole number-conserving ``model`` taken as a region, for the
    pairs (``numbers``[i], ``bins``[i]) of number sector and integer bin [k dE,
    (k + 1) dE): exact counts up to ``exact_sites`` sites, else reweighted from Gibbs
    references at the ``targets`` energies (default: the middle of the given bins) and
    mean ``number`` (default: the mean of the given numbers)."""
    if not model.conserves_number:
        raise InputError(f"model: {model.name!r} does not conserve the number; number "
                         f"sectors need a number-conserving model (xxz)")
    numbers = np.asarray(numbers, dtype=np.int64)
    bins = np.asarray(bins, dtype=np.int64)
    region = _region(model, bin_width)
    if targets is None:
        targets = [(bins.mean() + 0.5) * bin_width]
    vol = _SectorVolumes(region, targets, float(numbers.mean() if number is None else number),
                         n_moments, bond, exact_sites)
    return vol.log_volumes(numbers, bins, n_moments, sub_bins)
