"""The result of one observational-entropy evaluation."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np

from mpsobs.core.printing import number, short, with_error

__all__ = ["OutcomeDistribution", "EntropyResult", "entropy_from_distribution"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports


@dataclass(frozen=True, eq=False)
class OutcomeDistribution:
    """The exact outcome distribution of a coarse-graining.

    ``outcomes[i]`` is the i-th outcome string: one macrostate index per block (block
    coarse-grainings) or per stage (projector coarse-grainings); ``probabilities[i]`` and
    ``volumes[i]`` are p_i and V_i. Outcomes of zero volume are left out; outcomes of
    zero probability may be present.
    """

    outcomes: np.ndarray       # (n, k) int
    probabilities: np.ndarray  # (n,)
    volumes: np.ndarray        # (n,)

    def __repr__(self) -> str:
        n, k = (self.outcomes.shape + (1,))[:2] if self.outcomes.ndim else (0, 0)
        return (f"OutcomeDistribution({n} outcomes of {k} parts, total probability "
                f"{number(float(np.sum(self.probabilities)))})")


@dataclass(frozen=True, eq=False)
class EntropyResult:
    """Observational entropy S_obs = shannon + boltzmann, in nats.

    ``entropy`` is S_obs = -sum_i p_i ln(p_i / V_i); ``shannon`` = -sum p ln p;
    ``boltzmann`` = sum p ln V; ``knowledge`` = max_entropy - entropy, the
    Kullback-Leibler divergence of p from V / dim. ``stderr`` (and the ``*_err`` fields)
    are standard errors of the sampled means (0 when exact); ``pruned_mass`` is the
    probability left out by exact enumeration below its floor (0 when nothing was pruned);
    the exact values then lie within the bounds that ``pruned_mass`` implies.
    ``method`` "approximate" (the wide-region energy estimator): ``stderr`` is 0 and
    ``method_err`` the estimated error of the approximation (an estimate, not a bound;
    the parts' errors are the same estimates for the parts); the total error of a row
    combines them (:mod:`mpsobs.analysis.uncertainty`).
    ``bond_entropies`` are the von Neumann entanglement entropies of every bond of an MPS
    (length L - 1; index i cuts between sites i and i + 1), None for dense states.
    """

    entropy: float
    stderr: float
    shannon: float
    shannon_err: float
    boltzmann: float
    boltzmann_err: float
    max_entropy: float
    method: Literal["exact", "sampled", "approximate"]
    label: str
    samples: int = 0
    pruned_mass: float = 0.0
    distribution: OutcomeDistribution | None = None
    bond_entropies: np.ndarray | None = None
    algorithm: str = ""
    method_err: float = 0.0

    @property
    def knowledge(self) -> float:
        """ln dim - S_obs = D_KL(p || V / dim) (error: ``stderr``)."""
        return self.max_entropy - self.entropy

    def __repr__(self) -> str:
        if self.method == "sampled":
            how = f"sampled, {self.samples} samples"
        elif self.method == "approximate":
            how = f"approximate, method error {self.method_err:.2g}"
        else:
            how = "exact" + (f", pruned mass {self.pruned_mass:.2g}" if self.pruned_mass else "")
        label = f" [{short(self.label, 60)}]" if self.label else ""
        return (f"S_obs = {with_error(self.entropy, self.stderr)} nats ({how}; Shannon "
                f"{with_error(self.shannon, self.shannon_err)}, Boltzmann "
                f"{with_error(self.boltzmann, self.boltzmann_err)}){label}")

    @property
    def half_chain_entropy(self) -> float | None:
        """Entanglement entropy of the middle bond (None for dense states)."""
        if self.bond_entropies is None or len(self.bond_entropies) == 0:
            return None
        return float(self.bond_entropies[len(self.bond_entropies) // 2])


def entropy_from_distribution(probabilities: np.ndarray, volumes: np.ndarray, *,
                              max_entropy: float, label: str, algorithm: str,
                              outcomes: np.ndarray | None = None, pruned_mass: float = 0.0,
                              bond_entropies: np.ndarray | None = None) -> EntropyResult:
    """Exact S_obs and its parts from p_i and V_i (entries with p_i = 0 contribute 0)."""
    p = np.clip(np.asarray(probabilities, dtype=float), 0.0, None)
    v = np.asarray(volumes, dtype=float)
    live = p > 0
    shannon = float(-np.sum(p[live] * np.log(p[live])))
    boltzmann = float(np.sum(p[live] * np.log(v[live])))
    dist = None
    if outcomes is not None:
        dist = OutcomeDistribution(np.asarray(outcomes), p, v)
    return EntropyResult(entropy=shannon + boltzmann, stderr=0.0, shannon=shannon,
                         shannon_err=0.0, boltzmann=boltzmann, boltzmann_err=0.0,
                         max_entropy=max_entropy, method="exact", label=label,
                         pruned_mass=pruned_mass, distribution=dist,
                         bond_entropies=bond_entropies, algorithm=algorithm)
