"""The run directory: atomic point files, merged table readable by pandas and
dask.dataframe, checkpoints, run identity and the lock."""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import textwrap
import threading
import time

import dask.dataframe as dd
import numpy as np
import pandas as pd
import pytest

from mpsobs.pipeline import spec, store
from mpsobs.pipeline.columns import EXTRA, REQUIRED

SPEC = {
    "name": "store-test", "seed": 3,
    "model": {"name": "xxz", "L": [8, 10], "delta": 0.5},
    "state": {"kind": "neel"},
    "times": {"t_max": 0.2, "n_times": 3},
    "coarse": [{"observable": "number", "block": 2}],
}


def _run_spec(**changes) -> spec.RunSpec:
    data = {**SPEC, **changes}
    return spec.parse(data)


def _frame(point: spec.Point, rows: int = 6) -> pd.DataFrame:
    """Rows with every result column (values are placeholders of the right type)."""
    rng = np.random.default_rng(point.seed)
    out = {}
    for name in (*REQUIRED, *EXTRA):
        if name in ("coarse_graining", "method", "algorithm", "point_id", "mpsobs_version",
                    "observables"):
            out[name] = [f"{name}-{i}" for i in range(rows)]
        elif name == "disorder_axes":
            out[name] = ",".join(point.disorder)
        elif name in ("seed", "max_bond", "samples", "n_observables"):
            out[name] = np.arange(rows, dtype=np.int64)
        else:
            out[name] = rng.random(rows)
    frame = pd.DataFrame(out)
    for name, value in point.columns.items():
        frame[name] = value
    return frame


def test_point_files_and_merged_table_read_by_pandas_and_dask(tmp_path):
    run = _run_spec()
    with store.open_run(tmp_path / "run", run) as st:
        frames = [_frame(p) for p in run.points]
        for point, frame in zip(reversed(run.points), reversed(frames), strict=True):
            st.write_point(point, frame)
        merged = st.merge(run.points)
    path = tmp_path / "run" / store.RESULTS_FILE
    expected = pd.concat(frames, ignore_index=True)  # point order, whatever write order
    by_pandas = pd.read_parquet(path)
    pd.testing.assert_frame_equal(by_pandas, expected)
    pd.testing.assert_frame_equal(merged, expected)
    assert set(REQUIRED) <= set(by_pandas.columns) and "L" in by_pandas.columns
    by_dask = dd.read_parquet(str(path)).compute().reset_index(drop=True)
    pd.testing.assert_frame_equal(by_dask, expected, check_dtype=False)
    # the lock is gone after the run; the spec and the point list are stored
    assert not (tmp_path / "run" / store.LOCK_FILE).exists()
    stored = json.loads((tmp_path / "run" / store.SPEC_FILE).read_text())
    assert stored["run_id"] == run.run_id
    assert [p["point_id"] for p in stored["points"]] == [p.point_id for p in run.points]


def test_readers_never_see_a_partial_point_file(tmp_path):
    run = _run_spec()
    point = run.points[0]
    big = pd.concat([_frame(point)] * 4000, ignore_index=True)  # ~ 24k rows
    st = store.RunStore(tmp_path)
    st.write_point(point, big.iloc[:10])
    stop = threading.Event()
    seen, errors = [], []

    def reader():
        # One open() per read: the file object pins the inode it found, old or new
        # (a reader that opens the path twice, e.g. footer and data separately, could
        # mix two versions of a file that is rewritten meanwhile).
        while not stop.is_set():
            for file in st.points_dir.glob("*.parquet"):
                try:
                    with open(file, "rb") as handle:
                        seen.append(len(pd.read_parquet(handle)))
                except Exception as exc:  # noqa: BLE001 - any failure is a partial file
                    errors.append(repr(exc))

    thread = threading.Thread(target=reader)
    thread.start()
    try:
        for i in range(12):
            st.write_point(point, big if i % 2 else big.iloc[:10])
    finally:
        stop.set()
        thread.join(timeout=30)
    assert not errors
    assert set(seen) <= {10, len(big)} and seen


def test_killed_writer_leaves_old_file_or_none(tmp_path):
    """SIGKILL a process in the middle of rewriting a point file: the file on disk is
    the old complete one, and the next run removes the temporary left behind."""
    run = _run_spec()
    point = run.points[0]
    with store.open_run(tmp_path / "run", run) as st:
        st.write_point(point, _frame(point, rows=3))
    script = textwrap.dedent(f"""
        import numpy as np, pandas as pd
        from mpsobs.pipeline import store
        st = store.RunStore({str(st.root)!r})
        frame = pd.DataFrame({{"x": np.arange(3_000_000, dtype=float)}})
        print("ready", flush=True)
        class P:
            point_id, index, seed, label, params = {point.point_id!r}, 0, 1, "", {{}}
        while True:
            st.write_point(P, frame)
    """)
    proc = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "ready"
        time.sleep(0.4)
    finally:
        proc.kill()
        proc.wait(timeout=30)
    frame = pd.read_parquet(st.point_path(point.point_id))  # complete: old or new
    assert len(frame) in (3, 3_000_000)
    assert [p.name for p in st.points_dir.glob("*.parquet")] == [f"{point.point_id}.parquet"]
    with store.open_run(st.root, run):
        assert not list(st.points_dir.glob(".*.tmp"))


