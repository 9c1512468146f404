"""Spec files: validation with key paths (exit code 2, nothing written) and sweep
expansion (cartesian product, zipped axes, store keys and seeds)."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from mpsobs import cli
from mpsobs.core.errors import InputError
from mpsobs.pipeline import build, spec, spec_points, spec_schema
from mpsobs.pipeline.columns import EXTRA, REQUIRED
from mpsobs.pipeline.point import check_points

RUNS = Path(__file__).resolve().parents[1] / "runs"

BASE = """\
name = "tiny"
seed = 1

[model]
name = "xxz"
L = [8, 10]
delta = 0.5

[model.field]
kind = "staggered"
strength = 0.3

[state]
kind = "gas"
box_fraction = [0.0, 0.25]

[evolution]
dt = 0.1
order = 4
chi_max = 16
cutoff = 1e-10

[times]
t_max = 0.4
n_times = 3

[[coarse]]
observable = "number"
block = 2

[[coarse]]
observable = "energy"
block = 2

[estimator]
method = "auto"
samples = 200
"""


def edit(old: str, new: str) -> str:
    assert BASE.count(old) == 1, old
    return BASE.replace(old, new)


def with_evolution(line: str) -> str:
    """BASE with one more line in its [evolution] table."""
    return edit("chi_max = 16", f"chi_max = 16\n{line}")


# (case id, spec text, key path the message must name, a word of the allowed values)
MALFORMED = [
    ("unknown-top-key", 'colour = "red"\n' + BASE, "colour", "allowed"),
    ("unknown-model-key", edit("delta = 0.5", "delta = 0.5\nDelta = 1.0"), "model.Delta",
     "delta"),
    ("key-of-other-model", edit("delta = 0.5", "delta = 0.5\ng = 1.0"), "model.g", "delta"),
    ("dt-wrong-type", edit("dt = 0.1", 'dt = "fast"'), "evolution.dt", "> 0"),
    ("dt-negative", edit("dt = 0.1", "dt = -0.1"), "evolution.dt", "> 0"),
    ("order-3", edit("order = 4", "order = 3"), "evolution.order", "2, 4"),
    ("chi-max-zero", edit("chi_max = 16", "chi_max = 0"), "evolution.chi_max", ">= 1"),
    ("cutoff-above-one", edit("cutoff = 1e-10", "cutoff = 1.5"), "evolution.cutoff", "< 1"),
    ("chi-check-negative", with_evolution("chi_check = -1"), "evolution.chi_check", ">= 0"),
    ("chi-check-float", with_evolution("chi_check = 7.5"), "evolution.chi_check", "integer"),
    ("chi-check-not-below-chi-max", with_evolution("chi_check = 16"), "evolution.chi_check",
     "below evolution.chi_max = 16"),
    ("chi-check-swept-above", with_evolution("chi_check = [8, 32]"), "evolution.chi_check",
     "below evolution.chi_max = 16"),
    ("trust-rtol-negative", with_evolution("trust_rtol = -0.1"), "evolution.trust_rtol",
     ">= 0"),
    ("trust-rtol-above-one", with_evolution("trust_rtol = 2"), "evolution.trust_rtol", "<= 1"),
    ("trust-rtol-list", with_evolution("trust_rtol = [0.01, 0.1]"), "evolution.trust_rtol",
     "cannot be swept"),
    ("model-name", edit('name = "xxz"', 'name = "heisenberg"'), "model.name", "'ising'"),
    ("L-one", edit("L = [8, 10]", "L = 1"), "model.L", ">= 2"),
    ("L-float", edit("L = [8, 10]", "L = [8, 10.5]"), "model.L[1]", "integer"),
    ("L-empty-list", edit("L = [8, 10]", "L = []"), "model.L", "at least one"),
    ("field-kind", edit('kind = "staggered"', 'kind = "spiral"'), "model.field.kind",
     "'random'"),
    ("state-kind", edit('kind = "gas"', 'kind = "vortex"'), "state.kind", "'neel'"),
    ("key-of-other-state", edit('kind = "gas"', 'kind = "gas"\npattern = "01"'),
     "state.pattern", "allowed"),
    ("gas-box-outside", edit("box_fraction = [0.0, 0.25]", "box = [4, 12]"), "state.box",
     "model.L = 8"),
    ("gas-two-boxes", edit("box_fraction = [0.0, 0.25]",
                           "box_fraction = [0.0, 0.25]\nbox = [0, 2]"), "state.box",
     "exactly one"),
    ("gas-too-many", edit("box_fraction = [0.0, 0.25]", "box = [0, 2]\nnumber = 3"),
     "state.number", "2 sites"),
    ("energy-block-larger-than-L", edit('observable = "energy"\nblock = 2',
                                        'observable = "energy"\nblock = 9'),
     "coarse[1].block", "model.L = 8"),
    ("observable", edit('observable = "number"', 'observable = "spin"'),
     "coarse[0].observable", "'fine'"),
    ("bin-width-on-number", edit('observable = "number"\nblock = 2',
                                 'observable = "number"\nblock = 2\nbin_width = 0.5'),
     "coarse[0].bin_width", "energy"),
    ("regions-gap", edit('observable = "number"\nblock = 2',
                         'observable = "number"\nregions = [[0, 4], [5, 8]]'),
     "coarse[0].regions[1]", "contiguous"),
    ("zip-unequal", edit("chi_max = 16", "chi_max = [16, 32, 64]")
     + '\n[sweep]\nzip = [["model.L", "evolution.chi_max"]]\n', "sweep.zip", "equal"),
    ("zip-unknown-axis", BASE + '\n[sweep]\nzip = [["model.L", "evolution.dt"]]\n',
     "sweep.zip[0]", "model.L"),
    ("times-incomplete", edit("n_times = 3", ""), "times", "n_times"),
    ("times-decreasing", edit("t_max = 0.4\nn_times = 3", "values = [0.0, 0.4, 0.2]"),
     "times.values", "increasing"),
    ("target-with-exact", edit('method = "auto"', 'method = "exact"\ntarget_stderr = 0.01'),
     "estimator.target_stderr", "'sample'"),
    ("count-on-energy", edit('method = "auto"', 'method = "count"'), "estimator.method",
     "number"),
    ("samples-zero", edit("samples = 200", "samples = 0"), "estimator.samples", ">= 1"),
    ("checkpoint-negative", BASE + "\n[output]\ncheckpoint_seconds = -1\n",
     "output.checkpoint_seconds", ">= 0"),
    ("no-coarse", BASE.split("[[coarse]]")[0], "coarse", "missing"),
    ("not-toml", BASE + "\n[model\n", "SPEC", "TOML"),
]


@pytest.mark.parametrize("text, path, allowed", [c[1:] for c in MALFORMED],
                         ids=[c[0] for c in MALFORMED])
def test_malformed_spec_exits_2_names_key_and_writes_nothing(tmp_path, capsys, text, path,
                                                             allowed):
    file = tmp_path / "bad.toml"
    file.write_text(text)
    out = tmp_path / "run"
    code = cli.main(["run", str(file), "--out", str(out), "--no-progress"])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert err.startswith(f"mpsobs: error: {path}: ") or err.startswith(
        f"mpsobs: error: {path} "), err
    assert allowed in err
    assert len(err.splitlines()) == 1  # one line, no traceback
    assert not out.exists()
    assert not (Path.cwd() / "mpsobs-runs" / "tiny").exists()


def test_malformed_spec_leaves_existing_directory_as_it_was(tmp_path, capsys):
    out = tmp_path / "run"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    before = sorted((p.name, p.stat().st_mtime_ns) for p in out.iterdir())
    file = tmp_path / "bad.toml"
    file.write_text(edit("dt = 0.1", "dt = 0"))
    assert cli.main(["run", str(file), "--out", str(out)]) == 2
    assert "evolution.dt" in capsys.readouterr().err
    assert sorted((p.name, p.stat().st_mtime_ns) for p in out.iterdir()) == before


def test_parse_errors_are_input_errors():
    with pytest.raises(InputError, match=r"^model\.L\[1\]: expected an integer >= 2"):
        spec.parse({**_base(), "model": {"name": "xxz", "L": [8, 1]}})


def _base() -> dict:
    import tomllib

    return tomllib.loads(BASE)


@pytest.mark.parametrize("method", build.ESTIMATOR_METHODS)
def test_every_estimator_method_is_accepted_and_an_unknown_one_refused(method):
    # the spec parses the method as a string; the builder checks it with the estimators
    data = _base()
    data["estimator"] = {"method": method}
    if method in ("auto", "sample", "sample_strings"):
        data["estimator"]["target_stderr"] = 0.05  # these sample, so a target is allowed
    data["model"]["L"] = 8
    data["coarse"] = [{"observable": "number", "regions": [[0, 4], [4, 8]]}]
    points = spec.parse(data).points
    check_points(points)
    assert points[0].params["estimator"]["method"] == method
    data["estimator"]["method"] = "sample-path"
    with pytest.raises(InputError, match=r"^estimator\.method: .*'sample_strings'"):
        check_points(spec.parse(data).points)


def test_cartesian_product_and_zip():
    data = _base()
    data["evolution"]["chi_max"] = [16, 32]
    data["model"]["field"]["strength"] = [0.1, 0.2, 0.3]
    full = spec.parse(data)
    assert len(full.points) == 2 * 2 * 3
    assert full.axes == (("model.L",), ("model.field.strength",), ("evolution.chi_max",))
    # first axis slowest
    assert [p.columns["L"] for p in full.points] == [8] * 6 + [10] * 6
    data["sweep"] = {"zip": [["model.L", "evolution.chi_max"]]}
    zipped = spec.parse(data)
    assert len(zipped.points) == 2 * 3
    assert {(p.columns["L"], p.columns["chi_max"]) for p in zipped.points} == {(8, 16),
                                                                               (10, 32)}


def test_coarse_lists_give_coarse_grainings_not_points():
    data = _base()
    data["coarse"] = [{"observable": "number", "block": [1, 2, 4]},
                      {"observable": ["energy", "number"], "block": 2,
                       "bin_width": [0.5, 1.0]}]
    run = spec.parse(data)
    assert len(run.points) == 2
    entries = run.points[0].params["coarse"]
    assert [e["block"] for e in entries] == [1, 2, 4, 2, 2]
    assert [e["bin_width"] for e in entries] == [None, None, None, 0.5, 1.0]


def test_point_key_and_seed_depend_on_the_point_only():
    one = spec.parse(_base())
    data = _base()
    data["model"]["L"] = [10]
    data["output"] = {"dir": "elsewhere", "checkpoint_seconds": 5}
    data["name"] = "renamed"
    other = spec.parse(data)
    p10 = next(p for p in one.points if p.columns["L"] == 10)
    (q10,) = other.points
    assert (p10.point_id, p10.seed) == (q10.point_id, q10.seed)
    assert p10.index == 1 and q10.index == 0
    assert len({p.seed for p in one.points}) == len(one.points)
    # output settings and the name do not change the run identity; physics does
    data["model"]["L"] = [8, 10]
    assert spec.parse(data).run_id == one.run_id
    data["evolution"]["dt"] = 0.05
    changed = spec.parse(data)
    assert changed.run_id != one.run_id
    assert changed.points[0].point_id != one.points[0].point_id
    data["evolution"]["dt"] = 0.1
    data["seed"] = 2
    reseeded = spec.parse(data)
    assert reseeded.points[0].seed != one.points[0].seed


def test_defaults_resolved_and_gas_box_in_sites():
    run = spec.parse(_base())
    p8, p10 = run.points
    assert p8.params["state"]["box"] == [0, 2] and p8.params["state"]["number"] == 2
    assert p10.params["state"]["box"] == [0, 3]  # 0.25 * 10 = 2.5 rounds half up
    assert p8.params["model"]["field"]["seed"] == 1  # follows the run seed
    assert p8.params["model"]["J"] == 1.0
    assert p8.params["times"]["values"] == [0.0, 0.2, 0.4]
    # columns hold the box as given, so they do not change along the L scan
    assert p8.columns["box_to"] == p10.columns["box_to"] == 0.25


def test_check_bond_follows_chi_max_and_can_be_swept_or_switched_off():
    data = _base()
    data["evolution"]["chi_max"] = [16, 33]
    run = spec.parse(data)
    assert {(p.columns["chi_max"], p.columns["chi_check"]) for p in run.points} == {
        (16, 8), (33, 16)}  # default chi_max // 2 per point
    # the trusted-time tolerance is an analysis option, not a point parameter
    assert all("trust_rtol" not in p.params["evolution"] for p in run.points)
    data["evolution"].update(chi_max=16, chi_check=[0, 4, 12])
    swept = spec.parse(data)
    assert ("evolution.chi_check",) in swept.axes
    assert sorted({p.columns["chi_check"] for p in swept.points}) == [0, 4, 12]
    assert all("trust_rtol" not in p.columns for p in swept.points)
    off = spec.parse({**data, "evolution": {"chi_max": 1}})  # chi_max // 2 = 0: off
    assert {p.columns["chi_check"] for p in off.points} == {0}


@pytest.mark.parametrize("path", [None, *sorted(RUNS.glob("*.toml"))],
                         ids=lambda p: "default" if p is None else p.name)
def test_shipped_specs_are_valid_and_columns_do_not_collide(path):
    run = spec.load(path)
    assert run.points
    for point in run.points:
        assert "L" in point.columns
        assert not set(point.columns) & (set(REQUIRED) | set(EXTRA) | {"block_size"})


def test_default_spec_copy_in_runs_matches_package_data():
    assert (RUNS / "default.toml").read_text() == spec.default_spec_path().read_text()


def test_missing_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="SPEC: no such file"):
        spec.load(tmp_path / "absent.toml")
    assert not os.listdir(tmp_path)


DISORDER = {
    "name": "disorder", "seed": 3,
    "model": {"name": "xxz", "L": [6, 8], "delta": 1.0,
              "field": {"kind": "random", "strength": 2.0, "seed": [1, 2, 3]}},
    "state": {"kind": "neel"},
    "times": {"t_max": 0.2, "n_times": 3},
    "coarse": [{"observable": "number", "block": 2}],
    "sweep": {"disorder": ["model.field.seed"]},
}


def test_disorder_axis_marks_the_points():
    run = spec.parse(DISORDER)
    assert len(run.points) == 6
    assert all(p.disorder == ("field_seed",) for p in run.points)
    assert run.body["sweep"]["disorder"] == ["model.field.seed"]
    # the marking is not physics: the points keep their store keys
    plain = {k: v for k, v in DISORDER.items() if k != "sweep"}
    assert [p.point_id for p in spec.parse(plain).points] == [p.point_id for p in run.points]
    assert all(p.disorder == () for p in spec.parse(plain).points)


@pytest.mark.parametrize("sweep, field, message", [
    ({"disorder": "model.field.seed"}, {}, "sweep.disorder: expected a list"),
    ({"disorder": ["model.L"]}, {}, r"sweep.disorder\[0\]: 'model.L' cannot be a disorder"),
    ({"disorder": ["state.seed"]}, {}, r"sweep.disorder\[0\]: 'state.seed' is not a sweep"),
    ({"disorder": ["model.field.seed"]}, {"kind": "uniform"},
     r"model.field.kind = 'random'"),
    ({"disorder": ["model.field.seed"], "zip": [["model.L", "model.field.seed"]]},
     {"seed": [1, 2]}, "zipped with model.L"),
    ({"disorder": ["model.field.seed", "model.field.seed"]}, {}, "repeated"),
])
def test_bad_disorder_axes_name_the_key(sweep, field, message):
    data = {**DISORDER, "sweep": sweep,
            "model": {**DISORDER["model"], "field": {**DISORDER["model"]["field"], **field}}}
    with pytest.raises(InputError, match=message):
        spec.parse(data)


def test_fixed_settings_ignore_sweep_values_only():
    run = spec.parse(DISORDER)
    axes = [path for group in run.axes for path in group]
    grown = spec.parse({**DISORDER, "model": {**DISORDER["model"], "L": [6, 8, 10]}})
    assert spec.fixed_settings(run.body, axes) == spec.fixed_settings(grown.body, axes)
    other = spec.parse({**DISORDER, "times": {"t_max": 0.4, "n_times": 3}})
    assert spec.fixed_settings(run.body, axes) != spec.fixed_settings(other.body, axes)


@pytest.mark.parametrize("module", [spec, spec_schema, spec_points])
def test_spec_imports_nothing_numerical_from_the_package(module):
    """The spec is schema and parsing only: of the package its modules import the core
    alone, and each other."""
    import ast

    tree = ast.parse(Path(module.__file__).read_text(encoding="utf-8"))
    imported = {node.module for node in ast.walk(tree)
                if isinstance(node, ast.ImportFrom) and node.module}
    imported |= {alias.name for node in ast.walk(tree) if isinstance(node, ast.Import)
                 for alias in node.names}
    ours = {name for name in imported if name.startswith("mpsobs")}
    spec_modules = {m.__name__ for m in (spec, spec_schema, spec_points)}
    assert ours and all(name.startswith("mpsobs.core.") or name in spec_modules
                        for name in ours), ours


def test_retired_trust_rtol_leaves_body_and_run_identity(caplog):
    data = _base()
    data["evolution"]["trust_rtol"] = 0.2
    with caplog.at_level("WARNING", logger="mpsobs.pipeline.spec"):
        old = spec.parse(data)
    assert "analysis option" in caplog.text or "no longer part of a point" in caplog.text
    new = spec.parse(_base())
    assert "trust_rtol" not in old.body["evolution"]
    assert old.run_id == new.run_id
    assert [p.point_id for p in old.points] == [p.point_id for p in new.points]
    # a run directory written with the key in its stored spec is the same run
    stored = {**old.body, "evolution": {**old.body["evolution"], "trust_rtol": 0.01}}
    axes = [path for group in new.axes for path in group]
    assert spec.fixed_settings(stored, axes) == spec.fixed_settings(new.body, axes)
