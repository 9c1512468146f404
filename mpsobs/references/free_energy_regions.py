"""Exact observational entropy of the energies of two or three regions of a free-fermion
chain.

The reference for :class:`mpsobs.coarse.WideEnergyRegions` on XX chains (xxz with
delta = 0, any fields) in a Gaussian state: regions R_1..R_m (m = 2: A, B; m = 3: A, C,
B), outcomes b = (b_1, .., b_m), b_k = floor(E_k / dE), p(b) = <prod_k P_k(b_k)>,
V(b) = prod_k Omega_k(b_k) and S_obs = -sum p ln(p / V) (natural logarithms).

Regional Hamiltonians. H_R (the terms wholly inside a contiguous region R) is quadratic
in the Jordan-Wigner fermions of R (the strings of adjacent sites cancel, also when R
does not start at site 0): H_R = sum_k e_k eta_k^dagger eta_k + E_R with the
single-particle energies e_k of R's hopping matrix and offset E_R
(:func:`mpsobs.gaussian.quadratic_hamiltonian` of ``model.restricted``). Its 2^n
eigenvalues are E_R + the sums of the subsets of {e_k}. The H_R of disjoint regions
commute (even in the fermions, on disjoint sites).

Volumes (exact integer counts): :func:`level_counts` counts the subset sums in each bin
by meet-in-the-middle (Horowitz and Sahni, J. ACM 21, 277 (1974)): the 2^(n/2) sums of
each half of the modes, one half sorted, and for every bin edge x the number of pairs
with s_1 + s_2 < x by a binary search per s_1. The counts are exact integers; the only
error is a level within floating-point rounding (~1e-13 of the region's energy scale)
of a bin edge. Cost O(2^(n/2) n_edges n) time, O(2^(n/2)) memory; n <= MAX_MODES. The
volume of an outcome is the product of its regions' counts.

Probabilities (characteristic function). For a Gaussian state with C_ij = <c_i^dagger c_j>,

    chi(s_1, .., s_m) = <exp(i sum_k s_k H_k)>
                      = exp(i sum_k s_k E_k) det(1 + (exp(i h(s)) - 1) C^T),

h(s) = s_1 T_1 (+) .. (+) s_m T_m on the sites of the regions (Klich's trace formula,
I. Klich, "Full counting statistics: an elementary derivation of Levitov's formula", in
Quantum Noise in Mesoscopic Physics, ed. Yu. V. Nazarov (Kluwer, 2003),
arXiv:cond-mat/0209642, book details from memory; as full counting statistics,
Phys. Rev. Lett. 102, 100502 (2009)). In the modes of the T_k the matrix exp(i h) - 1 is
diagonal, so each point is one determinant of size sum_k n_k with the rows of C^T (in
the mode basis) scaled. :func:`_dets` takes the regions widest first and peels them off
by Schur complements: det(first block) times the determinant of its Schur complement,
whose first block is the next region's, down to batched determinants of the narrowest
region (the outer blocks are shared by a whole row, plane, of the grid).
The bin probabilities follow from an m-D Fourier inversion against the bin indicators
smoothed by a Gaussian of width ``smoothing`` = sigma in each energy:

    p_sigma(b) = sum_{k_1..k_m} chi(s_k) prod_j (ds_j / 2 pi) conj(I_(b_j)(s_(k_j)))
                 exp(-sigma^2 s_(k_j)^2 / 2),

I_a(s) = int_{a dE}^{(a+1) dE} e^{i s E} dE, on the grid s_k = k ds, |s_k| <= CUTOFF /
sigma, accumulated row by row of the first axis (memory: one (2K + 1)^(m-1) row).
Errors: (1) truncation of the grid, of order exp(-CUTOFF^2 / 2); (2) aliasing: the
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
||p_sigma - p||_1 <= eps = sum_x <exp(-(E_R - x)^2 / 2 sigma^2)> over the edges of all
regions (each from the marginal characteristic function on the same grid); then, with
T = eps / 2 + the leaked mass, |S_obs - exact| <= T ln(d - 1) + h(T) + T (max ln V -
min ln V) (continuity of the Shannon entropy, K. M. R. Audenaert, J. Phys. A 40, 8127
(2007); d the number of outcomes with levels, h the binary entropy). It is first order
in sigma, so useful for small regions with no level near an edge and loose for large
ones. Smoothed probability in bins without levels (next to gaps and the spectral
edges) is left out and reported as ``leaked_mass``; the rest renormalised.

Cost: with K_k = CUTOFF T_k / (2 pi sigma) grid points per side for region k
(chi(-s) = conj chi(s) halves the first axis), K_1 prod_(k>1) (2 K_k + 1) determinants
of the narrowest region's size n plus the Schur complements of the others (one solve of
size n_k per grid point of the axes before it): grows like sigma^-m. Two regions, 32 + 32
sites, sigma = dE / 10: 2.2e5 determinants, 5.6 s CPU; three regions, 21 + 22 + 21 sites,
sigma = dE / 4: 6.9e6 determinants of size 21, 82 s CPU (one core, 2026-12-03); at
sigma = dE / 10 5.3e7 determinants. Plus the counts.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla

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
#: Matrix entries of one batch of determinants (32 MB of complex numbers).
_CHUNK_ENTRIES = 2**21


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
    """The quadratic forms of the regions' H_R (region's own site order, offsets E_R),
    in the order of ``cg.regions``."""
    return tuple(quadratic_hamiltonian(cg.model.restricted(x, y)) for x, y in cg.regions)


def _mode_correlation(corr: np.ndarray, regions, hams) -> np.ndarray:
    """W^dagger C_RR^T W: C^T on the sites of ``regions`` (in the order given), in their
    modes (W = the block-diagonal matrix of the regions' mode vectors ``hams``)."""
    sites = np.concatenate([np.arange(x, y) for x, y in regions])
    w = sla.block_diag(*(h.modes for h in hams))
    return w.conj().T @ corr[np.ix_(sites, sites)].T @ w


def _determinant_order(regions) -> list[int]:
    """The order in which the determinants take the regions: widest first, so that the
    batched determinants of the innermost level are those of the narrowest region."""
    return sorted(range(len(regions)), key=lambda k: regions[k][0] - regions[k][1])


def _ordered_rows(corr: np.ndarray, cg: WideEnergyRegions, hams, axes, order):
    """:func:`_characteristic_rows` with the regions taken in ``order``."""
    regions = [cg.regions[k] for k in order]
    ordered = [hams[k] for k in order]
    return _characteristic_rows(_mode_correlation(corr, regions, ordered), ordered,
                                [axes[k] for k in order])


def characteristic_function(corr, cg: WideEnergyRegions, *angles) -> np.ndarray:
    """chi(s_1, .., s_m) = <exp(i sum_R s_R H_R)> of the Gaussian state with correlation
    matrix ``corr`` (C_ij = <c_i^dagger c_j>) on the grid ``angles[0]`` x .. x
    ``angles[m-1]``, one 1-d array of angles s_R per region of ``cg`` in its order
    (module docstring). Returns a complex array of shape (len(s_1), .., len(s_m)). Cost
    about prod_R len(s_R) n^3 / 3 flops (n the sites of the narrowest region)."""
    c = _check_corr(corr)
    if c.shape[0] != cg.L:
        raise InputError(f"corr: shape {c.shape} does not match the chain (L = {cg.L})")
    if len(angles) != len(cg.regions):
        raise InputError(f"angles: expected one array of angles per region "
                         f"({len(cg.regions)}), got {len(angles)}")
    hams = region_hamiltonians(cg)
    axes = [np.atleast_1d(np.asarray(s, dtype=float)) for s in angles]
    order = _determinant_order(cg.regions)
    chi = np.stack(list(_ordered_rows(c, cg, hams, axes, order)))
    return chi.transpose(np.argsort(order))


def _determinants(blocks: np.ndarray) -> np.ndarray:
    sign, logdet = np.linalg.slogdet(blocks)
    return sign * np.exp(logdet)


def _product_phases(phases: list[np.ndarray]) -> np.ndarray:
    """The diagonals of Delta on the product grid of the regions' angles: rows in C order
    (first region slowest), columns the modes of all regions."""
    rows = np.zeros((1, 0), dtype=complex)
    for d in phases:
        rows = np.concatenate([np.repeat(rows, len(d), axis=0),
                               np.tile(d, (len(rows), 1))], axis=1)
    return rows


def _dets(g: np.ndarray, phases: list[np.ndarray]) -> np.ndarray:
    """det(1 + Delta g_b) for a stack g (B, n, n) and Delta = diag(d_1, .., d_m) on the
    product grid of the rows of ``phases`` (d_k = phases[k][i], shape (K_k, n_k), the
    modes of region k; n = sum n_k). Returns (B, K_1, .., K_m).

    With more than one region left: the Schur complement of the first region's block,
    det(1 + Delta g) = det(1 + d_1 g_11) det(1 + Delta' S),
    S = g_rr - g_r1 (1 + d_1 g_11)^-1 d_1 g_1r, for all (b, i) at once, then the rest by
    recursion; entries whose block has a condition number above SCHUR_CONDITION take
    the full determinants on the remaining grid instead."""
    first, rest = phases[0], phases[1:]
    n1 = first.shape[1]
    if not rest:
        pairs = len(g) * len(first)
        chunk = max(1, _CHUNK_ENTRIES // (n1 * n1))
        out = np.empty(pairs, dtype=complex)
        for k in range(0, pairs, chunk):
            b, i = np.divmod(np.arange(k, min(k + chunk, pairs)), len(first))
            out[k:k + chunk] = _determinants(np.eye(n1) + first[i, :, None] * g[b])
        return out.reshape(len(g), len(first))
    blocks = (np.eye(n1) + first[None, :, :, None] * g[:, None, :n1, :n1]).reshape(-1, n1, n1)
    shape = (len(g), len(first), *(len(d) for d in rest))
    out = np.empty((len(blocks), *shape[2:]), dtype=complex)
    good = np.linalg.cond(blocks) <= SCHUR_CONDITION
    if good.any():
        b_idx, i_idx = np.divmod(np.flatnonzero(good), len(first))
        right = first[i_idx, :, None] * g[b_idx, :n1, n1:]
        schur = g[b_idx, n1:, n1:] - g[b_idx, n1:, :n1] @ np.linalg.solve(blocks[good], right)
        det_first = _determinants(blocks[good]).reshape(-1, *[1] * len(rest))
        out[good] = det_first * _dets(schur, rest)
    for j in np.flatnonzero(~good):
        b, i = divmod(int(j), len(first))
        full = _dets(g[b:b + 1], [_product_phases([first[i:i + 1], *rest])])
        out[j] = full.reshape(shape[2:])
    return out.reshape(shape)


def _characteristic_rows(g: np.ndarray, hams: tuple[QuadraticHamiltonian, ...],
                         axes: list[np.ndarray]):
    """Yield chi(s_1, ., .., .) for each angle s_1 of the first region in turn: det(1 +
    Delta g) times the offsets' phase, Delta = diag(e^{i s_R e_R} - 1) (:func:`_dets`),
    an array of shape (len(s_2), .., len(s_m))."""
    phases = [np.exp(1j * np.outer(s, h.energies)) - 1.0 for s, h in zip(axes, hams,
                                                                          strict=True)]
    offset = np.ones((), dtype=complex)
    for s, h in zip(axes[1:], hams[1:], strict=True):
        offset = np.multiply.outer(offset, np.exp(1j * s * h.offset))
    for s1, d1 in zip(axes[0], phases[0], strict=True):
        row = _dets(g[None], [d1[None], *phases[1:]])[0, 0]
        yield row * offset * np.exp(1j * s1 * hams[0].offset)


@dataclass(frozen=True)
class _Grid:
    """The s grid of one region and the bins its energies can fall in."""

    bins: np.ndarray
    step: float
    points: int   # s_k = k step, k = 0 .. points - 1 (first region) or -(points-1) .. (others)

    def angles(self, first: bool) -> np.ndarray:
        """The angles s_k: k >= 0 for the first region (chi(-s) = conj chi(s) stands for
        the rest), both signs for the others (s = 0 at index points - 1)."""
        return np.arange(0 if first else -self.points + 1, self.points) * self.step


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
    """Exact (up to ``error``) S_obs of the energies of two or three regions of a Gaussian
    state.

    ``bins[k]`` and ``counts[k]`` are the bins of region k (in the order of the regions)
    and the exact numbers of its levels per bin (Omega_k); ``probabilities[i, j(, l)]``
    is p(bins[0][i], bins[1][j](, bins[2][l])) at smoothing width ``smoothing``
    (clipped at 0, bins without levels set to 0, renormalised).
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
    bins: tuple[np.ndarray, ...]
    counts: tuple[np.ndarray, ...]
    probabilities: np.ndarray

    def __repr__(self) -> str:
        shape = " x ".join(str(len(b)) for b in self.bins)
        return (f"RegionEnergyReference(S_obs={self.entropy:.6f} +- {self.error:.2g} "
                f"(bound {self.bound:.2g}), {shape} bins, sigma={self.smoothing:.3g}, "
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
    """S_obs of the energies of the two or three regions of ``cg`` in the Gaussian state
    with correlation matrix ``corr`` (C_ij = <c_i^dagger c_j>, site 0 first; e.g. from
    :func:`mpsobs.gaussian.evolve_correlation`), for an XX chain ``cg.model``.

    ``smoothing``: width sigma of the Gaussian that smooths the bin edges (default
    DEFAULT_SMOOTHING bin widths); the cost grows like sigma^-m for m regions. Regions of
    at most MAX_MODES sites. See the module docstring for the method, errors and cost.
    """
    if not isinstance(cg, WideEnergyRegions):
        raise InputError(f"coarse_graining: expected wide energy regions from "
                         f"mpsobs.coarse.blocks, got {type(cg).__name__}")
    c = _check_corr(corr)
    if c.shape[0] != cg.L:
        raise InputError(f"corr: shape {c.shape} does not match the chain (L = {cg.L})")
    if tuple(cg.observables) != ("energy",):
        raise InputError(f"sequence: the free-fermion reference computes the energies "
                         f"alone, got {' then '.join(cg.observables)}")
    if len(cg.regions) not in (2, 3):
        raise InputError(f"regions: the free-fermion reference handles two or three regions, "
                         f"got {len(cg.regions)}")
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
    order = _determinant_order(cg.regions)   # all axes below in this order
    axes = [grid.angles(first=k == order[0]) for k, grid in enumerate(grids)]
    transforms = [_bin_transforms(grids[k], axes[k], width) for k in order]
    widths = (sigma, 2 * sigma)
    windows = [[f * np.exp(-(w * axes[k]) ** 2 / 2) for f, k in zip(transforms, order,
                                                                       strict=True)]
               for w in widths]
    sums = [np.zeros(tuple(len(counts[k][0]) for k in order), dtype=complex) for _ in widths]
    centre = tuple(grids[k].points - 1 for k in order[1:])   # s = 0 on the other axes
    first_line, other_lines = [], []
    for i, row in enumerate(_ordered_rows(c, cg, hams, axes, order)):
        # chi(-s) = conj chi(s): the rows s_1 > 0 stand for their mirror images too.
        weight = 1.0 if i == 0 else 2.0
        first_line.append(weight * row[centre])
        if i == 0:
            other_lines = [row[centre[:k] + (slice(None),) + centre[k + 1:]]
                           for k in range(len(centre))]
        for total, window in zip(sums, windows, strict=True):
            inner = row
            for w in window[1:]:
                inner = np.tensordot(inner, w, axes=(0, 1))
            total += weight * np.multiply.outer(window[0][:, i], inner)
    edge_mass = sum(_edge_mass(np.asarray(line), axes[k], grids[k], width, sigma)
                    for line, k in zip([first_line, *other_lines], order, strict=True))
    log_v = np.zeros(())
    with np.errstate(divide="ignore"):
        for _, cnt in counts:
            log_v = np.add.outer(log_v, np.log(cnt.astype(float)))
    p, p_coarse = (total.real.transpose(np.argsort(order)) for total in sums)
    defect = float(p.sum() - 1.0)
    entropy, leaked, kept = _entropy(p, log_v)
    coarse_entropy, _, _ = _entropy(p_coarse, log_v)
    smoothing_err = abs(entropy - coarse_entropy)
    error = smoothing_err + pruned_entropy_bound(leaked, cg.max_entropy)
    bound = _continuity_bound(edge_mass / 2 + leaked, log_v)
    return RegionEnergyReference(entropy, error, bound, edge_mass, smoothing_err, leaked,
                                 defect, sigma, tuple(b for b, _ in counts),
                                 tuple(n for _, n in counts), kept)
