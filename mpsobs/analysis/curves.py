"""The curves of a results table: groups, disorder means and trusted times.

A *curve* is S_obs(t) of one chain length L, one coarse-graining and one value of every
other sweep parameter; a *group* is the set of curves that differ only in L
(:func:`group_columns`). This module reads and splits the table into curves for the
plateaus, saturation times and fits of :mod:`mpsobs.analysis.scaling`; it computes no
scaling itself. Entropies in nats, times in units of 1/J.

Disorder: a table whose ``disorder_axes`` column names parameter columns (e.g.
``field_seed``, from the spec's ``sweep.disorder``) holds R realizations of each curve;
they are averaged per (group, L, t) (:func:`disorder_average`): the mean, its
sample-to-sample error s_R / sqrt(R) and the within-realization (sampling) error
sqrt(sum e_r**2) / R are kept apart; S_obs_err of the mean is the larger of the two.

Trusted times: where the table has ``t_trusted`` (the last time at which the truncation
error is within tolerance; NaN or inf = every time; :mod:`mpsobs.analysis.trust` computes
it from the stored truncation errors), a curve is used only up to its smallest t_trusted
when at least MIN_TRUSTED_POINTS times remain; otherwise all times are used, with
``S_obs_trunc_err`` added in quadrature to S_obs_err beyond t_trusted (a warning is
logged).

Cost: one pass over the table per split, O(rows x columns) with pandas group-by.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from mpsobs.core.errors import InputError
from mpsobs.core.printing import short
from mpsobs.pipeline.columns import (
    COARSE_GRAINING,
    DISORDER_AXES,
    EQUILIBRIUM,
    EQUILIBRIUM_ERR,
    LENGTH,
    S_OBS,
    S_OBS_ERR,
    S_THERMO,
    TRUNCATION_ERROR,
    TRUSTED_TIME,
    T,
    parameter_columns,
)
from mpsobs.pipeline.store import RunStore

__all__ = [
    "SCALING_COLUMNS", "MIN_TRUSTED_POINTS", "OUTPUT_COLUMNS", "COLLAPSE_COLUMNS", "Curve",
    "read_results", "require_columns", "varying_columns", "disorder_columns",
    "length_companions", "group_columns", "key_columns", "describe", "split",
    "disorder_average", "split_curves",
]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)

#: Columns the scaling needs in the results table. Read when present (tables of older
#: runs lack them): TRUNCATION_ERROR, TRUSTED_TIME, EQUILIBRIUM, EQUILIBRIUM_ERR and
#: DISORDER_AXES (:mod:`mpsobs.pipeline.columns`).
SCALING_COLUMNS = (T, COARSE_GRAINING, LENGTH, S_OBS, S_OBS_ERR, S_THERMO)
#: Columns of disorder means made here (never taken for parameters).
_DISORDER_MEAN_COLUMNS = ("S_obs_disorder_err", "S_obs_sampling_err", "realizations")
#: A curve is scaled on its trusted times alone when at least this many remain.
MIN_TRUSTED_POINTS = 4
#: Values averaged over disorder with the error of their mean.
_ERROR_PAIRS = {"S_obs": "S_obs_err", "S_shannon": "S_shannon_err",
                "S_boltzmann": "S_boltzmann_err", "S_thermo": "S_thermo_err",
                EQUILIBRIUM: EQUILIBRIUM_ERR}
#: Columns whose disorder "mean" is the largest value (bounds, not averages).
_MAX_COLUMNS = ("discarded_weight", "pruned_mass", "max_bond", "check_discarded_weight")
#: Seed parameter columns that usually label disorder realizations.
_SEED_COLUMNS = ("field_seed", "state_seed")
#: Columns of one realization, left out of disorder means.
_PER_REALIZATION = ("seed", "point_id", "elapsed_s")

#: Columns the scaling adds: those of the plateaus, extrapolation, saturation times,
#: exponent fits and collapse (every other column of its tables is a group column).
_PLATEAU_OUT = (
    "t_first", "t_last", "window_start", "plateau_points", "realizations",
    "plateau_per_site", "plateau_err", "plateau_disorder_err", "plateau_sampling_err",
    "plateau_trunc_err", "t_trusted", "trusted_only", "plateau_spread", "plateau_drift",
    "plateau_drift_err", "initial_per_site", "initial_err", "thermo_per_site", "thermo_err",
    "deficit_per_site", "deficit_err", "eq_per_site", "eq_err", "deficit_eq_per_site",
    "deficit_eq_err", "discarded_weight_max", "pruned_mass_max", "window_slope",
    "window_slope_err", "eq_distance_sigmas", "plateau_status", "plateau_method_err",
    "plateau_pruned_bound", "plateau_total_err",
)
_EXTRAPOLATION_OUT = (
    "extrapolated_per_site", "extrapolated_err", "finite_size_slope",
    "finite_size_slope_err", "extrapolation_chi2_red", "extrapolation_lengths",
    "deficit_eq_extrapolated", "deficit_eq_extrapolated_err",
)
_SATURATION_OUT = ("saturation_fraction", "saturation_time", "saturation_time_err")
_EXPONENT_OUT = ("z", "z_err", "z_chi2_red", "saturation_prefactor",
                 "saturation_prefactor_err", "z_lengths", "z_note")
#: Columns of a collapse table besides the group columns and L.
COLLAPSE_COLUMNS = ("t", "scaled_time", "rise", "rise_err", "realizations")
OUTPUT_COLUMNS = frozenset(("L",) + _PLATEAU_OUT + _EXTRAPOLATION_OUT + _SATURATION_OUT
                           + _EXPONENT_OUT + COLLAPSE_COLUMNS)


def read_results(run_dir: str | os.PathLike) -> pd.DataFrame:
    """The run table RUN_DIR/results.parquet."""
    path = RunStore(run_dir).results_path
    if not path.is_file():
        raise InputError(f"run_dir: no results table at {path}")
    return pd.read_parquet(path)


def require_columns(results: pd.DataFrame, needed, what: str) -> None:
    """Raise InputError naming the columns of ``needed`` that ``results`` lacks."""
    missing = [c for c in needed if c not in results.columns]
    if missing:
        raise InputError(f"{what}: the results table lacks the column(s) {', '.join(missing)} "
                         f"(needs {', '.join(needed)})")


def varying_columns(frame: pd.DataFrame, columns, *, within: str | None = None) -> list[str]:
    """The columns of ``columns`` that take more than one value in ``frame`` (NaN counts
    as a value) or, with ``within``, inside at least one group of equal ``within``."""
    columns = list(columns)
    if not columns or frame.empty:
        return []
    data = _hashable(frame, columns)
    if within is None:
        return [c for c in columns if data[c].nunique(dropna=False) > 1]
    counts = data.groupby(within, dropna=False)[columns].nunique(dropna=False)
    return [c for c in columns if (counts[c] > 1).any()]


def disorder_columns(results: pd.DataFrame) -> list[str]:
    """Parameter columns that label disorder realizations of one ensemble: those named
    in the ``disorder_axes`` column (comma-separated, written from the spec's
    ``sweep.disorder``), in table order; none for tables without that column."""
    if DISORDER_AXES not in results.columns:
        return []
    names: set[str] = set()
    for value in results[DISORDER_AXES].dropna().unique():
        names.update(name for name in str(value).split(",") if name)
    return [c for c in results.columns if c in names]


def _parameters(results: pd.DataFrame) -> list[str]:
    """Parameter columns that are not disorder labels."""
    skip = {*disorder_columns(results), *_DISORDER_MEAN_COLUMNS}
    return [c for c in parameter_columns(results.columns) if c not in skip]


def length_companions(results: pd.DataFrame) -> list[str]:
    """Parameter columns that change with L alone (one value per L, several in the
    table), such as a bond dimension swept together with L; the fits treat them as part
    of the chain length. Disorder labels (:func:`disorder_columns`) are never companions."""
    others = [c for c in _parameters(results) if c != "L"]
    if "L" not in results.columns:
        return []
    varying = varying_columns(results, others)
    return [c for c in varying if c not in varying_columns(results, varying, within="L")]


def group_columns(results: pd.DataFrame) -> list[str]:
    """Columns identifying a group of curves that differ only in L: the coarse-graining
    and every parameter column other than L, its companions (:func:`length_companions`)
    and the disorder labels (:func:`disorder_columns`, averaged over), in table order."""
    companions = set(length_companions(results))
    return ["coarse_graining"] + [c for c in _parameters(results)
                                  if c != "L" and c not in companions]


def key_columns(table: pd.DataFrame) -> list[str]:
    """The group columns of a table made by this module (every column it did not add)."""
    return [c for c in table.columns if c not in OUTPUT_COLUMNS]


def describe(key: dict, shown=None) -> str:
    """``name=value, ...`` of the coarse-graining, L and the ``shown`` columns (default
    all of ``key``)."""
    names = [k for k in key if shown is None or k in shown or k in ("coarse_graining", "L")]
    return ", ".join(f"{name}={key[name]!r}" if isinstance(key[name], str)
                     else f"{name}={key[name]}" for name in names)


def _hashable(results: pd.DataFrame, columns: list[str]) -> pd.DataFrame:
    """Copy of ``results`` with list or array parameter values replaced by their text."""
    out = results.copy()
    for name in columns:
        if out[name].dtype == object:
            out[name] = [repr(v.tolist()) if isinstance(v, np.ndarray)
                         else repr(v) if isinstance(v, list | dict | set) else v
                         for v in out[name]]
    return out


def split(results: pd.DataFrame, columns: list[str]) -> list[tuple[dict, pd.DataFrame]]:
    """(values, rows) for each distinct combination of ``columns`` (NaN is a value; list
    or array values are compared as text); ``[({}, results)]`` for no columns."""
    if not columns:
        return [({}, results)]
    data = _hashable(results, columns)
    return [(dict(zip(columns, values, strict=True)), rows)
            for values, rows in data.groupby(columns, dropna=False, sort=True)]


@dataclass(frozen=True)
class Curve:
    """One curve: its key (group columns and L), a text naming it by the parameters that
    vary, the disorder-mean rows (time-sorted; the realization itself without disorder),
    the realizations' own rows (same times) and its trusted time range."""

    key: dict
    name: str
    mean: pd.DataFrame
    members: tuple[pd.DataFrame, ...]
    t_trusted: float
    trusted_only: bool

    def __repr__(self) -> str:
        return (f"Curve({short(self.name)}, {len(self.mean)} times, "
                f"{len(self.members)} realizations)")


