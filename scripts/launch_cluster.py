"""Run an mpsobs sweep on a SLURM or PBS cluster through dask-jobqueue.

Run this on a login node (or inside a small long-lived job) of the cluster, from a
directory on the shared file system that the compute nodes see::

    python scripts/launch_cluster.py runs/size-scan.toml --system slurm \
        --jobs 4 --cores 16 --memory 32GB --walltime 04:00:00 --queue short \
        --out /scratch/$USER/ising-size-scan

What it does:

1. validates the spec and the run directory (exit code 2 and nothing submitted on bad
   input, as ``mpsobs run``);
2. starts a Dask scheduler here and submits ``--jobs`` batch jobs, each running
   ``--cores`` single-threaded worker processes (one per core, OMP/OPENBLAS/MKL threads
   pinned to 1 in the job script), with the given memory and walltime;
3. runs the sweep against that scheduler, exactly as
   ``mpsobs run SPEC --out DIR --scheduler <address>``: finished points are written by
   the workers into DIR/points, long points checkpoint into DIR/checkpoints, and the
   merged table is DIR/results.parquet;
4. cancels the jobs when the sweep ends (or on Ctrl-C).

If the jobs hit their walltime or this script is stopped, run the same command again:
finished points are skipped and checkpointed points resume. The compute nodes must run
the same Python environment (``--python``, default: this interpreter) with mpsobs
installed. ``--dry-run`` prints the batch script and submits nothing.
"""

from __future__ import annotations

import argparse
import sys

from mpsobs import cli
from mpsobs.core.errors import InputError
from mpsobs.pipeline import spec, store, sweep

SYSTEMS = ("slurm", "pbs")


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="launch_cluster.py",
                                description="Run an mpsobs sweep on SLURM or PBS workers.")
    p.add_argument("spec", metavar="SPEC", help="TOML spec file")
    p.add_argument("--system", choices=SYSTEMS, required=True, help="batch system")
    p.add_argument("--jobs", type=int, default=1, help="batch jobs to submit (default 1)")
    p.add_argument("--cores", type=int, default=8,
                   help="cores per job = worker processes per job (default 8)")
    p.add_argument("--memory", default="16GB", help="memory per job (default 16GB)")
    p.add_argument("--walltime", default="02:00:00", help="walltime per job (HH:MM:SS)")
    p.add_argument("--queue", help="queue / partition")
    p.add_argument("--account", help="account / project to charge")
    p.add_argument("--extra", action="append", default=[], metavar="DIRECTIVE",
                   help="extra batch directive, e.g. --extra='--constraint=cpu' "
                        "(repeatable)")
    p.add_argument("--python", default=sys.executable,
                   help="Python on the compute nodes (default: this interpreter)")
    p.add_argument("--out", help="run directory on the shared file system (default: the "
                                 "spec's output.dir, else ./mpsobs-runs/<name>)")
    p.add_argument("--dry-run", action="store_true", help="print the job script and exit")
    return p


def make_cluster(args):
    """The dask-jobqueue cluster object for ``args`` (no job submitted yet)."""
    from dask_jobqueue import PBSCluster, SLURMCluster

    cls = SLURMCluster if args.system == "slurm" else PBSCluster
    prologue = [f"export {name}={value}" for name, value in sweep.WORKER_ENV.items()]
    return cls(cores=args.cores, processes=args.cores, memory=args.memory,
               walltime=args.walltime, queue=args.queue, account=args.account,
               job_extra_directives=args.extra, job_script_prologue=prologue,
               python=args.python, scheduler_options={"dashboard_address": None})


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    try:
        if args.jobs < 1 or args.cores < 1:
            raise InputError("--jobs, --cores: expected integers >= 1")
        run = spec.load(args.spec)
        out = args.out or str(run.output_dir)
        store.check_target(out, run)
    except InputError as exc:
        print(f"launch_cluster.py: error: {exc}", file=sys.stderr)
        return 2
    cluster = make_cluster(args)
    try:
        if args.dry_run:
            print(cluster.job_script())
            return 0
        cluster.scale(jobs=args.jobs)
        print(f"launch_cluster.py: scheduler {cluster.scheduler_address}; {args.jobs} "
              f"{args.system} job(s) of {args.cores} workers submitted", file=sys.stderr)
        return cli.main(["run", args.spec, "--out", out,
                         "--scheduler", cluster.scheduler_address])
    finally:
        cluster.close()


if __name__ == "__main__":
    sys.exit(main())
