"""The cost model of `mpsobs check` (mpsobs.pipeline.cost).

The TEBD count is checked against the kernel calls of a real evolution, counted by
wrapping the SVD and QR of mpsobs.chain.evolution (the flop counts per call are the
handbook formulas of Golub and Van Loan, Matrix Computations, 4th ed., Secs. 5.2 and
8.6, from memory). The accuracy of the time estimate against measured points is a
benchmark (scripts/bench_cost.py), not a test.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from mpsobs import cli
from mpsobs.chain import coarse, models
from mpsobs.chain import evolution as tebd
from mpsobs.estimators.blocktensors import readout_blocks
from mpsobs.estimators.estimate import conditional_sample_flops
from mpsobs.mps import evolution as kernel
from mpsobs.mps.tensors import random_mps
from mpsobs.pipeline import cost, spec

SHIPPED = Path(__file__).resolve().parents[1] / "runs"


@pytest.mark.parametrize(("L", "cap", "order", "cutoff"),
                         [(8, 6, 2, 0.0), (9, 5, 4, 0.0), (10, 16, 4, 0.0), (10, 16, 4, 1e-10)])
def test_tebd_work_matches_the_counted_kernel_calls(monkeypatch, L, cap, order, cutoff):
    # the kernel's two-site splits (SVDs at cutoff 0, the Gram route at 1e-10) and its
    # centre-moving QRs
    calls: dict[str, list] = {"split": [], "qr": []}
    split, qr = kernel.split, kernel.qr

    def counted_split(m, *args):
        result = split(m, *args)
        calls["split"].append((*m.shape, result[2].size))
        return result

    monkeypatch.setattr(kernel, "split", counted_split)
    monkeypatch.setattr(kernel, "qr", lambda m: calls["qr"].append(m.shape) or qr(m))
    # a random state at the bond cap keeps it (full rank): the model's bonds
    state = random_mps(L, cap, seed=1)
    model = models.ising(L, g=1.0, h=0.3)
    list(tebd.evolve(state, model, [0.2, 0.4], max_bond=cap, cutoff=cutoff, dt=0.1,
                     order=order))
    predicted = 2 * cost.tebd_work(L, cap, 2, order, 1, cutoff=cutoff)  # two stretches
    readout_calls = 2 * 3 * (L - 1)
    assert len(calls["split"]) == (predicted.calls - readout_calls) / 4  # one per gate
    # every split is of a (2 chi_l, 2 chi_r) matrix keeping chi_m, at the caps
    chi = cost.bond_caps(L, cap)
    shapes = {(2 * int(chi[b]), 2 * int(chi[b + 2]), int(chi[b + 1])) for b in range(L - 1)}
    assert set(calls["split"]) <= shapes
    counted = (sum(cost.split_flops(m, n, k, cutoff) for m, n, k in calls["split"])
               + sum(cost.qr_flops(*s) for s in calls["qr"]))
    # the model leaves out the centre moves between layers (a few QRs per layer)
    assert predicted.lapack == pytest.approx(counted, rel=0.05)
    if cutoff == 0.0:   # below GRAM_FLOOR the splits are SVDs
        assert cost.split_flops(32, 32, 16, cutoff) == cost.svd_flops(32, 32)


def test_layers_merge_inside_a_stretch():
    assert cost._layers(2, 4) == (5, 4)      # E O E E O E ... -> 5 even, 4 odd
    assert cost._layers(4, 2) == (7, 6)      # Forest-Ruth: three Strang steps per step
    assert cost._layers(2, 0) == (0, 0)


def test_bond_caps_and_growth():
    assert cost.bond_caps(6, 3).tolist() == [1, 2, 3, 3, 3, 2, 1]
    assert cost.bond_caps(4, 100, local_dim=4).tolist() == [1, 4, 16, 4, 1]
    assert cost.grown_bond(0.0, 64) == 1
    assert cost.grown_bond(2 * cost.DOUBLING_TIME, 64) == 4
    assert cost.grown_bond(100.0, 64) == 64


def test_estimator_stand_ins_have_the_shapes_of_the_real_blocks():
    # the sampling count is the estimator's own (conditional_sample_flops), applied to
    # stand-in blocks that must have the real blocks' shapes and outcome offsets
    L, cap = 10, 8
    model = models.xxz(L, delta=0.5)
    state = random_mps(L, cap, seed=2)
    for cg in (coarse.blocks(L, 2), coarse.blocks(L, 3, "energy", model=model),
               coarse.sequence(coarse.blocks(L, 2, "energy", model=model),
                               coarse.blocks(L, 2))):
        real = readout_blocks(state, cg)
        stand = cost._readout_shapes(cg, cost.bond_caps(L, cap), ancilla=False)
        for a, b in zip(real, stand, strict=True):
            assert a.tensor.shape == b.tensor.shape
            assert np.array_equal(a.offsets, b.offsets)
        assert conditional_sample_flops(stand) == conditional_sample_flops(real)


def test_point_costs_grow_with_the_chain_and_the_bond():
    points = spec.load(None).points  # the built-in scenario: L = 8, 12, 16
    costs = [cost.point_cost(p) for p in points]
    assert [c.point_id for c in costs] == [p.point_id for p in points]
    seconds = [c.seconds for c in costs]
    assert all(a < b for a, b in zip(seconds, seconds[1:], strict=False))
    for c in costs:
        assert c.core_hours == pytest.approx(c.seconds / 3600)
        assert c.peak_bytes > cost.BASE_BYTES
        assert c.check.flops > 0  # the scenario has a truncation check
    lines = cost.format_costs(costs)
    assert len(lines) == len(costs) + 1 and lines[-1].startswith("total ")
    assert "evolution" in lines[0] and "peak" in lines[0]


def test_check_prints_the_cost(capsys):
    assert cli.main(["check"]) == 0
    out = capsys.readouterr().out
    assert "estimated cost" in out and "core-" in out and "a worker needs" in out
    for p in spec.load(None).points:
        assert out.count(p.point_id) == 2  # listed, then costed


def test_wide_energy_regions_are_costed():
    # the shipped two-halves scenario (no estimator.samples) and three regions of it
    points = spec.load(SHIPPED / "two-halves.toml").points
    costs = [cost.point_cost(p) for p in points]
    assert all(c.estimators.flops > 0 for c in costs)
    model = models.ising(48, g=1.05, h=0.25)
    three = coarse.blocks(48, None, "energy", model=model, bin_width=1.0,
                          regions=[[0, 14], [14, 34], [34, 48]])
    small, _ = cost.estimator_work(three, 48, 8, "auto", 0)
    large, size = cost.estimator_work(three, 48, 32, "auto", 0)
    assert 0 < small.flops < large.flops and size > 0
    # fewer moments and a smaller compression bond (the spec's resolution keys) cost less
    coarser, _ = cost.estimator_work(three, 48, 32, "auto", 0,
                                     options={"moments": 32, "bond": 16})
    assert 0 < coarser.flops < large.flops


def test_wide_region_references_are_counted_once_per_point():
    # the Gibbs references of wide regions are kept in the memo and reused by later
    # output times: more output times add Chebyshev runs, not references
    import tomllib

    data = tomllib.loads((SHIPPED / "two-halves.toml").read_text())
    costs = []
    for n_times in (3, 6):
        data["times"]["n_times"] = n_times
        costs.append(cost.point_cost(spec.parse(data).points[0]))
    few, many = costs
    assert many.references.flops == pytest.approx(few.references.flops, rel=1e-12)
    assert many.estimators.flops > few.estimators.flops > 0
    # three more output times cost less than the references (built once: imaginary-time
    # purifications of both halves and their Chebyshev runs at d = 4); counted at every
    # output time, they would add three times the references
    assert many.estimators.flops - few.estimators.flops < few.references.flops


def test_check_with_costs_builds_each_point_once(monkeypatch):
    from mpsobs import workflow

    def unused(*args, **kwargs):
        raise AssertionError("the cost built a point the check had built already")

    monkeypatch.setattr(cost, "build_point", unused)
    spec, costs = workflow.check_with_costs(None)
    assert [c.point_id for c in costs] == [p.point_id for p in spec.points]
    assert all(c.seconds > 0 for c in costs)
