"""Figures of a run: observational entropy against time, for a paper, drawn and saved.

Layout. One panel per coarse-graining, in the order of the spec (the order in which the
labels first appear in the results table), and per value of the parameters shown in the
panel titles, stacked in one column PANEL_WIDTH inches wide (a journal column); each
chain length L keeps one colour in every figure of a run (:func:`length_colors`).
Entropies are in nats (natural logarithms), per site (default) or total; times in
units of 1/J.

Errors. The shaded band is +- the total error S_obs_total_err
(:mod:`mpsobs.analysis.uncertainty`: sampling, truncation and method errors in
quadrature plus the pruning bound); past t_trusted a curve is faint.

References (entropy figure): S_thermo (dashed) and, where the table has it, S_obs_eq
(dash-dot; the S_obs of the Gibbs state for that coarse-graining), per L in the
length's colour, and the maximum ln 2 per site (dotted grey; L ln 2 per L for total
entropies). Each reference is named at the right edge of its panel at its value for the
largest L; the names are pushed apart where the lines nearly coincide, the lines are
not moved. Every line style and band is in the legend below the panels.

What is drawn, the panel titles, the caption above the panels and the settings in the
files' metadata come from :mod:`mpsobs.analysis.figure_content` (re-exported here); the
drawn numbers go into a CSV beside each figure.

The figure functions take the rows, ``colors`` (L -> colour, default
:func:`length_colors` of the rows), ``shown`` (parameters that get panels of their own
and appear in panel titles, default :func:`figure_parameters`) and ``per_site``; they
return a :class:`matplotlib.figure.Figure` on the Agg canvas (no display is opened,
pyplot's global state is left alone). Cost: linear in the rows drawn, dominated by
matplotlib's layout and the file writing.
"""

from __future__ import annotations

import os
import re
from collections.abc import Callable, Iterable, Mapping, Sequence
from pathlib import Path

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import FuncFormatter, LogLocator, NullLocator

from mpsobs.analysis import curves, trust, uncertainty
from mpsobs.analysis.figure_content import (
    CAPTION_PARAMETERS,
    ENTROPY_COLUMNS,
    EXTENSIVE,
    KINDS,
    KNOWLEDGE_COLUMNS,
    PARTS_COLUMNS,
    PER_SITE,
    TITLE_WIDTH,
    caption,
    coarse_graining_title,
    coarse_order,
    figure_data,
    figure_metadata,
    figure_parameters,
    figure_title,
    panel_title,
    select_rows,
)
from mpsobs.core.printing import with_error
from mpsobs.core.version import __version__
from mpsobs.pipeline import columns as col
from mpsobs.pipeline.store import atomic_write

__all__ = [
    "PANEL_WIDTH", "PANEL_HEIGHT", "PAPER_STYLE", "KINDS", "CAPTION_PARAMETERS",
    "length_colors", "figure_parameters", "coarse_graining_title", "coarse_order",
    "panel_title", "TITLE_WIDTH",
    "caption", "figure_data", "figure_metadata", "select_rows", "entropy_figure",
    "parts_figure", "knowledge_figure", "collapse_figure", "figure_files", "save_figure",
    "plot_results",
]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

#: Width of one panel in inches (a single journal column).
PANEL_WIDTH = 3.4
#: Height of one panel in inches.
PANEL_HEIGHT = 2.0
#: Height of the entanglement and discarded-weight panels in inches.
SMALL_PANEL_HEIGHT = 1.2
#: Matplotlib settings used for every figure.
PAPER_STYLE = {
    "font.size": 8, "axes.titlesize": 8, "axes.labelsize": 8, "legend.fontsize": 7,
    "xtick.labelsize": 7, "ytick.labelsize": 7, "lines.linewidth": 0.9,
    "axes.grid": True, "grid.alpha": 0.3, "grid.linewidth": 0.5,
    "savefig.dpi": 300, "pdf.fonttype": 42, "legend.frameon": False,
}

