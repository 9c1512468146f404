"""Figures of a run render from a small synthetic table (mpsobs.synthetic).

Files are checked for existence, size and format magic bytes (PNG signature from the
PNG specification, ISO/IEC 15948; "%PDF-" header from ISO 32000), never against
stored images.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_rgba

from mpsobs import workflow
from mpsobs.analysis import plots
from mpsobs.analysis.synthetic import SaturationLaw, saturating_results
from mpsobs.core.errors import InputError

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
PDF_MAGIC = b"%PDF-"
LAWS = {"number@b2": SaturationLaw(s_inf=0.55, c=-0.8, tau0=0.5, z=1.0),
        "energy@b2": SaturationLaw(s_inf=0.6, c=-0.5, tau0=0.3, z=1.0, s_initial=0.2)}


def _results(**parameters) -> pd.DataFrame:
    return saturating_results((6, 10), np.linspace(0.0, 30.0, 31), LAWS, stderr=0.02,
                              seed=5, parameters=parameters)


def _check_files(paths) -> None:
    for path in [p for p in paths if p.suffix != ".csv"]:
        data = path.read_bytes()
        assert len(data) > 1000, path
        assert data[:8] == PNG_MAGIC if path.suffix == ".png" else data[:5] == PDF_MAGIC


def test_plot_run_writes_one_set_per_parameter_value(tmp_path):
    results = _results(Delta=[0.5, 1.0])
    results["block_size"] = 2  # fixed by the coarse-graining: no figures of its own
    results.to_parquet(tmp_path / "results.parquet")
    paths = workflow.plot(tmp_path)
    names = sorted(p.name for p in paths)
    expected = sorted(f"{kind}_Delta={delta}{suffix}"
                      for kind in ("entropy", "parts", "knowledge")
                      for delta in (0.5, 1.0) for suffix in (".png", ".pdf", ".csv"))
    assert names == expected
    assert all(p.parent == tmp_path / "figures" for p in paths)
    _check_files(paths)


def test_single_parameter_set_and_single_length(tmp_path):
    results = _results()
    results = results[results.L == 6]
    paths = plots.plot_results(results, tmp_path)
    assert sorted(p.name for p in paths) == sorted(
        f"{kind}{suffix}" for kind in ("entropy", "parts", "knowledge")
        for suffix in (".png", ".pdf", ".csv"))
    _check_files(paths)


def test_panels_per_coarse_graining_single_column_width_and_shared_colours():
    results = _results()
    colors = plots.length_colors(results.L)
    assert len(set(colors.values())) == len(colors)
    for make, extra in ((plots.entropy_figure, 2), (plots.parts_figure, 0),
                        (plots.knowledge_figure, 0)):
        fig = make(results, colors)
        visible = [ax for ax in fig.axes if ax.get_visible()]
        assert len(visible) == len(LAWS) + extra  # entropy: entanglement, discarded weight
        panels = visible[:len(LAWS)]
        assert fig.get_size_inches()[0] == pytest.approx(plots.PANEL_WIDTH)
        assert "1/J" in visible[-1].get_xlabel()
        assert all("nats" in ax.get_ylabel() for ax in panels)
        # the legend maps each L to its colour, the same in every figure
        legend = fig.legends[0]
        for handle, text in zip(legend.legend_handles, legend.get_texts(), strict=True):
            L = int(text.get_text().strip("$").split("=")[1])
            assert to_rgba(handle.get_color()) == to_rgba(colors[L])
        # every curve of a panel is drawn in the colour of one of the lengths
        line_colors = {to_rgba(line.get_color()) for line in panels[0].lines}
        assert {to_rgba(c) for c in colors.values()} <= line_colors


def test_panel_titles_name_coarse_graining_and_parameter_values():
    results = _results(Delta=[0.5, 1.0])
    rows = results[results.Delta == 1.0]
    fig = plots.entropy_figure(rows, shown=["Delta"])
    titles = sorted(ax.get_title() for ax in fig.axes if ax.get_title())
    assert titles == sorted(f"{cg} (Delta = 1.0)" for cg in LAWS)
    # with no parameter given, the ones varying in the rows get panels of their own
    assert len(plots.knowledge_figure(results).axes) == 2 * len(LAWS)


def test_long_panel_titles_are_wrapped_inside_the_panel():
    # a wide-region title with its resolution is longer than a panel: wrapped, not cut
    key = {"coarse_graining": "energy:r0-16,16-32,dE1,N128,D64"}
    title = plots.panel_title(key, [])
    assert "\n" in title
    assert max(len(line) for line in title.splitlines()) <= plots.TITLE_WIDTH
    assert title.replace("\n", " ") == plots.coarse_graining_title(key["coarse_graining"])


def test_missing_column_is_named(tmp_path):
    results = _results().drop(columns=["S_ent_half"])
    with pytest.raises(InputError, match="S_ent_half"):
        plots.plot_results(results, tmp_path)
    assert not any(tmp_path.iterdir())
    with pytest.raises(InputError, match="run_dir"):
        workflow.plot(tmp_path / "missing")


def _caption(fig) -> str:
    return fig.legends[0].get_title().get_text()


def test_figures_carry_a_caption_of_the_fixed_parameters(tmp_path):
    results = _results(model=["xxz"], delta=[0.5], chi_max=[64], dt=[0.05],
                       estimator=["auto"], Delta=[0.5, 1.0])
    rows = results[results.Delta == 1.0]
    for make in (plots.entropy_figure, plots.parts_figure, plots.knowledge_figure):
        fig = make(rows, shown=["Delta"])
        text = _caption(fig).replace("\n", " ")
        for part in ("model=xxz", "delta=0.5"):
            assert part in text, (part, text)
        assert "Delta" not in text and "L=" not in text  # in the panel titles / legend
        # numerical settings are kept in the files' metadata, not the caption
        settings = json.loads(plots.figure_metadata(rows, "t", ["Delta"])["settings"])
        for name, value in (("chi_max", 64), ("dt", 0.05), ("estimator", "auto")):
            assert f"{name}=" not in text and settings[name] == value
    paths = plots.save_figure(plots.entropy_figure(rows, shown=["Delta"]), tmp_path / "e")
    _check_files(paths)


def test_entanglement_and_discarded_weight_have_their_own_panels():
    results = _results()
    fig = plots.entropy_figure(results)
    ent_ax, weight_ax = fig.axes[-2:]
    assert "ent" in ent_ax.get_ylabel() and weight_ax.get_yscale() == "log"
    first = results[results.coarse_graining == sorted(LAWS)[0]]
    for line, (L, curve) in zip(ent_ax.lines, first.groupby("L"), strict=True):
        assert np.allclose(line.get_ydata(), curve.sort_values("t").S_ent_half / L)
    for ax in fig.axes[:len(LAWS)]:  # no entanglement curves among the S_obs curves
        assert len(ax.lines) == 2 * 2 + 1  # per L: S_obs, S_thermo; then ln 2


def test_disorder_mean_is_drawn_with_its_error():
    results = saturating_results((6, 10), np.linspace(0.0, 30.0, 31), LAWS, stderr=0.02,
                                 seed=5, realizations=5, disorder_sd=0.05)
    fig = plots.entropy_figure(results)
    assert "disorder mean over 5 realizations of field_seed" in _caption(fig).replace(
        "\n", " ")
    label = list(LAWS)[0]  # the first panel: spec order
    rows = results[(results.coarse_graining == label) & (results.L == 6)]
    mean = rows.groupby("t").S_obs.mean().to_numpy() / 6
    assert np.allclose(fig.axes[0].lines[0].get_ydata(), mean)
    assert len(fig.legends[0].legend_handles) == 2  # one entry per L, not per seed


def test_truncation_and_equilibrium_columns_are_drawn():
    laws = {"number@b2": SaturationLaw(s_inf=0.55, c=-0.8, tau0=0.5, z=1.0, s_eq=0.6)}
    results = saturating_results((6, 10), np.linspace(0.0, 30.0, 31), laws, stderr=0.02,
                                 seed=5, trusted_until=20.0)
    fig = plots.entropy_figure(results)
    ax = fig.axes[0]
    faint = [line for line in ax.lines if line.get_alpha() == plots.UNTRUSTED_ALPHA]
    assert len(faint) == 2 and all(line.get_xdata()[0] == 20.0 for line in faint)
    eq_lines = [line for line in ax.lines if np.allclose(line.get_ydata(), 0.6)]
    assert len(eq_lines) == 2
    # the axis shows the trusted part: the curve that goes wrong later leaves it
    assert ax.get_ylim()[0] > results.S_obs.min() / 6
    styles = [t.get_text() for t in fig.legends[1].get_texts()]
    assert any("Gibbs" in t for t in styles) and any("truncation" in t for t in styles)
    knowledge = plots.knowledge_figure(results).axes[0]
    target = [line for line in knowledge.lines if np.allclose(line.get_ydata(),
                                                              np.log(2.0) - 0.6)]
    assert len(target) == 2  # (S_max - S_obs_eq)/L per L


def test_collapse_log_axis_has_labelled_ticks_within_a_decade():
    from mpsobs.analysis import scaling

    results = _results()
    table = scaling.scaling_table(results)
    fig = plots.collapse_figure(scaling.collapse_curves(results, table))
    fig.canvas.draw()
    ax = fig.axes[0]
    ax.set_xlim(0.3, 2.5)  # less than a decade
    fig.canvas.draw()
    labels = [t.get_text() for t in ax.get_xticklabels() if t.get_text()]
    visible = [v for v in ax.get_xticks() if 0.3 <= v <= 2.5]
    assert len(labels) >= 3 and len(visible) >= 3


def test_collapse_of_disorder_means_says_so():
    from mpsobs.analysis import scaling

    results = saturating_results((6, 10), np.linspace(0.0, 30.0, 31), LAWS, stderr=0.02,
                                 seed=5, realizations=5, disorder_sd=0.05)
    collapse = scaling.collapse_curves(results, scaling.scaling_table(results))
    assert (collapse.realizations == 5).all()
    fig = plots.collapse_figure(collapse)
    assert "disorder mean over 5 realizations" in _caption(fig).replace("\n", " ")


# --------------------------------------------------------------------------- paper figures

PAPER_LAWS = {
    # listed in spec order, not alphabetical; reference values that nearly coincide
    "number:b4": SaturationLaw(s_inf=0.55, c=-0.8, tau0=0.5, z=1.0, s_thermo=0.69,
                               s_eq=0.6925),
    "energy:b4,dE0.5>number:b4": SaturationLaw(s_inf=0.6, c=-0.5, tau0=0.3, z=1.0,
                                               s_thermo=0.69, s_eq=0.692),
}
SETTINGS = {"model": ["xxz"], "delta": [0.5], "field": ["uniform"], "h": [0.0],
            "field_seed": [3], "state": ["neel"], "chi_max": [64], "sample_budget": [2000],
            "prune": [1e-12], "trust_rtol": [0.01]}


def _paper(**options) -> pd.DataFrame:
    return saturating_results((6, 10), np.linspace(0.0, 30.0, 31), PAPER_LAWS, stderr=0.02,
                              seed=5, parameters=SETTINGS, **options)


def test_coarse_graining_titles_in_words():
    title = plots.coarse_graining_title
    assert title("energy:b4,dE0.5>number:b4") == \
        "energy of blocks of 4, bins of 0.5, then number"
    assert title("number:b4") == "number of blocks of 4"
    assert title("number:r0-32,32-64") == "number of regions 0-31, 32-63"
    assert title("energy:r0-8,8-16,dE0.25") == "energy of regions 0-7, 8-15, bins of 0.25"
    assert title("fine") == "configuration of single sites"
    assert title("energy:r0-16,16-32,dE1,N64,D16") == \
        "energy of regions 0-15, 16-31, bins of 1, 64 moments, moment bond 16"
    assert title("number:b2>energy:b4") == "number of blocks of 2, then energy of blocks of 4"
    assert title("my regions") == "my regions"  # a label from the spec, as written


def test_panels_follow_the_spec_order_with_readable_titles():
    fig = plots.entropy_figure(_paper(), diagnostics=False)
    titles = [ax.get_title() for ax in fig.axes]
    assert titles == ["number of blocks of 4",
                      "energy of blocks of 4, bins of 0.5, then number"]
    data = plots.figure_data(_paper(), "entropy")
    assert list(pd.unique(data.coarse_graining)) == list(PAPER_LAWS)


def test_every_line_and_band_is_in_the_legend():
    fig = plots.entropy_figure(_paper(trusted_until=20.0), diagnostics=False)
    entries = [t.get_text() for t in fig.legends[1].get_texts()]
    for words in ("S_\\mathrm{obs}/L", "total error", "S_\\mathrm{thermo}/L",
                  "S_\\mathrm{obs}^\\mathrm{eq}/L", "t_\\mathrm{trusted}", "ln 2"):
        assert any(words in e for e in entries), (words, entries)
    ax = fig.axes[0]
    # one band per L (the total error), one faint continuation per L
    assert len(ax.collections) == 2
    assert sum(line.get_alpha() == plots.UNTRUSTED_ALPHA for line in ax.lines) == 2
    fig.canvas.draw()  # the legends fit inside the one-column figure
    width = fig.bbox.width
    for legend in fig.legends:
        box = legend.get_window_extent()
        assert 0 <= box.x0 and box.x1 <= width


def test_reference_lines_are_named_apart_at_the_right_edge():
    fig = plots.entropy_figure(_paper(), diagnostics=False)
    fig.canvas.draw()
    for ax in fig.axes:
        names = {t.get_text(): t for t in ax.texts}
        assert set(names) == {plots.THERMO_NAME, plots.EQUILIBRIUM_NAME, plots.MAX_NAME}
        places = sorted(t.get_position()[1] for t in names.values())  # axes fraction
        assert np.all(np.diff(places) >= plots.NAME_GAP - 1e-12)
        # the lines stay at their values: ln 2 and S_thermo/L = 0.69 exactly
        heights = {round(float(line.get_ydata()[-1]), 12) for line in ax.lines}
        assert round(np.log(2.0), 12) in heights and 0.69 in heights


def test_short_caption_and_full_settings_in_the_metadata():
    results = _paper()
    text = plots.caption(results).replace("\n", " ")
    assert text == "model=xxz; delta=0.5; h=0; state=neel"
    meta = plots.figure_metadata(results, "title")
    settings = json.loads(meta["settings"])
    assert settings["field_seed"] == 3 and settings["sample_budget"] == 2000
    assert settings["prune"] == 1e-12 and settings["trust_rtol"] == 0.01
    assert settings["L"] == [6, 10] and settings["coarse_graining"] == list(PAPER_LAWS)
    # a random field keeps its seed in the caption
    random = results.assign(field="random", h=1.0)
    assert "field_seed=3" in plots.caption(random)


def test_files_carry_the_metadata_and_the_drawn_data(tmp_path):
    from PIL import Image

    results = _paper()
    paths = plots.plot_results(results, tmp_path)
    png = Image.open(tmp_path / "entropy.png")
    png.load()
    settings = json.loads(png.text["mpsobs-settings"])
    assert settings["sample_budget"] == 2000 and settings["field_seed"] == 3
    assert png.text["Description"] == "model=xxz; delta=0.5; h=0; state=neel"
    assert "energy of blocks of 4" in png.text["Title"]
    pdf = (tmp_path / "entropy.pdf").read_bytes()
    assert b"/Keywords" in pdf and b"sample_budget" in pdf and b"/Subject" in pdf
    csv = pd.read_csv(tmp_path / "entropy.csv")
    assert list(csv.columns) == ["coarse_graining", "L", "t", "S_obs_per_site",
                                 "S_obs_total_err_per_site", "S_obs_err_per_site",
                                 "S_thermo_per_site", "S_obs_eq_per_site", "S_max_per_site",
                                 "S_ent_half_per_site", "discarded_weight"]
    first = results[(results.coarse_graining == "number:b4") & (results.L == 6)]
    mine = csv[(csv.coarse_graining == "number:b4") & (csv.L == 6)]
    assert np.allclose(mine.S_obs_per_site, first.sort_values("t").S_obs / 6)
    assert set(pd.read_csv(tmp_path / "knowledge.csv").columns) >= {
        "knowledge_per_site", "S_obs_total_err_per_site"}
    assert len(paths) == 9


def test_the_band_is_the_total_error():
    from mpsobs.analysis import uncertainty

    results = _paper().assign(S_obs_trunc_err=0.05, pruned_mass=1e-4)
    fig = plots.entropy_figure(results[results.L == 6], diagnostics=False)
    band = fig.axes[0].collections[0].get_paths()[0].vertices[:, 1]
    rows = results[(results.coarse_graining == "number:b4") & (results.L == 6)]
    total = uncertainty.total_error(rows) / 6
    y = rows.S_obs.to_numpy() / 6
    assert band.max() == pytest.approx(np.max(y + total), rel=1e-12)
    assert band.min() == pytest.approx(np.min(y - total), rel=1e-12)


def test_options_choose_rows_scale_and_layout(tmp_path):
    results = saturating_results((6, 8, 10), np.linspace(0.0, 30.0, 31), PAPER_LAWS,
                                 stderr=0.02, seed=5, parameters=SETTINGS)
    results.to_parquet(tmp_path / "results.parquet")
    paths = workflow.plot(tmp_path, coarse=["number:b4"], where={"L": ["6", "10"]},
                          per_site=False, diagnostics=True, separate=True)
    assert sorted(p.name for p in paths) == sorted(
        f"{kind}_number-b4{suffix}" for kind in ("entropy", "parts", "knowledge")
        for suffix in (".png", ".pdf", ".csv"))
    csv = pd.read_csv(tmp_path / "figures" / "entropy_number-b4.csv")
    assert set(csv.L) == {6, 10} and set(csv.coarse_graining) == {"number:b4"}
    assert "S_obs" in csv.columns and "S_obs_per_site" not in csv.columns
    fig = plots.entropy_figure(results, per_site=False, diagnostics=True)
    assert fig.axes[0].get_ylabel() == "entropy [nats]"
    assert len(fig.axes) == len(PAPER_LAWS) + 2
    assert len(plots.entropy_figure(results, diagnostics=False).axes) == len(PAPER_LAWS)
    # both coarse-grainings, one figure each
    both = plots.plot_results(results, tmp_path / "both", separate=True)
    assert {p.stem for p in both} == {f"{kind}_{slug}" for kind in plots.KINDS
                                     for slug in ("number-b4", "energy-b4-dE0.5-number-b4")}


def test_bad_plot_choices_name_the_field_and_write_nothing(tmp_path, capsys):
    from mpsobs import cli

    _paper().to_parquet(tmp_path / "results.parquet")
    for argv, words in ((["--coarse", "number:b9"], "coarse: unknown coarse-graining "
                         "'number:b9'; the run has 'number:b4'"),
                        (["--where", "L=7"], "where: L=7 is not in the run; values: 10, 6"),
                        (["--where", "Delta=1"], "where: 'Delta' is not a parameter"),
                        (["--where", "L"], "--where: expected NAME=VALUE")):
        assert cli.main(["plot", str(tmp_path), *argv]) == 2
        assert words in capsys.readouterr().err
    assert not (tmp_path / "figures").exists()
