"""The ``mpsobs`` command: help and usage errors, a run killed with SIGKILL and resumed,
a run on a separate Dask scheduler that loses a worker, refusals (other run, lock),
and the plot / scale commands on a finished run."""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
import tomllib
from pathlib import Path

import pandas as pd
import pytest

from mpsobs import cli, workflow
from mpsobs.pipeline import spec, store, sweep
from mpsobs.pipeline.columns import REQUIRED

# Four points of comparable cost (a second or two each on one core).
SPEC = """\
name = "cli-test"
seed = 17

[model]
name = "xxz"
L = [10, 12]
delta = 0.7

[model.field]
kind = "staggered"
strength = [0.2, 0.5]

[state]
kind = "gas"
box_fraction = [0.0, 0.5]

[evolution]
dt = 0.05
chi_max = 24

[times]
t_max = 3.0
n_times = 7

[[coarse]]
observable = "number"
block = 2

[[coarse]]
observable = "energy"
block = 2

[estimator]
samples = 300

[output]
checkpoint_seconds = 0
"""
N_POINTS = 4
ROWS = N_POINTS * 7 * 2
#: Columns that differ between two runs of the same points (wall time).
VOLATILE = ["elapsed_s"]
WAIT = 240.0  # bound (s) on every wait for a subprocess


def _mpsobs(*args: str) -> list[str]:
    return [sys.executable, "-m", "mpsobs.cli", *args]


def _env() -> dict:
    return {**os.environ, **sweep.WORKER_ENV}


def _table(root: Path) -> pd.DataFrame:
    frame = pd.read_parquet(root / store.RESULTS_FILE).drop(columns=VOLATILE)
    keys = ["point_id", "t", "coarse_graining"]
    return frame.sort_values(keys).reset_index(drop=True)


def _wait_for(condition, what: str, timeout: float = WAIT) -> None:
    deadline = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for {what}")
        time.sleep(0.05)


def _kill_group(proc: subprocess.Popen) -> None:
    with contextlib.suppress(ProcessLookupError):
        os.killpg(proc.pid, signal.SIGKILL)
    with contextlib.suppress(subprocess.TimeoutExpired):
        proc.wait(timeout=30)


