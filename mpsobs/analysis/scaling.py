"""Finite-size scaling of observational-entropy curves read from a results table.

A *curve* is S_obs(t) of one chain length L, one coarse-graining and one value of every
other sweep parameter; a *group* is the set of curves that differ only in L. Entropies
are reported per site in nats, times in units of 1/J.

Disorder: a table whose ``disorder_axes`` column names parameter columns (e.g.
``field_seed``, from the spec's ``sweep.disorder``) holds R realizations of each curve;
they are averaged per (group, L, t) (:func:`disorder_average`): the mean, its
sample-to-sample error s_R / sqrt(R) and the within-realization (sampling) error
sqrt(sum e_r**2) / R are kept apart; S_obs_err of the mean is the larger of the two.
The plateau of such a curve is the mean of the R realizations' plateaus, with
plateau_disorder_err = (their sample standard deviation) / sqrt(R) and
plateau_sampling_err = sqrt(sum plateau_err_r**2) / R; plateau_err = the larger of
both enters the fits (a per-realization plateau carries its disorder offset at every
time of the window, so the window scatter of the mean curve would understate it).

Trusted times: where the table has ``t_trusted`` (the last time at which the truncation
error is within tolerance; NaN or inf = every time; :mod:`mpsobs.analysis.trust` computes
it from the stored truncation errors, at the tolerance ``trust_rtol`` of
:func:`scaling_table`), a curve is used only up to its
smallest t_trusted when at least MIN_TRUSTED_POINTS times remain; otherwise all times
are used, with ``S_obs_trunc_err`` added in quadrature to S_obs_err beyond t_trusted
(a warning is logged). The window below is then the last fraction of the used range.

Per curve (errors are standard errors, e_i = S_obs_err_i / L at time t_i):

- plateau: mean of y_i = S_obs(t_i) / L over the *window*, the last ``window`` fraction
  of the curve's time range (n points). Its error combines the propagated standard
  errors and the scatter s (sample standard deviation, ddof = 1) over the window:

      plateau_err = max(s, rms(e)) / sqrt(n),     rms(e) = sqrt(mean(e_i**2)).

  This is the random-effects estimate: with y_i = mu + f_i + eps_i (temporal
  fluctuation f of variance v, sampling noise eps of variance e_i**2),
  Var(mean) = v / n + sum(e_i**2) / n**2 and s**2 estimates v + mean(e_i**2); taking
  v = max(s**2 - mean(e_i**2), 0) gives the formula above. It treats the window's
  points as independent (time correlations of the fluctuations are not modelled).
- drift: mean of the second half of the window minus that of the first half, error
  max(s_w, rms(e)) * sqrt(1/n_1 + 1/n_2) with s_w the pooled scatter about the two
  half means. A drift beyond 4 errors is logged as a warning (no plateau yet) and then
  added in quadrature to plateau_err, as a systematic error of an unsaturated curve.
- status (``plateau_status``): ``rising`` when the least-squares slope of S_obs/L over
  the window (``window_slope``, error max(s_r, rms(e)) / sqrt(sum (t - mean t)**2), s_r
  the residual scatter) exceeds SLOPE_SIGMAS errors and changes S_obs/L by more than
  RESOLUTION over the window: the window mean is then a lower (or upper) bound, not a
  plateau, the curve gets no saturation time and is left out of the collapse;
  ``below S_obs_eq`` when the slope is not significant but the plateau lies more than
  SLOPE_SIGMAS combined errors sqrt(plateau_total_err**2 + eq_err**2) below the
  equilibrium value S_obs_eq / L (``eq_distance_sigmas``): the curve rises too slowly
  to see, or does not thermalize; ``saturated`` otherwise. Both flags are logged as
  warnings. The slope test treats the window's points as independent, so slow
  oscillations of a saturated curve can be flagged (a false alarm, never a silent
  miss of a steady rise).
- total error (``plateau_total_err``): plateau_err (statistical, with the drift) and
  the window means of the truncation and method error estimates per site in
  quadrature, plus the largest pruned-mass entropy bound per site of the window
  (the rule of :mod:`mpsobs.analysis.uncertainty`, applied to the plateau: the
  systematic parts do not average down over the window). It enters the deficits and
  the 1/L extrapolation.
- deficit: S_thermo / L - plateau, error sqrt(plateau_total_err**2 + thermo_err**2) with
  thermo_err = S_thermo_err / L (0 when the column is absent); likewise
  deficit_eq = S_obs_eq / L - plateau where the table has the equilibrium value S_obs_eq
  (the S_obs of the Gibbs state at the initial energy for that coarse-graining), NaN
  otherwise. plateau_trunc_err is the mean of S_obs_trunc_err / L over the window.
- saturation time t_f: the time at which the curve has covered a fraction f of its
  change from the first time point, i.e. crosses the level
  c = S_0 + f (S_plateau - S_0) (with S_0 = 0: the time to reach f S_plateau). It is
  measured as t_0 plus the time the piecewise-linear interpolant of the curve spends
  short of c before its first point beyond c by more than CLEAR_MARGIN errors e_i.
  For a noiseless monotone curve this is the linearly interpolated crossing; on a noisy
  curve it does not stop at the first noise spike (a first-crossing rule is biased
  early); later dips below c (revivals) are not counted. Its error is
  sqrt(level**2 + max(noise**2, grid**2)) with
    * level = |dt_f/dc| sqrt(f**2 plateau_err**2 + (1 - f)**2 e_0**2), dt_f/dc a
      central difference of the estimator over +- max(2 rms(e), 1e-3 |change|);
    * noise**2 = variance of the estimator over BOOTSTRAP_SAMPLES parametric resamples
      y_i + e_i N(0, 1) of the curve (fixed seed BOOTSTRAP_SEED, so reproducible);
    * grid = t_f - t_f(every other time point). For a locally quadratic curve |grid| is
      at least the linear-interpolation error of t_f; its noise part is of the order of
      noise, hence the max (as for the plateau).
  The time grid must resolve the rise (several points per relaxation time).

Per group:

- extrapolation: weighted least squares plateau_per_site = a + b / L (weights
  1 / plateau_total_err**2); extrapolated_per_site = a; the same fit of deficit_eq gives
  deficit_eq_extrapolated where two or more lengths have it.
- exponent: weighted least squares ln t_f = ln A + z ln L (errors t_f_err / t_f), from
  MIN_EXPONENT_LENGTHS or more lengths with a saturation time; with fewer, z is NaN
  and ``z_note`` says why (two points fix any power law and test none).

Straight-line fits follow the weighted least-squares formulas of Press et al.,
Numerical Recipes, 3rd ed. (2007), Sec. 15.2. Parameter errors come from the inverse
normal matrix; when the reduced chi-square exceeds 1 they are multiplied by
sqrt(chi2_red) (the scale factor of the Particle Data Group, Review of Particle Physics,
Introduction, "averaging procedures"). Errors below ERROR_FLOOR are raised to it before
fitting, so exact, noiseless inputs give a fit whose errors come from the residuals.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from mpsobs.analysis import trust, uncertainty
from mpsobs.core.errors import InputError
from mpsobs.core.printing import with_error
from mpsobs.pipeline.columns import (
    COARSE_GRAINING,
    DISORDER_AXES,
    EQUILIBRIUM,
    EQUILIBRIUM_ERR,
    LENGTH,
    METHOD_ERROR,
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
    "ERROR_FLOOR", "LineFit", "fit_line", "read_results", "require_columns",
    "disorder_columns", "disorder_average", "group_columns", "key_columns",
    "length_companions", "split", "varying_columns",
    "plateaus", "extrapolate", "saturation_times", "fit_exponent", "scaling_table",
    "collapse_curves", "format_table",
]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)

#: Smallest standard error used as a fit weight (nats per site, or relative for t_f).
ERROR_FLOOR = 1e-12
#: Parametric resamples of a curve for the noise part of the saturation-time error.
BOOTSTRAP_SAMPLES = 256
#: Seed of those resamples (the same for every curve: the table is reproducible).
BOOTSTRAP_SEED = 20240601
#: A curve has surely crossed a level at its first point beyond it by this many errors.
CLEAR_MARGIN = 3.0
#: A curve counts as rising when its window slope exceeds this many standard errors ...
SLOPE_SIGMAS = 4.0
#: ... and changes S_obs/L over the window by more than this (nats per site): the
#: resolution below which a change is invisible in a figure and negligible in a table.
RESOLUTION = 1e-4
#: Fewest chain lengths from which a power law t_f = A L**z is fitted (two points fix
#: any straight line; a third tests it).
MIN_EXPONENT_LENGTHS = 3
#: Values of ``plateau_status``.
SATURATED, RISING, BELOW_EQUILIBRIUM = "saturated", "rising", "below S_obs_eq"
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
_COLLAPSE_OUT = ("t", "scaled_time", "rise", "rise_err", "realizations")
_OUTPUT = frozenset(("L",) + _PLATEAU_OUT + _EXTRAPOLATION_OUT + _SATURATION_OUT
                    + _EXPONENT_OUT + _COLLAPSE_OUT)


@dataclass(frozen=True)
class LineFit:
    """Weighted least-squares fit y = intercept + slope * x.

    ``chi2`` is sum((y - fit) / sigma)**2 with ``dof`` = n - 2 degrees of freedom;
    ``chi2_red`` = chi2 / dof (NaN when dof = 0). The errors include the scale factor
    max(1, sqrt(chi2_red)).
    """

    intercept: float
    intercept_err: float
    slope: float
    slope_err: float
    chi2: float
    dof: int

    @property
    def chi2_red(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else float("nan")


def fit_line(x: np.ndarray, y: np.ndarray, sigma: np.ndarray) -> LineFit:
    """Weighted least-squares straight line through (x, y +- sigma).

    Needs at least two distinct x. Cost O(n).
    Reference: Press et al., Numerical Recipes, 3rd ed. (2007), Sec. 15.2.
    """
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    sigma = np.maximum(np.asarray(sigma, dtype=float), ERROR_FLOOR)
    if np.unique(x).size < 2:
        raise InputError(f"fit: a straight line needs at least two distinct x; got {x.tolist()}")
    design = np.column_stack([np.ones_like(x), x]) / sigma[:, None]
    normal_inverse = np.linalg.inv(design.T @ design)
    coef = normal_inverse @ (design.T @ (y / sigma))
    chi2 = float(np.sum(((y - coef[0] - coef[1] * x) / sigma) ** 2))
    dof = x.size - 2
    scale = max(1.0, chi2 / dof) if dof > 0 else 1.0
    err = np.sqrt(np.diag(normal_inverse) * scale)
    return LineFit(float(coef[0]), float(err[0]), float(coef[1]), float(err[1]), chi2, dof)


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
    return [c for c in table.columns if c not in _OUTPUT]


def _describe(key: dict, shown=None) -> str:
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
class _Curve:
    """One curve: its key (group columns and L), a text naming it by the parameters that
    vary, the disorder-mean rows (time-sorted; the realization itself without disorder),
    the realizations' own rows (same times) and its trusted time range."""

    key: dict
    name: str
    mean: pd.DataFrame
    members: tuple[pd.DataFrame, ...]
    t_trusted: float
    trusted_only: bool


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
    _, curves = _curves(results, SCALING_COLUMNS[:-1], warn=False, trusted=False)
    return pd.concat([c.mean for c in curves], ignore_index=True)


