"""Run the points of a spec as Dask tasks and merge their rows into one table.

Each unfinished point is one task. The worker that runs it loads the point's last
checkpoint (if any), calls the kernel, saves checkpoints as the kernel offers them (at
most every ``checkpoint_seconds``), and writes the finished point's Parquet file itself,
atomically: a point is on disk the moment it is done, whatever happens to the client
afterwards. The client only watches (:func:`distributed.as_completed`), shows progress
and merges the table at the end. A task whose worker dies is rerun by the Dask scheduler
on another worker and resumes from the checkpoint. Workers must see the run directory
(same machine or a shared file system).

Execution: a :class:`distributed.LocalCluster` (one worker process per core, one thread
each, BLAS pinned to one thread per worker through OMP/OPENBLAS/MKL_NUM_THREADS in the
worker environment), or an existing scheduler given by its address.
"""

from __future__ import annotations

import contextlib
import logging
import os
import signal
import socket
import threading
import time
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from typing import Protocol

import numpy as np
import pandas as pd

from mpsobs.core.errors import InputError
from mpsobs.core.printing import short
from mpsobs.pipeline.spec import Point, RunSpec
from mpsobs.pipeline.store import RunStore

__all__ = ["Kernel", "Failure", "SweepReport", "run_sweep", "run_point_task", "local_cluster",
           "check_execution", "reach_scheduler",
           "WORKER_ENV", "PROGRESS_TOPIC"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)

#: Environment of local worker processes: one BLAS/OpenMP thread each.
WORKER_ENV = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
#: Dask event topic on which workers report progress inside points.
PROGRESS_TOPIC = "mpsobs-progress"
#: Smallest interval (s) between two progress events of one point.
PROGRESS_INTERVAL = 0.5

#: (tensors of each state: the main one, then the check state if any; progress meta)
States = list[list[np.ndarray]]
Checkpoint = tuple[States, dict]


class Kernel(Protocol):
    """Computes one point: returns its rows. ``progress(done, total)`` reports work units
    (time steps) done; ``resume`` is the last checkpoint (states, meta) or None;
    ``save(states, meta)`` offers a checkpoint (the caller decides whether to write it).
    A kernel must be a pure function of the point (same rows whatever runs it)."""

    def __call__(self, point: Point, *, progress: Callable[[int, int], None] | None = None,
                 resume: Checkpoint | None = None,
                 save: Callable[[States, dict], None] | None = None
                 ) -> pd.DataFrame: ...


@dataclass(frozen=True)
class Failure:
    """A point that raised: its error type and message; ``bad_input`` when the error is
    an InputError (a problem of the spec that validation could not see)."""

    point: Point
    error: str
    message: str
    bad_input: bool

    def __repr__(self) -> str:
        return (f"Failure(point {self.point.index} ({short(self.point.label, 60)}), "
                f"{self.error}: {short(self.message, 120)})")


@dataclass(frozen=True)
class SweepReport:
    """What a sweep did: points in the spec, skipped (finished before), computed now,
    failed (with their error messages), the merged table, and the wall time each
    computed point took on its worker."""

    total: int
    skipped: int
    computed: int
    failed: tuple[Failure, ...]
    table: pd.DataFrame = field(repr=False)
    task_seconds: tuple[float, ...] = ()

    def __repr__(self) -> str:
        return (f"SweepReport({self.total} points: {self.computed} computed, {self.skipped} "
                f"finished before, {len(self.failed)} failed; {len(self.table)} rows)")


def _default_kernel() -> Kernel:
    from mpsobs.pipeline.point import compute_point

    return compute_point


def run_point_task(point: Point, root: str, kernel: Kernel | None,
                   checkpoint_seconds: float) -> dict:
    """The task run on a worker: compute one point and write it to the store.

    Returns a small summary (point_id, rows, seconds, resumed, skipped).
    """
    kernel = kernel or _default_kernel()
    store = RunStore(root)
    if store.finished(point.point_id):  # a rerun of a task whose first run completed
        return {"point_id": point.point_id, "skipped": True}
    resume = store.load_checkpoint(point.point_id)
    if resume is not None:
        log.info("point %s resumes from its checkpoint", point.point_id)
    last_save = [time.monotonic()]

    def save(states: States, meta: dict) -> None:
        now = time.monotonic()
        if now - last_save[0] >= checkpoint_seconds:
            store.save_checkpoint(point.point_id, states, meta)
            last_save[0] = now

    start = time.monotonic()
    frame = kernel(point, progress=_progress_reporter(point), resume=resume, save=save)
    store.write_point(point, frame)
    store.drop_checkpoint(point.point_id)
    return {"point_id": point.point_id, "rows": len(frame), "skipped": False,
            "resumed": resume is not None, "seconds": time.monotonic() - start}


