"""Number charges on the bonds of an MPS, and decompositions block by block.

U(1) symmetry (Phys. Rev. B 83, 115125 (2011), arXiv:1008.4774, journal reference from
memory): when every bond basis vector has a definite charge, every tensor is block-sparse
and each QR / truncated split of a matrix whose rows and columns carry charges splits
into independent blocks, one per charge. The tensors stay plain dense arrays (with exact
zeros); only the decompositions use the blocks.

The charge of a site value (:func:`local_charges`): for a spin (local dimension 2) the
number of sites in |1>, n_s; for a purification site (local dimension 4, index 2 s + a,
see :mod:`mpsobs.mps.tensors`) n_s - n_a. A gate that conserves the physical number and
is the identity on the ancillas conserves n_s - n_a, and the infinite-temperature
purification prod_i (|00> + c |11>) has n_s - n_a = 0 at every bond. The charge of a
left bond vector is the total charge of the sites to its left.
"""

from __future__ import annotations

import numpy as np

from mpsobs.mps.truncation import (
    Route,
    Side,
    decompose,
    finish,
    keep_count,
    qr,
    resolved,
    svd,
    use_gram,
)

__all__ = ["local_charges", "row_charges", "col_charges", "block_qr", "block_split",
           "definite_charges", "bond_charges", "CHARGE_TOL", "READ_CHARGE_TOL"]

#: Largest squared-norm fraction that :func:`definite_charges` may discard to give every
#: bond vector a definite charge (states beyond it take the dense path).
CHARGE_TOL = 1e-12
#: Entries of a site tensor below this, relative to its largest, may break the charge
#: rule in :func:`bond_charges` (round-off of the canonical form); larger ones make the
#: state not charge-definite in its present basis.
READ_CHARGE_TOL = 1e-10


def local_charges(local_dim: int) -> np.ndarray:
    """Charges of the site values: [n] for dimension 2, [n_s - n_a] by 2 s + a for 4."""
    if local_dim == 2:
        return np.array([0, 1])
    if local_dim == 4:
        return np.array([0, -1, 1, 0])
    raise ValueError(f"local dimension {local_dim}: charges are defined for 2 and 4")


def row_charges(left: np.ndarray, local: np.ndarray) -> np.ndarray:
    """Charges of the rows (left bond, site value) of a site matrix: up to the site."""
    return (left[:, None] + local).ravel()


def col_charges(right: np.ndarray, local: np.ndarray) -> np.ndarray:
    """Charges of the columns (site value, right bond) of a site matrix: before the site."""
    return (right[None, :] - local[:, None]).ravel()


def _charge_blocks(row_q: np.ndarray, col_q: np.ndarray):
    """Orders sorting the rows and the columns of a matrix by charge, and the
    (charge, row range, column range) in those orders of every charge on both sides."""
    ro, co = np.argsort(row_q, kind="stable"), np.argsort(col_q, kind="stable")
    rs, cs = row_q[ro], col_q[co]
    common = np.array(sorted(set(rs.tolist()).intersection(cs.tolist())), dtype=np.int64)
    bounds = np.concatenate([np.searchsorted(rs, common, "left"),
                             np.searchsorted(rs, common, "right"),
                             np.searchsorted(cs, common, "left"),
                             np.searchsorted(cs, common, "right")]).reshape(4, -1)
    return ro, co, list(zip(common.tolist(), *bounds.tolist(), strict=True))


def block_qr(m: np.ndarray, row_q: np.ndarray, col_q: np.ndarray):
    """QR of a charge-conserving matrix block by block: (q, r, charges of q's columns)."""
    ro, co, ranges = _charge_blocks(row_q, col_q)
    ms = m[ro][:, co]
    parts = [qr(ms[r0:r1, c0:c1]) for _, r0, r1, c0, c1 in ranges]
    k = sum(q.shape[1] for q, _ in parts)
    q_out = np.zeros((m.shape[0], k), dtype=complex)
    r_out = np.zeros((k, m.shape[1]), dtype=complex)
    charges = np.empty(k, dtype=np.int64)
    off = 0
    for (c, r0, r1, c0, c1), (q, r) in zip(ranges, parts, strict=True):
        n = q.shape[1]
        q_out[ro[r0:r1], off:off + n] = q
        r_out[off:off + n, co[c0:c1]] = r
        charges[off:off + n] = c
        off += n
    return q_out, r_out, charges


def block_split(m: np.ndarray, row_q: np.ndarray, col_q: np.ndarray, side: Side,
                max_bond: int, cutoff: float, route: Route = "auto"):
    """:func:`mpsobs.mps.truncation.split` of a charge-conserving matrix block by block;
    the truncation (and the choice between the Gram route and the SVD) is decided on the
    whole spectrum. Returns left, right, s, charges of the kept values, lost."""
    ro, co, ranges = _charge_blocks(row_q, col_q)
    ms = m[ro][:, co]
    blocks = [ms[r0:r1, c0:c1] for _, r0, r1, c0, c1 in ranges]
    gram = use_gram(route, cutoff)
    for attempt in (gram, False):
        parts = [decompose(b, side, attempt) for b in blocks]
        s_all = np.concatenate([s for s, _, _ in parts])
        order = np.argsort(-s_all, kind="stable")
        k, lost = keep_count(s_all[order], max_bond, cutoff)
        if not attempt or resolved(s_all[order], k):
            break
    keep = np.zeros(s_all.size, dtype=bool)
    keep[order[:k]] = True
    left = np.zeros((m.shape[0], k), dtype=complex)
    right = np.zeros((k, m.shape[1]), dtype=complex)
    charges = np.empty(k, dtype=np.int64)
    start = off = 0
    for (c, r0, r1, c0, c1), b, (s, iso, other) in zip(ranges, blocks, parts, strict=True):
        sel = keep[start:start + s.size]
        start += s.size
        n = int(np.count_nonzero(sel))
        if n:
            kept_other = None if other is None else (other[sel] if side == "left"
                                                     else other[:, sel])
            lb, rb = finish(b, side, iso[:, sel], kept_other)
            left[ro[r0:r1], off:off + n] = lb
            right[off:off + n, co[c0:c1]] = rb
            charges[off:off + n] = c
            off += n
    return left, right, s_all[keep], charges, lost