def _average(members: Sequence[pd.DataFrame], disorder: list[str], name: str
             ) -> pd.DataFrame:
    """Disorder mean of realizations on one time grid (see :func:`disorder_average`)."""
    first = members[0]
    count = len(members)
    t = first["t"].to_numpy(dtype=float)
    for member in members[1:]:
        if not np.array_equal(member["t"].to_numpy(dtype=float), t):
            raise InputError(f"results: the disorder realizations of {name} have different "
                             "time grids; a disorder mean needs the same times in each")
    kept = [c for c in first.columns if c not in disorder and c not in _PER_REALIZATION]
    out = {c: first[c].to_numpy() for c in kept}
    if count > 1:
        for column in kept:
            if column == "t" or not pd.api.types.is_numeric_dtype(first[column]) or \
                    pd.api.types.is_bool_dtype(first[column]):
                continue
            stack = np.stack([m[column].to_numpy(dtype=float) for m in members])
            if column in _MAX_COLUMNS:
                out[column] = stack.max(axis=0)
            elif column == TRUSTED_TIME:
                out[column] = np.where(np.isnan(stack), np.inf, stack).min(axis=0)
            else:
                out[column] = stack.mean(axis=0)
    for value, err in _ERROR_PAIRS.items():
        if value not in first.columns:
            continue
        stack = np.stack([m[value].to_numpy(dtype=float) for m in members])
        errors = (np.stack([m[err].to_numpy(dtype=float) for m in members])
                  if err in first.columns else np.zeros_like(stack))
        sampling = np.sqrt(np.sum(errors**2, axis=0)) / count
        spread = (np.std(stack, axis=0, ddof=1) / np.sqrt(count) if count > 1
                  else np.full(t.size, np.nan))
        if count > 1:
            out[err] = np.fmax(spread, sampling)
        if value == "S_obs":
            out["S_obs_disorder_err"], out["S_obs_sampling_err"] = spread, sampling
    out["realizations"] = count
    return pd.DataFrame(out, index=first.index)


