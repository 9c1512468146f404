"""Trusted times: up to when a curve's truncation error is small enough, decided from
the stored columns with a tolerance chosen at analysis time.

The truncation check of a point (``evolution.chi_check``) stores, per row, the error
estimate ``S_obs_trunc_err`` = |S_obs(chi_max) - S_obs(chi_check)| next to ``S_obs`` and
its standard error ``S_obs_err``. Whether that error is acceptable is a judgement made
after the fact, so it lives here: changing the tolerance recomputes no point. An output
time passes when::

    S_obs_trunc_err <= max(rtol * |S_obs|, S_obs_err, ROUNDOFF_NATS)

(within the relative tolerance or hidden in the sampling noise), and the trusted range
of a curve (one point and coarse-graining) ends at the last output time before the first
time that fails; later times that pass again do not count. This rule is a convention of
this project (a fact of the trade: trust a truncated evolution until its error estimate
first exceeds the tolerance), not taken from a publication.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from mpsobs.core.errors import InputError, finite_number
from mpsobs.pipeline.columns import (
    COARSE_GRAINING,
    POINT_ID,
    S_OBS,
    S_OBS_ERR,
    TRUNCATION_ERROR,
    TRUSTED_TIME,
    T,
)

__all__ = ["DEFAULT_TRUST_RTOL", "ROUNDOFF_NATS", "check_rtol", "trusted_time",
           "with_trusted_times", "trusted"]

#: Default tolerance of the truncation error relative to S_obs.
DEFAULT_TRUST_RTOL = 0.01
#: Truncation errors up to this (nats) are round-off for the trusted time range.
ROUNDOFF_NATS = 1e-9


def check_rtol(rtol, name: str = "trust_rtol") -> float:
    """``rtol`` as a float in [0, 1], or an InputError naming ``name``."""
    value = finite_number(rtol, name)
    if not 0.0 <= value <= 1.0:
        raise InputError(f"{name}: expected a number >= 0 and <= 1, got {rtol!r}")
    return value


def trusted_time(t: np.ndarray, S_obs: np.ndarray, S_obs_err: np.ndarray,
                 trunc_err: np.ndarray, rtol: float) -> float:
    """The end of the trusted time range of one curve (one point and coarse-graining).

    Returns the last output time before the first failing one (see the module
    docstring); ``inf`` when no time fails (the check says nothing beyond the last
    computed time); ``-inf`` when the first output time already fails; NaN when there is
    no check evolution (NaN truncation errors). The arrays are in time order. Cost O(n).
    """
    trunc_err = np.asarray(trunc_err, dtype=float)
    if np.isnan(trunc_err).all():
        return math.nan
    allowed = np.maximum(np.maximum(rtol * np.abs(S_obs), S_obs_err), ROUNDOFF_NATS)
    failing = np.flatnonzero(~(trunc_err <= allowed))
    if failing.size == 0:
        return math.inf
    return float(t[failing[0] - 1]) if failing[0] > 0 else -math.inf


def with_trusted_times(results: pd.DataFrame, rtol: float = DEFAULT_TRUST_RTOL
                       ) -> pd.DataFrame:
    """A copy of ``results`` with the column ``t_trusted`` (:func:`trusted_time` per point
    and coarse-graining) at tolerance ``rtol``, replacing a stored one (tables of older
    versions have it at the tolerance of their spec). A table without the truncation
    column gets NaN (no check). Cost O(rows log rows)."""
    rtol = check_rtol(rtol)
    needed = (T, COARSE_GRAINING, POINT_ID, S_OBS, S_OBS_ERR)
    missing = [c for c in needed if c not in results.columns]
    if missing:
        raise InputError(f"results: trusted times need the column(s) {', '.join(missing)}")
    out = results.copy()
    out[TRUSTED_TIME] = math.nan
    if TRUNCATION_ERROR not in out.columns or out.empty:
        return out
    for _, curve in out.groupby([POINT_ID, COARSE_GRAINING], sort=False):
        curve = curve.sort_values(T)
        out.loc[curve.index, TRUSTED_TIME] = trusted_time(
            curve[T].to_numpy(dtype=float), curve[S_OBS].to_numpy(dtype=float),
            curve[S_OBS_ERR].to_numpy(dtype=float),
            curve[TRUNCATION_ERROR].to_numpy(dtype=float), rtol)
    return out


def trusted(results: pd.DataFrame, rtol: float | None = None) -> pd.DataFrame:
    """``results`` with trusted times for the analysis: at tolerance ``rtol`` when given
    (:func:`with_trusted_times`); with ``rtol`` None, the table as it is when it has a
    ``t_trusted`` column already, else at DEFAULT_TRUST_RTOL where it has the truncation
    column (a table without either is returned as it is)."""
    if rtol is None:
        if TRUSTED_TIME in results.columns or TRUNCATION_ERROR not in results.columns:
            return results
        rtol = DEFAULT_TRUST_RTOL
    return with_trusted_times(results, rtol)
