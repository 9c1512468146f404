"""Synthetic results tables with known finite-size scaling, for tests and demos.

The curves follow a saturating law chosen here, not a simulation:

    S_obs(t) / L = s_0 + (s_L - s_0) * (1 - exp(-t / tau_L)),
    s_L = s_inf + c / L,      tau_L = tau0 * L**z,

plus seeded Gaussian noise of standard deviation ``S_obs_err``, which is
``stderr * sqrt(L)`` nats (the scaling of a sampled estimator with a fixed number of
samples, whose per-sample variance is extensive). With s_0 = 0 the time to reach a
fraction f of the plateau is t_f = tau_L * ln(1 / (1 - f)), so t_f ~ L**z exactly.
Every column of :data:`mpsobs.columns.REQUIRED` is filled, with plausible values, so
that the table can also be plotted.

Options model what real runs add:

- disorder: ``realizations`` = R copies of every point, labelled ``field_seed`` = 0..R-1
  (column ``disorder_axes`` = "field_seed"); realization r has its own plateau
  s_L + delta_r with delta_r ~ N(0, disorder_sd**2) drawn from the seed, reached on the
  same rise: S_obs(t)/L = law + delta_r (1 - exp(-t / tau_L)).
- truncation: with ``trusted_until`` = t*, the column ``t_trusted`` = t* and, beyond t*,
  a curve that goes wrong, S_obs/L falling by ``TRUNCATION_SLOPE`` (t - t*) per site, with
  ``S_obs_trunc_err`` equal to that fall (and TRUNCATION_FLOOR L before t*).
- equilibrium: with the law's ``s_eq`` set, ``S_obs_eq`` = L s_eq + c_eq with error
  ``S_obs_eq_err`` = EQUILIBRIUM_ERR L.
"""

from __future__ import annotations

import hashlib
import itertools
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = ["SaturationLaw", "saturating_results"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

#: Share of S_obs given to the Shannon part (the rest is the Boltzmann part).
SHANNON_SHARE = 0.6
#: Fall of S_obs/L per unit time past the trusted time (nats per site per 1/J).
TRUNCATION_SLOPE = 0.05
#: Truncation error per site on trusted times (nats).
TRUNCATION_FLOOR = 1e-4
#: Error of the equilibrium value per site (nats).
EQUILIBRIUM_ERR = 1e-3


@dataclass(frozen=True)
class SaturationLaw:
    """Per-site plateau ``s_inf + c / L``, reached from ``s_initial`` in time tau0 * L**z;
    ``s_thermo + c_thermo / L`` is the thermodynamic reference per site (nats)."""

    s_inf: float
    c: float
    tau0: float
    z: float
    s_initial: float = 0.0
    s_thermo: float = 0.65
    c_thermo: float = 0.0
    s_eq: float = float("nan")
    c_eq: float = 0.0

    def plateau(self, L: int) -> float:
        """Plateau of S_obs / L at length L (nats per site)."""
        return self.s_inf + self.c / L

    def relaxation_time(self, L: int) -> float:
        """tau_L = tau0 * L**z (units of 1/J)."""
        return self.tau0 * L**self.z

    def per_site(self, L: int, t: np.ndarray) -> np.ndarray:
        """Noise-free S_obs(t) / L."""
        rise = 1.0 - np.exp(-np.asarray(t, dtype=float) / self.relaxation_time(L))
        return self.s_initial + (self.plateau(L) - self.s_initial) * rise


def saturating_results(lengths: Sequence[int], times: np.ndarray,
                       laws: Mapping[str, SaturationLaw], *, stderr: float, seed: int,
                       parameters: Mapping[str, Sequence] | None = None,
                       realizations: int = 1, disorder_sd: float = 0.0,
                       trusted_until: float | None = None) -> pd.DataFrame:
    """A results table: one row per (point, t, coarse-graining).

    Parameters
    ----------
    lengths : chain lengths L.
    times : time grid (units of 1/J), shared by all points.
    laws : the saturation law of each coarse-graining label.
    stderr : S_obs_err = stderr * sqrt(L) (nats); the noise drawn has this deviation.
    seed : seed of the noise (numpy Generator from a SeedSequence per point).
    parameters : further sweep parameters, name -> values (cartesian product); they do
        not change the curves.
    realizations, disorder_sd : disorder realizations per point and the standard
        deviation of their plateaus per site (see the module docstring).
    trusted_until : the trusted time t* of every curve (None: no truncation columns).

    Returns
    -------
    DataFrame with the parameter columns (``L`` and ``parameters``), ``point_id`` and
    every required result column.
    """
    parameters = dict(parameters or {})
    t = np.asarray(times, dtype=float)
    tables = []
    combos = itertools.product(lengths, *parameters.values())
    for index, (L, *others) in enumerate(combos):
        for realization in range(realizations):
            point = {"L": int(L), **dict(zip(parameters, others, strict=True))}
            if realizations > 1:
                point["field_seed"] = realization
            point_id = hashlib.sha1(repr(sorted(point.items())).encode()).hexdigest()[:12]
            rng = np.random.default_rng(np.random.SeedSequence([seed, index, realization]))
            tables += _point_rows(point, point_id, t, laws, stderr, rng, disorder_sd,
                                  trusted_until, seed)
    table = pd.concat(tables, ignore_index=True)
    if realizations > 1:
        table["disorder_axes"] = "field_seed"
    return table


def _point_rows(point: dict, point_id: str, t: np.ndarray, laws: Mapping[str, SaturationLaw],
                stderr: float, rng: np.random.Generator, disorder_sd: float,
                trusted_until: float | None, seed: int) -> list[pd.DataFrame]:
    """The rows of one synthetic point (one realization), one frame per label."""
    L = point["L"]
    err = stderr * np.sqrt(L)
    ent = np.minimum(0.4 * t, 0.5 * L * np.log(2.0) * 0.8)
    frames = []
    for label, law in laws.items():
        shift = rng.normal(0.0, disorder_sd) if disorder_sd > 0 else 0.0
        rise = 1.0 - np.exp(-t / law.relaxation_time(L))
        s_obs = L * (law.per_site(L, t) + shift * rise) + rng.normal(0.0, err, size=t.size)
        extra = {}
        if trusted_until is not None:
            fall = L * TRUNCATION_SLOPE * np.clip(t - trusted_until, 0.0, None)
            s_obs = s_obs - fall
            extra = {"S_obs_trunc_err": np.maximum(fall, TRUNCATION_FLOOR * L),
                     "t_trusted": trusted_until}
        if np.isfinite(law.s_eq):
            extra.update(S_obs_eq=L * law.s_eq + law.c_eq, S_obs_eq_err=EQUILIBRIUM_ERR * L)
        frames.append(pd.DataFrame({
            **point,
            "point_id": point_id,
            "t": t,
            "coarse_graining": label,
            "S_obs": s_obs,
            "S_obs_err": err,
            "S_shannon": SHANNON_SHARE * s_obs,
            "S_shannon_err": SHANNON_SHARE * err,
            "S_boltzmann": (1.0 - SHANNON_SHARE) * s_obs,
            "S_boltzmann_err": (1.0 - SHANNON_SHARE) * err,
            "knowledge": L * np.log(2.0) - s_obs,
            "S_max": L * np.log(2.0),
            "S_thermo": L * law.s_thermo + law.c_thermo,
            "S_thermo_err": 0.0,
            "S_ent_half": ent,
            "discarded_weight": 1e-9 * t**2,
            "max_bond": np.minimum(2 ** (L // 2), 64),
            "seed": seed,
            "method": "sampled",
            "samples": 1000,
            **extra,
        }))
    return frames
