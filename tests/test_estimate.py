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

import mpsobs
from mpsobs.chain import coarse, models, states
from mpsobs.chain.evolution import evolve
from mpsobs.core.errors import InputError
from mpsobs.estimators import dense, enumeration
from mpsobs.estimators.blocktensors import (
    conditional_probabilities,
    number_definite_rows,
    outcome_weights,
    readout_blocks,
    transfer,
)
from mpsobs.estimators.charges import charged_blocks
from mpsobs.estimators.estimate import (
    baseline_algorithms,
    canonical_state,
    conditional_terms,
    draw_conditional,
    draw_conditional_charged,
    draw_conditional_vectors,
    draw_samples,
    mps_observational_entropy,
    pruned_entropy_bound,
    single_rows,
)
from mpsobs.mps import tensors as mpsmod
from mpsobs.mps.charges import bond_charges

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


@pytest.mark.parametrize("method", ["sample", "sample_strings"])
@pytest.mark.parametrize("case", range(len(SAMPLED_CASES)))
def test_sampling_is_unbiased_and_its_error_is_right(case, method):
    L, seeds, n = 12, 20, 200
    state = mpsmod.random_mps(L, 8, seed=100 + case)
    cg = SAMPLED_CASES[case](L)
    reference = dense.observational_entropy(mpsmod.to_dense(state), cg)  # exact, dense
    # Each run within 4 of its standard errors; the reported error within a factor 2 of
    # the spread over 20 seeds (the sample std of 20 values is good to ~16%, so 2 is
    # about 6 of its standard deviations).
    runs = [mps_observational_entropy(state, cg, method=method, samples=n, seed=s)
            for s in range(seeds)]
    algorithm = {"sample": "mps-conditional", "sample_strings": "mps-sample"}[method]
    for r in runs:
        assert r.method == "sampled" and r.samples == n and r.algorithm == algorithm
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

    strings = mps_observational_entropy(state, coarse.blocks(L, 4), method="sample_strings",
                                        samples=400, seed=2)
    assert strings.method == "sampled"
    assert abs(strings.entropy - 32 * binomial_block_entropy(4, q)) <= 4 * strings.stderr
    # A product over blocks: automatic and conditional sampling give the exact value.
    auto = mps_observational_entropy(state, coarse.blocks(L, 4), samples=400, seed=2)
    assert auto.method == "exact" and auto.algorithm == "mps-conditional"
    assert auto.entropy == pytest.approx(32 * binomial_block_entropy(4, q), abs=1e-10)

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
                                  method="sample_strings", samples=64, seed=3)
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
    sampled = mps_observational_entropy(state, cg, method="sample_strings", samples=4000,
                                        seed=6)
    assert bound < sampled.stderr  # the comparison is limited by sampling, not pruning
    assert abs(sampled.entropy - exact.entropy) <= 4 * sampled.stderr + bound


# --------------------------------------------------------------------------- conditional


def chain_rule_expectation(blocks):
    """sum_k E[f_k] by enumerating every outcome prefix, weighted by its probability,
    with the conditional kernel (outcome_weights, conditional_probabilities,
    conditional_terms) and the prefix environments advanced by transfer: the Shannon
    and Boltzmann parts."""
    env, weight = np.ones((1, 1, 1), dtype=complex), np.ones(1)
    shannon = boltzmann = 0.0
    for blk in blocks:
        p = conditional_probabilities(env, outcome_weights(blk))
        h, b = conditional_terms(p, blk.log_volumes)
        shannon += weight @ h
        boltzmann += weight @ b
        children, child_weights = [], []
        for j in range(blk.n_outcomes):
            live = p[:, j] > 0
            if live.any():
                child = transfer(env[live], blk.rows(j))
                children.append(child / np.einsum("nii->n", child).real[:, None, None])
                child_weights.append(weight[live] * p[live, j])
        env, weight = np.concatenate(children), np.concatenate(child_weights)
    return shannon, boltzmann


CHAIN_RULE_CASES = [
    (10, 8, lambda L: coarse.blocks(L, 2)),
    (10, 16, lambda L: coarse.blocks(L, 2, "energy", model=models.xxz(L, delta=0.6,
                                                                     h=0.4))),
    (8, 8, lambda L: coarse.sequence(coarse.blocks(L, 2), coarse.blocks(L, 2, XX))),
]


