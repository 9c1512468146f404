"""Figures of a run: observational entropy per site against time, for a paper.

Every figure is one column wide (PANEL_WIDTH inches) with one panel per coarse-graining
stacked vertically; each chain length L keeps one colour in every figure of a run
(:func:`length_colors`). Entropies are per site in nats (natural logarithms), times in
units of 1/J; shaded bands are +- one standard error. :func:`plot_results` makes one
set of figures per combination of the parameters that vary within a coarse-graining
(:func:`figure_parameters`), with the values in the file names and panel titles.

Each figure says what was run: a caption line above the panels lists the parameters
that are fixed in it (:func:`caption`: model, couplings, field, state, bond, dt,
estimator ...). Disorder realizations (:func:`mpsobs.scaling.disorder_columns`) are
averaged first (:func:`mpsobs.scaling.disorder_average`): the curves are disorder
means and their bands the error of the mean. The entropy figure draws, per panel,
S_thermo/L (dashed) and, where the table has it, the equilibrium value S_obs_eq/L
(dash-dot), the S_obs of the Gibbs state for that coarse-graining; a lighter band
+- S_obs_trunc_err/L shows the truncation error, and the curve is drawn faint beyond
t_trusted. Two panels below show the half-chain entanglement S_ent/L and the
cumulative discarded weight (log scale).

The figure functions take the rows to draw, ``colors`` (L -> colour, default
:func:`length_colors` of the rows) and ``shown`` (parameters that get panels of their
own and appear in the panel titles, default :func:`figure_parameters` of the rows) and
return a :class:`matplotlib.figure.Figure`. Figures are built on
:class:`matplotlib.figure.Figure` with the Agg canvas, so no display is ever opened
and pyplot's global state is left alone.
"""

from __future__ import annotations

import os
import re
import textwrap
from collections.abc import Callable, Iterable, Mapping, Sequence
from pathlib import Path

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import FuncFormatter, LogLocator, NullLocator

from mpsobs.analysis import scaling
from mpsobs.pipeline.store import atomic_write

__all__ = [
    "PANEL_WIDTH", "PANEL_HEIGHT", "PAPER_STYLE", "length_colors", "figure_parameters",
    "caption", "entropy_figure", "parts_figure", "knowledge_figure", "collapse_figure",
    "save_figure", "plot_results",
]

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
#: Opacity of the error bands, of the truncation-error bands and of curves past t_trusted.
BAND_ALPHA = 0.35
TRUNCATION_ALPHA = 0.15
UNTRUSTED_ALPHA = 0.35
LN2_STYLE = {"color": "0.45", "linestyle": ":", "linewidth": 1.0}
EQUILIBRIUM_STYLE = {"linestyle": (0, (5, 1.5, 1, 1.5)), "linewidth": 0.9}
#: Characters per caption line and caption font size (points).
CAPTION_WIDTH = 62
CAPTION_SIZE = 6.5
#: Parameter columns left out of captions (bookkeeping, not physics).
CAPTION_SKIP = ("block_size",)

ENTROPY_COLUMNS = ("t", "coarse_graining", "L", "S_obs", "S_obs_err", "S_thermo",
                   "S_ent_half")
PARTS_COLUMNS = ("t", "coarse_graining", "L", "S_shannon", "S_boltzmann")
KNOWLEDGE_COLUMNS = ("t", "coarse_graining", "L", "knowledge", "S_obs_err", "S_max",
                     "S_thermo")

Draw = Callable[[object, pd.DataFrame, int, object], None]


def length_colors(lengths: Iterable[int]) -> dict[int, tuple]:
    """A colour per chain length, ordered along the viridis map (dark = small L)."""
    unique = sorted({int(L) for L in lengths})
    cmap = matplotlib.colormaps["viridis"]
    positions = np.linspace(0.0, 0.85, len(unique)) if len(unique) > 1 else [0.35]
    return {L: cmap(p) for L, p in zip(unique, positions, strict=True)}


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


def _column(curve: pd.DataFrame, name: str) -> np.ndarray | None:
    return curve[name].to_numpy(dtype=float) if name in curve else None


