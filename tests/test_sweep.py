"""The Dask sweep runner with a stand-in kernel (skips, failures, checkpoint resume,
worker settings, progress) and the real point kernel against a dense reference."""

from __future__ import annotations

import json
import os
import signal
import sys
import uuid
from pathlib import Path

import cloudpickle
import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest

from mpsobs.core.errors import InputError
from mpsobs.pipeline import spec, store, sweep

# The stand-in kernels below live in this test module, which the worker processes cannot
# import: ship them by value.
cloudpickle.register_pickle_by_value(sys.modules[__name__])

SPEC = {
    "name": "sweep-test", "seed": 9,
    "model": {"name": "xxz", "L": [8, 10], "delta": 0.5,
              "field": {"kind": "staggered", "strength": [0.1, 0.3]}},
    "state": {"kind": "neel"},
    "times": {"t_max": 0.3, "n_times": 4},
    "coarse": [{"observable": "number", "block": 2}],
    "output": {"checkpoint_seconds": 0},
}


def _mark(point, root, what: str) -> None:
    calls = os.path.join(root, "calls")
    os.makedirs(calls, exist_ok=True)
    open(os.path.join(calls, f"{point.point_id}.{what}.{uuid.uuid4().hex}"), "w").close()


def counting_kernel(point, *, progress=None, resume=None, save=None, fail_at=None,
                    root=None):
    """Rows t -> a seeded number per time; checkpoints after each time; optionally
    raises after ``fail_at`` times when it did not resume (a crash mid-point)."""
    times = point.params["times"]["values"]
    rows = list(resume[1]["rows"]) if resume is not None else []
    if root is not None:
        _mark(point, root, "resumed" if resume is not None else "fresh")
    for k in range(len(rows), len(times)):
        value = float(np.random.default_rng([point.seed, k]).random())
        rows.append({"t": times[k], "coarse_graining": "dummy", "S_obs": value})
        if progress is not None:
            progress(k + 1, len(times))
        if save is not None:
            save([[np.full((1, 2, 1), value)]], {"rows": rows})
        if fail_at is not None and resume is None and k + 1 == fail_at:
            raise RuntimeError("simulated crash")
    frame = pd.DataFrame(rows)
    for name, value in point.columns.items():
        frame[name] = value
    return frame


class Kernel:
    """counting_kernel with settings (picklable)."""

    def __init__(self, root, fail_at=None, fail_h=None):
        self.root, self.fail_at, self.fail_h = str(root), fail_at, fail_h

    def __call__(self, point, *, progress=None, resume=None, save=None):
        if self.fail_h is not None and point.columns["h"] == self.fail_h:
            raise ValueError("this point always fails")
        return counting_kernel(point, progress=progress, resume=resume, save=save,
                               fail_at=self.fail_at, root=self.root)


@pytest.fixture(scope="module")
def scheduler():
    """One local cluster (two single-threaded workers) shared by the runner tests."""
    with sweep.local_cluster(2) as client:
        yield client.scheduler.address


def _calls(root, kind: str | None = None) -> list[str]:
    folder = root / "calls"
    names = sorted(os.listdir(folder)) if folder.exists() else []
    return [n for n in names if kind is None or f".{kind}." in n]


def _expected(run: spec.RunSpec) -> pd.DataFrame:
    return pd.concat([counting_kernel(p) for p in run.points], ignore_index=True)


def test_every_point_written_and_finished_points_skipped(tmp_path, scheduler):
    run = spec.parse(SPEC)
    root = tmp_path / "run"
    with store.open_run(root, run) as st:
        report = sweep.run_sweep(run, st, scheduler=scheduler, kernel=Kernel(root))
    assert (report.total, report.skipped, report.computed, report.failed) == (4, 0, 4, ())
    pd.testing.assert_frame_equal(report.table, _expected(run))
    pd.testing.assert_frame_equal(pd.read_parquet(root / "results.parquet"), _expected(run))
    assert len(_calls(root)) == 4
    assert not list((root / "checkpoints").glob("*.npz"))  # dropped when a point finishes
    with store.open_run(root, run) as st:
        again = sweep.run_sweep(run, st, scheduler=scheduler, kernel=Kernel(root))
    assert (again.skipped, again.computed) == (4, 0)
    assert len(_calls(root)) == 4  # nothing recomputed
    pd.testing.assert_frame_equal(again.table, _expected(run))


