"""Gibbs and generalised Gibbs references against dense exact diagonalisation.

Journal references in this file are cited from memory.
"""

from __future__ import annotations

from functools import reduce

import numpy as np
import pytest
import scipy.linalg as sla
from scipy.optimize import fsolve

from mpsobs.chain.models import ising, xxz
from mpsobs.core.errors import InputError
from mpsobs.mps.tensors import from_dense, random_mps, to_dense
from mpsobs.references import gaussian, thermo


def _numbers(L: int) -> np.ndarray:
    """Particle number (sites in |1>) of every basis index."""
    return ((np.arange(2**L)[:, None] >> np.arange(L)) & 1).sum(axis=1).astype(float)


def _spectrum(model):
    """Eigenvalues of H and their particle numbers (H block-diagonal in N when conserved)."""
    dense = model.sparse_hamiltonian().toarray()
    if not model.conserves_number:
        return np.linalg.eigvalsh(dense), None
    numbers = _numbers(model.L)
    energies, counts = [], []
    for n in np.unique(numbers):
        sector = np.flatnonzero(numbers == n)
        energies.append(np.linalg.eigvalsh(dense[np.ix_(sector, sector)]))
        counts.append(np.full(sector.size, n))
    return np.concatenate(energies), np.concatenate(counts)


def _dense_gibbs(energies, counts, beta, alpha=0.0):
    """(E, N, S) of exp(-beta H + alpha N) / Z from the exact spectrum (S = -Tr rho ln rho)."""
    k = beta * energies - (alpha * counts if counts is not None else 0.0)
    p = np.exp(-(k - k.min()))
    p /= p.sum()
    live = p > 0
    n = float(p @ counts) if counts is not None else None
    return float(p @ energies), n, float(-np.sum(p[live] * np.log(p[live])))


def _dense_grand_solution(energies, counts, energy, number, guess):
    """(beta, alpha) of the dense grand ensemble with <H> = energy and <N> = number."""
    def residual(x):
        e, n, _ = _dense_gibbs(energies, counts, x[0], x[1])
        return [e - energy, n - number]

    sol = fsolve(residual, guess, xtol=1e-13)
    assert np.allclose(residual(sol), 0, atol=1e-10)
    return sol


# --------------------------------------------------------------------------- free fermions


@pytest.mark.parametrize("model", [
    xxz(8, J=1.0, delta=0.0, h=np.random.default_rng(1).normal(size=8)),
    ising(8, J=1.0, g=0.7, h=0.0),
    ising(8, J=0.8, g=np.random.default_rng(2).normal(size=8), h=0.0),
], ids=["xx-random-fields", "ising-uniform", "ising-random-g"])
def test_free_fermion_gibbs_matches_dense_diagonalisation(model):
    # Gibbs entropy -Tr rho ln rho and energy from scipy's eigh of the dense H; for
    # Ising from the Bogoliubov energies (Ann. Phys. 57, 79 (1970)).
    energies = sla.eigh(model.sparse_hamiltonian().toarray(), eigvals_only=True)
    for beta in (0.4, 1.5, -0.8):
        e, _, s = _dense_gibbs(energies, None, beta)
        at = thermo.gibbs_at(model, beta)
        assert at.method == "free-fermion" and at.entropy_err == 0.0
        assert at.energy == pytest.approx(e, abs=1e-10)
        assert at.entropy == pytest.approx(s, abs=1e-10)
        inverse = thermo.gibbs(model, e)
        assert inverse.beta == pytest.approx(beta, abs=1e-9)
        assert inverse.entropy == pytest.approx(s, abs=1e-10)
        assert inverse.mu is None


def test_grand_ensemble_with_a_number_matches_dense():
    L = 8
    model = xxz(L, J=1.0, delta=0.0, h=np.random.default_rng(3).normal(size=L) * 0.4)
    energies, counts = _spectrum(model)
    for energy, number in ((-1.1, 3.0), (0.9, 5.5)):
        res = thermo.gibbs(model, energy, number=number)
        beta, alpha = _dense_grand_solution(energies, counts, energy, number,
                                            [res.beta + 0.1, res.beta * res.mu])
        _, _, s = _dense_gibbs(energies, counts, beta, alpha)
        assert res.beta == pytest.approx(beta, abs=1e-9)
        assert res.mu == pytest.approx(alpha / beta, abs=1e-9)
        assert res.entropy == pytest.approx(s, abs=1e-10)
        assert res.number == pytest.approx(number, abs=1e-10)


