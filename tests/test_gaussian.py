"""Free-fermion engine against dense exact diagonalisation and published closed forms.

Journal references in this file are cited from memory.
"""

from __future__ import annotations

import itertools
from functools import reduce

import numpy as np
import pytest
import scipy.linalg as sla
from scipy.sparse.linalg import expm_multiply
from scipy.special import gammaln, jv

from mpsobs.chain.models import ising, xxz
from mpsobs.core.errors import InputError
from mpsobs.mps.tensors import from_dense, product_mps, random_mps, to_dense
from mpsobs.references import gaussian

_SIGMA_Z = np.diag([1.0, -1.0])
_RAISE_N = np.array([[0.0, 0.0], [1.0, 0.0]])  # |1><0|: creates a particle


def _bits(L: int) -> np.ndarray:
    """(2**L, L) site occupations of every basis index (site 0 most significant)."""
    return (np.arange(2**L)[:, None] >> (L - 1 - np.arange(L))) & 1


def _creation(i: int, L: int) -> np.ndarray:
    """Dense c_i^dagger = (prod_{k<i} sigma^z_k) |1><0|_i (Jordan-Wigner, site 0 first)."""
    ops = [_SIGMA_Z] * i + [_RAISE_N] + [np.eye(2)] * (L - i - 1)
    return reduce(np.kron, ops)


def _dense_counts(prob: np.ndarray, regions, L: int) -> dict:
    """Joint distribution of the numbers in regions from bit counts of basis states."""
    bits = _bits(L)
    counts = np.stack([bits[:, a:b].sum(axis=1) for a, b in regions], axis=1)
    out: dict = {}
    for key, p in zip(map(tuple, counts), prob, strict=True):
        out[key] = out.get(key, 0.0) + p
    return out


def _max_difference(dist: gaussian.NumberDistribution, reference: dict) -> float:
    got = {tuple(int(n) for n in o): p
           for o, p in zip(dist.outcomes, dist.probabilities, strict=True)}
    keys = set(got) | set(reference)
    return max(abs(got.get(k, 0.0) - reference.get(k, 0.0)) for k in keys)


def _pattern_index(pattern) -> int:
    return int("".join(map(str, pattern)), 2)


# --------------------------------------------------------------------------- Hamiltonians


def test_hopping_matrix_is_the_single_particle_sector():
    # Jordan-Wigner (fact of the trade): the one-particle block of H is T + E_0,
    # the empty chain has energy E_0 = sum h / 2, and the many-body spectrum is
    # E_0 + all sums of single-particle energies.
    rng = np.random.default_rng(11)
    L = 6
    fields = rng.normal(size=L)
    model = xxz(L, J=1.3, delta=0.0, h=fields)
    ham = gaussian.quadratic_hamiltonian(model)
    dense = model.sparse_hamiltonian().toarray()
    one = [1 << (L - 1 - i) for i in range(L)]
    np.testing.assert_allclose(dense[np.ix_(one, one)], ham.hopping + ham.offset * np.eye(L),
                               atol=1e-12)
    assert ham.offset == pytest.approx(fields.sum() / 2, abs=1e-12)
    assert ham.hopping[0, 1] == pytest.approx(1.3 / 2)
    sums = [ham.offset + ham.energies[list(c)].sum()
            for r in range(L + 1) for c in itertools.combinations(range(L), r)]
    np.testing.assert_allclose(np.sort(sums), np.linalg.eigvalsh(dense), atol=1e-11)


def test_hamiltonian_from_fermion_operators():
    # H = sum_ij T_ij c_i^dagger c_j + E_0 with dense Jordan-Wigner operators.
    L = 5
    model = xxz(L, J=-0.7, delta=0.0, h=[0.2, -0.4, 0.9, 0.0, 0.3])
    ham = gaussian.quadratic_hamiltonian(model)
    cdag = [_creation(i, L) for i in range(L)]
    rebuilt = sum(ham.hopping[i, j] * cdag[i] @ cdag[j].T for i in range(L) for j in range(L))
    np.testing.assert_allclose(rebuilt + ham.offset * np.eye(2**L),
                               model.sparse_hamiltonian().toarray(), atol=1e-12)


