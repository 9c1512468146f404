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


#: Modules split out of a longer one: the old module -> the modules that now hold its code.
SPLIT = {
    "mpsobs.analysis.scaling": ("mpsobs.analysis.curves", "mpsobs.analysis.plateaus",
                                "mpsobs.analysis.fits"),
    "mpsobs.analysis.plots": ("mpsobs.analysis.figure_content",),
    "mpsobs.estimators.wide_number_energy": ("mpsobs.estimators.wide_number_sectors",),
    "mpsobs.pipeline.spec": ("mpsobs.pipeline.spec_schema", "mpsobs.pipeline.spec_points"),
    "mpsobs.references.thermo": ("mpsobs.references.gibbs_result",
                                 "mpsobs.references.free_fermion_gibbs",
                                 "mpsobs.references.gge"),
}


@pytest.mark.parametrize("old", sorted(SPLIT))
def test_split_modules_list_their_names_and_the_old_module_reexports_them(old):
    module = importlib.import_module(old)
    parts = [importlib.import_module(name) for name in SPLIT[old]]
    for part in parts:
        assert sorted(dir(part)) == sorted(part.__all__)
        assert all(hasattr(part, name) for name in part.__all__)
    moved = {name: part for part in parts for name in part.__all__ if name in module.__all__}
    assert moved, f"{old} re-exports nothing of {SPLIT[old]}"
    for name, part in moved.items():   # the same object, not a copy
        assert getattr(module, name) is getattr(part, name), name