def test_canonical_ensemble_matches_the_dense_sector():
    L = 8
    model = xxz(L, J=1.0, delta=0.0, h=np.random.default_rng(4).normal(size=L) * 0.4)
    energies, counts = _spectrum(model)
    for energy, number in ((-0.8, 3), (1.4, 4)):
        res = thermo.gibbs(model, energy, number=number, ensemble="canonical")
        sector = energies[counts == number]
        e, _, s = _dense_gibbs(sector, None, res.beta)
        assert e == pytest.approx(energy, abs=1e-10)
        assert res.entropy == pytest.approx(s, abs=1e-10)
        # Fixing N exactly removes the number fluctuations: less entropy (fact of the trade).
        assert res.entropy < thermo.gibbs(model, energy, number=number).entropy - 1e-3


def test_ground_energy_gives_infinite_beta_and_the_degeneracy():
    # Open XX chain with odd L has a zero single-particle energy (eps = J cos(pi k / (L+1)),
    # fact of the trade), so its ground state is two-fold degenerate: S = ln 2.
    model = xxz(7, J=1.0, delta=0.0, h=0.0)
    energies = np.linalg.eigvalsh(model.sparse_hamiltonian().toarray())
    degeneracy = np.count_nonzero(np.abs(energies - energies[0]) < 1e-10)
    res = thermo.gibbs(model, energies[0])
    assert res.beta == np.inf
    assert res.entropy == pytest.approx(np.log(degeneracy), abs=1e-12)
    top = thermo.gibbs(model, energies[-1])
    assert top.beta == -np.inf


# --------------------------------------------------------------------------- purification


def test_ising_purification_against_free_fermions():
    # Imaginary-time purification (Phys. Rev. Lett. 93, 207204 (2004)) of the transverse
    # Ising chain against the exact quasiparticle formula (Ann. Phys. 57, 79 (1970)).
    L = 16
    model = ising(L, J=1.0, g=1.0, h=0.0)
    for beta in (0.5, 1.0, 2.0):
        exact = thermo.gibbs_at(model, beta)
        res = thermo.gibbs_at(model, beta, method="purification", max_bond=32, dbeta=0.05)
        assert res.method == "purification"
        assert abs(res.entropy - exact.entropy) / L < 1e-4
        assert abs(res.entropy - exact.entropy) <= res.entropy_err
        assert abs(res.energy - exact.energy) / L < 1e-4
    # Matched to an energy, the purification finds the exact beta within its error.
    exact = thermo.gibbs_at(model, 1.0)
    res = thermo.gibbs(model, exact.energy, method="purification", max_bond=32)
    assert abs(res.beta - 1.0) <= res.beta_err
    assert abs(res.entropy - exact.entropy) <= res.entropy_err


def test_xxz_purification_against_dense_diagonalisation():
    L = 8
    model = xxz(L, J=1.0, delta=1.0, h=0.0)
    energies = np.linalg.eigvalsh(model.sparse_hamiltonian().toarray())
    for beta in (1.2, -0.7):  # the second is a negative temperature
        e, _, s = _dense_gibbs(energies, None, beta)
        res = thermo.gibbs(model, e, max_bond=64)
        assert res.method == "purification"
        assert res.entropy_err > 0
        assert abs(res.entropy - s) <= res.entropy_err
        assert abs(res.beta - beta) <= res.beta_err
        assert res.number == pytest.approx(L / 2, abs=1e-8)  # spin-flip symmetry at h = 0


def test_purification_with_a_number_against_dense_grand_ensemble():
    L = 6
    model = xxz(L, J=1.0, delta=0.5, h=0.3)
    energies, counts = _spectrum(model)
    energy, number = -0.75, 2.0
    res = thermo.gibbs(model, energy, number=number, max_bond=64)
    beta, alpha = _dense_grand_solution(energies, counts, energy, number, [1.0, -1.0])
    _, _, s = _dense_gibbs(energies, counts, beta, alpha)
    assert abs(res.entropy - s) <= res.entropy_err
    assert abs(res.beta - beta) <= res.beta_err
    assert res.number == pytest.approx(number, abs=1e-6)


