"""The exact dense engine against facts of observational entropy and independent
numpy/scipy computations.

Facts checked (definition, bounds, monotonicity under refinement, Gibbs state with the
total-energy coarse-graining): Phys. Rev. A 99, 010101(R) (2019) and Phys. Rev. A 99,
012103 (2019) (journal references from memory).
"""

from __future__ import annotations

from math import comb, log

import numpy as np
import pytest
import scipy.linalg as sla
from scipy.special import rel_entr

import mpsobs
from mpsobs.chain import coarse, models
from mpsobs.chain.random_states import random_density_matrix, random_hermitian, random_vector

LN2 = np.log(2.0)


def vn_entropy(rho: np.ndarray) -> float:
    """Independent S_vN from scipy eigenvalues."""
    w = sla.eigvalsh(rho)
    w = w[w > 1e-14]
    return float(-(w * np.log(w)).sum())


def coarse_grainings(L: int, seed: int):
    """Number, energy (two models), random-operator and sequential coarse-grainings."""
    number = coarse.blocks(L, 2)
    energy = coarse.blocks(L, 3, "energy", model=models.ising(L, g=0.7, h=0.3))
    xxz_energy = coarse.blocks(L, 2, "energy", model=models.xxz(L, delta=0.6, h=0.2))
    operator = coarse.blocks(L, 2, random_hermitian(4, seed=seed)) if L % 2 == 0 else None
    out = [number, energy, xxz_energy,
           coarse.sequence(number, coarse.blocks(L, 2, "energy", model=models.ising(L)))]
    if operator is not None:
        out += [operator, coarse.sequence(operator, number)]
    return out


def states(L: int, seed: int):
    yield "pure", random_vector(L, seed=seed)
    if L <= 8:
        yield "mixed", random_density_matrix(L, rank=3, seed=seed)


CASES = [(L, seed) for L in (4, 5, 6, 7, 8, 10) for seed in (1, 2)]


@pytest.mark.parametrize("L,seed", CASES)
def test_bounds_and_decomposition(L, seed):
    """S_vN <= S_obs <= ln dim, S_obs = Shannon + Boltzmann, knowledge = ln dim - S_obs
    equals the KL divergence D(p || V / dim) computed with scipy.special.rel_entr."""
    for kind, state in states(L, seed):
        rho = np.outer(state, state.conj()) if state.ndim == 1 else state
        s_vn = vn_entropy(rho)
        for cg in coarse_grainings(L, seed):
            r = mpsobs.observational_entropy(state, cg)
            assert r.method == "exact" and r.stderr == 0.0
            assert s_vn - 1e-10 <= r.entropy <= L * LN2 + 1e-10, (kind, cg.label)
            assert r.shannon + r.boltzmann == pytest.approx(r.entropy, abs=1e-12)
            d = r.distribution
            assert d.probabilities.sum() == pytest.approx(1.0, abs=1e-10)
            assert d.volumes.sum() == pytest.approx(2**L, rel=1e-10)
            kl = rel_entr(d.probabilities, d.volumes / 2**L).sum()
            assert r.knowledge == pytest.approx(kl, abs=1e-10)
            assert r.knowledge >= -1e-12


@pytest.mark.parametrize("L,seed", [(4, 3), (6, 4), (8, 5)])
def test_appending_never_raises_entropy(L, seed):
    """S_{C1,C2} <= S_{C1} (refinement by a further question), pure and mixed states."""
    first = coarse.blocks(L, 2)
    seconds = [coarse.blocks(L, 2, "energy", model=models.ising(L, g=0.9, h=0.4)),
               coarse.blocks(L, 2, random_hermitian(4, seed=seed)),
               coarse.blocks(L, 2, "fine")]
    for _, state in states(L, seed):
        base = mpsobs.observational_entropy(state, first).entropy
        for second in seconds:
            both = mpsobs.observational_entropy(state, coarse.sequence(first, second))
            assert both.entropy <= base + 1e-10
            third = coarse.sequence(first, second, coarse.blocks(L, 2, "fine"))
            assert mpsobs.observational_entropy(state, third).entropy <= both.entropy + 1e-10


