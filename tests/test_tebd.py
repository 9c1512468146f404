"""TEBD against exact dense evolution, convergence order, snapshots, energy budget of a
truncated run, SVD fallbacks and bad input."""

import dataclasses
from functools import lru_cache

import numpy as np
import pytest
from scipy.sparse.linalg import expm_multiply

from mpsobs.chain import models, states
from mpsobs.chain.evolution import Snapshot, evolve
from mpsobs.core.errors import InputError
from mpsobs.mps import truncation
from mpsobs.mps.tensors import MPS, right_canonical_defect, to_dense, to_quimb

FULL = 4096   # a bond limit no state here reaches: no truncation by bond dimension
#: Drops only Schmidt weight at rounding level (the discarded weight is checked), which
#: keeps dense runs from carrying ~1e-17 singular values up to the full bond dimension.
ROUNDING_CUTOFF = 1e-16


def _xxz(L):
    return models.xxz(L, J=1.0, delta=0.7, h=0.5, field="staggered")


def _ising(L):
    return models.ising(L, J=1.0, g=0.9, h=0.4)


def _exact(model, psi0: MPS, t: float) -> np.ndarray:
    """exp(-i H t) psi0 by scipy's expm_multiply on the sparse H."""
    return expm_multiply(-1j * t * model.sparse_hamiltonian(), to_dense(psi0))


def _final(model, psi0, t, dt, order, **kw) -> Snapshot:
    opts = {"max_bond": FULL, "cutoff": ROUNDING_CUTOFF, **kw}
    return list(evolve(psi0, model, [t], dt=dt, order=order, **opts))[-1]


def _assert_right_canonical(mps: MPS) -> None:
    """sum_s A_s A_s^dagger = 1 on every site but the first, and <psi|psi> = 1."""
    assert right_canonical_defect(mps) < 1e-11


@pytest.mark.parametrize(("model", "psi0"), [
    (_xxz(12), states.neel(12)),
    (_ising(12), states.product_state("0" * 12)),
], ids=["xxz-staggered", "ising-g-h"])
def test_fourth_order_matches_exact_evolution(model, psi0):
    # Reference: scipy.sparse.linalg.expm_multiply of the sparse Hamiltonian. The XXZ run
    # uses the number blocks (symmetry="auto" at this max_bond), the Ising run dense ones.
    t = 2.0
    snap = _final(model, psi0, t, dt=0.05, order=4)
    exact = _exact(model, psi0, t)
    fidelity = abs(np.vdot(exact, to_dense(snap.state))) ** 2
    assert fidelity >= 1 - 1e-8
    assert snap.discarded_weight < 1e-12 and snap.norm == pytest.approx(1.0, abs=1e-12)
    e_exact = float(np.vdot(exact, model.sparse_hamiltonian() @ exact).real)
    assert snap.energy == pytest.approx(e_exact, abs=1e-5)
    assert snap.energy == pytest.approx(models.energy(model, snap.state), abs=1e-11)


def _state_error(model, psi0, t, dt, order) -> float:
    snap = _final(model, psi0, t, dt, order, cutoff=0.0)   # nothing discarded at all
    return float(np.linalg.norm(to_dense(snap.state) - _exact(model, psi0, t)))


@pytest.mark.parametrize(("order", "dts"), [(2, (0.1, 0.05)), (4, (0.2, 0.1))])
def test_trotter_error_converges_at_its_order(order, dts):
    # Halving dt divides the global error of an order-p splitting by 2**p (fact of the
    # trade; quimb tests the same rate); the band allows the O(dt**2) relative corrections
    # of these symmetric splittings at the step sizes used.
    L, t = 10, 1.0
    model, psi0 = _xxz(L), states.neel(L)
    coarse, fine = (_state_error(model, psi0, t, dt, order) for dt in dts)
    ratio = coarse / fine
    expected = 2.0**order
    assert 0.75 * expected < ratio < 1.25 * expected, ratio