TIME_LABEL = r"time $t$ [$1/J$]"
#: Opacity of the error bands and of curves past t_trusted.
BAND_ALPHA = 0.35
UNTRUSTED_ALPHA = 0.35
LN2_STYLE = {"color": "0.45", "linestyle": ":", "linewidth": 1.0}
THERMO_STYLE = {"linestyle": "--", "linewidth": 0.8}
EQUILIBRIUM_STYLE = {"linestyle": (0, (5, 1.5, 1, 1.5)), "linewidth": 0.9}
#: Caption font size (points).
CAPTION_SIZE = 6.5
#: Font size of the reference names at the right edge (points) and their smallest
#: vertical distance (axes fraction).
NAME_SIZE = 6.0
NAME_GAP = 0.09

Draw = Callable[[object, pd.DataFrame, int, object], None]


def length_colors(lengths: Iterable[int]) -> dict[int, tuple]:
    """A colour per chain length, ordered along the viridis map (dark = small L)."""
    unique = sorted({int(L) for L in lengths})
    cmap = matplotlib.colormaps["viridis"]
    positions = np.linspace(0.0, 0.85, len(unique)) if len(unique) > 1 else [0.35] * len(unique)
    return {L: cmap(p) for L, p in zip(unique, positions, strict=True)}

def _column(curve: pd.DataFrame, name: str, per_site: bool) -> np.ndarray | None:
    """A drawn column of :func:`figure_data` output (None when absent)."""
    key = name + PER_SITE if per_site and name in EXTENSIVE else name
    return curve[key].to_numpy(dtype=float) if key in curve else None


def _band(ax, t, y, err, color, linestyle="-", trusted=None) -> None:
    """Line with a +- err band; beyond ``trusted`` (a time) the line is drawn faint."""
    t, y = np.asarray(t, dtype=float), np.asarray(y, dtype=float)
    if trusted is not None and np.isfinite(trusted) and t[-1] > trusted:
        inside = t <= trusted
        ax.plot(t[inside], y[inside], color=color, linestyle=linestyle)
        after = t >= t[inside][-1] if inside.any() else np.ones_like(inside)
        ax.plot(t[after], y[after], color=color, linestyle=linestyle, alpha=UNTRUSTED_ALPHA)
    else:
        ax.plot(t, y, color=color, linestyle=linestyle)
    if err is not None and np.any(np.asarray(err) > 0):
        ax.fill_between(t, y - err, y + err, color=color, alpha=BAND_ALPHA, linewidth=0)


def _legend(fig: Figure, colors: Mapping[int, tuple], styles: list, text: str = "") -> None:
    """The caption ``text`` and the colours per L above the panels (one legend, so that
    the layout keeps them apart), line styles and bands below them."""
    lengths = [Line2D([], [], color=c, label=f"$L={L}$") for L, c in colors.items()]
    fig.legend(handles=lengths, loc="outside upper center", ncols=min(5, len(lengths)),
               handlelength=1.5, columnspacing=1.0, title=text or None,
               title_fontproperties={"size": CAPTION_SIZE})
    if styles:
        fig.legend(handles=styles, loc="outside lower center",
                   ncols=len(styles) if len(styles) <= 2 else 2,
                   handlelength=2.2, columnspacing=1.2)


def _style(label: str, **line) -> Line2D:
    return Line2D([], [], color=line.pop("color", "0.2"), label=label, **line)


def _band_style(label: str) -> Patch:
    return Patch(facecolor="0.2", alpha=BAND_ALPHA, linewidth=0, label=label)


def _panels(data: pd.DataFrame, shown: Sequence[str], order: Sequence[str]
            ) -> list[tuple[dict, pd.DataFrame]]:
    """(key, rows) per panel: coarse-grainings in ``order``, then the ``shown`` values."""
    rank = {label: i for i, label in enumerate(order)}
    panels = curves.split(data, ["coarse_graining", *shown])
    return sorted(panels, key=lambda item: rank.get(item[0]["coarse_graining"], len(rank)))


