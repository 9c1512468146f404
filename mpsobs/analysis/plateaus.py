"""Plateaus and saturation times of single observational-entropy curves.

Each curve (:class:`mpsobs.analysis.curves.Curve`: one L, coarse-graining and parameter
set, averaged over disorder and cut to its trusted times) gives one row of plateau
statistics (:func:`plateaus`) and one saturation time (:func:`saturation_times`).
Entropies are per site in nats, times in units of 1/J. The window below is the last
fraction of the curve's used (trusted) time range.

The plateau of a disordered curve is the mean of the R realizations' plateaus, with
plateau_disorder_err = (their sample standard deviation) / sqrt(R) and
plateau_sampling_err = sqrt(sum plateau_err_r**2) / R; plateau_err = the larger of
both enters the fits (a per-realization plateau carries its disorder offset at every
time of the window, so the window scatter of the mean curve would understate it).

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

Cost: O(n) per curve for the plateau; the saturation time adds BOOTSTRAP_SAMPLES
resamples of the curve, O(BOOTSTRAP_SAMPLES n).
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from mpsobs.analysis import uncertainty
from mpsobs.analysis.curves import SCALING_COLUMNS, Curve, split_curves
from mpsobs.core.errors import InputError
from mpsobs.core.printing import with_error
from mpsobs.pipeline.columns import (
    EQUILIBRIUM,
    EQUILIBRIUM_ERR,
    METHOD_ERROR,
    TRUNCATION_ERROR,
)

__all__ = [
    "BOOTSTRAP_SAMPLES", "BOOTSTRAP_SEED", "CLEAR_MARGIN", "SLOPE_SIGMAS", "RESOLUTION",
    "SATURATED", "RISING", "BELOW_EQUILIBRIUM", "check_options", "plateau_row", "plateaus",
    "saturation_rows", "saturation_times",
]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)

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
#: Values of ``plateau_status``.
SATURATED, RISING, BELOW_EQUILIBRIUM = "saturated", "rising", "below S_obs_eq"


def check_options(window: float | None = None, fraction: float | None = None) -> None:
    """Raise InputError for a plateau ``window`` outside (0, 1] or a saturation
    ``fraction`` outside (0, 1)."""
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


def plateau_row(curve: Curve, window: float) -> dict:
    """The plateau statistics of one curve: a row of :func:`plateaus`."""
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
    check_options(window=window)
    _, curves = split_curves(results, SCALING_COLUMNS)
    return pd.DataFrame([plateau_row(curve, window) for curve in curves])


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


def saturation_rows(curves: list[Curve], plateau_df: pd.DataFrame, fraction: float
                     ) -> pd.DataFrame:
    """Saturation times of ``curves`` given their plateau rows (same order): the table
    of :func:`saturation_times`."""
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
    check_options(window=window, fraction=fraction)
    _, curves = split_curves(results, SCALING_COLUMNS)
    plateau_df = pd.DataFrame([plateau_row(curve, window) for curve in curves])
    return saturation_rows(curves, plateau_df, fraction)