def _progress_reporter(point: Point) -> Callable[[int, int], None] | None:
    """A progress callback that sends throttled Dask events from the worker."""
    try:
        from distributed import get_worker

        worker = get_worker()
    except ValueError:  # not on a Dask worker
        return None
    last = [0.0]

    def report(done: int, total: int) -> None:
        now = time.monotonic()
        if done >= total or now - last[0] >= PROGRESS_INTERVAL:
            last[0] = now
            worker.log_event(PROGRESS_TOPIC, {"point_id": point.point_id, "done": int(done),
                                              "total": int(total)})

    return report


@contextlib.contextmanager
def _workers_ignore_sigint() -> Iterator[None]:
    """Ignore SIGINT in this process while the worker processes are started: they
    inherit the disposition, so a Ctrl-C (sent to the whole process group) reaches only
    the client, which stops the cluster. A Ctrl-C during the start-up itself is lost."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


@contextlib.contextmanager
def local_cluster(workers: int | None = None):
    """A LocalCluster with ``workers`` single-threaded worker processes (default: one per
    core) and BLAS pinned to one thread per worker; yields a connected Client.

    The workers ignore SIGINT. On KeyboardInterrupt in the client, the cluster is shut
    down with its warnings about workers stopped mid-task muted.
    """
    from distributed import Client, LocalCluster

    n = workers or os.cpu_count() or 1
    dask_log = logging.getLogger("distributed")
    level = dask_log.level
    try:
        with _workers_ignore_sigint():
            cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                   dashboard_address=":0", env=dict(WORKER_ENV),
                                   silence_logs=logging.ERROR)
        with cluster, Client(cluster) as client:
            try:
                yield client
            except KeyboardInterrupt:
                dask_log.setLevel(logging.CRITICAL)  # killed workers are expected now
                raise
    finally:
        dask_log.setLevel(level)


@contextlib.contextmanager
def _client(workers: int | None, scheduler: str | None) -> Iterator:
    if scheduler is None:
        with local_cluster(workers) as client:
            yield client
        return
    from distributed import Client

    try:
        client = Client(scheduler, timeout="30s")
    except OSError as exc:
        raise InputError(f"--scheduler: cannot reach {scheduler} ({exc})") from None
    with client:
        yield client


class _Bars:
    """Two tqdm bars on the client: points done of total, and time steps done inside the
    points still running (from the workers' progress events)."""

    def __init__(self, points: Sequence[Point], skipped: int, steps_per_point: dict,
                 enabled: bool):
        from tqdm.auto import tqdm

        self._lock = threading.Lock()
        self._done: dict[str, int] = {}
        self._totals = steps_per_point
        self.points_done, self.steps_done = skipped, 0
        self.points = tqdm(total=len(points), initial=skipped, desc="points", unit="pt",
                           disable=not enabled, position=0, dynamic_ncols=True)
        self.steps = tqdm(total=sum(steps_per_point.values()), desc="time steps",
                          unit="step", disable=not enabled, position=1, dynamic_ncols=True,
                          leave=False)

    def on_event(self, event) -> None:
        _, msg = event
        with self._lock:
            pid = msg.get("point_id")
            if pid not in self._totals:
                return
            new = min(int(msg.get("done", 0)), self._totals[pid])
            delta = new - self._done.get(pid, 0)
            if delta > 0:
                self._done[pid] = new
                self.steps_done += delta
                self.steps.update(delta)

    def point_finished(self, point_id: str) -> None:
        with self._lock:
            rest = self._totals.get(point_id, 0) - self._done.get(point_id, 0)
            self._done[point_id] = self._totals.get(point_id, 0)
            if rest > 0:
                self.steps_done += rest
                self.steps.update(rest)
            self.points_done += 1
            self.points.update(1)

    def close(self) -> None:
        self.steps.close()
        self.points.close()


def _cost(point: Point) -> float:
    """Rough relative cost of a point, L * steps * chi^3 with chi the smaller of its cap
    and the largest bond an L-site chain can need; dearer points are submitted first so
    that the longest ones do not start last."""
    L = point.params["model"]["L"]
    chi = min(point.params["evolution"]["chi_max"], 2 ** (L // 2))
    return float(L * _steps(point) * chi**3)


def _steps(point: Point) -> int:
    params = point.params
    try:
        return max(1, round(params["times"]["values"][-1] / params["evolution"]["dt"]))
    except (KeyError, IndexError, TypeError):
        return 1


def check_execution(workers: int | None, scheduler: str | None) -> None:
    """InputError for a bad combination of ``workers`` and ``scheduler``."""
    if workers is not None and scheduler is not None:
        raise InputError("--workers: the workers of an existing scheduler are its own; "
                         "give --workers or --scheduler, not both")
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int)
                                or workers < 1):
        raise InputError(f"--workers: expected an integer >= 1, got {workers!r}")
    if scheduler is not None and (not isinstance(scheduler, str) or "://" not in scheduler
                                  and ":" not in scheduler):
        raise InputError(f"--scheduler: expected an address such as tcp://host:8786, "
                         f"got {scheduler!r}")


def reach_scheduler(address: str, timeout: float = 10.0) -> None:
    """InputError unless a TCP connection to the scheduler ``address`` opens (checked
    before the run directory is touched)."""
    from distributed.comm import get_address_host_port

    try:
        host, port = get_address_host_port(address)
        socket.create_connection((host, port), timeout=timeout).close()
    except (ValueError, OSError) as exc:
        raise InputError(f"--scheduler: cannot reach {address} ({exc})") from None


def run_sweep(spec: RunSpec, store: RunStore, *, workers: int | None = None,
              scheduler: str | None = None, kernel: Kernel | None = None,
              progress: bool = False) -> SweepReport:
    """Compute every unfinished point of ``spec`` into ``store`` and merge the table.

    Parameters
    ----------
    spec, store : the validated spec and its open run directory (see
        :func:`mpsobs.store.open_run`, which holds the lock).
    workers : local worker processes (default: one per core); not with ``scheduler``.
    scheduler : address of a running Dask scheduler (e.g. ``tcp://host:8786``).
    kernel : computes one point (default :func:`mpsobs.point.compute_point`); it must
        be importable (or picklable) on the workers.
    progress : show tqdm bars (points, and time steps inside running points).

    Finished points (their Parquet file exists) are skipped; a point that fails is
    logged and reported, the others go on.
    """
    check_execution(workers, scheduler)
    from distributed import as_completed

    todo = []
    for point in spec.points:
        if store.finished(point.point_id):
            # left behind by a run killed between writing the point and dropping it
            store.drop_checkpoint(point.point_id)
        else:
            todo.append(point)
    skipped = len(spec.points) - len(todo)
    if skipped:
        log.info("%d of %d points finished before; skipping them", skipped, len(spec.points))
    failed: list[Failure] = []
    computed = 0
    seconds: list[float] = []
    if todo:
        bars = _Bars(spec.points, skipped, {p.point_id: _steps(p) for p in todo}, progress)
        try:
            with _client(workers, scheduler) as client:
                if progress:
                    client.subscribe_topic(PROGRESS_TOPIC, bars.on_event)
                order = sorted(todo, key=_cost, reverse=True)
                futures = {client.submit(run_point_task, p, str(store.root), kernel,
                                         spec.checkpoint_seconds, pure=False,
                                         priority=len(order) - rank,
                                         key=f"mpsobs-point-{p.point_id}-{spec.run_id[:8]}"): p
                           for rank, p in enumerate(order)}
                log.info("submitted %d points to %s", len(todo), client.scheduler.address)
                for future in as_completed(futures):
                    point = futures[future]
                    try:
                        summary = future.result()
                    except Exception as exc:  # a point's failure must not stop the others
                        failed.append(Failure(point, type(exc).__name__, str(exc),
                                              isinstance(exc, InputError)))
                        log.error("point %s (%s) failed: %s: %s", point.point_id,
                                  point.label, type(exc).__name__, exc)
                    else:
                        computed += 1
                        if not summary.get("skipped"):
                            seconds.append(summary["seconds"])
                        log.info("point %s (%s) done: %s", point.point_id, point.label,
                                 summary)
                    bars.point_finished(point.point_id)
                if progress:
                    client.unsubscribe_topic(PROGRESS_TOPIC)
        finally:
            bars.close()
    table = store.merge(spec.points)
    return SweepReport(total=len(spec.points), skipped=skipped, computed=computed,
                       failed=tuple(failed), table=table, task_seconds=tuple(seconds))
