"""What a figure of a run shows, apart from drawing it: the rows chosen, the numbers
drawn, the words of titles and captions and the settings recorded in the files.

Selection (:func:`select_rows`): coarse-grainings by label and parameter values, with an
InputError naming the allowed labels, parameters and values. Numbers
(:func:`figure_data`, written as CSV beside each figure): disorder means where the table
marks disorder realizations (:func:`mpsobs.analysis.curves.disorder_average`), the total
error S_obs_total_err (:mod:`mpsobs.analysis.uncertainty`), entropies in nats per site
(divided by L, names ending in PER_SITE) or total, times in units of 1/J.

Words. Panel titles describe the coarse-graining in words
(:func:`coarse_graining_title`, e.g. "energy of blocks of 4, bins of 0.5, then
number"); a label given in the spec is shown as written. The caption names the model
and initial state (:data:`CAPTION_PARAMETERS` that are fixed; a field seed only for a
random field), the parameters tied to L and the disorder average; values that vary are
in the legend and the panel titles. All settings of the rows (every parameter column,
the coarse-graining labels, the mpsobs version) go into the files' metadata
(:func:`figure_metadata`: PNG text chunks, PDF info dictionary).

Cost: linear in the rows of the table (pandas).
"""

from __future__ import annotations

import json
import re
import textwrap
from collections.abc import Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from mpsobs.analysis import curves, uncertainty
from mpsobs.core.errors import InputError
from mpsobs.core.version import __version__
from mpsobs.pipeline import columns as col
from mpsobs.pipeline.columns import parameter_columns

__all__ = [
    "CAPTION_WIDTH", "TITLE_WIDTH", "CAPTION_PARAMETERS", "KINDS", "ENTROPY_COLUMNS",
    "PARTS_COLUMNS",
    "KNOWLEDGE_COLUMNS", "EXTENSIVE", "PER_SITE", "coarse_graining_title", "coarse_order",
    "panel_title", "figure_title", "figure_parameters", "caption", "figure_metadata",
    "figure_data", "select_rows",
]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

#: Characters per caption line.
CAPTION_WIDTH = 62
#: Characters per line of a panel title (longer titles are wrapped, not cut at the panel).
TITLE_WIDTH = 56
#: Parameter columns of the model and the initial state: the caption names those that
#: are fixed in a figure (``pre_<name>`` too); every other setting is in the metadata.
CAPTION_PARAMETERS = ("model", "J", "delta", "g", "field", "h", "field_seed", "state",
                      "pattern", "number", "filling", "box_start", "box_stop", "box_from",
                      "box_to", "fill", "state_seed", "draw")
#: The figures of a run, in the order they are written.
KINDS = ("entropy", "parts", "knowledge")

ENTROPY_COLUMNS = ("t", "coarse_graining", "L", "S_obs", "S_obs_err", "S_thermo",
                   "S_ent_half")
PARTS_COLUMNS = ("t", "coarse_graining", "L", "S_shannon", "S_boltzmann")
KNOWLEDGE_COLUMNS = ("t", "coarse_graining", "L", "knowledge", "S_obs_err", "S_max",
                     "S_thermo")
_NEEDED = {"entropy": ENTROPY_COLUMNS, "parts": PARTS_COLUMNS,
           "knowledge": KNOWLEDGE_COLUMNS}
#: Columns each figure draws (those present are written to its CSV).
_DRAWN = {
    "entropy": ("S_obs", uncertainty.TOTAL, uncertainty.STATISTICAL, *uncertainty.ESTIMATES,
                uncertainty.PRUNED_MASS, col.TRUSTED_TIME, "S_thermo",
                col.EQUILIBRIUM, "S_max", "S_ent_half", "discarded_weight"),
    "parts": ("S_shannon", "S_shannon_err", "S_boltzmann", "S_boltzmann_err"),
    "knowledge": ("knowledge", uncertainty.TOTAL, "S_max", "S_thermo", col.EQUILIBRIUM),
}
#: Entropy columns (nats) divided by L in per-site figures; their names then end in
#: PER_SITE.
EXTENSIVE = ("S_obs", uncertainty.TOTAL, uncertainty.STATISTICAL, *uncertainty.ESTIMATES,
             "S_thermo", col.EQUILIBRIUM, "S_max", "S_ent_half", "S_shannon",
             "S_shannon_err", "S_boltzmann", "S_boltzmann_err", "knowledge")
