"""Coarse-grainings: what an observer can ask about a chain.

A coarse-graining is a complete set of orthogonal projectors; a *sequence* of them
("ask the first, then the second, ...") has outcomes i = (i_1, ..., i_n) with
probability p_i = Tr[K_i rho K_i^dagger] and volume V_i = Tr[K_i^dagger K_i], where
K_i = P_in ... P_i1.

Block coarse-grainings partition the chain into contiguous blocks and ask one observable
(or a sequence of observables) on every block. Blocks commute with each other, so the
Kraus operator of an outcome string is the tensor product of the blocks' ones and the
volume is the product of the blocks' volumes.

Every block carries its macrostates (label, Kraus operator in the block basis, volume)
and, for the estimators, a *readout*: a (R, D) matrix ``B`` with a group index per row
such that the POVM element of outcome j is ``M_j = sum_{r in j} B_r^dagger B_r``. For a
single observable, ``B`` is the adjoint of its eigenbasis (rows orthonormal, R = D); for
a sequence, ``B`` stacks square roots of the M_j. Since sum_r B_r^dagger B_r = 1, the
rows form a fine-grained measurement whose marginal over groups is the coarse one; the
estimators only ever see ``B`` and the groups.

Basis convention (as quimb): inside a block, its first site is the most significant
bit; |0> has sigma^z = +1; "number" counts sites in |1>.
"""

from __future__ import annotations

import itertools
from collections.abc import Sequence
from dataclasses import dataclass, replace
from math import comb

import numpy as np

from mpsobs.chain.models import Model
from mpsobs.core.errors import InputError, finite_number, integer
from mpsobs.core.printing import number, short, size_range

__all__ = [
    "Macrostate", "Block", "BlockCoarseGraining", "ProjectorCoarseGraining",
    "WideEnergyRegions", "blocks", "sequence", "projectors", "OBSERVABLES", "WIDE_SEQUENCES",
]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

OBSERVABLES = ("number", "energy", "fine")

#: Relative tolerance for treating two eigenvalues as one outcome.
DEGENERACY_TOL = 1e-9
#: Volumes below this are treated as empty outcomes of a sequence.
EMPTY_VOLUME = 1e-10
#: Largest block handled (local dimension 2**MAX_BLOCK_SITES).
MAX_BLOCK_SITES = 12
#: Most regions of an energy coarse-graining with a region wider than MAX_BLOCK_SITES.
MAX_WIDE_REGIONS = 3


@dataclass(frozen=True, eq=False)
class Macrostate:
    """One outcome of one block: ``label`` has one value per asked observable;
    ``kraus`` is P_in ... P_i1 in the block basis (a projector when one observable is
    asked); ``volume`` is Tr K^dagger K."""

    label: tuple
    kraus: np.ndarray | None  # None only on number blocks wider than MAX_BLOCK_SITES
    volume: float

    def __repr__(self) -> str:
        kraus = ("no operator" if self.kraus is None
                 else f"kraus {self.kraus.shape[0]}x{self.kraus.shape[1]}")
        label = ", ".join(number(v) for v in self.label)
        return f"Macrostate(({short(label, 60)}), volume {number(self.volume)}, {kraus})"


@dataclass(frozen=True, eq=False)
class Block:
    """One block of sites ``start .. stop - 1`` with its macrostates and readout."""

    start: int
    stop: int
    macrostates: tuple[Macrostate, ...]
    readout: np.ndarray | None  # (R, D): rows B_r; None for number blocks wider than
    group: np.ndarray | None    # (R,): outcome index of each row      MAX_BLOCK_SITES

    @property
    def size(self) -> int:
        return self.stop - self.start

    @property
    def dim(self) -> int:
        return 2**self.size

    @property
    def volumes(self) -> np.ndarray:
        return np.array([m.volume for m in self.macrostates])

    @property
    def n_outcomes(self) -> int:
        return len(self.macrostates)

    def __repr__(self) -> str:
        rows = ("volumes only" if self.readout is None
                else f"readout {self.readout.shape[0]}x{self.readout.shape[1]}")
        return f"Block(sites {self.start}..{self.stop - 1}, {self.n_outcomes} outcomes, {rows})"


