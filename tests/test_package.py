"""The package namespace: after a bare ``import mpsobs`` the functions are callable and
the submodules are attributes (checked in a fresh interpreter)."""

from __future__ import annotations

import subprocess
import sys

import pytest

import mpsobs

SCRIPT = """
import mpsobs
L = 6
model = mpsobs.models.xxz(L, delta=0.5)
snaps = list(mpsobs.evolve(mpsobs.states.neel(L), model, [0.1], max_bond=8, cutoff=0.0,
                           dt=0.05))
res = mpsobs.observational_entropy(snaps[0].state, mpsobs.coarse.blocks(L, 2))
assert res.method == "exact"
for name in mpsobs.__all__:
    getattr(mpsobs, name)
assert callable(mpsobs.run_quench) and callable(mpsobs.set_threads)
print(type(mpsobs.evolve).__name__, mpsobs.thermo.__name__, mpsobs.tebd.__name__)
"""


def test_bare_import_gives_functions_and_submodules():
    done = subprocess.run([sys.executable, "-c", SCRIPT], capture_output=True, text=True,
                          timeout=300)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["function", "mpsobs.references.thermo", "mpsobs.chain.evolution"]


def test_all_names_resolve_and_unknown_names_raise():
    assert set(mpsobs.SUBMODULES) <= set(mpsobs.__all__)
    assert set(mpsobs.SUBMODULES) <= set(dir(mpsobs))
    with pytest.raises(AttributeError, match="no_such_thing"):
        mpsobs.no_such_thing  # noqa: B018
