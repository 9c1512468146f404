"""Exact observational entropy of the energies of two regions of a free-fermion chain.

The reference for :class:`mpsobs.coarse.WideEnergyRegions` on XX chains (xxz with
delta = 0, any fields) in a Gaussian state: outcomes (b_A, b_B), b = floor(E / dE),
p(b) = <P_A(b_A) P_B(b_B)>, V(b) = Omega_A(b_A) Omega_B(b_B) and
S_obs = -sum p ln(p / V) (natural logarithms).

Regional Hamiltonians. H_R (the terms wholly inside a contiguous region R) is quadratic
in the Jordan-Wigner fermions of R (the strings of adjacent sites cancel, also when R
does not start at site 0): H_R = sum_k e_k eta_k^dagger eta_k + E_R with the
single-particle energies e_k of R's hopping matrix and offset E_R
(:func:`mpsobs.gaussian.quadratic_hamiltonian` of ``model.restricted``). Its 2^n
eigenvalues are E_R + the sums of the subsets of {e_k}.

Volumes (exact integer counts): :func:`level_counts` counts the subset sums in each bin
by meet-in-the-middle (Horowitz and Sahni, J. ACM 21, 277 (1974)): the 2^(n/2) sums of
each half of the modes, one half sorted, and for every bin edge x the number of pairs
with s_1 + s_2 < x by a binary search per s_1. The counts are exact integers; the only
error is a level within floating-point rounding (~1e-13 of the region's energy scale)
of a bin edge. Cost O(2^(n/2) n_edges n) time, O(2^(n/2)) memory; n <= MAX_MODES.

Probabilities (characteristic function). For a Gaussian state with C_ij = <c_i^dagger c_j>,

    chi(s_A, s_B) = <exp(i s_A H_A + i s_B H_B)>
                  = exp(i s_A E_A + i s_B E_B) det(1 + (exp(i s h) - 1) C^T),

h = T_A (+) T_B on the sites of A and B (Klich's trace formula, I. Klich,
arXiv:cond-mat/0209642 (2003); as full counting statistics, Phys. Rev. Lett. 102, 100502
(2009)); in the modes of T_A and T_B the matrix exp(i s h) - 1 is diagonal, so each point
is one determinant of size n_A + n_B with the rows of C^T (in the mode basis) scaled,
computed as det(A block) times the determinant of its Schur complement (size n_B; the A
part is shared by a whole row of the grid).
The bin probabilities follow from a 2-D Fourier inversion against the bin indicators
smoothed by a Gaussian of width ``smoothing`` = sigma in each energy:

    p_sigma(a, b) = sum_{k,l} (ds_A ds_B / 4 pi^2) chi(s_k, s_l)
                    conj(I_a(s_k) I_b(s_l)) exp(-sigma^2 (s_k^2 + s_l^2) / 2),

I_a(s) = int_{a dE}^{(a+1) dE} e^{i s E} dE, on the grid s_k = k ds, |s_k| <= CUTOFF /
sigma. Errors: (1) truncation of the grid, of order exp(-CUTOFF^2 / 2); (2) aliasing: the
grid spacing ds = 2 pi / T with a period T that exceeds the span of the bins plus
2 CUTOFF (2 sigma), so the periodic images of the spectrum reach no bin (of order
exp(-CUTOFF^2 / 2)); (3) smoothing: levels within a few sigma of a bin edge are split
between the two bins. (1) and (2) are below 1e-12; (3) is estimated by |S_obs(sigma) -
S_obs(2 sigma)| from the same grid: an overestimate when the error is O(sigma^2) (a
level density smooth on the scale sigma; measured for halves of 32 sites: S_obs changes
by 1.0e-2, 2.6e-3, 6.3e-4 from sigma = dE / 5 to dE / 40, a factor 4 per halving), equal
to it when O(sigma) (levels sparser than sigma); it underestimates in between (halves of
14 sites: changes of 3-6e-3 per halving down to dE / 80, a drift of 0.02 from dE / 10)
and for an isolated level much closer than sigma to an edge. Check by a smaller
``smoothing``. A rigorous bound: with
g_a = 1_a * Gaussian, sum_a |g_a(E) - 1_a(E)| <= sum_x exp(-(E - x)^2 / 2 sigma^2) over
the bin edges x (Gaussian tail bound erfc(u / sqrt 2) / 2 <= exp(-u^2 / 2) / 2), so
||p_sigma - p||_1 <= eps = sum_x <exp(-(E_R - x)^2 / 2 sigma^2)> over the edges of both
regions (each from the marginal characteristic function on the same grid); then, with
T = eps / 2 + the leaked mass, |S_obs - exact| <= T ln(d - 1) + h(T) + T (max ln V -
min ln V) (continuity of the Shannon entropy, K. M. R. Audenaert, J. Phys. A 40, 8127
(2007); d the number of outcomes with levels, h the binary entropy). It is first order
in sigma, so useful for small regions with no level near an edge and loose for large
ones. Smoothed probability in bins without levels (next to gaps and the spectral
edges) is left out and reported as ``leaked_mass``; the rest renormalised.

Cost: K + 1 solves of size n_A and (K + 1)(2 K + 1) determinants of size n_B
(K = CUTOFF T / (2 pi sigma), chi(-s) = conj chi(s) halves the grid): grows like
sigma^-2; 11 s for 32 + 32 sites and sigma = dE / 10 on a shared core (load 4); plus the
counts.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mpsobs.chain.coarse import WideEnergyRegions
from mpsobs.core.errors import InputError, finite_number
from mpsobs.estimators.estimate import pruned_entropy_bound
from mpsobs.references.gaussian import QuadraticHamiltonian, _check_corr, quadratic_hamiltonian

__all__ = ["level_counts", "region_hamiltonians", "characteristic_function",
           "RegionEnergyReference", "free_region_energy_entropy", "MAX_MODES", "CUTOFF",
           "DEFAULT_SMOOTHING"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

#: Largest region (sites = modes) whose levels :func:`level_counts` counts.
MAX_MODES = 40
#: The grid reaches |s| sigma = CUTOFF; the aliasing margin is CUTOFF widths of the
#: coarser window (2 sigma) on each side. exp(-CUTOFF^2 / 2) ~ 1e-14.
CUTOFF = 8.0
#: Default smoothing width, in bin widths.
DEFAULT_SMOOTHING = 0.1
#: Bins whose probability is below this are left out (round-off of the inversion).
PROBABILITY_FLOOR = 1e-14
#: Largest condition number of the A block for which chi goes through its Schur
#: complement (n_B x n_B determinants); beyond, the full determinant.
SCHUR_CONDITION = 1e8
#: Grid points of s_B handled in one batch of determinants.
_BATCH = 512


def _subset_sums(energies: np.ndarray) -> np.ndarray:
    sums = np.zeros(1)
    for e in energies:
        sums = np.concatenate([sums, sums + e])
    return sums


def _level_range(energies: np.ndarray, offset: float) -> tuple[float, float]:
    """Lowest and highest level: offset + the sum of the negative (positive) energies."""
    return offset + energies[energies < 0].sum(), offset + energies[energies > 0].sum()


def level_counts(energies, offset: float, bin_width: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact number of levels offset + sum_{k in S} e_k (S any subset) in each bin
    b = floor(E / bin_width), by meet-in-the-middle (module docstring).

    Returns ``(bins, counts)``: consecutive integer bins from the lowest level's to the
    highest level's, and the int64 counts (zeros for bins inside gaps); they sum to
    2^n. Cost O(2^(n/2) n_bins n); n <= MAX_MODES.
    """
    try:
        e = np.asarray(energies, dtype=float)
    except (TypeError, ValueError):
        e = np.empty((0, 0))
    if e.ndim != 1 or e.size < 1 or not np.all(np.isfinite(e)):
        raise InputError(f"energies: expected a non-empty 1-d array of finite single-particle "
                         f"energies, got {energies!r}")
    if e.size > MAX_MODES:
        raise InputError(f"energies: exact counts handle at most {MAX_MODES} modes "
                         f"(sites of a region), got {e.size}")
    offset = finite_number(offset, "offset")
    bin_width = finite_number(bin_width, "bin_width")
    if bin_width <= 0:
        raise InputError(f"bin_width: expected a positive number, got {bin_width!r}")
    low, high = _level_range(e, offset)
    bins = np.arange(int(np.floor(low / bin_width)), int(np.floor(high / bin_width)) + 1)
    half = e.size // 2
    first = _subset_sums(e[:half])
    second = np.sort(_subset_sums(e[half:]))
    edges = np.append(bins, bins[-1] + 1) * bin_width - offset
    below = np.array([np.searchsorted(second, x - first, side="left").sum() for x in edges],
                     dtype=np.int64)
    return bins, np.diff(below)