@dataclass(frozen=True, eq=False)
class _Stage:
    """One observable asked on every block: per block, its eigenbasis (columns), the
    outcome index of each eigenvector and the value of each outcome."""

    name: str
    bases: tuple[np.ndarray, ...]
    outcome: tuple[np.ndarray, ...]
    values: tuple[np.ndarray, ...]

    def __repr__(self) -> str:
        return f"_Stage({self.name!r}, {len(self.values)} blocks)"


class _ChainOfQubits:
    """The Hilbert space of a chain of ``L`` qubits: its dimension and the largest S_obs."""

    L: int

    @property
    def dim(self) -> int:
        return 2**self.L

    @property
    def max_entropy(self) -> float:
        """ln dim H = L ln 2."""
        return self.L * np.log(2.0)


@dataclass(frozen=True, eq=False)
class BlockCoarseGraining(_ChainOfQubits):
    """A block coarse-graining of an L-site chain (one observable or a sequence).

    Build with :func:`blocks` and :func:`sequence`. ``label`` is a short name for tables.
    """

    L: int
    blocks: tuple[Block, ...]
    stages: tuple[_Stage, ...]
    label: str

    @property
    def regions(self) -> tuple[tuple[int, int], ...]:
        return tuple((b.start, b.stop) for b in self.blocks)

    @property
    def projective(self) -> bool:
        """True when one observable is asked: readout rows are an orthonormal basis."""
        return len(self.stages) == 1

    def block_macrostates(self, k: int) -> tuple[Macrostate, ...]:
        """The macrostates (projectors or Kraus operators, volumes) of block k."""
        return self.blocks[k].macrostates

    def __repr__(self) -> str:
        asked = " then ".join(st.name for st in self.stages)
        return (f"BlockCoarseGraining({short(self.label, 60)!r}, L={self.L}, "
                f"{len(self.blocks)} blocks of {size_range(b.size for b in self.blocks)} "
                f"sites, {size_range(b.n_outcomes for b in self.blocks)} outcomes per block; "
                f"asks {short(asked, 60)})")


@dataclass(frozen=True, eq=False)
class ProjectorCoarseGraining:
    """A general coarse-graining (or sequence) given by projectors on the whole space.

    ``stages[s]`` is the list of (dim, dim) projectors of the s-th coarse-graining asked.
    Only the dense engine evaluates it.
    """

    stages: tuple[tuple[np.ndarray, ...], ...]
    label: str

    @property
    def dim(self) -> int:
        return self.stages[0][0].shape[0]

    @property
    def max_entropy(self) -> float:
        return float(np.log(self.dim))

    def __repr__(self) -> str:
        return (f"ProjectorCoarseGraining({short(self.label, 60)!r}, dim {self.dim}, "
                f"{len(self.stages)} stage(s) of {size_range(len(s) for s in self.stages)} "
                f"projectors)")