def test_checkpoint_round_trip(tmp_path):
    st = store.RunStore(tmp_path)
    rng = np.random.default_rng(5)
    main = [rng.normal(size=(1, 2, 3)) + 1j * rng.normal(size=(1, 2, 3)),
            rng.normal(size=(3, 2, 1)) + 0j]
    check = [rng.normal(size=(1, 2, 2)) + 0j, rng.normal(size=(2, 2, 1)) + 0j]
    meta = {"t": 0.30000000000000004, "rows": [{"S_obs": 0.1, "S_gge": float("nan")}],
            "discarded_weight": 1.234e-17}
    assert st.load_checkpoint("abc") is None
    st.save_checkpoint("abc", [main, check], meta)
    loaded, back = st.load_checkpoint("abc")
    assert len(loaded) == 2
    for got, want in zip(loaded, [main, check], strict=True):
        assert all(np.array_equal(a, b) for a, b in zip(got, want, strict=True))
    assert back["t"] == meta["t"] and back["discarded_weight"] == meta["discarded_weight"]
    assert np.isnan(back["rows"][0]["S_gge"])
    st.drop_checkpoint("abc")
    assert st.load_checkpoint("abc") is None


def test_checkpoint_of_the_older_layout_is_ignored(tmp_path, caplog):
    """A checkpoint written before the check state existed (tensors named tensor_<i>,
    no layout number) is not resumed: the point starts afresh."""
    st = store.RunStore(tmp_path)
    st.checkpoints_dir.mkdir(parents=True)
    with open(st.checkpoint_path("old"), "wb") as handle:
        np.savez(handle, tensor_00000=np.ones((1, 2, 1)), meta=np.array('{"done": 1}'))
    with caplog.at_level("WARNING", logger="mpsobs.pipeline.store"):
        assert st.load_checkpoint("old") is None
    assert "another layout" in caplog.text


def test_other_spec_refused_same_spec_accepted(tmp_path):
    first = _run_spec()
    root = tmp_path / "run"
    with store.open_run(root, first):
        pass
    listing = sorted(p.name for p in root.iterdir())
    with store.open_run(root, _run_spec(name="same-physics-other-name")):
        pass
    other = _run_spec(seed=4)
    with pytest.raises(store.RunDirError, match="holds another run"):
        store.check_target(root, other)
    with pytest.raises(store.RunDirError, match="holds another run"):
        with store.open_run(root, other):
            pass
    assert sorted(p.name for p in root.iterdir()) == listing
    foreign = tmp_path / "foreign"
    foreign.mkdir()
    (foreign / "data.csv").write_text("1,2\n")
    with pytest.raises(store.RunDirError, match="holds no mpsobs run"):
        store.check_target(foreign, first)


def test_lock_refuses_a_second_run_and_replaces_a_stale_one(tmp_path):
    run = _run_spec()
    root = tmp_path / "run"
    with store.open_run(root, run):
        with pytest.raises(store.RunDirError, match=f"in use by another mpsobs run "
                                                    f"\\(process {os.getpid()}"):
            with store.open_run(root, run):
                pass
        assert (root / store.LOCK_FILE).exists()
    # a lock left by a process that has exited is stale
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait(timeout=30)
    (root / store.LOCK_FILE).write_text(f"{dead.pid} {socket.gethostname()}\n")
    with store.open_run(root, run):
        assert (root / store.LOCK_FILE).read_text().split()[0] == str(os.getpid())
    # a lock of another host cannot be checked: refused
    (root / store.LOCK_FILE).write_text("1 some-other-host\n")
    with pytest.raises(store.RunDirError, match="some-other-host"):
        with store.open_run(root, run):
            pass
    # an empty lock older than EMPTY_LOCK_AGE is stale
    lock = root / store.LOCK_FILE
    lock.write_text("")
    old = time.time() - 2 * store.EMPTY_LOCK_AGE
    os.utime(lock, (old, old))
    with store.open_run(root, run):
        pass
    assert not lock.exists()