def definite_charges(tensors: list[np.ndarray],
                     tol: float = CHARGE_TOL) -> tuple[list[np.ndarray], list[np.ndarray]] | None:
    """The state in a bond basis where every vector has a definite charge, if it has one.

    ``tensors``: a normalised right-canonical MPS (any local dimension with
    :func:`local_charges`). A left-to-right sweep splits every site matrix (rows: left
    bond vectors of definite charge times site values) by the SVD of each row-charge block
    separately, so the new left vectors have definite charges; the singular values of all
    blocks together are truncated by :func:`keep_count` to the old bond dimension and
    ``tol`` / L per site. A state of definite total charge loses nothing but rounding (its reduced
    density matrices commute with the charge left of every cut, so the blocks' row spaces
    are orthogonal); otherwise more than ``tol`` of the weight would be discarded, or the
    last bond would carry several charges, and None is returned.

    Returns (tensors, charges q_0 .. q_L): the tensors left-canonical up to the last one
    (the canonical centre), normalised; the input is not modified. Cost L chi^3 d.
    """
    local = local_charges(tensors[0].shape[1])
    out = list(tensors)
    charges = [np.zeros(1, dtype=np.int64)]
    lost_total = 0.0
    for i in range(len(out) - 1):
        chl, d, chr_ = out[i].shape
        m = out[i].reshape(chl * d, chr_)
        row_q = row_charges(charges[-1], local)
        groups = [np.flatnonzero(row_q == c) for c in np.unique(row_q)]
        parts = [svd(m[rows]) for rows in groups]
        s_all = np.concatenate([s for _, s, _ in parts])
        order = np.argsort(-s_all, kind="stable")
        k, lost = keep_count(s_all[order], chr_, tol / len(out))
        lost_total += lost
        if lost_total > tol:
            return None
        keep = np.zeros(s_all.size, dtype=bool)
        keep[order[:k]] = True
        left = np.zeros((m.shape[0], k), dtype=complex)
        right = np.empty((k, chr_), dtype=complex)
        q = np.empty(k, dtype=np.int64)
        start = off = 0
        for rows, (u, s, vh) in zip(groups, parts, strict=True):
            sel = keep[start:start + s.size]
            start += s.size
            n = int(np.count_nonzero(sel))
            left[rows, off:off + n] = u[:, sel]
            right[off:off + n] = s[sel, None] * vh[sel]
            q[off:off + n] = row_q[rows[0]]
            off += n
        out[i] = left.reshape(chl, d, k)
        out[i + 1] = np.tensordot(right, out[i + 1], axes=(1, 0))
        charges.append(q)
    last = out[-1]
    row_q = row_charges(charges[-1], local)
    weight = np.sum(np.abs(last.reshape(-1, last.shape[2])) ** 2, axis=1)
    per_charge = {c: float(weight[row_q == c].sum()) for c in np.unique(row_q)}
    total = sum(per_charge.values())
    top = max(per_charge, key=per_charge.get)
    if total <= 0.0 or total - per_charge[top] > tol * total:
        return None
    last = np.where((row_q == top).reshape(last.shape[:2])[:, :, None], last, 0.0)
    out[-1] = last / np.linalg.norm(last)
    charges.append(np.array([top], dtype=np.int64))
    return out, charges


def bond_charges(mps) -> list[np.ndarray] | None:
    """Charges q_0 .. q_L of the bonds of ``mps`` in its present basis (q_i[a]: charge of
    the sites left of bond i's basis vector a, :func:`local_charges`; q_0 = [0]) if every
    bond basis vector has one, else None; the state is not changed (for a change of
    basis that gives it charges, :func:`definite_charges`). A bond basis vector without
    weight gets charge 0. Cost: one pass over the tensors."""
    charges = [np.zeros(1, dtype=np.int64)]
    for t in mps.tensors:
        mag = np.abs(t)
        big = mag > READ_CHARGE_TOL * mag.max()
        count = np.broadcast_to((charges[-1][:, None] + local_charges(t.shape[1]))[:, :, None],
                                t.shape)
        low = np.where(big, count, np.iinfo(np.int64).max).min(axis=(0, 1))
        high = np.where(big, count, np.iinfo(np.int64).min).max(axis=(0, 1))
        empty = ~big.any(axis=(0, 1))
        low[empty] = high[empty] = 0
        if np.any(low != high):
            return None
        charges.append(low)
    return charges