@dataclass(frozen=True, eq=False)
class WideEnergyRegions(_ChainOfQubits):
    """The energies of contiguous regions of which one is wider than MAX_BLOCK_SITES.

    No projector is built (2**n for n sites): the coarse-graining carries the chain
    ``model`` (each region's Hamiltonian H_R is its terms lying wholly inside R, as
    :meth:`mpsobs.models.Model.block_hamiltonian`), the ``regions`` (at most
    MAX_WIDE_REGIONS, covering the chain) and the ``bin_width`` dE: outcome of region R is
    the bin floor(E_R / dE). :func:`mpsobs.wide_energy.wide_energy_entropy` evaluates it.

    ``observables`` is ("energy",), or for a number-conserving model the joint number and
    energy of every region in the order asked, ("number", "energy") or ("energy",
    "number") (from :func:`sequence`; the two commute, so the order changes only the
    order of the outcome columns): outcome of region R is (n_R, b_R) or (b_R, n_R),
    evaluated by :func:`mpsobs.estimators.wide_number_energy.wide_number_energy_entropy`.
    """

    L: int
    regions: tuple[tuple[int, int], ...]
    model: Model
    bin_width: float
    label: str
    observables: tuple[str, ...] = ("energy",)

    def __repr__(self) -> str:
        joint = self.observables != ("energy",)
        asked = f"; asks {' then '.join(self.observables)}" if joint else ""
        return (f"WideEnergyRegions({short(self.label, 60)!r}, L={self.L}, "
                f"{len(self.regions)} regions of {size_range(b - a for a, b in self.regions)} "
                f"sites, bin width {number(self.bin_width)}{asked})")


# --------------------------------------------------------------------------- regions


def _resolve_regions(L: int, size: int | None,
                     regions: Sequence[Sequence[int]] | None) -> list[tuple[int, int]]:
    L = integer(L, "L", 1)
    if (size is None) == (regions is None):
        raise InputError("size, regions: give exactly one of them")
    if size is not None:
        size = integer(size, "size", 1)
        if size > L:
            raise InputError(f"size: block size {size} is larger than the chain (L = {L})")
        return [(s, min(s + size, L)) for s in range(0, L, size)]
    try:
        out = [(integer(a, "regions"), integer(b, "regions")) for a, b in regions]
    except (TypeError, ValueError):
        raise InputError(f"regions: expected a list of (start, stop) pairs of integers, "
                         f"got {regions!r}") from None
    if not out:
        raise InputError("regions: expected at least one (start, stop) pair")
    position = 0
    for j, (start, stop) in enumerate(out):
        if start != position:
            kind = "a gap" if start > position else "an overlap"
            raise InputError(f"regions: {kind} at site {min(start, position)} before "
                             f"regions[{j}]; regions must be contiguous, half-open and cover "
                             f"0..{L} in order")
        if stop <= start:
            raise InputError(f"regions: empty or reversed region ({start}, {stop}) at "
                             f"regions[{j}]")
        position = stop
    if position != L:
        raise InputError(f"regions: they cover 0..{position}, not 0..{L}")
    return out


# --------------------------------------------------------------------------- spectra


def _group_eigenvalues(values: np.ndarray, scale: float,
                       bin_width: float | None) -> tuple[np.ndarray, np.ndarray]:
    """Outcome index per (sorted) eigenvalue, and the value of each outcome.

    Without ``bin_width``, eigenvalues closer than DEGENERACY_TOL * scale are one outcome
    (its value is their mean). With it, outcome = bin floor(E / bin_width) anchored at
    E = 0, valued at the bin centre.
    """
    if bin_width is not None:
        bins = np.floor(values / bin_width).astype(np.int64)
        uniq, outcome = np.unique(bins, return_inverse=True)
        return outcome, (uniq + 0.5) * bin_width
    tol = DEGENERACY_TOL * max(scale, 1.0)
    new = np.concatenate([[True], np.diff(values) > tol])
    outcome = np.cumsum(new) - 1
    centres = np.array([values[outcome == j].mean() for j in range(outcome[-1] + 1)])
    return outcome, centres


def _spectral_stage(name: str, regions, operator_of_block, bin_width) -> _Stage:
    bases, outcomes, values = [], [], []
    for start, stop in regions:
        op = operator_of_block(start, stop)
        evals, evecs = np.linalg.eigh(op)
        scale = float(np.max(np.abs(evals))) if evals.size else 1.0
        outcome, centres = _group_eigenvalues(evals, scale, bin_width)
        bases.append(evecs)
        outcomes.append(outcome)
        values.append(centres)
    return _Stage(name, tuple(bases), tuple(outcomes), tuple(values))


