"""The ``mpsobs`` command line.

Commands: ``run`` (compute a spec's sweep into a run directory), ``check`` (validate a
spec and list its points), ``template`` (print the built-in default scenario),
``plot`` and ``scale`` (figures and finite-size-scaling table of a finished run),
``reference`` (the spec keys or the result columns as markdown).

Exit codes: 0 done; 1 some points failed (the others are kept); 2 bad input (spec,
arguments, run directory: nothing is written then; or an InputError raised while
computing a point); 130 interrupted.
"""

from __future__ import annotations

import argparse
import logging
import sys

from mpsobs.core.errors import InputError
from mpsobs.core.version import __version__

__all__ = ["main", "build_parser"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger("mpsobs")


class _Parser(argparse.ArgumentParser):
    """argparse with one-line usage errors ("mpsobs: error: ...", exit code 2)."""

    def error(self, message: str):
        raise InputError(message)


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected an integer >= 1, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected an integer >= 1, got {text!r}")
    return value


def _fraction(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number in (0, 1), got {text!r}") from None
    if not 0.0 < value < 1.0:
        raise argparse.ArgumentTypeError(f"expected a number in (0, 1), got {text!r}")
    return value


def _tolerance(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number in [0, 1], got {text!r}") from None
    if not 0.0 <= value <= 1.0:
        raise argparse.ArgumentTypeError(f"expected a number in [0, 1], got {text!r}")
    return value


def _add_trust_option(parser: argparse.ArgumentParser) -> None:
    from mpsobs.analysis.trust import DEFAULT_TRUST_RTOL

    parser.add_argument("--trust-rtol", type=_tolerance, default=DEFAULT_TRUST_RTOL,
                        metavar="R",
                        help="trusted times: a curve is trusted while its truncation error "
                             "is within R times S_obs (or its sampling error); changing R "
                             f"recomputes nothing (default {DEFAULT_TRUST_RTOL:g})")


def _choice(text: str) -> tuple[str, list[str]]:
    name, sep, values = text.partition("=")
    chosen = [v.strip() for v in values.split(",") if v.strip()]
    if not sep or not name.strip() or not chosen:
        raise argparse.ArgumentTypeError(f"expected NAME=VALUE[,VALUE...], got {text!r}")
    return name.strip(), chosen


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="mpsobs",
        description="Observational entropy of long spin chains after a quench, as "
                    "matrix-product states: run parameter sweeps from TOML spec files, "
                    "then plot and scale the results.")
    parser.add_argument("--version", action="version", version=f"mpsobs {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true",
                        help="log progress details to stderr")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    run = commands.add_parser(
        "run", help="compute the points of a spec into a run directory",
        description="Compute every point of the sweep in SPEC (default: the built-in "
                    "scenario, see `mpsobs template`) on a local Dask cluster or an existing "
                    "scheduler. Rerunning the same spec into the same directory skips the "
                    "finished points and resumes checkpointed ones.")
    run.add_argument("spec", nargs="?", metavar="SPEC", help="TOML spec file")
    run.add_argument("--out", metavar="DIR",
                     help="run directory (default: output.dir of the spec, else "
                          "./mpsobs-runs/<spec name>)")
    run.add_argument("--workers", type=_positive_int, metavar="N",
                     help="local worker processes (default: one per core)")
    run.add_argument("--scheduler", metavar="ADDRESS",
                     help="use a running Dask scheduler, e.g. tcp://10.0.0.5:8786; its "
                          "workers must see the run directory")
    run.add_argument("--no-progress", action="store_true", help="no progress bars")
    run.add_argument("--no-plots", action="store_true", help="skip the figures at the end")

    check = commands.add_parser(
        "check", help="validate a spec and list its points (writes nothing)",
        description="Validate SPEC (default: the built-in scenario) and every one of its "
                    "sweep points (the model, initial state, coarse-grainings and estimator "
                    "settings each point would use; nothing is evolved), then list the "
                    "points with an estimate of their core-hours and peak memory.")
    check.add_argument("spec", nargs="?", metavar="SPEC", help="TOML spec file")

    commands.add_parser(
        "template", help="print the built-in default scenario (a spec to start from)",
        description="Print the built-in default scenario as TOML, e.g. "
                    "`mpsobs template > my-run.toml`.")

    plot = commands.add_parser(
        "plot", help="draw the figures of a run",
        description="Write the entropy, parts and knowledge figures of RUN_DIR/results.parquet "
                    "to RUN_DIR/figures: PNG and PDF (all settings in their metadata) and "
                    "the drawn numbers as CSV.")
    plot.add_argument("run_dir", metavar="RUN_DIR")
    _add_trust_option(plot)
    plot.add_argument("--coarse", action="append", metavar="LABEL",
                      help="draw only this coarse-graining (its label in the table; "
                           "repeat for several)")
    plot.add_argument("--where", action="append", type=_choice, metavar="NAME=V1,V2",
                      help="draw only rows whose parameter NAME takes one of these values, "
                           "e.g. --where L=32,48 (repeat for several parameters)")
    plot.add_argument("--total", action="store_true",
                      help="total entropies instead of entropies per site")
    plot.add_argument("--diagnostics", action="store_true",
                      help="add the entanglement and discarded-weight panels to the "
                           "entropy figure")
    plot.add_argument("--separate", action="store_true",
                      help="one figure per coarse-graining instead of one panel each")

    scale = commands.add_parser(
        "scale", help="finite-size scaling table of a run",
        description="Plateaus, saturation times and their scaling with L from "
                    "RUN_DIR/results.parquet; prints the table and saves it in RUN_DIR.")
    scale.add_argument("run_dir", metavar="RUN_DIR")
    scale.add_argument("--window", type=_fraction, default=0.3, metavar="W",
                       help="late-time share of each curve averaged for the plateau "
                            "(default 0.3)")
    scale.add_argument("--fraction", type=_fraction, default=0.9, metavar="F",
                       help="saturation time = first time the curve reaches this fraction "
                            "of its rise to the plateau (default 0.9)")
    _add_trust_option(scale)

    reference = commands.add_parser(
        "reference", help="print the spec keys or the result columns as markdown",
        description="Print a reference generated from the code: 'keys' (every spec key "
                    "with its type, default, allowed values, unit and description) or "
                    "'columns' (every column of the results table).")
    reference.add_argument("topic", choices=("keys", "columns"), metavar="TOPIC",
                           help="keys or columns")
    return parser


# --------------------------------------------------------------------------- commands


def _cmd_run(args) -> int:
    from mpsobs import workflow
    from mpsobs.pipeline.store import RESULTS_FILE
    from mpsobs.pipeline.sweep import plural

    outcome = workflow.run(args.spec, args.out, workers=args.workers,
                           scheduler=args.scheduler, progress=not args.no_progress,
                           figures=not args.no_plots)
    report = outcome.report
    grown = f" ({report.extended} continued to new times)" if report.extended else ""
    print(f"mpsobs: {plural(report.total, 'point')}: {report.computed} computed{grown}, "
          f"{report.skipped} finished before, {len(report.failed)} failed")
    if not report.table.empty:
        print(f"mpsobs: table {outcome.root / RESULTS_FILE} "
              f"({plural(len(report.table), 'row')})")
    if outcome.figures_skipped:
        print(f"mpsobs: no figures: {outcome.figures_skipped}", file=sys.stderr)
    if outcome.figures:
        print(f"mpsobs: {plural(len(outcome.figures), 'figure file')} in "
              f"{outcome.figures[0].parent}")
    for failure in report.failed:
        kind = "error" if failure.bad_input else failure.error
        print(f"mpsobs: {kind}: point {failure.point.point_id} ({failure.point.label}): "
              f"{failure.message}", file=sys.stderr)
    if report.out_of_space:
        started = (f"; {plural(report.not_started, 'point')} not started"
                   if report.not_started else "")
        print(f"mpsobs: error: {report.out_of_space}{started}; finished points are kept, "
              f"free space and rerun the same command", file=sys.stderr)
    if any(f.bad_input for f in report.failed):
        return 2
    if report.failed or report.out_of_space:
        if not report.out_of_space:
            print("mpsobs: rerun the same command to retry the failed points",
                  file=sys.stderr)
        return 1
    return 0


def _cmd_check(args) -> int:
    from mpsobs import workflow
    from mpsobs.pipeline import cost
    from mpsobs.pipeline.sweep import plural

    spec, costs = workflow.check_with_costs(args.spec)
    axes = ", ".join(" x ".join(group) if len(group) == 1 else "zip(" + ", ".join(group) + ")"
                     for group in spec.axes) or "none"
    print(f"{spec.name}: {plural(len(spec.points), 'point')} (axes: {axes}); run directory "
          f"{spec.output_dir}")
    disorder = spec.points[0].disorder if spec.points else ()
    if disorder:
        print(f"  disorder realizations labelled by {', '.join(disorder)} (averaged over "
              f"by plot and scale)")
    for point in spec.points:
        print(f"  {point.index:4d}  {point.point_id}  {point.label}")
    print("estimated cost (one core; bonds grown to the cap, see mpsobs.pipeline.cost; "
          "a factor 3 either way):")
    for line in cost.format_costs(costs):
        print(f"  {line}")
    return 0


def _cmd_template(args) -> int:
    from mpsobs.pipeline import spec as specs

    sys.stdout.write(specs.default_spec_path().read_text(encoding="utf-8"))
    return 0


def _cmd_plot(args) -> int:
    from mpsobs import workflow

    where: dict[str, list[str]] = {}
    for name, values in args.where or []:
        where.setdefault(name, []).extend(values)
    for path in workflow.plot(args.run_dir, coarse=args.coarse, where=where,
                              per_site=not args.total, diagnostics=args.diagnostics,
                              separate=args.separate, trust_rtol=args.trust_rtol):
        print(path)
    return 0


def _cmd_scale(args) -> int:
    from mpsobs import workflow
    from mpsobs.analysis import scaling

    table = workflow.scale(args.run_dir, window=args.window, fraction=args.fraction,
                           trust_rtol=args.trust_rtol)
    print(scaling.format_table(table))
    print()
    for path in workflow.scale_files(args.run_dir):
        print(f"mpsobs: wrote {path}")
    return 0


def _cmd_reference(args) -> int:
    from mpsobs import workflow

    sys.stdout.write(workflow.reference(args.topic))
    return 0


class _StderrHandler(logging.StreamHandler):
    """The command line's stderr log handler (one, however often main() runs)."""


def _setup_logging(verbose: bool) -> None:
    """mpsobs logs at INFO (for run.log); stderr shows warnings, or INFO with -v."""
    root = logging.getLogger()
    for old in [h for h in root.handlers if isinstance(h, _StderrHandler)]:
        root.removeHandler(old)
    handler = _StderrHandler()
    handler.setLevel(logging.INFO if verbose else logging.WARNING)
    handler.setFormatter(logging.Formatter("mpsobs: %(levelname)s %(name)s: %(message)s"))
    root.addHandler(handler)
    logging.getLogger("mpsobs").setLevel(logging.INFO)


_COMMANDS = {"run": _cmd_run, "check": _cmd_check, "template": _cmd_template,
             "plot": _cmd_plot, "scale": _cmd_scale, "reference": _cmd_reference}


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``mpsobs`` console script; returns the exit code."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
        if args.command is None:
            parser.print_help()
            return 2
        _setup_logging(args.verbose)
        return _COMMANDS[args.command](args)
    except InputError as exc:
        print(f"mpsobs: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("mpsobs: interrupted; finished points are kept, rerun to resume",
              file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
