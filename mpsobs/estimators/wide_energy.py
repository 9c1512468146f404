"""Observational entropy of the energies of two or three large regions of an MPS.

The coarse-graining (:class:`mpsobs.coarse.WideEnergyRegions`) asks the energy of the
left part A = sites 0 .. c - 1 and of the right part B = c .. L - 1 (or of A = 0 .. c - 1,
the middle C = c .. e - 1 and B = e .. L - 1), binned by floor(E / dE); H_R is the
model's terms wholly inside R. Outcomes b = (b_A, b_B) (or (b_A, b_C, b_B)) have
p(b) = <psi| prod_R P_R(b_R) |psi> and V(b) = prod_R Omega_R(b_R), Omega_R(b) the number
of eigenvalues of H_R in bin b.

Probabilities (kernel polynomial method, :mod:`mpsobs.chebyshev`). In mixed-canonical
form at the cut, psi = sum_a lambda_a |L_a> |R_a>; M^A_n[a, b] = <L_a| T_n(Ht_A) |L_b>
from the Chebyshev recursion on the left half with its right bond open (all chi Schmidt
vectors at once), the same for B (the right half mirrored, so that its open bond is on
the right); then mu_nm = sum_ab lambda_a lambda_b M^A_n[a, b] M^B_m[a, b] and
p = C_A mu C_B^T with the Jackson-damped closed-form bin integrals C. Three regions: in
mixed-canonical form at both cuts, psi = sum_ab |L_a> |X_ab> |R_b> (X_ab = lambda_a Y_ab,
the middle block with both bonds open, carrying the Schmidt values of the first cut and
the weights of the second); the Chebyshev vectors T_n(Ht_C) |X_ab> of all chi_a chi_b
middle vectors at once are the middle segment with both open bonds, compressed to bond D
like the outer parts, and mu_jnm = sum M^A_j[a, a'] <X_ab| T_n(Ht_C) |X_a'b'> M^B_m[b, b']
(:func:`mpsobs.chebyshev.moment_tensor`); p = mu contracted with C_A, C_C, C_B, the same
3-D series and closed-form bin integrals. Negative values of the damped series (from the
compression) are set to zero and p renormalised.

Volumes. Regions of at most ``exact_sites`` (:data:`EXACT_VOLUME_SITES`) sites:
eigenvalues of H_R counted per bin (exact). Wider regions: reweighting from the region's
own Gibbs state, Omega_R(b) = Z_R(beta) sum_{E in b} p_beta(E) e^{beta E} (DESIGN 3c),
with the Gibbs state built as a purification by imaginary-time TEBD of
exp(-beta H_R / 2) (:func:`mpsobs.chebyshev.gibbs_segment`, which gives ln Z_R from its
norm), p_beta on sub-bins from its Chebyshev moments, and beta found by Newton steps so
that <H_R>_beta lies near the state's mean regional energy and the mean +- 2 standard
deviations (three references; each bin uses the one whose energy is closest). The betas
lie on a grid (spacing BETA_GRID / sigma_0, sigma_0 the spread of H_R at beta = 0), so
that the references depend on the region and the settings only through the grid point and
are reused from a memo of the process at later output times. |beta| is
capped at MAX_BETA_RESOLUTION / delta (delta = pi a / N the kernel resolution): beyond,
e^(beta E) would magnify the smoothing of p_beta.

Error (``method_err``, an estimate, not a bound, in the habit of the truncation check):
the larger of (1) and (4), plus (2) and (3), where (1)-(3) are the changes of S_obs when
(1) the number of moments is halved (state and volumes; divided by sqrt(2) - 1, the
remaining error of a series whose error falls at least like N^(-1/2)), (2) the
compression bond is halved (state; Gibbs references and their ln Z, built also with
twice the imaginary-time step), (3) the volume sub-bins are halved, and (4) is the edge
part: at every bin edge of every region, the weight the kernel does not resolve there
(the mass within one resolution of the edge at N moments minus that at N / 2, scaled so
that a single level at the edge counts fully, :func:`mpsobs.chebyshev.edge_windows`)
is half moved to either side, and the larger changes of S_obs are summed over the
edges. (4) covers the case (1) cannot see: a level closer to an edge than the resolution
has its weight split about evenly at N and at N / 2 alike, and halving N hardly changes
S_obs while the true error stays at the split. Where the state's bond at a region cut
is at least D / 2, the rerun (2) cannot hold the Schmidt vectors at the cut and (2)
grows (measured: 0.04 -> 0.45 nats when the bond reached D / 2 in the two-halves
scenario); a warning names the cut (:func:`warn_if_rerun_bond_low`). Both estimate the error of the
resolution; where it is coarse against the regional energies' spread they see the same
smoothing, so the larger one is taken, not their sum. For a density smooth on the
resolution scale (large regions, fine resolution) (4) vanishes to second order.
Reported apart as ``pruned_mass``: (5) the probability that the smoothed
series puts into bins without eigenvalues (exact-count regions only), whose entropy
bound the total error adds. The same for the Shannon and Boltzmann parts.
The smoothing of the kernel (resolution about pi a / N for a spectrum half-width a) makes
S_obs too large where the regional energies are sharper than the resolution (an
eigenstate of H_A); the halved-moments change then is of order ln 2, so the error bar
shows it.

Cost: two Chebyshev runs per region (bond D and D / 2) of N / 2 compressions, each about
3 n d ((w + 1) D)^3 flops for n sites, MPO bond w (Ising 3, XXZ 5), d = 2 (4 for a
purification). The middle region of three adds to each of its N overlaps a sweep of N
stacked environments, about 2 N n d D^3, and a closing N^2 chi^2: in all about
2 N^2 n_C d D^3 + N^3 chi^2 per run, and N^3 numbers for mu (N = 256: 134 MB). For each
wide region three Gibbs references, each a few Newton builds at
bond NEWTON_BOND and two builds and Chebyshev runs (N moments, d = 4) at bonds D and D / 2.
They dominate the first call; later calls of a run whose regional energies stay within a
grid step reuse them (memo of MEMO_SIZE entries per process). The edge part (4) costs
one more contraction of mu per region, with one window per bin edge (E N^2 for two
regions, E N^3 for three, E edges).
"""