def _number_stage(regions) -> _Stage:
    bases, outcomes, values = [], [], []
    for start, stop in regions:
        b = stop - start
        counts = np.array([bin(s).count("1") for s in range(2**b)])
        bases.append(np.eye(2**b))
        outcomes.append(counts)
        values.append(np.arange(b + 1, dtype=float))
    return _Stage("number", tuple(bases), tuple(outcomes), tuple(values))


def _fine_stage(regions) -> _Stage:
    dims = [2 ** (stop - start) for start, stop in regions]
    return _Stage("fine", tuple(np.eye(d) for d in dims), tuple(np.arange(d) for d in dims),
                  tuple(np.arange(d, dtype=float) for d in dims))


def _check_operator(op, size: int, regions) -> np.ndarray:
    arr = np.asarray(op)
    if not np.issubdtype(arr.dtype, np.number):
        raise InputError("observable: expected one of "
                         f"{', '.join(map(repr, OBSERVABLES))} or a Hermitian numpy array")
    d = 2**size
    if arr.shape != (d, d):
        raise InputError(f"observable: expected a ({d}, {d}) array for blocks of {size} "
                         f"sites, got shape {arr.shape}")
    if not np.allclose(arr, arr.conj().T, atol=1e-10 * max(1.0, np.abs(arr).max())):
        raise InputError("observable: the operator is not Hermitian")
    short = [(a, b) for a, b in regions if b - a != size]
    if short:
        raise InputError(f"observable: an operator array needs every block to have {size} "
                         f"sites, but block {short[0]} has {short[0][1] - short[0][0]}; "
                         f"choose a size that divides L or a named observable")
    return arr


# --------------------------------------------------------------------------- assembly


def _block_from_stages(stages: Sequence[_Stage], k: int, start: int, stop: int) -> Block:
    """Macrostates and readout of block k from the observables asked in order."""
    if len(stages) == 1:
        st = stages[0]
        basis, outcome, values = st.bases[k], st.outcome[k], st.values[k]
        macro = []
        for j, value in enumerate(values):
            cols = basis[:, outcome == j]
            macro.append(Macrostate((float(value),), cols @ cols.conj().T,
                                    float(cols.shape[1])))
        return Block(start, stop, tuple(macro), basis.conj().T.copy(), outcome.copy())
    # Sequence: build K = P_in ... P_i1 outcome by outcome, dropping empty branches.
    d = 2 ** (stop - start)
    branches = [((), np.eye(d))]
    for st in stages:
        basis, outcome, values = st.bases[k], st.outcome[k], st.values[k]
        projs = []
        for j, value in enumerate(values):
            cols = basis[:, outcome == j]
            projs.append((float(value), cols @ cols.conj().T))
        branches = [(label + (value,), proj @ kraus)
                    for label, kraus in branches for value, proj in projs]
        branches = [(lab, K) for lab, K in branches
                    if np.vdot(K, K).real > EMPTY_VOLUME]
    macro, rows, group = [], [], []
    for j, (label, kraus) in enumerate(branches):
        povm = kraus.conj().T @ kraus
        volume = _snap(float(np.trace(povm).real))
        macro.append(Macrostate(label, kraus, volume))
        w, v = np.linalg.eigh(povm)
        keep = w > EMPTY_VOLUME * max(1.0, w.max())
        rows.append(np.sqrt(w[keep])[:, None] * v[:, keep].conj().T)
        group.append(np.full(int(keep.sum()), j))
    return Block(start, stop, tuple(macro), np.concatenate(rows), np.concatenate(group))


def _snap(volume: float) -> float:
    """Round a volume to an integer when it is one up to round-off (commuting stages)."""
    nearest = round(volume)
    return float(nearest) if abs(volume - nearest) < 1e-9 else volume


