"""The point kernel: its truncation check (the check evolution at a smaller bond against
exact evolution, at round-off for an exact bond, across a resume, with the trusted times
the analysis derives from it), and check_point, the cheap half of compute_point (no DMRG,
no time step), with its refusals named by key path, point and coarse-graining."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from mpsobs.analysis.trust import trusted_time, with_trusted_times
from mpsobs.chain import evolution as tebd
from mpsobs.chain import models, states
from mpsobs.core.errors import InputError
from mpsobs.pipeline import build, spec
from mpsobs.pipeline.point import check_point, check_points, compute_point

TRUNC_COLUMNS = ["S_obs_trunc_err", "S_shannon_trunc_err", "S_boltzmann_trunc_err",
                 "check_discarded_weight", "t_trusted"]


def _quench(L: int, chi_max: int, times: list[float], **evolution) -> dict:
    """XXZ chain (delta = 0.8, staggered field 0.3) from the Neel state, number in
    blocks of 4, exact estimators."""
    return {"name": "trunc-check", "seed": 3,
            "model": {"name": "xxz", "L": L, "delta": 0.8,
                      "field": {"kind": "staggered", "strength": 0.3}},
            "state": {"kind": "neel"},
            "evolution": {"dt": 0.05, "order": 4, "chi_max": chi_max, "cutoff": 1e-10,
                          **evolution},
            "times": {"values": times},
            "coarse": [{"observable": "number", "block": 4}],
            "estimator": {"method": "exact"}}


def _number_block_entropy(psi: np.ndarray, L: int, b: int) -> float:
    """S_obs = -sum p ln(p / V) of the block numbers of a state vector, from the
    definition (Phys. Rev. A 99, 010101(R) (2019), from memory): p of every string of
    block numbers summed from |psi|^2, V = prod C(b, n_k). Site 0 is the most
    significant bit."""
    popcount = np.array([bin(x).count("1") for x in range(2**b)])
    onehot = (popcount[:, None] == np.arange(b + 1)).astype(float)   # (2^b, b + 1)
    p = (np.abs(psi) ** 2).reshape([2**b] * (L // b))
    for _ in range(L // b):   # contract the leading block axis, append its number axis
        p = np.tensordot(p, onehot, axes=(0, 0))
    log_v = sum(np.log([math.comb(b, n) for n in range(b + 1)])[
        np.indices(p.shape)[k]] for k in range(L // b))
    live = p > 0
    return float(-np.sum(p[live] * (np.log(p[live]) - log_v[live])))


QUENCH_L, QUENCH_TIMES = 16, [float(t) for t in range(13)]


@pytest.fixture(scope="module")
def exact_quench_entropies() -> np.ndarray:
    """S_obs of the number in blocks of 4 along the exact evolution of the quench of
    :func:`_quench` at L = 16, by scipy's expm_multiply of the sparse Hamiltonian."""
    from scipy.sparse.linalg import expm_multiply

    L = QUENCH_L
    H = models.xxz(L, delta=0.8, h=0.3, field="staggered").sparse_hamiltonian()
    psi0 = np.zeros(2**L, dtype=complex)
    psi0[sum(1 << (L - 1 - i) for i in range(1, L, 2))] = 1.0   # Neel: sites 1, 3, .. in |1>
    exact = expm_multiply(-1j * H, psi0, start=0.0, stop=QUENCH_TIMES[-1],
                          num=len(QUENCH_TIMES), endpoint=True)
    return np.array([_number_block_entropy(psi, L, 4) for psi in exact])