def full_space_number_projectors(L: int, size: int) -> list[np.ndarray]:
    """Projectors onto block-number strings, built from bit counts of dense indices."""
    idx = np.arange(2**L)
    bits = (idx[:, None] >> (L - 1 - np.arange(L))[None, :]) & 1
    counts = bits.reshape(2**L, L // size, size).sum(axis=2)
    keys, inverse = np.unique(counts, axis=0, return_inverse=True)
    return [np.diag((inverse.ravel() == j).astype(float)) for j in range(len(keys))]


def full_space_energy_projectors(L: int, size: int) -> list[np.ndarray]:
    """Block-energy projectors built independently: each block's Hamiltonian is that of
    a uniform XXZ chain of `size` sites, diagonalised by scipy and embedded by kron."""
    h_block = models.xxz(size, delta=0.6, h=0.2).dense_hamiltonian()
    w, v = sla.eigh(h_block)
    levels = np.unique(np.round(w, 9))
    block_projs = [v[:, np.isclose(w, e, atol=1e-8)] @ v[:, np.isclose(w, e, atol=1e-8)].T
                   for e in levels]
    projs = [np.ones((1, 1))]
    for _ in range(L // size):
        projs = [np.kron(p, q) for p in projs for q in block_projs]
    return projs


@pytest.mark.parametrize("seed", [7, 8])
def test_block_engine_matches_full_space_projectors(seed):
    """Block-readout contractions equal p_i = <psi|P_i|psi> with full-space projectors."""
    L = 6
    psi = random_vector(L, seed=seed)
    rho = random_density_matrix(L, rank=2, seed=seed)
    pairs = [(coarse.blocks(L, 2), full_space_number_projectors(L, 2)),
             (coarse.blocks(L, 2, "energy", model=models.xxz(L, delta=0.6, h=0.2)),
              full_space_energy_projectors(L, 2))]
    for cg, projs in pairs:
        general = coarse.projectors(projs)
        for state in (psi, rho):
            a = mpsobs.observational_entropy(state, cg).entropy
            b = mpsobs.observational_entropy(state, general).entropy
            assert a == pytest.approx(b, abs=1e-10)


def test_order_matters_for_non_commuting_pair():
    """S_{A,B} != S_{B,A} for non-commuting A, B (fact of the observational-entropy
    literature); number and a random block operator do not commute."""
    L = 6
    psi = random_vector(L, seed=11)
    a = coarse.blocks(L, 2)
    b = coarse.blocks(L, 2, random_hermitian(4, seed=12))
    ab = mpsobs.observational_entropy(psi, coarse.sequence(a, b)).entropy
    ba = mpsobs.observational_entropy(psi, coarse.sequence(b, a)).entropy
    assert abs(ab - ba) > 1e-3


def test_order_irrelevant_for_commuting_pair():
    """The XXZ block energy conserves the block number, so the two commute and
    S_{N,E} = S_{E,N} (fact of the trade)."""
    L = 8
    model = models.xxz(L, delta=0.6, h=0.2)
    n = coarse.blocks(L, 2)
    e = coarse.blocks(L, 2, "energy", model=model)
    for state in (random_vector(L, seed=13), random_density_matrix(L, rank=4, seed=13)):
        ne = mpsobs.observational_entropy(state, coarse.sequence(n, e)).entropy
        en = mpsobs.observational_entropy(state, coarse.sequence(e, n)).entropy
        assert ne == pytest.approx(en, abs=1e-12)


@pytest.mark.parametrize("pattern", ["0110100101", "1111000010", "0000000000"])
@pytest.mark.parametrize("size", [2, 3, 4])
def test_basis_product_state_is_boltzmann_counting(pattern, size):
    """A computational-basis state has a definite block number: S_obs = sum_k ln C(b, n_k)
    (Boltzmann counting, fact of the trade). Block size 3 and 4 leave a shorter last block."""
    L = len(pattern)
    psi = np.zeros(2**L)
    psi[int(pattern, 2)] = 1.0
    r = mpsobs.observational_entropy(psi, coarse.blocks(L, size))
    expected = sum(log(comb(len(pattern[s:s + size]), pattern[s:s + size].count("1")))
                   for s in range(0, L, size))
    assert r.entropy == pytest.approx(expected, abs=1e-12)
    assert r.shannon == pytest.approx(0.0, abs=1e-12)


def test_maximally_mixed_state_gives_ln_dim():
    """rho = 1/dim gives S_obs = L ln 2 for every coarse-graining (fact of the trade:
    p_i = V_i / dim)."""
    L = 6
    rho = np.eye(2**L) / 2**L
    for cg in coarse_grainings(L, seed=5) + [coarse.blocks(L, 1, "fine"),
                                            coarse.blocks(L, regions=[(0, 1), (1, 6)])]:
        assert mpsobs.observational_entropy(rho, cg).entropy == pytest.approx(L * LN2,
                                                                              abs=1e-12)


@pytest.mark.parametrize("beta", [0.3, 1.0, 2.5])
def test_gibbs_state_with_total_energy_gives_gibbs_entropy(beta):
    """A Gibbs state with the total-energy coarse-graining has S_obs = S_Gibbs
    (Phys. Rev. A 99, 010101(R) (2019)): as general projectors onto the eigenspaces of H
    and as a single-block energy coarse-graining."""
    L = 6
    model = models.xxz(L, delta=0.8, h=0.3)
    h = model.dense_hamiltonian()
    rho = sla.expm(-beta * h)
    rho /= np.trace(rho)
    w, v = sla.eigh(h)
    levels = np.unique(np.round(w, 9))
    projs = []
    for e in levels:
        cols = v[:, np.abs(w - e) < 1e-8]
        projs.append(cols @ cols.T)
    s_gibbs = vn_entropy(rho)
    general = mpsobs.observational_entropy(rho, coarse.projectors(projs, label="H"))
    single = mpsobs.observational_entropy(rho, coarse.blocks(L, L, "energy", model=model))
    assert general.entropy == pytest.approx(s_gibbs, abs=1e-10)
    assert single.entropy == pytest.approx(s_gibbs, abs=1e-10)


def test_outcome_distribution_labels_volumes():
    """Number blocks of 2 on 4 sites: 9 outcome strings with volumes C(2,a) C(2,b)."""
    cg = coarse.blocks(4, 2)
    r = mpsobs.observational_entropy(random_vector(4, seed=1), cg)
    d = r.distribution
    assert d.outcomes.shape == (9, 2)
    for (a, b), v in zip(d.outcomes, d.volumes, strict=True):
        assert v == comb(2, a) * comb(2, b)
    assert [m.label for m in cg.block_macrostates(0)] == [(0.0,), (1.0,), (2.0,)]


# ----------------------------------------------------------------------------- bad input


def test_state_of_wrong_dimension():
    with pytest.raises(mpsobs.InputError, match="state"):
        mpsobs.observational_entropy(random_vector(5, seed=1), coarse.blocks(6, 2))


def test_state_not_normalised():
    with pytest.raises(mpsobs.InputError, match="state: not normalised"):
        mpsobs.observational_entropy(2 * random_vector(4, seed=1), coarse.blocks(4, 2))
    rho = np.eye(16) / 8
    with pytest.raises(mpsobs.InputError, match="state: .*trace"):
        mpsobs.observational_entropy(rho, coarse.blocks(4, 2))


def test_state_not_hermitian_or_wrong_shape():
    rho = random_density_matrix(3, seed=1)
    rho[0, 1] += 0.1
    with pytest.raises(mpsobs.InputError, match="state: .*Hermitian"):
        mpsobs.observational_entropy(rho, coarse.blocks(3, 1))
    with pytest.raises(mpsobs.InputError, match="state: expected"):
        mpsobs.observational_entropy(np.zeros((2, 4, 2)), coarse.blocks(3, 1))


def test_operator_checks():
    with pytest.raises(mpsobs.InputError, match="observable: .*not Hermitian"):
        coarse.blocks(4, 2, np.arange(16.0).reshape(4, 4))
    with pytest.raises(mpsobs.InputError, match=r"observable: expected a \(4, 4\)"):
        coarse.blocks(4, 2, np.eye(8))
    with pytest.raises(mpsobs.InputError, match="observable: unknown 'spin'"):
        coarse.blocks(4, 2, "spin")
    with pytest.raises(mpsobs.InputError, match="observable: an operator array needs"):
        coarse.blocks(5, 2, np.eye(4))


def test_energy_needs_model():
    with pytest.raises(mpsobs.InputError, match="model: the 'energy' observable needs"):
        coarse.blocks(4, 2, "energy")
    with pytest.raises(mpsobs.InputError, match="model: it has L = 6"):
        coarse.blocks(4, 2, "energy", model=models.xxz(6))


@pytest.mark.parametrize("regions,message", [
    ([(0, 2), (3, 6)], "regions: a gap at site 2"),
    ([(0, 3), (2, 6)], "regions: an overlap at site 2"),
    ([(0, 2), (2, 5)], "regions: they cover 0..5, not 0..6"),
    ([(0, 2), (2, 2), (2, 6)], "regions: empty or reversed"),
    ([(1, 6)], "regions: a gap at site 0"),
])
def test_bad_regions(regions, message):
    with pytest.raises(mpsobs.InputError, match=message):
        coarse.blocks(6, regions=regions)


def test_bad_sizes_and_sequences():
    with pytest.raises(mpsobs.InputError, match="size: block size 8"):
        coarse.blocks(6, 8)
    with pytest.raises(mpsobs.InputError, match="size, regions"):
        coarse.blocks(6, 2, regions=[(0, 6)])
    with pytest.raises(mpsobs.InputError, match="sequence: argument 2 uses another partition"):
        coarse.sequence(coarse.blocks(6, 2), coarse.blocks(6, 3))
    with pytest.raises(mpsobs.InputError, match="projectors: they do not sum"):
        coarse.projectors([np.diag([1.0, 0.0])])
    with pytest.raises(mpsobs.InputError, match="projectors: items 0 and 1"):
        coarse.projectors([np.diag([1.0, 0.0]), np.array([[0.5, 0.5], [0.5, 0.5]])])
