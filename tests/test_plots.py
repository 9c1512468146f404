"""Figures of a run render from a small synthetic table (mpsobs.synthetic).

Files are checked for existence, size and format magic bytes (PNG signature from the
PNG specification, ISO/IEC 15948; "%PDF-" header from ISO 32000), never against
stored images.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_rgba

from mpsobs import plots
from mpsobs.errors import InputError
from mpsobs.synthetic import SaturationLaw, saturating_results

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
PDF_MAGIC = b"%PDF-"
LAWS = {"number@b2": SaturationLaw(s_inf=0.55, c=-0.8, tau0=0.5, z=1.0),
        "energy@b2": SaturationLaw(s_inf=0.6, c=-0.5, tau0=0.3, z=1.0, s_initial=0.2)}


def _results(**parameters) -> pd.DataFrame:
    return saturating_results((6, 10), np.linspace(0.0, 30.0, 31), LAWS, stderr=0.02,
                              seed=5, parameters=parameters)


def _check_files(paths) -> None:
    for path in paths:
        data = path.read_bytes()
        assert len(data) > 1000, path
        assert data[:8] == PNG_MAGIC if path.suffix == ".png" else data[:5] == PDF_MAGIC


def test_plot_run_writes_one_set_per_parameter_value(tmp_path):
    results = _results(Delta=[0.5, 1.0])
    results["block_size"] = 2  # fixed by the coarse-graining: no figures of its own
    results.to_parquet(tmp_path / "results.parquet")
    paths = plots.plot_run(tmp_path)
    names = sorted(p.name for p in paths)
    expected = sorted(f"{kind}_Delta={delta}{suffix}"
                      for kind in ("entropy", "parts", "knowledge")
                      for delta in (0.5, 1.0) for suffix in (".png", ".pdf"))
    assert names == expected
    assert all(p.parent == tmp_path / "figures" for p in paths)
    _check_files(paths)


def test_single_parameter_set_and_single_length(tmp_path):
    results = _results()
    results = results[results.L == 6]
    paths = plots.plot_results(results, tmp_path)
    assert sorted(p.name for p in paths) == sorted(
        f"{kind}{suffix}" for kind in ("entropy", "parts", "knowledge")
        for suffix in (".png", ".pdf"))
    _check_files(paths)


def test_panels_per_coarse_graining_single_column_width_and_shared_colours():
    results = _results()
    colors = plots.length_colors(results.L)
    assert len(set(colors.values())) == len(colors)
    for make in (plots.entropy_figure, plots.parts_figure, plots.knowledge_figure):
        fig = make(results, colors)
        panels = [ax for ax in fig.axes if ax.get_visible()]
        assert len(panels) == len(LAWS)
        assert fig.get_size_inches()[0] == pytest.approx(plots.PANEL_WIDTH)
        assert "1/J" in panels[-1].get_xlabel()
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
    titles = sorted(ax.get_title() for ax in fig.axes)
    assert titles == sorted(f"{cg} (Delta = 1.0)" for cg in LAWS)
    # with no parameter given, the ones varying in the rows get panels of their own
    assert len(plots.knowledge_figure(results).axes) == 2 * len(LAWS)


def test_missing_column_is_named(tmp_path):
    results = _results().drop(columns=["S_ent_half"])
    with pytest.raises(InputError, match="S_ent_half"):
        plots.plot_results(results, tmp_path)
    assert not any(tmp_path.iterdir())
    with pytest.raises(InputError, match="run_dir"):
        plots.plot_run(tmp_path / "missing")
