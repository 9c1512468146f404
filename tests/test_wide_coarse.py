"""The energy coarse-graining of regions wider than the block limit: what it carries and
what it refuses."""

import numpy as np
import pytest

from mpsobs.chain import coarse, models
from mpsobs.core.errors import InputError


def test_wide_energy_regions_carry_model_and_bins_not_projectors():
    model = models.ising(40, g=1.05, h=0.25)
    cg = coarse.blocks(40, None, "energy", model=model, bin_width=0.5,
                       regions=[[0, 20], [20, 40]])
    assert isinstance(cg, coarse.WideEnergyRegions)
    assert cg.regions == ((0, 20), (20, 40))
    assert cg.bin_width == 0.5 and cg.model is model
    assert cg.max_entropy == pytest.approx(40 * np.log(2))
    assert "energy" in cg.label and len(repr(cg)) < 300


def test_equal_blocks_wider_than_the_limit_give_wide_regions():
    model = models.xxz(30, delta=0.5)
    cg = coarse.blocks(30, 15, "energy", model=model, bin_width=1.0)
    assert cg.regions == ((0, 15), (15, 30))


def test_narrow_energy_regions_keep_the_exact_block_path():
    model = models.xxz(12, delta=0.5)
    cg = coarse.blocks(12, 6, "energy", model=model, bin_width=1.0)
    assert isinstance(cg, coarse.BlockCoarseGraining)


def test_three_wide_energy_regions_are_accepted():
    model = models.ising(40, g=1.05, h=0.25)
    cg = coarse.blocks(40, None, "energy", model=model, bin_width=1.0,
                       regions=[[0, 14], [14, 28], [28, 40]])
    assert isinstance(cg, coarse.WideEnergyRegions)
    assert cg.regions == ((0, 14), (14, 28), (28, 40))
    assert coarse.blocks(30, 13, "energy", model=models.xxz(30, delta=0.5),
                         bin_width=1.0).regions == ((0, 13), (13, 26), (26, 30))


@pytest.mark.parametrize("kwargs, field, words", [
    ({"regions": [[0, 20], [20, 40]]}, "bin_width", "need a bin width"),   # no bin width
    ({"regions": [[0, 14], [14, 24], [24, 32], [32, 40]], "bin_width": 1.0}, "regions",
     "at most 3 regions; got 4"),                                           # four regions
    ({"regions": [[0, 39], [39, 40]], "bin_width": 1.0}, "regions", "at least 2 sites"),
    ({"regions": [[0, 19], [19, 20], [20, 40]], "bin_width": 1.0}, "regions",
     r"at least 2 sites; got \(19, 20\)"),                                # 1-site middle
    ({"regions": [[0, 2], [2, 3], [3, 40]], "bin_width": 1.0}, "regions",
     r"at least 2 sites; got \(2, 3\)"),                                  # 1-site middle
    ({"regions": [[0, 40]], "bin_width": 1.0}, "regions", "one region"),   # whole chain
])
def test_wide_energy_refusals_name_the_field(kwargs, field, words):
    model = models.ising(40)
    with pytest.raises(InputError, match=f"^{field}:.*{words}"):
        coarse.blocks(40, None, "energy", model=model, **kwargs)


def test_wide_energy_regions_are_refused_in_a_sequence_without_number_conservation():
    model = models.ising(30)
    wide = coarse.blocks(30, 15, "energy", model=model, bin_width=1.0)
    number = coarse.blocks(30, 15, "number")
    with pytest.raises(InputError, match="^sequence:.*wider than"):
        coarse.sequence(number, wide)


# --------------------------------------------------------------------------- spec keys

_WIDE_SPEC = {
    "model": {"name": "ising", "L": 28, "g": 1.05, "field": {"strength": 0.25}},
    "state": {"kind": "domain_wall"},
    "evolution": {"chi_max": 8, "chi_check": 0},
    "times": {"values": [0.0]},
}


def _wide_point(entry: dict):
    from mpsobs.pipeline import spec

    return spec.parse({**_WIDE_SPEC, "coarse": [entry]}).points[0]


def test_resolution_keys_reach_the_estimator_and_its_label():
    from mpsobs.pipeline.build import build_point

    halves = {"observable": "energy", "block": 14, "bin_width": 1.0}
    plain = build_point(_wide_point(halves), cheap_only=True).coarse[0]
    assert plain.options == {} and ",N" not in plain.label
    tuned = build_point(_wide_point({**halves, "moments": 32, "moment_bond": 8,
                                     "sub_bins": 4}), cheap_only=True).coarse[0]
    assert tuned.options == {"moments": 32, "bond": 8, "sub_bins": 4}
    assert tuned.label == plain.label + ",N32,D8,sb4"


def test_resolution_keys_leave_other_points_unchanged():
    # an entry without the keys carries none: point ids of existing specs stay as they were
    point = _wide_point({"observable": "energy", "block": 14, "bin_width": 1.0})
    assert "wide_energy" not in point.params["coarse"][0]
    tuned = _wide_point({"observable": "energy", "block": 14, "bin_width": 1.0,
                         "moments": 32})
    assert tuned.point_id != point.point_id


@pytest.mark.parametrize("entry, match", [
    ({"observable": "energy", "block": 14, "bin_width": 1.0, "moments": 31},
     r"^coarse\[0\]\.moments: expected an even integer"),
    ({"observable": "energy", "block": 14, "bin_width": 1.0, "moment_bond": 1},
     r"^coarse\[0\]\.moment_bond: expected an integer >= 2"),
    ({"observable": "number", "block": 14, "sub_bins": 4},
     r"^coarse\[0\]\.sub_bins: only the energy observable"),
    ({"observable": "energy", "block": 4, "bin_width": 1.0, "moments": 32},
     r"^coarse\[0\]\.moments: only energy regions wider than 12 sites"),
])
def test_resolution_keys_are_refused_where_they_do_not_apply(entry, match):
    from mpsobs.pipeline.build import build_point

    with pytest.raises(InputError, match=match):
        build_point(_wide_point(entry), cheap_only=True)