def _assemble(L: int, regions, stages: tuple[_Stage, ...], label: str) -> BlockCoarseGraining:
    built = tuple(_block_from_stages(stages, k, a, b) for k, (a, b) in enumerate(regions))
    return BlockCoarseGraining(L, built, stages, label)


def _region_label(size: int | None, regions) -> str:
    if size is not None:
        return f"b{size}"
    return "r" + ",".join(f"{a}-{b}" for a, b in regions)


def blocks(L: int, size: int | None = None, observable="number", *,
           model: Model | None = None, bin_width: float | None = None,
           regions: Sequence[Sequence[int]] | None = None) -> BlockCoarseGraining:
    """A block coarse-graining of an L-site chain.

    Parameters
    ----------
    L : number of sites.
    size : block size; if it does not divide L, the last block is shorter.
    observable : "number" (sites in |1>, volumes C(b, n)), "energy" (the model's terms
        lying wholly inside the block, diagonalised exactly; needs ``model``), "fine" (the
        computational basis, volume 1) or a Hermitian numpy array of shape
        (2**size, 2**size) measured on every block.
    model : the chain model, for ``observable="energy"``.
    bin_width : for "energy" or an array: outcomes are bins floor(E / bin_width) instead
        of distinct eigenvalues (degeneracy tolerance DEGENERACY_TOL relative).
    regions : instead of ``size``: half-open (start, stop) pairs, contiguous and covering
        0..L in order.

    Cost: one dense eigendecomposition of size 2**b per block (b <= MAX_BLOCK_SITES).
    Energy on a partition with a block wider than MAX_BLOCK_SITES gives instead a
    :class:`WideEnergyRegions` (no eigendecomposition; two or three regions,
    ``bin_width`` required), evaluated by :mod:`mpsobs.wide_energy`.
    """
    spans = _resolve_regions(L, size, regions)
    widest = max(b - a for a, b in spans)
    if widest > MAX_BLOCK_SITES:
        if not (isinstance(observable, str) and observable in ("number", "energy")):
            raise InputError(f"size: blocks of more than {MAX_BLOCK_SITES} sites are supported "
                             f"only for the 'number' and 'energy' observables; got a block "
                             f"of {widest}")
    if bin_width is not None and finite_number(bin_width, "bin_width") <= 0:
        raise InputError(f"bin_width: expected a positive number, got {bin_width!r}")
    where = _region_label(size, spans)
    if isinstance(observable, str):
        if observable not in OBSERVABLES:
            raise InputError(f"observable: unknown {observable!r}; allowed: "
                             f"{', '.join(map(repr, OBSERVABLES))} or a Hermitian array")
        if observable != "energy" and model is not None:
            raise InputError(f"model: only the 'energy' observable uses a model, "
                             f"not {observable!r}")
        if observable != "energy" and bin_width is not None:
            raise InputError(f"bin_width: only 'energy' or an operator array is binned, "
                             f"not {observable!r}")
        if observable == "number":
            if widest > MAX_BLOCK_SITES:
                return _wide_number(L, spans, where)
            return _assemble(L, spans, (_number_stage(spans),), f"number:{where}")
        if observable == "fine":
            return _assemble(L, spans, (_fine_stage(spans),), "fine" if size == 1 else
                             f"fine:{where}")
        if model is None:
            raise InputError("model: the 'energy' observable needs the chain model "
                             "(mpsobs.models.xxz or ising)")
        if not isinstance(model, Model):
            raise InputError(f"model: expected an mpsobs.models.Model, got {type(model).__name__}")
        if model.L != L:
            raise InputError(f"model: it has L = {model.L} sites, the coarse-graining {L}")
        if widest > MAX_BLOCK_SITES:
            return _wide_energy(L, spans, model, bin_width, where)
        stage = _spectral_stage("energy", spans, model.block_hamiltonian, bin_width)
        suffix = "" if bin_width is None else f",dE{bin_width:g}"
        return _assemble(L, spans, (stage,), f"energy:{where}{suffix}")
    if size is None:
        raise InputError("observable: an operator array needs equal blocks given by size")
    op = _check_operator(observable, size, spans)
    stage = _spectral_stage("operator", spans, lambda a, b: op, bin_width)
    return _assemble(L, spans, (stage,), f"operator:{where}")