def region_hamiltonians(cg: WideEnergyRegions) -> tuple[QuadraticHamiltonian, ...]:
    """The quadratic forms of H_A and H_B (region's own site order, offsets E_R)."""
    return tuple(quadratic_hamiltonian(cg.model.restricted(x, y)) for x, y in cg.regions)


def _mode_correlation(corr: np.ndarray, cg: WideEnergyRegions,
                      hams: tuple[QuadraticHamiltonian, ...]) -> np.ndarray:
    """W^dagger C_RR^T W: C^T on the sites of the regions, in the regions' modes."""
    sites = np.concatenate([np.arange(x, y) for x, y in cg.regions])
    n_a = hams[0].L
    w = np.zeros((len(sites), len(sites)), dtype=complex)
    w[:n_a, :n_a] = hams[0].modes
    w[n_a:, n_a:] = hams[1].modes
    return w.conj().T @ corr[np.ix_(sites, sites)].T @ w


def characteristic_function(corr, cg: WideEnergyRegions, s_a, s_b) -> np.ndarray:
    """chi(s_A, s_B) = <exp(i s_A H_A + i s_B H_B)> of the Gaussian state with
    correlation matrix ``corr`` (C_ij = <c_i^dagger c_j>), on the grid ``s_a`` x ``s_b``
    (module docstring). Returns a (len(s_a), len(s_b)) complex array. Cost about
    len(s_a) len(s_b) n_B^3 / 3 flops."""
    c = _check_corr(corr)
    if c.shape[0] != cg.L:
        raise InputError(f"corr: shape {c.shape} does not match the chain (L = {cg.L})")
    hams = region_hamiltonians(cg)
    return _characteristic(_mode_correlation(c, cg, hams), hams,
                           np.atleast_1d(np.asarray(s_a, dtype=float)),
                           np.atleast_1d(np.asarray(s_b, dtype=float)))


