"""Trusted times in the analysis: the rule (the end of the range before the first time
whose truncation error exceeds the tolerance), its application per point and
coarse-graining, and that changing the tolerance on a finished run recomputes nothing
while the analysis output follows it; run directories of older versions (trusted times
stored with the points, ids hashed with ``evolution.trust_rtol``) are taken over."""

from __future__ import annotations

import logging
import math

import numpy as np
import pandas as pd
import pytest

from mpsobs import workflow
from mpsobs.analysis.trust import (
    ROUNDOFF_NATS,
    trusted,
    trusted_time,
    with_trusted_times,
)
from mpsobs.core.errors import InputError
from mpsobs.pipeline import spec

T = np.arange(6.0)
S = np.array([1.0, 2.0, 3.0, 3.5, 3.6, 3.6])


def test_trusted_time_ends_before_the_first_failing_time():
    #            t = 0     1     2      3     4     5;  rtol * S = 0.02, 0.04, 0.06, ...
    err = np.array([0.0, 0.03, 0.05, 0.2, 0.01, 0.5])
    assert trusted_time(T, S, np.zeros(6), err, 0.02) == 2.0   # fails at t = 3 first
    assert trusted_time(T, S, np.zeros(6), err, 0.1) == 4.0    # 0.5 > 0.36 at t = 5
    assert trusted_time(T, S, np.zeros(6), err, 0.2) == math.inf   # nothing fails


def test_sampling_error_widens_the_allowance():
    err = np.array([0.0, 0.03, 0.05, 0.2, 0.01, 0.5])
    stderr = np.array([0.0, 0.0, 0.0, 0.25, 0.0, 0.0])
    assert trusted_time(T, S, stderr, err, 0.02) == 4.0   # t = 3 hidden in the noise


def test_trusted_time_conventions_at_the_edges():
    # the first time already fails: nothing trusted
    assert trusted_time(T, S, np.zeros(6), np.full(6, 1.0), 0.01) == -math.inf
    # S_obs = 0 at t = 0 (a basis state in its macrostate): round-off passes there
    zero = np.array([0.0, 1.0])
    assert trusted_time(np.arange(2.0), zero, np.zeros(2), np.array([ROUNDOFF_NATS / 2,
                                                                      1e-3]), 0.01) == math.inf
    # no check evolution
    assert math.isnan(trusted_time(T, S, np.zeros(6), np.full(6, np.nan), 0.01))


def _table() -> pd.DataFrame:
    """Two points and two coarse-gratings each, in shuffled row order; point "b" has the
    truncation errors of point "a" doubled."""
    err = np.array([0.0, 0.03, 0.05, 0.2, 0.01, 0.5])
    parts = []
    for point, scale in (("a", 1.0), ("b", 2.0)):
        for cg in ("number:b2", "energy:b2"):
            parts.append(pd.DataFrame({"t": T, "coarse_graining": cg, "point_id": point,
                                       "S_obs": S, "S_obs_err": 0.0,
                                       "S_obs_trunc_err": scale * err}))
    return pd.concat(parts, ignore_index=True).sample(frac=1.0, random_state=1)


def test_trusted_times_per_point_and_coarse_graining():
    out = with_trusted_times(_table(), 0.1)
    by_point = out.groupby("point_id")["t_trusted"].unique()
    assert by_point["a"].tolist() == [4.0]   # as in the rule test above
    assert by_point["b"].tolist() == [2.0]   # 2 x 0.2 = 0.4 > 0.35 at t = 3
    assert "t_trusted" not in _table().columns   # a copy: the input is left as it was


def test_stored_trusted_times_are_replaced_and_missing_checks_give_nan():
    table = _table().assign(t_trusted=123.0)
    assert set(with_trusted_times(table, 0.1)["t_trusted"]) == {4.0, 2.0}
    assert trusted(table) is table   # None keeps a table's own column
    # default tolerance 0.01: 0.03 > 0.02 at t = 1 fails both points
    assert set(trusted(_table())["t_trusted"]) == {0.0}
    no_check = _table().drop(columns="S_obs_trunc_err")
    assert with_trusted_times(no_check, 0.1)["t_trusted"].isna().all()


@pytest.mark.parametrize("rtol", [-0.1, 1.5, "0.1", math.nan])
def test_bad_tolerance_is_an_input_error(rtol):
    with pytest.raises(InputError, match="^trust_rtol: "):
        with_trusted_times(_table(), rtol)


# --------------------------------------------------------------------------- runs

RUN = """\
name = "trust"
seed = 4

[model]
name = "xxz"
L = [6, 8]
delta = 0.5

[state]
kind = "neel"

[evolution]
dt = 0.1
chi_max = 4
chi_check = 2
{extra}
[times]
t_max = 2.0
n_times = 9

[[coarse]]
observable = "number"
block = 2

[estimator]
method = "exact"
"""


def _point_files(root) -> dict[str, int]:
    return {p.name: p.stat().st_mtime_ns for p in (root / "points").iterdir()}


@pytest.fixture(scope="module")
def finished_run(tmp_path_factory):
    """A finished two-point run (bond 4 against a check at bond 2, so the truncation
    errors grow within the run)."""
    root = tmp_path_factory.mktemp("trust")
    file = root / "trust.toml"
    file.write_text(RUN.format(extra=""))
    outcome = workflow.run(file, root / "run", workers=1, progress=False, figures=False)
    assert outcome.report.computed == 2
    return file, root / "run"


def test_changing_the_tolerance_recomputes_nothing_and_changes_the_analysis(finished_run):
    file, run = finished_run
    before = _point_files(run)
    strict = workflow.scale(run, trust_rtol=0.0)
    loose = workflow.scale(run, trust_rtol=1.0)
    figures = workflow.plot(run, trust_rtol=0.5)
    assert figures
    assert _point_files(run) == before   # no point written again
    # every truncation error is within 100 % of S_obs here, but not within 0 %
    assert np.isinf(loose["t_trusted"]).all()
    assert np.isfinite(strict["t_trusted"]).all() and (strict["t_trusted"] < 2.0).all()
    # a rerun of the spec finds every point finished
    again = workflow.run(file, run, workers=1, progress=False, figures=False)
    assert (again.report.computed, again.report.skipped) == (0, 2)
    assert _point_files(run) == before


def test_an_old_spec_with_trust_rtol_warns_and_shares_the_points(finished_run, tmp_path,
                                                                 caplog):
    file, run = finished_run
    old = tmp_path / "old.toml"
    old.write_text(RUN.format(extra="trust_rtol = 0.05\n"))
    with caplog.at_level(logging.WARNING, logger="mpsobs.pipeline.spec"):
        parsed = spec.load(old)
    assert "evolution.trust_rtol is no longer part of a point" in caplog.text
    assert parsed.run_id == spec.load(file).run_id
    assert [p.point_id for p in parsed.points] == [p.point_id for p in spec.load(file).points]
    assert [p.seed for p in parsed.points] == [p.seed for p in spec.load(file).points]