def _panel_figure(results: pd.DataFrame, data: pd.DataFrame,
                  colors: Mapping[int, tuple] | None, shown: Sequence[str] | None,
                  draw: Draw, ylabel: str, styles: list,
                  decorate: Callable[[object], None] | None = None,
                  diagnostics: bool = False, per_site: bool = True) -> Figure:
    """One panel per coarse-graining (spec order) and value of the ``shown`` parameters
    (default :func:`figure_parameters`), with ``draw(ax, curve, L, colour)`` per chain
    length of ``data`` (:func:`figure_data`), then ``decorate(ax)``; the caption
    (:func:`caption` of ``results``) on top; with ``diagnostics`` two small panels
    below: the half-chain entanglement and the discarded weight."""
    colors = dict(colors) if colors is not None else length_colors(results["L"])
    shown = list(shown) if shown is not None else figure_parameters(results)
    text = caption(results, shown)
    panels = _panels(data, shown, coarse_order(results))
    extra = 2 if diagnostics else 0
    heights = [PANEL_HEIGHT] * len(panels) + [SMALL_PANEL_HEIGHT] * extra
    with matplotlib.rc_context(PAPER_STYLE):
        fig = Figure(figsize=(PANEL_WIDTH, sum(heights) + 0.9 + 0.12 * text.count("\n")),
                     layout="constrained")
        FigureCanvasAgg(fig)
        axes = fig.subplots(len(heights), 1, sharex=True, squeeze=False,
                            height_ratios=heights)[:, 0]
        for ax, (key, rows) in zip(axes, panels, strict=False):
            for (L,), curve in rows.groupby(["L"], sort=True):
                draw(ax, curve.sort_values("t"), int(L), colors[int(L)])
            if decorate is not None:
                decorate(ax)
            ax.set_title(panel_title(key, shown))
            ax.set_ylabel(ylabel)
        if diagnostics:
            _diagnostics(axes[-2], axes[-1], data, colors, per_site)
        axes[-1].set_xlim(data["t"].min(), data["t"].max())
        axes[-1].set_xlabel(TIME_LABEL)
        _legend(fig, {L: colors[L] for L in sorted(colors) if L in set(data["L"])}, styles,
                text)
    return fig


def _diagnostics(ent_ax, weight_ax, data: pd.DataFrame, colors: Mapping[int, tuple],
                 per_site: bool) -> None:
    """Half-chain entanglement (per site or total) and cumulative discarded weight
    against time, per L (state properties: taken from the first coarse-graining's
    rows)."""
    first = data[data["coarse_graining"] == data["coarse_graining"].iloc[0]]
    weights = False
    for (L,), curve in first.groupby(["L"], sort=True):
        curve = curve.sort_values("t")
        t = curve["t"].to_numpy(dtype=float)
        ent_ax.plot(t, _column(curve, "S_ent_half", per_site), color=colors[int(L)])
        w = _column(curve, "discarded_weight", per_site)
        if w is not None and np.any(w > 0):
            weight_ax.plot(t, np.where(w > 0, w, np.nan), color=colors[int(L)])
            weights = True
    ent_ax.set_ylabel(r"$S_\mathrm{ent}^{L/2}" + ("/L$" if per_site else "$"))
    weight_ax.set_ylabel("discarded\nweight")
    if weights:
        weight_ax.set_yscale("log")
    else:
        weight_ax.text(0.5, 0.5, "no truncation (discarded weight 0)", ha="center",
                       va="center", transform=weight_ax.transAxes, color="0.4")


def _name_references(ax, values: Mapping[str, float]) -> None:
    """Name each reference line at the right edge of ``ax`` at its value (data units);
    names closer than NAME_GAP (axes fraction) are pushed apart, with a thin leader to
    the line's true height; the lines themselves are not moved."""
    low, high = ax.get_ylim()
    items = sorted(((v - low) / (high - low), name, v) for name, v in values.items()
                   if np.isfinite(v))
    places: list[float] = []
    for fraction, _, _ in items:
        places.append(fraction if not places else max(fraction, places[-1] + NAME_GAP))
    overflow = places[-1] - 1.0 if places else 0.0
    if overflow > 0:
        places = [p - overflow for p in places]
    for (_, name, value), place in zip(items, places, strict=True):
        ax.annotate(name, xy=(1.0, value), xycoords=("axes fraction", "data"),
                    xytext=(1.04, place), textcoords="axes fraction", fontsize=NAME_SIZE,
                    color="0.25", va="center", ha="left", annotation_clip=False,
                    arrowprops={"arrowstyle": "-", "color": "0.6", "linewidth": 0.4,
                                "shrinkA": 0, "shrinkB": 0})


