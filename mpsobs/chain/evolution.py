"""Real-time evolution of an MPS by TEBD on plain arrays.

The layers of two-site gates, the Trotter schedules (order 2 Strang, order 4 Forest-Ruth),
the canonical centre, the truncation and the number blocks are those of the shared kernel
:mod:`mpsobs.mps.evolution` (real time, local dimension 2), with the bond Hamiltonians of
:func:`mpsobs.chain.models.bond_hamiltonians` (hbar = 1, psi(t) = exp(-i H t) psi(0)).
Truncation: :mod:`mpsobs.mps.truncation` (at most ``max_bond`` singular values, the
smallest dropped while their squared sum stays within ``cutoff`` times the total). The
state is not renormalised during the run: its norm records the truncation loss.

Number conservation: when H conserves the number of sites in |1> and the initial state
has a definite number, the state is first brought to a bond basis in which every vector
has a definite number (:func:`mpsobs.mps.charges.definite_charges`: basis product states,
DMRG ground states in one sector, any user state of definite number); every QR and split
then works block by block, with the truncation decided on the whole spectrum.

Cost per step (order 2): L - 1 truncated splits of (2 chi, 2 chi) matrices and about L
QRs, i.e. O(L chi^3); order 4 costs three times that. With number blocks the cost drops
to the sum over blocks of (block size)^3.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from typing import Literal, get_args

import numpy as np

from mpsobs.chain.models import Model, bond_hamiltonians
from mpsobs.core.errors import InputError, finite_number, integer, one_of
from mpsobs.core.printing import number
from mpsobs.core.threads import kernel_threads
from mpsobs.mps.charges import CHARGE_TOL, definite_charges
from mpsobs.mps.evolution import ORDERS, Gates, layer_schedule, step_lengths
from mpsobs.mps.evolution import GateChain as _Chain
from mpsobs.mps.tensors import MPS, as_mps, right_canonical
from mpsobs.mps.truncation import Route

__all__ = ["Snapshot", "evolve", "ORDERS", "Symmetry", "CHARGE_TOL", "BLOCKS_MIN_BOND"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

logger = logging.getLogger(__name__)

Symmetry = Literal["auto", "number", "none"]
#: With symmetry="auto", number blocks are used from this max_bond on (below it the
#: per-block overhead outweighs the cheaper decompositions; measured crossover 32..64).
BLOCKS_MIN_BOND = 48


@dataclass(frozen=True, eq=False)
class Snapshot:
    """The evolved state at one requested time.

    Attributes
    ----------
    t : the time (exactly the requested one).
    state : the MPS, right-canonical and normalised.
    discarded_weight : sum over all truncations since the start of the discarded squared
        singular values relative to the state's squared norm at that truncation.
    max_bond : the largest bond dimension of ``state``.
    norm : the norm before renormalisation (1 minus the loss to truncation,
        norm**2 = prod(1 - discarded fractions)); the initial state counts as norm 1.
    energy : <H> in ``state``.
    energy_drift : energy - <H> at the start time.
    half_chain_entanglement : von Neumann entropy (nats) of the cut between sites
        L//2 - 1 and L//2.
    steps : number of Trotter steps done since the start.
    """

    t: float
    state: MPS
    discarded_weight: float
    max_bond: int
    norm: float
    energy: float
    energy_drift: float
    half_chain_entanglement: float
    steps: int

    def __repr__(self) -> str:
        return (f"Snapshot(t={number(self.t)}, L={self.state.L}, max bond {self.max_bond}, "
                f"discarded weight {self.discarded_weight:.3g}, norm {number(self.norm)}, "
                f"E={number(self.energy)} (drift {self.energy_drift:.3g}), "
                f"S_half={number(self.half_chain_entanglement)}, {self.steps} steps)")


# ---------------------------------------------------------------- validation


def _check_times(times, start_time) -> tuple[np.ndarray, float]:
    start = finite_number(start_time, "start_time")
    try:
        ts = np.atleast_1d(np.asarray(times, dtype=float))
    except (TypeError, ValueError):
        raise InputError("times: expected a sequence of numbers") from None
    if ts.ndim != 1 or ts.size == 0 or not np.all(np.isfinite(ts)):
        raise InputError("times: expected a non-empty 1-d sequence of finite numbers")
    if np.any(np.diff(ts) < 0):
        raise InputError("times: must be sorted in increasing order")
    if ts[0] < start:
        raise InputError(f"times: {ts[0]!r} is before start_time = {start!r}")
    return ts, start


def _check_options(max_bond, cutoff, dt, order) -> None:
    integer(max_bond, "max_bond", 1)
    if not 0.0 <= finite_number(cutoff, "cutoff") < 1.0:
        raise InputError(f"cutoff: expected a number with 0 <= cutoff < 1, got {cutoff!r}")
    if not finite_number(dt, "dt") > 0:
        raise InputError(f"dt: expected a positive finite time step, got {dt!r}")
    one_of(order, "order", ORDERS)


def _snapshot(t, tensors, norm2, e, e0, ent, discarded, steps) -> Snapshot:
    nrm = math.sqrt(norm2)
    out = list(tensors)
    out[0] = out[0] / nrm
    state = MPS(tuple(out))
    return Snapshot(t=float(t), state=state, discarded_weight=discarded,
                    max_bond=state.max_bond, norm=nrm, energy=e, energy_drift=e - e0,
                    half_chain_entanglement=ent, steps=steps)


# ---------------------------------------------------------------- entry point


def evolve(state, model: Model, times: Sequence[float], *, max_bond: int, cutoff: float,
           dt: float, order: int = 4, start_time: float = 0.0, progress: bool = False,
           symmetry: Symmetry = "auto", decomposition: Route = "auto") -> Iterator[Snapshot]:
    """Evolve ``state`` under ``model`` and yield one :class:`Snapshot` per requested time.

    Parameters
    ----------
    state : mpsobs MPS or quimb MatrixProductState at ``start_time``; it is brought to
        canonical form and normalised first (the snapshots' norm is relative to it).
    model : the Hamiltonian (nearest-neighbour terms), psi(t) = exp(-i H (t - t0)) psi.
    times : absolute times, sorted, each >= ``start_time``. Steps have length ``dt``; the
        last step before each requested time is shortened to land exactly on it.
    max_bond, cutoff : truncation (at most ``max_bond`` singular values; drop the smallest
        while their squared sum relative to the total stays within ``cutoff``).
    dt : Trotter step. order : 2 (Strang) or 4 (Forest-Ruth).
    progress : show a tqdm progress bar of the evolution time, advanced at every requested
        time (off by default).
    symmetry : ``"number"`` decomposes block by block in the particle number (U(1)
        charges on every bond); it needs a number-conserving model and an input of
        definite number (the bond bases are rotated to definite numbers first, losing at
        most CHARGE_TOL of the squared norm). ``"none"``: dense decompositions.
        ``"auto"``: "number" where possible and ``max_bond >= BLOCKS_MIN_BOND``, else
        "none". Both give the same states up to rounding (and the order of equal singular
        values at a truncation).
    decomposition : ``"auto"`` truncates through the Gram matrix where that resolves the
        cutoff, else by the SVD (:mod:`mpsobs.mps.truncation`); ``"svd"`` always by the
        SVD. Both give the same states to the Gram route's accuracy.

    Bad arguments raise InputError at the call, before anything is computed. The steps
    run under the library's BLAS thread limit (:mod:`mpsobs.threads`), which is released
    while a snapshot is with the caller.
    """
    if not isinstance(model, Model):
        raise InputError(f"model: expected an mpsobs.models.Model, got {type(model).__name__}")
    mps = as_mps(state)
    if mps.L != model.L:
        raise InputError(f"state: {mps.L} sites, but the model has L = {model.L}")
    if mps.L < 2:
        raise InputError("state: time evolution needs at least two sites")
    ts, t0 = _check_times(times, start_time)
    _check_options(max_bond, cutoff, dt, order)
    one_of(symmetry, "symmetry", get_args(Symmetry))
    one_of(decomposition, "decomposition", get_args(Route))
    if not isinstance(progress, bool):
        raise InputError(f"progress: expected True or False, got {progress!r}")
    tensors = list(right_canonical(mps, normalize=True).tensors)
    fixed = None
    if model.conserves_number and (
            symmetry == "number" or (symmetry == "auto" and max_bond >= BLOCKS_MIN_BOND)):
        fixed = definite_charges(tensors)
    if fixed is None and symmetry == "number":
        raise InputError("symmetry: 'number' needs a number-conserving model and a "
                         "state of definite particle number")
    logger.debug("evolution with %s decompositions",
                 "dense" if fixed is None else "number-block")
    chain = (_Chain(tensors, None, route=decomposition) if fixed is None else
             _Chain(fixed[0], fixed[1], center=mps.L - 1, route=decomposition))
    return _run(chain, model, ts, t0, int(max_bond), float(cutoff), float(dt), order,
                progress)


def _run(chain: _Chain, model: Model, ts: np.ndarray, t0: float, max_bond: int,
         cutoff: float, dt: float, order: int, progress: bool) -> Iterator[Snapshot]:
    from tqdm.auto import tqdm

    bond_hams = [np.asarray(h, dtype=complex) for h in bond_hamiltonians(model)]
    gates = Gates(bond_hams, "real", 2, conserve_charge=chain.charges is not None)
    with kernel_threads(chain.max_bond()):
        _, e0, ent = chain.readout(bond_hams)
    discarded, steps, t_now = 0.0, 0, t0
    bar = tqdm(total=float(ts[-1] - t0), disable=not progress, unit="t", leave=False)
    try:
        for t in ts:
            step_list = step_lengths(float(t - t_now), dt)
            # the limit (chosen by the bond at the start of the interval) is not held
            # across the yield: the caller's own work runs with its own threads
            with kernel_threads(chain.max_bond()):
                for parity, tau in layer_schedule(order, step_list):
                    discarded += chain.apply_layer(parity, gates.layer(parity, tau),
                                                   max_bond, cutoff)
                norm2, e, ent = chain.readout(bond_hams)
            steps += len(step_list)
            bar.update(float(t - t_now))
            t_now = float(t)
            logger.debug("t = %g: max bond %d, discarded %.3g", t_now, chain.max_bond(),
                         discarded)
            yield _snapshot(t_now, chain.tensors, norm2, e, e0, ent, discarded, steps)
    finally:
        bar.close()
