"""Cost of the truncation check (the second evolution at bond evolution.chi_check).

For every shipped spec (runs/*.toml) a reduced copy is timed: its first point (the first
value of every sweep list; [sweep] dropped), L capped at --L, the time range cut to the
fraction --time of the original with proportionally fewer output times; estimators,
coarse-grainings and bonds as in the spec. The point runs through
:func:`mpsobs.point.compute_point` with the check switched off (chi_check = 0) and on
(the spec's value, by default chi_max // 2), alternately, --repeat times each; the best
time of each is kept. The thermodynamic reference (a purification for most models) is
computed once per point whatever the check, so it is timed once apart and reused:

    ratio = T(check on) / T(check off)   expected about 1 + (1/2)^3 + one more estimate
                                         per output time and coarse-graining

Printed as well: the evolution alone (mpsobs.chain.evolution.evolve) at chi_max and at chi_check,
and their ratio (the cube law predicts (chi_check / chi_max)^3), and the load average.
Absolute figures on a shared machine are noisy; the ratios less so.

    OPENBLAS_NUM_THREADS=1 python scripts/bench_check.py [--L 24] [--time 0.5] [--repeat 2]
"""

from __future__ import annotations

import argparse
import copy
import os
import time
import tomllib
from pathlib import Path

from mpsobs.chain import evolution as tebd
from mpsobs.chain import models
from mpsobs.core.errors import InputError
from mpsobs.pipeline import point, spec
from mpsobs.pipeline.build import build_model, build_point, equilibrium_seed, initial_state

RUNS = Path(__file__).resolve().parents[1] / "runs"


def reduced(data: dict, max_L: int, fraction: float) -> dict:
    """The first point of a spec as a single-point spec, shorter and at most max_L long."""
    out = copy.deepcopy(data)
    out.pop("sweep", None)
    out.pop("output", None)

    def first(table: dict) -> None:
        for key, value in table.items():
            if isinstance(value, dict):
                first(value)
            elif isinstance(value, list) and key not in ("box", "box_fraction", "values"):
                table[key] = value[0]

    for section in ("model", "state", "evolution", "estimator"):
        first(out.get(section, {}))
    out["seed"] = out.get("seed", 0)
    out["model"]["L"] = min(out["model"]["L"], max_L)
    times = out["times"]
    times["t_max"] = times["t_max"] * fraction
    times["n_times"] = max(2, round(times["n_times"] * fraction))
    return out


def seconds(func, *args) -> float:
    start = time.perf_counter()
    func(*args)
    return time.perf_counter() - start


def evolution(p: spec.Point, bond: int) -> None:
    """The point's evolution alone at ``bond`` (every snapshot taken, nothing estimated)."""
    evo = p.params["evolution"]
    model = build_model(p.params["model"], p.L)
    state = initial_state(p.params["state"], model, evo)
    for _ in tebd.evolve(state, model, p.params["times"]["values"], max_bond=bond,
                           cutoff=evo["cutoff"], dt=evo["dt"], order=evo["order"]):
        pass


def bench(path: Path, max_L: int, fraction: float, repeat: int) -> None:
    data = reduced(tomllib.loads(path.read_text()), max_L, fraction)
    on = spec.parse(data).points[0]
    off = spec.parse({**data, "evolution": {**data.get("evolution", {}),
                                            "chi_check": 0}}).points[0]
    evo, times = on.params["evolution"], on.params["times"]["values"]
    model = build_model(on.params["model"], on.L)
    state = initial_state(on.params["state"], model, evo)
    start = time.perf_counter()
    cgs = build_point(on, cheap_only=True).coarse
    seeds = [equilibrium_seed(on.seed, j) for j in range(len(cgs))]
    reference = point._reference(model, state, models.energy(model, state), cgs, seeds,
                                 evo["chi_max"])
    t_ref = time.perf_counter() - start
    t_off = t_on = e_main = e_check = float("inf")
    original, point._reference = point._reference, lambda *args: reference
    try:   # the reference is computed once per point whatever the check: timed apart
        for _ in range(repeat):   # alternate, so that a change of load hits both
            t_off = min(t_off, seconds(point.compute_point, off))
            t_on = min(t_on, seconds(point.compute_point, on))
            e_main = min(e_main, seconds(evolution, on, evo["chi_max"]))
            e_check = min(e_check, seconds(evolution, on, evo["chi_check"]))
    finally:
        point._reference = original
    print(f"{path.name}: L = {on.L}, chi_max {evo['chi_max']}, chi_check "
          f"{evo['chi_check']}, t = 0..{times[-1]:g} ({len(times)} times), "
          f"{len(on.params['coarse'])} coarse-grainings")
    print(f"  point without its reference: check off {t_off:.2f} s, on {t_on:.2f} s, "
          f"ratio {t_on / t_off:.3f}")
    print(f"  with the reference ({t_ref:.2f} s, once per point): ratio "
          f"{(t_on + t_ref) / (t_off + t_ref):.3f}")
    print(f"  evolution alone: chi_max {e_main:.2f} s, chi_check {e_check:.2f} s, ratio "
          f"{e_check / e_main:.3f} (cube law {(evo['chi_check'] / evo['chi_max'])**3:.3f})")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--L", type=int, default=24, help="largest chain length (24)")
    parser.add_argument("--time", type=float, default=0.5,
                        help="fraction of the spec's time range (0.5)")
    parser.add_argument("--repeat", type=int, default=2, help="timings of each kind (2)")
    args = parser.parse_args()
    print(f"load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores; "
          f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}")
    for path in sorted(RUNS.glob("*.toml")):
        try:
            bench(path, args.L, args.time, args.repeat)
        except InputError as exc:   # e.g. explicit regions that do not fit the shorter chain
            print(f"{path.name}: skipped at L <= {args.L}: {exc}")


if __name__ == "__main__":
    main()
