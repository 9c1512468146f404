"""The library's own BLAS thread limits: active inside the kernels (read with
threadpoolctl from inside a kernel step), released between snapshots and after, the
size rule, the user's overrides and the environment."""

from __future__ import annotations

import pytest
from threadpoolctl import threadpool_info, threadpool_limits

import mpsobs
from mpsobs.chain import coarse, models, states
from mpsobs.chain import evolution as tebd
from mpsobs.core import threads
from mpsobs.core.errors import InputError
from mpsobs.estimators import estimate
from mpsobs.mps.tensors import random_mps
from mpsobs.references import thermo

OUTER = 2  # the BLAS count set around each test (conftest pins 1 for the session)


def _blas_threads() -> set[int]:
    return {lib["num_threads"] for lib in threadpool_info() if lib["user_api"] == "blas"}


@pytest.fixture
def auto(monkeypatch):
    """The library's default choice: no override, no explicit BLAS variables, BLAS
    itself at OUTER threads."""
    for name in (*threads.BLAS_ENV, threads.ENV_VAR):
        monkeypatch.delenv(name, raising=False)
    previous = threads.set_threads(None)
    with threadpool_limits(limits=OUTER, user_api="blas"):
        assert _blas_threads() == {OUTER}
        yield
    threads.set_threads(previous)


def _recording(monkeypatch, owner, name: str) -> list[set[int]]:
    """Wrap ``owner.name`` so that every call records the BLAS thread counts in force."""
    seen: list[set[int]] = []
    original = getattr(owner, name)

    def hook(*args, **kwargs):
        seen.append(_blas_threads())
        return original(*args, **kwargs)

    monkeypatch.setattr(owner, name, hook)
    return seen


def test_evolve_limits_inside_each_step_and_releases_between_snapshots(auto, monkeypatch):
    seen = _recording(monkeypatch, tebd._Chain, "apply_layer")
    L = 10
    snapshots = mpsobs.evolve(states.neel(L), models.xxz(L, delta=0.5), [0.2, 0.4, 0.6],
                              max_bond=8, cutoff=1e-12, dt=0.1)
    between = []
    for _ in snapshots:
        between.append(_blas_threads())   # control is with the caller here
    assert seen and all(s == {1} for s in seen)   # bond 8 < SMALL_BOND: one thread
    assert between == [{OUTER}] * 3
    assert _blas_threads() == {OUTER}


@pytest.mark.parametrize("kernel", ["estimate", "purification", "dmrg"])
def test_other_kernels_run_under_the_limit(auto, monkeypatch, kernel):
    L = 8
    model = models.xxz(L, delta=0.5)
    if kernel == "estimate":
        seen = _recording(monkeypatch, estimate, "readout_blocks")
        mpsobs.observational_entropy(random_mps(L, 4, seed=1), coarse.blocks(L, 2, "energy",
                                                                             model=model))
    elif kernel == "purification":
        seen = _recording(monkeypatch, thermo, "_sweep")
        thermo.gibbs_at(model, 0.3, method="purification", max_bond=16)
    else:
        seen = _recording(monkeypatch, models, "to_quimb_mpo")
        models.ground_state(model, max_bond=8)
    assert seen and all(s == {1} for s in seen)
    assert _blas_threads() == {OUTER}


def test_size_rule_and_overrides(auto, monkeypatch):
    assert threads.threads_setting() == "auto"
    assert threads.threads_for(threads.SMALL_BOND - 1) == 1
    assert threads.threads_for(threads.SMALL_BOND) is None   # BLAS's own count
    with threads.using_threads(3):
        assert threads.threads_for(4) == 3 and threads.threads_for(1000) == 3
        seen = _recording(monkeypatch, tebd._Chain, "apply_layer")
        list(mpsobs.evolve(states.neel(6), models.xxz(6), [0.1], max_bond=4, cutoff=0.0,
                           dt=0.1))
        # a fixed setting applies even to small matrices (OpenBLAS may cap it at its
        # thread pool size, but it is no longer pinned to 1)
        assert seen and all(max(s) > 1 for s in seen)
    assert threads.threads_setting() == "auto"
    monkeypatch.setenv(threads.ENV_VAR, "blas")
    assert threads.threads_for(4) is None
    monkeypatch.setenv(threads.ENV_VAR, "2")
    assert threads.threads_for(4) == 2
    mpsobs.set_threads("auto")   # the process setting comes before the variable
    assert threads.threads_for(4) == 1
    mpsobs.set_threads(None)
    monkeypatch.setenv(threads.ENV_VAR, "many")
    with pytest.raises(InputError, match="MPSOBS_THREADS"):
        threads.threads_for(4)
    with pytest.raises(InputError, match="count"):
        threads.set_threads(0)


def test_explicit_blas_variable_is_respected(auto, monkeypatch):
    monkeypatch.setenv("OPENBLAS_NUM_THREADS", str(OUTER))
    assert threads.threads_setting() == "blas"
    seen = _recording(monkeypatch, tebd._Chain, "apply_layer")
    list(mpsobs.evolve(states.neel(6), models.xxz(6), [0.1], max_bond=4, cutoff=0.0, dt=0.1))
    assert seen and all(s == {OUTER} for s in seen)   # left as the user set it