def _wide_number(L: int, spans, where: str) -> BlockCoarseGraining:
    """Number blocks too wide for block tensors: macrostates carry volumes C(b, n) only
    (kraus None, readout None); the MPS region-counting estimator evaluates them."""
    built = []
    for start, stop in spans:
        b = stop - start
        macro = tuple(Macrostate((float(n),), None, float(comb(b, n))) for n in range(b + 1))
        built.append(Block(start, stop, macro, None, None))
    stage = _Stage("number", (None,) * len(spans), (None,) * len(spans),
                   tuple(np.arange(b - a + 1, dtype=float) for a, b in spans))
    return BlockCoarseGraining(L, tuple(built), (stage,), f"number:{where}")


def _wide_energy(L: int, spans, model: Model, bin_width: float | None,
                 where: str) -> WideEnergyRegions:
    """Energy regions of which one is wider than MAX_BLOCK_SITES (checked here)."""
    if bin_width is None:
        raise InputError(f"bin_width: energy regions wider than {MAX_BLOCK_SITES} sites need "
                         f"a bin width (outcomes are bins floor(E / bin_width)); give a "
                         f"positive number")
    if len(spans) > MAX_WIDE_REGIONS:
        raise InputError(f"regions: the energy of regions wider than {MAX_BLOCK_SITES} sites "
                         f"is evaluated for at most {MAX_WIDE_REGIONS} regions; got "
                         f"{len(spans)}")
    if len(spans) < 2:
        raise InputError(f"regions: the energy of a region wider than {MAX_BLOCK_SITES} sites "
                         f"needs the chain cut into 2 to {MAX_WIDE_REGIONS} regions (the energy of "
                         f"the whole chain is not a region energy); got one region")
    thin = [(a, b) for a, b in spans if b - a < 2]
    if thin:
        raise InputError(f"regions: every region next to one wider than {MAX_BLOCK_SITES} "
                         f"sites needs at least 2 sites; got {thin[0]}")
    return WideEnergyRegions(L, tuple(spans), model, float(bin_width),
                             f"energy:{where},dE{bin_width:g}")


def sequence(first, second, *more):
    """Ask coarse-grainings in the given order: S_{first, second, ...}.

    Block coarse-grainings must share L and the partition; projector coarse-grainings
    must share the dimension. The outcome labels are tuples with one value per stage.
    Energy regions wider than MAX_BLOCK_SITES take part only with the number blocks of
    the same regions (two or three), in either order (:data:`WIDE_SEQUENCES`), for a model that
    conserves the number: a :class:`WideEnergyRegions` asking both.
    """
    parts = (first, second, *more)
    if any(isinstance(p, WideEnergyRegions) for p in parts):
        return _wide_number_energy(parts)
    if all(isinstance(p, BlockCoarseGraining) for p in parts):
        ref = parts[0]
        for i, p in enumerate(parts[1:], start=2):
            if p.L != ref.L:
                raise InputError(f"sequence: argument {i} has L = {p.L}, the first {ref.L}")
            if p.regions != ref.regions:
                raise InputError(f"sequence: argument {i} uses another partition of the "
                                 f"chain; all must share the first's regions")
        if any(b.readout is None for p in parts for b in p.blocks):
            raise InputError(f"sequence: blocks wider than {MAX_BLOCK_SITES} sites cannot be "
                             f"part of a sequence")
        stages = tuple(st for p in parts for st in p.stages)
        return _assemble(ref.L, ref.regions, stages, ">".join(p.label for p in parts))
    if all(isinstance(p, ProjectorCoarseGraining) for p in parts):
        dims = {p.dim for p in parts}
        if len(dims) != 1:
            raise InputError(f"sequence: the coarse-grainings act on different dimensions "
                             f"{sorted(dims)}")
        return ProjectorCoarseGraining(tuple(st for p in parts for st in p.stages),
                                       ">".join(p.label for p in parts))
    names = sorted({type(p).__name__ for p in parts})
    raise InputError(f"sequence: cannot mix {', '.join(names)}; give all block "
                     f"coarse-grainings or all projector coarse-grainings")


