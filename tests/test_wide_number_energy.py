"""The joint number and energy of wide regions: charge- and phase-resolved Chebyshev
probabilities, number-sector volumes, and S_obs against exact diagonalisation done here."""

import numpy as np
import pytest

from mpsobs.chain import coarse, models, states
from mpsobs.chain import evolution as tebd
from mpsobs.core.errors import InputError
from mpsobs.estimators import chebyshev
from mpsobs.estimators import wide_energy as we
from mpsobs.estimators import wide_number_energy as wne
from mpsobs.estimators.entropy import observational_entropy
from mpsobs.estimators.estimate import canonical_state, pruned_entropy_bound
from mpsobs.mps.tensors import random_mps, to_dense
from mpsobs.references import thermo

JOINT = ("number", "energy")


def _total_error(res) -> float:
    """The row's total error by the rule of mpsobs.analysis.uncertainty: the method error
    estimate plus the entropy bound of the pruned mass."""
    return res.method_err + pruned_entropy_bound(res.pruned_mass, res.max_entropy)


def _sectors(model):
    """Per number sector n: the basis states and the eigenvalues and eigenvectors of H
    restricted to them (exact diagonalisation of the dense H, sector by sector)."""
    h = model.sparse_hamiltonian().tocsr()
    count = np.array([bin(s).count("1") for s in range(2**model.L)])
    out = []
    for n in range(model.L + 1):
        idx = np.flatnonzero(count == n)
        out.append((idx, *np.linalg.eigh(h[idx][:, idx].toarray())))
    return out


def _exact_joint(vl, vr, model_a, model_b, width):
    """S_obs of the definition: p(n_A, b_A, n_B, b_B) = sum_ab <L_a|P_A|L_b> <R_a|P_B|R_b>
    from vectors vl (2^n_A, chi) (Schmidt values included) and vr (2^n_B, chi), volumes
    the eigenvalue counts of each sector and bin."""
    blocks = []
    for vecs, model in ((vl, model_a), (vr, model_b)):
        region = {}
        for n, (idx, values, eig) in enumerate(_sectors(model)):
            amp = eig.T @ vecs[idx]
            labels = np.floor(values / width).astype(int)
            for b in np.unique(labels):
                rows = amp[labels == b]
                region[(n, b)] = (rows.conj().T @ rows, int(np.sum(labels == b)))
        blocks.append(region)
    entropy = 0.0
    for qa, va in blocks[0].values():
        for qb, vb in blocks[1].values():
            p = float(np.sum(qa * qb).real)
            if p > 1e-15:
                entropy -= p * np.log(p / (va * vb))
    return entropy


def _left_vectors(segment):
    """(d^n, chi) matrix of the vectors of a segment with an open right bond."""
    v = segment[0].reshape(-1, segment[0].shape[2])
    for t in segment[1:]:
        v = np.tensordot(v, t, axes=(1, 0)).reshape(-1, t.shape[2])
    return v


def _right_vectors(segment):
    """(d^n, chi) matrix of the vectors of a segment with an open left bond."""
    chi = segment[0].shape[0]
    v = segment[0].reshape(-1, segment[0].shape[2])
    for t in segment[1:]:
        v = np.tensordot(v, t, axes=(1, 0)).reshape(-1, t.shape[2])
    return v.reshape(chi, -1).T


def _exact_halves(model, state, cut, width):
    """S_obs of the definition for the halves at ``cut`` of an MPS, from its Schmidt
    vectors (:func:`_exact_joint`)."""
    left, lam, right = we._split(canonical_state(state).tensors, cut)
    return _exact_joint(_left_vectors(left) * lam, _right_vectors(right),
                        model.restricted(0, cut), model.restricted(cut, model.L), width)


def _quench(L, t, bond):
    model = models.xxz(L, delta=0.5, h=0.1, field="staggered")
    snap = next(iter(tebd.evolve(states.neel(L), model, [t], max_bond=bond, cutoff=1e-12,
                                 dt=0.05, order=4)))
    return model, snap.state