@pytest.mark.parametrize("chi_max, every_time", [(16, True), (8, False)])
def test_truncation_error_covers_the_true_error_against_exact_evolution(
        exact_quench_entropies, chi_max, every_time):
    """L = 16 interacting quench at small bonds, against scipy's expm_multiply of the
    sparse Hamiltonian: the true error of S_obs at chi_max is below the reported
    truncation error, up to the Trotter error of the 4th-order splitting at dt = 0.05
    (measured 2.5e-7 at t = 1, where nothing is truncated; 1e-5 allowed).

    cutoff = 0, so that the bond cap is the only truncation: the cutoff truncates both
    evolutions alike and the check does not see it (with cutoff = 1e-10 this scenario
    has a true error of 1.3e-5 at t = 1 from a discarded weight of 1.4e-8, against a
    reported 2e-8 at chi_max = 16; see the README). At chi_max = 16 the check covers
    every time up to t = 12. At chi_max = 8 it covers the trusted range (t <= 3) and
    t <= 10 but not t = 11, 12: there both bonds are far too small (discarded weight
    0.54 at chi_max) and their results are close to each other while both are 0.3 off;
    the check is asserted on the trusted range only."""
    times = QUENCH_TIMES
    (point,) = spec.parse(_quench(QUENCH_L, chi_max, times, cutoff=0.0)).points
    assert point.params["evolution"]["chi_check"] == chi_max // 2
    rows = with_trusted_times(compute_point(point), 0.01)
    true_err = np.abs(rows["S_obs"].to_numpy() - exact_quench_entropies)
    assert rows["discarded_weight"].iloc[-1] > 0.1   # truncation matters by the end
    assert true_err.max() > 0.1
    checked = np.full(len(times), True) if every_time else rows["t"] <= rows["t_trusted"]
    assert checked.sum() >= 4
    covered = true_err <= rows["S_obs_trunc_err"].to_numpy() + 1e-5
    assert covered[checked].all(), np.c_[times, true_err, rows["S_obs_trunc_err"]]


def test_truncation_error_is_round_off_when_both_bonds_are_exact():
    """At L = 10 a bond of 2**5 = 32 holds every state: chi_check = 32 and chi_max = 64
    evolve the same state, and their difference is round-off (fact of the trade)."""
    data = _quench(10, 64, [0.0, 1.0, 2.0, 4.0], chi_check=32, cutoff=0.0)
    data["coarse"] = [{"observable": "number", "block": 2},
                      {"observable": "energy", "block": 2}]
    (point,) = spec.parse(data).points
    rows = with_trusted_times(compute_point(point))
    assert rows["S_ent_half"].iloc[-1] > 1.0   # entangled: not a trivial check
    for column in ("S_obs_trunc_err", "S_shannon_trunc_err", "S_boltzmann_trunc_err"):
        assert rows[column].max() < 1e-10, column
    assert rows["check_discarded_weight"].max() < 1e-20
    assert np.isinf(rows["t_trusted"]).all() and (rows["t_trusted"] > 0).all()


def test_check_off_gives_nan_columns():
    (point,) = spec.parse(_quench(8, 8, [0.0, 0.5], chi_check=0)).points
    rows = with_trusted_times(compute_point(point))
    assert rows[TRUNC_COLUMNS].isna().all().all()


def test_resume_after_a_crash_mid_point_gives_the_same_check_rows():
    """A save callback that dies after two checkpoints (a crash in the middle of the
    point); resuming from the last checkpoint gives the rows of an uninterrupted run,
    truncation columns included. Sampled, so the check state is estimated with the same
    seeds and sample counts."""
    data = _quench(10, 8, [0.0, 0.5, 1.0, 1.5, 2.0])
    data["estimator"] = {"method": "sample", "samples": 300}
    data["coarse"] = [{"observable": "number", "block": 2}]
    (point,) = spec.parse(data).points
    saved = []

    def crash_after_two(states, meta):
        saved.append(([[t.copy() for t in ts] for ts in states],
                      dict(meta, rows=list(meta["rows"]))))
        if len(saved) == 2:
            raise KeyboardInterrupt("killed")

    with pytest.raises(KeyboardInterrupt):
        compute_point(point, save=crash_after_two)
    states, meta = saved[-1]
    assert len(states) == 2 and meta["done"] == 2
    resumed = compute_point(point, resume=saved[-1])
    full = compute_point(point)
    assert full["S_obs_trunc_err"].iloc[-1] > 0 and (full["samples"] == 300).all()
    pd.testing.assert_frame_equal(resumed.drop(columns="elapsed_s"),
                                  full.drop(columns="elapsed_s"), rtol=1e-9)


def test_checkpoint_with_the_wrong_number_of_states_is_not_resumed():
    """A checkpoint holding the main state only (as without a check evolution) does not
    resume a point with a check evolution: it starts afresh."""
    (point,) = spec.parse(_quench(8, 8, [0.0, 0.5, 1.0])).points
    saved = []
    full = compute_point(point, save=lambda states, meta: saved.append((states, meta)))
    states, meta = saved[0]
    fresh = compute_point(point, resume=(states[:1], meta))
    pd.testing.assert_frame_equal(fresh.drop(columns="elapsed_s"),
                                  full.drop(columns="elapsed_s"))