@pytest.mark.parametrize("case", range(len(CHAIN_RULE_CASES)))
def test_chain_rule_identity(case):
    # Chain rule of entropy, H(i_1 .. i_m) = sum_k H(i_k | i_<k) (Cover and Thomas,
    # Elements of Information Theory, 2nd ed., Thm 2.5.1; from memory), and
    # E ln V = sum_k E ln V_k: the expectation of the path value is S_obs exactly.
    # Reference: the dense engine on the state vector.
    L, bond, build = CHAIN_RULE_CASES[case]
    state = mpsmod.random_mps(L, bond, seed=40 + case)
    cg = build(L)
    reference = dense.observational_entropy(mpsmod.to_dense(state), cg)
    shannon, boltzmann = chain_rule_expectation(readout_blocks(canonical_state(state, L), cg))
    assert shannon == pytest.approx(reference.shannon, abs=1e-10)
    assert boltzmann == pytest.approx(reference.boltzmann, abs=1e-10)


def test_conditional_sampling_agrees_with_enumeration_at_L32():
    # A weakly entangled 32-site state where pruned enumeration is exact to its bound
    # (pruned_entropy_bound, from Gibbs' inequality) far below the sampling error.
    L, seeds, n = 32, 20, 200
    state = weakly_entangled(L, 0.2, 0.1, seed=1)
    cg = coarse.blocks(L, 4)
    exact = mps_observational_entropy(state, cg, method="enumerate", max_branches=2**16)
    bound = pruned_entropy_bound(exact.pruned_mass, exact.max_entropy)
    runs = [mps_observational_entropy(state, cg, method="sample", samples=n, seed=s)
            for s in range(seeds)]
    reported = np.mean([r.stderr for r in runs])
    assert bound < 0.01 * reported
    for r in runs:
        assert abs(r.entropy - exact.entropy) <= 4 * r.stderr + bound
        assert abs(r.shannon - exact.shannon) <= 4 * r.shannon_err + bound
        assert abs(r.boltzmann - exact.boltzmann) <= 4 * r.boltzmann_err + bound
    # The reported error within a factor 2 of the spread over 20 seeds (see above).
    values = np.array([r.entropy for r in runs])
    assert 0.5 <= np.std(values, ddof=1) / reported <= 2.0


def block_vectors(state, b):
    """Dense vectors of the b-site blocks of a bond-1 product MPS (site 0 first)."""
    sites = [t[0, :, 0] for t in state.tensors]
    out = []
    for k in range(0, len(sites), b):
        v = np.ones(1)
        for site in sites[k:k + b]:
            v = np.kron(v, site)
        out.append(v)
    return out