def _chebyshev_dense(h, centre, half_width, n):
    """T_k((h - centre) / half_width), k < n, by the three-term recursion (Abramowitz and
    Stegun 22.7.4)."""
    x = (h - centre * np.eye(len(h))) / half_width
    out = [np.eye(len(h)), x]
    for _ in range(2, n):
        out.append(2 * x @ out[-1] - out[-2])
    return out


def _dense_joint(rho_of, regions, n_moments):
    """P[n_A, b_A, n_B, b_B] = C_A mu(n_A, n_B) C_B^T with the exact moments mu_km =
    Tr[rho P_A(n_A) T_k(Ht_A) P_B(n_B) T_m(Ht_B)] (``rho_of(X_A, X_B)`` gives the trace)
    and the closed-form Jackson-damped bin weights of the estimator."""
    ops = []
    for r in regions:
        h = r.model.block_hamiltonian(0, r.model.L)
        count = np.array([bin(s).count("1") for s in range(len(h))])
        ts = _chebyshev_dense(h, r.centre, r.half_width, n_moments)
        ops.append([[np.diag(count == n) @ t for t in ts] for n in range(r.model.L + 1)])
    p = np.zeros((len(ops[0]), len(regions[0].bins), len(ops[1]), len(regions[1].bins)))
    ca, cb = (chebyshev.bin_weights(r.edges, r.centre, r.half_width, n_moments)
              for r in regions)
    for na, ta in enumerate(ops[0]):
        for nb, tb in enumerate(ops[1]):
            mu = np.array([[rho_of(x, y) for y in tb] for x in ta]).real
            p[na, :, nb, :] = ca @ mu @ cb.T
    return p


def test_charge_resolved_probabilities_match_the_dense_moments():
    # pure state of definite number: the estimator's P(n_A, b_A, n_B, b_B) against the
    # same kernel-polynomial expansion with exact dense moments (definition of p with
    # P_R(n) the number projector), to round-off; and its number marginal is the exact
    # number distribution of the halves
    L, cut, n_moments = 10, 5, 24
    model, state = _quench(L, 1.0, 16)
    psi = to_dense(state).reshape(2**cut, 2 ** (L - cut))
    regions = [we._region(model.restricted(0, cut), 1.0),
               we._region(model.restricted(cut, L), 1.0)]
    mirrored = [regions[0], we._region(we._mirror_model(regions[1].model), 1.0)]
    lam, sectors = wne._state_sectors(canonical_state(state), cut, mirrored, n_moments, 256)
    got = wne._joint(lam, sectors, mirrored, n_moments)
    want = _dense_joint(lambda x, y: np.vdot(psi, x @ psi @ y.T), regions, n_moments)
    np.testing.assert_allclose(got, want / want.sum(), atol=1e-10)
    count = np.array([bin(s).count("1") for s in range(2**cut)])
    weight = np.abs(psi) ** 2
    exact = np.array([[weight[np.ix_(count == a, count == b)].sum() for b in range(cut + 1)]
                      for a in range(cut + 1)])
    np.testing.assert_allclose(got.sum(axis=(1, 3)), exact, atol=1e-10)


def _purification_dense(state, L):
    """The dense vector of a purification, indexed (s_0, a_0, s_1, a_1, ...)."""
    v = np.ones((1, 1))
    for t in state.tensors:
        v = np.tensordot(v, t, axes=(1, 0)).reshape(-1, t.shape[2])
    return v.reshape([2] * (2 * L))


def test_phase_resolved_probabilities_of_a_purification_match_the_dense_moments():
    # a Gibbs purification: its bonds carry n_spin - n_ancilla, so the region numbers come
    # from the phases; against Tr[rho P_A T_k P_B T_m] of the same purification, dense
    L, cut, n_moments = 8, 4, 10
    model = models.xxz(L, delta=0.5, h=0.2, field="staggered")
    rho = thermo.gibbs_state(model, 0.7, max_bond=64)
    v = _purification_dense(canonical_state(rho), L)
    # (spins of A, spins of B, ancillas) as a matrix per side
    order = [*range(0, 2 * cut, 2), *range(2 * cut, 2 * L, 2), *range(1, 2 * L, 2)]
    psi = v.transpose(order).reshape(2**cut, 2 ** (L - cut), 2**L)
    regions = [we._region(model.restricted(0, cut), 1.0),
               we._region(model.restricted(cut, L), 1.0)]
    mirrored = [regions[0], we._region(we._mirror_model(regions[1].model), 1.0)]
    lam, sectors = wne._state_sectors(canonical_state(rho), cut, mirrored, n_moments, 256)
    got = wne._joint(lam, sectors, mirrored, n_moments)
    want = _dense_joint(lambda x, y: np.vdot(psi, np.einsum("ij,jkc,lk->ilc", x, psi, y,
                                                            optimize=True)),
                        regions, n_moments)
    np.testing.assert_allclose(got, want / want.sum(), atol=1e-10)


