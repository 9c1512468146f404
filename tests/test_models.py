"""Models: Hamiltonians against independent dense constructions, MPO, energies, fields,
the registry and DMRG ground states.

Journal references in this file are cited from memory.
"""

from functools import reduce

import numpy as np
import pytest

from mpsobs.chain import models
from mpsobs.core.errors import InputError
from mpsobs.mps.tensors import random_mps, to_dense

SX = np.array([[0, 1], [1, 0]], dtype=complex)
SY = np.array([[0, -1j], [1j, 0]], dtype=complex)
SZ = np.array([[1, 0], [0, -1]], dtype=complex)


def _op(single: np.ndarray, site: int, L: int) -> np.ndarray:
    return reduce(np.kron, [single if i == site else np.eye(2) for i in range(L)])


def _xxz_dense(L, J, delta, h):
    """Handbook XXZ with spin operators S = sigma/2, built from Pauli matrices by kron."""
    H = np.zeros((2**L, 2**L), dtype=complex)
    for i in range(L - 1):
        for s, c in ((SX, 1.0), (SY, 1.0), (SZ, delta)):
            H += J * c * _op(s / 2, i, L) @ _op(s / 2, i + 1, L)
    for i in range(L):
        H += h[i] * _op(SZ / 2, i, L)
    return H


def _ising_dense(L, J, g, h):
    """Handbook Ising chain with Pauli matrices: -J zz - g x - h z (uniform g, h)."""
    H = np.zeros((2**L, 2**L), dtype=complex)
    for i in range(L - 1):
        H -= J * _op(SZ, i, L) @ _op(SZ, i + 1, L)
    for i in range(L):
        H -= g * _op(SX, i, L) + h * _op(SZ, i, L)
    return H


L8 = 8
STAGGERED = 0.6 * (-1.0) ** np.arange(L8)
CASES = [
    (models.xxz(L8, J=1.3, delta=0.7, h=0.6, field="staggered"),
     _xxz_dense(L8, 1.3, 0.7, STAGGERED)),
    (models.ising(L8, J=0.9, g=0.8, h=0.35), _ising_dense(L8, 0.9, 0.8, 0.35)),
]


@pytest.mark.parametrize(("model", "reference"), CASES, ids=["xxz", "ising"])
def test_hamiltonian_block_mpo_and_energy_against_dense(model, reference):
    # Reference: the Hamiltonians built independently above from Pauli matrices.
    np.testing.assert_allclose(model.dense_hamiltonian(), reference, atol=1e-13)
    np.testing.assert_allclose(model.block_hamiltonian(0, L8), reference, atol=1e-13)
    mpo = models.to_quimb_mpo(models.mpo_tensors(model)).to_dense()
    np.testing.assert_allclose(mpo, reference, atol=1e-12)
    hb = models.bond_hamiltonians(model)
    summed = sum(np.kron(np.kron(np.eye(2**b), h), np.eye(2 ** (L8 - b - 2)))
                 for b, h in enumerate(hb))
    np.testing.assert_allclose(summed, reference, atol=1e-13)
    state = random_mps(L8, 6, seed=11)
    v = to_dense(state)
    exact = float(np.vdot(v, reference @ v).real)
    assert models.energy(model, state) == pytest.approx(exact, abs=1e-12)
    # <psi|H|psi>/<psi|psi> does not depend on the normalisation of the tensors
    scaled = type(state)((3.0 * state.tensors[0],) + state.tensors[1:])
    assert models.energy(model, scaled) == pytest.approx(exact, abs=1e-12)


def test_block_hamiltonian_of_inner_block_and_restricted_model():
    model, _ = CASES[0]
    block = model.block_hamiltonian(2, 6)
    reference = _xxz_dense(4, 1.3, 0.7, STAGGERED[2:6])
    np.testing.assert_allclose(block, reference, atol=1e-13)
    np.testing.assert_allclose(model.restricted(2, 6).dense_hamiltonian(), reference, atol=1e-13)
    assert model.restricted(2, 6).params["region"] == [2, 6]


def test_field_values_shapes_and_seeded_reproducibility():
    np.testing.assert_array_equal(models.field_values("uniform", 0.3, 4), [0.3] * 4)
    np.testing.assert_array_equal(models.field_values("staggered", 0.5, 4),
                                  [0.5, -0.5, 0.5, -0.5])
    a = models.field_values("random", 2.0, 1000, seed=5)
    b = models.field_values("random", 2.0, 1000, seed=5)
    c = models.field_values("random", 2.0, 1000, seed=6)
    np.testing.assert_array_equal(a, b)
    assert not np.allclose(a, c)
    assert np.all(np.abs(a) <= 2.0)
    # uniform in [-2, 2]: mean 0 and variance 4/3; 4 standard errors for n = 1000
    assert abs(a.mean()) < 4 * np.sqrt(4 / 3 / 1000)
    # the same draw as numpy's generator with this seed
    np.testing.assert_array_equal(a, np.random.default_rng(5).uniform(-2.0, 2.0, 1000))
    model = models.xxz(6, h=1.0, field="random", seed=3)
    fields = [t.matrix[0, 0] * 2 for t in model.terms if t.width == 1]
    np.testing.assert_allclose(fields, models.field_values("random", 1.0, 6, seed=3))
    assert model.params["field"] == "random" and model.params["seed"] == 3