def _text(value: str) -> str:
    """Text shown literally (no mathtext)."""
    return str(value).replace("$", r"\$")


def _legend(fig: Figure, colors: Mapping[int, tuple], styles: list[Line2D],
            text: str = "") -> None:
    """The caption ``text`` and the colours per L above the panels (one legend, so that
    the layout keeps them apart), line styles below them."""
    lengths = [Line2D([], [], color=c, label=f"$L={L}$") for L, c in colors.items()]
    fig.legend(handles=lengths, loc="outside upper center", ncols=min(5, len(lengths)),
               handlelength=1.5, columnspacing=1.0, title=text or None,
               title_fontproperties={"size": CAPTION_SIZE})
    if styles:
        fig.legend(handles=styles, loc="outside lower center",
                   ncols=len(styles) if len(styles) <= 2 else 2,
                   handlelength=2.2, columnspacing=1.2)


def _title(key: Mapping[str, object], shown: Iterable[str]) -> str:
    """Panel title: the coarse-graining, then the values of the ``shown`` parameters."""
    others = [f"{k} = {key[k]}" for k in shown if k in key and k != "coarse_graining"]
    return _text(str(key["coarse_graining"]) + (f" ({', '.join(others)})" if others else ""))


def figure_parameters(results: pd.DataFrame) -> list[str]:
    """Parameters that get figures of their own: those other than L (its companions and
    the disorder labels) that vary within a coarse-graining."""
    others = scaling.group_columns(results)[1:]
    return scaling.varying_columns(results, others, within="coarse_graining")


def _value(value) -> str:
    return f"{value:g}" if isinstance(value, float | np.floating) else str(value)


def caption(results: pd.DataFrame, shown: Sequence[str] = (),
            parameters: Sequence[str] | None = None) -> str:
    """What a figure of ``results`` shows, for its caption line: every parameter column
    (default :func:`mpsobs.scaling.group_columns`; or ``parameters``) with one value in
    the rows (``name=value``, table order), the chain-length companions as ``name(L)``
    lists, and the disorder average (realizations and their labels). ``shown``
    parameters (in panel titles) and L are left out."""
    disorder = scaling.disorder_columns(results)
    skip = {"L", "coarse_graining", *shown, *disorder, *CAPTION_SKIP}
    companions = scaling.length_companions(results) if parameters is None else []
    if parameters is None:
        parameters = scaling.group_columns(results)
    candidates = [c for c in parameters if c not in skip]
    fixed = [c for c in candidates if c not in scaling.varying_columns(results, candidates)]
    parts = [f"{c}={_value(results[c].iloc[0])}" for c in fixed]
    for name in companions:
        pairs = results[["L", name]].drop_duplicates().sort_values("L")
        parts.append(f"{name}(L)=" + ",".join(_value(v) for v in pairs[name]))
    if disorder:
        per_curve = results.groupby(scaling.group_columns(results) + ["L"], dropna=False)
        counts = sorted({int(n) for n in per_curve[disorder].nunique().max(axis=1)})
        span = str(counts[0]) if len(counts) == 1 else f"{counts[0]}-{counts[-1]}"
        parts.append(f"disorder mean over {span} realizations of {', '.join(disorder)} "
                     f"(band: error of the mean)")
    elif "realizations" in results and results["realizations"].max() > 1:
        counts = sorted({int(n) for n in results["realizations"]})
        span = str(counts[0]) if len(counts) == 1 else f"{counts[0]}-{counts[-1]}"
        parts.append(f"disorder mean over {span} realizations")
    return _text("\n".join(textwrap.wrap("; ".join(parts), CAPTION_WIDTH)))


def _averaged(results: pd.DataFrame) -> pd.DataFrame:
    """Disorder means when the rows have disorder labels, else the rows."""
    return scaling.disorder_average(results) if scaling.disorder_columns(results) else results