def test_ising_quasiparticles_give_the_spectrum():
    # Open transverse Ising chain: E = sum_k eps_k (n_k - 1/2) over all 2^L occupations
    # (Ann. Phys. 57, 79 (1970); Ann. Phys. 16, 407 (1961)); compared with eigvalsh.
    rng = np.random.default_rng(5)
    L = 7
    model = ising(L, J=0.8, g=rng.normal(size=L), h=0.0)
    eps = gaussian.quasiparticle_energies(model)
    assert np.all(eps >= 0)
    levels = [eps[list(c)].sum() - eps.sum() / 2
              for r in range(L + 1) for c in itertools.combinations(range(L), r)]
    np.testing.assert_allclose(np.sort(levels),
                               np.linalg.eigvalsh(model.sparse_hamiltonian().toarray()),
                               atol=1e-11)


# --------------------------------------------------------------------------- states


def test_correlation_matrix_of_an_mps_matches_dense_operators():
    L = 7
    psi = to_dense(random_mps(L, 5, seed=3))
    psi /= np.linalg.norm(psi)
    corr = gaussian.correlation_matrix(from_dense(psi))
    cdag = [_creation(i, L) for i in range(L)]
    dense = np.array([[psi.conj() @ cdag[i] @ cdag[j].T @ psi for j in range(L)]
                      for i in range(L)])
    np.testing.assert_allclose(corr, dense, atol=1e-12)


def test_correlation_matrix_of_a_product_mps_is_its_pattern():
    pattern = [1, 0, 0, 1, 1, 0]
    mps = product_mps([np.eye(2)[s] for s in pattern])
    np.testing.assert_allclose(gaussian.correlation_matrix(mps),
                               gaussian.product_correlation(pattern), atol=1e-14)


def test_gibbs_correlation_matches_dense_thermal_state():
    rng = np.random.default_rng(8)
    L = 6
    model = xxz(L, J=1.0, delta=0.0, h=rng.normal(size=L) * 0.5)
    ham = gaussian.quadratic_hamiltonian(model)
    beta, mu = 0.9, 0.3
    h_dense = model.sparse_hamiltonian().toarray()
    n_op = np.diag(_bits(L).sum(axis=1).astype(float))
    rho = sla.expm(-beta * (h_dense - mu * n_op))
    rho /= np.trace(rho)
    cdag = [_creation(i, L) for i in range(L)]
    dense = np.array([[np.trace(rho @ cdag[i] @ cdag[j].T) for j in range(L)]
                      for i in range(L)])
    np.testing.assert_allclose(gaussian.gibbs_correlation(ham, beta, mu), dense, atol=1e-12)


# --------------------------------------------------------------------------- dynamics


def test_evolution_and_counting_against_dense_evolution():
    # Exact correlation-matrix evolution (J. Phys. A 36, L205 (2003)) and counting
    # statistics from determinants (Phys. Rev. Lett. 102, 100502 (2009)) against
    # scipy's expm_multiply of the dense H and the bit counts of the evolved vector.
    rng = np.random.default_rng(21)
    L = 10
    model = xxz(L, J=1.0, delta=0.0, h=rng.normal(size=L) * 0.6)
    ham = gaussian.quadratic_hamiltonian(model)
    pattern = [1, 0, 1, 1, 0, 0, 1, 0, 1, 0]
    psi0 = np.zeros(2**L, dtype=complex)
    psi0[_pattern_index(pattern)] = 1.0
    t = 2.3
    psi = expm_multiply(-1j * t * model.sparse_hamiltonian().tocsc(), psi0)
    prob = np.abs(psi) ** 2
    corr = gaussian.evolve_correlation(ham, gaussian.product_correlation(pattern), t)
    np.testing.assert_allclose(gaussian.density(corr), prob @ _bits(L), atol=1e-10)
    for regions in ([(2, 7)],
                    [(0, 4), (4, 10)],
                    [(0, 3), (3, 6), (6, 10)],     # covering: definite total number
                    [(1, 3), (5, 9)],
                    [(7, 9), (0, 2), (3, 6)]):     # not covering, any order
        dist = gaussian.number_distribution(corr, regions)
        assert _max_difference(dist, _dense_counts(prob, regions, L)) < 1e-10
        assert abs(dist.total_defect) < 1e-12
    assert gaussian.energy(ham, corr) == pytest.approx(
        np.vdot(psi, model.sparse_hamiltonian() @ psi).real, abs=1e-10)


