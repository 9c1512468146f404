"""MPS estimators of observational entropy against independent references.

References: the dense engine (mpsobs.dense, exact on state vectors), closed forms for
product states (binomial distributions from scipy.stats.binom), additivity over
independent pieces, and numpy SVDs for entanglement entropies.

Journal references in this file are cited from memory.
"""

from math import comb, log

import numpy as np
import pytest
import quimb.tensor as qtn
from scipy.stats import binom

from mpsobs import coarse, dense, models
from mpsobs import mps as mpsmod
from mpsobs.blocktensors import readout_blocks
from mpsobs.errors import InputError
from mpsobs.estimate import (
    canonical_state,
    draw_samples,
    mps_observational_entropy,
    pruned_entropy_bound,
)

# --------------------------------------------------------------------------- builders


def random_vector(L, seed):
    rng = np.random.default_rng(seed)
    v = rng.normal(size=2**L) + 1j * rng.normal(size=2**L)
    return v / np.linalg.norm(v)


def random_hermitian(d, seed):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    return (x + x.conj().T) / 2


def rotated_product(L, angle):
    """Every site cos(angle)|0> + sin(angle)|1>."""
    return mpsmod.product_mps([[np.cos(angle), np.sin(angle)]] * L)


def weakly_entangled(L, angle, eps, seed):
    """A rotated product state plus eps times random bond-2 tensors, normalised."""
    rng = np.random.default_rng(seed)
    tensors = []
    for i in range(L):
        left, right = (1 if i == 0 else 2), (1 if i == L - 1 else 2)
        t = eps * (rng.normal(size=(left, 2, right)) + 1j * rng.normal(size=(left, 2, right)))
        t[0, :, 0] += [np.cos(angle), np.sin(angle)]
        tensors.append(t)
    return mpsmod.right_canonical(mpsmod.MPS(tuple(tensors)), normalize=True)


def binomial_block_entropy(b, q):
    """S_obs of one b-site number block of a product state with P(|1>) = q per site:
    n ~ Binomial(b, q), S = H(n) + E ln C(b, n)."""
    n = np.arange(b + 1)
    pmf = binom.pmf(n, b, q)
    live = pmf > 0
    log_vol = np.log([comb(b, k) for k in n])
    return float(-np.sum(pmf[live] * np.log(pmf[live])) + np.sum(pmf * log_vol))


def assert_parts_close(result, reference, tol):
    assert result.entropy == pytest.approx(reference.entropy, abs=tol)
    assert result.shannon == pytest.approx(reference.shannon, abs=tol)
    assert result.boltzmann == pytest.approx(reference.boltzmann, abs=tol)


# --------------------------------------------------------------------------- exact vs dense

XX = np.kron(models.PAULI_X, models.PAULI_X)

EXACT_CASES = [
    # (L, state, coarse-graining builder)
    (14, "dense", lambda L: coarse.blocks(L, 2)),
    (12, "mps8", lambda L: coarse.blocks(L, 3)),
    (12, "mps32", lambda L: coarse.blocks(L, 3, "energy", model=models.xxz(L, delta=0.5,
                                                                          h=0.3))),
    (12, "dense", lambda L: coarse.blocks(L, 2, "energy", model=models.ising(L, g=0.9, h=0.2))),
    (10, "mps4", lambda L: coarse.blocks(L, 1, "fine")),
    (10, "dense", lambda L: coarse.blocks(L, 2, random_hermitian(4, 7))),
    # number, then X X on the same pairs: non-commuting sequence
    (10, "mps16", lambda L: coarse.sequence(coarse.blocks(L, 2), coarse.blocks(L, 2, XX))),
    # number, then XXZ block energy (which conserves number): commuting sequence
    (12, "mps8", lambda L: coarse.sequence(coarse.blocks(L, 3),
                                           coarse.blocks(L, 3, "energy",
                                                         model=models.xxz(L, delta=0.3)))),
    (12, "dense", lambda L: coarse.blocks(L, regions=[(0, 5), (5, 12)])),
    (12, "mps32", lambda L: coarse.blocks(L, regions=[(0, 3), (3, 8), (8, 12)])),
]


def make_state(L, kind, seed):
    if kind == "dense":
        return mpsmod.from_dense(random_vector(L, seed))
    return mpsmod.random_mps(L, int(kind[3:]), seed=seed)


