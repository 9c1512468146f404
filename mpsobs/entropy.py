"""The one entry point: observational entropy of a dense state or an MPS."""

from __future__ import annotations

import numpy as np

from mpsobs import dense
from mpsobs.errors import InputError
from mpsobs.result import EntropyResult

__all__ = ["observational_entropy"]


def observational_entropy(state, coarse_graining, *, samples: int | None = None,
                          seed=None, method: str | None = None, **options) -> EntropyResult:
    """Observational entropy S_obs of ``state`` under ``coarse_graining`` (nats).

    Parameters
    ----------
    state : a dense state vector (2**L,) or density matrix (2**L, 2**L), evaluated
        exactly by :mod:`mpsobs.dense`; or a matrix-product state (quimb
        ``MatrixProductState`` or :class:`mpsobs.mps.MPS`), or a mixed state as a
        purification (:class:`mpsobs.mps.PurifiedMPS`, e.g. the Gibbs state of
        :func:`mpsobs.thermo.gibbs_state`), evaluated by :mod:`mpsobs.estimate`.
    coarse_graining : from :mod:`mpsobs.coarse`.
    samples, seed, method, options : estimator settings for MPS states (see
        :func:`mpsobs.estimate.mps_observational_entropy`). Dense states are always exact.

    Returns
    -------
    EntropyResult with ``entropy``, ``stderr`` (0 when exact), ``shannon``, ``boltzmann``,
    ``knowledge``, ``max_entropy``, ``method`` and, when exact, ``distribution``.
    """
    if isinstance(state, np.ndarray):
        if samples is not None or method not in (None, "exact") or options:
            raise InputError("samples, method: dense states are evaluated exactly; estimator "
                             "settings apply to MPS states only")
        return dense.observational_entropy(state, coarse_graining)
    from mpsobs import estimate

    return estimate.mps_observational_entropy(state, coarse_graining, samples=samples,
                                              seed=seed, method=method, **options)
