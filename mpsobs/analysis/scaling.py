"""Finite-size scaling of observational-entropy curves read from a results table: the
scaling table, the data collapse and the table as text.

A *curve* is S_obs(t) of one chain length L, one coarse-graining and one value of every
other sweep parameter; a *group* is the set of curves that differ only in L. Entropies
are reported per site in nats, times in units of 1/J.

The work is done in three modules, whose public names this one re-exports:

- :mod:`mpsobs.analysis.curves`: the table split into curves and groups, disorder means
  and trusted times;
- :mod:`mpsobs.analysis.plateaus`: per curve, the late-time plateau with its errors,
  status and deficits, and the saturation time;
- :mod:`mpsobs.analysis.fits`: per group, weighted straight-line fits, the 1/L
  extrapolation of the plateaus and the power law of the saturation times.

Here they are put together (:func:`scaling_table`: trusted times at the tolerance
``trust_rtol`` of :mod:`mpsobs.analysis.trust`, then plateaus, saturation times and the
group fits on every row), curves are rescaled with the fitted exponent
(:func:`collapse_curves`) and the table is printed (:func:`format_table`). Each module
docstring states its formulas and references.

Cost: linear in the rows of the results table, plus BOOTSTRAP_SAMPLES resamples per
curve for the saturation-time errors (:mod:`mpsobs.analysis.plateaus`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from mpsobs.analysis import trust
from mpsobs.analysis.curves import (
    COLLAPSE_COLUMNS,
    SCALING_COLUMNS,
    disorder_average,
    disorder_columns,
    group_columns,
    key_columns,
    length_companions,
    read_results,
    require_columns,
    split,
    split_curves,
    varying_columns,
)
from mpsobs.analysis.fits import ERROR_FLOOR, LineFit, extrapolate, fit_exponent, fit_line
from mpsobs.analysis.plateaus import (
    BELOW_EQUILIBRIUM,
    RISING,
    SATURATED,
    SLOPE_SIGMAS,
    check_options,
    plateau_row,
    plateaus,
    saturation_rows,
    saturation_times,
)
from mpsobs.core.errors import InputError
from mpsobs.core.printing import with_error

__all__ = [
    "ERROR_FLOOR", "LineFit", "fit_line", "read_results", "require_columns",
    "disorder_columns", "disorder_average", "group_columns", "key_columns",
    "length_companions", "split", "varying_columns",
    "plateaus", "extrapolate", "saturation_times", "fit_exponent", "scaling_table",
    "collapse_curves", "format_table",
]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports


def scaling_table(results: pd.DataFrame, window: float = 0.3, fraction: float = 0.9,
                  trust_rtol: float | None = None) -> pd.DataFrame:
    """The scaling table: one row per (coarse_graining, other parameters, L).

    Columns: those of :func:`plateaus` and :func:`saturation_times`, plus the group fits
    of :func:`extrapolate` and :func:`fit_exponent` repeated on every row of the group.
    ``trust_rtol``: tolerance of the trusted times (:mod:`mpsobs.analysis.trust`); None
    keeps a ``t_trusted`` column the table has, else uses the default tolerance.
    Raises InputError for missing columns or a group with a single L.
    """
    check_options(window=window, fraction=fraction)
    results = trust.trusted(results, trust_rtol)
    keys, curves = split_curves(results, SCALING_COLUMNS)
    plateau_df = pd.DataFrame([plateau_row(curve, window) for curve in curves])
    saturation_df = saturation_rows(curves, plateau_df, fraction)
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
    keys, curves = split_curves(results, SCALING_COLUMNS, warn=False)  # warned by the table
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
        return pd.DataFrame(columns=keys + ["L", *COLLAPSE_COLUMNS, "z", "z_err",
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