def test_counting_of_a_mixed_state_against_dense_thermal_state():
    # A thermal (mixed) Gaussian state: no definite total number, full FFT grid.
    rng = np.random.default_rng(4)
    L = 8
    model = xxz(L, J=1.0, delta=0.0, h=rng.normal(size=L) * 0.4)
    ham = gaussian.quadratic_hamiltonian(model)
    beta = 1.1
    w, v = np.linalg.eigh(model.sparse_hamiltonian().toarray())
    weights = np.exp(-beta * (w - w.min()))
    prob = (np.abs(v) ** 2) @ (weights / weights.sum())
    corr = gaussian.gibbs_correlation(ham, beta)
    for regions in ([(0, 3), (3, 5), (5, 8)], [(1, 4), (6, 8)]):
        dist = gaussian.number_distribution(corr, regions)
        assert dist.total_number is None
        assert _max_difference(dist, _dense_counts(prob, regions, L)) < 1e-10


def test_number_entropy_against_dense_formula():
    # S_obs = -sum p ln(p / V), V = prod C(b_k, n_k) (times 2^rest), from the dense vector.
    rng = np.random.default_rng(2)
    L = 10
    model = xxz(L, J=1.0, delta=0.0, h=rng.normal(size=L) * 0.3)
    pattern = [0, 1] * 5
    psi0 = np.zeros(2**L, dtype=complex)
    psi0[_pattern_index(pattern)] = 1.0
    psi = expm_multiply(-1j * 1.4 * model.sparse_hamiltonian().tocsc(), psi0)
    corr = gaussian.correlation_matrix(from_dense(psi))
    for regions in ([(0, 4), (4, 7), (7, 10)], [(2, 8)]):
        counts = _dense_counts(np.abs(psi) ** 2, regions, L)
        sizes = np.array([b - a for a, b in regions])
        rest = L - sizes.sum()
        expected = 0.0
        for key, p in counts.items():
            if p > 0:
                n = np.array(key)
                log_v = np.sum(gammaln(sizes + 1) - gammaln(n + 1) - gammaln(sizes - n + 1))
                expected -= p * (np.log(p) - log_v - rest * np.log(2))
        res = gaussian.number_entropy(corr, regions)
        assert res.entropy == pytest.approx(expected, abs=1e-10)
        assert res.entropy == pytest.approx(res.shannon + res.boltzmann, abs=1e-12)
        assert res.max_entropy == pytest.approx(L * np.log(2))