def test_failing_point_does_not_stop_the_others(tmp_path, scheduler):
    run = spec.parse(SPEC)
    root = tmp_path / "run"
    with store.open_run(root, run) as st:
        report = sweep.run_sweep(run, st, scheduler=scheduler,
                                 kernel=Kernel(root, fail_h=0.3))
    assert report.computed == 2
    assert sorted(f.point.columns["h"] for f in report.failed) == [0.3, 0.3]
    assert all(f.message == "this point always fails" and f.error == "ValueError"
               and not f.bad_input for f in report.failed)
    assert set(report.table["h"]) == {0.1}
    with store.open_run(root, run) as st:
        retry = sweep.run_sweep(run, st, scheduler=scheduler, kernel=Kernel(root))
    assert (retry.skipped, retry.computed, retry.failed) == (2, 2, ())
    pd.testing.assert_frame_equal(retry.table, _expected(run))


def test_crashed_point_resumes_from_its_checkpoint(tmp_path, scheduler):
    run = spec.parse(SPEC)
    root = tmp_path / "run"
    with store.open_run(root, run) as st:
        crashed = sweep.run_sweep(run, st, scheduler=scheduler,
                                  kernel=Kernel(root, fail_at=2))
        assert len(crashed.failed) == 4
        assert len(list((root / "checkpoints").glob("*.npz"))) == 4
        resumed = sweep.run_sweep(run, st, scheduler=scheduler, kernel=Kernel(root))
    assert resumed.computed == 4 and not resumed.failed
    assert len(_calls(root, "resumed")) == 4
    pd.testing.assert_frame_equal(resumed.table, _expected(run))
    assert not list((root / "checkpoints").glob("*.npz"))


def test_local_workers_are_single_threaded_with_pinned_blas():
    keys = tuple(sweep.WORKER_ENV)
    with sweep.local_cluster(2) as client:
        envs = client.run(lambda: {k: os.environ.get(k) for k in keys})
        threads = client.nthreads()
    assert len(envs) == 2 and len(threads) == 2
    assert all(env == {k: "1" for k in keys} for env in envs.values())
    assert set(threads.values()) == {1}


def test_bad_execution_arguments():
    with pytest.raises(InputError, match="--workers"):
        sweep.check_execution(2, "tcp://127.0.0.1:8786")
    with pytest.raises(InputError, match="--workers"):
        sweep.check_execution(0, None)


def test_progress_bars_add_steps_from_worker_events():
    run = spec.parse(SPEC)
    a, b = run.points[:2]
    bars = sweep._Bars(run.points, 0, {a.point_id: 10, b.point_id: 10}, enabled=False)
    bars.on_event((0.0, {"point_id": a.point_id, "done": 4, "total": 10}))
    bars.on_event((0.0, {"point_id": a.point_id, "done": 3, "total": 10}))  # late, older
    bars.on_event((0.0, {"point_id": b.point_id, "done": 6, "total": 10}))
    assert bars.steps_done == 10
    bars.point_finished(a.point_id)
    assert (bars.steps_done, bars.points_done) == (16, 1)
    bars.close()


def test_progress_names_the_running_points_and_counts_saved_files():
    run = spec.parse(SPEC)
    a, b = run.points[:2]
    bars = sweep._Bars(run.points, 0, {a.point_id: 10, b.point_id: 10}, enabled=False)
    bars.point_started(a.point_id)
    bars.point_started(b.point_id)
    assert bars.running() == f"running {a.index} ({a.label}), {b.index} ({b.label})"
    bars.on_event((0.0, {"point_id": a.point_id, "saved": True}))  # file written
    assert bars.points_done == 1
    bars.point_finished(a.point_id, saved=True)  # then its task ends: counted once
    bars.point_finished(b.point_id, saved=False)  # failed: not saved
    assert (bars.points_done, bars.running()) == (1, "")
    bars.close()


def test_plural():
    assert [sweep.plural(n, "point") for n in (0, 1, 2)] == ["0 points", "1 point",
                                                            "2 points"]


# --------------------------------------------------------------------------- real kernel