def _trusted_time(curve: pd.DataFrame) -> float | None:
    if col.TRUSTED_TIME not in curve:
        return None
    limits = curve[col.TRUSTED_TIME].to_numpy(dtype=float)
    return float(np.min(np.where(np.isnan(limits), np.inf, limits)))


#: Names of the reference lines at the right edge of the entropy panels.
THERMO_NAME = r"$S_\mathrm{thermo}$"
EQUILIBRIUM_NAME = r"$S_\mathrm{obs}^\mathrm{eq}$"
MAX_NAME = r"$\ln 2$"
TOTAL_MAX_NAME = r"$L \ln 2$"


def entropy_figure(results: pd.DataFrame, colors: Mapping[int, tuple] | None = None,
                   shown: Sequence[str] | None = None, *, per_site: bool = True,
                   diagnostics: bool = True) -> Figure:
    """S_obs(t) per L with its total-error band, S_thermo (dashed), S_obs_eq (dash-dot,
    where present), curves faint past t_trusted, and the maximum (ln 2 per site, dotted;
    L ln 2 per L for total entropies), references named at the right edge; one panel
    per coarse-graining, then (``diagnostics``) the half-chain entanglement and the
    discarded weight."""
    shown = list(shown) if shown is not None else figure_parameters(results)
    data = figure_data(results, "entropy", per_site=per_site, shown=shown)
    has_eq = _column(data, col.EQUILIBRIUM, per_site) is not None and bool(
        np.isfinite(_column(data, col.EQUILIBRIUM, per_site)).any())
    faint = col.TRUSTED_TIME in data and bool(
        (data["t"] > data[col.TRUSTED_TIME].fillna(np.inf)).any())
    shown_range: dict[int, list[float]] = {}  # per panel: values on trusted times
    names: dict[int, dict[str, float]] = {}   # per panel: reference -> value, largest L

    def draw(ax, curve, L, color):
        t = curve["t"].to_numpy(dtype=float)
        y = _column(curve, "S_obs", per_site)
        err = _column(curve, uncertainty.TOTAL, per_site)
        trusted = _trusted_time(curve)
        _band(ax, t, y, err, color, trusted=trusted)
        thermo = _column(curve, "S_thermo", per_site)
        ax.plot(t, thermo, color=color, **THERMO_STYLE)
        inside = t <= (np.inf if trusted is None else trusted)
        values = [y[inside] - err[inside], y[inside] + err[inside], thermo]
        refs = names.setdefault(id(ax), {})
        refs[THERMO_NAME] = float(thermo[-1])
        if has_eq:
            eq = _column(curve, col.EQUILIBRIUM, per_site)
            ax.plot(t, eq, color=color, **EQUILIBRIUM_STYLE)
            values.append(eq)
            refs[EQUILIBRIUM_NAME] = float(eq[-1])
        if not per_site:
            top = _column(curve, "S_max", per_site)
            ax.plot(t, top, color=color, **{k: v for k, v in LN2_STYLE.items()
                                             if k != "color"})
            values.append(top)
            refs[TOTAL_MAX_NAME] = float(top[-1])
        shown_range.setdefault(id(ax), []).extend(
            float(v) for v in np.concatenate(values) if np.isfinite(v))

    def decorate(ax):
        values = shown_range.get(id(ax), [])
        if per_site:
            ax.axhline(np.log(2.0), **LN2_STYLE)
            names.setdefault(id(ax), {})[MAX_NAME] = float(np.log(2.0))
            values = [*values, np.log(2.0)]
        low, high = min(values), max(values)
        margin = 0.05 * (high - low or 1.0)
        ax.set_ylim(low - margin, high + margin)  # what goes wrong past t_trusted may leave
        _name_references(ax, names.get(id(ax), {}))

    per = "/L" if per_site else ""
    styles = [_style(rf"$S_\mathrm{{obs}}{per}$"),
              _band_style(r"$\pm$ total error"),
              _style(rf"$S_\mathrm{{thermo}}{per}$ (Gibbs)", **THERMO_STYLE)]
    if has_eq:
        styles.append(_style(rf"$S_\mathrm{{obs}}^\mathrm{{eq}}{per}$ (Gibbs state)",
                             **EQUILIBRIUM_STYLE))
    if faint:
        styles.append(_style(r"past $t_\mathrm{trusted}$ (truncation)",
                             alpha=UNTRUSTED_ALPHA))
    styles.append(_style(r"max. $\ln 2$" if per_site else r"max. $L \ln 2$", **LN2_STYLE))
    ylabel = "entropy per site [nats]" if per_site else "entropy [nats]"
    return _panel_figure(results, data, colors, shown, draw, ylabel, styles, decorate,
                         diagnostics=diagnostics, per_site=per_site)


