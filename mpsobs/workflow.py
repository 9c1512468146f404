"""What the ``mpsobs`` commands do, as functions: run a spec, check it, draw the figures
of a run, write its scaling table, print the references of spec keys and columns.

The command line (:mod:`mpsobs.cli`) only parses arguments and prints; everything that
reads or writes a run directory is here, so that Python users get the same behaviour.
Analysis options (plateau window, saturation fraction, the tolerance of trusted times)
are arguments of :func:`plot` and :func:`scale`: they never enter a point's identity and
changing them recomputes nothing.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from mpsobs.analysis import curves, plots, scaling, trust
from mpsobs.core.errors import InputError
from mpsobs.pipeline import build, columns, cost, store, sweep
from mpsobs.pipeline import point as points
from mpsobs.pipeline import spec as specs

__all__ = ["RunOutcome", "run", "check", "costs", "check_with_costs", "plot", "scale",
           "scale_files", "reference", "REFERENCES", "refresh_references"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class RunOutcome:
    """What :func:`run` did: the sweep report, the run directory, the figure files and
    the reason the figures were skipped (None when drawn or not asked for)."""

    report: sweep.SweepReport
    root: Path
    figures: list[Path]
    figures_skipped: str | None = None


def check(spec_path: str | os.PathLike | None) -> specs.RunSpec:
    """Load a spec and check every point's builders (nothing is evolved or written)."""
    spec = specs.load(spec_path)
    points.check_points(spec.points)
    return spec


def costs(spec: specs.RunSpec) -> list[cost.PointCost]:
    """The estimated core-hours and peak memory of every point of a checked spec
    (:mod:`mpsobs.pipeline.cost`; nothing is evolved)."""
    return [cost.point_cost(point) for point in spec.points]


def check_with_costs(spec_path: str | os.PathLike | None
                     ) -> tuple[specs.RunSpec, list[cost.PointCost]]:
    """:func:`check` and :func:`costs` with each point built once (building the
    coarse-grainings of large energy blocks is the expensive part of both)."""
    spec = specs.load(spec_path)
    built = points.check_points(spec.points)
    return spec, [cost.point_cost(point, made)
                  for point, made in zip(spec.points, built, strict=True)]


def run(spec_path: str | os.PathLike | None, out: str | os.PathLike | None = None, *,
        workers: int | None = None, scheduler: str | None = None, progress: bool = True,
        figures: bool = True) -> RunOutcome:
    """Compute the points of a spec into a run directory (default: the spec's
    ``output.dir``), then draw its figures. Everything that can be refused is refused
    before any work and before anything is written (InputError)."""
    spec = specs.load(spec_path)
    root = Path(out) if out else spec.output_dir
    sweep.check_execution(workers, scheduler)
    store.check_target(root, spec)
    points.check_points(spec.points)
    if scheduler is not None:
        sweep.reach_scheduler(scheduler)
    with store.open_run(root, spec) as opened:
        handler = _RunLog(opened.root / store.LOG_FILE)
        logging.getLogger("mpsobs").addHandler(handler)
        try:
            log.info("run %s (%s) into %s: %s", spec.name, spec.source, root,
                     sweep.plural(len(spec.points), "point"))
            try:
                report = sweep.run_sweep(spec, opened, workers=workers,
                                         scheduler=scheduler, kernel=None,
                                         progress=progress)
            except KeyboardInterrupt:
                log.info("interrupted (Ctrl-C or SIGINT); finished points are kept, the "
                         "others resume from their checkpoints on the next run")
                raise
            drawn, skipped = [], None
            if figures and not report.table.empty:
                try:
                    drawn = plot(opened.root)
                except InputError as exc:  # the table is kept; figures are an extra
                    skipped = str(exc)
        finally:
            logging.getLogger("mpsobs").removeHandler(handler)
            handler.close()
    return RunOutcome(report, root, drawn, skipped)


class _RunLog(logging.FileHandler):
    """run.log of a run (INFO and up, appended). A record that cannot be written (a full
    disk) is dropped silently: the console has the one-line report of the run."""

    def __init__(self, path: Path):
        super().__init__(path, encoding="utf-8", delay=True)
        self.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(name)s: "
                                            "%(message)s"))
        self.setLevel(logging.INFO)

    def handleError(self, record: logging.LogRecord) -> None:  # noqa: N802 - logging API
        """Drop the record (no traceback on stderr)."""