@pytest.fixture(scope="module")
def spec_file(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("spec") / "cli-test.toml"
    path.write_text(SPEC)
    return path


@pytest.fixture(scope="module")
def reference(spec_file, tmp_path_factory) -> Path:
    """An uninterrupted run on one worker."""
    out = tmp_path_factory.mktemp("reference") / "run"
    done = subprocess.run(_mpsobs("run", str(spec_file), "--out", str(out), "--workers", "1",
                                  "--no-progress", "--no-plots"),
                          env=_env(), capture_output=True, text=True, timeout=WAIT)
    assert done.returncode == 0, done.stderr
    return out


def test_reference_table(reference):
    table = pd.read_parquet(reference / store.RESULTS_FILE)
    assert set(REQUIRED) <= set(table.columns)
    assert len(table) == ROWS and table["point_id"].nunique() == N_POINTS
    assert {"L", "h", "chi_max", "block_size"} <= set(table.columns)
    assert table.groupby("point_id")["seed"].nunique().eq(1).all()
    import dask.dataframe as dd

    by_dask = dd.read_parquet(str(reference / store.RESULTS_FILE)).compute()
    pd.testing.assert_frame_equal(by_dask.reset_index(drop=True), table, check_dtype=False)


def test_sigkill_then_rerun_gives_the_uninterrupted_table(spec_file, reference, tmp_path):
    out = tmp_path / "run"
    args = _mpsobs("run", str(spec_file), "--out", str(out), "--workers", "1",
                   "--no-progress", "--no-plots")
    proc = subprocess.Popen(args, env=_env(), start_new_session=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    points = out / "points"
    try:
        _wait_for(lambda: points.is_dir() and any(points.glob("*.parquet")),
                  "the first finished point")
    finally:
        _kill_group(proc)  # the command and its Dask workers
    assert proc.returncode == -signal.SIGKILL
    finished = {p.name: (p.stat().st_ino, p.stat().st_mtime_ns)
                for p in points.glob("*.parquet")}
    assert 1 <= len(finished) < N_POINTS  # killed in the middle of the sweep
    assert (out / store.LOCK_FILE).exists()  # left behind by the killed run: stale
    rerun = subprocess.run(args, env=_env(), capture_output=True, text=True, timeout=WAIT)
    assert rerun.returncode == 0, rerun.stderr
    # finished points were not recomputed: their files are the very same
    for name, stamp in finished.items():
        path = points / name
        assert (path.stat().st_ino, path.stat().st_mtime_ns) == stamp
    log = (out / store.LOG_FILE).read_text()
    assert f"{len(finished)} of {N_POINTS} points finished before; skipping them" in log
    pd.testing.assert_frame_equal(_table(out), _table(reference), rtol=1e-9)
    assert not (out / store.LOCK_FILE).exists()
    assert not list((out / "checkpoints").glob("*.npz"))


def test_truncated_point_file_is_named_once_and_recomputed(spec_file, reference, tmp_path):
    out = tmp_path / "run"
    shutil.copytree(reference, out)
    damaged = sorted((out / "points").glob("*.parquet"))[0]
    damaged.write_bytes(damaged.read_bytes()[:1000])  # a torn copy
    done = subprocess.run(_mpsobs("run", str(spec_file), "--out", str(out),
                                  "--workers", "1", "--no-progress", "--no-plots"),
                          env=_env(), capture_output=True, text=True, timeout=WAIT)
    assert done.returncode == 0, done.stderr
    # one line names the damaged file (the other lines are notes on the physics, such
    # as a negative reference temperature); no traceback reaches the console
    lines = [line for line in done.stderr.splitlines() if "damaged" in line]
    assert len(lines) == 1 and f"damaged file points/{damaged.name}" in lines[0], lines
    assert "Traceback" not in done.stderr
    assert "mpsobs: 4 points: 1 computed, 3 finished before, 0 failed" in done.stdout
    assert len(list((out / "damaged").iterdir())) == 1
    assert "damaged file" in (out / store.LOG_FILE).read_text()
    pd.testing.assert_frame_equal(_table(out), _table(reference), rtol=1e-9)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_run_on_a_scheduler_survives_a_killed_worker(spec_file, reference, tmp_path):
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    procs: list[subprocess.Popen] = []
    logs = tmp_path / "logs"
    logs.mkdir()

    def start(name: str, args: list[str]) -> subprocess.Popen:
        handle = open(logs / f"{name}.log", "w")  # noqa: SIM115 - closed with the process
        proc = subprocess.Popen(args, env=_env(), cwd=tmp_path, start_new_session=True,
                                stdout=handle, stderr=subprocess.STDOUT)
        handle.close()
        procs.append(proc)
        return proc

    try:
        start("scheduler", [sys.executable, "-m", "distributed.cli.dask_scheduler",
                            "--host", "127.0.0.1", "--port", str(port), "--no-dashboard"])
        workers = [start(f"worker{i}", [sys.executable, "-m", "distributed.cli.dask_worker",
                                        address, "--nworkers", "1", "--nthreads", "1",
                                        "--host", "127.0.0.1", "--no-dashboard"])
                   for i in range(2)]
        from distributed import Client

        with Client(address, timeout=60) as client:
            client.wait_for_workers(2, timeout=120)
        out = tmp_path / "run"
        run = start("mpsobs", _mpsobs("run", str(spec_file), "--out", str(out),
                                      "--scheduler", address, "--no-progress",
                                      "--no-plots"))
        _wait_for(lambda: (out / "checkpoints").is_dir()
                  and any((out / "checkpoints").glob("*.npz")), "a point under way")
        _kill_group(workers[0])
        assert workers[0].returncode is not None
        run.wait(timeout=WAIT)
        assert run.returncode == 0, (logs / "mpsobs.log").read_text()
        assert len(list((out / "points").glob("*.parquet"))) == N_POINTS
        pd.testing.assert_frame_equal(_table(out), _table(reference), rtol=1e-9)
    finally:
        for proc in procs:
            _kill_group(proc)


def test_other_spec_refused_and_directory_left_as_it_was(reference, tmp_path, capsys):
    before = sorted((p.relative_to(reference), p.stat().st_mtime_ns)
                    for p in reference.rglob("*"))
    other = tmp_path / "other.toml"
    other.write_text(SPEC.replace("seed = 17", "seed = 18"))
    assert cli.main(["run", str(other), "--out", str(reference), "--no-progress"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("mpsobs: error: --out:") and "holds another run" in err
    assert sorted((p.relative_to(reference), p.stat().st_mtime_ns)
                  for p in reference.rglob("*")) == before


def test_second_concurrent_run_refused(spec_file, tmp_path, capsys):
    out = tmp_path / "run"
    with store.open_run(out, spec.load(spec_file)):  # this process holds the lock
        code = cli.main(["run", str(spec_file), "--out", str(out), "--no-progress"])
    assert code == 2
    err = capsys.readouterr().err
    assert "in use by another mpsobs run" in err and str(os.getpid()) in err


def test_plot_and_scale_commands_read_the_run(reference, capsys):
    assert cli.main(["plot", str(reference)]) == 0
    assert list((reference / "figures").glob("*.png"))
    assert cli.main(["scale", str(reference), "--window", "0.4"]) == 0
    assert (reference / "scaling.csv").exists()
    capsys.readouterr()
    assert cli.main(["plot", str(reference / "nowhere")]) == 2
    assert capsys.readouterr().err.startswith("mpsobs: error: ")


def test_help_and_usage_errors(capsys, tmp_path):
    for argv in (["--help"], ["run", "--help"], ["scale", "--help"]):
        with pytest.raises(SystemExit) as stop:
            cli.main(argv)
        assert stop.value.code == 0
        assert "usage: mpsobs" in capsys.readouterr().out
    out = tmp_path / "run"
    for argv, words in ((["run", "--bogus"], "unrecognized arguments"),
                        (["run", "--workers", "0", "--out", str(out)], "--workers"),
                        (["run", "--workers", "2", "--scheduler", "tcp://127.0.0.1:1",
                          "--out", str(out)], "--workers"),
                        (["run", "--scheduler", f"tcp://127.0.0.1:{_free_port()}",
                          "--out", str(out)], "--scheduler: cannot reach"),
                        (["scale", str(tmp_path), "--fraction", "2"], "--fraction"),
                        (["launch"], "invalid choice")):
        assert cli.main(argv) == 2
        err = capsys.readouterr().err
        assert err.startswith("mpsobs: error: ") and words in err
        assert len(err.strip().splitlines()) == 1
    assert not out.exists()


def test_template_and_check(capsys):
    assert cli.main(["template"]) == 0
    text = capsys.readouterr().out
    assert tomllib.loads(text)["name"] == spec.load(None).name
    assert cli.main(["check"]) == 0
    listing = capsys.readouterr().out
    assert all(p.point_id in listing for p in spec.load(None).points)


# A point-level refusal must come from `check` and `run` alike, before any work or any
# directory. Each case parses as a spec; the point builders or the estimator refuse it.
REFUSAL = """\
name = "refused"
[model]
name = "xxz"
L = {L}
[state]
{state}
[evolution]
chi_max = 8
[times]
values = [0.0, 0.1]
[[coarse]]
{coarse}
{estimator}
[output]
dir = "{out}"
"""
REFUSALS = {
    # blocks wider than MAX_BLOCK_SITES: number only, counted in at most three regions
    "wide number blocks, five regions": (
        "60", 'kind = "neel"', 'observable = "number"\nblock = 13', "", "point 0"),
    "wide number blocks at one L of a sweep": (
        "[20, 60]", 'kind = "neel"', 'observable = "number"\nblock = 13', "", "point 1"),
    "wide regions by enumeration": (
        "40", 'kind = "domain_wall"',
        'observable = "number"\nregions = [[0, 13], [13, 26], [26, 40]]',
        '[estimator]\nmethod = "enumerate"', "'count'"),
    "energy blocks too wide": (
        "30", 'kind = "neel"', 'observable = "energy"\nblock = 13', "", "coarse[0].bin_width"),
    "too many wide energy blocks": (
        "60", 'kind = "neel"', 'observable = "energy"\nblock = 13\nbin_width = 1.0', "",
        "at most 3 regions"),
    "gas box outside the chain at one L": (
        "[16, 10]", 'kind = "gas"\nbox = [0, 12]', 'observable = "number"\nblock = 2', "",
        "state.box"),
    "pattern not dividing one L": (
        "[12, 10]", 'kind = "product"\npattern = "0110"', 'observable = "number"\nblock = 2',
        "", "state.pattern"),
}


@pytest.mark.parametrize("case", list(REFUSALS))
def test_point_refusals_come_before_any_work(case, tmp_path, capsys):
    L, state, coarse, estimator, words = REFUSALS[case]
    out = tmp_path / "run"
    path = tmp_path / "refused.toml"
    path.write_text(REFUSAL.format(L=L, state=state, coarse=coarse, estimator=estimator,
                                   out=out))
    for argv in (["check", str(path)],
                 ["run", str(path), "--workers", "1", "--no-progress", "--no-plots"]):
        assert cli.main(argv) == 2, argv
        err = capsys.readouterr().err
        assert err.startswith("mpsobs: error: ") and words in err, err
        assert len(err.strip().splitlines()) == 1
        assert not out.exists()


def test_uncreatable_run_directory_is_a_usage_error(tmp_path, capsys):
    path = tmp_path / "fine.toml"
    path.write_text(REFUSAL.format(L="8", state='kind = "neel"',
                                   coarse='observable = "number"\nblock = 2', estimator="",
                                   out=tmp_path / "unused"))
    blocker = tmp_path / "a-file"
    blocker.write_text("")
    for target in ("/proc/mpsobs-cannot-create/run", str(blocker / "run")):
        assert cli.main(["run", str(path), "--out", target, "--no-progress"]) == 2
        err = capsys.readouterr().err
        assert err.startswith("mpsobs: error: --out: cannot create"), err
        assert len(err.strip().splitlines()) == 1
    assert not (tmp_path / "unused").exists()


def test_ctrl_c_exits_130_quietly_and_the_rerun_resumes(spec_file, reference, tmp_path):
    out = tmp_path / "run"
    args = _mpsobs("run", str(spec_file), "--out", str(out), "--workers", "1",
                   "--no-progress", "--no-plots")
    proc = subprocess.Popen(args, env=_env(), start_new_session=True, text=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:   # interrupt while the workers compute (a checkpoint is written per time)
        _wait_for(lambda: any(out.glob("checkpoints/*.npz")) or any(out.glob("points/*")),
                  "the workers at work")
        os.killpg(proc.pid, signal.SIGINT)   # as a terminal's Ctrl-C: the whole group
        _, err = proc.communicate(timeout=WAIT)
    finally:
        _kill_group(proc)
    assert proc.returncode == 130
    assert "interrupted" in err
    for noise in ("Traceback", "KeyboardInterrupt", "leaked", "WARNING distributed"):
        assert noise not in err, err
    assert "interrupted (Ctrl-C or SIGINT)" in (out / store.LOG_FILE).read_text()
    rerun = subprocess.run(args, env=_env(), capture_output=True, text=True, timeout=WAIT)
    assert rerun.returncode == 0, rerun.stderr
    pd.testing.assert_frame_equal(_table(out), _table(reference), rtol=1e-9)


def _outcome(tmp_path, **report) -> workflow.RunOutcome:
    (point,) = spec.parse(tomllib.loads(SPEC.replace("L = [10, 12]", "L = 10").replace(
        "strength = [0.2, 0.5]", "strength = 0.2"))).points
    fields = {"total": 1, "skipped": 0, "computed": 0, "failed": (),
              "table": pd.DataFrame(), **report}
    fields["failed"] = tuple(sweep.Failure(point, *f) for f in fields["failed"])
    return workflow.RunOutcome(sweep.SweepReport(**fields), tmp_path, [])


def test_full_disk_is_one_line_per_point_and_one_for_the_directory(tmp_path, capsys,
                                                                   monkeypatch):
    full = _outcome(tmp_path, failed=[("OSError", "[Errno 28] No space left on device",
                                       False, True)],
                    out_of_space=f"{tmp_path} is out of space: point 0 could not be "
                                 f"written", not_started=1, total=2)
    monkeypatch.setattr(workflow, "run", lambda *args, **kwargs: full)
    assert cli.main(["run", "--no-progress"]) == 1
    out, err = capsys.readouterr()
    assert out.splitlines()[0] == "mpsobs: 2 points: 0 computed, 0 finished before, 1 failed"
    lines = err.splitlines()
    assert len(lines) == 2 and "No space left" in lines[0]
    assert lines[1].startswith(f"mpsobs: error: {tmp_path} is out of space")
    assert "1 point not started" in lines[1]


def test_counts_are_singular_or_plural(tmp_path, capsys, monkeypatch):
    table = pd.DataFrame({"t": [0.0]})
    one = _outcome(tmp_path, computed=1, table=table)
    monkeypatch.setattr(workflow, "run", lambda *args, **kwargs: one)
    assert cli.main(["run", "--no-progress"]) == 0
    out = capsys.readouterr().out
    assert "mpsobs: 1 point: 1 computed" in out and "(1 row)" in out
