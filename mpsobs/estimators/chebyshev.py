"""Chebyshev moments of a region Hamiltonian on an MPS segment with an open bond.

A *segment* is a list of tensors (left, d, right) of a contiguous part of a chain whose
first left bond has dimension 1 and whose last right bond is *open* (dimension chi): it
holds chi vectors |v_a> at once, a = 0 .. chi - 1 (for the left half of a state in
mixed-canonical form at a cut, the chi Schmidt vectors |L_a>). Local dimension d = 2
(spins) or 4 (a spin and its ancilla, index 2 s + a; the Hamiltonian acts on the spin).

A middle region's segment has its first left bond open too (chi_l chi_r vectors);
:func:`moment_tensor` gives the three-region moments from it.

:func:`moment_matrices` returns M_n[a, b] = <v_a| T_n(Ht) |v_b>, n = 0 .. N - 1, with
Ht = (H - centre) / half_width and T_n the Chebyshev polynomials, from the recursion
t_{n+1} = 2 Ht t_n - t_{n-1} on the segment (all chi vectors at once), each step an
MPO-MPS product and a sum compressed by SVD to at most ``max_bond`` (kernel polynomial
method: A. Weisse et al., Rev. Mod. Phys. 78, 275 (2006); Chebyshev vectors as MPS:
A. Holzner et al., Phys. Rev. B 83, 195115 (2011)). The moments of order 2k and 2k + 1 come from the
vectors of order k (T_2k = 2 T_k^2 - 1, T_2k+1 = 2 T_k T_k+1 - T_1), so N moments need
N / 2 compressed steps.

:func:`jackson` and :func:`bin_weights` turn moments into bin probabilities: the
density rho(x) = [g_0 mu_0 + 2 sum_n g_n mu_n T_n(x)] / (pi sqrt(1 - x^2)) damped by the
Jackson kernel g_n, integrated over a bin in closed form (x = cos phi:
int T_n(x) / (pi sqrt(1 - x^2)) dx = -sin(n phi) / (n pi) + const).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy.linalg import get_blas_funcs

from mpsobs.chain.models import Model, bond_hamiltonians, mpo_tensors
from mpsobs.chain.states import paired_purification
from mpsobs.core.errors import InputError
from mpsobs.mps.evolution import GateChain, Gates, layer_schedule
from mpsobs.mps.tensors import robust_svd

__all__ = ["spectrum_bounds", "scaled_mpo", "moment_matrices", "moment_tensor",
           "commuting_moments", "chebyshev_series", "jackson", "bin_weights", "edge_windows",
           "gibbs_segment", "SPECTRUM_MARGIN"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

#: Relative margin added to the spectrum bounds so that Ht stays inside (-1, 1).
SPECTRUM_MARGIN = 0.01
#: Largest imaginary-time step (in beta / 2) of :func:`gibbs_segment`.
GIBBS_STEP = 0.05
#: Discarded weight allowed per two-site split of :func:`gibbs_segment`.
GIBBS_CUTOFF = 1e-13
#: Relative squared singular value below which the compression drops a state.
COMPRESSION_CUTOFF = 1e-14


def spectrum_bounds(model: Model) -> tuple[float, float]:
    """(centre, half_width) with the spectrum of H inside centre +- half_width / (1 +
    SPECTRUM_MARGIN): the sums of the extreme eigenvalues of the bond Hamiltonians
    (H = sum_b h_b, so E_min >= sum_b min eig h_b; Weyl's inequality, a handbook fact).
    A one-site model uses its site term. Cost L (4 x 4 eigenvalues)."""
    if model.L == 1:
        ops = [sum((t.matrix for t in model.terms), np.zeros((2, 2)))]
    else:
        ops = bond_hamiltonians(model)
    lo = hi = 0.0
    for h in ops:
        w = np.linalg.eigvalsh(h)
        lo, hi = lo + w[0], hi + w[-1]
    centre, half = (hi + lo) / 2, (hi - lo) / 2
    return float(centre), float(max(half, 1e-12) * (1 + SPECTRUM_MARGIN))


def scaled_mpo(model: Model, centre: float, half_width: float, d: int) -> list[np.ndarray]:
    """MPO arrays (w_left, w_right, d, d) of Ht = (H - centre) / half_width, acting on the
    spin of each site (identity on an ancilla when d = 4)."""
    tensors = [np.array(w, dtype=complex) for w in mpo_tensors(model)]
    first = tensors[0]
    first[0, -1] = first[0, -1] - centre * np.eye(2)
    tensors[0] = first / half_width
    if d == 4:
        tensors = [_with_ancilla(w) for w in tensors]
    elif d != 2:
        raise InputError(f"state: local dimension {d}; expected 2 (spins) or 4 (spin and "
                         f"ancilla)")
    return tensors


def _with_ancilla(w: np.ndarray) -> np.ndarray:
    """W (wl, wr, 2, 2) -> W x 1 (wl, wr, 4, 4) in the index 2 s + a."""
    wl, wr = w.shape[:2]
    return np.einsum("lrst,ab->lrsatb", w, np.eye(2)).reshape(wl, wr, 4, 4)


def _apply(mpo: Sequence[np.ndarray], seg: Sequence[np.ndarray]) -> list[np.ndarray]:
    """The MPO times the segment, bonds fused (left x w_left, d, right x w_right)."""
    out = []
    for w, t in zip(mpo, seg, strict=True):
        x = np.einsum("lrst,atb->alsbr", w, t)
        a, wl, d, b, wr = x.shape
        out.append(x.reshape(a * wl, d, b * wr))
    return out


def _combine(x: Sequence[np.ndarray], y: Sequence[np.ndarray], cx: float,
             cy: float) -> list[np.ndarray]:
    """cx |x> + cy |y> for segments sharing the open right bond and the first left bond
    (1, or open as in :func:`moment_tensor`); the inner bonds are direct sums."""
    n = len(x)
    if n == 1:
        return [cx * x[0] + cy * y[0]]
    out = []
    for i, (a, b) in enumerate(zip(x, y, strict=True)):
        if i == 0:
            out.append(np.concatenate([cx * a, cy * b], axis=2))
        elif i == n - 1:
            out.append(np.concatenate([a, b], axis=0))
        else:
            t = np.zeros((a.shape[0] + b.shape[0], a.shape[1], a.shape[2] + b.shape[2]),
                         dtype=complex)
            t[:a.shape[0], :, :a.shape[2]] = a
            t[a.shape[0]:, :, a.shape[2]:] = b
            out.append(t)
    return out


def _triangular_times(r: np.ndarray, m: np.ndarray) -> np.ndarray:
    """r @ m for an upper-triangular factor r of a QR decomposition: by BLAS trmm (half
    the flops of a product) when r is square, else a plain product."""
    m = np.ascontiguousarray(m)
    if r.shape[0] != r.shape[1]:
        return r @ m
    trmm = get_blas_funcs("trmm", (r, m))
    return trmm(1.0, r.T, m.T, side=1, lower=1).T   # (m^T r^T)^T, C-ordered


def _compress(seg: Sequence[np.ndarray], max_bond: int) -> list[np.ndarray]:
    """The same vectors with inner bonds at most ``max_bond`` (singular values below
    COMPRESSION_CUTOFF relative weight dropped too), right-canonical with the norm on the
    first tensor.

    The SVD truncation in mixed-canonical form without forming the left-canonical
    tensors: a sweep to the right keeps only the triangular factors R_i of the QR
    decompositions of the left blocks (R_i from R_(i-1) A_i; the blocks are Q_i R_i with
    Q_i orthonormal), and the sweep to the left takes at site i the SVD of R_(i-1) A_i C_i,
    whose singular values and right vectors are those of the whole left block times the
    already truncated right part (C_i maps the original bond at i to the kept one). Cost
    per site (chi the summed bond (w + 1) D) a QR of (d chi, chi) without its Q and a
    triangular product, about 12 d chi^3 real flops (a QR with its Q and a full product,
    as a left-canonical sweep needs, take twice that), then an SVD of (chi, d D)."""
    tensors = list(seg)
    n = len(tensors)
    if n == 1:
        return tensors
    factors = [np.linalg.qr(tensors[0].reshape(-1, tensors[0].shape[2]), mode="r")]
    for t in tensors[1:-1]:
        block = _triangular_times(factors[-1], t.reshape(t.shape[0], -1))
        factors.append(np.linalg.qr(block.reshape(-1, t.shape[2]), mode="r"))
    carried = tensors[-1]
    for i in range(n - 1, 0, -1):
        dl, d, dr = carried.shape
        _, s, vh = robust_svd(np.tensordot(factors[i - 1], carried, axes=(1, 0))
                              .reshape(-1, d * dr))
        weight = s**2
        keep = max(1, min(max_bond, int(np.sum(weight > COMPRESSION_CUTOFF * weight.sum()))))
        tensors[i] = vh[:keep].reshape(keep, d, dr)
        projector = vh[:keep].conj().T.reshape(d, dr, keep)
        carried = np.tensordot(tensors[i - 1], np.tensordot(carried, projector,
                                                            axes=([1, 2], [0, 1])),
                               axes=(2, 0))
    tensors[0] = carried
    return tensors


def _gram(x: Sequence[np.ndarray], y: Sequence[np.ndarray]) -> np.ndarray:
    """G[a, b] = <x_a | y_b> over the open right bond. Cost n d chi^3."""
    env = np.ones((1, 1), dtype=complex)
    for a, b in zip(x, y, strict=True):
        env = np.tensordot(np.tensordot(env, a.conj(), axes=(0, 0)), b, axes=([0, 1], [0, 1]))
    return env


def moment_matrices(seg: Sequence[np.ndarray], mpo: Sequence[np.ndarray], n_moments: int,
                    max_bond: int) -> np.ndarray:
    """M_n[a, b] = <v_a| T_n(Ht) |v_b>, n = 0 .. n_moments - 1 (module docstring).

    ``seg`` is the segment (first left bond 1, open right bond chi), ``mpo`` the scaled
    MPO of :func:`scaled_mpo`, ``max_bond`` the compression bond of the Chebyshev vectors.
    Returns a complex array (n_moments, chi, chi). Cost n_moments / 2 compressions,
    each about 3 n d ((w + 1) max_bond)^3 for n sites and MPO bond w.
    """
    return _chebyshev_overlaps(seg, mpo, n_moments, max_bond, _gram)


def moment_tensor(seg: Sequence[np.ndarray], mpo: Sequence[np.ndarray], n_moments: int,
                  max_bond: int, left: np.ndarray, right: np.ndarray) -> np.ndarray:
    """mu[j, n, m] = sum_{a a' b b'} left[j, a, a'] <v_ab| T_n(Ht) |v_a'b'> right[m, b, b']
    (real part), n = 0 .. n_moments - 1, for a segment with two open bonds.

    ``seg`` holds chi_l chi_r vectors |v_ab> at once: its first left bond (chi_l, index a)
    and its last right bond (chi_r, index b) are open; for the middle region C of a state
    in mixed-canonical form at both ends of C, psi = sum_ab |L_a> |v_ab> |R_b>, and with
    ``left`` = M^A_j[a, a'] and ``right`` = M^B_m[b, b'] of the outer regions (from
    :func:`moment_matrices`) this is the three-region moment <psi| T_j(Ht_A) T_n(Ht_C)
    T_m(Ht_B) |psi>. The Chebyshev vectors are compressed as in :func:`moment_matrices`
    (the open left bond is kept whole, as the open right bond), and the chi_l^2 chi_r^2
    matrix elements are never stored: every overlap is swept with the J matrices of
    ``left`` as a stack of environments and closed with ``right``.
    Returns (J, n_moments, M). Cost the n_moments / 2 compressions of
    :func:`moment_matrices`, plus per overlap (n_moments of them) about
    2 J n d max_bond^3 (the stacked sweep, J = len(left)) and J M chi_r^2 (the closing).
    """
    left, right = np.asarray(left), np.asarray(right)
    shapes = (seg[0].shape[0], seg[-1].shape[2])
    if left.ndim != 3 or left.shape[1:] != (shapes[0],) * 2 or right.ndim != 3 or \
            right.shape[1:] != (shapes[1],) * 2:
        raise InputError(f"moments: the outer regions' matrices have shapes {left.shape} and "
                         f"{right.shape}; the segment's open bonds are {shapes}")
    out = _chebyshev_overlaps(seg, mpo, n_moments, max_bond,
                              lambda x, y: _sandwich(x, y, left, right))
    return out.real.transpose(1, 0, 2)


def commuting_moments(seg: Sequence[np.ndarray], mpo: Sequence[np.ndarray], n_moments: int,
                      max_bond: int, overlap) -> np.ndarray:
    """out[n] = overlap(|v>, T_n(Ht) |v>), n = 0 .. n_moments - 1, for ``overlap(x, y)`` =
    <x| X |y> of an operator X that commutes with Ht (antilinear in x, linear in y; e.g.
    exp(i theta N) for a number-conserving H, stacked over theta), so that the moments
    2k and 2k + 1 come from the vectors of order k as in :func:`moment_matrices`, whose
    recursion and compressions this is. Cost those of :func:`moment_matrices` plus
    n_moments calls of ``overlap``."""
    return _chebyshev_overlaps(seg, mpo, n_moments, max_bond, overlap)


def _sandwich(x: Sequence[np.ndarray], y: Sequence[np.ndarray], left: np.ndarray,
              right: np.ndarray) -> np.ndarray:
    """O[j, m] = sum left[j, a, a'] <x_ab | y_a'b'> right[m, b, b'] over segments with
    open left and right bonds: the sweep of :func:`_gram` on a stack of J environments
    starting at ``left``. Cost J n d chi^3 (twice) + J M chi_r^2."""
    env = left.astype(complex)
    for a, b in zip(x, y, strict=True):
        env = np.tensordot(np.tensordot(env, a.conj(), axes=(1, 0)), b,
                           axes=([1, 2], [0, 1]))
    return env.reshape(len(env), -1) @ right.reshape(len(right), -1).T


def _chebyshev_overlaps(seg: Sequence[np.ndarray], mpo: Sequence[np.ndarray], n_moments: int,
                        max_bond: int, overlap) -> np.ndarray:
    """out[n] = overlap(|v>, T_n(Ht) |v>) for the segment's vectors v, n = 0 .. N - 1, as
    one array (:func:`chebyshev_series`)."""
    return np.array(list(chebyshev_series(seg, mpo, n_moments, max_bond, overlap)))


def chebyshev_series(seg: Sequence[np.ndarray], mpo: Sequence[np.ndarray], n_moments: int,
                     max_bond: int, overlap):
    """Yields overlap(|v>, T_n(Ht) |v>) for the segment's vectors v, n = 0 .. N - 1 in
    order, ``overlap`` linear in its second argument and antilinear in its first (module
    docstring: moments 2k and 2k + 1 from the vectors of order k), so that a caller can
    reduce the moments as they come instead of holding all N. Cost N / 2 compressions
    (:func:`_compress`) and N calls of ``overlap``."""
    if n_moments < 2:
        raise InputError(f"moments: expected at least 2, got {n_moments}")
    prev = list(seg)
    cur = _compress(_apply(mpo, prev), max_bond)
    m0, m1 = overlap(prev, prev), overlap(prev, cur)
    yield m0
    yield m1
    k = 1
    while 2 * k < n_moments:
        yield 2 * overlap(cur, cur) - m0
        if 2 * k + 1 >= n_moments:
            break
        nxt = _compress(_combine(_apply(mpo, cur), prev, 2.0, -1.0), max_bond)
        yield 2 * overlap(cur, nxt) - m1
        prev, cur, k = cur, nxt, k + 1


def jackson(n_moments: int) -> np.ndarray:
    """Jackson kernel g_n, n = 0 .. N - 1 (Rev. Mod. Phys. 78, 275 (2006), eq. (71)):
    a positive kernel of resolution about pi / N in x."""
    n = np.arange(n_moments)
    q = np.pi / (n_moments + 1)
    return ((n_moments - n + 1) * np.cos(q * n) + np.sin(q * n) / np.tan(q)) / (n_moments + 1)


def bin_weights(edges: np.ndarray, centre: float, half_width: float,
                n_moments: int) -> np.ndarray:
    """C[b, n] such that the probability of bin b = sum_n C[b, n] mu_n, for bins with
    the given energy edges (len = bins + 1) and N = ``n_moments`` Jackson-damped moments
    of Ht = (H - centre) / half_width. Closed form per bin (module docstring)."""
    x = np.clip((np.asarray(edges, dtype=float) - centre) / half_width, -1.0, 1.0)
    phi = np.arccos(x)  # decreasing in x
    n = np.arange(1, n_moments)
    sines = np.sin(np.outer(phi, n))  # (edges, N - 1)
    out = np.empty((len(edges) - 1, n_moments))
    out[:, 0] = (phi[:-1] - phi[1:]) / np.pi
    out[:, 1:] = 2 * (sines[:-1] - sines[1:]) / (n * np.pi)
    return out * jackson(n_moments)


def edge_windows(edges: np.ndarray, centre: float, half_width: float,
                 n_moments: int) -> np.ndarray:
    """W[e, n] such that sum_n W[e, n] mu_n is the weight near energy edge e that the
    kernel does not resolve at N = ``n_moments`` moments: the mass of the window
    e +- delta (delta = pi a / N, the kernel resolution, a = ``half_width``) at N moments
    minus the same window at N / 2, divided by that difference for a single level at e.

    A level at e counts fully, a density smooth on the scale delta counts to second order
    in delta (zero for a linear density), levels farther than about 2 delta barely. Used
    for the edge part of the wide-region error estimate
    (:mod:`mpsobs.estimators.wide_energy`). Rows of edges outside the spectrum are zero.
    Cost O(E N)."""
    edges = np.asarray(edges, dtype=float)
    delta = np.pi * half_width / n_moments
    half = n_moments // 2
    out = np.zeros((len(edges), n_moments))
    for i, e in enumerate(edges):
        window = [e - delta, e + delta]
        diff = bin_weights(window, centre, half_width, n_moments)[0]
        diff[:half] -= bin_weights(window, centre, half_width, half)[0]
        phi = np.arccos(np.clip((e - centre) / half_width, -1.0, 1.0))
        level = diff @ np.cos(phi * np.arange(n_moments))   # the same for a level at e
        if level > 1e-6:
            out[i] = diff / level
    return out


def gibbs_segment(model: Model, beta: float, max_bond: int,
                  step: float = GIBBS_STEP) -> tuple[list[np.ndarray], float]:
    """The Gibbs state of a region (``model``, at least two sites) as a normalised
    purification segment (local dimension 4, index 2 s + a, centre on the first site) and
    ln Z = ln Tr exp(-beta H).

    exp(-beta H / 2) is applied to the infinite-temperature state |I> = prod (|00> +
    |11>) / sqrt(2) by the evolution kernel of :mod:`mpsobs.mps.evolution` in imaginary
    time (fourth-order Forest-Ruth layers of two-site gates, steps of at most ``step`` in
    beta / 2, bond at most ``max_bond``, discarded weight GIBBS_CUTOFF per split;
    purification: F. Verstraete, J. J. Garcia-Ripoll and J. I. Cirac, Phys. Rev. Lett. 93,
    207204 (2004)). Then Tr_ancilla |psi><psi| = exp(-beta H) / Z and Z = 2^n <psi|psi>
    before normalisation, from the norms the kernel keeps. The splitting error of ln Z is
    O(step^4) per unit of beta and site. Cost about 6 (|beta| / 2 / step) layers of
    n / 2 splits of (4 chi, 4 chi) matrices.
    """
    n = model.L
    if n < 2:
        raise InputError(f"model: a Gibbs segment needs at least two sites, got {n}")
    start, log_z = paired_purification(n)
    chain = GateChain(start, None, normalize=True)
    if beta != 0:
        gates = Gates([np.sign(beta) * h for h in bond_hamiltonians(model)], "imaginary", 4,
                      conserve_charge=False)
        m = max(1, int(np.ceil(abs(beta) / 2 / step)))
        for parity, tau in layer_schedule(4, [abs(beta) / 2 / m] * m):
            chain.apply_layer(parity, gates.layer(parity, tau), max_bond, GIBBS_CUTOFF)
    chain.move_to(0)
    return chain.tensors, float(log_z + chain.log_norm2)
