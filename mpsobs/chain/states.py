"""Initial states for quenches, as right-canonical normalised MPS.

Basis convention (as quimb): |0> has sigma^z = +1 ("empty"), |1> has sigma^z = -1
("filled", counted by the number operator); site 0 comes first.

- :func:`product_state`: a per-site pattern ("0110+-", a list of 0/1, or 2-vectors);
- :func:`neel`, :func:`domain_wall`: the two classic patterns;
- :func:`gas_in_box`: n particles confined to the sites [start, stop), the rest empty,
  either as a product state or as the ground state of the model restricted to the box at
  fixed particle number;
- :func:`random_product_state`: seeded random product states;
- :func:`ground_state` (from :mod:`mpsobs.models`): the DMRG ground state of a pre-quench
  model, returned with its energy and convergence record.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal, get_args

import numpy as np

from mpsobs.chain.models import GroundState, Model, dmrg, expectation, ground_state, mpo_tensors
from mpsobs.core.errors import InputError, finite_number, integer, one_of, seed_value
from mpsobs.mps.tensors import MPS, product_mps, right_canonical

__all__ = ["product_state", "neel", "domain_wall", "gas_in_box", "check_gas_in_box",
           "random_product_state", "paired_purification",
           "ground_state", "GasPreparation", "PATTERN_CHARACTERS"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

_SQRT_HALF = 1.0 / np.sqrt(2.0)
#: Site states of a pattern string.
PATTERN_CHARACTERS = {"0": (1.0, 0.0), "1": (0.0, 1.0),
                      "+": (_SQRT_HALF, _SQRT_HALF), "-": (_SQRT_HALF, -_SQRT_HALF)}

GasPreparation = Literal["packed", "spread", "ground"]
#: Upper bound accepted for the particle-number variance of a fixed-number DMRG state.
NUMBER_VARIANCE_TOL = 1e-8


def _check_L(L) -> int:
    return integer(L, "L", 1)


def product_state(pattern: str | Sequence, L: int | None = None) -> MPS:
    """The product state of a per-site pattern.

    ``pattern`` is a string of the characters 0, 1, + and - (|0>, |1>,
    (|0> +- |1>)/sqrt(2)), a sequence of 0/1, or a sequence of 2-vectors (complex
    allowed; each is normalised, it must not vanish). With ``L``, its length is checked.
    """
    if isinstance(pattern, str):
        bad = sorted(set(pattern) - set(PATTERN_CHARACTERS))
        if bad:
            raise InputError(f"pattern: unknown character {bad[0]!r}; allowed: "
                             f"{', '.join(PATTERN_CHARACTERS)}")
        vectors = [np.array(PATTERN_CHARACTERS[c], dtype=complex) for c in pattern]
    else:
        try:
            arr = np.asarray(pattern)
        except (TypeError, ValueError):
            arr = np.asarray(None)
        if arr.dtype.kind not in "iufc":
            raise InputError(f"pattern: expected a string of {', '.join(PATTERN_CHARACTERS)}, "
                             f"a list of 0/1 or of 2-vectors, got {pattern!r}")
        arr = arr.astype(complex)
        if arr.ndim == 1:
            if not np.all(np.isin(arr, (0, 1))):
                raise InputError("pattern: a list of numbers must hold only 0 and 1")
            vectors = [np.eye(2, dtype=complex)[int(v.real)] for v in arr]
        elif arr.ndim == 2 and arr.shape[1] == 2:
            norms = np.linalg.norm(arr, axis=1)
            if not np.all(np.isfinite(norms)) or np.any(norms == 0):
                raise InputError("pattern: site vectors must be finite and non-zero")
            vectors = list(arr / norms[:, None])
        else:
            raise InputError(f"pattern: expected 0/1 values or 2-vectors, got an array of "
                             f"shape {arr.shape}")
    if not vectors:
        raise InputError("pattern: needs at least one site")
    if L is not None and len(vectors) != _check_L(L):
        raise InputError(f"pattern: has {len(vectors)} sites, expected L = {L}")
    return product_mps(vectors)


def neel(L: int, first: Literal[0, 1] = 0) -> MPS:
    """The Neel state: sites alternate 0, 1, 0, ... starting with ``first``."""
    L = _check_L(L)
    one_of(first, "first", (0, 1))
    return product_state([(i + first) % 2 for i in range(L)])


def domain_wall(L: int, filled: Literal["left", "right"] = "left",
                n: int | None = None) -> MPS:
    """The domain wall: ``n`` sites (default L // 2) filled with |1> on the ``filled``
    side, the rest |0>."""
    L = _check_L(L)
    n = L // 2 if n is None else n
    if isinstance(n, bool) or not isinstance(n, int | np.integer) or not 0 <= n <= L:
        raise InputError(f"n: expected an integer in 0..{L}, got {n!r}")
    one_of(filled, "filled", ("left", "right"))
    left = [1] * n + [0] * (L - n)
    return product_state(left if filled == "left" else left[::-1])


def random_product_state(L: int, seed: int | np.random.SeedSequence,
                         kind: Literal["haar", "basis"] = "haar") -> MPS:
    """A seeded random product state: ``"haar"`` draws every site uniformly on the Bloch
    sphere (normalised complex Gaussian vectors), ``"basis"`` draws |0> or |1> with
    probability 1/2 each."""
    L = _check_L(L)
    one_of(kind, "kind", ("haar", "basis"))
    if seed is None:
        raise InputError("seed: a random state needs a seed (results are reproducible)")
    rng = np.random.default_rng(seed_value(seed))
    if kind == "basis":
        return product_state(list(rng.integers(0, 2, size=L)))
    return product_state(rng.normal(size=(L, 2)) + 1j * rng.normal(size=(L, 2)))


def paired_purification(L: int, alpha: float = 0.0) -> tuple[list[np.ndarray], float]:
    """The normalised purification of exp(alpha N) / Z on L sites, prod_i (|00> +
    e^(alpha / 2) |11>) / sqrt(1 + e^alpha) (local dimension 4, index 2 s + a, bond 1;
    alpha = 0: the infinite-temperature state), and ln Z = L ln(1 + e^alpha), the start
    of an imaginary-time run towards a Gibbs state (fact of the trade)."""
    site = np.zeros((1, 4, 1))
    site[0, 0, 0], site[0, 3, 0] = 1.0, np.exp(alpha / 2)
    site /= np.sqrt(1 + np.exp(alpha))
    return [site.astype(complex) for _ in range(L)], L * float(np.logaddexp(0, alpha))


def _box_sites(start: int, stop: int, n: int, layout: str) -> list[int]:
    """Filled sites of a product gas: the first n of the box ("packed") or evenly spread
    (site start + floor((k + 1/2) m / n), k = 0..n-1, m = stop - start)."""
    m = stop - start
    if layout == "packed":
        return list(range(start, start + n))
    return [start + int((k + 0.5) * m / n) for k in range(n)]


def _number_penalty_mpo(L: int, n: int, weight: float) -> list[np.ndarray]:
    """MPO of weight * (N - n)^2, N the number of sites in |1>, as (w_l, w_r, 2, 2) arrays.

    (N - n)^2 = sum_i [(1 - 2n) n_i + n^2 / L] + 2 sum_{i<j} n_i n_j; bond states
    0 = nothing yet, 1 = one n_i placed, 2 = complete (bond dimension 3)."""
    occ, eye = np.diag([0.0, 1.0]), np.eye(2)
    W = np.zeros((3, 3, 2, 2))
    W[0, 0] = W[1, 1] = W[2, 2] = eye
    W[0, 1] = occ
    W[1, 2] = 2 * weight * occ
    W[0, 2] = weight * ((1 - 2 * n) * occ + (n * n / L) * eye)
    return [W[:1]] + [W] * (L - 2) + [W[:, 2:]]


def _mpo_sum(a: Sequence[np.ndarray], b: Sequence[np.ndarray]) -> list[np.ndarray]:
    """MPO of the sum of two MPOs (direct sum of the bond spaces)."""
    out = []
    L = len(a)
    for i, (x, y) in enumerate(zip(a, b, strict=True)):
        if i == 0:
            out.append(np.concatenate([x, y], axis=1))
        elif i == L - 1:
            out.append(np.concatenate([x, y], axis=0))
        else:
            W = np.zeros((x.shape[0] + y.shape[0], x.shape[1] + y.shape[1], 2, 2), complex)
            W[:x.shape[0], :x.shape[1]] = x
            W[x.shape[0]:, x.shape[1]:] = y
            out.append(W)
    return out


def _sector_ground_state(box: Model, n: int, max_bond: int, cutoff: float,
                         tol: float) -> GroundState:
    """Ground state of ``box`` in the sector of n particles.

    DMRG starts from a product state with n evenly spread particles; H conserves the
    number, and the penalty lam (N - n)^2 with lam = 2 sum_terms ||term|| + 1 lifts every
    other sector above the ground energy of sector n (any energy lies within
    +- sum ||term||), so even local eigen-solvers that see all sectors return the sector-n
    state. The penalty vanishes in the sector, so energies are those of H. The number
    variance of the result is checked against NUMBER_VARIANCE_TOL.
    """
    lam = 2.0 * sum(float(np.linalg.norm(t.matrix, 2)) for t in box.terms) + 1.0
    start = product_state([1 if i in _box_sites(0, box.L, n, "spread") else 0
                           for i in range(box.L)])
    penalised = _mpo_sum(mpo_tensors(box), _number_penalty_mpo(box.L, n, lam))
    gs = dmrg(penalised, max_bond=max_bond, cutoff=cutoff, initial=start, tol=tol)
    variance = float(expectation(_number_penalty_mpo(box.L, n, 1.0), gs.state).real)
    if variance > NUMBER_VARIANCE_TOL:
        raise RuntimeError(f"fixed-number DMRG left the sector: <(N - n)^2> = {variance:.3g}")
    return gs


def check_gas_in_box(L: int, start: int, stop: int, n: int,
                     prepare: GasPreparation = "packed", *, model: Model | None = None,
                     max_bond: int = 64, cutoff: float = 1e-12, tol: float = 1e-10) -> None:
    """The argument checks of :func:`gas_in_box` alone (InputError naming the argument),
    without building the state; cheap even for ``prepare="ground"``."""
    L = _check_L(L)
    for name, value in (("start", start), ("stop", stop), ("n", n)):
        integer(value, name)
    if not 0 <= start < stop <= L:
        raise InputError(f"start, stop: expected 0 <= start < stop <= {L}, got [{start}, {stop})")
    if not 0 <= n <= stop - start:
        raise InputError(f"n: expected 0 <= n <= {stop - start} (the box size), got {n}")
    one_of(prepare, "prepare", get_args(GasPreparation))
    integer(max_bond, "max_bond", 1)
    if not 0.0 <= finite_number(cutoff, "cutoff") < 1.0:
        raise InputError(f"cutoff: expected 0 <= cutoff < 1, got {cutoff!r}")
    if finite_number(tol, "tol") <= 0:
        raise InputError(f"tol: expected a positive number, got {tol!r}")
    if prepare != "ground":
        return
    if not isinstance(model, Model):
        raise InputError("model: prepare='ground' needs an mpsobs.models.Model")
    if model.L != L:
        raise InputError(f"model: has L = {model.L}, expected {L}")
    if not model.conserves_number:
        raise InputError(f"model: {model.name} with these parameters does not conserve the "
                         f"particle number; prepare='ground' needs one that does "
                         f"(xxz, or ising with g = 0)")


def gas_in_box(L: int, start: int, stop: int, n: int,
               prepare: GasPreparation = "packed", *, model: Model | None = None,
               max_bond: int = 64, cutoff: float = 1e-12, tol: float = 1e-10) -> MPS:
    """n particles (sites in |1>) confined to the box of sites [start, stop), the rest |0>.

    ``prepare``:
    - ``"packed"``: the first n sites of the box filled (product state);
    - ``"spread"``: n sites spread evenly over the box, site start + floor((k + 1/2) m / n)
      for k = 0..n-1 with m = stop - start (product state);
    - ``"ground"``: the ground state of ``model`` restricted to the box
      (:meth:`Model.restricted`: only terms lying wholly inside, open ends) in the sector
      of exactly n particles, by DMRG (``max_bond``, ``cutoff``, ``tol``; see
      :func:`_sector_ground_state`). Needs a number-conserving model on L sites.
    """
    check_gas_in_box(L, start, stop, n, prepare, model=model, max_bond=max_bond,
                     cutoff=cutoff, tol=tol)
    if prepare != "ground":
        filled = set(_box_sites(start, stop, n, prepare)) if n else set()
        return product_state([1 if i in filled else 0 for i in range(L)])
    if n in (0, stop - start) or stop - start == 1:
        return gas_in_box(L, start, stop, n, "packed")
    box = _sector_ground_state(model.restricted(start, stop), n, max_bond, cutoff, tol).state
    tensors = ([np.array([1.0, 0.0], complex).reshape(1, 2, 1)] * start + list(box.tensors)
               + [np.array([1.0, 0.0], complex).reshape(1, 2, 1)] * (L - stop))
    return right_canonical(MPS(tuple(tensors)), normalize=True)