def parts_figure(results: pd.DataFrame, colors: Mapping[int, tuple] | None = None,
                 shown: Sequence[str] | None = None, *, per_site: bool = True) -> Figure:
    """Shannon part H(p) (solid) and mean Boltzmann entropy sum p ln V (dashed) per L,
    per site or total, with error bands where S_shannon_err / S_boltzmann_err are
    present."""
    shown = list(shown) if shown is not None else figure_parameters(results)
    data = figure_data(results, "parts", per_site=per_site, shown=shown)
    banded = False

    def draw(ax, curve, L, color):
        nonlocal banded
        t = curve["t"].to_numpy(dtype=float)
        for name, linestyle in (("S_shannon", "-"), ("S_boltzmann", "--")):
            err = _column(curve, f"{name}_err", per_site)
            banded |= err is not None and bool(np.any(err > 0))
            _band(ax, t, _column(curve, name, per_site), err, color, linestyle)

    per = "/L" if per_site else ""
    # the band entry depends on the data: drawn first, legend made after the panels
    fig = _panel_figure(results, data, colors, shown, draw,
                        "entropy per site [nats]" if per_site else "entropy [nats]", [],
                        per_site=per_site)
    styles = [_style(rf"Shannon $H(p){per}$"),
              _style(rf"Boltzmann $\sum p_i \ln V_i{per}$", linestyle="--")]
    if banded:
        styles.append(_band_style(r"$\pm$ standard error"))
    with matplotlib.rc_context(PAPER_STYLE):
        fig.legend(handles=styles, loc="outside lower center", ncols=2, handlelength=2.2,
                   columnspacing=1.2)
    return fig


def knowledge_figure(results: pd.DataFrame, colors: Mapping[int, tuple] | None = None,
                     shown: Sequence[str] | None = None, *, per_site: bool = True) -> Figure:
    """Knowledge K = S_max - S_obs per L with its total-error band, its thermodynamic
    value S_max - S_thermo (dashed) and, where present, its equilibrium value
    S_max - S_obs_eq (dash-dot); per site or total."""
    shown = list(shown) if shown is not None else figure_parameters(results)
    data = figure_data(results, "knowledge", per_site=per_site, shown=shown)
    has_eq = _column(data, col.EQUILIBRIUM, per_site) is not None and bool(
        np.isfinite(_column(data, col.EQUILIBRIUM, per_site)).any())

    def draw(ax, curve, L, color):
        t = curve["t"].to_numpy(dtype=float)
        top = _column(curve, "S_max", per_site)
        _band(ax, t, _column(curve, "knowledge", per_site),
              _column(curve, uncertainty.TOTAL, per_site), color)
        ax.plot(t, top - _column(curve, "S_thermo", per_site), color=color, **THERMO_STYLE)
        if has_eq:
            ax.plot(t, top - _column(curve, col.EQUILIBRIUM, per_site), color=color,
                    **EQUILIBRIUM_STYLE)

    per = "/L" if per_site else ""
    styles = [_style(rf"$K{per}$"), _band_style(r"$\pm$ total error"),
              _style(rf"$(S_\mathrm{{max}}-S_\mathrm{{thermo}}){per}$", **THERMO_STYLE)]
    if has_eq:
        styles.append(_style(rf"$(S_\mathrm{{max}}-S_\mathrm{{obs}}^\mathrm{{eq}}){per}$",
                             **EQUILIBRIUM_STYLE))
    ylabel = "knowledge per site [nats]" if per_site else "knowledge [nats]"
    return _panel_figure(results, data, colors, shown, draw, ylabel, styles,
                         per_site=per_site)


