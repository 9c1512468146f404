"""Exact free-fermion reference for the energies of two regions, checked against dense
exact diagonalisation here, and the Chebyshev method checked against it."""

import numpy as np
import pytest
import scipy.linalg as sla

from mpsobs.chain import coarse, models, states
from mpsobs.chain import evolution as tebd
from mpsobs.core.errors import InputError
from mpsobs.estimators import wide_energy as we
from mpsobs.estimators.estimate import pruned_entropy_bound
from mpsobs.mps.tensors import to_dense
from mpsobs.references import free_energy_regions as fr
from mpsobs.references import gaussian as ga

PAULI_Z = np.diag([1.0, -1.0])
LOWER = np.array([[0.0, 1.0], [0.0, 0.0]])  # |0><1|: removes the particle of a site


def _xx(L, seed):
    # random fields break the particle-hole pairing of the levels, which would put a
    # degenerate level exactly on the bin edge E = 0
    return models.xxz(L, delta=0.0, h=0.6, field="random", seed=seed)


def _sector_levels(model):
    """Eigenvalues of a number-conserving model, sector by sector (exact diagonalisation)."""
    h = model.sparse_hamiltonian().tocsr()
    count = np.array([bin(s).count("1") for s in range(2**model.L)])
    return np.concatenate([np.linalg.eigvalsh(h[idx][:, idx].toarray())
                           for idx in (np.flatnonzero(count == k) for k in range(model.L + 1))])


def _annihilators(L):
    """Dense Jordan-Wigner c_i = (prod_{k<i} sigma^z_k) |0><1|_i, site 0 most significant."""
    out = []
    for i in range(L):
        op = np.eye(1)
        for m in [PAULI_Z] * i + [LOWER] + [np.eye(2)] * (L - i - 1):
            op = np.kron(op, m)
        out.append(op)
    return out


def _dense_regions(psi, model, regions, width):
    """Exact p(b_1, .., b_m) (dict keyed by bin tuples), the level counts (one dict per
    region) and the eigenvalues of each H_R, from the eigenbases of the dense H_R."""
    amp = psi.reshape([2 ** (y - x) for x, y in regions])
    levels, bins = [], []
    for axis, (x, y) in enumerate(regions):
        v, u = np.linalg.eigh(model.block_hamiltonian(x, y))
        amp = np.moveaxis(np.tensordot(u.conj(), amp, axes=(0, axis)), 0, axis)
        levels.append(v)
        bins.append(np.floor(v / width).astype(int))
    p = {}
    for index, weight in np.ndenumerate(np.abs(amp) ** 2):
        key = tuple(int(k[i]) for k, i in zip(bins, index, strict=True))
        p[key] = p.get(key, 0.0) + weight
    counts = [{int(a): int(np.sum(k == a)) for a in k} for k in bins]
    return p, counts, levels


def _dense_entropy(p, counts):
    """-sum p ln(p / V), V the product of the regions' level counts."""
    return -sum(q * np.log(q / np.prod([c[k] for c, k in zip(counts, key, strict=True)]))
                for key, q in p.items() if q > 1e-15)


@pytest.mark.parametrize("n", [2, 5, 12])
def test_level_counts_match_exact_diagonalisation(n):
    # a region of n sites inside a longer chain (its terms only), offset included
    region = _xx(n + 3, seed=n).restricted(2, n + 2)
    width = 0.37
    ham = ga.quadratic_hamiltonian(region)
    bins, counts = fr.level_counts(ham.energies, ham.offset, width)
    levels = _sector_levels(region)
    want = np.bincount(np.floor(levels / width).astype(int) - bins[0], minlength=len(bins))
    np.testing.assert_array_equal(counts, want)
    assert counts.sum() == 2**n and counts.dtype == np.int64


def test_level_counts_of_many_modes_against_enumeration():
    # 20 modes: every one of the 2^20 subset sums formed and binned directly
    rng = np.random.default_rng(7)
    e = rng.uniform(-1.0, 1.0, 20)
    bins, counts = fr.level_counts(e, 0.3, 0.45)
    sums = 0.3 + (((np.arange(2**20)[:, None] >> np.arange(20)) & 1) @ e)
    want = np.bincount(np.floor(sums / 0.45).astype(int) - bins[0], minlength=len(bins))
    np.testing.assert_array_equal(counts, want)
    # 36 modes (2^18 sums per half): all 2^36 levels counted once
    assert fr.level_counts(rng.uniform(-1.0, 1.0, 36), 0.0, 1.0)[1].sum() == 2**36
    with pytest.raises(InputError, match="^energies:"):
        fr.level_counts(np.ones(fr.MAX_MODES + 1), 0.0, 1.0)
    with pytest.raises(InputError, match="^energies:"):
        fr.level_counts(["one", "two"], 0.0, 1.0)
    with pytest.raises(InputError, match="^bin_width:"):
        fr.level_counts(e[:4], 0.0, 0.0)


