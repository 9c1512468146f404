"""run_quench: the rows of compute_point for the same spec, models given as objects,
and its refusals (sweeps, bad values named by key path)."""

from __future__ import annotations

import pandas as pd
import pytest

from mpsobs.chain import models
from mpsobs.core.errors import InputError
from mpsobs.pipeline import quench, spec
from mpsobs.pipeline.point import compute_point

MODEL = {"name": "xxz", "L": 8, "delta": 0.0, "field": {"kind": "staggered", "strength": 0.3}}
COARSE = [{"observable": "number", "block": [2, 4]}, {"observable": "energy", "block": 2}]
TIMES = [0.0, 0.4, 0.8]


def _same_rows(a: pd.DataFrame, b: pd.DataFrame) -> None:
    assert list(a.columns) == list(b.columns)
    pd.testing.assert_frame_equal(a.drop(columns="elapsed_s"), b.drop(columns="elapsed_s"))


@pytest.fixture(scope="module")
def rows() -> pd.DataFrame:
    return quench.run_quench(MODEL, "neel", TIMES, COARSE, max_bond=16,
                             estimator={"samples": 200}, seed=5)


def test_rows_are_those_of_compute_point_on_the_same_spec(rows):
    sections = {"name": "by-hand", "seed": 5, "model": MODEL, "state": {"kind": "neel"},
                "times": {"values": TIMES}, "coarse": COARSE,
                "evolution": {"chi_max": 16}, "estimator": {"samples": 200}}
    (point,) = spec.parse(sections).points
    _same_rows(rows, compute_point(point))
    assert len(rows) == len(TIMES) * 3


def test_a_model_object_maps_to_the_same_point(rows):
    model = models.xxz(8, delta=0.0, h=0.3, field="staggered")
    _same_rows(quench.run_quench(model, {"kind": "neel"}, TIMES, COARSE, max_bond=16,
                                 estimator={"samples": 200}, seed=5), rows)


@pytest.mark.parametrize(("kwargs", "word"), [
    ({"model": {**MODEL, "L": [8, 10]}}, "model.L: run_quench computes one quench"),
    ({"model": {**MODEL, "delta": "0.5"}}, "model.delta"),
    ({"state": "cloud"}, "state.kind"),
    ({"times": "soon"}, "times.values"),
    ({"coarse": {"observable": "number", "block": 20}}, "coarse[0].block"),
    ({"coarse": {"observable": "number", "block": 2}, "estimator": {"method": "count"}},
     "estimator.method"),
    ({"max_bond": 8, "evolution": {"chi_max": 8}}, "max_bond"),
    ({"model": models.xxz(8, h=[0.1] * 8)}, "model: only models of uniform couplings"),
])
def test_refusals(kwargs, word):
    args = {"model": MODEL, "state": "neel", "times": TIMES, "coarse": COARSE, **kwargs}
    with pytest.raises(InputError, match=word.replace("[", r"\[").replace("]", r"\]")):
        quench.run_quench(**args)
