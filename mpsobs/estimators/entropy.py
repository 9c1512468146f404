"""The one entry point: observational entropy of a dense state or an MPS."""

from __future__ import annotations

import inspect

import numpy as np

from mpsobs.chain.coarse import WideEnergyRegions
from mpsobs.core.errors import InputError
from mpsobs.core.threads import limits_threads, state_size
from mpsobs.estimators import dense
from mpsobs.estimators.result import EntropyResult

__all__ = ["observational_entropy", "WIDE_SETTINGS"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports


def _estimator_options() -> tuple[str, ...]:
    """The keyword options of :func:`mpsobs.estimate.mps_observational_entropy`."""
    from mpsobs.estimators import estimate

    params = inspect.signature(estimate.mps_observational_entropy).parameters.values()
    return tuple(p.name for p in params if p.kind is inspect.Parameter.KEYWORD_ONLY)


#: Settings of the wide-region energy estimator that :func:`observational_entropy`
#: passes on (:func:`mpsobs.estimators.wide_energy.wide_energy_entropy`).
WIDE_SETTINGS = ("moments", "bond", "sub_bins")


def _refuse_plain_numbers(state) -> None:
    """A list or tuple of plain numbers is a dense vector given as a Python sequence, not
    the (left, 2, right) tensors of an MPS: say so (InputError naming ``state``)."""
    if (isinstance(state, list | tuple) and state
            and all(np.ndim(item) == 0 for item in state)):
        raise InputError(f"state: got a {type(state).__name__} of {len(state)} numbers; a "
                         f"dense state vector must be a numpy array of length 2**L "
                         f"(np.asarray(state)), an MPS a list of (left, 2, right) arrays")


@limits_threads(lambda call: state_size(call.arguments["state"]))
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
        Every kind must be normalised (one rule for all: an unnormalised state
        raises InputError saying how to normalise it).
    coarse_graining : from :mod:`mpsobs.coarse`. Energy regions wider than
        ``coarse.MAX_BLOCK_SITES`` (:class:`mpsobs.coarse.WideEnergyRegions`) go to
        :func:`mpsobs.wide_energy.wide_energy_entropy`, their joint number and energy
        to :func:`mpsobs.estimators.wide_number_energy.wide_number_energy_entropy`
        (method None or "approximate"; settings ``moments``, ``bond``, ``sub_bins``, else
        its defaults; a dense vector is made an exact MPS).
    samples, seed, method, options : estimator settings for MPS states (see
        :func:`mpsobs.estimate.mps_observational_entropy`: ``method`` None, "sample",
        "sample_strings", "enumerate", "count" or "exact"). Dense states are always
        exact: they take ``method`` None or "exact" and no other setting. An unknown
        keyword or a bad ``seed`` raises InputError naming it.

    Returns
    -------
    EntropyResult with ``entropy``, ``stderr`` (0 when exact), ``shannon``, ``boltzmann``,
    ``knowledge``, ``max_entropy``, ``method``, ``algorithm`` and, when exact (except for
    a product over blocks), ``distribution``.
    """
    from mpsobs.estimators import estimate

    estimate.check_seed(seed)
    _refuse_plain_numbers(state)
    if isinstance(coarse_graining, WideEnergyRegions):
        return _wide(state, coarse_graining, samples, method, options)
    allowed = _estimator_options()
    unknown = sorted(set(options) - set(allowed))
    if unknown:
        raise InputError(f"{unknown[0]}: unknown keyword of observational_entropy; allowed: "
                         f"{', '.join(allowed)}")
    if isinstance(state, np.ndarray):
        given = [name for name, value in (("samples", samples), *options.items())
                 if value is not None]
        if given or method not in (None, "exact"):
            name = given[0] if given else "method"
            raise InputError(f"{name}: dense states are evaluated exactly (method None or "
                             f"'exact'); estimator settings apply to MPS states only")
        return dense.observational_entropy(state, coarse_graining)
    return estimate.mps_observational_entropy(state, coarse_graining, samples=samples,
                                              seed=seed, method=method, **options)


def _wide(state, cg: WideEnergyRegions, samples, method, options) -> EntropyResult:
    """The wide-region energy estimator with its resolution settings
    (:data:`WIDE_SETTINGS`, None for its defaults) and no other estimator setting."""
    from mpsobs.estimators.wide_energy import wide_energy_entropy
    from mpsobs.estimators.wide_number_energy import wide_number_energy_entropy
    from mpsobs.mps.tensors import from_dense

    given = [name for name, value in (("samples", samples), *options.items())
             if value is not None and name not in WIDE_SETTINGS]
    if given or method not in (None, "approximate"):
        name = given[0] if given else "method"
        raise InputError(f"{name}: energy regions wider than the block limit are evaluated by "
                         f"the Chebyshev estimator (method None or 'approximate'), whose "
                         f"settings are {', '.join(WIDE_SETTINGS)}")
    settings = {k: v for k, v in options.items() if k in WIDE_SETTINGS and v is not None}
    if isinstance(state, np.ndarray):
        if state.ndim != 1:
            raise InputError("state: wide energy regions take a state vector or an MPS, not "
                             "a density matrix (give a purification, PurifiedMPS)")
        state = from_dense(state)
    if cg.observables == ("energy",):
        return wide_energy_entropy(state, cg, **settings)
    return wide_number_energy_entropy(state, cg, **settings)