from __future__ import annotations

import functools
import hashlib
import logging
from dataclasses import dataclass

import numpy as np
from scipy.special import logsumexp

from mpsobs.chain.coarse import WideEnergyRegions
from mpsobs.chain.models import Model, Term, mpo_tensors
from mpsobs.core.errors import InputError
from mpsobs.core.printing import number
from mpsobs.core.threads import limits_threads, state_size
from mpsobs.estimators import chebyshev
from mpsobs.estimators.estimate import canonical_state
from mpsobs.estimators.result import EntropyResult, OutcomeDistribution
from mpsobs.mps.tensors import PurifiedMPS, bond_entropies, robust_svd

__all__ = ["wide_energy_entropy", "region_volumes", "clear_references", "kernel_counts",
           "warn_if_rerun_bond_low",
           "KernelCounts", "DEFAULT_MOMENTS", "DEFAULT_BOND", "DEFAULT_SUB_BINS",
           "EXACT_VOLUME_SITES"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)

#: Chebyshev moments per region (resolution about pi a / N in energy).
DEFAULT_MOMENTS = 256
#: Compression bond of the Chebyshev vectors (at least the state's bond is sensible).
DEFAULT_BOND = 64
#: Sub-bins per bin for the reweighted volumes.
DEFAULT_SUB_BINS = 8
#: Regions up to this many sites get exact volumes by diagonalisation.
EXACT_VOLUME_SITES = 12
#: Newton steps in beta towards a volume reference's target energy.
NEWTON_STEPS = 4
#: Largest |beta| delta of a volume reference (delta the kernel resolution in energy).
MAX_BETA_RESOLUTION = 0.5
#: Compression bond of the Gibbs states during the Newton steps.
NEWTON_BOND = 8
#: Spacing of the references' inverse temperatures, in units of 1 / sigma_0 (sigma_0 the
#: spread of the region's energy at infinite temperature).
BETA_GRID = 1.0
#: Gibbs references and Newton probes kept per process (by region, beta and settings).
MEMO_SIZE = 512
_MEMO: dict[tuple, object] = {}
#: Target energies of the volume Gibbs states, in standard deviations of the state's
#: regional energy around its mean.
VOLUME_TARGETS = (-2.0, 0.0, 2.0)
#: The change at half the moments, divided by this, is the moment part of the error:
#: the remaining error if it falls at least like N^(-1/2) (sqrt(2) - 1; smoothing of a
#: smooth density falls like N^-2, leakage of sharp peaks across bin edges like N^-1).
RESOLUTION_ORDER_FACTOR = np.sqrt(2.0) - 1.0
#: Bins whose probability is below this are left out of S_obs (their volume is not needed).
PROBABILITY_FLOOR = 1e-14


@dataclass(frozen=True)
class _Parts:
    """S_obs and its parts of one evaluation."""

    entropy: float
    shannon: float
    boltzmann: float

    def change(self, other: _Parts) -> np.ndarray:
        return np.abs(np.array([self.entropy - other.entropy, self.shannon - other.shannon,
                                self.boltzmann - other.boltzmann]))


# --------------------------------------------------------------------------- the state


def _split(tensors, cut: int) -> tuple[list[np.ndarray], np.ndarray, list[np.ndarray]]:
    """Mixed-canonical form at the bond before site ``cut`` of a normalised
    right-canonical chain: left-canonical tensors of sites 0 .. cut - 1 (open right bond),
    the Schmidt values, right-canonical tensors of cut .. L - 1 (open left bond)."""
    left = []
    carry = tensors[0]
    for i in range(cut):
        dl, d, dr = carry.shape
        u, s, vh = robust_svd(carry.reshape(dl * d, dr))
        left.append(u.reshape(dl, d, -1))
        if i < cut - 1:
            carry = np.tensordot(s[:, None] * vh, tensors[i + 1], axes=(1, 0))
    right = [np.tensordot(vh, tensors[cut], axes=(1, 0)), *tensors[cut + 1:]]
    return left, s, right


