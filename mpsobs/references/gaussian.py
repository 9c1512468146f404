"""Free fermions: the exact engine for XX chains (and the Ising chain's quasiparticles).

Jordan-Wigner mapping, site 0 first: a particle is a site in |1> (sigma^z = -1), so

    c_i^dagger = (prod_{k<i} sigma^z_k) |1><0|_i,      n_i = (1 - sigma^z_i) / 2,

and an XX chain ``xxz(L, J, delta=0, h)``, H = J sum (SxSx + SySy) + sum h_i Sz_i with
S = sigma / 2, becomes

    H = sum_ij c_i^dagger T_ij c_j + E_0,   T_{i,i+1} = T_{i+1,i} = J / 2,
    T_ii = -h_i,   E_0 = sum_i h_i / 2

(Sz_i = 1/2 - n_i). The single-particle band of the uniform chain is J cos k - h, so the
largest group velocity is |J|. :func:`quadratic_hamiltonian` reads T and E_0 off the
model's local terms, so any number-conserving chain of nearest-neighbour hoppings and
on-site fields works (per-bond J, any per-site h).

Correlation matrices are C_ij = <c_i^dagger c_j> (row index carries the dagger). For a
Gaussian (quasi-free) state they determine everything: the time evolution
C(t) = conj(U) C U^T with U = exp(-i T t) (J. Phys. A 36, L205 (2003)), and the full
counting statistics of the number of particles in regions A_1..A_m,

    < prod_k z_k^{N_k} > = det(1 + (Z - 1) C),    Z = diag(z_k on A_k, 1 elsewhere),

the multi-region form of det(1 - C_A + e^{i lambda} C_A) (Phys. Rev. Lett. 102, 100502
(2009)). :func:`number_distribution` inverts it by an FFT on a grid of z_k on the unit
circle. For a state that is not Gaussian the counting formulas do not apply.

The transverse Ising chain (h = 0) maps to free Majorana fermions instead
(:func:`quasiparticle_energies`).

Logarithms are natural. Site order: site 0 is the most significant bit of a dense index.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
import scipy.linalg as sla
from scipy.special import expit, gammaln

from mpsobs.chain.models import Model
from mpsobs.core.errors import InputError, finite_number
from mpsobs.estimators.result import EntropyResult, OutcomeDistribution, entropy_from_distribution
from mpsobs.mps.tensors import as_mps, right_canonical

__all__ = [
    "QuadraticHamiltonian", "quadratic_hamiltonian", "quasiparticle_energies",
    "product_correlation", "gibbs_correlation", "correlation_matrix", "evolve_correlation",
    "density",
    "energy", "number_variance", "mode_occupations", "NumberDistribution",
    "number_distribution", "number_entropy", "MAX_REGIONS",
]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)

#: Most regions :func:`number_distribution` handles jointly.
MAX_REGIONS = 3
#: Relative size of the parts of a term that the free-fermion form ignores.
_TERM_TOL = 1e-12
#: Number variance below which a state counts as having a definite particle number.
_DEFINITE_NUMBER_VAR = 1e-10
#: Grid points of the counting-statistics FFT handled in one batch.
_BATCH = 64


@dataclass(frozen=True, eq=False)
class QuadraticHamiltonian:
    """H = sum_ij c_i^dagger hopping_ij c_j + offset, with its eigen-decomposition.

    ``energies`` are the single-particle energies (ascending), ``modes[:, k]`` the
    eigenvector of ``energies[k]``: hopping = modes @ diag(energies) @ modes^dagger.
    """

    hopping: np.ndarray   # (L, L) Hermitian
    offset: float
    energies: np.ndarray  # (L,)
    modes: np.ndarray     # (L, L) unitary

    @property
    def L(self) -> int:
        return self.hopping.shape[0]

    def __repr__(self) -> str:
        return (f"QuadraticHamiltonian(L={self.L}, single-particle energies "
                f"{self.energies[0]:.6g}..{self.energies[-1]:.6g}, offset {self.offset:.6g})")


def _check_model(model) -> Model:
    if not isinstance(model, Model):
        raise InputError(f"model: expected an mpsobs.models.Model, got {type(model).__name__}")
    return model


def _not_free(model: Model, why: str) -> InputError:
    return InputError(f"model: the free-fermion engine handles XX chains (xxz with delta = 0, "
                      f"any fields h) and, for quasiparticle energies, Ising chains with h = 0; "
                      f"this {model.name} chain {why}")


def quadratic_hamiltonian(model: Model) -> QuadraticHamiltonian:
    """T and E_0 of an XX chain, read off its local terms (see the module docstring).

    A two-site term must be t |01><10| + h.c. plus one-body diagonal parts; a one-site
    term must be diagonal. Anything else (delta != 0, transverse fields) raises
    InputError. Cost: one dense eigendecomposition, O(L^3).
    """
    model = _check_model(model)
    L = model.L
    hop = np.zeros((L, L), dtype=complex)
    offset = 0.0
    tol = _TERM_TOL * model.energy_scale
    for term in model.terms:
        m = np.asarray(term.matrix, dtype=complex)
        i = term.start
        if term.width == 1:
            if abs(m[0, 1]) > tol or abs(m[1, 0]) > tol:
                raise _not_free(model, f"has a transverse field on site {i}")
            offset += m[0, 0].real
            hop[i, i] += m[1, 1] - m[0, 0]
        elif term.width == 2:
            # Basis |s_i s_{i+1}>: 0 = |00>, 1 = |01>, 2 = |10>, 3 = |11>.
            # |01><10| = c_{i+1}^dagger c_i (adjacent sites: the string cancels).
            off = m.copy()
            off[1, 2] = off[2, 1] = 0.0
            np.fill_diagonal(off, 0.0)
            d = np.diag(m).real
            interaction = d[3] - d[2] - d[1] + d[0]
            if np.abs(off).max() > tol or abs(interaction) > tol:
                raise _not_free(model, f"has an interaction or pairing on bond {i}-{i + 1} "
                                f"(delta != 0?)")
            hop[i + 1, i] += m[1, 2]
            hop[i, i + 1] += m[2, 1]
            hop[i, i] += d[2] - d[0]
            hop[i + 1, i + 1] += d[1] - d[0]
            offset += d[0]
        else:
            raise _not_free(model, f"has a {term.width}-site term at site {i}")
    if not np.allclose(hop, hop.conj().T, atol=tol):
        raise _not_free(model, "has a non-Hermitian hopping")
    if np.abs(hop.imag).max() <= tol:
        hop = hop.real.copy()
        # Nearest-neighbour hopping: T is tridiagonal (LAPACK stemr, O(L^2) per vector).
        energies, modes = sla.eigh_tridiagonal(np.diag(hop).copy(), np.diag(hop, 1).copy())
    else:
        energies, modes = sla.eigh(hop, driver="evd")
    return QuadraticHamiltonian(hop, float(offset), energies, modes)


def quasiparticle_energies(model: Model) -> np.ndarray:
    """Bogoliubov quasiparticle energies eps_k >= 0 (ascending) of an Ising chain with h = 0.

    H = -J sum sz_i sz_{i+1} - sum g_i sx_i = sum_k eps_k (eta_k^dagger eta_k - 1/2) exactly
    on the open chain (no boundary term, all 2^L fermion configurations are states). With
    Majoranas of the rotated chain, H = (i/4) sum_ab M_ab gamma_a gamma_b,
    M_{2i,2i+1} = 2 g_i, M_{2i+1,2i+2} = 2 J_i, and eps_k are the singular values of M
    (each counted once). Ann. Phys. 16, 407 (1961); Ann. Phys. 57, 79 (1970).
    Cost O(L^3).
    """
    model = _check_model(model)
    L = model.L
    tol = _TERM_TOL * model.energy_scale
    couplings = np.zeros(L - 1)
    fields = np.zeros(L)
    for term in model.terms:
        m = np.asarray(term.matrix)
        i = term.start
        if term.width == 1:
            if abs(m[0, 0]) > tol or abs(m[1, 1]) > tol or abs(m[0, 1] - m[1, 0]) > tol:
                raise _not_free(model, f"has a longitudinal field h on site {i}")
            fields[i] -= m[0, 1].real
        elif term.width == 2:
            zz = np.diag([1.0, -1.0, -1.0, 1.0])
            c = m[0, 0]
            if np.abs(m - c * zz).max() > tol:
                raise _not_free(model, f"bond {i}-{i + 1} is not of the form -J sz sz")
            couplings[i] -= c.real
        else:
            raise _not_free(model, f"has a {term.width}-site term at site {i}")
    # Rotated chain (x <-> z): -J X X - g Z; gamma_{2i} ~ X_i, gamma_{2i+1} ~ Y_i.
    # -g Z_i = i g gamma_{2i} gamma_{2i+1};  -J X_i X_{i+1} = i J gamma_{2i+1} gamma_{2i+2}.
    # The singular values of M are those of its bidiagonal part B (M = [[0, B], [-B^T, 0]]
    # after ordering even and odd Majoranas), B_{ii} = 2 g_i, B_{i,i+1} = 2 J_i.
    b = np.diag(2 * fields) + np.diag(2 * couplings, 1)
    return np.sort(np.linalg.svd(b, compute_uv=False))


# --------------------------------------------------------------------------- states


def _check_corr(corr) -> np.ndarray:
    c = np.asarray(corr)
    if not np.issubdtype(c.dtype, np.number) or c.ndim != 2 or c.shape[0] != c.shape[1]:
        raise InputError(f"corr: expected a square (L, L) correlation matrix, got "
                         f"{getattr(c, 'shape', type(corr).__name__)}")
    if c.shape[0] < 1 or not np.all(np.isfinite(c)):
        raise InputError("corr: the correlation matrix must be non-empty and finite")
    if np.abs(c - c.conj().T).max() > 1e-10:
        raise InputError("corr: the correlation matrix is not Hermitian")
    diag = np.diag(c).real
    if diag.min() < -1e-10 or diag.max() > 1 + 1e-10:
        raise InputError("corr: diagonal entries (site occupations) must lie in [0, 1]")
    return c.astype(complex, copy=False)


def product_correlation(pattern: Sequence[int]) -> np.ndarray:
    """C of a computational-basis product state: ``pattern[i]`` is 1 if site i is in |1>
    (holds a particle), 0 if in |0>. Returns the diagonal (L, L) complex matrix."""
    arr = np.asarray(pattern)
    if arr.ndim != 1 or arr.size < 1 or not np.all(np.isin(arr, (0, 1))):
        raise InputError(f"pattern: expected a non-empty sequence of 0/1 site values, "
                         f"got {pattern!r}")
    return np.diag(arr.astype(complex))


def gibbs_correlation(ham: QuadraticHamiltonian, beta: float, mu: float = 0.0) -> np.ndarray:
    """C of the Gibbs state exp(-beta (H - mu N)) / Z: conj(V) diag(f) V^T with the
    Fermi occupations f_k = 1 / (exp(beta (eps_k - mu)) + 1) of the eigenmodes V.
    Negative beta is allowed. Cost O(L^3)."""
    beta, mu = float(beta), float(mu)
    if not (np.isfinite(beta) and np.isfinite(mu)):
        raise InputError(f"beta, mu: expected finite numbers, got {beta!r}, {mu!r}")
    f = expit(-beta * (ham.energies - mu))
    return (ham.modes.conj() * f) @ ham.modes.T


def correlation_matrix(state) -> np.ndarray:
    """C_ij = <c_i^dagger c_j> of an MPS (mpsobs MPS, quimb MPS or list of arrays).

    Uses c_i^dagger c_j = |1><0|_i (prod_{i<k<j} sigma^z_k) |0><1|_j for i < j: one
    string transfer matrix is opened at every site and carried to the right, all of them
    together as a stack. The state is brought to right-canonical form and normalised.
    Cost O(L^2 chi^3) time and O(L chi^2) memory (chi the largest bond). Valid for any
    state; only for Gaussian states does C determine the state.
    """
    mps = right_canonical(as_mps(state), normalize=True)
    L = mps.L
    corr = np.zeros((L, L), dtype=complex)
    env = np.ones((1, 1), dtype=complex)          # left environment of the norm
    strings = None  # stack of string environments, one per open c_i^dagger (i < k)
    for k, t in enumerate(mps.tensors):
        a0, a1 = t[:, 0, :], t[:, 1, :]
        if strings is not None:
            x_a1 = strings @ a1
            corr[:k, k] = np.einsum("ac,nac->n", a0.conj(), x_a1)
            strings = a0.conj().T @ (strings @ a0) - a1.conj().T @ x_a1
        corr[k, k] = np.einsum("ac,ab,bc->", a1.conj(), env, a1).real
        opened = a1.conj().T @ env @ a0
        env = a0.conj().T @ env @ a0 + a1.conj().T @ env @ a1
        strings = opened[None] if strings is None else np.concatenate([strings, opened[None]])
    upper = np.triu(corr, 1)
    return upper + upper.conj().T + np.diag(np.diag(corr).real)


def evolve_correlation(ham: QuadraticHamiltonian, corr, t: float) -> np.ndarray:
    """C(t) = conj(U) C U^T with U = exp(-i T t) (hbar = 1): the exact evolution of the
    correlation matrix under H (J. Phys. A 36, L205 (2003)). Cost O(L^3): three complex
    matrix products, two when C is diagonal."""
    c = _check_corr(corr)
    if c.shape[0] != ham.L:
        raise InputError(f"corr: shape {c.shape} does not match the chain (L = {ham.L})")
    t = finite_number(t, "t")
    u = (ham.modes * np.exp(-1j * ham.energies * t)) @ ham.modes.conj().T
    diag = np.diag(c)
    if np.count_nonzero(c) == np.count_nonzero(diag):  # product states: C is diagonal
        return (u.conj() * diag) @ u.T
    return u.conj() @ c @ u.T


def density(corr) -> np.ndarray:
    """Site occupations <n_i> = C_ii (real, length L)."""
    return np.diag(_check_corr(corr)).real.copy()


def energy(ham: QuadraticHamiltonian, corr) -> float:
    """<H> = sum_ij T_ij C_ij + E_0 (the total energy, the same H as the spin model)."""
    c = _check_corr(corr)
    return float(np.sum(ham.hopping * c).real + ham.offset)


def number_variance(corr) -> float:
    """Var N of a Gaussian state: tr C - tr C^2 = sum_k nu_k (1 - nu_k). Cost O(L^2)."""
    c = _check_corr(corr)
    return float(np.trace(c).real - np.vdot(c, c).real)


def mode_occupations(ham: QuadraticHamiltonian, corr, *,
                     degeneracy_tol: float = 1e-9) -> np.ndarray:
    """Occupations <eta_k^dagger eta_k> of the single-particle eigenmodes (order of
    ``ham.energies``); they are conserved by H.

    Within a degenerate set of single-particle energies (closer than ``degeneracy_tol``
    times the bandwidth scale) every quadratic form is conserved; there the occupations
    are the eigenvalues of the block of modes^T C conj(modes), which makes them
    independent of the choice of eigenvectors. Cost O(L^3).
    """
    c = _check_corr(corr)
    if c.shape[0] != ham.L:
        raise InputError(f"corr: shape {c.shape} does not match the chain (L = {ham.L})")
    m = ham.modes.T @ c @ ham.modes.conj()
    eps = ham.energies
    tol = degeneracy_tol * max(1.0, float(np.abs(eps).max()))
    out = np.diag(m).real.copy()
    starts = np.flatnonzero(np.concatenate([[True], np.diff(eps) > tol]))
    stops = np.append(starts[1:], len(eps))
    for a, b in zip(starts, stops, strict=True):
        if b - a > 1:
            out[a:b] = sla.eigvalsh(m[a:b, a:b])
    return np.clip(out, 0.0, 1.0)


# --------------------------------------------------------------------------- counting


@dataclass(frozen=True, eq=False)
class NumberDistribution:
    """Exact joint distribution of the particle numbers in one to three regions.

    ``outcomes[i, k]`` is the number in ``regions[k]``, ``probabilities[i]`` its
    probability (clipped at 0). Diagnostics of the FFT inversion: ``total_defect`` =
    sum of the unclipped probabilities - 1 (round-off), ``min_probability`` the most
    negative unclipped value (round-off; 0 if none), ``tail_mass`` an upper bound on the
    probability of counts outside the FFT window (aliased into it) plus, when the last
    region's count is fixed by a definite total number, the variance bound on that
    assumption. ``total_number`` is that definite total (None otherwise).
    """

    regions: tuple[tuple[int, int], ...]
    outcomes: np.ndarray       # (n, m) int
    probabilities: np.ndarray  # (n,)
    total_defect: float
    min_probability: float
    tail_mass: float
    total_number: int | None

    def __repr__(self) -> str:
        regions = ", ".join(f"{a}..{b - 1}" for a, b in self.regions)
        return (f"NumberDistribution(regions {regions}: {len(self.probabilities)} outcomes, "
                f"tail mass {self.tail_mass:.2g}, total defect {self.total_defect:.2g})")


def _check_regions(regions, L: int) -> tuple[tuple[int, int], ...]:
    try:
        spans = tuple((int(a), int(b)) for a, b in regions)
    except (TypeError, ValueError):
        raise InputError("regions: expected a list of (start, stop) pairs of site "
                         "indices") from None
    if not 1 <= len(spans) <= MAX_REGIONS:
        raise InputError(f"regions: expected 1 to {MAX_REGIONS} regions, got {len(spans)}")
    for a, b in spans:
        if not 0 <= a < b <= L:
            raise InputError(f"regions: ({a}, {b}) is not a non-empty half-open range of "
                             f"sites inside 0..{L}")
    ordered = sorted(spans)
    for (_, b1), (a2, _) in zip(ordered, ordered[1:], strict=False):
        if a2 < b1:
            raise InputError(f"regions: regions overlap at site {a2}")
    return spans


def _poisson_binomial(nu: np.ndarray) -> np.ndarray:
    """pmf of the number of successes of independent trials with probabilities nu:
    the coefficients of prod_k (1 - nu_k + nu_k z). Cost O(len(nu)^2); no cancellation."""
    p = np.zeros(len(nu) + 1)
    p[0] = 1.0
    for k, q in enumerate(np.clip(nu, 0.0, 1.0), start=1):
        p[1:k + 1] = p[1:k + 1] * (1 - q) + p[:k] * q
        p[0] *= 1 - q
    return p


def _window(pmf: np.ndarray, tail: float) -> tuple[int, int, float]:
    """Smallest [lo, hi] whose two tails each hold at most tail / 2; and their mass."""
    cdf = np.cumsum(pmf)
    sf = np.cumsum(pmf[::-1])[::-1]
    lo = int(np.searchsorted(cdf, tail / 2, side="right"))
    hi = int(len(pmf) - 1 - np.searchsorted(sf[::-1], tail / 2, side="right"))
    lo, hi = min(lo, hi), max(lo, hi)
    outside = float((cdf[lo - 1] if lo > 0 else 0.0) + (sf[hi + 1] if hi + 1 < len(pmf) else 0.0))
    return lo, hi, outside


def _counting_grid(c: np.ndarray, grid_spans, grid_windows, eig_span, eig_window):
    """chi(z) * prod_k z_k^{-lo_k} on the grid z_k = exp(2 pi i j / W_k): the grid
    regions by determinants, the eigen region by the eigenvalues of a Schur complement.

    det(1 + (Z - 1) C) with z = 1 on the eigen region e and A = 1 + w C_oo on the grid
    sites o (w = z - 1) factorises as det(A) * prod_k (1 + (z_e - 1) mu_k), mu the
    eigenvalues of C_ee - C_eo A^{-1} w C_oe. Cost per grid point O(u^3 + b_e^3).
    """
    o = np.concatenate([np.arange(a, b) for a, b in grid_spans])
    e = np.arange(*eig_span)
    c_oo, c_oe, c_eo, c_ee = c[np.ix_(o, o)], c[np.ix_(o, e)], c[np.ix_(e, o)], c[np.ix_(e, e)]
    widths = [hi - lo + 1 for lo, hi in grid_windows]
    axes = [np.exp(2j * np.pi * np.arange(w) / w) for w in widths]
    points = np.stack([g.ravel() for g in np.meshgrid(*axes, indexing="ij")], axis=1)
    shift = np.prod(points ** -np.array([lo for lo, _ in grid_windows]), axis=1)
    per_site = np.concatenate([np.full(b - a, k) for k, (a, b) in enumerate(grid_spans)])
    lo_e, hi_e = eig_window
    w_e = hi_e - lo_e + 1
    z_e = np.exp(2j * np.pi * np.arange(w_e) / w_e)
    out = np.empty((len(points), w_e), dtype=complex)
    eye = np.eye(len(o))
    for start in range(0, len(points), _BATCH):
        w = points[start:start + _BATCH][:, per_site] - 1.0          # (G, u)
        a = eye + w[:, :, None] * c_oo
        sign, logdet = np.linalg.slogdet(a)
        schur = c_ee - c_eo @ np.linalg.solve(a, w[:, :, None] * c_oe)
        mu = np.linalg.eigvals(schur)                                # (G, b_e)
        factors = 1.0 + (z_e[None, :, None] - 1.0) * mu[:, None, :]
        out[start:start + _BATCH] = ((sign * np.exp(logdet) * shift[start:start + _BATCH])[:, None]
                                     * np.prod(factors, axis=2))
    out *= z_e[None, :] ** -lo_e
    return out.reshape(*widths, w_e)


def number_distribution(corr, regions: Sequence[Sequence[int]], *,
                        tail: float = 1e-15) -> NumberDistribution:
    """The exact joint distribution of the particle numbers in 1 to 3 disjoint regions
    of a Gaussian number-conserving state with correlation matrix ``corr``.

    One region: the generating function is prod_k (1 - nu_k + z nu_k) over the
    eigenvalues nu of C_A; its coefficients are expanded directly (exact, positive).
    Several regions: det(1 + (Z - 1) C) (Phys. Rev. Lett. 102, 100502 (2009)) on a grid
    of z_k on the unit circle, inverted by an FFT. Each region's grid covers only the
    window of counts that holds all but ``tail`` / m of its exact marginal; the mass
    outside (aliased into the window) is bounded by ``tail_mass``. When the regions cover
    the chain and the state has a definite particle number (Var N < 1e-10, e.g. any
    product state evolved by an XX chain), the count of the region with the widest window
    is fixed by the others and drops out of the grid.

    Regions are half-open (start, stop) site ranges in any order (outcome columns follow
    it); they need not cover the chain.

    Cost: eigenvalues of each C_{A_k}, O(b^3); then per grid point (the product of the
    grid regions' window widths; one point per region fewer than active regions) one
    solve of the grid regions' sites and one nonsymmetric eigenproblem of the last region,
    O(b^3). Two regions, or three covering a pure-number state, cost O(W b^3) with W the
    window width (at most b + 1); three general regions O(W^2 b^3).
    """
    c = _check_corr(corr)
    L = c.shape[0]
    spans = _check_regions(regions, L)
    if not 0 < tail < 1:
        raise InputError(f"tail: expected a number in (0, 1), got {tail!r}")
    m = len(spans)
    marginals = [_poisson_binomial(sla.eigvalsh(c[a:b, a:b])) for a, b in spans]
    if m == 1:
        counts = np.arange(len(marginals[0]))[:, None]
        return NumberDistribution(spans, counts, marginals[0], float(marginals[0].sum() - 1),
                                  0.0, 0.0, None)
    windows = [_window(p, tail / m) for p in marginals]
    tail_mass = sum(w[2] for w in windows)
    covered = sum(b - a for a, b in spans) == L
    var_n = number_variance(c)
    fixed = int(round(np.trace(c).real)) if covered and var_n < _DEFINITE_NUMBER_VAR else None
    active = list(range(m))
    if fixed is not None:
        active.remove(int(np.argmax([hi - lo for lo, hi, _ in windows])))
        tail_mass += max(var_n, 0.0)
    order = sorted(active, key=lambda k: windows[k][1] - windows[k][0])
    eig_k, grid_ks = order[-1], order[:-1]
    if grid_ks:
        grid = _counting_grid(c, [spans[k] for k in grid_ks], [windows[k][:2] for k in grid_ks],
                              spans[eig_k], windows[eig_k][:2])
        box = np.fft.fftn(grid) / grid.size
        imag = float(np.abs(box.imag).max())
        box = box.real
    else:
        lo, hi, _ = windows[eig_k]
        box, imag = marginals[eig_k][lo:hi + 1], 0.0
    axes_k = grid_ks + [eig_k]
    idx = np.indices(box.shape).reshape(len(axes_k), -1).T
    outcomes = np.zeros((idx.shape[0], m), dtype=np.int64)
    for col, k in enumerate(axes_k):
        outcomes[:, k] = idx[:, col] + windows[k][0]
    probs = box.ravel()
    if fixed is not None:
        (k_fix,) = set(range(m)) - set(active)
        outcomes[:, k_fix] = fixed - outcomes.sum(axis=1)
        size = spans[k_fix][1] - spans[k_fix][0]
        ok = (outcomes[:, k_fix] >= 0) & (outcomes[:, k_fix] <= size)
        outcomes, probs = outcomes[ok], probs[ok]
    defect = float(probs.sum() - 1.0)
    min_p = float(min(probs.min(), 0.0))
    if min_p < -1e-10 or abs(defect) > 1e-10 or imag > 1e-10:
        log.warning("number_distribution: FFT round-off larger than expected (defect %.3g, "
                    "most negative %.3g, imaginary part %.3g)", defect, min_p, imag)
    live = probs > 0
    return NumberDistribution(spans, outcomes[live], probs[live], defect, min_p,
                              float(tail_mass), fixed)


def number_entropy(corr, regions: Sequence[Sequence[int]], *, tail: float = 1e-15,
                   label: str | None = None) -> EntropyResult:
    """Exact observational entropy of the number coarse-graining on 1 to 3 regions of a
    Gaussian state: S_obs = -sum_n p_n ln(p_n / V_n), V_n = prod_k C(b_k, n_k) times
    2^(sites in no region) (the unmeasured rest is one macrostate), in nats.

    p_n from :func:`number_distribution` (``pruned_mass`` is its ``tail_mass``);
    ``max_entropy`` = L ln 2. Volumes are handled as logarithms, so regions of thousands
    of sites are fine (``distribution.volumes`` overflows to inf beyond 1e308).
    """
    dist = number_distribution(corr, regions, tail=tail)
    L = np.asarray(corr).shape[0]
    sizes = np.array([b - a for a, b in dist.regions])
    n = dist.outcomes
    log_v = np.sum(gammaln(sizes + 1) - gammaln(n + 1) - gammaln(sizes - n + 1), axis=1)
    log_v += (L - sizes.sum()) * np.log(2.0)
    if label is None:
        label = "number:r" + ",".join(f"{a}-{b}" for a, b in dist.regions)
    res = entropy_from_distribution(dist.probabilities, np.ones(len(n)),
                                    max_entropy=L * np.log(2.0), label=label,
                                    algorithm="gaussian-counting", outcomes=n,
                                    pruned_mass=dist.tail_mass)
    p = res.distribution.probabilities
    boltzmann = float(np.sum(p * log_v))
    with np.errstate(over="ignore"):
        volumes = np.exp(log_v)
    return replace(res, boltzmann=boltzmann, entropy=res.shannon + boltzmann,
                   distribution=OutcomeDistribution(n, p, volumes))