def _panel_figure(results: pd.DataFrame, colors: Mapping[int, tuple] | None,
                  shown: Sequence[str] | None, draw: Draw, ylabel: str, styles: list[Line2D],
                  decorate: Callable[[object], None] | None = None,
                  diagnostics: bool = False) -> Figure:
    """One panel per coarse-graining and value of the ``shown`` parameters (default
    :func:`figure_parameters`), with ``draw(ax, curve, L, colour)`` per chain length,
    then ``decorate(ax)``; a caption line (:func:`caption`) on top; with
    ``diagnostics`` two small panels below: S_ent/L and the discarded weight."""
    colors = dict(colors) if colors is not None else length_colors(results["L"])
    shown = list(shown) if shown is not None else figure_parameters(results)
    text = caption(results, shown)
    data = _averaged(results)
    panels = scaling.split(data, ["coarse_graining", *shown])
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
            ax.set_title(_title(key, shown))
            ax.set_ylabel(ylabel)
        if diagnostics:
            _diagnostics(axes[-2], axes[-1], data, colors)
        axes[-1].set_xlim(data["t"].min(), data["t"].max())
        axes[-1].set_xlabel(TIME_LABEL)
        _legend(fig, {L: colors[L] for L in sorted(colors) if L in set(data["L"])}, styles,
                text)
    return fig


def _diagnostics(ent_ax, weight_ax, data: pd.DataFrame, colors: Mapping[int, tuple]) -> None:
    """Half-chain entanglement per site and cumulative discarded weight against time,
    per L (state properties: taken from the first coarse-graining's rows)."""
    first = data[data["coarse_graining"] == data["coarse_graining"].iloc[0]]
    weights = False
    for (L,), curve in first.groupby(["L"], sort=True):
        curve = curve.sort_values("t")
        t = curve["t"].to_numpy(dtype=float)
        ent_ax.plot(t, curve["S_ent_half"].to_numpy(dtype=float) / L, color=colors[int(L)])
        if "discarded_weight" in curve:
            w = curve["discarded_weight"].to_numpy(dtype=float)
            if np.any(w > 0):
                weight_ax.plot(t, np.where(w > 0, w, np.nan), color=colors[int(L)])
                weights = True
    ent_ax.set_ylabel(r"$S_\mathrm{ent}^{L/2}/L$")
    weight_ax.set_ylabel("discarded\nweight")
    if weights:
        weight_ax.set_yscale("log")
    else:
        weight_ax.text(0.5, 0.5, "no truncation (discarded weight 0)", ha="center",
                       va="center", transform=weight_ax.transAxes, color="0.4")


def _has_equilibrium(results: pd.DataFrame) -> bool:
    """Whether the rows carry an equilibrium value S_obs_eq (some finite)."""
    return scaling.EQUILIBRIUM in results and bool(
        np.isfinite(results[scaling.EQUILIBRIUM].to_numpy(dtype=float)).any())


def _style(label: str, **line) -> Line2D:
    return Line2D([], [], color=line.pop("color", "0.2"), label=label, **line)


