"""The project's MPS arrays against quimb (a general-purpose reference library); the
truncation rule, the Gram route and the charge blocks against numpy's SVD."""

from __future__ import annotations

import numpy as np
import pytest
import quimb.tensor as qtn
from scipy.stats import unitary_group

from mpsobs.chain import models
from mpsobs.chain.random_states import random_vector
from mpsobs.core.errors import InputError
from mpsobs.mps import charges, truncation
from mpsobs.mps import tensors as mps


def test_quimb_round_trip_and_amplitudes():
    q = qtn.MPS_rand_state(9, 6, seed=4)
    ours = mps.from_quimb(q)
    assert ours.L == 9 and ours.max_bond == 6
    assert np.allclose(mps.to_dense(ours), q.to_dense().ravel())
    back = mps.to_quimb(ours)
    assert np.allclose(back.to_dense().ravel(), q.to_dense().ravel())


def test_right_canonical_form_is_isometric_and_same_state():
    q = qtn.MPS_rand_state(8, 5, seed=5)
    q.left_canonize()  # enter in the opposite gauge
    before = [t.data.copy() for t in q]
    rc = mps.right_canonical(mps.from_quimb(q))
    rc_normalised = mps.right_canonical(mps.from_quimb(q), normalize=True)
    assert mps.right_canonical_defect(rc_normalised) < 1e-12
    assert np.allclose(mps.to_dense(rc), q.to_dense().ravel())
    assert all(np.array_equal(a, t.data) for a, t in zip(before, q, strict=True))


def test_bond_entropies_match_quimb():
    """quimb's MatrixProductState.entropy is in bits; ours in nats."""
    q = qtn.MPS_rand_state(10, 8, seed=6)
    ours = mps.bond_entropies(mps.from_quimb(q))
    theirs = np.array([q.entropy(i) for i in range(1, 10)]) * np.log(2)
    assert np.allclose(ours, theirs, atol=1e-10)


def test_from_dense_is_exact_and_truncates():
    psi = random_vector(10, seed=3)
    exact = mps.from_dense(psi)
    assert np.allclose(mps.to_dense(exact), psi)
    assert exact.max_bond == 32
    cut = mps.from_dense(psi, max_bond=4)
    assert cut.max_bond == 4


def test_product_and_random_states_are_normalised():
    a = np.array([np.cos(0.3), np.sin(0.3)])
    prod = mps.product_mps([a] * 5)
    assert mps.norm(prod) == pytest.approx(1.0)
    r = mps.random_mps(12, 16, seed=1)
    assert mps.norm(r) == pytest.approx(1.0)
    assert r.max_bond == 16


def test_bad_states_are_refused():
    with pytest.raises(InputError, match="local dimension 3"):
        mps.as_mps([np.ones((1, 3, 1)), np.ones((1, 3, 1))])
    with pytest.raises(InputError, match="bond 0-1 dimensions disagree"):
        mps.as_mps([np.ones((1, 2, 2)), np.ones((3, 2, 1))])
    with pytest.raises(InputError, match="expected an mpsobs MPS"):
        mps.as_mps("not a state")
    with pytest.raises(InputError, match="not normalised"):
        mps.product_mps([[1.0, 1.0]])


# ------------------------------------------------------------- truncation and charges


def _with_spectrum(s: np.ndarray, shape: tuple[int, int], seed: int) -> np.ndarray:
    """U diag(s) V^dagger with Haar-random U, V (scipy.stats.unitary_group)."""
    u = unitary_group.rvs(shape[0], random_state=seed)[:, :s.size]
    v = unitary_group.rvs(shape[1], random_state=seed + 1)[:, :s.size]
    return (u * s) @ v.conj().T