#: Angles of the characteristic-function checks, one array per region.
ANGLES = (np.array([0.0, 0.3, 1.7, -4.1]), np.array([-0.4, 0.0, 2.2]), np.array([0.9, -2.5]))


@pytest.mark.parametrize("regions", [((0, 3), (3, 6)), ((0, 2), (2, 6)),
                                     ((0, 2), (2, 4), (4, 6)), ((0, 2), (2, 5), (5, 7))],
                         ids=["two", "two-unequal", "three", "three-unequal"])
def test_characteristic_function_of_a_complex_gaussian_state_matches_dense(regions):
    # psi = exp(-i sum c_i^dagger K_ij c_j) |Neel> with a random complex Hermitian K is
    # Gaussian and not real; C and chi from the dense state and the dense H_R
    L = regions[-1][1]
    model = _xx(L, seed=2)
    cg = coarse.WideEnergyRegions(L, regions, model, 1.0, "test")
    c_ops = _annihilators(L)
    rng = np.random.default_rng(1)
    k = rng.normal(size=(L, L)) + 1j * rng.normal(size=(L, L))
    k = k + k.conj().T
    q = sum(k[i, j] * c_ops[i].conj().T @ c_ops[j] for i in range(L) for j in range(L))
    psi = sla.expm(-1j * q) @ to_dense(states.neel(L))
    corr = np.array([[psi.conj() @ ci.conj().T @ cj @ psi for cj in c_ops] for ci in c_ops])
    angles = ANGLES[:len(regions)]
    hams = [model.block_hamiltonian(x, y) for x, y in regions]
    want = np.empty([len(s) for s in angles], dtype=complex)
    for index in np.ndindex(want.shape):
        u = np.eye(1)
        for h, s, i in zip(hams, angles, index, strict=True):
            u = np.kron(u, sla.expm(1j * s[i] * h))
        want[index] = psi.conj() @ u @ psi
    np.testing.assert_allclose(fr.characteristic_function(corr, cg, *angles), want,
                               atol=1e-12)


@pytest.mark.parametrize("regions", [((0, 5), (5, 12)), ((0, 4), (4, 7), (7, 12))],
                         ids=["two", "three"])
def test_schur_route_and_full_determinants_agree(monkeypatch, regions):
    L = 12
    model = _xx(L, seed=4)
    cg = coarse.WideEnergyRegions(L, regions, model, 1.0, "test")
    corr = ga.evolve_correlation(ga.quadratic_hamiltonian(model),
                                 ga.correlation_matrix(states.neel(L)), 0.7)
    angles = (np.linspace(0.0, 30.0, 7), np.linspace(-25.0, 25.0, 9),
              np.linspace(-20.0, 20.0, 5))[:len(regions)]
    schur = fr.characteristic_function(corr, cg, *angles)
    monkeypatch.setattr(fr, "SCHUR_CONDITION", 0.0)
    np.testing.assert_allclose(schur, fr.characteristic_function(corr, cg, *angles),
                               atol=1e-12)


@pytest.mark.parametrize("L, regions, width, seed, smoothing, gap", [
    (10, ((0, 5), (5, 10)), 2.0, 0, 0.02, 0.1),
    (8, ((0, 3), (3, 5), (5, 8)), 1.5, 25, 0.03, 0.18)], ids=["two", "three"])
def test_reference_matches_dense_diagonalisation_of_a_quench(L, regions, width, seed,
                                                             smoothing, gap):
    # XX chain, Neel quench, exact evolution of C; exact p and S_obs from the dense state.
    # The fields (seed) and bin width keep every level of each H_R at least ``gap`` from
    # a bin edge (asserted), so the rigorous smoothing bound at sigma = ``smoothing`` (gap
    # over more than 5) is tiny. The probabilities come from the characteristic function
    # by Klich's trace formula (I. Klich, arXiv:cond-mat/0209642 (2003)).
    t = 1.3
    model = _xx(L, seed=seed)
    cg = coarse.WideEnergyRegions(L, regions, model, width, "test")
    psi = sla.expm(-1j * t * model.dense_hamiltonian()) @ to_dense(states.neel(L))
    p_exact, counts, levels = _dense_regions(psi, model, regions, width)
    for v in levels:
        assert np.min(np.abs(v - width * np.round(v / width))) > gap
    corr = ga.evolve_correlation(ga.quadratic_hamiltonian(model),
                                 ga.correlation_matrix(states.neel(L)), t)
    ref = fr.free_region_energy_entropy(corr, cg, smoothing=smoothing)
    exact = _dense_entropy(p_exact, counts)
    assert ref.bound < 1e-6 and ref.edge_mass < 1e-6
    assert abs(ref.entropy - exact) <= ref.bound + 1e-10, (ref, exact)
    assert abs(ref.entropy - exact) <= ref.error + 1e-10, (ref, exact)
    got = {tuple(int(b[i]) for b, i in zip(ref.bins, index, strict=True)): q
           for index, q in np.ndenumerate(ref.probabilities)}
    l1 = sum(abs(got.get(key, 0.0) - p_exact.get(key, 0.0)) for key in got.keys() | p_exact)
    assert l1 <= ref.edge_mass + 2 * ref.leaked_mass + 1e-10
    for region, c in enumerate(counts):
        np.testing.assert_array_equal(ref.counts[region],
                                      [c.get(b, 0) for b in ref.bins[region]])


