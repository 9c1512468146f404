"""One total error per row of a results table, from the error parts stored beside S_obs.

The parts (nats, per row; a missing column or a NaN value counts as 0):

- ``S_obs_err``: the statistical error, a standard error of the sampled mean (0 when
  the estimator is exact);
- ``S_obs_trunc_err``: the truncation error estimate |S_obs(chi_max) - S_obs(chi_check)|
  (an estimate, not a bound);
- ``S_obs_method_err``: the method error of an approximate estimator (wide regions),
  where a table has it (an estimate, not a bound);
- ``pruned_mass`` delta: a one-sided bound. The exact S_obs lies in
  [S_obs, S_obs + delta (S_max - ln delta)]
  (:func:`mpsobs.estimators.estimate.pruned_entropy_bound`).

Rule: the statistical error and the error estimates are independent in origin, so they
add in quadrature; a bound is not a standard deviation and is added linearly:

    S_obs_total_err = sqrt(S_obs_err**2 + S_obs_trunc_err**2 + S_obs_method_err**2)
                      + pruned_entropy_bound(pruned_mass, S_max).

The total is a symmetric one-sigma-like band (the pruning bound is one-sided; adding it
to both sides overstates the downward error by at most that bound). A table without the
systematic columns gets S_obs_total_err = S_obs_err, so older tables keep their numbers.
Cost O(rows).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from mpsobs.estimators.estimate import pruned_entropy_bound
from mpsobs.pipeline import columns as col

__all__ = ["STATISTICAL", "ESTIMATES", "PRUNED_MASS", "TOTAL", "error_parts", "total_error",
           "with_total_error"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

#: Column of the statistical (sampling) standard error of S_obs.
STATISTICAL = col.S_OBS_ERR
#: Columns of error estimates of S_obs (added in quadrature with STATISTICAL).
ESTIMATES = (col.TRUNCATION_ERROR, col.METHOD_ERROR)
#: Column of the probability left out by exact enumeration (its entropy bound is added
#: linearly).
PRUNED_MASS = col.PRUNED_MASS
#: Column made here: the total error of S_obs.
TOTAL = col.TOTAL_ERROR


def _part(frame: pd.DataFrame, column: str) -> np.ndarray:
    if column not in frame.columns:
        return np.zeros(len(frame))
    return np.nan_to_num(frame[column].to_numpy(dtype=float), nan=0.0)


def error_parts(frame: pd.DataFrame) -> dict[str, np.ndarray]:
    """The parts of the total error per row (nats): the STATISTICAL and ESTIMATES
    columns and ``pruned_bound`` (the entropy bound of ``pruned_mass``, 0 without it).
    A missing column or NaN counts as 0."""
    parts = {name: _part(frame, name) for name in (STATISTICAL, *ESTIMATES)}
    mass = _part(frame, PRUNED_MASS)
    if np.any(mass > 0):
        if col.S_MAX in frame.columns:
            s_max = frame[col.S_MAX].to_numpy(dtype=float)
        else:  # L ln 2 of a chain of qubits
            s_max = frame[col.LENGTH].to_numpy(dtype=float) * np.log(2.0)
        bound = np.array([pruned_entropy_bound(float(m), float(s))
                          for m, s in zip(mass, s_max, strict=True)])
    else:
        bound = np.zeros(len(frame))
    parts["pruned_bound"] = bound
    return parts


def total_error(frame: pd.DataFrame) -> np.ndarray:
    """S_obs_total_err of each row (nats), by the rule of the module docstring."""
    parts = error_parts(frame)
    quadrature = np.sqrt(sum(parts[name] ** 2 for name in (STATISTICAL, *ESTIMATES)))
    return quadrature + parts["pruned_bound"]


def with_total_error(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``frame`` with the column TOTAL (S_obs_total_err, nats)."""
    return frame.assign(**{TOTAL: total_error(frame)})
