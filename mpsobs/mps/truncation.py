"""The one truncation rule of the package, and truncated two-site splits.

Meaning of ``cutoff`` (everywhere in mpsobs: TEBD, the Gibbs purification, DMRG): at a
truncation with singular values s_1 >= s_2 >= ..., keep at most ``max_bond`` of them and
drop the smallest ones as long as their squared sum stays within ``cutoff`` times the
total sum_j s_j^2 (the discarded weight relative to the norm; quimb's cutoff_mode
"rsum2"). ``cutoff = 0`` drops only exact zeros. The discarded fraction is reported.

A split ``theta = left @ right`` of a two-site matrix is done either by the SVD or, where
it is faster and resolves the cutoff, through the eigen-decomposition of the Gram matrix
theta theta^dagger (or theta^dagger theta): its eigenvectors are the left (right) singular
vectors, exactly orthonormal, and the other factor is the projection U^dagger theta
(theta V), so no division by small singular values occurs. The eigenvalues s^2 carry an
absolute error of about machine epsilon times s_1^2, so relative weights s_k^2 / s_1^2
below ``GRAM_FLOOR`` are rounding noise: the route is tried only for cutoff >= GRAM_FLOOR,
and when the rule would keep a smaller value the split is redone by the SVD (a fact of
the trade: forming the Gram matrix squares the condition number; e.g. Golub and Van
Loan, Matrix Computations, 4th ed., sec. 8.6, from memory).
The Gram matrix is diagonalised in the three steps of LAPACK's zheevd, called one by one
(:class:`GramVectors`): reduction to a real tridiagonal matrix (zhetrd), its eigen-
decomposition (dstevd, divide and conquer, real), and the back-transformation of the
eigenvectors by the Householder reflectors (zunmqr), done only for the k vectors the rule
keeps, after the rule has seen all eigenvalues. Same values and vectors as zheevd to
round-off.
Cost for an (m, n) matrix, m <= n: Gram route m^2 n / 2 (zherk) + ~16/3 m^3 (tridiagonal
reduction) + ~8 m^2 k (back-transformation) + k m n (projection); SVD ~ 20 m^2 n.
Measured on one core (2026-12-03, loaded machine), a split of a (256, 256) matrix
keeping 128 values: Gram route 14.0 ms, with one zheevd call instead of the steps
21.6 ms, SVD (gesdd) 27.6 ms.
"""

from __future__ import annotations

import functools
import logging
from typing import Literal

import numpy as np
from scipy.linalg import blas, lapack

from mpsobs.mps.tensors import robust_svd

__all__ = ["keep_count", "svd", "gram_svd", "qr", "split", "decompose", "resolved", "finish",
           "use_gram", "GramVectors", "Side", "Route", "GRAM_FLOOR", "STAGED_MIN"]

logger = logging.getLogger(__name__)

Side = Literal["left", "right"]
Route = Literal["auto", "svd"]
#: Smallest relative weight s_k^2 / s_1^2 the Gram route keeps; a split whose rule would
#: keep a smaller one is done by the SVD (about 100 machine epsilons times the size).
GRAM_FLOOR = 1e-12
#: The Gram route reduces a matrix by a QR first when the dimension of the other side is
#: below this fraction of the side's (eigh ~ 10 n^3 against QR ~ 8 n m^2 + eigh of m).
QR_REDUCTION = 0.75
#: Gram matrices of at least this size are diagonalised step by step (:class:`GramVectors`);
#: smaller ones by numpy's eigh (the staged calls cost more than they save there).
STAGED_MIN = 16
_GESDD, _GESDD_LWORK = lapack.zgesdd, lapack.zgesdd_lwork
_GEQRF, _UNGQR = lapack.zgeqrf, lapack.zungqr
_HERK = blas.zherk


def keep_count(s: np.ndarray, max_bond: int, cutoff: float) -> tuple[int, float]:
    """How many of the descending values ``s`` the rule keeps (at least one), and the
    discarded fraction of sum s^2 (see the module docstring for the rule).

    The discarded sums are accumulated from the smallest value up, so cutoffs far below
    machine epsilon (e.g. 1e-20) are applied as given and not rounded away."""
    w = s * s
    tail = np.cumsum(w[::-1])          # tail[j]: sum of the j + 1 smallest weights
    total = float(tail[-1]) if tail.size else 0.0
    if total <= 0.0:
        return 1, 0.0
    droppable = int(np.count_nonzero(tail <= cutoff * total))
    k = min(max(s.size - droppable, 1), max_bond)
    dropped = s.size - k
    return k, float(tail[dropped - 1]) / total if dropped else 0.0