def test_exact_volume_regions_against_the_definition_and_both_orders_agree():
    # halves of 5 sites (exact sector counts), probabilities from the Chebyshev series:
    # S_obs of the definition within the reported error; the two orders ask commuting
    # observables, so the same distribution with the columns swapped
    L, cut, width = 10, 5, 1.0
    model, state = _quench(L, 1.0, 16)
    exact = _exact_halves(model, state, cut, width)
    results = []
    for order in (JOINT, JOINT[::-1]):
        cg = coarse.WideEnergyRegions(L, ((0, cut), (cut, L)), model, width, "t", order)
        results.append(wne.wide_number_energy_entropy(state, cg, moments=64, bond=32))
    first, second = results
    assert abs(first.entropy - exact) <= _total_error(first), (first, exact)
    assert first.entropy == pytest.approx(second.entropy, abs=1e-12)
    assert first.method_err == pytest.approx(second.method_err, abs=1e-12)
    np.testing.assert_array_equal(first.distribution.outcomes,
                                  second.distribution.outcomes[:, [1, 0, 3, 2]])
    # asking the number too refines the energy alone, so S_obs does not rise
    # (monotonicity: Phys. Rev. A 99, 010101(R) (2019), reference from memory)
    alone = we.wide_energy_entropy(state, coarse.WideEnergyRegions(
        L, ((0, cut), (cut, L)), model, width, "e"), moments=64, bond=32)
    assert first.entropy <= alone.entropy + _total_error(first) + _total_error(alone)


def test_13_and_3_sites_against_exact_diagonalisation_of_each_sector():
    # the 13-site region through the reweighted number-sector volumes: exact p from the
    # Schmidt vectors and the eigenvectors of H_A and H_B sector by sector, exact counts
    L, cut, width = 16, 13, 1.0
    model, state = _quench(L, 1.0, 8)
    exact = _exact_halves(model, state, cut, width)
    cg = coarse.sequence(coarse.blocks(L, None, "energy", model=model, bin_width=width,
                                       regions=[[0, cut], [cut, L]]),
                         coarse.blocks(L, None, "number", regions=[[0, cut], [cut, L]]))
    res = observational_entropy(state, cg, moments=32, bond=8)
    assert res.label == cg.label and res.distribution.outcomes.shape[1] == 4
    assert abs(res.entropy - exact) <= _total_error(res), (res, exact)


def test_sector_volumes_of_13_sites_match_exact_counts():
    # exact counts by diagonalising each number sector of H_R (13 sites); the accuracy
    # goal of the method, 0.1 nats, near the reference
    model = models.xxz(13, delta=0.5, h=0.1, field="staggered")
    width = 1.0
    pairs = [(n, k) for n in (5, 6, 7) for k in (-3, -2, -1)]
    sectors = _sectors(model)
    exact = [np.sum(np.floor(sectors[n][1] / width) == k) for n, k in pairs]
    numbers, bins = np.array(pairs).T
    got = wne.sector_volumes(model, width, numbers, bins, targets=[-2.0], number=6.0,
                             n_moments=64, bond=16, exact_sites=0)
    np.testing.assert_allclose(got, np.log(exact), atol=0.1)


