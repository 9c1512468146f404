"""Observational entropy of the joint number and energy of two or three large regions of
an MPS.

The coarse-graining (:class:`mpsobs.coarse.WideEnergyRegions` with ``observables``
("number", "energy") or ("energy", "number"), for a number-conserving model) asks of the
left part A = sites 0 .. c - 1 and of the right part B = c .. L - 1 the number n_R of
sites in |1> and the energy bin b_R = floor(E_R / dE) of H_R (the model's terms wholly
inside R). N_R commutes with H_R, so the order of the two changes only the order of the
outcome columns. Outcomes (n_A, b_A, n_B, b_B) have

    p = <psi| P_A(n_A) P_A(b_A) P_B(n_B) P_B(b_B) |psi>,
    V = Omega_A(n_A, b_A) Omega_B(n_B, b_B),

Omega_R(n, b) the number of eigenvalues of H_R in the number-n sector in bin b.

Probabilities: the kernel polynomial method of :mod:`mpsobs.estimators.wide_energy`
(Rev. Mod. Phys. 78, 275 (2006)) resolved by the number.
- A pure state with a definite total number N: in a bond basis of definite charges
  (:func:`mpsobs.mps.charges.definite_charges`, U(1) MPS: Phys. Rev. B 83, 115125
  (2011)) the mixed-canonical form at the cut is computed charge block by charge block,
  so every Schmidt vector |L_a> has a definite number n_a of A and |R_a> the number
  N - n_a. H_A conserves the number, so the moment matrices M^A_k[a, b] = <L_a|
  T_k(Ht_A) |L_b> (and M^B) are block-diagonal in the charge and P_A(n) keeps the block
  n_a = n: mu_km(n) = sum over a, b of charge n of lambda_a lambda_b M^A_k[a, b]
  M^B_m[a, b], p(n, b_A, N - n, b_B) = C_A mu(n) C_B^T. The Chebyshev runs are those of
  the energy alone; the extra work is the charged split (L chi^3 d).
- A purification (a Gibbs state, :class:`mpsobs.mps.PurifiedMPS`): its bonds carry the
  charge n_spin - n_ancilla, not the number of the spins of a region, so the number is
  resolved by phases instead, P_R(n) = (1 / K) sum_j e^(-i t_j n) e^(i t_j N_R), t_j =
  2 pi j / K, K = n_R + 1 sites of R plus one (exact for 0 <= n <= n_R): the moments
  <L_a| e^(i t N_A) T_k(Ht_A) |L_b> of all K phases come from the same Chebyshev
  vectors (e^(i t N_A) commutes with H_A; :func:`mpsobs.chebyshev.commuting_moments`),
  each overlap K times (K n d chi^3 instead of n d chi^3), and mu is formed for every
  pair (n_A, n_B): K_A K_B N^2 chi^2 flops and K N chi^2 numbers per region.
Negative values of the damped series are set to zero and p renormalised.

Volumes Omega_R(n, b) (the number of eigenvalues of H_R in the number-n sector in bin b):
exact counts up to ``exact_sites`` sites, else reweighted from grand-canonical Gibbs
references (:mod:`mpsobs.estimators.wide_number_sectors`, which also holds the phase
resolution).

Error (``method_err``, an estimate, not a bound): as in
:mod:`mpsobs.estimators.wide_energy`, the larger of the change of S_obs when the moments
are halved (divided by sqrt(2) - 1) and the edge part (at the energy bin edges of each
number sector), plus the changes when the compression bond is halved (state and
references) and the sub-bins are halved; ``pruned_mass`` the probability the smoothed
series puts into (n, b) without eigenvalues (exact-count regions) or without a positive
reweighted volume.

Cost: the Chebyshev runs of the energy alone (two per region, bonds D and D / 2, N / 2
compressions of about 3 n d ((w + 1) D)^3 each), plus for each wide region three Gibbs
references with Newton builds at NEWTON_BOND and two builds and phase-resolved runs
(K phases, d = 4) at D and D / 2.

Three regions A, C, B (cuts c, e): outcomes (n_A, b_A, n_C, b_C, n_B, b_B), V the product
of the three Omega_R(n, b). With psi = sum_ab |L_a> |X_ab> |R_b> (L_a, R_b orthonormal,
X_ab the middle block with both bonds open, as :mod:`mpsobs.estimators.wide_energy`):
- a pure state of definite number N is split charge block by charge block at c, and the
  right-canonical basis at e has definite charges, so L_a has a definite n_A, R_b a
  definite n_B and X_ab the number n_C = N - n_A - n_B;
- a purification resolves n_A and n_B by the phases of its outer regions as above and
  n_C by n_C + 1 phases e^(i t N_C) inside the middle sweep.
The outer regions' sector moment matrices are contracted with their bin weights first,
on the grid of the sectors and bins where the region's marginal P(n, b) (from its moments
and the Gram matrix of the vectors at its open bond) exceeds PROBABILITY_FLOOR: one
matrix per (n, b) for the weights at N, at N / 2 and for the edge windows at N ("main",
"half", "edge"). These stacks start the middle sweep of
:func:`mpsobs.chebyshev.moment_tensor` (K phases x rows environments), closed with the
right stack for the pairs main-main, half-half, edge-main and main-edge; the middle's
Chebyshev orders are summed with its bin weights (at N, N / 2 and its edge windows) as
they come (:func:`mpsobs.chebyshev.chebyshev_series`), so that the N^3 moments are never
held. The outcome grid is (live n_A, b_A) x (n_C, b_C) x (live n_B, b_B), with one n_C
slot for a pure state (:class:`_MiddleNumbers`); an evaluation whose arrays would exceed
MAX_THREE_REGION_BYTES raises TooLargeError. Memory about 16 K (rows_C) (rows_A)
(rows_B) bytes per pair; cost per middle
overlap 2 K rows_A n_C d D^3 (rows_A = 3 x the live (n_A, b_A) pairs), N of them, plus
the Chebyshev runs of the outer regions and the references of every wide region. The
error is that of two regions with the edge part summed over the three regions' edges.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from mpsobs.chain.coarse import WideEnergyRegions
from mpsobs.core.errors import InputError, TooLargeError
from mpsobs.core.threads import limits_threads, state_size
from mpsobs.estimators import chebyshev
from mpsobs.estimators.estimate import canonical_state
from mpsobs.estimators.result import EntropyResult, OutcomeDistribution
from mpsobs.estimators.wide_energy import (
    DEFAULT_BOND,
    DEFAULT_MOMENTS,
    DEFAULT_SUB_BINS,
    EXACT_VOLUME_SITES,
    PROBABILITY_FLOOR,
    _approximate_result,
    _bin_weights,
    _check_resolution,
    _edge_leakage,
    _entropy,
    _mirror_model,
    _mirror_segment,
    _moments,
    _moved_mass_change,
    _normalised,
    _Region,
    _region,
    _split,
    warn_if_rerun_bond_low,
)
from mpsobs.estimators.wide_number_sectors import (
    MAX_NU,
    _phases,
    _sector_moments,
    _SectorVolumes,
    _spin_numbers,
    _to_sectors,
    sector_volumes,
)
from mpsobs.mps.charges import block_qr, col_charges, definite_charges, local_charges
from mpsobs.mps.tensors import PurifiedMPS, robust_svd

__all__ = ["wide_number_energy_entropy", "sector_volumes", "MAX_NU"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

#: Largest working set (bytes) of the joint number and energy of three regions.
MAX_THREE_REGION_BYTES = 4 * 2**30


# --------------------------------------------------------------------------- the state


def _charged_split(tensors, cut: int) -> tuple[list, np.ndarray, list, np.ndarray, int, dict]:
    """Mixed-canonical form at the bond before ``cut`` with a definite number per Schmidt
    vector: (left-canonical tensors of 0 .. cut - 1, Schmidt values, right-canonical
    tensors of cut .. L - 1, the number of A of each Schmidt vector, the total number,
    and for every bond i > cut the number left of it of each vector of the right-canonical
    basis there). InputError if the state has no definite number. Cost L chi^3 d."""
    found = definite_charges(list(tensors))
    if found is None:
        raise InputError("state: it has no definite particle number (a bond basis of "
                         "definite charge does not exist), so the number of a region is not "
                         "resolved by charges; the joint number and energy of wide regions "
                         "needs a state of definite number (or a purification)")
    out, charges = found
    out, local = list(out), local_charges(2)
    centre, right_q, inner = np.eye(1), charges[-1], {}
    for i in range(len(out) - 1, cut - 1, -1):   # right-canonical, charge block by block
        t = np.tensordot(out[i], centre, axes=(2, 0))
        chl, d, chr_ = t.shape
        q, r, right_q = block_qr(t.reshape(chl, d * chr_).T, col_charges(right_q, local),
                                 charges[i])
        out[i], centre = q.T.reshape(-1, d, chr_), r.T
        inner[i] = right_q
    left_q = charges[cut]
    us, ss, vhs, numbers = [], [], [], []
    for c in np.unique(left_q):
        rows, cols = np.flatnonzero(left_q == c), np.flatnonzero(right_q == c)
        if not cols.size:
            continue
        u, s, vh = robust_svd(centre[np.ix_(rows, cols)])
        us.append(np.zeros((centre.shape[0], s.size), dtype=complex))
        us[-1][rows] = u
        vhs.append(np.zeros((s.size, centre.shape[1]), dtype=complex))
        vhs[-1][:, cols] = vh
        ss.append(s)
        numbers.append(np.full(s.size, c))
    lam = np.concatenate(ss)
    left = [*out[:cut - 1], np.tensordot(out[cut - 1], np.hstack(us), axes=(2, 0))]
    right = [np.tensordot(np.vstack(vhs), out[cut], axes=(1, 0)), *out[cut + 1:]]
    inner.pop(cut)
    return left, lam, right, np.concatenate(numbers), int(charges[-1][0]), inner


@dataclass(frozen=True)
class _Sector:
    """The moments <v_a| P(n) T_k |v_b> of a region for the Schmidt indices ``index``."""

    number: int
    index: np.ndarray
    moments: np.ndarray   # (N, len(index), len(index))


def _phase_sectors(segment, region: _Region, n_moments: int, bond: int) -> list[_Sector]:
    """The sectors of a segment's vectors by phases: every sector n = 0 .. n_R holds all
    vectors, with the number-projected moments (a purification)."""
    everyone = np.arange(segment[-1].shape[2])
    return [_Sector(n, everyone, m) for n, m in
            enumerate(_sector_moments(segment, region, n_moments, bond, region.model.L))]


def _charge_sectors(segment, region: _Region, own: np.ndarray, n_moments: int,
                    bond: int) -> list[_Sector]:
    """The sectors of a segment's vectors by their definite numbers ``own``: the blocks
    of the (block-diagonal) moment matrices (a pure state of definite number)."""
    m = _moments(segment, region, n_moments, bond)
    return [_Sector(int(n), idx, m[:, idx][:, :, idx])
            for n in np.unique(own) for idx in [np.flatnonzero(own == n)]]


def _state_sectors(mps, cut: int, regions, n_moments: int,
                   bond: int) -> tuple[np.ndarray, list[list[_Sector]]]:
    """The Schmidt values at the cut and the number-resolved moment matrices of A and B
    (B mirrored): by charges for a pure state, by phases for a purification."""
    if isinstance(mps, PurifiedMPS):
        left, lam, right = _split(mps.tensors, cut)
        return lam, [_phase_sectors(seg, r, n_moments, bond) for seg, r in
                     zip((left, _mirror_segment(right)), regions, strict=True)]
    left, lam, right, numbers, total, _ = _charged_split(mps.tensors, cut)
    return lam, [_charge_sectors(left, regions[0], numbers, n_moments, bond),
                 _charge_sectors(_mirror_segment(right), regions[1], total - numbers,
                                 n_moments, bond)]


def _contract(lam: np.ndarray, sectors, regions, weights) -> np.ndarray:
    """P[n_A, i_A, n_B, i_B] = sum W_A[i_A, n] mu_nm W_B[i_B, m] per pair of sectors (n_R
    of 0 .. the sites of region R), with one weight matrix (rows, N') per region and the
    first N' moments. A pair of sectors
    contributes when both hold the same Schmidt indices (charges: n_B = N - n_A; phases:
    every pair). Cost per pair N'^2 chi^2."""
    n_moments = weights[0].shape[1]
    p = np.zeros((regions[0].model.L + 1, len(weights[0]), regions[1].model.L + 1,
                  len(weights[1])))
    for sa in sectors[0]:
        ma = (sa.moments[:n_moments] * np.outer(lam[sa.index], lam[sa.index])).reshape(
            n_moments, -1)
        for sb in sectors[1]:
            if np.array_equal(sa.index, sb.index):
                mu = (ma @ sb.moments[:n_moments].reshape(n_moments, -1).T).real
                p[sa.number, :, sb.number, :] = weights[0] @ mu @ weights[1].T
    return p


def _joint(lam: np.ndarray, sectors, regions, n_moments: int) -> np.ndarray:
    """P[n_A, b_A, n_B, b_B] from the first ``n_moments`` moments (clipped >= 0,
    renormalised)."""
    return _normalised(_contract(lam, sectors, regions, _bin_weights(regions, n_moments)))


# --------------------------------------------------------------------------- entropy


def _region_marginals(p: np.ndarray) -> list[np.ndarray]:
    """P(n_R, b_R) of each region."""
    return [p.sum(axis=(2, 3)), p.sum(axis=(0, 1))]


def _check_settings(cg, moments, bond, sub_bins, exact_sites) -> None:
    if not isinstance(cg, WideEnergyRegions) or cg.observables == ("energy",):
        raise InputError("coarse_graining: expected the joint number and energy of wide "
                         "regions (mpsobs.coarse.sequence of the number and energy blocks of "
                         "the same regions)")
    if len(cg.regions) not in (2, 3):
        raise InputError(f"regions: the joint number and energy of wide regions is "
                         f"evaluated for 2 or 3 regions; got {len(cg.regions)}")
    _check_resolution(moments, bond, sub_bins, exact_sites)


@limits_threads(lambda call: state_size(call.arguments["state"]))
def wide_number_energy_entropy(state, cg: WideEnergyRegions, *,
                               moments: int = DEFAULT_MOMENTS, bond: int = DEFAULT_BOND,
                               sub_bins: int = DEFAULT_SUB_BINS,
                               exact_sites: int = EXACT_VOLUME_SITES) -> EntropyResult:
    """S_obs of the joint number and energy of the two or three regions of ``cg`` in
    ``state`` (an MPS of definite number, or a purification), with its method error
    (module docstring).

    Parameters
    ----------
    state : normalised MPS or :class:`mpsobs.mps.PurifiedMPS` of cg.L sites.
    cg : from :func:`mpsobs.coarse.sequence` of the number and the energy blocks (either
        order) of two or three regions of which one is wider than
        :data:`mpsobs.coarse.MAX_BLOCK_SITES`, for a number-conserving model.
    moments, bond, sub_bins, exact_sites : as
        :func:`mpsobs.estimators.wide_energy.wide_energy_entropy`.

    Returns
    -------
    EntropyResult with method "approximate", ``stderr`` 0, ``method_err`` (and the parts'
    errors) the error estimate, ``pruned_mass`` the dropped probability; ``distribution``
    the outcomes with p > 1e-14, columns per region in the order asked ((n_A, b_A, n_B,
    b_B) for number then energy, (b_A, n_A, b_B, n_B) for energy then number; with a
    middle region C its two columns between A's and B's).
    """
    _check_settings(cg, moments, bond, sub_bins, exact_sites)
    mps = canonical_state(state, cg.L)
    warn_if_rerun_bond_low(mps, cg, bond)
    if len(cg.regions) == 3:
        return _three_region_entropy(mps, cg, moments, bond, sub_bins, exact_sites)
    cut = cg.regions[0][1]
    volume_regions = tuple(_region(cg.model.restricted(x, y), cg.bin_width)
                           for x, y in cg.regions)
    regions = (volume_regions[0], _region(_mirror_model(volume_regions[1].model),
                                          cg.bin_width))
    low_bond = max(2, bond // 2)
    lam, sectors = _state_sectors(mps, cut, regions, moments, bond)
    lam_low, sectors_low = _state_sectors(mps, cut, regions, moments, low_bond)
    p = _joint(lam, sectors, regions, moments)
    grids = [(np.arange(r.model.L + 1), np.arange(len(r.bins))) for r in volume_regions]
    volumes = [_SectorVolumes.for_marginal(vreg, marginal, *grid, moments, bond, exact_sites)
               for vreg, marginal, grid in zip(volume_regions, _region_marginals(p), grids,
                                               strict=True)]

    def evaluate(probs: np.ndarray, n_moments: int, sub: int, low: bool):
        log_v = [vol.on_grid(marginal, *grid, n_moments, sub, low).ravel()
                 for vol, marginal, grid in zip(volumes, _region_marginals(probs), grids,
                                                strict=True)]
        flat = probs.reshape(len(log_v[0]), len(log_v[1]))
        return _entropy(flat, log_v), log_v

    (main, dropped), log_vols = evaluate(p, moments, sub_bins, False)
    (half, _), _ = evaluate(_joint(lam, sectors, regions, moments // 2), moments // 2,
                            sub_bins, False)
    (low, _), _ = evaluate(_joint(lam_low, sectors_low, regions, moments), moments, sub_bins,
                           True)
    (coarse_sub, _), _ = evaluate(p, moments, max(1, sub_bins // 2), False)
    log_v = functools.reduce(np.add.outer, log_vols).reshape(p.shape)
    live = np.argwhere((p > PROBABILITY_FLOOR) & np.isfinite(log_v))
    columns = []
    for axis, reg in enumerate(volume_regions):
        asked = {"number": live[:, 2 * axis], "energy": reg.bins[live[:, 2 * axis + 1]]}
        columns += [asked[name] for name in cg.observables]
    dist = OutcomeDistribution(np.column_stack(columns), p[tuple(live.T)],
                               np.exp(log_v[tuple(live.T)]))
    contract = functools.partial(_contract, lam, sectors, regions)
    leak = _edge_leakage(p, log_v, contract, regions, moments, (1, 3))
    return _approximate_result(mps, cg, dist, dropped, main, (half, low, coarse_sub), leak)


# --------------------------------------------------------------------------- three regions


#: The weight sets of a stack, in their order: bins at N, at N / 2, edge windows at N.
_SETS = ("main", "half", "edge")


@dataclass(frozen=True)
class _Stack:
    """An outer region's moment matrices contracted with bin weights, one matrix per row
    (number sector n, weight row i) of the live grid: sets "main" (bins, N moments),
    "half" (bins, N / 2) and "edge" (the kernel's unresolved weight at the bins' inner
    edges), stacked in that order for the middle sweep."""

    numbers: np.ndarray    # the live sectors n (ascending, contiguous)
    matrices: np.ndarray   # (rows, chi, chi): main, half, edge rows
    sizes: tuple[int, int, int]

    def size(self, name: str) -> int:
        return self.sizes[_SETS.index(name)]

    def rows(self, name: str) -> slice:
        start = sum(self.sizes[:_SETS.index(name)])
        return slice(start, start + self.size(name))


def _live_range(marginal: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The contiguous ranges of sectors and bins that hold every (n, b) with probability
    above PROBABILITY_FLOOR in ``marginal`` (n, b)."""
    n, b = np.nonzero(marginal > PROBABILITY_FLOOR)
    return np.arange(n.min(), n.max() + 1), np.arange(b.min(), b.max() + 1)


def _weight_sets(region: _Region, bins: np.ndarray, n_moments: int) -> list[np.ndarray]:
    """(main, half, edge) weight matrices (rows, N) for the bins ``bins`` (positions in
    region.bins) of a region: Jackson-damped bin integrals at N and at N / 2 (padded
    with zero columns) and the edge windows at N of the inner edges."""
    edges = region.edges[bins[0]:bins[-1] + 2]
    main = chebyshev.bin_weights(edges, region.centre, region.half_width, n_moments)
    half = np.zeros_like(main)
    half[:, :n_moments // 2] = chebyshev.bin_weights(edges, region.centre,
                                                     region.half_width, n_moments // 2)
    inner = chebyshev.edge_windows(edges[1:-1], region.centre, region.half_width, n_moments)
    return [main, half, inner.reshape(-1, n_moments)]


def _stack(sectors, region: _Region, numbers: np.ndarray, bins: np.ndarray, chi: int,
           n_moments: int) -> _Stack:
    """The stack of an outer region for the live ``numbers`` and ``bins`` (positions)."""
    by_number = {s.number: s for s in sectors}
    sets = _weight_sets(region, bins, n_moments)
    parts = []
    for weights in sets:
        block = np.zeros((len(numbers), len(weights), chi, chi), dtype=complex)
        for i, n in enumerate(numbers):
            sector = by_number.get(int(n))
            if sector is not None:
                idx = np.ix_(sector.index, sector.index)
                block[i][(slice(None), *idx)] = np.tensordot(weights, sector.moments, axes=1)
        parts.append(block.reshape(-1, chi, chi))
    return _Stack(numbers, np.concatenate(parts), tuple(len(p) for p in parts))


def _outer_marginal(sectors, weights: np.ndarray, n_sites: int, gram: np.ndarray) -> np.ndarray:
    """P(n, b) of an outer region: sum over its sectors of W mu_n with mu_n[k] = sum
    gram[a, b] M_n[k, a, b] (``gram`` the weights of its open-bond vectors)."""
    out = np.zeros((n_sites + 1, len(weights)))
    for s in sectors:
        mu = np.einsum("kab,ab->k", s.moments, gram[np.ix_(s.index, s.index)]).real
        out[s.number] = weights @ mu
    return out


def _middle_gram(middle) -> np.ndarray:
    """G[b, b'] = sum_a <X_ab | X_ab'> of the middle segment (both bonds open)."""
    env = np.eye(middle[0].shape[0], dtype=complex)
    for t in middle:
        env = np.tensordot(np.tensordot(env, t.conj(), axes=(0, 0)), t, axes=([0, 1], [0, 1]))
    return env


_PAIRS = {"main": ("main", "main", 0), "half": ("half", "half", 1), "edge A": ("edge", "main", 0),
          "edge C": ("main", "main", 2), "edge B": ("main", "edge", 0)}


def _middle_overlap(left: _Stack, right: _Stack, phases: np.ndarray):
    """overlap(x, y) = sum left_l[a, a'] <x_ab| e^(i t_k N_C) |y_a'b'> right_r[b, b'] (k, l,
    r) for the stacks' rows of each pair of :data:`_PAIRS`, raveled and concatenated in
    that order (a flat vector, so that the Chebyshev series can combine overlaps; K
    phases, the sweep of
    :func:`mpsobs.chebyshev.moment_tensor` on a stack of K x rows environments). Cost
    per call 2 K rows n d D^3 + K rows_l rows_r chi_b^2."""
    def overlap(x, y):
        env = np.broadcast_to(left.matrices, (len(phases), *left.matrices.shape))
        for a, b in zip(x, y, strict=True):
            w = phases[:, None] ** _spin_numbers(a.shape[1])[None, :]          # (K, d)
            t = np.tensordot(env, a.conj(), axes=(2, 0)) * w[:, None, None, :, None]
            env = np.einsum("ksmdr,mdq->ksrq", t, b, optimize=True)
        flat = env.reshape(*env.shape[:2], -1)
        closing = right.matrices.reshape(len(right.matrices), -1)
        return np.concatenate([np.einsum("kle,re->klr", flat[:, left.rows(lset)],
                                         closing[right.rows(rset)], optimize=True).ravel()
                               for lset, rset, _ in _PAIRS.values()])
    return overlap


def _three_parts(mps, cg, regions, n_moments: int, bond: int):
    """The stacks of A and B, the middle segment and its phases, and the map of the
    middle's number: for a pure state of definite number by charges (n_C = N - n_A -
    n_B, one phase), for a purification by n_C + 1 phases."""
    (_, c1), (_, c2) = cg.regions[0], cg.regions[1]
    width = c2 - c1
    if isinstance(mps, PurifiedMPS):
        left, lam, rest = _split(mps.tensors, c1)
        right = _mirror_segment(rest[width:])
        sectors = [_phase_sectors(left, regions[0], n_moments, bond),
                   _phase_sectors(right, regions[2], n_moments, bond)]
        total, phases = None, _phases(regions[1].model.L)
    else:
        left, lam, rest, n_a, total, inner = _charged_split(mps.tensors, c1)
        right = _mirror_segment(rest[width:])
        sectors = [_charge_sectors(left, regions[0], n_a, n_moments, bond),
                   _charge_sectors(right, regions[2], total - inner[c2], n_moments, bond)]
        phases = np.ones(1, dtype=complex)
    middle = [lam[:, None, None] * rest[0], *rest[1:width]]
    return sectors, middle, phases, total, lam


def _check_three_region_size(live, regions, phases: int, chis: tuple[int, int],
                             width: int) -> None:
    """TooLargeError when the three-region arrays would exceed MAX_THREE_REGION_BYTES:
    the outcome grid (live n_A, b_A) x (n_C, b_C) x (live n_B, b_B) (one n_C slot for a
    pure state, ``phases`` = 1) in about eight arrays, the four accumulators (K phases)
    and the K x 3 rows_A environments of the middle sweep (``width`` the widest bond
    times the local dimension)."""
    rows = [len(n) * len(b) for n, b in live]
    middle = (regions[1].model.L + 1 if phases > 1 else 1) * len(regions[1].bins)
    grid = rows[0] * middle * rows[1]
    need = 8.0 * 8 * grid + 16.0 * 4 * rows[0] * len(regions[1].bins) * rows[1] * phases \
        + 16.0 * phases * 3 * rows[0] * max(chis[0], width) ** 2
    if need > MAX_THREE_REGION_BYTES:
        raise TooLargeError(
            f"bin_width: the joint number and energy of three regions would need about "
            f"{need / 2**30:.1f} GiB here ({rows[0]} x {middle} x {rows[1]} outcome cells, "
            f"{phases} phases of the middle; at most {MAX_THREE_REGION_BYTES / 2**30:.0f} "
            f"GiB); wider bins, two regions or the energy alone need less")


def _three_joint(mps, cg, regions, n_moments: int, bond: int, live=None):
    """P[n_A, b_A, n_C, b_C, n_B, b_B] on the live grid (raw; "main" and the half-moment
    and edge sets, keyed as :data:`_PAIRS`), the grid ``live`` of the outer regions
    ((numbers, bins) of A and B; default: from their marginals at N) and the
    :class:`_MiddleNumbers` of the n_C axis (one slot for a pure state, n_C fixed by
    charge)."""
    sectors, middle, phases, total, lam = _three_parts(mps, cg, regions, n_moments, bond)
    chis = (middle[0].shape[0], middle[-1].shape[2])
    if live is None:
        grams = (np.diag(lam**2), _middle_gram(middle))
        live = [_live_range(_outer_marginal(s, _bin_weights([r], n_moments)[0], r.model.L, g))
                for s, r, g in zip(sectors, (regions[0], regions[2]), grams, strict=True)]
    _check_three_region_size(live, regions, len(phases), chis, bond * middle[0].shape[1])
    stacks = [_stack(s, r, n, b, chi, n_moments) for s, r, (n, b), chi in
              zip(sectors, (regions[0], regions[2]), live, chis, strict=True)]
    mid = regions[1]
    mpo = chebyshev.scaled_mpo(mid.model, mid.centre, mid.half_width, middle[0].shape[1])
    middle_sets = _weight_sets(mid, np.arange(len(mid.bins)), n_moments)
    shapes = {name: (len(phases), stacks[0].size(lset), stacks[1].size(rset))
              for name, (lset, rset, _) in _PAIRS.items()}
    offsets = np.cumsum([0, *(np.prod(x) for x in shapes.values())])
    acc = {name: np.zeros((len(middle_sets[_PAIRS[name][2]]), *shape), dtype=complex)
           for name, shape in shapes.items()}
    series = chebyshev.chebyshev_series(middle, mpo, n_moments, bond,
                                        _middle_overlap(*stacks, phases))
    for k, flat in enumerate(series):
        for (name, shape), start, stop in zip(shapes.items(), offsets[:-1], offsets[1:],
                                              strict=True):
            weights = middle_sets[_PAIRS[name][2]][:, k]
            acc[name] += np.multiply.outer(weights, flat[start:stop].reshape(shape))
    ls, rs = stacks
    out = {}
    for name, a in acc.items():
        # (K, rows_C, l, r) -> (n_C, ...) by the phases, or the one charge-fixed slot
        sec = _to_sectors(a, 1).real if total is None else a.real.transpose(1, 0, 2, 3)
        sec = sec.reshape(sec.shape[0], sec.shape[1], len(ls.numbers), -1, len(rs.numbers),
                          sec.shape[3] // len(rs.numbers))
        out[name] = sec.transpose(2, 3, 0, 1, 4, 5)              # (nA, a, nC, c, nB, b)
    return out, live, _MiddleNumbers(total, ls.numbers, rs.numbers, regions[1].model.L)


@dataclass(frozen=True)
class _MiddleNumbers:
    """The n_C axis of the three-region arrays: n_C = 0 .. n_sites for a purification
    (``total`` None), or one slot for a pure state of definite number ``total``, where
    n_C = total - n_A - n_B follows from the outer regions' live ``left`` and ``right``
    sectors (outcomes with n_C outside 0 .. n_sites have no volume)."""

    total: int | None
    left: np.ndarray
    right: np.ndarray
    n_sites: int

    def _fixed(self) -> np.ndarray:
        return self.total - self.left[:, None] - self.right[None, :]   # (nA, nB)

    def marginal(self, p: np.ndarray) -> np.ndarray:
        """P(n_C, b_C), n_C = 0 .. n_sites."""
        if self.total is None:
            return p.sum(axis=(0, 1, 4, 5))
        out = np.zeros((self.n_sites + 1, p.shape[3]))
        fixed, q = self._fixed(), p.sum(axis=(1, 5))[:, 0]             # (nA, c, nB)
        ok = (fixed >= 0) & (fixed <= self.n_sites)
        np.add.at(out, fixed[ok], q.transpose(0, 2, 1)[ok])
        return out

    def log_volumes(self, values: np.ndarray) -> np.ndarray:
        """ln Omega_C(n_C, b_C) (``values``, n_C = 0 .. n_sites) broadcast to the axes
        (nA, a, nC, c, nB, b)."""
        if self.total is None:
            return values[None, None, :, :, None, None]
        fixed = self._fixed()
        ok = (fixed >= 0) & (fixed <= self.n_sites)
        out = np.full((*fixed.shape, values.shape[1]), -np.inf)
        out[ok] = values[fixed[ok]]
        return out.transpose(0, 2, 1)[:, None, None, :, :, None]

    def column(self, cells: np.ndarray, left: np.ndarray, right: np.ndarray) -> np.ndarray:
        """n_C of the outcome cells (rows of indices into the six axes)."""
        if self.total is None:
            return cells[:, 2]
        return self.total - left[cells[:, 0]] - right[cells[:, 4]]


def _three_marginals(p: np.ndarray, middle: _MiddleNumbers) -> list[np.ndarray]:
    """P(n_R, b_R) of each of the three regions from P[n_A, b_A, n_C, b_C, n_B, b_B]."""
    return [p.sum(axis=(2, 3, 4, 5)), middle.marginal(p), p.sum(axis=(0, 1, 2, 3))]


def _three_region_entropy(mps, cg: WideEnergyRegions, moments: int, bond: int,
                          sub_bins: int, exact_sites: int) -> EntropyResult:
    """S_obs of the joint number and energy of three regions (module docstring)."""
    volume_regions = tuple(_region(cg.model.restricted(x, y), cg.bin_width)
                           for x, y in cg.regions)
    regions = (*volume_regions[:2], _region(_mirror_model(volume_regions[2].model),
                                            cg.bin_width))
    raw, live, middle = _three_joint(mps, cg, regions, moments, bond)
    raw_low, _, _ = _three_joint(mps, cg, regions, moments, max(2, bond // 2), live)
    p = _normalised(raw["main"])
    grids = [live[0], (np.arange(middle.n_sites + 1), np.arange(len(volume_regions[1].bins))),
             live[1]]
    volumes = [_SectorVolumes.for_marginal(vreg, marginal, *grid, moments, bond, exact_sites)
               for vreg, marginal, grid in zip(volume_regions, _three_marginals(p, middle),
                                               grids, strict=True)]

    def evaluate(probs: np.ndarray, n_moments: int, sub: int, low: bool):
        log_vs = [vol.on_grid(marginal, *grid, n_moments, sub, low)
                  for vol, marginal, grid in zip(volumes, _three_marginals(probs, middle),
                                                 grids, strict=True)]
        log_v = (log_vs[0][:, :, None, None, None, None] + middle.log_volumes(log_vs[1])
                 + log_vs[2][None, None, None, None]) + np.zeros(probs.shape)
        return _entropy(probs, [log_v]), log_v

    (main, dropped), log_v = evaluate(p, moments, sub_bins, False)
    (half, _), _ = evaluate(_normalised(raw["half"]), moments // 2, sub_bins, False)
    (low, _), _ = evaluate(_normalised(raw_low["main"]), moments, sub_bins, True)
    (coarse_sub, _), _ = evaluate(p, moments, max(1, sub_bins // 2), False)
    leak = sum(_moved_mass_change(p, log_v, np.clip(raw[name], 0.0, None) / 2, axis)
               for name, axis in (("edge A", 1), ("edge C", 3), ("edge B", 5)))
    cells = np.argwhere((p > PROBABILITY_FLOOR) & np.isfinite(log_v))
    numbers = [live[0][0][cells[:, 0]], middle.column(cells, live[0][0], live[1][0]),
               live[1][0][cells[:, 4]]]
    columns = []
    for axis, (vreg, (_, bins)) in enumerate(zip(volume_regions, grids, strict=True)):
        asked = {"number": numbers[axis], "energy": vreg.bins[bins[cells[:, 2 * axis + 1]]]}
        columns += [asked[name] for name in cg.observables]
    dist = OutcomeDistribution(np.column_stack(columns), p[tuple(cells.T)],
                               np.exp(log_v[tuple(cells.T)]))
    return _approximate_result(mps, cg, dist, dropped, main, (half, low, coarse_sub), leak)
