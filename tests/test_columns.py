"""Column descriptions: every column a run writes has a unit and a one-line description
(the Parquet schema carries them, see tests/test_store.py)."""

from __future__ import annotations

import pytest

from mpsobs.pipeline import columns, spec
from mpsobs.pipeline.columns import ROW_COLUMNS

#: Specs whose points together have every kind of parameter column.
SPECS = [
    {"model": {"name": "xxz", "L": 8, "field": {"kind": "random", "strength": 1.0}},
     "state": {"kind": "product", "pattern": "01"}},
    {"model": {"name": "ising", "L": 8}, "state": {"kind": "random_product"}},
    {"model": {"name": "xxz", "L": 8}, "state": {"kind": "gas", "box": [0, 4]}},
    {"model": {"name": "xxz", "L": 8},
     "state": {"kind": "gas", "box_fraction": [0.0, 0.5], "filling": 0.5}},
    {"model": {"name": "xxz", "L": 8},
     "state": {"kind": "ground", "prequench": {"delta": 2.0}}},
]


def test_every_result_column_is_described():
    missing = [name for name in (*columns.REQUIRED, *columns.EXTRA, *ROW_COLUMNS)
               if columns.describe(name) is None]
    assert not missing, f"add these to mpsobs.columns.DESCRIPTIONS: {missing}"


@pytest.mark.parametrize("data", SPECS)
def test_every_parameter_column_is_described(data):
    full = {**data, "times": {"t_max": 1.0, "n_times": 2},
            "coarse": [{"observable": "number", "block": 2}]}
    for point in spec.parse(full).points:
        missing = [name for name in point.columns if columns.describe(name) is None]
        assert not missing, f"add these to mpsobs.columns.PARAMETER_DESCRIPTIONS: {missing}"


def test_descriptions_are_one_line_with_a_unit_field():
    for name, (unit, text) in {**columns.DESCRIPTIONS,
                               **columns.PARAMETER_DESCRIPTIONS}.items():
        assert unit in ("", "nats", "1/J", "J", "s"), name
        assert text and "\n" not in text, name
    assert columns.describe("pre_delta")[1].endswith("before the quench")
    assert columns.describe("no_such_column") is None