DENSE_SPEC = {
    "name": "dense-check", "seed": 4,
    "model": {"name": "xxz", "L": 8, "J": 1.0, "delta": 0.5,
              "field": {"kind": "staggered", "strength": 0.3}},
    "state": {"kind": "gas", "box": [2, 6], "number": 3, "fill": "spread"},
    "evolution": {"dt": 0.05, "order": 4, "chi_max": 64, "cutoff": 0.0},
    "times": {"values": [0.0, 0.4, 1.0]},
    "coarse": [{"observable": "number", "block": 2},
               {"observable": "energy", "block": 2}],
    "estimator": {"method": "exact"},
}


def _dense_xxz(L, J, delta, h):
    """Independent dense XXZ Hamiltonian, H = J sum (SxSx + SySy + delta SzSz) + sum h_i Sz_i
    with S = sigma / 2, site 0 the most significant bit (fact of the trade)."""
    sx = np.array([[0, 1], [1, 0]]) / 2
    sy = np.array([[0, -1j], [1j, 0]]) / 2
    sz = np.diag([1.0, -1.0]) / 2

    def site(op, i, n):
        return np.kron(np.kron(np.eye(2**i), op), np.eye(2 ** (n - i - 1)))

    H = np.zeros((2**L, 2**L), dtype=complex)
    for i in range(L - 1):
        for op, c in ((sx, J), (sy, J), (sz, J * delta)):
            H += c * site(op, i, L) @ site(op, i + 1, L)
    for i in range(L):
        H += h[i] * site(sz, i, L)
    return H