def _mirror_segment(tensors) -> list[np.ndarray]:
    """Site order reversed (each tensor's bonds swapped): an open left bond becomes an
    open right bond."""
    return [t.transpose(2, 1, 0) for t in reversed(tensors)]


_SWAP = np.eye(4)[[0, 2, 1, 3]]


def _mirror_model(model: Model) -> Model:
    """The model with its site order reversed (two-site terms with their sites swapped)."""
    terms = tuple(Term(model.L - t.stop, t.matrix if t.width == 1 else _SWAP @ t.matrix @ _SWAP)
                  for t in model.terms)
    return Model(model.name, model.L, model.params, terms, model.conserves_number,
                 model.energy_scale)


@dataclass(frozen=True, eq=False)
class _Region:
    """One region: its model (mirrored for the right part), spectrum scaling and bins."""

    model: Model
    centre: float
    half_width: float
    bins: np.ndarray   # integer bin indices k: [k dE, (k + 1) dE)
    bin_width: float

    @property
    def edges(self) -> np.ndarray:
        return np.append(self.bins, self.bins[-1] + 1) * self.bin_width


def _region(model: Model, bin_width: float) -> _Region:
    centre, half = chebyshev.spectrum_bounds(model)
    first = int(np.floor((centre - half) / bin_width))
    last = int(np.floor((centre + half) / bin_width))
    return _Region(model, centre, half, np.arange(first, last + 1), bin_width)


def _segments(mps, regions) -> tuple[list[list[np.ndarray]], np.ndarray]:
    """The regions' segments of a normalised right-canonical chain and the Schmidt values
    lambda at the first cut. Two regions: the left part (open right bond a) and the right
    part mirrored (open right bond b), psi = sum_a lambda_a |L_a> |R_a>. Three: the same
    outer parts at both cuts and the middle segment with its two open bonds, psi =
    sum_ab |L_a> |X_ab> |R_b>, where X_ab = lambda_a Y_ab carries the Schmidt values of the
    first cut and the weights of the second (L_a and R_b orthonormal)."""
    left, lam, rest = _split(mps.tensors, regions[0][1])
    if len(regions) == 2:
        return [left, _mirror_segment(rest)], lam
    width = regions[1][1] - regions[1][0]
    middle = [lam[:, None, None] * rest[0], *rest[1:width]]
    return [left, middle, _mirror_segment(rest[width:])], lam


def _moments(segment, region: _Region, n_moments: int, bond: int) -> np.ndarray:
    d = segment[0].shape[1]
    mpo = chebyshev.scaled_mpo(region.model, region.centre, region.half_width, d)
    return chebyshev.moment_matrices(segment, mpo, n_moments, bond)


def _state_moments(segments, lam: np.ndarray, regions, n_moments: int,
                   bond: int) -> np.ndarray:
    """The joint moments <psi| prod_R T_(n_R)(Ht_R) |psi> of two regions (N, N), mu_nm =
    sum_ab lambda_a lambda_b M^A_n[a, b] M^B_m[a, b], or of three (N, N, N), mu_jnm from
    :func:`mpsobs.chebyshev.moment_tensor` with the outer regions' M^A_j and M^B_m."""
    outer = (_moments(segments[0], regions[0], n_moments, bond),
             _moments(segments[-1], regions[-1], n_moments, bond))
    if len(segments) == 2:
        ma, mb = outer
        weighted = (ma * np.outer(lam, lam)).reshape(n_moments, -1)
        return (weighted @ mb.reshape(mb.shape[0], -1).T).real
    middle = regions[1]
    mpo = chebyshev.scaled_mpo(middle.model, middle.centre, middle.half_width,
                               segments[1][0].shape[1])
    return chebyshev.moment_tensor(segments[1], mpo, n_moments, bond, *outer)


def _contract(mu: np.ndarray, weights) -> np.ndarray:
    """sum_n W_R[i, n] ... mu_n... along every axis, one weight matrix (rows, N') per
    region, with the first N' moments of mu."""
    p = mu[(slice(weights[0].shape[1]),) * mu.ndim]
    for axis, c in enumerate(weights):
        p = np.moveaxis(np.tensordot(c, p, axes=(1, axis)), 0, axis)
    return p


def _bin_weights(regions, n_moments: int) -> list[np.ndarray]:
    return [chebyshev.bin_weights(r.edges, r.centre, r.half_width, n_moments)
            for r in regions]


def _normalised(raw: np.ndarray) -> np.ndarray:
    """Probabilities from a damped series: negative values (from the compression) set to
    zero, the rest renormalised."""
    p = np.clip(raw, 0.0, None)
    return p / p.sum()


def _joint(mu: np.ndarray, regions, n_moments: int) -> np.ndarray:
    """Bin probabilities P[b_A, b_B] (or P[b_A, b_C, b_B]) from the first ``n_moments``
    of mu along every axis (:func:`_normalised`)."""
    return _normalised(_contract(mu, _bin_weights(regions, n_moments)))


