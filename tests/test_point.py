"""check_point: the cheap half of compute_point (no DMRG, no time step), and its
refusals named by point and coarse-graining."""

from __future__ import annotations

import pytest

from mpsobs import models, point, spec, tebd
from mpsobs.errors import InputError


def _points(state: dict, coarse: list[dict], L=12) -> tuple:
    return spec.parse({"model": {"name": "xxz", "L": L, "delta": 0.5}, "state": state,
                       "times": {"values": [0.0, 1.0]}, "coarse": coarse}).points


def _forbid(*_args, **_kwargs):
    raise AssertionError("the check ran an expensive kernel")


@pytest.mark.parametrize("state", [
    {"kind": "ground", "prequench": {"delta": 2.0}},
    {"kind": "gas", "box": [2, 8], "number": 3, "fill": "ground"},
    {"kind": "random_product", "draw": "haar"},
])
def test_check_runs_no_dmrg_and_no_time_step(state, monkeypatch):
    monkeypatch.setattr(models, "dmrg", _forbid)
    monkeypatch.setattr(tebd._Chain, "apply_layer", _forbid)
    (p,) = _points(state, [{"observable": ["number", "energy"], "block": 3}])
    point.check_point(p)


def test_refusal_names_the_point_and_the_coarse_graining():
    points = _points({"kind": "neel"}, [{"observable": "number", "block": 13,
                                         "label": "wide"}], L=[26, 52])
    point.check_points(points[:1])   # two blocks at L = 26: counted exactly
    with pytest.raises(InputError, match=r"point 1 \(model.L=52\): coarse-graining 'wide': "
                                         r"coarse_graining: blocks wider than 12"):
        point.check_points(points)