PER_SITE = "_per_site"
#: Columns that :func:`mpsobs.pipeline.columns.parameter_columns` counts as parameters
#: but are not settings: made by the disorder average, or fixed by the coarse-graining.
_NOT_PARAMETERS = ("S_obs_disorder_err", "S_obs_sampling_err", "realizations",
                   "block_size")
#: Words for the observables in coarse-graining labels.
_OBSERVABLE_WORDS = {"number": "number", "energy": "energy", "fine": "configuration",
                     "operator": "operator"}
_LABEL_PART = re.compile(r"^(?P<obs>number|energy|fine|operator):"
                         r"(?P<where>b\d+|r\d+-\d+(?:,\d+-\d+)*)(?:,dE(?P<dE>[^,>]+))?"
                         r"(?:,N(?P<N>\d+))?(?:,D(?P<D>\d+))?(?:,sb(?P<sb>\d+))?$")
#: Words for the resolution parts of a wide-region energy label (spec keys moments,
#: moment_bond, sub_bins).
_RESOLUTION_WORDS = {"N": "{} moments", "D": "moment bond {}", "sb": "{} sub-bins"}


def _where_words(where: str) -> str:
    if where.startswith("b"):
        size = int(where[1:])
        return "single sites" if size == 1 else f"blocks of {size}"
    spans = [tuple(int(x) for x in span.split("-")) for span in where[1:].split(",")]
    return "regions " + ", ".join(f"{a}-{b - 1}" for a, b in spans)


def coarse_graining_title(label: str) -> str:
    """A coarse-graining label in words: ``energy:b4,dE0.5>number:b4`` -> "energy of
    blocks of 4, bins of 0.5, then number"; regions are named by their first and last
    site ("number of regions 0-31, 32-63"); the resolution of wide energy regions
    (``,N64,D16``) as "64 moments, moment bond 16". A label that is not of the form the
    coarse-grainings generate (one given in the spec) is returned unchanged."""
    if label == "fine":
        return "configuration of single sites"
    words, last_where = [], None
    for index, part in enumerate(str(label).split(">")):
        match = _LABEL_PART.match(part) if part != "fine" else _LABEL_PART.match("fine:b1")
        if match is None:
            return str(label)
        text = _OBSERVABLE_WORDS[match["obs"]]
        if match["where"] != last_where:
            text += f" of {_where_words(match['where'])}"
        if match["dE"] is not None:
            text += f", bins of {match['dE']}"
        text += "".join(f", {_RESOLUTION_WORDS[key].format(match[key])}"
                        for key in _RESOLUTION_WORDS if match[key] is not None)
        words.append(text if index == 0 else f"then {text}")
        last_where = match["where"]
    return ", ".join(words)


def coarse_order(results: pd.DataFrame) -> list[str]:
    """The coarse-graining labels in the order of the spec: the order in which they
    first appear in the table (a point writes its rows in spec order)."""
    return [str(v) for v in pd.unique(results["coarse_graining"])]


def _text(value: str) -> str:
    """Text shown literally (no mathtext)."""
    return str(value).replace("$", r"\$")


def panel_title(key: Mapping[str, object], shown: Iterable[str]) -> str:
    """Panel title: the coarse-graining in words, then the values of ``shown``, wrapped
    at TITLE_WIDTH characters."""
    others = [f"{k} = {key[k]}" for k in shown if k in key and k != "coarse_graining"]
    return _text(textwrap.fill(coarse_graining_title(str(key["coarse_graining"]))
                               + (f" ({', '.join(others)})" if others else ""), TITLE_WIDTH))


def figure_parameters(results: pd.DataFrame) -> list[str]:
    """Parameters that get figures of their own: those other than L (its companions and
    the disorder labels) that vary within a coarse-graining."""
    others = curves.group_columns(results)[1:]
    return curves.varying_columns(results, others, within="coarse_graining")


def _value(value) -> str:
    return f"{value:g}" if isinstance(value, float | np.floating) else str(value)


def _in_caption(name: str) -> bool:
    return name in CAPTION_PARAMETERS or (name.startswith("pre_")
                                          and name[4:] in CAPTION_PARAMETERS)


