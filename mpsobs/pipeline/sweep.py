"""Run the points of a spec as Dask tasks and merge their rows into one table.

Each unfinished point is one task. The worker that runs it loads the point's last sound
checkpoint (if any; for a finished point whose time grid grew, its final state), calls
the kernel, saves checkpoints as the kernel offers them (at most every
``checkpoint_seconds``), and writes the finished point's final state and Parquet file
itself, atomically: a point is on disk the moment it is done, whatever happens to the
client afterwards. The client checks the stored point files first (damaged ones are set
aside and recomputed, see :mod:`mpsobs.pipeline.store`), submits as many points as the
workers have threads (dearest first) and the next one whenever one ends, shows progress
and merges the table at the end. A task whose worker dies is rerun by the Dask scheduler
on another worker and resumes from the checkpoint. Workers must see the run directory
(same machine or a shared file system).

A point that raises is reported as a :class:`Failure` (one line: error type and
message); its traceback is logged at INFO (run.log), never at WARNING. When a point
fails because the file system is full, no further point is started: the points already
running end, and the report says how many were not started.

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
import sys
import threading
import time
import traceback
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Protocol

import numpy as np
import pandas as pd

from mpsobs.core.errors import InputError
from mpsobs.core.printing import short
from mpsobs.pipeline.spec_points import Point, RunSpec
from mpsobs.pipeline.store import LOG_FILE, RunStore, out_of_space

__all__ = ["Kernel", "Failure", "SweepReport", "run_sweep", "run_point_task", "local_cluster",
           "check_execution", "reach_scheduler", "plural",
           "WORKER_ENV", "PROGRESS_TOPIC"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)

#: Environment of local worker processes: one BLAS/OpenMP thread each.
WORKER_ENV = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
#: Dask event topic on which workers report progress inside points.
PROGRESS_TOPIC = "mpsobs-progress"
#: Smallest interval (s) between two progress events of one point.
PROGRESS_INTERVAL = 0.5
#: Longest wait (s) of the client between two looks at the workers' thread count.
SUBMIT_POLL = 2.0

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


def plural(n: int, noun: str) -> str:
    """``"1 point"``, ``"2 points"``."""
    return f"{n} {noun}" if n == 1 else f"{n} {noun}s"


@dataclass(frozen=True)
class Failure:
    """A point that raised: its error type and message; ``bad_input`` when the error is
    an InputError (a problem of the spec that validation could not see); ``no_space``
    when the file system or quota of the run directory was full."""

    point: Point
    error: str
    message: str
    bad_input: bool
    no_space: bool = False

    def __repr__(self) -> str:
        return (f"Failure(point {self.point.index} ({short(self.point.label, 60)}), "
                f"{self.error}: {short(self.message, 120)})")


@dataclass(frozen=True)
class SweepReport:
    """What a sweep did: points in the spec, skipped (finished before), computed now
    (``extended`` of them continued a finished point to new times, ``resumed`` of them
    started from a checkpoint), failed (with their error messages), the merged table,
    and the wall time each computed point took on its worker. ``notices``: one line per
    damaged file set aside. ``out_of_space``: why the sweep stopped starting points (the
    file system was full), with ``not_started`` points left; None otherwise."""

    total: int
    skipped: int
    computed: int
    failed: tuple[Failure, ...]
    table: pd.DataFrame = field(repr=False)
    task_seconds: tuple[float, ...] = ()
    extended: int = 0
    resumed: int = 0
    notices: tuple[str, ...] = ()
    out_of_space: str | None = None
    not_started: int = 0

    def __repr__(self) -> str:
        return (f"SweepReport({plural(self.total, 'point')}: {self.computed} computed, "
                f"{self.skipped} finished before, {len(self.failed)} failed; "
                f"{plural(len(self.table), 'row')})")


def _default_kernel() -> Kernel:
    from mpsobs.pipeline.point import compute_point

    return compute_point


def run_point_task(point: Point, root: str, kernel: Kernel | None,
                   checkpoint_seconds: float) -> dict:
    """The task run on a worker: compute one point and write it to the store.

    Returns a small summary: point_id, notices (damaged files set aside) and either
    rows, seconds, resumed, extended, skipped, or, when the point raised, failed (the
    error type), message, bad_input, no_space and traceback. Only exceptions outside
    :class:`Exception` (a worker shutting down) propagate.
    """
    store = RunStore(root)
    summary: dict = {"point_id": point.point_id}
    try:
        summary.update(_compute_into(store, point, kernel or _default_kernel(),
                                     checkpoint_seconds))
    except Exception as exc:  # reported as one line; the traceback goes to run.log
        summary.update(failed=type(exc).__name__, message=str(exc),
                       bad_input=isinstance(exc, InputError), no_space=out_of_space(exc),
                       traceback=traceback.format_exc())
    summary["notices"] = list(store.notices)
    return summary


def _compute_into(store: RunStore, point: Point, kernel: Kernel,
                  checkpoint_seconds: float) -> dict:
    if store.complete(point):  # a rerun of a task whose first run completed
        return {"skipped": True}
    resume = store.load_checkpoint(point.point_id)
    extended = resume is None and store.finished(point.point_id)
    if extended:  # its file holds an earlier, shorter time grid
        resume = store.load_final_state(point.point_id)
    if resume is not None:
        log.info("point %s resumes from its %s", point.point_id,
                 "final state" if extended else "checkpoint")
    last_save = [time.monotonic()]
    latest: list[Checkpoint | None] = [None]

    def save(states: States, meta: dict) -> None:
        latest[0] = ([[np.array(t) for t in ts] for ts in states],
                     {**meta, "rows": list(meta.get("rows", []))})
        now = time.monotonic()
        if now - last_save[0] >= checkpoint_seconds:
            store.save_checkpoint(point.point_id, states, meta)
            last_save[0] = now

    start = time.monotonic()
    report = _progress_reporter(point)
    frame = kernel(point, progress=report, resume=resume, save=save)
    if latest[0] is not None:
        store.save_final_state(point.point_id, *latest[0])
    store.write_point(point, frame)
    store.drop_checkpoint(point.point_id)
    if report is not None:
        report.saved()
    return {"rows": len(frame), "skipped": False, "resumed": resume is not None,
            "extended": extended, "seconds": time.monotonic() - start}


class _Reporter:
    """Progress callback of one point on a Dask worker: throttled events with the time
    steps done, and one event when the point's file is saved."""

    def __init__(self, worker, point: Point):
        self._worker, self._point_id, self._last = worker, point.point_id, 0.0

    def __call__(self, done: int, total: int) -> None:
        now = time.monotonic()
        if done >= total or now - self._last >= PROGRESS_INTERVAL:
            self._last = now
            self._worker.log_event(PROGRESS_TOPIC, {"point_id": self._point_id,
                                                    "done": int(done), "total": int(total)})

    def saved(self) -> None:
        self._worker.log_event(PROGRESS_TOPIC, {"point_id": self._point_id, "saved": True})