def test_column_units_and_descriptions_in_the_parquet_schema(tmp_path):
    import pyarrow.parquet as pq

    from mpsobs.pipeline.columns import describe

    run = _run_spec()
    with store.open_run(tmp_path / "run", run) as st:
        for point in run.points:
            st.write_point(point, _frame(point))
        st.merge(run.points)
    for path in (st.point_path(run.points[0].point_id), st.results_path):
        schema = pq.read_schema(path)
        assert schema.field("S_obs").metadata == {b"unit": b"nats", b"description":
                                                  describe("S_obs")[1].encode()}
        assert schema.field("t").metadata[b"unit"] == b"1/J"
        assert schema.field("L").metadata[b"description"] == b"chain length in sites"
        for name in schema.names:  # every column of the table is described
            assert b"description" in (schema.field(name).metadata or {}), name


def test_growing_a_run_accepts_new_sweep_values_and_refuses_other_changes(tmp_path):
    root = tmp_path / "run"
    first = _run_spec()
    with store.open_run(root, first):
        pass
    grown = _run_spec(model={**SPEC["model"], "L": [8, 10, 12]},
                      evolution={"chi_max": [16]})
    store.check_target(root, grown)
    with store.open_run(root, grown):
        pass
    record = json.loads((root / store.SPEC_FILE).read_text())
    assert record["run_id"] == grown.run_id
    assert record["history"][0]["run_id"] == first.run_id
    assert "evolution.chi_max" in record["axes"] and "model.L" in record["axes"]
    # changes to the physics of the stored points are refused, naming the settings
    for changes, named in (({"times": {"t_max": 0.4, "n_times": 3}}, "times.values"),
                           ({"estimator": {"samples": 500}}, "estimator.samples"),
                           ({"coarse": [{"observable": "number", "block": 4}]}, "coarse")):
        other = _run_spec(model={**SPEC["model"], "L": [8, 10, 12]},
                          evolution={"chi_max": [16]}, **changes)
        with pytest.raises(store.RunDirError, match=f"differ .* in {named}"):
            store.check_target(root, other)
    # a record written before runs could grow (no axes) accepts only its own spec
    record.pop("axes")
    (root / store.SPEC_FILE).write_text(json.dumps(record))
    store.check_target(root, grown)
    with pytest.raises(store.RunDirError, match="the spec"):
        store.check_target(root, first)


def test_time_grid_extension_keeps_the_points_and_earlier_keys_are_reported(tmp_path,
                                                                             caplog):
    root = tmp_path / "run"
    first = _run_spec()
    with store.open_run(root, first):
        pass
    longer = _run_spec(times={"t_max": 0.4, "n_times": 5})  # 0, 0.1, ..., 0.4
    assert [p.point_id for p in longer.points] == [p.point_id for p in first.points]
    assert [p.seed for p in longer.points] == [p.seed for p in first.points]
    with store.open_run(root, longer):
        pass
    record = json.loads((root / store.SPEC_FILE).read_text())
    assert record["spec"]["times"]["values"] == [0.0, 0.1, 0.2, 0.3, 0.4]
    assert record["identity"] == store.IDENTITY
    with pytest.raises(store.RunDirError, match="times.values .*after its last one"):
        store.check_target(root, _run_spec(times={"values": [0.0, 0.15, 0.4]}))
    # a record of the earlier identity (time grid hashed): its keys are named as stale
    record.pop("identity")
    record["points"][0]["point_id"] = "0123456789abcdef"
    (root / store.SPEC_FILE).write_text(json.dumps(record))
    with caplog.at_level("WARNING", logger="mpsobs.pipeline.store"):
        with store.open_run(root, longer):
            pass
    assert "1 stored point(s) were keyed by an earlier mpsobs" in caplog.text
    assert json.loads((root / store.SPEC_FILE).read_text())["identity"] == store.IDENTITY


def test_damaged_checkpoint_generations(tmp_path, caplog):
    """The newest sound generation is loaded; damaged files are moved to damaged/ and
    noted once (run_sweep shows the notes as warnings)."""
    st = store.RunStore(tmp_path)
    value = 1.2345
    first, second = [[np.zeros((1, 2, 1))]], [[np.full((1, 2, 1), value)]]
    st.save_checkpoint("p", first, {"done": 1})
    st.save_checkpoint("p", second, {"done": 2})
    assert st.load_checkpoint("p")[1] == {"done": 2}
    newest = st.checkpoint_path("p")
    data = bytearray(newest.read_bytes())
    data[data.index(np.float64(value).tobytes())] ^= 0x01  # one bit of a tensor entry:
    newest.write_bytes(bytes(data))                        # the member's CRC-32 fails
    with caplog.at_level("INFO", logger="mpsobs.pipeline.store"):
        assert st.load_checkpoint("p")[1] == {"done": 1}
    assert not newest.exists() and len(list(st.damaged_dir.iterdir())) == 1
    assert len(st.notices) == 1 and "damaged file checkpoints/p.npz" in st.notices[0]
    assert st.notices[0] in caplog.text
    older = st.older_checkpoint_path("p")
    older.write_bytes(b"")
    assert st.load_checkpoint("p") is None
    assert len(list(st.damaged_dir.iterdir())) == 2
    st.drop_checkpoint("p")