def _determinants(blocks: np.ndarray) -> np.ndarray:
    sign, logdet = np.linalg.slogdet(blocks)
    return sign * np.exp(logdet)


def _characteristic(g: np.ndarray, hams: tuple[QuadraticHamiltonian, ...],
                    s_a: np.ndarray, s_b: np.ndarray) -> np.ndarray:
    """det(1 + Delta g), Delta = diag(e^{i s_A e_A} - 1, e^{i s_B e_B} - 1), for every
    (s_A, s_B): per s_A the Schur complement of the A block (one solve), then a batch of
    n_B x n_B determinants over s_B; rows whose A block has a condition number above
    SCHUR_CONDITION use the full (n_A + n_B) determinants instead."""
    n_a = hams[0].L
    g_aa, g_ab, g_ba, g_bb = g[:n_a, :n_a], g[:n_a, n_a:], g[n_a:, :n_a], g[n_a:, n_a:]
    eye = np.eye(g.shape[0])
    out = np.empty((len(s_a), len(s_b)), dtype=complex)
    phase_b = np.exp(1j * np.outer(s_b, hams[1].energies)) - 1.0   # (len(s_b), n_B)
    for i, sa in enumerate(s_a):
        da = np.exp(1j * sa * hams[0].energies) - 1.0
        block = eye[:n_a, :n_a] + da[:, None] * g_aa
        schur = None
        if np.linalg.cond(block) <= SCHUR_CONDITION:
            schur = g_bb - g_ba @ np.linalg.solve(block, da[:, None] * g_ab)
            det_a = np.linalg.det(block)
        for start in range(0, len(s_b), _BATCH):
            pb = phase_b[start:start + _BATCH]
            if schur is not None:
                dets = det_a * _determinants(eye[n_a:, n_a:] + pb[:, :, None] * schur)
            else:
                scale = np.concatenate([np.broadcast_to(da, (len(pb), n_a)), pb], axis=1)
                dets = _determinants(eye + scale[:, :, None] * g)
            out[i, start:start + _BATCH] = dets
    offsets = np.exp(1j * (np.outer(s_a, [hams[0].offset]) + np.outer([hams[1].offset], s_b)))
    return out * offsets