@pytest.mark.parametrize("case", range(len(EXACT_CASES)))
def test_exact_methods_match_dense_engine(case):
    L, kind, build = EXACT_CASES[case]
    state = make_state(L, kind, seed=case)
    cg = build(L)
    # Reference: the dense engine, exact on the state vector and sharing no contraction
    # code with the MPS estimators.
    reference = dense.observational_entropy(mpsmod.to_dense(state), cg)
    methods = ["enumerate"] + (["count"] if len(cg.blocks) <= 3 and cg.label.startswith(
        "number") else [])
    for method in methods:
        result = mps_observational_entropy(state, cg, method=method)
        assert result.method == "exact" and result.algorithm == f"mps-{method}"
        assert_parts_close(result, reference, 1e-10)
        assert result.pruned_mass < 1e-12


SAMPLED_CASES = [
    lambda L: coarse.blocks(L, 3),
    lambda L: coarse.blocks(L, 3, "energy", model=models.ising(L, g=0.7)),
    lambda L: coarse.sequence(coarse.blocks(L, 2), coarse.blocks(L, 2, XX)),
]


@pytest.mark.parametrize("case", range(len(SAMPLED_CASES)))
def test_sampling_is_unbiased_and_its_error_is_right(case):
    L, seeds, n = 12, 20, 200
    state = mpsmod.random_mps(L, 8, seed=100 + case)
    cg = SAMPLED_CASES[case](L)
    reference = dense.observational_entropy(mpsmod.to_dense(state), cg)  # exact, dense
    # Each run within 4 of its standard errors; the reported error within a factor 2 of
    # the spread over 20 seeds (the sample std of 20 values is good to ~16%).
    runs = [mps_observational_entropy(state, cg, method="sample", samples=n, seed=s)
            for s in range(seeds)]
    for r in runs:
        assert r.method == "sampled" and r.samples == n
        assert abs(r.entropy - reference.entropy) <= 4 * r.stderr
        assert abs(r.shannon - reference.shannon) <= 4 * r.shannon_err
        assert abs(r.boltzmann - reference.boltzmann) <= 4 * r.boltzmann_err
    values = np.array([r.entropy for r in runs])
    reported = np.mean([r.stderr for r in runs])
    assert 0.5 <= np.std(values, ddof=1) / reported <= 2.0
    assert abs(values.mean() - reference.entropy) <= 4 * reported / np.sqrt(seeds)


def test_each_sample_carries_its_exact_probability():
    L = 8
    state = mpsmod.random_mps(L, 4, seed=12)
    cg = coarse.sequence(coarse.blocks(L, 2), coarse.blocks(L, 2, XX))
    reference = dense.observational_entropy(mpsmod.to_dense(state), cg).distribution
    exact = {tuple(o): (p, v) for o, p, v in zip(reference.outcomes,
                                                reference.probabilities, reference.volumes,
                                                strict=True)}
    blocks = readout_blocks(canonical_state(state, L), cg)
    batch = draw_samples(blocks, np.random.default_rng(0).random((50, len(blocks))))
    for outcome, log_p, log_v in zip(batch.outcomes, batch.log_p, batch.log_v, strict=True):
        p, v = exact[tuple(outcome)]
        assert np.exp(log_p) == pytest.approx(p, rel=1e-9)
        assert np.exp(log_v) == pytest.approx(v, rel=1e-12)