def _block_entropy(psi, L, b, block_ops):
    """S_obs = -sum p ln(p / V) of a product of block observables, from the amplitudes in
    the product eigenbasis (definition: Phys. Rev. A 99, 010101(R) (2019), from memory)."""
    amps = psi.reshape([2**b] * (L // b))
    labels = []
    for k, op in enumerate(block_ops):
        w, v = np.linalg.eigh(op)
        amps = np.moveaxis(np.tensordot(v.conj().T, amps, axes=(1, k)), 0, k)
        labels.append(np.round(w, 9))
    probs = {}
    for index in np.ndindex(amps.shape):
        key = tuple(labels[k][i] for k, i in enumerate(index))
        probs[key] = probs.get(key, 0.0) + abs(amps[index]) ** 2
    total = 0.0
    for key, p in probs.items():
        volume = np.prod([np.sum(labels[k] == value) for k, value in enumerate(key)])
        if p > 0:
            total -= p * np.log(p / volume)
    return total


def _on_worker(scheduler: str, func, *args):
    """Run ``func(*args)`` on a worker of the local cluster (BLAS pinned to one thread
    there; this process may run with several BLAS threads on a shared machine)."""
    from distributed import Client

    with Client(scheduler) as client:
        return client.submit(func, *args, pure=False).result(timeout=300)


def test_point_rows_match_dense_evolution(scheduler):
    """TEBD + estimators of one point against scipy's exact exp(-iHt) on 8 sites."""
    from scipy.linalg import expm

    from mpsobs.pipeline.columns import REQUIRED
    from mpsobs.pipeline.point import compute_point

    (point,) = spec.parse(DENSE_SPEC).points
    rows = _on_worker(scheduler, compute_point, point)
    assert set(REQUIRED) <= set(rows.columns)
    assert len(rows) == 3 * 2
    L, b = 8, 2
    h = 0.3 * (-1.0) ** np.arange(L)
    H = _dense_xxz(L, 1.0, 0.5, h)
    psi0 = np.zeros(2**L, dtype=complex)
    filled = [2, 4, 5]  # spread: 2 + floor((k + 1/2) 4 / 3) for k = 0, 1, 2
    psi0[sum(1 << (L - 1 - i) for i in filled)] = 1.0
    number = np.diag([0.0, 1.0, 1.0, 2.0])
    sxsy = np.array([[0, 0, 0, 0], [0, 0, 0.5, 0], [0, 0.5, 0, 0], [0, 0, 0, 0]])
    sz = np.diag([0.5, -0.5])
    energy_blocks = [sxsy + 0.5 * np.kron(sz, sz) + h[k] * np.kron(sz, np.eye(2))
                     + h[k + 1] * np.kron(np.eye(2), sz) for k in range(0, L, b)]
    for t in (0.0, 0.4, 1.0):
        psi = expm(-1j * H * t) @ psi0
        got = rows[rows["t"] == t].set_index("coarse_graining")["S_obs"]
        want_n = _block_entropy(psi, L, b, [number] * (L // b))
        want_e = _block_entropy(psi, L, b, energy_blocks)
        # 4th-order Trotter error at dt = 0.05 is ~1e-7 per unit time
        assert abs(got["number:b2"] - want_n) < 1e-5
        assert abs(got["energy:b2"] - want_e) < 1e-5
    assert (rows["knowledge"] >= -1e-12).all()
    assert np.allclose(rows["S_obs"] + rows["knowledge"], L * np.log(2))
    assert (rows["method"] == "exact").all() and (rows["S_obs_err"] == 0).all()
    assert (rows["seed"] == point.seed).all() and (rows["point_id"] == point.point_id).all()


def _full_resumed_again(point):
    """The point computed whole (keeping its checkpoints), resumed from the checkpoint
    after its second time, and computed whole once more."""
    from mpsobs.pipeline.point import compute_point

    checkpoints = []
    full = compute_point(point, save=lambda states, meta: checkpoints.append(
        ([[t.copy() for t in ts] for ts in states], dict(meta, rows=list(meta["rows"])))))
    resumed = compute_point(point, resume=checkpoints[1])
    return full, checkpoints, resumed, compute_point(point)


def test_resumed_point_equals_uninterrupted_point(scheduler):
    """Resuming from the checkpoint taken after the second time gives the same rows."""
    data = {**DENSE_SPEC, "estimator": {"method": "sample", "samples": 200},
            "times": {"values": [0.0, 0.3, 0.6, 0.9]},
            "evolution": {"dt": 0.05, "chi_max": 8, "cutoff": 1e-10}}
    (point,) = spec.parse(data).points
    full, checkpoints, resumed, again = _on_worker(scheduler, _full_resumed_again, point)
    assert len(checkpoints) == 4
    assert checkpoints[1][1]["done"] == 2 and checkpoints[1][1]["t"] == 0.3
    drop = ["elapsed_s"]
    pd.testing.assert_frame_equal(again.drop(columns=drop), full.drop(columns=drop))
    # resumed: the same draws; values within the single-precision round-off of the
    # dense-environment sampler (4 u S_obs, u = 2^-24; absolute, as differences of such
    # values like the truncation error carry it too), whose last bits may follow the
    # memory layout of the restored state
    round_off = 4 * 2.0**-24
    pd.testing.assert_frame_equal(resumed.drop(columns=drop), full.drop(columns=drop),
                                  rtol=round_off, atol=round_off * full["S_obs"].max())
    # At t = 0 the state is a product over blocks, where the conditional estimator has
    # no variance (up to the single-precision round-off of dense environments, bounded
    # as in test_estimate: 4 u (S_obs + blocks), u = 2^-24); later every row carries a
    # sampling error.
    assert (full["method"] == "sampled").all()
    assert (full["S_obs_err"][full["t"] > 0] > 0).all()
    start = full[full["t"] == 0]
    assert (start["S_obs_err"] < 4 * 2.0**-24 * (start["S_obs"] + 4)).all()


KIND_SPEC = {
    "name": "kinds", "seed": 2,
    "model": {"name": "xxz", "L": 8, "delta": 0.0},
    "evolution": {"dt": 0.05, "chi_max": 16},
    "times": {"values": [0.0, 0.2]},
    "coarse": [{"observable": "number", "block": 2}],
    "estimator": {"method": "exact"},
}
LN2 = float(np.log(2.0))


@pytest.mark.parametrize("state, s0, n", [
    # computational-basis product states: one outcome of probability 1, so
    # S_obs(0) = sum over blocks of ln C(2, n_block) (fact of the trade)
    ({"kind": "neel"}, 4 * LN2, 4),
    ({"kind": "domain_wall"}, 0.0, 4),
    ({"kind": "product", "pattern": "0110"}, 4 * LN2, 4),
    ({"kind": "gas", "box": [1, 7], "number": 3, "fill": "packed"}, LN2, 3),  # sites 1-3
    ({"kind": "random_product", "draw": "basis", "seed": 3}, None, None),
])
def test_initial_state_kinds(scheduler, state, s0, n):
    from math import comb, log

    from mpsobs.pipeline.point import compute_point

    (point,) = spec.parse({**KIND_SPEC, "state": state}).points
    rows = _on_worker(scheduler, compute_point, point)
    assert len(rows) == 2
    first = rows.iloc[0]
    if s0 is not None:
        assert abs(first["S_obs"] - s0) < 1e-12
    if n is not None:
        # XX chain without field: a basis state has E = 0, the mean energy of its number
        # sector (H only hops), so the canonical Gibbs state is the infinite-temperature
        # one of that sector, entropy ln C(L, N) (fact of the trade)
        assert abs(first["energy"]) < 1e-12
        assert abs(first["S_thermo"] - log(comb(8, n))) < 1e-8
        # and the number blocks' S_obs of that state is ln C(L, N) too: the sector's
        # projector commutes with them and is uniform inside each (fact of the trade)
        eq = rows[rows["coarse_graining"] == "number:b2"]["S_obs_eq"]
        assert np.allclose(eq, log(comb(8, n)), atol=1e-9)
    # free fermions: the GGE entropy of L modes lies in [0, L ln 2] (fact of the trade)
    assert 0.0 <= first["S_gge"] <= 8 * LN2 + 1e-12


def test_ground_state_of_the_prequench_model(scheduler):
    """kind = "ground": the DMRG ground state of the model with delta = 2 and a staggered
    field, compared with numpy's lowest eigenvector of the dense pre-quench H."""
    from mpsobs.pipeline.point import compute_point

    state = {"kind": "ground",
             "prequench": {"delta": 2.0, "field": {"kind": "staggered", "strength": 0.5}}}
    (point,) = spec.parse({**KIND_SPEC, "state": state}).points
    rows = _on_worker(scheduler, compute_point, point)
    h_pre = 0.5 * (-1.0) ** np.arange(8)
    _, vecs = np.linalg.eigh(_dense_xxz(8, 1.0, 2.0, h_pre))
    psi = vecs[:, 0]
    post = _dense_xxz(8, 1.0, 0.0, np.zeros(8))
    assert abs(rows.iloc[0]["energy"] - np.vdot(psi, post @ psi).real) < 1e-8
    number = np.diag([0.0, 1.0, 1.0, 2.0])
    assert abs(rows.iloc[0]["S_obs"] - _block_entropy(psi, 8, 2, [number] * 4)) < 1e-7
    assert rows.iloc[0]["pre_delta"] == 2.0 and rows.iloc[0]["delta"] == 0.0


RUNS = Path(__file__).resolve().parents[1] / "runs"


@pytest.mark.parametrize("path", [None, *sorted(RUNS.glob("*.toml"))],
                         ids=lambda p: "default" if p is None else p.name)
def test_equilibrium_value_lies_between_gibbs_entropy_and_maximum(path):
    """S_thermo <= S_obs_eq <= S_max on every row of small versions (L = 8, two times,
    bond 16) of the shipped specs: S_vN(rho) <= S_obs(rho) <= ln dim for the Gibbs state
    rho (Phys. Rev. A 99, 010101(R) (2019), from memory), within the reported errors."""
    import tomllib

    from mpsobs.pipeline.point import compute_point

    data = tomllib.loads((path or spec.default_spec_path()).read_text())
    data["model"]["L"] = 8
    for entry in data["coarse"]:   # explicit regions (two halves) cut the 8 sites in two
        if "regions" in entry:    # (narrow regions: no resolution of the wide estimator)
            entry["regions"] = [[0, 4], [4, 8]]
            for key in spec.WIDE_ENERGY_KEYS:
                entry.pop(key, None)
    data["evolution"]["chi_max"] = 16
    data["evolution"].pop("chi_check", None)
    data["times"] = {"values": [0.0, 0.5]}
    data["estimator"]["samples"] = 300
    data.pop("sweep", None)
    data.pop("output", None)
    for point in spec.parse(data).points:
        rows = compute_point(point)
        slack = 4 * rows["S_obs_eq_err"] + rows["S_thermo_err"] + 1e-9
        assert (rows["S_obs_eq"].notna()).all()
        assert (rows["S_thermo"] <= rows["S_obs_eq"] + slack).all()
        assert (rows["S_obs_eq"] <= rows["S_max"] + slack).all()
        # the free-fermion GGE value is NaN off XX chains
        assert rows["S_obs_gge"].isna().all()


GROW_SPEC = {
    "name": "grow", "seed": 5,
    "model": {"name": "xxz", "L": [4, 6], "delta": 1.0,
              "field": {"kind": "random", "strength": 1.5, "seed": [1, 2]}},
    "state": {"kind": "neel"},
    "evolution": {"dt": 0.05, "chi_max": 8},
    "times": {"values": [0.0, 0.1]},
    "coarse": [{"observable": "number", "block": 2},
               {"observable": ["number", "energy"], "block": 2}],
    "estimator": {"method": "exact"},
    "sweep": {"disorder": ["model.field.seed"]},
}


def _grown() -> spec.RunSpec:
    return spec.parse({**GROW_SPEC, "model": {**GROW_SPEC["model"], "L": [4, 6, 8],
                       "field": {**GROW_SPEC["model"]["field"], "seed": [1, 2, 3]}}})


def _sweep(run: spec.RunSpec, root, scheduler: str) -> sweep.SweepReport:
    with store.open_run(root, run) as st:
        return sweep.run_sweep(run, st, scheduler=scheduler)


def test_grown_run_computes_only_the_new_points_and_equals_a_fresh_run(tmp_path, scheduler):
    first = _sweep(spec.parse(GROW_SPEC), tmp_path / "grown", scheduler)
    assert first.computed == 4
    grown = _grown()
    report = _sweep(grown, tmp_path / "grown", scheduler)
    # one more L and one more seed: 3 x 3 points, of which 2 x 2 were there
    assert (report.total, report.skipped, report.computed) == (9, 4, 5)
    fresh = _sweep(grown, tmp_path / "fresh", scheduler)
    drop = ["elapsed_s"]
    pd.testing.assert_frame_equal(report.table.drop(columns=drop),
                                  fresh.table.drop(columns=drop))
    table = report.table
    assert set(table.disorder_axes) == {"field_seed"}
    asked = table.drop_duplicates("coarse_graining").set_index("coarse_graining")
    assert asked.observables.to_dict() == {"number:b2": "number",
                                           "number:b2>energy:b2": "number,energy"}
    assert asked.n_observables.to_dict() == {"number:b2": 1, "number:b2>energy:b2": 2}


def test_stored_site_fields_rebuild_the_model(tmp_path, scheduler):
    from mpsobs.chain import models
    from mpsobs.pipeline.build import build_model

    run = spec.parse(GROW_SPEC)
    root = tmp_path / "run"
    _sweep(run, root, scheduler)
    st = store.RunStore(root)
    merged = json.loads(pq.read_schema(st.results_path).metadata[b"mpsobs.site_fields"])
    for point in run.points:
        fields = st.point_metadata(point.point_id)["site_fields"]
        assert merged[point.point_id] == fields
        field = point.params["model"]["field"]
        # the documented draw, with numpy alone: uniform in [-strength, strength)
        expected = np.random.default_rng(field["seed"]).uniform(
            -field["strength"], field["strength"], size=point.L)
        assert np.array_equal(fields, expected)
        rebuilt = models.xxz(point.L, J=1.0, delta=1.0, h=fields)
        original = build_model(point.params["model"], point.L)
        assert len(rebuilt.terms) == len(original.terms)
        for a, b in zip(rebuilt.terms, original.terms, strict=True):
            assert a.start == b.start and np.array_equal(a.matrix, b.matrix)


def test_a_sigint_while_the_points_run_only_sets_the_flag():
    # the interrupt is raised by the watch loop, not wherever the signal lands; the
    # previous handler is back afterwards
    before = signal.getsignal(signal.SIGINT)
    with sweep._deferred_sigint() as interrupted:
        assert not interrupted.is_set()
        os.kill(os.getpid(), signal.SIGINT)   # no KeyboardInterrupt here
        assert interrupted.wait(5.0)
    assert signal.getsignal(signal.SIGINT) is before