def _log_time_axis(ax) -> None:
    """Log axis with labelled ticks at 1, 2 and 5 times powers of ten, plain numbers."""
    ax.set_xscale("log")
    ax.xaxis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:g}"))
    ax.xaxis.set_minor_locator(NullLocator())


def collapse_figure(collapse: pd.DataFrame,
                    colors: Mapping[int, tuple] | None = None) -> Figure:
    """Data collapse: rise fraction against t / L^z, one panel per group of curves.

    ``collapse`` is :func:`mpsobs.scaling.collapse_curves` output. The rise fraction is
    (S_obs(t) - S_obs(0)) / (S_plateau - S_obs(0)); time is on a log axis (t = 0 left
    out); the fitted z (+- error) is written in each panel (curves are left out where z
    is not available); the dotted lines mark 1 and the fraction f used for t_f.
    """
    colors = dict(colors) if colors is not None else length_colors(collapse["L"])
    keys = curves.key_columns(collapse)
    shown = curves.varying_columns(collapse, [k for k in keys if k != "coarse_graining"],
                                   within="coarse_graining")
    panels = curves.split(collapse, keys) if not collapse.empty else []
    if not panels:
        with matplotlib.rc_context(PAPER_STYLE):
            fig = Figure(figsize=(PANEL_WIDTH, PANEL_HEIGHT), layout="constrained")
            FigureCanvasAgg(fig)
            ax = fig.subplots()
            ax.set_axis_off()
            ax.text(0.5, 0.5, "no saturated curve to collapse", ha="center", va="center")
        return fig
    ncols = 1 if len(panels) <= 3 else 2
    nrows = -(-len(panels) // ncols)
    with matplotlib.rc_context(PAPER_STYLE):
        fig = Figure(figsize=(PANEL_WIDTH * ncols, PANEL_HEIGHT * nrows + 0.5),
                     layout="constrained")
        FigureCanvasAgg(fig)
        axes = fig.subplots(nrows, ncols, squeeze=False).ravel()
        for ax, (key, rows) in zip(axes, panels, strict=False):
            z, z_err = rows["z"].iloc[0], rows["z_err"].iloc[0]
            if np.isfinite(z):
                for (L,), curve in rows[rows["t"] > 0].groupby(["L"], sort=True):
                    _band(ax, curve["scaled_time"].to_numpy(), curve["rise"].to_numpy(),
                          curve["rise_err"].to_numpy(), colors[int(L)])
                _log_time_axis(ax)
                note = "$z = " + with_error(z, z_err).replace("+-", r"\pm") + "$"
            else:
                note = "z not available"
            for level in (1.0, rows["saturation_fraction"].iloc[0]):
                ax.axhline(level, **LN2_STYLE)
            ax.text(0.97, 0.05, note, transform=ax.transAxes, ha="right", va="bottom")
            ax.set_title(panel_title(key, shown))
            ax.set_xlabel(r"$t/L^z$ [$1/J$]")
            ax.set_ylabel(r"$\frac{S_\mathrm{obs}(t)-S_\mathrm{obs}(0)}"
                          r"{S_\mathrm{plat}-S_\mathrm{obs}(0)}$")
        for ax in axes[len(panels):]:
            ax.set_visible(False)
        _legend(fig, {L: colors[L] for L in sorted(colors) if L in set(collapse["L"])}, [],
                caption(collapse, shown, keys))
    return fig


def figure_files(stem: str | os.PathLike) -> list[Path]:
    """The image files :func:`save_figure` writes for ``stem``: ``stem``.png and .pdf."""
    stem = Path(stem)
    return [stem.with_name(stem.name + suffix) for suffix in (".png", ".pdf")]


def _file_metadata(metadata: Mapping[str, str], suffix: str) -> dict[str, str]:
    """:func:`figure_metadata` as the keys of a PNG (text chunks) or a PDF (info
    dictionary: standard keys only)."""
    creator = f"mpsobs {__version__}"
    if suffix == ".png":
        return {"Title": metadata["title"], "Description": metadata["caption"],
                "Software": creator, "mpsobs-settings": metadata["settings"]}
    return {"Title": metadata["title"], "Subject": metadata["caption"],
            "Keywords": metadata["settings"], "Creator": creator}


def save_figure(fig: Figure, stem: str | os.PathLike, *,
                metadata: Mapping[str, str] | None = None,
                data: pd.DataFrame | None = None) -> list[Path]:
    """Write ``stem``.png and ``stem``.pdf (creating the directory), with ``metadata``
    (:func:`figure_metadata`) in the files, and ``data`` as ``stem``.csv; return the
    paths written."""
    paths = figure_files(stem)
    paths[0].parent.mkdir(parents=True, exist_ok=True)
    with matplotlib.rc_context(PAPER_STYLE):
        for path in paths:
            with atomic_write(path) as tmp:
                fig.savefig(tmp, format=path.suffix[1:],
                            metadata=None if metadata is None
                            else _file_metadata(metadata, path.suffix))
    if data is not None:
        path = paths[0].with_suffix(".csv")
        with atomic_write(path) as tmp:
            data.to_csv(tmp, index=False)
        paths.append(path)
    return paths


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9.=+-]+", "-", str(text)).strip("-")