def test_grand_canonical_references_are_reused_and_do_not_change_the_result(monkeypatch):
    # a second evaluation takes the references from the memo (no Gibbs build) and gives
    # the same numbers as one with an empty memo
    L, cut = 16, 13
    model, state = _quench(L, 1.0, 8)
    cg = coarse.sequence(coarse.blocks(L, None, "number", regions=[[0, cut], [cut, L]]),
                         coarse.blocks(L, None, "energy", model=model, bin_width=1.0,
                                       regions=[[0, cut], [cut, L]]))
    options = {"moments": 8, "bond": 4, "sub_bins": 2}
    monkeypatch.setattr(we, "_MEMO", {})
    first = wne.wide_number_energy_entropy(state, cg, **options)
    builds = []
    original = chebyshev.gibbs_segment
    monkeypatch.setattr(chebyshev, "gibbs_segment",
                        lambda *args: builds.append(args) or original(*args))
    again = wne.wide_number_energy_entropy(state, cg, **options)
    assert builds == []
    monkeypatch.setattr(we, "_MEMO", {})
    fresh = wne.wide_number_energy_entropy(state, cg, **options)
    assert len(builds) > 0
    for res in (again, fresh):
        assert (res.entropy, res.method_err) == (first.entropy, first.method_err)


def test_infinite_temperature_gives_the_maximal_entropy():
    # beta = 0: p(n, b) = V(n, b) / 2^L, so S_obs = L ln 2 (definition, DESIGN 3c); the
    # purification's region numbers come from the phases
    L = 16
    model = models.xxz(L, delta=0.5)
    cg = coarse.sequence(coarse.blocks(L, None, "number", regions=[[0, 13], [13, L]]),
                         coarse.blocks(L, None, "energy", model=model, bin_width=2.0,
                                       regions=[[0, 13], [13, L]]))
    rho = thermo.gibbs_state(model, 0.0, max_bond=4)
    res = wne.wide_number_energy_entropy(rho, cg, moments=16, bond=8)
    assert res.bond_entropies is None
    assert abs(res.entropy - L * np.log(2)) <= _total_error(res)


THREE = ((0, 3), (3, 7), (7, 10))


def _dense_three(rho, regions, n_moments):
    """P[n_A, b_A, n_C, b_C, n_B, b_B] = C_A C_C C_B mu with the exact moments mu_jnm =
    Tr[rho P_A T_j(Ht_A) P_C T_n(Ht_C) P_B T_m(Ht_B)] (``rho`` the dense density matrix
    of the spins, A then C then B) and the estimator's closed-form Jackson-damped bin
    weights: the same kernel-polynomial expansion with dense moments."""
    stacks, dims = [], []
    for r in regions:
        h = r.model.block_hamiltonian(0, r.model.L)
        count = np.array([bin(s).count("1") for s in range(len(h))])
        ts = np.array(_chebyshev_dense(h, r.centre, r.half_width, n_moments))
        stacks.append(np.concatenate([ts * (count == n)[:, None]
                                      for n in range(r.model.L + 1)]))
        dims.append(len(h))
    mu = np.einsum("Jab,Nce,Mdf,befacd->JNM", *stacks, rho.reshape(dims * 2),
                   optimize=True).real
    weights = [chebyshev.bin_weights(r.edges, r.centre, r.half_width, n_moments)
               for r in regions]
    mu = mu.reshape([x for r in regions for x in (r.model.L + 1, n_moments)])
    return np.einsum("aj,cn,bm,xjynzm->xayczb", *weights, mu)


def _three_regions(model, where):
    volume = tuple(we._region(model.restricted(x, y), 1.0) for x, y in where)
    return volume, (*volume[:2], we._region(we._mirror_model(volume[2].model), 1.0))


def _on_live_grid(p, live, regions, total=None):
    """The dense P on the estimator's grid: live outer sectors and bins, every n_C (or,
    for a pure state of number ``total``, its one slot n_C = total - n_A - n_B)."""
    (na, ba), (nb, bb) = live
    grid = p[np.ix_(na, ba, np.arange(regions[1].model.L + 1),
                    np.arange(len(regions[1].bins)), nb, bb)]
    if total is None:
        return grid
    fixed = total - na[:, None] - nb[None, :]
    valid = (fixed >= 0) & (fixed <= regions[1].model.L)
    i, j = np.indices(fixed.shape)
    slot = grid[i, :, np.clip(fixed, 0, regions[1].model.L), :, j, :] * valid[:, :, None, None,
                                                                              None]
    return slot.transpose(0, 2, 3, 1, 4)[:, :, None]


