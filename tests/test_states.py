"""Initial states: amplitudes against dense vectors, canonical form, gas in a box against
exact diagonalisation in the fixed-number sector, bad input."""

from functools import reduce

import numpy as np
import pytest

from mpsobs.chain import models, states
from mpsobs.core.errors import InputError
from mpsobs.mps.tensors import MPS, right_canonical_defect, to_dense

KET = {"0": np.array([1, 0], complex), "1": np.array([0, 1], complex),
       "+": np.array([1, 1], complex) / np.sqrt(2), "-": np.array([1, -1], complex) / np.sqrt(2)}


def _kron(vectors) -> np.ndarray:
    return reduce(np.kron, vectors)


def _assert_right_canonical(mps: MPS) -> None:
    """sum_s A_s A_s^dagger = 1 on every site but the first, and <psi|psi> = 1."""
    assert right_canonical_defect(mps) < 1e-12


def _basis_index(bits) -> int:
    """Dense index of a basis state, site 0 most significant (quimb's order)."""
    return int("".join(str(b) for b in bits), 2)


def test_pattern_states_against_kron():
    for pattern in ("0110", "+-01+", "1"):
        psi = states.product_state(pattern)
        np.testing.assert_allclose(to_dense(psi), _kron([KET[c] for c in pattern]), atol=1e-15)
        _assert_right_canonical(psi)
    np.testing.assert_allclose(to_dense(states.product_state([0, 1, 1])),
                               _kron([KET["0"], KET["1"], KET["1"]]))
    vecs = [[2.0, 0.0], [1.0, 1j], [0.0, -3.0]]
    expected = _kron([np.array(v, complex) / np.linalg.norm(v) for v in vecs])
    psi = states.product_state(vecs, L=3)
    np.testing.assert_allclose(to_dense(psi), expected, atol=1e-15)
    _assert_right_canonical(psi)


def test_neel_and_domain_wall_amplitudes():
    L = 6
    for psi, bits in ((states.neel(L), [0, 1, 0, 1, 0, 1]),
                      (states.neel(L, first=1), [1, 0, 1, 0, 1, 0]),
                      (states.domain_wall(L), [1, 1, 1, 0, 0, 0]),
                      (states.domain_wall(L, filled="right", n=2), [0, 0, 0, 0, 1, 1])):
        v = to_dense(psi)
        assert v[_basis_index(bits)] == pytest.approx(1.0)
        assert np.count_nonzero(np.abs(v) > 1e-14) == 1
        _assert_right_canonical(psi)


def test_random_product_states_are_seeded():
    a = to_dense(states.random_product_state(5, seed=4))
    b = to_dense(states.random_product_state(5, seed=4))
    c = to_dense(states.random_product_state(5, seed=5))
    np.testing.assert_array_equal(a, b)
    assert abs(np.vdot(a, c)) < 1 - 1e-6
    assert np.linalg.norm(a) == pytest.approx(1.0)
    basis = to_dense(states.random_product_state(8, seed=1, kind="basis"))
    assert np.count_nonzero(np.abs(basis) > 1e-14) == 1
    bits = np.random.default_rng(1).integers(0, 2, size=8)   # the documented draw
    assert abs(basis[_basis_index(bits)]) == pytest.approx(1.0)


def test_gas_in_box_product_layouts():
    L = 10
    packed = to_dense(states.gas_in_box(L, 2, 8, 3))
    assert abs(packed[_basis_index([0, 0, 1, 1, 1, 0, 0, 0, 0, 0])]) == pytest.approx(1.0)
    # spread: sites 2 + floor((k + 1/2) * 6 / 3) = 3, 5, 7
    spread = to_dense(states.gas_in_box(L, 2, 8, 3, "spread"))
    assert abs(spread[_basis_index([0, 0, 0, 1, 0, 1, 0, 1, 0, 0])]) == pytest.approx(1.0)