def disorder_average(results: pd.DataFrame) -> pd.DataFrame:
    """The results averaged over disorder realizations per (group columns, L, t).

    Returns
    -------
    One row per (coarse-graining, parameters other than the disorder labels, L, t):
    means of the numeric columns (the largest ``discarded_weight``, ``pruned_mass`` and
    ``max_bond``; the smallest ``t_trusted``), and

    - ``S_obs_err`` (and the errors of the Shannon, Boltzmann, thermodynamic and
      equilibrium values alike) = max(disorder, sampling) error of the mean, where
    - ``S_obs_disorder_err`` = sample-to-sample standard deviation / sqrt(R) (NaN for
      R = 1), which contains the sampling noise too, and
    - ``S_obs_sampling_err`` = sqrt(sum of the realizations' S_obs_err**2) / R, the
      within-realization part alone;
    - ``realizations`` = R.

    The disorder labels, ``seed``, ``point_id`` and ``elapsed_s`` are dropped. Without
    disorder labels every curve is its own mean (R = 1).
    """
    _, curves = split_curves(results, SCALING_COLUMNS[:-1], warn=False, trusted=False)
    return pd.concat([c.mean for c in curves], ignore_index=True)


def split_curves(results: pd.DataFrame, needed, *, warn: bool = True, trusted: bool = True
                 ) -> tuple[list[str], list[Curve]]:
    """Check the columns and split the table into time-sorted curves, averaged over
    disorder (``warn``: log what is treated specially; ``trusted``: keep only the times
    trusted by the truncation check, see :func:`_trusted`)."""
    require_columns(results, needed, "results")
    keys = group_columns(results)
    disorder = disorder_columns(results)
    clash = sorted(OUTPUT_COLUMNS.intersection(keys))
    if clash:
        raise InputError(f"results: parameter column(s) {', '.join(clash)} clash with "
                         "columns of the scaling table; rename the parameter")
    companions = length_companions(results)
    if companions and warn:
        log.warning("results: %s change(s) together with L (one value per L); treated as "
                    "part of the chain length, not as separate groups", ", ".join(companions))
    bad_err = ~np.isfinite(results["S_obs_err"].to_numpy(dtype=float))
    if bad_err.any():
        raise InputError(f"results: S_obs_err is not a finite number in {int(bad_err.sum())} "
                         "rows; every S_obs needs its standard error (0 when exact)")
    data = results
    bad = ~np.isfinite(data["S_obs"].to_numpy(dtype=float))
    if bad.any() and warn:
        log.warning("results: dropping %d rows whose S_obs is not finite", int(bad.sum()))
        data = data[~bad]
    if data.empty:
        raise InputError("results: the table has no rows with a finite S_obs")
    shown = varying_columns(data, keys[1:])
    unmarked = [c for c in shown if c in _SEED_COLUMNS]
    if unmarked and warn:
        log.warning("results: %s varies and is treated as a parameter (one set of curves "
                    "per value); if its values are realizations of one disorder ensemble, "
                    "mark them with sweep.disorder in the spec", ", ".join(unmarked))
    curves = []
    for key, rows in split(data, keys + ["L"]):
        name = describe(key, shown)
        members = []
        for labels, member in split(rows, disorder):
            times = member["t"].to_numpy(dtype=float)
            if np.unique(times).size != times.size:
                raise InputError(f"results: several rows share the same t for {name}"
                                 + (f" ({describe(labels)})" if labels else "")
                                 + "; the parameter columns must identify one point per curve")
            members.append(member.sort_values("t"))
        mean = _average(members, disorder, name)
        curves.append(_trusted(key, name, mean, members, warn) if trusted else
                      Curve(key, name, mean, tuple(members), np.inf, True))
    return keys, curves