def svd(m: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Thin SVD: LAPACK gesdd called directly (on m^T, which is Fortran-ordered, so
    nothing is copied and the factors come out C-ordered); if it does not converge,
    :func:`mpsobs.mps.tensors.robust_svd` (gesdd, then gesvd); if that fails too,
    :func:`gram_svd`."""
    lwork, _ = _GESDD_LWORK(m.shape[1], m.shape[0], compute_uv=1, full_matrices=0)
    ut, s, vht, info = _GESDD(m.T, compute_uv=1, full_matrices=0, lwork=int(lwork.real))
    if info == 0:   # m^T = ut s vht  =>  m = vht^T s ut^T
        return vht.T, s, ut.T
    logger.debug("gesdd failed (info %d) on a %s matrix; falling back", info, m.shape)
    try:
        return robust_svd(m)
    except np.linalg.LinAlgError:
        logger.warning("gesdd and gesvd failed on a %s matrix; using the Gram matrix", m.shape)
        return gram_svd(m)


def gram_svd(m: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Thin SVD through eigh of the smaller Gram matrix (m^dagger m or m m^dagger).

    Singular values below about sqrt(machine epsilon) * s_max lose accuracy; they are
    dropped together with their vectors (last resort when LAPACK's SVDs fail)."""
    wide = m.shape[0] < m.shape[1]
    a = m.conj().T if wide else m                     # tall: a = u s vh
    w, v = np.linalg.eigh(a.conj().T @ a)             # a^dagger a = v s^2 v^dagger
    w, v = w[::-1], v[:, ::-1]
    keep = w > max(w[0], 0.0) * 1e-15 if w.size and w[0] > 0 else np.zeros(w.size, bool)
    keep[:1] = True
    s = np.sqrt(np.clip(w[keep], 0.0, None))
    v = v[:, keep]
    u = (a @ v) / np.where(s > 0, s, 1.0)
    if wide:   # m = a^dagger = v s u^dagger
        return v, s, u.conj().T
    return u, s, v.conj().T


def qr(m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Economic QR by LAPACK geqrf + ungqr called directly."""
    packed, tau, _, _ = _GEQRF(m)
    k = min(m.shape)
    q, _, _ = _UNGQR(packed[:, :k], tau)
    return q, packed[:k] * _upper_mask(k, m.shape[1])


@functools.lru_cache(maxsize=4096)
def _upper_mask(k: int, n: int) -> np.ndarray:
    return np.triu(np.ones((k, n), dtype=bool))


@functools.lru_cache(maxsize=256)
def _hetrd_lwork(n: int) -> int:
    return int(lapack.zhetrd_lwork(n, lower=1)[0].real)


class GramVectors:
    """Eigenvalues (descending) of a Hermitian matrix and, on demand, selected columns
    of its eigenvectors, in the same order.

    ``g`` (n, n): only its lower triangle is read. It is reduced to a real tridiagonal
    matrix T = Q^dagger g Q by zhetrd (Q a product of Householder reflectors, stored);
    T = Z diag(w) Z^T by dstevd; the selected eigenvectors of g are Q Z[:, sel], Q
    applied by zunmqr to the selected columns only. ``values``: the eigenvalues w,
    descending. ``prefix`` (an isometry q) is multiplied on the left of the selected
    columns (the QR reduction of :func:`decompose`). Indexing as an array:
    ``vectors[:, sel]`` with a slice, integer or boolean selection of columns (the only
    form supported). Reference: the reduction, tridiagonal solve and back-transformation
    of LAPACK's zheevd (Anderson et al., LAPACK Users' Guide, 3rd ed., SIAM 1999; from
    memory). Cost ~16/3 n^3 (zhetrd) + O(n^3) real (dstevd) + ~8 n^2 k (zunmqr, k
    columns) real flops.
    """

    def __init__(self, g: np.ndarray, prefix: np.ndarray | None = None):
        n = g.shape[0]
        packed, d, e, tau, info = lapack.zhetrd(g, lower=1, lwork=_hetrd_lwork(n))
        if info != 0:
            raise np.linalg.LinAlgError(f"zhetrd failed (info {info})")
        w, z, info = lapack.dstevd(d, e, compute_v=1)
        if info != 0:
            raise np.linalg.LinAlgError(f"dstevd failed (info {info})")
        self.values = w[::-1]
        self._z = z[:, ::-1]
        self._packed, self._tau, self._prefix = packed, tau, prefix

    def __getitem__(self, index) -> np.ndarray:
        rows, cols = index
        if rows != slice(None):
            raise IndexError("GramVectors: only [:, columns] is supported")
        c = np.array(self._z[:, cols], dtype=complex, order="F", ndmin=2)
        if c.shape[1] and c.shape[0] > 1:
            k = c.shape[1]
            c[1:], _, info = lapack.zunmqr("L", "N", self._packed[1:, :-1], self._tau, c[1:],
                                           lwork=64 * k + 4160, overwrite_c=1)
            if info != 0:
                raise np.linalg.LinAlgError(f"zunmqr failed (info {info})")
        return c if self._prefix is None else self._prefix @ c


def _gram_lower(m: np.ndarray, side: Side) -> np.ndarray:
    """The lower triangle of m m^dagger ("left") or m^dagger m ("right"), Fortran-ordered,
    by BLAS zherk (half the flops of a full product) on m^T, which is m's memory read
    in Fortran order: m^T (m^T)^dagger = conj(m^dagger m) and (m^T)^dagger m^T =
    conj(m m^dagger). The upper triangle is not set."""
    return _HERK(1.0, m.T, trans=2 if side == "left" else 0, lower=1).conj()


def decompose(m: np.ndarray, side: Side, gram: bool):
    """All singular values (descending) of m, the singular vectors of ``side`` (as columns:
    u for "left", vh^dagger for "right") and, for the SVD, the other factor (s vh or u s;
    None for the Gram route, where it is the projection :func:`finish` takes).

    The Gram route takes the Gram matrix of ``side``; when that is much the larger one
    (the other dimension below QR_REDUCTION times it), m is first reduced by a QR (m =
    q r, or m^dagger = q r for "right"), whose isometry q carries the vectors back
    exactly. Without the reduction the Gram matrix has rank below its size; its zero
    eigenvalues are dropped by the rule or send the split to the SVD."""
    if gram:
        rows, cols = m.shape
        prefix = None
        if side == "left" and cols < QR_REDUCTION * rows:
            prefix, m = qr(m)
        elif side == "right" and rows < QR_REDUCTION * cols:
            prefix, r = qr(m.conj().T)
            m = r.conj().T
        if (m.shape[0] if side == "left" else m.shape[1]) >= STAGED_MIN:
            vectors = GramVectors(_gram_lower(m, side), prefix)
            return np.sqrt(np.clip(vectors.values, 0.0, None)), vectors, None
        w, v = np.linalg.eigh(m @ m.conj().T if side == "left" else m.conj().T @ m)
        v = v[:, ::-1] if prefix is None else prefix @ v[:, ::-1]
        return np.sqrt(np.clip(w[::-1], 0.0, None)), v, None
    u, s, vh = svd(m)
    if side == "left":
        return s, u, s[:, None] * vh
    return s, vh.conj().T, u * s


def resolved(s: np.ndarray, k: int) -> bool:
    """Whether the Gram route resolves the k-th largest of the values s (GRAM_FLOOR)."""
    return bool(s[0] == 0.0 or s[k - 1] ** 2 >= GRAM_FLOOR * s[0] ** 2)


def finish(m: np.ndarray, side: Side, iso: np.ndarray,
           other: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """(left, right) of the split from the kept singular vectors ``iso`` of ``side`` and,
    when known, the kept rows (columns) of the other factor."""
    if side == "left":
        return iso, (iso.conj().T @ m if other is None else other)
    return (m @ iso if other is None else other), iso.conj().T


def use_gram(route: Route, cutoff: float) -> bool:
    """Whether the Gram route is tried: with route "auto" and a cutoff of at least
    GRAM_FLOOR (a smaller one asks for values the route does not resolve)."""
    return route == "auto" and cutoff >= GRAM_FLOOR


def split(m: np.ndarray, side: Side, max_bond: int, cutoff: float,
          route: Route = "auto") -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """Truncated split m ~ left @ right with the isometry on ``side``.

    Returns (left, right, s, lost): for side "left", left has orthonormal columns (the
    kept left singular vectors) and right = left^dagger m; for "right", right has
    orthonormal rows and left = m right^dagger. s are the kept singular values and lost
    the discarded fraction of the weight (:func:`keep_count`). ``route`` "auto" tries the
    Gram route (module docstring) and falls back to the SVD below GRAM_FLOOR; "svd" always
    takes the SVD.
    """
    gram = use_gram(route, cutoff)
    s, iso, other = decompose(m, side, gram)
    k, lost = keep_count(s, max_bond, cutoff)
    if gram and not resolved(s, k):
        s, iso, other = decompose(m, side, False)
        k, lost = keep_count(s, max_bond, cutoff)
    left, right = finish(m, side, iso[:, :k], None if other is None else
                         (other[:k] if side == "left" else other[:, :k]))
    return left, right, s[:k], lost