def _edge_leakage(p: np.ndarray, log_v: np.ndarray, contract, regions, n_moments: int,
                  axes) -> np.ndarray:
    """Edge part (4) of the error (module docstring): |change| of S_obs, of its Shannon and
    its Boltzmann part, summed over every bin edge of every region (and every bin of the
    other regions), when half the weight the kernel does not resolve at the edge
    (:func:`mpsobs.chebyshev.edge_windows`, clipped >= 0) moves to either side.

    ``contract(weights)`` gives the raw bin-probability array of the state for one weight
    matrix per region; ``axes[i]`` is the axis of region i in ``p`` and ``log_v``."""
    weights = _bin_weights(regions, n_moments)
    total = np.zeros(3)
    for i, (axis, r) in enumerate(zip(axes, regions, strict=True)):
        edges = chebyshev.edge_windows(r.edges[1:-1], r.centre, r.half_width, n_moments)
        unresolved = contract([edges if j == i else w for j, w in enumerate(weights)])
        total += _moved_mass_change(p, log_v, np.clip(unresolved, 0.0, None) / 2, axis)
    return total


def _moved_mass_change(p: np.ndarray, log_v: np.ndarray, moved: np.ndarray,
                       axis: int) -> np.ndarray:
    """Summed |change| of (S_obs, Shannon, Boltzmann) when the mass ``moved[..., j, ...]``
    (at most what the bin holds) goes from bin j + 1 to bin j along ``axis``, or from j
    to j + 1, whichever changes the part more; pairs with an empty bin are left out."""
    n = p.shape[axis]
    a, b = p.take(range(n - 1), axis), p.take(range(1, n), axis)
    la, lb = log_v.take(range(n - 1), axis), log_v.take(range(1, n), axis)
    both = np.isfinite(la) & np.isfinite(lb)
    la, lb = np.where(both, la, 0.0), np.where(both, lb, 0.0)

    def shannon(x):
        return -x * np.log(np.where(x > 0.0, x, 1.0))

    changes = []
    for m in (np.minimum(moved, b), -np.minimum(moved, a)):
        parts = shannon(a + m) + shannon(b - m) - shannon(a) - shannon(b), m * (la - lb)
        changes.append(np.where(both, np.abs([parts[0] + parts[1], *parts]), 0.0))
    return np.maximum(*changes).reshape(3, -1).sum(axis=1)


def _marginals(p: np.ndarray) -> list[np.ndarray]:
    """The distribution of each region's bin."""
    return [p.sum(axis=tuple(i for i in range(p.ndim) if i != axis))
            for axis in range(p.ndim)]


# --------------------------------------------------------------------------- volumes


@dataclass(frozen=True)
class _GibbsPoint:
    """A Gibbs reference of a region: beta, <H_R>, and at the compression bond (and at
    half of it with twice the imaginary-time step, ``*_low``) ln Z_R and the Chebyshev
    moments of Ht_R in the Gibbs state."""

    beta: float
    energy: float
    log_z: float
    log_z_low: float
    moments: np.ndarray       # (N,)
    moments_low: np.ndarray   # (N,)


class _RegionVolumes:
    """ln Omega_R(b) of one region: exact counts up to EXACT_VOLUME_SITES sites, else
    reweighted from Gibbs states near the target energies (module docstring)."""

    def __init__(self, region: _Region, targets, n_moments: int, bond: int,
                 exact_sites: int = EXACT_VOLUME_SITES):
        self.region = region
        self.exact = region.model.L <= exact_sites
        self.points = ([] if self.exact else
                       [_gibbs_point(region, float(e), n_moments, bond) for e in targets])

    @functools.cached_property
    def _eigenvalues(self) -> np.ndarray:
        """The eigenvalues of H_R (exact-count regions; diagonalised once, cost 8^n)."""
        return np.linalg.eigvalsh(self.region.model.block_hamiltonian(0, self.region.model.L))

    def log_volumes(self, bins: np.ndarray, n_moments: int, sub_bins: int,
                    low: bool = False) -> np.ndarray:
        """ln Omega(b) of the integer bins (N = ``n_moments`` of the stored moments;
        ``low``: the references at half the bond)."""
        width = self.region.bin_width
        if self.exact:
            index = np.floor(self._eigenvalues / width).astype(np.int64)
            counts = np.array([np.sum(index == k) for k in bins], dtype=float)
            with np.errstate(divide="ignore"):
                return np.log(counts)
        energies = np.array([pt.energy for pt in self.points])
        out = np.empty(len(bins))
        for i, k in enumerate(bins):
            pt = self.points[int(np.argmin(np.abs(energies - (k + 0.5) * width)))]
            weights, centres = _sub_bins(self.region, k, sub_bins, n_moments)
            p_sub = weights @ (pt.moments_low if low else pt.moments)[:n_moments]
            out[i] = _reweighted(p_sub, centres, pt.log_z_low if low else pt.log_z, pt.beta)
        return out