def _suffix(key: Mapping[str, object]) -> str:
    """File-name part naming the parameter values, e.g. '_Delta=0.5_h=1'."""
    return "".join("_" + _slug(f"{name}={value}") for name, value in key.items())



def plot_results(results: pd.DataFrame, directory: str | os.PathLike, *,
                 coarse: Sequence[str] | None = None,
                 where: Mapping[str, Sequence] | None = None, per_site: bool = True,
                 diagnostics: bool = False, separate: bool = False,
                 trust_rtol: float | None = None) -> list[Path]:
    """Write the entropy, parts and knowledge figures of a results table to ``directory``.

    Parameters
    ----------
    results : results table.
    directory : where the files go (created).
    coarse, where : draw only these coarse-grainings and parameter values
        (:func:`select_rows`).
    per_site : entropies per site (default) or total.
    diagnostics : add the half-chain entanglement and discarded-weight panels to the
        entropy figure.
    separate : one figure per coarse-graining (file names carry its label) instead of
        one panel per coarse-graining.
    trust_rtol : tolerance of the trusted times (:func:`mpsobs.analysis.trust.trusted`:
        None keeps a ``t_trusted`` column the table has, else uses the default).

    One set per combination of the parameters other than L that vary
    (``entropy_<name>=<value>_....png``; just ``entropy.png`` when L is the only one),
    each as PNG and PDF with the settings in the metadata (:func:`figure_metadata`) and
    the drawn numbers as CSV (:func:`figure_data`). Colours per L are shared by all
    figures of the run. Returns the paths written. Bad choices raise InputError before
    anything is written.
    """
    results = trust.trusted(results, trust_rtol)
    rows = select_rows(results, coarse=coarse, where=where)
    curves.require_columns(rows, ENTROPY_COLUMNS + PARTS_COLUMNS + KNOWLEDGE_COLUMNS,
                           "figures")
    colors = length_colors(results["L"])
    shown = figure_parameters(rows)
    makers = {"entropy": lambda r: entropy_figure(r, colors, shown, per_site=per_site,
                                                   diagnostics=diagnostics),
              "parts": lambda r: parts_figure(r, colors, shown, per_site=per_site),
              "knowledge": lambda r: knowledge_figure(r, colors, shown, per_site=per_site)}
    paths = []
    for key, part in curves.split(rows, shown):
        subsets = ([("_" + _slug(label),
                     part[part["coarse_graining"] == label]) for label in coarse_order(part)]
                   if separate else [("", part)])
        for prefix, subset in subsets:
            for kind in KINDS:
                paths += save_figure(
                    makers[kind](subset), Path(directory) / f"{kind}{prefix}{_suffix(key)}",
                    metadata=figure_metadata(subset, figure_title(kind, subset, key), shown),
                    data=figure_data(subset, kind, per_site=per_site, shown=shown))
    return paths