@pytest.mark.parametrize("regions, moments, bond", [
    ([[0, 14], [14, 28]], 32, 8), ([[0, 13], [13, 17], [17, 24]], 32, 8),
    ([[0, 32], [32, 64]], 64, 16)], ids=["two", "three", "halves-of-64"])
def test_chebyshev_method_against_the_free_fermion_reference(regions, moments, bond):
    # Two halves of 14 or 32 sites, or 13 + 4 + 7 sites: a region wider than 12 sites, so
    # its volumes are reweighted (not exact inside the method); Neel quench to t = 1; the MPS
    # from TEBD, the reference (Klich's trace formula, I. Klich, arXiv:cond-mat/0209642
    # (2003)) from the exact C(t).
    L, width, t = regions[-1][1], 1.0, 1.0
    model = _xx(L, seed=0)
    cg = coarse.blocks(L, None, "energy", model=model, bin_width=width, regions=regions)
    snap = next(iter(tebd.evolve(states.neel(L), model, [t], max_bond=32, cutoff=1e-10,
                                 dt=0.05, order=4)))
    corr = ga.evolve_correlation(ga.quadratic_hamiltonian(model),
                                 ga.correlation_matrix(states.neel(L)), t)
    # the TEBD state is the Gaussian state the reference describes
    np.testing.assert_allclose(ga.correlation_matrix(snap.state), corr, atol=1e-4)
    ref = fr.free_region_energy_entropy(corr, cg)
    assert ref.error < 0.05 and ref.leaked_mass == 0.0
    res = we.wide_energy_entropy(snap.state, cg, moments=moments, bond=bond)
    total = res.method_err + pruned_entropy_bound(res.pruned_mass, res.max_entropy)
    assert abs(res.entropy - ref.entropy) <= total + ref.error, (res, ref)


def test_reference_refuses_what_it_cannot_do():
    L = 8
    corr = ga.correlation_matrix(states.neel(L))
    cg = coarse.WideEnergyRegions(L, ((0, 4), (4, L)), _xx(L, seed=0), 1.0, "test")
    with pytest.raises(InputError, match="^model:"):   # delta != 0 is not free
        fr.free_region_energy_entropy(corr, coarse.WideEnergyRegions(
            L, ((0, 4), (4, L)), models.xxz(L, delta=0.5), 1.0, "test"))
    with pytest.raises(InputError, match="^corr:"):
        fr.free_region_energy_entropy(corr[:6, :6], cg)
    with pytest.raises(InputError, match="^smoothing:"):
        fr.free_region_energy_entropy(corr, cg, smoothing=0.0)
    for regions in (((0, L),), ((0, 2), (2, 4), (4, 6), (6, L))):   # one or four regions
        with pytest.raises(InputError, match="^regions:"):
            fr.free_region_energy_entropy(corr, coarse.WideEnergyRegions(
                L, regions, cg.model, 1.0, "test"))
    with pytest.raises(InputError, match="^angles:"):
        fr.characteristic_function(corr, cg, [0.0], [0.0], [0.0])
    joint = coarse.WideEnergyRegions(L, cg.regions, cg.model, 1.0, "test",
                                     observables=("number", "energy"))
    with pytest.raises(InputError, match="^sequence:"):   # the energies alone
        fr.free_region_energy_entropy(corr, joint)
    wide = 2 * (fr.MAX_MODES + 1)
    with pytest.raises(InputError, match="^regions:"):
        fr.free_region_energy_entropy(
            ga.correlation_matrix(states.neel(wide)),
            coarse.WideEnergyRegions(wide, ((0, wide // 2), (wide // 2, wide)),
                                     _xx(wide, seed=0), 1.0, "test"))
