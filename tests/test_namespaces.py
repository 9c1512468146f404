"""Every module reachable as ``mpsobs.<name>`` names its public objects in ``__all__``,
and ``dir()`` lists those and not the module's imports (``np``, ``Sequence``, ...)."""

from __future__ import annotations

import importlib

import pytest

import mpsobs


@pytest.mark.parametrize("short", sorted(mpsobs.SUBMODULES))
def test_dir_lists_the_public_names(short):
    module = importlib.import_module(f"mpsobs.{mpsobs.SUBMODULES[short]}")
    public = module.__all__
    assert len(set(public)) == len(public), "repeated names in __all__"
    missing = [name for name in public if not hasattr(module, name)]
    assert not missing, missing
    assert sorted(dir(module)) == sorted(public)


def test_imports_stay_reachable_but_hidden():
    states = mpsobs.states
    assert {"np", "Sequence", "one_of"}.isdisjoint(dir(states))
    assert states.np is importlib.import_module("numpy")  # attribute access unchanged