def _sub_bins(region: _Region, k: int, sub_bins: int,
              n_moments: int) -> tuple[np.ndarray, np.ndarray]:
    """The weights C (sub_bins, N) of the equal sub-bins of bin k (probabilities = C mu,
    :func:`mpsobs.chebyshev.bin_weights`) and the sub-bins' centre energies."""
    edges = (k + np.arange(sub_bins + 1) / sub_bins) * region.bin_width
    return (chebyshev.bin_weights(edges, region.centre, region.half_width, n_moments),
            (edges[:-1] + edges[1:]) / 2)


def _reweighted(p_sub: np.ndarray, centres: np.ndarray, log_z: float, beta: float) -> float:
    """ln [Z sum_s p_beta(s) e^(beta E_s)] over the sub-bins s with p_beta > 0 (-inf if
    none): the log volume of a bin reweighted from a Gibbs reference."""
    live = p_sub > 0
    if not live.any():
        return -np.inf
    return float(log_z + logsumexp(np.log(p_sub[live]) + beta * centres[live]))


def _fingerprint(model: Model) -> str:
    """A digest of the model's terms (sites and matrices): the identity of a region
    Hamiltonian for the reference memo."""
    digest = hashlib.blake2b(str(model.L).encode(), digest_size=16)
    for term in model.terms:
        digest.update(str(term.start).encode())
        digest.update(np.ascontiguousarray(term.matrix, dtype=complex).tobytes())
    return digest.hexdigest()


def clear_references() -> None:
    """Empty the memo of Gibbs references (for benchmarks that time a first call)."""
    _MEMO.clear()


def _memo(key: tuple, compute):
    """The memo's value for ``key``, computed on first use (the oldest entry is dropped
    beyond MEMO_SIZE)."""
    if key not in _MEMO:
        if len(_MEMO) >= MEMO_SIZE:
            _MEMO.pop(next(iter(_MEMO)))
        _MEMO[key] = compute()
    return _MEMO[key]


def _probe(region: _Region, mpo, beta: float, bond: int) -> tuple[float, float]:
    """Mean and variance of H_R in its Gibbs state at ``beta`` (compression ``bond``)."""
    a, c = region.half_width, region.centre
    seg, _ = chebyshev.gibbs_segment(region.model, beta, bond)
    m = chebyshev.moment_matrices(seg, mpo, 4, bond)[:3, 0, 0].real
    return float(c + a * m[1]), float(a**2 * ((m[2] + 1) / 2 - m[1] ** 2))


def _reference_beta(region: _Region, mpo, target: float, n_moments: int, bond: int,
                    key: str) -> float:
    """The grid inverse temperature of the region's reference for ``target``: Newton steps
    on <H_R>(beta) (d<H>/dbeta = -Var H) from beta = 0, each rounded to the grid
    k BETA_GRID / sigma_0 (sigma_0 the spread of H_R at beta = 0), until <H_R> is within
    half a standard deviation of the target or the step rounds to no move, at most
    NEWTON_STEPS of them, and |beta| at most MAX_BETA_RESOLUTION / delta for the kernel
    resolution delta = pi a / N (the factor e^(beta E) magnifies the smoothing by about
    e^(|beta| delta)). Rounding moves <H_R> by at most half a standard deviation more;
    any beta gives exact volumes in the limit, a near one accurate ones."""
    search_bond = min(bond, NEWTON_BOND)

    def probe(beta: float) -> tuple[float, float]:
        return _memo(("probe", key, beta, search_bond),
                     lambda: _probe(region, mpo, beta, search_bond))

    step = BETA_GRID / np.sqrt(max(probe(0.0)[1], 1e-300))
    largest = int(np.floor(MAX_BETA_RESOLUTION * n_moments / (np.pi * region.half_width)
                           / step))
    k = 0
    for _ in range(NEWTON_STEPS):
        mean, var = probe(k * step)
        if abs(mean - target) <= 0.5 * np.sqrt(max(var, 0.0)) or var <= 0:
            break
        moved = int(np.clip(np.rint(k + (mean - target) / var / step), -largest, largest))
        if moved == k:
            break
        k = moved
    return k * step


