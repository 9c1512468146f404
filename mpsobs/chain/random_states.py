"""Seeded random dense states, for checks and examples on small chains."""

from __future__ import annotations

import numpy as np

__all__ = ["random_vector", "random_density_matrix", "random_hermitian"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports


def random_vector(L: int, seed=None) -> np.ndarray:
    """Haar-random normalised state vector of L spins (complex Gaussian, normalised)."""
    rng = np.random.default_rng(seed)
    v = rng.normal(size=2**L) + 1j * rng.normal(size=2**L)
    return v / np.linalg.norm(v)


def random_density_matrix(L: int, rank: int | None = None, seed=None) -> np.ndarray:
    """Random density matrix of L spins with the given rank (default full): G G^dagger
    normalised, G a complex Gaussian (2**L, rank) matrix."""
    rng = np.random.default_rng(seed)
    d = 2**L
    r = d if rank is None else rank
    g = rng.normal(size=(d, r)) + 1j * rng.normal(size=(d, r))
    rho = g @ g.conj().T
    return rho / np.trace(rho).real


def random_hermitian(dim: int, seed=None) -> np.ndarray:
    """Random Hermitian (GUE-like) matrix of the given dimension."""
    rng = np.random.default_rng(seed)
    a = rng.normal(size=(dim, dim)) + 1j * rng.normal(size=(dim, dim))
    return (a + a.conj().T) / 2