def test_keep_count_applies_the_discarded_weight_rule():
    s = np.sqrt(np.array([0.5, 0.3, 0.2 - 2e-6, 1e-6, 1e-6]))
    assert truncation.keep_count(s, 10, 1e-6) == (4, pytest.approx(1e-6))
    assert truncation.keep_count(s, 10, 2e-6)[0] == 3
    assert truncation.keep_count(s, 2, 1e-6) == (2, pytest.approx(0.2))
    assert truncation.keep_count(np.array([1.0, 1e-3, 0.0]), 10, 0.0) == (2, 0.0)
    # a cutoff far below machine epsilon is applied as given, not rounded away
    tiny = np.array([1.0, 1e-9, 1e-11])   # weights 1, 1e-18, 1e-22
    assert truncation.keep_count(tiny, 10, 5e-23) == (3, 0.0)
    assert truncation.keep_count(tiny, 10, 1e-20) == (2, pytest.approx(1e-22))
    assert truncation.keep_count(tiny, 10, 2e-18) == (1, pytest.approx(1e-18 + 1e-22))


@pytest.mark.parametrize("shape", [(48, 48), (60, 40), (40, 60)])
@pytest.mark.parametrize("side", ["left", "right"])
def test_gram_split_agrees_with_the_svd(side, shape):
    # Reference: numpy's SVD, truncated by the same rule. Spectrum decaying over 12
    # decades: the cutoff 1e-10 falls where the Gram route resolves the values. Tall and
    # wide matrices take the QR reduction before the Gram matrix.
    n = min(shape)
    s_true = np.logspace(0, -12, n)
    m = _with_spectrum(s_true, shape, seed=3)
    u, s, vh = np.linalg.svd(m, full_matrices=False)
    k, lost = truncation.keep_count(s, 40, 1e-10)
    want = (u[:, :k] * s[:k]) @ vh[:k]
    left, right, kept, got_lost = truncation.split(m, side, 40, 1e-10)
    assert kept.size == k and got_lost == pytest.approx(lost, rel=1e-6)
    np.testing.assert_allclose(kept, s_true[:k], rtol=1e-6)
    iso = left if side == "left" else right.conj().T
    np.testing.assert_allclose(iso.conj().T @ iso, np.eye(k), atol=1e-13)
    # first-order perturbation of the Gram eigenvectors (fact of the trade): the product
    # moves by about n eps s_1^2 / s_k, s_k the smallest kept value
    eps = np.finfo(float).eps
    assert np.linalg.norm(left @ right - want) < n * eps * s[0] ** 2 / s[k - 1]


def test_staged_gram_eigenvectors_agree_with_numpy_eigh():
    # Reference: numpy's eigh (LAPACK zheevd in one call). The staged route gives the
    # same descending eigenvalues and, for any selection of columns, the same vectors up
    # to a phase (a well-separated spectrum, so each vector is defined up to its phase).
    n = 80
    a = _with_spectrum(np.linspace(2.0, 0.1, n), (n, n), seed=8)
    g = a @ a.conj().T
    w, v = np.linalg.eigh(g)
    w, v = w[::-1], v[:, ::-1]
    staged = truncation.GramVectors(g)
    np.testing.assert_allclose(staged.values, w, rtol=0, atol=1e-12)
    pick = np.zeros(n, dtype=bool)
    pick[[0, 3, 40, 79]] = True
    for cols in (slice(None, 30), pick):
        got, want = staged[:, cols], v[:, cols]
        phases = np.sum(want.conj() * got, axis=0)
        np.testing.assert_allclose(np.abs(phases), 1.0, atol=1e-10)
        np.testing.assert_allclose(got, want * phases, atol=1e-10)
    # with an isometry on the left (the QR reduction), the vectors are q times those above
    q = np.linalg.qr(_with_spectrum(np.ones(n), (n + 20, n), seed=9))[0]
    np.testing.assert_allclose(truncation.GramVectors(g, q)[:, :5], q @ staged[:, :5],
                               atol=1e-13)


@pytest.mark.parametrize("side", ["left", "right"])
def test_staged_gram_split_agrees_with_the_svd(side):
    # Reference: numpy's SVD truncated by the same rule, on matrices large enough for the
    # staged eigen-decomposition, with and without the QR reduction (tall for "left",
    # wide for "right").
    for shape in ((96, 96), (140, 90) if side == "left" else (90, 140)):
        n = min(shape)
        m = _with_spectrum(np.logspace(0, -6, n), shape, seed=4)
        u, s, vh = np.linalg.svd(m, full_matrices=False)
        k, lost = truncation.keep_count(s, 50, 1e-10)
        left, right, kept, got_lost = truncation.split(m, side, 50, 1e-10)
        assert kept.size == k == 50 and got_lost == pytest.approx(lost, rel=1e-8)
        np.testing.assert_allclose(kept, s[:k], rtol=1e-10)
        iso = left if side == "left" else right.conj().T
        np.testing.assert_allclose(iso.conj().T @ iso, np.eye(k), atol=1e-13)
        want = (u[:, :k] * s[:k]) @ vh[:k]
        assert np.linalg.norm(left @ right - want) < 1e-11