@dataclass(frozen=True)
class _Grid:
    """The s grid of one region and the bins its energies can fall in."""

    bins: np.ndarray
    step: float
    points: int   # s_k = k step, k = 0 .. points - 1 (region A) or -(points-1) .. (B)


def _grid(ham: QuadraticHamiltonian, bins: np.ndarray, bin_width: float,
          sigma: float) -> _Grid:
    low, high = _level_range(ham.energies, ham.offset)
    lo_edge, hi_edge = bins[0] * bin_width, (bins[-1] + 1) * bin_width
    period = max(hi_edge - low, high - lo_edge) + 2 * CUTOFF * (2 * sigma)
    step = 2 * np.pi / period
    return _Grid(bins, step, int(np.ceil(CUTOFF / sigma / step)) + 1)


def _bin_transforms(grid: _Grid, s: np.ndarray, bin_width: float) -> np.ndarray:
    """conj(I_b(s)) step / (2 pi): (n_bins, len(s))."""
    centres = (grid.bins + 0.5) * bin_width
    ind = bin_width * np.sinc(s * bin_width / (2 * np.pi)) * np.exp(1j * np.outer(centres, s))
    return ind.conj() * grid.step / (2 * np.pi)


@dataclass(frozen=True, eq=False)
class RegionEnergyReference:
    """Exact (up to ``error``) S_obs of the energies of two regions of a Gaussian state.

    ``probabilities[i, j]`` is p(bins_a[i], bins_b[j]) at smoothing width ``smoothing``
    (clipped at 0, bins without levels set to 0, renormalised); ``counts_a`` and
    ``counts_b`` the exact numbers of levels per bin (Omega_A, Omega_B).
    ``smoothing_err`` = |S_obs(sigma) - S_obs(2 sigma)|, ``leaked_mass`` the probability
    the smoothing put into bins without levels, ``error`` = smoothing_err + the entropy
    bound of the leaked mass (:func:`mpsobs.estimators.estimate.pruned_entropy_bound`):
    an estimate for large regions; ``bound`` the rigorous first-order bound on
    |entropy - exact| (module docstring), ``edge_mass`` its eps.
    ``total_defect`` = sum of the unclipped probabilities - 1 (inversion round-off).
    """

    entropy: float
    error: float
    bound: float
    edge_mass: float
    smoothing_err: float
    leaked_mass: float
    total_defect: float
    smoothing: float
    bins_a: np.ndarray
    bins_b: np.ndarray
    counts_a: np.ndarray
    counts_b: np.ndarray
    probabilities: np.ndarray

    def __repr__(self) -> str:
        return (f"RegionEnergyReference(S_obs={self.entropy:.6f} +- {self.error:.2g} "
                f"(bound {self.bound:.2g}), "
                f"{len(self.bins_a)} x {len(self.bins_b)} bins, sigma={self.smoothing:.3g}, "
                f"leaked {self.leaked_mass:.2g})")


def _edge_mass(chi: np.ndarray, s: np.ndarray, grid: _Grid, bin_width: float,
               sigma: float) -> float:
    """sum over the bin edges x of <exp(-(E - x)^2 / 2 sigma^2)>, from the marginal
    characteristic function on the grid ``s`` (weights as in the inversion)."""
    edges = np.append(grid.bins, grid.bins[-1] + 1) * bin_width
    kernel = np.exp(-1j * np.outer(edges, s) - (sigma * s) ** 2 / 2)
    density = (kernel @ chi).real * grid.step / (2 * np.pi)
    return float(np.sqrt(2 * np.pi) * sigma * np.clip(density, 0.0, None).sum())


def _continuity_bound(distance: float, log_v: np.ndarray) -> float:
    """Largest change of -sum p ln(p / V) between distributions at total-variation
    distance ``distance`` on the outcomes with levels (Audenaert's bound on the Shannon
    part, the spread of ln V on the Boltzmann part)."""
    finite = log_v[np.isfinite(log_v)]
    d = finite.size
    t = min(distance, 1.0 - 1.0 / d)
    if t <= 0.0:
        return 0.0
    binary = -t * np.log(t) - (1 - t) * np.log1p(-t)
    return float(t * np.log(d - 1) + binary + t * (finite.max() - finite.min()))