def _trusted(key: dict, name: str, mean: pd.DataFrame, members: list[pd.DataFrame],
             warn: bool) -> Curve:
    """The curve on its trusted times (t <= the smallest t_trusted of its rows; NaN and
    inf mean all times), when at least MIN_TRUSTED_POINTS remain; otherwise all times,
    with S_obs_trunc_err added in quadrature to S_obs_err beyond t_trusted (logged)."""
    t = mean["t"].to_numpy(dtype=float)
    limit = np.inf
    if TRUSTED_TIME in mean.columns:
        values = mean[TRUSTED_TIME].to_numpy(dtype=float)
        limit = float(np.min(np.where(np.isnan(values), np.inf, values)))
    inside = t <= limit
    if inside.all():
        return Curve(key, name, mean, tuple(members), limit, True)
    if inside.sum() >= MIN_TRUSTED_POINTS:
        if warn:
            log.info("truncation: %s is used up to t_trusted = %g (%d of %d times)", name,
                     limit, int(inside.sum()), t.size)
        return Curve(key, name, mean[inside], tuple(m[inside] for m in members), limit,
                      True)
    if warn:
        log.warning("truncation: only %d of %d times of %s are trusted (t <= %g); all are "
                    "used, with the truncation error added to S_obs_err beyond",
                    int(inside.sum()), t.size, name, limit)

    def widened(frame: pd.DataFrame) -> pd.DataFrame:
        if TRUNCATION_ERROR not in frame.columns:
            return frame
        err = frame["S_obs_err"].to_numpy(dtype=float)
        trunc = np.nan_to_num(frame[TRUNCATION_ERROR].to_numpy(dtype=float))
        return frame.assign(S_obs_err=np.where(inside, err, np.hypot(err, trunc)))

    return Curve(key, name, widened(mean), tuple(widened(m) for m in members), limit, False)