def _irrelevant(name: str, fixed: Mapping[str, object]) -> bool:
    """A model or state setting without effect: a field seed unless the field is random,
    a zero field's shape, a state seed unless the state is a random product."""
    prefix = "pre_" if name.startswith("pre_") else ""
    base = name[len(prefix):]
    if base == "field_seed":
        return fixed.get(prefix + "field", "random") != "random"
    if base == "field":
        return fixed.get(prefix + "h", 1.0) == 0 and fixed[name] != "random"
    if base in ("state_seed", "draw"):
        return fixed.get("state", "random_product") != "random_product"
    return False


def caption(results: pd.DataFrame, shown: Sequence[str] = (),
            parameters: Sequence[str] | None = None) -> str:
    """The caption of a figure of ``results``: the model and initial state
    (:data:`CAPTION_PARAMETERS` with one value in the rows, ``name=value``, table
    order, leaving out settings without effect such as the seed of a uniform field),
    the chain-length companions as ``name(L)`` lists and the disorder average. L, the
    ``shown`` parameters (in panel titles) and the numerical settings (in the metadata,
    :func:`figure_metadata`) are left out. ``parameters``: the columns to consider
    (default :func:`mpsobs.analysis.curves.group_columns`)."""
    disorder = curves.disorder_columns(results)
    skip = {"L", "coarse_graining", *shown, *disorder}
    companions = curves.length_companions(results) if parameters is None else []
    if parameters is None:
        parameters = curves.group_columns(results)
    candidates = [c for c in parameters if c not in skip and _in_caption(c)]
    varying = curves.varying_columns(results, candidates)
    fixed = {c: results[c].iloc[0] for c in candidates if c not in varying}
    parts = [f"{c}={_value(v)}" for c, v in fixed.items() if not _irrelevant(c, fixed)]
    for name in companions:
        pairs = results[["L", name]].drop_duplicates().sort_values("L")
        parts.append(f"{name}(L)=" + ",".join(_value(v) for v in pairs[name]))
    counts = None
    if disorder:
        per_curve = results.groupby(curves.group_columns(results) + ["L"], dropna=False)
        counts = sorted({int(n) for n in per_curve[disorder].nunique().max(axis=1)})
    elif "realizations" in results and results["realizations"].max() > 1:
        counts = sorted({int(n) for n in results["realizations"]})
    if counts:
        span = str(counts[0]) if len(counts) == 1 else f"{counts[0]}-{counts[-1]}"
        labels = f" of {', '.join(disorder)}" if disorder else ""
        parts.append(f"disorder mean over {span} realizations{labels} "
                     f"(band: error of the mean)")
    return _text("\n".join(textwrap.wrap("; ".join(parts), CAPTION_WIDTH)))


def _plain(value):
    """A table value as a JSON-ready Python value."""
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    return value


def figure_metadata(results: pd.DataFrame, title: str, shown: Sequence[str] = ()
                    ) -> dict[str, str]:
    """What the files of a figure of ``results`` record: ``title``, the ``caption``
    (:func:`caption`) and ``settings``, a JSON object of every parameter column (its
    value, or the list of its values when it varies), the coarse-graining labels in
    spec order and the mpsobs version that made the rows."""
    settings: dict[str, object] = {}
    for name in parameter_columns(results.columns):
        if name in _NOT_PARAMETERS:
            continue
        values = list({repr(v): v for v in map(_plain, results[name])}.values())
        settings[name] = values[0] if len(values) == 1 else values
    settings["coarse_graining"] = coarse_order(results)
    if "mpsobs_version" in results:
        settings["mpsobs_version"] = sorted({str(v) for v in results["mpsobs_version"]})
    settings["figure_by"] = f"mpsobs {__version__}"
    return {"title": title, "caption": caption(results, shown).replace("\n", " "),
            "settings": json.dumps(settings, default=str, sort_keys=True)}


def _averaged(results: pd.DataFrame) -> pd.DataFrame:
    """Disorder means when the rows have disorder labels, else the rows."""
    return curves.disorder_average(results) if curves.disorder_columns(results) else results


def _check_kind(kind: str) -> None:
    if kind not in KINDS:
        raise InputError(f"kind: unknown figure {kind!r}; allowed: {', '.join(KINDS)}")