def _progress_reporter(point: Point) -> _Reporter | None:
    """The point's progress callback on a Dask worker (None elsewhere)."""
    try:
        from distributed import get_worker

        worker = get_worker()
    except ValueError:  # not on a Dask worker
        return None
    return _Reporter(worker, point)


@contextlib.contextmanager
def _sigint_handled_by(handler) -> Iterator[None]:
    """SIGINT goes to ``handler`` (a function or signal.SIG_IGN) inside the block, in the
    main thread; elsewhere no signal handler can be set and nothing changes."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGINT, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def _workers_ignore_sigint():
    """Ignore SIGINT in this process while the worker processes are started: they
    inherit the disposition, so a Ctrl-C (sent to the whole process group) reaches only
    the client, which stops the cluster. A Ctrl-C during the start-up itself is lost."""
    return _sigint_handled_by(signal.SIG_IGN)


@contextlib.contextmanager
def _deferred_sigint() -> Iterator[threading.Event]:
    """While the points run, a SIGINT only sets the yielded flag; the watch loop raises
    KeyboardInterrupt at its next poll (at most SUBMIT_POLL seconds later). Raised at
    once, the interrupt could land inside the scheduler client's own code, which may
    swallow it, and the run would go on to its end. Outside the main thread (where no
    signal handler can be set) the flag is never set."""
    flag = threading.Event()
    with _sigint_handled_by(lambda signum, frame: flag.set()):
        yield flag


def _start_resource_tracker(log_path: Path) -> None:
    """Start this process's multiprocessing resource tracker (if it is not running yet)
    with its stderr on ``log_path``. The worker processes share it; when they are
    stopped mid-task (Ctrl-C), it cleans up their semaphores and reports them as
    leaked, a note that belongs in run.log, not on the console after the run's last
    line."""
    from multiprocessing import resource_tracker

    with open(log_path, "a", encoding="utf-8") as log_file:
        sys.stderr.flush()
        saved = os.dup(2)
        try:
            os.dup2(log_file.fileno(), 2)
            resource_tracker.ensure_running()
        finally:
            os.dup2(saved, 2)
            os.close(saved)


@contextlib.contextmanager
def local_cluster(workers: int | None = None, *, log_path: Path | None = None):
    """A LocalCluster with ``workers`` single-threaded worker processes (default: one per
    core) and BLAS pinned to one thread per worker; yields a connected Client.

    The workers ignore SIGINT and log only critical messages (a point's errors reach the
    client through its task). On KeyboardInterrupt in the client, the cluster is shut
    down with its warnings about workers stopped mid-task muted. With ``log_path``, the
    resource tracker of the worker processes writes to that file
    (:func:`_start_resource_tracker`).
    """
    from distributed import Client, LocalCluster

    n = workers or os.cpu_count() or 1
    dask_log = logging.getLogger("distributed")
    level = dask_log.level
    if log_path is not None:
        _start_resource_tracker(log_path)
    try:
        with _workers_ignore_sigint():
            cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                   dashboard_address=":0", env=dict(WORKER_ENV),
                                   silence_logs=logging.CRITICAL)
        with cluster, Client(cluster) as client:
            try:
                yield client
            except KeyboardInterrupt:
                dask_log.setLevel(logging.CRITICAL)  # killed workers are expected now
                raise
    finally:
        dask_log.setLevel(level)


@contextlib.contextmanager
def _client(workers: int | None, scheduler: str | None, log_path: Path) -> Iterator:
    if scheduler is None:
        with local_cluster(workers, log_path=log_path) as client:
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
    """Two tqdm bars on the client: points saved of total, with the labels of the points
    running now, and time steps done inside the running points (from the workers'
    progress events; a point counts as saved as soon as its worker reports its file)."""

    def __init__(self, points: Sequence[Point], skipped: int, steps_per_point: dict,
                 enabled: bool):
        from tqdm.auto import tqdm

        self._lock = threading.Lock()
        self._done: dict[str, int] = {}
        self._totals = steps_per_point
        self._labels = {p.point_id: f"{p.index} ({p.label})" for p in points}
        self._running: dict[str, str] = {}
        self._saved: set[str] = set()
        self.points_done, self.steps_done = skipped, 0
        self.points = tqdm(total=len(points), initial=skipped, desc="points saved",
                           unit="pt", disable=not enabled, position=0, dynamic_ncols=True)
        self.steps = tqdm(total=sum(steps_per_point.values()), desc="time steps",
                          unit="step", disable=not enabled, position=1, dynamic_ncols=True,
                          leave=False)

    def running(self) -> str:
        """The running points, as shown after the points bar."""
        return "running " + ", ".join(self._running.values()) if self._running else ""

    def point_started(self, point_id: str) -> None:
        with self._lock:
            self._running[point_id] = self._labels.get(point_id, point_id)
            self.points.set_postfix_str(short(self.running(), 120))

    def on_event(self, event) -> None:
        _, msg = event
        with self._lock:
            pid = msg.get("point_id")
            if pid not in self._totals:
                return
            if msg.get("saved"):
                self._count_saved(pid)
                return
            new = min(int(msg.get("done", 0)), self._totals[pid])
            delta = new - self._done.get(pid, 0)
            if delta > 0:
                self._done[pid] = new
                self.steps_done += delta
                self.steps.update(delta)

    def point_finished(self, point_id: str, saved: bool = True) -> None:
        """A point's task ended (``saved``: its file is written)."""
        with self._lock:
            rest = self._totals.get(point_id, 0) - self._done.get(point_id, 0)
            self._done[point_id] = self._totals.get(point_id, 0)
            if rest > 0:
                self.steps_done += rest
                self.steps.update(rest)
            self._running.pop(point_id, None)
            if saved:
                self._count_saved(point_id)
            self.points.set_postfix_str(short(self.running(), 120))

    def _count_saved(self, point_id: str) -> None:
        if point_id not in self._saved:
            self._saved.add(point_id)
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
    progress : show tqdm bars (points saved with the running ones, and time steps
        inside running points).

    Points whose file is sound and holds all their times are skipped; a damaged point
    file is set aside and its point recomputed; a point whose file holds an earlier,
    shorter time grid continues from its final state. A point that fails is logged and
    reported, the others go on, unless the file system is full: then no new point is
    started.
    """
    check_execution(workers, scheduler)
    todo = _unfinished(spec.points, store)
    skipped = len(spec.points) - len(todo)
    if skipped:
        log.info("%d of %s finished before; skipping them", skipped,
                 plural(len(spec.points), "point"))
    for notice in store.notices:
        log.warning("%s", notice)
    outcome = _Outcome(notices=list(store.notices))
    if todo:
        bars = _Bars(spec.points, skipped, {p.point_id: _steps(p) for p in todo}, progress)
        try:
            with _client(workers, scheduler, store.root / LOG_FILE) as client:
                if progress:
                    client.subscribe_topic(PROGRESS_TOPIC, bars.on_event)
                with _deferred_sigint() as interrupted:
                    _submit_and_watch(client, spec, store, kernel, todo, bars, outcome,
                                      interrupted)
                if progress:
                    client.unsubscribe_topic(PROGRESS_TOPIC)
        finally:
            bars.close()
    try:
        table = store.merge(spec.points)
    except OSError as exc:
        if not out_of_space(exc):
            raise
        log.info("results table not written: %s", exc)
        outcome.stop(store, f"the results table could not be written ({exc.strerror})")
        table = pd.DataFrame()
    for notice in store.notices:
        if notice not in outcome.notices:
            log.warning("%s", notice)
            outcome.notices.append(notice)
    return SweepReport(total=len(spec.points), skipped=skipped, computed=outcome.computed,
                       failed=tuple(outcome.failed), table=table,
                       task_seconds=tuple(outcome.seconds), extended=outcome.extended,
                       resumed=outcome.resumed, notices=tuple(outcome.notices),
                       out_of_space=outcome.out_of_space, not_started=outcome.not_started)


def _unfinished(points: Sequence[Point], store: RunStore) -> list[Point]:
    """The points to compute: those without a sound point file holding all their times
    (a damaged file is set aside by the check). A finished point's leftover checkpoint
    (a run killed between writing the point and dropping it) is removed."""
    todo = []
    for point in points:
        if store.verify_point(point.point_id) and store.complete(point):
            store.drop_checkpoint(point.point_id)
        else:
            todo.append(point)
    return todo


@dataclass
class _Outcome:
    """What the client gathered from the tasks so far (mutable, for run_sweep)."""

    computed: int = 0
    extended: int = 0
    resumed: int = 0
    failed: list[Failure] = field(default_factory=list)
    seconds: list[float] = field(default_factory=list)
    notices: list[str] = field(default_factory=list)
    out_of_space: str | None = None
    not_started: int = 0

    def stop(self, store: RunStore, why: str) -> None:
        if self.out_of_space is None:
            self.out_of_space = f"{store.root} is out of space: {why}"

    def record(self, point: Point, summary: dict, store: RunStore) -> bool:
        """Count one ended task; returns whether the point's file was saved."""
        for notice in summary.get("notices", ()):
            log.warning("point %s: %s", point.index, notice)
            self.notices.append(notice)
        if "failed" not in summary:
            self.computed += 1
            if not summary.get("skipped"):
                self.seconds.append(summary["seconds"])
                self.resumed += bool(summary["resumed"]) and not summary["extended"]
                self.extended += bool(summary["extended"])
            log.info("point %s (%s) done: %s", point.point_id, point.label,
                     {k: v for k, v in summary.items() if k != "notices"})
            return True
        failure = Failure(point, summary["failed"], summary["message"],
                          summary["bad_input"], summary["no_space"])
        self.failed.append(failure)
        log.info("point %s (%s) failed: %s: %s\n%s", point.point_id, point.label,
                 failure.error, failure.message, summary.get("traceback", "").rstrip())
        if failure.no_space:
            self.stop(store, f"point {point.index} could not be written")
        return False