def test_trotter_error_estimate_has_second_order():
    # The symmetric splitting is of second order: halving dbeta quarters |S(dbeta) -
    # S(2 dbeta)| (fact of the trade). Small chain and bond limit above 4^(L/2): no
    # truncation, so entropy_err is the Trotter estimate alone.
    model = xxz(6, J=1.0, delta=0.8, h=0.2)
    coarse = thermo.gibbs_at(model, 1.6, max_bond=128, dbeta=0.1)  # 16 steps of 0.1
    fine = thermo.gibbs_at(model, 1.6, max_bond=128, dbeta=0.05)   # 32 steps of 0.05
    assert coarse.discarded_weight < 1e-15 and fine.discarded_weight < 1e-15
    assert 3.5 < coarse.entropy_err / fine.entropy_err < 4.5
    exact = _dense_gibbs(*_spectrum(model), 1.6)[2]
    assert abs(fine.entropy - exact) < abs(coarse.entropy - exact) / 8  # extrapolated


# --------------------------------------------------------------------------- GGE


def _creation(i: int, L: int) -> np.ndarray:
    ops = [np.diag([1.0, -1.0])] * i + [np.array([[0.0, 0.0], [1.0, 0.0]])]
    return reduce(np.kron, ops + [np.eye(2)] * (L - i - 1))


def test_gge_entropy_from_dense_mode_occupations():
    # GGE of free fermions: sum of binary entropies of <eta_k^dagger eta_k>, here with the
    # mode occupation operators built densely from Jordan-Wigner operators.
    L = 8
    model = xxz(L, J=1.0, delta=0.0, h=np.random.default_rng(6).normal(size=L) * 0.5)
    ham = gaussian.quadratic_hamiltonian(model)
    psi = to_dense(random_mps(L, 4, seed=12))
    psi /= np.linalg.norm(psi)
    cdag = [_creation(i, L) for i in range(L)]
    occ = []
    for k in range(L):
        eta_dag = sum(ham.modes[i, k] * cdag[i] for i in range(L))
        occ.append((psi.conj() @ eta_dag @ eta_dag.conj().T @ psi).real)
    occ = np.array(occ)
    expected = float(-np.sum(occ * np.log(occ) + (1 - occ) * np.log(1 - occ)))
    res = thermo.gge(model, from_dense(psi))
    np.testing.assert_allclose(res.occupations, occ, atol=1e-12)
    assert res.entropy == pytest.approx(expected, abs=1e-10)
    h_psi = model.sparse_hamiltonian() @ psi
    assert res.energy == pytest.approx(np.vdot(psi, h_psi).real, abs=1e-10)