def test_trusted_time_is_one_value_per_coarse_graining_in_the_rows():
    data = _quench(8, 4, [0.0, 1.0, 2.0, 3.0, 4.0])
    data["coarse"] = [{"observable": "number", "block": 2},
                      {"observable": "energy", "block": 2}]
    (point,) = spec.parse(data).points
    rows = with_trusted_times(compute_point(point), 0.01)
    for _, curve in rows.groupby("coarse_graining"):
        assert curve["t_trusted"].nunique() == 1
        want = trusted_time(curve["t"].to_numpy(), curve["S_obs"].to_numpy(),
                            curve["S_obs_err"].to_numpy(),
                            curve["S_obs_trunc_err"].to_numpy(), 0.01)
        assert curve["t_trusted"].iloc[0] == want
    assert rows["t_trusted"].min() < 4.0   # bond 4 fails the check within the run


def _points(state: dict, coarse: list[dict], L=12) -> tuple:
    return spec.parse({"model": {"name": "xxz", "L": L, "delta": 0.5}, "state": state,
                       "times": {"values": [0.0, 1.0]}, "coarse": coarse}).points


def _forbid(*_args, **_kwargs):
    raise AssertionError("the check ran an expensive kernel")


@pytest.mark.parametrize("state, needs_dmrg", [
    ({"kind": "ground", "prequench": {"delta": 2.0}}, True),
    ({"kind": "gas", "box": [2, 8], "number": 3, "fill": "ground"}, True),
    ({"kind": "random_product", "draw": "haar"}, False),
])
def test_check_runs_no_dmrg_and_no_time_step(state, needs_dmrg, monkeypatch):
    # DMRG is called as models.dmrg (ground states) and, imported by name, as
    # states.dmrg (a gas filled by its ground state): patch both names
    monkeypatch.setattr(models, "dmrg", _forbid)
    monkeypatch.setattr(states, "dmrg", _forbid)
    monkeypatch.setattr(tebd._Chain, "apply_layer", _forbid)
    (p,) = _points(state, [{"observable": ["number", "energy"], "block": 3}])
    check_point(p)
    if needs_dmrg:   # the patches catch the DMRG that the full build would run
        model = build.build_model(p.params["model"], p.L)
        with pytest.raises(AssertionError, match="expensive kernel"):
            build.initial_state(p.params["state"], model, p.params["evolution"])


def test_refusal_names_the_point_and_the_coarse_graining():
    points = _points({"kind": "neel"}, [{"observable": "number", "block": 13,
                                         "label": "wide"}], L=[26, 52])
    check_points(points[:1])   # two blocks at L = 26: counted exactly
    with pytest.raises(InputError, match=r"point 1 \(model.L=52\): coarse-graining 'wide': "
                                         r"coarse_graining: blocks wider than 12"):
        check_points(points)
    with pytest.raises(InputError, match=r"^coarse\[0\]\.block: point 1 "):
        check_points(points)


def test_refusal_about_regions_names_the_regions_key():
    # a 13-site region is too wide for the configuration observable: the message names
    # the regions, not a block size
    (p,) = _points({"kind": "neel"}, [{"observable": "fine",
                                       "regions": [[0, 13], [13, 26]]}], L=26)
    with pytest.raises(InputError, match=r"^coarse\[0\]\.regions: .*more than 12 sites"):
        check_point(p)


@pytest.mark.parametrize("pattern", ["01", "0"])
def test_a_state_above_infinite_temperature_is_flagged(pattern, caplog):
    """Transverse Ising chain (h = 0, free fermions: exact Gibbs reference). The Gibbs
    temperature is negative exactly when the state's energy lies above the
    infinite-temperature energy Tr H / 2**L, computed here from the sparse Hamiltonian
    (a fact of the trade: <H>_beta decreases in beta, through Tr H / 2**L at beta = 0)."""
    L = 6
    data = {"model": {"name": "ising", "L": L, "g": 0.5},
            "state": {"kind": "product", "pattern": pattern},
            "evolution": {"chi_max": 8}, "times": {"values": [0.0, 0.5]},
            "coarse": [{"observable": "number", "block": 2}],
            "estimator": {"method": "exact"}}
    (point,) = spec.parse(data).points
    with caplog.at_level("WARNING", logger="mpsobs.pipeline.point"):
        rows = compute_point(point)
    infinite = models.ising(L, g=0.5).sparse_hamiltonian().diagonal().sum().real / 2**L
    above = bool(rows["energy"].iloc[0] > infinite)
    assert above == (pattern == "01")   # antiparallel neighbours: the top of -J sz sz
    assert (rows["above_infinite_temperature"] == above).all()
    assert ((rows["beta"] < 0) == above).all()
    assert ("above infinite temperature" in caplog.text) == above