def _submit_and_watch(client, spec: RunSpec, store: RunStore, kernel: Kernel | None,
                      todo: list[Point], bars: _Bars, outcome: _Outcome,
                      interrupted: threading.Event) -> None:
    """Keep one task per worker thread in flight (dearest points first; the thread count
    is read again every SUBMIT_POLL seconds, as workers join or leave) until every point
    has ended, or, once the disk is full, until the running ones have. Raises
    KeyboardInterrupt at the first poll after ``interrupted`` is set."""
    from distributed import wait

    queue = sorted(todo, key=_cost, reverse=True)
    in_flight: dict = {}

    def submit_more() -> None:
        slots = max(1, sum(client.nthreads().values()))
        while queue and len(in_flight) < slots:
            point = queue.pop(0)
            future = client.submit(run_point_task, point, str(store.root), kernel,
                                   spec.checkpoint_seconds, pure=False,
                                   key=f"mpsobs-point-{point.point_id}-{spec.run_id[:8]}")
            in_flight[future] = point
            bars.point_started(point.point_id)

    log.info("submitting %s to %s", plural(len(todo), "point"), client.scheduler.address)
    submit_more()
    while in_flight:
        with contextlib.suppress(TimeoutError):
            wait(list(in_flight), timeout=SUBMIT_POLL, return_when="FIRST_COMPLETED")
        if interrupted.is_set():
            raise KeyboardInterrupt
        for future in [f for f in in_flight if f.done()]:
            point = in_flight.pop(future)
            try:
                summary = future.result()
            except Exception as exc:  # the task itself was lost (e.g. its workers died)
                summary = {"failed": type(exc).__name__, "message": str(exc),
                           "bad_input": False, "no_space": out_of_space(exc),
                           "traceback": "".join(traceback.format_exception(exc))}
            bars.point_finished(point.point_id, outcome.record(point, summary, store))
        if outcome.out_of_space is None:
            submit_more()
    if queue:
        outcome.not_started = len(queue)
        log.info("%s not started: %s", plural(len(queue), "point"), outcome.out_of_space)