def test_product_state_is_exact_with_zero_error():
    # For a product over blocks p and V factorise, so S_obs is the sum of the blocks'
    # values (fact of the trade), each computed here by the dense engine; every f_k is
    # then deterministic and the conditional estimator has no variance.
    L = 64
    state = states.random_product_state(L, 17)
    cases = [
        (4, lambda n: coarse.blocks(n, 4)),
        (4, lambda n: coarse.blocks(n, 4, "energy", model=models.xxz(n, delta=0.7, h=0.3))),
        (4, lambda n: coarse.blocks(n, 4, "energy",
                                    model=models.ising(n, g=1.05, h=0.25))),
        (2, lambda n: coarse.sequence(coarse.blocks(n, 2), coarse.blocks(n, 2, XX))),
    ]
    for b, build in cases:
        reference = sum(dense.observational_entropy(v, build(b)).entropy
                        for v in block_vectors(state, b))
        sampled = mps_observational_entropy(state, build(L), method="sample", samples=50,
                                            seed=3)
        # Dense environments sample in single precision: each conditional probability
        # carries a relative round-off of a few units u = 2^-24 (float32 weights and the
        # environment of a bond-1 state), so f_k = sum_i p_i (ln V_i - ln p_i) moves by
        # at most about 4 u (f_k + 1), and S_obs by 4 u (S_obs + blocks).
        round_off = 4 * 2.0**-24 * (reference + L // b)
        assert sampled.entropy == pytest.approx(reference, abs=max(1e-10, round_off))
        assert sampled.stderr < max(1e-12, round_off)
        for method in (None, "exact"):
            exact = mps_observational_entropy(state, build(L), method=method)
            assert exact.method == "exact" and exact.algorithm == "mps-conditional"
            assert exact.entropy == pytest.approx(reference, abs=1e-10)
            assert exact.stderr == 0.0


def test_automatic_choice_by_cost_and_error():
    # Few outcome strings: three energy blocks of 4 on a generic 12-site state are
    # enumerated exactly (reference: the dense engine).
    L = 12
    state = mpsmod.random_mps(L, 64, seed=8)
    cg = coarse.blocks(L, 4, "energy", model=models.ising(L, g=1.05, h=0.25))
    auto = mps_observational_entropy(state, cg, samples=2000, seed=1)
    assert auto.method == "exact" and auto.algorithm == "mps-enumerate"
    assert auto.entropy == pytest.approx(
        dense.observational_entropy(mpsmod.to_dense(state), cg).entropy, abs=1e-10)
    # The t = 0 product state of a quench with energy blocks is exact at any L.
    L = 64
    model = models.ising(L, g=1.05, h=0.25)
    start = states.product_state("0" * L, L)
    r = mps_observational_entropy(start, coarse.blocks(L, 4, "energy", model=model))
    assert r.method == "exact" and r.stderr == 0.0
    # Enumeration that prunes some mass is kept when its entropy bound is below the
    # sampling error, and replaced by sampling when it is not.
    L = 20
    weak = weakly_entangled(L, 0.2, 0.1, seed=1)
    kept = mps_observational_entropy(weak, coarse.blocks(L, 4), seed=2, prune=1e-10)
    assert kept.algorithm == "mps-enumerate" and kept.pruned_mass > 1e-9
    sampled = mps_observational_entropy(weak, coarse.blocks(L, 4), seed=2, prune=1e-5)
    assert sampled.algorithm == "mps-conditional" and sampled.samples == 1000
    coarse_bound = pruned_entropy_bound(
        mps_observational_entropy(weak, coarse.blocks(L, 4), method="enumerate",
                                  prune=1e-5).pruned_mass, sampled.max_entropy)
    assert coarse_bound > sampled.stderr
    assert pruned_entropy_bound(kept.pruned_mass, kept.max_entropy) < sampled.stderr


def test_python_errors_name_the_argument():
    L = 8
    state = mpsmod.random_mps(L, 4, seed=1)
    cg = coarse.blocks(L, 2, "energy", model=models.xxz(L))
    with pytest.raises(InputError, match="^samples: method 'exact'"):
        mps_observational_entropy(state, cg, method="exact", samples=2000)
    with pytest.raises(InputError, match="^target_stderr: method 'enumerate'"):
        mpsobs.observational_entropy(state, cg, method="enumerate", target_stderr=0.1)
    with pytest.raises(InputError, match="^sample: unknown keyword.*max_branches"):
        mpsobs.observational_entropy(state, cg, sample=100)
    with pytest.raises(InputError, match="^sample: unknown keyword"):
        mpsobs.observational_entropy(mpsmod.to_dense(state), cg, sample=100)
    for seed in ("abc", 1.5, -3):
        with pytest.raises(InputError, match="^seed: "):
            mpsobs.observational_entropy(state, cg, seed=seed)
    with pytest.raises(InputError, match="^method: unknown 'samples'.*'sample_strings'"):
        mpsobs.observational_entropy(state, cg, method="samples")
    with pytest.raises(InputError, match="^prune: dense states are evaluated exactly"):
        mpsobs.observational_entropy(mpsmod.to_dense(state), cg, prune=1e-3)


# --------------------------------------------------------------------------- options


@pytest.mark.parametrize("method", ["sample", "sample_strings"])
def test_reproducible_from_seed_and_independent_of_batch(method):
    L = 16
    state = mpsmod.random_mps(L, 8, seed=9)
    cg = coarse.blocks(L, 2, "energy", model=models.ising(L, g=0.5))
    run = [mps_observational_entropy(state, cg, method=method, samples=120, seed=s, batch=b)
           for s, b in ((11, 40), (11, 40), (12, 40), (11, 7))]
    assert run[0].entropy == run[1].entropy and run[0].stderr == run[1].stderr
    assert run[0].entropy != run[2].entropy
    assert run[3].entropy == pytest.approx(run[0].entropy, abs=1e-12)
    # The drawn outcome paths themselves do not depend on the batch they are drawn in.
    blocks = readout_blocks(canonical_state(state, L), cg)
    uniforms = np.random.default_rng(5).random((30, len(blocks)))
    weights = [outcome_weights(b) for b in blocks]
    whole = draw_conditional(blocks, weights, uniforms)
    halves = [draw_conditional(blocks, weights, uniforms[lo:lo + 15]) for lo in (0, 15)]
    np.testing.assert_array_equal(whole.outcomes,
                                  np.concatenate([h.outcomes for h in halves]))
    np.testing.assert_allclose(whole.shannon, np.concatenate([h.shannon for h in halves]),
                               atol=1e-12)


def test_single_precision_environments_give_the_same_paths_within_round_off():
    # The same uniforms through double and single-precision environments: the same
    # paths, and values within the single-precision round-off of a probability summed
    # over 2 chi^2 terms (unit u = 2^-24 each, a bound, not an estimate) carried into
    # f_k = sum_i p_i (ln V_i - ln p_i) as in the product-state test above.
    L, chi = 16, 8
    state = canonical_state(mpsmod.random_mps(L, chi, seed=4), L)
    blocks = readout_blocks(state, coarse.blocks(L, 4))
    weights = [outcome_weights(b) for b in blocks]
    uniforms = np.random.default_rng(8).random((60, len(blocks)))
    double = draw_conditional(blocks, weights, uniforms, share=True)
    single = draw_conditional(blocks, weights, uniforms, share=True, single=True)
    np.testing.assert_array_equal(single.outcomes, double.outcomes)
    values = double.shannon + double.boltzmann
    round_off = 2 * chi**2 * 2.0**-24 * (values + len(blocks))
    assert np.all(np.abs(single.shannon + single.boltzmann - values) <= round_off)
    assert np.any(single.shannon != double.shannon)   # it did run in single precision


def test_shared_prefix_environments_give_the_same_paths():
    # Paths with the same outcomes so far share one environment: the same draws and
    # values as one environment per path (the reference, sharing off), fewer flops.
    L = 16
    state = canonical_state(mpsmod.random_mps(L, 8, seed=4), L)
    blocks = readout_blocks(state, coarse.blocks(L, 4))
    weights = [outcome_weights(b) for b in blocks]
    uniforms = np.random.default_rng(8).random((60, len(blocks)))
    own = draw_conditional(blocks, weights, uniforms)
    shared = draw_conditional(blocks, weights, uniforms, share=True)
    np.testing.assert_array_equal(shared.outcomes, own.outcomes)
    np.testing.assert_allclose(shared.shannon, own.shannon, atol=1e-12)
    np.testing.assert_allclose(shared.boltzmann, own.boltzmann, atol=1e-12)
    assert shared.flops < own.flops
    # the same on the charge blocks of a number-conserving state
    model, state = xxz_quench_state(12, 1.5, 16)
    blocks = readout_blocks(state, coarse.blocks(12, 3), number_rows=True)
    charged = charged_blocks(blocks, bond_charges(state))
    uniforms = np.random.default_rng(9).random((60, len(blocks)))
    own = draw_conditional_charged(charged, uniforms)
    shared = draw_conditional_charged(charged, uniforms, share=True)
    np.testing.assert_array_equal(shared.outcomes, own.outcomes)
    np.testing.assert_allclose(shared.shannon, own.shannon, atol=1e-12)
    np.testing.assert_allclose(shared.boltzmann, own.boltzmann, atol=1e-12)
    assert shared.flops < own.flops


def test_target_stderr_and_automatic_choice():
    L = 40
    state = mpsmod.random_mps(L, 8, seed=2)
    for method, target in (("sample", 0.01), ("sample_strings", 0.05)):
        r = mps_observational_entropy(state, coarse.blocks(L, 2), method=method,
                                      target_stderr=target, batch=64, seed=1)
        assert r.method == "sampled" and r.stderr <= target and r.samples % 64 == 0
        assert r.samples > 128  # several batches were needed
    auto = mps_observational_entropy(state, coarse.blocks(L, 2), target_stderr=0.01,
                                     batch=64, seed=1)
    assert auto.algorithm == "mps-conditional" and auto.stderr <= 0.01
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
    # Documented choice, the same for dense vectors and MPS: an unnormalised state is
    # refused with a hint how to normalise it.
    scaled = [state.tensors[0] * 3.0] + list(state.tensors[1:])
    with pytest.raises(InputError, match="state: the MPS is not normalised.*normalize"):
        mps_observational_entropy(scaled, cg, method="enumerate")
    with pytest.raises(InputError, match="state: not normalised"):
        mpsobs.observational_entropy(3.0 * mpsmod.to_dense(state), cg)
    with pytest.raises(InputError, match="state: the MPS is not normalised"):
        mpsobs.observational_entropy(scaled, cg)
    # A Python list of numbers is a dense vector in the wrong container, not MPS tensors.
    with pytest.raises(InputError, match="state: got a list of 3 numbers.*numpy array"):
        mpsobs.observational_entropy([1, 0, 0], coarse.blocks(2, 1))


# --------------------------------------------------------------------------- charge blocks


def xxz_quench_state(L, t, bond):
    """Neel state evolved under the XXZ chain with a staggered field: every bond basis
    state keeps a definite number (number-block TEBD)."""
    model = models.xxz(L, delta=0.5, h=0.3, field="staggered")
    snap = next(evolve(states.neel(L), model, [t], max_bond=bond, cutoff=1e-12, dt=0.05,
                       order=2, symmetry="number"))
    return model, canonical_state(snap.state, L)


def test_bond_charges_read_off_the_tensors():
    L = 8
    charges = bond_charges(canonical_state(states.neel(L), L))
    # Neel 0101...: the bond after site i carries the number of 1s among sites 0..i.
    assert [int(q[0]) for q in charges] == [0, 0, 1, 1, 2, 2, 3, 3, 4]
    assert bond_charges(canonical_state(mpsmod.random_mps(L, 4, seed=1), L)) is None
    _, state = xxz_quench_state(10, 1.0, 16)
    charges = bond_charges(state)
    assert charges is not None and max(q.size for q in charges) > 1
    for t, left, right in zip(state.tensors, charges, charges[1:], strict=False):
        allowed = (left[:, None, None] + np.arange(2)[None, :, None]) == right[None, None, :]
        assert np.abs(t[~allowed]).max(initial=0.0) <= 1e-10 * np.abs(t).max()


def test_number_definite_rows_keep_the_povm():
    L = 6
    xxz = coarse.blocks(L, 3, "energy", model=models.xxz(L, delta=0.5))
    for block in xxz.blocks:
        rows, group, numbers = number_definite_rows(block.readout, block.group)
        dim = rows.shape[1]
        popcount = np.array([bin(s).count("1") for s in range(dim)])
        assert np.all(np.abs(rows[popcount[None, :] != numbers[:, None]]) < 1e-12)
        for j, macro in enumerate(block.macrostates):
            b = rows[group == j]
            # the POVM element of outcome j is the macrostate's projector K^dagger K
            np.testing.assert_allclose(b.conj().T @ b, macro.kraus.conj().T @ macro.kraus,
                                       atol=1e-10)
    ising = coarse.blocks(L, 3, "energy", model=models.ising(L, g=0.7))
    assert number_definite_rows(ising.blocks[0].readout, ising.blocks[0].group) is None


CHARGED_CASES = [
    lambda L, m: coarse.blocks(L, 3),
    lambda L, m: coarse.blocks(L, 3, "energy", model=m),
    lambda L, m: coarse.sequence(coarse.blocks(L, 3), coarse.blocks(L, 3, "energy", model=m)),
]


@pytest.mark.parametrize("case", range(len(CHARGED_CASES)))
def test_charge_blocks_match_dense_engine_and_dense_environments(case, monkeypatch):
    L = 12
    model, state = xxz_quench_state(L, 1.5, 16)
    cg = CHARGED_CASES[case](L, model)
    used = []
    original = enumeration.enumerate_outcomes_charged
    monkeypatch.setattr(enumeration, "enumerate_outcomes_charged",
                        lambda *a, **k: used.append(1) or original(*a, **k))
    exact = mps_observational_entropy(state, cg, method="enumerate", prune=0.0)
    assert used, "the charge-block enumeration was not taken"
    # Reference: the dense engine on the state vector.
    assert_parts_close(exact, dense.observational_entropy(mpsmod.to_dense(state), cg), 1e-10)
    with baseline_algorithms():
        old = mps_observational_entropy(state, cg, method="enumerate", prune=0.0)
    # The same outcomes in the same order; dense environments also keep strings that
    # break number conservation, with round-off probabilities.
    old_p = dict(zip(map(tuple, old.distribution.outcomes), old.distribution.probabilities,
                     strict=True))
    new_keys = list(map(tuple, exact.distribution.outcomes))
    assert new_keys == [key for key in old_p if key in set(new_keys)]
    np.testing.assert_allclose(exact.distribution.probabilities,
                               [old_p[key] for key in new_keys], atol=1e-12)
    assert sum(v for key, v in old_p.items() if key not in set(new_keys)) < 1e-12
    # Sampling: the same uniforms give the same paths and values as dense environments.
    new = mps_observational_entropy(state, cg, method="sample", samples=200, seed=4,
                                    batch=64)
    with baseline_algorithms():
        ref = mps_observational_entropy(state, cg, method="sample", samples=200, seed=4,
                                        batch=64)
    assert new.entropy == pytest.approx(ref.entropy, abs=1e-10)
    assert new.stderr == pytest.approx(ref.stderr, abs=1e-10)
    blocks = readout_blocks(state, cg, number_rows=True)
    charged = charged_blocks(blocks, bond_charges(state))
    uniforms = np.random.default_rng(6).random((50, len(blocks)))
    fast = draw_conditional_charged(charged, uniforms)
    slow = draw_conditional(blocks, [outcome_weights(b) for b in blocks], uniforms)
    np.testing.assert_array_equal(fast.outcomes, slow.outcomes)
    np.testing.assert_allclose(fast.shannon + fast.boltzmann, slow.shannon + slow.boltzmann,
                               atol=1e-10)
    assert fast.flops < slow.flops


def test_previous_method_skips_the_enumeration_attempt():
    L = 8
    state = mpsmod.random_mps(L, 4, seed=3)
    cg = coarse.blocks(L, 2)
    assert mps_observational_entropy(state, cg, seed=5).algorithm == "mps-enumerate"
    hinted = mps_observational_entropy(state, cg, seed=5, previous_method="sampled")
    sampled = mps_observational_entropy(state, cg, seed=5, method="sample")
    assert hinted.method == "sampled" and hinted.entropy == sampled.entropy
    assert mps_observational_entropy(state, cg, seed=5,
                                     previous_method="exact").method == "exact"
    with baseline_algorithms():  # the algorithms before the hint ignore it
        assert mps_observational_entropy(state, cg, seed=5,
                                         previous_method="sampled").method == "exact"
    with pytest.raises(InputError, match="previous_method.*'sampled'"):
        mps_observational_entropy(state, cg, previous_method="sample")


def test_single_row_outcomes_sample_with_vectors():
    # Ising block energies of 4 sites are non-degenerate: every outcome is one readout
    # row, so the conditional sampler's environments stay of rank one.
    L = 12
    state = canonical_state(mpsmod.random_mps(L, 16, seed=12), L)
    cg = coarse.blocks(L, 4, "energy", model=models.ising(L, g=1.05, h=0.25))
    blocks = readout_blocks(state, cg)
    assert single_rows(blocks) and not single_rows(readout_blocks(state, coarse.blocks(L, 4)))
    uniforms = np.random.default_rng(3).random((80, len(blocks)))
    fast = draw_conditional_vectors(blocks, uniforms)
    slow = draw_conditional(blocks, [outcome_weights(b) for b in blocks], uniforms)
    np.testing.assert_array_equal(fast.outcomes, slow.outcomes)
    np.testing.assert_allclose(fast.shannon, slow.shannon, atol=1e-10)
    np.testing.assert_allclose(fast.boltzmann, slow.boltzmann, atol=1e-10)
    assert fast.flops < slow.flops
    new = mps_observational_entropy(state, cg, method="sample", samples=300, seed=2)
    with baseline_algorithms():
        old = mps_observational_entropy(state, cg, method="sample", samples=300, seed=2)
    assert new.entropy == pytest.approx(old.entropy, abs=1e-10)
    assert new.stderr == pytest.approx(old.stderr, abs=1e-10)
    # and both agree with the exact value within 4 standard errors (reference: the
    # dense engine)
    exact = dense.observational_entropy(mpsmod.to_dense(state), cg).entropy
    assert abs(new.entropy - exact) <= 4 * new.stderr


def test_sample_batches_print_their_size_not_their_arrays():
    L = 8
    blocks = readout_blocks(canonical_state(states.neel(L), L), coarse.blocks(L, 4))
    uniforms = np.random.default_rng(0).random((3, len(blocks)))
    text = repr(draw_samples(blocks, uniforms))
    assert text.startswith("SampleBatch(3 samples over 2 blocks, ") and "array" not in text
    weights = [outcome_weights(b) for b in blocks]
    assert repr(draw_conditional(blocks, weights, uniforms[:1])).startswith(
        "ConditionalBatch(1 sample over 2 blocks, ")
