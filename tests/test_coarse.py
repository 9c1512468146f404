"""Coarse-grainings: macrostates, volumes, readouts and labels (facts of the trade:
projectors of a coarse-graining are orthogonal and complete; Kraus operators of a
sequence form a complete measurement, sum_i K_i^dagger K_i = 1)."""

from __future__ import annotations

from math import comb

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from mpsobs.chain import coarse, models
from mpsobs.chain.random_states import random_hermitian
from mpsobs.core.errors import InputError


@pytest.mark.parametrize(("call", "word"), [
    (lambda: coarse.blocks(8, "2"), "size: expected an integer"),
    (lambda: coarse.blocks(8.0, 2), "L: expected an integer"),
    (lambda: coarse.blocks(8, 2, "energy", model=models.xxz(8), bin_width="0.5"),
     "bin_width: expected a number"),
    (lambda: coarse.blocks(8, regions=[(0, 4.5), (4.5, 8)]), "regions: expected"),
    (lambda: coarse.blocks(8, regions=[("0", "8")]), "regions: expected"),
    (lambda: coarse.blocks(8, 2, "spin"), "observable: unknown 'spin'; allowed: 'number'"),
    (lambda: coarse.projectors([np.eye(2)], label=3), "label: expected a string"),
])
def test_bad_coarse_input(call, word):
    with pytest.raises(InputError, match=word):
        call()


def test_number_blocks_volumes_and_labels():
    cg = coarse.blocks(10, 4)
    assert cg.regions == ((0, 4), (4, 8), (8, 10))
    assert cg.label == "number:b4"
    assert [m.volume for m in cg.block_macrostates(0)] == [comb(4, n) for n in range(5)]
    assert [m.volume for m in cg.block_macrostates(2)] == [1, 2, 1]
    assert cg.max_entropy == pytest.approx(10 * np.log(2))


@pytest.mark.parametrize("cg", [
    coarse.blocks(6, 3),
    coarse.blocks(6, 2, "energy", model=models.ising(6, g=0.8, h=0.3)),
    coarse.blocks(6, 3, "energy", model=models.xxz(6, delta=0.4), bin_width=0.3),
    coarse.blocks(6, 2, random_hermitian(4, seed=2)),
    coarse.blocks(6, 1, "fine"),
], ids=lambda cg: cg.label)
def test_projectors_orthogonal_and_complete(cg):
    for block in cg.blocks:
        projs = [m.kraus for m in block.macrostates]
        assert np.allclose(sum(projs), np.eye(block.dim), atol=1e-12)
        for i, p in enumerate(projs):
            assert np.allclose(p @ p, p, atol=1e-12)
            assert np.trace(p).real == pytest.approx(block.macrostates[i].volume)
            for q in projs[i + 1:]:
                assert np.allclose(p @ q, 0, atol=1e-12)
        # The readout is the eigenbasis: orthonormal rows.
        assert np.allclose(block.readout @ block.readout.conj().T, np.eye(block.dim))


def test_sequence_readout_is_a_complete_measurement():
    """For a non-commuting sequence, the readout rows resolve the POVM elements
    M_i = K_i^dagger K_i, and sum_i M_i = 1."""
    L = 4
    seq = coarse.sequence(coarse.blocks(L, 2, random_hermitian(4, seed=3)), coarse.blocks(L, 2))
    assert seq.label == "operator:b2>number:b2"
    for block in seq.blocks:
        total = block.readout.conj().T @ block.readout
        assert np.allclose(total, np.eye(block.dim), atol=1e-10)
        for j, m in enumerate(block.macrostates):
            rows = block.readout[block.group == j]
            assert np.allclose(rows.conj().T @ rows, m.kraus.conj().T @ m.kraus, atol=1e-10)
            assert len(m.label) == 2


def test_energy_degeneracies_are_grouped():
    """Two-site XX block with zero field: eigenvalues -1/2, 0, 0, 1/2 (J = 1; fact of the
    trade: the triplet/singlet of the XX dimer), so three outcomes, the middle one of
    volume 2."""
    cg = coarse.blocks(4, 2, "energy", model=models.xxz(4, delta=0.0))
    labels = [m.label[0] for m in cg.block_macrostates(0)]
    assert labels == pytest.approx([-0.5, 0.0, 0.5])
    assert [m.volume for m in cg.block_macrostates(0)] == [1.0, 2.0, 1.0]


def test_energy_bins_are_anchored_at_zero():
    cg = coarse.blocks(4, 2, "energy", model=models.xxz(4, delta=0.0), bin_width=0.75)
    labels = [m.label[0] for m in cg.block_macrostates(0)]
    # -0.5 -> bin [-0.75, 0), 0 and 0.5 -> bin [0, 0.75)
    assert labels == pytest.approx([-0.375, 0.375])
    assert [m.volume for m in cg.block_macrostates(0)] == [1.0, 3.0]


def test_wide_number_regions_carry_volumes_only():
    cg = coarse.blocks(200, regions=[(0, 50), (50, 200)])
    assert cg.blocks[1].readout is None
    assert cg.blocks[1].volumes[75] == pytest.approx(float(comb(150, 75)))
    with pytest.raises(InputError, match="sequence: blocks wider"):
        coarse.sequence(cg, cg)


@settings(max_examples=50, deadline=None)
@given(st.lists(st.integers(min_value=1, max_value=5), min_size=1, max_size=6))
def test_any_contiguous_partition_is_accepted(sizes):
    """Property: every ordered partition into contiguous regions is a valid coarse-graining
    whose volumes multiply to 2**L."""
    edges = np.concatenate([[0], np.cumsum(sizes)])
    L = int(edges[-1])
    cg = coarse.blocks(L, regions=list(zip(edges[:-1], edges[1:], strict=True)))
    assert np.prod([b.volumes.sum() for b in cg.blocks]) == 2**L