def entropy_figure(results: pd.DataFrame, colors: Mapping[int, tuple] | None = None,
                   shown: Sequence[str] | None = None) -> Figure:
    """S_obs(t)/L per L with error bands, S_thermo/L (dashed), S_obs_eq/L (dash-dot,
    where present), the truncation error (light band, faint curve past t_trusted) and
    the maximum ln 2 per site (dotted); one panel per coarse-graining, then the
    half-chain entanglement and the discarded weight."""
    scaling.require_columns(results, ENTROPY_COLUMNS, "entropy figure")
    has_eq = _has_equilibrium(results)
    has_trunc = scaling.TRUNCATION_ERROR in results
    trusted_range: dict[int, list[float]] = {}  # per panel: values on trusted times

    def draw(ax, curve, L, color):
        t = curve["t"].to_numpy(dtype=float)
        y = curve["S_obs"].to_numpy(dtype=float) / L
        trusted = None
        if scaling.TRUSTED_TIME in curve:
            limits = curve[scaling.TRUSTED_TIME].to_numpy(dtype=float)
            trusted = float(np.min(np.where(np.isnan(limits), np.inf, limits)))
        if has_trunc:
            trunc = np.nan_to_num(curve[scaling.TRUNCATION_ERROR].to_numpy(dtype=float)) / L
            ax.fill_between(t, y - trunc, y + trunc, color=color, alpha=TRUNCATION_ALPHA,
                            linewidth=0)
        err = curve["S_obs_err"].to_numpy(dtype=float) / L
        _band(ax, t, y, err, color, trusted=trusted)
        thermo = curve["S_thermo"].to_numpy(dtype=float) / L
        ax.plot(t, thermo, color=color, linestyle="--", linewidth=0.8)
        inside = t <= (np.inf if trusted is None else trusted)
        shown_values = [y[inside] - err[inside], y[inside] + err[inside], thermo]
        if has_eq:
            eq = curve[scaling.EQUILIBRIUM].to_numpy(dtype=float) / L
            ax.plot(t, eq, color=color, **EQUILIBRIUM_STYLE)
            shown_values.append(eq)
        trusted_range.setdefault(id(ax), []).extend(
            float(v) for v in np.concatenate(shown_values) if np.isfinite(v))

    def ln2(ax):
        ax.axhline(np.log(2.0), **LN2_STYLE)
        values = [*trusted_range.get(id(ax), []), np.log(2.0)]
        low, high = min(values), max(values)
        margin = 0.05 * (high - low or 1.0)
        ax.set_ylim(low - margin, high + margin)  # what goes wrong past t_trusted may leave

    styles = [_style(r"$S_\mathrm{obs}/L$"), _style(r"$S_\mathrm{thermo}/L$", linestyle="--")]
    if has_eq:
        styles.append(_style(r"$S_\mathrm{obs}^\mathrm{eq}/L$ (Gibbs state)",
                             **EQUILIBRIUM_STYLE))
    if has_trunc:
        styles.append(_style("truncation error (light band;\nfaint beyond trusted time)",
                             linewidth=5, alpha=0.3))
    styles.append(_style(r"$\ln 2$", **LN2_STYLE))
    return _panel_figure(results, colors, shown, draw, "entropy per site [nats]", styles,
                         ln2, diagnostics=True)


def parts_figure(results: pd.DataFrame, colors: Mapping[int, tuple] | None = None,
                 shown: Sequence[str] | None = None) -> Figure:
    """Shannon part H(p)/L (solid) and mean Boltzmann entropy sum p ln V / L (dashed)
    per L, with error bands where S_shannon_err / S_boltzmann_err are present."""
    scaling.require_columns(results, PARTS_COLUMNS, "parts figure")

    def draw(ax, curve, L, color):
        t = curve["t"].to_numpy(dtype=float)
        for name, linestyle in (("S_shannon", "-"), ("S_boltzmann", "--")):
            err = _column(curve, f"{name}_err")
            _band(ax, t, curve[name].to_numpy(dtype=float) / L,
                  None if err is None else err / L, color, linestyle)

    styles = [_style(r"Shannon $H(p)/L$"),
              _style(r"Boltzmann $\sum p_i \ln V_i/L$", linestyle="--")]
    return _panel_figure(results, colors, shown, draw, "entropy per site [nats]", styles)


