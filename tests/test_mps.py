"""The project's MPS arrays against quimb (a general-purpose reference library)."""

from __future__ import annotations

import numpy as np
import pytest
import quimb.tensor as qtn

from mpsobs.chain.random_states import random_vector
from mpsobs.core.errors import InputError
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