def _sector_ground_state(H: np.ndarray, sites: int, n: int):
    """Lowest eigenpairs of H restricted to the basis states with n sites in |1> (exact
    diagonalisation with numpy's eigh); the ground vector embedded in the full basis."""
    number = np.array([bin(i).count("1") for i in range(2**sites)])
    idx = np.flatnonzero(number == n)
    w, v = np.linalg.eigh(H[np.ix_(idx, idx)])
    vec = np.zeros(2**sites, complex)
    vec[idx] = v[:, 0]
    return w, vec


def test_gas_in_box_ground_state_against_sector_diagonalisation():
    L, start, stop, n = 10, 2, 8, 2
    model = models.xxz(L, J=1.0, delta=0.5, h=0.3, field="staggered")
    psi = states.gas_in_box(L, start, stop, n, "ground", model=model)
    _assert_right_canonical(psi)
    box_h = model.restricted(start, stop).dense_hamiltonian()
    w, box_vec = _sector_ground_state(box_h, stop - start, n)
    assert w[1] - w[0] > 1e-3   # non-degenerate, so the state itself can be compared
    # the rest of the chain is empty: embed the box vector between |0...0> factors
    outside_left = np.eye(2**start)[0]
    outside_right = np.eye(2 ** (L - stop))[0]
    expected = _kron([outside_left, box_vec, outside_right])
    assert abs(np.vdot(expected, to_dense(psi))) ** 2 == pytest.approx(1.0, abs=1e-9)
    # the sector constraint is active: the unconstrained box ground state is lower
    assert np.linalg.eigvalsh(box_h)[0] < w[0] - 0.1


def test_gas_in_box_edge_cases():
    model = models.xxz(6, delta=0.3)
    empty = states.gas_in_box(6, 1, 4, 0, "ground", model=model)
    assert abs(to_dense(empty)[0]) == pytest.approx(1.0)
    full = states.gas_in_box(6, 1, 4, 3, "ground", model=model)
    assert abs(to_dense(full)[_basis_index([0, 1, 1, 1, 0, 0])]) == pytest.approx(1.0)


@pytest.mark.parametrize(("call", "word"), [
    (lambda: states.product_state("01x1"), "pattern"),
    (lambda: states.product_state("0101", L=5), "pattern"),
    (lambda: states.product_state([0, 2, 1]), "pattern"),
    (lambda: states.product_state([[0, 0], [1, 0]]), "pattern"),
    (lambda: states.product_state(""), "pattern"),
    (lambda: states.neel(4, first=2), "first"),
    (lambda: states.domain_wall(4, n=5), "n"),
    (lambda: states.domain_wall(4, filled="middle"), "filled"),
    (lambda: states.random_product_state(4, seed=None), "seed"),
    (lambda: states.random_product_state(4, seed=1, kind="gauss"), "kind"),
    (lambda: states.gas_in_box(8, 5, 3, 1), "start, stop"),
    (lambda: states.gas_in_box(8, 2, 4, 3), "n"),
    (lambda: states.gas_in_box(8, 2, 6, 2, "cloud"), "prepare"),
    (lambda: states.gas_in_box(8, 2, 6, 2, "ground"), "model"),
    (lambda: states.gas_in_box(8, 2, 6, 2, "ground", model=models.ising(8, g=0.5)), "model"),
    (lambda: states.gas_in_box(8, 2, 6, 2, "ground", model=models.xxz(6)), "model"),
    (lambda: states.neel("8"), "L: expected an integer"),
    (lambda: states.neel(8, first=True), "first: expected one of 0, 1"),
    (lambda: states.product_state(["0", "1"]), "pattern: expected a string"),
    (lambda: states.random_product_state(4, seed="abc"), "seed: expected an integer"),
    (lambda: states.gas_in_box(8, 2.0, 6, 2), "start: expected an integer"),
    (lambda: states.gas_in_box(8, 2, 6, 2, cutoff="0"), "cutoff: expected a number"),
    (lambda: states.gas_in_box(8, 2, 6, 2, "ground", model=models.xxz(8), max_bond=0),
     "max_bond"),
])
def test_bad_state_input(call, word):
    with pytest.raises(InputError, match=word):
        call()