#: The sequences accepted on energy regions wider than MAX_BLOCK_SITES.
WIDE_SEQUENCES = (("number", "energy"), ("energy", "number"))


def _wide_number_energy(parts) -> WideEnergyRegions:
    """The joint number and energy of wide regions, from a wide energy coarse-graining and
    the number blocks of the same regions, in the order given (a number-conserving model
    only: there the two commute region by region)."""
    names = tuple("energy" if isinstance(p, WideEnergyRegions) else
                  " then ".join(st.name for st in p.stages)
                  if isinstance(p, BlockCoarseGraining) else type(p).__name__
                  for p in parts)
    allowed = " or ".join(" then ".join(s) for s in WIDE_SEQUENCES)
    if names not in WIDE_SEQUENCES or any(p.observables != ("energy",) for p in parts
                                           if isinstance(p, WideEnergyRegions)):
        raise InputError(f"sequence: energy regions wider than {MAX_BLOCK_SITES} sites are "
                         f"asked alone or jointly with the number of the same regions "
                         f"({allowed}); got {' then '.join(names)}")
    energy = next(p for p in parts if isinstance(p, WideEnergyRegions))
    counted = next(p for p in parts if not isinstance(p, WideEnergyRegions))
    if counted.L != energy.L or counted.regions != energy.regions:
        raise InputError(f"sequence: the number blocks {list(counted.regions)} are not the "
                         f"energy regions {list(energy.regions)}; ask both on the same regions")
    if not energy.model.conserves_number:
        raise InputError(f"sequence: the number and energy of regions wider than "
                         f"{MAX_BLOCK_SITES} sites are asked jointly only for a model that "
                         f"conserves the number (xxz); model {energy.model.name!r} does not")
    return replace(energy, label=">".join(p.label for p in parts), observables=names)


def projectors(ops: Sequence[np.ndarray], label: str = "projectors",
               tol: float = 1e-10) -> ProjectorCoarseGraining:
    """A general coarse-graining from a complete set of orthogonal projectors on the
    whole space (each Hermitian, idempotent, mutually orthogonal, summing to 1)."""
    if not isinstance(label, str):
        raise InputError(f"label: expected a string, got {label!r}")
    tol = finite_number(tol, "tol")
    mats = [np.asarray(p) for p in ops]
    if not mats:
        raise InputError("projectors: expected at least one projector")
    d = mats[0].shape[0] if mats[0].ndim == 2 else -1
    total = np.zeros((max(d, 1), max(d, 1)), dtype=complex)
    for i, p in enumerate(mats):
        if p.shape != (d, d):
            raise InputError(f"projectors: item {i} has shape {p.shape}, expected ({d}, {d})")
        if not np.allclose(p, p.conj().T, atol=tol):
            raise InputError(f"projectors: item {i} is not Hermitian")
        if not np.allclose(p @ p, p, atol=1e-8):
            raise InputError(f"projectors: item {i} is not a projector (P @ P != P)")
        total += p
    for i, j in itertools.combinations(range(len(mats)), 2):
        if not np.allclose(mats[i] @ mats[j], 0, atol=1e-8):
            raise InputError(f"projectors: items {i} and {j} are not orthogonal")
    if not np.allclose(total, np.eye(d), atol=1e-8):
        raise InputError("projectors: they do not sum to the identity")
    return ProjectorCoarseGraining((tuple(mats),), label)
