"""Fits over the chain lengths of a group of curves: straight lines with errors, the
1/L extrapolation of the plateaus and the power law of the saturation times.

A group is the set of curves that differ only in L
(:func:`mpsobs.analysis.curves.group_columns`); its rows come from
:func:`mpsobs.analysis.plateaus.plateaus` and
:func:`mpsobs.analysis.plateaus.saturation_times`. Entropies per site in nats, times in
units of 1/J.

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

Cost: O(n) per fit, n the number of lengths of the group.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import pandas as pd

from mpsobs.analysis.curves import describe, key_columns, split, varying_columns
from mpsobs.core.errors import InputError

__all__ = ["ERROR_FLOOR", "MIN_EXPONENT_LENGTHS", "LineFit", "fit_line", "extrapolate",
           "fit_exponent"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

log = logging.getLogger(__name__)

#: Smallest standard error used as a fit weight (nats per site, or relative for t_f).
ERROR_FLOOR = 1e-12
#: Fewest chain lengths from which a power law t_f = A L**z is fitted (two points fix
#: any straight line; a third tests it).
MIN_EXPONENT_LENGTHS = 3


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


def _groups(table: pd.DataFrame, what: str):
    """Yield (group key dict, group rows sorted by L), requiring two or more lengths."""
    for key, group in split(table, key_columns(table)):
        lengths = np.unique(group["L"].to_numpy())
        if lengths.size < 2:
            raise InputError(f"{what}: only one chain length (L={lengths.tolist()}) for "
                             f"{describe(key)}; the fit needs at least two lengths")
        yield key, group.sort_values("L")


def extrapolate(plateaus_df: pd.DataFrame) -> pd.DataFrame:
    """Extrapolate the plateaus to L -> infinity by plateau = a + b / L, and likewise the
    deficit from the equilibrium value where it is known.

    Parameters
    ----------
    plateaus_df : output of :func:`mpsobs.analysis.plateaus.plateaus`.

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
                        describe(key, shown))
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


def fit_exponent(saturation_df: pd.DataFrame) -> pd.DataFrame:
    """Fit t_f = A L**z per group (weighted least squares in ln t_f against ln L).

    Parameters
    ----------
    saturation_df : output of :func:`mpsobs.analysis.plateaus.saturation_times`.

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
            log.warning("exponent: %s for %s; z is NaN", row["z_note"], describe(key, shown))
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