def test_gge_entropy_is_below_gibbs_at_the_same_energy_and_number():
    # Maximum entropy with more constraints is smaller (fact of the trade).
    # The Neel state (and the domain wall) of the uniform XX chain fill every mode half:
    # mode functions are even or odd under reflection (fact of the trade), so their GGE is
    # the infinite-temperature state, as is their Gibbs state. Other patterns are not.
    L = 12
    model = xxz(L, J=1.0, delta=0.0, h=0.3)
    neel = thermo.gge(model, [1, 0] * (L // 2))
    np.testing.assert_allclose(neel.occupations, 0.5, atol=1e-12)
    assert neel.entropy == pytest.approx(L * np.log(2), abs=1e-10)
    wall = [1, 1, 1, 0, 1, 0, 0, 0, 1, 0, 0, 1]
    res = thermo.gge(model, wall)
    gibbs = thermo.gibbs(model, res.energy, number=res.number)
    assert res.number == pytest.approx(L / 2, abs=1e-12)
    assert 0 < res.entropy < gibbs.entropy - 1e-3
    assert thermo.gge(model, gaussian.product_correlation(wall)).entropy == res.entropy
    mps = random_mps(L, 6, seed=7)
    res = thermo.gge(model, mps)
    gibbs = thermo.gibbs(model, res.energy, number=res.number)
    assert res.entropy < gibbs.entropy - 1e-3


# --------------------------------------------------------------------------- bad input


def test_bad_input_names_the_argument():
    xx = xxz(6, J=1.0, delta=0.0, h=0.2)
    with pytest.raises(InputError, match="energy"):
        thermo.gibbs(xx, -50.0)
    with pytest.raises(InputError, match="energy"):
        thermo.gibbs(ising(6, g=1.0), 50.0)
    with pytest.raises(InputError, match="energy"):
        thermo.gibbs(xxz(6, delta=1.0), -50.0)  # purification: below the bonds' bound
    with pytest.raises(InputError, match="energy"):
        thermo.gibbs(xx, 10.0, number=3)  # above the N = 3 ceiling
    with pytest.raises(InputError, match="number"):
        thermo.gibbs(ising(6, g=1.0), 0.0, number=3)
    with pytest.raises(InputError, match="number"):
        thermo.gibbs(xx, 0.0, number=0)
    with pytest.raises(InputError, match="number"):
        thermo.gibbs(xx, 0.0, number=2.5, ensemble="canonical")
    with pytest.raises(InputError, match="method"):
        thermo.gibbs(xx, 0.0, method="exact")
    with pytest.raises(InputError, match="method"):
        thermo.gibbs(xxz(6, delta=1.0), 0.0, method="free-fermion")
    with pytest.raises(InputError, match="ensemble"):
        thermo.gibbs(xxz(6, delta=1.0), 0.0, number=3, ensemble="canonical")
    with pytest.raises(InputError, match="max_bond"):
        thermo.gibbs(xxz(6, delta=1.0), 0.0, max_bond=0)
    with pytest.raises(InputError, match="model"):
        thermo.gge(xxz(6, delta=1.0), [0, 1] * 3)
    with pytest.raises(InputError, match="state"):
        thermo.gge(xx, [0, 1] * 4)


# --------------------------------------------------------------------------- Gibbs states


def _dense_gibbs_matrix(model, beta, mu=None, number=None):
    """exp(-beta (H - mu N)) / Z with scipy.linalg.expm of the dense H, or the same of H
    alone restricted to the sector N = number."""
    n = _numbers(model.L)
    shift = 0.0 if mu is None else mu * np.diag(n)
    rho = sla.expm(-beta * (model.dense_hamiltonian() - shift))
    if number is not None:
        keep = (n == number).astype(float)
        rho = keep[:, None] * rho * keep[None, :]
    return rho / np.trace(rho).real


GIBBS_CASES = [
    (xxz(8, J=1.0, delta=0.6, h=0.4, field="staggered"), 0.7, None, None),
    (xxz(8, J=1.0, delta=0.6, h=0.4, field="staggered"), -0.5, 0.3, None),
    (xxz(8, J=1.0, delta=1.0, h=np.random.default_rng(4).uniform(-1, 1, 8)), 0.6, None, 3),
    (ising(8, J=1.0, g=1.05, h=0.25), 0.8, None, None),
]


@pytest.mark.parametrize("model, beta, mu, number", GIBBS_CASES,
                         ids=["xxz", "xxz-negative-beta-mu", "xxz-sector", "ising"])
def test_gibbs_state_observational_entropy_matches_dense(model, beta, mu, number):
    """S_obs of the purification (enumeration, counting, sampling) against the dense
    engine on scipy's expm(-beta H) / Z, within the purification's reported error."""
    from mpsobs import observational_entropy
    from mpsobs.chain import coarse
    from mpsobs.estimators import dense

    L = model.L
    state = thermo.gibbs_state(model, beta, mu, number=number, max_bond=32)
    rho = _dense_gibbs_matrix(model, beta, mu, number)
    energy = coarse.blocks(L, 2, "energy", model=model)
    cgs = [coarse.blocks(L, 2, "number"), energy,
           coarse.sequence(energy, coarse.blocks(L, 2, "number")),
           coarse.blocks(L, regions=[(0, 3), (3, 5), (5, 8)])]
    bound = thermo.entropy_shift_bound(state.error, L * np.log(2))
    assert state.error < 1e-3  # the step 0.05 and bond 32 are fine at L = 8
    for cg in cgs:
        want = dense.observational_entropy(rho, cg).entropy
        methods = ["enumerate", "count"] if cg.label.startswith("number:r") else ["enumerate"]
        for method in methods:
            got = observational_entropy(state, cg, method=method)
            assert abs(got.entropy - want) <= bound + 1e-10, (cg.label, method)
            assert got.bond_entropies is None
        sampled = observational_entropy(state, cg, method="sample", samples=2000, seed=3)
        assert abs(sampled.entropy - want) <= 4 * sampled.stderr + bound, cg.label


def test_xx_gibbs_state_number_regions_against_free_fermions():
    """XX chain at L = 64: the number distribution in three regions of the purified Gibbs
    state against the free-fermion Gibbs correlation matrix and its counting statistics
    (Phys. Rev. Lett. 102, 100502 (2009))."""
    from mpsobs import observational_entropy
    from mpsobs.chain import coarse

    L, beta, mu = 64, 0.8, 0.2
    model = xxz(L, J=1.0, delta=0.0, h=0.3, field="staggered")
    state = thermo.gibbs_state(model, beta, mu, max_bond=24)
    corr = gaussian.gibbs_correlation(gaussian.quadratic_hamiltonian(model), beta, mu)
    for regions in ([(0, 20), (20, 45), (45, 64)], [(0, 32), (32, 64)]):
        got = observational_entropy(state, coarse.blocks(L, regions=regions), method="count")
        want = gaussian.number_entropy(corr, regions)
        tol = (thermo.entropy_shift_bound(state.error, L * np.log(2))
               + want.pruned_mass * L + 1e-9)
        assert abs(got.entropy - want.entropy) <= tol
        assert tol < 0.05  # the bound is informative: below 1e-3 nats per site


def test_xx_gibbs_state_small_blocks_against_dense_diagonal():
    """XX chain at L = 12, number blocks of 2 and 3: the purified Gibbs state against the
    diagonal of exp(-beta (H - mu N)) / Z from numpy's eigh of every number sector."""
    from mpsobs import observational_entropy
    from mpsobs.chain import coarse

    L, beta, mu = 12, 1.0, -0.3
    model = xxz(L, J=1.0, delta=0.0, h=np.random.default_rng(6).uniform(-0.5, 0.5, L))
    dense_h, n = model.dense_hamiltonian(), _numbers(L)
    diag = np.zeros(2**L)
    for value in np.unique(n):
        sector = np.flatnonzero(n == value)
        e, v = np.linalg.eigh(dense_h[np.ix_(sector, sector)])
        diag[sector] = (np.abs(v) ** 2) @ np.exp(-beta * (e - mu * value))
    diag /= diag.sum()
    state = thermo.gibbs_state(model, beta, mu, max_bond=32)
    bound = thermo.entropy_shift_bound(state.error, L * np.log(2))
    bits = (np.arange(2**L)[:, None] >> np.arange(L - 1, -1, -1)) & 1  # site 0 first
    for b in (2, 3):
        per_block = bits.reshape(-1, L // b, b).sum(axis=2)
        _, label = np.unique(per_block, axis=0, return_inverse=True)
        p = np.bincount(label.ravel(), weights=diag)
        sizes = np.bincount(label.ravel())  # V = prod C(b, n_k) = configurations per string
        live = p > 0
        want = float(-np.sum(p[live] * np.log(p[live] / sizes[live])))
        got = observational_entropy(state, coarse.blocks(L, b, "number"), method="enumerate")
        assert abs(got.entropy - want) <= bound + 1e-10


def test_infinite_temperature_gives_ln_dim_and_ln_sector_size():
    """beta = 0: rho = 1 / 2^L gives S_obs = L ln 2 for every coarse-graining; the sector
    N of the canonical ensemble gives S_obs = ln C(L, N) for number blocks, which the
    sector's projector commutes with and is uniform in (fact of the trade)."""
    from math import comb, log

    from mpsobs import observational_entropy
    from mpsobs.chain import coarse

    model = xxz(10, J=1.0, delta=0.6, h=0.4, field="staggered")
    grand = thermo.gibbs_state(model, 0.0)
    assert grand.error == 0.0
    energy = coarse.blocks(10, 3, "energy", model=model)
    for cg in (coarse.blocks(10, 2, "number"), energy,
               coarse.sequence(energy, coarse.blocks(10, 3, "number"))):
        got = observational_entropy(grand, cg, method="enumerate").entropy
        assert abs(got - 10 * log(2)) < 1e-10
    for L, number, regions in ((10, 3, None), (64, 20, [(0, 10), (10, 40), (40, 64)])):
        sector = thermo.gibbs_state(xxz(L, J=1.0, delta=0.6), 0.0, number=number)
        cg = coarse.blocks(L, 2, "number") if regions is None else coarse.blocks(
            L, regions=regions)
        got = observational_entropy(sector, cg, method="exact").entropy
        assert abs(got - log(comb(L, number))) < 1e-9


def test_gibbs_state_repr_and_bad_input():
    from mpsobs.mps.tensors import PurifiedMPS

    state = thermo.gibbs_state(ising(512, J=1.0, g=1.0, h=0.2), 0.0)
    assert len(repr(state)) < 300 and "L=512" in repr(state)
    with pytest.raises(InputError, match="purification tensor 0"):
        PurifiedMPS((np.ones((1, 2, 1)),))
    with pytest.raises(InputError, match="mu"):
        thermo.gibbs_state(ising(6, J=1.0, g=1.0, h=0.2), 0.5, mu=0.1)
    with pytest.raises(InputError, match="mu"):
        thermo.gibbs_state(xxz(6, J=1.0, delta=0.5), 0.5, mu=0.1, number=3)
    with pytest.raises(InputError, match="number"):
        thermo.gibbs_state(xxz(6, J=1.0, delta=0.5), 0.5, number=7)
    with pytest.raises(InputError, match="beta"):
        thermo.gibbs_state(xxz(6, J=1.0, delta=0.5), float("nan"))


def test_entropy_shift_bound_is_the_sharp_continuity_bound():
    """T ln(d - 1) + h(T) (Audenaert, J. Phys. A 40, 8127 (2007), from memory): attained
    by p = (1, 0, ..) and q = (1 - T, T / (d - 1), ..)."""
    d, t = 16, 0.1
    q = np.array([1 - t] + [t / (d - 1)] * (d - 1))
    attained = float(-np.sum(q * np.log(q)))
    assert abs(thermo.entropy_shift_bound(t, np.log(d)) - attained) < 1e-12
    assert thermo.entropy_shift_bound(0.0, np.log(d)) == 0.0
    assert thermo.entropy_shift_bound(1.0, np.log(d)) == np.log(d)


def test_gge_correlation_commutes_with_the_hopping_matrix_and_keeps_occupations():
    """The GGE correlation matrix is the state's, dephased in the single-particle
    eigenbasis: it commutes with the single-particle matrix A = conj(V) diag(eps) V^T (the
    convention of gaussian.gibbs_correlation) and its eigenvalues (numpy's eigvalsh) are
    the conserved occupations; its trace is the number (fact of the trade)."""
    L = 10
    model = xxz(L, J=1.0, delta=0.0, h=np.random.default_rng(8).uniform(-1, 1, L))
    ham = gaussian.quadratic_hamiltonian(model)
    a = (ham.modes.conj() * ham.energies) @ ham.modes.T
    corr = gaussian.evolve_correlation(ham, gaussian.product_correlation([1, 1, 0, 0, 1] * 2),
                                       0.7)
    res = thermo.gge(model, corr)
    c = res.correlation
    assert np.allclose(a @ c, c @ a, atol=1e-12)
    assert not np.allclose(a @ corr, corr @ a, atol=1e-6)  # the state itself is not dephased
    assert np.allclose(np.linalg.eigvalsh(c), np.sort(res.occupations), atol=1e-12)
    assert abs(np.trace(c).real - 6) < 1e-12


def _purified_density_matrix(tensors) -> np.ndarray:
    """Tr_ancilla |psi><psi| of a purification (index 2 s + a) as a dense matrix."""
    L = len(tensors)
    psi = tensors[0].reshape(4, -1)
    for t in tensors[1:]:
        psi = np.tensordot(psi, t, axes=(1, 0)).reshape(-1, t.shape[2])
    psi = psi.reshape([2] * (2 * L)).transpose(list(range(0, 2 * L, 2))
                                               + list(range(1, 2 * L, 2)))
    m = psi.reshape(2**L, 2**L)
    return m @ m.conj().T


@pytest.mark.parametrize(("mu", "number"), [(0.3, None), (None, 3)], ids=["grand", "sector"])
def test_gibbs_state_number_blocks_match_the_dense_path(monkeypatch, mu, number):
    """The purification evolved in blocks of n_s - n_a against the same evolution with
    dense decompositions, and both against scipy's expm(-beta (H - mu N)) / Z within the
    reported trace-distance error."""
    model = xxz(6, J=1.0, delta=0.6, h=0.4, field="staggered")
    fixed = []

    def recording(tensors):
        out = thermo_charges(tensors)
        fixed.append(out is not None)
        return out

    thermo_charges = thermo.definite_charges
    monkeypatch.setattr(thermo, "definite_charges", recording)
    blocks = thermo.gibbs_state(model, 0.7, mu, number=number, max_bond=32)
    assert fixed and all(fixed)   # the blocks were used
    monkeypatch.setattr(thermo, "definite_charges", lambda tensors: None)
    dense = thermo.gibbs_state(model, 0.7, mu, number=number, max_bond=32)
    assert thermo._purification_distance(blocks.tensors, dense.tensors) < 1e-7
    assert blocks.error == pytest.approx(dense.error, rel=1e-4)
    want = _dense_gibbs_matrix(model, 0.7, mu, number)
    for state in (blocks, dense):
        rho = _purified_density_matrix(state.tensors)
        trace_distance = 0.5 * np.abs(np.linalg.eigvalsh(rho - want)).sum()
        assert trace_distance <= state.error