def _curves(results: pd.DataFrame, needed, *, warn: bool = True, trusted: bool = True
            ) -> tuple[list[str], list[_Curve]]:
    """Check the columns and split the table into time-sorted curves, averaged over
    disorder (``warn``: log what is treated specially; ``trusted``: keep only the times
    trusted by the truncation check, see :func:`_trusted`)."""
    require_columns(results, needed, "results")
    keys = group_columns(results)
    disorder = disorder_columns(results)
    clash = sorted(_OUTPUT.intersection(keys))
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
        name = _describe(key, shown)
        members = []
        for labels, member in split(rows, disorder):
            times = member["t"].to_numpy(dtype=float)
            if np.unique(times).size != times.size:
                raise InputError(f"results: several rows share the same t for {name}"
                                 + (f" ({_describe(labels)})" if labels else "")
                                 + "; the parameter columns must identify one point per curve")
            members.append(member.sort_values("t"))
        mean = _average(members, disorder, name)
        curves.append(_trusted(key, name, mean, members, warn) if trusted else
                      _Curve(key, name, mean, tuple(members), np.inf, True))
    return keys, curves


def _trusted(key: dict, name: str, mean: pd.DataFrame, members: list[pd.DataFrame],
             warn: bool) -> _Curve:
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
        return _Curve(key, name, mean, tuple(members), limit, True)
    if inside.sum() >= MIN_TRUSTED_POINTS:
        if warn:
            log.info("truncation: %s is used up to t_trusted = %g (%d of %d times)", name,
                     limit, int(inside.sum()), t.size)
        return _Curve(key, name, mean[inside], tuple(m[inside] for m in members), limit,
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

    return _Curve(key, name, widened(mean), tuple(widened(m) for m in members), limit, False)


def _check_options(window: float | None = None, fraction: float | None = None) -> None:
    if window is not None and not (0.0 < window <= 1.0):
        raise InputError(f"window: expected a fraction of the time range in (0, 1], got {window!r}")
    if fraction is not None and not (0.0 < fraction < 1.0):
        raise InputError(f"fraction: expected a number in (0, 1), got {fraction!r}")


def _window(frame: pd.DataFrame, L: int, window: float, name: str) -> dict:
    """Plateau statistics of S_obs / L over the last ``window`` of one curve's times."""
    t = frame["t"].to_numpy(dtype=float)
    y = frame["S_obs"].to_numpy(dtype=float) / L
    e = frame["S_obs_err"].to_numpy(dtype=float) / L
    span = t[-1] - t[0]
    if span <= 0:
        raise InputError(f"results: a single time t={t[0]} for {name}; "
                         "a plateau needs a time range")
    start = t[-1] - window * span
    inside = t >= start - 1e-12 * span
    n = int(inside.sum())
    if n < 2:
        raise InputError(f"window: the last {window} of the time range holds {n} time point "
                         f"for {name}; a plateau needs at least 2, use a larger window")
    yw, ew = y[inside], e[inside]
    spread = float(np.std(yw, ddof=1))
    rms = float(np.sqrt(np.mean(ew**2)))
    slope, slope_err = _slope(t[inside], yw, rms)
    first, second = yw[: n // 2], yw[n // 2:]
    if n >= 4:
        within = np.concatenate([first - first.mean(), second - second.mean()])
        scatter = float(np.sqrt(np.sum(within**2) / (n - 2)))
    else:
        scatter = 0.0
    return {"t": t, "y": y, "e": e, "start": start, "inside": inside, "n": n,
            "mean": float(np.mean(yw)), "err": max(spread, rms) / np.sqrt(n),
            "spread": spread, "drift": float(np.mean(second) - np.mean(first)),
            "drift_err": max(scatter, rms) * np.sqrt(1 / first.size + 1 / second.size),
            "slope": slope, "slope_err": slope_err}


def _slope(t: np.ndarray, y: np.ndarray, rms: float) -> tuple[float, float]:
    """Least-squares slope of y(t) over the window and its error
    max(s_r, rms(e)) / sqrt(sum (t - mean t)**2), s_r the residual standard deviation
    (ddof = 2; 0 for two points): the random-effects rule of the plateau error applied
    to the straight line (Press et al., Numerical Recipes, 3rd ed. (2007), Sec. 15.2)."""
    dt = t - t.mean()
    sxx = float(np.sum(dt**2))
    slope = float(np.sum(dt * (y - y.mean())) / sxx)
    residual = y - y.mean() - slope * dt
    s_r = float(np.sqrt(np.sum(residual**2) / (t.size - 2))) if t.size > 2 else 0.0
    return slope, max(s_r, rms) / np.sqrt(sxx)


def _window_mean(frame: pd.DataFrame, column: str, inside: np.ndarray, L: int) -> float:
    """Mean of ``column`` / L over the window (NaN when the column is absent)."""
    if column not in frame.columns:
        return float("nan")
    return float(np.mean(frame[column].to_numpy(dtype=float)[inside])) / L


def _plateau_row(curve: _Curve, window: float) -> dict:
    key, L, name = curve.key, curve.key["L"], curve.name
    stats = _window(curve.mean, L, window, name)
    inside, n = stats["inside"], stats["n"]
    count = len(curve.members)
    if count > 1:
        per = [_window(m, L, window, name) for m in curve.members]
        values = np.array([p["mean"] for p in per])
        disorder_err = float(np.std(values, ddof=1) / np.sqrt(count))
        sampling_err = float(np.sqrt(np.sum([p["err"] ** 2 for p in per])) / count)
        plateau_err = max(disorder_err, sampling_err)
    else:
        disorder_err, sampling_err = float("nan"), stats["err"]
        plateau_err = stats["err"]
    mean, drift, drift_err = stats["mean"], stats["drift"], stats["drift_err"]
    if abs(drift) > 4 * drift_err:
        log.info("plateau: S_obs/L drifts by %s over the window for %s (added to "
                 "plateau_err)", with_error(drift, drift_err), name)
        plateau_err = float(np.hypot(plateau_err, drift))
    frame = curve.mean
    thermo = _window_mean(frame, "S_thermo", inside, L)
    thermo_err = _window_mean(frame, "S_thermo_err", inside, L) if "S_thermo_err" in frame \
        else 0.0
    if not np.isfinite(thermo):
        log.warning("plateau: S_thermo is not available for %s; its deficit is NaN", name)
    eq = _window_mean(frame, EQUILIBRIUM, inside, L)
    eq_err = _window_mean(frame, EQUILIBRIUM_ERR, inside, L) if EQUILIBRIUM_ERR in frame \
        else 0.0
    trunc_err = _window_mean(frame, TRUNCATION_ERROR, inside, L)
    method_err = _window_mean(frame, METHOD_ERROR, inside, L)
    pruned = float(np.max(uncertainty.error_parts(frame)["pruned_bound"][inside])) / L
    total_err = float(np.sqrt(plateau_err**2 + np.nan_to_num(trunc_err) ** 2
                              + np.nan_to_num(method_err) ** 2)) + pruned
    status, eq_sigmas = _status(stats, eq, eq_err, total_err, name)
    return {
        **key,
        "t_first": stats["t"][0], "t_last": stats["t"][-1], "window_start": stats["start"],
        "plateau_points": n, "realizations": count,
        "plateau_per_site": mean, "plateau_err": plateau_err,
        "plateau_disorder_err": disorder_err, "plateau_sampling_err": sampling_err,
        "plateau_trunc_err": trunc_err, "plateau_method_err": method_err,
        "plateau_pruned_bound": pruned, "plateau_total_err": total_err,
        "window_slope": stats["slope"], "window_slope_err": stats["slope_err"],
        "plateau_status": status, "eq_distance_sigmas": eq_sigmas,
        "t_trusted": curve.t_trusted, "trusted_only": curve.trusted_only,
        "plateau_spread": stats["spread"],
        "plateau_drift": drift, "plateau_drift_err": drift_err,
        "initial_per_site": stats["y"][0], "initial_err": stats["e"][0],
        "thermo_per_site": thermo, "thermo_err": thermo_err,
        "deficit_per_site": thermo - mean, "deficit_err": float(np.hypot(total_err,
                                                                          thermo_err)),
        "eq_per_site": eq, "eq_err": eq_err,
        "deficit_eq_per_site": eq - mean, "deficit_eq_err": float(np.hypot(total_err,
                                                                            eq_err)),
        "discarded_weight_max": float(frame["discarded_weight"].max())
        if "discarded_weight" in frame else float("nan"),
        "pruned_mass_max": float(frame["pruned_mass"].max())
        if "pruned_mass" in frame else float("nan"),
    }


def _status(stats: dict, eq: float, eq_err: float, total_err: float, name: str
            ) -> tuple[str, float]:
    """(plateau_status, distance to S_obs_eq in combined errors) of one curve, logging a
    warning for a curve that is not ``saturated`` (module docstring, "status")."""
    span = stats["t"][-1] - stats["start"]
    slope, slope_err = stats["slope"], stats["slope_err"]
    sigmas = (eq - stats["mean"]) / np.hypot(total_err, eq_err) if np.isfinite(eq) \
        else float("nan")
    if abs(slope) > SLOPE_SIGMAS * slope_err and abs(slope) * span > RESOLUTION:
        log.warning("plateau: %s has not saturated: S_obs/L still changes by %s per unit "
                    "time over the window (%s over the window)%s; its plateau is a lower "
                    "bound, its saturation time is NaN", name,
                    with_error(slope, slope_err), f"{slope * span:+.3g}",
                    f", S_obs_eq/L = {eq:.4g}" if np.isfinite(eq) else "")
        return RISING, float(sigmas)
    if np.isfinite(sigmas) and sigmas > SLOPE_SIGMAS and eq - stats["mean"] > RESOLUTION:
        log.warning("plateau: %s levels off at %s per site, %.1f errors from its "
                    "equilibrium value S_obs_eq/L = %.4g: still rising too slowly to "
                    "see over the window, or not thermalizing", name,
                    with_error(stats["mean"], total_err), sigmas, eq)
        return BELOW_EQUILIBRIUM, float(sigmas)
    return SATURATED, float(sigmas)


def plateaus(results: pd.DataFrame, window: float = 0.3) -> pd.DataFrame:
    """Late-time plateau of S_obs / L per curve, with the deficits from S_thermo / L and
    from S_obs_eq / L.

    Parameters
    ----------
    results : results table (columns of :data:`SCALING_COLUMNS` at least).
    window : last fraction of each curve's (trusted) time range taken as the plateau
        window.

    Returns
    -------
    One row per (coarse_graining, other parameters, L): the group columns, ``L``,
    ``plateau_per_site``, ``plateau_err`` (formula in the module docstring),
    ``realizations`` with ``plateau_disorder_err`` and ``plateau_sampling_err``,
    ``plateau_trunc_err``, ``t_trusted`` and ``trusted_only``, ``plateau_spread``,
    ``plateau_drift`` (+ ``_err``), ``plateau_points``, ``t_first``, ``t_last``,
    ``window_start``, ``initial_per_site`` (+ ``initial_err``), ``thermo_per_site``
    (+ ``thermo_err``), ``deficit_per_site`` (+ ``deficit_err``), ``eq_per_site``
    (+ ``eq_err``), ``deficit_eq_per_site`` (+ ``deficit_eq_err``),
    ``discarded_weight_max`` and ``pruned_mass_max`` (NaN when a column is absent).
    Entropies per site in nats.
    """
    _check_options(window=window)
    _, curves = _curves(results, SCALING_COLUMNS)
    return pd.DataFrame([_plateau_row(curve, window) for curve in curves])


def _groups(table: pd.DataFrame, what: str):
    """Yield (group key dict, group rows sorted by L), requiring two or more lengths."""
    for key, group in split(table, key_columns(table)):
        lengths = np.unique(group["L"].to_numpy())
        if lengths.size < 2:
            raise InputError(f"{what}: only one chain length (L={lengths.tolist()}) for "
                             f"{_describe(key)}; the fit needs at least two lengths")
        yield key, group.sort_values("L")


def extrapolate(plateaus_df: pd.DataFrame) -> pd.DataFrame:
    """Extrapolate the plateaus to L -> infinity by plateau = a + b / L, and likewise the
    deficit from the equilibrium value where it is known.

    Parameters
    ----------
    plateaus_df : output of :func:`plateaus`.

    Returns
    -------
    One row per group: the group columns, ``extrapolated_per_site`` (a) and
    ``extrapolated_err``, ``finite_size_slope`` (b) and ``finite_size_slope_err``,
    ``extrapolation_chi2_red`` (NaN with two lengths, logged),
    ``extrapolation_lengths``, and ``deficit_eq_extrapolated`` (+ ``_err``; NaN unless
    two or more lengths have a finite ``deficit_eq_per_site``). Raises InputError for a
    group with a single L.
    """
    rows = []
    keys = key_columns(plateaus_df)
    shown = varying_columns(plateaus_df, keys[1:])
    deficits = [c for c in ("deficit_eq_per_site", "deficit_eq_err") if c in plateaus_df]
    error = "plateau_total_err" if "plateau_total_err" in plateaus_df else "plateau_err"
    for key, group in _groups(plateaus_df[keys + ["L", "plateau_per_site", error,
                                                  *deficits]], "extrapolation"):
        L = group["L"].to_numpy(dtype=float)
        fit = fit_line(1.0 / L, group["plateau_per_site"], group[error])
        if fit.dof == 0:
            log.warning("extrapolation: two lengths for %s; no chi-square test of a + b/L",
                        _describe(key, shown))
        row = {**key, "extrapolated_per_site": fit.intercept,
               "extrapolated_err": fit.intercept_err,
               "finite_size_slope": fit.slope, "finite_size_slope_err": fit.slope_err,
               "extrapolation_chi2_red": fit.chi2_red, "extrapolation_lengths": L.size,
               "deficit_eq_extrapolated": np.nan, "deficit_eq_extrapolated_err": np.nan}
        if deficits:
            known = np.isfinite(group["deficit_eq_per_site"].to_numpy(dtype=float))
            if np.unique(L[known]).size >= 2:
                eq_fit = fit_line(1.0 / L[known], group["deficit_eq_per_site"][known],
                                  group["deficit_eq_err"][known])
                row.update(deficit_eq_extrapolated=eq_fit.intercept,
                           deficit_eq_extrapolated_err=eq_fit.intercept_err)
        rows.append(row)
    return pd.DataFrame(rows)


def _time_short_of(t: np.ndarray, y: np.ndarray, e: np.ndarray, level: float,
                   sign: float) -> np.ndarray:
    """t_0 plus the time the piecewise-linear interpolant of y (last axis) spends short
    of ``level`` (below it for sign = +1, above it for sign = -1) until the first point
    beyond it by more than CLEAR_MARGIN errors e."""
    u = sign * (y - level)
    clear = u > CLEAR_MARGIN * e
    stop = np.where(clear.any(axis=-1), np.argmax(clear, axis=-1), u.shape[-1])
    a, b = u[..., :-1], u[..., 1:]
    with np.errstate(divide="ignore", invalid="ignore"):
        part = np.where(a < 0, a / (a - b), b / (b - a))  # share of a crossing segment
    share = np.where((a < 0) & (b < 0), 1.0, np.where((a >= 0) & (b >= 0), 0.0, part))
    counted = np.arange(u.shape[-1] - 1) < np.expand_dims(stop, -1)
    return t[0] + np.sum(np.where(counted, share, 0.0) * np.diff(t), axis=-1)


def _crossing(t: np.ndarray, y: np.ndarray, e: np.ndarray, plateau: float,
              plateau_err: float, fraction: float) -> tuple[float, float]:
    """(t_f, error) of S(t_f) = S_0 + f (plateau - S_0) on one curve (per-site values);
    the estimator and its error are described in the module docstring."""
    change = plateau - y[0]
    if abs(change) <= 4 * np.hypot(plateau_err, e[0]):
        return float("nan"), float("nan")
    sign = float(np.sign(change))
    level = y[0] + fraction * change
    t_f = float(_time_short_of(t, y, e, level, sign))
    # sensitivity dt_f / d level, by a central difference over the noise scale
    step = min(max(2 * float(np.sqrt(np.mean(e**2))), 1e-3 * abs(change)),
               0.5 * min(fraction, 1 - fraction) * abs(change))
    per_level = abs(_time_short_of(t, y, e, level + step, sign)
                    - _time_short_of(t, y, e, level - step, sign)) / (2 * step)
    level_err = np.hypot(fraction * plateau_err, (1 - fraction) * e[0])
    noise_var = 0.0
    if np.any(e > 0):
        rng = np.random.default_rng(np.random.SeedSequence(BOOTSTRAP_SEED))
        resampled = y + e * rng.standard_normal((BOOTSTRAP_SAMPLES, y.size))
        noise_var = float(np.var(_time_short_of(t, resampled, e, level, sign), ddof=1))
    # grid: halving the points at least doubles the interpolation error of a locally
    # quadratic curve; the difference's noise part is of the order of noise_var
    grid = (t_f - float(_time_short_of(t[::2], y[::2], e[::2], level, sign))
            if t.size > 2 else 0.0)
    return t_f, float(np.sqrt((per_level * level_err) ** 2 + max(noise_var, grid**2)))


def _saturation_rows(curves: list[_Curve], plateau_df: pd.DataFrame, fraction: float
                     ) -> pd.DataFrame:
    rows = []
    for curve, plateau in zip(curves, plateau_df.itertuples(index=False), strict=True):
        L, frame = curve.key["L"], curve.mean
        t_f, t_f_err = _crossing(frame["t"].to_numpy(dtype=float),
                                 frame["S_obs"].to_numpy(dtype=float) / L,
                                 frame["S_obs_err"].to_numpy(dtype=float) / L,
                                 plateau.plateau_per_site, plateau.plateau_err, fraction)
        if plateau.plateau_status == RISING:
            t_f = t_f_err = float("nan")  # a fraction of a rise that has not ended
        elif not np.isfinite(t_f):
            log.warning("saturation: S_obs/L does not change significantly for %s; "
                        "its saturation time is NaN", curve.name)
        rows.append({**curve.key, "saturation_fraction": fraction, "saturation_time": t_f,
                     "saturation_time_err": t_f_err})
    return pd.DataFrame(rows)


def saturation_times(results: pd.DataFrame, fraction: float = 0.9, *,
                     window: float = 0.3) -> pd.DataFrame:
    """Time for each curve to cover a fraction ``fraction`` of its rise to the plateau.

    Parameters
    ----------
    results : results table.
    fraction : f in S(t_f) = S_0 + f (S_plateau - S_0), S_0 at the first time point.
    window : plateau window, as in :func:`plateaus`.

    Returns
    -------
    One row per curve: group columns, ``L``, ``saturation_fraction``,
    ``saturation_time`` and ``saturation_time_err`` (1/J; NaN, logged, when the curve
    does not change by more than 4 errors).
    """
    _check_options(window=window, fraction=fraction)
    _, curves = _curves(results, SCALING_COLUMNS)
    plateau_df = pd.DataFrame([_plateau_row(curve, window) for curve in curves])
    return _saturation_rows(curves, plateau_df, fraction)


def fit_exponent(saturation_df: pd.DataFrame) -> pd.DataFrame:
    """Fit t_f = A L**z per group (weighted least squares in ln t_f against ln L).

    Parameters
    ----------
    saturation_df : output of :func:`saturation_times`.

    Returns
    -------
    One row per group: the group columns, ``z``, ``z_err``, ``z_chi2_red``,
    ``saturation_prefactor`` (A, 1/J) and ``saturation_prefactor_err``, ``z_lengths``
    (lengths with a finite t_f). Groups with fewer than two finite t_f get NaN, logged.
    Raises InputError for a group with a single L.
    """
    rows = []
    columns = key_columns(saturation_df) + ["L", "saturation_time", "saturation_time_err"]
    shown = varying_columns(saturation_df, key_columns(saturation_df)[1:])
    for key, group in _groups(saturation_df[columns], "exponent"):
        good = group[np.isfinite(group["saturation_time"]) & (group["saturation_time"] > 0)]
        row = {**key, "z": np.nan, "z_err": np.nan, "z_chi2_red": np.nan,
               "saturation_prefactor": np.nan, "saturation_prefactor_err": np.nan,
               "z_lengths": len(good), "z_note": ""}
        if len(good) < MIN_EXPONENT_LENGTHS:
            row["z_note"] = (f"undetermined: {len(good)} length(s) with a saturation time, "
                             f"a power law needs {MIN_EXPONENT_LENGTHS}")
            log.warning("exponent: %s for %s; z is NaN", row["z_note"], _describe(key, shown))
        else:
            t_f = good["saturation_time"].to_numpy(dtype=float)
            fit = fit_line(np.log(good["L"].to_numpy(dtype=float)), np.log(t_f),
                           good["saturation_time_err"].to_numpy(dtype=float) / t_f)
            prefactor = float(np.exp(fit.intercept))
            row.update(z=fit.slope, z_err=fit.slope_err, z_chi2_red=fit.chi2_red,
                       saturation_prefactor=prefactor,
                       saturation_prefactor_err=prefactor * fit.intercept_err)
        rows.append(row)
    return pd.DataFrame(rows)


def scaling_table(results: pd.DataFrame, window: float = 0.3, fraction: float = 0.9,
                  trust_rtol: float | None = None) -> pd.DataFrame:
    """The scaling table: one row per (coarse_graining, other parameters, L).

    Columns: those of :func:`plateaus` and :func:`saturation_times`, plus the group fits
    of :func:`extrapolate` and :func:`fit_exponent` repeated on every row of the group.
    ``trust_rtol``: tolerance of the trusted times (:mod:`mpsobs.analysis.trust`); None
    keeps a ``t_trusted`` column the table has, else uses the default tolerance.
    Raises InputError for missing columns or a group with a single L.
    """
    _check_options(window=window, fraction=fraction)
    results = trust.trusted(results, trust_rtol)
    keys, curves = _curves(results, SCALING_COLUMNS)
    plateau_df = pd.DataFrame([_plateau_row(curve, window) for curve in curves])
    saturation_df = _saturation_rows(curves, plateau_df, fraction)
    table = plateau_df.merge(saturation_df, on=keys + ["L"], how="left")
    table = table.merge(extrapolate(plateau_df), on=keys, how="left")
    return table.merge(fit_exponent(saturation_df), on=keys, how="left")


def collapse_curves(results: pd.DataFrame, table: pd.DataFrame) -> pd.DataFrame:
    """Curves rescaled for a data collapse with the fitted z of their group.

    Parameters
    ----------
    results : results table.
    table : its scaling table (:func:`scaling_table`).

    Returns
    -------
    One row per (curve, t): the group columns, ``L``, ``t``, ``scaled_time`` =
    t / L**z, ``rise`` = (S_obs/L - initial) / (plateau - initial) (= S_obs / S_plateau
    when S_obs(0) = 0) and ``rise_err`` (from S_obs_err only), plus ``z``, ``z_err`` and
    ``saturation_fraction`` of the group and the number of disorder ``realizations``
    averaged (1 without disorder). Curves whose ``plateau_status`` is ``rising`` are
    left out (their plateau is not reached); none left gives an empty table.
    """
    keys, curves = _curves(results, SCALING_COLUMNS, warn=False)  # warned by the table
    require_columns(table, keys + ["L", "plateau_per_site", "initial_per_site", "z", "z_err",
                                   "saturation_fraction"], "scaling table")
    fits = {_canonical(key): rows.iloc[0] for key, rows in split(table, keys + ["L"])}
    parts, matched = [], False
    for item in curves:
        key, curve = item.key, item.mean
        fit = fits.get(_canonical(key))
        if fit is None:
            continue
        matched = True
        if fit.get("plateau_status") == RISING:
            continue  # normalised to a plateau it has not reached
        L = float(key["L"])
        change = fit["plateau_per_site"] - fit["initial_per_site"]
        t = curve["t"].to_numpy(dtype=float)
        parts.append(pd.DataFrame({
            **key, "t": t, "scaled_time": t / L ** fit["z"],
            "rise": (curve["S_obs"].to_numpy(dtype=float) / L - fit["initial_per_site"]) / change,
            "rise_err": curve["S_obs_err"].to_numpy(dtype=float) / L / abs(change),
            "z": fit["z"], "z_err": fit["z_err"],
            "saturation_fraction": fit["saturation_fraction"],
            "realizations": len(item.members)}))
    if not matched:
        raise InputError("scaling table: none of its rows matches a curve of the results")
    if not parts:
        return pd.DataFrame(columns=keys + ["L", *_COLLAPSE_OUT, "z", "z_err",
                                            "saturation_fraction"])
    return pd.concat(parts, ignore_index=True)


def _canonical(key: dict) -> tuple:
    """Key values made comparable across tables: numbers as floats, None and NaN alike."""
    def one(value):
        if value is None or (isinstance(value, float | np.floating) and np.isnan(value)):
            return "nan"
        if isinstance(value, int | float | np.integer | np.floating) and not isinstance(
                value, bool | np.bool_):
            return float(value)
        return value
    return tuple(one(v) for v in key.values())


def _known(df: pd.DataFrame, column: str) -> bool:
    """Whether ``column`` is present with at least one finite value."""
    return column in df and bool(np.isfinite(df[column].to_numpy(dtype=float)).any())


def format_table(df: pd.DataFrame) -> str:
    """The scaling table as text: per-length plateaus, then the fits per group.

    Entropies per site in nats, times in 1/J; every value is followed by its error and
    printed to the error's precision (:func:`mpsobs.core.printing.with_error`). Of the
    parameter columns only those that vary for a coarse-graining are shown. Disorder
    realizations (R), the truncation error of the plateau and the equilibrium deficit
    appear where the table has them.
    """
    if df.empty:
        return "(empty scaling table)"
    keys = ["coarse_graining"] + varying_columns(
        df, [c for c in key_columns(df) if c != "coarse_graining"], within="coarse_graining")
    fraction = df["saturation_fraction"].iloc[0]
    per_length = df[keys + ["L"]].copy()
    if "realizations" in df and (df["realizations"] > 1).any():
        per_length["R"] = df["realizations"].to_numpy()
    columns = [("plateau/L", "plateau_per_site", "plateau_total_err")]
    if _known(df, "plateau_trunc_err"):
        per_length["trunc/L"] = [f"{v:.2g}" for v in df["plateau_trunc_err"]]
        per_length["t_trusted"] = [f"{v:g}" for v in df["t_trusted"]]
    columns += [("S_thermo/L", "thermo_per_site", "thermo_err"),
                ("deficit/L", "deficit_per_site", "deficit_err")]
    if _known(df, "eq_per_site"):
        columns += [("S_obs_eq/L", "eq_per_site", "eq_err"),
                    ("deficit_eq/L", "deficit_eq_per_site", "deficit_eq_err")]
    columns.append((f"t_{fraction:g}", "saturation_time", "saturation_time_err"))
    for label, value, err in columns:
        per_length[label] = [with_error(v, e) for v, e in zip(df[value], df[err], strict=True)]
    per_length["status"] = df["plateau_status"].to_numpy()
    fits = df.drop_duplicates(keys)
    per_group = fits[keys].copy()
    per_group["L_count"] = fits["extrapolation_lengths"].to_numpy()
    per_group["plateau/L (L->inf)"] = [
        with_error(v, e)
        for v, e in zip(fits["extrapolated_per_site"], fits["extrapolated_err"], strict=True)]
    per_group["chi2/dof"] = [f"{v:.2f}" for v in fits["extrapolation_chi2_red"]]
    if _known(fits, "deficit_eq_extrapolated"):
        per_group["deficit_eq/L (L->inf)"] = [
            with_error(v, e) for v, e in zip(fits["deficit_eq_extrapolated"],
                                               fits["deficit_eq_extrapolated_err"],
                                               strict=True)]
    per_group[f"z (t_{fraction:g} ~ L^z)"] = [
        with_error(v, e) if np.isfinite(v) else f"undetermined ({n} L)"
        for v, e, n in zip(fits["z"], fits["z_err"], fits["z_lengths"], strict=True)]
    per_group["z chi2/dof"] = [f"{v:.2f}" for v in fits["z_chi2_red"]]
    notes = []
    if (df["plateau_status"] != SATURATED).any():
        notes = ["", f"status '{RISING}': S_obs/L still changes over the window (the "
                 "plateau is a bound; no t_f, left out of z and the collapse);",
                 f"status '{BELOW_EQUILIBRIUM}': levelled off more than {SLOPE_SIGMAS:g} "
                 "errors below the equilibrium value."]
    return "\n".join([
        "Plateaus per chain length (entropy per site in nats, time in 1/J; errors: total, "
        "statistical and systematic):",
        per_length.to_string(index=False), "",
        "Fits over the chain lengths (plateau = a + b/L, weighted least squares):",
        per_group.to_string(index=False), *notes])