def test_gram_route_falls_back_to_the_svd_below_its_resolution():
    # One large value and 150 near 1e-7 (weights near 1e-14, together above the cutoff
    # 1e-12): the rule keeps values the Gram eigenvalues cannot resolve, so the split
    # must be the SVD's (numpy as the reference).
    n = 151
    s_true = np.concatenate([[1.0], np.linspace(1.5e-7, 1e-7, n - 1)])
    m = _with_spectrum(s_true, (n, n), seed=5)
    _, _, kept, lost = truncation.split(m, "left", n, 1e-12)
    reference = np.linalg.svd(m, compute_uv=False)
    k, want_lost = truncation.keep_count(reference, n, 1e-12)
    assert 1 < kept.size == k < n and lost == pytest.approx(want_lost, rel=1e-6)
    # the SVD has absolute accuracy ~ n eps s_1 (Golub and Van Loan, from memory); the
    # Gram eigenvalues would give these values with errors near eps / 1e-7 ~ 1e-9
    atol = n * np.finfo(float).eps
    np.testing.assert_allclose(kept, reference[:k], rtol=0, atol=atol)
    np.testing.assert_allclose(kept, s_true[:k], rtol=0, atol=atol)


def test_block_split_matches_the_dense_split():
    # A matrix that conserves a charge (rows and columns labelled; entries only where the
    # labels agree) split block by block against the dense split of the same matrix.
    rng = np.random.default_rng(2)
    row_q, col_q = rng.integers(0, 4, 40), rng.integers(0, 4, 36)
    m = (rng.normal(size=(40, 36)) + 1j * rng.normal(size=(40, 36))) * np.exp(
        -0.3 * np.arange(36))
    m[row_q[:, None] != col_q[None, :]] = 0.0
    for side in ("left", "right"):
        dense = truncation.split(m, side, 12, 1e-8)
        left, right, s, q, lost = charges.block_split(m, row_q, col_q, side, 12, 1e-8)
        np.testing.assert_allclose(np.sort(s), np.sort(dense[2]), rtol=1e-9)
        assert lost == pytest.approx(dense[3], rel=1e-9)
        np.testing.assert_allclose(left @ right, dense[0] @ dense[1], atol=1e-10)
        # every kept vector lives in one charge block
        assert np.all(np.abs(left[row_q[:, None] != q[None, :]]) == 0)
        assert np.all(np.abs(right[q[:, None] != col_q[None, :]]) == 0)


def test_definite_charges_of_a_ground_state_and_refusal_of_a_superposition():
    # The XXZ ground state at h = 0, even L lies in the sector N = L / 2 (fact of the
    # trade: Lieb-Mattis ordering, from memory); quimb's DMRG does not use the symmetry.
    L = 10
    ground = models.ground_state(models.xxz(L, delta=0.6), max_bond=16, cutoff=1e-12).state
    fixed = charges.definite_charges(list(ground.tensors))
    assert fixed is not None
    tensors, q = fixed
    assert q[-1].tolist() == [L // 2]
    overlap = np.vdot(mps.to_dense(ground), mps.to_dense(mps.MPS(tuple(tensors))))
    assert abs(overlap) ** 2 == pytest.approx(1.0, abs=1e-10)
    local = charges.local_charges(2)
    for i, t in enumerate(tensors):   # block-sparse: (left charge + n) == right charge
        allowed = (q[i][:, None, None] + local[None, :, None]) == q[i + 1][None, None, :]
        assert np.all(t[~allowed] == 0)
    superposed = mps.product_mps([[1.0, 0.0], [np.sqrt(0.5), np.sqrt(0.5)], [0.0, 1.0]])
    assert charges.definite_charges(list(superposed.tensors)) is None
