"""Short printouts: every public object prints in one or two lines (under 300
characters) at L = 512, and an entropy result reads as value +- error with its parts."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import mpsobs
from mpsobs.chain import coarse, models, states
from mpsobs.core.printing import with_error
from mpsobs.estimators import blocktensors
from mpsobs.estimators.result import EntropyResult, OutcomeDistribution
from mpsobs.pipeline import build, spec, store, sweep
from mpsobs.references import gaussian, thermo

L = 512
LIMIT = 300


@pytest.fixture(scope="module")
def objects() -> dict:
    model = models.xxz(L, delta=0.5, h=1.0, field="random", seed=3)
    xx = models.xxz(L, delta=0.0, h=[0.1] * L)
    psi = mpsobs.mps.random_mps(L, 8, seed=1)
    energy = coarse.blocks(L, 4, "energy", model=model)
    number = coarse.blocks(L, 4, "number")
    snap = next(mpsobs.evolve(states.neel(L), model, [0.05], max_bond=8, cutoff=1e-10,
                              dt=0.05))
    sampled = mpsobs.observational_entropy(psi, number, method="sample", samples=20, seed=2)
    exact = mpsobs.observational_entropy(states.neel(L), energy)
    ham = gaussian.quadratic_hamiltonian(xx)
    run = spec.parse({"model": {"name": "xxz", "L": [L, L // 2], "delta": 0.5},
                      "state": {"kind": "neel"}, "times": {"t_max": 1.0, "n_times": 11},
                      "coarse": [{"observable": "number", "block": [2, 4, 8]}]})
    point = run.points[0]
    built = build.build_point(point, cheap_only=True)
    failure = sweep.Failure(point, "InputError", "x" * 2000, True)
    n = L // 2
    return {
        "model": model, "per-site model": xx, "term": model.terms[0], "mps": psi,
        "snapshot": snap, "energy coarse-graining": energy,
        "sequence": coarse.sequence(number, energy), "block": energy.blocks[0],
        "macrostate": energy.blocks[0].macrostates[0], "stage": energy.stages[0],
        "wide regions": coarse.blocks(L, regions=[(0, 200), (200, L)]),
        "projectors": coarse.projectors([np.diag([1.0, 0.0]), np.diag([0.0, 1.0])]),
        "sampled result": sampled, "exact result": exact, "distribution": exact.distribution,
        "readout block": blocktensors.readout_blocks(psi, number)[0],
        "gibbs": thermo.gibbs_at(xx, 0.5), "gge": thermo.gge(xx, states.neel(L)),
        "ground state": models.GroundState(psi, -100.0, True, 4, 1e-11, (-99.0,) * 4),
        "quadratic hamiltonian": ham,
        "number distribution": gaussian.NumberDistribution(
            ((0, n), (n, L)), np.zeros((n + 1, 2), int), np.full(n + 1, 1 / (n + 1)),
            0.0, 0.0, 1e-16, None),
        "point": point, "run spec": run, "failure": failure,
        "built point": built, "built coarse-graining": built.coarse[0],
        "report": sweep.SweepReport(6, 1, 4, (failure,), pd.DataFrame({"a": range(99)})),
        "store": store.RunStore("/tmp/somewhere"),
    }


def test_every_public_object_prints_short(objects):
    for name, obj in objects.items():
        text = repr(obj)
        assert len(text) < LIMIT, (name, len(text), text)
        assert len(text.splitlines()) <= 2, name
        assert str(obj) == text


def test_entropy_result_reads_as_value_and_error(objects):
    r = EntropyResult(entropy=27.7312, stderr=0.0612, shannon=20.1104, shannon_err=0.0493,
                      boltzmann=7.6208, boltzmann_err=0.0209, max_entropy=33.3,
                      method="sampled", label="number:b4", samples=400)
    assert repr(r) == ("S_obs = 27.73 +- 0.06 nats (sampled, 400 samples; Shannon 20.11 +- "
                       "0.05, Boltzmann 7.62 +- 0.02) [number:b4]")
    pruned = EntropyResult(3.5, 0.0, 1.5, 0.0, 2.0, 0.0, 5.0, "exact", "", pruned_mass=2.4e-9)
    assert repr(pruned) == ("S_obs = 3.5 nats (exact, pruned mass 2.4e-09; Shannon 1.5, "
                            "Boltzmann 2)")
    assert "pruned" not in repr(objects["exact result"])
    assert with_error(1.23456, 0.0149) == "1.235 +- 0.015"   # two digits for a leading 1
    dist = OutcomeDistribution(np.zeros((3, 2), int), np.array([0.5, 0.5, 0.0]), np.ones(3))
    assert repr(dist) == "OutcomeDistribution(3 outcomes of 2 parts, total probability 1)"


def test_model_and_state_printouts_name_sizes(objects):
    assert repr(objects["model"]).startswith("Model(xxz, L=512, J=1, delta=0.5, h=1, "
                                             "field=random, seed=3;")
    assert "h=[512 values]" in repr(objects["per-site model"])
    assert repr(objects["mps"]).startswith("MPS(L=512, bond dimensions 2..8,")
    assert "128 blocks of 4 sites" in repr(objects["energy coarse-graining"])
