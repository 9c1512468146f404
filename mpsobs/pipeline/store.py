"""The run directory: resolved spec, one Parquet file per finished point, checkpoints,
the merged results table and the lock.

Layout of a run directory::

    spec.json                 resolved spec, run id, mpsobs version, list of points
    points/<point_id>.parquet rows of one finished point (written atomically, with page
                              checksums)
    checkpoints/<point_id>.npz  MPS tensors (main and check states) and progress of an
                              unfinished point; checkpoints/older/<point_id>.npz is the
                              generation before it
    states/<point_id>.npz     the final states and progress of a finished point, from
                              which a longer time grid continues
    damaged/                  files that failed their check when read, set aside (never
                              deleted) with the time they were found in their name
    results.parquet           all finished points merged, in point order
    figures/                  plots of the results (mpsobs.plots)
    run.log                   what the command line did (appended)
    run.lock                  present while a run works on the directory ("pid host")

Every file is written to a temporary name in the same directory, flushed with fsync and
moved into place with :func:`os.replace`, so a reader (or a run killed at any moment)
sees either the old file or the complete new one, never part of one. A point file
exists only for a finished point; it is the point's finished flag. Its Parquet schema
metadata (key ``mpsobs.point``, JSON) holds the point's resolved parameters and, under
``site_fields``, the longitudinal field h_i of every site (site 0 first, units of J), so
that a disorder realization can be rebuilt without mpsobs; the merged table holds the
same per point under the key ``mpsobs.site_fields`` ({point_id: [h_0, ...]}). Every
column of both carries field metadata ``unit`` and ``description``
(:data:`mpsobs.columns.DESCRIPTIONS`), readable with ``pyarrow.parquet.read_schema``.

Nothing read back is trusted blindly. A point file must read completely as Parquet
(magic bytes, footer, page checksums) and name its point; a checkpoint or final state
must pass the CRC check of every member of its zip archive and load. A file that fails
is moved to ``damaged/``, logged once (a warning naming it), and treated as absent: the
point resumes from the older checkpoint generation, or starts afresh.

A run directory may grow: a spec that adds values to its sweep lists (another L, more
disorder seeds, another bond) reuses it, and only the new points are computed; a spec
whose time grid extends the stored one (the same earlier times, more after the last)
continues every finished point from its final state and computes only the new times. A
spec that changes anything else (earlier output times, estimator, coarse-grainings,
couplings that are not swept) would change the physics of the stored points and is
refused.
"""

from __future__ import annotations

import contextlib
import errno
import json
import logging
import os
import socket
import time
import zipfile
import zlib
from collections.abc import Iterator, Sequence
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from mpsobs.core.errors import InputError
from mpsobs.core.printing import short
from mpsobs.core.version import __version__
from mpsobs.pipeline.columns import describe
from mpsobs.pipeline.spec_points import Point, RunSpec, fixed_settings

__all__ = ["RunDirError", "RunStore", "check_target", "open_run", "atomic_write",
           "out_of_space", "SPEC_FILE", "RESULTS_FILE", "LOCK_FILE", "LOG_FILE"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)

SPEC_FILE = "spec.json"
RESULTS_FILE = "results.parquet"
LOCK_FILE = "run.lock"
LOG_FILE = "run.log"
POINTS_DIR = "points"
CHECKPOINTS_DIR = "checkpoints"
#: Sub-folder of CHECKPOINTS_DIR with the generation before the last checkpoint.
OLDER_DIR = "older"
STATES_DIR = "states"
DAMAGED_DIR = "damaged"
FIGURES_DIR = "figures"
#: A lock file left empty for longer than this (seconds) is treated as stale.
EMPTY_LOCK_AGE = 10.0
_META_KEY = b"mpsobs.point"
#: Layout of checkpoint files: tensors of one or more states, named
#: ``state<s>_tensor_<i>``; files of another (older) layout are ignored and the point
#: starts afresh.
CHECKPOINT_FORMAT = 2
_FIELDS_KEY = b"mpsobs.site_fields"
#: How point keys are made (spec.json ``identity``): 2 = the resolved point without its
#: time grid; records without the key hashed the time grid too.
IDENTITY = 2
#: Key of a point frame's ``attrs`` holding its per-site field values (set by the kernel).
SITE_FIELDS_ATTR = "site_fields"