def _gibbs_point(region: _Region, target: float, n_moments: int, bond: int) -> _GibbsPoint:
    """The region's Gibbs reference for ``target`` (:func:`_reference_beta`), its ln Z_R
    and moments at the compression bond and at half of it. References are kept in a memo
    of the process by region, grid beta and settings, so that later output times (whose
    targets round to the same grid beta) reuse them; the result does not depend on
    what the memo holds."""
    mpo = chebyshev.scaled_mpo(region.model, region.centre, region.half_width, 4)
    a, c = region.half_width, region.centre
    key = _fingerprint(region.model)
    beta = _reference_beta(region, mpo, target, n_moments, bond, key)

    def build() -> _GibbsPoint:
        runs = []
        for b, step in ((bond, chebyshev.GIBBS_STEP), (max(2, bond // 2),
                                                       2 * chebyshev.GIBBS_STEP)):
            seg, log_z = chebyshev.gibbs_segment(region.model, beta, b, step)
            runs.append((log_z, chebyshev.moment_matrices(seg, mpo, n_moments, b)[:, 0, 0].real))
        (log_z, mu), (log_z_low, mu_low) = runs
        return _GibbsPoint(beta, float(c + a * mu[1]), log_z, log_z_low, mu, mu_low)

    return _memo(("reference", key, beta, n_moments, bond), build)


def _targets(region: _Region, marginal: np.ndarray) -> np.ndarray:
    """Energies of the volume references: the mean of the state's regional energy and
    the mean +- 2 standard deviations (only the mean when the spread is below a bin)."""
    centres = (region.bins + 0.5) * region.bin_width
    mean = float(marginal @ centres)
    std = float(np.sqrt(max(float(marginal @ (centres - mean) ** 2), 0.0)))
    if std <= region.bin_width / 2:
        return np.array([mean])
    return mean + std * np.array(VOLUME_TARGETS)


def region_volumes(model: Model, bin_width: float, bins, *, targets=None,
                   n_moments: int = DEFAULT_MOMENTS, bond: int = DEFAULT_BOND,
                   sub_bins: int = DEFAULT_SUB_BINS) -> np.ndarray:
    """ln Omega(b) for the integer bins [k dE, (k + 1) dE) of the whole
    ``model`` taken as a region: exact counts up to EXACT_VOLUME_SITES sites, else
    reweighted from Gibbs states at the ``targets`` energies (default: the middle of
    the given bins)."""
    bins = np.asarray(bins, dtype=np.int64)
    region = _region(model, bin_width)
    if targets is None:
        targets = [(bins.mean() + 0.5) * bin_width]
    vol = _RegionVolumes(region, targets, n_moments, bond)
    return vol.log_volumes(bins, n_moments, sub_bins)


# --------------------------------------------------------------------------- cost


@dataclass(frozen=True)
class KernelCounts:
    """The kernel calls of one :func:`wide_energy_entropy`, for a cost model: flops in
    matrix products, the shapes (m, n) and counts of the SVDs and of the QRs (counted as
    thin QRs with their Q; a triangular factor alone counts half), the number of calls
    and the largest working set in bytes."""

    gemm: float
    svds: tuple[tuple[int, int, float], ...]
    qrs: tuple[tuple[int, int, float], ...]
    calls: float
    size: float

    def __repr__(self) -> str:
        return (f"KernelCounts(gemm {number(self.gemm)} flops, "
                f"{number(sum(k for _, _, k in self.svds))} SVDs, "
                f"{number(sum(k for _, _, k in self.qrs))} QRs, {number(self.size)} bytes)")


def kernel_counts(cg: WideEnergyRegions, state_bond: int, local_dim: int = 2, *,
                  moments: int = DEFAULT_MOMENTS, bond: int = DEFAULT_BOND,
                  beta: float | None = None, runs: bool = True,
                  references: bool = True) -> KernelCounts:
    """Counted work of :func:`wide_energy_entropy` on a state of bond ``state_bond``
    (local dimension 2, or 4 for a purification): with ``runs``, per region two Chebyshev
    runs on the state (bonds D and D / 2) of N / 2 compressions, each n - 1 triangular
    factors of (d (w + 1) D, (w + 1) D) (half a QR with its Q, and a triangular product of
    4 d ((w + 1) D)^3 flops) and SVDs of ((w + 1) D, d D) (the summed bond against the
    compressed one) and 2 overlaps of 16 n d D^3 (times N stacked environments for the middle
    region, and a closing 8 N^2 chi^2; for the joint number and energy of three regions
    the stack is 3 (n_A + 1) x the bins of A instead of N, times n_C + 1 phases for a
    purification: an upper bound, the live grid being smaller); with ``references``, per
    region wider than
    EXACT_VOLUME_SITES three Gibbs references, each NEWTON_STEPS builds and 4-moment runs
    at NEWTON_BOND and two builds and runs (d = 4) at D and D / 2, a build at |``beta``|
    (default: the largest, MAX_BETA_RESOLUTION N / (pi a)) taking |beta| / (2 GIBBS_STEP)
    imaginary-time steps of about six layers of (n - 1) / 2 splits of (4 D, 4 D) (half
    the steps at D / 2). The references are built once and kept in the memo, so a cost
    model counts them once per point and the runs at every output time. An estimate of
    the order, not a count of the state's own bonds."""
    calls, gemm = 0.0, 0.0
    svds, qrs = [], []

    def run(n: int, w: int, d: int, compress: int, steps: float, stacked: int = 1) -> None:
        nonlocal gemm, calls
        summed = (w + 1) * compress
        svds.append((summed, d * compress, steps * (n - 1)))
        qrs.append((d * summed, summed, steps * (n - 1) / 2))
        gemm += steps * (8.0 * n * w * w * d * d * compress**2 + 4.0 * (n - 1) * d * summed**3
                         + 2 * stacked * 16.0 * n * d * compress**3)
        calls += steps * 6.0 * n

    def build(n: int, compress: int, steps: float) -> None:
        nonlocal gemm, calls
        splits = 6.0 * steps * (n - 1) / 2
        svds.append((4 * compress, 4 * compress, splits))
        gemm += splits * 16.0 * (4 * compress) ** 2 * compress
        calls += splits * 4

    stack = moments
    if cg.observables != ("energy",) and len(cg.regions) == 3:   # joint: sector stacks
        (a0, a1), (c0, c1) = cg.regions[:2]
        first = _region(cg.model.restricted(a0, a1), cg.bin_width)
        stack = 3 * (a1 - a0 + 1) * len(first.bins) * (c1 - c0 + 1 if local_dim == 4 else 1)
    for i, (a, b) in enumerate(cg.regions):
        region = cg.model.restricted(a, b)
        n, w = b - a, max(x.shape[1] for x in mpo_tensors(region))
        for compress in (bond, max(2, bond // 2)) if runs else ():
            middle = 0 < i < len(cg.regions) - 1
            run(n, w, local_dim, compress, moments / 2, stack if middle else 1)
            if middle:
                gemm += 8.0 * moments**3 * state_bond**2
        if references and n > EXACT_VOLUME_SITES:
            half = chebyshev.spectrum_bounds(region)[1]
            largest = MAX_BETA_RESOLUTION * moments / (np.pi * half)
            reached = min(largest, largest if beta is None else abs(beta))
            steps = max(1.0, np.ceil(reached / 2 / chebyshev.GIBBS_STEP))
            for _ in VOLUME_TARGETS:
                for _ in range(NEWTON_STEPS):
                    build(n, min(bond, NEWTON_BOND), steps)
                    run(n, w, 4, min(bond, NEWTON_BOND), 2)
                for compress, share in ((bond, 1.0), (max(2, bond // 2), 0.5)):
                    build(n, compress, max(1.0, np.ceil(steps * share)))
                    run(n, w, 4, compress, moments / 2)
    size = 16.0 * (2 * moments ** len(cg.regions) + moments * state_bond**2
                   + moments * bond**2 * local_dim * (len(cg.regions) - 2))
    return KernelCounts(gemm, tuple(svds), tuple(qrs), calls, size)


# --------------------------------------------------------------------------- entropy


def _log_volumes(log_vs) -> np.ndarray:
    """ln V(b) = sum_R ln Omega_R(b_R) on the grid of the regions' bins."""
    return functools.reduce(np.add.outer, log_vs)


def _entropy(p: np.ndarray, log_vs) -> tuple[_Parts, float]:
    """S_obs and its parts, and the probability the smoothed series put into bins
    without eigenvalues (left out, the rest renormalised)."""
    log_v = _log_volumes(log_vs)
    live = (p > PROBABILITY_FLOOR) & np.isfinite(log_v)
    dropped = max(0.0, float(p.sum() - p[live].sum()))   # >= 0 up to round-off
    pl = p[live] / p[live].sum()
    shannon = float(-np.sum(pl * np.log(pl)))
    boltzmann = float(np.sum(pl * log_v[live]))
    return _Parts(shannon + boltzmann, shannon, boltzmann), dropped


_WARNED: set[tuple[str, int, int]] = set()


def warn_if_rerun_bond_low(mps, cg: WideEnergyRegions, bond: int) -> None:
    """Log a warning (once per coarse-graining, cut and bond in a process) when the
    state's bond at a cut between regions is at least half the compression ``bond``: the
    rerun at D / 2 of the error estimate (2) then truncates the Schmidt vectors at the
    cut, and the error it reports grows."""
    for start, _ in cg.regions[1:]:
        chi = mps.tensors[start].shape[0]
        if chi >= max(2, bond // 2) and (cg.label, start, bond) not in _WARNED:
            _WARNED.add((cg.label, start, bond))
            log.warning("%s: the state's bond %d at the cut before site %d is at least half "
                        "the compression bond %d of the Chebyshev vectors, so the error's "
                        "rerun at bond %d truncates the Schmidt vectors and the method error "
                        "grows; a compression bond above %d keeps that rerun meaningful",
                        cg.label, chi, start, bond, max(2, bond // 2), 2 * chi)


def _check_resolution(moments, bond, sub_bins, exact_sites) -> None:
    """InputError naming the first resolution setting out of range."""
    for name, value, minimum in (("moments", moments, 4), ("bond", bond, 2),
                                 ("sub_bins", sub_bins, 2), ("exact_sites", exact_sites, 0)):
        if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < minimum:
            raise InputError(f"{name}: expected an integer >= {minimum}, got {value!r}")
    if moments % 2:
        raise InputError(f"moments: expected an even number (it is halved for the error "
                         f"estimate), got {moments}")


@limits_threads(lambda call: state_size(call.arguments["state"]))
def wide_energy_entropy(state, cg: WideEnergyRegions, *, moments: int = DEFAULT_MOMENTS,
                        bond: int = DEFAULT_BOND, sub_bins: int = DEFAULT_SUB_BINS,
                        exact_sites: int = EXACT_VOLUME_SITES) -> EntropyResult:
    """S_obs of the energies of the two or three regions of ``cg`` in ``state`` (an MPS, or a
    purification for a mixed state), with its method error (module docstring).

    Parameters
    ----------
    state : normalised MPS or :class:`mpsobs.mps.PurifiedMPS` of cg.L sites.
    cg : from :func:`mpsobs.coarse.blocks` with ``observable="energy"`` and a region
        wider than :data:`mpsobs.coarse.MAX_BLOCK_SITES` sites.
    moments : Chebyshev moments per region (even, >= 4).
    bond : compression bond of the Chebyshev vectors (>= 2).
    sub_bins : sub-bins per bin of the reweighted volumes (>= 2).
    exact_sites : regions of at most this many sites get exact volumes (eigenvalue
        counts); probability that the smoothed series puts into their empty bins is left
        out and reported as ``pruned_mass`` (its entropy bound,
        :func:`mpsobs.estimators.estimate.pruned_entropy_bound`, belongs to the total
        error).

    Returns
    -------
    EntropyResult with method "approximate": ``stderr`` 0 (nothing is sampled),
    ``method_err`` (and the parts' errors) the error estimate (1)-(4) of the module
    docstring, ``pruned_mass`` the probability of (5), whose entropy bound is added by
    the total error (:mod:`mpsobs.analysis.uncertainty`); ``distribution`` the bins
    (b_A, b_B), or (b_A, b_C, b_B), with p > 1e-14.
    """
    if not isinstance(cg, WideEnergyRegions) or cg.observables != ("energy",):
        raise InputError(f"coarse_graining: expected wide energy regions from "
                         f"mpsobs.coarse.blocks, got {getattr(cg, 'label', type(cg).__name__)}")
    _check_resolution(moments, bond, sub_bins, exact_sites)
    mps = canonical_state(state, cg.L)
    warn_if_rerun_bond_low(mps, cg, bond)
    segments, lam = _segments(mps, cg.regions)
    volume_regions = tuple(_region(cg.model.restricted(x, y), cg.bin_width)
                           for x, y in cg.regions)
    b0, b1 = cg.regions[-1]
    regions = (*volume_regions[:-1], _region(_mirror_model(cg.model.restricted(b0, b1)),
                                             cg.bin_width))
    low_bond = max(2, bond // 2)
    mu = _state_moments(segments, lam, regions, moments, bond)
    mu_low = _state_moments(segments, lam, regions, moments, low_bond)
    p = _joint(mu, regions, moments)
    volumes = [_RegionVolumes(vreg, _targets(vreg, m), moments, bond, exact_sites)
               for vreg, m in zip(volume_regions, _marginals(p), strict=True)]

    def evaluate(probs: np.ndarray, n_moments: int, sub: int, low: bool) -> tuple:
        log_v = []
        for vol, reg, marginal in zip(volumes, regions, _marginals(probs), strict=True):
            keep = marginal > PROBABILITY_FLOOR
            values = np.full(len(reg.bins), -np.inf)
            values[keep] = vol.log_volumes(reg.bins[keep], n_moments, sub, low)
            log_v.append(values)
        return _entropy(probs, log_v), log_v

    (main, dropped), log_vols = evaluate(p, moments, sub_bins, False)
    (half, _), _ = evaluate(_joint(mu, regions, moments // 2), moments // 2, sub_bins, False)
    (low, _), _ = evaluate(_joint(mu_low, regions, moments), moments, sub_bins, True)
    (coarse_sub, _), _ = evaluate(p, moments, max(1, sub_bins // 2), False)
    log_v = _log_volumes(log_vols)
    live = np.argwhere((p > PROBABILITY_FLOOR) & np.isfinite(log_v))
    outcomes = np.column_stack([reg.bins[live[:, i]] for i, reg in enumerate(regions)])
    dist = OutcomeDistribution(outcomes, p[tuple(live.T)], np.exp(log_v[tuple(live.T)]))
    leak = _edge_leakage(p, log_v, functools.partial(_contract, mu), regions, moments,
                         range(p.ndim))
    return _approximate_result(mps, cg, dist, dropped, main, (half, low, coarse_sub), leak)


def _approximate_result(mps, cg, dist: OutcomeDistribution, dropped: float, main: _Parts,
                        reruns: tuple[_Parts, _Parts, _Parts],
                        leak: np.ndarray) -> EntropyResult:
    """The result of a wide-region estimate from its main evaluation, its reruns at
    half the moments, half the bond and half the sub-bins, and the edge part ``leak``
    (:func:`_edge_leakage`): the method error (module docstring) is the larger of the
    change at half the moments (divided by RESOLUTION_ORDER_FACTOR) and the edge part,
    plus the other two changes."""
    half, low, coarse_sub = reruns
    err = (np.maximum(main.change(half) / RESOLUTION_ORDER_FACTOR, leak)
           + main.change(low) + main.change(coarse_sub))
    bonds = None if isinstance(mps, PurifiedMPS) else bond_entropies(mps)
    return EntropyResult(entropy=main.entropy, stderr=0.0, shannon=main.shannon,
                         shannon_err=float(err[1]), boltzmann=main.boltzmann,
                         boltzmann_err=float(err[2]), max_entropy=cg.max_entropy,
                         method="approximate", label=cg.label, distribution=dist,
                         bond_entropies=bonds, algorithm="mps-chebyshev",
                         pruned_mass=dropped, method_err=float(err[0]))