def test_domain_wall_melting_follows_the_bessel_profile():
    # XX domain wall, left half filled (Phys. Rev. E 59, 4912 (1999), from memory):
    # n_x(t) = sum_{m >= x + 1} J_m(J t)^2 for site x relative to the wall, i.e.
    # 1/2 [1 - J_0^2 - 2 sum_{m=1}^{x} J_m^2] for x >= 0; our hopping is J / 2, so the
    # band is J cos k and the front moves at the maximal group velocity v = J.
    L, t = 100, 20.0
    pattern = [1] * (L // 2) + [0] * (L // 2)
    sites = np.arange(L) - L // 2
    for J in (1.0, 0.6):
        ham = gaussian.quadratic_hamiltonian(xxz(L, J=J, delta=0.0, h=0.0))
        n = gaussian.density(gaussian.evolve_correlation(
            ham, gaussian.product_correlation(pattern), t))
        m = np.arange(-L, L + 1)
        weights = jv(m, J * t) ** 2
        bessel = np.array([weights[m >= x + 1].sum() for x in sites])
        np.testing.assert_allclose(n, bessel, atol=1e-10)
        # The edge has an Airy-function width ~ (J t)^(1/3) (fact of the trade).
        ahead = sites > J * t + 4 * (J * t) ** (1 / 3)
        behind = (sites > 0.85 * J * t) & (sites < 0.95 * J * t)
        assert n[ahead].max() < 1e-6    # nothing beyond the light cone x = J t
        assert n[behind].min() > 1e-3   # the front has reached 0.9 J t
        assert 0.5 - n[L // 2 - 1 - np.arange(L // 2)] == pytest.approx(
            n[L // 2 + np.arange(L // 2)] - 0.5, abs=1e-12)  # particle-hole symmetry


def test_counting_at_large_length_is_normalised_with_the_right_mean():
    # Fact of the trade: E[N_A] = tr C_A and Var N_A = tr C_A - tr C_A^2 for a
    # Gaussian state; the FFT inversion must give a normalised, non-negative pmf.
    L = 300
    ham = gaussian.quadratic_hamiltonian(xxz(L, J=1.0, delta=0.0, h=0.0))
    corr = gaussian.evolve_correlation(
        ham, gaussian.product_correlation([i % 2 for i in range(L)]), 20.0)
    regions = [(0, 100), (100, 200), (200, 300)]
    dist = gaussian.number_distribution(corr, regions)
    assert dist.total_number == L // 2
    assert abs(dist.total_defect) < 1e-10
    assert dist.min_probability > -1e-12
    assert dist.tail_mass < 1e-10
    for k, (a, b) in enumerate(regions):
        block = corr[a:b, a:b]
        mean = dist.probabilities @ dist.outcomes[:, k]
        var = dist.probabilities @ dist.outcomes[:, k] ** 2 - mean**2
        assert mean == pytest.approx(np.trace(block).real, abs=1e-8)
        assert var == pytest.approx(np.trace(block).real - np.vdot(block, block).real,
                                    abs=1e-8)
    long = 1200
    ham = gaussian.quadratic_hamiltonian(xxz(long, J=1.0, delta=0.0, h=0.1))
    corr = gaussian.evolve_correlation(
        ham, gaussian.product_correlation([1] * (long // 2) + [0] * (long // 2)), 150.0)
    res = gaussian.number_entropy(corr, [(long // 4, 3 * long // 4)])
    p, n = res.distribution.probabilities, res.distribution.outcomes[:, 0]
    assert p.sum() == pytest.approx(1.0, abs=1e-12)
    assert p @ n == pytest.approx(np.trace(corr[long // 4:3 * long // 4,
                                               long // 4:3 * long // 4]).real, abs=1e-8)
    assert 0 < res.entropy <= res.max_entropy


def test_mode_occupations_are_conserved():
    rng = np.random.default_rng(9)
    L = 12
    ham = gaussian.quadratic_hamiltonian(xxz(L, J=1.0, delta=0.0, h=rng.normal(size=L)))
    corr0 = gaussian.product_correlation(rng.integers(0, 2, size=L))
    occ0 = gaussian.mode_occupations(ham, corr0)
    for t in (0.7, 5.0, 40.0):
        occ = gaussian.mode_occupations(ham, gaussian.evolve_correlation(ham, corr0, t))
        np.testing.assert_allclose(occ, occ0, atol=1e-11)


# --------------------------------------------------------------------------- bad input


def test_models_that_are_not_free_fermions_are_refused():
    with pytest.raises(InputError, match="model"):
        gaussian.quadratic_hamiltonian(xxz(6, J=1.0, delta=1.0))
    with pytest.raises(InputError, match="model"):
        gaussian.quadratic_hamiltonian(ising(6, J=1.0, g=0.5))
    with pytest.raises(InputError, match="model"):
        gaussian.quasiparticle_energies(ising(6, J=1.0, g=0.5, h=0.2))
    with pytest.raises(InputError, match="model"):
        gaussian.quadratic_hamiltonian("xx")


def test_malformed_regions_and_states_are_refused():
    corr = gaussian.product_correlation([1, 0, 1, 0, 1, 0])
    for bad in ([(0, 3), (2, 5)], [(0, 7)], [(3, 3)], [(0, 1), (1, 2), (2, 3), (3, 4)],
                [], [(0,)], "0-3"):
        with pytest.raises(InputError, match="regions"):
            gaussian.number_distribution(corr, bad)
    with pytest.raises(InputError, match="pattern"):
        gaussian.product_correlation([0, 2, 1])
    with pytest.raises(InputError, match="corr"):
        gaussian.number_distribution(np.triu(np.ones((4, 4))), [(0, 2)])
    with pytest.raises(InputError, match="corr"):
        gaussian.evolve_correlation(gaussian.quadratic_hamiltonian(xxz(4, delta=0.0)),
                                    corr, 1.0)