class RunDirError(InputError):
    """The run directory cannot be used: another run's directory, or in use."""


#: errno values of a full file system or an exhausted quota.
_NO_SPACE = (errno.ENOSPC, errno.EDQUOT)
#: What reading a damaged zip archive (``.npz``) can raise.
_ZIP_ERRORS = (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile, zlib.error)


def out_of_space(exc: BaseException) -> bool:
    """Whether ``exc`` says that the file system (or the quota) is full."""
    return isinstance(exc, OSError) and exc.errno in _NO_SPACE


# --------------------------------------------------------------------------- atomic files


def _fsync_dir(path: Path) -> None:
    with contextlib.suppress(OSError):  # not every file system lets a directory be synced
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


@contextlib.contextmanager
def atomic_write(path: Path) -> Iterator[Path]:
    """Yield a temporary path next to ``path``; on success fsync it and move it into
    place with os.replace (readers see the old or the whole new file), else remove it.

    The temporary name starts with a dot and ends with ``.tmp``, so globs for the final
    suffix never see it.
    """
    path = Path(path)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{time.monotonic_ns()}.tmp")
    try:
        yield tmp
        fd = os.open(tmp, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
        os.replace(tmp, path)
    finally:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
    _fsync_dir(path.parent)


def _write_json(path: Path, obj) -> None:
    with atomic_write(path) as tmp:
        tmp.write_text(json.dumps(obj, indent=1) + "\n", encoding="utf-8")


def _described(table: pa.Table) -> pa.Table:
    """The table with ``unit`` and ``description`` metadata on every described column."""
    fields = []
    for column in table.schema:
        info = describe(column.name)
        if info is not None:
            column = column.with_metadata({b"unit": info[0].encode(),
                                           b"description": info[1].encode()})
        fields.append(column)
    return table.cast(pa.schema(fields, metadata=table.schema.metadata))


def _write_parquet(path: Path, frame: pd.DataFrame, metadata: dict | None = None) -> None:
    table = _described(pa.Table.from_pandas(frame, preserve_index=False))
    if metadata:
        merged = dict(table.schema.metadata or {})
        merged.update({k.encode() if isinstance(k, str) else k: v.encode()
                       for k, v in metadata.items()})
        table = table.replace_schema_metadata(merged)
    with atomic_write(path) as tmp:
        pq.write_table(table, tmp, write_page_checksum=True)


# --------------------------------------------------------------------------- identity


def _read_spec_file(root: Path) -> dict | None:
    file = root / SPEC_FILE
    if not file.exists():
        return None
    try:
        return json.loads(file.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise RunDirError(f"--out: {file} is unreadable ({exc}); it is not a usable mpsobs "
                          f"run directory") from None


def check_target(root: Path, spec: RunSpec) -> None:
    """Raise RunDirError unless ``root`` is absent, empty, a run of this same spec, or a
    run that this spec grows (:func:`mpsobs.spec.fixed_settings` equal apart from the
    values of sweep axes and output times after the stored ones, so the stored points
    keep their physics).

    Reads only; writes nothing.
    """
    root = Path(root)
    if not root.exists():
        _check_creatable(root)
        return
    if not root.is_dir():
        raise RunDirError(f"--out: {root} exists and is not a directory")
    stored = _read_spec_file(root)
    if stored is None:
        if any(entry.name != LOCK_FILE for entry in root.iterdir()):
            raise RunDirError(f"--out: {root} is not empty and holds no mpsobs run "
                              f"({SPEC_FILE} missing); choose an empty or new directory")
        return
    if stored.get("run_id") == spec.run_id:
        return
    _check_time_grid(root, stored, spec)
    changed = _changed_settings(stored, spec)
    if changed:
        raise RunDirError(
            f"--out: {root} holds another run (spec {stored.get('name')!r} from "
            f"{stored.get('source')}) whose points differ from this spec's in "
            f"{', '.join(changed)}, which are not sweep axes; its results would mix with "
            f"this spec's. Add values to sweep lists only, or choose another directory "
            f"(--out or output.dir)")


def _changed_settings(stored: dict, spec: RunSpec) -> list[str]:
    """Paths of the settings outside the sweep axes that differ between the stored run
    and ``spec`` (all of them, as ["the spec"], for a record without its axes)."""
    if "axes" not in stored or "spec" not in stored:  # written before runs could grow
        return ["the spec"]
    axes = {*stored["axes"], *(path for group in spec.axes for path in group)}
    old, new = fixed_settings(stored["spec"], axes), fixed_settings(spec.body, axes)
    if "times" in old and "times" in new:  # checked by _check_time_grid
        del old["times"], new["times"]
    paths = sorted({*_leaves(old), *_leaves(new)})
    return [path for path in paths if _leaves(old).get(path) != _leaves(new).get(path)]


def _check_time_grid(root: Path, stored: dict, spec: RunSpec) -> None:
    """RunDirError unless the spec's output times extend the stored run's: the same
    earlier times, possibly more after the last."""
    before = stored.get("spec", {}).get("times", {}).get("values")
    after = spec.body["times"]["values"]
    if before is None or after[:len(before)] == before:
        return
    shown = ", ".join(f"{t:g}" for t in before[:6]) + (", ..." if len(before) > 6 else "")
    raise RunDirError(
        f"--out: {root} holds a run whose points differ from this spec's in times.values "
        f"(stored: [{shown}]); a run may only add times after its last one "
        f"(t = {before[-1]:g}): keep "
        f"times.values as stored, or keep dt = t_max / (n_times - 1) and raise t_max, or "
        f"choose another directory (--out or output.dir)")


def _leaves(obj, prefix: str = "") -> dict[str, object]:
    """Nested tables flattened to {key path: value} (lists are values)."""
    if not isinstance(obj, dict):
        return {prefix: obj}
    out: dict[str, object] = {}
    for key, value in obj.items():
        out.update(_leaves(value, f"{prefix}.{key}" if prefix else key))
    return out


def _check_creatable(root: Path) -> None:
    """RunDirError unless the missing directory ``root`` can be made: its nearest
    existing ancestor is a writable directory. Reads only."""
    parent = root.absolute().parent
    while not parent.exists():
        parent = parent.parent
    if not parent.is_dir() or not os.access(parent, os.W_OK | os.X_OK):
        raise RunDirError(f"--out: cannot create {root}: {parent} is not a writable "
                          f"directory")


def _unwritable(root: Path, exc: OSError) -> RunDirError:
    """The RunDirError for a run directory where a file cannot be written."""
    if out_of_space(exc):
        return RunDirError(f"--out: {root} is out of space ({exc.strerror}); free space "
                           f"and rerun")
    return RunDirError(f"--out: cannot write in {root} ({exc.strerror or exc})")


def _make_dir(root: Path) -> None:
    try:
        root.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise RunDirError(f"--out: cannot create {root} ({exc.strerror or exc})") from None


# --------------------------------------------------------------------------- lock


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _take_lock(path: Path) -> None:
    """Create the lock file exclusively with "pid host"; replace it if it is stale."""
    me = f"{os.getpid()} {socket.gethostname()}\n"
    for _ in range(2):
        try:
            fd = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            if not _stale(path):
                holder = path.read_text(errors="replace").strip() or "unknown"
                raise RunDirError(
                    f"--out: {path.parent} is in use by another mpsobs run (process "
                    f"{holder}); wait for it to finish. If that process is gone, remove "
                    f"{path}") from None
            log.warning("removing stale lock %s", path)
            with contextlib.suppress(FileNotFoundError):
                path.unlink()
            continue
        with os.fdopen(fd, "w") as handle:
            handle.write(me)
            handle.flush()
            os.fsync(handle.fileno())
        return
    raise RunDirError(f"--out: could not take the lock {path}; another run started at the "
                      f"same moment")


def _stale(path: Path) -> bool:
    """A lock is stale if it names a dead process on this host, or stayed empty."""
    try:
        text = path.read_text(errors="replace").split()
        age = time.time() - path.stat().st_mtime
    except FileNotFoundError:
        return True
    if len(text) < 2 or not text[0].isdigit():
        return age > EMPTY_LOCK_AGE
    pid, host = int(text[0]), text[1]
    return host == socket.gethostname() and not _pid_alive(pid)


# --------------------------------------------------------------------------- store


class RunStore:
    """Files of one run directory. Workers use it too (point files and checkpoints);
    only the client that holds the lock writes the spec and the merged table.

    ``notices`` collects one line per damaged file this store set aside.
    """

    def __init__(self, root: str | Path):
        self.root = Path(root)
        self.notices: list[str] = []

    def __repr__(self) -> str:
        return f"RunStore({str(self.root)!r})"

    @property
    def points_dir(self) -> Path:
        return self.root / POINTS_DIR

    @property
    def checkpoints_dir(self) -> Path:
        return self.root / CHECKPOINTS_DIR

    @property
    def states_dir(self) -> Path:
        return self.root / STATES_DIR

    @property
    def damaged_dir(self) -> Path:
        return self.root / DAMAGED_DIR

    @property
    def figures_dir(self) -> Path:
        return self.root / FIGURES_DIR

    @property
    def results_path(self) -> Path:
        return self.root / RESULTS_FILE

    def point_path(self, point_id: str) -> Path:
        return self.points_dir / f"{point_id}.parquet"

    def checkpoint_path(self, point_id: str) -> Path:
        return self.checkpoints_dir / f"{point_id}.npz"

    def older_checkpoint_path(self, point_id: str) -> Path:
        return self.checkpoints_dir / OLDER_DIR / f"{point_id}.npz"

    def final_state_path(self, point_id: str) -> Path:
        return self.states_dir / f"{point_id}.npz"

    # damaged files -----------------------------------------------------------------

    def set_aside(self, path: Path, reason: str) -> None:
        """Move a damaged file to ``damaged/`` (its name, then the UTC time it was found),
        log it (INFO) and add that line to ``notices``, which the owner of the console
        reports (:func:`mpsobs.pipeline.sweep.run_sweep`: a warning each)."""
        stamp = time.strftime("%Y%m%dT%H%M%SZ", time.gmtime())
        target = self.damaged_dir / f"{path.name}.{stamp}.{time.monotonic_ns() % 10**6}"
        try:
            self.damaged_dir.mkdir(parents=True, exist_ok=True)
            os.replace(path, target)
        except FileNotFoundError:  # another reader set it aside first
            return
        notice = (f"damaged file {path.relative_to(self.root)} ({reason}) moved to "
                  f"{target.relative_to(self.root)}")
        log.info("%s", notice)
        self.notices.append(notice)

    # points ------------------------------------------------------------------------

    def finished(self, point_id: str) -> bool:
        return self.point_path(point_id).exists()

    def complete(self, point: Point) -> bool:
        """Whether the point's file holds all of its times (a file of a shorter time grid
        is finished but not complete: the point continues from its final state)."""
        if not self.finished(point.point_id):
            return False
        stored = self.point_metadata(point.point_id).get("params", {}).get("times", {})
        return stored.get("values") == point.params["times"]["values"]

    def write_point(self, point: Point, frame: pd.DataFrame) -> Path:
        """Write a finished point's rows atomically (with its parameters as metadata)."""
        self.points_dir.mkdir(parents=True, exist_ok=True)
        meta = {"point_id": point.point_id, "index": point.index, "seed": point.seed,
                "label": point.label, "params": point.params, "mpsobs_version": __version__,
                "site_fields": frame.attrs.get(SITE_FIELDS_ATTR)}
        path = self.point_path(point.point_id)
        _write_parquet(path, frame, {_META_KEY.decode(): json.dumps(meta)})
        log.debug("point %s written (%d rows)", point.point_id, len(frame))
        return path

    def read_point(self, point_id: str) -> pd.DataFrame:
        return pd.read_parquet(self.point_path(point_id))

    def point_metadata(self, point_id: str) -> dict:
        """The ``mpsobs.point`` metadata of a finished point (parameters, site fields)."""
        raw = pq.read_schema(self.point_path(point_id)).metadata or {}
        return json.loads(raw[_META_KEY]) if _META_KEY in raw else {}

    def verify_point(self, point_id: str) -> bool:
        """Read the point file completely (format, page checksums, its point id); set it
        aside if that fails. Returns whether a sound file is there."""
        return self._read_verified(point_id) is not None

    def _read_verified(self, point_id: str) -> pa.Table | None:
        """The point file's table, or None (absent; damaged: set aside)."""
        path = self.point_path(point_id)
        if not path.exists():
            return None
        try:
            table = pq.read_table(path, page_checksum_verification=True)
            stored = json.loads((table.schema.metadata or {})[_META_KEY]).get("point_id")
            if stored != point_id:
                raise ValueError(f"it holds point {stored!r}")
        except (OSError, ValueError, KeyError, pa.ArrowException) as exc:
            self.set_aside(path, _reason(exc))
            return None
        return table

    # checkpoints and final states ----------------------------------------------------

    def save_checkpoint(self, point_id: str, states: Sequence[Sequence[np.ndarray]],
                        meta: dict) -> None:
        """Atomically store an unfinished point's MPS tensors, one list per state (the
        main state, then the check state when there is one), and its progress ``meta``
        (JSON-serialisable: time, cumulative discarded weights, initial energy, rows).
        The checkpoint it replaces becomes the older generation."""
        path = self.checkpoint_path(point_id)
        older = self.older_checkpoint_path(point_id)
        older.parent.mkdir(parents=True, exist_ok=True)
        with contextlib.suppress(FileNotFoundError):
            os.replace(path, older)
        _write_npz(path, states, meta)

    def load_checkpoint(self, point_id: str) -> tuple[list[list[np.ndarray]], dict] | None:
        """The last sound checkpoint of a point (tensors per state, meta): the newest
        generation, else the older one, else None. A damaged file is set aside
        (:meth:`set_aside`); one of an older layout is logged and ignored."""
        for path in (self.checkpoint_path(point_id), self.older_checkpoint_path(point_id)):
            loaded = self._load_npz(path)
            if loaded is not None:
                return loaded
        return None

    def drop_checkpoint(self, point_id: str) -> None:
        for path in (self.checkpoint_path(point_id), self.older_checkpoint_path(point_id)):
            with contextlib.suppress(FileNotFoundError):
                path.unlink()

    def save_final_state(self, point_id: str, states: Sequence[Sequence[np.ndarray]],
                         meta: dict) -> None:
        """Store a finished point's final states and progress (the checkpoint after its
        last time), from which a longer time grid continues."""
        _write_npz(self.final_state_path(point_id), states, meta)

    def load_final_state(self, point_id: str) -> tuple[list[list[np.ndarray]], dict] | None:
        """The final states of a finished point, or None (absent, damaged: set aside)."""
        return self._load_npz(self.final_state_path(point_id))

    def _load_npz(self, path: Path) -> tuple[list[list[np.ndarray]], dict] | None:
        if not path.exists():
            return None
        try:
            with np.load(path, allow_pickle=False) as data:
                if "format" not in data.files or int(data["format"]) != CHECKPOINT_FORMAT:
                    log.warning("ignoring checkpoint %s of another layout; the point "
                                "starts afresh", path)
                    return None
                states: dict[str, list[np.ndarray]] = {}
                for name in sorted(n for n in data.files if n.startswith("state")):
                    states.setdefault(name.split("_")[0], []).append(data[name])
                meta = json.loads(str(data["meta"]))
        except _ZIP_ERRORS as exc:
            self.set_aside(path, _reason(exc))
            return None
        return list(states.values()), meta

    def remove_temporaries(self) -> None:
        """Delete temporary files left by writers that were killed (call only while
        holding the lock, before workers start)."""
        for folder in (self.root, self.points_dir, self.checkpoints_dir,
                       self.checkpoints_dir / OLDER_DIR, self.states_dir):
            if folder.is_dir():
                for tmp in folder.glob(".*.tmp"):
                    with contextlib.suppress(FileNotFoundError):
                        tmp.unlink()

    # merged table ------------------------------------------------------------------

    def merge(self, points: Sequence[Point]) -> pd.DataFrame:
        """Concatenate the finished points (in point order) into results.parquet; a
        damaged point file is set aside and left out.

        Returns the merged table (empty if no point has finished).
        """
        frames, site_fields = [], {}
        for point in points:
            table = self._read_verified(point.point_id)
            if table is None or not table.num_rows:
                continue
            frame = table.to_pandas()
            if "disorder_axes" in frame:  # as the current spec marks them
                frame["disorder_axes"] = ",".join(point.disorder)
            frames.append(frame)
            site_fields[point.point_id] = json.loads(
                table.schema.metadata[_META_KEY]).get("site_fields")
        merged = (pd.concat(frames, ignore_index=True) if frames else pd.DataFrame())
        if frames:
            _write_parquet(self.results_path, merged,
                           {_FIELDS_KEY.decode(): json.dumps(site_fields)})
        return merged


def _warn_rekeyed(root: Path, before: dict, spec: RunSpec) -> None:
    """Warn when stored points carry keys of the earlier identity (time grid hashed)."""
    ids = {p.point_id for p in spec.points}
    old = [p for p in before.get("points", []) if p.get("point_id") not in ids]
    if old:
        log.warning("%s: %d stored point(s) were keyed by an earlier mpsobs (the time "
                    "grid was part of a point's key); they are computed again (their files "
                    "stay in %s/)", root, len(old), POINTS_DIR)


def _reason(exc: BaseException) -> str:
    """A one-line reason from a read error."""
    text = str(exc).strip().splitlines()
    return short(f"{type(exc).__name__}: {text[0]}" if text else type(exc).__name__, 160)


def _write_npz(path: Path, states: Sequence[Sequence[np.ndarray]], meta: dict) -> None:
    """States (tensors ``state<s>_tensor_<i>``), layout number and JSON ``meta`` as one
    atomically written ``.npz`` (zip members carry CRC-32 checksums)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    arrays = {f"state{s:02d}_tensor_{i:05d}": np.asarray(t)
              for s, tensors in enumerate(states) for i, t in enumerate(tensors)}
    arrays["format"] = np.array(CHECKPOINT_FORMAT)
    arrays["meta"] = np.array(json.dumps(meta))
    with atomic_write(path) as tmp:
        with open(tmp, "wb") as handle:
            np.savez(handle, **arrays)


def _spec_record(spec: RunSpec, before: dict | None = None) -> dict:
    """The spec.json record; ``before`` is the record of the run this spec grows."""
    now = time.strftime("%Y-%m-%dT%H:%M:%S%z")
    history = [] if before is None else [*before.get("history", []), {
        key: before.get(key) for key in ("run_id", "name", "source", "updated", "created")}]
    return {"run_id": spec.run_id, "identity": IDENTITY, "name": spec.name,
            "source": spec.source,
            "mpsobs_version": __version__,
            "created": now if before is None else before.get("created", now),
            "updated": now, "history": history,
            "axes": [path for group in spec.axes for path in group],
            "spec": spec.body,
            "points": [{"index": p.index, "point_id": p.point_id, "seed": p.seed,
                        "label": p.label} for p in spec.points]}


@contextlib.contextmanager
def open_run(root: str | Path, spec: RunSpec) -> Iterator[RunStore]:
    """Create (or reopen) the run directory of ``spec`` and hold its lock.

    Refuses (RunDirError) a directory of another run or one locked by a live process;
    a lock left by a dead process on this host is replaced. The spec is written when the
    directory is new and rewritten when ``spec`` grows the stored run (the earlier run
    ids are kept in its ``history``).
    """
    root = Path(root)
    check_target(root, spec)
    _make_dir(root)
    lock = root / LOCK_FILE
    try:
        _take_lock(lock)
    except OSError as exc:
        raise _unwritable(root, exc) from None
    try:
        check_target(root, spec)  # another run may have claimed it meanwhile
        before = _read_spec_file(root)
        if before is not None and before.get("identity") != IDENTITY:
            _warn_rekeyed(root, before, spec)
        if (before is None or before.get("run_id") != spec.run_id
                or before.get("identity") != IDENTITY):
            if before is not None and before.get("run_id") != spec.run_id:
                log.info("growing the run in %s (run id %s -> %s)", root,
                         before.get("run_id", "?")[:12], spec.run_id[:12])
            try:
                _write_json(root / SPEC_FILE, _spec_record(spec, before))
            except OSError as exc:
                raise _unwritable(root, exc) from None
        store = RunStore(root)
        store.remove_temporaries()
        yield store
    finally:
        with contextlib.suppress(FileNotFoundError):
            lock.unlink()