def test_build_registry():
    built = models.build("xxz", 6, J=0.5, delta=0.2, h=0.4, field="staggered")
    direct = models.xxz(6, 0.5, 0.2, 0.4, field="staggered")
    np.testing.assert_allclose(built.dense_hamiltonian(), direct.dense_hamiltonian())
    assert built.params == direct.params
    ising = models.build("ising", 5, g=0.3)
    np.testing.assert_allclose(ising.dense_hamiltonian(),
                               _ising_dense(5, 1.0, 0.3, 0.0).real, atol=1e-13)


@pytest.mark.parametrize(("call", "word"), [
    (lambda: models.build("heisenberg", 6), "allowed: ising, xxz"),
    (lambda: models.build("xxz", 6, Delta=1.0), "Delta"),
    (lambda: models.build("ising", 6, delta=1.0), "allowed: J, g, h, field, seed"),
    (lambda: models.field_values("random", 1.0, 6), "seed"),
    (lambda: models.field_values("wavy", 1.0, 6), "field"),
    (lambda: models.xxz(6, h=[1.0] * 6, field="staggered"), "h"),
    (lambda: models.xxz(6, h=[1.0] * 5), "h"),
    (lambda: models.ising(1), "L"),
    # numbers given as strings or booleans are refused, not converted
    (lambda: models.xxz(6, delta="0.5"), "delta: expected a number, got '0.5'"),
    (lambda: models.xxz(6, J=True), "J: expected a number"),
    (lambda: models.xxz(6, h="1"), "h: expected a number"),
    (lambda: models.ising(6, g=["1"] * 6), "g: expected a number"),
    (lambda: models.ising(6, h=float("nan")), "h"),
    (lambda: models.xxz(6.0), "L: expected an integer"),
    (lambda: models.xxz(True), "L: expected an integer"),
    (lambda: models.xxz(6, seed="abc"), "seed: expected an integer"),
    (lambda: models.xxz(6, field=1), "field: expected one of 'uniform', 'staggered'"),
    (lambda: models.ground_state(models.xxz(4), max_bond="8"), "max_bond"),
    (lambda: models.ground_state(models.xxz(4), cutoff="0"), "cutoff"),
    (lambda: models.ground_state(models.xxz(4), seed="abc"), "seed"),
    (lambda: models.ground_state("xxz"), "model: expected an mpsobs.models.Model"),
])
def test_bad_model_input(call, word):
    with pytest.raises(InputError, match=word):
        call()


def _open_tfim_ground_energy(L: int, J: float, g: float) -> float:
    """Exact ground energy of H = -J sum zz - g sum x on an open chain: free fermions with
    single-particle energies 2 sigma_k, sigma_k the singular values of the bidiagonal
    matrix with g on the diagonal and J above it; E0 = -sum_k sigma_k.
    Ann. Phys. 57, 79 (1970) (Pfeuty); Ann. Phys. 16, 407 (1961) (Lieb, Schultz, Mattis)."""
    T = np.diag(np.full(L, g)) + np.diag(np.full(L - 1, J), 1)
    return -float(np.linalg.svd(T, compute_uv=False).sum())


def test_free_fermion_formula_against_dense():
    # guards the reference formula used below, at sizes where dense diagonalisation is cheap
    for L, J, g in ((8, 1.0, 1.0), (9, 0.7, 1.3)):
        exact = np.linalg.eigvalsh(_ising_dense(L, J, g, 0.0))[0]
        assert _open_tfim_ground_energy(L, J, g) == pytest.approx(exact, abs=1e-10)


def test_dmrg_critical_ising_against_free_fermions():
    L = 64
    exact = _open_tfim_ground_energy(L, 1.0, 1.0)
    gs = models.ground_state(models.ising(L, J=1.0, g=1.0, h=0.0), max_bond=24, cutoff=1e-12,
                             tol=1e-9)
    assert gs.converged
    # variational: never below the exact value; converged within 1e-8 (critical chain,
    # bond 24 is ample for L = 64: the error is ~3e-10)
    assert gs.energy >= exact - 1e-10
    assert gs.energy - exact < 1e-8
    assert gs.energy_change < 1e-9
    # bulk energy density -4/pi of the critical chain (Pfeuty 1970); the open-chain value
    # has a surface term O(1), so the per-site difference of two lengths is compared
    bulk = (_open_tfim_ground_energy(2 * L, 1.0, 1.0) - exact) / L
    assert bulk == pytest.approx(-4 / np.pi, abs=1e-4)
    assert abs(gs.energy / L + 4 / np.pi) < 1.0 / L


def test_ground_state_small_xxz_against_eigh():
    model = models.xxz(8, J=1.0, delta=0.8, h=0.3, field="random", seed=2)
    w, v = np.linalg.eigh(model.dense_hamiltonian())
    gs = models.ground_state(model, max_bond=16, cutoff=1e-14)
    assert gs.energy == pytest.approx(w[0], abs=1e-9)
    assert abs(np.vdot(v[:, 0], to_dense(gs.state))) ** 2 == pytest.approx(1.0, abs=1e-8)