def _entropy(p: np.ndarray, log_v: np.ndarray) -> tuple[float, float, np.ndarray]:
    """S_obs of the smoothed p, the mass left out in bins without levels, the kept p."""
    p = np.clip(p, 0.0, None)
    live = (p > PROBABILITY_FLOOR) & np.isfinite(log_v)
    leaked = float(p[~live & np.isinf(log_v)].sum() / p.sum())
    kept = np.where(live, p, 0.0)
    kept /= kept.sum()
    pl = kept[live]
    return float(-np.sum(pl * (np.log(pl) - log_v[live]))), leaked, kept


def free_region_energy_entropy(corr, cg: WideEnergyRegions, *,
                               smoothing: float | None = None) -> RegionEnergyReference:
    """S_obs of the energies of the two regions of ``cg`` in the Gaussian state with
    correlation matrix ``corr`` (C_ij = <c_i^dagger c_j>, site 0 first; e.g. from
    :func:`mpsobs.gaussian.evolve_correlation`), for an XX chain ``cg.model``.

    ``smoothing``: width sigma of the Gaussian that smooths the bin edges (default
    DEFAULT_SMOOTHING bin widths); the cost grows like sigma^-2. Regions of at most
    MAX_MODES sites. See the module docstring for the method, errors and cost.
    """
    if not isinstance(cg, WideEnergyRegions):
        raise InputError(f"coarse_graining: expected wide energy regions from "
                         f"mpsobs.coarse.blocks, got {type(cg).__name__}")
    c = _check_corr(corr)
    if c.shape[0] != cg.L:
        raise InputError(f"corr: shape {c.shape} does not match the chain (L = {cg.L})")
    if len(cg.regions) != 2:
        raise InputError(f"regions: the free-fermion reference handles two regions, got "
                         f"{len(cg.regions)}")
    width = cg.bin_width
    sigma = DEFAULT_SMOOTHING * width if smoothing is None else finite_number(smoothing,
                                                                             "smoothing")
    if sigma <= 0:
        raise InputError(f"smoothing: expected a positive width, got {smoothing!r}")
    if max(y - x for x, y in cg.regions) > MAX_MODES:
        raise InputError(f"regions: exact level counts handle regions of at most "
                         f"{MAX_MODES} sites, got {list(cg.regions)}")
    hams = region_hamiltonians(cg)
    counts = [level_counts(h.energies, h.offset, width) for h in hams]
    grids = [_grid(h, bins, width, sigma) for h, (bins, _) in zip(hams, counts, strict=True)]
    s_a = np.arange(grids[0].points) * grids[0].step
    s_b = np.arange(-grids[1].points + 1, grids[1].points) * grids[1].step
    chi = _characteristic(_mode_correlation(c, cg, hams), hams, s_a, s_b)
    # chi(-s) = conj chi(s): the rows s_A > 0 stand for their mirror images too.
    chi[1:] *= 2.0
    fa = _bin_transforms(grids[0], s_a, width)
    fb = _bin_transforms(grids[1], s_b, width)
    edge_mass = (_edge_mass(chi[:, grids[1].points - 1], s_a, grids[0], width, sigma)
                 + _edge_mass(chi[0], s_b, grids[1], width, sigma))
    with np.errstate(divide="ignore"):
        log_v = np.log(counts[0][1].astype(float))[:, None] + np.log(counts[1][1])[None, :]

    def smoothed(width_sigma: float) -> np.ndarray:
        wa = fa * np.exp(-(width_sigma * s_a) ** 2 / 2)
        wb = fb * np.exp(-(width_sigma * s_b) ** 2 / 2)
        return (wa @ chi @ wb.T).real

    p = smoothed(sigma)
    defect = float(p.sum() - 1.0)
    entropy, leaked, kept = _entropy(p, log_v)
    coarse_entropy, _, _ = _entropy(smoothed(2 * sigma), log_v)
    smoothing_err = abs(entropy - coarse_entropy)
    error = smoothing_err + pruned_entropy_bound(leaked, cg.max_entropy)
    bound = _continuity_bound(edge_mass / 2 + leaked, log_v)
    return RegionEnergyReference(entropy, error, bound, edge_mass, smoothing_err, leaked,
                                 defect, sigma,
                                 counts[0][0], counts[1][0], counts[0][1], counts[1][1], kept)