def test_snapshots_land_on_the_requested_times():
    L = 8
    model, psi0 = _ising(L), states.neel(L)
    times = [0.0, 0.13, 0.13, 0.5, 0.77]
    dt = 0.1
    snaps = list(evolve(psi0, model, times, max_bond=FULL, cutoff=0.0, dt=dt, order=2))
    names = {f.name: f.type for f in dataclasses.fields(Snapshot)}
    for name in ("t", "state", "discarded_weight", "max_bond", "norm", "energy",
                 "energy_drift", "half_chain_entanglement"):
        assert name in names
    assert [s.t for s in snaps] == times
    # steps: ceil of each interval over dt (the last step of each is shortened)
    assert [s.steps for s in snaps] == [0, 2, 2, 6, 9]
    for s in snaps:
        assert isinstance(s.state, MPS) and isinstance(s.max_bond, int)
        assert all(isinstance(getattr(s, n), float) for n in
                   ("t", "discarded_weight", "norm", "energy", "energy_drift",
                    "half_chain_entanglement"))
        _assert_right_canonical(s.state)
        assert s.max_bond == s.state.max_bond
        exact = _exact(model, psi0, s.t)
        assert abs(np.vdot(exact, to_dense(s.state))) ** 2 > 1 - 1e-4
        # half-chain entropy against the Schmidt values of the exact vector
        sv = np.linalg.svd(exact.reshape(2 ** (L // 2), -1), compute_uv=False)
        p = sv[sv > 1e-12] ** 2
        assert s.half_chain_entanglement == pytest.approx(-np.sum(p * np.log(p)), abs=1e-3)
    assert snaps[0].energy_drift == 0.0 and snaps[0].half_chain_entanglement == 0.0


def test_start_time_and_quimb_input():
    L = 8
    model, psi0 = _xxz(L), states.neel(L)
    shifted = list(evolve(to_quimb(psi0), model, [1.0, 1.37], max_bond=FULL, cutoff=ROUNDING_CUTOFF,
                          dt=0.05, order=4, start_time=1.0))
    plain = _final(model, psi0, 0.37, dt=0.05, order=4)
    assert shifted[-1].t == 1.37 and shifted[0].steps == 0
    overlap = np.vdot(to_dense(plain.state), to_dense(shifted[-1].state))
    assert abs(overlap) ** 2 == pytest.approx(1.0, abs=1e-12)


@lru_cache(maxsize=1)
def _untruncated_drift_per_bond(dt: float, order: int, times: tuple) -> float:
    """Largest |energy drift| per bond of the untruncated run at L = 12 (pure Trotter)."""
    L = 12
    snaps = evolve(states.neel(L), _xxz(L), times, max_bond=FULL, cutoff=ROUNDING_CUTOFF,
                   dt=dt, order=order)
    return max(abs(s.energy_drift) for s in snaps) / (L - 1)


def test_energy_drift_of_truncated_run_within_error_budget():
    # Budget for |<H>(t) - <H>(0)| (fact of the trade, derived here):
    # - Trotter: the splitting conserves an effective H' = H + O(dt^4), so <H> drifts by a
    #   bounded, extensive amount; estimated as twice the measured untruncated drift per
    #   bond at L = 12 (same model and dt) times the number of bonds.
    # - truncation: discarding a fraction eps of the Schmidt weight at a cut changes <h>
    #   of a term on one side by <= 2 eps ||h|| and of the term across the cut by
    #   <= 2 sqrt(eps) ||h|| + 2 eps ||h||; summed over the M truncations with
    #   sum eps = w (discarded_weight), Cauchy-Schwarz gives sum sqrt(eps) <= sqrt(M w).
    L, dt, order = 32, 0.05, 4
    times = (0.5, 1.0, 1.5, 2.0)
    model = _xxz(L)
    norms = [np.linalg.norm(h, 2) for h in models.bond_hamiltonians(model)]
    snaps = list(evolve(states.neel(L), model, times, max_bond=12, cutoff=1e-12, dt=dt,
                        order=order))
    trotter = 2.0 * (L - 1) * _untruncated_drift_per_bond(dt, order, times)
    e0 = models.energy(model, states.neel(L))
    for s in snaps:
        assert s.energy == pytest.approx(models.energy(model, s.state), abs=1e-10)
        assert s.energy - s.energy_drift == pytest.approx(e0, abs=1e-12)
        # norm**2 = prod(1 - eps_j): 1 - norm**2 lies in [w - w**2 / 2, w]
        w = s.discarded_weight
        assert w - w**2 / 2 - 1e-12 <= 1 - s.norm**2 <= w + 1e-12
        gates = (3 * s.steps + len(times)) * (L - 1)   # upper bound on truncations
        truncation = 2 * w * sum(norms) + 2 * max(norms) * (np.sqrt(gates * w) + w)
        assert abs(s.energy_drift) <= trotter + truncation
    assert snaps[-1].discarded_weight > 1e-8   # the run was truncated
    assert snaps[-1].max_bond == 12


def test_svd_fallbacks_give_the_same_evolution(monkeypatch):
    L = 6
    model, psi0 = _ising(L), states.neel(L)
    svd_only = {"decomposition": "svd"}
    reference = to_dense(_final(model, psi0, 0.5, dt=0.1, order=2, **svd_only).state)

    def failing_gesdd(*args, **kwargs):
        return None, None, None, 1   # LAPACK's "did not converge"

    def failing_robust(m):
        raise np.linalg.LinAlgError("SVD did not converge")

    monkeypatch.setattr(truncation, "_GESDD", failing_gesdd)   # -> mps.robust_svd
    robust = to_dense(_final(model, psi0, 0.5, dt=0.1, order=2, **svd_only).state)
    monkeypatch.setattr(truncation, "robust_svd", failing_robust)   # -> Gram + eigh
    gram = to_dense(_final(model, psi0, 0.5, dt=0.1, order=2, **svd_only).state)
    assert abs(np.vdot(reference, robust)) ** 2 == pytest.approx(1.0, abs=1e-12)
    assert abs(np.vdot(reference, gram)) ** 2 == pytest.approx(1.0, abs=1e-10)


def test_number_blocks_match_dense_decompositions():
    # The block-by-block decompositions give the same truncated evolution as dense ones
    # (same singular values, same truncation); the reference is the dense path.
    L = 16
    model, psi0 = _xxz(L), states.neel(L)
    runs = {sym: list(evolve(psi0, model, [0.5, 1.5], max_bond=6, cutoff=1e-12, dt=0.1,
                             order=2, symmetry=sym)) for sym in ("number", "none")}
    for blocks, dense in zip(runs["number"], runs["none"], strict=True):
        overlap = np.vdot(to_dense(dense.state), to_dense(blocks.state))
        assert abs(overlap) ** 2 == pytest.approx(1.0, abs=1e-10)
        assert blocks.discarded_weight == pytest.approx(dense.discarded_weight, rel=1e-8)
        assert blocks.energy == pytest.approx(dense.energy, abs=1e-10)
        assert blocks.half_chain_entanglement == pytest.approx(
            dense.half_chain_entanglement, abs=1e-9)
        _assert_right_canonical(blocks.state)
    assert runs["number"][-1].discarded_weight > 1e-6   # the run was truncated


def test_number_blocks_need_definite_numbers():
    L = 8
    superposed = states.product_state("+0" * (L // 2))
    with pytest.raises(InputError, match="symmetry"):
        evolve(superposed, _xxz(L), [0.5], max_bond=64, cutoff=0.0, dt=0.1, symmetry="number")
    with pytest.raises(InputError, match="symmetry"):
        evolve(states.neel(L), _ising(L), [0.5], max_bond=64, cutoff=0.0, dt=0.1,
               symmetry="number")
    # "auto" falls back to dense decompositions and stays exact
    snap = _final(_xxz(L), superposed, 0.5, dt=0.05, order=4, max_bond=64)
    exact = _exact(_xxz(L), superposed, 0.5)
    assert abs(np.vdot(exact, to_dense(snap.state))) ** 2 >= 1 - 1e-9


@pytest.mark.parametrize(("kwargs", "word"), [
    ({"times": [0.5, 0.2]}, "times"),
    ({"times": [0.5], "start_time": 1.0}, "times"),
    ({"times": []}, "times"),
    ({"times": [float("nan")]}, "times"),
    ({"dt": 0.0}, "dt"),
    ({"dt": -0.1}, "dt"),
    ({"order": 3}, "order"),
    ({"max_bond": 0}, "max_bond"),
    ({"cutoff": 1.5}, "cutoff"),
    ({"model": models.xxz(6)}, "state"),
    ({"model": "xxz"}, "model"),
    ({"symmetry": "u1"}, "symmetry"),
    ({"dt": "0.1"}, "dt: expected a number"),
    ({"dt": True}, "dt: expected a number"),
    ({"cutoff": "0"}, "cutoff: expected a number"),
    ({"max_bond": 8.0}, "max_bond: expected an integer"),
    ({"order": 2.0}, "order: expected one of 2, 4"),
    ({"start_time": "0"}, "start_time: expected a number"),
    ({"progress": "yes"}, "progress"),
])
def test_bad_evolve_input(kwargs, word):
    args = {"times": [0.5], "model": _xxz(8), "max_bond": 8, "cutoff": 0.0, "dt": 0.1,
            "order": 2, **kwargs}
    model = args.pop("model")
    times = args.pop("times")
    with pytest.raises(InputError, match=word):
        evolve(states.neel(8), model, times, **args)   # raised at the call, not on iteration


def test_gram_route_matches_the_svd_route_and_the_exact_evolution():
    # The truncation through the Gram matrix (decomposition="auto") against the SVD on
    # every split, on a truncated quench; and, untruncated by the bond, against
    # scipy's expm_multiply of the sparse Hamiltonian.
    L = 12
    model, psi0 = _xxz(L), states.neel(L)
    runs = {route: list(evolve(psi0, model, [1.0, 2.0], max_bond=8, cutoff=1e-10, dt=0.05,
                               order=2, symmetry="none", decomposition=route))
            for route in ("auto", "svd")}
    for gram, svd in zip(runs["auto"], runs["svd"], strict=True):
        overlap = np.vdot(to_dense(svd.state), to_dense(gram.state))
        assert abs(overlap) ** 2 >= 1 - 1e-10
        assert gram.discarded_weight == pytest.approx(svd.discarded_weight, rel=1e-6)
        _assert_right_canonical(gram.state)
    assert runs["svd"][-1].discarded_weight > 1e-6   # the run was truncated
    # Against the exact state: triangle inequality over the M truncations of relative
    # weights eps_j (each moves the state by sqrt(eps_j); Cauchy-Schwarz: sum sqrt(eps_j)
    # <= sqrt(M w)), plus the Trotter error of the same run without truncation.
    snap = _final(model, psi0, 2.0, dt=0.05, order=4, cutoff=1e-10, symmetry="none")
    exact = _exact(model, psi0, 2.0)
    trotter = _state_error(model, psi0, 2.0, 0.05, 4)
    truncations = (3 * snap.steps + 1) * (L - 1)
    bound = trotter + np.sqrt(truncations * snap.discarded_weight)
    assert snap.discarded_weight > 0
    phase = np.vdot(to_dense(snap.state), exact)
    assert np.linalg.norm(to_dense(snap.state) * phase / abs(phase) - exact) <= bound


def test_number_blocks_for_a_ground_state_quench():
    # A DMRG ground state (bond bases of indefinite number as quimb returns them) is
    # rotated to definite numbers and evolved block by block; the reference is the dense
    # path, and scipy's expm_multiply.
    L = 10
    ground = models.ground_state(models.xxz(L, delta=2.0), max_bond=16, cutoff=1e-12).state
    model = _xxz(L)
    runs = {sym: _final(model, ground, 1.0, dt=0.05, order=4, cutoff=1e-12, symmetry=sym)
            for sym in ("number", "none")}
    overlap = np.vdot(to_dense(runs["none"].state), to_dense(runs["number"].state))
    assert abs(overlap) ** 2 == pytest.approx(1.0, abs=1e-10)
    assert runs["number"].energy == pytest.approx(runs["none"].energy, abs=1e-9)
    exact = _exact(model, ground, 1.0)
    assert abs(np.vdot(exact, to_dense(runs["number"].state))) ** 2 >= 1 - 1e-8