def test_bond_entropies_and_the_lower_bound():
    L = 12
    psi = random_vector(L, 3)
    result = mps_observational_entropy(mpsmod.from_dense(psi), coarse.blocks(L, 4),
                                       method="enumerate")
    # Reference: Schmidt values of the dense vector by numpy's SVD.
    expected = []
    for cut in range(1, L):
        s = np.linalg.svd(psi.reshape(2**cut, -1), compute_uv=False) ** 2
        s = s[s > 1e-300]
        expected.append(-np.sum(s * np.log(s)))
    np.testing.assert_allclose(result.bond_entropies, expected, atol=1e-10)
    assert result.half_chain_entropy == pytest.approx(expected[L // 2 - 1], abs=1e-10)
    # S_obs >= H(p_left) + <ln V_left> >= S_vN(left) at cuts between blocks (fact of the
    # trade, from S_vN <= S_obs, Phys. Rev. A 99, 010101(R) (2019)).
    assert result.entropy >= max(expected[3], expected[7]) - 1e-12


# --------------------------------------------------------------------------- large L


def test_basis_product_state_is_boltzmann_counting():
    # Fact of the trade: a computational-basis product state has one number outcome per
    # block, so S_obs = sum_k ln C(b, n_k) (Boltzmann counting) and the Shannon part is 0.
    L = 128
    bits = np.random.default_rng(5).integers(0, 2, size=L)
    state = mpsmod.product_mps([np.eye(2)[s] for s in bits])
    expected = sum(log(comb(4, int(bits[k:k + 4].sum()))) for k in range(0, L, 4))
    for method in ("enumerate", "sample"):
        r = mps_observational_entropy(state, coarse.blocks(L, 4), method=method,
                                      **({"samples": 50, "seed": 1} if method == "sample"
                                         else {}))
        assert r.entropy == pytest.approx(expected, abs=1e-10)
        assert abs(r.shannon) < 1e-10 and r.stderr < 1e-10
    regions = [(0, 40), (40, 90), (90, L)]
    r = mps_observational_entropy(state, coarse.blocks(L, regions=regions), method="count")
    assert r.entropy == pytest.approx(
        sum(log(comb(b - a, int(bits[a:b].sum()))) for a, b in regions), abs=1e-10)


def test_rotated_product_state_against_binomial():
    # Every site cos a|0> + sin a|1>: the number of a b-site block is Binomial(b, sin^2 a)
    # and blocks are independent (closed form with scipy.stats.binom).
    L, a = 128, 0.3
    q = np.sin(a) ** 2
    state = rotated_product(L, a)
    regions = [(0, 40), (40, 84), (84, L)]
    r = mps_observational_entropy(state, coarse.blocks(L, regions=regions), method="count")
    exact = sum(binomial_block_entropy(b - a_, q) for a_, b in regions)
    assert r.entropy == pytest.approx(exact, abs=1e-10)

    s = mps_observational_entropy(state, coarse.blocks(L, 4), samples=400, seed=2)
    assert s.method == "sampled"
    assert abs(s.entropy - 32 * binomial_block_entropy(4, q)) <= 4 * s.stderr

    # Enumeration of a nearly polarised chain, pruned: the exact value lies within
    # [entropy, entropy + bound] (bound from Gibbs' inequality, see pruned_entropy_bound).
    a_small = 0.01
    e = mps_observational_entropy(rotated_product(L, a_small), coarse.blocks(L, 8),
                                  method="enumerate", prune=1e-14)
    exact = 16 * binomial_block_entropy(8, np.sin(a_small) ** 2)
    assert e.pruned_mass > 0
    assert exact - 1e-10 <= e.entropy + pruned_entropy_bound(e.pruned_mass, e.max_entropy)
    assert e.entropy <= exact + 1e-10


def test_additivity_over_independent_pieces():
    # S_obs of a product of independent pieces, each a union of whole blocks, is the sum
    # of the pieces' values (fact of the trade: p and V factorise).
    L, piece = 128, 8
    vectors = [random_vector(piece, 50 + k) for k in range(L // piece)]
    tensors = [t for v in vectors for t in mpsmod.from_dense(v).tensors]
    state = mpsmod.MPS(tuple(tensors))
    for observable in ("number", "energy"):
        model = models.xxz(L, delta=0.7) if observable == "energy" else None
        piece_model = models.xxz(piece, delta=0.7) if observable == "energy" else None
        cg = coarse.blocks(L, 4, observable, model=model)
        exact = sum(dense.observational_entropy(
            v, coarse.blocks(piece, 4, observable, model=piece_model)).entropy for v in vectors)
        r = mps_observational_entropy(state, cg, method="sample", samples=300, seed=4)
        assert abs(r.entropy - exact) <= 4 * r.stderr


def test_long_chain_without_underflow():
    # |+>^L looks maximally mixed to any number coarse-graining: p_i / V_i = 2^-L for every
    # outcome, so S_obs = L ln 2 exactly (fact of the trade); the Shannon part is
    # (L / b) H(Binomial(b, 1/2)). At L = 2048, p_i ~ e^-1064 is below the float range.
    L = 2048
    r = mps_observational_entropy(rotated_product(L, np.pi / 4), coarse.blocks(L, 2),
                                  method="sample", samples=64, seed=3)
    assert r.entropy == pytest.approx(L * np.log(2), rel=1e-10)
    pmf = binom.pmf(np.arange(3), 2, 0.5)
    assert abs(r.shannon - L / 2 * float(-np.sum(pmf * np.log(pmf)))) <= 4 * r.shannon_err


def test_energy_sampling_matches_enumeration_at_L64():
    # Cross-check of two estimators on XXZ block energies (rotated readout) where
    # enumeration is feasible: a weakly entangled state, pruning error bounded.
    L = 64
    state = weakly_entangled(L, 0.05, 0.03, seed=1)
    cg = coarse.blocks(L, 4, "energy", model=models.xxz(L, delta=0.5, h=0.3))
    exact = mps_observational_entropy(state, cg, method="enumerate", prune=1e-8,
                                      max_branches=2**15)
    bound = pruned_entropy_bound(exact.pruned_mass, exact.max_entropy)
    sampled = mps_observational_entropy(state, cg, method="sample", samples=4000, seed=6)
    assert bound < sampled.stderr  # the comparison is limited by sampling, not pruning
    assert abs(sampled.entropy - exact.entropy) <= 4 * sampled.stderr + bound


# --------------------------------------------------------------------------- options


def test_reproducible_from_seed_and_independent_of_batch():
    L = 16
    state = mpsmod.random_mps(L, 8, seed=9)
    cg = coarse.blocks(L, 2, "energy", model=models.ising(L, g=0.5))
    run = [mps_observational_entropy(state, cg, method="sample", samples=120, seed=s, batch=b)
           for s, b in ((11, 40), (11, 40), (12, 40), (11, 7))]
    assert run[0].entropy == run[1].entropy and run[0].stderr == run[1].stderr
    assert run[0].entropy != run[2].entropy
    assert run[3].entropy == pytest.approx(run[0].entropy, abs=1e-12)


def test_target_stderr_and_automatic_choice():
    L = 40
    state = mpsmod.random_mps(L, 8, seed=2)
    r = mps_observational_entropy(state, coarse.blocks(L, 2), target_stderr=0.1, batch=64,
                                  seed=1)
    assert r.method == "sampled" and r.stderr <= 0.1 and r.samples % 64 == 0
    small = mpsmod.random_mps(8, 4, seed=3)
    assert mps_observational_entropy(small, coarse.blocks(8, 2)).algorithm == "mps-enumerate"
    regions = coarse.blocks(L, regions=[(0, 13), (13, 27), (27, 40)])  # wider than 12 sites
    assert mps_observational_entropy(state, regions).algorithm == "mps-count"


def test_caller_state_is_not_modified():
    L = 10
    psi = random_vector(L, 21)
    gauge_free = mpsmod.from_dense(psi)  # left-canonical, not the estimator's gauge
    qmps = qtn.MPS_rand_state(L, 6, dtype=complex, seed=4)
    before_q = [np.array(qmps[i].data) for i in range(L)]
    before = [t.copy() for t in gauge_free.tensors]
    as_list = [t.copy() for t in gauge_free.tensors]
    cg = coarse.blocks(L, 2)
    values = [mps_observational_entropy(s, cg, method="enumerate").entropy
              for s in (gauge_free, as_list, qmps)]
    for t, t0, t1 in zip(gauge_free.tensors, before, as_list, strict=True):
        assert np.array_equal(t, t0) and np.array_equal(t1, t0)
    for i in range(L):
        assert np.array_equal(qmps[i].data, before_q[i])
    assert values[0] == pytest.approx(values[1], abs=1e-12)
    assert values[2] == pytest.approx(
        dense.observational_entropy(qmps.to_dense().ravel(), cg).entropy, abs=1e-10)


def test_bad_input_names_the_argument():
    L = 8
    state = mpsmod.random_mps(L, 4, seed=1)
    cg = coarse.blocks(L, 2)
    with pytest.raises(InputError, match="coarse_graining"):
        mps_observational_entropy(state, coarse.blocks(10, 2))
    with pytest.raises(InputError, match="coarse_graining"):
        mps_observational_entropy(state, coarse.projectors([np.eye(2**L)]))
    spin1 = [np.ones((1, 3, 1))] + [np.ones((1, 3, 1)) / np.sqrt(3)] * (L - 1)
    with pytest.raises(InputError, match="state.*local dimension 3"):
        mps_observational_entropy(spin1, cg)
    with pytest.raises(InputError, match="state"):
        mps_observational_entropy("psi", cg)
    with pytest.raises(InputError, match="method.*'enumerate'"):
        mps_observational_entropy(state, cg, method="exhaustive")
    with pytest.raises(InputError, match="method.*'count'"):
        mps_observational_entropy(state, coarse.blocks(L, 2, "fine"), method="count")
    with pytest.raises(InputError, match="method.*max_branches"):
        mps_observational_entropy(state, cg, method="enumerate", max_branches=10)
    for option in ({"samples": 0}, {"prune": 2.0}, {"target_stderr": -1.0}, {"batch": 0}):
        with pytest.raises(InputError, match=next(iter(option))):
            mps_observational_entropy(state, cg, **option)
    zero = [t * 0 for t in state.tensors]
    with pytest.raises(InputError, match="state.*norm"):
        mps_observational_entropy(zero, cg)
    # Documented choice: an unnormalised state is normalised, with a warning.
    scaled = [state.tensors[0] * 3.0] + list(state.tensors[1:])
    with pytest.warns(UserWarning, match="not normalised"):
        r = mps_observational_entropy(scaled, cg, method="enumerate")
    assert r.entropy == pytest.approx(
        mps_observational_entropy(state, cg, method="enumerate").entropy, abs=1e-12)
