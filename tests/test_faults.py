"""Run directories under faults a shared cluster file system brings: a checkpoint torn
after a crash, a truncated or corrupted point file, a full disk; and runs whose time
grid grows. Every case ends with the table of a clean run of the same spec."""

from __future__ import annotations

import errno
import shutil
import sys
from pathlib import Path

import cloudpickle
import pandas as pd
import pytest

from mpsobs.pipeline import spec, store, sweep
from mpsobs.pipeline.point import compute_point

# The kernels below live in this test module, which the worker processes cannot import.
cloudpickle.register_pickle_by_value(sys.modules[__name__])

#: Four points of a tilted-field Ising quench, small enough for a second each.
SPEC = {
    "name": "faults", "seed": 11,
    "model": {"name": "ising", "L": [6, 8], "g": 1.05,
              "field": {"kind": "uniform", "strength": [0.3, 0.5]}},
    "state": {"kind": "product", "pattern": "0"},
    "evolution": {"dt": 0.05, "chi_max": 8},
    "times": {"t_max": 0.6, "n_times": 4},
    "coarse": [{"observable": "number", "block": 2},
               {"observable": "energy", "block": 2}],
    "estimator": {"method": "sample", "samples": 200},
    "output": {"checkpoint_seconds": 0},
}
N_POINTS = 4
#: Wall time of a point differs between runs.
VOLATILE = ["elapsed_s"]
QUOTA = "QUOTA"


class CrashAfter:
    """compute_point that raises after its ``saves``-th checkpoint unless it resumed
    (a run killed mid-point)."""

    def __init__(self, saves: int):
        self.saves = saves

    def __call__(self, point, *, progress=None, resume=None, save=None):
        if resume is not None or save is None:
            return compute_point(point, progress=progress, resume=resume, save=save)
        count = [0]

        def crashing(states, meta):
            save(states, meta)
            count[0] += 1
            if count[0] == self.saves:
                raise RuntimeError("simulated crash")

        return compute_point(point, progress=progress, save=crashing)


def _quota_write(original):
    """atomic_write on a file system with a quota: while RUN/QUOTA holds n, point files
    may be written n more times; at 0 every write into RUN fails with ENOSPC."""
    import contextlib

    @contextlib.contextmanager
    def write(path):
        path = Path(path)
        root = next((p for p in path.parents if (p / store.SPEC_FILE).exists()), None)
        quota = None if root is None else root / QUOTA
        if quota is None or not quota.exists():
            with original(path) as tmp:
                yield tmp
            return
        left = int(quota.read_text())
        if left <= 0:
            raise OSError(errno.ENOSPC, "No space left on device", str(path))
        with original(path) as tmp:
            yield tmp
        if path.parent.name == store.POINTS_DIR:
            quota.write_text(str(left - 1))

    return write


class FullDisk:
    """compute_point on a worker whose writes obey RUN/QUOTA (see _quota_write)."""

    def __call__(self, point, **kwargs):
        if not getattr(store.atomic_write, "quota", False):
            store.atomic_write = _quota_write(store.atomic_write)
            store.atomic_write.quota = True
        return compute_point(point, **kwargs)


class Recording:
    """compute_point that records where each point started (0, or the number of times
    done in the checkpoint or final state it resumed from)."""

    def __init__(self, root):
        self.root = Path(root)

    def __call__(self, point, *, progress=None, resume=None, save=None):
        done = 0 if resume is None else resume[1]["done"]
        calls = self.root / "calls"
        calls.mkdir(exist_ok=True)
        (calls / f"{point.point_id}.{done}").touch()
        return compute_point(point, progress=progress, resume=resume, save=save)


@pytest.fixture(scope="module")
def scheduler():
    with sweep.local_cluster(2) as client:
        yield client.scheduler.address


def _sweep(run: spec.RunSpec, root: Path, scheduler: str, kernel=None) -> sweep.SweepReport:
    with store.open_run(root, run) as st:
        return sweep.run_sweep(run, st, scheduler=scheduler, kernel=kernel)


def _sorted(table: pd.DataFrame) -> pd.DataFrame:
    keys = ["point_id", "t", "coarse_graining"]
    return table.drop(columns=VOLATILE).sort_values(keys).reset_index(drop=True)


def _assert_same_table(root: Path, clean: Path) -> None:
    """The run's results equal the clean run's, row for row (a resumed evolution
    repeats the same gates from stored tensors: equal up to rounding)."""
    got = pd.read_parquet(root / store.RESULTS_FILE)
    want = pd.read_parquet(clean / store.RESULTS_FILE)
    pd.testing.assert_frame_equal(_sorted(got), _sorted(want), rtol=1e-9)


@pytest.fixture(scope="module")
def clean(scheduler, tmp_path_factory) -> Path:
    """An undisturbed run of SPEC."""
    root = tmp_path_factory.mktemp("clean") / "run"
    report = _sweep(spec.parse(SPEC), root, scheduler)
    assert (report.computed, report.failed) == (N_POINTS, ())
    return root


def test_clean_run_has_every_row(clean):
    table = pd.read_parquet(clean / store.RESULTS_FILE)
    assert len(table) == N_POINTS * 4 * 2 and table["point_id"].nunique() == N_POINTS
    assert (table["method"] == "sampled").all()  # seeds matter for every value