def test_three_region_charge_resolved_probabilities_match_the_dense_moments():
    # a pure state of definite number, regions 3 + 4 + 3: charges at both cuts give n_A
    # and n_B, and n_C = N - n_A - n_B; against the dense expansion to 1e-8, every bit of
    # probability on the estimator's grid of live outer sectors and bins
    L, n_moments = 10, 12
    model, state = _quench(L, 1.0, 64)
    cg = coarse.WideEnergyRegions(L, THREE, model, 1.0, "t", JOINT)
    volume, mirrored = _three_regions(model, THREE)
    raw, live, middle = wne._three_joint(canonical_state(state), cg, mirrored, n_moments, 256)
    psi = to_dense(state)
    want = _dense_three(np.outer(psi, psi.conj()), volume, n_moments)
    grid = _on_live_grid(want, live, volume, total=L // 2)
    assert middle.total == L // 2
    assert grid.sum() == pytest.approx(want.sum(), abs=1e-12)
    np.testing.assert_allclose(raw["main"], grid, atol=1e-8)


def test_three_region_phase_resolved_probabilities_of_a_purification_match_the_dense_moments():
    L, n_moments, where = 8, 8, ((0, 3), (3, 5), (5, 8))
    model = models.xxz(L, delta=0.5, h=0.2, field="staggered")
    rho = canonical_state(thermo.gibbs_state(model, 0.7, max_bond=64))
    cg = coarse.WideEnergyRegions(L, where, model, 1.0, "t", JOINT)
    volume, mirrored = _three_regions(model, where)
    raw, live, _ = wne._three_joint(rho, cg, mirrored, n_moments, 256)
    order = [*range(0, 2 * L, 2), *range(1, 2 * L, 2)]   # spins, then ancillas
    vector = _purification_dense(rho, L).transpose(order).reshape(2**L, 2**L)
    want = _dense_three(vector @ vector.conj().T, volume, n_moments)
    np.testing.assert_allclose(raw["main"], _on_live_grid(want, live, volume), atol=1e-8)


def _exact_three(model, state, width, where=THREE):
    """S_obs of the definition for three regions of a pure state: p = ||P_A P_C P_B psi||^2
    from the eigenvectors of each region's H sector by sector, V the counts per (n, bin)."""
    psi = to_dense(state).reshape([2 ** (y - x) for x, y in where])
    labels, bases = [], []
    for x, y in where:
        vecs = np.zeros((2 ** (y - x),) * 2)
        tags = []
        col = 0
        for n, (idx, values, eig) in enumerate(_sectors(model.restricted(x, y))):
            vecs[np.ix_(idx, range(col, col + len(idx)))] = eig
            tags += [(n, int(b)) for b in np.floor(values / width)]
            col += len(idx)
        bases.append(vecs)
        labels.append(tags)
    amp = np.einsum("ai,cj,bk,acb->ijk", *bases, psi, optimize=True)
    probs, counts = {}, [{} for _ in where]
    for r, tags in enumerate(labels):
        for tag in tags:
            counts[r][tag] = counts[r].get(tag, 0) + 1
    weight = np.abs(amp) ** 2
    for i, ta in enumerate(labels[0]):
        for j, tc in enumerate(labels[1]):
            for k, tb in enumerate(labels[2]):
                probs[(ta, tc, tb)] = probs.get((ta, tc, tb), 0.0) + weight[i, j, k]
    return -sum(p * np.log(p / (counts[0][a] * counts[1][c] * counts[2][b]))
                for (a, c, b), p in probs.items() if p > 1e-15)


def test_three_regions_against_the_definition_and_both_orders_agree():
    # exact-volume regions 3 + 4 + 3 after a quench: S_obs of the definition within the
    # reported error; the two orders give the same distribution with the columns swapped;
    # asking the number too refines the energy alone, so S_obs does not rise
    # (monotonicity: Phys. Rev. A 99, 010101(R) (2019), reference from memory)
    L, width = 10, 1.0
    model, state = _quench(L, 1.0, 64)
    exact = _exact_three(model, state, width)
    results = [wne.wide_number_energy_entropy(
        state, coarse.WideEnergyRegions(L, THREE, model, width, "t", order), moments=64,
        bond=32) for order in (JOINT, JOINT[::-1])]
    first, second = results
    assert abs(first.entropy - exact) <= _total_error(first), (first, exact)
    assert first.entropy == pytest.approx(second.entropy, abs=1e-12)
    np.testing.assert_array_equal(first.distribution.outcomes,
                                  second.distribution.outcomes[:, [1, 0, 3, 2, 5, 4]])
    alone = we.wide_energy_entropy(state, coarse.WideEnergyRegions(L, THREE, model, width, "e"),
                                   moments=64, bond=32)
    assert first.entropy <= alone.entropy + _total_error(first) + _total_error(alone)


def test_13_3_and_3_sites_against_exact_diagonalisation_of_each_sector():
    # the 13-site region through the reweighted number-sector volumes, the other two by
    # exact counts; exact p from the eigenvectors of each region (sector by sector) and
    # the state's amplitudes, at two times after the quench
    L, where = 19, ((0, 13), (13, 16), (16, 19))
    for t in (0.5, 1.0):
        model, state = _quench(L, t, 16)
        exact = _exact_three(model, state, 1.0, where)
        res = wne.wide_number_energy_entropy(
            state, coarse.WideEnergyRegions(L, where, model, 1.0, "t", JOINT), moments=64,
            bond=32)
        assert abs(res.entropy - exact) <= _total_error(res), (t, res, exact)


def test_three_regions_at_infinite_temperature_give_the_maximal_entropy():
    # beta = 0: p(n, b) = V(n, b) / 2^L for every region, so S_obs = L ln 2 (definition);
    # regions 4 + 4 + 4 (exact counts), the middle's number from its phases
    L, where = 12, ((0, 4), (4, 8), (8, 12))
    model = models.xxz(L, delta=0.5)
    rho = thermo.gibbs_state(model, 0.0, max_bond=4)
    res = wne.wide_number_energy_entropy(
        rho, coarse.WideEnergyRegions(L, where, model, 2.0, "t", JOINT), moments=16, bond=8)
    assert abs(res.entropy - L * np.log(2)) <= _total_error(res)
    # every (n, b) of every region is live, so the exact counts add up to 2^L
    assert res.distribution.outcomes.shape[1] == 6
    assert res.distribution.volumes.sum() == pytest.approx(2.0**L, rel=1e-12)


def test_a_three_region_grid_beyond_the_memory_limit_is_refused_and_gives_nan_equilibrium(
        monkeypatch, caplog):
    # the same exact-volume case with the limit set below its working set: a TooLargeError
    # naming the setting that shrinks it, and in a run's equilibrium reference NaN with a
    # warning (the other coarse-graining of the point keeps its value)
    from mpsobs.core.errors import TooLargeError
    from mpsobs.pipeline import point
    from mpsobs.pipeline.build import BuiltCoarse

    L = 10
    model, state = _quench(L, 1.0, 64)
    cg = coarse.WideEnergyRegions(L, THREE, model, 1.0, "t", JOINT)
    monkeypatch.setattr(wne, "MAX_THREE_REGION_BYTES", 1000)
    with pytest.raises(TooLargeError, match=r"^bin_width: .* GiB here"):
        wne.wide_number_energy_entropy(state, cg, moments=16, bond=16)
    small = coarse.WideEnergyRegions(L, ((0, 5), (5, L)), model, 1.0, "h", JOINT)
    built = [BuiltCoarse(c.label, 0, JOINT, c, {"moments": 16, "bond": 16}, "coarse[0]")
             for c in (cg, small)]
    values, errors = point._equilibrium_values(state, 0.0, built, [1, 2])
    assert np.isnan(values[0]) and np.isnan(errors[0])
    assert np.isfinite(values[1]) and np.isfinite(errors[1])
    assert "S_obs_eq of t: bin_width:" in caplog.text


def test_refusals_name_the_field():
    L = 16
    xxz, ising = models.xxz(L, delta=0.5), models.ising(L)
    regions = [[0, 13], [13, L]]
    number = coarse.blocks(L, None, "number", regions=regions)

    def energy(model, where=regions):
        return coarse.blocks(L, None, "energy", model=model, bin_width=1.0, regions=where)

    with pytest.raises(InputError, match="^sequence: .*conserves the number"):
        coarse.sequence(number, energy(ising))
    with pytest.raises(InputError, match=r"^sequence: .*\(number then energy or energy "
                                         r"then number\); got number then energy then number"):
        coarse.sequence(number, energy(xxz), number)
    with pytest.raises(InputError, match="^sequence: the number blocks"):
        coarse.sequence(coarse.blocks(L, None, "number", regions=[[0, 14], [14, L]]),
                        energy(xxz))
    wide4 = coarse.WideEnergyRegions(34, ((0, 13), (13, 26), (26, 30), (30, 34)),
                                     models.xxz(34), 1.0, "t", JOINT)
    with pytest.raises(InputError, match="^regions: .*2 or 3 regions; got 4"):
        wne.wide_number_energy_entropy(states.neel(34), wide4)
    cg = coarse.sequence(number, energy(xxz))
    with pytest.raises(InputError, match="^state: .*no definite particle number"):
        wne.wide_number_energy_entropy(random_mps(L, 4, seed=3), cg)
    with pytest.raises(InputError, match="^moments:"):
        wne.wide_number_energy_entropy(states.neel(L), cg, moments=6 + 1)
    with pytest.raises(InputError, match="^samples:"):
        observational_entropy(states.neel(L), cg, samples=10)


def test_a_spec_entry_builds_the_joint_coarse_graining():
    from mpsobs.pipeline import spec
    from mpsobs.pipeline.build import build_point

    base = {"model": {"name": "xxz", "L": 28, "delta": 0.5}, "state": {"kind": "neel"},
            "evolution": {"chi_max": 8, "chi_check": 0}, "times": {"values": [0.0]}}
    entry = {"observable": ["energy", "number"], "block": 14, "bin_width": 1.0,
             "moments": 32}
    built = build_point(spec.parse({**base, "coarse": [entry]}).points[0],
                        cheap_only=True).coarse[0]
    cg = built.coarse_graining
    assert isinstance(cg, coarse.WideEnergyRegions) and cg.observables == ("energy", "number")
    assert built.options == {"moments": 32} and built.label == cg.label + ",N32"
    ising = {**base, "model": {"name": "ising", "L": 28}}
    with pytest.raises(InputError, match=r"^coarse\[0\]\.observable: .*conserves the number"):
        build_point(spec.parse({**ising, "coarse": [entry]}).points[0], cheap_only=True)
    # three regions: the same entry with regions instead of a block size
    three = {k: v for k, v in entry.items() if k != "block"} | {
        "regions": [[0, 13], [13, 15], [15, 28]]}
    cg3 = build_point(spec.parse({**base, "coarse": [three]}).points[0],
                      cheap_only=True).coarse[0].coarse_graining
    assert cg3.regions == ((0, 13), (13, 15), (15, 28))
    assert cg3.observables == ("energy", "number")


def test_the_cost_model_counts_the_sector_stacks_of_three_regions():
    # the middle sweep runs on 3 (n_A + 1) x bins_A stacked environments (an upper bound)
    # instead of N, times n_C + 1 phases for a purification: more work than the energy
    # alone, and more for the purification than for the pure state
    L = 30
    model = models.xxz(L, delta=0.5)
    where = ((0, 13), (13, 17), (17, L))
    energy = coarse.WideEnergyRegions(L, where, model, 1.0, "e")
    joint = coarse.WideEnergyRegions(L, where, model, 1.0, "j", JOINT)
    counts = {(cg.label, d): we.kernel_counts(cg, 16, d, moments=32, bond=16,
                                              references=False)
              for cg in (energy, joint) for d in (2, 4)}
    bins_a = len(we._region(model.restricted(0, 13), 1.0).bins)
    assert 3 * 14 * bins_a > 32
    assert counts[("j", 2)].gemm > counts[("e", 2)].gemm
    assert counts[("j", 4)].gemm > 4 * counts[("j", 2)].gemm