def figure_data(results: pd.DataFrame, kind: str = "entropy", *, per_site: bool = True,
                shown: Sequence[str] = ()) -> pd.DataFrame:
    """The numbers a figure of ``kind`` ("entropy", "parts", "knowledge") draws.

    One row per (coarse-graining, varying parameters, L, t), coarse-grainings in spec
    order: ``coarse_graining``, the parameter columns that vary in the rows or are
    ``shown`` (in panel titles), ``L``,
    ``t`` and the figure's columns present in the table (disorder means where the rows
    are realizations; ``S_obs_total_err`` added, :mod:`mpsobs.analysis.uncertainty`).
    With ``per_site`` the entropy columns (:data:`EXTENSIVE`) are divided by L and
    named ``<column>_per_site``.
    """
    _check_kind(kind)
    curves.require_columns(results, _NEEDED[kind], f"{kind} figure")
    data = uncertainty.with_total_error(_averaged(results))
    params = [c for c in curves.group_columns(results)[1:] if c in data]
    varying = [c for c in params if c in shown or c in curves.varying_columns(data, params)]
    drawn = [c for c in _DRAWN[kind] if c in data]
    out = data[["coarse_graining", *varying, "L", "t", *drawn]].copy()
    if per_site:
        length = out["L"].to_numpy(dtype=float)
        for name in drawn:
            if name in EXTENSIVE:
                out[name] = out[name].to_numpy(dtype=float) / length
        out = out.rename(columns={c: c + PER_SITE for c in drawn if c in EXTENSIVE})
    order = {label: i for i, label in enumerate(coarse_order(results))}
    out["_order"] = out["coarse_graining"].map(order)
    out = out.sort_values(["_order", *varying, "L", "t"], kind="stable")
    return out.drop(columns="_order").reset_index(drop=True)


def _matches(column: pd.Series, wanted) -> np.ndarray:
    """Rows of ``column`` equal to ``wanted`` (text compared as a number where the
    column is numeric)."""
    if pd.api.types.is_numeric_dtype(column) and not pd.api.types.is_bool_dtype(column):
        try:
            number = float(wanted)
        except (TypeError, ValueError):
            return np.zeros(len(column), dtype=bool)
        return np.isclose(column.to_numpy(dtype=float), number, rtol=1e-12, atol=0.0)
    return (column.astype(str) == str(wanted)).to_numpy()


def select_rows(results: pd.DataFrame, *, coarse: Sequence[str] | None = None,
                where: Mapping[str, Sequence] | None = None) -> pd.DataFrame:
    """The rows of the coarse-grainings ``coarse`` (labels; default all) whose parameter
    columns take one of the given values, ``where`` = {name: values} (e.g.
    {"L": [32, 48]}; text values are compared as numbers in numeric columns). Raises
    InputError naming an unknown label, parameter or value with the allowed ones."""
    rows = results
    if coarse:
        labels = coarse_order(results)
        unknown = [c for c in coarse if c not in labels]
        if unknown:
            raise InputError(f"coarse: unknown coarse-graining {', '.join(map(repr, unknown))}"
                             f"; the run has {', '.join(map(repr, labels))}")
        rows = rows[rows["coarse_graining"].isin(list(coarse))]
    parameters = [c for c in parameter_columns(results.columns) if c not in _NOT_PARAMETERS]
    for name, values in (where or {}).items():
        if name not in parameters:
            raise InputError(f"where: {name!r} is not a parameter of the run; parameters: "
                             f"{', '.join(parameters)}")
        present = sorted({_value(_plain(v)) for v in results[name]})
        keep = np.zeros(len(rows), dtype=bool)
        for value in values:
            hit = _matches(rows[name], value)
            if not _matches(results[name], value).any():
                raise InputError(f"where: {name}={value} is not in the run; values: "
                                 f"{', '.join(present)}")
            keep |= hit
        rows = rows[keep]
    if rows.empty:
        raise InputError("where: no rows have all the chosen values together")
    return rows


def figure_title(kind: str, rows: pd.DataFrame, key: Mapping[str, object]) -> str:
    """The title of a figure of ``kind`` of ``rows``: what it shows, the coarse-grainings
    in words and the parameter values ``key`` of its file."""
    what = {"entropy": "Observational entropy", "parts": "Shannon and Boltzmann parts",
            "knowledge": "Knowledge"}[kind]
    labels = ", ".join(coarse_graining_title(c) for c in coarse_order(rows))
    values = "".join(f", {k} = {_value(v)}" for k, v in key.items())
    return f"{what} after the quench: {labels}{values}"