def _results(run_dir: str | os.PathLike, trust_rtol: float) -> pd.DataFrame:
    """RUN_DIR/results.parquet with its trusted times at ``trust_rtol``."""
    rtol = trust.check_rtol(trust_rtol, "--trust-rtol")
    return trust.with_trusted_times(curves.read_results(run_dir), rtol)


def plot(run_dir: str | os.PathLike, *, coarse: Sequence[str] | None = None,
         where: Mapping[str, Sequence] | None = None, per_site: bool = True,
         diagnostics: bool = False, separate: bool = False,
         trust_rtol: float = trust.DEFAULT_TRUST_RTOL) -> list[Path]:
    """Figures of RUN_DIR/results.parquet, written to RUN_DIR/figures (PNG and PDF with
    the settings in their metadata, and the drawn numbers as CSV); the options are those
    of :func:`mpsobs.analysis.plots.plot_results`; curves are faint past their trusted
    time at tolerance ``trust_rtol`` (:mod:`mpsobs.analysis.trust`)."""
    return plots.plot_results(_results(run_dir, trust_rtol),
                              store.RunStore(run_dir).figures_dir, coarse=coarse, where=where,
                              per_site=per_site, diagnostics=diagnostics, separate=separate)


def scale_files(run_dir: str | os.PathLike) -> list[Path]:
    """The files :func:`scale` writes: RUN_DIR/scaling.csv, RUN_DIR/scaling.parquet and
    the collapse figure RUN_DIR/figures/collapse.png and .pdf."""
    run_store = store.RunStore(run_dir)
    return [run_store.root / "scaling.csv", run_store.root / "scaling.parquet",
            *plots.figure_files(run_store.figures_dir / "collapse")]


def scale(run_dir: str | os.PathLike, *, window: float = 0.3, fraction: float = 0.9,
          trust_rtol: float = trust.DEFAULT_TRUST_RTOL) -> pd.DataFrame:
    """Scaling table of a run, saved with its collapse figure (:func:`scale_files`).

    See :func:`mpsobs.analysis.scaling.scaling_table` for ``window`` and ``fraction``;
    the trusted times are computed at tolerance ``trust_rtol``
    (:mod:`mpsobs.analysis.trust`). Raises InputError (and writes nothing) for a missing
    table, missing columns or a group with a single L.
    """
    results = _results(run_dir, trust_rtol)
    table = scaling.scaling_table(results, window=window, fraction=fraction)
    figure = plots.collapse_figure(scaling.collapse_curves(results, table))
    csv, parquet, *_ = scale_files(run_dir)
    with store.atomic_write(csv) as tmp:
        table.to_csv(tmp, index=False)
    with store.atomic_write(parquet) as tmp:
        table.to_parquet(tmp, index=False)
    plots.save_figure(figure, store.RunStore(run_dir).figures_dir / "collapse")
    return table


#: The generated references: topic -> function returning markdown.
REFERENCES = {"keys": build.keys_reference, "columns": columns.columns_markdown}


def reference(topic: str) -> str:
    """The markdown reference of ``topic``: "keys" (spec keys, from the schema) or
    "columns" (result and parameter columns)."""
    if topic not in REFERENCES:
        raise InputError(f"TOPIC: expected one of {', '.join(REFERENCES)}, got {topic!r}")
    return REFERENCES[topic]()


#: Marker names of the generated blocks in a markdown file, by topic.
_MARKERS = {"keys": "spec-keys", "columns": "columns"}


def refresh_references(text: str) -> str:
    """``text`` (markdown, e.g. the README) with every generated block replaced by a
    fresh :func:`reference`: the lines between ``<!-- generated: spec-keys -->`` and
    ``<!-- end generated: spec-keys -->`` (likewise ``columns``). A missing marker pair
    is an InputError naming it."""
    for topic, name in _MARKERS.items():
        start, end = f"<!-- generated: {name} -->", f"<!-- end generated: {name} -->"
        head, found, rest = text.partition(start + "\n")
        _, closed, tail = rest.partition(end)
        if not (found and closed):
            raise InputError(f"markers: expected a block between {start!r} and {end!r}")
        text = f"{head}{start}\n{reference(topic)}{end}{tail}"
    return text