def knowledge_figure(results: pd.DataFrame, colors: Mapping[int, tuple] | None = None,
                     shown: Sequence[str] | None = None) -> Figure:
    """Knowledge K/L = (S_max - S_obs)/L per L with error bands (error S_obs_err/L), its
    thermodynamic value (S_max - S_thermo)/L (dashed) and, where present, its
    equilibrium value (S_max - S_obs_eq)/L (dash-dot)."""
    scaling.require_columns(results, KNOWLEDGE_COLUMNS, "knowledge figure")
    has_eq = _has_equilibrium(results)

    def draw(ax, curve, L, color):
        t = curve["t"].to_numpy(dtype=float)
        _band(ax, t, curve["knowledge"].to_numpy(dtype=float) / L,
              curve["S_obs_err"].to_numpy(dtype=float) / L, color)
        thermal = (curve["S_max"] - curve["S_thermo"]).to_numpy(dtype=float) / L
        ax.plot(t, thermal, color=color, linestyle="--", linewidth=0.8)
        if has_eq:
            eq = (curve["S_max"] - curve[scaling.EQUILIBRIUM]).to_numpy(dtype=float) / L
            ax.plot(t, eq, color=color, **EQUILIBRIUM_STYLE)

    styles = [_style(r"$K/L$"),
              _style(r"$(S_\mathrm{max}-S_\mathrm{thermo})/L$", linestyle="--")]
    if has_eq:
        styles.append(_style(r"$(S_\mathrm{max}-S_\mathrm{obs}^\mathrm{eq})/L$",
                             **EQUILIBRIUM_STYLE))
    return _panel_figure(results, colors, shown, draw, "knowledge per site [nats]", styles)


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
    keys = scaling.key_columns(collapse)
    shown = scaling.varying_columns(collapse, [k for k in keys if k != "coarse_graining"],
                                    within="coarse_graining")
    panels = scaling.split(collapse, keys) if not collapse.empty else []
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
                note = "$z = " + scaling.format_value(z, z_err).replace("+-", r"\pm") + "$"
            else:
                note = "z not available"
            for level in (1.0, rows["saturation_fraction"].iloc[0]):
                ax.axhline(level, **LN2_STYLE)
            ax.text(0.97, 0.05, note, transform=ax.transAxes, ha="right", va="bottom")
            ax.set_title(_title(key, shown))
            ax.set_xlabel(r"$t/L^z$ [$1/J$]")
            ax.set_ylabel(r"$\frac{S_\mathrm{obs}(t)-S_\mathrm{obs}(0)}"
                          r"{S_\mathrm{plat}-S_\mathrm{obs}(0)}$")
        for ax in axes[len(panels):]:
            ax.set_visible(False)
        _legend(fig, {L: colors[L] for L in sorted(colors) if L in set(collapse["L"])}, [],
                caption(collapse, shown, keys))
    return fig


def figure_files(stem: str | os.PathLike) -> list[Path]:
    """The files :func:`save_figure` writes for ``stem``: ``stem``.png and ``stem``.pdf."""
    stem = Path(stem)
    return [stem.with_name(stem.name + suffix) for suffix in (".png", ".pdf")]


def save_figure(fig: Figure, stem: str | os.PathLike) -> list[Path]:
    """Write ``stem``.png and ``stem``.pdf (creating the directory); return the paths."""
    paths = figure_files(stem)
    paths[0].parent.mkdir(parents=True, exist_ok=True)
    with matplotlib.rc_context(PAPER_STYLE):
        for path in paths:
            with atomic_write(path) as tmp:
                fig.savefig(tmp, format=path.suffix[1:])
    return paths


def _suffix(key: Mapping[str, object]) -> str:
    """File-name part naming the parameter values, e.g. '_Delta=0.5_h=1'."""
    parts = [f"{name}={value}" for name, value in key.items()]
    return "".join("_" + re.sub(r"[^A-Za-z0-9.=+-]+", "-", p) for p in parts)


def plot_results(results: pd.DataFrame, directory: str | os.PathLike) -> list[Path]:
    """Write the entropy, parts and knowledge figures of a results table to ``directory``.

    One set per combination of the parameters other than L (file names
    ``entropy_<name>=<value>_....png`` etc., just ``entropy.png`` when L is the only
    parameter), PNG and PDF each. Colours per L are shared by all figures.
    """
    scaling.require_columns(results, ENTROPY_COLUMNS + PARTS_COLUMNS + KNOWLEDGE_COLUMNS,
                            "figures")
    colors = length_colors(results["L"])
    shown = figure_parameters(results)
    paths = []
    for key, rows in scaling.split(results, shown):
        suffix = _suffix(key)
        for name, make in (("entropy", entropy_figure), ("parts", parts_figure),
                           ("knowledge", knowledge_figure)):
            paths += save_figure(make(rows, colors, shown),
                                 Path(directory) / f"{name}{suffix}")
    return paths