def test_torn_checkpoint_is_set_aside_and_the_older_generation_resumed(tmp_path, scheduler,
                                                                       clean):
    run = spec.parse(SPEC)
    root = tmp_path / "run"
    crashed = _sweep(run, root, scheduler, CrashAfter(saves=3))
    assert len(crashed.failed) == N_POINTS
    assert all(f.error == "RuntimeError" for f in crashed.failed)
    st = store.RunStore(root)
    ids = [p.point_id for p in run.points]
    for pid in ids:  # a torn copy: the first half of every newest checkpoint
        path = st.checkpoint_path(pid)
        assert st.older_checkpoint_path(pid).exists()
        path.write_bytes(path.read_bytes()[: path.stat().st_size // 2])
    # one point loses both generations: it starts afresh
    older = st.older_checkpoint_path(ids[0])
    older.write_bytes(older.read_bytes()[:100])
    report = _sweep(run, root, scheduler, Recording(root))
    assert report.failed == () and report.computed == N_POINTS
    assert report.resumed == N_POINTS - 1
    starts = sorted(p.name for p in (root / "calls").iterdir())
    assert starts == sorted([f"{ids[0]}.0", *(f"{pid}.2" for pid in ids[1:])])
    assert len(report.notices) == N_POINTS + 1
    assert all("damaged file checkpoints/" in n for n in report.notices)
    assert len(list(st.damaged_dir.iterdir())) == N_POINTS + 1  # moved, not deleted
    _assert_same_table(root, clean)
    again = _sweep(run, root, scheduler)  # reported once: nothing left to report
    assert (again.skipped, again.notices) == (N_POINTS, ())


def _last_page_byte(path: Path, column: str) -> int:
    """Offset of the second-last byte of ``column``'s chunk: inside its last data page."""
    import pyarrow.parquet as pq

    meta = pq.ParquetFile(path).metadata
    group = meta.row_group(0)
    chunk = next(group.column(i) for i in range(meta.num_columns)
                 if group.column(i).path_in_schema == column)
    start = chunk.dictionary_page_offset or chunk.data_page_offset
    return start + chunk.total_compressed_size - 2


def test_damaged_point_files_are_set_aside_and_recomputed(tmp_path, scheduler, clean,
                                                          caplog):
    root = tmp_path / "run"
    shutil.copytree(clean, root)
    run = spec.parse(SPEC)
    st = store.RunStore(root)
    truncated, flipped = (st.point_path(p.point_id) for p in run.points[:2])
    truncated.write_bytes(truncated.read_bytes()[:-200])
    data = bytearray(flipped.read_bytes())
    data[_last_page_byte(flipped, "S_obs")] ^= 0x01  # one bit of a value: page checksum
    flipped.write_bytes(bytes(data))
    with caplog.at_level("INFO", logger="mpsobs"):
        report = _sweep(run, root, scheduler)
    assert (report.skipped, report.computed, report.failed) == (2, 2, ())
    assert len(report.notices) == 2
    shown = [r.getMessage() for r in caplog.records if r.levelno >= 30]
    assert shown == list(report.notices)  # one warning line each, for the console
    for path, notice in zip((truncated, flipped), report.notices, strict=True):
        assert f"damaged file points/{path.name}" in notice
    assert len(list(st.damaged_dir.iterdir())) == 2
    _assert_same_table(root, clean)


def test_full_disk_stops_new_points_and_keeps_the_finished_ones(tmp_path, clean, caplog,
                                                               capfd):
    # one single-threaded worker runs the points one after the other, so which point
    # meets the full disk does not depend on timing: the first writes, the second fails,
    # the other two are never started
    run = spec.parse(SPEC)
    root = tmp_path / "run"
    with store.open_run(root, run):
        pass
    (root / QUOTA).write_text("1")  # room for one point file
    with sweep.local_cluster(1) as client:
        scheduler = client.scheduler.address
        with caplog.at_level("INFO", logger="mpsobs"):
            full = _sweep(run, root, scheduler, FullDisk())
        assert full.out_of_space is not None and str(root) in full.out_of_space
        assert (full.computed, len(full.failed), full.not_started) == (1, 1, N_POINTS - 2)
        assert all(f.no_space and f.error == "OSError" for f in full.failed)
        finished = sorted(p.name for p in (root / store.POINTS_DIR).glob("*.parquet"))
        assert len(finished) == full.computed
        # the tracebacks are in the log records at INFO (run.log), none at WARNING or on
        # stderr
        assert any("Traceback" in r.getMessage() for r in caplog.records
                   if r.levelname == "INFO")
        assert not any("Traceback" in r.getMessage() for r in caplog.records
                       if r.levelno >= 30)
        assert "Traceback" not in capfd.readouterr().err
        (root / QUOTA).unlink()  # space freed
        rerun = _sweep(run, root, scheduler, FullDisk())
    assert (rerun.skipped, rerun.failed, rerun.out_of_space) == (full.computed, (), None)
    _assert_same_table(root, clean)


def test_longer_time_grid_continues_every_point(tmp_path, scheduler, clean):
    """SPEC's grid is t = 0, 0.2, 0.4, 0.6; a run of its first two times grown to
    all four computes only the new times and equals the clean run."""
    short = spec.parse({**SPEC, "times": {"t_max": 0.2, "n_times": 2}})
    run = spec.parse(SPEC)
    assert [p.point_id for p in short.points] == [p.point_id for p in run.points]
    assert [p.seed for p in short.points] == [p.seed for p in run.points]
    root = tmp_path / "run"
    first = _sweep(short, root, scheduler)
    assert first.computed == N_POINTS
    grown = _sweep(run, root, scheduler, Recording(root))
    assert (grown.skipped, grown.computed, grown.extended) == (0, N_POINTS, N_POINTS)
    starts = sorted(p.name for p in (root / "calls").iterdir())
    assert starts == sorted(f"{p.point_id}.2" for p in run.points)
    _assert_same_table(root, clean)
    # a grid that changes an earlier time is refused, naming the times
    other = spec.parse({**SPEC, "times": {"values": [0.0, 0.1, 0.6]}})
    with pytest.raises(store.RunDirError, match="differ .* in times.values"):
        store.check_target(root, other)
